"""Ask the OS for a better scheduling class for the engine process, and say what we got.

Tried in order: POSIX SCHED_FIFO (Linux; needs CAP_SYS_NICE or root), then a lower nice value
(POSIX), then HIGH_PRIORITY_CLASS on Windows. macOS has no SCHED_FIFO for user processes; there
only the nice step applies. Failure is normal and harmless: the loop still runs, just with more
jitter, and the log says so.
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


def _raise(realtime: bool) -> str:
    if realtime and hasattr(os, "sched_setscheduler") and hasattr(os, "SCHED_FIFO"):
        try:
            prio = min(20, os.sched_get_priority_max(os.SCHED_FIFO))
            os.sched_setscheduler(0, os.SCHED_FIFO, os.sched_param(prio))
            return f"scheduling: SCHED_FIFO priority {prio} obtained"
        except (PermissionError, OSError) as exc:
            fifo_msg = f"SCHED_FIFO refused ({exc.strerror or exc})"
    else:
        fifo_msg = "SCHED_FIFO not attempted" if not realtime else "SCHED_FIFO not available on this OS"
    if hasattr(os, "nice"):
        try:
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
