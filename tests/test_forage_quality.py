"""Tests of nutricap.science.forage_quality against published equations (values by hand)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from nutricap.errors import InputError
from nutricap.science import forage_quality as fq

PERCENT = st.floats(min_value=0.0, max_value=100.0, allow_nan=False)
BSA = st.floats(min_value=0.0, max_value=1.0, allow_nan=False)


# --- digestible energy from dry-matter digestibility (Robbins 1993) ---------------------------


def test_default_gross_energy_is_typical_forage_value():
    # Robbins 1993 (from memory): forage gross energy about 4.4-4.5 kcal/g DM (no readable
    # source found; a secondary deer table, scribd.com/document/229748738, assumes 4.5).
    assert 4.3 <= fq.GROSS_ENERGY_KCAL_PER_G_DEFAULT <= 4.6


def test_de_from_dmd_hand_computed():
    # DE = GE x DMD/100 (Robbins 1993): 4.4 x 0.55 = 2.42; 4.5 x 0.60 = 2.70 kcal/g (by hand).
    assert fq.digestible_energy_kcal_per_g(55.0, 4.4) == pytest.approx(2.42, rel=1e-12)
    np.testing.assert_allclose(
        fq.digestible_energy_kcal_per_g([55.0, 60.0], [4.4, 4.5]), [2.42, 2.70], rtol=1e-12
    )


def test_de_default_gross_energy_used():
    expected = fq.GROSS_ENERGY_KCAL_PER_G_DEFAULT * 0.5
    assert fq.digestible_energy_kcal_per_g(50.0) == pytest.approx(expected)


@pytest.mark.parametrize("bad", [-1.0, 100.5, np.nan])
def test_de_rejects_out_of_range_digestibility(bad):
    with pytest.raises(InputError, match="dmd_pct"):
        fq.digestible_energy_kcal_per_g(bad)


@given(PERCENT, st.floats(min_value=3.5, max_value=5.5))
def test_de_never_exceeds_gross_energy(dmd, gross):
    assert 0.0 <= fq.digestible_energy_kcal_per_g(dmd, gross) <= gross


# --- digestible protein (Robbins et al. 1987, Ecology 68:98-107) -----------------------------


def test_dp_coefficients():
    # Robbins et al. 1987: DP = -3.87 + 0.9283 CP - 11.82 BSA. The CP terms read in a secondary
    # deer table (scribd.com/document/229748738, citing Hanley et al. 1992, Ecology 73:537-541;
    # its font drops the digit 7: "-3.8 + 0.9283 (CP)"); the BSA slope from memory.
    c = fq.ROBBINS_1987_DP_COEFFICIENTS
    assert (c["intercept_pct"], c["cp_slope"], c["bsa_slope_pct_per_mg_per_mg"]) == (
        -3.87,
        0.9283,
        -11.82,
    )


def test_dp_hand_computed_without_and_with_tannin():
    # Robbins et al. 1987, by hand: CP 10 %, no tannin: -3.87 + 9.283 = 5.413 %.
    # CP 10 %, BSA 0.1 mg/mg: 5.413 - 1.182 = 4.231 %. CP 20 %, BSA 0.25: -3.87 + 18.566
    # - 2.955 = 11.741 %.
    assert fq.digestible_protein_pct(10.0) == pytest.approx(5.413, rel=1e-12)
    np.testing.assert_allclose(
        fq.digestible_protein_pct([10.0, 20.0], [0.1, 0.25]), [4.231, 11.741], rtol=1e-12
    )


def test_tannin_lowers_dp():
    # Robbins et al. 1987 (abstract, read): the reduction in digestible protein is
    # proportional to the protein-precipitating capacity of the tannins.
    values = fq.digestible_protein_pct(15.0, np.array([0.0, 0.05, 0.1, 0.2]))
    assert np.all(np.diff(values) < 0)
    # Proportional: equal steps of BSA give equal losses (0.05 x 11.82 = 0.591 %, by hand).
    np.testing.assert_allclose(-np.diff(values[:3]), [0.591, 0.591], rtol=1e-9)


def test_dp_is_linear_below_zero():
    # Robbins et al. 1987: DP is linear in CP; the negative intercept is metabolic faecal
    # protein, so low-protein forage has a negative value, which is kept (not clipped).
    # By hand: -3.87 + 0.9283 x 3 = -1.0851; CP 10 with BSA 1.0: 5.413 - 11.82 = -6.407.
    # Zero crossing at CP = 3.87 / 0.9283 = 4.1689 %.
    np.testing.assert_allclose(
        fq.digestible_protein_pct([3.0, 10.0], [0.0, 1.0]), [-1.0851, -6.407], rtol=1e-12
    )
    assert fq.digestible_protein_pct(4.1689) == pytest.approx(0.0, abs=1e-4)
    assert fq.digestible_protein_pct(4.2) > 0.0


@pytest.mark.parametrize(
    ("cp", "bsa", "name"),
    [(-1.0, 0.0, "cp_pct"), (101.0, 0.0, "cp_pct"), (10.0, -0.1, "tannin_bsa_mg_per_mg")],
)
def test_dp_rejects_bad_inputs(cp, bsa, name):
    with pytest.raises(InputError, match=name):
        fq.digestible_protein_pct(cp, bsa)


@given(PERCENT, BSA)
def test_dp_is_below_crude_protein_and_linear(cp, bsa):
    # From the equation: slope < 1 and a negative intercept, so DP < CP; and the mass-weighted
    # mean of two forages' DP equals the DP of their mean CP (linearity, no clipping).
    dp = fq.digestible_protein_pct(cp, bsa)
    assert dp < cp or cp == 0.0
    mean_of_dp = 0.5 * (dp + fq.digestible_protein_pct(100.0 - cp, bsa))
    assert mean_of_dp == pytest.approx(fq.digestible_protein_pct(50.0, bsa), abs=1e-9)


# --- mixed diet ------------------------------------------------------------------------------


def test_mixed_diet_hand_computed():
    # Mass-weighted mean: (1 x 2.0 + 3 x 3.0) / 4 = 11 / 4 = 2.75 (by hand).
    assert fq.mixed_diet_quality([1.0, 3.0], [2.0, 3.0]) == pytest.approx(2.75)


def test_mixed_diet_along_last_axis_with_broadcast_quality():
    # Rows are places, columns forage classes; quality per class broadcasts over rows.
    # Row 1: (2 x 2.0 + 2 x 3.0) / 4 = 2.5; row 2: all of class 2 -> 3.0 (by hand).
    eaten = np.array([[2.0, 2.0], [0.0, 5.0]])
    np.testing.assert_allclose(fq.mixed_diet_quality(eaten, [2.0, 3.0]), [2.5, 3.0])


def test_mixed_diet_is_zero_where_nothing_eaten_and_ignores_quality_there():
    eaten = np.array([[0.0, 0.0], [1.0, 0.0]])
    quality = np.array([[np.nan, np.nan], [2.2, np.nan]])
    result = fq.mixed_diet_quality(eaten, quality)
    np.testing.assert_array_equal(result, [0.0, 2.2])
    assert not np.any(np.isnan(result))
    assert fq.mixed_diet_quality([0.0, 0.0], [2.0, 3.0]) == 0.0


def test_mixed_diet_rejects_bad_inputs():
    with pytest.raises(InputError, match="eaten_kg"):
        fq.mixed_diet_quality([-1.0, 2.0], [2.0, 3.0])
    with pytest.raises(InputError, match="not finite"):
        fq.mixed_diet_quality([1.0, 2.0], [np.nan, 3.0])
    with pytest.raises(InputError, match="shapes"):
        fq.mixed_diet_quality([1.0, 2.0, 3.0], [2.0, 3.0])


@given(
    hnp.arrays(float, st.integers(1, 6), elements=st.floats(0.0, 1e4)),
    st.data(),
)
def test_mixed_diet_lies_between_eaten_extremes(eaten, data):
    quality = data.draw(hnp.arrays(float, eaten.shape, elements=st.floats(0.0, 100.0)))
    result = fq.mixed_diet_quality(eaten, quality)
    if eaten.sum() == 0.0:
        assert result == 0.0
    else:
        used = quality[eaten > 0]
        assert used.min() - 1e-9 <= result <= used.max() + 1e-9
