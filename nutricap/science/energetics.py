"""Animal energetics: metabolic body size, requirements by nutritional state, animal units.

Every function is pure and vectorised over body mass (floats or numpy arrays;
a scalar in gives a float out). The per-state parameters (multiple of basal
metabolism, dry-matter intake and digestible-protein need per kg^0.75) live in
``nutricap/data/nutritional_states.csv`` with a ``source`` column, loaded once
into :data:`NUTRITIONAL_STATES`.

The chain of calculations for one animal is

    W^0.75 -> BMR = 70 W^0.75 -> ME = multiplier x BMR -> DE = ME / 0.82
    intake = intake_per_kg075 x W^0.75 ;  DP = dp_per_kg075 x W^0.75
    minimum diet quality = requirement / intake   (Hobbs & Swift 1985)

and a herd is represented by its share-weighted average animal.

References
----------
Kleiber, M. 1961. The Fire of Life: An Introduction to Animal Energetics. Wiley, New York.
Robbins, C.T. 1993. Wildlife Feeding and Nutrition, 2nd ed. Academic Press, San Diego.
National Research Council. 2007. Nutrient Requirements of Small Ruminants: Sheep, Goats,
    Cervids, and New World Camelids. National Academies Press, Washington, DC (cervid
    maintenance and growth coefficients; table notes read in a scanned copy).
Hobbs, N.T. & Swift, D.M. 1985. Estimates of habitat carrying capacity incorporating
    explicit nutritional constraints. J. Wildl. Manage. 49:814-822.
USDA NRCS. National Range and Pasture Handbook (animal unit, animal-unit month).
National Research Council. 1996. Nutrient Requirements of Beef Cattle, 7th rev. ed.
    National Academy Press, Washington, DC (ME/DE = 0.82, p. 126).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from importlib.resources import files

import numpy as np
import pandas as pd
from numpy.typing import ArrayLike

from nutricap.errors import InputError, TableError
from nutricap.science._checks import FloatOrArray, as_output, checked_array

# --- constants -------------------------------------------------------------------------------

#: Kleiber's interspecific constant [kcal / (kg^0.75 day)]: BMR = 70 W^0.75 (Kleiber 1961;
#: value read in secondary summaries of Kleiber's law, e.g. the encyclopaedia entry on it).
KLEIBER_KCAL_PER_KG075_PER_DAY = 70.0

#: Exponent of metabolic body size (Kleiber 1961).
METABOLIC_EXPONENT = 0.75

#: Metabolizable / digestible energy [-]. Read in National Research Council 1996, Nutrient
#: Requirements of Beef Cattle, 7th rev. ed., National Academy Press, p. 126 (nap.edu OpenBook,
#: record 9791): "1 Mcal of DE is equal to 0.82 Mcal of ME (NRC, 1976)". Also read: "ME close to
#: 82 % of DE" for forages in "The net energy value of three subtropical forages", Aust. J.
#: Agric. Res. 18:137-147, 1967, abstract.
ME_PER_DE = 0.82

#: Kilograms per avoirdupois pound (exact, international pound of 1959).
KG_PER_LB = 0.45359237

#: NRCS animal unit: one 1000-lb (453.6 kg) cow, with or without an unweaned calf. Read in
#: secondary sources (NDSU Dickinson REC range research reports; University of Nebraska drought
#: centre planning pages; Ruyle & Ogden, "What is an A.U.M.?", University of Arizona
#: Cooperative Extension, read at studylib.net/doc/10669245: a mature 1,000-pound cow eating
#: 26 lb forage dry matter a day, citing the Society for Range Management glossary), attributed
#: to the National Range and Pasture Handbook from memory.
ANIMAL_UNIT_BODY_MASS_KG = 1000.0 * KG_PER_LB

#: Forage of one animal unit: 26 lb oven-dry forage per day (11.79 kg). Read in the same
#: secondary sources ("26 lbs of oven dried forage per day"); NRPH attribution from memory.
#: Ruyle & Ogden count an AUM as 31 days x 26 lb, "about 800 pounds of air-dried forage";
#: this library uses the 30-day AUM below.
ANIMAL_UNIT_FORAGE_KG_PER_DAY = 26.0 * KG_PER_LB

#: Days in one animal-unit month: 30 (SRM 1998 glossary, read: "a standardized period of
#: 30 animal-unit-days"; the NRPH uses the same from memory).
DAYS_PER_ANIMAL_UNIT_MONTH = 30.0

#: Oven-dry forage of one animal-unit month: 26 lb x 30 = 780 lb (353.8 kg).
AUM_FORAGE_KG = ANIMAL_UNIT_FORAGE_KG_PER_DAY * DAYS_PER_ANIMAL_UNIT_MONTH

#: Season names the parameter lookup accepts ("fall" is read as "autumn").
SEASONS = ("any", "spring", "summer", "autumn", "winter")
_SEASON_ALIASES = {"fall": "autumn"}

STATE_TABLE_NUMERIC_COLUMNS = (
    "bmr_multiplier",
    "intake_g_per_kg075_per_day",
    "dp_g_per_kg075_per_day",
)
STATE_TABLE_COLUMNS = ("state", "season", *STATE_TABLE_NUMERIC_COLUMNS, "source")
_PACKAGED_TABLE = "nutricap/data/nutritional_states.csv"


# --- input checks ----------------------------------------------------------------------------


def _positive_mass(body_mass_kg: ArrayLike) -> np.ndarray:
    return checked_array(body_mass_kg, "body_mass_kg", minimum=0.0, minimum_exclusive=True)


# --- metabolism ------------------------------------------------------------------------------


def metabolic_body_size_kg075(body_mass_kg: ArrayLike) -> FloatOrArray:
    """Metabolic body size W^0.75.

    Parameters
    ----------
    body_mass_kg : float or array_like
        Live body mass W [kg], > 0.

    Returns
    -------
    float or numpy.ndarray
        Metabolic body size [kg^0.75].

    Notes
    -----
    ``W**0.75`` (Kleiber 1961).

    References
    ----------
    Kleiber, M. 1961. The Fire of Life. Wiley, New York.

    Examples
    --------
    >>> metabolic_body_size_kg075(16.0)
    8.0
    """
    return as_output(_positive_mass(body_mass_kg) ** METABOLIC_EXPONENT)


def basal_metabolic_rate_kcal_per_day(body_mass_kg: ArrayLike) -> FloatOrArray:
    """Basal metabolic rate from Kleiber's interspecific equation.

    Parameters
    ----------
    body_mass_kg : float or array_like
        Live body mass W [kg], > 0.

    Returns
    -------
    float or numpy.ndarray
        Basal metabolic rate [kcal/day].

    Notes
    -----
    ``BMR = 70 * W**0.75`` (Kleiber 1961).

    References
    ----------
    Kleiber, M. 1961. The Fire of Life. Wiley, New York.

    Examples
    --------
    >>> basal_metabolic_rate_kcal_per_day(1.0)
    70.0
    """
    return KLEIBER_KCAL_PER_KG075_PER_DAY * metabolic_body_size_kg075(body_mass_kg)


def metabolizable_energy_from_digestible(de_kcal: ArrayLike) -> FloatOrArray:
    """Metabolizable energy from digestible energy.

    Parameters
    ----------
    de_kcal : float or array_like
        Digestible energy, >= 0 [kcal] (or any energy unit, or kcal/g).

    Returns
    -------
    float or numpy.ndarray
        Metabolizable energy in the same unit.

    Notes
    -----
    ``ME = 0.82 * DE`` (NRC; ruminants on forage diets).

    References
    ----------
    National Research Council. 1996. Nutrient Requirements of Beef Cattle, 7th rev. ed.
    National Academy Press, Washington, DC, p. 126 (ME/DE = 0.82, citing NRC 1976).
    """
    return as_output(ME_PER_DE * checked_array(de_kcal, "de_kcal", minimum=0.0))


def digestible_energy_from_metabolizable(me_kcal: ArrayLike) -> FloatOrArray:
    """Digestible energy from metabolizable energy (inverse of the NRC factor).

    Parameters
    ----------
    me_kcal : float or array_like
        Metabolizable energy, >= 0 [kcal] (or any energy unit).

    Returns
    -------
    float or numpy.ndarray
        Digestible energy in the same unit.

    Notes
    -----
    ``DE = ME / 0.82`` (NRC).

    References
    ----------
    National Research Council. 1996. Nutrient Requirements of Beef Cattle, 7th rev. ed.
    National Academy Press, Washington, DC, p. 126 (ME/DE = 0.82, citing NRC 1976).
    """
    return as_output(checked_array(me_kcal, "me_kcal", minimum=0.0) / ME_PER_DE)


# --- parameter table -------------------------------------------------------------------------


def _normalise_name(text: object) -> str:
    """Lower-case, trim and join words with underscores: 'Late gestation' -> 'late_gestation'."""
    return "_".join(str(text).strip().lower().replace("-", " ").split())


def _normalise_season(season: object) -> str:
    name = _normalise_name(season)
    return _SEASON_ALIASES.get(name, name)


def check_nutritional_states(
    table: pd.DataFrame, source: object = "nutritional states"
) -> pd.DataFrame:
    """Validate a nutritional-state parameter table and return a cleaned copy.

    Parameters
    ----------
    table : pandas.DataFrame
        Columns at least :data:`STATE_TABLE_COLUMNS`; one row per (state, season).
    source : str or object
        The table shown in error messages (its file name, or an object the error classes
        take as a source).

    Returns
    -------
    pandas.DataFrame
        Copy with normalised ``state``/``season`` names and float parameter columns.

    Raises
    ------
    nutricap.errors.TableError
        A column is missing, a parameter is not a positive number (``dp`` may be 0),
        a season is unknown or a (state, season) pair repeats. Rows are counted as in a
        spreadsheet (header = row 1).
    """
    missing = [column for column in STATE_TABLE_COLUMNS if column not in table.columns]
    if missing:
        raise TableError(
            "missing columns",
            source=source,
            expected=", ".join(STATE_TABLE_COLUMNS),
            found=", ".join(map(str, table.columns)),
        )
    clean = table.copy()
    clean["state"] = clean["state"].map(_normalise_name)
    clean["season"] = clean["season"].map(_normalise_season)
    for column in STATE_TABLE_NUMERIC_COLUMNS:
        clean[column] = _checked_column(clean, column, source)
    _check_state_keys(clean, source)
    return clean.reset_index(drop=True)


def _checked_column(table: pd.DataFrame, column: str, source: str) -> pd.Series:
    """Numeric column > 0 (``dp`` >= 0), else TableError naming the spreadsheet row."""
    values = pd.to_numeric(table[column], errors="coerce").astype(float)
    floor_ok = values >= 0 if column.startswith("dp_") else values > 0
    bad = ~(np.isfinite(values) & floor_ok)
    if bad.any():
        row = int(np.flatnonzero(bad.to_numpy())[0])
        raise TableError(
            "bad parameter value",
            source=source,
            location=f"row {row + 2}, column {column}",
            expected="a positive number",
            found=repr(table[column].iloc[row]),
        )
    return values


def _check_state_keys(table: pd.DataFrame, source: str) -> None:
    """State names non-empty, seasons known, (state, season) unique."""
    for row, (state, season) in enumerate(zip(table["state"], table["season"], strict=True)):
        location = f"row {row + 2}"
        if not state or state == "nan":
            raise TableError("blank state", source=source, location=location)
        if season not in SEASONS:
            raise TableError(
                "unknown season",
                source=source,
                location=f"{location}, column season",
                expected="one of " + ", ".join(SEASONS),
                found=repr(season),
            )
    duplicated = table.duplicated(["state", "season"])
    if duplicated.any():
        row = int(np.flatnonzero(duplicated.to_numpy())[0])
        raise TableError(
            "state and season repeat an earlier row",
            source=source,
            location=f"row {row + 2}",
        )


def load_nutritional_states() -> pd.DataFrame:
    """Load the packaged parameter table ``nutricap/data/nutritional_states.csv``.

    Returns
    -------
    pandas.DataFrame
        Validated by :func:`check_nutritional_states`.
    """
    resource = files("nutricap") / "data" / "nutritional_states.csv"
    with resource.open("r", encoding="utf-8") as handle:
        table = pd.read_csv(handle, dtype={"state": str, "season": str, "source": str})
    return check_nutritional_states(table, source=_PACKAGED_TABLE)


#: Per-state parameters (see ``nutricap/data/nutritional_states.csv`` and its source column).
NUTRITIONAL_STATES: pd.DataFrame = load_nutritional_states()


def state_parameters(state: str, season: str = "any", *, table: pd.DataFrame | None = None) -> dict:
    """Look up the parameters of one nutritional state.

    Parameters
    ----------
    state : str
        Nutritional state, e.g. ``"maintenance"``, ``"gestation"``, ``"late_gestation"``,
        ``"lactation"``, ``"growth"`` (case and spaces are ignored).
    season : str, default "any"
        ``"any"`` or a season name (``"fall"`` = ``"autumn"``). When the table has no row
        for (state, season) the (state, "any") row is used.
    table : pandas.DataFrame, optional
        A table checked by :func:`check_nutritional_states`; default
        :data:`NUTRITIONAL_STATES`.

    Returns
    -------
    dict
        The row: ``state, season, bmr_multiplier, intake_g_per_kg075_per_day,
        dp_g_per_kg075_per_day, source`` (+ any other columns). ``season`` is the row's
        season, i.e. ``"any"`` after a fall-back.

    Raises
    ------
    nutricap.errors.InputError
        Unknown state (the message lists the known states), unknown season, or no row for
        the season and no "any" row for the state.
    """
    table = NUTRITIONAL_STATES if table is None else table
    rows = table[table["state"] == _state_key(state, table)]
    key_season = _season_key(season)
    for candidate in (key_season, "any"):
        match = rows[rows["season"] == candidate]
        if len(match):
            return {key: _plain(value) for key, value in match.iloc[0].items()}
    raise InputError(
        f"no parameters for nutritional state {state!r} in season {season!r}",
        expected="a season listed for this state: " + ", ".join(sorted(rows["season"])),
        found=repr(season),
    )


def _state_key(state: str, table: pd.DataFrame) -> str:
    key = _normalise_name(state)
    known = sorted(table["state"].unique())
    if key not in known:
        raise InputError(
            f"unknown nutritional state {state!r}",
            expected="one of the known states " + ", ".join(known),
            found=repr(state),
        )
    return key


def _season_key(season: str) -> str:
    key = _normalise_season(season)
    if key not in SEASONS:
        raise InputError(
            f"unknown season {season!r}",
            expected="one of " + ", ".join(SEASONS),
            found=repr(season),
        )
    return key


def _plain(value: object) -> object:
    """numpy scalar -> Python scalar (so the returned dict holds plain floats and strings)."""
    return value.item() if isinstance(value, np.generic) else value


def capacity_ordering_problems(table: pd.DataFrame | None = None) -> list[str]:
    """Rows of a nutritional-state table under which NCC could exceed ECC, in words.

    Parameters
    ----------
    table : pandas.DataFrame, optional
        A table checked by :func:`check_nutritional_states`; default
        :data:`NUTRITIONAL_STATES`.

    Returns
    -------
    list of str
        One sentence per (state, season) that breaks the ordering; empty when NCC <= ECC
        holds for every herd and target state of the table.

    Notes
    -----
    NCC animal-days are days of the herd's average animal eating its intake I_h of a diet of
    DE >= T (T of the target state); ECC animal-days are days of the same animal at
    maintenance, M_h. So NCC <= ECC when T I_h >= M_h (docs/methods.md). With
    T = 70 m_t / (0.82 i_t) and each class c eating i_c W_c^0.75, it holds for every herd
    when, in each season, every state's ``m / i`` is at least maintenance's and every state's
    intake ``i`` is at least maintenance's. A season without its own row uses the state's
    "any" row, as :func:`state_parameters` does.
    """
    table = NUTRITIONAL_STATES if table is None else table
    if "maintenance" not in set(table["state"]):
        return ["the table has no maintenance state, so ECC (at maintenance) is undefined"]
    problems = []
    for season in SEASONS:
        try:
            base = state_parameters("maintenance", season, table=table)
        except InputError:
            continue
        for state in table["state"].unique():
            try:
                row = state_parameters(state, season, table=table)
            except InputError:
                continue
            problems.extend(_ordering_problems(row, base, season))
    return problems


def _ordering_problems(row: dict, base: dict, season: str) -> list[str]:
    intake, base_intake = row["intake_g_per_kg075_per_day"], base["intake_g_per_kg075_per_day"]
    ratio, base_ratio = row["bmr_multiplier"] / intake, base["bmr_multiplier"] / base_intake
    where = f"state {row['state']!r} in season {season!r} (row season {row['season']!r})"
    problems = []
    if ratio < base_ratio * (1.0 - 1e-12):
        problems.append(
            f"{where}: its diet DE threshold (bmr_multiplier / intake = {ratio:.5f}) is below "
            f"maintenance's ({base_ratio:.5f})"
        )
    if intake < base_intake:
        problems.append(f"{where}: its intake {intake:g} is below maintenance's {base_intake:g}")
    return problems


# --- requirements of one animal ----------------------------------------------------------------


def daily_de_requirement_kcal_per_day(
    body_mass_kg: ArrayLike,
    state: str = "maintenance",
    season: str = "any",
    *,
    table: pd.DataFrame | None = None,
) -> FloatOrArray:
    """Daily digestible-energy requirement of a free-ranging animal.

    Parameters
    ----------
    body_mass_kg : float or array_like
        Live body mass W [kg], > 0.
    state, season : str
        Nutritional state and season, see :func:`state_parameters`.
    table : pandas.DataFrame, optional
        Parameter table; default :data:`NUTRITIONAL_STATES`.

    Returns
    -------
    float or numpy.ndarray
        Digestible-energy requirement [kcal/day].

    Notes
    -----
    ``ME = m * 70 * W**0.75`` with ``m`` the state's ``bmr_multiplier`` (each row's source
    column says what was read: NRC 2007 cervid maintenance and the studies it names);
    ``DE = ME / 0.82`` (NRC 1996).

    References
    ----------
    Kleiber 1961; National Research Council 2007, Nutrient Requirements of Small Ruminants.
    """
    multiplier = state_parameters(state, season, table=table)["bmr_multiplier"]
    me = multiplier * basal_metabolic_rate_kcal_per_day(body_mass_kg)
    return digestible_energy_from_metabolizable(me)


def _per_kg075(
    body_mass_kg: ArrayLike, column: str, state: str, season: str, table: pd.DataFrame | None
) -> FloatOrArray:
    """A per-kg^0.75 table parameter times W^0.75."""
    rate = state_parameters(state, season, table=table)[column]
    return rate * metabolic_body_size_kg075(body_mass_kg)


def max_dry_matter_intake_kg_per_day(
    body_mass_kg: ArrayLike,
    state: str = "maintenance",
    season: str = "any",
    *,
    table: pd.DataFrame | None = None,
) -> FloatOrArray:
    """Maximum daily dry-matter intake.

    Parameters
    ----------
    body_mass_kg : float or array_like
        Live body mass W [kg], > 0.
    state, season : str
        Nutritional state and season, see :func:`state_parameters`.
    table : pandas.DataFrame, optional
        Parameter table; default :data:`NUTRITIONAL_STATES`.

    Returns
    -------
    float or numpy.ndarray
        Dry-matter intake [kg/day].

    Notes
    -----
    ``I = i * W**0.75 / 1000`` with ``i`` the state's ``intake_g_per_kg075_per_day``
    [g/(kg^0.75 day)] (mostly from memory: see the table's source column).
    """
    grams = _per_kg075(body_mass_kg, "intake_g_per_kg075_per_day", state, season, table)
    return grams / 1000.0


def daily_dp_requirement_g_per_day(
    body_mass_kg: ArrayLike,
    state: str = "maintenance",
    season: str = "any",
    *,
    table: pd.DataFrame | None = None,
) -> FloatOrArray:
    """Daily digestible-protein requirement.

    Parameters
    ----------
    body_mass_kg : float or array_like
        Live body mass W [kg], > 0.
    state, season : str
        Nutritional state and season, see :func:`state_parameters`.
    table : pandas.DataFrame, optional
        Parameter table; default :data:`NUTRITIONAL_STATES`.

    Returns
    -------
    float or numpy.ndarray
        Digestible-protein requirement [g/day].

    Notes
    -----
    ``DP = p * W**0.75`` with ``p`` the state's ``dp_g_per_kg075_per_day``
    [g/(kg^0.75 day)] (see the table's source column for what was read).
    """
    return _per_kg075(body_mass_kg, "dp_g_per_kg075_per_day", state, season, table)


# --- minimum diet quality (Hobbs & Swift 1985) -----------------------------------------------


def required_diet_de_kcal_per_g(
    de_requirement_kcal_per_day: ArrayLike, intake_kg_per_day: ArrayLike
) -> FloatOrArray:
    """Minimum diet digestible-energy concentration that meets the requirement.

    Parameters
    ----------
    de_requirement_kcal_per_day : float or array_like
        Digestible-energy requirement [kcal/day], >= 0.
    intake_kg_per_day : float or array_like
        Dry-matter intake [kg/day], > 0.

    Returns
    -------
    float or numpy.ndarray
        Required diet digestible energy [kcal/g dry matter].

    Notes
    -----
    ``q_DE = R_DE / (1000 * I)``: the diet quality at which the requirement is met at the
    intake limit (Hobbs & Swift 1985).

    References
    ----------
    Hobbs, N.T. & Swift, D.M. 1985. J. Wildl. Manage. 49:814-822.

    Examples
    --------
    >>> required_diet_de_kcal_per_g(3000.0, 1.25)
    2.4
    """
    requirement = checked_array(
        de_requirement_kcal_per_day, "de_requirement_kcal_per_day", minimum=0.0
    )
    return as_output(requirement / _intake_grams(intake_kg_per_day))


def required_diet_dp_pct(
    dp_requirement_g_per_day: ArrayLike, intake_kg_per_day: ArrayLike
) -> FloatOrArray:
    """Minimum diet digestible-protein content that meets the requirement.

    Parameters
    ----------
    dp_requirement_g_per_day : float or array_like
        Digestible-protein requirement [g/day], >= 0.
    intake_kg_per_day : float or array_like
        Dry-matter intake [kg/day], > 0.

    Returns
    -------
    float or numpy.ndarray
        Required diet digestible protein [% of dry matter].

    Notes
    -----
    ``q_DP = 100 * R_DP / (1000 * I)`` (Hobbs & Swift 1985, applied to protein).

    References
    ----------
    Hobbs, N.T. & Swift, D.M. 1985. J. Wildl. Manage. 49:814-822.
    """
    requirement = checked_array(dp_requirement_g_per_day, "dp_requirement_g_per_day", minimum=0.0)
    return as_output(100.0 * requirement / _intake_grams(intake_kg_per_day))


def _intake_grams(intake_kg_per_day: ArrayLike) -> np.ndarray:
    intake = checked_array(
        intake_kg_per_day, "intake_kg_per_day", minimum=0.0, minimum_exclusive=True
    )
    return 1000.0 * intake


# --- animal units (NRCS National Range and Pasture Handbook) ---------------------------------


def animal_unit_equivalent(body_mass_kg: ArrayLike) -> FloatOrArray:
    """Animal-unit equivalent from the metabolic-weight ratio to a 1000-lb cow.

    Parameters
    ----------
    body_mass_kg : float or array_like
        Live body mass W [kg], > 0.

    Returns
    -------
    float or numpy.ndarray
        Animal-unit equivalent [AU per animal].

    Notes
    -----
    ``AUE = (W / 453.6)**0.75``. The metabolic-weight ratio was read in NDSU range research
    reports (Manske, citing NRC 1996); that the NRPH uses it is from memory. Some agencies use
    a linear 0.1 AU per 100 lb instead (read in extension material); this library uses the
    metabolic ratio.

    References
    ----------
    USDA NRCS. National Range and Pasture Handbook.

    Examples
    --------
    >>> animal_unit_equivalent(453.59237 / 16.0)
    0.125
    """
    ratio = _positive_mass(body_mass_kg) / ANIMAL_UNIT_BODY_MASS_KG
    return as_output(ratio**METABOLIC_EXPONENT)


def animal_unit_months(forage_kg: ArrayLike) -> FloatOrArray:
    """Animal-unit months of forage: a quantity of forage dry matter expressed in AUM.

    Parameters
    ----------
    forage_kg : float or array_like
        Forage dry matter [kg], >= 0: e.g. forage eaten at NCC, or forage usable at allowable
        use.

    Returns
    -------
    float or numpy.ndarray
        Animal-unit months [AUM].

    Notes
    -----
    An AUM is a quantity of forage, the dry matter one animal unit eats in a month:
    26 lb/day x 30 days = 780 lb = 353.8 kg (see :data:`AUM_FORAGE_KG` and the module
    constants for what was read), so ``AUM = forage_kg / 353.8``. It is not animal-days x
    animal-unit equivalent / 30: that would credit every animal with the animal unit's
    26 lb x AUE a day, whatever the intake the capacity was computed with.

    Examples
    --------
    Usable forage of 261,000 kg at 353.8 kg per AUM (worked by hand):

    >>> round(animal_unit_months(261_000.0), 1)
    737.7
    """
    forage = checked_array(forage_kg, "forage_kg", minimum=0.0)
    return as_output(forage / AUM_FORAGE_KG)


# --- herd average --------------------------------------------------------------------------


@dataclass(frozen=True)
class HerdRequirement:
    """Requirements of the share-weighted average animal of a herd.

    Attributes
    ----------
    de_kcal_per_day : float
        Digestible-energy requirement, each class in its own state [kcal/day].
    maintenance_de_kcal_per_day : float
        Same herd with every class at maintenance in the same season [kcal/day].
    intake_kg_per_day : float
        Maximum dry-matter intake [kg/day].
    dp_g_per_day : float
        Digestible-protein requirement [g/day].
    animal_unit_equivalent : float
        Animal-unit equivalent [AU].
    """

    de_kcal_per_day: float
    maintenance_de_kcal_per_day: float
    intake_kg_per_day: float
    dp_g_per_day: float
    animal_unit_equivalent: float

    @property
    def diet_de_kcal_per_g(self) -> float:
        """Minimum diet DE of the average animal [kcal/g] (Hobbs & Swift 1985)."""
        return required_diet_de_kcal_per_g(self.de_kcal_per_day, self.intake_kg_per_day)

    @property
    def diet_dp_pct(self) -> float:
        """Minimum diet DP of the average animal [% of dry matter]."""
        return required_diet_dp_pct(self.dp_g_per_day, self.intake_kg_per_day)


def herd_requirement(
    body_mass_kg: ArrayLike,
    share: ArrayLike,
    state: str | Sequence[str],
    season: str = "any",
    *,
    table: pd.DataFrame | None = None,
) -> HerdRequirement:
    """Requirements of the average animal of a herd made of several animal classes.

    Parameters
    ----------
    body_mass_kg : array_like
        Body mass of each animal class [kg], > 0; shape (k,).
    share : array_like
        Share of each class in the herd, >= 0 (any scale; normalised to sum 1); shape (k,).
    state : str or sequence of str
        Nutritional state of each class (a single string applies to all).
    season : str, default "any"
        Season of the assessment, see :func:`state_parameters`.
    table : pandas.DataFrame, optional
        Parameter table; default :data:`NUTRITIONAL_STATES`.

    Returns
    -------
    HerdRequirement
        Share-weighted means of the per-class requirements, intake and animal units.

    Notes
    -----
    ``X_herd = sum_c s_c * X_c / sum_c s_c`` for every quantity ``X``. The diet thresholds of
    the herd are then ratios of these means (requirement of the average animal over its
    intake), which is what a pooled forage supply must meet.

    Raises
    ------
    nutricap.errors.InputError
        Mismatched lengths, a negative share, shares summing to zero, a bad mass or state.
    """
    mass = np.atleast_1d(_positive_mass(body_mass_kg))
    if mass.ndim != 1:
        raise InputError("body_mass_kg must be one value per animal class", found=f"{mass.shape}")
    weight = _share_weights(share, mass.size)
    states = _class_states(state, mass.size)

    def mean(function, states_used: Sequence[str]) -> float:
        pairs = zip(mass, states_used, strict=True)
        values = [function(m, s, season, table=table) for m, s in pairs]
        return float(np.dot(weight, values))

    return HerdRequirement(
        de_kcal_per_day=mean(daily_de_requirement_kcal_per_day, states),
        maintenance_de_kcal_per_day=mean(
            daily_de_requirement_kcal_per_day, ["maintenance"] * mass.size
        ),
        intake_kg_per_day=mean(max_dry_matter_intake_kg_per_day, states),
        dp_g_per_day=mean(daily_dp_requirement_g_per_day, states),
        animal_unit_equivalent=float(np.dot(weight, animal_unit_equivalent(mass))),
    )


def _share_weights(share: ArrayLike, count: int) -> np.ndarray:
    """Shares normalised to sum 1; InputError for a bad length, a negative or a zero sum."""
    weights = np.atleast_1d(checked_array(share, "share", minimum=0.0))
    if weights.shape != (count,):
        raise InputError(
            "share must give one value per animal class",
            expected=f"{count} values",
            found=f"{weights.size} values",
        )
    total = weights.sum()
    if total <= 0.0:
        raise InputError("animal-class shares sum to zero", expected="a positive sum")
    return weights / total


def _class_states(state: str | Sequence[str], count: int) -> list[str]:
    states = [state] * count if isinstance(state, str) else list(state)
    if len(states) != count:
        raise InputError(
            "state must give one value per animal class",
            expected=f"{count} values",
            found=f"{len(states)} values",
        )
    return states
