"""Frames the link refused for their source, their tag or an implausible sequence number, as
events: the first one at once, then the count so far at most every ``REPORT_EVERY_S`` — so a
flood of forged datagrams leaves a trace in events.csv without writing one row per datagram.
(The totals are in session.yaml's summary: ``foreign_frames`` and ``rejected_frames``.)"""

from __future__ import annotations

#: Least wall time between two count events of one kind (common practice for rate-limited logs).
REPORT_EVERY_S = 5.0

_KINDS = (
    ("foreign", "datagrams from a source other than the device (dropped)"),
    ("auth", "frames that failed authentication (no tag, wrong tag, or replayed; dropped)"),
    ("sequence", "SAMPLEs with an old or implausible sequence number (dropped)"),
)


def _count(counters, kind: str) -> int:
    if kind == "foreign":
        return int(getattr(counters, "foreign", 0))
    return int(getattr(counters.rejected, kind, 0))


class RejectionReporter:
    """Turns the link's counters into rate-limited ``(kind, text, total)`` reports."""

    def __init__(self, counters):
        self._counters = counters
        self._reported = {kind: _count(counters, kind) for kind, _ in _KINDS}
        self._seen = {kind: False for kind, _ in _KINDS}
        self._last = {kind: float("-inf") for kind, _ in _KINDS}

    def poll(self, now: float, final: bool = False) -> list[tuple[str, str, int]]:
        out = []
        for kind, what in _KINDS:
            total = _count(self._counters, kind)
            new = total - self._reported[kind]
            if new <= 0:
                continue
            if not self._seen[kind]:
                self._seen[kind] = True
                text = f"first of the {what}"
                self._reported[kind] += 1          # the rest are told as a count later
            elif final or now - self._last[kind] >= REPORT_EVERY_S:
                text = f"{new} more {what}; {total} in this session"
                self._reported[kind] = total
            else:
                continue
            self._last[kind] = now
            out.append((kind, text, total))
        return out
