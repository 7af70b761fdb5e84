"""The bump test and its suggestions over the scenario suite (configs/scenarios/).

Every rig of the suite is treated alike — nothing here names a scenario. The truth comes from
the rig model (``rigloop.plants.scenario.Scenario.truth``: quasi-static alpha and dy/du at the
operating point), never from a run. Tolerances are looser than the benchmark's targets
(``bench/control_quality.py``: alpha and gain within ±15 %, the model-free law at most 0.85x the
SIMC controller's RMS error with at most 8 % overshoot), so that the tests hold on other seeds:

* speed-like rigs (order 1): alpha and the static gain within ±15 % (the issue's tolerance);
* the model-free law with the suggestions: RMS error of the true output at most 0.95x that of
  the PID by the SIMC rules ('Simple analytic rules for model reduction and PID controller
  tuning', Journal of Process Control, 2003) from the same bump test, overshoot at most 12 %;
* position rigs (order 2): alpha within ±25 %, or a refusal that says why and what to try; a
  suggested iPD keeps the output inside its limits over the scenario's profile.
"""

from __future__ import annotations

import pytest

from rigloop.analysis.identify import plan_bump
from rigloop.analysis.identify.offline import identify_offline
from rigloop.analysis.identify.quality import compare
from rigloop.plants.scenario import load_suite

SUITE = load_suite()


def _identify(sc):
    cfg, a = sc.config, sc.config.actuator
    truth = sc.truth()
    plan = plan_bump(a.min, a.max, a.safe, a.slew_per_s, rate_hz=cfg.device.rate_hz, at=truth.u,
                     max_duration_s=cfg.limits.max_duration_s, order=sc.order)
    rig, sensor = sc.build()
    limit = cfg.limits.channels.get(sc.output)
    result = identify_offline(rig, plan, ts=sc.period_s, output=sc.output, order=sc.order,
                              sensor=sensor, kind=cfg.control.estimator.kind,
                              output_limits=(limit.min, limit.max) if limit else (None, None))
    return truth, result


@pytest.fixture(scope="module")
def identified():
    return {sc.name: (sc, *_identify(sc)) for sc in SUITE}


def test_the_suite_has_speed_and_position_rigs():
    orders = [sc.order for sc in SUITE]
    assert len(SUITE) >= 6 and orders.count(1) >= 5 and orders.count(2) >= 1


@pytest.mark.parametrize("name", [sc.name for sc in SUITE if sc.order == 1])
def test_bump_test_alpha_and_gain_within_15_percent_of_the_truth(identified, name):
    sc, truth, result = identified[name]
    assert result.refusals == [] and result.error is None, (result.refusals, result.error)
    est = result.estimates
    assert est.alpha == pytest.approx(truth.alpha, rel=0.15)
    assert est.gain == pytest.approx(truth.static_gain, rel=0.15)
    # the noise floor is what the fit leaves: the model describes the response
    assert all(s.fit_rms < 2 * est.noise_std for s in est.responded)


@pytest.mark.parametrize("name", [sc.name for sc in SUITE if sc.order == 1])
def test_suggested_ip_beats_simc_without_overshoot(identified, name):
    sc, truth, result = identified[name]
    s = result.suggestions
    assert s is not None and s.law == "iP"
    # the closed loop respects the delay: no faster than 3x the loop's dead time
    assert s.tau_cl >= 3 * s.loop_delay_s - 1e-12
    scores = compare(sc, s)
    ip, simc = scores["iP"], scores["SIMC"]
    assert ip.rms <= 0.95 * simc.rms, (ip, simc)
    assert ip.overshoot_pct <= 12.0, ip
    assert not ip.outside_limits


@pytest.mark.parametrize("name", [sc.name for sc in SUITE if sc.order == 2])
def test_position_rig_alpha_within_25_percent_or_a_refusal_with_a_reason(identified, name):
    sc, truth, result = identified[name]
    if result.suggestions is None:
        reasons = result.refusals or [result.error]
        assert reasons and all(r is not None for r in reasons)
        assert all(r.reason and r.advice for r in result.refusals)
        return
    assert result.estimates.alpha == pytest.approx(truth.alpha, rel=0.25)
    assert result.suggestions.window_samples >= 10          # never the 7-sample window
    scores = compare(sc, result.suggestions)
    assert not scores[result.suggestions.law].outside_limits


def test_the_bump_test_itself_stays_inside_the_output_limits(identified):
    """The position rig's excursions end at the limits guard instead of running into a trip."""
    for sc, truth, result in identified.values():
        limit = sc.config.limits.channels.get(sc.output)
        if limit is None:
            continue
        y = result.record.y_true
        assert limit.min is None or y.min() >= limit.min, sc.name
        assert limit.max is None or y.max() <= limit.max, sc.name
