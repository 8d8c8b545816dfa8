"""Every file of the example project written into one folder, with a fixed seed."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import numpy as np
import pandas as pd

from nutricap.example.layers import make_strata, make_treatments, make_units
from nutricap.example.project_files import PROJECT_TOML, SCENARIOS_TOML
from nutricap.example.rasters import RASTER_PROJECT_TOML, write_example_rasters
from nutricap.example.tables import (
    ANIMAL_CLASSES,
    CATTLE_PERMIT_AUMS,
    RESPONSE_COLUMNS,
    RESPONSES,
    add_current_animals,
    make_counts,
    make_forage_classes,
    make_plots,
)

SEED = 20240117


def write_example_landscape(folder: Path, seed: int = SEED) -> Path:
    """Write the invented example project into ``folder``.

    Parameters
    ----------
    folder : Path
        Output folder; created when missing. Existing example files are replaced.
    seed : int
        Seed of ``numpy.random.default_rng``; the default gives the committed files.

    Returns
    -------
    Path
        The project file ``folder / "project.toml"``.
    """
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    units = make_units(rng)
    strata = make_strata(rng)
    units = add_current_animals(units, strata)
    make_forage_classes().to_csv(folder / "forage_classes.csv", index=False)
    make_plots(rng).to_csv(folder / "plots.csv", index=False)
    ANIMAL_CLASSES.to_csv(folder / "animal_classes.csv", index=False)
    make_counts(rng, units).to_csv(folder / "counts.csv", index=False)
    pd.DataFrame(RESPONSES, columns=list(RESPONSE_COLUMNS)).to_csv(
        folder / "treatment_responses.csv", index=False
    )
    permit = pd.DataFrame(
        {"unit_id": list(CATTLE_PERMIT_AUMS), "aums": CATTLE_PERMIT_AUMS.values()}
    )
    permit.to_csv(folder / "cattle_permit.csv", index=False)
    thinning = make_treatments(strata, "juniper_woodland", 3, 100.0, "thinning", 2027)
    burn = make_treatments(strata, "sagebrush_steppe", 2, 150.0, "prescribed_burn", 2028)
    layers = (
        (units, "units"),
        (strata, "strata"),
        (thinning, "treatments_thinning"),
        (burn, "treatments_burn"),
    )
    for frame, name in layers:
        path = folder / f"{name}.gpkg"
        path.unlink(missing_ok=True)
        frame.to_file(path, layer=name, driver="GPKG")
    write_example_rasters(folder)
    raster_project = PROJECT_TOML.replace(
        'name = "Tallowreed Basin winter range"',
        'name = "Tallowreed Basin winter range, snow and slope on a 50 m grid"',
    )
    (folder / "project_rasters.toml").write_text(
        raster_project + RASTER_PROJECT_TOML + SCENARIOS_TOML, encoding="utf-8"
    )
    project = folder / "project.toml"
    project.write_text(PROJECT_TOML + SCENARIOS_TOML, encoding="utf-8")
    readme = resources.files("nutricap.example").joinpath("README.md")
    (folder / "README.md").write_text(readme.read_text(encoding="utf-8"), encoding="utf-8")
    return project
