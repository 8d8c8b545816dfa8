"""The HTML report in a real browser: headless Chromium renders it with its images.

Skipped when no Chromium (or Chrome) executable is on the PATH. The report is rendered
with every optional section (scenario, sensitivity and trend values invented for the test,
see tests/test_report.py); the checks are about display, not about any number.
"""

from __future__ import annotations

import csv
import html as html_module
import json
import math
import re
import shutil
import subprocess
import unicodedata
from html.parser import HTMLParser

import numpy as np
import pytest
from PIL import Image
from test_report import full_html, manifest, project  # noqa: F401  (fixtures reused)

from nutricap.cli import main
from nutricap.report.figures import OKABE_ITO

BROWSERS = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")
BROWSER = next((path for name in BROWSERS if (path := shutil.which(name))), None)
TIMEOUT_S = 60
WINDOW = (1200, 3600)  # tall enough to reach the capacity chart below the diet limits

pytestmark = pytest.mark.skipif(
    BROWSER is None,
    reason="no Chromium or Chrome executable on the PATH "
    f"(looked for {', '.join(BROWSERS)}); install one, e.g. apt-get install chromium",
)


def run_browser(tmp_path, *arguments: str) -> subprocess.CompletedProcess:
    command = [
        BROWSER,
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--hide-scrollbars",
        "--disable-dev-shm-usage",
        "--no-first-run",
        "--disable-extensions",
        f"--user-data-dir={tmp_path / 'profile'}",
        *arguments,
    ]
    return subprocess.run(command, capture_output=True, text=True, timeout=TIMEOUT_S, check=False)


@pytest.fixture(scope="module")
def report_file(tmp_path_factory, full_html):  # noqa: F811
    path = tmp_path_factory.mktemp("browser") / "report.html"
    path.write_text(full_html, encoding="utf-8")
    return path


def near(pixels: np.ndarray, hex_colour: str, tolerance: int = 24) -> int:
    """Number of pixels within ``tolerance`` (per channel) of ``hex_colour``."""
    target = np.array([int(hex_colour[i : i + 2], 16) for i in (1, 3, 5)])
    return int(np.all(np.abs(pixels[..., :3].astype(int) - target) <= tolerance, axis=-1).sum())


def test_screenshot_shows_the_figures(tmp_path, report_file):
    shot = tmp_path / "report.png"
    result = run_browser(
        tmp_path,
        f"--screenshot={shot}",
        f"--window-size={WINDOW[0]},{WINDOW[1]}",
        report_file.as_uri(),
    )
    assert shot.is_file() and shot.stat().st_size > 0, result.stderr[-2000:]
    pixels = np.asarray(Image.open(shot).convert("RGB"))
    assert pixels.shape[:2] == (WINDOW[1], WINDOW[0])
    packed = (pixels[..., 0].astype(np.uint32) << 16) | (pixels[..., 1].astype(np.uint32) << 8)
    assert np.unique(packed | pixels[..., 2]).size > 50  # not a blank, one-colour page
    # Colours that only the embedded PNGs carry: the ECC markers (Okabe-Ito bluish green)
    # of the capacity chart and the top of the cividis scale on the map, (254, 232, 56)
    # read from matplotlib's cividis colour map at 1.0.
    assert near(pixels, OKABE_ITO["bluish_green"]) > 30
    assert near(pixels, "#FEE838") > 500


def test_dumped_dom_has_every_image(tmp_path, report_file, full_html):  # noqa: F811
    result = run_browser(tmp_path, "--dump-dom", report_file.as_uri())
    assert result.returncode == 0, result.stderr[-2000:]
    dom = result.stdout
    sources = re.findall(r'<img[^>]*\ssrc="([^"]*)"', dom)
    assert len(sources) == full_html.count("<img ") == 5
    assert all(source.startswith("data:image/png;base64,") for source in sources)
    assert 'id="caution-top"' in dom and 'id="caution-end"' in dom


# --- the demo report printed to PDF (nutricap demo --pdf) -------------------------------------

#: Bound on the page count: on average at least this many characters of text per page, once
#: every figure has been granted a page of its own. Measured on the demo's Letter pages: prose
#: pages hold 2,300-3,900 characters, pages of the numeric tables 1,300-2,000 (numbers and
#: rules take room, not characters). The bound lets a table row, a figure or a heading move to
#: the next page, but not blank pages, pages cut into slivers or a table of one column a page.
CHARACTERS_PER_PAGE = 2000
MIN_CHARACTERS_ON_A_PAGE = 80


class UnitTableHeaders(HTMLParser):
    """The column headers (th) of the per-unit table section (id="units") of a report."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.inside = 0
        self.in_header = False
        self.headers: list[str] = []

    def handle_starttag(self, tag, attrs):
        if tag == "section":
            self.inside += 1 if dict(attrs).get("id") == "units" or self.inside else 0
        if self.inside and tag == "th":
            self.in_header = True
            self.headers.append("")

    def handle_endtag(self, tag):
        if tag == "section" and self.inside:
            self.inside -= 1
        if tag == "th":
            self.in_header = False

    def handle_data(self, data):
        if self.in_header:
            self.headers[-1] += data


def pdf_text(path) -> list[str]:
    """Each page's text (pypdf), NFKC-normalised (ligature 'ﬁ' → 'fi'), spaces collapsed."""
    pypdf = pytest.importorskip("pypdf")
    pages = pypdf.PdfReader(path).pages
    return [_words(page.extract_text()) for page in pages]


def _words(text: str) -> str:
    """NFKC, whitespace collapsed, and no space after a hyphen: a header wrapped at its hyphen
    ("Allowable-" / "use") comes out of the PDF as two lines, which cannot be told apart."""
    collapsed = " ".join(unicodedata.normalize("NFKC", text).split())
    return collapsed.replace("- ", "-")


@pytest.fixture(scope="module")
def printed_demo(tmp_path_factory):
    pytest.importorskip("pypdf")
    out = tmp_path_factory.mktemp("printed") / "demo"
    assert main(["demo", "--out", str(out), "--pdf", "--no-figures", "--quiet"]) == 0
    return out


@pytest.mark.parametrize("part", ["results", "results_rasters"])
def test_printed_report_holds_the_whole_unit_table(printed_demo, part):
    folder = printed_demo / part
    pages = pdf_text(folder / "report.pdf")
    text = " ".join(pages)
    parser = UnitTableHeaders()
    parser.feed((folder / "report.html").read_text(encoding="utf-8"))
    headers = {_words(header) for header in parser.headers}  # as the PDF text ('km²' → 'km2')
    assert len(headers) >= 14, headers  # the per-unit table's columns (sections.UNIT_COLUMNS)
    missing = [header for header in sorted(headers) if header not in text]
    assert not missing, missing
    with open(folder / "capacity_by_unit.csv", newline="", encoding="utf-8") as handle:
        units = [row["unit_id"] for row in csv.DictReader(handle)]
    assert units and all(unit in text for unit in units)
    # Every page carries text, and there are no more pages than the text and figures need.
    figures = (folder / "report.html").read_text(encoding="utf-8").count("<img ")
    bound = math.ceil(len(text) / CHARACTERS_PER_PAGE) + figures
    assert len(pages) <= bound, (len(pages), bound)
    assert min(len(page) for page in pages) >= MIN_CHARACTERS_ON_A_PAGE


SCREEN_WIDTH = 1280
#: Appended to a copy of the report (the report itself has no script): after layout, writes
#: the page's width and every table box that scrolls sideways into the DOM for --dump-dom.
MEASURE = """<script>
addEventListener("load", () => {
  const wide = [...document.querySelectorAll(".table-wrap, pre")]
    .filter((box) => box.scrollWidth > box.clientWidth + 1)
    .map((box) => (box.querySelector("caption") || box).textContent.slice(0, 60));
  const out = document.createElement("output");
  out.id = "measured";
  out.textContent = JSON.stringify({page: document.documentElement.scrollWidth, wide: wide});
  document.body.append(out);
});
</script>"""


def measured_layout(tmp_path, html: str) -> dict:
    page = tmp_path / "measure.html"
    page.write_text(html.replace("</body>", MEASURE + "</body>"), encoding="utf-8")
    result = run_browser(tmp_path, f"--window-size={SCREEN_WIDTH},900", "--dump-dom", page.as_uri())
    found = re.search(r'<output id="measured">(.*?)</output>', result.stdout)
    assert found, result.stderr[-2000:]
    return json.loads(html_module.unescape(found.group(1)))


@pytest.mark.parametrize("part", ["results", "results_rasters"])
def test_screen_needs_no_sideways_scrolling(tmp_path, printed_demo, part):
    html = (printed_demo / part / "report.html").read_text(encoding="utf-8")
    layout = measured_layout(tmp_path, html)
    assert layout["page"] <= SCREEN_WIDTH and layout["wide"] == [], layout


def test_screen_with_every_section_needs_no_sideways_scrolling(tmp_path, full_html):  # noqa: F811
    layout = measured_layout(tmp_path, full_html)
    assert layout["page"] <= SCREEN_WIDTH and layout["wide"] == [], layout
