"""The report's one reference list, its short citations and the "values to verify" box.

The parameter tables' ``source`` columns (``nutricap/data/*.csv``, a user's own tables) are
research notes: what was read for each value and how. The report shows a short citation per
row (author and year, found in that text by :data:`REFERENCES`' patterns), the full citations
once in a reference list, and the values not checked against the original publication once in
:data:`VALUES_TO_VERIFY`; the full notes stay in the CSV files.

Bibliographic details (titles, volumes, pages) were taken from the project's research notes
where given there, else recalled: the report says so above the list.
"""

from __future__ import annotations

import re
from collections.abc import Iterable
from dataclasses import dataclass


@dataclass(frozen=True)
class Reference:
    """One entry of the reference list: short citation, full citation, how a text names it."""

    short: str
    full: str
    pattern: str


REFERENCES = (
    Reference(
        "Baker et al. 1979",
        "Baker, D.L., Johnson, D.E., Carpenter, L.H., Wallmo, O.C. & Gill, R.B. 1979. Energy "
        "requirements of mule deer fawns in winter. Journal of Wildlife Management 43(1): "
        "162–169.",
        r"Baker et al\.? \(?1979",
    ),
    Reference(
        "Cook et al. 1996",
        "Cook, J.G., Quinlan, L.J., Irwin, L.L., Bryant, L.D., Riggs, R.A. & Thomas, J.W. 1996. "
        "Nutrition-growth relations of elk calves during late summer and fall. Journal of "
        "Wildlife Management 60(3): 528–541.",
        r"Cook et al\.? \(?1996",
    ),
    Reference(
        "Cook et al. 2004",
        "Cook, J.G., Johnson, B.K., Cook, R.C., Riggs, R.A., Delcurto, T., Bryant, L.D. & "
        "Irwin, L.L. 2004. Effects of summer-autumn nutrition and parturition date on "
        "reproduction and survival of elk. Wildlife Monographs 155: 1–61.",
        r"Cook et al\.? \(?2004",
    ),
    Reference(
        "Efron & Tibshirani 1993",
        "Efron, B. & Tibshirani, R.J. 1993. An Introduction to the Bootstrap. Chapman & Hall, "
        "New York.",
        r"Efron",
    ),
    Reference(
        "Freckleton et al. 2006",
        "Freckleton, R.P., Watkinson, A.R., Green, R.E. & Sutherland, W.J. 2006. Census error "
        "and the detection of density dependence. Journal of Animal Ecology 75(4): 837–851.",
        r"Freckleton",
    ),
    Reference(
        "Hanley & Rogers 1989",
        "Hanley, T.A. & Rogers, J.J. 1989. Estimating carrying capacity with simultaneous "
        "nutritional constraints. Research Note PNW-RN-485, USDA Forest Service, Pacific "
        "Northwest Research Station, Portland, Oregon.",
        r"Hanley,? (T\.A\. )?& Rogers|PNW-RN-485",
    ),
    Reference(
        "Hanley et al. 1992",
        "Hanley, T.A., Robbins, C.T., Hagerman, A.E. & McArthur, C. 1992. Predicting digestible "
        "protein and digestible dry matter in tannin-containing forages consumed by ruminants. "
        "Ecology 73(2): 537–541.",
        r"Hanley et al\.? \(?1992",
    ),
    Reference(
        "Hobbs & Swift 1985",
        "Hobbs, N.T. & Swift, D.M. 1985. Estimates of habitat carrying capacity incorporating "
        "explicit nutritional constraints. Journal of Wildlife Management 49(3): 814–822.",
        r"Hobbs,? (N\.T\. )?& Swift",
    ),
    Reference(
        "Holechek 1988",
        "Holechek, J.L. 1988. An approach for setting the stocking rate. Rangelands 10(1): 10–14.",
        r"Holechek,? (J\.L\.,? )?\(?1988",
    ),
    Reference(
        "Kleiber 1961",
        "Kleiber, M. 1961. The Fire of Life: an Introduction to Animal Energetics. Wiley, "
        "New York.",
        r"Kleiber",
    ),
    Reference(
        "May 1974",
        "May, R.M. 1974. Biological populations with nonoverlapping generations: stable "
        "points, stable cycles, and chaos. Science 186(4164): 645–647.",
        r"May,? (R\.M\.,? )?\(?1974",
    ),
    Reference(
        "Millward et al. 2020",
        "Millward, M.F., Bailey, D.W., Cibils, A.F. & Holechek, J.L. 2020. A GPS-based "
        "evaluation of factors commonly used to adjust cattle stocking rates on both extensive "
        "and mountainous rangelands. Rangelands 42(3): 63–71.",
        r"Millward",
    ),
    Reference(
        "Mould & Robbins 1981",
        "Mould, E.D. & Robbins, C.T. 1981. Nitrogen metabolism in elk. Journal of Wildlife "
        "Management 45(2): 323–334.",
        r"Mould",
    ),
    Reference(
        "NRC 1996",
        "National Research Council 1996. Nutrient Requirements of Beef Cattle, 7th revised "
        "edition. National Academy Press, Washington, DC.",
        r"NRC 1996|National Research Council,? 1996",
    ),
    Reference(
        "NRC 2007",
        "National Research Council 2007. Nutrient Requirements of Small Ruminants: Sheep, "
        "Goats, Cervids, and New World Camelids. National Academies Press, Washington, DC.",
        r"NRC 2007|National Research Council,? 2007",
    ),
    Reference(
        "NRCS 2003",
        "Natural Resources Conservation Service (USDA) 2003. National Range and Pasture "
        "Handbook, revision 1. USDA NRCS, Washington, DC.",
        r"National Range and Pasture Handbook|NRCS",
    ),
    Reference(
        "Parker et al. 1999",
        "Parker, K.L., Gillingham, M.P., Hanley, T.A. & Robbins, C.T. 1999. Energy and protein "
        "balance of free-ranging black-tailed deer in a natural forest environment. Wildlife "
        "Monographs 143: 1–48.",
        r"Parker et al\.? \(?1999",
    ),
    Reference(
        "Pekins et al. 1998",
        "Pekins, P.J., Smith, K.S. & Mautz, W.W. 1998. The energy cost of gestation in "
        "white-tailed deer. Canadian Journal of Zoology 76(6): 1091–1097.",
        r"Smith & Mautz 1998|Pekins,? (P\.J\.,? )?Smith|Pekins et al\.? \(?1998",
    ),
    Reference(
        "Robbins 1993",
        "Robbins, C.T. 1993. Wildlife Feeding and Nutrition, 2nd edition. Academic Press, "
        "San Diego.",
        r"Robbins,? (C\.T\.,? )?\(?1993",
    ),
    Reference(
        "Robbins et al. 1987",
        "Robbins, C.T., Hanley, T.A., Hagerman, A.E., Hjeljord, O., Baker, D.L., Schwartz, C.C. "
        "& Mautz, W.W. 1987. Role of tannins in defending plants against ruminants: reduction "
        "in protein availability. Ecology 68(1): 98–107.",
        r"Robbins et al\.? \(?1987|Robbins, C\.T\., Hanley",
    ),
    Reference(
        "SRM 1998",
        "Society for Range Management 1998. Glossary of Terms Used in Range Management, 4th "
        "edition. Society for Range Management, Denver, Colorado.",
        r"SRM 1998|Society for Range Management",
    ),
    Reference(
        "Ullrey et al. 1970",
        "Ullrey, D.E., Youatt, W.G., Johnson, H.E., Fay, L.D., Schoepke, B.L. & Magee, W.T. "
        "1970. Digestible and metabolizable energy requirements for winter maintenance of "
        "Michigan white-tailed does. Journal of Wildlife Management 34(4): 863–869.",
        r"Ullrey",
    ),
)

REFERENCE_NOTE = (
    "Bibliographic details (titles, volumes, pages) come from the project's research notes "
    "where these give them and were otherwise recalled; check an entry against the "
    "publication before citing it. Which values were read in which source is kept in the "
    "source column of each parameter table (nutricap/data/*.csv and the project's own tables)."
)


@dataclass(frozen=True)
class ValueToVerify:
    """A value not checked against its original publication, and how it was obtained."""

    value: str
    status: str
    applies_to: str = "any"
    """``"any"`` run, or only one using the slope or distance-to-water rules (``"reductions"``)."""


VALUES_TO_VERIFY = (
    ValueToVerify(
        "Nutritional-state table (nutritional_states.csv): intake i and digestible protein p of "
        "most rows; the autumn lactation row",
        "recalled (from memory); the energy multipliers m were read, partly in secondary copies "
        "(NRC 2007 cervid notes in a scanned copy, Parker et al. 1999 in a secondary table)",
    ),
    ValueToVerify(
        "Digestible-protein equation: tannin (BSA) slope",
        "recalled; the intercept and CP slope were read in a secondary table citing Hanley "
        "et al. 1992",
    ),
    ValueToVerify(
        "Default gross energy of forage, 4.4 kcal/g DM",
        "recalled; not found in the sources read (a secondary text gives 4.5, citing Robbins 1993)",
    ),
    ValueToVerify(
        "Animal-unit body mass 454 kg (1,000 lb) attributed to NRCS 2003",
        "attribution recalled; the handbook's wording was not read",
    ),
    ValueToVerify(
        "Slope reductions of the 11–30 %, 31–60 % and over-60 % classes (Holechek 1988)",
        "recalled: the original table was not read; the 10 % threshold was read in Millward "
        "et al. 2020",
        "reductions",
    ),
    ValueToVerify(
        "Distance-to-water reductions beyond 1.6 km (Holechek 1988)",
        "the 1.6 km (1 mile) threshold was read in Millward et al. 2020; the class values "
        "come from a secondary presentation of the table",
        "reductions",
    ),
)


def cited(texts: Iterable[str]) -> list[Reference]:
    """The references named in any of ``texts``, in the list's (alphabetical) order."""
    joined = "\n".join(str(text) for text in texts)
    return [ref for ref in REFERENCES if re.search(ref.pattern, joined)]


def short_citation(text: str) -> str:
    """The short citations of the references named in ``text``, or ``text`` itself if none.

    A source that names none of the listed references (a user's own table, "invented for the
    example", "common practice") is shown as it is written.
    """
    found = cited([text])
    if not found:
        return str(text)
    shown = "; ".join(ref.short for ref in found)
    if re.search(r"from memory|recalled", str(text)):
        shown += " (partly recalled: see Values to verify)"
    return shown


def values_to_verify(*, reductions: bool) -> list[ValueToVerify]:
    """The entries of the box for a run (the slope and water rows only when they applied)."""
    return [
        entry
        for entry in VALUES_TO_VERIFY
        if entry.applies_to == "any" or (reductions and entry.applies_to == "reductions")
    ]
