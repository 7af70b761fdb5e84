"""`rigloop ports`: list the serial ports this machine offers, to fill in device.serial.port."""

from __future__ import annotations

import argparse

NAME = "ports"
HELP = "list serial ports (device path, description, hardware id) to find your board"


def add_arguments(parser: argparse.ArgumentParser) -> None:
    """No options: the list is short and always printed whole."""


def run(args: argparse.Namespace) -> int:
    from serial.tools import list_ports

    ports = sorted(list_ports.comports(), key=lambda p: p.device)
    if not ports:
        print("no serial ports found")
        print("(plug the board in; on Linux check `dmesg` and that your user may open /dev/ttyACM* or /dev/ttyUSB*)")
        return 0
    rows = [("DEVICE", "DESCRIPTION", "HARDWARE ID")]
    rows += [(p.device, p.description or "n/a", p.hwid or "n/a") for p in ports]
    widths = [max(len(row[i]) for row in rows) for i in range(2)]
    for device, description, hwid in rows:
        print(f"{device:<{widths[0]}}  {description:<{widths[1]}}  {hwid}")
    print("\nuse one as device.serial.port in the config, or as serial://DEVICE?baud=N")
    return 0
