"""Tests of nutricap.model.requirements: the run's requirement table and the target diet.

Check values are hand-computed from the Hobbs & Swift (1985) relation (minimum diet quality =
requirement ÷ intake) and Kleiber's 70 W^0.75 with ME = 0.82 DE (NRC 1996, read); the table
rows below are invented for the example and only exercise the arithmetic and the checks.
"""

import pytest

from nutricap.errors import TableError
from nutricap.inputs.project import load_project
from nutricap.workflow import estimate

HEADER = "state,season,bmr_multiplier,intake_g_per_kg075_per_day,dp_g_per_kg075_per_day,source\n"
# Invented for the example: gestation in winter at 2.05 x BMR and 70 g DM/kg^0.75/day.
OWN_TABLE = HEADER + (
    "maintenance,any,1.9,68,2.0,invented for the example\n"
    "gestation,winter,2.05,70,2.1,invented for the example\n"
    "growth,any,2.3,72,3.0,invented for the example\n"
)


def _use_table(project, text):
    (project.parent / "my_states.csv").write_text(text, encoding="utf-8")
    body = project.read_text(encoding="utf-8")
    project.write_text(
        body.replace("[inputs]\n", '[inputs]\nnutritional_states = "my_states.csv"\n'),
        encoding="utf-8",
    )
    return load_project(project)


def test_own_requirement_table_sets_the_target_diet(project):
    result = estimate(_use_table(project, OWN_TABLE))
    # q_DE = 70 m / (0.82 i) = 70 x 2.05 / (0.82 x 70) = 2.5 kcal/g (W cancels; by hand).
    assert result.target.de_min_kcal_per_g == pytest.approx(2.05 / 0.82, rel=1e-12)
    assert result.target.de_min_kcal_per_g == pytest.approx(2.5, rel=1e-12)
    # q_DP = 100 p / i = 100 x 2.1 / 70 = 3.0 % (by hand).
    assert result.target.dp_min_pct == pytest.approx(3.0, rel=1e-12)
    assert (result.requirement_table["source"] == "invented for the example").all()


def test_own_table_asking_less_than_maintenance_gives_a_note(project):
    # Growth at 1.5 x BMR with intake 72: m / i below maintenance's 1.9 / 68.
    text = OWN_TABLE.replace("growth,any,2.3,72", "growth,any,1.5,72")
    result = estimate(_use_table(project, text))
    assert any("my_states.csv" in n and "'growth'" in n and "NCC can exceed ECC" in n
               for n in result.notes)  # fmt: skip


@pytest.mark.parametrize(
    ("old", "new", "where"),
    [
        ("gestation,winter,2.05", "gestation,winter,-2", r"row 3, column 'bmr_multiplier'"),
        ("gestation,winter,2.05,70", "gestation,winter,2.05,lots", r"row 3, column 'intake"),
        ("growth,any", "gestation,winter", r"row 4"),
        ("growth,any", "growth,monsoon", r"row 4, column season"),
    ],
)
def test_own_table_is_validated_with_file_and_row(project, old, new, where):
    with pytest.raises(TableError, match=rf"my_states\.csv.*{where}"):
        estimate(_use_table(project, OWN_TABLE.replace(old, new)))
