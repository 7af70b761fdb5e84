"""Cost of the controller's options per sample, side by side in one run.

Measures ``Controller.step`` with the quantization band off (the bare reference), on (the
default) and on with a known input delay, on the same recorded-like input (a quantized noisy
speed), interleaved and repeated so that a busy machine hits all three alike; prints the best
time of each and its ratio to the reference.

Run:  .venv/bin/python bench/control_options_bench.py [--quick]
Never run by the tests.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from rigloop.control.controller import Controller, ControlParams

CASES = {
    "band off (reference)": {"quantization_band": 0.0},
    "band on (default)": {},
    "band on + input delay 10 ms": {"input_delay_s": 0.01},
}


def per_step_us(readings: list[float], **options) -> float:
    ctl = Controller(ControlParams(law="iP", alpha=40.0, kp=12.0, window_s=0.06, **options),
                     0.002, 0.0, 100.0, 0.0)
    t0 = time.perf_counter()
    for y in readings:
        ctl.step(y, 50.0, 1500.0, 0.0, 0.0)
    return (time.perf_counter() - t0) / len(readings) * 1e6


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="fewer samples and repeats")
    args = parser.parse_args()
    n, repeats = (2000, 5) if args.quick else (10000, 15)
    rng = np.random.default_rng(0)
    readings = np.round(1500.0 + rng.normal(0.0, 8.0, n)).tolist()    # 1 rpm steps, 8 rpm noise
    best = {name: float("inf") for name in CASES}
    for _ in range(repeats):
        for name, options in CASES.items():
            best[name] = min(best[name], per_step_us(readings, **options))
    ref = best["band off (reference)"]
    print(f"{'controller step':32s} {'us/sample':>10s} {'ratio':>7s}")
    for name, value in best.items():
        print(f"{name:32s} {value:10.2f} {value / ref:7.2f}")


if __name__ == "__main__":
    main()
