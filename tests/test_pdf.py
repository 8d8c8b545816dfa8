"""Tests of nutricap.report.pdf: finding the browser, and never a half-written PDF.

The printing itself (a real headless Chromium) is tested in tests/test_report_browser.py; here
stand-in "browsers" (shell scripts written by the test) fail in the ways a real one can, to
check the messages and that nothing is left at report.pdf.
"""

from __future__ import annotations

import os
import stat
import sys

import pytest

from nutricap.cli import main
from nutricap.errors import InputError, OutputError
from nutricap.report import pdf

pytestmark = pytest.mark.skipif(sys.platform == "win32", reason="stand-in browsers are sh scripts")


def stand_in_browser(tmp_path, body: str):
    """An executable script that takes Chromium's arguments and runs ``body`` (sh)."""
    path = tmp_path / "bin" / "chromium"
    path.parent.mkdir(exist_ok=True)
    script = (
        "#!/bin/sh\n"
        'for a in "$@"; do case "$a" in --print-to-pdf=*) out="${a#--print-to-pdf=}";; esac; done\n'
        f"{body}\n"
    )
    path.write_text(script)
    path.chmod(path.stat().st_mode | stat.S_IXUSR)
    return path


def html_file(tmp_path):
    path = tmp_path / "report.html"
    path.write_text("<!DOCTYPE html><html><body><p>report</p></body></html>")
    return path


def test_no_browser_is_one_message_and_exit_2(tmp_path, monkeypatch, capsys, example_project):
    monkeypatch.setenv("PATH", str(tmp_path / "empty"))
    monkeypatch.delenv(pdf.BROWSER_VARIABLE, raising=False)
    out = tmp_path / "results"
    code = main(["estimate", str(example_project), "--out", str(out), "--pdf", "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1
    assert "--pdf" in err[0] and "Chromium" in err[0] and "NUTRICAP_BROWSER" in err[0]
    assert not out.exists()  # looked for before any work


def test_pdf_and_no_report_refused(tmp_path, capsys, example_project):
    out = tmp_path / "results"
    argv = ["estimate", str(example_project), "--out", str(out), "--pdf", "--no-report"]
    assert main(argv) == 2
    assert "--no-report" in capsys.readouterr().err
    assert not out.exists()


def test_browser_named_by_the_variable(tmp_path, monkeypatch):
    browser = stand_in_browser(tmp_path, "exit 0")
    monkeypatch.setenv(pdf.BROWSER_VARIABLE, str(browser))
    assert pdf.find_browser() == browser
    monkeypatch.setenv(pdf.BROWSER_VARIABLE, str(tmp_path / "missing"))
    with pytest.raises(InputError, match="NUTRICAP_BROWSER"):
        pdf.find_browser()


@pytest.mark.parametrize(
    "body, reason",
    [
        ('echo "crashed" >&2; exit 3', r"exit code 3: crashed"),
        ("exit 0", r"no PDF was written"),
        # A PDF cut short: the header but no end-of-file marker (ISO 32000-1, 7.5.5).
        ('printf "%%PDF-1.4\\n1 0 obj\\n" > "$out"', r"not a whole PDF"),
    ],
)
def test_failed_print_leaves_no_pdf(tmp_path, body, reason):
    browser = stand_in_browser(tmp_path, body)
    html = html_file(tmp_path)
    with pytest.raises(OutputError, match=reason):
        pdf.write_pdf(html, browser)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["bin", "report.html"]


def test_whole_pdf_is_renamed_into_place(tmp_path):
    browser = stand_in_browser(tmp_path, 'printf "%%PDF-1.4\\n%%%%EOF\\n" > "$out"')
    written = pdf.write_pdf(html_file(tmp_path), browser)
    assert written == tmp_path / "report.pdf"
    assert written.read_bytes().startswith(b"%PDF-") and not list(tmp_path.glob(".*partial"))


def test_a_failed_print_discards_the_whole_run(tmp_path, monkeypatch, capsys, example_project):
    browser = stand_in_browser(tmp_path, "exit 1")
    monkeypatch.setenv(pdf.BROWSER_VARIABLE, str(browser))
    out = tmp_path / "results"
    argv = ["estimate", str(example_project), "--out", str(out), "--pdf", "--no-figures"]
    code = main([*argv, "--quiet"])
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and len(err) == 1 and "could not be printed to PDF" in err[0]
    assert not out.exists() and not [p for p in os.listdir(tmp_path) if "partial" in p]
