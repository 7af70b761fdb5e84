"""Ask the OS for a better scheduling class for the engine process, and say what we got.

Tried in order: POSIX SCHED_FIFO (Linux; needs CAP_SYS_NICE or root), then a lower nice value
(POSIX), then HIGH_PRIORITY_CLASS on Windows. macOS has no SCHED_FIFO for user processes; there
only the nice step applies. Failure is normal and harmless: the loop still runs, just with more
jitter, and the log says so.

What is raised is given back: :func:`snapshot` before and :func:`restore` after a session, so an
engine that runs inside another process (the tests, a script) leaves that process as it found it.
The real-time class is asked with SCHED_RESET_ON_FORK where the OS has it, so a child started
later (a simulated device, a compiler) never inherits a priority that could starve the machine.
"""

from __future__ import annotations

import os
import sys


def raise_priority(realtime: bool = True) -> str:
    """Try to raise this process's priority; return a sentence for the log."""
    return request_priority(realtime)[1]


def request_priority(realtime: bool = True) -> tuple[str, str]:
    """Try to raise this process's priority; return (what was obtained, a sentence for the log).
    "What was obtained" is ``SCHED_FIFO 20``, ``nice -10``, ``HIGH_PRIORITY_CLASS`` or ``normal``."""
    text = _raise(realtime)
    if " obtained" not in text:
        return "normal", text
    granted = text.removeprefix("scheduling: ").rsplit(" obtained", 1)[0].rsplit("; ", 1)[-1]
    return granted.replace(" priority", ""), text


def snapshot() -> dict:
    """This thread's scheduling class and the process's nice value, for :func:`restore`."""
    snap: dict = {}
    if hasattr(os, "sched_getscheduler"):
        try:
            snap["policy"] = os.sched_getscheduler(0)
            snap["param"] = os.sched_getparam(0)
        except OSError:
            pass
    if hasattr(os, "getpriority"):
        try:
            snap["nice"] = os.getpriority(os.PRIO_PROCESS, 0)
        except OSError:
            pass
    return snap


def restore(snap: dict) -> None:
    """Give back what :func:`request_priority` took; never raises (lowering needs no privilege)."""
    if "policy" in snap:
        try:
            os.sched_setscheduler(0, snap["policy"], snap["param"])
        except OSError:
            pass
    if "nice" in snap:
        try:
            os.setpriority(os.PRIO_PROCESS, 0, snap["nice"])
        except OSError:
            pass


def _raise(realtime: bool) -> str:
    if realtime and hasattr(os, "sched_setscheduler") and hasattr(os, "SCHED_FIFO"):
        try:
            prio = min(20, os.sched_get_priority_max(os.SCHED_FIFO))
            policy = os.SCHED_FIFO | getattr(os, "SCHED_RESET_ON_FORK", 0)
            os.sched_setscheduler(0, policy, os.sched_param(prio))
            return f"scheduling: SCHED_FIFO priority {prio} obtained"
        except (PermissionError, OSError) as exc:
            fifo_msg = f"SCHED_FIFO refused ({exc.strerror or exc})"
    else:
        fifo_msg = "SCHED_FIFO not attempted" if not realtime else "SCHED_FIFO not available on this OS"
    if hasattr(os, "nice"):
        try:
            if hasattr(os, "SCHED_RESET_ON_FORK") and hasattr(os, "SCHED_OTHER"):
                try:  # children get nice 0 back, not our -10
                    os.sched_setscheduler(0, os.SCHED_OTHER | os.SCHED_RESET_ON_FORK, os.sched_param(0))
                except OSError:
                    pass
            os.nice(-10)
            return f"scheduling: {fifo_msg}; nice -10 obtained"
        except (PermissionError, OSError) as exc:
            return f"scheduling: {fifo_msg}; nice -10 refused ({exc.strerror or exc}); running at normal priority"
    if sys.platform == "win32":  # pragma: no cover - exercised on Windows only
        try:
            import ctypes

            kernel32 = ctypes.windll.kernel32  # type: ignore[attr-defined]
            ok = kernel32.SetPriorityClass(kernel32.GetCurrentProcess(), 0x00000080)
            return "scheduling: HIGH_PRIORITY_CLASS obtained" if ok else "scheduling: HIGH_PRIORITY_CLASS refused"
        except Exception as exc:  # noqa: BLE001
            return f"scheduling: could not change priority ({exc})"
    return f"scheduling: {fifo_msg}; running at normal priority"
