"""What every transport offers the engine: send a message, receive what has arrived, count.

A link never lets a bad frame through and never raises for one: rejections land in
``counters.rejected`` (per reason). It raises :class:`LinkError` only when the link itself is
unusable (port gone, socket closed), which the supervisor treats as a trip.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Protocol, runtime_checkable

from rigloop.protocol.framing import RejectCounters
from rigloop.protocol.messages import DEVICE_TO_HOST, Hello, Message, Sample
from rigloop.protocol.sequence import SequenceTracker


class LinkError(Exception):
    """The transport cannot be used (cannot open, closed, device gone); the message says why."""


@dataclass(slots=True)
class LinkCounters:
    """Traffic and error totals of one link.

    ``rx_frames`` counts messages delivered by ``recv``; ``rx_bytes`` every byte or datagram
    byte read. ``foreign`` counts UDP datagrams from an address other than the device's,
    ``unreachable`` the ICMP "port unreachable" reports a UDP socket received (device not
    listening); both stay 0 on serial.
    """

    rx_frames: int = 0
    tx_frames: int = 0
    rx_bytes: int = 0
    tx_bytes: int = 0
    lost_samples: int = 0
    foreign: int = 0
    unreachable: int = 0
    rejected: RejectCounters = field(default_factory=RejectCounters)

    def as_dict(self) -> dict:
        return {
            "rx_frames": self.rx_frames,
            "tx_frames": self.tx_frames,
            "rx_bytes": self.rx_bytes,
            "tx_bytes": self.tx_bytes,
            "lost_samples": self.lost_samples,
            "foreign": self.foreign,
            "unreachable": self.unreachable,
            "rejected": self.rejected.as_dict(),
        }


@runtime_checkable
class Link(Protocol):
    """A host-side transport to one device."""

    url: str
    counters: LinkCounters

    def send(self, msg: Message) -> None:
        """Send one message; never blocks for long; raises LinkError on a dead link."""

    def recv(self, timeout: float | None) -> list[Message]:
        """All messages available now; waits up to ``timeout`` s (None: forever) for the first."""

    def fileno(self) -> int | None:
        """A selectable handle where the OS allows one, else None."""

    def close(self) -> None:
        """Release the port or socket; idempotent."""


class SampleFilter:
    """Host-side checks shared by the links: drops old or implausible SAMPLEs (counting gaps) and
    host-to-device types (``type``).

    A HELLO restarts the check, because a device that rebooted starts its SAMPLE sequence anew
    (docs/protocol.md §5).
    """

    __slots__ = ("_counters", "_tracker")

    def __init__(self, counters: LinkCounters):
        self._counters = counters
        self._tracker = SequenceTracker(counters.rejected)

    def keep(self, msg: Message) -> bool:
        kind = type(msg)
        if kind is Sample:
            if not self._tracker.accept(msg.seq):
                return False
            self._counters.lost_samples = self._tracker.lost
        elif kind is Hello:
            self._tracker.reset()
        elif kind.TYPE not in DEVICE_TO_HOST:
            self._counters.rejected.type += 1   # protocol 1.1 §3: a host-to-device type sent to the host
            return False
        return True
