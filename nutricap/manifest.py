"""The run manifest (``run.json``): what went in, with which settings and versions.

It lets a figure in a report be traced to its inputs: every input's SHA-256,
the validated project settings, the derived thresholds, the package versions.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import platform
from importlib.metadata import PackageNotFoundError, version
from pathlib import Path

from nutricap.cautions import CAUTION

PACKAGES = (
    "nutricap",
    "numpy",
    "pandas",
    "scipy",
    "geopandas",
    "shapely",
    "pyproj",
    "pyogrio",
    "rasterio",
    "pydantic",
)
CHUNK_BYTES = 1 << 20


def sha256_of_file(path: Path) -> str:
    """Hex SHA-256 of a file's bytes, read in chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as stream:
        while chunk := stream.read(CHUNK_BYTES):
            digest.update(chunk)
    return digest.hexdigest()


def package_versions() -> dict[str, str]:
    """Installed versions of nutricap and the libraries it computes with."""
    found = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            found[name] = version(name)
        except PackageNotFoundError:
            found[name] = "not installed"
    return found


def build_manifest(
    *, command: str, project_path: Path, input_paths: dict[str, Path], settings: dict, derived: dict
) -> dict:
    """Assemble the manifest dictionary (JSON-serialisable)."""
    files = {path for path in input_paths.values()} | {project_path}
    return {
        "command": command,
        "started_utc": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "project_file": str(project_path),
        "inputs": {
            str(path): {"sha256": sha256_of_file(path), "bytes": path.stat().st_size}
            for path in sorted(files)
            if path.is_file()
        },
        "settings": settings,
        "derived": derived,
        "versions": package_versions(),
        "caution": CAUTION,
    }
