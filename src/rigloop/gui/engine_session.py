"""The window's handle on one engine process: requests out, status and telemetry in.

The engine runs in its own process (design §2) and never waits for the window. This object polls
the engine's status block and telemetry ring on a Qt timer (about 30 Hz, the redraw rate), turns
what changed into Qt signals, and sends a heartbeat every half second: an engine that hears
nothing for 5 s assumes the app is gone and stops the rig (cause ``front-end-lost``).
Requests (e-stop first of all) are written to the engine's pipe at once, never queued behind a
redraw.
"""

from __future__ import annotations

from PyQt6.QtCore import QObject, QTimer, pyqtSignal

POLL_MS = 33
HEARTBEAT_MS = 500


class EngineSession(QObject):
    #: the state shown to the operator: 'disconnected', 'connecting' or the engine's state
    state_changed = pyqtSignal(str)
    #: the engine's latest status dict (see EngineClient.status)
    status_updated = pyqtSignal(dict)
    #: new telemetry rows (numpy array, columns = self.fields)
    rows_arrived = pyqtSignal(object)
    #: the engine's answer to a request: {"id", "kind", "ok", "message"}
    reply_received = pyqtSignal(dict)
    #: the engine process ended; its final status (outcome, error, session_dir, trip ...)
    ended = pyqtSignal(dict)

    def __init__(self, parent=None, client_factory=None):
        super().__init__(parent)
        self._factory = client_factory
        self.client = None
        self.cfg = None
        self.fields: tuple[str, ...] = ()
        self.state = "disconnected"
        self.last_status: dict = {}
        self._cursor = 0
        self._last_reply_id = None
        self._poll = QTimer(self)
        self._poll.setInterval(POLL_MS)
        self._poll.timeout.connect(self.poll)
        self._beat = QTimer(self)
        self._beat.setInterval(HEARTBEAT_MS)
        self._beat.timeout.connect(self._heartbeat)

    # ------------------------------------------------------------------ life cycle
    @property
    def connected(self) -> bool:
        return self.client is not None

    def start(self, cfg, *, sim_extra: dict | None = None, out_dir=None) -> None:
        """Start an engine process for ``cfg`` (a new session folder is made by the engine)."""
        if self.client is not None:
            raise RuntimeError("already connected; disconnect first")
        factory = self._factory
        if factory is None:
            from rigloop.engine.process import EngineClient as factory
        self.cfg = cfg
        self.client = factory(cfg, out_dir=out_dir, autostart=False, sim_extra=sim_extra).start()
        self.fields = tuple(self.client.fields)
        self._cursor = 0
        self._last_reply_id = None
        self.last_status = {}
        self._set_state("connecting")
        self._poll.start()
        self._beat.start()

    def close(self) -> dict | None:
        """End the engine process (the engine ramps down if still running) and free its memory."""
        client, self.client = self.client, None
        self._poll.stop()
        self._beat.stop()
        final = None
        if client is not None:
            final = client.close()
        self._set_state("disconnected")
        return final

    # ------------------------------------------------------------------ requests
    def estop(self, source: str = "gui button") -> bool:
        if self.client is None:
            return False
        self.client.estop(source=source)
        return True

    def arm(self) -> int | None:
        return self.client.arm() if self.client else None

    def ramp_down(self) -> int | None:
        return self.client.ramp_down() if self.client else None

    def stop(self) -> int | None:
        return self.client.stop() if self.client else None

    def reset(self) -> int | None:
        return self.client.reset() if self.client else None

    def set_param(self, key: str, value) -> int | None:
        return self.client.set_param(key, value) if self.client else None

    def set_setpoint(self, level: float, blend_s: float) -> int | None:
        return self.client.set_setpoint(level, blend_s) if self.client else None

    def start_profile(self) -> int | None:
        return self.client.start_profile() if self.client else None

    # ------------------------------------------------------------------ polling
    def _heartbeat(self) -> None:
        if self.client is not None:
            self.client.ping()

    def _set_state(self, state: str) -> None:
        if state != self.state:
            self.state = state
            self.state_changed.emit(state)

    def poll(self) -> None:
        client = self.client
        if client is None:
            return
        cursor, rows = client.read_since(self._cursor)
        self._cursor = cursor
        if len(rows):
            self.rows_arrived.emit(rows)
        st = client.status()
        if st:
            self.last_status = st
            if st.get("state") and st.get("state") != "disconnected":
                self._set_state(st["state"])
            self.status_updated.emit(st)
            # "replies" holds the last few answers (oldest first), "reply" only the latest one
            replies = st.get("replies") or ([st["reply"]] if st.get("reply") else [])
            for reply in replies:
                rid = reply.get("id") if isinstance(reply, dict) else None
                if isinstance(rid, int) and (self._last_reply_id is None or rid > self._last_reply_id):
                    self._last_reply_id = rid
                    self.reply_received.emit(reply)
        finished = bool(st and "outcome" in st and st.get("done"))
        if finished or not client.is_alive():
            self._finish()

    def _finish(self) -> None:
        if self.client is not None:  # rows written between our two reads above
            self._cursor, rows = self.client.read_since(self._cursor)
            if len(rows):
                self.rows_arrived.emit(rows)
        final = dict(self.close() or self.last_status or {})
        if not final.get("outcome") and not final.get("error"):
            final["error"] = "the engine process ended unexpectedly (see engine.log in the session folder)"
        self.ended.emit(final)
