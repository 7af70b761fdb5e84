"""Live tuning: law, alpha, gains, estimator and reference, changed while the loop runs.

Every entry is checked here first against the config schema (:mod:`rigloop.gui.validation`); an
invalid one is refused in place - red frame, the allowed range under the field - and nothing is
sent. A valid one goes to the engine, which re-validates it, applies it bumplessly and records a
``param`` event; its reply (accepted or refused, with its words) appears under the field.
A change of sign of alpha asks for a second Enter: a wrong sign drives the actuator to a limit.
"""

from __future__ import annotations

from PyQt6.QtCore import Qt
from PyQt6.QtWidgets import (QComboBox, QGridLayout, QGroupBox, QHBoxLayout, QLabel, QLineEdit,
                             QPushButton, QVBoxLayout)

from rigloop.config.schema import KEYS
from rigloop.gui.validation import (allowed_text, check_blend, check_setpoint, check_tunable,
                                    setpoint_range_text)
from rigloop.gui.words import fmt_num

#: key -> (label, editor kind), laid out two per row (left, right)
FIELDS = (
    ("control.law", "Law", "choice"),
    ("control.estimator.kind", "Estimator", "choice"),
    ("control.alpha", "alpha", "number"),
    ("control.kp", "Kp", "number"),
    ("control.ki", "Ki", "number"),
    ("control.kd", "Kd", "number"),
    ("control.estimator.window_s", "F window [s]", "number"),
    ("control.derivative_window_s", "Error-slope window [s]", "number"),
)


def _show(value) -> str:
    if value is None:
        return ""
    if isinstance(value, float):
        return f"{value:.6g}"
    return str(value)


class _Field:
    def __init__(self, key: str, label: str, editor, message: QLabel):
        self.key = key
        self.label = label
        self.editor = editor
        self.message = message
        self.engine_value = None
        self.confirm_text: str | None = None

    def text(self) -> str:
        if isinstance(self.editor, QComboBox):
            return self.editor.currentText()
        return self.editor.text()

    def set_text(self, text: str) -> None:
        if isinstance(self.editor, QComboBox):
            self.editor.blockSignals(True)
            self.editor.setCurrentText(text)
            self.editor.blockSignals(False)
        else:
            self.editor.setText(text)


class TuningPanel(QGroupBox):
    def __init__(self, parent=None):
        super().__init__("Live tuning", parent)
        self.session = None
        self.cfg = None
        self.rate_hz: float | None = None
        self.fields: dict[str, _Field] = {}
        self._pending: dict[int, tuple[str, object]] = {}   # request id -> (field key, value sent)
        self._engine_params: dict = {}
        grid = QGridLayout()
        grid.setHorizontalSpacing(6)
        grid.setVerticalSpacing(1)
        row = 0
        for index, (key, label, kind) in enumerate(FIELDS):
            if kind == "choice":
                editor = QComboBox()
                editor.addItems([str(o) for o in KEYS[key].type.options])
                editor.activated.connect(lambda _i, k=key: self.apply(k))
            else:
                editor = QLineEdit()
                editor.setAlignment(Qt.AlignmentFlag.AlignRight)
                editor.returnPressed.connect(lambda k=key: self.apply(k))
                editor.textEdited.connect(lambda _t, k=key: self._clear_message(k))
                if KEYS[key].nullable:
                    editor.setPlaceholderText("empty = estimator window" if key == "control.derivative_window_s"
                                              else "empty = none")
            editor.setObjectName(f"tune:{key}")
            editor.setToolTip(f"{KEYS[key].doc}\nAllowed: {allowed_text(key)}\nPress Enter to apply.")
            message = QLabel()
            message.setWordWrap(True)
            message.setVisible(False)
            message.setObjectName(f"tune-msg:{key}")
            name = QLabel(label)
            name.setToolTip(KEYS[key].doc)
            name.setWordWrap(True)
            right = index % 2
            grid.addWidget(name, row, 2 * right)
            grid.addWidget(editor, row, 2 * right + 1)
            grid.addWidget(message, row + 1 + right, 0, 1, 4)   # under the pair, full width
            self.fields[key] = _Field(key, label, editor, message)
            if right:
                row += 3
        grid.setColumnStretch(1, 1)
        grid.setColumnStretch(3, 1)

        self.apply_button = QPushButton("Apply all changed")
        self.apply_button.setToolTip("Send every field whose value differs from the engine's")
        self.apply_button.clicked.connect(self.apply_changed)

        self.setpoint_edit = QLineEdit()
        self.setpoint_edit.setObjectName("tune:setpoint")
        self.setpoint_edit.setAlignment(Qt.AlignmentFlag.AlignRight)
        self.setpoint_edit.setPlaceholderText("level")
        self.setpoint_edit.returnPressed.connect(self.apply_setpoint)
        self.setpoint_edit.textEdited.connect(lambda _t: self._clear_message("setpoint"))
        self.blend_edit = QLineEdit("1")
        self.blend_edit.setObjectName("tune:blend")
        self.blend_edit.setAlignment(Qt.AlignmentFlag.AlignRight)
        self.blend_edit.setMaximumWidth(56)
        self.blend_edit.setToolTip("Blend time [s]: the reference moves smoothly (no step) over this time")
        self.blend_edit.returnPressed.connect(self.apply_setpoint)
        self.setpoint_button = QPushButton("Go")
        self.setpoint_button.setToolTip("Blend the reference to this level (manual setpoint)")
        self.setpoint_button.clicked.connect(self.apply_setpoint)
        self.profile_button = QPushButton("Start configured profile")
        self.profile_button.setToolTip("Restart the reference profile of the config from its beginning")
        self.profile_button.clicked.connect(self.start_profile)
        self.setpoint_message = QLabel()
        self.setpoint_message.setWordWrap(True)
        self.setpoint_message.setVisible(False)
        self.setpoint_label = QLabel("Setpoint")

        sp = QHBoxLayout()
        sp.setSpacing(4)
        sp.addWidget(self.setpoint_edit, 1)
        blend = QLabel("blend [s]")
        blend.setProperty("role", "muted")
        sp.addWidget(blend)
        sp.addWidget(self.blend_edit)
        sp.addWidget(self.setpoint_button)
        ref = QGridLayout()
        ref.setVerticalSpacing(1)
        ref.addWidget(self.setpoint_label, 0, 0)
        ref.addLayout(sp, 0, 1)
        ref.addWidget(self.setpoint_message, 1, 0, 1, 2)
        ref.setColumnStretch(1, 1)

        lay = QVBoxLayout(self)
        lay.setSpacing(4)
        lay.addLayout(grid)
        lay.addWidget(self.apply_button)
        sep = QLabel("Reference")
        sep.setProperty("role", "muted")
        head = QHBoxLayout()
        head.addWidget(sep, 1)
        head.addWidget(self.profile_button)
        lay.addLayout(head)
        lay.addLayout(ref)
        self.set_enabled_for("disconnected")

    # ------------------------------------------------------------------ binding
    def bind(self, session, cfg) -> None:
        """Attach to a connected session; fill the fields from the config."""
        self.session = session
        self.cfg = cfg
        self.rate_hz = cfg.device.rate_hz
        c = cfg.control
        values = {"control.law": c.law, "control.alpha": c.alpha, "control.kp": c.kp, "control.ki": c.ki,
                  "control.kd": c.kd, "control.estimator.kind": c.estimator.kind,
                  "control.estimator.window_s": c.estimator.window_s,
                  "control.derivative_window_s": c.derivative_window_s}
        self._engine_params = {"control.order": c.order}
        for key, f in self.fields.items():
            f.engine_value = values[key]
            f.set_text(_show(values[key]))
            f.confirm_text = None
            self._clear_message(key)
            if not isinstance(f.editor, QComboBox):
                f.editor.setToolTip(f"{KEYS[key].doc}\nAllowed: {allowed_text(key, self.rate_hz, c.order)}\n"
                                    "Press Enter to apply.")
        lo, hi, unit = self._setpoint_bounds()
        self.setpoint_label.setText(f"Setpoint [{unit}]" if unit else "Setpoint")
        self.setpoint_edit.setToolTip(f"Allowed: {setpoint_range_text(lo, hi, unit)}. Press Enter or Go.")
        blend = cfg.reference.get("blend_s") if isinstance(cfg.reference, dict) else None
        self.blend_edit.setText(_show(float(blend)) if isinstance(blend, (int, float)) else "1")
        self._pending.clear()

    def _current(self, key: str, default):
        """The engine's value of a parameter (from its status), else the config's."""
        if key in self.fields and self.fields[key].engine_value is not None:
            return self.fields[key].engine_value
        value = self._engine_params.get(key)
        return default if value is None else value

    def _setpoint_bounds(self):
        cfg = self.cfg
        if cfg is None:
            return None, None, ""
        out = cfg.control.output
        lim = cfg.limits.channels.get(out)
        unit = next((ch.unit for ch in cfg.channels if ch.name == out), "")
        return (lim.min if lim else None), (lim.max if lim else None), unit

    def set_enabled_for(self, state: str) -> None:
        connected = state in ("idle", "running", "stopping", "tripped")
        for f in self.fields.values():
            f.editor.setEnabled(connected)
        self.apply_button.setEnabled(connected)
        running = state == "running"
        for w in (self.setpoint_edit, self.blend_edit, self.setpoint_button, self.profile_button):
            w.setEnabled(running)

    def update_from_status(self, status: dict) -> None:
        """Follow the engine's parameters (unless the operator is editing that field)."""
        params = status.get("params") or {}
        self._engine_params = params
        for key, f in self.fields.items():
            if key not in params:
                continue
            value = params[key]
            if value != f.engine_value:
                f.engine_value = value
                editing = f.editor.hasFocus() and not isinstance(f.editor, QComboBox)
                if not editing:
                    f.set_text(_show(value))

    # ------------------------------------------------------------------ messages
    def _message_label(self, key: str) -> QLabel:
        return self.setpoint_message if key in ("setpoint", "profile") else self.fields[key].message

    def _editor(self, key: str):
        return self.setpoint_edit if key in ("setpoint", "profile") else self.fields[key].editor

    def _say(self, key: str, text: str, role: str) -> None:
        label = self._message_label(key)
        label.setText(text)
        label.setProperty("role", role)
        label.style().unpolish(label)
        label.style().polish(label)
        label.setVisible(bool(text))
        editor = self._editor(key)
        editor.setProperty("invalid", "true" if role == "error" else "false")
        editor.style().unpolish(editor)
        editor.style().polish(editor)

    def _clear_message(self, key: str) -> None:
        self._say(key, "", "muted")

    def message(self, key: str) -> str:
        """What is shown under a field now ('' when nothing)."""
        label = self._message_label(key)
        return label.text() if not label.isHidden() else ""

    # ------------------------------------------------------------------ actions
    def apply(self, key: str) -> int | None:
        """Check one field and send it; returns the request id, or None if refused locally."""
        f = self.fields[key]
        text = f.text()
        checked = check_tunable(key, text, self.rate_hz, order=self._current("control.order", 1),
                                estimator=self._current("control.estimator.kind", "algebraic"))
        if not checked.ok:
            self._say(key, checked.message, "error")
            if isinstance(f.editor, QComboBox):   # a list shows what is in force, not the refused pick
                f.set_text(_show(f.engine_value))
            return None
        if self.session is None or not self.session.connected:
            self._say(key, "not connected: connect to a rig first", "error")
            return None
        if key == "control.alpha" and isinstance(f.engine_value, (int, float)) and checked.value is not None \
                and (float(checked.value) > 0) != (float(f.engine_value) > 0) and f.confirm_text != text.strip():
            f.confirm_text = text.strip()
            self._say(key, f"alpha changes sign ({fmt_num(f.engine_value)} -> {fmt_num(checked.value)}): a wrong "
                           "sign drives the actuator to a limit. Press Enter again to send it.", "warn")
            return None
        f.confirm_text = None
        value = checked.value
        if isinstance(value, float) and value.is_integer() and key in ("control.order",):
            value = int(value)
        rid = self.session.set_param(key, value)
        if rid is not None:
            self._pending[rid] = (key, value)
            self._say(key, "sent ...", "muted")
        return rid

    def apply_changed(self) -> list[int]:
        ids = []
        for key, f in self.fields.items():
            if f.text().strip() != _show(f.engine_value).strip():
                rid = self.apply(key)
                if rid is not None:
                    ids.append(rid)
        return ids

    def apply_setpoint(self) -> int | None:
        lo, hi, unit = self._setpoint_bounds()
        sp = check_setpoint(self.setpoint_edit.text(), lo, hi, unit)
        if not sp.ok:
            self._say("setpoint", sp.message, "error")
            return None
        blend = check_blend(self.blend_edit.text())
        if not blend.ok:
            self._say("setpoint", blend.message, "error")
            return None
        if self.session is None or not self.session.connected:
            return None
        rid = self.session.set_setpoint(sp.value, blend.value)
        if rid is not None:
            self._pending[rid] = ("setpoint", sp.value)
            self._say("setpoint", "sent ...", "muted")
        return rid

    def start_profile(self) -> int | None:
        if self.session is None or not self.session.connected:
            return None
        rid = self.session.start_profile()
        if rid is not None:
            self._pending[rid] = ("profile", None)
        return rid

    def on_reply(self, reply: dict) -> None:
        rid = reply.get("id")
        if not isinstance(rid, int):
            return
        # The status block holds the latest reply only: settle older requests from the params.
        for old in [i for i in self._pending if i < rid]:
            key, sent = self._pending.pop(old)
            if key in self.fields:
                f = self.fields[key]
                if f.engine_value == sent:
                    self._say(key, "applied", "ok")
                else:
                    self._say(key, f"no answer seen; the engine keeps {_show(f.engine_value) or 'none'}", "warn")
            elif self.message(key) == "sent ...":
                self._clear_message(key)
        if rid not in self._pending:
            return
        key, _sent = self._pending.pop(rid)
        text = str(reply.get("message") or "")
        if reply.get("ok"):
            self._say(key, f"applied: {text}" if text else "applied", "ok")
        else:
            self._say(key, f"refused by the engine: {text}", "error")
