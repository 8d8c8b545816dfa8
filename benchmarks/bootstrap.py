"""Time the stratified bootstrap on the invented example landscape.

Measures, in one run: (a) the floor — one point estimate of the example with
the bootstrap switched off; (b) the same estimate with N bootstrap replicates.
Prints the bootstrap's own time and its ratio to the floor.

    python benchmarks/bootstrap.py [--replicates 1000] [--repeat 3]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

from nutricap.example import write_example_landscape
from nutricap.inputs.project import load_project
from nutricap.workflow import estimate


def timed_estimate(project_file: Path, replicates: int, repeat: int) -> float:
    """Best wall time [s] of ``estimate`` with ``replicates`` bootstrap replicates."""
    text = project_file.read_text()
    start = text.index("bootstrap_replicates = ")
    end = text.index("\n", start)
    project_file.write_text(text[:start] + f"bootstrap_replicates = {replicates}" + text[end:])
    project = load_project(project_file)
    best = float("inf")
    for _ in range(repeat):
        began = time.perf_counter()
        estimate(project)
        best = min(best, time.perf_counter() - began)
    return best


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--replicates", type=int, default=1000)
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
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
