"""Shared pieces of the desktop-app tests: the demo config, the device's receive log, session files."""

from __future__ import annotations

import json
from pathlib import Path

import yaml

REPO = Path(__file__).resolve().parents[2]
DEMO_FAN = REPO / "configs" / "demo_fan.yaml"

#: Overrides that keep the demo rig running on a busy shared test machine: the stale-data,
#: overrun and device-watchdog trips are tested elsewhere; here a host that is briefly slow must
#: not trip the rig.
#: The rate is pinned so that the figures the tests check (window lengths in samples) stay put.
RATE_HZ = 100
CALM_SETS = [f"device.rate_hz={RATE_HZ}", "limits.stale_periods=100", "limits.overruns.max=100000",
             "duration_s=null", "limits.max_duration_s=600", "device.watchdog_ms=2000"]


def read_rx_log(path: Path) -> list[dict]:
    """Frames the simulated device received (one JSON object per line; a cut last line is skipped)."""
    if not Path(path).exists():
        return []
    frames = []
    for line in Path(path).read_text(encoding="utf-8").splitlines():
        try:
            frames.append(json.loads(line))
        except json.JSONDecodeError:
            continue
    return frames


def stop_follows_last_arm(frames: list[dict], safe: float = 0.0) -> bool:
    """After the last ARM: the first frame that is not a COMMAND is STOP, and no COMMAND after
    that STOP asks for anything but the safe value."""
    arms = [i for i, f in enumerate(frames) if f.get("type") == "ARM"]
    if not arms:
        return False
    after = frames[arms[-1] + 1:]
    others = [i for i, f in enumerate(after) if f.get("type") != "COMMAND"]
    if not others or after[others[0]].get("type") != "STOP":
        return False
    return all(f.get("value") == safe for f in after[others[0] + 1:] if f.get("type") == "COMMAND")


def has_stop_after_last_arm(frames: list[dict]) -> bool:
    arms = [i for i, f in enumerate(frames) if f.get("type") == "ARM"]
    return bool(arms) and any(f.get("type") == "STOP" for f in frames[arms[-1] + 1:])


def session_dirs(root: Path) -> list[Path]:
    return sorted(p for p in Path(root).glob("*") if (p / "session.yaml").exists())


def session_meta(folder: Path) -> dict:
    return yaml.safe_load((Path(folder) / "session.yaml").read_text(encoding="utf-8")) or {}


def events_of(folder: Path, kind: str) -> list[str]:
    import csv

    path = Path(folder) / "events.csv"
    if not path.exists():
        return []
    with open(path, newline="", encoding="utf-8") as fh:
        return [row.get("detail", "") for row in csv.DictReader(fh) if row.get("kind") == kind]


def write_fake_session(folder: Path, *, n: int = 300, trip_t: float | None = 2.0) -> Path:
    """A small recorded session in the documented layout (docs/recording.md)."""
    folder.mkdir(parents=True)
    cfg = {"rig": "bench-fan", "control": {"output": "speed_rpm", "order": 1},
           "channels": [{"name": "speed_rpm", "unit": "rpm"}, {"name": "current_a", "unit": "A"}],
           "actuator": {"name": "duty", "unit": "%", "min": 0.0, "max": 100.0},
           "limits": {"speed_rpm": {"min": -100.0, "max": 3000.0}}}
    meta = {"format": "rigloop-session/1", "rig": "bench-fan", "outcome": "tripped" if trip_t else "completed",
            "started_utc": "2026-12-01T21:50:05.000Z", "ended_utc": "2026-12-01T21:50:08.000Z",
            "trip": ({"cause": "limit", "t": trip_t, "channel": "speed_rpm", "value": 3105.2, "limit": 3000.0,
                      "message": "speed_rpm 3105.2 rpm above its maximum 3000 rpm"} if trip_t else None),
            "summary": {"samples": n, "duration_s": n * 0.01, "rms_error": 12.5}, "config": cfg}
    (folder / "session.yaml").write_text(yaml.safe_dump(meta), encoding="utf-8")
    cols = ["t", "seq", "ref", "dref", "y", "e", "u_cmd", "u", "f_hat", "state", "speed_rpm", "current_a",
            "status", "latency_ms", "compute_us", "late"]
    lines = [",".join(cols)]
    for k in range(n):
        t = k * 0.01
        y = 1000.0 + 10.0 * k
        lines.append(",".join(str(v) for v in (t, k, 1000.0, 0.0, y, y - 1000.0, 40.0, 40.0, -5.0, "running",
                                               y, 0.5, 33, 0.1, 50.0, 0)))
    (folder / "samples.csv").write_text("\n".join(lines) + "\n", encoding="utf-8")
    ev = ["t,wall_utc,kind,detail,value,limit", "0.0,2026-12-01T21:50:05.100Z,armed,armed (gui),,"]
    if trip_t:
        ev.append(f"{trip_t},2026-12-01T21:50:07.000Z,trip,limit: speed_rpm 3105.2 rpm above its maximum,"
                  "3105.2,3000.0")
    (folder / "events.csv").write_text("\n".join(ev) + "\n", encoding="utf-8")
    return folder
