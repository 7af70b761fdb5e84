"""Recorder benchmark against the performance targets (bench/README.md): rows per second as a
multiple of the loop rate, and flat memory over a long session.

The recorder (``rigloop.engine.recorder.SessionRecorder``) gets realistic rows — fresh
TickRecords with 4 channels and changing values, built in batches of 1000 as the engine builds
them, one per sample — through ``on_tick`` plus the ``poll`` the engine makes after every sample
(which flushes every ``recording.flush_ms``). Only ``on_tick`` + ``poll`` are timed. Memory is the
process's resident set (VmRSS from /proc/self/status; ``resource.getrusage`` elsewhere), read
after a warm-up and then at every tenth of the run; the growth from the warm-up to the end is the
figure that must stay within a few MB.

Run:  .venv/bin/python bench/recorder_bench.py [--quick | --long] [--json FILE]
(--quick 1e5 rows, default 1e6, --long 1e7: that writes about 1.6 GB to a temporary folder, which
is deleted afterwards.) Never run by the tests.
"""

from __future__ import annotations

import argparse
import math
import random
import shutil
import sys
import tempfile
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
from engine_bench import DEMO, Row, format_table, progress, write_json  # noqa: E402

LOOP_RATE_HZ = 1000.0          # the loop rate the target is stated for
BATCH = 1000
WARMUP_ROWS = 20_000


def rss_mb() -> float:
    """Resident set size now, in MB."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("VmRSS:"):
                    return int(line.split()[1]) / 1024.0
    except OSError:
        pass
    import resource

    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss   # peak, not current: kB on Linux,
    return peak / (1024.0 * 1024.0 if sys.platform == "darwin" else 1024.0)   # bytes on macOS


def make_batch(k0: int, rng: random.Random, ts: float) -> list:
    """BATCH fresh TickRecords as the engine makes them: a fan speed tracking a slow reference."""
    from rigloop.engine.records import TickRecord

    out = []
    for k in range(k0, k0 + BATCH):
        t = k * ts
        r = 1800.0 + 600.0 * math.sin(0.3 * t)
        y = r + rng.gauss(0.0, 15.0)
        u = 45.0 + 10.0 * math.sin(0.3 * t + 0.2)
        out.append(TickRecord(t, k, r, 180.0 * math.cos(0.3 * t), y, y - r, u, u, -1500.0 + rng.gauss(0.0, 40.0),
                              "running", [y, 0.012 * u + rng.gauss(0.0, 0.01), 0.21 * y, 30.0 + 1e-5 * k],
                              0x21, 0.03 + rng.random() * 0.02, 25.0 + rng.random() * 10.0, 0, math.nan))
    return out


def bench_recorder(rows: int, folder: Path) -> dict:
    from rigloop.config import load_config
    from rigloop.engine.recorder import SessionRecorder

    cfg = load_config(DEMO, [f"recording.dir={folder}"])
    ts = 1.0 / LOOP_RATE_HZ
    session = folder / "recorder-bench"
    session.mkdir(parents=True)
    rec = SessionRecorder(session, cfg, device_url="bench://recorder")
    rng = random.Random(7)
    clock = time.perf_counter
    on_tick, poll = rec.on_tick, rec.poll
    busy = 0.0
    k = 0
    rss_start = None
    checkpoints = []
    step = max(BATCH, (rows // 10) // BATCH * BATCH)
    total = WARMUP_ROWS + rows
    while k < total:
        batch = make_batch(k, rng, ts)
        t0 = clock()
        for r in batch:
            on_tick(r)
            poll(clock())
        dt = clock() - t0
        k += BATCH
        del batch
        if k == WARMUP_ROWS:
            rss_start = rss_mb()
            busy = 0.0
            checkpoints.append((0, rss_start))
        elif k > WARMUP_ROWS:
            busy += dt
            done = k - WARMUP_ROWS
            if done % step == 0:
                checkpoints.append((done, rss_mb()))
                progress(f"  recorder: {done:,} rows, RSS {checkpoints[-1][1]:.1f} MB, "
                         f"{done / busy:,.0f} rows/s")
    rss_end = rss_mb()
    rec.close(outcome="completed", stop_reason="benchmark", trip=None, summary={})
    size = (session / "samples.csv").stat().st_size
    return {"rows": rows, "rows_per_s": rows / busy, "rss_start": rss_start, "rss_end": rss_end,
            "rss_max": max(m for _, m in checkpoints), "checkpoints": checkpoints,
            "bytes_per_row": size / (rows + WARMUP_ROWS), "written": rec.rows}


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description="rigloop recorder benchmark: rows per second and memory over a long session")
    size = parser.add_mutually_exclusive_group()
    size.add_argument("--quick", action="store_true", help="1e5 rows: checks that the script works")
    size.add_argument("--long", action="store_true", help="1e7 rows (about 1.6 GB written, then deleted)")
    parser.add_argument("--rows", type=int, help="rows to write (overrides the above)")
    parser.add_argument("--json", metavar="FILE", help="also write the rows as JSON (for run_all.py)")
    args = parser.parse_args(argv)
    rows = args.rows or (100_000 if args.quick else 10_000_000 if args.long else 1_000_000)
    if rows < BATCH:
        parser.error(f"--rows {rows}: give at least {BATCH}")
    rows = rows // BATCH * BATCH
    tmp = Path(tempfile.mkdtemp(prefix="rigloop-recorder-bench-"))
    t_start = time.perf_counter()
    try:
        free_gb = shutil.disk_usage(tmp).free / 1e9
        need_gb = rows * 170 / 1e9
        if need_gb > 0.5 * free_gb:
            print(f"recorder_bench: {rows:,} rows need about {need_gb:.1f} GB in {tmp} but only "
                  f"{free_gb:.1f} GB are free; use fewer --rows or set TMPDIR to a larger disk",
                  file=sys.stderr)
            return 2
        progress(f"recorder: {rows:,} rows (+{WARMUP_ROWS:,} warm-up) to {tmp}")
        res = bench_recorder(rows, tmp)
    finally:
        shutil.rmtree(tmp, ignore_errors=True)
    growth = res["rss_end"] - res["rss_start"]
    rows_out = [
        Row("5 recorder rows/s (on_tick + poll, 4 channels)", f"{res['rows_per_s']:,.0f} rows/s",
            f"loop rate {LOOP_RATE_HZ:g} Hz", res["rows_per_s"] / LOOP_RATE_HZ, ">= 20"),
        Row(f"5 recorder RSS growth over {res['rows']:,} rows (MB)", f"{growth:+.1f} MB",
            f"RSS after warm-up {res['rss_start']:.1f} MB", growth, "<= 3"),
        Row("  RSS highest / at the end", f"{res['rss_max']:.1f} / {res['rss_end']:.1f} MB", "", None, ""),
        Row("  disk per row (samples.csv)", f"{res['bytes_per_row']:.0f} B",
            f"{res['bytes_per_row'] * LOOP_RATE_HZ * 3600 / 1e6:.0f} MB per hour at 1 kHz", None, ""),
    ]
    print(f"rigloop recorder benchmark ({res['rows']:,} rows, {time.perf_counter() - t_start:.0f} s; "
          f"{time.strftime('%Y-%m-%d %H:%M')})")
    print(format_table(rows_out))
    print("RSS checkpoints (rows, MB): " + ", ".join(f"{n:,}: {m:.1f}" for n, m in res["checkpoints"]))
    write_json(args.json, "recorder", rows_out, {"checkpoints": res["checkpoints"]})
    return 0


if __name__ == "__main__":
    sys.exit(main())
