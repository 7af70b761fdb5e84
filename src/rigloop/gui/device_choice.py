"""The operator's choice of device, turned into ``--set``-style overrides of the config.

The app never builds a link itself: it edits ``device.*`` keys exactly as ``rigloop run --set``
would and lets the config loader validate the result, so a choice made in the window and one made
on the command line mean the same thing. ``device.url`` wins over the separate keys in a config,
so every choice clears it.
"""

from __future__ import annotations

import json
from dataclasses import dataclass

#: kind -> label in the device chooser
DEVICE_KINDS = {
    "sim": "Simulated device",
    "udp": "UDP (host : port)",
    "serial": "Serial port",
}


@dataclass(frozen=True)
class DeviceChoice:
    kind: str                 # sim | udp | serial
    host: str = "127.0.0.1"
    port: int | str = 47800
    serial_port: str = ""
    baud: int | str = 921600


def choice_from_config(cfg) -> DeviceChoice:
    """What the config itself says, as the chooser's starting point."""
    d = cfg.device
    return DeviceChoice(kind=d.link, host=d.udp.host, port=d.udp.port,
                        serial_port=d.serial.port, baud=d.serial.baud)


def _yaml_text(text: str) -> str:
    """A string value that YAML reads back as the same text (JSON strings are YAML)."""
    return json.dumps(str(text))


def overrides_for(choice: DeviceChoice) -> list[str]:
    """``KEY=VALUE`` overrides for :func:`rigloop.config.apply_overrides`; ValueError if unusable."""
    if choice.kind not in DEVICE_KINDS:
        raise ValueError(f"device kind {choice.kind!r} is unknown; choose one of {', '.join(DEVICE_KINDS)}")
    sets = ["device.url=null", f"device.link={choice.kind}"]
    if choice.kind == "udp":
        host = str(choice.host).strip()
        if not host:
            raise ValueError("UDP host is empty; give the device's IP address or host name, e.g. 192.168.1.50")
        port = _whole(choice.port, "UDP port", 1, 65535, "47800")
        sets += [f"device.udp.host={_yaml_text(host)}", f"device.udp.port={port}"]
    elif choice.kind == "serial":
        name = str(choice.serial_port).strip()
        if not name:
            raise ValueError("no serial port chosen; plug the device in, press Refresh and pick its port")
        baud = _whole(choice.baud, "baud rate", 1, 100_000_000, "921600")
        sets += [f"device.serial.port={_yaml_text(name)}", f"device.serial.baud={baud}"]
    return sets


def _whole(value, what: str, lo: int, hi: int, example: str) -> int:
    try:
        n = int(str(value).strip())
    except ValueError:
        raise ValueError(f"{what} {str(value).strip() or '(empty)'!s} is not a whole number; "
                         f"give {lo}..{hi}, e.g. {example}") from None
    if not lo <= n <= hi:
        raise ValueError(f"{what} {n} is out of range; give {lo}..{hi}, e.g. {example}")
    return n


def list_serial_ports() -> list[tuple[str, str]]:
    """``(port name, description)`` of the serial ports present now (USB CDC devices first)."""
    try:
        from serial.tools import list_ports
    except ImportError:  # pragma: no cover - pyserial is a dependency
        return []
    ports = []
    for p in list_ports.comports():
        desc = p.description if p.description and p.description != "n/a" else ""
        if getattr(p, "manufacturer", None) and p.manufacturer not in desc:
            desc = f"{desc} ({p.manufacturer})".strip()
        ports.append((p.device, desc))
    ports.sort(key=lambda item: (not ("ACM" in item[0] or "USB" in item[0] or "usbmodem" in item[0]), item[0]))
    return ports
