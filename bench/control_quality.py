"""Control quality over the scenario suite: the bump test's suggestions against SIMC and the oracle.

For every rig of ``configs/scenarios/`` (nothing special-cased per file):

1. the bump test, offline (:func:`rigloop.analysis.identify.offline.identify_offline`: the same
   profile, analysis, verdict and rules as ``rigloop identify``, on the rig model with its
   sensors), around the input that holds the reference's initial level, with the scenario's
   estimator kind; its alpha and static gain are compared with the rig's truth;
2. if it did not refuse, three closed loops on the scenario's reference
   (:func:`rigloop.analysis.identify.quality.compare`): the iP (iPD for a position) with the
   suggested settings, the PID baseline by the SIMC rules from the same bump test, and the
   oracle (true rig, same gains).

One table: the bump test's errors, then per controller the RMS tracking error and the worst
overshoot of the noise-free plant output, and the actuator's total variation; the ratio iP/SIMC
of the RMS errors and iP/oracle. Progress lines go to stderr, the table to stdout.

Run:  .venv/bin/python bench/control_quality.py [--only NAME] [--json FILE] [--delay-aware]
Never run by the tests (they hold looser tolerances on the same functions).
"""

from __future__ import annotations

import argparse
import json
import math
import sys
import time


def main(argv: list[str] | None = None) -> int:
    from rigloop.analysis.identify import plan_bump
    from rigloop.analysis.identify.offline import identify_offline
    from rigloop.analysis.identify.quality import compare
    from rigloop.plants.scenario import load_suite

    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--only", help="run the scenarios whose name contains this text")
    p.add_argument("--json", help="also write the rows to this file")
    p.add_argument("--delay-aware", action="store_true",
                   help="give the model-free law the fitted dead time as control.input_delay_s")
    args = p.parse_args(argv)

    rows = []
    suite = [s for s in load_suite() if not args.only or args.only in s.name]
    for i, sc in enumerate(suite, 1):
        t0 = time.monotonic()
        print(f"[{i}/{len(suite)}] {sc.name}: bump test ...", file=sys.stderr, flush=True)
        cfg, a = sc.config, sc.config.actuator
        truth = sc.truth()
        plan = plan_bump(a.min, a.max, a.safe, a.slew_per_s, rate_hz=cfg.device.rate_hz, at=truth.u,
                         max_duration_s=cfg.limits.max_duration_s, unit=a.unit, order=sc.order)
        rig, sensor = sc.build()
        limit = cfg.limits.channels.get(sc.output)
        result = identify_offline(rig, plan, ts=sc.period_s, output=sc.output, order=sc.order,
                                  sensor=sensor, kind=cfg.control.estimator.kind,
                                  output_limits=(limit.min, limit.max) if limit else (None, None),
                                  delay_aware=args.delay_aware)
        row = {"scenario": sc.name, "order": sc.order, "truth_alpha": truth.alpha,
               "truth_gain": truth.static_gain}
        est = result.estimates
        if est is not None:
            row.update(alpha=est.alpha, alpha_err=est.alpha / truth.alpha - 1.0,
                       gain=est.gain, steps=len(est.steps), bump_s=float(result.record.t[-1]))
            if sc.order == 1:
                row["gain_err"] = est.gain / truth.static_gain - 1.0
        if result.suggestions is None:
            why = result.error or "; ".join(r.reason for r in result.refusals)
            row["refused"] = why
            print(f"    refused: {why}", file=sys.stderr, flush=True)
        else:
            print("    closed loops: model-free, SIMC, oracle ...", file=sys.stderr, flush=True)
            s = result.suggestions
            scores = compare(sc, s)
            row["law"] = s.law
            row["scores"] = {k: v.as_dict() for k, v in scores.items()}
            mf, simc, oracle = scores[s.law], scores["SIMC"], scores["oracle"]
            row["ratio_simc"] = mf.rms / simc.rms
            row["ratio_oracle"] = mf.rms / oracle.rms
        print(f"    done in {time.monotonic() - t0:.1f} s", file=sys.stderr, flush=True)
        rows.append(row)

    print(render(rows))
    if args.json:
        with open(args.json, "w", encoding="utf-8") as f:
            json.dump(rows, f, indent=2)
    return 0


def _pct(x) -> str:
    return "—" if x is None or not math.isfinite(x) else f"{100 * x:+.1f} %"


def render(rows: list[dict]) -> str:
    """One table: bump-test errors, RMS / overshoot / actuator TV per controller, ratios."""
    head = (f"{'scenario':<28} {'alpha err':>9} {'gain err':>9} | "
            f"{'law':<4} {'RMS':>8} {'OS %':>6} {'TV':>8} | {'SIMC RMS':>8} {'OS %':>6} {'TV':>8} | "
            f"{'oracle':>8} {'OS %':>6} | {'/SIMC':>6} {'/orac.':>6}")
    lines = ["Control quality over the scenario suite (true plant output; OS = worst overshoot, "
             "TV = actuator total variation)", head, "-" * len(head)]
    worst_simc = worst_os = 0.0
    for r in rows:
        left = f"{r['scenario']:<28} {_pct(r.get('alpha_err')):>9} {_pct(r.get('gain_err')):>9} | "
        if "scores" not in r:
            lines.append(left + f"refused: {r.get('refused', '')[:90]}")
            continue
        sc = r["scores"]
        mf, simc, orc = sc[r["law"]], sc["SIMC"], sc["oracle"]
        flag = " (left its limits)" if mf["outside_limits"] else ""
        lines.append(left + f"{r['law']:<4} {mf['rms']:8.3g} {mf['overshoot_pct']:6.1f} {mf['tv']:8.3g} | "
                     f"{simc['rms']:8.3g} {simc['overshoot_pct']:6.1f} {simc['tv']:8.3g} | "
                     f"{orc['rms']:8.3g} {orc['overshoot_pct']:6.1f} | {r['ratio_simc']:6.2f} "
                     f"{r['ratio_oracle']:6.2f}{flag}")
        worst_simc = max(worst_simc, r["ratio_simc"])
        worst_os = max(worst_os, mf["overshoot_pct"])
    done = [r for r in rows if "scores" in r]
    if done:
        lines.append(f"worst over {len(done)} controlled rigs: model-free RMS {worst_simc:.2f} x SIMC's, "
                     f"overshoot {worst_os:.1f} %; refused: {len(rows) - len(done)}")
    return "\n".join(lines)


if __name__ == "__main__":
    sys.exit(main())
