"""What a front end may change while a run goes on, and how config values become controller
parameters. Live changes are validated exactly like a config file (``apply_overrides`` +
``parse_config``) before the controller applies them bumplessly."""

from __future__ import annotations

#: Parameters a front end may change while running (config key path -> ControlParams field).
TUNABLE_KEYS = {
    "control.law": "law",
    "control.order": "order",
    "control.alpha": "alpha",
    "control.kp": "kp",
    "control.ki": "ki",
    "control.kd": "kd",
    "control.anti_windup": "anti_windup",
    "control.pid_u0": "pid_u0",
    "control.estimator.kind": "estimator",
    "control.estimator.window_s": "window_s",
    "control.derivative_window_s": "derivative_window_s",
}


def control_params_from_config(cfg):
    from rigloop.control.controller import ControlParams

    c = cfg.control
    return ControlParams(
        law=c.law, order=c.order, alpha=c.alpha, kp=c.kp, ki=c.ki, kd=c.kd,
        estimator=c.estimator.kind, window_s=c.estimator.window_s,
        derivative_window_s=c.derivative_window_s, anti_windup=c.anti_windup, pid_u0=c.pid_u0,
        input_delay_s=getattr(c, "input_delay_s", 0.0),
        quantization_band=getattr(c, "quantization_band", 1.0),
        resolution=_output_resolution(cfg),
    )


def _output_resolution(cfg):
    """The controlled channel's configured resolution (None: the controller measures it)."""
    for channel in getattr(cfg, "channels", ()):
        if channel.name == cfg.control.output:
            return getattr(channel, "resolution", None)
    return None
