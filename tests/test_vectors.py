"""Tests of nutricap.landscape.vectors: reading layers, the area CRS, the overlay.

Areas are checked against independent computations: shapely areas in the
same CRS and pyproj's geodesic area on the WGS84 ellipsoid (Karney 2013
algorithm as implemented in pyproj.Geod).
"""

import sqlite3

import geopandas as gpd
import numpy as np
import pytest
import shapely
import shapely.affinity
from pyproj import CRS, Geod
from shapely.geometry import Polygon, box
from shapely.ops import unary_union

from nutricap.errors import SpatialError
from nutricap.landscape.vectors import overlay_strata_on_units, read_strata, read_units

UTM = "EPSG:32612"
X0, Y0 = 500_000.0, 4_500_000.0


def _write(frame: gpd.GeoDataFrame, path, layer: str):
    frame.to_file(path, layer=layer, driver="GPKG")
    return path


@pytest.fixture()
def layers(tmp_path):
    units = gpd.GeoDataFrame(
        {"unit_id": ["north", "south"]},
        geometry=[box(X0, Y0 + 2000, X0 + 3000, Y0 + 4000), box(X0, Y0, X0 + 3000, Y0 + 2000)],
        crs=UTM,
    )
    strata_utm = gpd.GeoDataFrame(
        {"stratum": ["shrub", "grass", "shrub"], "accessible_fraction": [1.0, 0.5, 0.8]},
        geometry=[
            Polygon(
                [
                    (X0 - 500, Y0 - 500),
                    (X0 + 1800, Y0 - 500),
                    (X0 + 1200, Y0 + 4500),
                    (X0 - 500, Y0 + 4500),
                ]
            ),
            Polygon(
                [
                    (X0 + 1800, Y0 - 500),
                    (X0 + 3500, Y0 - 500),
                    (X0 + 3500, Y0 + 2500),
                    (X0 + 1500, Y0 + 2500),
                ]
            ),
            Polygon(
                [
                    (X0 + 1500, Y0 + 2500),
                    (X0 + 3500, Y0 + 2500),
                    (X0 + 3500, Y0 + 3500),
                    (X0 + 1320, Y0 + 3500),
                ]
            ),
        ],
        crs=UTM,
    )
    # The strata layer is stored in geographic coordinates to exercise reprojection. An edge
    # is a straight line in its layer's CRS (OGC simple features), so the UTM edges are split
    # every 10 m first: straight in UTM and in lon/lat alike, within a millimetre.
    units_path = _write(units, tmp_path / "units.gpkg", "units")
    strata_lon_lat = strata_utm.set_geometry(strata_utm.segmentize(10.0)).to_crs("EPSG:4326")
    strata_path = _write(strata_lon_lat, tmp_path / "strata.gpkg", "strata")
    return units, strata_utm, units_path, strata_path


def _overlay(units_path, strata_path):
    units = read_units(units_path, None)
    strata = read_strata(strata_path, None)
    return overlay_strata_on_units(units, strata, units_path=units_path, strata_path=strata_path)


def test_unit_areas_agree_with_shapely_and_geodesic(layers):
    units, _, units_path, strata_path = layers
    result = _overlay(units_path, strata_path)
    # shapely planar area in the same projected CRS: 3 km × 2 km = 600 ha each.
    np.testing.assert_allclose(result.units["area_ha"], units.area / 1e4, rtol=1e-12)
    geod = Geod(ellps="WGS84")
    for geometry, area_ha in zip(units.to_crs("EPSG:4326").geometry, result.units["area_ha"]):
        geodesic_m2 = abs(geod.geometry_area_perimeter(geometry)[0])
        # UTM scale factor 0.9996 near the central meridian: planar area ≈ 0.9992 × true
        # area (standard UTM definition); 0.2 % tolerance covers it.
        assert area_ha == pytest.approx(geodesic_m2 / 1e4, rel=2e-3)


def test_overlay_conserves_area(layers):
    units, strata_utm, units_path, strata_path = layers
    result = _overlay(units_path, strata_path)
    inside = unary_union(units.geometry).intersection(unary_union(strata_utm.geometry)).area
    # Reprojection UTM → geographic → UTM moves vertices by far less than a millimetre.
    assert result.by_unit_stratum["area_ha"].sum() == pytest.approx(inside / 1e4, rel=1e-6)
    by_pair = result.by_unit_stratum.set_index(["unit_id", "stratum"])
    for (unit_id, stratum), row in by_pair.iterrows():
        unit = units.loc[units["unit_id"] == unit_id].geometry.iloc[0]
        pieces = strata_utm[strata_utm["stratum"] == stratum]
        expected_ha = sum(unit.intersection(g).area for g in pieces.geometry) / 1e4
        expected_accessible = (
            sum(
                unit.intersection(g).area * f
                for g, f in zip(pieces.geometry, pieces["accessible_fraction"])
            )
            / 1e4
        )
        assert row["area_ha"] == pytest.approx(expected_ha, rel=1e-6)
        assert row["accessible_ha"] == pytest.approx(expected_accessible, rel=1e-6)


def test_overlapping_units_are_refused(tmp_path):
    units = gpd.GeoDataFrame(
        {"unit_id": ["a", "b"]},
        geometry=[box(X0, Y0, X0 + 1000, Y0 + 1000), box(X0 + 500, Y0, X0 + 1500, Y0 + 1000)],
        crs=UTM,
    )
    strata = gpd.GeoDataFrame(
        {"stratum": ["s"]}, geometry=[box(X0, Y0, X0 + 2000, Y0 + 1000)], crs=UTM
    )
    units_path = _write(units, tmp_path / "u.gpkg", "u")
    strata_path = _write(strata, tmp_path / "s.gpkg", "s")
    with pytest.raises(SpatialError, match="overlap.*'a' and 'b'"):
        _overlay(units_path, strata_path)


def test_geographic_units_use_equal_area_projection(tmp_path, layers):
    units, _, _, strata_path = layers
    units_path = _write(units.to_crs("EPSG:4326"), tmp_path / "geo_units.gpkg", "units")
    result = _overlay(units_path, strata_path)
    assert "equal-area" in result.area_crs_reason
    geod = Geod(ellps="WGS84")
    for geometry, area_ha in zip(units.to_crs("EPSG:4326").geometry, result.units["area_ha"]):
        # An equal-area projection keeps true (geodesic) areas, up to edge densification.
        geodesic_ha = abs(geod.geometry_area_perimeter(geometry)[0]) / 1e4
        assert area_ha == pytest.approx(geodesic_ha, rel=1e-4)


@pytest.mark.filterwarnings("ignore:'crs' was not provided")
def test_missing_crs_is_refused(tmp_path):
    frame = gpd.GeoDataFrame({"unit_id": ["a"]}, geometry=[box(0, 0, 1, 1)])
    path = _write(frame, tmp_path / "nocrs.gpkg", "u")
    with pytest.raises(SpatialError, match="no coordinate reference system"):
        read_units(path, None)


def test_invalid_geometry_is_refused_with_feature_number(tmp_path):
    bowtie = Polygon([(0, 0), (10, 10), (10, 0), (0, 10)])
    frame = gpd.GeoDataFrame(
        {"stratum": ["ok", "bad"]}, geometry=[box(0, 0, 1, 1), bowtie], crs=UTM
    )
    path = _write(frame, tmp_path / "bad.gpkg", "s")
    with pytest.raises(SpatialError, match="feature 2 \\(of 2\\)"):
        read_strata(path, None)


def _put_nul(path, table, column, old, new):
    """Write ``new`` (holding a NUL) over ``old`` with SQLite, as GDAL itself cannot."""
    with sqlite3.connect(path) as db:
        for name in ("ST_IsEmpty", "ST_MinX", "ST_MaxX", "ST_MinY", "ST_MaxY"):
            db.create_function(name, 1, lambda geometry: 0)  # named by GDAL's R-tree triggers
        db.execute(f"UPDATE {table} SET {column} = ? WHERE {column} = ?", (new, old))
    db.close()


def test_nul_in_a_geopackage_id_refused(layers, tmp_path):
    # GDAL reads text up to the NUL: without the check, unit "so\0uth" would be read as "so".
    *_, units, _ = layers
    _put_nul(units, "units", "unit_id", "south", "so\0uth")
    assert gpd.read_file(units)["unit_id"].tolist() == ["north", "so"]  # GDAL's reading
    with pytest.raises(SpatialError, match=r"feature 2 \(of 2\): units layer has a NUL") as info:
        read_units(units, None)
    assert r"'so\x00uth'" in str(info.value)
    assert sorted(p.name for p in units.parent.iterdir() if p.name.startswith("units")) == [
        "units.gpkg"
    ], "read only: no journal or -shm file"


def _t_junction_units() -> gpd.GeoDataFrame:
    """Three units in lon/lat (invented for the example): a long southern unit whose northern
    edge has only its two corner vertices, and two northern units meeting on that edge at a
    vertex of their own (a T-junction). Edge 0.3° long at 44.1° N (about 24 km)."""
    lon0, lat0 = -110.5, 44.0
    south = box(lon0, lat0, lon0 + 0.3, lat0 + 0.1)
    west = box(lon0, lat0 + 0.1, lon0 + 0.15, lat0 + 0.2)
    east = box(lon0 + 0.15, lat0 + 0.1, lon0 + 0.3, lat0 + 0.2)
    return gpd.GeoDataFrame(
        {"unit_id": ["south", "west", "east"]}, geometry=[south, west, east], crs="EPSG:4326"
    )


def test_lon_lat_t_junction_accepted_with_geodesic_areas(tmp_path):
    units = _t_junction_units()
    # Reprojected vertex by vertex, the straight edge and the two edges through the junction
    # take different paths: shapely measures hectares shared (the old refusal).
    from nutricap.landscape.vectors import choose_area_crs

    crs, _ = choose_area_crs(units)
    plain = units.to_crs(crs).geometry
    assert plain.iloc[0].intersection(plain.iloc[1]).area > 1e4  # m², shapely
    strata = gpd.GeoDataFrame(
        {"stratum": ["steppe"]}, geometry=[box(-110.6, 43.9, -110.1, 44.3)], crs="EPSG:4326"
    )
    units_path = _write(units, tmp_path / "units.gpkg", "units")
    strata_path = _write(strata, tmp_path / "strata.gpkg", "strata")
    result = _overlay(units_path, strata_path)
    geod = Geod(ellps="WGS84")
    for geometry, area_ha in zip(units.geometry, result.units["area_ha"]):
        # Reference: pyproj.Geod geodesic area of the polygon split every 0.0001° (about 10 m),
        # where a geodesic and the straight line in lon/lat coincide to well under 1e-6.
        dense = shapely.segmentize(geometry, 1e-4)
        geodesic_m2 = abs(geod.geometry_area_perimeter(dense)[0])
        assert area_ha == pytest.approx(geodesic_m2 / 1e4, rel=1e-6)
    # The strata cover every unit: the pieces add up to the units' areas.
    assert result.by_unit_stratum["area_ha"].sum() == pytest.approx(
        result.units["area_ha"].sum(), rel=1e-9
    )
    # The largest overlap left is noted (a fraction of a m², far below 1e-6 of 13,000 ha).
    assert len(result.notes) == 1
    assert "the largest overlap" in result.notes[0] and "within the tolerance" in result.notes[0]


def test_overlap_above_the_relative_tolerance_still_refused(tmp_path):
    units = _t_junction_units()
    # Shift the western unit 0.0005° (about 55 m) south into the southern unit: 0.6 ha shared,
    # far above 1e-6 of its 13,000 ha (hand computed: 0.15° × 80 km/° × 0.0005° × 111 km/°).
    units.loc[1, "geometry"] = shapely.affinity.translate(units.geometry.iloc[1], 0, -0.0005)
    units_path = _write(units, tmp_path / "units.gpkg", "units")
    strata = gpd.GeoDataFrame(
        {"stratum": ["steppe"]}, geometry=[box(-110.6, 43.9, -110.1, 44.3)], crs="EPSG:4326"
    )
    strata_path = _write(strata, tmp_path / "strata.gpkg", "strata")
    with pytest.raises(SpatialError, match=r"units overlap: unit_id 'south' and 'west' share"):
        _overlay(units_path, strata_path)


def test_equal_area_crs_has_a_name_and_the_laea_projection():
    from nutricap.landscape.vectors import equal_area_crs

    crs = equal_area_crs(44.15, -110.35)
    assert crs.name.startswith("Lambert azimuthal equal-area centred on the units")
    assert "44.1500 N, 110.3500 W" in crs.name
    # Reference: the same projection written as a PROJ string (PROJ's laea definition).
    reference = CRS.from_proj4("+proj=laea +lat_0=44.15 +lon_0=-110.35 +datum=WGS84 +units=m")
    assert crs.equals(reference, ignore_axis_order=True)
    assert CRS.from_wkt(crs.to_wkt()).name == crs.name
