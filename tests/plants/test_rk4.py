"""RK4 integrator: textbook properties of the classical fourth-order method."""

from __future__ import annotations

import math
import tracemalloc

import numpy as np
import pytest

from rigloop.plants.rk4 import RK4, substeps_for


def _integrate(rhs_into, x0, t_end, steps, u=0.0):
    x = np.array(x0, dtype=float)
    RK4(rhs_into, x.size).advance(0.0, x, u, t_end, steps)
    return x


def test_exact_for_cubic_in_time():
    # For dx/dt = f(t) one RK4 step is the three-point quadrature rule with weights 1/6, 4/6, 1/6, which is exact for cubics
    # (any numerical-analysis textbook; from memory).
    def rhs(t, x, u, out):
        out[0] = 4.0 * t**3 - 3.0 * t**2 + 2.0 * t - 1.0

    x = _integrate(rhs, [0.5], 2.0, 3)
    exact = 0.5 + 2.0**4 - 2.0**3 + 2.0**2 - 2.0
    assert x[0] == pytest.approx(exact, rel=1e-13)


def test_global_error_is_fourth_order():
    # Classical RK4 has global error O(h^4): halving h divides it by about 16 (from memory).
    def rhs(t, x, u, out):
        out[0] = -2.0 * x[0] + u

    exact = math.exp(-2.0 * 3.0)
    errors = [abs(_integrate(rhs, [1.0], 3.0, n)[0] - exact) for n in (60, 120, 240)]
    orders = [math.log2(errors[0] / errors[1]), math.log2(errors[1] / errors[2])]
    assert all(abs(p - 4.0) < 0.1 for p in orders), orders


def test_held_input_enters_every_stage():
    # dx/dt = u with u held: x(T) = x0 + u*T exactly.
    def rhs(t, x, u, out):
        out[0] = u

    assert _integrate(rhs, [1.0], 0.3, 7, u=2.5)[0] == pytest.approx(1.75, rel=1e-14)


def test_substeps_for():
    assert substeps_for(0.01, 0.0025) == 4
    assert substeps_for(0.01, 0.003) == 4
    assert substeps_for(0.001, 0.01) == 1
    with pytest.raises(ValueError, match="max_step"):
        substeps_for(0.01, 0.0)


def test_bad_arguments_are_named():
    def rhs(t, x, u, out):
        out[:] = 0.0

    rk = RK4(rhs, 2)
    with pytest.raises(ValueError, match="substeps"):
        rk.advance(0.0, np.zeros(2), 0.0, 0.1, 0)
    with pytest.raises(ValueError, match="dt"):
        rk.advance(0.0, np.zeros(2), 0.0, -0.1, 1)


def test_steps_do_not_accumulate_memory():
    def rhs(t, x, u, out):
        out[0] = x[1]
        out[1] = -x[0]

    rk = RK4(rhs, 2)
    x = np.array([1.0, 0.0])
    rk.advance(0.0, x, 0.0, 0.1, 10)  # warm up caches
    tracemalloc.start()
    try:
        before, _ = tracemalloc.get_traced_memory()
        rk.advance(0.0, x, 0.0, 10.0, 5000)
        after, _ = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert after - before < 1024
    # Harmonic oscillator: energy conserved to RK4 accuracy over 10 s with h = 2 ms.
    assert x[0] ** 2 + x[1] ** 2 == pytest.approx(1.0, abs=1e-9)
