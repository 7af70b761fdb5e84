"""Authenticated frames (docs/protocol.md §14): a truncated HMAC-SHA-256 over every frame.

Why: a device on a shared network can be reached, and its samples forged, by anyone who can send
a datagram with the right source address. With a pre-shared key per rig, each side seals every
frame it sends and opens every frame it receives; a frame that does not open is rejected under
``auth`` and never acted on.

Construction (HMAC: RFC 2104 / FIPS 198-1, over SHA-256: FIPS 180-4):

    sealed payload = version | type + 0x80 | body | counter (u32 LE) | tag (8 bytes)
    tag            = first 8 bytes of HMAC-SHA-256(key, session | version | type + 0x80 | body | counter)
    session        = host nonce (8 bytes, from QUERY) | device nonce (8 bytes, from HELLO)

The CRC of the frame then covers the sealed payload. ``counter`` starts at 1 in each direction
for every session and grows by one per frame; a receiver accepts only a counter above the last
one it accepted, so a frame of this session cannot be played twice, and a frame of an earlier
session fails its tag (other nonces). The direction is part of the type byte (0x01-0x0F device
to host, 0x10-0x1F host to device), so a frame cannot be reflected back to its sender.
"""

from __future__ import annotations

import hashlib
import hmac
import os

from rigloop.protocol.messages import (
    AUTH_HMAC_SHA256_64,
    HELLO_NONCE_OFFSET,
    NONCE_SIZE,
    PROTOCOL_VERSION,
    MsgType,
    ProtocolError,
)

AUTH_FLAG = 0x80
TAG_SIZE = 8                      # 64 bits: the floor the protocol allows for a truncated HMAC
COUNTER_SIZE = 4
TRAILER_SIZE = COUNTER_SIZE + TAG_SIZE
#: Key length accepted, in bytes: at least 128 bits (NIST SP 800-107: the key should carry at
#: least the security strength wanted), at most one SHA-256 block (longer keys are hashed first
#: by HMAC and gain nothing).
KEY_MIN = 16
KEY_MAX = 64
_KNOWN_TYPES = frozenset(int(t) for t in MsgType)
_HELLO = int(MsgType.HELLO)
_QUERY = int(MsgType.QUERY)


def frame_tag(key: bytes, session: bytes, data: bytes) -> bytes:
    """The 8-byte tag of ``data`` (sealed payload up to and including the counter)."""
    return hmac.new(key, session + data, hashlib.sha256).digest()[:TAG_SIZE]


class SessionMac:
    """HMAC state for one session: the key and the session nonces absorbed once, copied per frame.

    HMAC (RFC 2104) is H((K ^ opad) | H((K ^ ipad) | m)). The two hash states after their key
    blocks (and, for the inner one, after the session nonces) are kept as ``hashlib`` objects;
    each frame costs two ``copy()`` and two short hashes — a third of ``hmac.HMAC.copy()``'s
    cost in CPython. The RFC 4231 tests check it against ``hmac`` itself.
    """

    __slots__ = ("_inner", "_outer")

    def __init__(self, key: bytes, session: bytes):
        if len(key) > 64:
            key = hashlib.sha256(key).digest()
        block = key.ljust(64, b"\x00")
        self._inner = hashlib.sha256(bytes(b ^ 0x36 for b in block))
        self._inner.update(session)
        self._outer = hashlib.sha256(bytes(b ^ 0x5C for b in block))

    def tag(self, data: bytes) -> bytes:
        inner = self._inner.copy()
        inner.update(data)
        outer = self._outer.copy()
        outer.update(inner.digest())
        return outer.digest()[:TAG_SIZE]

    def seal(self, payload: bytes, counter: int) -> bytes:
        head = bytes((payload[0], payload[1] | AUTH_FLAG)) + payload[2:] + counter.to_bytes(4, "little")
        return head + self.tag(head)

    def open(self, payload: bytes) -> tuple[bytes, int]:
        """Verify a sealed payload; return (plain payload, counter) or raise ``auth``."""
        if len(payload) < 2 + TRAILER_SIZE:
            raise ProtocolError("auth", f"tagged frame of {len(payload)} bytes is too short for its "
                                        f"{TRAILER_SIZE}-byte counter and tag", payload[1] & 0x7F)
        head = payload[:-TAG_SIZE]
        if not hmac.compare_digest(self.tag(head), payload[-TAG_SIZE:]):
            raise ProtocolError("auth", "tag does not match: another key, another session, or a "
                                        "forged or altered frame", payload[1] & 0x7F)
        counter = int.from_bytes(head[-COUNTER_SIZE:], "little")
        plain = bytes((payload[0], payload[1] & 0x7F)) + head[2:-COUNTER_SIZE]
        return plain, counter


def _check_header(payload: bytes) -> bool:
    """True when the payload is tagged. Leaves short/version/type errors of a plain frame to the codec."""
    if len(payload) < 2 or payload[0] != PROTOCOL_VERSION:
        return False
    t = payload[1]
    if t & AUTH_FLAG:
        if t & 0x7F not in _KNOWN_TYPES:
            raise ProtocolError("type", f"unknown message type 0x{t & 0x7F:02x} (tagged)")
        return True
    return False


class HostAuth:
    """The host end: seals what it sends once a session exists, opens what it receives.

    Without a key it passes plain frames and rejects tagged ones; it still notes a tagged HELLO
    (``keyed_hello_seen``) so the handshake can say that the device wants a key. With a key, a
    plain 1.1 HELLO (``plain_hello_seen``: an unkeyed device answering our QUERY), a plain 1.0
    HELLO (``legacy_hello_seen``: a 1.0 device, or a keyed device's start-up HELLO sent before its
    key was set) or a HELLO whose tag fails (``bad_hello``) are noted the same way; the session
    starts with the first HELLO that opens.
    """

    __slots__ = ("key", "host_nonce", "device_nonce", "_mac", "tx_counter", "rx_counter",
                 "keyed_hello_seen", "plain_hello_seen", "legacy_hello_seen", "bad_hello")

    def __init__(self, key: bytes | None = None):
        self.key = key
        self.new_session()

    @property
    def keyed(self) -> bool:
        return self.key is not None

    @property
    def ready(self) -> bool:
        return self._mac is not None

    def new_session(self) -> None:
        """A fresh host nonce (for the next QUERY); forget the device's."""
        self.host_nonce = os.urandom(NONCE_SIZE)
        self.device_nonce: bytes | None = None
        self._mac: SessionMac | None = None
        self.tx_counter = 0
        self.rx_counter = 0
        self.keyed_hello_seen = False
        self.plain_hello_seen = False
        self.legacy_hello_seen = False
        self.bad_hello: str | None = None

    def seal(self, payload: bytes) -> bytes:
        mac = self._mac
        if mac is None or payload[1] == _QUERY:
            return payload            # QUERY carries the nonce the session is made of: plain
        self.tx_counter += 1
        return mac.seal(payload, self.tx_counter)

    def open(self, payload: bytes) -> bytes:
        tagged = _check_header(payload)
        if not tagged:
            if self.key is not None and len(payload) >= 2 and payload[0] == PROTOCOL_VERSION:
                if payload[1] == _HELLO:
                    if len(payload) == HELLO_NONCE_OFFSET + NONCE_SIZE:
                        self.plain_hello_seen = True
                    else:
                        self.legacy_hello_seen = True
                raise ProtocolError("auth", "frame without a tag on an authenticated link",
                                    payload[1] if payload[1] in _KNOWN_TYPES else None)
            return payload
        base = payload[1] & 0x7F
        if self.key is None:
            if base == _HELLO:
                self.keyed_hello_seen = True
            raise ProtocolError("auth", "tagged frame, but this host has no key", base)
        if base == _HELLO:
            return self._open_hello(payload)
        mac = self._mac
        if mac is None:
            raise ProtocolError("auth", "tagged frame before the session's HELLO", base)
        plain, counter = mac.open(payload)
        if counter <= self.rx_counter:
            raise ProtocolError("auth", f"counter {counter} is not above {self.rx_counter}: a replayed frame", base)
        self.rx_counter = counter
        return plain

    def _open_hello(self, payload: bytes) -> bytes:
        """A tagged HELLO carries the device nonce that completes the session: take it, verify."""
        end = HELLO_NONCE_OFFSET + NONCE_SIZE
        if len(payload) != end + TRAILER_SIZE:
            raise ProtocolError("auth", f"tagged HELLO of {len(payload)} bytes; expected "
                                        f"{end + TRAILER_SIZE}", _HELLO)
        nonce = bytes(payload[HELLO_NONCE_OFFSET:end])
        mac = SessionMac(self.key, self.host_nonce + nonce)
        try:
            plain, counter = mac.open(payload)
        except ProtocolError as exc:
            self.bad_hello = exc.detail
            raise
        if nonce == self.device_nonce and counter <= self.rx_counter:
            raise ProtocolError("auth", f"HELLO counter {counter} is not above {self.rx_counter}: a replayed frame", _HELLO)
        self.device_nonce = nonce
        self._mac = mac
        self.rx_counter = counter
        return plain


class DeviceAuth:
    """The device end (simulated device): a session per QUERY nonce, all else must open.

    A plain QUERY carrying a host nonce is the one frame accepted without a tag (the session is
    made from it); the caller decides whether a QUERY may start a session now (not while bound).
    ``nonce_source`` gives fresh device nonces (os.urandom by default; never repeat one).
    """

    __slots__ = ("key", "host_nonce", "device_nonce", "_mac", "tx_counter", "rx_counter", "_nonce_source")

    def __init__(self, key: bytes, nonce_source=None):
        self.key = key
        self._nonce_source = nonce_source or (lambda: os.urandom(NONCE_SIZE))
        self.host_nonce: bytes | None = None
        self.device_nonce = bytes(NONCE_SIZE)
        self._mac: SessionMac | None = None
        self.tx_counter = 0
        self.rx_counter = 0

    @property
    def auth_mode(self) -> int:
        return AUTH_HMAC_SHA256_64

    def start_session(self, host_nonce: bytes) -> None:
        self.host_nonce = bytes(host_nonce)
        self.device_nonce = bytes(self._nonce_source())
        self._mac = SessionMac(self.key, self.host_nonce + self.device_nonce)
        self.tx_counter = 0
        self.rx_counter = 0

    @property
    def ready(self) -> bool:
        return self._mac is not None

    def seal(self, payload: bytes) -> bytes | None:
        """The sealed payload, or None before any session (nothing may go out unsealed)."""
        if self._mac is None:
            return None
        self.tx_counter += 1
        return self._mac.seal(payload, self.tx_counter)

    def open(self, payload: bytes) -> bytes:
        """Plain payload of a tagged frame; a plain QUERY with a nonce passes as it is."""
        if not _check_header(payload):
            if len(payload) == 2 + NONCE_SIZE and payload[0] == PROTOCOL_VERSION and payload[1] == _QUERY:
                return payload
            raise ProtocolError("auth", "frame without a tag, and this device is keyed",
                                payload[1] if len(payload) > 1 and payload[1] in _KNOWN_TYPES else None)
        base = payload[1] & 0x7F
        if self._mac is None:
            raise ProtocolError("auth", "tagged frame before any QUERY started a session", base)
        plain, counter = self._mac.open(payload)
        if counter <= self.rx_counter:
            raise ProtocolError("auth", f"counter {counter} is not above {self.rx_counter}: a replayed frame", base)
        self.rx_counter = counter
        return plain


def reject_tagged(payload: bytes) -> None:
    """An unkeyed receiver: a tagged frame is an ``auth`` rejection (it cannot check it)."""
    if _check_header(payload):
        raise ProtocolError("auth", "tagged frame, but this side has no key", payload[1] & 0x7F)
