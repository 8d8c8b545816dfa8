"""Exception classes for problems a user can fix.

Every error a user can cause (a wrong column, a negative mass, a layer in a
geographic CRS) is raised as :class:`InputError` or one of its subclasses. The
command line prints its message on one line and exits with code 2; no
traceback is shown for these.
"""

from __future__ import annotations

import errno
import stat
import unicodedata
from pathlib import Path

UNPRINTABLE = ("Cc", "Cf", "Cs", "Co", "Cn", "Zl", "Zp")
"""Unicode categories printed escaped: controls (escape sequences, NUL, newline), format
characters (e.g. right-to-left overrides), surrogates, private-use and unassigned code
points, line and paragraph separators."""


def printable(text: object, *, json_escapes: bool = False) -> str:
    """``text`` with every unprintable character escaped as Python writes it (``\\x1b``).

    Whatever an input holds (a unit id with an escape sequence, a newline) then shows as
    plain characters on one line of a terminal, a log or a chart, and cannot move the
    cursor, clear the screen or fake a line of output. ``json_escapes``: written as JSON's
    ``\\uXXXX`` instead, for a line of JSON (where such characters occur only in strings).
    """
    text = str(text)
    if text.isprintable():  # the common case, fast (spaces count as printable)
        return text
    return "".join(_escaped(char, json_escapes) for char in text)


def _escaped(char: str, json_escapes: bool) -> str:
    if char == " " or unicodedata.category(char) not in UNPRINTABLE:
        return char
    if json_escapes:
        units = char.encode("utf-16-be", errors="surrogatepass")
        return "".join(f"\\u{units[i]:02x}{units[i + 1]:02x}" for i in range(0, len(units), 2))
    return repr(char)[1:-1]


class NutricapError(Exception):
    """Base class of every exception nutricap raises on purpose."""


class InputError(NutricapError):
    """An input file, key or value the user supplied is wrong.

    Parameters
    ----------
    message : str
        What is wrong, in plain words.
    source : str or Path, optional
        The file (or project key) the problem is in; shown first. An object with a
        ``relabel(location)`` method (``inputs.table_source.TableSource``) rewrites the location
        (the user's own column names, a spreadsheet's sheet).
    location : str, optional
        Where in the source: ``"row 12, column dry_mass_g"``, ``"key target.state"``.
    expected, found : str, optional
        What was expected and what was found, shown at the end.
    """

    def __init__(
        self,
        message: str,
        *,
        source: str | Path | None = None,
        location: str | None = None,
        expected: str | None = None,
        found: str | None = None,
    ) -> None:
        relabel = getattr(source, "relabel", None)  # a table read under the user's names
        if relabel is not None:
            location = relabel(location)
        self.message = message
        self.source = str(source) if source is not None else None
        self.location = location
        self.expected = expected
        self.found = found
        super().__init__(self.formatted())

    def formatted(self) -> str:
        """Return the one-line message shown to the user."""
        parts = []
        if self.source:
            parts.append(self.source)
        if self.location:
            parts.append(self.location)
        head = ": ".join(parts)
        text = f"{head}: {self.message}" if head else self.message
        details = []
        if self.expected is not None:
            details.append(f"expected {self.expected}")
        if self.found is not None:
            details.append(f"found {self.found}")
        if details:
            text += f" ({'; '.join(details)})"
        return printable(text)


class ProjectFileError(InputError):
    """The project file (TOML) is unreadable or fails validation."""


class TableError(InputError):
    """A CSV table has a missing column, a bad value or a duplicate id."""


class SpatialError(InputError):
    """A vector or raster layer has a bad CRS, geometry or grid."""


class OutputError(InputError):
    """The output folder cannot be used (inside an input folder, exists, ...)."""


FILE_MISSING = "does not exist"
SPECIAL_FILES = (
    (stat.S_ISFIFO, "a named pipe (FIFO)"),
    (stat.S_ISCHR, "a character device"),
    (stat.S_ISBLK, "a block device"),
    (stat.S_ISSOCK, "a socket"),
)


def file_problem(path: Path) -> str | None:
    """Why ``path`` cannot be opened as an input, in words ("does not exist", "is not a regular
    file but a named pipe (FIFO)", ...); None for a file or a folder (links are followed)."""
    try:
        mode = path.stat().st_mode
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            return "is a symbolic link that loops back on itself"
        if exc.errno in (errno.ENOENT, errno.ENOTDIR):
            return FILE_MISSING
        return f"cannot be opened ({exc.strerror})"
    if stat.S_ISREG(mode) or stat.S_ISDIR(mode):
        return None
    kind = next((name for test, name in SPECIAL_FILES if test(mode)), "a special file")
    return f"is not a regular file but {kind}"
