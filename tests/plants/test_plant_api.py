"""make_plant, parameter overrides and argument checks: clear messages naming key and value."""

from __future__ import annotations

import math

import numpy as np
import pytest

from rigloop.plants import Plant, make_plant, plant_parameters


@pytest.mark.parametrize("kind", ["fan", "motor"])
def test_plants_offer_the_shared_interface(kind):
    plant = make_plant(kind)
    assert isinstance(plant, Plant)
    assert plant.kind == kind
    assert len(plant.channel_names) == len(plant.channel_units) == plant.read().size
    assert plant.u_min <= plant.u_safe <= plant.u_max
    assert set(plant.nominal_noise_std) == set(plant.channel_names)
    keys = [row[0] for row in plant_parameters(kind)]
    assert "inertia_kgm2" in keys and all(row[3] for row in plant_parameters(kind))


def test_override_changes_the_model():
    heavy = make_plant("fan", {"inertia_kgm2": 3.0e-4})
    light = make_plant("fan")
    assert heavy.true_alpha("speed_rpm", 1, 50.0) == pytest.approx(light.true_alpha("speed_rpm", 1, 50.0) / 2)


def test_unknown_key_names_key_suggestion_and_allowed_keys():
    with pytest.raises(ValueError) as info:
        make_plant("fan", {"intertia_kgm2": 1e-4})
    text = str(info.value)
    assert "'intertia_kgm2'" in text and "did you mean 'inertia_kgm2'" in text
    assert "allowed keys:" in text and "airflow_m3h_per_rad_s" in text


@pytest.mark.parametrize("kind, key, value, fragment", [
    ("fan", "inertia_kgm2", -1.0, "> 0"),
    ("fan", "resistance_ohm", "six", "is not a number"),
    ("fan", "viscous_nms", True, "is not a number"),
    ("fan", "supply_v", float("nan"), "is not finite"),
    ("motor", "encoder_counts_per_rev", 1.5, "whole number"),
    ("motor", "dry_friction_nm", -0.1, ">= 0"),
    ("motor", "inductance_h", None, "missing"),
])
def test_bad_values_name_key_value_and_rule(kind, key, value, fragment):
    with pytest.raises(ValueError) as info:
        make_plant(kind, {key: value})
    text = str(info.value)
    assert f"{kind} parameter {key!r}" in text and fragment in text and "default" in text


def test_unknown_kind_and_bad_params_type():
    with pytest.raises(ValueError, match="unknown plant kind 'pump'; allowed: fan, motor"):
        make_plant("pump")
    with pytest.raises(ValueError, match="must be a mapping"):
        make_plant("fan", [("supply_v", 12.0)])


def test_optional_parameters_accept_null():
    plant = make_plant("motor", {"load_step_time_s": None, "max_substep_s": None})
    assert plant.max_substep_s > 0


def test_argument_checks():
    plant = make_plant("fan")
    with pytest.raises(ValueError, match="dt"):
        plant.advance(50.0, 0.0)
    with pytest.raises(ValueError, match="u must be finite"):
        plant.advance(math.nan, 0.01)
    with pytest.raises(ValueError, match="u0 must be a number"):
        plant.reset("full")
    with pytest.raises(ValueError, match="torque"):
        plant.set_load(math.inf)
    with pytest.raises(ValueError, match="unknown fan channel 'speed'"):
        plant.static_gain("speed", 50.0)
    assert np.all(np.isfinite(plant.read()))


def test_substeps_follow_the_fastest_time_constant():
    plant = make_plant("fan")
    assert plant.max_substep_s == pytest.approx(0.5 * plant.machine.electrical_time_constant)
    slow = make_plant("motor", {"inductance_h": 0.5, "resistance_ohm": 1.0, "torque_constant": 0.01,
                                "inertia_kgm2": 0.01, "viscous_nms": 0.1, "dry_friction_nm": 0.0})
    assert slow.max_substep_s == pytest.approx(0.5 * 0.01 / (0.1 + 1e-4))


@pytest.mark.parametrize("value", [float("inf"), float("nan")])
def test_whole_number_parameter_refuses_non_finite_values_with_a_message(value):
    with pytest.raises(ValueError, match="encoder_counts_per_rev.*not finite"):
        make_plant("motor", {"encoder_counts_per_rev": value})
