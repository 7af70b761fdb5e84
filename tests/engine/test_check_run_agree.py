"""What ``rigloop check`` accepts, ``rigloop run`` runs: no traceback, exit 0 or 3 on the simulated
rig. What ``run`` would refuse, ``check`` refuses first, naming the key, the value and the fix."""

from __future__ import annotations

import contextlib
import io
import sys
import tempfile

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from engine_helpers import DEMO_FAN

pytestmark = pytest.mark.slow

LOCKSTEP = ("--set", "device.sim.clock=lockstep")


def _cli(*argv):
    from rigloop.cli import main

    out, err = io.StringIO(), io.StringIO()
    with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        code = main(list(argv))
    return code, out.getvalue(), err.getvalue()


# Each case was accepted by check and crashed run with a traceback (exit 1), or crashed check.
REGRESSIONS = [
    ("rig=" + "r" * 300, "rig", "at most 64"),
    ("limits.link_errors.max=1e30", "limits.link_errors.max", "from 0 to 10000"),
    ("reference.blend_s=1e-300", "reference.blend_s", ">= 1e-06"),
    ("control.estimator.window_s=1e308", "control.estimator.window_s", "more than 100000 samples"),
    ("channels.0.offset=1e308", "channels.0.offset", "<= 1e+09"),
    ("actuator.max=1e300", "actuator.max", "<= 3.40282e+38"),
    ("device.sim.noise=1e308", "device.sim.noise", "<= 1000"),
    ("channels.0.scale=1e-300", "channels.0.scale", "overflow the wire's float32"),
    pytest.param("recording.dir=/proc/self", "recording.dir", "cannot be written",
                 marks=pytest.mark.skipif(not sys.platform.startswith("linux"), reason="Linux /proc")),
]


@pytest.mark.parametrize("override, key, words", REGRESSIONS)
def test_check_and_run_refuse_alike(tmp_path, override, key, words):
    code, out, err = _cli("check", str(DEMO_FAN), *LOCKSTEP, "--set", override)
    assert code == 2 and "Traceback" not in err
    line = next(ln for ln in err.splitlines() if ln.startswith(f"config error: {key} ="))
    assert words in line
    out_dir = [] if key == "recording.dir" else ["--out", str(tmp_path / "s")]
    code, out, err = _cli("run", str(DEMO_FAN), *LOCKSTEP, *out_dir, "--quiet", "--duration", "0.5",
                          "--set", override)
    assert code == 2 and "Traceback" not in err and f"config error: {key} =" in err


def test_recording_dir_naming_a_file(tmp_path):
    a_file = tmp_path / "not_a_folder"
    a_file.write_text("x")
    code, _, err = _cli("check", str(DEMO_FAN), "--set", f"recording.dir={a_file}")
    assert code == 2 and "is a file, not a folder" in err
    # --out bypasses the config key: the engine's own check refuses before anything is made
    code, _, err = _cli("run", str(DEMO_FAN), *LOCKSTEP, "--out", str(a_file), "--quiet")
    assert code == 2 and "Traceback" not in err and "is a file" in err
    assert a_file.read_text() == "x"


def test_duration_above_the_cap_exits_2_like_the_config_key(tmp_path):
    out = ["--out", str(tmp_path / "s"), "--quiet"]
    code, _, err = _cli("run", str(DEMO_FAN), *LOCKSTEP, *out, "--duration", "121")
    assert code == 2 and "limits.max_duration_s (120 s)" in err and "--duration 121" in err
    code, _, err = _cli("run", str(DEMO_FAN), *LOCKSTEP, *out, "--set", "duration_s=121")
    assert code == 2 and "duration_s = 121" in err
    assert not (tmp_path / "s").exists()


# ---------------------------------------------------------------------------------------------
# Property: generated configs that check accepts run without a traceback.

_EXTREME = st.sampled_from([0.0, 1e-300, 1e-9, 1e-6, 1e9, 1e12, 1e308, -1e308, -1.0])


def _num(lo: float, hi: float):
    """Mostly values in a plausible range, one draw in four an extreme one."""
    plain = st.floats(lo, hi, allow_nan=False, allow_infinity=False)
    return st.one_of(plain, plain, plain, _EXTREME)


OVERRIDES = {
    "device.rate_hz": _num(1.0, 20000.0),
    "device.watchdog_ms": _num(1.0, 60000.0),
    "device.sim.noise": _num(0.0, 10.0),
    "channels.0.scale": _num(-10.0, 10.0),
    "channels.0.offset": _num(-1e4, 1e4),
    "actuator.slew_per_s": _num(0.01, 1e4),
    "control.law": st.sampled_from(["iP", "iPI", "iPD", "iPID", "PID"]),
    "control.alpha": _num(-1e3, 1e3),
    "control.kp": _num(0.0, 1e4),
    "control.ki": _num(0.0, 1e4),
    "control.kd": _num(0.0, 1e3),
    "control.estimator.kind": st.sampled_from(["algebraic", "averaging", "one-step"]),
    "control.estimator.window_s": _num(1e-4, 10.0),
    "reference.initial": _num(-1e4, 1e4),
    "reference.blend_s": _num(1e-6, 100.0),
    "limits.speed_rpm.max": _num(-1e4, 1e5),
    "limits.speed_rpm.rate_max": _num(1e-3, 1e6),
    "limits.speed_rpm.frozen_s": _num(1e-3, 10.0),
    "limits.stale_periods": st.integers(1, 100000),
    "limits.link_errors.max": st.integers(0, 10000),
    "limits.overruns.max": st.integers(0, 1000000),
    "limits.max_duration_s": _num(1.0, 1e6),
}


@settings(max_examples=25, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.too_slow, HealthCheck.function_scoped_fixture])
@given(st.dictionaries(st.sampled_from(sorted(OVERRIDES)), st.none(), min_size=1, max_size=4)
       .flatmap(lambda keys: st.fixed_dictionaries({k: OVERRIDES[k] for k in keys})))
def test_whatever_check_accepts_runs_without_a_traceback(values):
    from rigloop.config import ConfigError, load_config
    from rigloop.commands.run import run_headless

    sets = [f"{key}={value!r}" for key, value in values.items()]
    with tempfile.TemporaryDirectory() as tmp:
        try:
            cfg = load_config(DEMO_FAN, ["device.sim.clock=lockstep", f"recording.dir={tmp}", *sets])
        except ConfigError:
            return                                  # check refuses: nothing to run
        out, err = io.StringIO(), io.StringIO()
        with contextlib.redirect_stderr(err):
            code = run_headless(cfg, duration_s=0.5, quiet=True, stream=out)
    assert "Traceback" not in err.getvalue() + out.getvalue()
    assert code in (0, 3), (sets, err.getvalue()[-2000:])
