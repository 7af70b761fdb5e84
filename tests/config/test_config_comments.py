"""The shipped configs' comments state figures the code can check: they must agree with it."""

from __future__ import annotations

import re
from pathlib import Path

import pytest

CONFIGS = sorted((Path(__file__).resolve().parents[2] / "configs").glob("*.yaml"))


@pytest.mark.parametrize("path", CONFIGS, ids=lambda p: p.name)
def test_watchdog_comment_counts_the_periods_check_counts(path):
    from rigloop.config import load_config
    from rigloop.config.derived import derived_quantities

    text = path.read_text(encoding="utf-8")
    line = next((ln for ln in text.splitlines() if ln.strip().startswith("watchdog_ms:")), None)
    if line is None or "period" not in line:
        pytest.skip("no watchdog comment that counts periods")
    said = int(re.search(r"(\d+)\s+(?:silent\s+)?periods", line).group(1))
    cfg = load_config(path)
    assert said == round(cfg.device.watchdog_ms * 1e-3 * cfg.device.rate_hz), line
    watchdog = next(d for d in derived_quantities(cfg) if d.label == "device watchdog")
    assert f"{said} sample periods" in watchdog.note       # what `rigloop check` prints
