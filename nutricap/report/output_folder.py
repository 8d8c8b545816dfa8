"""Safe output folders.

Outputs are written into a staging folder beside the target and moved into
place only when complete, so an interrupted run leaves the previous results
intact and never a half-written table. A run refuses an output folder equal
to, inside, or containing an input folder, and replaces an existing non-empty
folder only when asked to (``overwrite=True``) and only when it holds previous
results (a ``run.json``), so that ``--overwrite`` can never remove a folder of
other files.

The staging folder is ``.<name>.partial-<host>-<pid>-<random>`` and, while the
new results are moved into place, the previous ones are briefly
``.<name>.old-<host>-<pid>``. When a run is killed (power cut, ``kill -9``) one
of these may be left behind. The next run to the same folder from the same
machine tidies them up once their process is gone: a stale staging folder is
removed; a stale ``.old`` folder is moved back into place when the results
folder is missing (the kill fell between the two renames), else removed.
Leftovers of other machines or of running processes are never touched.
"""

from __future__ import annotations

import errno
import os
import re
import shutil
import socket
import tempfile
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

from nutricap.errors import OutputError

RESULTS_MARKER = "run.json"
"""A folder holding this file is taken for previous results that ``overwrite`` may replace."""


def check_output_folder(out: Path, input_paths: Iterable[Path], *, overwrite: bool) -> Path:
    """Return ``out`` resolved after checking it may be written; raise OutputError if not."""
    try:
        out = Path(out).resolve()
    except (RuntimeError, OSError):  # Python < 3.13 raises RuntimeError for a loop
        raise OutputError(
            "the output path is a symbolic link that loops back on itself",
            source=Path(out).absolute(),
            expected="a folder, or a link to one",
        ) from None
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
    recover_interrupted(out)
    if out.is_dir() and any(out.iterdir()) and not overwrite:
        raise OutputError(
            "the output folder exists and is not empty",
            source=out,
            expected="a new or empty folder, or --overwrite to replace it",
        )
    return out


@contextmanager
def staged_folder(out: Path) -> Iterator[Path]:
    """Yield a staging folder; on success replace ``out`` with it, on failure delete it.

    Raises :class:`OutputError` before anything is written when ``out`` holds files but no
    previous results (no ``run.json``).
    """
    out = Path(out)
    recover_interrupted(out)
    _require_replaceable(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    staging = Path(tempfile.mkdtemp(prefix=f"{_prefix(out, 'partial')}-", dir=out.parent))
    try:
        yield staging
    except OSError as exc:
        shutil.rmtree(staging, ignore_errors=True)
        raise write_error(exc, out) from None
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise
    _replace(staging, out)


NO_ROOM_ERRNOS = frozenset({errno.ENOSPC, errno.EDQUOT, errno.EFBIG, errno.EROFS})
"""Errors of the disk being written (full, over quota, file too large, read-only): they carry
no file name, so the output path is named instead."""


def write_error(exc: OSError, out: Path) -> OSError | OutputError:
    """The error to show for ``exc``, raised while writing output ``out``: a full (or read-only)
    disk becomes an :class:`OutputError` naming ``out``; anything else is left as it is."""
    if exc.errno not in NO_ROOM_ERRNOS:
        return exc
    written = f" (while writing {Path(exc.filename).name})" if exc.filename else ""
    return OutputError(
        f"cannot write the results: {exc.strerror or exc}{written}; nothing was written",
        source=out,
        expected="room for the results on that disk: free some space or choose another --out",
    )


def _require_replaceable(out: Path) -> None:
    if out.is_dir() and any(out.iterdir()) and not (out / RESULTS_MARKER).is_file():
        raise OutputError(
            "the output folder holds files that are not nutricap results; it is not replaced",
            source=out,
            expected=f"a new or empty folder, or previous results (with {RESULTS_MARKER})",
            found=", ".join(sorted(p.name for p in out.iterdir())[:5]),
        )


def _replace(staging: Path, out: Path) -> None:
    """Move ``staging`` to ``out``; an old ``out`` is renamed aside first, then removed."""
    old = None
    if out.exists():
        old = out.with_name(_prefix(out, "old"))
        out.rename(old)
    try:
        staging.rename(out)
    except OSError:
        if old is not None:
            old.rename(out)
        raise
    if old is not None:
        shutil.rmtree(old, ignore_errors=True)


def _host() -> str:
    """This machine's name, reduced to characters safe in a file name."""
    return re.sub(r"[^A-Za-z0-9]", "_", socket.gethostname()) or "host"


def _prefix(out: Path, kind: str, pid: int | None = None) -> str:
    """``.<name>.<kind>-<host>-<pid>``: the name of a staging (partial) or old folder."""
    return f".{out.name}.{kind}-{_host()}-{os.getpid() if pid is None else pid}"


def recover_interrupted(out: Path) -> list[Path]:
    """Tidy up after runs to ``out`` that were killed; return the folders removed or restored.

    Only leftovers of this machine whose process no longer runs are touched.
    """
    out = Path(out)
    if not out.parent.is_dir():
        return []
    touched = []
    for kind in ("old", "partial"):
        pattern = re.compile(re.escape(f".{out.name}.{kind}-{_host()}-") + r"(\d+)(?:-|$)")
        for leftover in sorted(out.parent.iterdir()):
            match = pattern.match(leftover.name)
            if match is None or not leftover.is_dir() or _running(int(match.group(1))):
                continue
            if kind == "old" and not out.exists():
                leftover.rename(out)
            else:
                shutil.rmtree(leftover, ignore_errors=True)
            touched.append(leftover)
    return touched


def _running(pid: int) -> bool:
    """Whether process ``pid`` exists on this machine (assumed so where that cannot be asked)."""
    if pid == os.getpid():
        return True
    if os.name != "posix":
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True
