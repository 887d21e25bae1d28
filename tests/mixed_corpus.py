"""A mixed corpus of invented study lists (no real people) for checks that a faster path gives
the same answer: text and integer ids (leading zeros kept), ids mixing numbers and text as a sheet
reader gives them, ISO and day-first text dates, repeats, typo values, missing sex and blank cells.

``python -m tests.mixed_corpus --write`` regenerates the stored findings (tests/data/); do that only
from a commit whose findings are known right, and say so in the commit message.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd

GOLDEN = Path(__file__).resolve().parent / "data" / "mixed_corpus_findings.csv.gz"


def _base(n: int, rng: np.random.Generator) -> pd.DataFrame:
    sex = rng.choice(
        np.array(["F", "M", "f", "male", "", "X"], dtype=object),
        n,
        p=[0.45, 0.45, 0.03, 0.03, 0.02, 0.02],
    )
    lvidd = rng.normal(4.8, 0.5, n).round(2)
    ivsd = rng.normal(1.0, 0.15, n).round(2)
    pwd = rng.normal(0.95, 0.13, n).round(2)
    sbp = rng.normal(138, 18, n).round(0)
    return pd.DataFrame(
        {
            "sex": sex,
            "age_years": rng.uniform(12, 90, n).round(0),
            "height_cm": rng.normal(170, 9, n).round(1),
            "weight_kg": rng.normal(78, 14, n).round(1),
            "sbp_mmhg": sbp,
            "dbp_mmhg": (sbp - rng.normal(55, 10, n)).round(0),
            "hr_bpm": rng.normal(70, 10, n).round(0),
            "ivsd_cm": ivsd,
            "lvidd_cm": lvidd,
            "pwd_cm": pwd,
            "ivss_cm": (ivsd * rng.normal(1.45, 0.15, n)).round(2),
            "lvids_cm": (lvidd * rng.normal(0.64, 0.05, n)).round(2),
            "pws_cm": (pwd * rng.normal(1.55, 0.15, n)).round(2),
        }
    )


def corpus() -> dict[str, pd.DataFrame]:
    """Named invented study lists, each a few hundred rows, seeded (the same on every run)."""
    rng = np.random.default_rng(20261203)
    out: dict[str, pd.DataFrame] = {}
    n = 600
    # text ids with leading zeros, ISO text dates, 1 row in 5 repeated, 2 % typo values
    df = _base(n, rng)
    df.insert(0, "study_id", [f"ST-{i:07d}" for i in rng.integers(0, 480, n)])
    df.insert(1, "patient_id", [f"{i:06d}" for i in rng.integers(0, 150, n)])
    dates = pd.Timestamp("2016-01-01") + pd.to_timedelta(rng.integers(0, 300, n), unit="D")
    df.insert(2, "study_date", dates.strftime("%Y-%m-%d"))
    typo = rng.random(n) < 0.02
    df.loc[typo, "lvidd_cm"] = df.loc[typo, "lvidd_cm"] * 10
    blank = rng.random(n) < 0.03
    df.loc[blank, "study_id"] = None
    out["text_ids_iso_dates"] = df
    # integer ids, day-first text dates, some unreadable, a few negative and zero values
    df = _base(n, rng)
    df.insert(0, "study_id", rng.integers(1000, 1500, n))
    df.insert(1, "patient_id", rng.integers(1, 200, n))
    dates = pd.Timestamp("2019-06-01") + pd.to_timedelta(rng.integers(0, 900, n), unit="D")
    text = pd.Series(dates.strftime("%d/%m/%Y"), dtype=object)
    text[rng.random(n) < 0.03] = "unknown"
    df.insert(2, "study_date", text.to_numpy())
    df.loc[rng.random(n) < 0.02, "pws_cm"] = 0.0
    df.loc[rng.random(n) < 0.02, "sbp_mmhg"] = -120.0
    df.loc[rng.random(n) < 0.02, "height_cm"] = 1.7
    out["int_ids_dayfirst_dates"] = df
    # ids mixing numbers and text (as a sheet gives them: 1001, 1001.0, "A-7", "007")
    df = _base(n, rng)
    pool = np.array([1001, 1001.0, "A-7", "007", 2.5, "x 12", 42, "42", None], dtype=object)
    df.insert(0, "study_id", pool[rng.integers(0, len(pool), n)])
    df.insert(1, "patient_id", pool[rng.integers(0, len(pool), n)])
    out["mixed_type_ids"] = df
    return out


def findings_of_corpus() -> pd.DataFrame:
    """Every corpus list analysed in memory and again read from a CSV file (the reader's text and
    parsed numbers), findings as text with the list's name and path."""
    import tempfile

    import wallstress
    from wallstress.read.studies import read_studies

    parts = []
    with tempfile.TemporaryDirectory() as d:
        for name, df in corpus().items():
            f = wallstress.analyse_with_findings(df).findings.astype(str)
            f.insert(0, "list", f"{name} (in memory)")
            parts.append(f)
            src = Path(d) / f"{name}.csv"
            df.to_csv(src, index=False)
            study = read_studies(src)
            f = wallstress.analyse_with_findings(
                study.table, prior_findings=study.findings, numbers=study.numbers
            ).findings.astype(str)
            f.insert(0, "list", f"{name} (csv)")
            parts.append(f)
    return pd.concat(parts, ignore_index=True).astype(str)


if __name__ == "__main__":
    if "--write" in sys.argv:
        GOLDEN.parent.mkdir(exist_ok=True)
        findings_of_corpus().to_csv(GOLDEN, index=False)
        print("written", GOLDEN)
