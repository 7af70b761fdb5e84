"""Engine states as an explicit transition table with a latched trip state.

    disconnected --connected--> idle --arm--> running --ramp_down--> stopping --ramped_out--> idle
    running/stopping --stop--> idle            (immediate safe output, not latched)
    any connected state --trip--> tripped      (latched; e-stop is a trip too)
    tripped --reset--> idle                     (explicit user action; never restarts motion)

Anything not in the table is refused with a message naming the state, so a front end can show
why a button did nothing.
"""

from __future__ import annotations

from enum import Enum


class State(str, Enum):
    DISCONNECTED = "disconnected"
    IDLE = "idle"
    RUNNING = "running"
    STOPPING = "stopping"
    TRIPPED = "tripped"


#: Numeric codes used in the telemetry ring (floats in shared memory).
STATE_CODES = {s: i for i, s in enumerate(State)}
STATE_BY_CODE = {i: s for s, i in STATE_CODES.items()}

_S = State
TRANSITIONS: dict[tuple[State, str], State] = {
    (_S.DISCONNECTED, "connected"): _S.IDLE,
    (_S.IDLE, "arm"): _S.RUNNING,
    (_S.RUNNING, "ramp_down"): _S.STOPPING,
    (_S.RUNNING, "stop"): _S.IDLE,
    (_S.STOPPING, "stop"): _S.IDLE,
    (_S.STOPPING, "ramped_out"): _S.IDLE,
    (_S.IDLE, "trip"): _S.TRIPPED,
    (_S.RUNNING, "trip"): _S.TRIPPED,
    (_S.STOPPING, "trip"): _S.TRIPPED,
    (_S.TRIPPED, "trip"): _S.TRIPPED,
    (_S.TRIPPED, "reset"): _S.IDLE,
    (_S.IDLE, "stop"): _S.IDLE,
    (_S.TRIPPED, "stop"): _S.TRIPPED,
}


class TransitionRefused(Exception):
    """An event that the current state does not accept."""


def next_state(state: State, event: str) -> State:
    try:
        return TRANSITIONS[(state, event)]
    except KeyError:
        allowed = sorted(e for (s, e) in TRANSITIONS if s is state)
        raise TransitionRefused(
            f"'{event}' is not possible while {state.value}; possible now: {', '.join(allowed) or 'nothing'}"
        ) from None
