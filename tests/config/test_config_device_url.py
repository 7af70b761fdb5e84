"""Device URLs: each form, its options, and clear errors."""

from __future__ import annotations

import pytest

from rigloop.config import device_url, parse_device_url


@pytest.mark.parametrize("url, expected", [
    ("udp://192.168.1.50:47800", {"link": "udp", "udp": {"host": "192.168.1.50", "port": 47800}}),
    ("udp://[fd00::5]:47800", {"link": "udp", "udp": {"host": "fd00::5", "port": 47800}}),
    ("serial:///dev/ttyACM0?baud=921600",
     {"link": "serial", "serial": {"port": "/dev/ttyACM0", "baud": 921600}}),
    ("serial://COM3", {"link": "serial", "serial": {"port": "COM3"}}),
    ("sim://fan", {"link": "sim", "sim": {"plant": "fan"}}),
    ("sim://motor?clock=lockstep&noise=0&seed=3",
     {"link": "sim", "sim": {"plant": "motor", "clock": "lockstep", "noise": 0.0, "seed": 3}}),
])
def test_forms(url, expected):
    assert parse_device_url(url) == expected


@pytest.mark.parametrize("url, words", [
    ("192.168.1.50:47800", "not a device URL"),
    ("tcp://host:1", "unknown kind 'tcp'"),
    ("udp://host", "give host and port"),
    ("udp://host:http", "whole number"),
    ("udp://host:0", "port 0"),
    ("udp://host:1/x", "no path"),
    ("udp://host:1?baud=3", "unknown option 'baud'"),
    ("serial://dev/ttyACM0", "three slashes"),
    ("serial:///dev/ttyACM0?baud=fast", "whole number"),
    ("serial://", "give the serial port"),
    ("sim://pump", "unknown simulated plant 'pump'"),
    ("sim://fan?clock=slow", "clock=realtime"),
    ("sim://fan?noise=-1", "number >= 0"),
    ("", "must be text"),
])
def test_errors_say_what_to_write(url, words):
    with pytest.raises(ValueError, match=None) as caught:
        parse_device_url(url)
    assert words in str(caught.value)


@pytest.mark.parametrize("url", ["udp://10.0.0.7:47800", "udp://[fd00::5]:47800",
                                 "serial:///dev/ttyACM0?baud=115200", "serial://COM3?baud=9600",
                                 "sim://motor"])
def test_canonical_url_round_trips(url):
    parsed = parse_device_url(url)
    link = parsed.pop("link")
    assert device_url(link, **parsed) == url


def test_serial_port_accepts_the_form_the_simulated_device_prints():
    # `rigloop sim --pty` prints "rigloop-sim listening serial:///dev/pts/3"; pasting that
    # into device.serial.port must work as the plain path does.
    from pathlib import Path

    from rigloop.config import ConfigError, load_config

    demo = Path(__file__).resolve().parents[2] / "configs" / "demo_fan.yaml"
    cfg = load_config(demo, ["device.link=serial", "device.serial.port=serial:///dev/pts/3"])
    assert cfg.device.serial.port == "/dev/pts/3" and cfg.device.serial.baud == 921600
    assert cfg.device.url == "serial:///dev/pts/3?baud=921600"
    cfg = load_config(demo, ["device.link=serial", "device.serial.port=serial:///dev/pts/3?baud=115200"])
    assert cfg.device.serial.baud == 115200
    cfg = load_config(demo, ["device.link=serial", "device.serial.port=serial:///dev/pts/3?baud=115200",
                             "device.serial.baud=57600"])
    assert cfg.device.serial.baud == 57600          # the explicit key wins over the pasted URL
    with pytest.raises(ConfigError) as caught:
        load_config(demo, ["device.link=serial", "device.serial.port=serial://dev/pts/3"])
    assert "device.serial.port" in str(caught.value) and "three slashes" in str(caught.value)
