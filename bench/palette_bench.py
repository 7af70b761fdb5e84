"""Cost of the trace line styles (dashed reference and applied actuator) against all-solid pens.

Runs the redraw benchmark of ``bench/gui_bench.py`` (8 traces x 30 s at 1 kHz, offscreen) twice
in one process, alternating: once with the palette's line styles, once with every style solid,
and prints the ratio of CPU time per frame. Not a test.

Run:  QT_QPA_PLATFORM=offscreen .venv/bin/python bench/palette_bench.py [--frames 120] [--rounds 3]
"""

from __future__ import annotations

import argparse
import os
import statistics
import sys
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))
os.environ.setdefault("QT_QPA_PLATFORM", "offscreen")


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--frames", type=int, default=120)
    parser.add_argument("--rounds", type=int, default=3)
    args = parser.parse_args()
    from gui_bench import bench_redraw

    from rigloop import palette

    styled = dict(palette.TRACES)
    solid = {k: (c, "solid") for k, (c, _s) in styled.items()}
    cpu = {"palette styles": [], "all solid": []}
    for _ in range(args.rounds):
        for name, traces in (("palette styles", styled), ("all solid", solid)):
            palette.TRACES.clear()
            palette.TRACES.update(traces)
            cpu[name].append(bench_redraw(args.frames)["cpu_ms"])
    palette.TRACES.clear()
    palette.TRACES.update(styled)
    med = {k: statistics.median(v) for k, v in cpu.items()}
    for name, value in med.items():
        print(f"{name:15s}  CPU per frame, median of {args.rounds}: {value:.2f} ms  (at 30 fps: "
              f"{value * 30 / 1000:.2f} core)")
    print(f"ratio styled / solid: {med['palette styles'] / med['all solid']:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
