"""Time the capacity solvers of nutricap.science.capacity on random, seeded problems.

One nutrient: 100,000 units x 20 items (target under 2 us per unit).
Two nutrients: 10,000 units x 20 items; also reports the share of units that needed the
two-constraint stage and the share that fell back to scipy's HiGHS LP.
Diet-composition limits: 2,000 units x 20 items, DE and DP, use caps, a share cap on every
item and three groups with minimum and maximum shares; timed beside a loop that solves a
sample of the same units one at a time with scipy.optimize.linprog (HiGHS), in the same run.

All data are random numbers invented for the benchmark. Run from the repository root:

    .venv/bin/python benchmarks/solver.py [--units 100000] [--items 20] [--repeat 5]

Results are recorded in benchmarks/README.md (section "Solver").
"""

from __future__ import annotations

import argparse
import os
import platform
import sys
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
import scipy

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from nutricap.science import capacity, diet_lp  # noqa: E402


def random_problem(n_units: int, n_items: int, seed: int) -> dict[str, np.ndarray | float]:
    """Seeded random forage (kg), DE (kcal/g) and DP (%) per unit and item (invented)."""
    rng = np.random.default_rng(seed)
    return {
        "available_kg": rng.lognormal(6.0, 1.5, (n_units, n_items)),
        "de_kcal_per_g": rng.uniform(1.5, 3.6, (n_units, n_items)),
        "intake_kg_per_day": 2.0,
        "de_min_kcal_per_g": 2.6,
        "dp_pct": rng.uniform(-2.0, 16.0, (n_units, n_items)),
        "dp_min_pct": 7.0,
    }


def composition_problem(n_units: int, n_items: int, seed: int) -> dict:
    """A two-nutrient problem with use caps, share caps and three groups (invented)."""
    rng = np.random.default_rng(seed)
    problem = random_problem(n_units, n_items, seed)
    groups = np.zeros((3, n_items), dtype=bool)
    for g, members in enumerate(np.array_split(np.arange(n_items), 3)):
        groups[g, members] = True
    problem.update(
        use_cap=rng.uniform(0.3, 1.0, (n_units, n_items)),
        max_diet_share=rng.uniform(0.1, 0.6, n_items),
        diet_groups=groups,
        min_group_share=np.array([0.1, 0.05, 0.2]),
        max_group_share=np.array([0.6, 0.4, 0.8]),
    )
    return problem


def linprog_per_unit(problem: dict, units: range) -> np.ndarray:
    """Capacity of each unit from its own linprog (HiGHS) call [animal-days]."""
    from scipy.optimize import linprog

    n_items = problem["available_kg"].shape[1]
    groups = problem["diet_groups"]
    shares = np.eye(n_items) - problem["max_diet_share"][:, np.newaxis]
    group_max = groups - problem["max_group_share"][:, np.newaxis]
    group_min = problem["min_group_share"][:, np.newaxis] - groups
    days = []
    for u in units:
        allowed = problem["available_kg"][u] * problem["use_cap"][u]
        de = problem["de_kcal_per_g"][u] - problem["de_min_kcal_per_g"]
        dp = problem["dp_pct"][u] - problem["dp_min_pct"]
        rows = np.vstack([-de, -dp, shares, group_max, group_min])
        scale = allowed.max()
        res = linprog(
            -np.ones(n_items),
            A_ub=rows,
            b_ub=np.zeros(len(rows)),
            bounds=np.column_stack([np.zeros(n_items), allowed / scale]),
            method="highs",
        )
        days.append(res.x.sum() * scale / problem["intake_kg_per_day"])
    return np.array(days)


def load() -> str:
    """The 1-minute load average (/proc/loadavg), or "unknown"."""
    path = Path("/proc/loadavg")
    return path.read_text().split()[0] if path.exists() else "unknown"


def best_time(run: Callable[[], object], repeat: int) -> tuple[float, float]:
    """First and best wall time of ``repeat`` runs [s] (time.perf_counter)."""
    times = []
    for _ in range(repeat):
        start = time.perf_counter()
        run()
        times.append(time.perf_counter() - start)
    return times[0], min(times)


def count_units(name: str, counter: list[int]) -> None:
    """Wrap capacity.<name> so that it adds the number of units it receives to ``counter``."""
    real = getattr(capacity, name)

    def counted(allowed, *args):
        counter.append(len(allowed))
        return real(allowed, *args)

    setattr(capacity, name, counted)


def machine() -> str:
    """Processor count, CPU model and library versions."""
    model = "unknown"
    cpuinfo = Path("/proc/cpuinfo")
    if cpuinfo.exists():
        for line in cpuinfo.read_text().splitlines():
            if line.startswith("model name"):
                model = line.split(":", 1)[1].strip()
                break
    return (
        f"nproc={os.cpu_count()}, CPU: {model}, Python {platform.python_version()}, "
        f"numpy {np.__version__}, scipy {scipy.__version__}"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--units", type=int, default=100_000)
    parser.add_argument("--items", type=int, default=20)
    parser.add_argument("--two-nutrient-units", type=int, default=10_000)
    parser.add_argument("--composition-units", type=int, default=2_000)
    parser.add_argument("--linprog-sample", type=int, default=300)
    parser.add_argument("--repeat", type=int, default=5)
    parser.add_argument("--seed", type=int, default=20240601)
    args = parser.parse_args()
    print(machine())

    one = random_problem(args.units, args.items, args.seed)
    del one["dp_pct"], one["dp_min_pct"]
    first, best = best_time(lambda: capacity.nutritional_capacity(**one), args.repeat)
    print(
        f"one nutrient, {args.units} units x {args.items} items: "
        f"best {best / args.units * 1e6:.2f} us/unit (first run {first / args.units * 1e6:.2f})"
    )

    n2 = args.two_nutrient_units
    two = random_problem(n2, args.items, args.seed + 1)
    first, best = best_time(lambda: capacity.nutritional_capacity(**two), args.repeat)
    both, fallback = [], []
    count_units("_solve_both", both)
    count_units("_linprog_solution", fallback)
    labels = capacity.nutritional_capacity(**two).limiting_factor
    shares = ", ".join(f"{k} {v / n2:.1%}" for k, v in zip(*np.unique(labels, return_counts=True)))
    print(
        f"two nutrients, {n2} units x {args.items} items: "
        f"best {best / n2 * 1e6:.2f} us/unit (first run {first / n2 * 1e6:.2f}); "
        f"two-constraint stage {sum(both) / n2:.1%} of units, "
        f"HiGHS fallback {sum(fallback) / n2:.2%}; limiting factors: {shares}"
    )
    composition(args)


def composition(args: argparse.Namespace) -> None:
    """Time the composition-limited solve against a per-unit linprog loop, in one run."""
    n3, sample = args.composition_units, range(args.linprog_sample)
    problem = composition_problem(n3, args.items, args.seed + 2)
    print(f"load before {load()}")
    sizes, fallback = [], []
    real = diet_lp.solve_homogeneous_lp

    def counted(allowed, rows):
        out = real(allowed, rows)
        sizes.append(len(allowed))
        fallback.append(int(out[2].sum()))
        return out

    capacity.solve_homogeneous_lp = counted
    first, best = best_time(lambda: capacity.nutritional_capacity(**problem), args.repeat)
    result = capacity.nutritional_capacity(**problem)
    start = time.perf_counter()
    expected = linprog_per_unit(problem, sample)
    per_unit = (time.perf_counter() - start) / len(sample)
    error = np.max(np.abs(expected - result.animal_days[: len(sample)]) / expected)
    print(
        f"composition limits, {n3} units x {args.items} items, 3 groups: best "
        f"{best / n3 * 1e6:.1f} us/unit (first run {first / n3 * 1e6:.1f}); "
        f"LP stage {sizes[-1] / n3:.1%} of units, HiGHS fallback {fallback[-1]} units; "
        f"per-unit linprog {per_unit * 1e6:.0f} us/unit ({len(sample)} units), "
        f"{per_unit / (best / n3):.0f}x; largest relative difference {error:.1e}; "
        f"load after {load()}"
    )


if __name__ == "__main__":
    main()
