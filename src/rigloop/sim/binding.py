"""The simulated device's side of protocol 1.1 (docs/protocol.md §6.7, §14): whom it obeys.

A mixin of :class:`rigloop.sim.device.SimDevice`, kept apart so that the state machine stays the
size of one idea. The device binds to the sender of the CONFIGURE it accepts; the transport asks
:meth:`is_bound` before it hands over a datagram and reports others with :meth:`note_foreign`.
With a key, QUERY starts a session (unless bound) and every frame going out is sealed.
"""

from __future__ import annotations

from rigloop.protocol.framing import encode_frame
from rigloop.protocol.messages import Message, Query

#: Protocol 1.1 §6.7: a disarmed device whose host has been silent this long is free again.
RELEASE_US = 1_000_000


class HostBinding:
    """Binding and session handling; expects the attributes SimDevice sets up (auth, bound, ...)."""

    def encode(self, msg: Message) -> bytes | None:
        """The frame for ``msg`` (sealed on a keyed device); None while a keyed device has no
        session yet (nothing leaves it without a tag)."""
        auth = self.auth
        if auth is not None and not auth.ready:
            return None
        return encode_frame(msg, auth=auth)

    def is_bound(self, now_us: int) -> bool:
        """True while a host holds the device; releases it when due (disarmed, host silent)."""
        if self.bound and not self.armed and now_us - self._bound_rx_us > RELEASE_US:
            self.bound = False
            self.releases += 1
            self._observe(now_us, None, "released", note=f"host silent for more than {RELEASE_US} us")
        return self.bound

    def note_foreign(self, now_us: int) -> None:
        """A frame from someone other than the bound host: counted, never acted on."""
        self.foreign += 1
        self._observe(now_us, None, "ignored", note="foreign sender while bound")

    def _on_query(self, msg: Query, now_us: int) -> list[Message]:
        auth = self.auth
        if auth is not None:
            if msg.nonce is None:
                self._reject("auth", now_us, "keyed device: a QUERY must carry the host's nonce", msg)
                return []
            if msg.nonce != auth.host_nonce:
                if self.bound:
                    self._reject("auth", now_us, "a host holds this device: no new session until it is released", msg)
                    return []
                auth.start_session(msg.nonce)
        self._hello_ext = msg.nonce is not None
        self._observe(now_us, msg, "accepted")
        return [self.hello()]
