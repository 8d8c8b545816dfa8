"""Calibrated forage groups on the grid: each cell's biomass from the index raster, and the
sums from which a refitted model's forage follows (the model bootstrap).

The per-window computation (:mod:`nutricap.landscape.grid.window_pass`) predicts each group's
biomass with :func:`predict_group` and writes the per-cell terms of
:func:`reprediction_terms`; summed by key over the grid, they become one
:class:`CalibratedSums` per group (:func:`calibrated_sums`), which
:mod:`nutricap.model.uncertainty` refits without another pass over the rasters.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from nutricap.landscape.calibration import (
    INDEX_BINS,
    BiomassModel,
    ModelFits,
    binned_loglinear_forage,
    linear_forage,
    pairs_bootstrap,
)


@dataclass(frozen=True)
class CalibratedGroup:
    """A forage group predicted from the index raster."""

    model: BiomassModel
    class_index: np.ndarray  # columns of the group's classes
    shares: np.ndarray  # share of each class in the group [0-1]
    low: float  # index range used as fitted (plots' range ± margin)
    high: float
    clamp: bool  # clamp the index beyond [low, high] (else extrapolate)

    @property
    def class_terms(self) -> int:
        """Rows of re-prediction sums per class (see :func:`reprediction_terms`)."""
        return 2 if self.model.kind == "linear" else 2 * INDEX_BINS

    @property
    def terms(self) -> int:
        return self.class_index.size * self.class_terms


def predict_group(group: CalibratedGroup, index: np.ndarray, valid: np.ndarray):
    """Group biomass [kg/ha] from the index, the index as used, and cells beyond range /
    beyond margin / negative."""
    model = group.model
    beyond_range = valid & ((index < model.index_min) | (index > model.index_max))
    beyond_margin = valid & ((index < group.low) | (index > group.high))
    used = np.clip(index, np.float32(group.low), np.float32(group.high)) if group.clamp else index
    fitted = np.float32(model.intercept) + np.float32(model.slope) * used
    negative = valid & (fitted < 0) if model.kind == "linear" else np.zeros(1, bool)
    counts = [np.count_nonzero(beyond_range), np.count_nonzero(beyond_margin)]
    counts.append(np.count_nonzero(negative))
    return model.predict_kg_per_ha(used), used, counts


def reprediction_terms(groups: list[CalibratedGroup], predictions, available, out) -> None:
    """Per-cell terms of the calibrated classes into the rows of ``out``, group by group,
    class by class (``group.class_terms`` rows each); x is the index as used.

    Linear model: ``available / predicted`` and ``available · x / predicted`` where the
    prediction is above 0, else 0; summed, the S0 and S1 of
    :func:`~nutricap.landscape.calibration.linear_forage`. Log-linear model: ``available``
    in the row of the cell's index bin, then ``available · x`` likewise; summed, each bin's
    forage and (÷ that forage) its weighted mean index for
    :func:`~nutricap.landscape.calibration.binned_loglinear_forage`.
    """
    row = 0
    for group, (predicted, used) in zip(groups, predictions):
        linear = group.model.kind == "linear"
        positive = predicted > 0 if linear else None
        positions = None if linear else _bin_positions(group, used)
        for column in group.class_index:
            block = out[row : row + group.class_terms]
            row += group.class_terms
            if linear:
                _linear_terms(available[column], predicted, used, positive, block)
            else:
                _binned_terms(available[column], used, positions, block)


def _linear_terms(available, predicted, used, positive, out) -> None:
    """available / predicted (where positive) and × used, into the two rows of ``out``."""
    out[0].fill(np.float32(0.0))
    np.divide(available, predicted, out=out[0], where=positive)
    np.multiply(out[0], used, out=out[1])


def _binned_terms(available, used, positions, out) -> None:
    """available, then available × used, into the row of each cell's bin (others 0); ``out``
    is C-contiguous (whole rows), ``positions`` from :func:`_bin_positions`."""
    out.fill(np.float32(0.0))
    flat = out.reshape(-1)
    flat[positions] = available
    flat[positions + INDEX_BINS * used.size] = available * used


def _bin_positions(group: CalibratedGroup, used: np.ndarray) -> np.ndarray:
    """Flat position of each cell in an (INDEX_BINS, cells) block: bin × cells + cell, with
    INDEX_BINS equal bins of [low, high] (cells beyond fall in the end bins)."""
    width = np.float32((group.high - group.low) / INDEX_BINS)
    bins = np.clip(np.floor((used - np.float32(group.low)) / width), 0, INDEX_BINS - 1)
    return bins.astype(np.intp) * used.size + np.arange(used.size)


@dataclass(frozen=True)
class CalibratedSums:
    """A calibrated group's forage left, by problem row and item, as sums from which a refitted
    model's forage follows without another pass over the rasters (the model bootstrap).

    Attributes
    ----------
    model : BiomassModel
        The point estimate, with its calibration plots.
    rows, items : int arrays (entries,)
        Row and item of the capacity problem of each entry (one key × one class of the group).
    terms : array (entries, 2) or (entries, INDEX_BINS)
        Linear model: S0 [ha] and S1 [ha · index units] of
        :func:`~nutricap.landscape.calibration.linear_forage`. Log-linear model: the forage
        left in the cells of each index bin [kg].
    mean_index : array (entries, INDEX_BINS) or None
        Log-linear model: the forage-weighted mean index of each bin.
    """

    model: BiomassModel
    rows: np.ndarray
    items: np.ndarray
    terms: np.ndarray
    mean_index: np.ndarray | None = None

    def forage_kg(self, fits: ModelFits) -> np.ndarray:
        """Forage left of each entry under each set of parameters [kg], (replicates, entries).

        Exact for a linear model whose line stays ≥ 0 on the cells and without the
        minimum-density rule; the log-linear bins fall short by less than the bound of
        :func:`~nutricap.landscape.calibration.binned_loglinear_forage`.
        """
        if self.mean_index is None:
            return linear_forage(fits, self.terms[:, 0], self.terms[:, 1])
        return binned_loglinear_forage(self.model, fits, self.terms, self.mean_index)

    def resampled_fits(self, replicates: int, rng: np.random.Generator) -> ModelFits:
        """``replicates`` pairs-bootstrap refits of the model (the draws from ``rng`` are those
        of :func:`~nutricap.landscape.calibration.pairs_bootstrap`); their forage follows by
        :meth:`forage_kg`, a slice of replicates at a time."""
        return pairs_bootstrap(self.model, replicates, rng)


def calibrated_sums(
    groups: list[CalibratedGroup], n_classes: int, terms_by_key, cell_ha, row_of_key, stratum_of_key
) -> list[CalibratedSums]:
    """One :class:`CalibratedSums` per calibrated group from the sums by key of the
    :func:`reprediction_terms` rows [per-cell values × cells] and the cell area [ha].

    Keys map to the problem's (row, item) as in
    :func:`~nutricap.landscape.grid.outputs.density_coefficients`: the key's row, and item
    ``stratum × classes + class`` (``n_classes`` classes); keys without a row are left out.
    """
    keys = np.flatnonzero(row_of_key[: terms_by_key.shape[0]] >= 0)
    terms = terms_by_key[keys] * cell_ha
    result, start = [], 0
    for group in groups:
        block = terms[:, start : start + group.terms]
        start += group.terms
        items = stratum_of_key[keys][:, None] * n_classes + group.class_index[None, :]
        rows = np.broadcast_to(row_of_key[keys][:, None], items.shape)
        per_entry = block.reshape(items.size, group.class_terms)  # keys × classes, row-major
        result.append(_group_sums(group.model, rows.ravel(), items.ravel(), per_entry))
    return result


def _group_sums(model: BiomassModel, rows, items, terms) -> CalibratedSums:
    if model.kind == "linear":
        return CalibratedSums(model, rows, items, terms)
    forage, weighted = terms[:, :INDEX_BINS], terms[:, INDEX_BINS:]
    mean_index = np.divide(weighted, forage, out=np.zeros_like(forage), where=forage > 0)
    return CalibratedSums(model, rows, items, forage, mean_index)
