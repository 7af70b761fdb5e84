"""``rigloop check CONFIG``: validate a configuration and show what its numbers mean.

Nothing is connected or started. Exit 0 when the configuration is valid (warnings included),
2 when it has problems.
"""

from __future__ import annotations

import argparse
import sys

from rigloop.commands._common import add_config_arguments, load_config_or_report
from rigloop.config import Config, Derived, derived_quantities
from rigloop.exit_codes import EXIT_OK, EXIT_USAGE

NAME = "check"
HELP = ("validate a configuration file and print the quantities that follow from it (loop "
        "period, estimator window, closed-loop speed, link budget) without touching a device")


def add_arguments(parser: argparse.ArgumentParser) -> None:
    add_config_arguments(parser)


def _value(item: Derived) -> str:
    value = item.value
    if value is None:
        text = "-"
    elif isinstance(value, bool):
        text = str(value).lower()
    elif isinstance(value, int):
        text = str(value)
    elif isinstance(value, float):
        text = f"{float(f'{value:.4g}'):.10g}"   # 4 significant digits, no exponent below 1e10
    else:
        text = str(value)
    return f"{text} {item.unit}".strip() if value is not None else text


def _rig_text(rig: dict) -> str:
    """``device.sim.rig`` in one line, e.g. ``dead_zone 12, input_delay_s 0.03, load.walk_nm 1e-4``."""
    parts = []
    for key, value in rig.items():
        if isinstance(value, dict):
            parts += [f"{key}.{k} {len(v) if isinstance(v, list) else v}" + (" step(s)" if isinstance(v, list) else "")
                      for k, v in value.items()]
        else:
            parts.append(f"{key} {value}")
    return ", ".join(parts)


def _summary(cfg: Config) -> list[str]:
    dev, act, ctl = cfg.device, cfg.actuator, cfg.control
    where = dev.url
    if dev.link == "sim":
        where += f" (simulated {dev.sim.plant}, {dev.sim.clock} clock, noise x{dev.sim.noise:g})"
    unit = f" {act.unit}" if act.unit else ""
    lines = [f"rig {cfg.rig}: device {where}"]
    if dev.link == "sim" and getattr(dev.sim, "rig", None):
        lines.append("simulated imperfections: " + _rig_text(dev.sim.rig))
    return lines + [
        f"{len(cfg.channels)} channel(s): {', '.join(c.name for c in cfg.channels)}; actuator "
        f"{act.name} {act.min:g}..{act.max:g}{unit}, safe {act.safe:g}{unit}",
        f"law {ctl.law} (order {ctl.order}) on {ctl.output}: alpha {ctl.alpha:g}, kp {ctl.kp:g}, "
        f"ki {ctl.ki:g}, kd {ctl.kd:g}; estimator {ctl.estimator.kind}"
        + (f"; known input delay {ctl.input_delay_s:g} s"
           if getattr(ctl, "input_delay_s", 0.0) else ""),
        f"reference {cfg.reference.get('kind')}; run "
        + (f"{cfg.duration_s:g} s" if cfg.duration_s is not None else "until stopped")
        + f" (trip after {cfg.limits.max_duration_s:g} s); sessions in {cfg.recording.dir}",
    ]


def run(args: argparse.Namespace) -> int:
    cfg = load_config_or_report(args.config, args.sets, show_warnings=False)
    if cfg is None:
        return EXIT_USAGE
    out = sys.stdout
    print(f"{args.config}: valid", file=out)
    for line in _summary(cfg):
        print(f"  {line}", file=out)
    items = derived_quantities(cfg)
    print("", file=out)
    width = max(len(item.label) for item in items)
    value_width = max(len(_value(item)) for item in items)
    for item in items:
        mark = "WARNING " if item.warning else "        "
        print(f"{mark}{item.label:<{width}}  {_value(item):>{value_width}}  {item.note}".rstrip(),
              file=out)
    warnings = sum(1 for item in items if item.warning)
    print("", file=out)
    print(f"{warnings} warning{'s' if warnings != 1 else ''}" if warnings else "no warnings",
          file=out)
    return EXIT_OK
