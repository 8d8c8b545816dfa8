"""Tests of nutricap.report.references: short citations, the reference list, values to verify."""

from __future__ import annotations

import re

from nutricap.report import references
from nutricap.science.energetics import NUTRITIONAL_STATES


def test_a_source_naming_no_publication_is_shown_as_written():
    # A user's own table: its source text is the user's, shown unchanged.
    for text in ("our own plot study, 2024", "invented for the example", "common practice"):
        assert references.short_citation(text) == text


def test_short_citation_names_each_publication_and_flags_recalled_values():
    text = (
        "Holechek 1988, Rangelands 10:10-14 (from memory); thresholds agree with Millward et "
        "al. 2020, Rangelands 42:63-71 (abstract read)"
    )
    assert references.short_citation(text) == (
        "Holechek 1988; Millward et al. 2020 (partly recalled: see Values to verify)"
    )
    assert references.short_citation("NRC 2007 cervid notes (read)") == "NRC 2007"


def test_reference_list_is_alphabetical_with_unique_short_names():
    shorts = [entry.short for entry in references.REFERENCES]
    assert len(set(shorts)) == len(shorts)
    # By first author, single-author works before those with co-authors, then by year (the
    # usual order of a reference list).
    keys = []
    for entry in references.REFERENCES:
        year = re.search(r"\b(1[89]|20)\d\d\b", entry.full)[0]
        authors = entry.full.split(year)[0]
        keys.append((entry.full.split(",")[0].casefold(), "&" in authors, year))
    assert keys == sorted(keys)
    # Each entry's pattern finds its own short citation and full text (no dead pattern).
    for entry in references.REFERENCES:
        assert references.cited([entry.short]) == [entry] or entry in references.cited(
            [entry.full]
        ), entry.short


def test_every_packaged_state_source_naming_a_publication_is_in_the_list():
    # Author-year pairs as written in nutritional_states.csv's source column.
    named = {
        "NRC 2007": "NRC 2007",
        "Ullrey et al. 1970": "Ullrey et al. 1970",
        "Baker et al. 1979": "Baker et al. 1979",
        "Smith & Mautz 1998": "Pekins et al. 1998",
        "Parker et al. 1999": "Parker et al. 1999",
    }
    sources = " ".join(NUTRITIONAL_STATES["source"])
    cited = {entry.short for entry in references.cited(NUTRITIONAL_STATES["source"])}
    for written, short in named.items():
        if written in sources:
            assert short in cited, written


def test_slope_and_water_values_to_verify_only_when_those_rules_ran():
    without = references.values_to_verify(reductions=False)
    with_rules = references.values_to_verify(reductions=True)
    assert not any("Slope" in entry.value for entry in without)
    assert any("Slope" in entry.value for entry in with_rules)
    assert len(with_rules) == len(references.VALUES_TO_VERIFY)
