"""``rigloop identify CONFIG``: the automatic bump test (docs/reports.md, "Bump test").

Ramps the actuator slowly to an operating level and steps it both ways around it, open loop —
through the engine, so every limit, watchdog, the clamp and the slew limit stay active — records
the session like any other, then estimates alpha, a first-order-plus-dead-time model, the noise
floor and the dead zone, judges whether the estimates hold together, and suggests settings.

Exit codes: 0 done, 1 internal error, estimation failed or refused (the message says why and
what to try; no snippet is printed), 2 config or usage error (nothing moved), 3 tripped (nothing
estimated), 130 stopped by Ctrl-C or SIGTERM.
"""

from __future__ import annotations

import argparse
import json
import math
import signal
import sys
from pathlib import Path

from rigloop.commands._common import add_config_arguments, load_config_or_report
from rigloop.exit_codes import EXIT_INTERNAL as EXIT_FAILED
from rigloop.exit_codes import EXIT_OK, EXIT_SIGNAL, EXIT_TRIPPED, EXIT_USAGE
from rigloop.plain_data import plain

NAME = "identify"
HELP = ("bump test: ramp the actuator to an operating level and step it both ways (open loop, every "
        "limit active), estimate alpha and a FOPDT model, suggest gains and an estimator window")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_arguments(parser)
    parser.add_argument("--operating-level", dest="at", type=float, metavar="LEVEL",
                        help="operating level u0 of the actuator (default: the middle of its range; "
                             "halfway from safe to max when safe is the middle; the safe value for "
                             "an order-2 output)")
    parser.add_argument("--step", type=float, metavar="DU",
                        help="size of the step du (default: 10 %% of the actuator range; negative "
                             "steps down first); u0 ± du must stay inside the range (order 2: "
                             "u0 ± 1.5 du, the start level of each excursion is u0 ± du and the "
                             "steps while moving are du/2)")
    parser.add_argument("--initial-hold", dest="settle", type=float, metavar="S",
                        help="hold at u0 before the first step, s (default: until settled)")
    parser.add_argument("--hold", type=float, metavar="S",
                        help="hold after each step, s (default: until settled, within the budget)")
    parser.add_argument("--ramp", type=float, metavar="S",
                        help="duration of the slow ramp from the safe value to the operating level, "
                             "s (default 4; never faster than the slew limit); it shows a dead zone")
    parser.add_argument("--steps", type=int, metavar="N",
                        help="most steps, even, up to 8 (default 6, fewer when --budget runs out; "
                             "order 2: 4 or 8 transitions, default 8)")
    parser.add_argument("--budget", type=float, metavar="S",
                        help="time budget of the whole test, s (default 120, and below "
                             "limits.max_duration_s)")
    parser.add_argument("--tau-cl", type=float, metavar="S", dest="tau_cl",
                        help="wanted closed-loop time constant, s (default: the fitted tau / 5, at "
                             "least 5 sample periods and 3x the loop's dead time)")
    parser.add_argument("--snippet-file", dest="write", metavar="FILE",
                        help="also write the suggested YAML config snippet to FILE")
    parser.add_argument("--record-dir", dest="out", metavar="DIR",
                        help="folder for the session recording (overrides recording.dir)")
    # former names, hidden: scripts written for them keep working
    parser.add_argument("--out", dest="out", help=argparse.SUPPRESS)
    parser.add_argument("--at", dest="at", type=float, help=argparse.SUPPRESS)
    parser.add_argument("--settle", dest="settle", type=float, help=argparse.SUPPRESS)
    parser.add_argument("--write", dest="write", help=argparse.SUPPRESS)
    parser.add_argument("--json", action="store_true", help="print one JSON object instead of the text")
    parser.add_argument("--quiet", action="store_true", help="no live status line (on stderr)")


def _usage(message: str) -> int:
    print(f"rigloop identify: {message}", file=sys.stderr)
    return EXIT_USAGE


def run(args: argparse.Namespace) -> int:
    from rigloop.analysis.identify import PlanError, plan_bump

    # the bump test replaces any reference or test plan of the config
    cfg = load_config_or_report(args.config, list(getattr(args, "set", None) or []) + ["plan=null"])
    if cfg is None:
        return EXIT_USAGE
    ts = 1.0 / cfg.device.rate_hz
    if args.tau_cl is not None and not (math.isfinite(args.tau_cl) and args.tau_cl >= 5 * ts):
        return _usage(f"--tau-cl {args.tau_cl:g}: must be at least 5 sample periods "
                      f"({5 * ts:.3g} s at {cfg.device.rate_hz:g} Hz)")
    if args.write:
        folder = Path(args.write).resolve().parent
        if not folder.is_dir():
            return _usage(f"--snippet-file {args.write}: the folder {folder} does not exist; create it first")
    a = cfg.actuator
    try:
        plan = plan_bump(a.min, a.max, a.safe, a.slew_per_s, rate_hz=cfg.device.rate_hz, at=args.at,
                         step=args.step, settle_s=args.settle, hold_s=args.hold,
                         ramp_s=args.ramp, steps=args.steps, budget_s=args.budget,
                         max_duration_s=cfg.limits.max_duration_s, unit=a.unit,
                         order=cfg.control.order)
    except PlanError as exc:
        return _usage(str(exc))
    return run_bump_test(cfg, plan, tau_cl=args.tau_cl, out_dir=args.out, write=args.write,
                         as_json=args.json, quiet=args.quiet or args.json)


def make_driver(cfg, plan):
    """The profile player for this rig: its order, and its output's limits for the guard."""
    from rigloop.analysis.identify import BumpDriver

    limit = cfg.limits.channels.get(cfg.control.output)
    limits = (limit.min, limit.max) if limit is not None else (None, None)
    return BumpDriver(plan, cfg.period_s, cfg.control.order, limits)


def run_bump_test(cfg, plan, *, tau_cl=None, out_dir=None, write=None, as_json=False, quiet=False,
                  stream=None, driver=None) -> int:
    """Run the profile on the rig through the engine, then estimate, print and record."""
    from rigloop.engine.console import ConsoleStatus
    from rigloop.engine.loop import Engine, EngineError

    driver = driver or make_driver(cfg, plan)
    stream = stream or sys.stdout
    a = cfg.actuator
    unit = f" {a.unit}" if a.unit else ""
    start = (f"{a.name} {plan.safe:g} -> {plan.u0:g}{unit} over {plan.ramp_s:.3g} s" if plan.ramp_s
             else f"{a.name} at {plan.u0:g}{unit}")
    held = (f"each held {plan.hold_max_s:g} s" if plan.hold_min_s == plan.hold_max_s
            else "each held until settled")
    steps = (f"up to {plan.steps} steps of ±{abs(plan.du):g}{unit} around it" if plan.order == 1 else
             f"up to {plan.steps // 4} excursion(s), up and down in turn: start at ±{abs(plan.du):g}{unit}, steps "
             f"of ±{abs(plan.du) / 2:g}{unit} while moving, stop")
    print(f"bump test on {cfg.rig}: {start}, {steps}, {held}, at most {plan.duration_s:.3g} s. "
          "The rig moves on its own: keep "
          "the hardwired e-stop within reach (safety.md); Ctrl-C stops at once.", file=sys.stderr)
    engine = Engine(cfg, out_dir=out_dir, duration_s=plan.duration_s, autostart=True, front_end="cli",
                    open_loop=driver)
    console = None
    if not quiet:
        console = ConsoleStatus(sys.stderr, output=cfg.control.output, actuator=a.name)
        engine.add_subscriber(console)

    def on_signal(signum, _frame):
        name = "Ctrl-C" if signum == signal.SIGINT else "SIGTERM"
        engine.request("estop", source=name, signal=True)

    old = {s: signal.signal(s, on_signal) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        result = engine.run()
    except EngineError as exc:
        print(f"rigloop identify: {exc}", file=sys.stderr)
        return EXIT_FAILED
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        if console:
            console.finish()
    session = result.session_dir
    if result.exit_code == EXIT_SIGNAL:
        print(f"rigloop identify: stopped by the operator ({result.stop_reason}); nothing estimated\n"
              f"session: {session}", file=sys.stderr)
        return EXIT_SIGNAL
    if result.outcome == "tripped":
        t = result.trip
        why = f"{t.cause} at t={_g(t.t)} s: {t.message}" if t else result.stop_reason
        hint = ("Choose an operating level and step (--operating-level, --step) that keep every channel "
                "inside its limits")
        if t is not None and t.channel:
            hint += (f"; if {t.channel} must move that far during the test, widen its limits for "
                     f"the test (--set limits.{t.channel}.max=...)")
        print(f"rigloop identify: the rig tripped ({why}); nothing estimated. {hint}.\n"
              f"session: {session}", file=sys.stderr)
        _record(session, {"plan": plan.as_dict(), "error": f"tripped: {why}"})
        return EXIT_TRIPPED
    if result.outcome != "completed":
        print(f"rigloop identify: the session ended without completing ({result.outcome}: "
              f"{result.stop_reason}); nothing estimated\nsession: {session}", file=sys.stderr)
        return EXIT_FAILED
    return _estimate_and_report(cfg, plan, driver.schedule(), session, tau_cl=tau_cl, write=write,
                                as_json=as_json, stream=stream)


def _estimate_and_report(cfg, plan, schedule, session, *, tau_cl, write, as_json, stream) -> int:
    from rigloop.analysis.identify import (
        EstimationError, PlanError, analyse_bump, config_snippet, judge, suggest_settings,
    )
    from rigloop.analysis.session import SessionError, load_session

    try:
        loaded = load_session(session)
        rows = loaded.active_mask()
        t = loaded.column("t", rows)
        y = loaded.column(cfg.control.output, rows)
        u = loaded.column("u", rows)
        if t.size == 0:
            raise EstimationError("the session holds no running rows")
        est = analyse_bump(t - t[0], y, u, order=cfg.control.order, plan=plan, schedule=schedule,
                           ts=cfg.period_s, output=cfg.control.output)
        refusals, notes = judge(est, plan)
        sugg = None if refusals else suggest_settings(est, plan, kind=cfg.control.estimator.kind,
                                                      tau_cl=tau_cl)
    except (EstimationError, SessionError, PlanError) as exc:
        print(f"rigloop identify: estimation failed: {exc}\nsession: {session}", file=sys.stderr)
        _record(session, {"plan": plan.as_dict(), "schedule": schedule.as_dict(), "error": str(exc)})
        return EXIT_FAILED
    header = (f"rigloop identify {cfg.rig}: {cfg.control.output} (order {est.order}) around "
              f"{cfg.actuator.name} = {plan.u0:g}, steps of ±{abs(plan.du):g}; session {Path(session).name}")
    snippet = config_snippet(sugg, header=header) if sugg is not None else None
    report = {
        "session": str(session), "rig": cfg.rig, "output": cfg.control.output,
        "output_unit": _unit(cfg, cfg.control.output), "actuator": cfg.actuator.name,
        "actuator_unit": cfg.actuator.unit, "plan": plan.as_dict(), "schedule": schedule.as_dict(),
        "estimates": est.as_dict(),
        "refusals": [r.as_dict() for r in refusals],
        "suggestions": sugg.as_dict() if sugg is not None else None, "snippet": snippet,
        "warnings": list(est.warnings) + notes, "written": None,
    }
    code = EXIT_OK if sugg is not None else EXIT_FAILED
    if write and snippet is not None:
        try:
            Path(write).write_text(snippet, encoding="utf-8")
            report["written"] = str(write)
        except OSError as exc:
            print(f"rigloop identify: could not write {write}: {exc}; the snippet is printed below",
                  file=sys.stderr)
            code = EXIT_FAILED
    _record(session, {k: v for k, v in report.items() if k not in ("session", "written")})
    if as_json:
        stream.write(json.dumps(plain(report), indent=2) + "\n")
    else:
        stream.write(render_text(cfg, plan, est, sugg, snippet, session, report["written"],
                                 refusals=refusals, notes=report["warnings"]))
    stream.flush()
    if refusals:
        lines = "\n".join(f"  - {r.reason}; try: {r.advice}" for r in refusals)
        print(f"rigloop identify: refused, the estimates do not hold together (no settings "
              f"suggested):\n{lines}\nsession: {session}", file=sys.stderr)
    return code


def _unit(cfg, channel: str) -> str:
    for c in cfg.channels:
        if c.name == channel:
            return c.unit
    return ""


def _record(session, block: dict) -> None:
    """Add the ``identify:`` block to the session's session.yaml (never loses the recording)."""
    if session is None:
        return
    import yaml

    from rigloop.engine.recorder import write_yaml_atomic

    path = Path(session) / "session.yaml"
    try:
        meta = yaml.safe_load(path.read_text(encoding="utf-8")) or {}
        meta["identify"] = plain(block)
        write_yaml_atomic(path, meta)
    except (OSError, yaml.YAMLError) as exc:
        print(f"rigloop identify: could not add the results to {path}: {exc}", file=sys.stderr)


def _g(x, digits: int = 4) -> str:
    if x is None or (isinstance(x, float) and not math.isfinite(x)):
        return "n/a"
    return f"{x:.{digits}g}"


def render_text(cfg, plan, est, sugg, snippet, session, written, *, refusals=(), notes=()) -> str:
    """The human-readable summary: what was done, each estimate with its unit, the suggestions
    (or the refusals and what to try)."""
    from rigloop.analysis.identify import NOISE_FRACTION

    a = cfg.actuator
    y_unit = _unit(cfg, cfg.control.output)
    m = est.order
    yu, au = y_unit or "unit", a.unit or "unit"
    base = f"({yu})" if "/" in yu else yu
    rate_unit = f"{base}/s" if m == 1 else f"{base}/s²"
    gain_unit = f"{yu} per {au}" if m == 1 else f"{base}/s per {au}"
    out = []
    w = out.append
    w(f"Bump test of {cfg.rig}: {cfg.control.output} (model order {m}) driven by {a.name}\n")
    w(f"  session   {session}\n")
    slew = (f"slew-limited at {plan.slew_per_s:g} {au}/s ({plan.slew_time_s:.3g} s per step)"
            if plan.slew_per_s else "no slew limit")
    holds = ", ".join(f"{s.hold_s:.3g}" for s in est.steps)
    if m == 1:
        what = f"{len(est.steps)} steps of ±{abs(plan.du):g} {au} around {plan.u0:g}"
    else:
        what = (f"{len(est.steps)} transitions around {plan.u0:g} (starts at ±{abs(plan.du):g} {au}, "
                f"steps of ±{abs(plan.du) / 2:g} {au} while moving, stops; only the steps while "
                "moving are estimated)")
    w(f"  profile   ramp {plan.safe:g} -> {plan.u0:g} {au} ({plan.ramp_s:.3g} s), "
      f"{what}, held {holds} s; {slew}\n")
    w(f"  sample period {est.ts * 1000:.4g} ms\n\n")
    labels = [f"{k + 1} {s.direction if s.kind in ('step', 'moving') else s.kind}"
              for k, s in enumerate(est.steps)]
    w(f"Estimates per step{'':<26}" + "".join(f"{label:>10}" for label in labels) + "   mean ± spread\n")

    def row(label, attr, mean=None, spread=None, unit=""):
        vals = [getattr(s, attr) if s.responded else None for s in est.steps]
        summary = "" if mean is None else f"{_g(mean):>10}" + (f" ± {_g(spread, 2)}" if spread is not None else "")
        w(f"  {label:<42}" + "".join(f"{_g(v, 3):>10}" for v in vals) + f"   {summary}  {unit}\n")

    row("alpha (initial slope of y^(m) per unit du)", "alpha", est.alpha, est.alpha_spread,
        f"{rate_unit} per {au}")
    row("  K/tau of the fit", "alpha_fit", unit=f"{rate_unit} per {au}")
    row("  initial slope, model-free (the check)", "alpha_slope", unit=f"{rate_unit} per {au}")
    row("    without the correction for the motion", "alpha_uncorrected", unit=f"{rate_unit} per {au}")
    row("static gain K (fit)" + (" of the rate" if m == 2 else ""), "gain_fit", est.gain, est.gain_spread,
        gain_unit)
    row("  from the steady levels, drift removed", "gain", est.gain_levels, unit=gain_unit)
    row("time constant tau", "tau", est.tau, unit="s")
    row("dead time theta", "theta", est.theta, unit="s")
    row("drift (level or rate per s)", "drift", unit=f"{yu}/s" if m == 1 else f"{rate_unit}")
    for label, sp in (("alpha of the steps up", est.alpha_up), ("alpha of the steps down", est.alpha_down),
                      ("K of the steps up", est.gain_up), ("K of the steps down", est.gain_down)):
        if sp is not None:
            w(f"  {label:<42}{_g(sp.mean):>10} ± {_g(sp.spread, 2)} ({sp.n} steps)\n")
    w(f"  {'noise floor':<42}{_g(est.noise_std):>10}  {yu} ({est.noise.source})\n")
    dz = est.dead_zone
    if dz is not None and dz.u_start is not None:
        w(f"  {'output starts to move on the ramp at':<42}{_g(dz.u_start):>10}  {au}"
          f"{' (a dead zone)' if dz.found else ''}\n")
    if m == 2:
        w("  (an integrating output has no static gain: K and tau describe its rate)\n")
    if notes:
        w("\nNotes\n")
        for n in notes:
            w(f"  - {n}\n")
    if sugg is None:
        w("\nRefused: the estimates do not hold together, so no settings are suggested\n")
        for r in refusals:
            w(f"  - {r.reason}\n    try: {r.advice}\n")
        return "".join(out)
    w(f"\nSuggestions for the model-free law ({sugg.law})\n")
    w(f"  alpha     {_g(sugg.alpha)} {rate_unit} per {au}\n")
    if m == 1:
        w(f"  kp        {_g(sugg.kp)} 1/s   closed-loop time constant {_g(sugg.tau_cl, 3)} s ({sugg.tau_cl_rule})\n")
    else:
        w(f"  kp, kd    {_g(sugg.kp)} 1/s², {_g(sugg.kd)} 1/s   omega = 1/tau_cl = {_g(1 / sugg.tau_cl, 3)} "
          f"rad/s, zeta = 1 (tau_cl {_g(sugg.tau_cl, 3)} s, {sugg.tau_cl_rule})\n")
    w(f"  window_s  {_g(sugg.window_s)} s ({sugg.window_samples} samples, {sugg.estimator_kind}): F noise "
      f"about {_g(sugg.sigma_f, 3)} {rate_unit}, target {_g(sugg.sigma_f_target, 3)} "
      f"({100 * NOISE_FRACTION:g} % of |alpha du|)\n")
    w(f"PID baseline (SIMC rules, tau_c = {_g(sugg.pid_tau_c, 3)} s, theta with sampling "
      f"{_g(sugg.pid_theta, 3)} s)\n")
    w(f"  kp {_g(sugg.pid_kp)}  ki {_g(sugg.pid_ki)}  kd {_g(sugg.pid_kd)}  pid_u0 {_g(sugg.pid_u0)}\n")
    for n in sugg.notes:
        w(f"  - {n}\n")
    w("\nConfig snippet" + (f" (written to {written})" if written else "") + ":\n\n")
    w(snippet)
    return "".join(out)
