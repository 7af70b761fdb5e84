"""Device URLs and config -> an open :class:`~rigloop.link.base.Link`.

Accepted URLs::

    udp://HOST:PORT[?local_host=ADDR&local_port=N]     e.g. udp://127.0.0.1:47800, udp://[::1]:47800
    serial://PATH[?baud=N]                             e.g. serial:///dev/ttyACM0?baud=921600,
                                                            serial://COM3?baud=115200
                                                       (baud defaults to 115200)

``sim://`` is not opened here: the engine starts the simulated device first and then opens the
``udp://`` address it reports.
"""

from __future__ import annotations

from urllib.parse import parse_qs, urlsplit

from rigloop.link.base import Link, LinkError
from rigloop.link.serial_link import SerialLink
from rigloop.link.udp import UdpLink

DEFAULT_BAUD = 115200
_FORMS = "udp://HOST:PORT or serial://PATH?baud=N (e.g. serial:///dev/ttyACM0?baud=921600)"


def _int_option(url: str, options: dict[str, list[str]], key: str, default: int) -> int:
    values = options.get(key)
    if not values:
        return default
    try:
        return int(values[-1])
    except ValueError:
        raise LinkError(f"device url {url!r}: {key}={values[-1]!r} is not an integer; write e.g. {key}={default}") from None


def open_url(url: str, *, key: bytes | None = None) -> Link:
    """Open the link a device URL names; raise LinkError with the accepted forms on a bad URL."""
    if not isinstance(url, str) or "://" not in url:
        raise LinkError(f"device url {url!r}: expected {_FORMS}")
    scheme, rest = url.split("://", 1)
    scheme = scheme.lower()
    if scheme == "udp":
        parts = urlsplit(url)
        allowed = {"local_host", "local_port"}
        options = parse_qs(parts.query, keep_blank_values=True)
        unknown = sorted(set(options) - allowed)
        if unknown:
            raise LinkError(f"device url {url!r}: unknown option {unknown[0]!r}; allowed: {sorted(allowed)}")
        try:
            host, port = parts.hostname, parts.port
        except ValueError:
            raise LinkError(f"device url {url!r}: the port must be an integer in 1..65535") from None
        if not host or port is None:
            raise LinkError(f"device url {url!r}: give host and port, e.g. udp://127.0.0.1:47800")
        local_host = options.get("local_host", ["127.0.0.1"])[-1]
        local_port = _int_option(url, options, "local_port", 0)
        return UdpLink(host, port, local_host=local_host, local_port=local_port, key=key)
    if scheme == "serial":
        path, _, query = rest.partition("?")
        options = parse_qs(query, keep_blank_values=True)
        unknown = sorted(set(options) - {"baud"})
        if unknown:
            raise LinkError(f"device url {url!r}: unknown option {unknown[0]!r}; allowed: ['baud']")
        if not path:
            raise LinkError(f"device url {url!r}: give the port, e.g. serial:///dev/ttyACM0?baud=921600")
        return SerialLink(path, _int_option(url, options, "baud", DEFAULT_BAUD), key=key)
    if scheme == "sim":
        raise LinkError(
            f"device url {url!r}: sim:// is started by the engine (rigloop run); "
            "to talk to a running simulator use the udp:// address it prints"
        )
    raise LinkError(f"device url {url!r}: unknown scheme {scheme!r}; expected {_FORMS}")


def open_link(device_cfg, *, key: bytes | None = None) -> Link:
    """Open the link a DeviceConfig describes.

    The ``udp``/``serial`` sections are what counts: the config loader has already folded a
    ``device.url`` into them, and only they carry settings a URL does not (``local_host``,
    ``local_port``). An object with nothing but a ``url`` is opened by its URL. ``key`` (the rig's
    pre-shared key, see :mod:`rigloop.link.key_file`) makes every frame authenticated. For
    ``link: sim`` the caller starts the simulated device first and opens its udp:// address.
    """
    kind = getattr(device_cfg, "link", None)
    if kind == "udp" and getattr(device_cfg, "udp", None) is not None:
        udp = device_cfg.udp
        return UdpLink(
            udp.host, udp.port,
            local_host=getattr(udp, "local_host", None) or "127.0.0.1",
            local_port=getattr(udp, "local_port", None) or 0, key=key,
        )
    if kind == "serial" and getattr(device_cfg, "serial", None) is not None:
        ser = device_cfg.serial
        return SerialLink(ser.port, ser.baud, key=key)
    url = getattr(device_cfg, "url", None)
    if url:
        return open_url(url, key=key)
    if kind == "sim":
        raise LinkError(
            "device.link is 'sim': start the simulated device first (rigloop.sim) and open the udp:// "
            "address it reports with open_url"
        )
    raise LinkError(f"device.link={kind!r}: expected one of 'udp', 'serial', 'sim'")
