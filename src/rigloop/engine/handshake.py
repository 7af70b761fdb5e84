"""Connecting to a device: QUERY until HELLO, check the protocol version, the channel count, the
periods and the authentication, then CONFIGURE until the device's HELLO shows the configuration in
force (docs/protocol.md §7, §11, §14). Every failure says what was expected and what to check,
before anything has moved."""

from __future__ import annotations

import time

from rigloop.protocol.messages import AUTH_NONE, PROTOCOL_VERSION, Configure, Fault, Hello, Query

HANDSHAKE_TIMEOUT_S = 5.0
#: A 1.0 device does not answer a QUERY that carries a nonce (wrong length for it): after this
#: long without a HELLO the host also sends the plain QUERY every 1.0 device answers (§7).
PLAIN_QUERY_AFTER_S = 1.0


class EngineError(Exception):
    """A failure before anything moved (cannot connect, device mismatch)."""


class AuthRefused(EngineError):
    """The two ends do not agree on authentication (key missing, wrong key, device unkeyed)."""


def _auth_problem(link, plain_query_sent: bool = True) -> str | None:
    """Why the HELLOs seen so far cannot start a session, in plain words, or None.

    A plain 1.0 HELLO counts only once the host has asked in the 1.0 way too: before that it may
    be a keyed device's start-up HELLO, sent before its firmware set the key."""
    auth = getattr(link, "auth", None)
    if auth is None:
        return None
    if not auth.keyed and auth.keyed_hello_seen:
        return (f"key missing: the device at {link.url} requires authenticated frames (it has a key) but "
                "this host has none; set device.auth.key_file to the rig's key file")
    if auth.keyed and auth.bad_hello is not None:
        return (f"key wrong: the device at {link.url} answered with a HELLO whose tag does not match this "
                "host's key; the key in device.auth.key_file is not this device's (or someone else answered)")
    if auth.keyed and (auth.plain_hello_seen or (plain_query_sent and auth.legacy_hello_seen)):
        return (f"device without a key: the device at {link.url} does not authenticate its frames but "
                "this host has a key: "
                "give the device the same key, or remove device.auth.key_file to run unauthenticated "
                "(only on a link that stays on this machine)")
    return None


def _await_hello(link) -> Hello:
    auth = getattr(link, "auth", None)
    nonce = auth.host_nonce if auth is not None else None
    start = time.monotonic()
    deadline = start + HANDSHAKE_TIMEOUT_S
    next_query = 0.0
    while True:
        now = time.monotonic()
        problem = _auth_problem(link, plain_query_sent=now - start >= PLAIN_QUERY_AFTER_S + 0.5)
        if problem:
            raise AuthRefused(problem)
        if now > deadline:
            problem = _auth_problem(link)
            if problem:
                raise AuthRefused(problem)
            raise EngineError(f"no HELLO from the device at {link.url} within {HANDSHAKE_TIMEOUT_S:.0f} s; "
                              "check the cable/port, the device's power and its firmware")
        if now >= next_query:
            link.send(Query(nonce))
            if now - start >= PLAIN_QUERY_AFTER_S:
                link.send(Query())
            next_query = now + 0.5
        for m in link.recv(0.1):
            if isinstance(m, Hello):
                return m


def handshake(link, cfg) -> Hello:
    """Return the device's HELLO acknowledging our CONFIGURE; raise EngineError otherwise."""
    hello = _await_hello(link)
    auth = getattr(link, "auth", None)
    if not hello.proto_min <= PROTOCOL_VERSION <= hello.proto_max:
        raise EngineError(f"protocol mismatch: the host speaks version {PROTOCOL_VERSION}, the device "
                          f"speaks {hello.proto_min}..{hello.proto_max}; update the firmware or rigloop")
    if auth is not None and auth.keyed and (not auth.ready or hello.auth == AUTH_NONE):
        raise AuthRefused(f"device without a key: the device at {link.url} does not authenticate its "
                          f"frames (protocol {'1.0' if not hello.extended else '1.1, no key set'}) but this "
                          "host has a key: give the device the same key, or remove device.auth.key_file")
    if hello.n_channels != len(cfg.channels):
        raise EngineError(f"the device sends {hello.n_channels} channels but the config lists "
                          f"{len(cfg.channels)} (channels: {', '.join(c.name for c in cfg.channels)}); "
                          "make the channels list match the firmware")
    period_us = cfg.device.period_us
    watchdog_us = cfg.device.watchdog_us
    lo, hi = (hello.min_period_us or 0), (hello.max_period_us or period_us)
    if hello.extended and not lo <= period_us <= hi:
        raise EngineError(f"the device samples with periods of {hello.min_period_us}..{hello.max_period_us} us "
                          f"but the config asks for {period_us} us (device.rate_hz {cfg.device.rate_hz:g}); "
                          "choose a rate the device supports")
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
