"""The quantization band: a play (backlash) operator on the output and a dead band on the
error, sized by the output's resolution, configured or measured.

References: the play operator's defining property (the output moves only when the input leaves
the band around it) and the definition of a uniform quantizer (readings are whole multiples of
the count q; hand-built sequences here)."""

from __future__ import annotations

import math

import numpy as np
import pytest

from rigloop.control.controller import Controller, ControlParams
from rigloop.control.quantization import MIN_STEPS, QuantizationBand


def test_a_one_count_toggle_leaves_the_output_still():
    band = QuantizationBand(1.0, resolution=1.0)       # half-width 0.5 count
    held = [band.filter(y) for y in [10, 11, 10, 11, 10, 11, 10, 11]]
    assert held[0] == 10 and set(held[1:]) == {10.5}    # one move to the middle, then still
    moving = [band.filter(y) for y in [12, 13, 14, 15]]
    assert moving == [11.5, 12.5, 13.5, 14.5]           # a real move passes, 0.5 count behind


def test_the_error_dead_band_is_continuous():
    band = QuantizationBand(1.0, resolution=2.0)        # h = 1
    assert [band.error(e) for e in (-3.0, -1.0, -0.4, 0.0, 0.9, 1.0, 2.5)] == \
        [-2.0, 0.0, 0.0, 0.0, 0.0, 0.0, 1.5]
    off = QuantizationBand(0.0, resolution=2.0)
    assert off.error(0.3) == 0.3 and off.filter(5.0) == 5.0 and off.filter(7.0) == 7.0


def test_measured_resolution_of_an_encoder_signal():
    q = 2 * math.pi / 1024
    rng = np.random.default_rng(0)
    angle = np.cumsum(rng.normal(0.0, 0.7 * q, 400))          # a wandering shaft
    readings = q * np.round(angle / q)                         # whole counts (uniform quantizer)
    band = QuantizationBand()
    for y in readings:
        band.filter(y)
    assert band.step == pytest.approx(q, rel=1e-9)


@pytest.mark.parametrize("signal", [
    np.random.default_rng(1).normal(1500.0, 8.0, 500),             # continuous noisy reading
    0.5 * np.arange(500) + 3.0,                                     # an exact ramp
    np.concatenate([0.5 * np.arange(200), np.full(300, 99.5)]),     # ramp, then still
    10.0 * np.exp(-0.01 * np.arange(500)),                          # an exact decay
    np.sin(0.05 * np.arange(500)),                                  # an exact sine
])
def test_continuous_signals_keep_the_band_open(signal):
    band = QuantizationBand()
    for y in signal:
        band.filter(float(y))
    assert band.step == 0.0 and band.half_width == 0.0


def test_measured_resolution_needs_evidence_of_the_lattice():
    band = QuantizationBand()
    for y in range(MIN_STEPS + 3):              # equal steps, one direction: could be a ramp
        band.filter(float(y))
    assert band.step == 0.0
    band.filter(float(MIN_STEPS + 2))           # holds a count ...
    band.filter(float(MIN_STEPS + 3))           # ... and moves on by a whole count
    assert band.step == 1.0


def test_the_controller_holds_still_on_a_toggling_reading():
    # A still output read through an encoder at a count edge: 0, q, 0, q, ... With the band the
    # iPD's request stops changing; without it, it jumps every sample.
    q, ts = 0.01, 0.002
    requests = {}
    for band in (0.0, 1.0):
        ctl = Controller(ControlParams(law="iPD", order=2, alpha=10.0, kp=100.0, kd=20.0,
                                       window_s=0.02, quantization_band=band, resolution=q),
                         ts, -12, 12, 0.0)
        out = [ctl.step(q * (k % 2), 0.0, 0.005, 0.0, 0.0) for k in range(200)]
        requests[band] = np.array(out[100:])
    assert np.ptp(requests[1.0]) == 0.0
    assert np.ptp(requests[0.0]) > 0.1


def test_bad_band_values_name_the_field():
    with pytest.raises(ValueError, match="quantization_band"):
        ControlParams(quantization_band=-1.0)
    with pytest.raises(ValueError, match="resolution"):
        ControlParams(resolution=-0.1)
