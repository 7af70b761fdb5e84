"""Reference profiles: analytic derivatives, C2 blends, exact end levels, outside references."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.interpolate import CubicSpline
from scipy.signal import chirp as scipy_chirp

from rigloop.control.reference import (
    Chirp,
    Constant,
    Levels,
    Table,
    Transition,
    build_reference,
    quintic_blend,
    with_setpoint,
)

LEVELS = {"kind": "levels", "initial": 1200.0, "blend_s": 1.0,
          "steps": [{"at": 2.0, "to": 2400.0}, {"at": 8.0, "to": 1800.0, "blend_s": 0.5}]}
RAMP = {"kind": "ramp", "initial": 1000.0, "start_s": 1.0, "rate_per_s": 100.0, "to": 1500.0, "blend_s": 0.8}
RAMP_DOWN_SHORT = {"kind": "ramp", "initial": 5.0, "start_s": 0.5, "rate_per_s": 10.0, "to": 4.0, "blend_s": 0.5}
SINE = {"kind": "sine", "initial": 1500.0, "start_s": 1.0, "amplitude": 200.0, "freq_hz": 0.5, "blend_s": 1.0}
CHIRP = {"kind": "chirp", "initial": 1500.0, "start_s": 0.5, "amplitude": 100.0, "f0_hz": 0.1, "f1_hz": 2.0,
         "duration_s": 20.0, "blend_s": 2.0}


def _sample(ref, t):
    out = np.array([ref.at(float(x)) for x in t])
    return out[:, 0], out[:, 1], out[:, 2]


@pytest.mark.parametrize("spec", [LEVELS, RAMP, RAMP_DOWN_SHORT, SINE, CHIRP], ids=["levels", "ramp", "ramp-short", "sine", "chirp"])
def test_derivatives_match_central_differences(spec):
    # The profiles are C2 but not C3 (the third derivative jumps where a blend starts or ends),
    # so the step of each difference keeps both truncation (~h times that jump) and rounding
    # (~eps·|r|/h^k) well below the tolerance.
    ref = build_reference(spec)
    t = np.linspace(-0.5, 25.0, 1201)  # includes blend corners such as t = 8.0 exactly
    r, dr, ddr = _sample(ref, t)
    h = 1e-6
    rp, drp, _ = _sample(ref, t + h)
    rm, drm, _ = _sample(ref, t - h)
    np.testing.assert_allclose((rp - rm) / (2 * h), dr, rtol=0, atol=1e-5 * max(1.0, np.abs(dr).max()))
    np.testing.assert_allclose((drp - drm) / (2 * h), ddr, rtol=0, atol=1e-4 * max(1.0, np.abs(ddr).max()))
    h2 = 1e-3
    rp2, rm2 = _sample(ref, t + h2)[0], _sample(ref, t - h2)[0]
    np.testing.assert_allclose((rp2 - 2 * r + rm2) / h2**2, ddr, rtol=0, atol=1e-2 * max(1.0, np.abs(ddr).max()))


def test_quintic_blend_is_c2_with_flat_ends():
    for tau, expected in ((0.0, (0.0, 0.0, 0.0)), (1.0, (1.0, 0.0, 0.0)), (0.5, (0.5, 1.875, 0.0))):
        assert quintic_blend(tau) == pytest.approx(expected, abs=1e-15)
    # one-sided limits at the ends equal the held values (C2)
    eps = 1e-7
    assert quintic_blend(eps) == pytest.approx((0.0, 0.0, 0.0), abs=1e-5)
    assert quintic_blend(1 - eps) == pytest.approx((1.0, 0.0, 0.0), abs=1e-5)


def _c2_at(ref, t0):
    """r, r', r'' are continuous at t0: the left/right gap shrinks with the distance.

    A jump J would leave a gap of about J at every distance; a continuous function's gap falls
    in proportion to the distance (here 100-fold), up to rounding.
    """
    far = np.abs(np.array(ref.at(t0 + 1e-5)) - np.array(ref.at(t0 - 1e-5)))
    near = np.abs(np.array(ref.at(t0 + 1e-7)) - np.array(ref.at(t0 - 1e-7)))
    rounding = 1e-9 * np.maximum(1.0, np.abs(np.array(ref.at(t0))))
    assert np.all(near <= 0.05 * far + rounding), (t0, far, near)


def test_levels_are_c2_and_hit_their_levels_exactly():
    ref = build_reference(LEVELS)
    for t in (2.0, 3.0, 8.0, 8.5):
        _c2_at(ref, t)
    assert ref.at(0.0) == (1200.0, 0.0, 0.0)
    assert ref.at(3.0) == (2400.0, 0.0, 0.0)  # end of the first blend, exactly
    assert ref.at(8.5) == (1800.0, 0.0, 0.0)
    assert ref.at(2.5)[0] == pytest.approx(1800.0)  # symmetric blend: half way at half time
    assert ref.duration == 8.5
    assert ref.transitions == [Transition(2.0, 3.0, 1200.0, 2400.0), Transition(8.0, 8.5, 2400.0, 1800.0)]
    # a value that is not exact in binary still comes out exactly
    odd = Levels(0.1, [(0.0, 0.3, 0.7)])
    assert odd.at(0.7)[0] == 0.3 and odd.at(0.0)[0] == 0.1


def test_ramp_reaches_its_rate_and_its_end_exactly():
    ref = build_reference(RAMP)
    assert ref.transitions == [Transition(1.0, 6.8, 1000.0, 1500.0)]  # 5 s at 100/s + blend 0.8
    assert ref.at(ref.duration) == (1500.0, 0.0, 0.0)
    t = np.linspace(0, 8, 8001)
    r, dr, ddr = _sample(ref, t)
    assert dr.max() == pytest.approx(100.0, rel=1e-12)
    assert np.all(np.diff(r) >= -1e-9)
    for corner in (1.0, 1.8, 6.0, 6.8):
        _c2_at(ref, corner)
    down = build_reference(RAMP_DOWN_SHORT)  # shorter than a blend: lower peak slope, same end
    assert down.at(down.duration)[0] == 4.0
    assert -10.0 < _sample(down, np.linspace(0, 2, 2001))[1].min() < 0


def test_sine_fades_in_and_keeps_r_prime_finite():
    ref = build_reference(SINE)
    assert ref.duration is None and ref.transitions == []
    _c2_at(ref, 1.0)
    _c2_at(ref, 2.0)
    r, dr, ddr = _sample(ref, np.array([3.5, 4.0]))  # full amplitude: 0.5 Hz, sin(2π·0.5·2.5) = 1
    assert r[0] == pytest.approx(1700.0) and r[1] == pytest.approx(1500.0, abs=1e-9)
    assert dr[1] == pytest.approx(200.0 * math.pi * math.cos(math.pi * 3.0))


def test_chirp_matches_scipy_and_sweeps_its_frequency():
    ref = build_reference(CHIRP)
    assert isinstance(ref, Chirp) and ref.duration == 20.5
    # Full-amplitude part against scipy.signal.chirp (reference library), 'linear' method;
    # phi = −90° turns its cosine into our sine.
    t = np.linspace(2.6, 18.4, 3000)
    r, _, _ = _sample(ref, t)
    expected = 1500.0 + 100.0 * scipy_chirp(t - 0.5, f0=0.1, t1=20.0, f1=2.0, method="linear", phi=-90)
    np.testing.assert_allclose(r, expected, atol=1e-9 * 1500)
    # Instantaneous frequency from the zero crossings: half a period between crossings.
    tx = np.linspace(2.6, 18.4, 20_001)
    x = _sample(ref, tx)[0] - 1500.0
    idx = np.nonzero(np.signbit(x[:-1]) != np.signbit(x[1:]))[0]
    crossings = tx[idx] - x[idx] * (tx[idx + 1] - tx[idx]) / (x[idx + 1] - x[idx])
    mids = 0.5 * (crossings[1:] + crossings[:-1])
    freq = 0.5 / np.diff(crossings)
    np.testing.assert_allclose(freq, [ref.instantaneous_frequency(m) for m in mids], rtol=2e-3)
    assert ref.instantaneous_frequency(0.5) == 0.1 and ref.instantaneous_frequency(20.5) == 2.0
    assert ref.at(20.5) == (1500.0, 0.0, 0.0) and ref.at(0.4) == (1500.0, 0.0, 0.0)
    for t0 in (0.5, 2.5, 18.5, 20.5):
        _c2_at(ref, t0)


def _write_table(tmp_path, text, name="profile.csv"):
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_table_spline_passes_through_the_points_and_matches_scipy(tmp_path):
    pts_t = [0.0, 1.0, 2.5, 3.0, 5.0, 7.5]
    pts_r = [100.0, 100.0, 180.0, 175.0, 120.0, 120.0]
    _write_table(tmp_path, "t,r\n" + "".join(f"{a},{b}\n" for a, b in zip(pts_t, pts_r)))
    ref = build_reference({"kind": "table", "file": "profile.csv", "blend_s": 1.0}, base_dir=tmp_path)
    assert isinstance(ref, Table) and ref.duration == 7.5
    for a, b in zip(pts_t, pts_r):
        assert ref.at(a)[0] == pytest.approx(b, abs=1e-12)
    # Reference library: scipy.interpolate.CubicSpline with natural end conditions.
    cs = CubicSpline(pts_t, pts_r, bc_type="natural")
    t = np.linspace(0.001, 7.499, 997)
    r, dr, ddr = _sample(ref, t)
    np.testing.assert_allclose(r, cs(t), rtol=1e-12, atol=1e-9)
    np.testing.assert_allclose(dr, cs(t, 1), rtol=1e-10, atol=1e-9)
    np.testing.assert_allclose(ddr, cs(t, 2), rtol=1e-10, atol=1e-9)
    assert ref.at(-1.0) == (100.0, 0.0, 0.0) and ref.at(10.0) == (120.0, 0.0, 0.0)


def test_two_point_table_is_a_straight_line():
    ref = Table([0.0, 2.0], [1.0, 5.0])
    assert ref.at(0.5) == pytest.approx((2.0, 2.0, 0.0))


@pytest.mark.parametrize(
    "text,needle",
    [
        ("", "empty"),
        ("time,value\n0,1\n1,2\n", "header must be 't,r'"),
        ("t,r\n0,1\n", "at least 2 data rows"),
        ("t,r\n0,1\n1,abc\n", r"profile.csv:3: r = 'abc' is not a number"),
        ("t,r\n0,1\n0,2\n", r"profile.csv:3: t = 0.0 does not increase"),
        ("t,r\n0,1\n1,2,3\n", r"profile.csv:3: expected 2 values"),
        ("t,r\n0,1\n1,nan\n", "not a finite number"),
    ],
)
def test_table_file_errors_name_the_file_and_line(tmp_path, text, needle):
    _write_table(tmp_path, text)
    with pytest.raises(ValueError, match=needle):
        build_reference({"kind": "table", "file": "profile.csv"}, base_dir=tmp_path)


def test_missing_table_file_is_a_clear_error(tmp_path):
    with pytest.raises(ValueError, match=r"reference.file: .*nothere.csv does not exist"):
        build_reference({"kind": "table", "file": "nothere.csv"}, base_dir=tmp_path)


@pytest.mark.parametrize(
    "spec,needle",
    [
        ({"kind": "square"}, r"reference.kind = 'square' is unknown"),
        ({"kind": "levels", "freq_hz": 1.0}, r"reference.freq_hz does not apply to kind levels"),
        ({"kind": "ramp", "to": 5.0}, r"reference.rate_per_s is required"),
        ({"kind": "ramp", "to": 5.0, "rate_per_s": -1.0}, r"reference.rate_per_s = -1.0 must be > 0"),
        ({"kind": "levels", "blend_s": 0.0, "steps": [{"at": 1.0, "to": 2.0}]}, r"reference.steps\[0\].blend_s = 0.0"),
        ({"kind": "levels", "steps": [{"at": 1.0, "to": 2.0}, {"at": 1.5, "to": 3.0}]},
         r"reference.steps\[1\].at = 1.5 s starts before the previous change has finished at 2.0 s"),
        ({"kind": "levels", "steps": [{"at": 1.0}]}, r"reference.steps\[0\].to is required"),
        ({"kind": "levels", "steps": [{"at": 1.0, "to": 2.0, "hold": 1}]}, r"reference.steps\[0\].hold is not a step key"),
        ({"kind": "levels", "initial": "high"}, r"reference.initial = 'high' is not a finite number"),
        ({"kind": "sine", "amplitude": 1.0, "freq_hz": 0.0}, r"reference.freq_hz = 0.0 must be > 0"),
        ({"kind": "chirp", "amplitude": 1.0, "f0_hz": 0.1, "f1_hz": 1.0, "duration_s": 1.0, "blend_s": 0.6},
         r"reference.blend_s = 0.6 s is more than half"),
        ([1, 2], "must be a mapping"),
    ],
)
def test_bad_specs_name_the_key_and_value(spec, needle):
    with pytest.raises(ValueError, match=needle):
        build_reference(spec)


def test_setpoint_splice_is_c2_and_lands_on_the_new_level():
    base = build_reference(SINE)
    t_now = 3.3  # mid-swing: r' and r'' far from zero
    ref = with_setpoint(base, t_now, 1800.0, 0.75)
    assert ref.at(3.0) == base.at(3.0)  # the past is untouched
    r0 = np.array(base.at(t_now))
    assert np.array(ref.at(t_now)) == pytest.approx(r0, rel=1e-12)
    _c2_at(ref, t_now)
    _c2_at(ref, t_now + 0.75)
    assert ref.at(t_now + 0.75) == (1800.0, 0.0, 0.0)
    assert ref.duration == pytest.approx(t_now + 0.75)
    assert ref.transitions[-1] == Transition(t_now, t_now + 0.75, r0[0], 1800.0)
    h = 1e-5
    for t in np.linspace(t_now + 0.01, t_now + 0.74, 15):
        r, dr, ddr = ref.at(t)
        assert (ref.at(t + h)[0] - ref.at(t - h)[0]) / (2 * h) == pytest.approx(dr, rel=1e-5, abs=1e-3)
        assert (ref.at(t + h)[1] - ref.at(t - h)[1]) / (2 * h) == pytest.approx(ddr, rel=1e-5, abs=1e-2)


def test_setpoint_keeps_finished_transitions_and_validates():
    base = build_reference(LEVELS)
    ref = with_setpoint(base, 5.0, 1000.0, 1.0)
    assert ref.transitions == [Transition(2.0, 3.0, 1200.0, 2400.0), Transition(5.0, 6.0, 2400.0, 1000.0)]
    again = with_setpoint(ref, 6.5, 1100.0, 0.5)  # a chain of live changes
    assert again.at(5.5) == ref.at(5.5) and again.at(7.0) == (1100.0, 0.0, 0.0)
    with pytest.raises(ValueError, match="blend_s = 0.0 must be > 0"):
        with_setpoint(base, 5.0, 1.0, 0.0)
    with pytest.raises(ValueError, match="level = nan"):
        with_setpoint(base, 5.0, float("nan"), 1.0)
    with pytest.raises(TypeError, match="Reference"):
        with_setpoint("levels", 5.0, 1.0, 1.0)


def test_non_finite_time_gives_nan_not_an_exception():
    for ref in (build_reference(LEVELS), build_reference(SINE), Constant(3.0)):
        assert all(math.isnan(v) for v in ref.at(float("nan")))


def test_the_continuity_check_catches_a_kink():
    # A linear blend (C0 only) must fail the check used above.
    from rigloop.control.reference import Reference

    class LinearBlend(Reference):
        def at(self, t):
            if t < 1.0:
                return 0.0, 0.0, 0.0
            return t - 1.0, 1.0, 0.0

    with pytest.raises(AssertionError):
        _c2_at(LinearBlend(), 1.0)
