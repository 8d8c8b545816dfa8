"""Time the stratified bootstrap, on the invented example landscape or on many units.

Without ``--units``: measures, in one run, (a) the floor — one point estimate of the
example with the bootstrap switched off; (b) the same estimate with N bootstrap replicates;
prints the bootstrap's own time and its ratio to the floor.

With ``--units N [N ...]``: for each N, a child process builds the example's capacity
problem, synthesises N units from it (unit k is example unit k mod 6 with its hectares
scaled by a factor drawn uniformly in 0.5–1.5 from a fixed seed: numbers invented for the
benchmark) and runs the workflow's bootstrap (``assess_uncertainty``, sensitivity off) with
``--replicates`` replicates. The child reports the bootstrap's wall time
(``time.perf_counter``) and its peak resident set size (``resource.getrusage(RUSAGE_SELF)
.ru_maxrss``, the high-water mark of the whole process: interpreter, libraries and problem
included), and the RSS before the bootstrap (``VmRSS`` of ``/proc/self/status``).
``--calibrated`` also makes the first forage class of every stratum a calibrated-raster
group (a linear model fitted to 40 invented plots; its per-entry sums S0, S1 invented), as
on the grid path. ``--limit-gb G`` caps each child's address space (``RLIMIT_AS``) so that
an unbounded run fails with MemoryError instead of exhausting the machine. ``--memory-mb M``
sets the bootstrap's chunk budget (``nutricap.uncertainty.BOOTSTRAP_MEMORY_BYTES``) in the
child; ``--profile`` prints the child's 15 costliest calls (cProfile, cumulative).

    python benchmarks/bootstrap.py [--replicates 1000] [--repeat 3]
    python benchmarks/bootstrap.py --units 1000 5000 20000 [--calibrated] [--limit-gb 12]
"""

from __future__ import annotations

import argparse
import cProfile
import json
import pstats
import resource
import subprocess
import sys
import tempfile
import time
from dataclasses import replace
from functools import partial
from pathlib import Path
from types import SimpleNamespace

import numpy as np

import nutricap.model.uncertainty as uncertainty
from nutricap.example import write_example_landscape
from nutricap.inputs.project import load_project
from nutricap.model.problem import CapacityProblem
from nutricap.model.requirements import diet_target, herd_requirement
from nutricap.workflow import assess_uncertainty, build_supply, estimate, read_inputs

UNITS_SEED = 5_000


def set_replicates(project_file: Path, replicates: int, sensitivity: bool = True) -> None:
    """Rewrite the example project's replicate count (and switch sensitivity off if asked)."""
    text = project_file.read_text()
    start = text.index("bootstrap_replicates = ")
    end = text.index("\n", start)
    text = text[:start] + f"bootstrap_replicates = {replicates}" + text[end:]
    if not sensitivity:
        start = text.index("sensitivity_change = ")
        end = text.index("\n", start)
        text = text[:start] + "sensitivity_change = 0" + text[end:]
    project_file.write_text(text)


def timed_estimate(project_file: Path, replicates: int, repeat: int) -> float:
    """Best wall time [s] of ``estimate`` with ``replicates`` bootstrap replicates."""
    set_replicates(project_file, replicates)
    project = load_project(project_file)
    best = float("inf")
    for _ in range(repeat):
        began = time.perf_counter()
        estimate(project)
        best = min(best, time.perf_counter() - began)
    return best


def many_units(problem: CapacityProblem, n_units: int) -> CapacityProblem:
    """``n_units`` units made from the example's (unit mode: one row per unit)."""
    rng = np.random.default_rng(UNITS_SEED)
    source = np.arange(n_units) % problem.unit_ids.size
    factor = rng.uniform(0.5, 1.5, size=n_units)[:, None]
    return replace(
        problem,
        unit_ids=np.array([f"{problem.unit_ids[s]}-{k}" for k, s in enumerate(source)]),
        row_unit=np.arange(n_units),
        available_kg=problem.available_kg[source] * factor,
        row_stratum_ha=problem.row_stratum_ha[source] * factor,
    )


def calibrated_group(problem: CapacityProblem, forage_class: str):
    """A linear calibrated group standing for ``forage_class`` in every stratum and unit
    (numbers invented for the benchmark)."""
    from nutricap.landscape.calibration import fit_linear
    from nutricap.landscape.grid.calibration import CalibratedSums

    rng = np.random.default_rng(UNITS_SEED + 1)
    index = rng.uniform(0.1, 0.8, size=40)
    model = fit_linear("benchmark group", index, 50.0 + 400.0 * index + rng.normal(0, 30, 40))
    items = np.flatnonzero(problem.items.forage_class == forage_class)
    rows = np.repeat(np.arange(problem.row_unit.size), items.size)
    items = np.tile(items, problem.row_unit.size)
    s0 = rng.uniform(10.0, 500.0, size=rows.size)  # [ha]
    s1 = s0 * rng.uniform(0.1, 0.8, size=rows.size)  # [ha · index units]
    return CalibratedSums(model, rows, items, np.column_stack([s0, s1]))


def rss_mb() -> float:
    """Resident set size of this process now [MB], from /proc/self/status."""
    for line in Path("/proc/self/status").read_text().splitlines():
        if line.startswith("VmRSS:"):
            return int(line.split()[1]) / 1024
    return float("nan")


def child(n_units: int, replicates: int, calibrated: bool, memory_mb: float | None) -> dict:
    """Bootstrap of ``n_units`` synthesised units; time [s] and memory [MB]."""
    with tempfile.TemporaryDirectory() as folder:
        project_file = write_example_landscape(Path(folder) / "example")
        set_replicates(project_file, replicates, sensitivity=False)
        project = load_project(project_file)
        say = lambda message: None  # noqa: E731
        inputs = read_inputs(project, say)
        _, supply, problem = build_supply(project, inputs, say)
        herd = herd_requirement(inputs.animals, project, inputs.requirement_table)
        target = diet_target(inputs.animals, project, inputs.requirement_table)
    problem = many_units(problem, n_units)
    grid = None
    if calibrated:
        group = calibrated_group(problem, supply.classes[0])
        grid = SimpleNamespace(calibrated_sums=[group])  # what assess_uncertainty reads
    if memory_mb is not None:
        uncertainty.BOOTSTRAP_MEMORY_BYTES = int(memory_mb * 2**20)
    before_mb = rss_mb()
    began = time.perf_counter()
    result = assess_uncertainty(project, inputs, supply, problem, herd, target, say, grid)
    seconds = time.perf_counter() - began
    peak_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    total = float(result.bootstrap.replicate_animal_days["ncc"].sum())
    return {"seconds": seconds, "peak_rss_mb": peak_mb, "rss_before_mb": before_mb, "sum": total}


def run_child(n_units: int, args: argparse.Namespace) -> str:
    """One child process; its result line (or the way it failed)."""
    replicates, calibrated, limit_gb = args.replicates, args.calibrated, args.limit_gb
    command = [sys.executable, __file__, "--child", "--units", str(n_units)]
    command += ["--replicates", str(replicates)] + (["--calibrated"] if calibrated else [])
    if args.memory_mb is not None:
        command += ["--memory-mb", str(args.memory_mb)]
    command += ["--profile"] if args.profile else []

    def limit() -> None:
        if limit_gb is not None:
            size = int(limit_gb * 2**30)
            resource.setrlimit(resource.RLIMIT_AS, (size, size))

    began = time.perf_counter()
    done = subprocess.run(command, capture_output=True, text=True, preexec_fn=limit)
    if done.returncode != 0:
        last = (done.stderr.strip().splitlines() or ["no message"])[-1]
        return (
            f"units={n_units} replicates={replicates} FAILED after "
            f"{time.perf_counter() - began:.1f} s (exit {done.returncode}): {last}"
        )
    if args.profile:
        print("\n".join(done.stdout.strip().splitlines()[:-1]))
    figures = json.loads(done.stdout.strip().splitlines()[-1])
    return (
        f"units={n_units} replicates={replicates} calibrated={calibrated} "
        f"memory_mb={args.memory_mb or uncertainty.BOOTSTRAP_MEMORY_BYTES / 2**20:g} "
        f"bootstrap_s={figures['seconds']:.2f} peak_rss_mb={figures['peak_rss_mb']:.0f} "
        f"rss_before_mb={figures['rss_before_mb']:.0f} ncc_sum={figures['sum']:.6e}"
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--replicates", type=int, default=1000)
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--units", type=int, nargs="+")
    parser.add_argument("--calibrated", action="store_true")
    parser.add_argument("--limit-gb", type=float)
    parser.add_argument("--memory-mb", type=float)
    parser.add_argument("--profile", action="store_true")
    parser.add_argument("--child", action="store_true", help=argparse.SUPPRESS)
    args = parser.parse_args()
    if args.child:
        run = partial(child, args.units[0], args.replicates, args.calibrated, args.memory_mb)
        if args.profile:
            profiler = cProfile.Profile()
            figures = profiler.runcall(run)
            pstats.Stats(profiler).sort_stats("cumulative").print_stats(15)
        else:
            figures = run()
        print(json.dumps(figures))
        return
    if args.units:
        for n_units in args.units:
            load = Path("/proc/loadavg").read_text().split()[0]
            print(f"load_1min={load}", flush=True)
            print(run_child(n_units, args), flush=True)
        return
    with tempfile.TemporaryDirectory() as folder:
        project_file = write_example_landscape(Path(folder) / "example")
        floor = timed_estimate(project_file, 0, args.repeat)
        with_bootstrap = timed_estimate(project_file, args.replicates, args.repeat)
    bootstrap_s = with_bootstrap - floor
    print(f"estimate without bootstrap: {floor:.3f} s")
    print(f"estimate with {args.replicates} replicates: {with_bootstrap:.3f} s")
    print(
        f"replicates={args.replicates} bootstrap_s={bootstrap_s:.3f} "
        f"ratio_to_point_estimate={with_bootstrap / floor:.2f}"
    )


if __name__ == "__main__":
    main()
