"""The configuration schema: ONE table of keys from which validation runs and docs are checked.

Each :class:`Key` gives the dotted path, the value type (which knows what it allows), the default,
and a one-line meaning. Path notation: ``channels[].name`` is the ``name`` of every item of the
``channels`` list; ``limits.<channel>.max`` is the ``max`` under any channel name in ``limits``.
Rules that involve several keys (``actuator.min <= safe <= max`` ...) live in
:mod:`rigloop.config.rules`; the generic walk over this table is :mod:`rigloop.config.validate`.
"""

from __future__ import annotations

import difflib
import math
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass


class _Marker:
    def __init__(self, name: str):
        self.name = name

    def __repr__(self) -> str:
        return self.name


#: Default of a key the user must give.
REQUIRED = _Marker("REQUIRED")
#: Default of an optional key that is left out of the validated mapping when not given.
OMIT = _Marker("OMIT")


@dataclass(frozen=True)
class Computed:
    """A default that depends on other keys; ``fn(root)`` gets the validated root mapping."""

    fn: Callable[[dict], object]
    text: str


def suggest(word: str, candidates) -> str:
    """``" - did you mean 'x'?"`` when a close candidate exists, else ``""``."""
    names = [str(c) for c in candidates]
    close = difflib.get_close_matches(str(word), names, n=1, cutoff=0.6)
    if not close and len(str(word)) >= 3:
        close = [n for n in names if n.lower().startswith(str(word).lower())][:1]
    return f" - did you mean {close[0]!r}?" if close else ""


def sentences(*parts: str) -> str:
    """Join message parts as sentences ("a - did you mean 'b'? Keys: ..." / "a. Keys: ...")."""
    out = ""
    for part in (p for p in parts if p):
        out = part if not out else out + (" " if out.endswith(("?", ".")) else ". ") + part
    return out


# --------------------------------------------------------------------------------------------
# Value types. ``check`` returns (converted value, None) or (None, message saying what is allowed)


class ValueType:
    def describe(self) -> str:
        raise NotImplementedError

    def check(self, value: object) -> tuple[object, str | None]:
        raise NotImplementedError


def _numeric_text_hint(value: object) -> str:
    if isinstance(value, str):
        try:
            float(value)
        except ValueError:
            return ""
        return "; remove the quotes so that YAML reads a number"
    return ""


def _type_name(value: object) -> str:
    if isinstance(value, bool):
        return "true/false"
    if isinstance(value, str):
        return "text"
    if isinstance(value, Mapping):
        return "a mapping"
    if isinstance(value, (list, tuple)):
        return "a list"
    if isinstance(value, (int, float)):
        return "a number"
    return type(value).__name__


@dataclass(frozen=True)
class Number(ValueType):
    """A finite real number (an integer is fine; true/false is not a number)."""

    gt: float | None = None
    ge: float | None = None
    lt: float | None = None
    le: float | None = None
    nonzero: bool = False

    def describe(self) -> str:
        parts = []
        for op, bound in ((">", self.gt), (">=", self.ge), ("<", self.lt), ("<=", self.le)):
            if bound is not None:
                parts.append(f"{op} {bound:g}")
        noun = "a non-zero number" if self.nonzero else "a number"
        return noun + (" " + " and ".join(parts) if parts else "")

    def check(self, value):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            return None, (f"must be {self.describe()}, not {_type_name(value)}"
                          f"{_numeric_text_hint(value)}")
        x = float(value)
        if not math.isfinite(x):
            return None, f"must be {self.describe()} (finite)"
        if ((self.gt is not None and not x > self.gt) or (self.ge is not None and not x >= self.ge)
                or (self.lt is not None and not x < self.lt)
                or (self.le is not None and not x <= self.le) or (self.nonzero and x == 0.0)):
            return None, f"must be {self.describe()}"
        return x, None


@dataclass(frozen=True)
class Integer(ValueType):
    """A whole number (``5.0`` is accepted as 5)."""

    ge: int | None = None
    le: int | None = None

    def describe(self) -> str:
        if self.ge is not None and self.le is not None:
            return f"a whole number from {self.ge} to {self.le}"
        if self.ge is not None:
            return f"a whole number >= {self.ge}"
        return "a whole number"

    def check(self, value):
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            return None, (f"must be {self.describe()}, not {_type_name(value)}"
                          f"{_numeric_text_hint(value)}")
        if isinstance(value, float) and not (math.isfinite(value) and value.is_integer()):
            return None, f"must be {self.describe()} (no fraction)"
        n = int(value)
        if (self.ge is not None and n < self.ge) or (self.le is not None and n > self.le):
            return None, f"must be {self.describe()}"
        return n, None


@dataclass(frozen=True)
class Flag(ValueType):
    """true or false (YAML 1.1 also reads yes/no/on/off as these; quoted text is not a flag)."""

    def describe(self) -> str:
        return "true or false"

    def check(self, value):
        if isinstance(value, bool):
            return value, None
        return None, f"must be {self.describe()}, not {_type_name(value)}"


@dataclass(frozen=True)
class Text(ValueType):
    pattern: str | None = None
    pattern_doc: str = ""
    allow_empty: bool = False

    def describe(self) -> str:
        if self.pattern_doc:
            return self.pattern_doc
        return "text" if self.allow_empty else "non-empty text"

    def check(self, value):
        if not isinstance(value, str):
            return None, f"must be {self.describe()}, not {_type_name(value)}"
        if not self.allow_empty and not value.strip():
            return None, f"must be {self.describe()}"
        if self.pattern and not re.fullmatch(self.pattern, value):
            return None, f"must be {self.describe()}"
        return value, None


@dataclass(frozen=True)
class Choice(ValueType):
    options: tuple[object, ...]

    def describe(self) -> str:
        return "one of " + " | ".join(str(o) for o in self.options)

    def check(self, value):
        if isinstance(value, bool):
            return None, f"must be {self.describe()}"
        if value in self.options and type(value) in {type(o) for o in self.options}:
            return value, None
        if isinstance(value, float) and value.is_integer() and int(value) in self.options:
            return int(value), None
        if isinstance(value, str):
            if any(value.strip() == str(o) for o in self.options if not isinstance(o, str)):
                return None, f"must be {self.describe()}; remove the quotes"
            folded = {str(o).lower(): o for o in self.options if isinstance(o, str)}
            if value.lower() in folded:
                return None, (f"must be {self.describe()} (letter case matters; write "
                              f"{folded[value.lower()]!s})")
            names = [o for o in self.options if isinstance(o, str)]
            return None, f"must be {self.describe()}{suggest(value, names)}"
        return None, f"must be {self.describe()}"


@dataclass(frozen=True)
class Section(ValueType):
    """A mapping with the keys listed under it in the table.

    ``wildcard`` names the placeholder for free keys (``<channel>``); those keys must be names
    from the validated list ``wildcard_from`` (a root key whose items have a ``name``).
    """

    wildcard: str | None = None
    wildcard_from: str | None = None

    def describe(self) -> str:
        return "a mapping (indented key: value lines)"

    def check(self, value):
        if isinstance(value, Mapping):
            return value, None
        return None, f"must be {self.describe()}, not {_type_name(value)}"


@dataclass(frozen=True)
class ListOf(ValueType):
    """A list; ``item`` is a value type, or a Section whose keys are listed as ``path[].key``."""

    item: ValueType
    min_items: int = 0
    max_items: int | None = None

    def describe(self) -> str:
        what = "mappings" if isinstance(self.item, Section) else f"items ({self.item.describe()})"
        if self.max_items is not None:
            return f"a list of {self.min_items} to {self.max_items} {what}"
        if self.min_items:
            return f"a list of at least {self.min_items} {what}"
        return f"a list of {what}"

    def check(self, value):
        if not isinstance(value, (list, tuple)):
            return None, f"must be {self.describe()}, not {_type_name(value)}"
        too_many = self.max_items is not None and len(value) > self.max_items
        if len(value) < self.min_items or too_many:
            return None, f"has {len(value)} items; must be {self.describe()}"
        return list(value), None


@dataclass(frozen=True)
class FreeMapping(ValueType):
    """A mapping with text keys whose values are checked elsewhere (plant parameters)."""

    def describe(self) -> str:
        return "a mapping of parameter names to values"

    def check(self, value):
        if not isinstance(value, Mapping):
            return None, f"must be {self.describe()}, not {_type_name(value)}"
        bad = [k for k in value if not isinstance(k, str)]
        if bad:
            return None, f"keys must be parameter names (text); {bad[0]!r} is not"
        return dict(value), None


@dataclass(frozen=True)
class MappingOrPath(ValueType):
    """Either a mapping written in place, or the path of a YAML file holding it."""

    def describe(self) -> str:
        return "a mapping, or the path of a YAML file (relative to the config file)"

    def check(self, value):
        if isinstance(value, Mapping):
            return dict(value), None
        if isinstance(value, str) and value.strip():
            return value, None
        return None, f"must be {self.describe()}, not {_type_name(value)}"


# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Key:
    path: str
    type: ValueType
    default: object
    doc: str
    nullable: bool = False
    #: (sibling key, allowed values): the key exists only when the sibling has one of the values.
    when: tuple[str, tuple[str, ...]] | None = None

    @property
    def name(self) -> str:
        return self.path.rpartition(".")[2]

    @property
    def parent(self) -> str:
        return self.path.rpartition(".")[0]


NAME_PATTERN = r"[A-Za-z_][A-Za-z0-9_]*"
NAME_DOC = "a name of letters, digits and _ that does not start with a digit"
SIM_PLANTS = ("fan", "motor")
LAWS = ("iP", "iPI", "iPD", "iPID", "PID")
ORDER_OF_LAW = {"iP": 1, "iPI": 1, "iPD": 2, "iPID": 2}
REFERENCE_KINDS = ("levels", "ramp", "sine", "chirp", "table")

_LOOPBACK_NAMES = {"localhost", "ip6-localhost"}


def is_loopback(host: str) -> bool | None:
    """True/False for addresses and ``localhost``; None for other host names (unknown)."""
    import ipaddress

    if host.lower() in _LOOPBACK_NAMES:
        return True
    try:
        return ipaddress.ip_address(host).is_loopback
    except ValueError:
        return None


def _default_watchdog_ms(root: dict) -> float:
    return min(WATCHDOG_MS_MAX, max(100.0, 3000.0 / root["device"]["rate_hz"]))


def interface_towards(host: str) -> str | None:
    """The local address this computer would send from to reach ``host`` (an IP address), or None.

    A connected UDP socket sends nothing: connecting only asks the routing table. A host name is
    not looked up (no DNS while a config is read), so it gives None too.
    """
    import ipaddress
    import socket

    try:
        addr = ipaddress.ip_address(host.split("%", 1)[0])
    except ValueError:
        return None
    family = socket.AF_INET6 if addr.version == 6 else socket.AF_INET
    try:
        with socket.socket(family, socket.SOCK_DGRAM) as sock:
            sock.connect((host, 9))
            local = sock.getsockname()[0]
    except OSError:
        return None
    return None if ipaddress.ip_address(local.split("%", 1)[0]).is_unspecified else local


def _default_local_host(root: dict) -> str:
    """Listen where the device can answer, and nowhere else (protocol 1.1 threat model, §15)."""
    host = root["device"]["udp"]["host"]
    if is_loopback(host):
        return "127.0.0.1"
    return interface_towards(host) or "0.0.0.0"


def _default_order(root: dict) -> int:
    return ORDER_OF_LAW.get(root["control"]["law"], 1)


def _default_window_s(root: dict) -> float:
    return 10.0 / root["device"]["rate_hz"]


def _default_blend_s(root: dict) -> object:
    return OMIT if root["reference"]["kind"] == "table" else 1.0


_LEVEL_KINDS = ("levels", "ramp", "sine", "chirp")

# Hard bounds where no sane use exists (past them a run fails or a protection is void):
RIG_NAME_MAX = 64              # the session folder name is "<UTC time>_<rig>"; file names stop at 255
WATCHDOG_MS_MAX = 60000.0      # the rig holds its last command this long if the host dies;
                               # rigloop check warns far below (config/loosened.py)
LINK_ERRORS_MAX = 10000        # rejected frames per window: more is no check at all
OVERRUNS_MAX = 1000000         # late ticks per window (20 kHz x 50 s)
MAX_DURATION_S_MAX = 604800.0  # one week; a longer unattended run needs its own supervision
COUNT_WINDOW_S_MAX = 60.0      # a burst window longer than a minute is no burst
BLEND_S_MIN = 1e-6             # the wire's time resolution (1 us); shorter is a raw step
CHANNEL_SCALE_MAX = 1e9        # raw values travel as float32: scale and offset keep them finite
FLOAT32_MAX = 3.4028234663852886e38   # actuator values travel as float32 (CONFIGURE's clamps)
_WIRE = Number(ge=-FLOAT32_MAX, le=FLOAT32_MAX)
SIM_NOISE_MAX = 1000.0         # x nominal sensor noise; far past any rig, short of float overflow
_BLEND = Number(gt=0, ge=BLEND_S_MIN)
_NUM = Number()
_POS = Number(gt=0)
_NONNEG = Number(ge=0)

SCHEMA: tuple[Key, ...] = (
    Key("rig", Text(r"[A-Za-z0-9_.-]{1,%d}" % RIG_NAME_MAX,
                    f"a name of at most {RIG_NAME_MAX} letters, digits, '_', '.' and '-'"), "rig",
        "rig name, used in session folder names"),
    # ---- device
    Key("device", Section(), {}, "how to reach the device and how it samples"),
    Key("device.link", Choice(("sim", "udp", "serial")), "sim",
        "transport: the built-in simulated device, UDP, or a serial port"),
    Key("device.url", Text(), None,
        "optional URL instead of link + sub-section: udp://HOST:PORT, "
        "serial:///dev/ttyACM0?baud=921600, sim://fan; it wins over them", nullable=True),
    Key("device.rate_hz", Number(gt=0, le=20000), 100.0,
        "device sample rate = loop rate [Hz]"),
    Key("device.watchdog_ms", Number(gt=0, le=WATCHDOG_MS_MAX),
        Computed(_default_watchdog_ms, "max(100, 3 sample periods)"),
        "device command watchdog [ms]; no command for this long -> safe output; >= 1 period"),
    Key("device.pacing", Choice(("device", "host")), "device",
        "who sets the loop clock: the device's samples, or a host timer using the newest sample"),
    Key("device.sim", Section(), {}, "settings of the simulated device (link: sim)"),
    Key("device.sim.plant", Choice(SIM_PLANTS), "fan", "simulated plant"),
    Key("device.sim.clock", Choice(("realtime", "lockstep")), "realtime",
        "realtime: samples on a wall-clock timer; lockstep: next sample as soon as the command "
        "arrives (deterministic, faster than real time)"),
    Key("device.sim.noise", Number(ge=0, le=SIM_NOISE_MAX), 1.0,
        "sensor noise scale: 0 = none, 1 = nominal"),
    Key("device.sim.seed", Integer(ge=0, le=2**32 - 1), 1, "random seed of noise and faults"),
    Key("device.sim.params", FreeMapping(), {},
        "plant parameter overrides by name (checked against the plant's parameters)"),
    Key("device.sim.params_file", Text(), None,
        "YAML file with plant parameters (relative to the config file); params win over it",
        nullable=True),
    Key("device.sim.faults", ListOf(Text()), [],
        "fault injections, each KIND[:key=value,...] as for rigloop sim --fault"),
    # Imperfections of the simulated rig (rigloop.plants.rig; all off by default).
    Key("device.sim.rig", Section(), {},
        "imperfections around the simulated plant: actuator, delay, gear, tach, load"),
    Key("device.sim.rig.dead_zone", _NONNEG, 0.0,
        "actuator dead zone half-width around zero drive [actuator unit]; full scale kept"),
    Key("device.sim.rig.input_delay_s", Number(ge=0, le=1), 0.0,
        "transport delay between the applied actuator value and the plant [s]"),
    Key("device.sim.rig.drive_sign", Choice((1, -1)), 1,
        "-1: the motor leads are swapped, a positive command turns it backwards"),
    Key("device.sim.rig.gear_ratio", _POS, 1.0,
        "motor: gearbox ratio, motor turns per output turn (angle and speed at the output)"),
    Key("device.sim.rig.backlash_rad", _NONNEG, 0.0,
        "motor: play of the gearbox at the output shaft [rad]"),
    Key("device.sim.rig.tach_pulses_per_rev", Integer(ge=0, le=10000), 0,
        "pulse tach on the speed channel: pulses per motor turn (0 = a direct speed reading)"),
    Key("device.sim.rig.tach_timeout_s", _POS, 0.2,
        "the tach reads 0 when no pulse came for this long [s]"),
    Key("device.sim.rig.load", Section(), {},
        "load torque at the motor shaft besides the plant's own [N m, positive brakes]"),
    Key("device.sim.rig.load.drift_nm", _NONNEG, 0.0, "amplitude of a slow sinusoidal drift [N m]"),
    Key("device.sim.rig.load.drift_period_s", _POS, 30.0, "period of that drift [s]"),
    Key("device.sim.rig.load.walk_nm", _NONNEG, 0.0,
        "random-walk intensity [N m/sqrt(s)] (std after t seconds: walk_nm*sqrt(t))"),
    Key("device.sim.rig.load.steps", ListOf(Section()), [],
        "load steps, each {at_s, torque_nm} added from that time on"),
    Key("device.sim.rig.load.steps[].at_s", _NONNEG, REQUIRED, "time of the load step [s]"),
    Key("device.sim.rig.load.steps[].torque_nm", _NUM, REQUIRED, "torque added [N m]"),
    Key("device.sim.rig.load.ripple_nm", _NONNEG, 0.0,
        "motor: amplitude of a torque repeating with the output angle (an arm's weight) [N m]"),
    Key("device.sim.rig.load.ripple_per_rev", _POS, 1.0, "cycles of that torque per output turn"),
    Key("device.sim.sensors", Section(wildcard="<channel>", wildcard_from="channels"), {},
        "simulated sensors per channel (the key is a channel name); unset parts are nominal"),
    Key("device.sim.sensors.<channel>", Section(), {}, "sensor of one channel"),
    Key("device.sim.sensors.<channel>.noise_std", _NONNEG, OMIT,
        "additive noise std dev [channel unit], scaled by device.sim.noise"),
    Key("device.sim.sensors.<channel>.relative_noise", _NONNEG, OMIT,
        "multiplicative noise std dev (0.02 = 2 % of the value), scaled by device.sim.noise"),
    Key("device.sim.sensors.<channel>.quantum", _NONNEG, OMIT,
        "resolution of the reading [channel unit]; 0 = none"),
    Key("device.udp", Section(), {}, "UDP settings (link: udp)"),
    Key("device.udp.host", Text(), "127.0.0.1", "device IP address or host name"),
    Key("device.udp.port", Integer(ge=1, le=65535), 47800, "device UDP port"),
    Key("device.udp.local_host", Text(), Computed(_default_local_host,
                                                   "127.0.0.1 for a local device, else this "
                                                   "computer's address on the route to the device "
                                                   "(0.0.0.0 if none is known, e.g. a host name)"),
        "local address to bind; must be able to reach the device"),
    Key("device.udp.local_port", Integer(ge=0, le=65535), 0, "local UDP port, 0 = any free port"),
    Key("device.auth", Section(), {}, "authenticated frames (docs/protocol.md §14)"),
    Key("device.auth.key_file", Text(), None,
        "file holding the rig's pre-shared key in hex (16..64 bytes), readable by its owner only "
        "(chmod 600); every frame then carries a tag; null = unauthenticated (loopback only)",
        nullable=True),
    Key("device.serial", Section(), {}, "serial settings (link: serial)"),
    Key("device.serial.port", Text(), "/dev/ttyACM0",
        "serial port name (/dev/ttyACM0, COM3), the serial:///dev/pts/N form `rigloop sim --pty` "
        "prints, or a pyserial URL"),
    Key("device.serial.baud", Integer(ge=1), 921600,
        "baud rate (a USB CDC device ignores it; a UART needs it)"),
    # ---- channels and actuator
    Key("channels", ListOf(Section(), 1, 32), REQUIRED,
        "measured channels, in the order the device sends them"),
    Key("channels[].name", Text(NAME_PATTERN, NAME_DOC), REQUIRED,
        "channel name (a column of samples.csv)"),
    Key("channels[].unit", Text(allow_empty=True), "", "engineering unit, for labels"),
    Key("channels[].scale", Number(ge=-CHANNEL_SCALE_MAX, le=CHANNEL_SCALE_MAX, nonzero=True), 1.0,
        "value = raw * scale + offset"),
    Key("channels[].offset", Number(ge=-CHANNEL_SCALE_MAX, le=CHANNEL_SCALE_MAX), 0.0,
        "value = raw * scale + offset"),
    Key("channels[].resolution", _NONNEG, None,
        "smallest step of the reading (an encoder count, a quantum) in the channel's unit; "
        "null = measured from the readings, 0 = continuous", nullable=True),
    Key("actuator", Section(), REQUIRED, "the actuator the law drives"),
    Key("actuator.name", Text(NAME_PATTERN, NAME_DOC), "u", "actuator name, for labels"),
    Key("actuator.unit", Text(allow_empty=True), "", "actuator unit"),
    Key("actuator.min", _WIRE, REQUIRED, "lowest command; the host and the device clamp to it"),
    Key("actuator.max", _WIRE, REQUIRED, "highest command; the host and the device clamp to it"),
    Key("actuator.safe", _WIRE, REQUIRED,
        "value commanded when idle, stopped or tripped; min <= safe <= max"),
    Key("actuator.slew_per_s", _POS, None,
        "largest change per second [unit/s]; null = no slew limit", nullable=True),
    # ---- control
    Key("control", Section(), {}, "the control law and the estimator of F"),
    Key("control.output", Text(NAME_PATTERN, NAME_DOC), REQUIRED,
        "the channel under control (a channel name)"),
    Key("control.law", Choice(LAWS), "iP",
        "iP | iPI (order 1), iPD | iPID (order 2), or the PID baseline"),
    Key("control.order", Choice((1, 2)),
        Computed(_default_order, "1 for iP/iPI/PID, 2 for iPD/iPID"),
        "order m of the ultra-local model y^(m) = F + alpha*u"),
    Key("control.alpha", Number(nonzero=True), REQUIRED,
        "input gain alpha of the ultra-local model [output unit/s^m per actuator unit]"),
    Key("control.kp", _NONNEG, 1.0, "proportional gain Kp"),
    Key("control.ki", _NONNEG, 0.0, "integral gain Ki (iPI, iPID, PID)"),
    Key("control.kd", _NONNEG, 0.0, "derivative gain Kd (iPD, iPID, PID)"),
    Key("control.anti_windup", Choice(("conditional", "back-calculation", "none")), "conditional",
        "how the integral behaves while the actuator saturates"),
    Key("control.pid_u0", _NUM, 0.0, "PID baseline: bias added to the PID output"),
    Key("control.estimator", Section(), {}, "estimator of F"),
    Key("control.estimator.kind", Choice(("algebraic", "averaging", "one-step")), "algebraic",
        "algebraic (derivative-free), averaging, or one-step"),
    Key("control.estimator.window_s", _POS, Computed(_default_window_s, "10 sample periods"),
        "estimation window [s]: shorter follows F faster, longer filters noise; >= 2 samples"),
    Key("control.derivative_window_s", _POS, None,
        "window of the error-derivative estimate in iPD/iPID [s]; null = the estimator window",
        nullable=True),
    Key("control.quantization_band", Number(ge=0, le=10), 1.0,
        "width of the hysteresis and error dead band the law sees the output through, in "
        "counts of the output's resolution; 0 = off"),
    Key("control.input_delay_s", Number(ge=0, le=10), 0.0,
        "known input delay tau of the rig [s]: F is estimated with u(t - tau); 0 = none"),
    # ---- reference
    Key("reference", Section(), {}, "the reference (setpoint) profile r(t)"),
    Key("reference.kind", Choice(REFERENCE_KINDS), "levels", "profile kind"),
    Key("reference.initial", _NUM, 0.0, "level at t = 0 (levels, ramp); offset (sine, chirp)",
        when=("kind", _LEVEL_KINDS)),
    Key("reference.blend_s", _BLEND, Computed(_default_blend_s, "1.0 (table: none)"),
        "transition time of blends [s] (levels, ramp); amplitude fade-in (sine, chirp)",
        when=("kind", REFERENCE_KINDS)),
    Key("reference.steps", ListOf(Section()), [], "levels: steps, each {at, to, blend_s?}",
        when=("kind", ("levels",))),
    Key("reference.steps[].at", _NONNEG, REQUIRED, "time the step starts [s]"),
    Key("reference.steps[].to", _NUM, REQUIRED, "level the step blends to"),
    Key("reference.steps[].blend_s", _BLEND, OMIT, "this step's blend time [s]; default blend_s"),
    Key("reference.start_s", _NONNEG, 0.0, "time the profile starts [s] (ramp, sine, chirp)",
        when=("kind", ("ramp", "sine", "chirp"))),
    Key("reference.rate_per_s", _POS, REQUIRED,
        "ramp speed [unit/s]; the direction follows from initial and to",
        when=("kind", ("ramp",))),
    Key("reference.to", _NUM, REQUIRED, "ramp: final value", when=("kind", ("ramp",))),
    Key("reference.amplitude", _POS, REQUIRED, "sine, chirp: amplitude",
        when=("kind", ("sine", "chirp"))),
    Key("reference.freq_hz", _POS, REQUIRED, "sine: frequency [Hz]", when=("kind", ("sine",))),
    Key("reference.f0_hz", _NONNEG, REQUIRED, "chirp: start frequency [Hz]",
        when=("kind", ("chirp",))),
    Key("reference.f1_hz", _NONNEG, REQUIRED, "chirp: end frequency [Hz]",
        when=("kind", ("chirp",))),
    Key("reference.duration_s", _POS, REQUIRED, "chirp: sweep duration [s]",
        when=("kind", ("chirp",))),
    Key("reference.file", Text(), REQUIRED,
        "table: CSV file with header t,r (relative to the config file)", when=("kind", ("table",))),
    # ---- limits
    Key("limits", Section(wildcard="<channel>", wildcard_from="channels"), {},
        "trip limits: one entry per guarded channel plus the fixed settings below"),
    Key("limits.<channel>", Section(), {}, "limits of one channel (the key is a channel name)"),
    Key("limits.<channel>.min", _NUM, None, "trip below this value", nullable=True),
    Key("limits.<channel>.max", _NUM, None, "trip above this value", nullable=True),
    Key("limits.<channel>.rate_max", _POS, None, "trip when |rate of change| exceeds this [unit/s]",
        nullable=True),
    Key("limits.<channel>.frozen_s", _POS, None,
        "trip when the value repeats exactly for this long while running [s] (stuck sensor)",
        nullable=True),
    Key("limits.<channel>.stop", Choice(("immediate", "ramped")), "immediate",
        "immediate: safe value at once; ramped: down at actuator.slew_per_s, then safe"),
    Key("limits.stale_periods", Integer(ge=1, le=100000), 5,
        "trip when no fresh sample arrives for this many periods"),
    Key("limits.max_duration_s", Number(gt=0, le=MAX_DURATION_S_MAX), 600.0, "trip (ramped stop) when a run lasts longer [s]"),
    Key("limits.link_errors", Section(), {}, "trip on bursts of rejected frames"),
    Key("limits.link_errors.max", Integer(ge=0, le=LINK_ERRORS_MAX), 10, "rejected frames allowed within window_s"),
    Key("limits.link_errors.window_s", Number(gt=0, le=COUNT_WINDOW_S_MAX), 1.0, "window for link_errors.max [s]"),
    Key("limits.overruns", Section(), {}, "trip when the host is late too often"),
    Key("limits.overruns.max", Integer(ge=0, le=OVERRUNS_MAX), 50, "late ticks allowed within window_s"),
    Key("limits.overruns.window_s", Number(gt=0, le=COUNT_WINDOW_S_MAX), 1.0, "window for overruns.max [s]"),
    # ---- recording and run
    Key("recording", Section(), {}, "where and how sessions are written"),
    Key("recording.dir", Text(), "sessions",
        "folder for session folders; a relative path is taken from the current folder"),
    Key("recording.flush_ms", Number(gt=0, le=100), 100.0,
        "longest time rows stay in memory before they are written [ms]"),
    # ---- the engine process
    Key("engine", Section(), {}, "how the engine process runs on the host"),
    Key("engine.realtime", Flag(), True,
        "ask the OS for real-time scheduling (SCHED_FIFO priority 20, else nice -10) for the "
        "engine; false = normal priority. What was asked and obtained is printed and recorded"),
    Key("duration_s", _POS, None, "default run length of rigloop run [s]; null = until stopped",
        nullable=True),
    Key("plan", MappingOrPath(), None,
        "test plan: a mapping, or a YAML file path relative to the config file", nullable=True),
)

KEYS: dict[str, Key] = {k.path: k for k in SCHEMA}


def children(path: str) -> list[Key]:
    """Keys directly under a section path ("" for the root; "channels[]" for list items)."""
    return [k for k in SCHEMA if k.parent == path]


def fixed_limit_settings() -> tuple[str, ...]:
    """Keys under ``limits`` that are settings, not channel names."""
    return tuple(k.name for k in children("limits") if not k.name.startswith("<"))


def describe_default(key: Key) -> str:
    from rigloop.config.problems import render_value

    if key.default is REQUIRED:
        return "required"
    if key.default is OMIT:
        return "not set"
    if isinstance(key.default, Computed):
        return key.default.text
    if isinstance(key.type, Section) and key.default == {}:
        return "(section)"
    return render_value(key.default)


def _cell(text: str) -> str:
    return text.replace("|", "\\|")


def markdown_table() -> str:
    """The schema as a Markdown table (key, allowed values, default, meaning) for docs/config.md."""
    lines = ["| key | allowed | default | meaning |", "|---|---|---|---|"]
    for key in SCHEMA:
        allowed = key.type.describe() + (", or null" if key.nullable else "")
        if key.when and key.when[1] != REFERENCE_KINDS:
            allowed += f" (only for {key.when[0]}: {', '.join(key.when[1])})"
        default = describe_default(key)
        if isinstance(key.default, str):
            default = f"`{key.default or chr(39) * 2}`"
        elif isinstance(key.default, (int, float, list, dict)) and not isinstance(key.type, Section):
            default = f"`{default}`"
        lines.append(f"| `{key.path}` | {_cell(allowed)} | {_cell(default)} | {_cell(key.doc)} |")
    return "\n".join(lines)
