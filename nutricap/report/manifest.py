"""The run manifest (``run.json``): what went in, with which settings and versions.

It lets a figure in a report be traced to its inputs: every input's SHA-256,
the validated project settings, the derived thresholds, the package versions.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import platform
import threading
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
CHUNK_BYTES = 8 << 20
"""Bytes hashed per read (large, so a background hashing thread seldom waits for the GIL)."""


def sha256_of_file(path: Path) -> str:
    """Hex SHA-256 of a file's bytes, read in chunks."""
    digest = hashlib.sha256()
    with open(path, "rb") as stream:
        while chunk := stream.read(CHUNK_BYTES):
            digest.update(chunk)
    return digest.hexdigest()


class BackgroundChecksums:
    """:func:`input_checksums` of ``paths``, computed in a background thread from the start.

    Reading files and hashing them release the GIL, so the checksums are computed on a core
    that is otherwise idle while the interpreter imports the libraries and reads the tables
    and layers. The thread is a daemon: a run that stops early (bad input) exits at once.
    """

    def __init__(self, paths) -> None:
        self.paths = [Path(path) for path in paths]
        self._result: dict[str, dict] | None = None
        self._error: BaseException | None = None
        self._thread = threading.Thread(target=self._run, name="nutricap-checksums", daemon=True)
        self._thread.start()

    def _run(self) -> None:
        try:
            self._result = input_checksums(self.paths)
        except BaseException as error:  # raised again in the caller's thread by result()
            self._error = error

    def result(self) -> dict[str, dict]:
        """The checksums (waits for the thread); an error of the thread is raised here."""
        self._thread.join()
        if self._error is not None:
            raise self._error
        return self._result


def package_versions() -> dict[str, str]:
    """Installed versions of nutricap and the libraries it computes with."""
    found = {"python": platform.python_version()}
    for name in PACKAGES:
        try:
            found[name] = version(name)
        except PackageNotFoundError:
            found[name] = "not installed"
    return found


SHAPEFILE_PARTS = (
    ".shp",
    ".shx",
    ".dbf",
    ".prj",
    ".cpg",
    ".qix",
    ".sbn",
    ".sbx",
    ".fbn",
    ".fbx",
    ".ain",
    ".aih",
    ".atx",
    ".ixs",
    ".mxs",
    ".qmd",
    ".shp.xml",
)
"""Files of one shapefile: the geometry (.shp), its index (.shx), the attributes (.dbf), the
CRS (.prj), the text encoding (.cpg) and the sidecars GIS programs add (spatial indexes,
metadata). GDAL reads them beside the .shp; each can change the layer read."""


def with_shapefile_parts(paths) -> list[Path]:
    """``paths`` with every existing part of each shapefile among them (same stem, any case)."""
    found = []
    for path in map(Path, paths):
        found.append(path)
        if path.suffix.lower() not in (".shp", ".dbf"):
            continue
        stem = path.name[: -len(path.suffix)].lower()
        if path.parent.is_dir():
            found += [
                part
                for part in path.parent.iterdir()
                if part.name.lower() in {stem + suffix for suffix in SHAPEFILE_PARTS}
            ]
    return found


def input_checksums(paths) -> dict[str, dict]:
    """SHA-256 and size of every existing file among ``paths`` (every part of a shapefile),
    by path (sorted)."""
    files = sorted(set(with_shapefile_parts(paths)))
    return {
        str(path): {"sha256": sha256_of_file(path), "bytes": path.stat().st_size}
        for path in files
        if path.is_file()
    }


def build_manifest(
    *,
    command: str,
    project_path: Path,
    input_paths: dict[str, Path],
    settings: dict,
    derived: dict,
    checksums: dict[str, dict] | None = None,
    column_names: dict[str, dict] | None = None,
) -> dict:
    """Assemble the manifest dictionary (JSON-serialisable).

    ``checksums`` (from :func:`input_checksums`) may be computed ahead, e.g. while the
    estimate runs; otherwise they are computed here. ``column_names``: the inputs read under
    the file's own column names, by file (``Project.column_names()``).
    """
    if checksums is None:
        checksums = input_checksums([project_path, *input_paths.values()])
    return {
        "command": command,
        "started_utc": dt.datetime.now(dt.UTC).isoformat(timespec="seconds"),
        "project_file": str(project_path),
        "inputs": checksums,
        "column_names": column_names or {},
        "settings": settings,
        "derived": derived,
        "versions": package_versions(),
        "caution": CAUTION,
    }
