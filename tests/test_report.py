"""Tests of the HTML report (nutricap.report.html) and its figures (nutricap.report.figures).

The report is rendered on the invented example landscape and checked for structure: well
formed, self-contained (no external src/href, images as PNG data URIs), every unit and the
caution present, optional sections only when given. The small frames below are invented for
the test: they check that the figures render and show what they are given, not that any
capacity is right. Parsing uses Python's html.parser (standard library).
"""

from __future__ import annotations

import base64
import csv
import dataclasses
import re
import struct
import warnings
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from markupsafe import escape

from nutricap.cautions import CAUTION
from nutricap.errors import printable
from nutricap.inputs.project import load_project
from nutricap.report import figures, references
from nutricap.report.html import ReportExtras, is_flag, render_report, write_report
from nutricap.report.manifest import build_manifest
from nutricap.science.energetics import NUTRITIONAL_STATES

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), file signature
VOID_ELEMENTS = {
    "area",
    "base",
    "br",
    "col",
    "embed",
    "hr",
    "img",
    "input",
    "link",
    "meta",
    "source",
    "track",
    "wbr",
}  # HTML Living Standard, "void elements"
EXTERNAL = re.compile(r"^\s*(https?:|//|file:)", re.IGNORECASE)
USE_COLUMNS = [
    "current_animals",
    "demand_kg",
    "key_class",
    "key_use_fraction",
    "key_allowable_use",
    "overuse",
    "reduction_for_key_use_animals",
    "above_ncc",
    "reduction_for_ncc_animals",
]


class Page(HTMLParser):
    """Collects tags, attributes, ids, text and nesting errors of an HTML document."""

    def __init__(self) -> None:
        super().__init__(convert_charrefs=True)
        self.stack: list[str] = []
        self.errors: list[str] = []
        self.counts: dict[str, int] = {}
        self.attributes: list[tuple[str, str, str]] = []
        self.images: list[dict] = []
        self.ids: set[str] = set()
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.counts[tag] = self.counts.get(tag, 0) + 1
        attributes = dict(attrs)
        self.attributes += [(tag, name, value or "") for name, value in attrs]
        if "id" in attributes:
            self.ids.add(attributes["id"])
        if tag == "img":
            self.images.append(attributes)
        if tag not in VOID_ELEMENTS:
            self.stack.append(tag)

    def handle_startendtag(self, tag, attrs):
        self.handle_starttag(tag, attrs)
        if tag not in VOID_ELEMENTS:
            self.stack.pop()

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes <{self.stack[-1] if self.stack else None}>")
            return
        self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)

    @property
    def plain_text(self) -> str:
        return " ".join(" ".join(self.text).split())


def parse(html: str) -> Page:
    page = Page()
    page.feed(html)
    page.close()
    return page


def png_size(data: bytes) -> tuple[int, int]:
    """Width and height from the IHDR chunk (PNG specification: bytes 16-24, big-endian)."""
    assert data[:8] == PNG_SIGNATURE
    assert data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


@pytest.fixture(scope="module")
def project(example_project):
    return load_project(example_project)


@pytest.fixture(scope="module")
def manifest(project, example_estimate):
    """The manifest as nutricap.report.bundle.write_estimate builds it."""
    return build_manifest(
        command="estimate",
        project_path=project.path,
        input_paths=project.input_paths(),
        settings=project.config.model_dump(mode="json"),
        derived={
            "diet_de_min_kcal_per_g": example_estimate.target.de_min_kcal_per_g,
            "area_crs": example_estimate.areas.area_crs.to_string(),
            "area_crs_reason": example_estimate.areas.area_crs_reason,
        },
    )


@pytest.fixture(scope="module")
def plain_estimate(example_estimate):
    """The example estimate without interval and use columns (the base report)."""
    table = example_estimate.by_unit
    dropped = [c for c in table.columns if c.endswith(("_lo", "_hi")) or c in USE_COLUMNS]
    return dataclasses.replace(example_estimate, by_unit=table.drop(columns=dropped))


@pytest.fixture(scope="module")
def base_html(plain_estimate, project, manifest):
    return render_report(plain_estimate, project=project, manifest=manifest)


@pytest.fixture(scope="module")
def base_page(base_html):
    return parse(base_html)


def invented_scenario(unit_ids) -> pd.DataFrame:
    """Baseline and scenario NCC by unit and year (values invented for the test)."""
    rows = []
    for unit in unit_ids:
        for year in range(2026, 2031):
            gain = 50.0 * np.exp(-((year - 2027) ** 2) / 2.0)
            rows.append(
                {
                    "unit_id": unit,
                    "scenario": "spring burn",
                    "year": year,
                    "years_since_treatment": year - 2026,
                    "ncc_animals_baseline": 100.0,
                    "ncc_animals_scenario": 100.0 + gain,
                    "change_animals": gain,
                }
            )
    return pd.DataFrame(rows)


def invented_sensitivity() -> pd.DataFrame:
    """Tornado table (values invented for the test)."""
    return pd.DataFrame(
        {
            "input": ["intake", "diet DE threshold", "biomass"],
            "low_change_animals": [120.0, 800.0, -90.0],
            "high_change_animals": [-100.0, -650.0, 95.0],
        }
    )


def invented_trend(K: float | None) -> dict:
    """A count series with a fitted curve (values invented for the test)."""
    years = list(range(2014, 2024))
    fitted = [900.0 / (1.0 + 8.0 * np.exp(-0.5 * (y - 2014))) for y in years]
    return {
        "series": "total",
        "years": years,
        "counts": [f * 1.04 for f in fitted],
        "fitted_years": years,
        "fitted_counts": fitted,
        "K": K,
        "r_mean": 0.21,
        "r_ci": [0.15, 0.27],
        "ceiling_reason": "invented for the test",
    }


@pytest.fixture(scope="module")
def full_html(example_estimate, project, manifest):
    extras = ReportExtras(
        scenario_table=invented_scenario(example_estimate.by_unit["unit_id"]),
        sensitivity_table=invented_sensitivity(),
        trend=invented_trend(K=900.0),
        interval_level=0.9,
        sensitivity_change=0.1,
    )
    table = example_estimate.by_unit.copy()
    for name in ("ncc_animals", "ecc_animals", "allowable_use_animals"):
        if f"{name}_lo" not in table.columns:  # intervals invented for the test
            table[f"{name}_lo"] = 0.9 * table[name]
            table[f"{name}_hi"] = 1.1 * table[name]
    estimate = dataclasses.replace(example_estimate, by_unit=table)
    return render_report(estimate, project=project, manifest=manifest, extras=extras)


@pytest.fixture(scope="module")
def full_page(full_html):
    return parse(full_html)


# --- structure and self-containment --------------------------------------------------------


@pytest.mark.parametrize("which", ["base", "full"])
def test_report_is_well_formed(which, base_page, full_page):
    page = base_page if which == "base" else full_page
    assert page.errors == []
    assert page.stack == []
    for tag in ("html", "head", "body", "main", "title", "style"):
        assert page.counts.get(tag) == 1, tag
    assert page.counts.get("script", 0) == 0


def test_report_starts_with_doctype(base_html):
    assert base_html.lstrip().lower().startswith("<!doctype html>")


@pytest.mark.parametrize("which", ["base", "full"])
def test_no_external_references(which, base_html, full_html, base_page, full_page):
    html, page = (base_html, base_page) if which == "base" else (full_html, full_page)
    external = [
        (tag, name, value[:60]) for tag, name, value in page.attributes if EXTERNAL.match(value)
    ]
    assert external == []
    assert "@import" not in html
    assert not re.search(r"url\(\s*['\"]?(https?:|//|file:)", html, re.IGNORECASE)
    links = [value for _tag, name, value in page.attributes if name == "href"]
    assert links and all(value.startswith("#") for value in links)


@pytest.mark.parametrize("which, expected", [("base", 2), ("full", 5)])
def test_images_are_png_data_uris(which, expected, base_page, full_page):
    page = base_page if which == "base" else full_page
    assert len(page.images) == expected
    for image in page.images:
        assert image["src"].startswith("data:image/png;base64,")
        data = base64.b64decode(image["src"].split(",", 1)[1], validate=True)
        width, height = png_size(data)
        assert width > 100 and height > 100
        assert image.get("alt")


def test_every_unit_and_the_caution_present(base_html, base_page, plain_estimate):
    for unit in plain_estimate.by_unit["unit_id"]:
        assert unit in base_page.plain_text
    # Near the top (before the inputs) and again at the end (after the manifest).
    caution = str(escape(CAUTION))
    top = base_html.index('id="caution-top"')
    end = base_html.index('id="caution-end"')
    assert top < base_html.index(caution, top) < base_html.index('id="inputs"')
    assert base_html.index('id="manifest"') < end < base_html.index(caution, end)


def test_optional_sections_only_when_given(base_page, full_page):
    optional = {"scenario", "trend", "sensitivity"}
    assert not optional & base_page.ids
    assert optional <= full_page.ids
    for method in ("stratified bootstrap", "One-at-a-time perturbation", "discrete logistic"):
        assert method not in base_page.plain_text
        assert method in full_page.plain_text
    assert "raster" not in base_page.ids | full_page.ids  # the example has no rasters


def test_sections_in_order(full_html):
    order = [
        "caution-top",
        "inputs",
        "diet",
        "map",
        "capacity",
        "use",
        "scenario",
        "trend",
        "units",
        "supply",
        "methods",
        "parameters",
        "manifest",
        "caution-end",
    ]
    positions = [full_html.index(f'id="{name}"') for name in order]
    assert positions == sorted(positions)


# --- content -------------------------------------------------------------------------------


def test_inputs_list_every_file_with_its_checksum(base_page, manifest):
    text = base_page.plain_text
    assert manifest["inputs"]
    for info in manifest["inputs"].values():
        assert info["sha256"] in text
    assert manifest["derived"]["area_crs_reason"] in text


def test_input_counts(base_page, plain_estimate):
    text = base_page.plain_text
    supply = plain_estimate.supply
    assert f"Clip plots {int(supply.n_plots.sum()):,}" in text
    assert f"Vegetation strata {len(supply.strata)}" in text
    assert f"Forage classes {len(supply.classes)}" in text


def test_target_diet_shown(base_page, plain_estimate):
    text = base_page.plain_text
    assert f"{plain_estimate.target.de_min_kcal_per_g:.3f} kcal digestible energy" in text
    assert plain_estimate.target.derivation in text


def test_unit_table_totals_use_thousands_separators(base_page, plain_estimate):
    # The total row repeats the sum of the table's own column (consistency, not correctness).
    text = base_page.plain_text
    total = plain_estimate.by_unit["ncc_animals"].sum()
    assert total > 1000  # so that a separator is expected
    assert f"{total:,.0f}" in text
    assert f"{plain_estimate.by_unit['available_forage_kg'].sum():,.0f}" in text


def test_methods_cite_every_source(base_page):
    text = base_page.plain_text
    for source in (
        "Kleiber",
        "70 · W^0.75",
        "ME / 0.82",
        "Robbins, C.T. 1993",
        "Robbins, C.T., Hanley",
        "Hobbs, N.T. & Swift, D.M. 1985",
        "Hanley, T.A. & Rogers, J.J. 1989",
        "PNW-RN-485",
        "Holechek, J.L. 1988",
        "National Range and Pasture Handbook",
        "AUM",
        "B = 10 · m / A",
    ):
        assert source in text, source


def test_methods_list_the_steps_the_run_used(base_page, full_page, example_estimate):
    # The methods section names a source for every step the run took: the example has
    # diet-composition limits, a cattle permit and counts (current use); the full report a
    # scenario. A run without them has no such entries.
    from nutricap.report.methods_text import methods

    assert example_estimate.target.composition is not None and example_estimate.other_herds
    assert example_estimate.use_by_class is not None
    text = full_page.plain_text
    for title in (
        "Diet-composition limits",
        "Other herbivores on the shared range",
        "Current use and overuse",
        "Treatment responses",
    ):
        assert title in text, title
    assert "marginal forage class" in text
    assert "Treatment responses" not in base_page.plain_text
    plain = {m.title for m in methods(intervals=False, sensitivity=False, trend=False)}
    assert not plain & {"Diet-composition limits", "Current use and overuse"}


def test_parameter_table_shows_state_sources_and_inputs(base_page):
    # Each row's research note is shown as its short citations, the full citations once in
    # the reference list (the notes themselves stay in nutritional_states.csv).
    text = base_page.plain_text
    for source in NUTRITIONAL_STATES["source"]:
        assert references.short_citation(source) in text
        for entry in references.cited([source]):
            assert text.count(entry.full) == 1, entry.short
    assert "project input: forage_classes.csv" in text
    assert "project input: animal_classes.csv" in text


def test_manifest_in_collapsible_block(base_html, manifest):
    details = re.search(r'<section id="manifest">.*?<details>(.*?)</details>', base_html, re.DOTALL)
    assert details is not None
    for name, version in manifest["versions"].items():
        assert name in details.group(1) and version in details.group(1)


def test_use_section_without_current_numbers(base_page):
    assert "No current animal numbers were given" in base_page.plain_text
    assert "Herd-reduction figures are advisory" in base_page.plain_text


def test_use_section_flags(plain_estimate, project, manifest):
    table = plain_estimate.by_unit.copy()
    # Current numbers and flags invented for the test: the first unit is flagged.
    table["current_animals"] = 500.0
    table["key_use_fraction"] = 0.3
    table["key_allowable_use"] = 0.5
    table["overuse"] = [True] + [False] * (len(table) - 1)
    estimate = dataclasses.replace(plain_estimate, by_unit=table, use_by_class=None)
    html = render_report(estimate, project=project, manifest=manifest)
    use = re.search(r'<section id="use">(.*?)</section>', html, re.DOTALL).group(1)
    assert use.count('class="flagged"') == 1
    assert "1 unit(s) flagged" in use
    # Demand as a multiple of the allowable use: 0.3 / 0.5 (arithmetic).
    assert "0.60 ×" in use and "Most-used" not in use


def test_numbers_above_ncc_within_its_interval_are_said_to_be(plain_estimate):
    # Numbers and intervals invented for the test: unit 0 above NCC but within its interval,
    # unit 1 above the interval's upper end, unit 2 below NCC.
    from nutricap.report.use_section import WITHIN_INTERVAL, use

    table = plain_estimate.by_unit.iloc[:3].copy()
    table["ncc_animals"] = 100.0
    table["ncc_animals_lo"], table["ncc_animals_hi"] = 80.0, 120.0
    table["current_animals"] = [110.0, 130.0, 90.0]
    table["above_ncc"] = table["current_animals"] > table["ncc_animals"]
    table["key_use_fraction"], table["key_allowable_use"] = 0.3, 0.5
    table["overuse"] = False
    section = use(table)
    column = section["table"]["headers"].index("Numbers above NCC")
    cells = [row["cells"][column] for row in section["table"]["rows"]]
    assert cells[0] == WITHIN_INTERVAL and cells[1] != WITHIN_INTERVAL and cells[2] != cells[1]
    assert section["flagged"] == 2  # within the interval is still above NCC
    alone = table.drop(columns=[c for c in table.columns if c.startswith("other_herbivores")])
    assert not use(alone)["others"]  # no other herbivores: the text does not speak of them
    assert use(alone.assign(other_herbivores_taken_aum=1.0))["others"]


def test_use_section_with_current_numbers_only(plain_estimate, project, manifest):
    table = plain_estimate.by_unit.assign(current_animals=100.0)  # invented for the test
    html = render_report(
        dataclasses.replace(plain_estimate, by_unit=table), project=project, manifest=manifest
    )
    assert "Current animal numbers were given" in parse(html).plain_text


def test_intervals_in_table_and_caption(full_page):
    text = full_page.plain_text
    assert "NCC 90 % interval [animals]" in text
    assert "Whiskers: 90 % intervals" in text


def test_text_is_escaped(plain_estimate, project, manifest):
    name = "<script>alert(1)</script>"
    first = plain_estimate.by_unit["unit_id"].iloc[0]
    units = plain_estimate.units.replace({"unit_id": {first: name}})
    table = plain_estimate.by_unit.replace({"unit_id": {first: name}})
    estimate = dataclasses.replace(plain_estimate, by_unit=table, units=units)
    html = render_report(estimate, project=project, manifest=manifest)
    assert name not in html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html


def test_trend_without_ceiling(plain_estimate, project, manifest):
    extras = ReportExtras(trend=invented_trend(K=None))
    page = parse(render_report(plain_estimate, project=project, manifest=manifest, extras=extras))
    text = page.plain_text
    assert "no evidence of a ceiling" in text
    assert "Counts are usually indices" in text
    assert "weak evidence of K" in text


def test_write_report(tmp_path, plain_estimate, project, manifest):
    path = tmp_path / "report.html"
    write_report(path, plain_estimate, project=project, manifest=manifest)
    page = parse(path.read_text(encoding="utf-8"))
    assert page.errors == [] and CAUTION in page.plain_text


@pytest.mark.parametrize(
    "value, flagged",
    [
        (True, True),
        (False, False),
        (np.bool_(True), True),
        (None, False),
        (float("nan"), False),
        ("", False),
        ("no", False),
        ("use above allowable", True),
    ],
)
def test_is_flag(value, flagged):
    assert is_flag(value) is flagged


# --- CSV and Markdown outputs (nutricap.report.tables): text from the inputs stays text ------

HOSTILE_IDS = ["=1+2", "+cmd|' /C calc'!A0", "-3.5", "@SUM(A1)", "\tTab", "\rCR", "-x", "a=b",
               "x\r=cmd", "y\n@cmd"]  # fmt: skip


def test_csv_cells_that_would_run_as_formulas_get_an_apostrophe(tmp_path):
    # OWASP, "CSV Injection": prefix cells beginning with = + - @ tab or CR with '. Read back
    # with Python's csv module (independent of pandas, which wrote the file).
    from nutricap.report.tables import write_csv

    table = pd.DataFrame({"unit_id": HOSTILE_IDS, "change_animals": -3.5, "=x": "ok"})
    write_csv(table, tmp_path / "t.csv")
    with open(tmp_path / "t.csv", newline="", encoding="utf-8") as stream:
        header, *rows = list(csv.reader(stream))
    assert header == ["unit_id", "change_animals", "'=x"]
    # A line break inside a text does not start a row of its own.
    assert [row[0] for row in rows] == [
        "'=1+2",
        "'+cmd|' /C calc'!A0",
        "-3.5",
        "'@SUM(A1)",
        "'\tTab",
        "'\rCR",
        "'-x",
        "a=b",
        "x\r=cmd",
        "y\n@cmd",
    ]
    assert {row[1] for row in rows} == {"-3.5"}, "numbers stay numbers"


def _unescaped_pipes(line: str) -> int:
    """Cell separators of a GFM table row: pipes not escaped by a backslash (GFM spec 0.29)."""
    return len(re.findall(r"(?<!\\)(?:\\\\)*\|", line))


def test_markdown_ids_cannot_break_the_table_or_inject_html():
    from nutricap.report.tables import markdown_table

    ids = ["a|b", "line\nbreak", "<script>alert(1)</script>", "[x](http://e.invalid)",
           "`code` *em* _u_ \\| $x$", "\x1b[2Jfake", "007"]  # fmt: skip
    table = pd.DataFrame({"unit_id": ids, "ncc_animals": np.arange(len(ids), dtype=float)})
    text = markdown_table(table, title="T", context_lines=["<b>species</b> | name"])
    lines = text.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("| Unit"))
    rows = lines[start + 2 : start + 2 + len(ids)]
    assert all(_unescaped_pipes(row) == 3 for row in lines[start : start + 2 + len(ids)]), rows
    assert lines[start + 2 + len(ids)] == "", "one line per unit"
    body = "\n".join(lines[:-3])  # all but the caution (ours)
    assert "<" not in body.replace("\\<", "") and "\x1b" not in body
    # Removing CommonMark's backslash escapes gives back each id, unprintables escaped.
    shown = [
        re.sub(r"\\([!-/:-@\[-`{-~])", r"\1", row.split(" | ")[0][2:].rstrip()) for row in rows
    ]
    assert shown == [printable(name) for name in ids]
    assert "\\<b\\>species\\</b\\> \\| name" in text


def test_figure_labels_are_plain_text(plain_estimate):
    # An id with an escape sequence or mathtext: no missing-glyph warning, no maths, no error.
    first = plain_estimate.by_unit["unit_id"].iloc[0]
    table = plain_estimate.by_unit.replace({"unit_id": {first: "\x1b[2J $\\frac{1}$"}})
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        figure = figures.capacity_figure(table, season_days=120)
        figures.figure_png(figure)
    labels = [label.get_text() for label in figure.axes[0].get_yticklabels()]
    assert "\\x1b[2J \\$\\frac{1}\\$" in labels


# --- numbers in the CSV and rounding shared by the Markdown table and the report ---------------


@pytest.mark.parametrize(
    "value", [1191397.2, 1.1914e6, 1e-8, 2.5e-5, 123456789012345678.0, -3.75e-7, 0.0, 46.05]
)
def test_csv_numbers_are_plain_decimals_in_full(value):
    from nutricap.report.tables import csv_number

    text = csv_number(value)
    assert "e" not in text.lower()
    assert float(text) == value  # Python's own float parser reads the same value back


def test_csv_file_has_no_exponent_and_reads_back_exactly(tmp_path):
    from nutricap.report.tables import write_csv

    # Values invented for the test, chosen so that "%g" would write exponents.
    frame = pd.DataFrame({"unit_id": ["a", "b"], "available_forage_kg": [1191400.0, 1e-8]})
    path = tmp_path / "t.csv"
    write_csv(frame, path)
    text = path.read_text()
    assert "1191400.0" in text and "0.00000001" in text and "e+" not in text and "e-" not in text
    assert pd.read_csv(path)["available_forage_kg"].tolist() == [1191400.0, 1e-8]


def test_markdown_and_report_round_each_column_alike(plain_estimate, project, manifest):
    from nutricap.report.tables import DISPLAY_DECIMALS, markdown_table

    table = plain_estimate.by_unit
    markdown = markdown_table(table, title="T", context_lines=[])
    html = render_report(plain_estimate, project=project, manifest=manifest)
    units = re.search(r'<section id="units">(.*?)</section>', html, re.DOTALL).group(1)
    for name in ("area_ha", "available_forage_kg", "ncc_animals", "ncc_per_km2"):
        for value in table[name]:
            shown = f"{value:,.{DISPLAY_DECIMALS[name]}f}"
            assert shown in markdown and shown in units, (name, shown)


# --- what the numbers are: intervals, references, values to verify, labels -----------------


@pytest.fixture(scope="module")
def example_html(example_estimate, project, manifest):
    return render_report(example_estimate, project=project, manifest=manifest)


def test_headline_totals_carry_their_intervals(example_html, example_estimate):
    # The total's 5th and 95th percentiles over the replicates, recomputed with numpy.
    bootstrap = example_estimate.uncertainty.bootstrap
    days = example_estimate.season_days
    header = re.search(r'<header id="top">(.*?)</header>', example_html, re.DOTALL).group(1)
    for figure in ("ncc", "ecc", "allowable_use"):
        totals = bootstrap.replicate_animal_days[figure].sum(axis=1) / days
        low, high = np.percentile(totals, [5.0, 95.0])
        assert f"90 % interval {low:,.0f}–{high:,.0f}" in header, figure


def test_interval_statement_says_what_is_covered_and_held_fixed(example_html):
    statement = parse(example_html).plain_text
    # example_landscape/project.toml: 1000 replicates at 0.9, clip plots without calibration.
    assert "90 % percentile interval of 1,000 bootstrap replicates" in statement
    assert "sampling error of the clip plots only" in statement
    assert "requirements and intake" in statement and "held fixed" in statement
    assert "95 %" not in statement.replace("trend command's own default is 95 %", "")


def test_one_reference_list_covers_every_short_citation(example_html):
    page = parse(example_html)
    text = page.plain_text
    listed = re.search(r'<ol class="references">(.*?)</ol>', example_html, re.DOTALL).group(1)
    assert example_html.count('<ol class="references">') == 1
    entries = re.findall(r"<li>(.*?)</li>", listed, re.DOTALL)
    assert len(entries) == len(set(entries)) >= 8
    before_list = parse(example_html.split('<section id="references">')[0]).plain_text
    for entry in references.REFERENCES:
        if entry.short in before_list:
            assert str(escape(entry.full)) in listed, entry.short
    for working_note in ("abstract read", "not legible", "slideplayer", "attribution from memory"):
        assert working_note not in text, working_note


def test_values_to_verify_box_and_replaceable_tables(example_html):
    box = re.search(r'<aside class="verify" id="verify">(.*?)</aside>', example_html, re.DOTALL)
    text = parse(box.group(1)).plain_text
    assert "tannin (BSA) slope" in text and "4.4 kcal/g" in text
    assert "Slope reductions" not in text  # no slope rule in the polygon run
    assert '[inputs] nutritional_states = "my_states.csv"' in text
    assert "[availability] slope_table" in text and "water_table" in text


@pytest.mark.parametrize(
    ("factor", "label"),
    [
        ("intake", "target diet unreachable"),
        ("diet_mix", "diet limits unreachable"),
        ("diet_share", "<td>one class&#39;s diet-share cap</td>"),
        ("protein+diet_group", "<td>protein + a diet group&#39;s share</td>"),
        ("energy+diet_share+diet_group", "energy + one class&#39;s diet-share cap + a diet group"),
        ("energy+protein", "<td>energy + protein</td>"),
        ("no_forage", "<td>no forage left (after use caps and other herbivores)</td>"),
        ("quantity", "<td>forage quantity (all the forage allowed is eaten)</td>"),
    ],
)
def test_limiting_factors_are_labelled_in_words(plain_estimate, project, manifest, factor, label):
    table = plain_estimate.by_unit.copy()
    table.loc[table.index[0], "limiting_factor"] = factor  # invented for the test
    estimate = dataclasses.replace(plain_estimate, by_unit=table)
    html = render_report(estimate, project=project, manifest=manifest)
    units = re.search(r'<section id="units">(.*?)</section>', html, re.DOTALL).group(1)
    assert label in units


def section_table(html: str, section: str, caption: str) -> list[list[str]]:
    """The body rows (cell texts, unescaped) of the table of ``section`` whose caption starts
    with ``caption``."""
    import html as html_module

    body = re.search(rf'<section id="{section}">(.*?)</section>', html, re.DOTALL).group(1)
    found = re.search(
        rf"<caption>{re.escape(caption)}.*?</caption>.*?<tbody>(.*?)</tbody>", body, re.DOTALL
    )
    assert found, f"no table {caption!r} in section {section!r}"
    rows = re.findall(r"<tr[^>]*>(.*?)</tr>", found.group(1), re.DOTALL)
    return [[html_module.unescape(c) for c in re.findall(r"<td[^>]*>(.*?)</td>", r)] for r in rows]


def units_at_share(estimate, classes, share: float) -> list[str]:
    """Units whose diet at NCC holds ``share`` of ``classes`` (recomputed from the eaten table)
    and whose limiting factor names a composition limit."""
    eaten = estimate.by_unit_class.pivot_table(
        index="unit_id", columns="forage_class", values="ncc_eaten_kg", aggfunc="sum"
    )
    held = eaten[classes].sum(axis=1) / eaten.sum(axis=1)
    factor = estimate.by_unit.set_index("unit_id")["limiting_factor"]
    named = factor.str.contains("diet_group|diet_share")
    return [
        unit
        for unit in estimate.by_unit["unit_id"]
        if named[unit] and abs(held[unit] - share) < 1e-6
    ]


def test_diet_section_shows_the_example_limit_and_where_it_binds(example_html, example_estimate):
    # The example's group (invented for the example): big sagebrush at most 28 % of the diet.
    rows = section_table(example_html, "diet", "Diet groups")
    assert rows == [["sagebrush", "big_sagebrush", "0 %", "28 %", "Coldmarrow, Petrelhollow"]]
    # The same units from the run's own tables: the limiting factor names the group family and
    # the sagebrush share of the eaten diet is 28 %; every other unit eats less sagebrush.
    assert units_at_share(example_estimate, ["big_sagebrush"], 0.28) == [
        "Coldmarrow",
        "Petrelhollow",
    ]
    bound = example_estimate.by_unit["limiting_factor"].str.contains("diet_group")
    assert example_estimate.by_unit.loc[bound, "unit_id"].tolist() == ["Coldmarrow", "Petrelhollow"]
    diet = re.search(r'<section id="diet">(.*?)</section>', example_html, re.DOTALL).group(1)
    assert "Coldmarrow (energy + a diet group&#39;s share)" in diet
    assert "Largest share of the diet of single forage classes" not in diet


def test_diet_section_shows_class_caps(project, manifest, tmp_path):
    # A cap of 10 % on bitterbrush in the forage-class table (invented for the test), the
    # example's group dropped: the cap bounds the whole class (bitterbrush grows in several
    # strata), so in every unit bitterbrush is at most 10 % of the diet eaten; the caps table
    # lists the units where the class sits at its cap and a composition limit is named.
    import shutil

    from nutricap.example import DIET_TOML
    from nutricap.workflow import estimate

    folder = tmp_path / "inputs"
    shutil.copytree(project.folder, folder)
    classes = pd.read_csv(folder / "forage_classes.csv")
    classes["max_diet_share"] = np.where(classes["forage_class"] == "bitterbrush", 0.1, np.nan)
    classes.to_csv(folder / "forage_classes.csv", index=False)
    text = (folder / project.path.name).read_text().replace(DIET_TOML, "")
    (folder / project.path.name).write_text(text.replace("replicates = 1000", "replicates = 0"))
    capped = estimate(load_project(folder / project.path.name))
    html = render_report(capped, project=project, manifest=manifest)
    eaten = capped.problem.sum_by_unit(capped.solution.ncc.eaten_kg)
    share = eaten[:, capped.problem.items.forage_class == "bitterbrush"].sum(axis=1) / eaten.sum(
        axis=1
    )
    assert (share <= 0.1 + 1e-9).all()  # the whole class, x_c <= 0.1 Σx
    named = capped.by_unit["limiting_factor"].str.contains("diet_share|diet_group")
    at_cap = np.isclose(share, 0.1, rtol=0, atol=1e-9)
    binding = capped.by_unit.loc[named.to_numpy() & at_cap, "unit_id"].tolist()
    assert binding, "the cap should bind somewhere"
    rows = section_table(html, "diet", "Largest share of the diet")
    assert rows == [["bitterbrush", "10 %", ", ".join(binding)]]
    assert "Diet groups ([diet]" not in html


def test_current_numbers_say_where_they_come_from(example_html, example_estimate):
    text = parse(example_html).plain_text
    total = example_estimate.units["current_animals"].sum()  # the units layer's column
    assert f"Current numbers ({total:,.0f} animals over all units) come from the units layer" in (
        text
    )
    assert f"latest counted total {example_estimate.trend['latest_count']:,.0f}" in text


@pytest.fixture(scope="module")
def raster_project(example_project):
    return load_project(example_project.with_name("project_rasters.toml"))


@pytest.fixture(scope="module")
def raster_estimate(raster_project):
    from nutricap.workflow import estimate

    return estimate(raster_project)


def test_raster_report_says_the_livestock_rules_and_what_they_removed(
    raster_estimate, raster_project, manifest
):
    html = render_report(raster_estimate, project=raster_project, manifest=manifest)
    rules = raster_estimate.grid.rules_report
    slope = rules[(rules["unit_id"] == "all units") & (rules["rule"] == "slope")].iloc[0]
    text = parse(html).plain_text
    assert "made for cattle on rangeland, applied to mule deer by default" in text
    assert f"removed {slope['forage_removed_kg']:,.0f} kg DM" in text
    assert f"({slope['forage_removed_pct']:.1f} % of the standing forage)" in text
    box = re.search(r'<aside class="verify" id="verify">(.*?)</aside>', html, re.DOTALL)
    assert "Slope reductions" in parse(box.group(1)).plain_text


def test_figure_files_for_a_report_author(example_estimate, project, manifest, tmp_path):
    import xml.etree.ElementTree as ElementTree

    from nutricap.report.figures import write_figures
    from nutricap.report.html import report_parts

    html, shown, _ = report_parts(example_estimate, project=project, manifest=manifest)
    assert len(shown) == html.count("<img ")
    write_figures(shown, tmp_path / "figures")
    for name in shown:
        png = (tmp_path / "figures" / f"{name}.png").read_bytes()
        # PNG specification, pHYs chunk: pixels per metre, unit 1 (metre); 300 dpi = 11811 /m.
        at = png.index(b"pHYs")
        x, y, unit = struct.unpack(">IIB", png[at + 4 : at + 13])
        assert (x, y, unit) == (11811, 11811, 1), name
        root = ElementTree.parse(tmp_path / "figures" / f"{name}.svg").getroot()
        assert root.tag == "{http://www.w3.org/2000/svg}svg"


def test_report_preload_imports_the_report_and_restores_the_gil_turn():
    import sys

    from nutricap.report.bundle import REPORT_MODULES, ReportPreload

    before = sys.getswitchinterval()
    sys.setswitchinterval(0.004)
    try:
        preload = ReportPreload(switch_interval_s=0.0003)
        preload.wait()  # not started: returns at once
        assert sys.getswitchinterval() == pytest.approx(0.004)
        preload.start()
        preload.start()  # a second call does nothing
        preload.wait()
        assert sys.getswitchinterval() == pytest.approx(0.004)  # set back by the thread
        assert all(name in sys.modules for name in REPORT_MODULES)
    finally:
        sys.setswitchinterval(before)


def test_key_pressure_when_no_allowable_use_is_left():
    # Invented for the test: unit A's key classes keep a trace of allowable use (1.6e-16, what
    # other herbivores can leave), unit B's are used 2,300.5 times their allowable use.
    from nutricap.report.use_section import NONE_LEFT, key_pressure

    by_unit = pd.DataFrame({"unit_id": ["A", "B"]})
    use_by_class = pd.DataFrame(
        {
            "unit_id": ["A", "A", "B"],
            "forage_class": ["sage", "forbs", "sage"],
            "key": [True, True, True],
            "use_fraction": [1.5, 1.6, 0.5 * 2300.5],
            "allowable_use": [1.6e-16, 1.7e-16, 0.5],
        }
    )
    cells, names = key_pressure(by_unit, use_by_class)
    assert cells == [NONE_LEFT, "2,300.50 ×"] and names == "sage"
