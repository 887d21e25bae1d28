"""Every study accounted for, on an invented lab's export whose headers are not ours.

The scenario (invented, no real people): the "Harbourview Heart Unit" exports its study list with
a title row, its own English headers, blood pressure as "128/82" in one column, a blank row and a
trailer row. Facts used: the linear measurements and their phases are the trade's (common practice,
no source); the guideline ranges are those of Lang RM et al., J Am Soc Echocardiogr 2015;28:1.
"""

from __future__ import annotations

import csv
import random
from pathlib import Path

import pandas as pd
from typer.testing import CliRunner

import wallstress
from wallstress.cli import app

runner = CliRunner()

HEADERS = [
    "Exam no.",
    "MRN",
    "Exam date",
    "Gender",
    "Height (cm)",
    "Weight (kg)",
    "BP",
    "Septum thickness (mm)",
    "LV internal dimension diastole",
    "PWall dia (mm)",
    "LV internal dimension systole",
    "Posterior wall systole (mm)",
    "Comment",
]


def _export(folder: Path, n: int = 40, seed: int = 3) -> Path:
    rnd = random.Random(seed)
    rows = [["Harbourview Heart Unit - echo export 2026-11"], [], HEADERS]
    for i in range(n):
        sex = "F" if i % 2 else "M"
        wall = rnd.choice([8, 9, 10, 11, 12, 13])
        lvidd = rnd.choice([44, 46, 48, 50, 52, 55])
        rows.append(
            [
                f"HX{i:05d}",
                f"00{7000 + i}",
                f"2026-0{1 + i % 9}-1{i % 9}",
                sex,
                rnd.choice([158, 165, 172, 180]),
                rnd.choice([58, 66, 74, 88]),
                f"{rnd.choice([118, 132, 146])}/{rnd.choice([76, 84, 92])}",
                wall,
                lvidd,
                wall,
                lvidd - rnd.choice([14, 16, 18]),
                wall + 4,
                "routine",
            ]  # fmt: skip
        )
    rows.append([])
    rows.append([f"End of export: {n} studies"])
    p = folder / "harbourview_export.csv"
    with open(p, "w", newline="", encoding="utf-8") as fh:
        csv.writer(fh, lineterminator="\n").writerows(rows)
    return p


def test_missing_wall_is_loud_and_the_columns_fix_works(tmp_path):
    """The posterior wall's header is not recognised: the run says so on the terminal, names the
    closest header and the --columns line; with that line every study gets LV mass and a class."""
    src = _export(tmp_path)
    r = runner.invoke(app, ["analyse", str(src), "-o", str(tmp_path / "out.csv")])
    assert r.exit_code == 0, r.output
    assert "40 studies" in r.output and "40 without LV mass" in r.output
    assert "No column for pwd_cm" in r.output and "'PWall dia (mm)'" in r.output
    assert "two lines: header,field and PWall dia (mm),pwd_cm" in r.output  # the file to write
    assert "No column for sex" not in r.output  # sex has its own finding
    out = pd.read_csv(tmp_path / "out.csv", dtype=str, keep_default_na=False)
    assert len(out) == 42  # 40 studies, the blank row and the trailer, in their places
    assert out["Exam no."].iloc[0] == "HX00000" and out["MRN"].iloc[0] == "007000"

    fix = tmp_path / "columns.csv"
    fix.write_text("header,field\nPWall dia (mm),pwd_cm\n")
    r = runner.invoke(
        app, ["analyse", str(src), "-o", str(tmp_path / "fixed.csv"), "--columns", str(fix)]
    )
    assert r.exit_code == 0, r.output
    assert "40 studies" in r.output and "0 without LV mass" in r.output
    assert "0 without a geometry class" in r.output
    fixed = pd.read_csv(tmp_path / "fixed.csv", dtype=str, keep_default_na=False)
    studies = fixed[fixed["Exam no."].str.startswith("HX")]
    assert (studies["lv_mass_g"] != "").all() and (studies["geometry"] != "").all()
    trailer = fixed[fixed["Exam no."].str.startswith("End")]
    assert (trailer["flags"] == "").all() and (trailer["lv_mass_g"] == "").all()
    findings = pd.read_csv(tmp_path / "fixed.findings.csv", dtype=str, keep_default_na=False)
    assert "not_a_study" in set(findings["code"])


def test_blood_pressure_cells_are_read(tmp_path):
    """ "128/82" gives SBP 128 and DBP 82, so the wall stress is computed from it."""
    src = _export(tmp_path, n=6)
    fix = tmp_path / "columns.csv"
    fix.write_text("header,field\nPWall dia (mm),pwd_cm\n")
    a = wallstress.analyse_with_findings(
        pd.read_csv(src, skiprows=2, dtype=str, keep_default_na=False).iloc[:6],
        wallstress.Options(columns={"PWall dia (mm)": "pwd_cm"}),
    )
    bp = a.table["BP"].str.split("/", expand=True).astype(float)
    assert (a.canonical["sbp_mmhg"] == bp[0]).all() and (a.canonical["dbp_mmhg"] == bp[1]).all()
    assert a.outputs["mess_kdyn_cm2"].notna().all()


def test_malformed_blood_pressure_is_shown_as_written():
    df = pd.DataFrame({"BP": ["128/82", "12882"], "IVSd": [0.9, 0.9], "LVIDd": [4.7, 4.7],
                       "PWd": [0.9, 0.9]})  # fmt: skip
    f = wallstress.analyse_with_findings(df).findings
    bad = f[f["code"] == "pressure_unreadable"]
    assert bad["row"].tolist() == [1] and bad["value"].tolist() == ["12882"]


def test_no_lv_dimension_at_all_is_exit_1(tmp_path):
    p = tmp_path / "nothing.csv"
    p.write_text("Exam no.,Gender,Height (cm),Weight (kg),Wall-A,Wall-B\nE1,F,160,60,9,9\n")
    r = runner.invoke(app, ["analyse", str(p), "-o", str(tmp_path / "o.csv")])
    assert r.exit_code == 1
    lines = [ln for ln in r.output.splitlines() if ln.strip()]
    assert len(lines) == 1 and "no LV dimension column was recognised" in lines[0]
    assert "--columns" in lines[0]


def test_typos_never_get_a_class():
    """A decimal point or unit typed wrong (PWd 1.1 mm, LVIDd 26 mm, IVSd 35 mm) is outside what an
    adult LV can be: an error, and no LV mass, RWT or class from it (common practice, no source;
    guideline ranges for context from Lang 2015)."""
    df = pd.DataFrame(
        {"sex": ["F", "M", "M"], "height_cm": [160, 175, 175], "weight_kg": [60, 80, 80],
         "IVSd (mm)": [9, 10, 35], "LVIDd (mm)": [47, 26, 50], "PWd (mm)": [1.1, 10, 10]}
    )  # fmt: skip
    a = wallstress.analyse_with_findings(df)
    assert a.outputs["geometry"].astype(str).tolist() == ["", "", ""]
    assert a.outputs["lv_mass_g"].isna().all()
    assert a.outputs["rwt"].isna().tolist() == [True, True, False]  # 2 PWd / LVIDd needs no IVSd
    f = a.findings
    codes = set(zip(f["row"], f["code"], strict=True))
    assert {
        (0, "pwd_cm_impossible"),
        (1, "lvidd_cm_impossible"),
        (2, "ivsd_cm_impossible"),
    } <= codes
    # shown as written, under the user's header
    row0 = f[(f["row"] == 0) & (f["code"] == "pwd_cm_impossible")].iloc[0]
    assert row0["value"] == "1.1" and row0["column"] == "PWd (mm)"


def test_blank_input_names_what_it_stops():
    """An empty flags cell means every measure the row's inputs allow was computed."""
    df = pd.DataFrame(
        {"sex": ["F", "F"], "height_cm": [160, 160], "weight_kg": [60, 60], "sbp_mmhg": [120, None],
         "ivsd_cm": [0.9, 0.9], "lvidd_cm": [4.7, 4.7], "pwd_cm": [None, 0.9],
         "lvids_cm": [3.0, 3.0], "pws_cm": [1.3, 1.3]}
    )  # fmt: skip
    a = wallstress.analyse_with_findings(df)
    flags = a.table["flags"].astype(str).tolist()
    assert "pwd_cm_blank" in flags[0] and "sbp_mmhg_blank" in flags[1]
    msg = a.findings.loc[a.findings["code"] == "pwd_cm_blank", "message"].iloc[0]
    assert "LV mass" in msg and "RWT" in msg and "Geometry" in msg


def test_far_outside_physiology_is_flagged():
    """A wall typed too thin gives a circumferential stress far above physiology (common practice,
    no source): flagged."""
    df = pd.DataFrame({"sex": ["F"], "height_cm": [160], "weight_kg": [60], "sbp_mmhg": [180],
                       "ivsd_cm": [0.9], "lvidd_cm": [5.0], "pwd_cm": [0.9], "lvids_cm": [4.5],
                       "pws_cm": [0.55]})  # fmt: skip
    flags = str(wallstress.analyse(df)["flags"].iloc[0])
    assert "cess_kdyn_cm2_implausible" in flags


def test_other_spellings_and_languages_are_read():
    """Descriptive English, German, French, Spanish and Italian headers name the same fields
    (vocabulary of the trade, common practice, no source)."""
    from wallstress.schema.headers import match_header

    cases = {
        "LV internal dimension diastole": "lvidd_cm",
        "Interventricular septum end diastole": "ivsd_cm",
        "Posterior wall systole": "pws_cm",
        "Diamètre télédiastolique VG (mm)": "lvidd_cm",
        "Septum interventriculaire (mm)": "ivsd_cm",
        "Hinterwand diastolisch": "pwd_cm",
        "Diámetro diastólico VI": "lvidd_cm",
        "Setto interventricolare": "ivsd_cm",
        "Geschlecht": "sex",
        "Größe": "height_cm",
        "Poids (kg)": "weight_kg",
    }
    for header, field in cases.items():
        assert match_header(header)[0] == field, header
    for other in ("Aortic root diameter", "LA diameter", "RV diastolic diameter", "Diameter"):
        assert match_header(other)[0] is None, other


def test_ambiguous_dates_are_one_column_finding_and_the_order_can_be_chosen():
    df = pd.DataFrame({"date": ["04/03/2021", "05/06/2021"], "IVSd": [0.9, 0.9],
                       "LVIDd": [4.7, 4.7], "PWd": [0.9, 0.9]})  # fmt: skip
    a = wallstress.analyse_with_findings(df)
    f = a.findings[a.findings["code"] == "date_order_assumed"]
    assert f["row"].tolist() == [-1] and "--date-order mdy" in f["message"].iloc[0]
    assert a.canonical["study_date"].iloc[0] == pd.Timestamp("2021-03-04")
    b = wallstress.analyse_with_findings(df, wallstress.Options(date_order="mdy"))
    assert b.canonical["study_date"].iloc[0] == pd.Timestamp("2021-04-03")
    assert "date_order_assumed" not in set(b.findings["code"])


def test_trailer_words_only_as_whole_words():
    """ "Total" and "End of export: 40 studies" are trailers; an id such as "NOTE-12" on a row with
    few cells is a study with gaps, flagged as such (common practice, no source)."""
    from wallstress.prepare.rows import _TRAILER

    assert _TRAILER.match("Total") and _TRAILER.match("End of export: 40 studies")
    assert _TRAILER.match("n = 40") and _TRAILER.match("* measured off-axis")
    assert not _TRAILER.match("NOTE-12") and not _TRAILER.match("Summary7")
