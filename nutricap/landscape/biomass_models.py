"""Index → biomass models of calibrated raster supply: fits, choice, bootstrap, re-prediction.

A forage group's biomass on each plot (the sum of its classes, kg/ha) is regressed on the
index raster sampled at the plot (:mod:`nutricap.landscape.calibration`), by one of two models:

- ``linear``:    B = a + b·x (ordinary least squares; predictions below 0 are set to 0);
- ``loglinear``: ln B = a + b·x (ordinary least squares on ln B; back-transformed with
  Duan's (1983) smearing factor, B = exp(a + b·x) · mean(exp(residuals))).

``best`` picks the model with the lower AIC **on the original (kg/ha) scale**: for the
log-linear model the log-likelihood of ln B is converted to that of B by the Jacobian of the
transformation, ``ℓ_B = ℓ_lnB − Σ ln B_i`` (Akaike 1978), so ``AIC_B = AIC_lnB + 2 Σ ln B_i``;
both models have k = 3 parameters (a, b, σ). The log-linear model needs every plot's group
biomass > 0.

The model's own error enters the bootstrap by the *pairs* bootstrap (Efron & Tibshirani 1993,
ch. 9, from memory): the plots (index, biomass) are drawn with replacement, as many as there
are, and the same model kind is refitted (:func:`pairs_bootstrap`). The grid pass keeps sums
from which a refitted model's forage follows without reading the rasters again: exactly for
the linear model (:func:`linear_forage`), within a stated bound for the log-linear one
(:func:`binned_loglinear_forage`).

References
----------
Akaike, H. 1978. On the likelihood of a time series model. J. R. Stat. Soc. D 27:217-235.
Duan, N. 1983. Smearing estimate: a nonparametric retransformation method. J. Am. Stat.
    Assoc. 78:605-610.
Efron, B. & Tibshirani, R.J. 1993. An Introduction to the Bootstrap. Chapman & Hall.
Hoeffding, W. 1963. Probability inequalities for sums of bounded random variables. J. Am.
    Stat. Assoc. 58:13-30.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np

MODELS = ("linear", "loglinear")
N_PARAMETERS = 3  # intercept, slope, residual variance
MIN_PLOTS = 3  # the residual standard error needs n - 2 > 0
INDEX_BINS = 8
"""Bins of the index range (plots' range ± margin) for the log-linear re-prediction."""


@dataclass(frozen=True)
class BiomassModel:
    """A fitted index → biomass model of one forage group.

    Attributes
    ----------
    group : str
    kind : str
        ``"linear"`` or ``"loglinear"``.
    intercept, slope : float
        a and b of ``B = a + b·x`` or ``ln B = a + b·x``.
    residual_se : float
        Residual standard error on the fitted scale, ``sqrt(SSR / (n − 2))``
        ([kg/ha] for linear, [ln(kg/ha)] for log-linear).
    rmse_kg_per_ha : float
        Root-mean-square error of the fitted values on the original scale [kg/ha].
    r_squared : float
        Coefficient of determination on the fitted scale.
    aic : float
        Akaike information criterion on the original scale (see the module notes).
    smearing : float
        Duan (1983) back-transformation factor (1 for the linear model).
    n : int
        Number of plots.
    index_min, index_max : float
        Range of the index over the plots.
    plot_index : array (n,)
        The index at each calibration plot (kept for :func:`pairs_bootstrap`).
    plot_biomass_kg_per_ha : array (n,)
        The group's biomass on each calibration plot [kg/ha].
    """

    group: str
    kind: str
    intercept: float
    slope: float
    residual_se: float
    rmse_kg_per_ha: float
    r_squared: float
    aic: float
    smearing: float
    n: int
    index_min: float
    index_max: float
    plot_index: np.ndarray = field(compare=False, repr=False)
    plot_biomass_kg_per_ha: np.ndarray = field(compare=False, repr=False)

    def predict_kg_per_ha(self, index):
        """Group biomass [kg/ha] at index values ``index`` (float32 in, float32 out)."""
        index = np.asarray(index, dtype=np.float32)
        fitted = np.float32(self.intercept) + np.float32(self.slope) * index
        if self.kind == "linear":
            return np.maximum(fitted, np.float32(0.0))
        return np.exp(fitted) * np.float32(self.smearing)


def _least_squares(x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Intercept, slope and residuals of the ordinary least-squares line of y on x, along the
    last axis (one line per row of 2-D arrays)."""
    x_mean = x.mean(axis=-1, keepdims=True)
    y_mean = y.mean(axis=-1, keepdims=True)
    dx = x - x_mean
    slope = np.sum(dx * (y - y_mean), axis=-1, keepdims=True) / np.sum(
        dx**2, axis=-1, keepdims=True
    )
    intercept = y_mean - slope * x_mean
    return intercept[..., 0], slope[..., 0], y - (intercept + slope * x)


def gaussian_aic(residuals: np.ndarray, n_parameters: int = N_PARAMETERS) -> float:
    """AIC of a normal linear model from its residuals.

    Notes
    -----
    With the maximum-likelihood variance σ̂² = SSR/n the log-likelihood is
    ``ℓ = −n/2 · (ln(2π σ̂²) + 1)`` and ``AIC = 2k − 2ℓ`` (Akaike 1978).
    """
    n = residuals.size
    variance = float(np.sum(residuals**2)) / n
    log_likelihood = -0.5 * n * (np.log(2.0 * np.pi * variance) + 1.0)
    return 2.0 * n_parameters - 2.0 * log_likelihood


def fit_linear(group: str, index, biomass_kg_per_ha) -> BiomassModel:
    """Fit ``B = a + b·x`` by ordinary least squares (see the module notes)."""
    x, y = _as_pairs(index, biomass_kg_per_ha)
    intercept, slope, residuals = _least_squares(x, y)
    return _model(group, "linear", (float(intercept), float(slope)), x, y, y, residuals, residuals)


def fit_loglinear(group: str, index, biomass_kg_per_ha) -> BiomassModel:
    """Fit ``ln B = a + b·x`` by ordinary least squares; every B must be > 0."""
    x, y = _as_pairs(index, biomass_kg_per_ha)
    if np.any(y <= 0):
        raise ValueError("the log-linear model needs every biomass > 0")
    log_y = np.log(y)
    intercept, slope, residuals = _least_squares(x, log_y)
    smearing = float(np.mean(np.exp(residuals)))
    original = y - np.exp(intercept + slope * x) * smearing
    parameters = (float(intercept), float(slope), smearing)
    model = _model(group, "loglinear", parameters, x, y, log_y, residuals, original)
    return replace(model, aic=model.aic + 2.0 * float(np.sum(log_y)))


def _as_pairs(index, biomass) -> tuple[np.ndarray, np.ndarray]:
    x = np.array(index, dtype=float)  # copies: the model keeps them
    y = np.array(biomass, dtype=float)
    if x.size < MIN_PLOTS or np.ptp(x) == 0:
        raise ValueError(f"a model needs at least {MIN_PLOTS} plots with different index values")
    return x, y


def _model(group, kind, parameters, x, y, fitted_scale_y, residuals, original):
    """The model of ``parameters`` (intercept, slope[, smearing]) fitted to plots (x, y)."""
    intercept, slope, smearing = (*parameters, 1.0)[:3]
    n = x.size
    total = float(np.sum((fitted_scale_y - fitted_scale_y.mean()) ** 2))
    ssr = float(np.sum(residuals**2))
    return BiomassModel(
        group=group,
        kind=kind,
        intercept=intercept,
        slope=slope,
        residual_se=float(np.sqrt(ssr / (n - 2))),
        rmse_kg_per_ha=float(np.sqrt(np.mean(original**2))),
        r_squared=1.0 - ssr / total if total > 0 else float("nan"),
        aic=gaussian_aic(residuals),
        smearing=smearing,
        n=n,
        index_min=float(x.min()),
        index_max=float(x.max()),
        plot_index=x,
        plot_biomass_kg_per_ha=y,
    )


def select_model(group: str, index, biomass_kg_per_ha, choice: str) -> tuple[BiomassModel, str]:
    """Fit the chosen model, or both and keep the lower original-scale AIC (``"best"``).

    Returns the model and, in words, why it was chosen. Raises ValueError when the chosen
    model cannot be fitted (too few plots, or log-linear with a zero biomass).
    """
    if choice == "linear":
        return fit_linear(group, index, biomass_kg_per_ha), "chosen in the project file"
    if choice == "loglinear":
        return fit_loglinear(group, index, biomass_kg_per_ha), "chosen in the project file"
    linear = fit_linear(group, index, biomass_kg_per_ha)
    if np.any(np.asarray(biomass_kg_per_ha) <= 0):
        return linear, "best: log-linear not possible (a plot has zero biomass)"
    loglinear = fit_loglinear(group, index, biomass_kg_per_ha)
    best = min((linear, loglinear), key=lambda model: model.aic)
    other = loglinear if best is linear else linear
    return best, f"best: lower AIC on the kg/ha scale ({best.aic:.2f} vs {other.aic:.2f})"


@dataclass(frozen=True)
class ModelFits:
    """Parameters of a model refitted once per replicate, arrays of shape (replicates,).

    ``intercept`` and ``slope`` are a and b on the fitted scale; ``smearing`` is Duan's factor
    (1 for the linear model).
    """

    intercept: np.ndarray
    slope: np.ndarray
    smearing: np.ndarray

    @classmethod
    def of(cls, model: BiomassModel, replicates: int = 1) -> ModelFits:
        """The point estimate's parameters, repeated."""
        values = (model.intercept, model.slope, model.smearing)
        return cls(*(np.full(replicates, value) for value in values))

    def __getitem__(self, replicates: slice) -> ModelFits:
        """The fits of the replicates in ``replicates`` (e.g. one chunk of the bootstrap)."""
        values = (self.intercept, self.slope, self.smearing)
        return ModelFits(*(value[replicates] for value in values))


def pairs_bootstrap(model: BiomassModel, replicates: int, rng: np.random.Generator) -> ModelFits:
    """Refit ``model.kind`` to its calibration plots drawn with replacement, ``replicates`` times.

    Parameters
    ----------
    model : BiomassModel
        The point estimate, with its plots (``plot_index``, ``plot_biomass_kg_per_ha``).
    replicates : int
    rng : numpy Generator
        Draws ``integers(0, n, size=(replicates, n))`` first, then redraws (in replicate
        order) any replicate whose plots all share one index value, until none does.

    Returns
    -------
    ModelFits
        Least-squares a, b (and Duan's smearing factor of each refit for the log-linear
        model) per replicate.

    Notes
    -----
    The pairs (case-resampling) bootstrap of a regression (Efron & Tibshirani 1993, ch. 9,
    from memory): with constant error variance the spread of the refitted slope and intercept
    approaches the ordinary least-squares standard errors; unlike the residual bootstrap, it
    stays valid when the variance changes with the index. A replicate whose plots all have
    one index value has no slope; it is drawn again (a conditional bootstrap, which differs
    from the plain one only when such draws are likely, i.e. with very few plots).
    """
    x, y = model.plot_index, model.plot_biomass_kg_per_ha
    draws = rng.integers(0, x.size, size=(replicates, x.size))
    flat = np.ptp(x[draws], axis=1) == 0
    while flat.any():
        draws[flat] = rng.integers(0, x.size, size=(int(flat.sum()), x.size))
        flat = np.ptp(x[draws], axis=1) == 0
    if model.kind == "linear":
        intercept, slope, _ = _least_squares(x[draws], y[draws])
        return ModelFits(intercept, slope, np.ones(replicates))
    intercept, slope, residuals = _least_squares(x[draws], np.log(y[draws]))
    return ModelFits(intercept, slope, np.exp(residuals).mean(axis=1))


def linear_forage(fits: ModelFits, s0: np.ndarray, s1: np.ndarray) -> np.ndarray:
    """Forage of a linear model's class per replicate and entry: ``max(0, a*·S0 + b*·S1)``.

    Parameters
    ----------
    fits : ModelFits
        a* [kg/ha] and b* [kg/ha per index unit], shape (replicates,).
    s0, s1 : array (entries,)
        ``S0 = Σ available / predicted`` [ha] and ``S1 = Σ available · x / predicted``
        [ha · index units] over the cells of each entry where the point estimate predicts
        more than 0 (x: the index as used, clamped when clamping is on).

    Returns
    -------
    array (replicates, entries) [kg]

    Notes
    -----
    In a cell the forage left of class c is ``share_c · (a + b·x) · A_c`` with A_c the
    availability factor of the rules, so ``available / predicted = share_c · A_c`` and the
    refitted model leaves ``share_c · A_c · (a* + b*·x)``: summed, ``a*·S0 + b*·S1``. Exact
    as long as A_c does not depend on the prediction and the refitted line is ≥ 0 on the
    cells; approximate where the minimum-density rule acts, where the point estimate
    predicted 0 (those cells stay at 0) and where the refit predicts below 0 (they count
    negative; the sum is floored at 0).
    """
    forage = fits.intercept[:, None] * s0[None, :] + fits.slope[:, None] * s1[None, :]
    return np.maximum(forage, 0.0)


def binned_loglinear_forage(
    model: BiomassModel, fits: ModelFits, forage_kg: np.ndarray, mean_index: np.ndarray
) -> np.ndarray:
    """Forage of a log-linear model's class per replicate and entry, from index bins.

    Parameters
    ----------
    model : BiomassModel
        The point estimate (a, b, smearing s).
    fits : ModelFits
        a*, b*, s* per replicate.
    forage_kg : array (entries, bins) [kg]
        Forage left by the point estimate in the cells of each index bin.
    mean_index : array (entries, bins)
        The forage-weighted mean index of those cells (any value where forage is 0).

    Returns
    -------
    array (replicates, entries) [kg]
        ``(s*/s)·e^(a*−a) · Σ_k W_k · e^((b*−b)·x̄_k)``.

    Notes
    -----
    A refit scales a cell's forage by ``P*/P = (s*/s)·e^(a*−a)·e^((b*−b)·x)``; the sum over
    the cells of a bin replaces ``e^((b*−b)·x)`` by its value at the bin's weighted mean x̄_k.
    By Jensen's inequality this never exceeds the exact sum, and by Hoeffding's lemma
    (Hoeffding 1963: ``E e^(β(X−EX)) ≤ e^(β²h²/8)`` for X in an interval of width h) it falls
    short of it by less than a factor ``e^((b*−b)²·h²/8)``, h the bin width. With
    :data:`INDEX_BINS` = 8 bins over the index range used and ``(b*−b)`` × that range ≤ 2,
    the shortfall is below 0.8 %. It is exact for the point estimate's parameters. Cells
    beyond the margin when the model extrapolates fall in the end bins and are not covered
    by the bound.
    """
    scale = fits.smearing / model.smearing * np.exp(fits.intercept - model.intercept)
    change = fits.slope - model.slope
    forage = np.zeros((change.size, forage_kg.shape[0]))
    for weight, index in zip(forage_kg.T, mean_index.T):
        forage += weight[None, :] * np.exp(change[:, None] * index[None, :])
    return scale[:, None] * forage


def clamp_index(index, low: float, high: float):
    """Index values limited to ``[low, high]`` (float32)."""
    return np.clip(np.asarray(index, dtype=np.float32), np.float32(low), np.float32(high))


def margin_bounds(model: BiomassModel, margin: float) -> tuple[float, float]:
    """The plots' index range widened by ``margin`` × its width on each side."""
    width = model.index_max - model.index_min
    return model.index_min - margin * width, model.index_max + margin * width
