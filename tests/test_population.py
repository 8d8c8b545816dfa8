"""Tests of nutricap.science.population against identities, independent solvers and simulation.

Sources of check values are given beside each check. Model parameters used to simulate
series (r, K, starting numbers, noise) are invented for the example: they define the truth
that an estimator must recover, they are not check values taken from anywhere.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import optimize

from nutricap.errors import InputError
from nutricap.science import population as pop


def simulate_logistic(r_max, K, n0, n_years, *, removals=None, sd=0.0, seed=0):
    """Discrete logistic N(t+1) = (N + r N (1 − N/K) − H) · exp(e), e ~ Normal(0, sd).

    Written out here with a plain loop, independently of the module under test.
    """
    rng = np.random.default_rng(seed)
    counts = [float(n0)]
    for year in range(n_years - 1):
        n = counts[-1]
        harvest = 0.0 if removals is None else removals[year]
        counts.append((n + r_max * n * (1.0 - n / K) - harvest) * math.exp(rng.normal(0.0, sd)))
    return np.arange(2000, 2000 + n_years), np.array(counts)


# --- λ and r ---------------------------------------------------------------------------


def test_r_is_ln_lambda_textbook_identity():
    # r = ln λ (textbook population ecology; common practice): ln 2 = 0.693147..., the
    # natural logarithm of 2 (standard mathematical constant).
    assert pop.exponential_rate(2.0) == pytest.approx(0.6931471805599453, abs=1e-12)
    assert pop.exponential_rate(0.5) == pytest.approx(-0.6931471805599453, abs=1e-12)
    np.testing.assert_allclose(
        pop.exponential_rate([1.0, 2.0, 0.5]), [0.0, 0.693147, -0.693147], atol=1e-6
    )


def test_lambda_is_ratio_of_successive_counts():
    # λ_t = N_{t+1}/N_t by definition (textbook): 200/100 = 2, 100/200 = 0.5.
    np.testing.assert_allclose(
        pop.finite_rate_of_increase([2001, 2002, 2003], [100, 200, 100]), [2.0, 0.5]
    )


def test_gap_year_gives_same_rates_as_complete_exact_exponential():
    # For N = N0 λ^t the per-year rate over any interval is ln λ (definition of r per year).
    lam = 1.12
    years = np.arange(2000, 2011)
    counts = 80.0 * lam ** (years - 2000)
    gap = years != 2004
    np.testing.assert_allclose(pop.finite_rate_of_increase(years[gap], counts[gap]), lam)
    complete = pop.mean_growth_rate(years, counts)
    with_gap = pop.mean_growth_rate(years[gap], counts[gap])
    assert with_gap.r_mean == pytest.approx(complete.r_mean, abs=1e-12)
    assert with_gap.r_mean == pytest.approx(math.log(lam), abs=1e-12)
    # The logistic's r_max is on the discrete scale: λ = 1 + r_max when there is no ceiling.
    assert pop.fit_logistic(years[gap], counts[gap]).r_max == pytest.approx(lam - 1.0, abs=1e-6)


def test_unsorted_years_are_sorted():
    # Sorted: 2001 → 200, 2002 → 100, 2003 → 100, so λ = 100/200, 100/100.
    np.testing.assert_allclose(
        pop.finite_rate_of_increase([2003, 2001, 2002], [100, 200, 100]), [0.5, 1.0]
    )


@settings(max_examples=50, deadline=None)
@given(
    st.lists(st.floats(1.0, 1e5), min_size=2, max_size=12),
    st.lists(st.integers(1, 4), min_size=11, max_size=11),
)
def test_interval_rates_telescope_to_overall_change(counts, gaps):
    # Product of λ_i^(k_i) equals N_last/N_first (telescoping product; identity).
    years = np.concatenate([[1990], 1990 + np.cumsum(gaps[: len(counts) - 1])])
    lam = pop.finite_rate_of_increase(years, counts)
    assert np.prod(lam ** np.diff(years)) == pytest.approx(counts[-1] / counts[0], rel=1e-9)


# --- mean rate by log-linear regression ------------------------------------------------


def test_mean_growth_rate_matches_independent_least_squares():
    # Independent check with numpy.linalg.lstsq and the textbook OLS slope standard error
    # SE = sqrt(s² / Σ(x − x̄)²); counts invented for the example.
    years = np.array([2001, 2002, 2004, 2005, 2007, 2008, 2010])
    counts = np.array([120, 131, 170, 162, 214, 240, 275], dtype=float)
    design = np.column_stack([np.ones(years.size), years])
    coef, rss, *_ = np.linalg.lstsq(design, np.log(counts), rcond=None)
    se = math.sqrt(rss[0] / (years.size - 2) / np.sum((years - years.mean()) ** 2))
    t90 = 2.015  # Student t, 5 df, 0.95 quantile (two-sided 90 %): standard tables, from memory
    result = pop.mean_growth_rate(years, counts, level=0.90)
    assert result.r_mean == pytest.approx(coef[1], rel=1e-10)
    assert result.r_ci[0] == pytest.approx(coef[1] - t90 * se, rel=1e-4)
    assert result.r_ci[1] == pytest.approx(coef[1] + t90 * se, rel=1e-4)
    assert result.lambda_mean == pytest.approx(math.exp(coef[1]))
    assert result.n_years == 7 and result.span_years == 9


def test_mean_growth_rate_interval_covers_at_its_level():
    # A 95 % interval must cover the true r in about 95 % of series drawn from its own model
    # (ln N = a + r t + e, e independent); 400 seeded series, binomial SD ≈ 0.011.
    true_r = 0.1
    years = np.arange(10)
    rng = np.random.default_rng(7)
    covered = 0
    for _ in range(400):
        counts = 100.0 * np.exp(true_r * years + rng.normal(0.0, 0.1, years.size))
        low, high = pop.mean_growth_rate(years, counts).r_ci
        covered += low <= true_r <= high
    assert 0.92 <= covered / 400 <= 0.98


# --- MSY -------------------------------------------------------------------------------


@pytest.mark.parametrize("r_max, K", [(0.3, 800.0), (0.45, 2500.0), (1.2, 60.0)])
def test_msy_matches_numerical_maximum_of_surplus(r_max, K):
    # Schaefer (1954): surplus r N (1 − N/K) peaks at N = K/2 with yield r K/4. Independent
    # check: maximise the surplus numerically with scipy.optimize.minimize_scalar.
    best = optimize.minimize_scalar(
        lambda n: -r_max * n * (1.0 - n / K),
        bounds=(0.0, K),
        method="bounded",
        options={"xatol": 1e-9 * K},
    )
    assert pop.msy_level(K) == pytest.approx(best.x, rel=1e-6)
    assert pop.msy_yield(r_max, K) == pytest.approx(-best.fun, rel=1e-9)


def test_logistic_step_by_hand():
    # 100 + 0.5 · 100 · (1 − 100/1000) − 5 = 140 (hand arithmetic of the model equation).
    assert pop.logistic_step(100.0, 0.5, 1000.0, removals=5.0) == pytest.approx(140.0)
    assert pop.logistic_step(100.0, 0.5, np.inf) == pytest.approx(150.0)


# --- logistic fit ----------------------------------------------------------------------


def test_logistic_fit_recovers_known_parameters_from_noisy_series():
    # Truth r_max = 0.4, K = 1000 (invented for the example), process noise SD 0.03 on ln N.
    years, counts = simulate_logistic(0.4, 1000.0, 50.0, 25, sd=0.03, seed=11)
    fit = pop.fit_logistic(years, counts)
    assert fit.ceiling_evidence
    assert fit.K == pytest.approx(1000.0, rel=0.05)  # tolerance: 5 % of K
    assert fit.r_max == pytest.approx(0.4, abs=0.05)  # tolerance: 0.05 per year
    assert fit.K_ci[0] <= 1000.0 <= fit.K_ci[1]
    assert fit.r_max_ci[0] <= 0.4 <= fit.r_max_ci[1]
    assert fit.crowding_per_animal == pytest.approx(1.0 / fit.K)


def test_logistic_fit_exact_with_gaps_and_removals():
    # Noise-free series with removals and two missing years: the fit must return the truth.
    removals = np.where(np.arange(20) % 3 == 0, 30.0, 0.0)
    years, counts = simulate_logistic(0.35, 1500.0, 120.0, 20, removals=removals)
    keep = ~np.isin(years, [2005, 2013])  # years without removals (a missing year's removals
    assert not removals[~keep].any()  # are taken as 0 by the fit)
    fit = pop.fit_logistic(years[keep], counts[keep], removals=removals[keep])
    assert fit.K == pytest.approx(1500.0, rel=1e-6)
    assert fit.r_max == pytest.approx(0.35, rel=1e-6)


def test_logistic_fit_uses_removals():
    # A steady harvest of 40 a year, ignored, reads as slower growth: the fit without the
    # removals must miss r_max by more than 0.05 while the fit with them is exact.
    removals = np.full(20, 40.0)
    years, counts = simulate_logistic(0.35, 1500.0, 300.0, 20, removals=removals)
    with_removals = pop.fit_logistic(years, counts, removals=removals)
    without = pop.fit_logistic(years, counts)
    assert with_removals.K == pytest.approx(1500.0, rel=1e-6)
    assert with_removals.r_max == pytest.approx(0.35, rel=1e-6)
    assert abs(without.r_max - 0.35) > 0.05


def test_exponential_series_reports_no_ceiling():
    years = np.arange(2000, 2015)
    exact = 100.0 * 1.15 ** (years - 2000)
    fit = pop.fit_logistic(years, exact)
    assert fit.K is None and fit.K_ci is None and not fit.ceiling_evidence
    assert "no evidence of a ceiling" in fit.reason
    _, noisy = simulate_logistic(0.15, np.inf, 100.0, 15, sd=0.05, seed=3)
    fit = pop.fit_logistic(years, noisy)
    assert fit.K is None and not fit.ceiling_evidence


def test_false_ceilings_on_exponential_series_are_rare():
    # Geometric growth (no ceiling, invented r = 0.15) with process noise SD 0.05, 15 counts,
    # 100 seeds. A 95 % two-sided interval of 1/K should exclude 0 on the positive side in
    # about 2.5 % of series; the Wald interval is somewhat liberal here (docs/trend.md), so
    # the check is a ceiling on the rate, not equality.
    false_ceilings = sum(
        pop.fit_logistic(
            *simulate_logistic(0.15, np.inf, 100.0, 15, sd=0.05, seed=seed)
        ).ceiling_evidence
        for seed in range(100)
    )
    assert false_ceilings <= 12


def test_logistic_k_interval_coverage():
    # Coverage of the 95 % K interval on 100 seeded logistic series (truth invented for the
    # example); the covariance interval is approximate, so at least 85 % is required.
    covered = 0
    for seed in range(100):
        fit = pop.fit_logistic(*simulate_logistic(0.4, 1000.0, 50.0, 20, sd=0.05, seed=seed))
        covered += fit.ceiling_evidence and fit.K_ci[0] <= 1000.0 <= fit.K_ci[1]
    assert covered >= 85


def test_k_far_above_counts_is_not_reported():
    # Exact logistic with K = 50 × the largest count: growth slows measurably (1/K > 0),
    # but the series does not show where it stops, so no K is reported.
    years, counts = simulate_logistic(0.2, 1e5, 100.0, 12)
    assert counts.max() < 2100
    fit = pop.fit_logistic(years, counts)
    assert fit.crowding_per_animal == pytest.approx(1e-5, rel=1e-4)
    assert fit.K is None and "times the largest count" in fit.reason


def test_declining_series_reports_no_ceiling():
    years = np.arange(2000, 2010)
    fit = pop.fit_logistic(years, 1000.0 * 0.9 ** (years - 2000))
    assert fit.K is None and "r_max is not above zero" in fit.reason
    assert fit.r_max == pytest.approx(-0.1, abs=1e-6)


def test_poorly_bounded_k_is_said_so():
    # 8 noisy counts (seed chosen so the ceiling test passes): the upper limit of K lies
    # beyond 10 × the largest count, and the reason must say K is poorly bounded.
    years, counts = simulate_logistic(0.25, 400.0, 30.0, 8, sd=0.04, seed=3)
    fit = pop.fit_logistic(years, counts)
    assert fit.ceiling_evidence
    assert fit.K_ci[1] > pop.FAR_ABOVE_LARGEST_COUNT * counts.max()
    assert "poorly bounded" in fit.reason
    well_bounded = pop.fit_logistic(*simulate_logistic(0.4, 1000.0, 50.0, 25, sd=0.03, seed=11))
    assert "poorly bounded" not in well_bounded.reason


# --- phase -----------------------------------------------------------------------------


def test_population_phase_thresholds():
    # Thresholds are our own choice (PHASE_THRESHOLDS): < K/4, [K/4, 0.85K), [0.85K, 1.15K],
    # > 1.15K.
    labels = pop.population_phase([100, 250, 849, 850, 1000, 1150, 1151], 1000.0)
    assert list(labels) == [
        "low density, rapid growth",
        "growing toward the ceiling",
        "growing toward the ceiling",
        "near the ceiling",
        "near the ceiling",
        "near the ceiling",
        "above the ceiling",
    ]
    assert pop.population_phase(2000.0, 1000.0) == "above the ceiling"


# --- invalid input ---------------------------------------------------------------------


@pytest.mark.parametrize(
    "call, words",
    [
        (lambda: pop.finite_rate_of_increase([2000, 2001], [10, 0]), "year 2001"),
        (lambda: pop.mean_growth_rate([2000, 2001, 2002], [10, -3, 4]), "a count > 0"),
        (lambda: pop.mean_growth_rate([2000, 2001, 2001], [10, 12, 13]), "same year"),
        (lambda: pop.mean_growth_rate([2000, 2001], [10, 12]), "at least 3"),
        (lambda: pop.fit_logistic(np.arange(4), [10, 12, 14, 16]), "at least 5"),
        (lambda: pop.fit_logistic([0, 1, 2.5, 3, 4], [10, 12, 14, 16, 17]), "whole years"),
        (
            lambda: pop.fit_logistic(np.arange(5), np.arange(1, 6), removals=[0, -1, 0, 0, 0]),
            "removals",
        ),
        (lambda: pop.mean_growth_rate(np.arange(5), np.arange(1, 6), level=1.5), "level"),
        (lambda: pop.mean_growth_rate(np.arange(5), np.arange(1, 5)), "differ in length"),
        (lambda: pop.exponential_rate(-1.0), "λ > 0"),
        (lambda: pop.population_phase(10.0, 0.0), "K > 0"),
    ],
)
def test_invalid_series_raise_input_error(call, words):
    with pytest.raises(InputError, match=words):
        call()


def test_logistic_fit_scales_with_the_counts():
    # Invariance of the model: counts × c give K × c and the same r_max (ln-scale residuals
    # are unchanged by a common factor).
    years, counts = simulate_logistic(0.3, 700.0, 60.0, 15, sd=0.04, seed=2)
    base = pop.fit_logistic(years, counts)
    scaled = pop.fit_logistic(years, counts * 1e4)
    assert scaled.K == pytest.approx(base.K * 1e4, rel=1e-5)
    assert scaled.r_max == pytest.approx(base.r_max, rel=1e-5)


def test_constant_series_reports_no_ceiling_without_warnings(recwarn):
    fit = pop.fit_logistic(np.arange(2000, 2006), np.full(6, 80.0))
    assert fit.K is None and not fit.ceiling_evidence
    assert fit.r_max == pytest.approx(0.0, abs=1e-9)
    assert len(recwarn) == 0


def test_logistic_fit_exact_across_a_gap_of_centuries(recwarn):
    # Exact logistic (truth invented: r_max 0.3, K 1000, simulated independently above), counted
    # for 8 years and once more 142 years later. Trial parameters with 1/K < 0 overflow across
    # the gap; the fit must still find the truth, with no floating-point warning.
    years, counts = simulate_logistic(0.3, 1000.0, 50.0, 151)
    keep = np.r_[np.arange(8), 150]
    fit = pop.fit_logistic(years[keep], counts[keep])
    assert fit.K == pytest.approx(1000.0, rel=1e-6)
    assert fit.r_max == pytest.approx(0.3, abs=1e-6)
    assert len(recwarn) == 0


def test_logistic_not_fitted_when_the_fit_does_not_converge(recwarn):
    # Counts (invented) swinging 5 ↔ 5000 every 10 years: no (r_max, 1/K) in the bounds comes
    # near them and the optimiser stops at its evaluation limit. No K and no r_max, the reason
    # stated, no overflow warning.
    fit = pop.fit_logistic(np.arange(2000, 2051, 10), [5, 5000, 5, 5000, 5, 5000])
    assert fit.K is None and fit.r_max is None and fit.r_max_ci is None
    assert fit.residual_sd_log is None and not fit.ceiling_evidence
    assert fit.reason.startswith("logistic not fitted: the least-squares fit stopped")
    assert len(recwarn) == 0


def test_logistic_not_fitted_when_the_best_fit_overflows():
    # r_max = 3, 1/K = −5/largest count: from 200 animals the map soon squares its size yearly
    # (N + 3N(1 + N/1e4)), past the float range long before 397 years (by hand: 200 → 812 →
    # 3446 → 1.7e4 → 1.6e5 → 8.3e6 → 2.1e10 → … > 1.8e308 after 12 years).
    years = np.array([1800.0, 1801.0, 1802.0, 1803.0, 2200.0])
    counts = np.array([100.0, 130.0, 160.0, 200.0, 50000.0])
    steps = pop._whole_year_steps(years)
    harvest = pop._harvest_by_step(years, steps, np.zeros(5))
    fit = SimpleNamespace(status=2, nfev=10, x=np.array([3.0, -5.0]))
    reason = pop._fit_problem(fit, years, counts, steps, harvest, counts.max())
    assert reason.startswith("logistic not fitted") and "397-year interval 1803–2200" in reason
