"""`rigloop sim`: run the simulated device (our fan or motor model behind the real protocol).

The engine starts it by itself when ``device.link: sim``; run it by hand to point a rig
configuration with ``device.link: udp`` or ``serial`` at it, or to try a firmware-side change.
"""

from __future__ import annotations

import argparse
import json
import math
import sys
from pathlib import Path
from rigloop.exit_codes import EXIT_USAGE

NAME = "sim"
HELP = "run the simulated device (fan or motor model) on UDP or a pseudo-terminal serial port"

DEFAULT_UDP = "127.0.0.1:47800"


def _udp_address(text: str) -> tuple[str, int]:
    host, sep, port = text.rpartition(":")
    if host.startswith("[") and host.endswith("]"):
        host = host[1:-1]
    if not sep or not host:
        raise argparse.ArgumentTypeError(f"{text!r} is not HOST:PORT; write e.g. 127.0.0.1:47800 "
                                         "(port 0 picks a free one)")
    try:
        number = int(port)
    except ValueError:
        number = -1
    if not 0 <= number <= 65535:
        raise argparse.ArgumentTypeError(f"port {port!r} in {text!r} must be a whole number "
                                         "0..65535 (0 picks a free one)")
    return host, number


def _number(minimum: float, what: str, *, strict: bool):
    def parse(text: str) -> float:
        try:
            value = float(text)
        except ValueError:
            value = math.nan
        ok = math.isfinite(value) and (value > minimum if strict else value >= minimum)
        if not ok:
            raise argparse.ArgumentTypeError(
                f"{text!r} is not allowed; give {what} {'>' if strict else '>='} {minimum:g}")
        return value
    return parse


def _seed(text: str) -> int:
    try:
        value = int(text)
    except ValueError:
        value = -1
    if value < 0:
        raise argparse.ArgumentTypeError(f"{text!r} is not allowed; give a whole number >= 0")
    return value


def _assignment(text: str) -> tuple[str, str]:
    key, eq, value = text.partition("=")
    if not eq or not key.strip():
        raise argparse.ArgumentTypeError(f"{text!r} is not KEY=VALUE")
    return key.strip(), value.strip()


def add_arguments(parser: argparse.ArgumentParser) -> None:
    from rigloop.sim.faults import fault_syntax

    where = parser.add_mutually_exclusive_group()
    where.add_argument("--udp", metavar="HOST:PORT", type=_udp_address, default=None,
                       help=f"listen on this UDP address (default {DEFAULT_UDP}; port 0 picks a "
                            "free one)")
    where.add_argument("--pty", action="store_true",
                       help="create a pseudo-terminal and act as a serial device on it "
                            "(POSIX only); its path is printed")
    parser.add_argument("--plant", choices=("fan", "motor"), default="fan",
                        help="plant model behind the device (default fan)")
    parser.add_argument("--clock", choices=("realtime", "lockstep"), default="realtime",
                        help="realtime: tick on the wall clock from start-up; lockstep: next "
                             "sample as soon as the command for the previous one arrived, device "
                             "time counted from the first CONFIGURE (default realtime)")
    parser.add_argument("--rate", metavar="HZ", type=_number(0, "a rate in Hz", strict=True),
                        default=100.0, help="sample rate until the host's CONFIGURE sets one "
                                            "(default 100)")
    parser.add_argument("--noise", metavar="SCALE", type=_number(0, "a noise scale", strict=False),
                        default=1.0, help="sensor noise: 0 none, 1 nominal (default 1); the sensors' "
                             "resolution applies in every case")
    parser.add_argument("--seed", metavar="N", type=_seed, default=1,
                        help="seed of the sensor noise and of random faults (default 1)")
    parser.add_argument("--params", metavar="FILE", type=Path, default=None,
                        help="YAML file of plant parameters: a mapping of name to value, as "
                             "device.sim.params in docs/config.md")
    parser.add_argument("--param", metavar="KEY=VALUE", type=_assignment, action="append",
                        default=[], help="one plant parameter, VALUE read as YAML; overrides "
                                         "--params (repeatable)")
    parser.add_argument("--rig", metavar="YAML", type=_mapping_text("--rig"), default=None,
                        help="imperfections around the plant, a mapping as device.sim.rig in "
                             "docs/config.md, e.g. '{dead_zone: 8, input_delay_s: 0.01}'")
    parser.add_argument("--sensors", metavar="YAML", type=_mapping_text("--sensors"),
                        default=None, help="sensor settings per channel, a mapping as "
                                           "device.sim.sensors in docs/config.md")
    parser.add_argument("--channels", metavar="A,B,C", default=None,
                        help="channels to send, in order (default: all of the plant's)")
    parser.add_argument("--scale", metavar="NAME=S", type=_assignment, action="append",
                        default=[], help="send channel NAME as (value - offset)/S (repeatable)")
    parser.add_argument("--offset", metavar="NAME=O", type=_assignment, action="append",
                        default=[], help="offset of channel NAME for that scaling (repeatable)")
    parser.add_argument("--fault", metavar="SPEC", action="append", default=[],
                        help="inject a fault, KIND[:key=value,...] (repeatable): " + fault_syntax()
                             + "; times (at=) are seconds after the first ARM the device receives, "
                               "so a late host does not miss them; at=0 (the default of drop and "
                               "corrupt) acts from start-up")
    parser.add_argument("--rx-log", metavar="FILE", type=Path, default=None,
                        help="write one JSON line per received frame (device time, type, "
                             "fields, outcome: accepted, ignored or rejected with its reason) "
                             "and per watchdog expiry")
    parser.add_argument("--trace", metavar="FILE", type=Path, default=None,
                        help="write one CSV row per tick: t_us, seq, applied, status, "
                             "last_cmd_seq, tx (sent, dropped, corrupted, silenced, no-peer, tx-error), "
                             "then the channels as sent")
    parser.add_argument("--quit-after", metavar="S", type=_number(0, "device seconds", strict=True),
                        default=None, help="exit after this many device seconds")
    parser.add_argument("--lockstep-wait-ms", metavar="MS", type=_number(0, "milliseconds", strict=True),
                        default=None, help="lockstep clock: wait this long for the host's answer before "
                                           "ticking anyway (default: one period)")
    parser.add_argument("--key-file", metavar="PATH", type=Path, default=None,
                        help="the rig's pre-shared key (hex, a file only its owner can read): every "
                             "frame must then carry a valid tag (docs/protocol.md §14)")
    parser.add_argument("--quit-with-parent", action="store_true",
                        help="quit when the process that started this one ends, as when the engine "
                             "starts the simulated device itself (always on with --clock lockstep)")
    parser.add_argument("--exit-with-parent", dest="quit_with_parent", action="store_true",
                        help=argparse.SUPPRESS)   # the former name, hidden


class _UsageError(Exception):
    pass


def _load_params(args: argparse.Namespace) -> dict:
    import yaml

    params: dict = {}
    if args.params is not None:
        try:
            text = args.params.read_text(encoding="utf-8")
        except OSError as exc:
            raise _UsageError(f"--params {args.params}: cannot read ({exc.strerror or exc}); "
                              "give an existing YAML file") from None
        try:
            data = yaml.safe_load(text)
        except yaml.YAMLError as exc:
            mark = getattr(exc, "problem_mark", None)
            where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark else ""
            raise _UsageError(f"--params {args.params}: not valid YAML{where}; fix the file") from None
        if data is None:
            data = {}
        if not isinstance(data, dict):
            raise _UsageError(f"--params {args.params}: holds a {type(data).__name__}, not a "
                              "mapping of parameter name to value")
        params.update(data)
    for key, text in args.param:
        try:
            params[key] = _yaml_or_json(text) if text else None
        except yaml.YAMLError:
            raise _UsageError(f"--param {key}={text!r}: the value is not valid YAML") from None
    return params


def _scaling(pairs: list[tuple[str, str]], option: str, names: list[str]) -> dict[str, float]:
    out: dict[str, float] = {}
    for name, text in pairs:
        if name not in names:
            raise _UsageError(f"{option} {name}={text}: {name!r} is not a sent channel; sent "
                              f"channels: {', '.join(names)}")
        try:
            value = float(text)
        except ValueError:
            value = math.nan
        if not math.isfinite(value) or (option == "--scale" and value == 0.0):
            raise _UsageError(f"{option} {name}={text!r}: give a finite number"
                              + (" other than 0" if option == "--scale" else ""))
        out[name] = value
    return out


def _yaml_or_json(text: str):
    """A value written as JSON (what the engine passes: ``1e-06`` is a number there, while YAML
    1.1 reads it as text) or else as YAML (what a user types)."""
    import yaml

    try:
        return json.loads(text)
    except ValueError:
        return yaml.safe_load(text)


def _mapping_text(option: str):
    """argparse type: YAML (or JSON) text holding a mapping."""
    def parse(text: str) -> dict:
        import yaml

        try:
            data = _yaml_or_json(text)
        except yaml.YAMLError:
            raise argparse.ArgumentTypeError(f"{option}: {text!r} is not valid YAML") from None
        if not isinstance(data, dict):
            raise argparse.ArgumentTypeError(f"{option}: give a mapping such as '{{key: value}}', "
                                             f"got {text!r}")
        return data
    return parse


def build_from_args(args: argparse.Namespace):
    """(device, transport, options) from parsed arguments; raises _UsageError / ValueError."""
    from rigloop.sim.device import SentChannel, build_device
    from rigloop.sim.server import PtyTransport, ServerOptions, UdpTransport

    params = _load_params(args)
    if args.channels is not None:
        names = [n.strip() for n in args.channels.split(",") if n.strip()]
        if not names:
            raise _UsageError(f"--channels {args.channels!r}: list at least one channel name")
    else:
        from rigloop.plants import make_plant

        names = list(make_plant(args.plant, params).channel_names)
    scales = _scaling(args.scale, "--scale", names)
    offsets = _scaling(args.offset, "--offset", names)
    channels = [SentChannel(n, scales.get(n, 1.0), offsets.get(n, 0.0)) for n in names]
    key = None
    if args.key_file is not None:
        from rigloop.link.key_file import KeyFileError, load_key

        try:
            key = load_key(args.key_file)
        except KeyFileError as exc:
            raise _UsageError(f"--key-file {exc}") from None
    device = build_device(args.plant, params=params, channels=channels, rate_hz=args.rate,
                          noise=args.noise, seed=args.seed, faults=args.fault,
                          rig=args.rig, sensors=args.sensors, key=key)
    options = ServerOptions(clock=args.clock, quit_after_s=args.quit_after,
                            exit_with_parent=args.quit_with_parent, rx_log=args.rx_log,
                            trace=args.trace,
                            lockstep_wait_s=None if args.lockstep_wait_ms is None else args.lockstep_wait_ms / 1000)
    for option, path in (("--rx-log", args.rx_log), ("--trace", args.trace)):
        if path is not None and not path.parent.is_dir():
            raise _UsageError(f"{option} {path}: folder {str(path.parent)!r} does not exist; "
                              "create it or choose another path")
    if args.pty:
        if sys.platform.startswith("win"):
            raise _UsageError("--pty needs a POSIX system (Linux, macOS); use --udp on Windows")
        transport = PtyTransport()
    else:
        host, port = args.udp if args.udp is not None else _udp_address(DEFAULT_UDP)
        try:
            transport = UdpTransport(host, port)
        except OSError as exc:
            raise _UsageError(f"--udp {host}:{port}: {exc}") from None
    return device, transport, options


def run(args: argparse.Namespace) -> int:
    from rigloop.sim.faults import FaultSpecError
    from rigloop.sim.server import SimServer

    try:
        device, transport, options = build_from_args(args)
    except (_UsageError, FaultSpecError, ValueError) as exc:
        print(f"rigloop sim: error: {exc}", file=sys.stderr)
        return EXIT_USAGE
    try:
        server = SimServer(device, transport, options)
    except OSError as exc:
        transport.close()
        print(f"rigloop sim: error: cannot open a log file ({exc}); check the path", file=sys.stderr)
        return EXIT_USAGE
    server.install_signal_handlers()
    code = server.run()
    # One machine-readable line on exit: what ended the run and every counter.
    summary = {"stop": server.stop_reason, "ticks": device.ticks, "overruns": device.overruns,
               "rejected": device.rejects.as_dict(), "ignored": device.ignored,
               "tx": server.tx_results, "faults": device.faults.counters,
               "foreign": device.foreign, "binds": device.bind_count, "releases": device.releases}
    print("rigloop-sim summary " + json.dumps(summary, separators=(",", ":")), file=sys.stderr,
          flush=True)
    return code
