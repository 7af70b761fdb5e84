"""Device URLs: one string that says how to reach a device.

``device.url`` (and ``--set device.url=...``) is a shortcut for ``device.link`` plus the matching
sub-section, handy on the command line:

=========================================  =====================================================
``udp://HOST:PORT``                        ``link: udp``, ``udp.host``, ``udp.port``
``serial:///dev/ttyACM0?baud=921600``      ``link: serial``, ``serial.port``, ``serial.baud``
``serial://COM3?baud=115200``              the same with a Windows port name
``sim://fan?clock=lockstep&noise=0``       ``link: sim``, ``sim.plant`` and optional ``clock``,
                                           ``noise``, ``seed``
=========================================  =====================================================
"""

from __future__ import annotations

import ipaddress
import math
from urllib.parse import parse_qsl, urlsplit

_PLANTS = ("fan", "motor")
_CLOCKS = ("realtime", "lockstep")
_EXAMPLES = "udp://HOST:PORT, serial:///dev/ttyACM0?baud=921600 or sim://fan"


def _query(url: str, query: str, allowed: tuple[str, ...]) -> dict[str, str]:
    items: dict[str, str] = {}
    for name, value in parse_qsl(query, keep_blank_values=True):
        if name not in allowed:
            hint = f"allowed: {', '.join(allowed)}" if allowed else "this kind takes no options"
            raise ValueError(f"{url!r}: unknown option {name!r} ({hint})")
        items[name] = value
    return items


def _int_option(url: str, name: str, text: str, low: int, high: int) -> int:
    try:
        value = int(text)
    except ValueError:
        raise ValueError(f"{url!r}: {name}={text!r} is not a whole number") from None
    if not low <= value <= high:
        raise ValueError(f"{url!r}: {name}={value} is out of range ({low}..{high})")
    return value


def _udp(url: str, parts) -> dict:
    _query(url, parts.query, ())
    try:
        host, port = parts.hostname, parts.port
    except ValueError:
        raise ValueError(f"{url!r}: the port must be a whole number 1..65535, as in "
                         f"udp://192.168.1.50:47800") from None
    if not host or port is None:
        raise ValueError(f"{url!r}: give host and port, as in udp://192.168.1.50:47800")
    if port == 0:
        raise ValueError(f"{url!r}: port 0 is not a device port; use 1..65535")
    if parts.path not in ("", "/"):
        raise ValueError(f"{url!r}: a UDP URL has no path; write udp://{host}:{port}")
    return {"link": "udp", "udp": {"host": host, "port": port}}


def _serial(url: str, parts) -> dict:
    options = _query(url, parts.query, ("baud",))
    if parts.netloc and parts.path not in ("", "/"):
        raise ValueError(f"{url!r}: a device path needs three slashes, as in "
                         f"serial:///dev/ttyACM0 (or serial://COM3 on Windows)")
    port = parts.netloc or parts.path
    if not port or port == "/":
        raise ValueError(f"{url!r}: give the serial port, as in serial:///dev/ttyACM0?baud=921600")
    serial: dict[str, object] = {"port": port}
    if "baud" in options:
        serial["baud"] = _int_option(url, "baud", options["baud"], 1, 100_000_000)
    return {"link": "serial", "serial": serial}


def _sim(url: str, parts) -> dict:
    options = _query(url, parts.query, ("clock", "noise", "seed"))
    plant = parts.netloc or parts.path.strip("/")
    if plant not in _PLANTS:
        raise ValueError(f"{url!r}: unknown simulated plant {plant!r}; use sim://fan or sim://motor")
    sim: dict[str, object] = {"plant": plant}
    if "clock" in options:
        if options["clock"] not in _CLOCKS:
            raise ValueError(f"{url!r}: clock={options['clock']!r}; use clock=realtime or "
                             f"clock=lockstep")
        sim["clock"] = options["clock"]
    if "noise" in options:
        try:
            noise = float(options["noise"])
        except ValueError:
            noise = math.nan
        if not (math.isfinite(noise) and noise >= 0):
            raise ValueError(f"{url!r}: noise={options['noise']!r}; use a number >= 0 "
                             f"(0 = none, 1 = nominal)")
        sim["noise"] = noise
    if "seed" in options:
        sim["seed"] = _int_option(url, "seed", options["seed"], 0, 2**32 - 1)
    return {"link": "sim", "sim": sim}


def parse_device_url(url: str) -> dict:
    """Turn a device URL into the ``device`` keys it stands for.

    Returns e.g. ``{"link": "udp", "udp": {"host": "10.0.0.7", "port": 47800}}``. Raises
    ValueError with a message that names the URL, the part that is wrong and a correct example.
    """
    if not isinstance(url, str) or not url.strip():
        raise ValueError(f"a device URL must be text such as {_EXAMPLES}")
    url = url.strip()
    if "://" not in url:
        raise ValueError(f"{url!r} is not a device URL; write {_EXAMPLES}")
    parts = urlsplit(url)
    scheme = parts.scheme.lower()
    if scheme == "udp":
        return _udp(url, parts)
    if scheme == "serial":
        return _serial(url, parts)
    if scheme == "sim":
        return _sim(url, parts)
    raise ValueError(f"{url!r}: unknown kind {parts.scheme!r}; write {_EXAMPLES}")


def device_url(link: str, udp: dict | None = None, serial: dict | None = None,
               sim: dict | None = None) -> str:
    """The canonical URL of a device section (the inverse of :func:`parse_device_url`)."""
    if link == "udp" and udp:
        host = str(udp["host"])
        try:
            if ipaddress.ip_address(host).version == 6:
                host = f"[{host}]"
        except ValueError:
            pass
        return f"udp://{host}:{udp['port']}"
    if link == "serial" and serial:
        port = str(serial["port"])
        return f"serial://{port}?baud={serial['baud']}"
    if link == "sim" and sim:
        return f"sim://{sim['plant']}"
    return f"{link}://"
