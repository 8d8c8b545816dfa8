"""Project-file sections of the raster path: ``[rasters]`` and ``[availability]``.

Same conventions as :mod:`nutricap.inputs.project`: TOML data only, unknown keys refused, paths
relative to the project file. Which forage classes exist is only known once the forage-class table
is read, so names of classes are checked later (:mod:`nutricap.landscape.grid.setup`).
"""

from __future__ import annotations

import re
from pathlib import Path
from typing import Annotated, Literal

from pydantic import BaseModel, ConfigDict, Field, field_validator, model_validator

RESAMPLING_METHODS = ("nearest", "bilinear", "average")

#: A Dask scheduler's address: an optional protocol, a host and a port ("tcp://10.0.0.5:8786"),
#: or a scheduler in this process ("inproc://…").
SCHEDULER_ADDRESS = re.compile(
    r"inproc://\S+|(?:[a-z][a-z0-9+.-]*://)?(?:\[[0-9a-fA-F:.]+\]|[^\s:/\[\]]+):\d{1,5}"
)

#: A path written in the project file (a TOML string), relative to the file.
InputPath = Annotated[Path, Field(strict=False)]


class StrictSection(BaseModel):
    """A section of the project file: unknown keys refused; numbers, flags and text strict.

    No ``true`` read as 1, no ``"3"`` read as 3, no infinities or NaN, no 2.5 where a whole
    number is meant: TOML has a type for each, and a value of the wrong type is an error.
    """

    model_config = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)


class CalibratedSection(StrictSection):
    """``[rasters.calibrated]``: clip plots with coordinates + an index raster → biomass rasters.

    ``groups`` maps a forage group to its forage classes; one biomass model is fitted per group
    (group biomass of a plot = the sum of its classes) and the group's predicted biomass is
    shared among its classes in proportion to their plot totals.
    """

    index: InputPath
    plots: InputPath
    groups: dict[str, list[str]] = Field(min_length=1)
    model: Literal["linear", "loglinear", "best"] = "best"
    plots_crs: str | None = None
    extrapolation_margin: float = Field(default=0.1, ge=0.0, le=1.0)
    beyond_margin: Literal["clamp", "extrapolate"] = "clamp"

    @field_validator("plots_crs")
    @classmethod
    def _known_crs(cls, value: str | None) -> str | None:
        if value is None:
            return value
        from pyproj import CRS
        from pyproj.exceptions import CRSError

        try:
            CRS.from_user_input(value)
        except CRSError:
            raise ValueError(
                "unknown CRS (expected a CRS pyproj knows, e.g. 'EPSG:32612')"
            ) from None
        return value

    @model_validator(mode="after")
    def _classes_once(self) -> CalibratedSection:
        seen: dict[str, str] = {}
        for group, classes in self.groups.items():
            if not classes:
                raise ValueError(f"group {group!r} lists no forage class")
            for name in classes:
                if name in seen:
                    raise ValueError(
                        f"forage class {name!r} is in groups {seen[name]!r} and {group!r}"
                    )
                seen[name] = group
        return self

    def classes(self) -> list[str]:
        """Every forage class predicted from the index, in the order given."""
        return [name for classes in self.groups.values() for name in classes]


class StrataRasterSection(StrictSection):
    """``[rasters.strata]``: the strata map as a categorical raster instead of polygons.

    ``raster`` holds integer codes (e.g. a land-cover map); ``codes`` is a CSV table
    ``code, stratum`` naming the stratum of each code (several codes may share a stratum).
    Cells whose code is not listed, or without data, belong to no stratum.
    """

    raster: InputPath
    codes: InputPath


class RasterSection(StrictSection):
    """``[rasters]``: forage rasters and how the grid is handled."""

    biomass: dict[str, InputPath] = Field(default_factory=dict)
    calibrated: CalibratedSection | None = None
    strata: StrataRasterSection | None = None
    resample: Literal["none", "nearest", "bilinear", "average"] = "none"
    window_size: int | None = Field(default=None, ge=16, le=16_384)
    density_compression: Literal["zstd", "deflate"] = "zstd"
    dask_scheduler: str | None = Field(default=None, min_length=1)
    dask_connect_timeout_s: float = Field(default=10.0, gt=0.0, le=600.0)

    @field_validator("dask_scheduler")
    @classmethod
    def _scheduler_address(cls, value: str | None) -> str | None:
        if value is not None and not SCHEDULER_ADDRESS.fullmatch(value):
            raise ValueError(
                "not a scheduler address (expected a host and port, e.g. 'tcp://10.0.0.5:8786')"
            )
        return value

    @model_validator(mode="after")
    def _one_source_per_class(self) -> RasterSection:
        if self.calibrated is not None:
            both = sorted(set(self.biomass) & set(self.calibrated.classes()))
            if both:
                raise ValueError(
                    f"forage class {both[0]!r} has a biomass raster and a calibrated group"
                )
        return self


class AvailabilitySection(StrictSection):
    """``[availability]``: rules applied to every cell before forage is pooled by unit."""

    snow_depth: InputPath | None = None
    snow_burial: Literal["exposed_fraction", "all_or_none"] = "exposed_fraction"
    slope: InputPath | None = None
    slope_units: Literal["percent", "degrees"] = "percent"
    slope_table: InputPath | None = None
    distance_to_water: InputPath | None = None
    water_table: InputPath | None = None
    min_forage_kg_per_ha: float | None = Field(default=None, ge=0.0)
    exclusions: list[InputPath] = Field(default_factory=list)

    @model_validator(mode="after")
    def _tables_need_layers(self) -> AvailabilitySection:
        if self.slope_table is not None and self.slope is None:
            raise ValueError("slope_table is given but no slope raster")
        if self.water_table is not None and self.distance_to_water is None:
            raise ValueError("water_table is given but no distance_to_water raster")
        return self


def raster_input_paths(
    rasters: RasterSection | None, availability: AvailabilitySection | None
) -> dict[str, Path]:
    """Every file named in the two sections, by project key (paths as written, not resolved)."""
    found: dict[str, Path] = {}
    if rasters is not None:
        for name, path in rasters.biomass.items():
            found[f"rasters.biomass.{name}"] = path
        if rasters.calibrated is not None:
            found["rasters.calibrated.index"] = rasters.calibrated.index
            found["rasters.calibrated.plots"] = rasters.calibrated.plots
        if rasters.strata is not None:
            found["rasters.strata.raster"] = rasters.strata.raster
            found["rasters.strata.codes"] = rasters.strata.codes
    if availability is not None:
        for key in ("snow_depth", "slope", "slope_table", "distance_to_water", "water_table"):
            path = getattr(availability, key)
            if path is not None:
                found[f"availability.{key}"] = path
        for number, path in enumerate(availability.exclusions, start=1):
            found[f"availability.exclusions.{number}"] = path
    return found
