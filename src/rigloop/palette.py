"""Trace colours and line styles, shared by the desktop app and the report figures.

The hues are the eight-colour set of the "Color Universal Design (CUD): how to make figures and
presentations that are friendly to colorblind people" guidance (2008): chosen so that the common
forms of colour-vision deficiency (protan, deutan, tritan) still tell them apart. The set is
meant for a light background, so both the app's plots and the figures draw on a light surface;
its yellow is left out for that reason.

Colour is never the only cue. Pairs that must be told apart on one axis differ in line style as
well: the reference is dashed and drawn above the output; the commanded actuator value is solid,
the value the device applied dashed (a third cue when the two coincide: the dashes show the
commanded line through them).

No Qt and no matplotlib here: :mod:`rigloop.gui.trace_plots` and
:mod:`rigloop.analysis.figures` translate the style names.
"""

from __future__ import annotations

#: The CUD set (2008), as hex RGB.
BLACK = "#000000"
ORANGE = "#e69f00"
SKY_BLUE = "#56b4e9"
BLUISH_GREEN = "#009e73"
YELLOW = "#f0e442"        # not used on a light background: too little contrast
BLUE = "#0072b2"
VERMILLION = "#d55e00"
REDDISH_PURPLE = "#cc79a7"

#: The light surface the traces are drawn on, its grid and its axis text.
PLOT_BACKGROUND = "#fbfbf8"
PLOT_GRID = "#8c8c8c"
PLOT_TEXT = "#3c3c3c"
NEUTRAL = "#6e6e6e"       # bounds, cursor: present but not a trace

#: trace -> (colour, line style); styles: "solid", "dashed", "dotted"
TRACES: dict[str, tuple[str, str]] = {
    "y": (BLUE, "solid"),               # measured output
    "ref": (BLACK, "dashed"),           # reference, drawn above the output
    "u_cmd": (VERMILLION, "solid"),     # actuator as commanded by the host
    "u": (BLUISH_GREEN, "dashed"),      # actuator as applied by the device
    "f_hat": (REDDISH_PURPLE, "solid"),
    "e": (ORANGE, "solid"),
    "limit": (VERMILLION, "dotted"),    # trip limits of the output
    "bound": (NEUTRAL, "dotted"),       # actuator min / max
    "trip": (VERMILLION, "solid"),      # trip marker
    "cursor": (NEUTRAL, "dotted"),
}

#: further channels, in the order they are shown (the set minus black and yellow)
EXTRA: tuple[str, ...] = (SKY_BLUE, BLUISH_GREEN, REDDISH_PURPLE, ORANGE, BLUE, VERMILLION)

#: overlaid sessions in a report figure: (output/applied colour, commanded colour) of A and B
SESSIONS: tuple[tuple[str, str], ...] = ((BLUE, VERMILLION), (SKY_BLUE, REDDISH_PURPLE))

#: z-order: which trace is drawn above which (larger is on top)
ON_TOP = {"ref": 3, "u": 3}


def colour(trace: str) -> str:
    return TRACES[trace][0]


def style(trace: str) -> str:
    return TRACES[trace][1]
