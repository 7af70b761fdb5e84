"""``rigloop run CONFIG``: a headless session on the configured rig, recorded to disk.

Exit codes: 0 completed, 1 internal error, 2 config/usage error, 3 tripped, 4 completed but a
test-plan criterion failed, 130 stopped by Ctrl-C or SIGTERM (an e-stop: safe output at once,
then a clean recording).
"""

from __future__ import annotations

import argparse
import signal
import sys

from rigloop.commands._common import add_config_arguments, load_config_or_report
from rigloop.exit_codes import EXIT_INTERNAL, EXIT_USAGE

NAME = "run"
HELP = "run a recorded session headless on the configured rig (real or simulated)"


def add_arguments(parser) -> None:
    add_config_arguments(parser)
    parser.add_argument("--duration", type=float, metavar="S", help="run length in seconds (overrides duration_s)")
    parser.add_argument("--record-dir", dest="out", metavar="DIR",
                        help="folder for the session recording (overrides recording.dir)")
    parser.add_argument("--out", dest="out", help=argparse.SUPPRESS)   # the former name of --record-dir
    parser.add_argument("--plan", metavar="FILE", help="test plan YAML (overrides the config's plan)")
    parser.add_argument("--quiet", action="store_true", help="no live status line")


def run(args) -> int:
    sets = list(getattr(args, "set", None) or [])
    if args.plan:
        from pathlib import Path

        sets.append(f"plan={Path(args.plan).resolve()}")
    cfg = load_config_or_report(args.config, sets)
    if cfg is None:
        return EXIT_USAGE
    if args.duration is not None and not args.duration > 0:
        print(f"usage error: --duration {args.duration}: must be a positive number of seconds", file=sys.stderr)
        return EXIT_USAGE
    return run_headless(cfg, duration_s=args.duration, out_dir=args.out, quiet=args.quiet)


def run_headless(cfg, *, duration_s=None, out_dir=None, quiet=False, stream=None) -> int:
    from rigloop.engine.console import ConsoleStatus
    from rigloop.engine.loop import Engine, EngineError

    stream = stream or sys.stdout
    engine = Engine(cfg, out_dir=out_dir, duration_s=duration_s, autostart=True, front_end="cli")
    console = None
    if not quiet:
        console = ConsoleStatus(stream, output=cfg.control.output, actuator=cfg.actuator.name)
        engine.add_subscriber(console)

    def on_signal(signum, _frame):
        name = "Ctrl-C" if signum == signal.SIGINT else "SIGTERM"
        engine.request("estop", source=name, signal=True)

    old = {s: signal.signal(s, on_signal) for s in (signal.SIGINT, signal.SIGTERM)}
    try:
        result = engine.run()
    except EngineError as exc:
        print(f"rigloop run: {exc}", file=sys.stderr)
        if engine.session_dir:
            print(f"session: {engine.session_dir}", file=sys.stderr)
        return EXIT_INTERNAL
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        if console:
            console.finish()
    print_summary(result, stream)
    return result.exit_code


def print_summary(result, stream) -> None:
    s = result.summary
    w = stream.write
    w(f"outcome: {result.outcome}" + (f" ({result.stop_reason})" if result.stop_reason else "") + "\n")
    if result.trip is not None:
        t = result.trip
        w(f"trip: {t.cause} at t={_g(t.t)} s: {t.message}\n")
    rms = s.get("rms_error")
    w(f"samples: {s.get('samples')}  running: {s.get('running_samples')}  "
      f"RMS error: {_g(rms)}  max |e|: {_g(s.get('max_abs_error'))}\n")
    rej = s.get("rejected_frames") or {}
    w(f"link: lost {s.get('lost_samples', 0)}, rejected {rej.get('total_rejected', 0)}, "
      f"late ticks {s.get('late_ticks', 0)}\n")
    lat = s.get("latency_ms") or {}
    comp = s.get("compute_us") or {}
    w(f"loop timing: latency p50 {_g(lat.get('p50'))} ms, p99 {_g(lat.get('p99'))} ms; "
      f"compute p50 {_g(comp.get('p50'))} us, p99 {_g(comp.get('p99'))} us\n")
    if result.plan is not None:
        verdict = "PASS" if result.plan.get("passed") else "FAIL"
        w(f"test plan: {verdict}\n")
        for c in result.plan.get("criteria", []):
            mark = "PASS" if c.get("passed") else "FAIL"
            w(f"  {mark}  {c.get('segment') or 'run'}: {c.get('name')} = {_g(c.get('value'))} "
              f"(limit {c.get('limit')})\n")
    w(f"session: {result.session_dir}\n")
    stream.flush()


def _g(x) -> str:
    if x is None:
        return "-"
    try:
        return f"{float(x):.4g}"
    except (TypeError, ValueError):
        return str(x)
