"""Connecting to a device: QUERY until HELLO, check the protocol version and the channel count,
then CONFIGURE until the device's HELLO shows the configuration in force (docs/protocol.md §7, §11).
Every failure says what was expected and what to check, before anything has moved."""

from __future__ import annotations

import time

from rigloop.protocol.messages import PROTOCOL_VERSION, Configure, Fault, Hello, Query

HANDSHAKE_TIMEOUT_S = 5.0


class EngineError(Exception):
    """A failure before anything moved (cannot connect, device mismatch)."""


def handshake(link, cfg) -> Hello:
    """Return the device's HELLO acknowledging our CONFIGURE; raise EngineError otherwise."""
    deadline = time.monotonic() + HANDSHAKE_TIMEOUT_S
    hello = None
    next_query = 0.0
    while hello is None:
        now = time.monotonic()
        if now > deadline:
            raise EngineError(f"no HELLO from the device at {link.url} within {HANDSHAKE_TIMEOUT_S:.0f} s; "
                              "check the cable/port, the device's power and its firmware")
        if now >= next_query:
            link.send(Query())
            next_query = now + 0.5
        for m in link.recv(0.1):
            if isinstance(m, Hello):
                hello = m
    if not hello.proto_min <= PROTOCOL_VERSION <= hello.proto_max:
        raise EngineError(f"protocol mismatch: the host speaks version {PROTOCOL_VERSION}, the device "
                          f"speaks {hello.proto_min}..{hello.proto_max}; update the firmware or rigloop")
    if hello.n_channels != len(cfg.channels):
        raise EngineError(f"the device sends {hello.n_channels} channels but the config lists "
                          f"{len(cfg.channels)} (channels: {', '.join(c.name for c in cfg.channels)}); "
                          "make the channels list match the firmware")
    period_us = cfg.device.period_us
    watchdog_us = cfg.device.watchdog_us
    a = cfg.actuator
    conf = Configure(period_us, watchdog_us, float(a.safe), float(a.min), float(a.max))
    deadline = time.monotonic() + HANDSHAKE_TIMEOUT_S
    acked = None
    next_send = 0.0
    while acked is None:
        now = time.monotonic()
        if now > deadline:
            raise EngineError(f"the device at {link.url} did not acknowledge CONFIGURE "
                              f"(period {period_us} us, watchdog {watchdog_us} us) within "
                              f"{HANDSHAKE_TIMEOUT_S:.0f} s; check that it supports that rate")
        if now >= next_send:
            link.send(conf)
            next_send = now + 1.0
        for m in link.recv(0.1):
            if isinstance(m, Hello) and m.period_us == period_us and m.watchdog_us == watchdog_us:
                acked = m
            elif isinstance(m, Fault) and m.code == 4:
                raise EngineError(f"the device rejected CONFIGURE (period {period_us} us, watchdog "
                                  f"{watchdog_us} us, actuator {a.min}..{a.max} safe {a.safe})")
    return acked
