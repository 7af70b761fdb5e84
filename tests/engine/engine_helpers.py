"""Fixtures for end-to-end engine tests: the real engine, the real protocol over UDP loopback,
and the simulated device as a separate process (lockstep clock, so runs are deterministic)."""

from __future__ import annotations

import json
import sys
from pathlib import Path

import pytest
import yaml

REPO = Path(__file__).resolve().parents[2]
DEMO_FAN = REPO / "configs" / "demo_fan.yaml"
DEMO_MOTOR = REPO / "configs" / "demo_motor.yaml"


def fan_config(tmp_path: Path, *sets: str, clock: str = "lockstep", base=DEMO_FAN):
    from rigloop.config import load_config

    return load_config(base, [f"device.sim.clock={clock}", f"recording.dir={tmp_path / 'sessions'}", *sets])


class Session:
    """A finished session folder, read with pandas and yaml."""

    def __init__(self, folder: Path):
        import pandas as pd

        self.folder = Path(folder)
        self.meta = yaml.safe_load((self.folder / "session.yaml").read_text())
        self.samples = pd.read_csv(self.folder / "samples.csv")
        self.events = pd.read_csv(self.folder / "events.csv")

    @property
    def trip(self):
        return self.meta["trip"]


def read_rx_log(path: Path) -> list[dict]:
    return [json.loads(line) for line in Path(path).read_text().splitlines() if line.strip()]


def run_engine(cfg, tmp_path: Path, *, duration_s=None, rx_log=True, trace=False):
    """Run one headless session in-process; return (RunResult, Session, rx records)."""
    from rigloop.engine.loop import Engine

    extra = {}
    rx = tmp_path / "rx.jsonl"
    if rx_log:
        extra["rx_log"] = str(rx)
    if trace:
        extra["trace"] = str(tmp_path / "trace.csv")
    engine = Engine(cfg, duration_s=duration_s, sim_extra=extra)
    result = engine.run()
    return result, Session(result.session_dir), (read_rx_log(rx) if rx_log else [])


@pytest.fixture
def python_exe():
    return sys.executable
