"""Processor-in-the-loop benchmark: the sample rate the STM32F4 firmware holds on the emulated
board (QEMU netduinoplus2) at 200, 500 and 1000 Hz, with rigloop's engine closing the loop.

For each rate, side by side in one run:
  - emulated board: ports/stm32f4 built with RIG_EMULATED=1 under QEMU, USART2 on a pty;
  - bare reference: the same device core as a native process (ports/host, rl_host_device --pty)
    with the same fan (first order, 30 rpm/%, 0.5 s), on a pty too - what the host, the pty and
    the core give without an emulator in the way.
Per run, from the recorded session (device time, device sequence numbers):
  achieved/nominal  samples received / (device time span x rate)
  late ticks        device ticks skipped because its main loop came too late: ticks due over the
                    span (device time / period) minus samples the device sent (sequence numbers)
  lost samples      samples the device sent that never reached the host (gaps in sequence numbers)
  host late         samples the engine took in together because it fell behind (summary late_ticks)
The ratio column is achieved/nominal on the emulated board over the same on the native stub.

Run:  .venv/bin/python bench/pil_bench.py [--quick] [--seconds S] [--rates 200,500,1000] [--json FILE]
Never run by the tests. Needs qemu-system-arm and arm-none-eabi-gcc; prints SKIP without them.
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

import numpy as np
import pandas as pd
import yaml

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO / "firmware_stub" / "tools"))
sys.path.insert(0, str(Path(__file__).resolve().parent))
from engine_bench import Row, format_table, write_json  # noqa: E402
from pil_board import PIL_ELF, EmulatedBoard, build_image, missing_tools  # noqa: E402

HOST_STUB = REPO / "firmware_stub" / "build" / "rl_host_device"


def _config(folder: Path, pty: str, rate: float, seconds: float) -> Path:
    """The PIL fan rig (tests/pil/conftest.py) at `rate`; protections that a timing run must not
    trip on a busy machine are wide (device watchdog and stale limit 1 s, late ticks up to the rate
    per second)."""
    cfg = {
        "rig": f"pil-bench-{int(rate)}",
        "device": {"link": "serial", "serial": {"port": pty, "baud": 460800},
                   "rate_hz": rate, "watchdog_ms": 1000, "pacing": "device"},
        "channels": [{"name": "speed_rpm", "unit": "rpm"}, {"name": "ch1", "unit": "-"}],
        "actuator": {"name": "duty", "unit": "%", "min": 0, "max": 100, "safe": 0, "slew_per_s": 400},
        "control": {"output": "speed_rpm", "law": "iP", "alpha": 60.0, "kp": 4.0,
                    "estimator": {"kind": "algebraic", "window_s": 0.1}},
        "reference": {"kind": "levels", "initial": 800.0, "blend_s": 1.0, "steps": []},
        "limits": {"speed_rpm": {"min": -100.0, "max": 2800.0}, "stale_periods": int(rate),
                   "link_errors": {"max": 1000, "window_s": 1.0},
                   "overruns": {"max": int(rate), "window_s": 1.0}},
        "recording": {"dir": str(folder / "sessions")},
        "duration_s": seconds,
    }
    path = folder / "pil_bench.yaml"
    path.write_text(yaml.safe_dump(cfg, sort_keys=False))
    return path


def _measure(folder: Path, rate: float) -> dict:
    session = next((folder / "sessions").iterdir())
    meta = yaml.safe_load((session / "session.yaml").read_text())
    rows = pd.read_csv(session / "samples.csv")
    run = rows[rows.state == "running"]
    t = run.t.to_numpy()
    seq = run.seq.to_numpy().astype(np.int64)
    # Device ticks are due at t0 + k * period; a tick runs late by less than a period or is
    # skipped (the core keeps the phase), so the ticks due over the span are rint(span / period)
    # + 1 (to within one at the ends), the device sent seq_last - seq_first + 1 of them.
    due = int(np.rint((t[-1] - t[0]) * rate)) + 1
    sent = int(seq[-1] - seq[0] + 1)
    return {
        "outcome": meta["outcome"],
        "samples": int(len(run)),
        "achieved": len(run) / due,
        "late_ticks": max(due - sent, 0),
        "overrun_flags": int(((run.status.to_numpy() & 0x80) != 0).sum()),
        "lost": sent - int(len(run)),
        "host_late": int(meta["summary"].get("late_ticks") or 0),
    }


def _run_session(cfg: Path) -> int:
    from rigloop.cli import main

    return main(["run", str(cfg), "--quiet"])


def _emulated(rate: float, seconds: float) -> dict:
    with tempfile.TemporaryDirectory(prefix="pil-bench-") as tmp:
        board = EmulatedBoard.start(PIL_ELF)
        try:
            _run_session(_config(Path(tmp), board.pty, rate, seconds))
        finally:
            board.stop()
        return _measure(Path(tmp), rate)


def _native(rate: float, seconds: float) -> dict:
    with tempfile.TemporaryDirectory(prefix="pil-bench-") as tmp:
        proc = subprocess.Popen([str(HOST_STUB), "--pty", "--channels", "2", "--period-us", "5000",
                                 "--watchdog-us", "300000", "--min-period-us", "500", "--safe", "0",
                                 "--u-min", "0", "--u-max", "100", "--gain", "30", "--tau", "0.5",
                                 "--name", "native-fan", "--quit-after", str(seconds * 4 + 60)],
                                stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
        try:
            pty = proc.stdout.readline().split()[1]
            _run_session(_config(Path(tmp), pty, rate, seconds))
        finally:
            proc.terminate()
            proc.wait(timeout=30)
        return _measure(Path(tmp), rate)


def _fmt(m: dict) -> str:
    return (f"{m['achieved']:.3f} of nominal, {m['late_ticks']} late ticks, {m['lost']} lost, "
            f"{m['host_late']} host late ({m['outcome']})")


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--quick", action="store_true", help="3 s per run instead of 10")
    ap.add_argument("--seconds", type=float, help="seconds per run")
    ap.add_argument("--rates", default="200,500,1000", help="comma-separated sample rates in Hz")
    ap.add_argument("--json", metavar="FILE")
    args = ap.parse_args(argv)
    missing = missing_tools()
    if missing:
        print(f"SKIP: {', '.join(missing)} not installed; processor-in-the-loop benchmark not run")
        return 0
    seconds = args.seconds or (3.0 if args.quick else 10.0)
    for what, result in (("pil image", build_image()),
                         ("host stub", subprocess.run(["make", "-C", str(REPO / "firmware_stub"), "host",
                                                       "SANITIZE=0"], capture_output=True, text=True))):
        if result.returncode != 0:
            print(f"cannot build the {what}:\n{result.stdout[-2000:]}{result.stderr[-2000:]}", file=sys.stderr)
            return 1
    rows, extra = [], {}
    for rate in (float(r) for r in args.rates.split(",")):
        print(f"pil_bench: {rate:g} Hz, {seconds:g} s on the emulated board and on the native stub",
              file=sys.stderr)
        emu = _emulated(rate, seconds)
        nat = _native(rate, seconds)
        extra[f"{rate:g}"] = {"emulated": emu, "native": nat}
        rows.append(Row(f"PIL {rate:g} Hz: achieved/nominal", _fmt(emu), _fmt(nat),
                        emu["achieved"] / nat["achieved"] if nat["achieved"] else None, ""))
    print(format_table(rows))
    write_json(args.json, "pil", rows, extra)
    return 0


if __name__ == "__main__":
    sys.exit(main())
