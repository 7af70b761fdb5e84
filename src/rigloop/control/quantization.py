"""A hysteresis on the measured output, sized by the sensor's resolution.

Why: a quantized reading of a still output toggles between two neighbouring counts (an encoder
at a count edge, a speed reported in whole steps). Every toggle is a step of one count in the
error, a slope of one count per derivative window in the derivative estimate and, for an
order-2 model, a large jolt in F̂ (its weights grow as 1/T²): the actuator dithers and, on a
geared rig, hunts. The law therefore sees the output through a play (backlash) operator of
half-width ``h = band × resolution``::

    y_held = min(max(y_held, y - h), y + h)

A toggle of one count (``band`` = 1) leaves ``y_held`` still; a real move passes through with a
lag of ``h`` (the error the loop can leave at rest, and a delay of ``h / |y'|`` while moving).
That is the trade-off: the output may rest up to ``h`` from the reference instead of dithering
around it. With a reading much finer than its noise (the usual speed channel) ``h`` is far
below the noise and changes nothing measurable.

The resolution is the channel's configured ``resolution``; when it is not given, it is
measured: a quantized reading only ever steps by whole multiples of its count ``q``, so ``q`` is
the smallest step seen once ``MIN_STEPS`` consecutive non-zero steps have all been whole
multiples of it (to ``TOLERANCE`` of a count) and the run shows the lattice itself: steps in
both directions, or a reading that held its value and then moved on by whole counts. A
continuous reading (noise, a decay, a sine) breaks the run at once and keeps the band open, and
an exact ramp (equal steps, one direction, never pausing) is not mistaken for a quantized one.
"""

from __future__ import annotations

import math

#: Consecutive whole-multiple steps (both directions among them) before a measured resolution
#: is trusted.
MIN_STEPS = 8
#: How close to a whole number of counts a step must be (in counts).
TOLERANCE = 1e-3
#: Steps below this fraction of the value are rounding, not a sensor's count: the wire carries
#: float32 values (a unit in the last place is 6e-8 of the value), and a settled exact signal
#: wanders by a few of them. Real counts are far coarser (1 rpm at 3000 rpm is 3e-4).
FLOAT_NOISE = 1e-6


class QuantizationBand:
    """The play operator of the module docstring; ``filter(y)`` once per sample."""

    __slots__ = ("resolution", "band", "_held", "_last", "_q", "_run", "_signs", "_paused")

    def __init__(self, band: float = 1.0, resolution: float | None = None) -> None:
        for name, value in (("band", band), ("resolution", 0.0 if resolution is None else resolution)):
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value) \
                    or value < 0:
                raise ValueError(f"{name} = {value!r} must be a number >= 0")
        self.band = float(band)
        self.resolution = None if resolution is None else float(resolution)
        self.reset()

    def reset(self) -> None:
        self._held = math.nan
        self._last = math.nan
        self._q = 0.0          # candidate count
        self._run = 0          # consecutive steps that were whole multiples of it
        self._signs = 0        # bits: 1 a rising step in the run, 2 a falling one, 4 a resume
        self._paused = False   # the reading repeated since the last step

    @property
    def step(self) -> float:
        """The resolution in force: configured, measured, or 0 (not known yet / continuous)."""
        if self.resolution is not None:
            return self.resolution
        evidence = self._signs == 3 or self._signs & 4
        return self._q if self._run >= MIN_STEPS and evidence else 0.0

    def _observe(self, delta: float) -> None:
        """Update the measured count with one non-zero step (module docstring)."""
        size = abs(delta)
        q = self._q
        if q == 0.0:
            consistent, q = True, size
        elif size < q * (1.0 - TOLERANCE):           # a smaller step: must divide the old count
            k = round(q / size)
            consistent, q = abs(q - k * size) <= TOLERANCE * size, size
        else:
            consistent = abs(size - round(size / q) * q) <= TOLERANCE * q
        bits = (1 if delta > 0 else 2) | (4 if self._paused else 0)
        if consistent:
            self._run = min(self._run + 1, MIN_STEPS)   # capped: no growing int
            self._signs |= bits
        else:
            self._run, self._signs = 1, bits & 3
        self._q = q
        self._paused = False

    @property
    def half_width(self) -> float:
        """h: half the band's width (band counts wide in all)."""
        return 0.5 * self.band * self.step

    def error(self, e: float) -> float:
        """The error the law acts on: ``e`` with a dead band of ``h`` (shrunk by ``h`` beyond it,
        so that the law stays continuous). Without it an output stuck by dry friction a count or
        two from the reference makes the F̂-based laws integrate until it breaks free, overshoot
        and stick again: a hunt of a few counts."""
        h = self.half_width
        if h <= 0.0 or not math.isfinite(e):
            return e
        if e > h:
            return e - h
        if e < -h:
            return e + h
        return 0.0

    def filter(self, y: float) -> float:
        """The output the law acts on for the reading ``y`` (non-finite readings pass through)."""
        if not math.isfinite(y):
            return y
        last = self._last
        if self.resolution is None and math.isfinite(last):
            delta = y - last
            if abs(delta) > FLOAT_NOISE * max(abs(y), abs(last)):
                self._observe(delta)
            elif self._run:
                self._paused = True
        self._last = y
        h = self.half_width
        held = self._held
        if h <= 0.0 or not math.isfinite(held):
            self._held = y
        else:
            self._held = min(max(held, y - h), y + h)
        return self._held
