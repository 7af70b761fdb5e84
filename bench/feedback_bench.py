"""Fault onset to STOP, in sample periods, for each feedback protection (safety.md, "Feedback
plausibility"); and what the checks cost per sample.

Each row runs the demo fan (or motor) config as shipped on the simulated device's lockstep clock,
injects one fault, and reads the device's receive log: the device time of the STOP frame minus
the fault's onset (device time), divided by the sample period. The onset is the fault's ``at``
counted the way the simulated device counts it (from its start, or from the first ARM where the
device does so). Lockstep makes the figures deterministic: they are detection times of the
checks, not of the machine.

The cost line times the supervisor's per-sample work with the feedback checks on and off, side
by side in one run, on recorded demo samples: the difference is what the checks add.

Run:  .venv/bin/python bench/feedback_bench.py [--quick]
Never run by the tests.
"""

from __future__ import annotations

import argparse
import json
import sys
import tempfile
import time
from pathlib import Path

REPO = Path(__file__).resolve().parents[1]
FAN = REPO / "configs" / "demo_fan.yaml"
MOTOR = REPO / "configs" / "demo_motor.yaml"

#: (protection, fault, config, extra --set overrides, expected cause)
CASES = [
    ("frozen reading", "freeze:channel=speed_rpm,at=3", FAN, [], "no-response"),
    ("frozen reading, at steady state", "freeze:channel=speed_rpm,at=6", FAN, [], "no-response"),
    ("disconnected sensor (reads 0)", "disconnect:channel=speed_rpm,at=3", FAN, [], "no-response"),
    ("reversed sensor", "reverse:channel=speed_rpm,at=3", FAN, [], "no-response"),
    ("slipping coupling (20 %)", "slip:at=3,fraction=0.2", FAN, [], "no-response"),
    ("locked rotor, current limit off", "locked-rotor:at=3", FAN, ["limits.current_a.max=5"], "no-response"),
    ("locked rotor, demo limits", "locked-rotor:at=3", FAN, [], "limit"),
    ("locked motor shaft (position, m=2)", "locked-rotor:at=1", MOTOR,
     ["limits.current_a.min=-20", "limits.current_a.max=20"], "no-response"),
    ("device-side clamp at 30 %", "device-clamp:at=3,value=30", FAN, [], "applied-mismatch"),
    ("spike, rate_max 2.5x top acceleration", "spike:channel=speed_rpm,at=3,value=3200", FAN,
     ["limits.speed_rpm.rate_max=10660"], "rate-limit"),
]


def _fault_origin_from_arm() -> bool:
    from rigloop.sim.faults import FaultInjector

    return hasattr(FaultInjector([]), "origin_us")


def run_case(fault: str, config: Path, sets: list[str], out: Path) -> dict:
    from rigloop.config import load_config
    from rigloop.engine.loop import Engine
    from rigloop.sim.faults import parse_fault

    cfg = load_config(config, ["device.sim.clock=lockstep", f"recording.dir={out}",
                               f"device.sim.faults=['{fault}']", *sets])
    rx = out / f"rx-{abs(hash(fault + str(sets)))}.jsonl"
    result = Engine(cfg, sim_extra={"rx_log": str(rx)}).run()
    frames = [json.loads(line) for line in rx.read_text().splitlines() if line.strip()]
    arm = next((f["t_us"] for f in frames if f.get("type") == "ARM"), 0)
    stop = next((f["t_us"] for f in frames if f.get("type") == "STOP"), None)
    origin = arm if _fault_origin_from_arm() else 0
    onset = origin + parse_fault(fault).at_us
    period_us = cfg.device.period_us
    periods = (stop - onset) / period_us if stop is not None else None
    trip = result.trip
    return {"cause": trip.cause if trip else "(none)", "periods": periods,
            "seconds": None if periods is None else periods * period_us * 1e-6}


def supervisor_cost(samples: int) -> tuple[float, float]:
    """Seconds per sample of the supervisor's checks with the feedback checks on and off."""
    import numpy as np

    from rigloop.config import load_config
    from rigloop.engine.supervisor import Supervisor

    rng = np.random.default_rng(1)
    ys = 1500.0 + 8.0 * rng.standard_normal(samples)
    results = []
    for on in ("true", "false"):
        cfg = load_config(FAN, [f"limits.plausibility.enabled={on}", f"limits.plausibility.applied={on}",
                                "recording.dir=/tmp"])
        sup = Supervisor(cfg)
        for k in range(64):
            sup.idle_sample([ys[k], 0.1, 30.0, 30.0])
        sup.on_arm()
        t0 = time.perf_counter()
        for k in range(samples):
            t = k * 0.002
            y = float(ys[k])
            sup.check_sample(t, [y, 0.1, 30.0, 30.0], True)
            sup.check_response(t, y, 50.0, 1500.0)
            sup.check_applied(t, k, 50.0)
            sup.note_command(50.0, k + 1)
        results.append((time.perf_counter() - t0) / samples)
    return results[0], results[1]


def main(argv=None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="three faults and a short cost loop")
    args = parser.parse_args(argv)
    cases = CASES[:3] if args.quick else CASES
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for name, fault, config, sets, expected in cases:
            print(f"  {name} ...", file=sys.stderr, flush=True)
            r = run_case(fault, config, sets, Path(tmp))
            rows.append((name, fault, r, expected))
    print("| protection / fault | cause | onset to STOP [periods] | [s] |")
    print("|---|---|---|---|")
    for name, fault, r, expected in rows:
        mark = "" if r["cause"] == expected else f" (expected {expected})"
        p = "-" if r["periods"] is None else f"{r['periods']:.0f}"
        s = "-" if r["seconds"] is None else f"{r['seconds']:.3f}"
        print(f"| {name} (`{fault}`) | {r['cause']}{mark} | {p} | {s} |")
    on, off = supervisor_cost(2000 if args.quick else 20000)
    print()
    print(f"supervisor per sample: {on * 1e6:.1f} us with the feedback checks, {off * 1e6:.1f} us without "
          f"(ratio {on / off:.2f}; added {max(on - off, 0.0) * 1e6:.1f} us)")
    return 0


if __name__ == "__main__":
    sys.path.insert(0, str(REPO / "src"))
    raise SystemExit(main())
