"""The report's section on the target diet and the herd's requirement, with the
diet-composition limits and the units where each binds.

Formats what the estimate holds (:class:`nutricap.model.estimate.Estimate`); the shares of the
diet eaten at NCC are read from its per-unit × class table.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np
import pandas as pd

from nutricap.report.formatting import (
    ANIMALS,
    ONE_DECIMAL,
    THREE_DECIMALS,
    TWO_DECIMALS,
    Column,
    table,
)
from nutricap.report.sections import limiting_label

if TYPE_CHECKING:
    from nutricap.model.estimate import Estimate


# --- 3. diet and herd -------------------------------------------------------------------------


def diet(estimate: Estimate) -> dict:
    """The diet section: the minimum diet quality and the herd's requirements."""
    target, herd = estimate.target, estimate.herd
    return {
        "de_min": f"{target.de_min_kcal_per_g:.3f}",
        "dp_min": None if target.dp_min_pct is None else f"{target.dp_min_pct:.2f}",
        "derivation": target.derivation,
        "herd": {
            "Dry-matter intake [kg DM/day] (one NCC or allowable-use animal-day eats this)": (
                TWO_DECIMALS(herd.intake_kg_per_day)
            ),
            "Same animal at maintenance [kcal DE/day] (one ECC animal-day needs this)": ANIMALS(
                herd.maintenance_de_kcal_per_day
            ),
            "Digestible-energy requirement, each class in its state [kcal/day]": ANIMALS(
                herd.de_kcal_per_day
            ),
            "Digestible-protein requirement, each class in its state [g/day]": ONE_DECIMAL(
                herd.dp_g_per_day
            ),
            "Animal-unit equivalent [AU/animal]": THREE_DECIMALS(herd.animal_unit_equivalent),
        },
        "limits": diet_limits(estimate),
    }


AT_LIMIT_TOL = 1e-6
"""A diet share within this of a limit [share, 0–1] counts as at the limit."""


def diet_limits(estimate: Estimate) -> dict | None:
    """The diet-composition limits (each [diet] group: classes, minimum, maximum; each class's
    max_diet_share below 1) and the units where each binds; None without limits.

    A group binds in a unit whose limiting factor names diet_group; when there are several
    groups, only where the unit's diet at NCC sits at this one. A max_diet_share bounds the
    whole class (a class grown in several strata is solved as one more group over its items),
    so it binds where the class's share of the diet sits at the cap and the limiting factor
    names a composition limit.
    """
    items = estimate.problem.items
    composition = estimate.target.composition
    groups = composition.groups if composition is not None else ()
    capped = (
        {} if items.max_diet_share is None else dict(zip(items.forage_class, items.max_diet_share))
    )
    caps = {name: share for name, share in capped.items() if share < 1}
    if not groups and not caps:
        return None
    eaten = estimate.by_unit_class.pivot_table(
        index="unit_id", columns="forage_class", values="ncc_eaten_kg", aggfunc="sum"
    ).reindex(estimate.by_unit["unit_id"])
    shares = eaten.div(eaten.sum(axis=1).where(lambda total: total > 0), axis=0)
    factor = estimate.by_unit.set_index("unit_id")["limiting_factor"].astype(str).str.split("+")

    def binding(families: set, share: pd.Series, low: float, high: float, alone: bool) -> str:
        named = factor.apply(lambda parts: bool(families & set(parts)))
        at_limit = ((share - low).abs() <= AT_LIMIT_TOL) & (low > 0)
        at_limit |= ((share - high).abs() <= AT_LIMIT_TOL) & (high < 1)
        units = share.index[named & (at_limit | alone)].tolist()
        return ", ".join(map(str, units)) if units else "none"

    member = composition.membership(items) if groups else np.zeros((0, items.size), bool)
    group_rows = []
    for group, inside in zip(groups, member):
        classes = list(dict.fromkeys(items.forage_class[inside]))
        share = shares.reindex(columns=classes).sum(axis=1, min_count=1)
        group_rows.append(
            {
                "Group": group.name,
                "Forage classes": ", ".join(classes) or "none in the table",
                "Minimum share": _share(group.min_share),
                "Maximum share": _share(group.max_share),
                "Binds in": binding(
                    {"diet_group"}, share, group.min_share, group.max_share, len(groups) == 1
                ),
            }
        )
    cap_rows = [
        {
            "Forage class": name,
            "Maximum share (max_diet_share)": _share(cap),
            "Binds in": binding(
                {"diet_share", "diet_group"},
                shares.reindex(columns=[name]).iloc[:, 0],
                0,
                cap,
                False,
            ),
        }
        for name, cap in caps.items()
    ]
    bound = factor[factor.apply(lambda parts: bool({"diet_group", "diet_share"} & set(parts)))]
    return {
        "groups": _rows_table(group_rows),
        "caps": _rows_table(cap_rows),
        "binding": [f"{unit} ({limiting_label('+'.join(parts))})" for unit, parts in bound.items()],
    }


def _share(value: float) -> str:
    return f"{100 * value:.4g} %"


def _rows_table(rows: list[dict]) -> dict | None:
    """A table of text cells from rows of {header: text}; None when there are no rows."""
    if not rows:
        return None
    frame = pd.DataFrame(rows)
    return table(frame, [Column(name, name) for name in frame.columns])
