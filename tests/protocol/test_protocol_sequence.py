"""Serial-number arithmetic on u32 (RFC 1982 style) and the sample sequence tracker."""

from __future__ import annotations

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from rigloop.protocol.framing import RejectCounters
from rigloop.protocol.sequence import SequenceTracker, is_newer

MAX = 0xFFFFFFFF


@pytest.mark.parametrize(
    "a, b, newer",
    [
        (1, 0, True),
        (0, 1, False),
        (5, 5, False),
        (0, MAX, True),  # wrap: 0 follows 0xFFFFFFFF
        (MAX, 0, False),
        (2, MAX - 1, True),
        (0x7FFFFFFF, 0, True),  # the largest step still counted as "newer"
        (0x80000000, 0, False),  # exactly half-way: undefined in RFC 1982, "not newer" here
        (0, 0x80000001, True),
    ],
)
def test_is_newer(a, b, newer):
    assert is_newer(a, b) is newer


@settings(max_examples=300, deadline=None)
@given(st.integers(0, MAX), st.integers(1, 2**31 - 1))
def test_is_newer_is_antisymmetric_within_half_range(b, step):
    a = (b + step) & MAX
    assert is_newer(a, b) and not is_newer(b, a)


def test_tracker_counts_losses_across_the_wrap():
    counters = RejectCounters()
    tracker = SequenceTracker(counters)
    assert tracker.accept(MAX - 1)
    assert tracker.accept(1)  # MAX and 0 lost
    assert tracker.lost == 2
    assert not tracker.accept(0)  # late arrival: dropped
    assert not tracker.accept(1)  # duplicate: dropped
    assert counters.sequence == 2 and tracker.rejected == 2
    assert tracker.last == 1


def test_reset_accepts_a_restarted_sequence_and_keeps_totals():
    tracker = SequenceTracker()
    tracker.accept(100)
    tracker.accept(103)
    tracker.reset()
    assert tracker.accept(0) and tracker.last == 0 and tracker.lost == 2


@settings(max_examples=200, deadline=None)
@given(st.integers(0, MAX), st.lists(st.integers(1, 5000), min_size=1, max_size=50))
def test_tracker_in_order_with_gaps(start, steps):
    tracker = SequenceTracker()
    seq = start
    assert tracker.accept(seq)
    for step in steps:
        seq = (seq + step) & MAX
        assert tracker.accept(seq)
    assert tracker.lost == sum(step - 1 for step in steps)
    assert tracker.rejected == 0
