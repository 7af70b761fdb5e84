"""`make pil`: build the STM32F4 firmware for QEMU, run the processor-in-the-loop scenarios
(tests/pil, marker `pil`) and end with one line `PIL: N passed, M failed`.

Without qemu-system-arm or arm-none-eabi-gcc it prints a SKIP line and exits 0: the scenarios
need those two Debian packages (.ci/run installs them)."""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE.parents[1] / "firmware_stub" / "tools"))

from pil_board import missing_tools  # noqa: E402


class _Count:
    def __init__(self):
        self.passed = self.failed = self.skipped = 0

    def pytest_runtest_logreport(self, report):
        if report.when == "call" and report.passed:
            self.passed += 1
        elif report.failed:
            self.failed += 1
        elif report.skipped and report.when in ("setup", "call"):
            self.skipped += 1


def main(argv: list[str]) -> int:
    missing = missing_tools()
    if missing:
        print(f"SKIP: {', '.join(missing)} not installed; processor-in-the-loop tests not run "
              "(Debian: apt-get install qemu-system-arm gcc-arm-none-eabi)")
        return 0
    count = _Count()
    code = pytest.main([str(HERE), "-m", "pil", "-p", "no:cacheprovider", "-q", *argv], plugins=[count])
    skipped = f", {count.skipped} skipped" if count.skipped else ""
    print(f"PIL: {count.passed} passed, {count.failed} failed{skipped}")
    return int(code)


if __name__ == "__main__":
    sys.exit(main(sys.argv[1:]))
