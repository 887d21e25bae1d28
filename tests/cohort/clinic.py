"""An invented hypertension clinic (Brookvale, fictional; no real people) and its yearly exports.

60 patients followed for 4-6 years between 2018 and 2025, one echocardiogram a year, in 8 yearly
export files. In 2022 the clinic changed echo system: identifiers gained a dash (HT0001 ->
HT-0001), every header changed, LV dimensions went from mm (stated in the headers) to cm (not
stated: the unit is detected from the values), dates from day-first text to ISO dates, blood
pressure from two columns to one ("128/82"). The 2019 export repeats three studies of late 2018,
one with a corrected septum (a conflict). Each patient follows an invented course of LV mass:
regressing (walls thinning 0.065 cm a year), stable, or progressing (thickening 0.065 cm a year),
with measurement noise (SD 0.03 cm per wall).

``write_exports(folder)`` writes the files and returns the truth: patient -> course.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

COURSES = ("regressing", "stable", "progressing")
WALL_RATE_CM_PER_YEAR = {"regressing": -0.065, "stable": 0.0, "progressing": 0.065}
EXPECTED_VERDICT = {
    "regressing": "mass_fell_beyond_noise",
    "stable": "mass_change_within_noise",
    "progressing": "mass_rose_beyond_noise",
}
NEW_SYSTEM_FROM = 2022


def studies(seed: int = 1203) -> tuple[pd.DataFrame, dict[str, str]]:
    """One row per study in canonical terms (cm, mmHg), and each patient's course."""
    rng = np.random.default_rng(seed)
    rows, truth = [], {}
    for p in range(1, 61):
        pid = f"HT{p:04d}"
        course = COURSES[(p - 1) % 3]
        truth[pid] = course
        sex = "F" if p % 2 else "M"
        height = rng.normal(164 if sex == "F" else 177, 6)
        born = int(rng.integers(1945, 1975))
        lvidd = rng.normal(4.7 if sex == "F" else 5.0, 0.25)
        wall0 = rng.normal(1.25 if course == "regressing" else 1.1, 0.05)
        first_year = int(rng.integers(2018, 2021))
        n_visits = int(rng.integers(4, 7))
        years = [y for y in range(first_year, first_year + n_visits) if y <= 2025]
        sbp0 = rng.normal(158, 10)
        for k, year in enumerate(years):
            date = pd.Timestamp(
                year=year, month=int(rng.integers(1, 12)), day=int(rng.integers(1, 28))
            )
            t = k  # one visit a year
            wall = wall0 + WALL_RATE_CM_PER_YEAR[course] * t
            sbp = sbp0 - (
                4 * t if course == "regressing" else -2 * t if course == "progressing" else 0
            )
            ivsd = wall + rng.normal(0, 0.03)
            pwd = wall + rng.normal(0, 0.03)
            lvd = lvidd + rng.normal(0, 0.05)
            rows.append(
                {
                    "patient_id": pid,
                    "study_date": date,
                    "sex": sex,
                    "age_years": year - born,
                    "height_cm": round(height + rng.normal(0, 0.5), 1),
                    "weight_kg": round(rng.normal(82, 10), 1),
                    "sbp_mmhg": round(sbp + rng.normal(0, 6)),
                    "dbp_mmhg": round(sbp * 0.58 + rng.normal(0, 4)),
                    "ivsd_cm": ivsd,
                    "lvidd_cm": lvd,
                    "pwd_cm": pwd,
                    "ivss_cm": ivsd * 1.45,
                    "lvids_cm": lvd * 0.64,
                    "pws_cm": pwd * 1.5,
                }
            )
    df = pd.DataFrame(rows).sort_values(["study_date", "patient_id"]).reset_index(drop=True)
    return df, truth


def _old_system(df: pd.DataFrame, year: int) -> pd.DataFrame:
    mm = lambda c: (df[c] * 10).round(1)  # noqa: E731
    return pd.DataFrame(
        {
            "Patient No": df["patient_id"],
            "Exam No": [f"E{year % 100:02d}-{i:04d}" for i in df["_n"]],
            "Exam date": df["study_date"].dt.strftime("%d.%m.%Y"),
            "Gender": df["sex"],
            "Age": df["age_years"],
            "Height (cm)": df["height_cm"],
            "Weight (kg)": df["weight_kg"],
            "Systolic BP (mmHg)": df["sbp_mmhg"],
            "Diastolic BP (mmHg)": df["dbp_mmhg"],
            "IVSd (mm)": mm("ivsd_cm"),
            "LVIDd (mm)": mm("lvidd_cm"),
            "PWd (mm)": mm("pwd_cm"),
            "IVSs (mm)": mm("ivss_cm"),
            "LVIDs (mm)": mm("lvids_cm"),
            "PWs (mm)": mm("pws_cm"),
        }
    )


def _new_system(df: pd.DataFrame, year: int) -> pd.DataFrame:
    cm = lambda c: df[c].round(2)  # noqa: E731
    return pd.DataFrame(
        {
            "MRN": df["patient_id"].str.replace("HT", "HT-", regex=False),
            "Accession": [f"A{year}-{i:05d}" for i in df["_n"]],
            "Study Date": df["study_date"].dt.strftime("%Y-%m-%d"),
            "Sex": df["sex"].map({"F": "female", "M": "male"}),
            "Age (years)": df["age_years"],
            "Height": df["height_cm"],
            "Weight": df["weight_kg"],
            "BP": df["sbp_mmhg"].astype(int).astype(str)
            + "/"
            + df["dbp_mmhg"].astype(int).astype(str),
            "IVSd": cm("ivsd_cm"),
            "LVIDd": cm("lvidd_cm"),
            "PWd": cm("pwd_cm"),
            "IVSs": cm("ivss_cm"),
            "LVIDs": cm("lvids_cm"),
            "PWs": cm("pws_cm"),
        }
    )


def write_exports(folder: Path) -> dict[str, str]:
    """The 8 yearly exports (2018-2021 .xlsx from the old system, 2022-2025 .csv from the new)."""
    folder.mkdir(parents=True, exist_ok=True)
    df, truth = studies()
    df["_n"] = np.arange(1, len(df) + 1)
    for year in range(2018, 2026):
        part = df[df["study_date"].dt.year == year]
        if year == 2019:  # three late-2018 studies exported again, one septum corrected
            again = df[df["study_date"].dt.year == 2018].tail(3).copy()
            again.loc[again.index[0], "ivsd_cm"] += 0.1
            part = pd.concat([again, part])
        if year < NEW_SYSTEM_FROM:
            table = _old_system(part, year)
            if year == 2019:
                table.loc[table.index[:3], "Exam No"] = [f"E18-{i:04d}" for i in again["_n"]]
            table.to_excel(folder / f"brookvale_echo_{year}.xlsx", index=False)
        else:
            _new_system(part, year).to_csv(folder / f"brookvale_echo_{year}.csv", index=False)
    return truth
