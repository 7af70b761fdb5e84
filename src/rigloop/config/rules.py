"""Rules that tie several keys together (the schema table checks keys one at a time).

Each rule reads the validated mapping and skips quietly when one of its inputs is already
reported (:data:`~rigloop.config.validate.INVALID`), so a user sees the root cause once. Rules may
also resolve file paths against the config file's folder (they check those files exist).
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable, Iterator
from pathlib import Path

from rigloop.config.problems import MISSING, ConfigError, Problem
from rigloop.config.schema import ORDER_OF_LAW, fixed_limit_settings, is_loopback
from rigloop.config.validate import INVALID

#: Columns that samples.csv writes itself (docs/recording.md); a channel may not take these names.
RESERVED_COLUMNS = ("t", "seq", "ref", "dref", "y", "e", "u_cmd", "u", "f_hat", "state", "status",
                    "latency_ms", "compute_us", "late")

#: Channels and actuator range of the simulated plants, used when rigloop.plants is not importable.
KNOWN_PLANTS = {
    "fan": (("speed_rpm", "current_a", "airflow_m3h", "temp_c"), (0.0, 100.0)),
    "motor": (("position_rad", "speed_rad_s", "current_a"), (-12.0, 12.0)),
}


def get(root: dict, path: str) -> object:
    """The validated value at a dotted path, or INVALID when it (or a parent) is bad or absent."""
    node: object = root
    for part in path.split("."):
        if isinstance(node, dict):
            node = node.get(part, INVALID)
        elif isinstance(node, list) and part.isdigit() and int(part) < len(node):
            node = node[int(part)]
        else:
            return INVALID
        if node is INVALID:
            return INVALID
    return node


def _valid(*values: object) -> bool:
    return all(v is not INVALID for v in values)


def _fmt(x: float) -> str:
    return f"{x:g}"


class RuleContext:
    def __init__(self, root: dict, base_dir: Path):
        self.root = root
        self.base_dir = base_dir

    def channel_names(self) -> list[str] | None:
        channels = get(self.root, "channels")
        if not isinstance(channels, list) or any(c is INVALID or c.get("name", INVALID) is INVALID
                                                 for c in channels):
            return None
        return [c["name"] for c in channels]

    def resolve(self, name: str) -> Path:
        path = Path(name).expanduser()
        return path if path.is_absolute() else self.base_dir / path


Rule = Callable[[RuleContext], Iterator[Problem]]
RULES: list[Rule] = []


def rule(fn: Rule) -> Rule:
    RULES.append(fn)
    return fn


def check_rules(root: dict, base_dir: Path) -> list[Problem]:
    ctx = RuleContext(root, base_dir)
    problems: list[Problem] = []
    for fn in RULES:
        problems.extend(fn(ctx))
    return problems


# ---------------------------------------------------------------------------------------------
@rule
def channel_names_are_unique_and_free(ctx: RuleContext) -> Iterator[Problem]:
    channels = get(ctx.root, "channels")
    if not isinstance(channels, list):
        return
    seen: dict[str, int] = {}
    settings = fixed_limit_settings()
    for index, channel in enumerate(channels):
        name = channel.get("name", INVALID) if isinstance(channel, dict) else INVALID
        if name is INVALID:
            continue
        key = f"channels.{index}.name"
        if name in seen:
            yield Problem(key, name, f"channel {seen[name]} has the same name; names must differ")
        elif name in RESERVED_COLUMNS:
            yield Problem(key, name, "is a column name samples.csv uses itself; pick another "
                                     f"name (taken: {', '.join(RESERVED_COLUMNS)})")
        elif name in settings:
            yield Problem(key, name, "is the name of a limits setting; pick another name")
        seen.setdefault(name, index)


#: Smallest |channels[].scale|: the device sends raw = (value - offset) / scale as float32, which
#: overflows (and the link rejects the frame) once a tiny scale blows raw values up.
CHANNEL_SCALE_MIN = 1e-9


@rule
def channel_scale_is_not_tiny(ctx: RuleContext) -> Iterator[Problem]:
    channels = get(ctx.root, "channels")
    if not isinstance(channels, list):
        return
    for index, channel in enumerate(channels):
        scale = channel.get("scale", INVALID) if isinstance(channel, dict) else INVALID
        if _valid(scale) and abs(scale) < CHANNEL_SCALE_MIN:
            yield Problem(f"channels.{index}.scale", scale,
                          f"is smaller than {CHANNEL_SCALE_MIN:g} in size: raw values (value - offset) "
                          f"/ scale would overflow the wire's float32; use a scale between "
                          f"{CHANNEL_SCALE_MIN:g} and 1e9 (negative for a reversed sensor)")


@rule
def actuator_range(ctx: RuleContext) -> Iterator[Problem]:
    low, high, safe = (get(ctx.root, f"actuator.{k}") for k in ("min", "max", "safe"))
    if _valid(low, high) and not low < high:
        yield Problem("actuator.max", high, f"must be greater than actuator.min ({_fmt(low)})")
        return
    if _valid(low, high, safe) and not low <= safe <= high:
        yield Problem("actuator.safe", safe, f"must lie within actuator.min..max "
                                             f"({_fmt(low)}..{_fmt(high)})")


@rule
def output_is_a_channel(ctx: RuleContext) -> Iterator[Problem]:
    output, names = get(ctx.root, "control.output"), ctx.channel_names()
    if _valid(output) and names is not None and output not in names:
        from rigloop.config.schema import sentences, suggest

        yield Problem("control.output", output, sentences(f"is not a channel{suggest(output, names)}",
                                                          f"Channels: {', '.join(dict.fromkeys(names))}"))


@rule
def law_matches_order(ctx: RuleContext) -> Iterator[Problem]:
    law, order = get(ctx.root, "control.law"), get(ctx.root, "control.order")
    if _valid(law, order) and law in ORDER_OF_LAW and ORDER_OF_LAW[law] != order:
        needed = ORDER_OF_LAW[law]
        others = [name for name, m in ORDER_OF_LAW.items() if m == order]
        yield Problem("control.order", order,
                      f"law {law} needs order {needed}; set control.order: {needed} or choose a "
                      f"law of order {order} ({', '.join(others)})")


#: Longest window the estimator may hold: past this a window is minutes long (no sane use) and the
#: per-sample buffers grow without bound; ``rigloop check`` already warns above 2000 samples.
WINDOW_SAMPLES_MAX = 100_000


def _samples(window_s: float, rate_hz: float) -> int:
    n = window_s * rate_hz
    return round(n) if math.isfinite(n) else WINDOW_SAMPLES_MAX + 1


@rule
def windows_hold_enough_samples(ctx: RuleContext) -> Iterator[Problem]:
    rate = get(ctx.root, "device.rate_hz")
    kind, window = get(ctx.root, "control.estimator.kind"), get(ctx.root, "control.estimator.window_s")
    order = get(ctx.root, "control.order")
    if not _valid(rate):
        return
    if _valid(kind, window, order) and kind != "one-step":
        least = 3 if order == 2 else 2
        n = _samples(window, rate)
        if n < least:
            yield Problem("control.estimator.window_s", window,
                          f"is {n} sample(s) at {_fmt(rate)} Hz; the {kind} estimator of order "
                          f"{order} needs at least {least} (window_s >= {_fmt(least / rate)})")
        elif n > WINDOW_SAMPLES_MAX:
            yield Problem("control.estimator.window_s", window,
                          f"holds more than {WINDOW_SAMPLES_MAX} samples at {_fmt(rate)} Hz; use "
                          f"window_s <= {_fmt(WINDOW_SAMPLES_MAX / rate)} (usually 5 to 50 samples)")
            return
    dwin = get(ctx.root, "control.derivative_window_s")
    if _valid(dwin) and dwin is not None and _samples(dwin, rate) > WINDOW_SAMPLES_MAX:
        yield Problem("control.derivative_window_s", dwin,
                      f"holds more than {WINDOW_SAMPLES_MAX} samples at {_fmt(rate)} Hz; use "
                      f"<= {_fmt(WINDOW_SAMPLES_MAX / rate)} s, or null for the estimator window")
        return
    if _valid(dwin) and dwin is not None and _samples(dwin, rate) < 2:
        yield Problem("control.derivative_window_s", dwin,
                      f"is {_samples(dwin, rate)} sample(s) at {_fmt(rate)} Hz; the derivative "
                      f"needs at least 2 (>= {_fmt(2 / rate)}), or null for the estimator window")


_CONTROL_FIELDS = {"law": "control.law", "order": "control.order", "alpha": "control.alpha",
                   "kp": "control.kp", "ki": "control.ki", "kd": "control.kd",
                   "estimator": "control.estimator.kind", "window_s": "control.estimator.window_s",
                   "derivative_window_s": "control.derivative_window_s",
                   "anti_windup": "control.anti_windup", "pid_u0": "control.pid_u0",
                   "input_delay_s": "control.input_delay_s",
                   "quantization_band": "control.quantization_band"}


@rule
def controller_builds(ctx: RuleContext) -> Iterator[Problem]:
    """Last line of defence: the controller accepts these parameters as a run would pass them."""
    control, rate = get(ctx.root, "control"), get(ctx.root, "device.rate_hz")
    if not isinstance(control, dict) or _has_invalid(control) or not _valid(rate):
        return
    windows = (control["estimator"]["window_s"], control["derivative_window_s"] or 0.0)
    if any(_samples(w, rate) > WINDOW_SAMPLES_MAX for w in windows):
        return                              # reported above
    try:
        from rigloop.control.controller import ControlParams
    except ImportError:
        return
    estimator = control["estimator"]
    try:
        params = ControlParams(
            law=control["law"], order=control["order"], alpha=control["alpha"], kp=control["kp"],
            ki=control["ki"], kd=control["kd"], estimator=estimator["kind"],
            window_s=estimator["window_s"], derivative_window_s=control["derivative_window_s"],
            anti_windup=control["anti_windup"], pid_u0=control["pid_u0"],
            input_delay_s=control["input_delay_s"], quantization_band=control["quantization_band"])
        params.window_samples(1.0 / rate)
        params.derivative_window_samples(1.0 / rate)
        params.estimation_samples(1.0 / rate)
    except ValueError as error:
        message = str(error)
        field = re.match(r"^([a-z_0-9]+)", message)
        key = _CONTROL_FIELDS.get(field.group(1), "control") if field else "control"
        yield Problem(key, MISSING, message)


@rule
def watchdog_covers_a_period(ctx: RuleContext) -> Iterator[Problem]:
    rate, watchdog = get(ctx.root, "device.rate_hz"), get(ctx.root, "device.watchdog_ms")
    if _valid(rate, watchdog) and round(watchdog * 1000) < round(1e6 / rate):
        yield Problem("device.watchdog_ms", watchdog,
                      f"is shorter than one sample period ({_fmt(1000 / rate)} ms at "
                      f"{_fmt(rate)} Hz), so the device would stop the rig between two samples; "
                      f"use at least {_fmt(1000 / rate)} ms, better several periods")


@rule
def channel_limits_are_sane(ctx: RuleContext) -> Iterator[Problem]:
    limits = get(ctx.root, "limits")
    if not isinstance(limits, dict):
        return
    settings = fixed_limit_settings()
    for name, spec in limits.items():
        if name in settings or not isinstance(spec, dict):
            continue
        low, high = spec.get("min", INVALID), spec.get("max", INVALID)
        if _valid(low, high) and low is not None and high is not None and not low < high:
            yield Problem(f"limits.{name}.max", high,
                          f"must be greater than limits.{name}.min ({_fmt(low)})")
        checks = [spec.get(k, INVALID) for k in ("min", "max", "rate_max", "frozen_s")]
        if _valid(*checks) and all(v is None for v in checks):
            yield Problem(f"limits.{name}", {k: v for k, v in spec.items() if k != "stop"},
                          "guards nothing; give at least one of min, max, rate_max, frozen_s "
                          "(or remove the entry)")


@rule
def recording_dir_is_usable(ctx: RuleContext) -> Iterator[Problem]:
    """A file where the folder should be, or a place nobody may write: say so before the run."""
    folder = get(ctx.root, "recording.dir")
    if not _valid(folder):
        return
    from rigloop.engine.disk_budget import recording_dir_problem

    path = Path(folder).expanduser()
    problem = recording_dir_problem(path if path.is_absolute() else Path.cwd() / path)
    if problem is not None:
        yield Problem("recording.dir", folder, problem)


@rule
def run_fits_max_duration(ctx: RuleContext) -> Iterator[Problem]:
    duration, cap = get(ctx.root, "duration_s"), get(ctx.root, "limits.max_duration_s")
    if _valid(duration, cap) and duration is not None and duration > cap:
        yield Problem("duration_s", duration,
                      f"is longer than limits.max_duration_s ({_fmt(cap)} s), so every run would "
                      f"trip; shorten duration_s or raise limits.max_duration_s")


# ---------------------------------------------------------------------------------------------
# reference


@rule
def reference_is_consistent(ctx: RuleContext) -> Iterator[Problem]:
    ref = get(ctx.root, "reference")
    if not isinstance(ref, dict):
        return
    found = list(_reference_rules(ctx, ref))
    yield from found
    if not found and not _has_invalid(ref):
        yield from _reference_builds(ctx, ref)


def _reference_rules(ctx: RuleContext, ref: dict) -> Iterator[Problem]:
    kind = ref.get("kind", INVALID)
    rate = get(ctx.root, "device.rate_hz")
    if kind == "levels":
        yield from _levels(ref)
    elif kind == "ramp":
        initial, to = ref.get("initial"), ref.get("to")
        if _valid(initial, to) and to == initial:
            yield Problem("reference.to", to, "equals reference.initial; a ramp must go "
                                              "somewhere (or use kind: levels)")
    elif kind in ("sine", "chirp") and _valid(rate):
        half_rate = rate / 2.0
        for name in ("freq_hz", "f0_hz", "f1_hz"):
            f = ref.get(name, None)
            if f is not None and f is not INVALID and f >= half_rate:
                yield Problem(f"reference.{name}", f,
                              f"must be below half the sample rate ({_fmt(half_rate)} Hz at "
                              f"{_fmt(rate)} Hz), better 20 times lower")
        f0, f1 = ref.get("f0_hz", None), ref.get("f1_hz", None)
        if kind == "chirp" and _valid(f0, f1) and f0 == f1:
            yield Problem("reference.f1_hz", f1, "equals reference.f0_hz; a chirp sweeps between "
                                                 "two frequencies (or use kind: sine)")
        blend, length = ref.get("blend_s", INVALID), ref.get("duration_s", INVALID)
        if kind == "chirp" and _valid(blend, length) and 2.0 * blend > length:
            yield Problem("reference.blend_s", blend,
                          f"the fade-in and fade-out ({_fmt(blend)} s each) must fit in "
                          f"reference.duration_s ({_fmt(length)} s); use at most {_fmt(length / 2)}")
    elif kind == "table":
        name = ref.get("file", INVALID)
        if _valid(name):
            path = ctx.resolve(name)
            message = check_reference_table(path)
            if message:
                yield Problem("reference.file", name, message)
            else:
                ref["file"] = str(path.resolve())


def _has_invalid(node: object) -> bool:
    if node is INVALID:
        return True
    if isinstance(node, dict):
        return any(_has_invalid(v) for v in node.values())
    if isinstance(node, list):
        return any(_has_invalid(v) for v in node)
    return False


_REFERENCE_KEY = re.compile(r"^(reference(?:\.[A-Za-z_]+|\[\d+\])*)")


def _reference_builds(ctx: RuleContext, ref: dict) -> Iterator[Problem]:
    """Last line of defence: the profile must also build, so a run never fails on it later."""
    try:
        from rigloop.control.reference import build_reference
    except ImportError:
        return
    try:
        build_reference(ref, base_dir=ctx.base_dir)
    except ValueError as error:
        message = str(error)
        match = _REFERENCE_KEY.match(message)
        key = re.sub(r"\[(\d+)\]", r".\1", match.group(1)) if match else "reference"
        yield Problem(key, MISSING, message)


def _levels(ref: dict) -> Iterator[Problem]:
    steps, default_blend = ref.get("steps", []), ref.get("blend_s", INVALID)
    if not isinstance(steps, list):
        return
    previous: tuple[int, float, float] | None = None
    for index, step in enumerate(steps):
        if not isinstance(step, dict):
            previous = None
            continue
        at = step.get("at", INVALID)
        blend = step.get("blend_s", default_blend)
        if not _valid(at, blend):
            previous = None
            continue
        if previous is not None:
            p_index, p_at, p_end = previous
            if at <= p_at:
                yield Problem(f"reference.steps.{index}.at", at,
                              f"must be later than step {p_index} (at {_fmt(p_at)} s); steps go "
                              f"in time order")
            elif at < p_end - 1e-12:
                yield Problem(f"reference.steps.{index}.at", at,
                              f"starts before step {p_index} has finished blending "
                              f"(at {_fmt(p_end)} s); move it or shorten step {p_index}'s blend_s")
        previous = (index, at, at + blend)


def check_reference_table(path: Path) -> str | None:
    """None if ``path`` is a usable ``t,r`` CSV table, else what is wrong with it. The reading
    itself is the reference builder's (:meth:`rigloop.control.reference.Table.from_csv`), so
    the check and the run can never disagree about a file."""
    if path.is_dir():
        return f"{path} is a folder; give a CSV file with header t,r"
    if not path.exists():
        return f"file not found (looked for {path.resolve()}); paths are relative to the config file"
    from rigloop.control.reference import Table

    try:
        Table.from_csv(path)
    except ValueError as error:
        return str(error).removeprefix("reference.file: ")
    return None


# ---------------------------------------------------------------------------------------------
# device


@rule
def device_files_exist(ctx: RuleContext) -> Iterator[Problem]:
    name = get(ctx.root, "device.sim.params_file")
    if not _valid(name) or name is None:
        return
    path = ctx.resolve(name)
    try:
        from rigloop.config.yaml_source import read_yaml_file

        data, _ = read_yaml_file(path, what="plant parameter")
    except ConfigError as error:
        yield Problem("device.sim.params_file", name, "; ".join(error.lines()))
        return
    if not isinstance(data, dict) or any(not isinstance(k, str) for k in data):
        yield Problem("device.sim.params_file", name,
                      f"{path.name} must hold a mapping of parameter names to values")
        return
    ctx.root["device"]["sim"]["params_file"] = str(path.resolve())


@rule
def key_file_is_usable(ctx: RuleContext) -> Iterator[Problem]:
    """The key must load now (exists, private, hex, 16..64 bytes): a run refused later would
    have connected first."""
    name = get(ctx.root, "device.auth.key_file")
    if not _valid(name) or name is None:
        return
    path = ctx.resolve(name)
    from rigloop.link.key_file import KeyFileError, load_key

    try:
        load_key(path)
    except KeyFileError as error:
        yield Problem("device.auth.key_file", name, str(error))
        return
    ctx.root["device"]["auth"]["key_file"] = str(path.resolve())


def _plant_facts(kind: str, params: dict) -> tuple[tuple[str, ...], tuple[float, float], str | None]:
    """(channel names, actuator range, problem with params) of a simulated plant."""
    try:
        from rigloop.plants.base import make_plant
    except ImportError:
        channels, span = KNOWN_PLANTS[kind]
        return channels, span, None
    try:
        plant = make_plant(kind, params or None)
    except (ValueError, TypeError, KeyError) as error:
        channels, span = KNOWN_PLANTS[kind]
        return channels, span, str(error).strip("'\"")
    return tuple(plant.channel_names), (float(plant.u_min), float(plant.u_max)), None


@rule
def simulated_rig_matches_plant(ctx: RuleContext) -> Iterator[Problem]:
    if get(ctx.root, "device.link") != "sim":
        return
    plant = get(ctx.root, "device.sim.plant")
    params, params_file = get(ctx.root, "device.sim.params"), get(ctx.root, "device.sim.params_file")
    if not _valid(plant, params, params_file):
        return
    merged: dict = {}
    if params_file:
        from rigloop.config.yaml_source import read_yaml_file

        try:
            data, _ = read_yaml_file(ctx.resolve(params_file), what="plant parameter")
            merged.update(data if isinstance(data, dict) else {})
        except ConfigError:
            return  # reported by device_files_exist
    merged.update(params)
    channels, (u_low, u_high), params_problem = _plant_facts(plant, merged)
    if params_problem:
        key = "device.sim.params" if params else "device.sim.params_file"
        yield Problem(key, params if params else params_file, params_problem)
    names = ctx.channel_names()
    if names is not None:
        for index, name in enumerate(names):
            if name not in channels:
                yield Problem(f"channels.{index}.name", name,
                              f"the simulated {plant} has no such channel; it offers "
                              f"{', '.join(channels)}")
    for key, value in (("actuator.min", get(ctx.root, "actuator.min")),
                       ("actuator.max", get(ctx.root, "actuator.max"))):
        if _valid(value) and not u_low <= value <= u_high:
            yield Problem(key, value, f"is outside what the simulated {plant} accepts "
                                      f"({_fmt(u_low)}..{_fmt(u_high)})")


@rule
def simulated_rig_options_fit_plant(ctx: RuleContext) -> Iterator[Problem]:
    """``device.sim.rig`` options the plant cannot have (a gear on the fan ...)."""
    if get(ctx.root, "device.link") != "sim":
        return
    plant, rig = get(ctx.root, "device.sim.plant"), get(ctx.root, "device.sim.rig")
    if not _valid(plant, rig) or _has_invalid(rig):
        return
    try:
        from rigloop.config.model import _rig_options
        from rigloop.plants.rig_config import build_rig
    except ImportError:
        return
    from rigloop.plants.rig import RigOptionError

    try:
        build_rig(plant, None, _rig_options(rig))
    except RigOptionError as error:
        yield Problem(f"device.sim.rig.{error.key}", error.value, error.why)
    except (ValueError, TypeError) as error:
        yield Problem("device.sim.rig", _rig_options(rig), str(error).strip("'\""))


@rule
def faults_parse(ctx: RuleContext) -> Iterator[Problem]:
    faults = get(ctx.root, "device.sim.faults")
    if not isinstance(faults, list):
        return
    try:
        from rigloop.sim.faults import parse_fault
    except ImportError:
        parse_fault = None
    names = ctx.channel_names()
    for index, text in enumerate(faults):
        if text is INVALID:
            continue
        key = f"device.sim.faults.{index}"
        if parse_fault is None:
            continue
        try:
            spec = parse_fault(text)
        except ValueError as error:
            # the problem line shows the spec already
            yield Problem(key, text, str(error).removeprefix(f"fault {text.strip()!r}: "))
            continue
        channel = getattr(spec, "channel", None)
        if channel and names is not None and channel not in names:
            yield Problem(key, text, f"channel {channel!r} is not a configured channel "
                                     f"({', '.join(names)})")


@rule
def udp_addresses(ctx: RuleContext) -> Iterator[Problem]:
    for key in ("device.udp.host", "device.udp.local_host"):
        host = get(ctx.root, key)
        if not isinstance(host, str):
            continue
        if "://" in host or " " in host.strip():
            yield Problem(key, host, "must be an IP address or host name only, such as "
                                     "192.168.1.50 or rig.local")
        elif host.count(":") == 1:
            port_key = "device.udp.port" if key == "device.udp.host" else "device.udp.local_port"
            yield Problem(key, host, f"must be an IP address or host name only; put the port "
                                     f"in {port_key}")
    host, local = get(ctx.root, "device.udp.host"), get(ctx.root, "device.udp.local_host")
    if (get(ctx.root, "device.link") == "udp" and isinstance(host, str) and isinstance(local, str)
            and is_loopback(local) and is_loopback(host) is False):
        yield Problem("device.udp.local_host", local,
                      f"a loopback address cannot reach the device at {host}; use this "
                      f"computer's address on that network, or 0.0.0.0")


# ---------------------------------------------------------------------------------------------
# test plan


@rule
def plan_is_valid(ctx: RuleContext) -> Iterator[Problem]:
    plan = get(ctx.root, "plan")
    if plan is INVALID or plan is None:
        return
    if isinstance(plan, str):
        path = ctx.resolve(plan)
        try:
            from rigloop.config.yaml_source import read_yaml_file

            data, _ = read_yaml_file(path, what="test plan")
        except ConfigError as error:
            yield Problem("plan", plan, "; ".join(error.lines()))
            ctx.root["plan"] = INVALID
            return
        if isinstance(data, dict) and set(data) == {"plan"} and isinstance(data["plan"], dict):
            data = data["plan"]
        if not isinstance(data, dict):
            yield Problem("plan", plan, f"{path.name} must hold a mapping (the plan's keys)")
            ctx.root["plan"] = INVALID
            return
        ctx.root["plan"] = plan = data
    try:
        from rigloop.analysis.plan import validate_plan
    except ImportError:
        return
    for problem in validate_plan(plan, key="plan") or ():
        yield Problem(*problem)


__all__ = ["RULES", "check_rules", "get", "check_reference_table", "KNOWN_PLANTS",
           "RESERVED_COLUMNS"]
