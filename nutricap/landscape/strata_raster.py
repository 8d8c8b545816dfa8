"""Strata from a categorical raster: integer codes named by a codes table.

A vegetation or land-cover map often comes as a raster of class codes rather than polygons.
With ``[rasters.strata]`` each cell takes the stratum its code is named for in the codes table
(columns ``code, stratum``, optionally ``accessible_fraction``; several codes may name one
stratum). A cell whose code is not
listed, or that has no data, belongs to no stratum, like ground outside every strata polygon.
The raster is one layer of the grid (same checks of CRS and alignment; resampled, when asked,
by the nearest cell only, since codes are not quantities).
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import numpy as np

from nutricap.inputs.columns import Column, Source, check_unique, read_csv_table, whole_numbers

MAX_CODE = 2**24 - 1
"""Largest code: rasters are read as float32, which holds every integer up to 2^24 exactly."""

CODE_COLUMNS = [
    Column("code", minimum=0, maximum=MAX_CODE, meaning="integer code of the strata raster"),
    Column("stratum", kind="text", meaning="stratum name, as in the plots table"),
    Column.optional(
        "accessible_fraction",
        minimum=0.0,
        maximum=1.0,
        meaning="share of the code's ground animals can reach, 0-1 (blank: 1)",
    ),
]


@dataclass(frozen=True)
class StrataCodes:
    """The codes table: the stratum of each listed code of the strata raster.

    Attributes
    ----------
    codes : int array (rows,)
        Listed codes, in the order of the table.
    strata : list of str (rows,)
        Stratum of each listed code.
    path : Path
        The codes table (named in messages).
    accessible_fraction : array (rows,) or None
        Share of each code's ground that animals can reach [0–1] (optional column; like the
        strata polygons' ``accessible_fraction``); None when every share is 1.
    """

    codes: np.ndarray
    strata: list[str]
    path: Path
    accessible_fraction: np.ndarray | None = None  # (rows,) [0-1]; None: all 1

    def polygon_lookup(self) -> np.ndarray:
        """Code → polygon code (table row + 1; 0 for a code not listed), int32.

        Indexed by the code; one extra entry at the end (0) takes every code above the
        largest listed one and, as index −1, every negative value.
        """
        lookup = np.zeros(int(self.codes.max(initial=0)) + 2, dtype=np.int32)
        lookup[self.codes] = np.arange(1, self.codes.size + 1, dtype=np.int32)
        return lookup


def read_strata_codes(path: Source) -> StrataCodes:
    """Read and check the codes table (whole codes, each listed once)."""
    table = read_csv_table(path, CODE_COLUMNS, what="strata codes table")
    codes = whole_numbers(table, "code", path, expected="an integer code of the strata raster")
    check_unique(table, ["code"], path)
    fraction = None
    if "accessible_fraction" in table.columns:
        fraction = table["accessible_fraction"].fillna(1.0).to_numpy(dtype=np.float32)
        fraction = fraction if (fraction < 1).any() else None
    return StrataCodes(codes, list(table["stratum"]), path, fraction)


def polygons_from_codes(
    values: np.ndarray, valid: np.ndarray, lookup: np.ndarray, out: np.ndarray
) -> np.ndarray:
    """Polygon code of each cell from its raster code, into ``out`` (int32).

    Parameters
    ----------
    values : float32 array
        The strata raster's values (whole numbers where ``valid``).
    valid : bool array
        Cells with data.
    lookup : int32 array
        From :meth:`StrataCodes.polygon_lookup`.
    out : int32 array
        Same shape as ``values``.
    """
    beyond = lookup.size - 1
    index = np.clip(values, -1, beyond).astype(np.intp)  # -1 and beyond: the last entry, 0
    np.take(lookup, index, out=out)
    out *= valid
    return out
