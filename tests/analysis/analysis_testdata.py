"""Test data for the analysis tests: session folders written exactly as docs/recording.md says.

The output follows a known linear model driven by a blended levels reference, so the tests know
what the analysis must find: y'' + 2ζω y' + ω² y = ω² r (unity DC gain), integrated with
scipy.signal.lsim. The reference is written here from its definition (quintic blends) rather
than taken from rigloop, so the analysis is checked against something outside itself.
"""

from __future__ import annotations

import csv
import math
from pathlib import Path

import numpy as np
import yaml
from scipy import signal

CHANNELS = [{"name": "speed_rpm", "unit": "rpm", "scale": 1.0, "offset": 0.0},
            {"name": "current_a", "unit": "A", "scale": 1.0, "offset": 0.0}]
ACTUATOR = {"name": "duty", "unit": "%", "min": 0.0, "max": 100.0, "safe": 0.0, "slew_per_s": 250.0}
SAMPLE_HEAD = ["t", "seq", "ref", "dref", "y", "e", "u_cmd", "u", "f_hat", "state"]
SAMPLE_TAIL = ["status", "latency_ms", "compute_us", "late"]
DEFAULT_REFERENCE = {"kind": "levels", "initial": 1200.0, "blend_s": 0.5,
                     "steps": [{"at": 1.0, "to": 2400.0}, {"at": 5.0, "to": 1600.0, "blend_s": 1.0}]}


def levels_reference(spec: dict, tau: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """r and r' of a levels spec at reference times tau: quintic blend 10s³ − 15s⁴ + 6s⁵."""
    r = np.full(tau.shape, float(spec["initial"]))
    dr = np.zeros(tau.shape)
    level = float(spec["initial"])
    for step in spec.get("steps", []):
        at, to = float(step["at"]), float(step["to"])
        blend = float(step.get("blend_s", spec.get("blend_s", 1.0)))
        s = np.clip((tau - at) / blend, 0.0, 1.0)
        active = tau >= at
        shape = 10 * s**3 - 15 * s**4 + 6 * s**5
        dshape = (30 * s**2 - 60 * s**3 + 30 * s**4) / blend
        r = np.where(active, level + (to - level) * shape, r)
        dr = np.where(active & (s < 1.0), (to - level) * dshape, np.where(active, 0.0, dr))
        level = to
    return r, dr


def write_samples(path: Path, columns: dict[str, np.ndarray], nan_text: str = "") -> None:
    """samples.csv with the documented column order; NaN is written as ``nan_text`` (the format
    allows an empty field; the engine writes ``nan``)."""
    header = SAMPLE_HEAD + [c["name"] for c in CHANNELS] + SAMPLE_TAIL
    n = len(columns["t"])
    ints = ("seq", "status", "late")
    with open(path, "w", encoding="utf-8", newline="") as fh:
        fh.write(",".join(header) + "\n")
        for k in range(n):
            cells = []
            for name in header:
                v = columns[name][k]
                if name == "state":
                    cells.append(str(v))
                elif name in ints:
                    cells.append(str(int(v)))
                elif name == "t":
                    cells.append(f"{v:.6f}")
                elif math.isnan(v):
                    cells.append(nan_text)
                else:
                    cells.append(f"{v:.9g}")
            fh.write(",".join(cells) + "\n")


def write_session(folder: Path, *, reference: dict | None = None, zeta: float = 0.9,
                  omega: float = 6.0, rate_hz: float = 100.0, duration_s: float = 10.0,
                  t_arm: float = 0.5, noise: float = 0.0, seed: int = 1,
                  outcome: str = "completed", trip_at: float | None = None,
                  plan: dict | None = None, plan_verdicts: dict | None = None,
                  setpoints: list[tuple[float, float, float]] = (),
                  cut_last_line: bool = False, empty_fhat_rows: int = 5,
                  nan_text: str = "", rig: str = "bench-fan") -> Path:
    """Write a session folder and return its path.

    Rows before ``t_arm`` are ``idle`` (reference time starts at ``t_arm``); after ``trip_at``
    they are ``tripped``. ``setpoints`` are live changes (t, level, blend_s) that override the
    profile from t on. ``cut_last_line`` leaves samples.csv ending in half a row and
    session.yaml at ``outcome: running``, as a crash would.
    """
    folder.mkdir(parents=True, exist_ok=True)
    reference = reference or DEFAULT_REFERENCE
    ts = 1.0 / rate_hz
    n = int(round(duration_s * rate_hz)) + 1
    t = np.arange(n) * ts
    tau = np.maximum(t - t_arm, 0.0)
    r, dr = levels_reference(reference, tau)
    for t_sp, level, blend in setpoints:
        i0 = int(np.searchsorted(t, t_sp))
        base = r[i0]
        sub = {"initial": base, "steps": [{"at": t_sp, "to": level, "blend_s": blend}]}
        r2, dr2 = levels_reference(sub, t)
        r[i0:], dr[i0:] = r2[i0:], dr2[i0:]

    plant = signal.lti([omega**2], [1.0, 2 * zeta * omega, omega**2])
    # start at rest on the initial level: state x = [y'; y]-like via initial output
    _, y_dev, _ = signal.lsim(plant, r - r[0], t)
    y = r[0] + y_dev
    rng = np.random.default_rng(seed)
    if noise:
        y = y + noise * rng.standard_normal(n)
    state = np.where(t < t_arm - 1e-12, "idle", "running").astype(object)
    if trip_at is not None:
        state[t >= trip_at] = "tripped"
    u_cmd = np.clip(r / 30.0 + 0.5 * (r - y), ACTUATOR["min"], ACTUATOR["max"])
    u_cmd[state != "running"] = 0.0
    u = np.concatenate(([0.0], u_cmd[:-1]))
    f_hat = -y / 2.0
    first_running = int(np.argmax(state == "running"))
    f_hat[: first_running + empty_fhat_rows] = np.nan
    current = 0.02 * u + 0.01
    latency = 0.1 + 0.05 * rng.random(n)
    compute = 30.0 + 20.0 * rng.random(n)
    late = (rng.random(n) < 0.01).astype(int)

    write_samples(folder / "samples.csv", {
        "t": t, "seq": np.arange(n), "ref": r, "dref": dr, "y": y, "e": y - r, "u_cmd": u_cmd,
        "u": u, "f_hat": f_hat, "state": state, "speed_rpm": y, "current_a": current,
        "status": np.zeros(n, dtype=int), "latency_ms": latency, "compute_us": compute,
        "late": late}, nan_text=nan_text)
    if cut_last_line:
        text = (folder / "samples.csv").read_text(encoding="utf-8")
        last_start = text.rstrip("\n").rfind("\n") + 1
        cut = last_start + (len(text) - last_start) // 2
        (folder / "samples.csv").write_text(text[:cut], encoding="utf-8")
        outcome = "running"

    events = [("", "2026-12-01T21:50:05.100Z", "connected", "sim://fan", "", ""),
              ("", "2026-12-01T21:50:05.110Z", "configured", "rate_hz=100", "", ""),
              (f"{t_arm:.6f}", "2026-12-01T21:50:05.600Z", "armed", "", "", ""),
              (f"{t_arm:.6f}", "2026-12-01T21:50:05.600Z", "running", "", "", "")]
    for t_sp, level, blend in setpoints:
        events.append((f"{t_sp:.6f}", "2026-12-01T21:50:07.000Z", "setpoint",
                       f"blend_s={blend}", f"{level:.9g}", ""))
    trip = None
    if trip_at is not None:
        i = int(np.searchsorted(t, trip_at))
        trip = {"cause": "limit", "t": float(t[i]), "channel": "speed_rpm",
                "value": float(y[i]), "limit": 2000.0, "stop": "immediate",
                "message": f"speed_rpm {y[i]:.1f} rpm above its maximum 2000 rpm"}
        events.append((f"{t[i]:.6f}", "2026-12-01T21:50:09.000Z", "trip", trip["message"],
                       f"{y[i]:.9g}", "2000"))
        outcome = "tripped" if not cut_last_line else outcome
    if not cut_last_line:
        events.append((f"{t[-1]:.6f}", "2026-12-01T21:50:15.200Z", "ended", outcome, "", ""))
    with open(folder / "events.csv", "w", encoding="utf-8", newline="") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(["t", "wall_utc", "kind", "detail", "value", "limit"])
        w.writerows(events)

    running = state == "running"
    e = (y - r)[running]
    config = {
        "rig": rig,
        "device": {"link": "sim", "url": None, "rate_hz": rate_hz, "watchdog_ms": 100},
        "channels": CHANNELS, "actuator": ACTUATOR,
        "control": {"output": "speed_rpm", "law": "iP", "order": 1, "alpha": 30.0, "kp": 4.0,
                    "ki": 0.0, "kd": 0.0, "estimator": {"kind": "algebraic", "window_s": 0.05}},
        "reference": reference,
        "limits": {"speed_rpm": {"min": 0.0, "max": 3300.0, "stop": "ramped"}},
        "recording": {"dir": "sessions", "flush_ms": 100},
        "duration_s": duration_s,
        "plan": plan,
    }
    meta = {
        "format": "rigloop-session/1", "rigloop_version": "0.1.0", "python_version": "3.11.7",
        "numpy_version": np.__version__, "platform": "Linux-6.1-x86_64",
        "started_utc": "2026-12-01T21:50:05.123Z",
        "ended_utc": None if cut_last_line else "2026-12-01T21:50:15.223Z",
        "rig": rig,
        "device": {"url": "sim://fan", "hello": {"fw_version": 1, "n_channels": 2,
                                                "period_us": int(ts * 1e6), "watchdog_us": 100000,
                                                "name": "sim-fan"}},
        "outcome": outcome,
        "stop_reason": None if cut_last_line else ("trip" if trip else "duration reached"),
        "trip": trip,
        "summary": None if cut_last_line else {
            "samples": n, "duration_s": float(t[-1]),
            "rms_error": float(np.sqrt(np.mean(e * e))) if e.size else None,
            "max_abs_error": float(np.max(np.abs(e))) if e.size else None,
            "lost_samples": 2,
            "rejected_frames": {"crc": 1, "cobs": 0, "short": 0, "version": 0, "type": 0,
                                "length": 0, "sequence": 3, "value": 0},
            "late_ticks": int(late.sum()),
            "latency_ms": {"p50": 0.12, "p99": 0.15, "max": 0.15},
            "compute_us": {"p50": 40.0, "p99": 49.0, "max": 50.0}},
        "plan": plan_verdicts,
        "config": config,
    }
    with open(folder / "session.yaml", "w", encoding="utf-8") as fh:
        yaml.safe_dump(meta, fh, sort_keys=False, allow_unicode=True)
    (folder / "engine.log").write_text("synthetic session written by the test fixture\n")
    return folder


#: A plan for sessions made by write_session (fan-like levels, 100 Hz).
PLAN = {
    "name": "fixture acceptance",
    "initial": 1200.0,
    "lead_s": 1.0,
    "blend_s": 0.5,
    "segments": [
        {"name": "step up", "to": 2400.0, "hold_s": 3.5,
         "criteria": {"settling_time_s": {"max": 1.5}, "overshoot_pct": {"max": 5.0},
                      "abs_steady_state_error": {"max": 5.0}, "max_abs_u": {"max": 100.0}}},
        {"name": "step down", "to": 1600.0, "blend_s": 1.0, "hold_s": 3.0,
         "criteria": {"settling_time_s": {"max": 2.0}, "rise_time_s": {"min": 0.1, "max": 1.0}}},
    ],
    "criteria": {"no_trip": True, "completed": True, "rms_error": {"max": 250.0}},
}
