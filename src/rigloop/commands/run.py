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
    return run_headless(cfg, duration_s=args.duration, out_dir=args.out, quiet=args.quiet)


def run_headless(cfg, *, duration_s=None, out_dir=None, quiet=False, stream=None) -> int:
    from rigloop.engine.console import ConsoleStatus
    from rigloop.engine.loop import Engine, EngineError
    from rigloop.engine.session import SessionRefused

    stream = stream or sys.stdout
    problem = duration_problem(duration_s, cfg.limits.max_duration_s)
    if problem:
        print(f"usage error: {problem}", file=sys.stderr)
        return EXIT_USAGE
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
    except SessionRefused as exc:
        print(f"rigloop run: refused: {exc}", file=sys.stderr)
        return EXIT_USAGE
    except EngineError as exc:
        print(f"rigloop run: {exc}", file=sys.stderr)
        if engine.session_dir:
            print(f"session: {engine.session_dir}", file=sys.stderr)
        return EXIT_INTERNAL
    except Exception as exc:  # noqa: BLE001 - the engine has stopped the rig and recorded the trip
        print(f"rigloop run: internal error ({type(exc).__name__}: {exc}); the rig was stopped and "
              f"the trip recorded (internal-error); the traceback is in engine.log", file=sys.stderr)
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


def duration_problem(duration_s, max_duration_s: float) -> str | None:
    """Why ``--duration`` cannot be used, or None; same rule as ``duration_s`` in the config."""
    if duration_s is None:
        return None
    if not duration_s > 0 or duration_s != duration_s or duration_s == float("inf"):
        return f"--duration {duration_s}: must be a positive number of seconds"
    if duration_s > max_duration_s:
        return (f"--duration {duration_s:g}: longer than limits.max_duration_s ({max_duration_s:g} s), "
                f"so the run would trip; shorten --duration or raise limits.max_duration_s "
                f"(--set limits.max_duration_s=...)")
    return None


def print_summary(result, stream) -> None:
    s = result.summary
    w = stream.write
    w(f"outcome: {result.outcome}" + (f" ({result.stop_reason})" if result.stop_reason else "") + "\n")
    if result.trip is not None:
        t = result.trip
        w(f"trip: {t.cause} at t={_g(t.t)} s: {t.message}\n")
    rms = s.get("rms_error")
    w(f"samples: {s.get('samples')}  running: {s.get('running_samples')}  "
      f"RMS error: {_g(rms)}  max |e|: {_g(s.get('max_abs_error'))} "
      f"(all running rows, lead-in included)\n")
    rej = s.get("rejected_frames") or {}
    w(f"link: lost {s.get('lost_samples', 0)}, rejected {rej.get('total_rejected', 0)}, "
      f"late ticks {s.get('late_ticks', 0)}"
      + (f", foreign frames {s['foreign_frames']}" if s.get("foreign_frames") else "")
      + (", authenticated" if s.get("authenticated") else "") + "\n")
    lat = s.get("latency_ms") or {}
    comp = s.get("compute_us") or {}
    w(f"loop timing: latency p50 {_g(lat.get('p50'))} ms, p99 {_g(lat.get('p99'))} ms; "
      f"compute p50 {_g(comp.get('p50'))} us, p99 {_g(comp.get('p99'))} us\n")
    if result.plan is not None:
        from rigloop.analysis.report_text import plan_lines

        for line in plan_lines(result.plan):
            w(line + "\n")
    w(f"session: {result.session_dir}\n")
    stream.flush()


def _g(x) -> str:
    if x is None:
        return "-"
    try:
        return f"{float(x):.4g}"
    except (TypeError, ValueError):
        return str(x)
