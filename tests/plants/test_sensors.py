"""SensorModel: seeded determinism, configured noise level, quantization after noise."""

from __future__ import annotations

import numpy as np
import pytest

from rigloop.plants import SensorModel, make_plant

CHANNELS = ("a", "b", "c")


def _readings(model, n, values=(100.0, 2.0, -3.0)):
    return np.array([model.measure(np.array(values)) for _ in range(n)])


def test_same_seed_same_readings_other_seed_other_readings():
    cfg = dict(noise_std={"a": 1.0, "b": 0.1}, quantum={"a": 0.25}, channels=CHANNELS)
    first = _readings(SensorModel(seed=7, **cfg), 50)
    again = _readings(SensorModel(seed=7, **cfg), 50)
    other = _readings(SensorModel(seed=8, **cfg), 50)
    assert np.array_equal(first, again)
    assert not np.array_equal(first, other)
    model = SensorModel(seed=7, **cfg)
    _readings(model, 10)
    model.reset()
    assert np.array_equal(_readings(model, 50), first)


def test_noise_std_as_configured():
    # Statistical tolerance: the sample std of N = 20000 normal draws has a relative standard
    # error of about 1/sqrt(2N) = 0.5 %; 3 % is six of those (common practice).
    model = SensorModel({"a": 2.0, "b": 0.05}, {}, seed=1, channels=CHANNELS)
    data = _readings(model, 20000)
    assert data[:, 0].std() == pytest.approx(2.0, rel=0.03)
    assert data[:, 1].std() == pytest.approx(0.05, rel=0.03)
    assert abs(data[:, 0].mean() - 100.0) < 5 * 2.0 / np.sqrt(20000)
    assert np.all(data[:, 2] == -3.0)  # no noise configured for c


def test_quantization_after_noise():
    model = SensorModel({"a": 0.3}, {"a": 0.5, "c": 0.2}, seed=3, channels=CHANNELS)
    data = _readings(model, 2000, values=(10.1, 2.0, 1.23))
    assert np.allclose(data[:, 0] / 0.5, np.round(data[:, 0] / 0.5), atol=1e-9)
    assert len(np.unique(data[:, 0])) > 3           # noise spreads over several steps
    assert np.all(data[:, 2] == pytest.approx(1.2))  # no noise: round(1.23/0.2)*0.2


def test_nominal_sensors_of_a_plant_and_scale():
    fan = make_plant("fan")
    fan.reset(50.0)
    silent = SensorModel.nominal(fan, scale=0.0, seed=1)
    reading = silent.measure(fan.read())
    assert reading[0] == round(fan.read()[0])  # speed quantized to 1 rpm, no noise
    noisy = SensorModel.nominal(fan, scale=2.0, seed=1)
    assert noisy.noise_std["speed_rpm"] == 2.0 * fan.nominal_noise_std["speed_rpm"]


def test_bad_configuration_is_reported():
    with pytest.raises(ValueError, match=r"noise_std\['a'\] = -1"):
        SensorModel({"a": -1.0}, {}, seed=0)
    with pytest.raises(ValueError, match="channel order"):
        SensorModel({"a": 1.0}, {}, seed=0).measure(np.zeros(1))
    with pytest.raises(ValueError, match="2 values for 3 channels"):
        SensorModel({}, {}, seed=0, channels=CHANNELS).measure(np.zeros(2))
    with pytest.raises(ValueError, match="noise scale"):
        SensorModel.nominal(make_plant("motor"), scale=-1.0)
