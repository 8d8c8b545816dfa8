"""Population trend from yearly counts: rates of increase, a logistic ceiling, MSY.

Pure functions on arrays of years and counts; the counts table is read in
:mod:`nutricap.model.trend`. Years may have gaps: every rate is per year, computed
over the real interval between two counts.

Counts are treated as exact numbers of animals. Real counts are indices with
detection error; :mod:`nutricap.model.trend` and ``docs/trend.md`` say what that
does to each figure.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nutricap.errors import InputError

MIN_COUNTS_TREND = 3
"""Fewest counts for the mean rate and its interval (regression needs n − 2 ≥ 1)."""

MIN_COUNTS_LOGISTIC = 5
"""Fewest counts for the logistic fit: 4 intervals, 2 parameters, 2 residual degrees of freedom."""

FAR_ABOVE_LARGEST_COUNT = 10.0
"""A fitted K more than this many times the largest count is not taken as a ceiling
(our own choice: the series then says nothing about where growth stops)."""

PHASE_THRESHOLDS = {
    "low_density_below_fraction_of_K": 0.25,
    "near_ceiling_band_fraction_of_K": 0.15,
    "source": "our own choice (common practice: quarter of K and a ±15 % band around K)",
}
"""Boundaries of the plain-language phase labels of :func:`population_phase`."""

PHASE_LABELS = (
    "low density, rapid growth",
    "growing toward the ceiling",
    "near the ceiling",
    "above the ceiling",
)

LOGISTIC_METHOD = (
    "discrete logistic N(t+1) = N(t) + r_max·N(t)·(1 − N(t)/K) − H(t), iterated year by year "
    "across gaps from each observed count to the next; fitted by scipy.optimize.least_squares "
    "(trust-region reflective) on the natural-log scale, residuals weighted by 1/√(years in "
    "the interval); intervals are t-intervals from the Jacobian covariance, the K interval is "
    "the inverted interval of 1/K"
)

_R_MAX_BOUNDS = (-0.99, 3.0)
_CROWDING_BOUNDS = (-5.0, 50.0)  # 1/K times the largest count
_SINGULAR_CONDITION = 1e12
_FIT_TOLERANCE = 1e-13
"""ftol, xtol and gtol of the fit: far below scipy's default 1e-8, so that the optimum found
does not depend on the path (the machine's BLAS kernels) beyond about 12 digits."""
_PREDICTION_FLOOR_FRACTION = 1e-6
_PREDICTION_CEILING = float(np.finfo(float).max)
"""Largest prediction the fit's residuals see [animals]: a prediction that overflowed (+inf,
or NaN from inf − inf) is taken as this, so that the residuals stay finite."""


@dataclass(frozen=True)
class GrowthRate:
    """Mean exponential rate of increase over a series (see :func:`mean_growth_rate`)."""

    r_mean: float
    """Exponential rate of increase [1/year]."""
    r_ci: tuple[float, float]
    """Confidence interval of ``r_mean`` [1/year]."""
    lambda_mean: float
    """Finite rate of increase exp(r_mean) [per year, dimensionless]."""
    lambda_ci: tuple[float, float]
    """exp of ``r_ci``."""
    n_years: int
    """Number of yearly counts used."""
    span_years: float
    """Last year minus first year [years]."""
    level: float
    """Confidence level of the intervals."""


@dataclass(frozen=True)
class LogisticFit:
    """Discrete logistic fitted to a count series (see :func:`fit_logistic`)."""

    K: float | None
    """Ceiling [animals]; None when the series shows no evidence of one."""
    K_ci: tuple[float, float] | None
    """Confidence interval of K [animals]; None with K."""
    r_max: float | None
    """Per-capita growth per year at low density, discrete scale (1 + r_max = λ at N → 0);
    None when the model could not be fitted (``reason`` says why)."""
    r_max_ci: tuple[float, float] | None
    """Confidence interval of r_max; None when the parameters cannot be separated."""
    ceiling_evidence: bool
    """True when the series supports a ceiling (see :func:`fit_logistic`, Notes)."""
    reason: str
    """Why the ceiling is or is not supported, in plain words."""
    method: str
    """How the fit and the intervals were computed."""
    crowding_per_animal: float | None
    """Fitted 1/K [1/animals]; ≤ 0 means growth did not slow as numbers rose; None when the
    model could not be fitted."""
    crowding_ci: tuple[float, float] | None
    """Confidence interval of 1/K [1/animals]."""
    residual_sd_log: float | None
    """Residual standard deviation on the ln scale, per year; None when the model could not be
    fitted."""
    n_counts: int
    level: float


def finite_rate_of_increase(years, counts) -> np.ndarray:
    """Finite rate of increase per year over each interval between counts.

    Parameters
    ----------
    years : array_like
        Years of the counts [year]; gaps allowed, order free.
    counts : array_like
        Animals counted [animals]; > 0.

    Returns
    -------
    numpy.ndarray
        λ per year for each interval, in year order (length n − 1) [dimensionless].

    Notes
    -----
    Over an interval of k years, ``λ = (N_{t+k} / N_t)^(1/k)``, i.e. ``exp(r)`` with
    ``r = ln(N_{t+k}/N_t) / k``; for k = 1 this is ``λ = N_{t+1}/N_t``.

    References
    ----------
    Caughley, G. (1977). *Analysis of Vertebrate Populations*. Wiley, London
    (textbook definitions of λ and r; from memory).

    Examples
    --------
    >>> finite_rate_of_increase([2000, 2001, 2003], [100, 120, 172.8]).round(3)
    array([1.2, 1.2])
    """
    years, counts, _ = _as_series(years, counts, min_counts=2)
    return np.exp(np.diff(np.log(counts)) / np.diff(years))


def exponential_rate(finite_rate):
    """Exponential (instantaneous) rate of increase from the finite rate.

    Parameters
    ----------
    finite_rate : numeric
        Finite rate of increase λ per year [dimensionless]; > 0.

    Returns
    -------
    numeric
        ``r = ln λ`` [1/year].

    Notes
    -----
    ``N_{t+1} = λ N_t = e^r N_t``, hence ``r = ln λ``: λ = 2 gives r = ln 2 ≈ 0.693 and
    λ = 0.5 gives r ≈ −0.693.

    References
    ----------
    Caughley, G. (1977). *Analysis of Vertebrate Populations*. Wiley, London (from memory).

    Examples
    --------
    >>> round(float(exponential_rate(2.0)), 4)
    0.6931
    """
    finite_rate = np.asarray(finite_rate, dtype=float)
    if np.any(~(finite_rate > 0)):
        raise InputError(
            "a finite rate of increase must be positive",
            expected="λ > 0",
            found=f"{finite_rate[~(finite_rate > 0)].ravel()[0]!r}",
        )
    return np.log(finite_rate)


def mean_growth_rate(years, counts, level: float = 0.95) -> GrowthRate:
    """Mean exponential rate of increase by log-linear regression, with its interval.

    Parameters
    ----------
    years : array_like
        Years of the counts [year]; gaps allowed.
    counts : array_like
        Animals counted [animals]; > 0; at least :data:`MIN_COUNTS_TREND`.
    level : float, default 0.95
        Confidence level of the interval, 0 < level < 1.

    Returns
    -------
    GrowthRate

    Notes
    -----
    Ordinary least squares of ``ln N_t = a + r·t`` (``scipy.stats.linregress``); the
    interval is ``r ± t_{(1+level)/2, n−2} · SE(r)``, and ``λ = exp(r)``. The interval
    assumes the deviations from the line are independent from year to year (counting
    error around a steady trend); a population that itself wanders from year to year
    makes it too narrow.

    References
    ----------
    Caughley, G. (1977). *Analysis of Vertebrate Populations*. Wiley, London
    (rate of increase from the regression of ln N on time; from memory).
    """
    _check_level(level)
    years, counts, _ = _as_series(years, counts, min_counts=MIN_COUNTS_TREND)
    from scipy import stats  # imported here: scipy.stats costs ~0.5 s to import

    fit = stats.linregress(years, np.log(counts))
    half = _t_quantile(level, years.size - 2) * fit.stderr
    r_ci = (float(fit.slope - half), float(fit.slope + half))
    return GrowthRate(
        r_mean=float(fit.slope),
        r_ci=r_ci,
        lambda_mean=float(np.exp(fit.slope)),
        lambda_ci=(float(np.exp(r_ci[0])), float(np.exp(r_ci[1]))),
        n_years=int(years.size),
        span_years=float(years[-1] - years[0]),
        level=float(level),
    )


def logistic_step(n_animals, r_max, K, removals=0.0):
    """One year of the discrete logistic with removals.

    Parameters
    ----------
    n_animals : numeric
        Animals at the count of year t [animals].
    r_max : numeric
        Per-capita growth per year at low density [1/year, discrete scale].
    K : numeric
        Ceiling [animals]; ``numpy.inf`` gives geometric growth.
    removals : numeric, default 0
        Animals removed between the count of year t and that of year t + 1 [animals].

    Returns
    -------
    numeric
        Animals at the count of year t + 1 [animals].

    Notes
    -----
    ``N_{t+1} = N_t + r_max N_t (1 − N_t/K) − H_t``.

    References
    ----------
    May, R. M. (1974). Biological populations with nonoverlapping generations: stable
    points, stable cycles, and chaos. *Science* 186:645–647 (from memory).

    Examples
    --------
    >>> float(logistic_step(100.0, 0.5, 1000.0, removals=5.0))
    140.0
    """
    return _step(n_animals, r_max, 1.0 / np.asarray(K, dtype=float), removals)


def logistic_trajectory(first_count, r_max, K, n_years: int, removals=None) -> np.ndarray:
    """The discrete logistic iterated from a starting count, year by year.

    Parameters
    ----------
    first_count : float
        Animals in the first year [animals].
    r_max : float
        Per-capita growth per year at low density [1/year, discrete scale].
    K : float
        Ceiling [animals].
    n_years : int
        Number of years in the trajectory, the first included.
    removals : array, shape (n_years - 1,), optional
        Animals removed after each year's count [animals]; default none.

    Returns
    -------
    array, shape (n_years,)
        Animals each year [animals]; never below 0.

    Examples
    --------
    >>> logistic_trajectory(100.0, 0.5, 1000.0, 3).round(1).tolist()
    [100.0, 145.0, 207.0]
    """
    harvest = np.zeros(max(n_years - 1, 0)) if removals is None else np.asarray(removals, float)
    path = np.empty(n_years)
    path[0] = first_count
    for year in range(1, n_years):
        path[year] = max(float(logistic_step(path[year - 1], r_max, K, harvest[year - 1])), 0.0)
    return path


def fit_logistic(years, counts, removals=None, level: float = 0.95) -> LogisticFit:
    """Fit the discrete logistic to a count series and judge whether it shows a ceiling.

    Parameters
    ----------
    years : array_like
        Years of the counts [year]; whole-year gaps allowed.
    counts : array_like
        Animals counted [animals]; > 0; at least :data:`MIN_COUNTS_LOGISTIC`.
    removals : array_like, optional
        Animals removed (harvest, culls, translocations) after each year's count and
        before the next [animals]; ≥ 0. Years with no count are taken to have no removals.
    level : float, default 0.95
        Confidence level of the intervals.

    Returns
    -------
    LogisticFit

    Notes
    -----
    Model, one year at a time: ``N_{t+1} = N_t + r_max N_t (1 − N_t/K) − H_t``. Across a
    gap of k years the map is iterated k times from the observed count ``N_t``. The fit
    minimises ``Σ [ln N_obs − ln N_pred]² / k`` over ``(r_max, 1/K)`` with
    ``scipy.optimize.least_squares``; the one-step-ahead form treats year-to-year variation
    as process variation and the counts as exact. 1/K is fitted instead of K so that the
    model stays smooth through 1/K = 0 (geometric growth).

    Intervals: covariance ``s² (JᵀJ)⁻¹`` from the Jacobian at the optimum, t-quantile with
    n_intervals − 2 degrees of freedom; the interval of K is the interval of 1/K inverted.

    A ceiling is reported (``ceiling_evidence=True``) only when r_max > 0, the interval of
    1/K lies wholly above 0, and K ≤ :data:`FAR_ABOVE_LARGEST_COUNT` × the largest count.
    Otherwise ``K`` is None and ``reason`` says which test failed.

    The model is not fitted at all (``K``, ``r_max`` and their intervals None, ``reason``
    beginning "logistic not fitted") when the least-squares fit stops without converging
    (its evaluation limit reached) or when, at the best parameters found, the map iterated
    over an interval grows beyond the floating-point range (e.g. over a gap of centuries).
    While the fit searches, a prediction beyond that range counts as the largest float, so
    such trial parameters are merely far off: no overflow reaches the optimiser or the user.

    Count error makes ln-ratio methods find density dependence too often
    (Freckleton et al. 2006), so a supported ceiling is weak evidence on a short or
    unmanipulated series.

    References
    ----------
    May, R. M. (1974). *Science* 186:645–647 (discrete logistic; from memory).
    Dennis, B. & Taper, M. L. (1994). Density dependence in time series observations of
    natural populations: estimation and testing. *Ecological Monographs* 64:205–224
    (one-step-ahead fitting of density dependence; from memory).
    Freckleton, R. P., Watkinson, A. R., Green, R. E. & Sutherland, W. J. (2006). Census
    error and the detection of density dependence. *Journal of Animal Ecology* 75:837–851.
    """
    _check_level(level)
    years, counts, removals = _as_series(
        years, counts, min_counts=MIN_COUNTS_LOGISTIC, removals=removals
    )
    steps = _whole_year_steps(years)
    harvest = _harvest_by_step(years, steps, removals)
    scale = float(counts.max())
    residuals = _logistic_residuals(counts, steps, harvest, scale)
    best = _least_squares_best_start(residuals, counts, steps, harvest, scale)
    problem = _fit_problem(best, years, counts, steps, harvest, scale)
    if problem is not None:
        return _not_fitted(problem, counts, level)
    return _judge_fit(best, counts, scale, level)


def surplus_production(n_animals, r_max, K):
    """Annual surplus of the logistic: animals that can be removed to hold N constant.

    Parameters
    ----------
    n_animals : numeric
        Animals [animals].
    r_max : numeric
        Per-capita growth per year at low density [1/year].
    K : numeric
        Ceiling [animals].

    Returns
    -------
    numeric
        ``r_max N (1 − N/K)`` [animals/year].

    References
    ----------
    Schaefer, M. B. (1954). Some aspects of the dynamics of populations important to the
    management of the commercial marine fisheries. *Bulletin of the Inter-American Tropical
    Tuna Commission* 1(2):27–56 (volume and pages from memory).
    """
    n_animals = np.asarray(n_animals, dtype=float)
    return _step(n_animals, r_max, 1.0 / np.asarray(K, dtype=float), 0.0) - n_animals


def msy_level(K):
    """Population size giving the maximum sustained yield of the logistic.

    Parameters
    ----------
    K : numeric
        Ceiling [animals].

    Returns
    -------
    numeric
        ``K / 2`` [animals].

    Notes
    -----
    ``d/dN [r N (1 − N/K)] = r (1 − 2N/K) = 0`` at ``N = K/2``.

    References
    ----------
    Schaefer, M. B. (1954). *Bull. Inter-Am. Trop. Tuna Comm.* 1(2):27–56.

    Examples
    --------
    >>> float(msy_level(800.0))
    400.0
    """
    return np.asarray(K, dtype=float) / 2.0


def msy_yield(r_max, K):
    """Maximum sustained yield of the logistic.

    Parameters
    ----------
    r_max : numeric
        Per-capita growth per year at low density [1/year].
    K : numeric
        Ceiling [animals].

    Returns
    -------
    numeric
        ``r_max K / 4`` [animals/year], the surplus production at ``N = K/2``.

    References
    ----------
    Schaefer, M. B. (1954). *Bull. Inter-Am. Trop. Tuna Comm.* 1(2):27–56.

    Examples
    --------
    >>> float(msy_yield(0.3, 800.0))
    60.0
    """
    return surplus_production(msy_level(K), r_max, K)


def population_phase(n_animals, K):
    """Plain-language phase of a population relative to its ceiling K.

    Parameters
    ----------
    n_animals : numeric
        Animals [animals].
    K : numeric
        Ceiling [animals]; > 0.

    Returns
    -------
    str or numpy.ndarray of str
        One of :data:`PHASE_LABELS` per value.

    Notes
    -----
    With ``q = N/K`` (thresholds in :data:`PHASE_THRESHOLDS`, our own choice):
    ``q < 0.25`` low density, rapid growth (per-capita growth still ≥ 75 % of r_max);
    ``0.25 ≤ q < 0.85`` growing toward the ceiling; ``0.85 ≤ q ≤ 1.15`` near the ceiling;
    ``q > 1.15`` above the ceiling.

    Examples
    --------
    >>> str(population_phase(100.0, 1000.0))
    'low density, rapid growth'
    """
    K = np.asarray(K, dtype=float)
    if np.any(~(K > 0)):
        raise InputError(
            "K must be positive to place a population against it",
            expected="K > 0",
            found=repr(float(np.min(K))),
        )
    ratio = np.asarray(n_animals, dtype=float) / K
    low = PHASE_THRESHOLDS["low_density_below_fraction_of_K"]
    band = PHASE_THRESHOLDS["near_ceiling_band_fraction_of_K"]
    labels = np.select(
        [ratio < low, ratio < 1.0 - band, ratio <= 1.0 + band],
        list(PHASE_LABELS[:3]),
        default=PHASE_LABELS[3],
    )
    return str(labels) if labels.ndim == 0 else labels


# --- helpers -------------------------------------------------------------------------


def _step(n_animals, r_max, crowding, removals):
    """``N + r N (1 − c N) − H`` with crowding c = 1/K [1/animals]."""
    n_animals = np.asarray(n_animals, dtype=float)
    return n_animals + r_max * n_animals * (1.0 - crowding * n_animals) - removals


def _check_level(level: float) -> None:
    if not 0.0 < level < 1.0:
        raise InputError(
            "confidence level out of range",
            location="level",
            expected="a number between 0 and 1, e.g. 0.95",
            found=repr(level),
        )


def _t_quantile(level: float, dof: int) -> float:
    from scipy import stats

    return float(stats.t.ppf(0.5 + level / 2.0, dof))


def _as_series(years, counts, min_counts: int, removals=None):
    """Validate a series and return (years, counts, removals) sorted by year."""
    years = np.asarray(years, dtype=float).ravel()
    counts = np.asarray(counts, dtype=float).ravel()
    removals = (
        np.zeros_like(counts) if removals is None else np.asarray(removals, dtype=float).ravel()
    )
    if not years.size == counts.size == removals.size:
        raise InputError(
            "years, counts and removals differ in length",
            expected="one year per count",
            found=f"{years.size} years, {counts.size} counts, {removals.size} removals",
        )
    _check_values(years, counts, removals)
    if counts.size < min_counts:
        raise InputError(
            "too few counts",
            expected=f"at least {min_counts} yearly counts",
            found=f"{counts.size}",
        )
    order = np.argsort(years, kind="stable")
    years, counts, removals = years[order], counts[order], removals[order]
    repeated = np.flatnonzero(np.diff(years) == 0)
    if repeated.size:
        raise InputError(
            "the same year appears twice",
            location=f"year {years[repeated[0]]:g}",
            expected="one count per year",
            found="two counts",
        )
    return years, counts, removals


def _check_values(years, counts, removals) -> None:
    for name, values, ok, expected in (
        ("year", years, np.isfinite(years), "a finite year"),
        ("count", counts, np.isfinite(counts) & (counts > 0), "a count > 0"),
        ("removals", removals, np.isfinite(removals) & (removals >= 0), "removals ≥ 0"),
    ):
        if not ok.all():
            first = int(np.flatnonzero(~ok)[0])
            where = f"year {years[first]:g}" if np.isfinite(years[first]) else f"entry {first}"
            raise InputError(
                f"invalid {name}",
                location=where,
                expected=expected,
                found=repr(float(values[first])),
            )


def _whole_year_steps(years) -> np.ndarray:
    gaps = np.diff(years)
    steps = np.rint(gaps).astype(int)
    if np.any(np.abs(gaps - steps) > 1e-9):
        first = int(np.flatnonzero(np.abs(gaps - steps) > 1e-9)[0])
        raise InputError(
            "the logistic fit needs whole years between counts",
            location=f"year {years[first]:g}",
            expected="whole-year intervals",
            found=f"an interval of {gaps[first]:g} years",
        )
    return steps


def _harvest_by_step(years, steps, removals) -> np.ndarray:
    """Removals for each interval (rows) and each year inside it (columns); 0 past its end."""
    first_year = years[0]
    by_year = np.zeros(int(round(years[-1] - first_year)) + 1)
    by_year[np.rint(years - first_year).astype(int)] = removals
    offsets = np.rint(years[:-1] - first_year).astype(int)[:, None] + np.arange(steps.max())
    inside = np.arange(steps.max())[None, :] < steps[:, None]
    return np.where(inside, by_year[np.minimum(offsets, by_year.size - 1)], 0.0)


def _predict(r_max, crowding, start, steps, harvest) -> np.ndarray:
    """Iterate the logistic from each observed count over its interval [animals].

    Over a long interval the map may overflow (±inf, or NaN from inf − inf): such values are
    returned as they are, without a floating-point warning.
    """
    n_animals = start.copy()
    with np.errstate(over="ignore", invalid="ignore"):
        for year in range(harvest.shape[1]):
            stepped = _step(n_animals, r_max, crowding, harvest[:, year])
            n_animals = np.where(steps > year, stepped, n_animals)
    return n_animals


def _logistic_residuals(counts, steps, harvest, scale):
    floor = _PREDICTION_FLOOR_FRACTION * counts.min()
    weights = 1.0 / np.sqrt(steps)
    observed = np.log(counts[1:])

    def residuals(theta):
        predicted = _predict(theta[0], theta[1] / scale, counts[:-1], steps, harvest)
        finite = np.nan_to_num(predicted, nan=_PREDICTION_CEILING)  # ±inf → ±largest float
        return (observed - np.log(np.maximum(finite, floor))) * weights

    return residuals


def _start_values(counts, steps, harvest, scale) -> list[np.ndarray]:
    """Two starts: per-capita growth regressed on N, and geometric growth (1/K = 0)."""
    per_year = ((counts[1:] + harvest.sum(axis=1)) / counts[:-1]) ** (1.0 / steps) - 1.0
    geometric = np.array([np.clip(np.mean(per_year), *_R_MAX_BOUNDS), 0.0])
    if np.ptp(counts[:-1]) == 0:
        return [geometric]
    slope, intercept = np.polyfit(counts[:-1] / scale, per_year, 1)
    if intercept <= 0:
        return [geometric]
    lower, upper = zip(_R_MAX_BOUNDS, _CROWDING_BOUNDS, strict=True)
    regression = np.clip(
        [intercept, -slope / intercept], np.add(lower, 1e-6), np.subtract(upper, 1e-6)
    )
    return [geometric, regression]


def _least_squares_best_start(residuals, counts, steps, harvest, scale):
    from scipy import optimize

    bounds = tuple(zip(_R_MAX_BOUNDS, _CROWDING_BOUNDS, strict=True))
    fits = [
        optimize.least_squares(
            residuals,
            start,
            jac="3-point",
            bounds=bounds,
            method="trf",
            x_scale=1.0,
            ftol=_FIT_TOLERANCE,
            xtol=_FIT_TOLERANCE,
            gtol=_FIT_TOLERANCE,
        )
        for start in _start_values(counts, steps, harvest, scale)
    ]
    return min(fits, key=lambda fit: fit.cost)


def _judge_fit(fit, counts, scale, level) -> LogisticFit:
    n_residuals = counts.size - 1
    dof = n_residuals - 2
    sd = float(np.sqrt(2.0 * fit.cost / dof))
    r_max, crowding_scaled = (float(value) for value in fit.x)
    common = dict(
        r_max=r_max,
        method=LOGISTIC_METHOD,
        crowding_per_animal=crowding_scaled / scale,
        residual_sd_log=sd,
        n_counts=int(counts.size),
        level=float(level),
    )
    information = fit.jac.T @ fit.jac
    if np.any(fit.active_mask != 0) or np.linalg.cond(information) > _SINGULAR_CONDITION:
        return LogisticFit(
            K=None,
            K_ci=None,
            r_max_ci=None,
            crowding_ci=None,
            ceiling_evidence=False,
            reason=_NOT_IDENTIFIABLE,
            **common,
        )
    half = _t_quantile(level, dof) * np.sqrt(np.diag(sd**2 * np.linalg.inv(information)))
    r_ci = (float(r_max - half[0]), float(r_max + half[0]))
    c_ci = (float(crowding_scaled - half[1]), float(crowding_scaled + half[1]))
    reason = _ceiling_verdict(r_max, crowding_scaled, c_ci, level)
    supported = reason is None
    return LogisticFit(
        K=scale / crowding_scaled if supported else None,
        K_ci=(float(scale / c_ci[1]), float(scale / c_ci[0])) if supported else None,
        r_max_ci=r_ci,
        crowding_ci=(c_ci[0] / scale, c_ci[1] / scale),
        ceiling_evidence=supported,
        reason=reason or _supported_reason(level, c_ci[0]),
        **common,
    )


def _fit_problem(fit, years, counts, steps, harvest, scale) -> str | None:
    """Why the best fit found is no fit of the model, or None when it is one."""
    if fit.status == 0:
        return (
            f"logistic not fitted: the least-squares fit stopped after {fit.nfev} evaluations "
            f"of the model without converging, so r_max and K are not estimated"
        )
    predicted = _predict(fit.x[0], fit.x[1] / scale, counts[:-1], steps, harvest)
    overflowed = np.flatnonzero(~np.isfinite(predicted))
    if overflowed.size:
        first = int(overflowed[0])
        return (
            f"logistic not fitted: at the best parameters found, the model iterated over the "
            f"{steps[first]}-year interval {years[first]:g}–{years[first + 1]:g} grows beyond "
            f"the range of floating-point numbers, so r_max and K are not estimated"
        )
    return None


def _not_fitted(reason: str, counts, level) -> LogisticFit:
    """The result when the model could not be fitted: no K, no r_max, the reason."""
    return LogisticFit(
        K=None,
        K_ci=None,
        r_max=None,
        r_max_ci=None,
        ceiling_evidence=False,
        reason=reason,
        method=LOGISTIC_METHOD,
        crowding_per_animal=None,
        crowding_ci=None,
        residual_sd_log=None,
        n_counts=int(counts.size),
        level=float(level),
    )


_NOT_IDENTIFIABLE = (
    "K not identifiable: the fit stopped at a parameter bound or cannot separate r_max "
    "from K (singular information matrix)"
)


def _ceiling_verdict(r_max, crowding_scaled, c_ci, level) -> str | None:
    """Reason the series does not support a ceiling, or None when it does."""
    pct = f"{100 * level:g}%"
    if r_max <= 0:
        return (
            "no evidence of a ceiling: the fitted growth at low density r_max is not above "
            "zero, so the series does not show a population growing toward a limit"
        )
    if crowding_scaled <= 0:
        return "no evidence of a ceiling: growth did not slow as numbers rose (fitted 1/K ≤ 0)"
    if c_ci[0] <= 0:
        return (
            f"no evidence of a ceiling: the density-dependence term 1/K is not different "
            f"from zero at the {pct} level"
        )
    if crowding_scaled * FAR_ABOVE_LARGEST_COUNT < 1.0:
        return (
            f"no evidence of a ceiling: the fitted K is more than "
            f"{FAR_ABOVE_LARGEST_COUNT:g} times the largest count, so the series does not "
            f"show where growth stops"
        )
    return None


def _supported_reason(level, crowding_scaled_low) -> str:
    reason = (
        f"ceiling supported: growth slows with density (1/K above zero at the "
        f"{100 * level:g}% level) and K lies within {FAR_ABOVE_LARGEST_COUNT:g} times the "
        f"largest count"
    )
    if crowding_scaled_low * FAR_ABOVE_LARGEST_COUNT < 1.0:
        reason += (
            f"; but the upper limit of K is more than {FAR_ABOVE_LARGEST_COUNT:g} times "
            f"the largest count, so K is poorly bounded"
        )
    return reason
