"""Safe output folders.

Outputs are written into a staging folder beside the target and moved into
place only when complete, so an interrupted run leaves the previous results
intact and never a half-written table. A run refuses an output folder equal
to, inside, or containing an input folder, and replaces an existing non-empty
folder only when asked to (``overwrite=True``).
"""

from __future__ import annotations

import os
import shutil
import tempfile
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

from nutricap.errors import OutputError


def check_output_folder(out: Path, input_paths: Iterable[Path], *, overwrite: bool) -> Path:
    """Return ``out`` resolved after checking it may be written; raise OutputError if not."""
    out = Path(out).resolve()
    for path in input_paths:
        folder = Path(path).resolve().parent
        if out == folder or folder in out.parents:
            raise OutputError(
                "the output folder is an input folder or inside one",
                source=out,
                expected="a folder outside every input folder",
                found=f"input folder {folder}",
            )
        if out in folder.parents:
            raise OutputError(
                "the output folder contains an input folder; replacing it would remove inputs",
                source=out,
                expected="a folder that holds no input",
                found=f"input folder {folder}",
            )
    if out.exists() and not out.is_dir():
        raise OutputError("the output path is a file", source=out, expected="a folder")
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise OutputError(
            "the output folder exists and is not empty",
            source=out,
            expected="a new or empty folder, or --overwrite to replace it",
        )
    return out


@contextmanager
def staged_folder(out: Path) -> Iterator[Path]:
    """Yield a staging folder; on success replace ``out`` with it, on failure delete it."""
    out.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f".{out.name}.partial-", dir=out.parent))
    try:
        yield staging
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    _replace(staging, out)


def _replace(staging: Path, out: Path) -> None:
    """Move ``staging`` to ``out``; an old ``out`` is renamed aside first, then removed."""
    old = None
    if out.exists():
        old = out.with_name(f".{out.name}.old-{os.getpid()}")
        out.rename(old)
    try:
        staging.rename(out)
    except OSError:
        if old is not None:
            old.rename(out)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)
