"""Cohort tables of follow-up: geometry transitions (first -> last class) and prevalence by year.

References
----------
Ganau A et al. Patterns of left ventricular hypertrophy and geometric remodeling in essential
    hypertension. J Am Coll Cardiol 1992;19:1550-1558 (four geometry classes).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from wallstress.schema.vocabulary import GEOMETRY_CLASSES, OUT

UNDETERMINED = "undetermined"


def _transitions(patients: pd.DataFrame) -> pd.DataFrame:
    """First -> last geometry among patients classified at two or more visits."""
    p = patients[patients["n_visits_with_geometry"] >= 2]
    cat = pd.CategoricalDtype(GEOMETRY_CLASSES)
    counts = pd.crosstab(
        p["geometry_first"].astype(cat), p["geometry_last"].astype(cat), dropna=False
    )
    counts = counts.reindex(index=GEOMETRY_CLASSES, columns=GEOMETRY_CLASSES, fill_value=0)
    long = counts.stack().rename("n_patients").reset_index()
    long.columns = ["from_geometry", "to_geometry", "n_patients"]
    long["from_geometry"] = long["from_geometry"].astype(str)
    long["to_geometry"] = long["to_geometry"].astype(str)
    n_from = long.groupby("from_geometry", sort=False)["n_patients"].transform("sum")
    long["n_from"] = n_from.astype(np.int64)
    long["n_patients"] = long["n_patients"].astype(np.int64)
    with np.errstate(invalid="ignore", divide="ignore"):
        long["row_pct"] = np.where(n_from > 0, long["n_patients"] / n_from * 100.0, np.nan)
    return long


def _prevalence(visits: pd.DataFrame) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Geometry classes by whole year of follow-up (nearest), overall and by sex.

    A patient seen more than once near the same whole year counts once, with the visit closest to it.
    """
    yrs = visits["years_since_baseline"].to_numpy()
    year = np.rint(yrs).astype(np.int64)
    dist = np.abs(yrs - year)
    pid = pd.factorize(visits["patient_id"])[0]
    order = np.lexsort((dist, year, pid))
    t = pd.DataFrame(
        {
            "pid": pid[order],
            "year": year[order],
            OUT.geometry: visits[OUT.geometry].to_numpy()[order],
            "sex": pd.Series(visits["sex"].to_numpy()[order], dtype="string").fillna("unknown"),
        }
    )
    t = t[~t.duplicated(["pid", "year"])]
    t[OUT.geometry] = t[OUT.geometry].where(t[OUT.geometry] != "", UNDETERMINED)
    classes = [*GEOMETRY_CLASSES, UNDETERMINED]

    def table(by: list[str]) -> pd.DataFrame:
        counts = t.groupby([*by, OUT.geometry]).size().unstack(OUT.geometry, fill_value=0)
        counts = counts.reindex(columns=classes, fill_value=0)
        long = counts.stack().rename("n_patients").reset_index()
        seen = long.groupby(by)["n_patients"].transform("sum")
        classified = long["n_patients"].where(long[OUT.geometry] != UNDETERMINED, 0)
        n_cls = classified.groupby([long[b] for b in by]).transform("sum")
        long["n_seen"] = seen.astype(np.int64)
        long["pct_of_seen"] = long["n_patients"] / seen * 100.0
        with np.errstate(invalid="ignore", divide="ignore"):
            long["pct_of_classified"] = np.where(
                (long[OUT.geometry] != UNDETERMINED) & (n_cls > 0),
                long["n_patients"] / n_cls * 100.0,
                np.nan,
            )
        long["n_patients"] = long["n_patients"].astype(np.int64)
        return long.rename(columns={"year": "follow_up_year"})

    return table(["year"]), table(["sex", "year"])
