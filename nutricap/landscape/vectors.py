"""Vector layers: reading, checking and the strata × units overlay.

Areas are computed in one projected CRS (the *area CRS*): the units layer's CRS
when it is projected; otherwise a Lambert azimuthal equal-area projection
centred on the units (EPSG method 9820), so that areas stay true. Other layers
are reprojected to it.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import geopandas as gpd
import numpy as np
import pandas as pd
import pyogrio
from pyproj import CRS
from shapely.validation import explain_validity

from nutricap.errors import SpatialError

M2_PER_HA = 10_000.0
OVERLAP_TOLERANCE_M2 = 1.0
"""Two polygons sharing more than this area [m²] count as overlapping."""


@dataclass(frozen=True)
class StratumAreas:
    """Result of the strata × units overlay.

    Attributes
    ----------
    units : GeoDataFrame
        The units in the area CRS, with ``unit_id`` and ``area_ha``.
    by_unit_stratum : DataFrame
        ``unit_id, stratum, area_ha, accessible_ha`` for every pair that overlaps.
    area_crs : pyproj.CRS
        The CRS areas were computed in.
    area_crs_reason : str
        Why that CRS was chosen, for the run manifest.
    pieces : GeoDataFrame, optional
        The overlay's polygons (``unit_id, stratum, accessible_fraction, area_ha,
        accessible_ha``) in the area CRS, for later overlays (treatments).
    """

    units: gpd.GeoDataFrame
    by_unit_stratum: pd.DataFrame
    area_crs: CRS
    area_crs_reason: str
    pieces: gpd.GeoDataFrame | None = None


def read_layer(path: Path, *, layer: str | None, columns: list[str], what: str) -> gpd.GeoDataFrame:
    """Read a vector layer GDAL can open and check its columns, CRS and geometries."""
    try:
        frame = gpd.read_file(path, layer=layer, engine="pyogrio")
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, ValueError) as exc:
        raise SpatialError(f"cannot read {what}: {exc}", source=path) from None
    if frame.empty:
        raise SpatialError(f"{what} has no features", source=path, expected="polygons")
    for column in columns:
        if column not in frame.columns:
            raise SpatialError(
                f"{what} has no column {column!r}",
                source=path,
                expected=f"attribute {column!r}",
                found="attributes " + ", ".join(repr(c) for c in frame.columns if c != "geometry"),
            )
    if frame.crs is None:
        raise SpatialError(
            f"{what} has no coordinate reference system",
            source=path,
            expected="a layer with a defined CRS (GeoPackage preferred)",
            found="none",
        )
    _check_geometries(frame, path, what)
    return frame


def read_units(path: Path, layer: str | None) -> gpd.GeoDataFrame:
    """Read the management units.

    ``unit_id`` must be filled and unique; ``current_animals``, when present, >= 0.
    """
    units = read_layer(path, layer=layer, columns=["unit_id"], what="units layer")
    _require_filled_text(units, "unit_id", path, "units layer")
    duplicated = units["unit_id"].duplicated().to_numpy()
    if duplicated.any():
        raise SpatialError(
            "duplicate unit_id",
            source=path,
            location=_feature(units, duplicated),
            expected="each unit_id once",
            found=repr(units["unit_id"][duplicated].iloc[0]),
        )
    if "current_animals" in units.columns:
        _require_numbers(units, "current_animals", path, "units layer", low=0.0, high=None)
    return units


def read_strata(path: Path, layer: str | None) -> gpd.GeoDataFrame:
    """Read the vegetation strata.

    ``stratum`` must be filled; ``accessible_fraction`` lies in [0, 1] (default 1).
    """
    strata = read_layer(path, layer=layer, columns=["stratum"], what="strata layer")
    _require_filled_text(strata, "stratum", path, "strata layer")
    if "accessible_fraction" in strata.columns:
        _require_numbers(strata, "accessible_fraction", path, "strata layer", low=0.0, high=1.0)
    else:
        strata["accessible_fraction"] = 1.0
    return strata


def _require_filled_text(frame: gpd.GeoDataFrame, column: str, path: Path, what: str) -> None:
    text = frame[column].astype("string").str.strip()
    blank = (text.isna() | (text == "")).to_numpy()
    if blank.any():
        raise SpatialError(
            f"{what} has an empty {column}",
            source=path,
            location=_feature(frame, blank),
            expected=f"a {column} for every feature",
            found="an empty value",
        )
    frame[column] = text.astype(str)


def _require_numbers(
    frame: gpd.GeoDataFrame, column: str, path: Path, what: str, *, low: float, high: float | None
) -> None:
    values = pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float)
    bad = np.isnan(values) | (values < low)
    if high is not None:
        bad |= values > high
    if bad.any():
        bounds = f"between {low:g} and {high:g}" if high is not None else f"at least {low:g}"
        raise SpatialError(
            f"{what} has a bad {column}",
            source=path,
            location=_feature(frame, bad),
            expected=f"a number {bounds}",
            found=repr(frame[column][bad].iloc[0]),
        )
    frame[column] = values


def _check_geometries(frame: gpd.GeoDataFrame, path: Path, what: str) -> None:
    geometry = frame.geometry
    empty = (geometry.isna() | geometry.is_empty).to_numpy()
    if empty.any():
        raise SpatialError(
            f"{what} has an empty geometry",
            source=path,
            location=_feature(frame, empty),
            expected="a polygon",
            found="no geometry",
        )
    polygonal = geometry.geom_type.isin(["Polygon", "MultiPolygon"]).to_numpy()
    if not polygonal.all():
        bad = ~polygonal
        raise SpatialError(
            f"{what} has a non-polygon geometry",
            source=path,
            location=_feature(frame, bad),
            expected="Polygon or MultiPolygon",
            found=str(geometry[bad].iloc[0].geom_type),
        )
    invalid = ~geometry.is_valid.to_numpy()
    if invalid.any():
        reason = explain_validity(geometry[invalid].iloc[0])
        raise SpatialError(
            f"{what} has an invalid geometry ({reason})",
            source=path,
            location=_feature(frame, invalid),
            expected="a valid polygon",
            found="an invalid polygon; repair it in a GIS (e.g. make valid)",
        )


def _feature(frame: gpd.GeoDataFrame, mask: np.ndarray) -> str:
    index = int(np.flatnonzero(mask)[0])
    return f"feature {index + 1} (of {len(frame)})"


def choose_area_crs(units: gpd.GeoDataFrame) -> tuple[CRS, str]:
    """Pick the CRS areas are computed in, and say why."""
    crs = CRS.from_user_input(units.crs)
    if crs.is_projected:
        return crs, f"the units layer's projected CRS ({crs.to_string()})"
    lon, lat = _centre_lon_lat(units)
    laea = CRS.from_proj4(f"+proj=laea +lat_0={lat:.6f} +lon_0={lon:.6f} +datum=WGS84 +units=m")
    reason = (
        "the units layer is geographic, so areas use a Lambert azimuthal equal-area "
        f"projection centred on the units ({lat:.4f}, {lon:.4f})"
    )
    return laea, reason


def _centre_lon_lat(units: gpd.GeoDataFrame) -> tuple[float, float]:
    west, south, east, north = units.to_crs("EPSG:4326").total_bounds
    return (west + east) / 2.0, (south + north) / 2.0


def check_no_overlaps(frame: gpd.GeoDataFrame, id_column: str, path: Path, what: str) -> None:
    """Raise :class:`SpatialError` when two polygons share more than the tolerance."""
    left, right = frame.sindex.query(frame.geometry, predicate="intersects")
    pairs = left < right
    left, right = left[pairs], right[pairs]
    if left.size == 0:
        return
    shared = (
        frame.geometry.iloc[left]
        .reset_index(drop=True)
        .intersection(frame.geometry.iloc[right].reset_index(drop=True))
        .area.to_numpy()
    )
    overlapping = np.flatnonzero(shared > OVERLAP_TOLERANCE_M2)
    if overlapping.size:
        first = overlapping[0]
        a = frame[id_column].iloc[left[first]]
        b = frame[id_column].iloc[right[first]]
        raise SpatialError(
            f"{what} overlap: {id_column} {a!r} and {b!r} share {shared[first] / M2_PER_HA:.4g} ha",
            source=path,
            expected="polygons that do not overlap (shared edges are fine)",
            found="overlapping polygons",
        )


def overlay_strata_on_units(
    units: gpd.GeoDataFrame, strata: gpd.GeoDataFrame, *, units_path: Path, strata_path: Path
) -> StratumAreas:
    """Hectares of each stratum in each unit, in the area CRS.

    ``strata`` may carry ``accessible_fraction`` (0–1, default 1): the share of
    the polygon animals can reach; ``accessible_ha = area_ha × fraction``.
    """
    area_crs, reason = choose_area_crs(units)
    units = units.to_crs(area_crs)
    strata = strata.to_crs(area_crs)
    check_no_overlaps(units, "unit_id", units_path, "units")
    check_no_overlaps(strata, "stratum", strata_path, "strata polygons")
    units = units[["unit_id", *_extra_unit_columns(units), "geometry"]].copy()
    units["area_ha"] = units.geometry.area / M2_PER_HA
    pieces = gpd.overlay(
        strata[["stratum", "accessible_fraction", "geometry"]],
        units[["unit_id", "geometry"]],
        how="intersection",
        keep_geom_type=True,
    )
    pieces["area_ha"] = pieces.geometry.area / M2_PER_HA
    pieces["accessible_ha"] = pieces["area_ha"] * pieces["accessible_fraction"]
    table = pieces.groupby(["unit_id", "stratum"], as_index=False, sort=True)[
        ["area_ha", "accessible_ha"]
    ].sum()
    return StratumAreas(units, table, area_crs, reason, pieces)


def _extra_unit_columns(units: gpd.GeoDataFrame) -> list[str]:
    return [name for name in ("current_animals",) if name in units.columns]
