"""Tests of nutricap.landscape.density (capacity_density.tif of the vector path).

The check is conservation: density × hectares summed over a unit returns the
unit's NCC animal-days from the solver, exactly for the pieces and within the
rasterisation error for the raster (cells burnt by centre; the grid is 10 m).
"""

import numpy as np
import pandas as pd
import pytest
import rasterio
from rasterio.features import rasterize

from nutricap.inputs.project import load_project
from nutricap.landscape.density import DENSITY_NODATA, piece_density, write_piece_density
from nutricap.workflow import estimate


def _unit_sums(result, density):
    pieces = result.areas.pieces.assign(days=density * result.areas.pieces["area_ha"])
    return pieces.groupby("unit_id")["days"].sum().reindex(result.by_unit["unit_id"])


def test_piece_density_conserves_ncc(example_estimate):
    result = example_estimate
    density = piece_density(
        result.problem,
        result.solution.ncc.eaten_kg,
        result.areas.pieces,
        result.herd.intake_kg_per_day,
    )
    np.testing.assert_allclose(
        _unit_sums(result, density), result.by_unit["ncc_animal_days"], rtol=1e-9
    )


def test_patch_pooling_density_conserves_ncc(project):
    project_file = project
    project_file.write_text(project_file.read_text().replace('mode = "unit"', 'mode = "patch"'))
    result = estimate(load_project(project_file))
    density = piece_density(
        result.problem,
        result.solution.ncc.eaten_kg,
        result.areas.pieces,
        result.herd.intake_kg_per_day,
    )
    np.testing.assert_allclose(
        _unit_sums(result, density), result.by_unit["ncc_animal_days"], rtol=1e-9
    )


def test_raster_sums_back_to_ncc(example_estimate, tmp_path):
    result = example_estimate
    density = piece_density(
        result.problem,
        result.solution.ncc.eaten_kg,
        result.areas.pieces,
        result.herd.intake_kg_per_day,
    )
    path = tmp_path / "capacity_density.tif"
    cell = write_piece_density(result.areas.pieces, density, result.units, path)
    with rasterio.open(path) as dataset:
        values = dataset.read(1)
        transform = dataset.transform
        assert dataset.nodata == DENSITY_NODATA
        assert dataset.profile["tiled"]
    unit_number = rasterize(
        ((g, i + 1) for i, g in enumerate(result.units.geometry)),
        out_shape=values.shape,
        transform=transform,
        fill=0,
    )
    cell_ha = cell * cell / 1e4
    sums = pd.Series(
        [
            values[(unit_number == i + 1) & (values != DENSITY_NODATA)].sum() * cell_ha
            for i in range(len(result.units))
        ]
    )
    # Burning polygons by cell centre on a 10-m grid: boundary error well under 0.1 %.
    np.testing.assert_allclose(sums, result.by_unit["ncc_animal_days"], rtol=1e-3)
    assert pytest.approx(cell) == 10.0
