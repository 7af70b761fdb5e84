"""`make pil` on a machine without QEMU or the Cortex-M compiler: a SKIP line naming what is
missing and success, not a failure (the PIL scenarios themselves are in tests/pil)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def test_pil_runner_prints_skip_without_the_tools(tmp_path):
    empty_path = tmp_path / "bin"
    empty_path.mkdir()
    result = subprocess.run([sys.executable, str(ROOT / "tests" / "pil" / "run_pil.py")],
                            env={"PATH": str(empty_path)}, capture_output=True, text=True, timeout=120)
    assert result.returncode == 0, result.stdout + result.stderr
    line = result.stdout.strip().splitlines()[-1]
    assert line.startswith("SKIP: qemu-system-arm, arm-none-eabi-gcc, make not installed"), line
    assert "processor-in-the-loop tests not run" in line
