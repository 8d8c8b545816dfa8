"""Tests of nutricap.inputs.columns and nutricap.inputs.tables: CSV validation messages."""

import pytest

from nutricap.errors import TableError
from nutricap.inputs.tables import read_animal_classes, read_forage_classes, read_plots


def _csv(tmp_path, name, text, encoding="utf-8"):
    path = tmp_path / name
    path.write_bytes(text.encode(encoding))
    return path


def test_frame_mass_converted_and_blank_class_means_zero_is_left_to_supply(tmp_path):
    path = _csv(
        tmp_path,
        "plots.csv",
        "plot_id,stratum,forage_class,dry_mass_g,frame_area_m2\np1,s,grass,12.5,0.25\n",
    )
    table = read_plots(path)
    # 12.5 g / 0.25 m² = 50 g/m² = 500 kg/ha (SI definitions).
    assert table["biomass_kg_per_ha"].tolist() == [500.0]


def test_missing_column_names_file_and_suggests(tmp_path):
    path = _csv(tmp_path, "plots.csv", "plot_id,stratum,forage_clas,dry_mass_g,frame_area_m2\n")
    with pytest.raises(TableError) as info:
        read_plots(path)
    message = str(info.value)
    assert "plots.csv" in message and "'forage_class'" in message and "did you mean" in message


def test_negative_mass_names_row_and_column(tmp_path):
    path = _csv(
        tmp_path,
        "plots.csv",
        "plot_id,stratum,forage_class,dry_mass_g,frame_area_m2\n"
        "p1,s,grass,1,0.25\np2,s,grass,-3,0.25\n",
    )
    with pytest.raises(TableError, match=r"row 3, column 'dry_mass_g'.*found -3"):
        read_plots(path)


@pytest.mark.parametrize(
    ("text", "where"),
    [
        ("p1,s,grass,1,0.25\np\x002,s,grass,3,0.25\n", r"row 3, column 'plot_id'"),
        ("p1,s,gr\x00ass,1,0.25\n", r"row 2, column 'forage_class'"),
        ("p1,s,grass,1,0.25\n", r"row 1 \(header\), column 5"),
    ],
)
def test_nul_character_refused_with_row_and_column(tmp_path, text, where):
    header = "plot_id,stratum,forage_class,dry_mass_g,frame_area_m2"
    if "header" in where:
        header = header.replace("frame_area_m2", "frame\x00area_m2")
    path = _csv(tmp_path, "plots.csv", header + "\n" + text)
    with pytest.raises(TableError, match=where + r": plots table holds a NUL character") as info:
        read_plots(path)
    assert r"\x00" in str(info.value) and "\x00" not in str(info.value), "shown escaped"


def test_zero_frame_area_refused(tmp_path):
    path = _csv(
        tmp_path,
        "plots.csv",
        "plot_id,stratum,forage_class,dry_mass_g,frame_area_m2\np1,s,grass,1,0\n",
    )
    with pytest.raises(TableError, match=r"row 2, column 'frame_area_m2'.*> 0"):
        read_plots(path)


def test_duplicate_plot_class_refused(tmp_path):
    path = _csv(
        tmp_path,
        "plots.csv",
        "plot_id,stratum,forage_class,biomass_kg_per_ha\np1,s,grass,5\np1,s,grass,6\n",
    )
    with pytest.raises(TableError, match="duplicate entry"):
        read_plots(path)


def test_semicolon_file_refused_clearly(tmp_path):
    path = _csv(
        tmp_path, "plots.csv", "plot_id;stratum;forage_class;biomass_kg_per_ha\np1;s;g;5,5\n"
    )
    with pytest.raises(TableError, match="semicolons"):
        read_plots(path)


def test_non_utf8_refused_clearly(tmp_path):
    path = _csv(
        tmp_path,
        "animals.csv",
        "animal_class,body_mass_kg,share,state\nbiche_âgée,60,1,maintenance\n",
        "latin-1",
    )
    with pytest.raises(TableError, match="not UTF-8"):
        read_animal_classes(path)


def test_absurd_digestible_energy_refused(tmp_path):
    path = _csv(
        tmp_path,
        "forage.csv",
        "forage_class,growth_form,de_kcal_per_g,cp_pct,allowable_use,key,height_cm\n"
        "grass,graminoid,7.5,8,0.5,false,30\n",
    )
    with pytest.raises(TableError, match=r"column 'de_kcal_per_g'.*<= 5"):
        read_forage_classes(path)


def test_allowable_use_above_one_refused(tmp_path):
    path = _csv(
        tmp_path,
        "forage.csv",
        "forage_class,growth_form,de_kcal_per_g,cp_pct,allowable_use,key,height_cm\n"
        "grass,graminoid,2.5,8,50,false,30\n",
    )
    with pytest.raises(TableError, match="allowable_use"):
        read_forage_classes(path)


def test_energy_from_digestibility_when_de_blank(tmp_path):
    path = _csv(
        tmp_path,
        "forage.csv",
        "forage_class,growth_form,de_kcal_per_g,dmd_pct,cp_pct,allowable_use,key,height_cm\n"
        "grass,graminoid,,50,8,0.5,false,30\n",
    )
    table = read_forage_classes(path)
    # DE = GE × DMD: 4.4 kcal/g default gross energy × 0.50 (see forage_quality).
    from nutricap.science.forage_quality import GROSS_ENERGY_KCAL_PER_G_DEFAULT

    assert table["de_kcal_per_g"].iloc[0] == pytest.approx(GROSS_ENERGY_KCAL_PER_G_DEFAULT * 0.5)


def test_shares_must_add_to_one(tmp_path):
    path = _csv(
        tmp_path,
        "animals.csv",
        "animal_class,body_mass_kg,share,state\ndoe,60,0.5,maintenance\nfawn,30,0.2,growth\n",
    )
    with pytest.raises(TableError, match="add up to 1"):
        read_animal_classes(path)


def test_zero_body_mass_refused(tmp_path):
    path = _csv(
        tmp_path, "animals.csv", "animal_class,body_mass_kg,share,state\ndoe,0,1,maintenance\n"
    )
    with pytest.raises(TableError, match="body_mass_kg"):
        read_animal_classes(path)


FORAGE_HEADER = "forage_class,growth_form,de_kcal_per_g,cp_pct,allowable_use,max_diet_share\n"


def test_max_diet_share_above_one_names_row_and_column(tmp_path):
    path = _csv(
        tmp_path, "forage.csv", FORAGE_HEADER + "a,grass,2.0,5,0.5,0.4\nb,browse,2.5,8,0.5,40\n"
    )
    with pytest.raises(TableError, match=r"row 3, column 'max_diet_share'.*found 40"):
        read_forage_classes(path)


def test_max_diet_share_blank_or_absent_means_no_limit(tmp_path):
    path = _csv(
        tmp_path, "forage.csv", FORAGE_HEADER + "a,grass,2.0,5,0.5,\nb,browse,2.5,8,0.5,0.3\n"
    )
    table = read_forage_classes(path)
    assert table["max_diet_share"].isna().tolist() == [True, False]
    without = _csv(
        tmp_path, "plain.csv", "forage_class,de_kcal_per_g,cp_pct,allowable_use\na,2,5,0.5\n"
    )
    assert read_forage_classes(without)["max_diet_share"].isna().all()
