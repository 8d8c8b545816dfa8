"""Tests of nutricap.landscape.plots: clip plots → stratum supply, bare plots included."""

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from nutricap.errors import TableError
from nutricap.inputs.project import load_project
from nutricap.inputs.tables import read_plots
from nutricap.landscape.plots import stratum_supply
from nutricap.workflow import estimate

HEADER = "plot_id,stratum,forage_class,dry_mass_g,frame_area_m2\n"


def _plots(tmp_path: Path, rows: str) -> Path:
    path = tmp_path / "plots.csv"
    path.write_text(HEADER + rows)
    return path


def _supply(path: Path, strata=("aspen", "meadow")):
    return stratum_supply(
        read_plots(path),
        ["grass", "shrub"],
        list(strata),
        plots_path=path,
        strata_path=Path("strata.gpkg"),
        strata_without_forage=[],
    )


def test_bare_plot_counts_as_zero_of_every_class(tmp_path):
    # Numbers invented for the example; 1 g in a 1 m² frame = 10 kg/ha (SI definitions).
    path = _plots(
        tmp_path,
        "A1,aspen,grass,10,1\nA1,aspen,shrub,5,1\nA2,aspen,grass,30,1\nA3,aspen,,0,1\n"
        "M1,meadow,grass,20,1\n",
    )
    supply = _supply(path)
    assert supply.n_plots.tolist() == [3, 1]
    aspen = np.array([[100.0, 50.0], [300.0, 0.0], [0.0, 0.0]])
    # Hand computed: grass (100 + 300 + 0) / 3, shrub (50 + 0 + 0) / 3.
    np.testing.assert_allclose(supply.mean_kg_per_ha[0], [400.0 / 3.0, 50.0 / 3.0], rtol=1e-12)
    # Reference: scipy.stats.sem (sample standard deviation, ddof=1, over √n).
    np.testing.assert_allclose(supply.se_kg_per_ha[0], stats.sem(aspen, axis=0), rtol=1e-12)


def test_bare_plot_given_as_biomass_zero(tmp_path):
    path = tmp_path / "plots.csv"
    path.write_text(
        "plot_id,stratum,forage_class,biomass_kg_per_ha\nA1,aspen,grass,90\nA2,aspen,,0\n"
    )
    supply = _supply(path, strata=("aspen",))
    # Hand computed: (90 + 0) / 2 = 45 kg/ha; SE = sd(90, 0) / √2 = 63.64 / 1.414 = 45.
    assert supply.n_plots.tolist() == [2]
    np.testing.assert_allclose(supply.mean_kg_per_ha[0], [45.0, 0.0])
    np.testing.assert_allclose(supply.se_kg_per_ha[0], [45.0, 0.0])


def test_leaving_a_bare_plot_out_raises_the_mean(tmp_path):
    with_bare = _supply(
        _plots(tmp_path, "A1,aspen,grass,10,1\nA2,aspen,,0,1\nM1,meadow,grass,1,1\n")
    )
    without = _supply(_plots(tmp_path, "A1,aspen,grass,10,1\nM1,meadow,grass,1,1\n"))
    # 100 kg/ha over one plot versus (100 + 0) / 2 (hand computed).
    assert without.mean_kg_per_ha[0, 0] == pytest.approx(100.0)
    assert with_bare.mean_kg_per_ha[0, 0] == pytest.approx(50.0)


@pytest.mark.parametrize(
    ("rows", "message"),
    [
        ("A1,aspen,,4,1\n", r"row 2, column 'forage_class': forage without a forage class"),
        (
            "A1,aspen,grass,4,1\nA1,aspen,,0,1\n",
            r"row 2, column 'forage_class': plot recorded both as bare and with a forage class",
        ),
    ],
)
def test_bare_rows_that_record_forage_refused(tmp_path, rows, message):
    with pytest.raises(TableError, match=message):
        read_plots(_plots(tmp_path, rows))


def test_bare_plot_in_the_example_adds_one_plot_of_zeros(project):
    before = estimate(load_project(project)).supply.table()
    plots = project.parent / "plots.csv"
    with plots.open("a") as stream:
        stream.write("P999,sagebrush_steppe,,0,1.0\n")  # invented for the example
    after = estimate(load_project(project)).supply.table()
    steppe = after["stratum"] == "sagebrush_steppe"
    n_before = before.loc[steppe, "n_plots"].to_numpy()
    assert (after.loc[steppe, "n_plots"].to_numpy() == n_before + 1).all()
    # Reference: the raw plots with the bare plot's zeros, through pandas and scipy.stats.sem.
    raw = pd.read_csv(plots, keep_default_na=False)
    raw = raw[raw["stratum"] == "sagebrush_steppe"]
    raw["kg_per_ha"] = 10.0 * raw["dry_mass_g"] / raw["frame_area_m2"]
    wide = raw.pivot_table(
        index="plot_id", columns="forage_class", values="kg_per_ha", aggfunc="sum", fill_value=0
    )
    classes = after.loc[steppe, "forage_class"].tolist()
    wide = wide.reindex(columns=classes, fill_value=0.0)
    assert len(wide) == n_before[0] + 1
    np.testing.assert_allclose(after.loc[steppe, "mean_kg_per_ha"], wide.mean(), rtol=1e-12)
    np.testing.assert_allclose(
        after.loc[steppe, "se_kg_per_ha"], stats.sem(wide.to_numpy(), axis=0), rtol=1e-12
    )
    assert (
        after.loc[steppe, "mean_kg_per_ha"].to_numpy()
        <= before.loc[steppe, "mean_kg_per_ha"].to_numpy()
    ).all()
