"""Tests of nutricap.science.supply: frame mass → kg/ha, stratum statistics."""

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st

from nutricap.science.supply import biomass_kg_per_ha, stratum_mean_and_standard_error


def test_frame_conversion_by_si_definitions():
    # 1 g/m² = 10 kg/ha: 1 ha = 10,000 m² and 1 kg = 1,000 g (SI definitions).
    assert biomass_kg_per_ha(1.0, 1.0) == pytest.approx(10.0)
    # 12.5 g in a 0.25 m² frame = 50 g/m² = 500 kg/ha (hand computed from the SI definitions).
    assert biomass_kg_per_ha(12.5, 0.25) == pytest.approx(500.0)


@given(
    mass=st.floats(0, 5000, allow_nan=False),
    area=st.floats(0.01, 100, allow_nan=False),
)
def test_conversion_round_trips(mass, area):
    # kg/ha back to g per frame: m = B · A / 10 (inverse of the SI conversion).
    back = biomass_kg_per_ha(mass, area) * area / 10.0
    assert back == pytest.approx(mass, rel=1e-12, abs=1e-12)


def test_mean_and_standard_error_match_numpy_reference():
    rng = np.random.default_rng(4)
    values = rng.gamma(2.0, 100.0, size=(30, 3))
    index = np.repeat([0, 1, 2], 10)
    mean, se, n = stratum_mean_and_standard_error(values, index, 4)
    for s in range(3):
        rows = values[index == s]
        # Reference: numpy's mean and sample standard deviation (ddof=1) / sqrt(n).
        np.testing.assert_allclose(mean[s], rows.mean(axis=0), rtol=1e-12)
        np.testing.assert_allclose(se[s], rows.std(axis=0, ddof=1) / np.sqrt(10), rtol=1e-12)
    assert n.tolist() == [10, 10, 10, 0]
    assert np.isnan(mean[3]).all() and np.isnan(se[3]).all()


def test_single_plot_has_mean_but_no_standard_error():
    mean, se, n = stratum_mean_and_standard_error(np.array([[5.0, 0.0]]), np.array([0]), 1)
    assert mean.tolist() == [[5.0, 0.0]]
    assert np.isnan(se).all()
    assert n.tolist() == [1]
