"""Safe output folders.

Outputs are written into a staging folder beside the target and moved into
place only when complete, so an interrupted run leaves the previous results
intact and never a half-written table. A run refuses an output folder equal
to, inside, or containing an input folder, and replaces an existing non-empty
folder only when asked to (``overwrite=True``) and only when it holds nothing but
the files an earlier run wrote there, unchanged: the last file of every output
folder, ``.nutricap_outputs.json``, lists each file with its size and modification
time. A folder with any other file, or a file changed since, is never removed.

Without ``overwrite`` the final move is the check: a folder is renamed onto a
path only if nothing is there or an empty folder (``rename`` fails on a folder
with files), so of two runs started together with the same new output folder
one wins and the other stops with an :class:`OutputError`. The folders are
created with the user's umask (``mkdir`` mode 0777), like the files in them.

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
import json
import os
import re
import shutil
import socket
import tempfile
from collections.abc import Iterable, Iterator
from contextlib import contextmanager
from pathlib import Path

from nutricap.errors import OutputError

OUTPUTS_LIST = ".nutricap_outputs.json"
"""Written last into every staged folder: the files written there (``overwrite`` replaces a
folder only when it holds exactly these, unchanged)."""


def check_output_folder(
    out: Path,
    input_paths: Iterable[Path],
    *,
    overwrite: bool,
    whole: bool = True,
    parts: tuple[str, ...] = (),
) -> Path:
    """Return ``out`` resolved after checking it may be written; raise OutputError if not.

    ``whole``: the run replaces the whole folder (``overwrite`` then requires it to hold only
    an earlier run's outputs); ``False`` when the run only adds its own file to the folder.
    ``parts``: the folder holds these staged folders instead (e.g. the demo's inputs and
    results), each of which must then be an earlier run's outputs.
    """
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
    _require_writable_place(out)
    recover_interrupted(out)
    for part in parts:
        recover_interrupted(out / part)
    if out.is_dir() and any(out.iterdir()):
        if not overwrite:
            raise OutputError(
                "the output folder exists and is not empty",
                source=out,
                expected="a new or empty folder, or --overwrite to replace it",
            )
        if parts:
            _require_parts(out, parts)
        elif whole:
            _require_replaceable(out)
    return out


def _require_writable_place(out: Path) -> None:
    """Refuse, before any work, an ``out`` that cannot be made: a file where a folder of its
    path should be, or a folder this user cannot write into (read-only disk, permissions).
    Tested by making and removing an empty folder where the staging folder goes, beside
    ``out`` (never inside it): nothing is left behind."""
    place = out.parent
    while not place.exists() and place != place.parent:
        place = place.parent
    if not place.is_dir():
        raise OutputError(
            "the output folder cannot be made: a part of its path is a file",
            source=out,
            expected="a path of folders",
            found=f"{place} is a file",
        )
    try:
        os.rmdir(tempfile.mkdtemp(prefix=".nutricap-write-check-", dir=place))
    except OSError as exc:
        raise OutputError(
            "the output folder cannot be written",
            source=out,
            expected=f"a folder you may write into ({place})",
            found=exc.strerror or type(exc).__name__,
        ) from None


def _require_parts(out: Path, parts: tuple[str, ...]) -> None:
    """Every entry of ``out`` is one of ``parts`` and an earlier run's outputs."""
    others = sorted(path.name for path in out.iterdir() if path.name not in parts)
    if others:
        raise OutputError(
            "the output folder holds files nutricap did not write; it is not replaced",
            source=out,
            expected="only " + ", ".join(parts) + " as an earlier run wrote them",
            found=", ".join(others[:5]),
        )
    for part in parts:
        _require_replaceable(out / part)


@contextmanager
def staged_folder(out: Path, *, overwrite: bool = False) -> Iterator[Path]:
    """Yield a staging folder; on success move it to ``out``, on failure delete it.

    Raises :class:`OutputError` before anything is written when ``out`` holds files and
    ``overwrite`` is off, or holds files an earlier run did not write (see the module
    notes); and at the end, without ``overwrite``, when another run filled ``out`` meanwhile
    (that run's results are kept, this run's are discarded).
    """
    out = Path(out)
    recover_interrupted(out)
    if not overwrite and out.is_dir() and any(out.iterdir()):
        raise OutputError(
            "the output folder exists and is not empty",
            source=out,
            expected="a new or empty folder, or --overwrite to replace it",
        )
    _require_replaceable(out)
    out.parent.mkdir(parents=True, exist_ok=True)
    staging = _make_staging(out)
    try:
        yield staging
        write_outputs_list(staging)
        _replace(staging, out, overwrite=overwrite)
    except OSError as exc:
        shutil.rmtree(staging, ignore_errors=True)
        raise write_error(exc, out) from None
    except BaseException:
        shutil.rmtree(staging, ignore_errors=True)
        raise


def _make_staging(out: Path) -> Path:
    """A new, uniquely named staging folder beside ``out``, created with the user's umask."""
    while True:
        staging = out.with_name(f"{_prefix(out, 'partial')}-{os.urandom(4).hex()}")
        try:
            staging.mkdir(mode=0o777)  # the umask applies, as for the files written into it
        except FileExistsError:
            continue
        return staging


def write_outputs_list(folder: Path) -> None:
    """Record every file under ``folder`` (relative path → size, modification time)."""
    listing = {name: list(stamp) for name, stamp in _file_stamps(folder).items()}
    text = json.dumps({"files": listing}, indent=1, sort_keys=True) + "\n"
    (folder / OUTPUTS_LIST).write_text(text, encoding="utf-8")


def record_output(folder: Path, name: str) -> None:
    """Add file ``name`` to ``folder``'s list of outputs, if it has one (a file added later)."""
    path = Path(folder) / OUTPUTS_LIST
    try:
        data = json.loads(path.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return
    if not isinstance(data, dict) or not isinstance(data.get("files"), dict):
        return
    info = (Path(folder) / name).stat()
    data["files"][name] = [info.st_size, info.st_mtime_ns]
    path.write_text(json.dumps(data, indent=1, sort_keys=True) + "\n", encoding="utf-8")


def _file_stamps(folder: Path) -> dict[str, tuple[int, int]]:
    """Relative path → (size [bytes], modification time [ns]) of every entry but the list."""
    stamps = {}
    for path in sorted(folder.rglob("*")):
        if path.name == OUTPUTS_LIST and path.parent == folder:
            continue
        info = path.lstat()
        kind = "/" if path.is_dir() and not path.is_symlink() else ""
        stamps[path.relative_to(folder).as_posix() + kind] = (info.st_size, info.st_mtime_ns)
    return stamps


def foreign_files(folder: Path) -> list[str]:
    """Entries of ``folder`` an earlier run did not write, or changed since (empty: none).

    Every entry counts when the folder holds no list of outputs.
    """
    try:
        listed = json.loads((folder / OUTPUTS_LIST).read_text(encoding="utf-8"))["files"]
    except (OSError, ValueError, KeyError, TypeError):
        listed = {}
    found = []
    for name, stamp in _file_stamps(folder).items():
        if name not in listed:
            found.append(f"{name} (not written by nutricap)")
        elif not name.endswith("/") and list(stamp) != listed[name]:  # a folder's time moves
            found.append(f"{name} (changed since nutricap wrote it)")
    return found


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
    if not out.is_dir() or not any(out.iterdir()):
        return
    foreign = foreign_files(out)
    if foreign:
        raise OutputError(
            "the output folder holds files that are not nutricap results; it is not replaced",
            source=out,
            expected="a new or empty folder, or only the unchanged outputs of an earlier run, "
            "all that --overwrite removes",
            found=", ".join(foreign[:5]) + (f" and {len(foreign) - 5} more" if foreign[5:] else ""),
        )


def _replace(staging: Path, out: Path, *, overwrite: bool) -> None:
    """Move ``staging`` to ``out``; with ``overwrite`` an old ``out`` is moved aside first.

    The old folder is checked again once moved aside (nothing can be added to it then) and
    put back if it holds anything an earlier run did not write.
    """
    old = None
    if overwrite and out.is_dir() and any(out.iterdir()):
        old = out.with_name(_prefix(out, "old"))
        out.rename(old)
        if foreign_files(old):
            old.rename(out)
            _require_replaceable(out)
    try:
        staging.rename(out)
    except OSError as error:
        if old is not None and not out.exists():
            old.rename(out)
            old = None
        if error.errno in (errno.ENOTEMPTY, errno.EEXIST, errno.ENOTDIR, errno.EISDIR):
            raise _taken(out) from None
        raise
    finally:
        if old is not None:
            shutil.rmtree(old, ignore_errors=True)


def _taken(out: Path) -> OutputError:
    return OutputError(
        "another run wrote this output folder while this one ran; its results were kept and "
        "this run's discarded",
        source=out,
        expected="one run at a time per output folder",
    )


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
