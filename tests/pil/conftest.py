"""Fixtures for processor-in-the-loop runs: the STM32F4 firmware built for QEMU's netduinoplus2
(firmware_stub/ports/stm32f4, RIG_EMULATED=1), one fresh emulated board per test, and the rig
configuration rigloop runs against it."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest
import yaml

REPO = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(REPO / "firmware_stub" / "tools"))

from pil_board import PIL_ELF, EmulatedBoard, build_image, missing_tools  # noqa: E402


WATCHDOG_MS = 1000


@pytest.fixture(scope="session")
def pil_image() -> Path:
    missing = missing_tools()
    if missing:
        pytest.skip(f"processor-in-the-loop needs {', '.join(missing)} (Debian: qemu-system-arm gcc-arm-none-eabi)")
    result = build_image()
    assert result.returncode == 0, f"make -C firmware_stub pil failed:\n{(result.stdout + result.stderr)[-4000:]}"
    return PIL_ELF


@pytest.fixture
def board(pil_image):
    b = EmulatedBoard.start(pil_image)
    try:
        yield b
    finally:
        b.stop()


def pil_config(tmp_path: Path, pty: str, name: str = "pil", **changes) -> Path:
    """A fan rig on the emulated board, with settings for a loaded shared machine: there QEMU
    itself is now and then descheduled - holes of 108, 195 and 289 ms in the device's own
    sample times were seen at load average 5-8 on 2 cores - and a device that misses its ticks
    for longer than its watchdog trips it (it cannot tell a stalled host from its own stall).
    So: device watchdog 1 s, stale limit 1 s (200 periods at 200 Hz), late-tick budget 150 per
    second. The law is an iP with alpha ~ the fan's gain / time constant (60 rpm/s per %),
    closed-loop time constant 1/kp = 0.25 s."""
    cfg = {
        "rig": f"f4-{name}",
        "device": {"link": "serial", "serial": {"port": pty, "baud": 460800},
                   "rate_hz": 200, "watchdog_ms": WATCHDOG_MS, "pacing": "device"},
        "channels": [{"name": "speed_rpm", "unit": "rpm"}, {"name": "current_a", "unit": "A"}],
        "actuator": {"name": "duty", "unit": "%", "min": 0, "max": 100, "safe": 0, "slew_per_s": 400},
        "control": {"output": "speed_rpm", "law": "iP", "alpha": 60.0, "kp": 4.0,
                    "estimator": {"kind": "algebraic", "window_s": 0.1}},
        "reference": {"kind": "levels", "initial": 600.0, "blend_s": 1.0,
                      "steps": [{"at": 3.5, "to": 1500.0}, {"at": 7.0, "to": 1000.0}]},
        "limits": {"speed_rpm": {"min": -100.0, "max": 2800.0}, "stale_periods": 200,
                   "link_errors": {"max": 50, "window_s": 1.0},
                   "overruns": {"max": 150, "window_s": 1.0}},
        "recording": {"dir": str(tmp_path / name)},
        "duration_s": 10.0,
    }
    for dotted, value in changes.items():
        *path, last = dotted.split("__")
        node = cfg
        for key in path:
            node = node[key]
        node[last] = value
    out = tmp_path / f"{name}.yaml"
    out.write_text(yaml.safe_dump(cfg, sort_keys=False))
    return out
