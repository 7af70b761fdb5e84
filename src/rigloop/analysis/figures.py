"""The lab-notebook figure of a session (or two sessions overlaid): PNG, and SVG on request.

Four stacked panels share the time axis: output with reference; actuator commanded and
applied with its limits; the estimate F̂; the error. A session with several runs gets one such
column per run. Trips are marked with a red vertical line
and their cause, transitions with a dotted line and their number; stretches where the loop was
not running are shaded. Sizes are chosen for an A4 page printed at 100 %.

Built on ``matplotlib.figure.Figure`` directly (no pyplot), so nothing global is touched and no
display is needed.
"""

from __future__ import annotations

import math
import textwrap
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from rigloop import palette
from rigloop.analysis.report import SessionAnalysis, fmt
from rigloop.analysis.session import ACTIVE_STATE

#: Above this many samples a trace is drawn as its per-bucket min/max envelope.
MAX_PLOT_POINTS = 20_000
#: At most this many runs get a column of panels each (the page stays readable).
MAX_RUN_COLUMNS = 6
_FONT = {"label": 10, "tick": 9, "title": 12, "caption": 9, "marker": 8}
_CAPTION_CHARS = 120   # fits the page width at the caption's font size
#: palette line style -> matplotlib's
_LS = {"solid": "-", "dashed": "--", "dotted": ":"}
#: per overlaid session: output and applied actuator in the first colour, commanded in the second
_STYLE = tuple({"color": main, "ls": "-"} for main, _ in palette.SESSIONS)
_CMD_STYLE = tuple({"color": cmd, "ls": _LS[palette.style("u_cmd")] if k == 0 else "-."}
                   for k, (_, cmd) in enumerate(palette.SESSIONS))
_REF = palette.colour("ref")


def session_figure(analyses: list[SessionAnalysis]) -> Figure:
    """Figure for one session, or two overlaid (A solid, B in the second colour).

    A session with several runs gets one column of panels per run (each ARM … stop, shown up
    to the next arm), up to ``MAX_RUN_COLUMNS``; a report of one run shows that run alone.
    """
    if not 1 <= len(analyses) <= 2:
        raise ValueError(f"session_figure takes one or two analyses, got {len(analyses)}")
    tags = ["A: ", "B: "] if len(analyses) == 2 else [""]
    spans = _column_spans(analyses)
    caption = [_caption(an, tag) for tag, an in zip(tags, analyses)]
    if len(analyses) == 1 and len(analyses[0].runs) > MAX_RUN_COLUMNS:
        caption.append(f"runs {MAX_RUN_COLUMNS + 1}–{len(analyses[0].runs)} are not drawn; "
                       f"use rigloop report SESSION --run N for each")
    caption_lines = [line for text in caption
                     for line in textwrap.wrap(text, width=_CAPTION_CHARS,
                                               subsequent_indent="    ")]
    bottom = 0.012 + 0.0155 * len(caption_lines)
    width = 8.27 if len(spans) == 1 else min(4.2 * len(spans), 23.4)
    fig = Figure(figsize=(width, 10.5), layout="constrained")
    fig.get_layout_engine().set(rect=(0.0, bottom, 1.0, 1.0 - bottom))
    grid = fig.subplots(4, len(spans), sharex="col", sharey="row", squeeze=False,
                        gridspec_kw={"height_ratios": [3, 2, 1.5, 1.5]})
    for col, (span, title) in enumerate(spans):
        _draw_column(list(grid[:, col]), analyses, tags, first_column=col == 0)
        if span is not None:
            grid[0, col].set_xlim(*span)
            _hide_marks_outside(grid[:, col])
        if title:
            grid[0, col].set_title(title, fontsize=_FONT["label"], pad=14)

    s0 = analyses[0].session
    if len(analyses) == 2:
        s1 = analyses[1].session
        title = f"{s0.rig}: A {s0.name} vs B {s1.name}"
    else:
        title = f"{s0.rig} — session started {s0.started_utc} (UTC)"
    fig.suptitle(title, fontsize=_FONT["title"])
    fig.text(0.01, 0.008, "\n".join(caption_lines), fontsize=_FONT["caption"], va="bottom",
             ha="left")
    return fig


def _column_spans(analyses: list[SessionAnalysis]) -> list[tuple[tuple[float, float] | None, str]]:
    """(time span, title) of each column: the whole session, or one per run."""
    if len(analyses) != 1:
        return [(None, "")]
    an = analyses[0]
    if an.all_runs <= 1 or not an.runs:
        return [(None, "")]
    t = an.session.samples["t"]
    t_last = float(t[-1]) if t.size else 0.0
    out = []
    for run in an.runs[:MAX_RUN_COLUMNS]:
        end = min(run.t_next, t_last)
        margin = 0.02 * max(end - run.t_start, 1e-3)
        out.append(((run.t_start - margin, end + margin),
                    f"run {run.index} of {an.all_runs}: {textwrap.shorten(run.ended, 48)}"))
    return out


def _hide_marks_outside(axes) -> None:
    """Transition and trip labels placed at a time outside this column's span are not drawn."""
    for ax in axes:
        for text in ax.texts:
            coords = getattr(text, "xycoords", None)
            if isinstance(coords, tuple) and coords[0] == "data":
                text.set_annotation_clip(True)


def _draw_column(axes, analyses: list[SessionAnalysis], tags: list[str], *,
                 first_column: bool) -> None:
    ax_y, ax_u, ax_f, ax_e = axes
    first = analyses[0]
    units = first.session.units
    act = first.session.actuator
    two = len(analyses) == 2
    for k, (tag, an) in enumerate(zip(tags, analyses)):
        s, style = an.session, _STYLE[k]
        t = s.samples["t"]
        # the output first, the reference dashed above it (a reference hidden under a good
        # output is the figure's most common misreading)
        ax_y.plot(*_envelope(t, s.column("y")), lw=1.4, label=f"{tag}output y", **style)
        ax_y.plot(*_envelope(t, s.column("ref")), color=_REF if k == 0 else palette.NEUTRAL,
                  ls="--" if k == 0 else ":", lw=1.1, zorder=3, label=f"{tag}reference r")
        # commanded solid in its own colour, applied dashed above it: both stay visible
        # where the device applied exactly what was commanded
        ax_u.plot(*_envelope(t, s.column("u_cmd")), lw=1.6, label=f"{tag}commanded",
                  **_CMD_STYLE[k])
        ax_u.plot(*_envelope(t, s.column("u")), lw=1.1, zorder=3, label=f"{tag}applied (device)",
                  color=style["color"], ls="--")
        ax_f.plot(*_envelope(t, s.column("f_hat")), lw=1.0, label=tag + r"$\hat{F}$", **style)
        ax_e.plot(*_envelope(t, s.column("e")), lw=1.0, label=f"{tag}e = y − r", **style)
        if k == 0:
            _shade_not_running(axes, t, s.samples.get("state"))
        _mark_transitions(axes, an, tag, row=k)
        _mark_trips(axes, an, tag)

    for level, name in ((act["min"], "min"), (act["max"], "max")):
        if math.isfinite(level):
            ax_u.axhline(level, color=palette.NEUTRAL, ls=":", lw=0.9)
            ax_u.annotate(f"actuator {name} {fmt(level)}", xy=(1.0, level),
                          xycoords=("axes fraction", "data"),
                          xytext=(-4, 3 if name == "min" else -10), textcoords="offset points",
                          ha="right", fontsize=_FONT["marker"], color=palette.NEUTRAL)
    ax_e.axhline(0.0, color="black", lw=0.6)

    if first_column:
        _label(ax_y, first.session.output_name, units["y"])
        _label(ax_u, act["name"], units["u"])
        _label(ax_f, r"estimate $\hat{F}$", units["f"])
        _label(ax_e, "error y − r", units["y"])
    ax_e.set_xlabel("time since first sample [s]", fontsize=_FONT["label"])
    for ax in axes:
        ax.grid(True, color="0.85", lw=0.6)
        ax.tick_params(labelsize=_FONT["tick"])
        if first_column and ax.get_legend_handles_labels()[0]:
            ax.legend(fontsize=_FONT["marker"], loc="upper left", ncol=2 if two else 1,
                      framealpha=0.85)


def save_figure(analyses: list[SessionAnalysis], *, png: str | Path | None = None,
                svg: str | Path | None = None, dpi: int = 150) -> list[Path]:
    """Write the figure to the given files; returns the paths written."""
    fig = session_figure(analyses)
    written = []
    for path, fmt_name in ((png, "png"), (svg, "svg")):
        if path is None:
            continue
        path = Path(path)
        fig.savefig(path, format=fmt_name, dpi=dpi, facecolor="white")
        written.append(path)
    return written


def _label(ax, name: str, unit: str) -> None:
    ax.set_ylabel(f"{name} [{unit}]" if unit else name, fontsize=_FONT["label"])


def _caption(an: SessionAnalysis, tag: str) -> str:
    y = an.session.units["y"]
    unit = f" {y}" if y else ""
    run = an.run
    trips = f"{len(an.trips)} trip(s)" if an.trips else "no trips"
    plan = ""
    if an.plan is not None:
        plan = f" · plan {'passed' if an.plan.get('passed') else 'FAILED'}"
    ended = "" if an.session.clean_end else " (ended without a clean stop)"
    return (f"{tag}{an.session.name}: outcome {an.session.outcome}{ended} · "
            f"RMS error {fmt(run.rms_error)}{unit} · IAE {fmt(run.iae)}{unit}·s · "
            f"max |error| {fmt(run.max_abs_error)}{unit} · {trips}{plan}")


def _envelope(t: np.ndarray, y: np.ndarray, max_points: int = MAX_PLOT_POINTS):
    """``(t, y)`` thinned to at most ~max_points, keeping each bucket's min and max so that
    spikes stay visible."""
    n = t.size
    if n <= max_points:
        return t, y
    buckets = max_points // 2
    edges = np.linspace(0, n, buckets + 1).astype(int)
    idx = []
    for a, b in zip(edges[:-1], edges[1:]):
        seg = y[a:b]
        if not np.isfinite(seg).any():
            idx.append(a)
            continue
        lo, hi = a + int(np.nanargmin(seg)), a + int(np.nanargmax(seg))
        idx.extend(sorted({lo, hi}))
    idx = np.asarray(idx)
    return t[idx], y[idx]


def _shade_not_running(axes, t: np.ndarray, state: np.ndarray | None) -> None:
    if state is None or t.size == 0:
        return
    off = state != ACTIVE_STATE
    if not off.any():
        return
    change = np.flatnonzero(np.diff(off.astype(np.int8))) + 1
    starts = np.concatenate(([0], change))
    ends = np.concatenate((change, [t.size]))
    label = "loop not running"
    for a, b in zip(starts, ends):
        if off[a]:
            t1 = t[b] if b < t.size else t[-1]
            for ax in axes:
                ax.axvspan(t[a], t1, color="0.9", lw=0, zorder=0, label=label if ax is axes[0] else None)
            label = None


def _mark_transitions(axes, an: SessionAnalysis, tag: str, row: int) -> None:
    """Dotted line at each transition's start, numbered above the top panel (one row per session)."""
    for seg in an.segments:
        for ax in axes:
            ax.axvline(seg.t_start, color="0.45", ls=":", lw=0.9)
        axes[0].annotate(f"{tag}T{seg.index}", xy=(seg.t_start, 1.0),
                         xycoords=("data", "axes fraction"), xytext=(0, 2 + 10 * row),
                         textcoords="offset points", fontsize=_FONT["marker"], color="0.3",
                         ha="center", va="bottom")


def _mark_trips(axes, an: SessionAnalysis, tag: str) -> None:
    for trip in an.trips:
        try:
            t = float(trip.get("t"))
        except (TypeError, ValueError):
            continue
        if not math.isfinite(t):
            continue
        for ax in axes:
            ax.axvline(t, color=palette.colour("trip"), lw=1.4)
        axes[0].annotate(f"{tag}trip: {trip.get('cause') or 'trip'}", xy=(t, 0.0),
                         xycoords=("data", "axes fraction"), xytext=(3, 4),
                         textcoords="offset points", fontsize=_FONT["marker"], color=palette.colour("trip"),
                         rotation=90, va="bottom")
