"""What the window says, in words: engine states, trip causes and device status bits.

Colour helps a glance, but a state must never be told by colour alone (colour-blind operators,
grey-scale printouts of a screenshot), so every state and trip has a sentence here. No Qt import:
the texts are tested on their own.
"""

from __future__ import annotations

import math

from rigloop.protocol.messages import Status

#: state -> (headline, what it means for the rig and what the operator can do next)
STATE_WORDS: dict[str, tuple[str, str]] = {
    "disconnected": ("DISCONNECTED", "No rig connected. Choose a config and a device, then Connect."),
    "connecting": ("CONNECTING", "Starting the engine and greeting the device ..."),
    "idle": ("IDLE \u2013 OUTPUT SAFE", "Connected. The actuator holds its safe value. Arm to close the loop."),
    "running": ("RUNNING", "Loop closed: the control law drives the actuator."),
    "stopping": ("STOPPING", "Ramping the actuator down to its safe value."),
    "tripped": ("TRIPPED \u2013 RIG STOPPED", "Stop latched. Read the cause, make the rig safe, then Reset."),
}

#: what the Help button shows (docs/gui.md has the whole tour)
HELP_TEXT = (
    "<p><b>STOP</b> (the red button) or <b>Esc</b>, wherever the focus is: a <b>software stop</b>. "
    "The engine sends STOP to the device at once and the trip latches until you press Reset trip.</p>"
    "<p><b>This is not an emergency-stop device.</b> It relies on this computer, the link and the "
    "device's firmware. The rig needs its own hardwired emergency stop, within reach, and guards "
    "on everything that spins (safety.md).</p>"
    "<p><b>Ramp down</b>: a controlled stop at the actuator's slew rate. Closing the window (or "
    "<b>Ctrl+Q</b>, or SIGTERM) ramps a moving rig down first, then ends the session.</p>"
    "<p>Tuning: press Enter in a field to send it; a refused value shows what is allowed.</p>")

#: trip cause -> plain sentence (safety.md lists the causes)
CAUSE_WORDS: dict[str, str] = {
    "e-stop": "Operator e-stop",
    "limit": "A measured channel left its limits",
    "rate-limit": "A channel changed faster than allowed",
    "frozen-sensor": "A sensor value froze",
    "non-finite": "A value was not a number (NaN or infinity)",
    "stale-data": "No fresh sample arrived in time",
    "link-errors": "Too many damaged frames on the link",
    "link-lost": "The link to the device was lost",
    "device-fault": "The device reported a fault",
    "device-watchdog": "The device's command watchdog expired",
    "overrun": "The host fell behind the device's samples too often",
    "max-duration": "The run lasted longer than allowed",
    "front-end-lost": "The desktop app stopped answering",
    "recorder-failed": "The session recording could not be written",
    "internal-error": "An internal error in the engine",
}

#: device status bit -> words
STATUS_BIT_WORDS: dict[Status, str] = {
    Status.ARMED: "armed",
    Status.STOP_LATCHED: "stop latched",
    Status.WATCHDOG: "watchdog expired",
    Status.CLAMPED: "output clamped",
    Status.FAULT: "fault",
    Status.CONFIGURED: "configured",
    Status.RX_ERROR: "receive error",
    Status.OVERRUN: "device overrun",
}

#: bits that deserve attention when set
STATUS_WARNING_BITS = Status.WATCHDOG | Status.FAULT | Status.RX_ERROR | Status.OVERRUN


def state_headline(state: str) -> str:
    return STATE_WORDS.get(state, (state.upper(), ""))[0]


def state_hint(state: str) -> str:
    return STATE_WORDS.get(state, ("", ""))[1]


def fmt_num(x, digits: int = 4) -> str:
    """A number the way a person reads it off a panel (``3105.2``, ``0.0123``); '-' when unknown."""
    if x is None:
        return "-"
    try:
        v = float(x)
    except (TypeError, ValueError):
        return str(x)
    if not math.isfinite(v):
        return "-"
    return f"{v:.{digits}g}" if abs(v) < 10 ** digits else f"{v:.0f}"


def describe_trip(trip: dict | None, units: dict[str, str] | None = None) -> str:
    """One paragraph for the operator: what tripped (cause and the engine's message), the value
    against its limit, when, and the kind of stop."""
    if not trip:
        return ""
    units = units or {}
    cause = str(trip.get("cause") or "unknown")
    head = CAUSE_WORDS.get(cause, f"Trip ({cause})")
    message = str(trip.get("message") or "").strip().rstrip(".")
    if message.lower().startswith(head.lower()):
        # the engine's message already says it ("operator e-stop (gui button)"): once is enough
        text = f"{message[0].upper()}{message[1:]}."
    else:
        text = f"{head}: {message}." if message else f"{head}."
    channel = trip.get("channel")
    unit = f" {units[channel]}" if channel and units.get(channel) else ""
    figures = []
    if trip.get("value") is not None and fmt_num(trip["value"]) != "-":
        figures.append(f"value {fmt_num(trip['value'])}{unit}")
    if trip.get("limit") is not None and fmt_num(trip["limit"]) != "-":
        figures.append(f"limit {fmt_num(trip['limit'])}{unit}")
    if trip.get("t") is not None:
        figures.append(f"at t = {fmt_num(trip['t'], 5)} s")
    if trip.get("stop") == "ramped":
        figures.append("ramped stop")
    if figures:
        first = figures[0]
        text += " " + first[0].upper() + first[1:] + "".join(", " + f for f in figures[1:]) + "."
    return text


def describe_completed_run(runs: int, duration_s: float | None, session_dir: str | None) -> str:
    """The banner's words after a run reached its duration and the rig went back to idle."""
    which = "The run" if runs <= 1 else f"Run {runs}"
    length = f" ({fmt_num(duration_s)} s)" if duration_s else ""
    where = f" Recorded in {session_dir}." if session_dir else ""
    return f"{which} completed{length}; output safe.{where} Arm to run it again."


def status_bit_words(bits: int | None) -> list[tuple[str, bool]]:
    """The set bits as ``(word, is_warning)``, in bit order."""
    if not bits:
        return []
    out = []
    for flag, word in STATUS_BIT_WORDS.items():
        if int(bits) & int(flag):
            out.append((word, bool(flag & STATUS_WARNING_BITS)))
    return out
