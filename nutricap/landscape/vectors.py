"""Vector layers: reading, checking and the strata × units overlay.

Areas are computed in one projected CRS (the *area CRS*): the units layer's CRS
when it is projected, in metres and nearly equal-area over the units; otherwise
(geographic, feet, Web Mercator, ...) a Lambert azimuthal equal-area projection
centred on the units (EPSG method 9820), so that areas stay true. Other layers
are reprojected to it. A layer labelled geographic whose coordinates are not
longitudes and latitudes is refused (its CRS is wrong).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import geopandas as gpd
import numpy as np
import pandas as pd
import shapely
from pyproj import CRS, Proj, Transformer
from pyproj.crs import ProjectedCRS
from pyproj.crs.coordinate_operation import LambertAzimuthalEqualAreaConversion
from shapely.validation import explain_validity

from nutricap.errors import SpatialError
from nutricap.inputs.columns import shown_value
from nutricap.inputs.table_source import Source, as_source, closest_name
from nutricap.landscape.layer_files import (
    feature_error,
    layer_renaming,
    open_layer,
)

M2_PER_HA = 10_000.0
OVERLAP_TOLERANCE_M2 = 1.0
"""Two polygons sharing more than this area [m²] (or :data:`OVERLAP_RELATIVE_TOLERANCE` of the
smaller one, when that is more) count as overlapping."""
OVERLAP_RELATIVE_TOLERANCE = 1e-6
"""Share of the smaller polygon's area two polygons may share without counting as overlapping:
what is left of a T-junction (an edge meeting a neighbour's vertex) after reprojection, a few
square metres on units of thousands of hectares."""
NOTED_OVERLAP_M2 = 0.01
"""The largest overlap within the tolerance is noted in the run when it is at least this [m²]."""
DENSIFY_SEGMENT_M = 100.0
"""Before a layer is reprojected, its edges are split into pieces at most about this long [m]
(0.001° in a geographic CRS, ~111 m of latitude): a straight edge in one CRS is a curve in
another, and an edge must follow the same path as the neighbour's edge that a T-junction
vertex splits, or the two overlap (by hectares on edges of tens of kilometres)."""
DENSIFY_SEGMENT_DEG = 0.001
REPROJECT_BATCH_VERTICES = 250_000
"""Vertices (after densifying) reprojected at a time: memory of reprojecting long edges of a
large landscape stays flat (temporary copies of ~100 bytes per vertex)."""
OVERLAP_BATCH_PAIRS = 500
"""Pairs of neighbouring polygons intersected at a time by the overlap check."""
AREAL_SCALE_TOLERANCE = 0.005
"""A projected CRS whose areal scale departs more than this from 1 over the units is not used
for areas. UTM inside its zone stays within about 0.2 % (point scale k0 = 0.9996 on the central
meridian, k ≈ k0 (1 + x²/2R²) away from it; Snyder 1987, USGS Professional Paper 1395, from
memory)."""


UNIT_OPTIONAL = ("current_animals",)
"""Attributes of the units layer read when present."""
STRATA_OPTIONAL = ("accessible_fraction",)
"""Attributes of the strata layer read when present (``accessible_fraction`` 1 when absent)."""


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
    notes : list of str
        What the run should say about the layers (the largest overlap within the tolerance,
        units not wholly mapped).
    """

    units: gpd.GeoDataFrame
    by_unit_stratum: pd.DataFrame
    area_crs: CRS
    area_crs_reason: str
    pieces: gpd.GeoDataFrame | None = None
    notes: list[str] = field(default_factory=list)


def read_layer(
    path: Source,
    *,
    layer: str | None,
    columns: list[str],
    what: str,
    optional: tuple[str, ...] = (),
) -> gpd.GeoDataFrame:
    """Read a vector layer GDAL can open and check its columns, CRS and geometries.

    ``columns`` are required, ``optional`` read when present; both are renamed from the
    file's names: the user's ``[columns.KEY]`` mapping of a :class:`TableSource` and, in a
    shapefile, our names cut to 10 characters (``current_an``), recorded in the source.
    """
    source = as_source(path)
    frame = open_layer(source, layer, what)
    if frame.empty:
        raise SpatialError(f"{what} has no features", source=source, expected="polygons")
    declared = [*columns, *optional]
    frame = frame.rename(columns=layer_renaming(frame, source, layer, declared, what))
    for column in columns:
        if column not in frame.columns:
            attributes = [str(c) for c in frame.columns if c != "geometry"]
            close = closest_name(column, attributes)
            raise SpatialError(
                f"{what} has no column {column!r}"
                + (
                    f"; did you mean to name {close!r} {column!r}? (or map it in the project "
                    f"file: [{source.key_of('columns')}] {column} = {close!r})"
                    if close
                    else ""
                ),
                source=source,
                location=f"attribute {column!r}",
                expected=f"attribute {column!r}",
                found="attributes " + ", ".join(map(repr, attributes)),
            )
    if frame.crs is None:
        raise SpatialError(
            f"{what} has no coordinate reference system",
            source=source,
            expected="a layer with a defined CRS (GeoPackage preferred)",
            found="none",
        )
    _check_on_earth(frame, source, what)
    _check_geometries(frame, source, what)
    _check_geographic_range(frame, source, what)
    return frame


def _check_on_earth(frame: gpd.GeoDataFrame, path: Source, what: str) -> None:
    """Refuse a local (engineering) CRS: without a datum on the Earth the layer can be set
    neither on the other layers nor on an equal-area projection."""
    crs = CRS.from_user_input(frame.crs)
    if crs.geodetic_crs is None:
        raise SpatialError(
            f"{what} has a local (engineering) coordinate reference system, not tied to the Earth",
            source=path,
            expected="a geographic or projected CRS (e.g. the local UTM zone); georeference "
            "a site grid before use",
            found=f"CRS {crs.name!r}",
        )


def _check_geographic_range(frame: gpd.GeoDataFrame, path: Source, what: str) -> None:
    """A layer labelled geographic must have longitudes and latitudes (a mislabelled CRS?)."""
    if not CRS.from_user_input(frame.crs).is_geographic:
        return
    bounds = frame.geometry.bounds
    outside = (
        (bounds["minx"] < -180.0)
        | (bounds["maxx"] > 360.0)
        | (bounds["miny"] < -90.0)
        | (bounds["maxy"] > 90.0)
    ).to_numpy()
    if outside.any():
        first = bounds[outside].iloc[0]
        raise feature_error(
            f"{what} has coordinates that are not longitudes and latitudes, yet its CRS is "
            f"geographic ({CRS.from_user_input(frame.crs).to_string()}); "
            "the layer's CRS is probably wrong",
            path,
            frame,
            outside,
            expected="longitude -180..360 and latitude -90..90, or the layer's true CRS",
            found=f"x {first['minx']:.6g}..{first['maxx']:.6g}, "
            f"y {first['miny']:.6g}..{first['maxy']:.6g}",
        )


def read_units(
    path: Source, layer: str | None, number_columns: Sequence[str] = ()
) -> gpd.GeoDataFrame:
    """Read the management units.

    ``unit_id`` must be filled and unique; ``current_animals``, when present, >= 0, and so
    must be the ``number_columns`` (e.g. another herd's numbers), which must be present.
    """
    columns = ["unit_id", *number_columns]
    units = read_layer(
        path, layer=layer, columns=columns, optional=UNIT_OPTIONAL, what="units layer"
    )
    _require_filled_text(units, "unit_id", path, "units layer")
    duplicated = units["unit_id"].duplicated().to_numpy()
    if duplicated.any():
        raise feature_error(
            "duplicate unit_id",
            path,
            units,
            duplicated,
            "unit_id",
            expected="each unit_id once",
            found=repr(units["unit_id"][duplicated].iloc[0]),
        )
    present = ["current_animals"] if "current_animals" in units.columns else []
    for column in dict.fromkeys([*present, *number_columns]):
        _require_numbers(units, column, path, "units layer", low=0.0, high=None)
    return units


def read_strata(path: Source, layer: str | None) -> gpd.GeoDataFrame:
    """Read the vegetation strata.

    ``stratum`` must be filled; ``accessible_fraction`` lies in [0, 1] (default 1).
    """
    strata = read_layer(
        path, layer=layer, columns=["stratum"], optional=STRATA_OPTIONAL, what="strata layer"
    )
    _require_filled_text(strata, "stratum", path, "strata layer")
    if "accessible_fraction" in strata.columns:
        _require_numbers(strata, "accessible_fraction", path, "strata layer", low=0.0, high=1.0)
    else:
        strata["accessible_fraction"] = 1.0
    return strata


def _require_filled_text(frame: gpd.GeoDataFrame, column: str, path: Source, what: str) -> None:
    text = frame[column].astype("string").str.strip()
    blank = (text.isna() | (text == "")).to_numpy()
    if blank.any():
        raise feature_error(
            f"{what} has an empty {column}",
            path,
            frame,
            blank,
            column,
            expected=f"a {column} for every feature",
            found="an empty value",
        )
    frame[column] = text.astype(str)


def _require_numbers(
    frame: gpd.GeoDataFrame, column: str, path: Source, what: str, *, low: float, high: float | None
) -> None:
    values = pd.to_numeric(frame[column], errors="coerce").to_numpy(dtype=float)
    bad = ~np.isfinite(values) | (values < low)
    if high is not None:
        bad |= values > high
    if bad.any():
        bounds = f"between {low:g} and {high:g}" if high is not None else f"at least {low:g}"
        raise feature_error(
            f"{what} has a bad {column}",
            path,
            frame,
            bad,
            column,
            expected=f"a number {bounds}",
            found=shown_value(frame[column][bad].iloc[0]),
        )
    frame[column] = values


def _check_geometries(frame: gpd.GeoDataFrame, path: Source, what: str) -> None:
    geometry = frame.geometry
    empty = (geometry.isna() | geometry.is_empty).to_numpy()
    if empty.any():
        raise feature_error(
            f"{what} has an empty geometry",
            path,
            frame,
            empty,
            expected="a polygon",
            found="no geometry",
        )
    polygonal = geometry.geom_type.isin(["Polygon", "MultiPolygon"]).to_numpy()
    if not polygonal.all():
        bad = ~polygonal
        raise feature_error(
            f"{what} has a non-polygon geometry",
            path,
            frame,
            bad,
            expected="Polygon or MultiPolygon",
            found=str(geometry[bad].iloc[0].geom_type),
        )
    invalid = ~geometry.is_valid.to_numpy()
    if invalid.any():
        reason = explain_validity(geometry[invalid].iloc[0])
        raise feature_error(
            f"{what} has an invalid geometry ({reason})",
            path,
            frame,
            invalid,
            expected="a valid polygon",
            found="an invalid polygon; repair it in a GIS (e.g. make valid)",
        )
    off_earth = ~_on_the_earth(frame)
    if off_earth.any():
        west, south, east, north = frame.geometry[off_earth].iloc[0].bounds
        raise feature_error(
            f"{what} has coordinates that lie nowhere on the Earth in its CRS",
            path,
            frame,
            off_earth,
            expected=f"coordinates within the area of {CRS.from_user_input(frame.crs).name}",
            found=f"bounds {west:.6g}, {south:.6g} to {east:.6g}, {north:.6g}",
        )


def _on_the_earth(frame: gpd.GeoDataFrame) -> np.ndarray:
    """Whether each feature's bounding box in a projected CRS maps to longitudes and
    latitudes (a polygon at 1e200 m, say, does not). Without a CRS nothing can be said, and a
    geographic layer's coordinates are checked as degrees elsewhere: every feature passes."""
    if frame.crs is None or CRS.from_user_input(frame.crs).is_geographic:
        return np.ones(len(frame), dtype=bool)
    bounds = frame.geometry.bounds.to_numpy(dtype=float)
    to_degrees = Transformer.from_crs(frame.crs, "EPSG:4326", always_xy=True)
    with np.errstate(all="ignore"):
        lon, lat = to_degrees.transform(
            np.r_[bounds[:, 0], bounds[:, 2]], np.r_[bounds[:, 1], bounds[:, 3]], errcheck=False
        )
    lon, lat = np.asarray(lon, dtype=float), np.asarray(lat, dtype=float)
    ok = np.isfinite(lon) & np.isfinite(lat) & (np.abs(lat) <= 90.0) & (np.abs(lon) <= 540.0)
    return ok[: len(frame)] & ok[len(frame) :]


def choose_area_crs(units: gpd.GeoDataFrame) -> tuple[CRS, str]:
    """Pick the CRS areas are computed in, and say why.

    The units layer's CRS when it is projected, in metres, and nearly equal-area over the
    units (areal scale within ``AREAL_SCALE_TOLERANCE`` of 1 at the centre and corners of
    their extent); otherwise a Lambert azimuthal equal-area projection centred on the units.
    A CRS in feet, or Web Mercator (areal scale 1/cos²φ, 1.6 at 38° N), would give wrong
    hectares.
    """
    crs = CRS.from_user_input(units.crs)
    lon, lat = _centre_lon_lat(units)
    if crs.is_projected:
        problem = _area_problem(crs, units)
        if problem is None:
            return crs, f"the units layer's projected CRS ({crs.to_string()})"
        why = f"the units layer's CRS ({crs.to_string()}) {problem}"
    else:
        why = "the units layer is geographic"
    laea = equal_area_crs(lat, lon)
    reason = (
        f"{why}, so areas use a Lambert azimuthal equal-area "
        f"projection centred on the units ({lat:.4f}, {lon:.4f})"
    )
    return laea, reason


def equal_area_crs(lat: float, lon: float) -> CRS:
    """Lambert azimuthal equal-area CRS on WGS 84 centred on (``lat``, ``lon``) [°], with a name
    that says so (written into the outputs' GeoPackage and GeoTIFF with its WKT)."""
    conversion = LambertAzimuthalEqualAreaConversion(round(lat, 6), round(lon, 6))
    name = (
        f"Lambert azimuthal equal-area centred on the units ({abs(lat):.4f} "
        f"{'N' if lat >= 0 else 'S'}, {abs(lon):.4f} {'E' if lon >= 0 else 'W'}), WGS 84"
    )
    return CRS(ProjectedCRS(conversion, name=name, geodetic_crs=CRS.from_epsg(4326)).to_wkt())


def to_area_crs(frame: gpd.GeoDataFrame, crs: CRS) -> gpd.GeoDataFrame:
    """``frame`` in ``crs``, its edges first split into pieces of at most
    :data:`DENSIFY_SEGMENT_M` (see there) when the CRS changes."""
    source = CRS.from_user_input(frame.crs)
    if source == crs:
        return frame.to_crs(crs)
    if source.is_geographic:
        step = DENSIFY_SEGMENT_DEG
    else:
        step = DENSIFY_SEGMENT_M / source.axis_info[0].unit_conversion_factor
    transformer = Transformer.from_crs(source, crs, always_xy=True)
    geometries = frame.geometry.to_numpy()
    projected = np.empty(len(geometries), dtype=object)
    for batch in _vertex_batches(geometries, step):
        dense = shapely.segmentize(geometries[batch], step)
        projected[batch] = shapely.transform(dense, transformer.transform, interleaved=False)
    return frame.set_geometry(gpd.GeoSeries(projected, index=frame.index, crs=crs))


def _vertex_batches(geometries: np.ndarray, step: float) -> list[slice]:
    """Runs of ``geometries`` of about :data:`REPROJECT_BATCH_VERTICES` vertices each once
    split into pieces of ``step``: the reprojection's temporary copies stay small however long
    the edges (a single geometry larger than the budget is a batch of its own)."""
    vertices = shapely.get_num_coordinates(geometries) + shapely.length(geometries) / step
    batch_of = np.floor(np.cumsum(vertices) / REPROJECT_BATCH_VERTICES).astype(np.int64)
    starts = np.flatnonzero(np.diff(batch_of, prepend=-1) != 0)
    ends = np.append(starts[1:], len(geometries))
    return [slice(int(a), int(b)) for a, b in zip(starts, ends)]


def _area_problem(crs: CRS, units: gpd.GeoDataFrame) -> str | None:
    """Why ``crs`` (projected) would give wrong areas over ``units``, or None."""
    axis_units = {axis.unit_name for axis in crs.axis_info}
    if any(axis.unit_conversion_factor != 1.0 for axis in crs.axis_info):
        return "is not in metres (" + ", ".join(sorted(axis_units)) + ")"
    west, south, east, north = units.to_crs("EPSG:4326").total_bounds
    lon = np.array([west, east, west, east, (west + east) / 2.0])
    lat = np.array([south, south, north, north, (south + north) / 2.0])
    factors = Proj(crs).get_factors(lon, lat, errcheck=False)
    scale = np.asarray(factors.areal_scale, dtype=float)
    worst = float(np.max(np.abs(scale - 1.0))) if np.isfinite(scale).all() else np.inf
    if worst > AREAL_SCALE_TOLERANCE:
        return f"changes areas by up to {worst:.1%} over the units"
    return None


def _centre_lon_lat(units: gpd.GeoDataFrame) -> tuple[float, float]:
    west, south, east, north = units.to_crs("EPSG:4326").total_bounds
    return (west + east) / 2.0, (south + north) / 2.0


def check_no_overlaps(
    frame: gpd.GeoDataFrame, id_column: str, path: Source, what: str
) -> str | None:
    """Raise :class:`SpatialError` when two polygons share more than the tolerance: the larger
    of :data:`OVERLAP_TOLERANCE_M2` and :data:`OVERLAP_RELATIVE_TOLERANCE` of the smaller
    polygon's area. Return a note on the largest overlap within it (None below
    :data:`NOTED_OVERLAP_M2`)."""
    left, right = frame.sindex.query(frame.geometry, predicate="intersects")
    pairs = left < right
    left, right = left[pairs], right[pairs]
    if left.size == 0:
        return None
    shared = _shared_areas(frame.geometry.to_numpy(), left, right)
    areas = shapely.area(frame.geometry.to_numpy())
    smaller = np.minimum(areas[left], areas[right])
    tolerance = np.maximum(OVERLAP_TOLERANCE_M2, OVERLAP_RELATIVE_TOLERANCE * smaller)
    overlapping = np.flatnonzero(shared > tolerance)
    ids = frame[id_column].to_numpy()
    if overlapping.size:
        first = overlapping[0]
        a, b = ids[left[first]], ids[right[first]]
        raise SpatialError(
            f"{what} overlap: {id_column} {a!r} and {b!r} share {shared[first] / M2_PER_HA:.4g} ha",
            source=path,
            location=f"features {left[first] + 1} and {right[first] + 1} (of {len(frame)})",
            expected="polygons that do not overlap (shared edges are fine; at most "
            f"{tolerance[first]:.3g} m², {OVERLAP_RELATIVE_TOLERANCE:g} of the smaller one)",
            found="overlapping polygons",
        )
    worst = int(np.argmax(shared))
    if shared[worst] < NOTED_OVERLAP_M2:
        return None
    return (
        f"{what} of {path.name}: the largest overlap, {shared[worst]:.3g} m² between "
        f"{id_column} {ids[left[worst]]!r} and {ids[right[worst]]!r}, is within the tolerance "
        f"(1 m² or {OVERLAP_RELATIVE_TOLERANCE:g} of the smaller polygon, whichever is more; "
        "what is left of edges meeting at T-junctions after reprojection) and is counted in both"
    )


def _shared_areas(geometries: np.ndarray, left: np.ndarray, right: np.ndarray) -> np.ndarray:
    """Area of ``geometries[left] ∩ geometries[right]``, pair by pair [CRS units²], in batches
    of :data:`OVERLAP_BATCH_PAIRS` pairs (the intersections of densified neighbours hold many
    vertices; memory stays flat however many units)."""
    shared = np.empty(left.size)
    for start in range(0, left.size, OVERLAP_BATCH_PAIRS):
        part = slice(start, start + OVERLAP_BATCH_PAIRS)
        pieces = shapely.intersection(geometries[left[part]], geometries[right[part]])
        shared[part] = shapely.area(pieces)
    return shared


def overlay_strata_on_units(
    units: gpd.GeoDataFrame, strata: gpd.GeoDataFrame, *, units_path: Source, strata_path: Source
) -> StratumAreas:
    """Hectares of each stratum in each unit, in the area CRS.

    ``strata`` may carry ``accessible_fraction`` (0–1, default 1): the share of
    the polygon animals can reach; ``accessible_ha = area_ha × fraction``.
    """
    area_crs, reason = choose_area_crs(units)
    units = to_area_crs(units, area_crs)
    strata = to_area_crs(strata, area_crs)
    notes = [
        check_no_overlaps(units, "unit_id", units_path, "units"),
        check_no_overlaps(strata, "stratum", strata_path, "strata polygons"),
    ]
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
    return StratumAreas(units, table, area_crs, reason, pieces, [n for n in notes if n])


def _extra_unit_columns(units: gpd.GeoDataFrame) -> list[str]:
    return [name for name in UNIT_OPTIONAL if name in units.columns]
