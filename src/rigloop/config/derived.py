"""Quantities that follow from a configuration, and warnings about choices that are legal but odd.

``rigloop check`` prints these so that a user sees, before anything moves, what the numbers mean:
the loop period, how many samples the estimator window holds, how fast the closed loop is meant
to be, how much of the link the traffic uses.
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np

from rigloop.config.model import Config
from rigloop.control.window_choice import shortest_window

#: Frame sizes from docs/protocol.md: version + type + body + CRC-16.
SAMPLE_FRAME_FIXED = 27          # 2 + 23 + 2, plus 4 bytes per channel
SAMPLE_FRAME_PER_CHANNEL = 4
COMMAND_FRAME = 16               # 2 + 12 + 2
SERIAL_EXTRA = 2                 # one COBS overhead byte (frames < 254 bytes) + the 0x00 delimiter
UART_BITS_PER_BYTE = 10          # 8N1: start bit + 8 data bits + stop bit
IPV4_UDP_HEADERS = 28            # 20-byte IPv4 header + 8-byte UDP header (no options)
LINK_WARN_FRACTION = 0.70        # leave room for retries, HELLO/FAULT traffic and jitter
WINDOW_SAMPLES_LOW, WINDOW_SAMPLES_HIGH = 3, 2000
LOOP_SAMPLES_PER_TIME_CONSTANT = 10   # (common practice) sample at least 10x faster than the loop


class Derived(NamedTuple):
    label: str
    value: float | int | str | None
    unit: str
    note: str
    warning: bool = False


def sample_frame_bytes(n_channels: int, serial: bool) -> int:
    """Bytes of one SAMPLE frame on the wire: ``27 + 4n`` (+2 on serial: COBS byte, delimiter)."""
    return SAMPLE_FRAME_FIXED + SAMPLE_FRAME_PER_CHANNEL * n_channels + (SERIAL_EXTRA if serial else 0)


def command_frame_bytes(serial: bool) -> int:
    """Bytes of one COMMAND frame on the wire: 16 (+2 on serial)."""
    return COMMAND_FRAME + (SERIAL_EXTRA if serial else 0)


def _g(x: float, digits: int = 4) -> str:
    return f"{x:.{digits}g}"


def _reference_extremes(cfg: Config) -> tuple[float, float] | None:
    ref = cfg.reference
    kind = ref.get("kind")
    if kind == "levels":
        values = [ref["initial"]] + [s["to"] for s in ref.get("steps", [])]
    elif kind == "ramp":
        values = [ref["initial"], ref["to"]]
    elif kind in ("sine", "chirp"):
        values = [ref["initial"] - ref["amplitude"], ref["initial"] + ref["amplitude"]]
    elif kind == "table":
        import csv

        try:
            with open(ref["file"], newline="", encoding="utf-8-sig") as handle:
                rows = list(csv.reader(handle))[1:]
            values = [float(r[1]) for r in rows if len(r) == 2]
        except (OSError, ValueError):
            return None
    else:
        return None
    return (min(values), max(values)) if values else None


def _timing(cfg: Config, out: list[Derived]) -> None:
    dev = cfg.device
    pacing = "the device's sample clock" if dev.pacing == "device" else "a host timer"
    note = f"{_g(dev.rate_hz)} Hz, paced by {pacing}"
    if abs(dev.period_us - 1e6 / dev.rate_hz) > 1e-6:
        note += f"; the wire carries {dev.period_us} us ({_g(1e6 / dev.period_us, 6)} Hz)"
    out.append(Derived("loop period", dev.period_s * 1000.0, "ms", note))
    periods = dev.watchdog_ms / (dev.period_s * 1000.0)
    out.append(Derived("device watchdog", dev.watchdog_ms, "ms", f"{_g(periods, 3)} sample periods",
                       warning=periods < 2.0))
    if periods < 2.0:
        out[-1] = out[-1]._replace(note=out[-1].note + "; one late command stops the rig, "
                                   "raise device.watchdog_ms to at least 2 periods")
    out.append(Derived("stale-data trip", cfg.limits.stale_periods * dev.period_s * 1000.0, "ms",
                       f"{cfg.limits.stale_periods} periods without a fresh sample"))


def _estimator(cfg: Config, out: list[Derived]) -> None:
    ctl, rate = cfg.control, cfg.device.rate_hz
    est = ctl.estimator
    if est.kind == "one-step":
        out.append(Derived("estimator window", 1, "samples",
                           "one-step estimator: differences of consecutive samples (noisy; "
                           "window_s is not used)"))
    else:
        n = round(est.window_s * rate)
        low = shortest_window(est.kind, ctl.order)     # the bound `rigloop identify` suggests from
        warn = n < low or n > WINDOW_SAMPLES_HIGH
        note = f"{est.kind}, {_g(est.window_s * 1000)} ms"
        if n < low:
            note += f"; fewer than {low} samples, F is estimated from noise - lengthen window_s"
        elif n > WINDOW_SAMPLES_HIGH:
            note += ("; long windows cost compute per sample and follow F slowly - shorten "
                     "window_s")
        out.append(Derived("estimator window", n, "samples", note, warn))
    if ctl.law in ("iPD", "iPID", "PID") and ctl.kd > 0:
        window = ctl.derivative_window_s or est.window_s
        n = round(window * rate)
        out.append(Derived("derivative window", n, "samples", f"{_g(window * 1000)} ms",
                           n < WINDOW_SAMPLES_LOW))


#: The characteristic polynomial of the error dynamics each law imposes when F̂ = F
#: (coefficients, highest power first). iP: e' + Kp·e = 0. iPI, written for the integral
#: z = ∫e: z'' + Kp·z' + Ki·z = 0. iPD: e'' + Kd·e' + Kp·e = 0. iPID, for z = ∫e:
#: z⁽³⁾ + Kd·z'' + Kp·z' + Ki·z = 0.
ERROR_POLYNOMIALS = {
    "iP": lambda kp, ki, kd: [1.0, kp],
    "iPI": lambda kp, ki, kd: [1.0, kp, ki],
    "iPD": lambda kp, ki, kd: [1.0, kd, kp],
    "iPID": lambda kp, ki, kd: [1.0, kd, kp, ki],
}
_POLY_TEXT = {"iP": "s + Kp", "iPI": "s^2 + Kp s + Ki", "iPD": "s^2 + Kd s + Kp",
              "iPID": "s^3 + Kd s^2 + Kp s + Ki"}


def error_poles(law: str, kp: float, ki: float = 0.0, kd: float = 0.0) -> np.ndarray:
    """Poles of the law's closed-loop error dynamics (roots of :data:`ERROR_POLYNOMIALS`)."""
    return np.roots(np.asarray(ERROR_POLYNOMIALS[law](kp, ki, kd), dtype=float))


def loop_time_scales(law: str, kp: float, ki: float = 0.0, kd: float = 0.0
                     ) -> tuple[float, float] | None:
    """``(slowest, fastest)`` time scales of the error dynamics, s: the time constant of the
    slowest mode, ``1/min|Re p|`` (how long the last of an error takes to fade), and
    ``1/max|p|`` of the fastest pole (how fast the loop moves the output, and so F). None when
    a pole does not decay (Re p >= 0)."""
    poles = error_poles(law, kp, ki, kd)
    if poles.size == 0 or np.any(poles.real >= 0.0):
        return None
    return 1.0 / float(np.min(-poles.real)), 1.0 / float(np.max(np.abs(poles)))


def _pole_text(poles: np.ndarray) -> str:
    def one(p: complex) -> str:
        if abs(p.imag) <= 1e-9 * max(1.0, abs(p)):
            return _g(p.real)
        return f"{_g(p.real)}{'+' if p.imag > 0 else '-'}{_g(abs(p.imag))}j"
    return ", ".join(one(p) for p in sorted(poles, key=lambda p: (-p.real, p.imag)))


def _closed_loop(cfg: Config, out: list[Derived]) -> float | None:
    """Append the design figures of the closed loop; return the time scale of its fastest pole
    in seconds (the one the sampling and the estimator window must follow)."""
    ctl = cfg.control
    law = ctl.law
    if law not in ERROR_POLYNOMIALS:
        out.append(Derived("PID baseline", f"Kp {_g(ctl.kp)}, Ki {_g(ctl.ki)}, Kd {_g(ctl.kd)}",
                           "", f"classic PID on the same error, bias pid_u0 = {_g(ctl.pid_u0)}"))
        if not cfg.actuator.min <= ctl.pid_u0 <= cfg.actuator.max:
            out.append(Derived("PID bias", ctl.pid_u0, cfg.actuator.unit,
                               "control.pid_u0 lies outside the actuator range", True))
        return None
    kp = ctl.kp
    ki = ctl.ki if law in ("iPI", "iPID") else 0.0
    kd = ctl.kd if law in ("iPD", "iPID") else 0.0
    if kp <= 0:
        label = ("closed-loop time constant" if law in ("iP", "iPI")
                 else "closed-loop natural frequency")
        out.append(Derived(label, None, "rad/s" if "frequency" in label else "s",
                           "Kp is 0: nothing pulls the output to the reference; set kp > 0", True))
        return None
    if law in ("iPI", "iPID") and ki == 0:
        base = "iP" if law == "iPI" else "iPD"
        out.append(Derived("integral gain", 0.0, "1/s^2" if law == "iPI" else "1/s^3",
                           f"ki is 0, so {law} acts as {base}; set ki > 0 or use law {base}", True))
        law = base
    poly = _POLY_TEXT[law]
    poles = error_poles(law, kp, ki, kd)
    out.append(Derived("closed-loop poles", _pole_text(poles), "1/s",
                       f"roots of {poly}: the error dynamics when F is well estimated"))
    if law in ("iPD", "iPID"):
        omega = math.sqrt(kp)
        zeta = kd / (2.0 * omega)
        part = " (of the s^2 + Kd s + Kp part)" if law == "iPID" else ""
        out.append(Derived("closed-loop natural frequency", omega, "rad/s",
                           f"omega = sqrt(Kp){part}"))
        out.append(Derived("closed-loop damping", zeta, "", f"zeta = Kd / (2 sqrt(Kp)){part}"
                           + ("; 0 means an undamped oscillation - set kd > 0" if zeta == 0 else ""),
                           zeta == 0))
    scales = loop_time_scales(law, kp, ki, kd)
    if scales is None:
        why = (f"Kd*Kp = {_g(kd * kp)} must exceed Ki = {_g(ki)} (stability test of the cubic)"
               if law == "iPID" else f"a pole of {poly} does not lie left of the imaginary axis")
        out.append(Derived("closed-loop stability", "unstable", "",
                           f"the error does not decay: {why}; lower ki or raise kd", True))
        return None
    slow, fast = scales
    out.append(Derived("closed-loop time constant", slow, "s",
                       "slowest pole, 1/min|Re p|: the last of an error decays as exp(-t/tau)"
                       + (" (1/Kp)" if law == "iP" else "")))
    if law != "iP":
        out.append(Derived("closed-loop fastest time scale", fast, "s",
                           "fastest pole, 1/max|p|: how fast the loop moves the output"))
    return fast


def _gain_checks(cfg: Config, out: list[Derived], scale: float | None) -> None:
    """Gains the law ignores; a loop too fast for the sampling or for the estimator window."""
    ctl = cfg.control
    law, ki, kd = ctl.law, ctl.ki, ctl.kd
    unused = []
    if law in ("iP", "iPD") and ki > 0:
        unused.append("ki")
    if law in ("iP", "iPI") and kd > 0:
        unused.append("kd")
    if unused:
        out.append(Derived("unused gains", ", ".join(unused), "",
                           f"law {law} does not use {' and '.join(unused)}; set it to 0 or "
                           f"choose a law that uses it", True))
    if scale is not None:
        samples = scale * cfg.device.rate_hz
        if samples < LOOP_SAMPLES_PER_TIME_CONSTANT:
            out.append(Derived("closed-loop speed", samples, "samples",
                               f"the fastest closed-loop pole's time scale is only "
                               f"{_g(samples, 3)} sample periods; "
                               f"aim for at least {LOOP_SAMPLES_PER_TIME_CONSTANT} (lower the "
                               f"gains or raise device.rate_hz)", True))
        est = ctl.estimator
        if est.kind != "one-step" and est.window_s > scale:
            out.append(Derived("estimator vs loop", est.window_s / scale, "x",
                               f"the estimator window ({_g(est.window_s * 1000)} ms) is longer than "
                               f"the time scale of the fastest closed-loop pole "
                               f"({_g(scale * 1000)} ms), at which the loop moves the output and "
                               f"so F; F will lag - shorten the window or lower the gains", True))


def _link(cfg: Config, out: list[Derived]) -> None:
    dev, n = cfg.device, len(cfg.channels)
    serial = dev.link == "serial"
    up = sample_frame_bytes(n, serial) * dev.rate_hz
    down = command_frame_bytes(serial) * dev.rate_hz
    if serial:
        capacity = dev.serial.baud / UART_BITS_PER_BYTE
        for label, need, frame in (("link device->host", up, sample_frame_bytes(n, True)),
                                   ("link host->device", down, command_frame_bytes(True))):
            share = need / capacity
            warn = share > LINK_WARN_FRACTION
            note = (f"{frame} B frames x {_g(dev.rate_hz)}/s = {_g(share * 100, 3)} % of "
                    f"{_g(capacity, 6)} B/s ({dev.serial.baud} baud, 8N1)")
            if warn:
                note += (f"; above {LINK_WARN_FRACTION:.0%} frames will queue up - raise "
                         f"device.serial.baud, lower device.rate_hz or send fewer channels")
            out.append(Derived(label, need, "B/s", note, warn))
        out.append(Derived("serial note", None, "",
                           "a USB CDC device ignores the baud rate and carries far more; the "
                           "percentages apply to a UART or USB-serial bridge at this baud rate"))
    else:
        where = "local UDP to the simulated device" if dev.link == "sim" else "UDP"
        for label, need, frame in (("link device->host", up, sample_frame_bytes(n, False)),
                                   ("link host->device", down, command_frame_bytes(False))):
            wire = (frame + IPV4_UDP_HEADERS) * dev.rate_hz
            out.append(Derived(label, need, "B/s",
                               f"{frame} B frames x {_g(dev.rate_hz)}/s over {where}; "
                               f"{_g(wire, 6)} B/s with IPv4/UDP headers"))


def _safety(cfg: Config, out: list[Derived]) -> None:
    output = cfg.control.output
    guard = cfg.limits.channels.get(output)
    if guard is None or (guard.min is None and guard.max is None):
        out.append(Derived("output limits", None, "",
                           f"limits.{output} has no min/max: a runaway of the controlled channel "
                           f"is stopped only by the other limits, the watchdogs or the e-stop",
                           True))
    elif (extremes := _reference_extremes(cfg)) is not None:
        low, high = extremes
        unit = cfg.channels[cfg.channel_index(output)].unit
        if guard.max is not None and high >= guard.max:
            out.append(Derived("reference vs limit", high, unit,
                               f"the reference reaches {_g(high)}, at or above limits.{output}.max "
                               f"({_g(guard.max)}): the run will trip", True))
        if guard.min is not None and low <= guard.min:
            out.append(Derived("reference vs limit", low, unit,
                               f"the reference reaches {_g(low)}, at or below limits.{output}.min "
                               f"({_g(guard.min)}): the run will trip", True))
    if cfg.actuator.slew_per_s is None:
        ramped = [name for name, lim in cfg.limits.channels.items() if lim.stop == "ramped"]
        if ramped:
            out.append(Derived("ramped stops", ", ".join(ramped), "",
                               "actuator.slew_per_s is null, so a ramped stop jumps to the safe "
                               "value like an immediate one; set a slew rate", True))
    if cfg.device.link != "sim" and cfg.device.sim.faults:
        out.append(Derived("fault injection", len(cfg.device.sim.faults), "",
                           "device.sim.faults only act on the simulated device; they are ignored "
                           f"with link {cfg.device.link}", True))
    steps = cfg.reference.get("steps", []) if cfg.reference.get("kind") == "levels" else []
    if cfg.duration_s is not None and cfg.plan is None:
        late = [s["at"] for s in steps if s["at"] >= cfg.duration_s]
        if late:
            out.append(Derived("reference steps", len(late), "",
                               f"step(s) at {', '.join(_g(t) for t in late)} s start after the run "
                               f"ends (duration_s {_g(cfg.duration_s)})", True))
    if cfg.plan is not None:
        out.append(Derived("test plan", None, "",
                           "a plan is given: it drives the reference instead of reference:"))


def _loosened(cfg: Config, out: list[Derived]) -> None:
    from rigloop.config.loosened import loosened

    for _label, key, value, message in loosened(cfg):
        out.append(Derived(key, value, "", message, True))


def _recording(cfg: Config, out: list[Derived]) -> None:
    """The session's expected size on disk against the free space where it will be written."""
    try:
        from rigloop.engine.disk_budget import free_bytes, mb, session_budget
    except ImportError:  # pragma: no cover - the engine is part of the package
        return
    budget = session_budget(cfg)
    free = free_bytes(cfg.recording.dir)
    note = (f"{budget.rows} rows x {budget.row_bytes} B ({_g(budget.duration_s)} s at "
            f"{_g(cfg.device.rate_hz)} Hz) + 0.5 MB; ")
    if free is None:
        note += f"free space of {cfg.recording.dir} unknown"
    else:
        note += f"{mb(free)} free in {cfg.recording.dir}"
    short = free is not None and free < budget.total_bytes
    if short:
        note += "; the run would be refused - free space, record elsewhere or shorten the run"
    out.append(Derived("recording size", round(budget.total_bytes / 1e6, 3), "MB", note, short))


def derived_quantities(cfg: Config) -> list[Derived]:
    """Derived figures of a valid configuration, warnings flagged with ``warning=True``."""
    out: list[Derived] = []
    _timing(cfg, out)
    _estimator(cfg, out)
    _gain_checks(cfg, out, _closed_loop(cfg, out))
    _link(cfg, out)
    _link_security(cfg, out)
    _safety(cfg, out)
    _recording(cfg, out)
    _loosened(cfg, out)
    return out


def _link_security(cfg: Config, out: list[Derived]) -> None:
    """docs/protocol.md §14: a device beyond this machine without a key can be driven by anyone
    who can send it a datagram (or forge its samples); say so whenever that is the case."""
    from rigloop.config.schema import is_loopback

    dev = cfg.device
    if dev.link == "sim":
        local = True
    elif dev.link == "udp":
        local = is_loopback(dev.udp.host) is True
    else:
        local = True           # a serial line is point to point: reaching it is physical access
    keyed = dev.key_file is not None
    if keyed:
        out.append(Derived("link authentication", "HMAC-SHA-256/64", "", f"key from {dev.key_file}"))
    elif local:
        out.append(Derived("link authentication", "off", "",
                           "serial line, point to point" if dev.link == "serial" else "device on this computer (loopback)"))
    else:
        out.append(Derived("link authentication", "off", "",
                           f"the device ({dev.udp.host}) is not on loopback and no key is set: anyone who can "
                           "reach the link can drive or spoof the rig; set device.auth.key_file "
                           "(docs/protocol.md §14)", warning=True))


def warnings_of(cfg: Config) -> list[Derived]:
    return [d for d in derived_quantities(cfg) if d.warning]
