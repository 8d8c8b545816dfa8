"""Tests of nutricap.landscape.calibration: index → biomass models and plot sampling.

Fits are checked against scipy.stats.linregress, log-likelihoods against scipy.stats.norm and
scipy.stats.lognorm, coordinates against pyproj, and the smearing factor against its
definition (Duan 1983). The pairs bootstrap's spread is checked against the ordinary
least-squares standard errors (Draper & Smith, Applied Regression Analysis, ch. 1, from
memory) as computed by scipy.stats.linregress. Plot data are invented for the example.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
import rasterio
from pyproj import Transformer
from rasterio.transform import from_origin
from scipy import stats

from nutricap.errors import SpatialError, TableError
from nutricap.landscape.calibration import (
    ModelFits,
    binned_loglinear_forage,
    class_shares,
    fit_groups,
    fit_linear,
    fit_loglinear,
    linear_forage,
    margin_bounds,
    pairs_bootstrap,
    read_calibration_plots,
    sample_index,
    select_model,
)

# Invented for the example: an index and a biomass with scatter.
INDEX = np.array([0.12, 0.2, 0.25, 0.33, 0.41, 0.47, 0.52, 0.6, 0.68, 0.75])
BIOMASS = np.array([60.0, 95.0, 90.0, 150.0, 170.0, 240.0, 230.0, 330.0, 380.0, 520.0])


def test_linear_fit_matches_scipy_linregress():
    model = fit_linear("g", INDEX, BIOMASS)
    reference = stats.linregress(INDEX, BIOMASS)  # independent library
    assert model.slope == pytest.approx(reference.slope, rel=1e-12)
    assert model.intercept == pytest.approx(reference.intercept, rel=1e-12)
    assert model.r_squared == pytest.approx(reference.rvalue**2, rel=1e-12)
    # Standard error of the slope = s / sqrt(Σ(x - x̄)²) with s the residual standard error.
    sxx = np.sum((INDEX - INDEX.mean()) ** 2)
    assert model.residual_se / np.sqrt(sxx) == pytest.approx(reference.stderr, rel=1e-10)
    assert model.n == 10 and model.smearing == 1.0


def test_loglinear_fit_and_smearing():
    model = fit_loglinear("g", INDEX, BIOMASS)
    reference = stats.linregress(INDEX, np.log(BIOMASS))
    assert model.slope == pytest.approx(reference.slope, rel=1e-12)
    assert model.intercept == pytest.approx(reference.intercept, rel=1e-12)
    residuals = np.log(BIOMASS) - (reference.intercept + reference.slope * INDEX)
    # Duan (1983): smearing factor = mean of exp(residuals on the log scale).
    assert model.smearing == pytest.approx(np.mean(np.exp(residuals)), rel=1e-12)
    predicted = model.predict_kg_per_ha(np.array([0.5], dtype=np.float32))
    expected = np.exp(reference.intercept + reference.slope * 0.5) * model.smearing
    assert predicted[0] == pytest.approx(expected, rel=1e-5)  # float32 prediction


def test_aic_on_the_kg_per_ha_scale_matches_scipy_likelihoods():
    linear = fit_linear("g", INDEX, BIOMASS)
    residuals = BIOMASS - (linear.intercept + linear.slope * INDEX)
    sigma = np.sqrt(np.mean(residuals**2))  # maximum-likelihood σ
    loglik = stats.norm.logpdf(residuals, scale=sigma).sum()
    assert linear.aic == pytest.approx(2 * 3 - 2 * loglik, rel=1e-10)

    loglinear = fit_loglinear("g", INDEX, BIOMASS)
    log_residuals = np.log(BIOMASS) - (loglinear.intercept + loglinear.slope * INDEX)
    sigma_log = np.sqrt(np.mean(log_residuals**2))
    median = np.exp(loglinear.intercept + loglinear.slope * INDEX)
    # The log-normal density of B itself (scipy.stats.lognorm): the same model on kg/ha.
    loglik_b = stats.lognorm.logpdf(BIOMASS, s=sigma_log, scale=median).sum()
    assert loglinear.aic == pytest.approx(2 * 3 - 2 * loglik_b, rel=1e-10)


def test_best_picks_the_lower_aic_and_says_so():
    model, reason = select_model("g", INDEX, BIOMASS, "best")
    other = fit_linear("g", INDEX, BIOMASS) if model.kind == "loglinear" else None
    other = other or fit_loglinear("g", INDEX, BIOMASS)
    assert model.aic < other.aic
    assert reason.startswith("best: lower AIC")


def test_zero_biomass_rules_out_the_loglinear_model():
    biomass = BIOMASS.copy()
    biomass[0] = 0.0
    model, reason = select_model("g", INDEX, biomass, "best")
    assert model.kind == "linear" and "zero biomass" in reason
    with pytest.raises(ValueError, match="every biomass > 0"):
        select_model("g", INDEX, biomass, "loglinear")


def test_linear_predictions_are_never_negative():
    model = fit_linear("g", INDEX, BIOMASS)
    low = np.array([-5.0], dtype=np.float32)  # far below the plots: a + b·x < 0
    assert model.intercept + model.slope * -5.0 < 0
    assert model.predict_kg_per_ha(low)[0] == 0.0


def test_margin_bounds():
    model = fit_linear("g", INDEX, BIOMASS)
    low, high = margin_bounds(model, 0.1)
    # Range 0.12-0.75 widened by 10 % of 0.63 on each side (arithmetic).
    assert (low, high) == pytest.approx((0.12 - 0.063, 0.75 + 0.063))


def test_pairs_bootstrap_spread_matches_the_ols_standard_errors():
    rng = np.random.default_rng(21)
    x = rng.uniform(0.1, 0.9, 60)
    y = 100.0 + 400.0 * x + rng.normal(0.0, 40.0, 60)  # homoscedastic (invented)
    fits = pairs_bootstrap(fit_linear("g", x, y), 200, np.random.default_rng(4))
    reference = stats.linregress(x, y)  # OLS standard errors (Draper & Smith, from memory)
    # 200 replicates: the spread's own Monte Carlo error is about 1/√400 = 5 %; allow 20 %.
    assert fits.slope.std(ddof=1) == pytest.approx(reference.stderr, rel=0.2)
    assert fits.intercept.std(ddof=1) == pytest.approx(reference.intercept_stderr, rel=0.2)
    assert (fits.smearing == 1.0).all()


def test_pairs_bootstrap_refits_the_documented_draws():
    model = fit_loglinear("g", INDEX, BIOMASS)
    fits = pairs_bootstrap(model, 5, np.random.default_rng(8))
    draws = np.random.default_rng(8).integers(0, INDEX.size, size=(5, INDEX.size))
    for number, drawn in enumerate(draws):
        x, log_y = INDEX[drawn], np.log(BIOMASS[drawn])
        reference = stats.linregress(x, log_y)  # independent least squares
        assert fits.slope[number] == pytest.approx(reference.slope, rel=1e-10)
        assert fits.intercept[number] == pytest.approx(reference.intercept, rel=1e-10)
        residuals = log_y - (reference.intercept + reference.slope * x)
        # Duan (1983): each refit's smearing factor is the mean of its exp(residuals).
        assert fits.smearing[number] == pytest.approx(np.mean(np.exp(residuals)), rel=1e-10)


def test_pairs_bootstrap_redraws_replicates_without_a_slope():
    # Three plots, two at one index value: a third of the draws have a single index value.
    model = fit_linear("g", [0.2, 0.2, 0.6], [100.0, 120.0, 300.0])
    fits = pairs_bootstrap(model, 200, np.random.default_rng(1))
    assert np.isfinite(fits.slope).all() and np.isfinite(fits.intercept).all()
    # With two index values least squares passes through the mean biomass at each, so every
    # draw with both gives slope (300 − mean at 0.2)/0.4, between 450 and 500 (arithmetic).
    assert ((fits.slope >= 450.0 - 1e-9) & (fits.slope <= 500.0 + 1e-9)).all()


def test_linear_forage_of_sums():
    # Two cells with share·availability 0.5 and 1 at index 0.3 and 0.7 (invented):
    # S0 = 0.5 + 1, S1 = 0.5·0.3 + 1·0.7; a refit a* = 10, b* = 100 leaves
    # 0.5·(10 + 30) + 1·(10 + 70) = 100 (arithmetic).
    fits = ModelFits(np.array([10.0, -200.0]), np.array([100.0, 100.0]), np.ones(2))
    forage = linear_forage(fits, np.array([1.5]), np.array([0.85]))
    assert forage[:, 0] == pytest.approx([100.0, 0.0])  # the second is floored at 0


def test_binned_loglinear_forage_is_exact_at_the_point_fit_and_scales_with_a_and_s():
    model = fit_loglinear("g", INDEX, BIOMASS)
    weight = np.array([[30.0, 0.0, 12.0]])
    mean_index = np.array([[0.2, 0.0, 0.6]])
    point = binned_loglinear_forage(model, ModelFits.of(model), weight, mean_index)
    assert point[0, 0] == pytest.approx(42.0)
    shifted = ModelFits(
        np.array([model.intercept + np.log(2.0)]), np.array([model.slope]),
        np.array([model.smearing * 1.5]),
    )  # fmt: skip
    # e^(a*−a) = 2 and s*/s = 1.5 scale every cell by 3 (the model's definition).
    forage = binned_loglinear_forage(model, shifted, weight, mean_index)
    assert forage[0, 0] == pytest.approx(126.0)


def _plots_csv(tmp_path, text):
    path = tmp_path / "plots.csv"
    path.write_text(text)
    return path


def test_frame_mass_is_converted_and_classes_are_shared(tmp_path):
    path = _plots_csv(
        tmp_path,
        "plot_id,x,y,forage_class,dry_mass_g,frame_area_m2\n"
        "P1,1,1,forb,12.5,0.25\nP1,1,1,grass,5,0.25\nP2,2,2,forb,2.5,0.25\n",
    )
    plots = read_calibration_plots(path, {"forb", "grass"})
    # 12.5 g on 0.25 m² = 50 g/m² = 500 kg/ha (SI definitions).
    assert plots["biomass_kg_per_ha"].tolist() == [500.0, 200.0, 100.0]
    shares = class_shares(plots, {"herbs": ["forb", "grass"]}, path)
    # Ratio of sums: forb 600 of 800 kg/ha in all plots.
    assert shares == pytest.approx({"forb": 0.75, "grass": 0.25})


def test_a_plot_at_two_locations_is_refused(tmp_path):
    path = _plots_csv(
        tmp_path,
        "plot_id,x,y,forage_class,biomass_kg_per_ha\nP1,1,1,forb,10\nP1,1,2,grass,10\n",
    )
    with pytest.raises(TableError, match=r"row 3.*plot recorded at two locations"):
        read_calibration_plots(path, {"forb", "grass"})


def test_a_calibration_plot_with_its_biomass_twice_is_refused(tmp_path):
    # As in plots.csv: mass and frame (12.5 g on 0.25 m² = 500 kg/ha) and kg/ha on one row.
    path = _plots_csv(
        tmp_path,
        "plot_id,x,y,forage_class,dry_mass_g,frame_area_m2,biomass_kg_per_ha\n"
        "P1,1,1,forb,12.5,0.25,\nP2,2,2,forb,12.5,0.25,999\n",
    )
    with pytest.raises(TableError, match=r"row 3.*biomass given twice.*500.*999"):
        read_calibration_plots(path, {"forb"})


def _index_raster(path, nodata_corner=False):
    values = np.linspace(0.1, 0.9, 100 * 80, dtype=np.float32).reshape(80, 100)
    if nodata_corner:
        values[:10, :10] = -1.0
    profile = {"driver": "GTiff", "height": 80, "width": 100, "count": 1, "dtype": "float32",
               "crs": "EPSG:32612", "transform": from_origin(500_000, 4_500_000, 30, 30),
               "nodata": -1.0}  # fmt: skip
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(values, 1)
    return values


def test_sample_index_in_another_crs(tmp_path):
    raster = tmp_path / "index.tif"
    values = _index_raster(raster)
    # Cell (row 40, col 55) centre in UTM 12N, expressed in WGS 84 with pyproj.
    x, y = 500_000 + 55.5 * 30, 4_500_000 - 40.5 * 30
    lon, lat = Transformer.from_crs("EPSG:32612", "EPSG:4326", always_xy=True).transform(x, y)
    where = pd.DataFrame({"x": [lon], "y": [lat]}, index=["P1"])
    sampled = sample_index(raster, where, "EPSG:4326", tmp_path / "plots.csv")
    assert sampled[0] == pytest.approx(values[40, 55])


def test_index_raster_that_does_not_cover_the_plots(tmp_path):
    raster = tmp_path / "index.tif"
    _index_raster(raster, nodata_corner=True)
    outside = pd.DataFrame({"x": [500_100.0, 400_000.0], "y": [4_498_000.0, 4_498_000.0]},
                           index=["P1", "P2"])  # fmt: skip
    message = r"'P2' at \(400000, 4498000\).*does not cover 1 of 2 calibration plots"
    with pytest.raises(SpatialError, match=message):
        sample_index(raster, outside, None, tmp_path / "plots.csv")
    on_nodata = pd.DataFrame({"x": [500_045.0], "y": [4_499_955.0]}, index=["P3"])
    with pytest.raises(SpatialError, match="a nodata cell"):
        sample_index(raster, on_nodata, None, tmp_path / "plots.csv")


def test_fit_groups_reports_the_fit(tmp_path):
    raster = tmp_path / "index.tif"
    values = _index_raster(raster)
    rows, cols = np.arange(5, 75, 7), np.arange(5, 95, 9)
    x = 500_000 + (cols + 0.5) * 30
    y = 4_500_000 - (rows + 0.5) * 30
    index = values[rows, cols]
    biomass = 30 + 500 * index + np.where(np.arange(10) % 2, 12.0, -12.0)
    pd.DataFrame(
        {"plot_id": [f"P{i}" for i in range(10)], "x": x, "y": y, "forage_class": "forb",
         "biomass_kg_per_ha": biomass}
    ).to_csv(tmp_path / "plots.csv", index=False)  # fmt: skip
    models, shares, table = fit_groups(
        tmp_path / "plots.csv", raster, {"herbs": ["forb"]}, "linear", None, {"forb"}
    )
    reference = stats.linregress(index, biomass)
    assert models[0].slope == pytest.approx(reference.slope, rel=1e-5)  # float32 raster values
    assert shares == {"forb": 1.0}
    assert table.loc[0, "n_plots"] == 10
    assert {"residual_se", "r_squared", "aic_kg_per_ha_scale", "model"} <= set(table.columns)
