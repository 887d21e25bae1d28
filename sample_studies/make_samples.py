"""Make the bundled sample studies. Everything here is INVENTED: no real people, names or records.

Scenario (our own): "Fernhill Community Heart Service", a fictional regional echo lab, and its
fictional hypertension follow-up clinic. Patient and study identifiers are random codes.

    python sample_studies/make_samples.py      # rewrites the files in sample_studies/

Files:
- fernhill_echo_lab.xlsx    the lab's study list (300 studies), headers as a lab might type them,
                            dimensions in mm, plus a notes sheet with a formula, a comment and styles
                            (to show that the workbook comes back intact), and a few rows with typical
                            problems (missing sex, swapped diameters, a value typed in cm, a duplicate)
- fernhill_followup.xlsx    the clinic's cohort: 48 patients, 3 to 6 visits over up to 6 years
- fernhill_normals.csv      healthy volunteers (90 women, 90 men) for 'wallstress calibrate'
"""

from __future__ import annotations

from datetime import date, timedelta
from pathlib import Path

import numpy as np
import pandas as pd
from openpyxl import Workbook
from openpyxl.comments import Comment
from openpyxl.styles import Font, PatternFill
from openpyxl.workbook.defined_name import DefinedName

HERE = Path(__file__).resolve().parent
LAB_HEADERS = {
    "study_id": "Exam ID",
    "patient_id": "Patient",
    "study_date": "Exam date",
    "sex": "Gender",
    "age_years": "Age (y)",
    "height_cm": "Height (cm)",
    "weight_kg": "Weight (kg)",
    "sbp_mmhg": "SBP (mmHg)",
    "dbp_mmhg": "DBP (mmHg)",
    "hr_bpm": "HR (bpm)",
    "ivsd_cm": "IVSd (mm)",
    "lvidd_cm": "LVIDd (mm)",
    "pwd_cm": "LVPWd (mm)",
    "ivss_cm": "IVSs (mm)",
    "lvids_cm": "LVIDs (mm)",
    "pws_cm": "LVPWs (mm)",
    "ejection_time_ms": "LVET (ms)",
}


def _code(rng, prefix, n, width=5):
    return [f"{prefix}{x:0{width}d}" for x in rng.choice(10**width, size=n, replace=False)]


def _hearts(rng, n, sex, *, hypertensive=True, lvh=None):
    """Physiologically plausible linear dimensions [cm], pressures [mmHg], body size."""
    male = sex == "M"
    height = np.where(male, rng.normal(176, 7, n), rng.normal(163, 6.5, n))
    bmi = rng.normal(28 if hypertensive else 24, 4 if hypertensive else 2.5, n).clip(18, 45)
    weight = bmi * (height / 100) ** 2
    lvh = rng.random(n) < (0.35 if hypertensive else 0.0) if lvh is None else lvh
    wall = np.where(male, rng.normal(0.95, 0.09, n), rng.normal(0.85, 0.08, n)) + lvh * rng.normal(
        0.25, 0.08, n
    )
    lvidd = np.where(male, rng.normal(5.0, 0.4, n), rng.normal(4.55, 0.35, n)) + lvh * rng.normal(
        0.2, 0.3, n
    )
    ivsd = wall * rng.normal(1.03, 0.06, n)
    pwd = wall * rng.normal(0.98, 0.05, n)
    sbp = rng.normal(150 if hypertensive else 118, 17 if hypertensive else 10, n)
    # shortening falls as afterload rises (invented, physiologically shaped)
    fs = (
        rng.normal(0.34, 0.03, n) - 0.0015 * (sbp - sbp.mean()) - 0.04 * (lvidd - lvidd.mean())
    ).clip(0.2, 0.46)
    lvids = lvidd * (1 - fs)
    dbp = sbp * rng.normal(0.6, 0.05, n)
    return {
        "height_cm": height,
        "weight_kg": weight,
        "sbp_mmhg": sbp,
        "dbp_mmhg": dbp,
        "hr_bpm": rng.normal(68, 10, n).clip(45, 110),
        "ivsd_cm": ivsd,
        "lvidd_cm": lvidd,
        "pwd_cm": pwd,
        "ivss_cm": _systolic_wall(ivsd, lvidd, lvids) * rng.normal(1.0, 0.04, n),
        "lvids_cm": lvids,
        "pws_cm": _systolic_wall(pwd, lvidd, lvids) * rng.normal(1.0, 0.04, n),
        "ejection_time_ms": rng.normal(295, 22, n),
    }


def _systolic_wall(wall_d, lvidd, lvids):
    """Systolic wall from an incompressible wall ring: (r_s + h_s)^2 - r_s^2 = (r_d + h_d)^2 - r_d^2."""
    rd, rs = lvidd / 2, lvids / 2
    return np.sqrt((rd + wall_d) ** 2 - rd**2 + rs**2) - rs


def _rounded(d):
    out = {}
    for k, v in d.items():
        if k.endswith("_cm") and k != "height_cm":
            out[k] = np.round(v * 10, 0)  # the lab types whole millimetres
        elif k in ("weight_kg", "height_cm"):
            out[k] = np.round(v, 0 if k == "height_cm" else 1)
        else:
            out[k] = np.round(v, 0)
    return out


def lab_studies(rng) -> pd.DataFrame:
    n = 300
    sex = rng.choice(np.array(["F", "M"]), n)
    d = _rounded(_hearts(rng, n, sex))
    start = date(2025, 1, 6)
    df = pd.DataFrame(
        {
            "study_id": _code(rng, "EX", n, 6),
            "patient_id": _code(rng, "FH", n, 5),
            "study_date": [
                start + timedelta(days=int(x)) for x in np.sort(rng.integers(0, 300, n))
            ],
            "sex": np.where(sex == "F", "Female", "Male"),
            "age_years": rng.integers(28, 88, n),
            **d,
        }
    )
    # a few rows with the problems a real export has (all invented)
    df.loc[7, "sex"] = None  # sex not entered
    df.loc[19, ["lvidd_cm", "lvids_cm"]] = df.loc[
        19, ["lvids_cm", "lvidd_cm"]
    ].to_numpy()  # swapped
    df.loc[33, "pwd_cm"] = 1.1  # typed in cm in a mm column
    df.loc[58, "ivsd_cm"] = df.loc[58, "pwd_cm"] * 1.6  # disproportionate septum
    df.loc[71, "sbp_mmhg"] = None  # no pressure taken
    df.loc[90] = df.loc[89]  # exported twice
    df.loc[90, "study_id"] = df.loc[89, "study_id"] + "b"
    df.loc[120, "weight_kg"] = 870  # typing error
    df.loc[150, "study_id"] = "=1+1"  # text that a spreadsheet would run as a formula
    return df.rename(columns=LAB_HEADERS)


def followup(rng) -> pd.DataFrame:
    rows = []
    n_pat = 48
    for k, pid in enumerate(_code(rng, "FC", n_pat, 4)):
        sex = "F" if k % 2 else "M"
        n_vis = int(rng.integers(3, 7))
        years = np.sort(np.concatenate([[0.0], rng.uniform(0.5, 6.0, n_vis - 1)]))
        base = _hearts(rng, 1, np.array([sex]), lvh=np.array([k % 3 != 0]))
        trend = rng.choice(["regress", "stable", "progress"], p=[0.45, 0.35, 0.2])
        wall_rate = {"regress": -0.03, "stable": 0.0, "progress": 0.035}[trend]
        first = date(2019, 1, 1) + timedelta(days=int(rng.integers(0, 700)))
        age0 = int(rng.integers(40, 75))
        for v, yr in enumerate(years):
            noise = lambda s: rng.normal(0, s)  # noqa: E731
            wall_shift = wall_rate * yr
            ivsd = base["ivsd_cm"][0] + wall_shift + noise(0.05)
            pwd = base["pwd_cm"][0] + wall_shift + noise(0.05)
            lvidd = base["lvidd_cm"][0] + noise(0.12) + (0.03 * yr if trend == "progress" else 0)
            fs = float(np.clip(rng.normal(0.34, 0.03), 0.22, 0.45))
            sbp = base["sbp_mmhg"][0] - (12 if trend == "regress" and v else 0) + noise(8)
            rows.append(
                {
                    "patient_id": pid,
                    "visit_date": first + timedelta(days=int(yr * 365.25)),
                    "sex": sex,
                    "age": age0 + int(yr),
                    "height_cm": round(float(base["height_cm"][0]), 0),
                    "weight_kg": round(float(base["weight_kg"][0] + noise(1.5)), 1),
                    "sbp": round(float(sbp)),
                    "dbp": round(float(sbp * 0.6 + noise(3))),
                    "hr": round(float(np.clip(rng.normal(66, 8), 45, 100))),
                    "ivsd_cm": round(float(ivsd), 2),
                    "lvidd_cm": round(float(lvidd), 2),
                    "pwd_cm": round(float(pwd), 2),
                    "ivss_cm": round(float(ivsd * 1.4), 2),
                    "lvids_cm": round(float(lvidd * (1 - fs)), 2),
                    "pws_cm": round(float(pwd * 1.55), 2),
                }
            )
    return pd.DataFrame(rows)


def normals(rng) -> pd.DataFrame:
    n = 180
    sex = np.repeat(np.array(["F", "M"]), n // 2)
    d = _hearts(rng, n, sex, hypertensive=False, lvh=np.zeros(n, bool))
    df = pd.DataFrame(
        {"study_id": _code(rng, "NV", n, 5), "sex": sex, "age_years": rng.integers(22, 65, n), **d}
    )
    return df.round(3)


def _fit_widths(ws) -> None:
    """Columns wide enough for their header and values (dates as yyyy-mm-dd), so that a
    spreadsheet program shows every cell, not ###."""
    from openpyxl.utils import get_column_letter

    for j, column in enumerate(ws.iter_cols(values_only=True), start=1):
        longest = max(
            (10 if hasattr(v, "year") else len(f"{v:.6g}" if isinstance(v, float) else str(v)))
            for v in column
            if v is not None
        )
        ws.column_dimensions[get_column_letter(j)].width = min(40, longest + 3)


def _write_lab_workbook(df: pd.DataFrame, path: Path) -> None:
    wb = Workbook()
    ws = wb.active
    ws.title = "Studies"
    ws.append(list(df.columns))
    for c in ws[1]:
        c.font = Font(bold=True)
        c.fill = PatternFill("solid", fgColor="DDEBF7")
    for rec in df.itertuples(index=False):
        ws.append([None if (isinstance(v, float) and np.isnan(v)) else v for v in rec])
        for cell in ws[ws.max_row]:
            if isinstance(cell.value, str) and cell.value.startswith("="):
                cell.data_type = "s"  # text that looks like a formula stays text in the lab's file
    for cell in ws["C"][1:]:
        cell.number_format = "yyyy-mm-dd"
    ws["A1"].comment = Comment("One row per echocardiogram (invented demo data).", "Fernhill lab")
    ws.freeze_panes = "A2"
    _fit_widths(ws)
    notes = wb.create_sheet("Lab notes")
    notes["A1"] = "Fernhill Community Heart Service (fictional) - study list export"
    notes["A1"].font = Font(bold=True, size=13)
    notes["A3"], notes["B3"] = "Studies in this export", f"=COUNTA(Studies!A2:A{len(df) + 1})"
    notes["A4"], notes["B4"] = "Mean LVIDd [mm]", f"=AVERAGE(Studies!L2:L{len(df) + 1})"
    notes["B3"].comment = Comment("A formula of the lab's own: it must survive.", "Fernhill lab")
    notes.column_dimensions["A"].width = 30
    wb.defined_names["study_rows"] = DefinedName(
        "study_rows", attr_text=f"Studies!$A$2:$Q${len(df) + 1}"
    )
    wb.save(path)


def main() -> None:
    rng = np.random.default_rng(20261201)
    _write_lab_workbook(lab_studies(rng), HERE / "fernhill_echo_lab.xlsx")
    f = followup(rng)
    with pd.ExcelWriter(HERE / "fernhill_followup.xlsx", engine="openpyxl") as xw:
        f.to_excel(xw, sheet_name="Follow-up", index=False)
        ws = xw.sheets["Follow-up"]
        for column in ws.iter_cols(min_row=2):
            for cell in column:
                if hasattr(cell.value, "year"):
                    cell.number_format = "yyyy-mm-dd"
        _fit_widths(ws)
        ws.freeze_panes = "A2"
    normals(rng).to_csv(HERE / "fernhill_normals.csv", index=False)
    print(f"wrote sample studies to {HERE}")


if __name__ == "__main__":
    main()
