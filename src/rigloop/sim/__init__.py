"""The simulated device: a plant model behind the real wire protocol.

:mod:`.device` is the protocol state machine (pure: no I/O, no clock of its own),
:mod:`.faults` parses and injects faults, :mod:`.server` is the process main loop (UDP or a
pseudo-terminal, realtime or lockstep clock) and :mod:`.launcher` starts it as a child process
for the engine. Nothing here imports Qt.
"""

from __future__ import annotations
