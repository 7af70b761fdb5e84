"""Choose the config and the device, and connect.

The device chooser offers the simulated device, a UDP address, or a serial port from a list
refreshed on demand (USB devices come and go). What is chosen becomes ``device.*`` overrides
(:mod:`rigloop.gui.device_choice`); the bar itself starts nothing.
"""

from __future__ import annotations

from pathlib import Path

from PyQt6.QtCore import pyqtSignal
from PyQt6.QtWidgets import (QComboBox, QFileDialog, QGridLayout, QHBoxLayout, QLabel, QLineEdit,
                             QPushButton, QStackedWidget, QWidget)

from rigloop.gui.device_choice import DEVICE_KINDS, DeviceChoice, list_serial_ports


class ConnectionBar(QWidget):
    open_requested = pyqtSignal(str)     # a config path the operator picked
    demo_requested = pyqtSignal()
    connect_requested = pyqtSignal()
    disconnect_requested = pyqtSignal()

    def __init__(self, parent=None):
        super().__init__(parent)
        self.config_label = QLabel("no config")
        self.config_label.setMinimumWidth(120)
        self.config_label.setObjectName("configPath")
        self.open_button = QPushButton("Open config...")
        self.open_button.clicked.connect(self._pick_file)
        self.demo_button = QPushButton("Demo")
        self.demo_button.setToolTip("Start from the packaged demo config (simulated fan rig)")
        self.demo_button.clicked.connect(self.demo_requested.emit)

        self.kind_box = QComboBox()
        for kind, label in DEVICE_KINDS.items():
            self.kind_box.addItem(label, kind)
        self.kind_box.setToolTip("Where the rig is: the built-in simulated device, a UDP device, "
                                 "or a USB/serial device")
        self.stack = QStackedWidget()
        # sim
        self.sim_label = QLabel("plant from the config")
        self.sim_label.setProperty("role", "muted")
        # udp
        self.host_edit = QLineEdit("127.0.0.1")
        self.host_edit.setToolTip("Device IP address or host name")
        self.port_edit = QLineEdit("47800")
        self.port_edit.setMaximumWidth(64)
        self.port_edit.setToolTip("Device UDP port (1..65535)")
        udp = QWidget()
        ul = QHBoxLayout(udp)
        ul.setContentsMargins(0, 0, 0, 0)
        ul.addWidget(self.host_edit, 1)
        ul.addWidget(QLabel(":"))
        ul.addWidget(self.port_edit)
        # serial
        self.serial_box = QComboBox()
        self.serial_box.setEditable(True)
        self.serial_box.setMinimumWidth(100)
        self.serial_box.setToolTip("Serial port (pick from the list or type a name or pyserial URL)")
        self.refresh_button = QPushButton("Refresh")
        self.refresh_button.setToolTip("List the serial ports present now")
        self.refresh_button.clicked.connect(self.refresh_ports)
        self.baud_edit = QLineEdit("921600")
        self.baud_edit.setMaximumWidth(64)
        self.baud_edit.setToolTip("Baud rate (a USB CDC device ignores it)")
        ser = QWidget()
        sl = QHBoxLayout(ser)
        sl.setContentsMargins(0, 0, 0, 0)
        sl.addWidget(self.serial_box, 1)
        sl.addWidget(self.refresh_button)
        sl.addWidget(self.baud_edit)
        self.stack.addWidget(self.sim_label)
        self.stack.addWidget(udp)
        self.stack.addWidget(ser)
        self.kind_box.currentIndexChanged.connect(self._kind_changed)

        self.connect_button = QPushButton("Connect")
        self.connect_button.setProperty("kind", "go")
        self.connect_button.setToolTip("Start the engine on this config and device (a new session folder)")
        self.connect_button.clicked.connect(self._connect_clicked)
        self._connected = False

        grid = QGridLayout(self)
        grid.setContentsMargins(0, 0, 0, 0)
        grid.setHorizontalSpacing(6)
        grid.setVerticalSpacing(4)
        cfg_title = QLabel("Config")
        cfg_title.setProperty("role", "muted")
        dev_title = QLabel("Device")
        dev_title.setProperty("role", "muted")
        grid.addWidget(cfg_title, 0, 0)
        grid.addWidget(self.config_label, 0, 1, 1, 2)
        row0 = QHBoxLayout()
        row0.addWidget(self.open_button)
        row0.addWidget(self.demo_button)
        grid.addLayout(row0, 0, 3)
        grid.addWidget(dev_title, 1, 0)
        grid.addWidget(self.kind_box, 1, 1)
        grid.addWidget(self.stack, 1, 2)
        grid.addWidget(self.connect_button, 1, 3)
        grid.setColumnStretch(2, 1)
        self.connect_button.setFixedWidth(110)
        self.setMaximumWidth(600)

    # ------------------------------------------------------------------ config
    def set_config_path(self, path: str | None, rig: str | None = None) -> None:
        if not path:
            self.config_label.setText("no config")
            return
        name = Path(path).name
        self.config_label.setText(f"<b>{name}</b>" + (f" &nbsp;(rig {rig})" if rig else ""))
        self.config_label.setToolTip(str(path))

    def _pick_file(self) -> None:
        path, _ = QFileDialog.getOpenFileName(self, "Open a rigloop config", "", "YAML config (*.yaml *.yml);;All files (*)")
        if path:
            self.open_requested.emit(path)

    # ------------------------------------------------------------------ device
    def set_choice(self, choice: DeviceChoice, sim_text: str = "") -> None:
        self.kind_box.setCurrentIndex(list(DEVICE_KINDS).index(choice.kind))
        self.host_edit.setText(str(choice.host))
        self.port_edit.setText(str(choice.port))
        self.baud_edit.setText(str(choice.baud))
        if choice.serial_port:
            self.serial_box.setEditText(choice.serial_port)
        if sim_text:
            self.sim_label.setText(sim_text)
        self._kind_changed()

    def choice(self) -> DeviceChoice:
        return DeviceChoice(kind=self.kind_box.currentData(), host=self.host_edit.text(),
                            port=self.port_edit.text(), serial_port=self.serial_box.currentText(),
                            baud=self.baud_edit.text())

    def _kind_changed(self) -> None:
        kind = self.kind_box.currentData()
        self.stack.setCurrentIndex(list(DEVICE_KINDS).index(kind))
        if kind == "serial" and self.serial_box.count() == 0:
            self.refresh_ports()

    def refresh_ports(self) -> None:
        current = self.serial_box.currentText()
        self.serial_box.clear()
        ports = list_serial_ports()
        for name, desc in ports:
            self.serial_box.addItem(f"{name}", name)
            self.serial_box.setItemData(self.serial_box.count() - 1, desc or name, 3)  # tooltip role
        if current:
            self.serial_box.setEditText(current)
        elif not ports:
            self.serial_box.setEditText("")
            self.serial_box.lineEdit().setPlaceholderText("no serial port found")

    # ------------------------------------------------------------------ connect
    def _connect_clicked(self) -> None:
        if self._connected:
            self.disconnect_requested.emit()
        else:
            self.connect_requested.emit()

    def set_state(self, state: str) -> None:
        """Enable what makes sense: choose while disconnected; disconnect only when safe."""
        disconnected = state == "disconnected"
        self._connected = not disconnected
        for w in (self.open_button, self.demo_button, self.kind_box, self.stack):
            w.setEnabled(disconnected)
        self.connect_button.setText("Connect" if disconnected else "Disconnect")
        self.connect_button.setProperty("kind", "go" if disconnected else "")
        self.connect_button.style().unpolish(self.connect_button)
        self.connect_button.style().polish(self.connect_button)
        self.connect_button.setEnabled(state in ("disconnected", "idle", "tripped"))
        self.connect_button.setToolTip(
            "Start the engine on this config and device (a new session folder)" if disconnected else
            "End this session (only while the output is safe: idle or tripped)")
