"""`rigloop ports` lists what serial.tools.list_ports reports."""

from __future__ import annotations

import argparse

from serial.tools import list_ports
from serial.tools.list_ports_common import ListPortInfo

from rigloop.commands import ports


def fake_port(device: str, description: str, hwid: str) -> ListPortInfo:
    info = ListPortInfo(device, skip_link_detection=True)
    info.description = description
    info.hwid = hwid
    return info


def run_ports() -> int:
    parser = argparse.ArgumentParser()
    ports.add_arguments(parser)
    return ports.run(parser.parse_args([]))


def test_module_shape():
    assert ports.NAME == "ports" and ports.HELP


def test_no_ports(monkeypatch, capsys):
    monkeypatch.setattr(list_ports, "comports", lambda: [])
    assert run_ports() == 0
    assert "no serial ports found" in capsys.readouterr().out


def test_lists_device_description_and_hwid_sorted(monkeypatch, capsys):
    monkeypatch.setattr(
        list_ports, "comports",
        lambda: [
            fake_port("/dev/ttyUSB0", "bench fan bridge", "USB VID:PID=1234:5678 SER=A1"),
            fake_port("/dev/ttyACM0", "motor board", "USB VID:PID=1111:2222"),
        ],
    )
    assert run_ports() == 0
    lines = capsys.readouterr().out.splitlines()
    assert lines[0].split() == ["DEVICE", "DESCRIPTION", "HARDWARE", "ID"]
    assert lines[1].startswith("/dev/ttyACM0") and "motor board" in lines[1] and "1111:2222" in lines[1]
    assert lines[2].startswith("/dev/ttyUSB0") and "SER=A1" in lines[2]


def test_reachable_through_the_cli(monkeypatch, capsys):
    from rigloop import cli

    monkeypatch.setattr(list_ports, "comports", lambda: [])
    assert cli.main(["ports"]) == 0
    assert "no serial ports found" in capsys.readouterr().out
