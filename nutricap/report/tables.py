"""Per-unit capacity tables: CSV, GeoPackage layer and Markdown."""

from __future__ import annotations

import json
from pathlib import Path

import geopandas as gpd
import pandas as pd

from nutricap.cautions import CAUTION

CSV_FLOAT_FORMAT = "%.6g"

MARKDOWN_COLUMNS = {
    "unit_id": "Unit",
    "area_ha": "Area (ha)",
    "available_forage_kg": "Available forage (kg DM)",
    "ncc_animals": "NCC (animals)",
    "ecc_animals": "ECC (animals)",
    "allowable_use_animals": "Allowable-use capacity (animals)",
    "ncc_per_km2": "NCC per km²",
    "limiting_factor": "Limiting factor",
    "marginal_forage_class": "Marginal forage class",
    "current_animals": "Current animals",
}


def write_csv(table: pd.DataFrame, path: Path) -> None:
    """Write ``table`` as UTF-8 CSV with six significant digits."""
    table.to_csv(path, index=False, float_format=CSV_FLOAT_FORMAT, encoding="utf-8")


def write_geopackage(table: pd.DataFrame, units: gpd.GeoDataFrame, path: Path) -> None:
    """Write the per-unit table joined to the unit polygons as layer ``capacity_by_unit``."""
    shapes = units[["unit_id", "geometry"]].merge(table, on="unit_id", how="right")
    frame = gpd.GeoDataFrame(shapes, geometry="geometry", crs=units.crs)
    frame.to_file(path, layer="capacity_by_unit", driver="GPKG", engine="pyogrio")


def markdown_table(table: pd.DataFrame, *, title: str, context_lines: list[str]) -> str:
    """The per-unit table as Markdown, with its context and the caution."""
    columns = [name for name in MARKDOWN_COLUMNS if name in table.columns]
    shown = table[columns].rename(columns=MARKDOWN_COLUMNS)
    body = shown.to_markdown(index=False, floatfmt=",.1f")
    lines = [f"# {title}", "", *context_lines, "", body, "", f"> **Caution.** {CAUTION}", ""]
    return "\n".join(lines)


def write_json(data: dict, path: Path) -> None:
    """Write ``data`` as indented UTF-8 JSON."""
    path.write_text(json.dumps(data, indent=2, default=str) + "\n", encoding="utf-8")
