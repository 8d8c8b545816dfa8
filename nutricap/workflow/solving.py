"""One solve of a capacity problem with the project's settings (after the other herbivores)."""

from __future__ import annotations

from nutricap.inputs.project import Project
from nutricap.model.problem import CapacityProblem, Solution, solve_problem
from nutricap.model.requirements import DietTarget
from nutricap.model.shared_range import OtherHerd, share_range
from nutricap.science import energetics


def solve(
    problem: CapacityProblem,
    herd: energetics.HerdRequirement,
    target: DietTarget,
    project: Project,
    others: tuple[OtherHerd, ...] = (),
) -> Solution:
    """Solve ``problem`` for this herd, target and project settings, after ``others`` (the
    other herbivores) have taken their forage."""
    if others:
        problem = share_range(problem, others).problem
    return solve_problem(
        problem,
        intake_kg_per_day=herd.intake_kg_per_day,
        maintenance_de_kcal_per_day=herd.maintenance_de_kcal_per_day,
        de_min_kcal_per_g=target.de_min_kcal_per_g,
        dp_min_pct=target.dp_min_pct,
        cap_at_allowable_use=project.config.forage_use.cap_at_allowable_use,
        diet=target.composition,
    )
