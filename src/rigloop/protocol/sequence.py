"""Sequence numbers on u32 that wrap: which is newer, and how many went missing.

Serial-number arithmetic in the style of RFC 1982: ``a`` is newer than ``b`` when
``(a - b) mod 2**32`` lies in ``[1, 2**31)``. A gap from ``b`` to a newer ``a`` means
``(a - b - 1) mod 2**32`` numbers were lost.

A jump of more than :data:`MAX_JUMP` is not a gap but an implausible number (a forged or corrupt
frame that passed its CRC): it is rejected like an old number and moves nothing (protocol §5).
"""

from __future__ import annotations

from typing import TYPE_CHECKING

if TYPE_CHECKING:  # pragma: no cover
    from rigloop.protocol.framing import RejectCounters

SEQ_MOD = 1 << 32
_MASK = SEQ_MOD - 1
_HALF = 1 << 31
#: Largest forward step accepted (protocol 1.1, §5): 65 536 numbers, i.e. 3.3 s of samples at the
#: fastest rate the host runs (20 kHz), longer than any stale-data limit lets a link stay silent.
MAX_JUMP = 1 << 16


def is_newer(a: int, b: int) -> bool:
    """True when sequence number ``a`` comes after ``b`` (wrap-aware)."""
    return 0 < ((a - b) & _MASK) < _HALF


class SequenceTracker:
    """Accepts only newer sequence numbers; counts the rejected ones and the gaps.

    The first number seen (or the first after :meth:`reset`) is always accepted. A number that is
    not newer, or more than :data:`MAX_JUMP` ahead, is rejected and counted under ``sequence`` in ``counters`` when given.
    """

    __slots__ = ("counters", "last", "lost", "rejected")

    def __init__(self, counters: RejectCounters | None = None):
        self.counters = counters
        self.last: int | None = None
        self.lost = 0
        self.rejected = 0

    def accept(self, seq: int) -> bool:
        last = self.last
        if last is not None:
            gap = (seq - last) & _MASK
            if not 0 < gap <= MAX_JUMP:
                self.rejected += 1
                if self.counters is not None:
                    self.counters.sequence += 1
                return False
            self.lost += gap - 1
        self.last = seq
        return True

    def reset(self) -> None:
        """Forget the last number (peer restarted) but keep the loss and rejection totals."""
        self.last = None
