"""Opening a vector file: the layer to read, shapefiles' cut attribute names, NUL characters.

Used by :func:`nutricap.landscape.vectors.read_layer`, which checks the layer it returns
(columns, CRS, geometries). Features in messages are counted from 1 in file order.
"""

from __future__ import annotations

import warnings
from contextlib import closing
from pathlib import Path

import geopandas as gpd
import numpy as np
import pyogrio

from nutricap.errors import SpatialError
from nutricap.inputs.table_source import TableSource, apply_column_names

DBF_NAME_CHARS = 10
"""A shapefile's attribute names (dBASE fields) hold at most this many characters; GDAL cuts
longer names when it writes one and numbers the names a cut makes equal (``current_1``)."""


def feature_error(
    message: str,
    source: object,
    frame: gpd.GeoDataFrame,
    mask: np.ndarray,
    column: str | None = None,
    *,
    expected: str,
    found: str,
) -> SpatialError:
    """The :class:`~nutricap.errors.SpatialError` of the first feature ``mask`` flags."""
    location = feature_location(frame, mask, column)
    return SpatialError(message, source=source, location=location, expected=expected, found=found)


def layer_renaming(
    frame: gpd.GeoDataFrame,
    source: TableSource,
    layer: str | None,
    declared: list[str],
    what: str,
) -> dict[str, str]:
    """File's name → ours: the user's mapping, then our long names cut to 10 characters."""
    names = [str(c) for c in frame.columns if c != frame.geometry.name]
    renaming = apply_column_names(names, source, declared, what)
    shapefile = _is_shapefile(source.path, layer)
    for ours in declared:
        cut = ours[:DBF_NAME_CHARS]
        if ours in names or ours in source.columns or cut == ours or cut not in names:
            continue
        if cut in renaming:  # the user mapped that column to another of ours
            continue
        twins = [n for n in names if n != cut and _same_cut(n, ours)]
        others = [o for o in declared if o != ours and o[:DBF_NAME_CHARS] == cut]
        if not shapefile or twins or others:
            _refuse_cut_name(source, names, ours, cut, [*twins, *others], what)
        renaming[cut] = ours
        source.recognised[ours] = cut
    return renaming


def _same_cut(name: str, ours: str) -> bool:
    """Whether ``name`` is GDAL's numbered form of ``ours`` cut short (``current_1``)."""
    stem, _, number = name.rpartition("_")
    return number.isdigit() and bool(stem) and ours.startswith(stem)


def _refuse_cut_name(
    source: TableSource, names: list[str], ours: str, cut: str, rivals: list[str], what: str
) -> None:
    line = f"[{source.key_of('columns')}] {ours} = {cut!r}"
    if rivals:
        why = f"is {ours!r} cut to {DBF_NAME_CHARS} characters, but so could be " + ", ".join(
            map(repr, rivals)
        )
    else:
        why = f"looks like {ours!r} cut to {DBF_NAME_CHARS} characters (as a shapefile cuts it)"
    raise SpatialError(
        f"{what} attribute {cut!r} {why}; say which column is {ours!r} in the project file",
        source=source.path,
        location=f"attribute {cut!r}",
        expected=f"attribute {ours!r}, or the line {line} under the project file's columns",
        found="attributes " + ", ".join(map(repr, names)),
    )


def _is_shapefile(path: Path, layer: str | None) -> bool:
    """Whether ``path`` is read by GDAL's shapefile driver (``.shp``, ``.dbf``, a folder or
    zip of them): its attribute names were cut to 10 characters."""
    suffix = path.suffix.lower()
    if suffix in (".shp", ".dbf", ".shz"):
        return True
    if suffix not in (".zip", "") and not path.is_dir():
        return False
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # several layers, none named: the first is asked
            return pyogrio.read_info(path, layer=layer)["driver"] == "ESRI Shapefile"
    except (pyogrio.errors.DataSourceError, pyogrio.errors.DataLayerError, ValueError):
        return False


#: Files a shapefile cannot be read without, besides the .shp (geometries): the index of
#: the geometries and the attributes.
SHAPEFILE_PARTS = (".shx", ".dbf")


def _require_shapefile_parts(path: Path, what: str) -> None:
    """Refuse a ``.shp`` whose ``.shx`` or ``.dbf`` is missing (GDAL would read it without
    attributes, or ask for an option, instead of naming the file)."""
    if path.suffix.lower() != ".shp":
        return
    for suffix in SHAPEFILE_PARTS:
        part = next(
            (p for p in (path.with_suffix(suffix), path.with_suffix(suffix.upper())) if p.exists()),
            None,
        )
        if part is None:
            raise SpatialError(
                f"{what}: the shapefile's {suffix} file is missing",
                source=path,
                expected=f"{path.with_suffix(suffix).name} beside {path.name} (a shapefile is "
                "several files: .shp, .shx, .dbf and .prj)",
                found="no such file",
            )


def open_layer(source: TableSource, layer: str | None, what: str) -> gpd.GeoDataFrame:
    path = source.path
    _require_shapefile_parts(path, what)
    if layer is None:
        layer = _only_spatial_layer(path, what)
    try:
        frame = gpd.read_file(path, layer=layer, engine="pyogrio")
    except pyogrio.errors.DataLayerError as exc:
        names = _layer_names(path)
        if layer is None or layer in names or not names:
            raise SpatialError(f"cannot read {what}: {exc}", source=path) from None
        raise SpatialError(
            f"the file has no layer {layer!r}",
            source=path,
            location=f"layer {layer!r}",
            expected="one of the file's layers: " + ", ".join(map(repr, names)),
            found=repr(layer),
        ) from None
    except (pyogrio.errors.DataSourceError, ValueError) as exc:
        detail = str(exc)
        if "not recognized as being in a supported file format" in detail:
            detail = "not a vector format GDAL can read"
        elif "malformed" in detail or "not a database" in detail:
            detail = "the file is truncated or corrupt (SQLite: the database image is malformed)"
        raise SpatialError(
            f"cannot read {what}: {detail}",
            source=path,
            expected="a vector layer (GeoPackage preferred)",
        ) from None
    if not isinstance(frame, gpd.GeoDataFrame):
        raise SpatialError(
            f"{what} has no geometries",
            source=path,
            expected="a vector layer of polygons (GeoPackage preferred)",
            found="a table without geometries",
        )
    _refuse_nul_text(frame, path, layer, what)
    return frame


def _refuse_nul_text(frame: gpd.GeoDataFrame, path: Path, layer: str | None, what: str) -> None:
    """Refuse a text attribute holding a NUL character (byte 0).

    GDAL reads text only up to a NUL, so ``"Cold\\0marrow"`` would become unit ``"Cold"``; in a
    GeoPackage the whole text is read again with SQLite to see it.
    """
    for column in frame.columns.drop(frame.geometry.name):
        text = frame[column].map(lambda value: isinstance(value, str) and "\0" in value)
        if text.any():
            where = feature_location(frame, text.to_numpy(dtype=bool))
            _raise_nul(path, where, column, frame[column][text].iloc[0], what)
    found = _geopackage_nul(path, layer)
    if found is not None:
        index, column, value = found
        _raise_nul(path, f"feature {index} (of {len(frame)})", column, value, what)


def _raise_nul(path: Path, where: str, column: str, value: str, what: str) -> None:
    raise SpatialError(
        f"{what} has a NUL character (byte 0) in attribute {column!r}; GDAL reads text "
        "only up to it",
        source=path,
        location=where,
        expected="text without NUL characters",
        found=repr(value),
    )


def _geopackage_nul(path: Path, layer: str | None) -> tuple[int, str, str] | None:
    """(feature number, column, text) of the first text holding a NUL in a GeoPackage layer."""
    import sqlite3

    try:
        with open(path, "rb") as stream:
            if stream.read(16) != b"SQLite format 3\0":
                return None
        layer = layer or _layer_names(path, spatial_only=True)[0]
        uri = Path(path).resolve().as_uri() + "?mode=ro&immutable=1"  # never writes
        with closing(sqlite3.connect(uri, uri=True)) as db:
            table = '"' + layer.replace('"', '""') + '"'
            columns = db.execute(f"SELECT name, type FROM pragma_table_info({_quoted(layer)})")
            for column, kind in columns.fetchall():
                if not str(kind).upper().startswith("TEXT"):
                    continue
                name = '"' + column.replace('"', '""') + '"'
                hit = db.execute(
                    f"SELECT rowid, CAST({name} AS BLOB) FROM {table} "
                    f"WHERE instr(CAST({name} AS BLOB), X'00') > 0 ORDER BY rowid LIMIT 1"
                ).fetchone()
                if hit is not None:
                    rank = db.execute(f"SELECT COUNT(*) FROM {table} WHERE rowid <= ?", hit[:1])
                    text = bytes(hit[1]).decode("utf-8", errors="replace")
                    return int(rank.fetchone()[0]), column, text
    except (OSError, IndexError, sqlite3.Error):
        return None  # not a GeoPackage SQLite can read: GDAL's reading stands
    return None


def _quoted(text: str) -> str:
    """``text`` as an SQL string literal."""
    return "'" + text.replace("'", "''") + "'"


def _layer_names(path: Path, *, spatial_only: bool = False) -> list[str]:
    try:
        layers = pyogrio.list_layers(path)
    except (pyogrio.errors.DataSourceError, ValueError):
        return []
    return [str(name) for name, kind in layers if kind is not None or not spatial_only]


def _only_spatial_layer(path: Path, what: str) -> str | None:
    """The one layer with geometries when no layer is named; refuse a choice of several.

    Tables without geometries (e.g. the styles a GIS saves in a GeoPackage) do not count.
    """
    spatial = _layer_names(path, spatial_only=True)
    if len(spatial) > 1:
        raise SpatialError(
            f"the file holds {len(spatial)} layers and the project file names none for the {what}",
            source=path,
            expected="the layer to use named in the project file (units_layer, strata_layer, "
            "…): one of " + ", ".join(map(repr, spatial)),
            found="no layer name",
        )
    return spatial[0] if spatial else None


def feature_location(frame: gpd.GeoDataFrame, mask: np.ndarray, column: str | None = None) -> str:
    """``feature N (of M)`` of the first feature ``mask`` flags, with the attribute when named."""
    index = int(np.flatnonzero(mask)[0])
    attribute = f", attribute {column!r}" if column is not None else ""
    return f"feature {index + 1} (of {len(frame)}){attribute}"
