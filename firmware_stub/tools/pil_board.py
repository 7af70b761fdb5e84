"""The emulated STM32F4 board for processor-in-the-loop runs: QEMU's netduinoplus2 (an STM32F405)
running build/pil/rigloop-pil.elf, its USART2 on a pseudo-terminal.

Standard library only, so the tests (tests/pil) and the benchmark (bench/pil_bench.py) share it.
QEMU is started and stopped by its process id, never by name.

    board = EmulatedBoard.start(elf)      # board.pty is "/dev/pts/N"
    ...                                   # open board.pty with rigloop's serial link
    board.stop()
"""

from __future__ import annotations

import os
import re
import selectors
import shutil
import signal
import subprocess
from dataclasses import dataclass
from pathlib import Path

STUB = Path(__file__).resolve().parents[1]
PIL_ELF = STUB / "build" / "pil" / "rigloop-pil.elf"
QEMU = "qemu-system-arm"
MACHINE = "netduinoplus2"
# QEMU prints one line per pty; serial0 is USART1 (sent to null), serial1 is USART2.
_PTY_LINE = re.compile(r"char device redirected to (\S+) \(label serial1\)")
_BOOT_TIMEOUT_S = 30.0
# QEMU's scheduling: the normal class, whatever its parent has (a test process that ran an
# engine in-process may still hold SCHED_FIFO, and a QEMU that inherits it starves the engine's
# next session), then nice -10 where permitted. QEMU moves the host's bytes into the emulated
# USART one per round of its main loop, each waiting for a thread to be scheduled, so a busy
# machine slows the emulated board first. A real-time class for QEMU was tried (SCHED_RR 1,
# SCHED_FIFO 21): its threads then delayed the engine's serial writes past their 100 ms timeout.
_NICE = -10


def missing_tools() -> list[str]:
    """Programs the PIL run needs that are not on PATH."""
    return [t for t in (QEMU, "arm-none-eabi-gcc", "make") if shutil.which(t) is None]


def build_image(timeout_s: float = 300.0) -> subprocess.CompletedProcess:
    """make -C firmware_stub pil (builds the image when its sources changed)."""
    return subprocess.run(["make", "--no-print-directory", "-C", str(STUB), "pil"],
                          capture_output=True, text=True, timeout=timeout_s, check=False)


def _raise_priority() -> None:  # runs in the child between fork and exec
    try:
        os.sched_setscheduler(0, os.SCHED_OTHER, os.sched_param(0))
    except (AttributeError, OSError):
        pass
    try:
        os.nice(_NICE)
    except OSError:
        pass


@dataclass
class EmulatedBoard:
    proc: subprocess.Popen
    pty: str

    @classmethod
    def start(cls, elf: Path = PIL_ELF, boost: bool = True) -> "EmulatedBoard":
        args = [QEMU, "-M", MACHINE, "-nographic", "-monitor", "none",
                "-serial", "null", "-serial", "pty", "-kernel", str(elf)]
        proc = subprocess.Popen(args, stdin=subprocess.DEVNULL, stdout=subprocess.PIPE,
                                stderr=subprocess.STDOUT, text=True,
                                preexec_fn=_raise_priority if boost else None)
        sel = selectors.DefaultSelector()
        sel.register(proc.stdout, selectors.EVENT_READ)
        seen: list[str] = []
        try:
            while True:
                if not sel.select(timeout=_BOOT_TIMEOUT_S):
                    raise RuntimeError(f"QEMU printed no pty within {_BOOT_TIMEOUT_S:.0f} s: {seen}")
                line = proc.stdout.readline()
                if not line:
                    raise RuntimeError(f"QEMU exited (code {proc.wait()}): {''.join(seen)}")
                seen.append(line)
                found = _PTY_LINE.search(line)
                if found:
                    return cls(proc, found.group(1))
        except BaseException:
            cls(proc, "").stop()
            raise
        finally:
            sel.close()

    def stop(self) -> int:
        """SIGTERM to this QEMU's process id, SIGKILL if it has not gone within 10 s."""
        if self.proc.poll() is None:
            os.kill(self.proc.pid, signal.SIGTERM)
            try:
                self.proc.wait(timeout=10)
            except subprocess.TimeoutExpired:
                os.kill(self.proc.pid, signal.SIGKILL)
                self.proc.wait()
        if self.proc.stdout is not None:
            self.proc.stdout.close()
        return self.proc.returncode
