"""SHA-256 digests of the demo's outputs, normalised: a refactoring guard, not a check of
correctness.

The demo's two estimates (``project.toml`` on polygons, ``project_rasters.toml`` on the grid)
are run on a copy of the committed ``example_landscape/`` and every output file is hashed.
What changes from run to run without any change of the numbers is taken out first:

- ``run.json``: ``started_utc`` and ``versions`` are dropped, and the folder of the copied
  inputs is written ``<inputs>`` (``project_file``, the keys of ``inputs``, raster sources);
- ``report.html``: the same folder and every time stamp, and the software-versions table
  and the ``versions`` block of the embedded manifest;
- GeoPackages (``capacity_by_unit.gpkg``): SQLite keeps a time stamp in the file, so the
  features are hashed instead (attributes as CSV, geometries as WKB, the CRS).

- ``trend.json``: the fitted trend comes from an iterative least-squares fit whose end point
  depends on its path (the BLAS kernels chosen for the CPU) by up to about 2e-10 relative
  (measured by perturbing the start values), so its numbers are hashed rounded to 6
  significant digits; the figure drawn from it (``population_trend.svg``) with every number
  rounded to 2 decimals (0.01 pt; the SVG writes 6).

Every other file (CSV, Markdown, JSON, GeoTIFF) is hashed byte for byte.

The committed digests (``tests/demo_digests.json``) are those of the code before the package
was re-laid out (issue 18). When numbers or formats change on purpose, regenerate them
deliberately and say so in the commit:

    PYTHONPATH=$PWD .venv/bin/python tests/demo_digests.py --write
"""

from __future__ import annotations

import contextlib
import hashlib
import io
import json
import re
import shutil
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
EXAMPLE = ROOT / "example_landscape"
DIGESTS = Path(__file__).with_name("demo_digests.json")
PROJECTS = {"results": "project.toml", "results_rasters": "project_rasters.toml"}
INPUTS = "<inputs>"
TIME = re.compile(r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2}(\.\d+)?)?(\+00:00)?")
VERSIONS_TABLE = re.compile(r"<caption>Software versions</caption>.*?</table>", re.S)
SVG_NUMBER = re.compile(r"-?\d+\.\d+")
VERSIONS_JSON = re.compile(r"&#34;versions&#34;: \{.*?\}", re.S)


def run_demo(folder: Path) -> Path:
    """Copy the example into ``folder / "inputs"`` and run both estimates; return ``folder``."""
    from nutricap.cli import main

    inputs = folder / "inputs"
    shutil.copytree(EXAMPLE, inputs, ignore=shutil.ignore_patterns("*.py", "*.md"))
    for out, project in PROJECTS.items():
        with contextlib.redirect_stdout(io.StringIO()):  # the summary printed by the command
            code = main(["estimate", str(inputs / project), "--out", str(folder / out), "--quiet"])
        if code != 0:
            raise RuntimeError(f"nutricap estimate {project} exited with {code}")
    return folder


def digests(folder: Path) -> dict[str, str]:
    """Normalised SHA-256 of every output file under ``folder`` (as :func:`run_demo` left it)."""
    inputs = str(folder / "inputs")
    found = {}
    for out in PROJECTS:
        for path in sorted((folder / out).rglob("*")):
            if path.is_file():
                found[path.relative_to(folder).as_posix()] = _digest(path, inputs)
    return found


def _digest(path: Path, inputs: str) -> str:
    if path.suffix == ".gpkg":
        return _sha(_features(path))
    if path.name == ".nutricap_outputs.json":  # sizes and modification times: names only
        names = sorted(json.loads(path.read_text(encoding="utf-8"))["files"])
        return _sha("\n".join(names).encode())
    if path.name == "run.json":
        manifest = json.loads(path.read_text(encoding="utf-8").replace(inputs, INPUTS))
        manifest.pop("started_utc")
        manifest.pop("versions")
        return _sha(json.dumps(manifest, indent=1, sort_keys=True).encode())
    if path.name == "trend.json":
        rounded = _round_floats(json.loads(path.read_text(encoding="utf-8")))
        return _sha(json.dumps(rounded, sort_keys=True).encode())
    if path.name == "population_trend.svg":
        text = SVG_NUMBER.sub(_two_decimals, path.read_text(encoding="utf-8"))
        return _sha(text.encode())
    if path.suffix == ".html":
        text = path.read_text(encoding="utf-8").replace(inputs, INPUTS)
        text = VERSIONS_JSON.sub("versions", VERSIONS_TABLE.sub("versions", text))
        return _sha(TIME.sub("<time>", text).encode())
    return _sha(path.read_bytes())


def _two_decimals(number: re.Match) -> str:
    return f"{float(number.group()):.2f}"


def _round_floats(value, digits: int = 6):
    """``value`` (parsed JSON) with every float rounded to ``digits`` significant digits."""
    if isinstance(value, float):
        return float(f"{value:.{digits}g}")
    if isinstance(value, list):
        return [_round_floats(item, digits) for item in value]
    if isinstance(value, dict):
        return {key: _round_floats(item, digits) for key, item in value.items()}
    return value


def _features(path: Path) -> bytes:
    import pyogrio

    frame = pyogrio.read_dataframe(path)
    attributes = frame.drop(columns="geometry").to_csv(index=False)
    shapes = "\n".join(frame.geometry.to_wkb(hex=True))
    return f"{frame.crs.to_wkt()}\n{attributes}\n{shapes}".encode()


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


if __name__ == "__main__":
    import tempfile

    with tempfile.TemporaryDirectory() as temporary:
        computed = digests(run_demo(Path(temporary)))
    text = json.dumps(computed, indent=2) + "\n"
    if sys.argv[1:] == ["--write"]:
        DIGESTS.write_text(text, encoding="utf-8")
        print(f"wrote {len(computed)} digests to {DIGESTS}")
    else:
        print(text, end="")
