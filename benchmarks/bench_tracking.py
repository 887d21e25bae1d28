"""Benchmark of wallstress.tracking.track on an invented cohort (a script, not a test).

100,000 invented patients x 5 visits (500,000 analysed studies, no real people). Reports the time of
``track`` and its ratio against two baselines measured in the same run on the same numbers:

- ``sort+diff``: sort by patient and date, then change from baseline and from the previous visit of
  the same six measures with bare pandas groupby transforms;
- ``groupby slopes``: a bare pandas groupby computing the least-squares slopes of the same four
  measures from grouped sums.

Run:  python benchmarks/bench_tracking.py [n_patients] [n_visits] [repeats]
"""

from __future__ import annotations

import sys
import time

import numpy as np
import pandas as pd

from wallstress.schema.outputs import TRACKED_MEASURES
from wallstress.tracking.per_patient import SLOPE_MEASURES
from wallstress.tracking.track import track

GEOMETRY = ("normal", "concentric_remodelling", "concentric_hypertrophy", "eccentric_hypertrophy")


def invented_cohort(n_patients: int, n_visits: int, seed: int = 1) -> pd.DataFrame:
    """An analysed-looking frame of invented studies, shuffled so that track has to sort."""
    rng = np.random.default_rng(seed)
    n = n_patients * n_visits
    pid = np.repeat(np.arange(n_patients), n_visits)
    visit = np.tile(np.arange(n_visits), n_patients)
    start = np.datetime64("2010-01-01") + rng.integers(0, 3650, n_patients).astype("timedelta64[D]")
    days = visit * 365 + rng.integers(-30, 31, n) * (visit > 0)
    date = np.repeat(start, n_visits) + days.astype("timedelta64[D]")
    sex = np.where(np.repeat(rng.random(n_patients) < 0.5, n_visits), "F", "M")
    mass = np.repeat(rng.normal(190, 40, n_patients), n_visits) + rng.normal(0, 12, n) - 5 * visit
    frame = pd.DataFrame(
        {
            "patient_id": pd.Series(pid).map("P{:06d}".format),
            "study_id": np.arange(n),
            "study_date": date,
            "sex": sex,
            "height_cm": np.repeat(rng.normal(170, 9, n_patients), n_visits),
            "weight_kg": rng.normal(78, 12, n),
            "age_years": np.repeat(rng.uniform(30, 80, n_patients), n_visits) + visit,
            "lv_mass_g": mass,
            "lvmi_bsa_g_m2": mass / 1.9,
            "lvmi_h27_g_m2_7": mass / 4.2,
            "rwt": rng.normal(0.42, 0.05, n),
            "mess_kdyn_cm2": rng.normal(65, 15, n),
            "cess_kdyn_cm2": rng.normal(160, 30, n),
            "geometry": rng.choice(GEOMETRY, n),
            "flags": "",
        }
    )
    return frame.sample(frac=1.0, random_state=seed).reset_index(drop=True)


def baseline_sort_diff(df: pd.DataFrame) -> pd.DataFrame:
    s = df.sort_values(["patient_id", "study_date", "study_id"])
    g = s.groupby("patient_id", sort=False)
    cols = [m for m, _, _ in TRACKED_MEASURES]
    return pd.concat([s[cols] - g[cols].transform("first"), g[cols].diff()], axis=1)


def baseline_groupby_slopes(df: pd.DataFrame) -> pd.DataFrame:
    s = df.sort_values(["patient_id", "study_date", "study_id"])
    years = (
        s["study_date"] - s.groupby("patient_id")["study_date"].transform("min")
    ).dt.days / 365.25
    out = {}
    for col in SLOPE_MEASURES:
        t = pd.DataFrame({"p": s["patient_id"], "x": years, "y": s[col]})
        t["xx"], t["xy"] = t["x"] * t["x"], t["x"] * t["y"]
        sums = t.groupby("p", sort=False).agg(
            n=("x", "size"), x=("x", "sum"), y=("y", "sum"), xx=("xx", "sum"), xy=("xy", "sum")
        )
        sxx = sums["xx"] - sums["x"] ** 2 / sums["n"]
        out[col] = (sums["xy"] - sums["x"] * sums["y"] / sums["n"]) / sxx
    return pd.DataFrame(out)


def best_of(fn, repeats: int) -> float:
    best = float("inf")
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def main(argv: list[str]) -> None:
    n_patients = int(argv[1]) if len(argv) > 1 else 100_000
    n_visits = int(argv[2]) if len(argv) > 2 else 5
    repeats = int(argv[3]) if len(argv) > 3 else 3
    df = invented_cohort(n_patients, n_visits)
    print(
        f"invented cohort: {n_patients:,} patients x {n_visits} visits = {len(df):,} studies; "
        f"best of {repeats}"
    )
    t_diff = best_of(lambda: baseline_sort_diff(df), repeats)
    t_slope = best_of(lambda: baseline_groupby_slopes(df), repeats)
    t_track = best_of(lambda: track(df), repeats)
    t_last = best_of(lambda: track(df, same_day="last"), repeats)
    rows = [
        ("baseline: sort + diff (pandas)", t_diff),
        ("baseline: groupby slopes (pandas)", t_slope),
        ("track(same_day='mean')", t_track),
        ("track(same_day='last')", t_last),
    ]
    print(f"{'what':38s} {'seconds':>9s} {'x sort+diff':>12s} {'x slopes':>9s}")
    for name, t in rows:
        print(f"{name:38s} {t:9.3f} {t / t_diff:12.2f} {t / t_slope:9.2f}")
    r = track(df)
    print(f"patients {len(r.patients):,}, visits {len(r.visits):,}, findings {len(r.findings):,}")


if __name__ == "__main__":
    main(sys.argv)
