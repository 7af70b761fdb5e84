"""Device URLs and DeviceConfig -> links, and the clear errors for bad ones."""

from __future__ import annotations

import socket
from types import SimpleNamespace

import pytest

from rigloop.link import LinkError, SerialLink, UdpLink, open_link, open_url


@pytest.fixture()
def device_port():
    sock = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    sock.bind(("127.0.0.1", 0))
    yield sock.getsockname()[1]
    sock.close()


def test_udp_url(device_port):
    with open_url(f"udp://127.0.0.1:{device_port}") as link:
        assert isinstance(link, UdpLink)
        assert link.url == f"udp://127.0.0.1:{device_port}"
        assert link.device_address == ("127.0.0.1", device_port)


def test_udp_url_with_local_options(device_port):
    probe = socket.socket(socket.AF_INET, socket.SOCK_DGRAM)
    probe.bind(("127.0.0.1", 0))
    free = probe.getsockname()[1]
    probe.close()
    with open_url(f"udp://localhost:{device_port}?local_host=127.0.0.1&local_port={free}") as link:
        assert link.local_address == ("127.0.0.1", free)


def test_udp_url_ipv6_loopback(device_port):
    if not socket.has_ipv6:
        pytest.skip("no IPv6 on this machine")
    try:
        link = open_url(f"udp://[::1]:{device_port}")
    except LinkError as exc:
        pytest.skip(f"IPv6 loopback unavailable: {exc}")
    with link:
        assert link.url == f"udp://[::1]:{device_port}"


def test_serial_url_with_pyserial_loop():
    with open_url("serial://loop://?baud=9600") as link:
        assert isinstance(link, SerialLink)
        assert link.url == "serial://loop://?baud=9600"


def test_serial_url_default_baud():
    with open_url("serial://loop://") as link:
        assert link.url.endswith("?baud=115200")


@pytest.mark.parametrize(
    "url, words",
    [
        ("127.0.0.1:47800", "expected udp://HOST:PORT"),
        ("tcp://127.0.0.1:5", "unknown scheme 'tcp'"),
        ("udp://127.0.0.1", "give host and port"),
        ("udp://127.0.0.1:99999", "port must be an integer"),
        ("udp://127.0.0.1:5?mode=fast", "unknown option 'mode'"),
        ("udp://127.0.0.1:5?local_port=abc", "local_port='abc' is not an integer"),
        ("serial://?baud=9600", "give the port"),
        ("serial://loop://?baud=fast", "baud='fast' is not an integer"),
        ("serial://loop://?speed=9600", "unknown option 'speed'"),
        ("sim://fan", "started by the engine"),
    ],
)
def test_bad_urls_are_explained(url, words):
    with pytest.raises(LinkError, match=words):
        open_url(url)


def test_open_link_from_config(device_port):
    udp_cfg = SimpleNamespace(
        link="udp", url=None,
        udp=SimpleNamespace(host="127.0.0.1", port=device_port, local_host="127.0.0.1", local_port=0),
    )
    with open_link(udp_cfg) as link:
        assert isinstance(link, UdpLink) and link.device_address == ("127.0.0.1", device_port)

    serial_cfg = SimpleNamespace(link="serial", url=None, serial=SimpleNamespace(port="loop://", baud=921600))
    with open_link(serial_cfg) as link:
        assert isinstance(link, SerialLink) and link.url == "serial://loop://?baud=921600"

    url_only = SimpleNamespace(url=f"udp://127.0.0.1:{device_port}")
    with open_link(url_only) as link:
        assert isinstance(link, UdpLink) and link.device_address == ("127.0.0.1", device_port)


def test_open_link_from_a_loaded_config_keeps_the_local_address(device_port):
    """A device on the network needs the host to listen on a non-loopback address: the config's
    device.udp.local_host must reach the socket (the URL alone does not carry it)."""
    from pathlib import Path

    from rigloop.config import load_config

    template = Path(__file__).resolve().parents[2] / "configs" / "template_udp.yaml"
    cfg = load_config(template, ["device.udp.host=192.0.2.10", "device.udp.local_host=0.0.0.0",
                                 "device.udp.local_port=0"])
    with open_link(cfg.device) as link:             # binds only; nothing is sent
        assert link.device_address == ("192.0.2.10", cfg.device.udp.port)
        assert link.local_address[0] == "0.0.0.0"
    cfg = load_config(template, [f"device.url=udp://127.0.0.1:{device_port}"])
    with open_link(cfg.device) as link:             # device.url folded into the udp section
        assert link.device_address == ("127.0.0.1", device_port)


@pytest.mark.parametrize("kind, words", [("sim", "start the simulated device first"), ("can", "expected one of")])
def test_open_link_refuses_what_it_cannot_open(kind, words):
    with pytest.raises(LinkError, match=words):
        open_link(SimpleNamespace(link=kind, url=None))
