"""The report as PDF: the HTML report printed by headless Chromium (or Chrome).

``--pdf`` (estimate, compare, demo) writes ``report.pdf`` beside ``report.html``. The browser is
looked for before the run starts (:func:`find_browser`), so a missing browser stops the run
with one message and nothing written. The PDF is printed to a temporary name in the staging
folder and renamed to ``report.pdf`` only once the browser has finished and the file is a
whole PDF (header ``%PDF-`` and the end-of-file marker), so a run never leaves a half-written
PDF. The print layout is the report's own print style sheet (column groups, repeated table
headers, figures kept whole); the paper size is the browser's default (Letter or A4 by its
locale).
"""

from __future__ import annotations

import os
import shutil
import subprocess
import tempfile
from pathlib import Path

from nutricap.errors import InputError, OutputError

BROWSER_NAMES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable", "chrome")
"""Executables looked for on the PATH, in this order."""
BROWSER_VARIABLE = "NUTRICAP_BROWSER"
"""Environment variable naming the browser executable (a path or a name on the PATH)."""
PRINT_TIMEOUT_S = 180
PDF_NAME = "report.pdf"


def find_browser() -> Path:
    """The Chromium or Chrome executable to print with; raise InputError if there is none.

    ``$NUTRICAP_BROWSER`` when set, else the first of :data:`BROWSER_NAMES` on the PATH.
    """
    named = os.environ.get(BROWSER_VARIABLE, "").strip()
    candidates = (named,) if named else BROWSER_NAMES
    for name in candidates:
        found = shutil.which(name)
        if found:
            return Path(found)
    where = f"${BROWSER_VARIABLE}={named!r}" if named else "the PATH"
    raise InputError(
        "headless Chromium or Chrome is needed to print the report, and none was found",
        source="--pdf",
        expected=f"one of {', '.join(BROWSER_NAMES)} on the PATH, or ${BROWSER_VARIABLE} "
        "naming the executable (e.g. apt-get install chromium); or leave out --pdf",
        found=f"no browser executable in {where}",
    )


def print_command(browser: Path, html: Path, pdf: Path, profile: Path) -> list[str]:
    """The browser command that prints ``html`` to ``pdf`` (no header or footer lines)."""
    command = [
        str(browser),
        "--headless",
        "--disable-gpu",
        "--disable-dev-shm-usage",
        "--disable-extensions",
        "--no-first-run",
        "--no-default-browser-check",
        f"--user-data-dir={profile}",
        "--no-pdf-header-footer",
        f"--print-to-pdf={pdf}",
        html.resolve().as_uri(),
    ]
    if hasattr(os, "geteuid") and os.geteuid() == 0:
        command.insert(1, "--no-sandbox")  # Chromium refuses to run as root with its sandbox
    return command


def write_pdf(html: Path, browser: Path, pdf: Path | None = None) -> Path:
    """Print ``html`` to ``pdf`` (default: ``report.pdf`` beside it) with ``browser``.

    Raises
    ------
    OutputError
        The browser failed, timed out or wrote no whole PDF; nothing is left at ``pdf``.
    """
    pdf = pdf or html.with_name(PDF_NAME)
    partial = pdf.with_name(f".{pdf.name}.partial")
    try:
        with tempfile.TemporaryDirectory(prefix="nutricap-browser-") as profile:
            command = print_command(browser, html, partial, Path(profile))
            result = subprocess.run(
                command,
                capture_output=True,
                text=True,
                timeout=PRINT_TIMEOUT_S,
                check=False,
                stdin=subprocess.DEVNULL,
            )
        problem = _pdf_problem(partial, result)
    except subprocess.TimeoutExpired:
        problem = f"the browser did not finish within {PRINT_TIMEOUT_S} s"
    except OSError as exc:
        problem = f"the browser could not be started ({exc.strerror or exc})"
    if problem is not None:
        partial.unlink(missing_ok=True)
        raise OutputError(
            "the report could not be printed to PDF",
            source=browser,
            expected=f"{pdf.name} printed from {html.name}",
            found=problem,
        )
    os.replace(partial, pdf)
    return pdf


def _pdf_problem(path: Path, result: subprocess.CompletedProcess) -> str | None:
    """Why ``path`` is not a whole PDF written by a successful browser run, or None."""
    if result.returncode != 0:
        last = (result.stderr or "").strip().splitlines()[-1:] or ["no message"]
        return f"exit code {result.returncode}: {last[0][:200]}"
    if not path.is_file() or path.stat().st_size == 0:
        return "no PDF was written"
    with path.open("rb") as handle:
        head = handle.read(5)
        handle.seek(max(0, path.stat().st_size - 1024))
        tail = handle.read()
    if head != b"%PDF-" or b"%%EOF" not in tail:
        return "the file written is not a whole PDF"
    return None
