"""Recorder failure: from the disk filling up to the device holding STOP, in sample periods.

The demo fan runs on the simulated device (500 Hz; ``--clock realtime`` or, the default, lockstep:
a loaded shared machine trips real-time runs on stale data before the disk fills). After 1 s the recorder's
files start failing like a full disk (ENOSPC on every write). The onset is the first sample
whose row could no longer be stored (the first one recorded after the switch); the end is the
first sample the device sends with STOP_LATCHED set. Rows wait in memory until the next write —
at most ``recording.flush_ms`` or 400 rows, whichever comes first — so that bounds the figure; the
STOP itself leaves in the same call that sees the error. A second figure shows the write-to-STOP
gap alone (host clock).

Run:  .venv/bin/python bench/recorder_failure_bench.py [--runs N] [--flush-ms MS]
Never run by the tests.
"""

from __future__ import annotations

import argparse
import errno
import os
import statistics
import sys
import tempfile
import time
from pathlib import Path

DEMO = Path(__file__).resolve().parents[1] / "configs" / "demo_fan.yaml"
STOP_LATCHED = 2


class Switch:
    """Files that fail with ENOSPC once ``full`` is set; remembers when the first write failed."""

    def __init__(self):
        self.full = False
        self.first_failure: float | None = None

    def opener(self, path):
        raw = open(path, "wb", buffering=0)
        switch = self

        class Failing:
            def write(self, data):
                if switch.full:
                    if switch.first_failure is None:
                        switch.first_failure = time.perf_counter()
                    raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
                return raw.write(data)

            def __getattr__(self, name):
                return getattr(raw, name)

        return Failing()


class Watch:
    """A display subscriber: flips the switch after 1 s and notes the onset and the latch."""

    critical = False

    def __init__(self, switch: Switch):
        self.switch = switch
        self.onset_t = None
        self.latched_t = None

    def on_tick(self, rec):
        if not self.switch.full and rec.t >= 1.0:
            self.switch.full = True
        elif self.switch.full and self.onset_t is None:
            self.onset_t = rec.t
        if self.onset_t is not None and self.latched_t is None and rec.status & STOP_LATCHED:
            self.latched_t = rec.t

    def on_event(self, ev):
        pass

    def poll(self, now):
        pass


def one_run(flush_ms: float, clock: str) -> tuple[float, float]:
    from rigloop.config import load_config
    from rigloop.engine.loop import Engine

    with tempfile.TemporaryDirectory() as tmp:
        # stale limit raised to 0.5 s: a busy shared machine must not trip stale before the disk fills
        cfg = load_config(DEMO, [f"recording.dir={tmp}", f"recording.flush_ms={flush_ms}",
                                 "limits.stale_periods=250", f"device.sim.clock={clock}"])
        engine = Engine(cfg, duration_s=3.0)
        switch = Switch()
        engine.recorder_opener = switch.opener
        watch = Watch(switch)
        engine.add_subscriber(watch)
        stop_sent = []
        original = Engine._send_stop

        def timed_send_stop(self, reason):
            original(self, reason)
            if isinstance(reason, int) and not stop_sent:
                stop_sent.append(time.perf_counter())

        Engine._send_stop = timed_send_stop
        try:
            result = engine.run()
        finally:
            Engine._send_stop = original
        assert result.trip is not None and result.trip.cause == "recorder-failed", result.trip
        period = cfg.device.period_s
        periods = (watch.latched_t - watch.onset_t) / period
        gap_us = (stop_sent[0] - switch.first_failure) * 1e6 if stop_sent and switch.first_failure else float("nan")
        return periods, gap_us


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--runs", type=int, default=3)
    parser.add_argument("--flush-ms", type=float, default=100.0)
    parser.add_argument("--clock", choices=("lockstep", "realtime"), default="lockstep")
    args = parser.parse_args()
    results = [one_run(args.flush_ms, args.clock) for _ in range(args.runs)]
    periods = [p for p, _ in results]
    gaps = [g for _, g in results]
    print(f"recorder failure -> device STOP-latched, demo fan at 500 Hz ({args.clock} clock), flush "
          f"every {args.flush_ms:g} ms (= {args.flush_ms / 2:g} periods in real time) or 400 rows, "
          f"{args.runs} runs")
    print(f"  onset to STOP latched: median {statistics.median(periods):.1f} periods, "
          f"max {max(periods):.1f} (bound: flush interval or 400 rows, + 2 periods for the round trip)")
    print(f"  failed write to STOP on the wire: median {statistics.median(gaps):.0f} us")
    return 0


if __name__ == "__main__":
    sys.exit(main())
