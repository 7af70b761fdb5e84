"""The feedback checks' figures that follow from a configuration: response time, frozen time,
the sensor noise the config states, and the rate limit that noise allows.

One place for these defaults, read by the engine (``rigloop.engine.supervisor``) and printed by
``rigloop check`` (``derived_quantities``). The detectors themselves live in
:mod:`rigloop.engine.plausibility`, which explains the thresholds.
"""

from __future__ import annotations

import math

from rigloop.config.model import Config

#: Default response time: this many closed-loop time constants (1/Kp for iP/iPI, 1/sqrt(Kp)
#: for iPD/iPID; common practice: a first- or second-order loop has settled after 4-5), plus the
#: estimator window (F̂ lags by up to a window) and 10 sample periods of transport and hold.
RESPONSE_LOOP_MULTIPLE = 5.0
RESPONSE_EXTRA_PERIODS = 10
#: The PID baseline has no designed closed-loop speed: this default, until a bump test gives one.
RESPONSE_PID_DEFAULT_S = 2.0
#: Never shorter than this many sample periods (a response must span a few samples).
RESPONSE_MIN_PERIODS = 20


def loop_time_scale(cfg: Config) -> float | None:
    """The designed closed-loop time scale [s] of the law (None for the PID baseline or Kp = 0)."""
    ctl = cfg.control
    if ctl.kp <= 0 or ctl.law == "PID":
        return None
    return 1.0 / ctl.kp if ctl.order == 1 else 1.0 / math.sqrt(ctl.kp)


def response_time(cfg: Config) -> tuple[float, str]:
    """(seconds, where it comes from) of the plausibility response time."""
    plaus = cfg.limits.plausibility
    period = cfg.device.period_s
    if plaus.response_s is not None:
        return plaus.response_s, "limits.plausibility.response_s"
    scale = loop_time_scale(cfg)
    window = cfg.control.estimator.window_s if cfg.control.estimator.kind != "one-step" else period
    if cfg.control.order == 2:
        window += cfg.control.derivative_window_s or cfg.control.estimator.window_s
    if scale is None:
        base, how = RESPONSE_PID_DEFAULT_S, f"PID baseline default {RESPONSE_PID_DEFAULT_S:g} s"
    else:
        base, how = RESPONSE_LOOP_MULTIPLE * scale, f"{RESPONSE_LOOP_MULTIPLE:g} closed-loop time constants"
    seconds = max(base + window + RESPONSE_EXTRA_PERIODS * period, RESPONSE_MIN_PERIODS * period)
    return seconds, how + " + estimator window + 10 periods"


def frozen_time(cfg: Config) -> float:
    plaus = cfg.limits.plausibility
    return plaus.frozen_s if plaus.frozen_s is not None else response_time(cfg)[0]


def stated_noise(cfg: Config) -> dict[str, float]:
    """Sensor noise std per channel as the config states it: ``channels[].noise_std``, or for the
    simulated device its plant's nominal noise times ``device.sim.noise``."""
    out: dict[str, float] = {}
    sim_noise: dict = {}
    if cfg.device.link == "sim":
        try:
            from rigloop.plants import make_plant

            plant = make_plant(cfg.device.sim.plant, cfg.device.sim.plant_params())
            sim_noise = {k: v * cfg.device.sim.noise for k, v in plant.nominal_noise_std.items()}
        except (ValueError, OSError):
            sim_noise = {}
    for ch in cfg.channels:
        if ch.noise_std is not None:
            out[ch.name] = ch.noise_std
        elif ch.name in sim_noise:
            out[ch.name] = sim_noise[ch.name]
    return out


def rate_noise_floor(std: float, period_s: float) -> float:
    """The smallest rate_max that noise of ``std`` does not trip (RATE_NOISE_SIGMAS of the
    rate estimate's noise)."""
    from rigloop.engine.plausibility import RATE_NOISE_SIGMAS, rate_noise_gain

    return RATE_NOISE_SIGMAS * std * rate_noise_gain(period_s)


def feedback_figures(cfg: Config) -> list:
    """Lines for ``rigloop check``: response and frozen times, noise, rate limits against it."""
    from rigloop.config.derived import Derived
    from rigloop.engine.plausibility import RATE_NOISE_SIGMAS

    out = []
    plaus = cfg.limits.plausibility
    output = cfg.control.output
    if plaus.enabled:
        seconds, how = response_time(cfg)
        out.append(Derived("response time", seconds, "s",
                           f"{output} must answer {cfg.actuator.name} at a limit within this ({how})"))
        out.append(Derived("frozen reading", frozen_time(cfg), "s",
                           f"{output} repeating exactly this long while the loop asks it to change trips"))
    # switched off: config.loosened prints the WARNING line (one table for every such key)
    stated = stated_noise(cfg)
    period = cfg.device.period_s
    units = {c.name: c.unit for c in cfg.channels}
    for name, lim in cfg.limits.channels.items():
        if lim.rate_max is None:
            continue
        std = stated.get(name)
        if std is None:
            out.append(Derived(f"{name} rate noise", None, "",
                               "no stated noise: measured before ARM at run time, and the run warns if "
                               "rate_max is below what it implies"))
            continue
        floor = rate_noise_floor(std, period)
        unit = f"{units.get(name, '')}/s"
        warn = lim.rate_max < floor
        note = (f"noise {std:.3g} {units.get(name, '')} gives rate noise of about "
                f"{floor / RATE_NOISE_SIGMAS:.3g} {unit}; rate_max {lim.rate_max:.4g} {unit}")
        if warn:
            note += (f" is below {floor:.4g} {unit} ({RATE_NOISE_SIGMAS:g} sigma): it will trip on "
                     f"noise - raise it")
        out.append(Derived(f"{name} rate floor", floor, unit, note, warn))
    if stated.get(output) is None:
        out.append(Derived(f"{output} noise", None, "",
                           "measured from the samples before ARM at run time (recorded in session.yaml)"))
    else:
        out.append(Derived(f"{output} noise", stated[output], units.get(output, ""),
                           "stated; the run also measures it before ARM and uses the larger"))
    return out
