"""Operating-regime binning."""

from __future__ import annotations

import json

import numpy as np
import pytest

from prognosis_service.health import InvalidParameterError, NotFittedError, RegimeBinning

# Saltbush Flats pumps run 1,150-1,780 rpm (DESIGN.md) -> 19.17-29.67 Hz.
SPEED_RANGE_HZ = (1150.0 / 60.0, 1780.0 / 60.0)


def test_bands_are_equal_widths_of_the_speed_and_load_ranges():
    binning = RegimeBinning(n_speed_bands=3, n_load_bands=2, speed_range_hz=SPEED_RANGE_HZ).fit(
        np.zeros((0, 2))
    )
    np.testing.assert_allclose(binning.speed_edges_hz_, np.linspace(*SPEED_RANGE_HZ, 4))
    np.testing.assert_allclose(binning.load_edges_, [0.0, 0.5, 1.0])
    X = [[19.5, 0.2], [19.5, 0.7], [24.0, 0.2], [29.5, 0.9], [35.0, 1.4], [10.0, -0.1]]
    assert binning.predict(X).tolist() == [0, 1, 2, 5, 5, 0]
    assert binning.describe(3) == {
        "regime": 3,
        "speed_hz": (
            pytest.approx(binning.speed_edges_hz_[1]),
            pytest.approx(binning.speed_edges_hz_[2]),
        ),
        "load_fraction": (0.5, 1.0),
    }


def test_speed_range_defaults_to_the_fitted_data_and_missing_values_get_no_regime():
    X = np.array([[20.0, 0.5], [26.0, 0.5], [np.nan, 0.5]])
    binning = RegimeBinning(n_speed_bands=2, n_load_bands=1).fit(X)
    np.testing.assert_allclose(binning.speed_edges_hz_, [20.0, 23.0, 26.0])
    assert binning.predict(X).tolist() == [0, 1, -1]


def test_state_round_trips_and_bad_parameters_are_named():
    binning = RegimeBinning(speed_range_hz=SPEED_RANGE_HZ).fit(np.zeros((0, 2)))
    again = RegimeBinning.from_state(json.loads(json.dumps(binning.to_state())))
    X = np.column_stack([np.linspace(15, 35, 50), np.linspace(0, 1, 50)])
    assert again.predict(X).tolist() == binning.predict(X).tolist()
    with pytest.raises(InvalidParameterError) as err:
        RegimeBinning(n_speed_bands=0).fit(X)
    assert str(err.value) == (
        "The 'n_speed_bands' parameter of RegimeBinning must be an int >= 1; got 0 instead."
    )
    with pytest.raises(InvalidParameterError, match="'load_range' parameter of RegimeBinning"):
        RegimeBinning(load_range=(1.0, 0.0)).fit(X)
    with pytest.raises(ValueError, match=r"shape \(n_samples, 2\)"):
        RegimeBinning().fit(np.zeros((3, 3)))
    with pytest.raises(NotFittedError):
        RegimeBinning().predict(X)
