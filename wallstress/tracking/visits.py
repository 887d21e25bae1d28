"""From analysed studies to one row per patient and study day, with findings on what was left out.

Takes the columns follow-up uses under fixed names, leaves out (with a finding) studies without a
patient identifier or date, checks each patient's studies for a sex that changes or an adult height
that changes by more than ``HEIGHT_CHANGE_LIMIT_CM``, and collapses several studies of one patient on
one day into one visit (``same_day`` rule ``mean`` or ``last``). All grouped and vectorised.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.analysis.pipeline import analyse_with_findings
from wallstress.errors import InputError
from wallstress.schema.outputs import TRACKED_MEASURES
from wallstress.schema.vocabulary import OUT
from wallstress.tracking.cohort_tables import GEOMETRY_CLASSES

SAME_DAY_RULES: tuple[str, ...] = ("mean", "last")


BODY_COLUMNS: tuple[str, ...] = ("height_cm", "weight_kg", "age_years")
# followed like the tracked measures: the cuff pressures beside the wall stress they load
FOLLOWED: tuple[tuple[str, str, str], ...] = (
    *TRACKED_MEASURES,
    ("sbp_mmhg", "sbp", "mmhg"),
    ("dbp_mmhg", "dbp", "mmhg"),
)


DAYS_PER_YEAR = 365.25  # Julian year


_NS_PER_DAY = 86_400 * 10**9


HEIGHT_CHANGE_LIMIT_CM = (
    5.0  # adult height change that suggests an entry error: common practice, no source
)


ADULT_AGE_YEARS = 18.0  # common practice, no source


def _as_frame(studies, options) -> pd.DataFrame:
    if hasattr(studies, "frame") and callable(studies.frame):
        return studies.frame()
    if not isinstance(studies, pd.DataFrame):
        raise InputError(
            f"track needs an Analysis or a DataFrame of studies, got {type(studies).__name__}"
        )
    if OUT.lv_mass_g in studies.columns:
        return studies

    return analyse_with_findings(studies, options).frame()


def _patient_key(pid: pd.Series) -> tuple[np.ndarray, np.ndarray]:
    """Codes (0..G-1, in sorted id order; -1 missing) and the unique ids."""
    if pid.dtype.kind in "iuf":
        key = pid
    else:
        text = pid.astype("string").str.strip()
        key = text.mask(text == "")
    codes, uniques = pd.factorize(key, sort=True)
    return codes.astype(np.int64), np.asarray(uniques, dtype=object)


def _study_order(study_id: pd.Series) -> np.ndarray:
    """Sort codes of study ids: numerically when they all are numbers, else as text."""
    num = pd.to_numeric(study_id, errors="coerce")
    key = num if num.notna().sum() == study_id.notna().sum() else study_id.astype("string")
    codes, _ = pd.factorize(key, sort=True)
    return codes


def _dates_ns(values: pd.Series) -> np.ndarray:
    """Dates as int64 nanoseconds since the epoch (NaT -> int64 min)."""
    s = values
    if not pd.api.types.is_datetime64_any_dtype(s):
        s = pd.to_datetime(s, errors="coerce")
    if getattr(s.dt, "tz", None) is not None:
        s = s.dt.tz_convert(None)
    return s.astype("datetime64[ns]").to_numpy().view("int64")


def _prepare(frame: pd.DataFrame) -> tuple[pd.DataFrame, list[pd.DataFrame], dict, np.ndarray]:
    """Columns tracking uses, under fixed names; rows that cannot be placed are left out with a finding."""
    if "patient_id" not in frame.columns:
        raise InputError(
            "no patient identifier column: add one named patient_id or map yours with --columns"
        )
    if "study_date" not in frame.columns:
        raise InputError(
            "no study date column: add one named study_date or map yours with --columns "
            "(follow-up needs the date of each study)"
        )
    n = len(frame)
    out = pd.DataFrame({"input_row": np.arange(n, dtype=np.int64)})
    codes, uniques = _patient_key(frame["patient_id"].reset_index(drop=True))
    out["pcode"] = codes
    out["date_ns"] = _dates_ns(frame["study_date"].reset_index(drop=True))
    if "study_id" in frame.columns:
        out["study_id"] = frame["study_id"].to_numpy(dtype=object)
        out["sid_order"] = _study_order(frame["study_id"].reset_index(drop=True))
    else:
        out["study_id"] = np.full(n, "", dtype=object)
        out["sid_order"] = np.zeros(n, dtype=np.int64)
    if "sex" in frame.columns:
        sex = frame["sex"].astype("string").str.strip().str.upper().reset_index(drop=True)
        out["sex"] = sex.where(sex.isin(["F", "M"]))
    else:
        out["sex"] = pd.Series(pd.NA, index=out.index, dtype="string")
    for col in (*(m for m, _, _ in FOLLOWED), *BODY_COLUMNS):
        if col in frame.columns:
            out[col] = pd.to_numeric(frame[col].reset_index(drop=True), errors="coerce").astype(
                float
            )
        else:
            out[col] = np.nan
    if OUT.geometry in frame.columns:
        g = frame[OUT.geometry].astype("string").fillna("").reset_index(drop=True)
        out[OUT.geometry] = g.where(g.isin(GEOMETRY_CLASSES), "").astype(object)
    else:
        out[OUT.geometry] = ""
    if OUT.flags in frame.columns:
        out[OUT.flags] = (
            frame[OUT.flags].astype("string").fillna("").reset_index(drop=True).astype(object)
        )
    else:
        out[OUT.flags] = ""

    found = []
    no_pid = codes < 0
    if no_pid.any():
        found.append(
            fnd.make(
                np.flatnonzero(no_pid),
                code="no_patient_id",
                severity="warning",
                column="patient_id",
                field="patient_id",
                message="study has no patient identifier: left out of follow-up; fill in patient_id",
            )
        )
    no_date = (out["date_ns"].to_numpy() == np.iinfo(np.int64).min) & ~no_pid
    if no_date.any():
        rows = np.flatnonzero(no_date)
        found.append(
            fnd.make(
                rows,
                code="no_study_date",
                severity="warning",
                column="study_date",
                field="study_date",
                values=frame["study_date"].to_numpy(dtype=object)[rows],
                message="study date missing or not a date: left out of follow-up; give the study date",
            )
        )
    used = out[~no_pid & ~no_date].reset_index(drop=True)
    counts = {
        "studies_in": n,
        "studies_without_patient_id": int(no_pid.sum()),
        "studies_without_date": int(no_date.sum()),
    }
    return used, found, counts, uniques


def _collapse_same_day(s: pd.DataFrame, rule: str) -> tuple[pd.DataFrame, list[pd.DataFrame]]:
    """One row per patient and day. ``s`` is sorted by patient, date, study id, input row."""
    day = s["date_ns"].to_numpy() // _NS_PER_DAY
    pc = s["pcode"].to_numpy()
    new_day = np.ones(len(s), dtype=bool)
    new_day[1:] = (pc[1:] != pc[:-1]) | (day[1:] != day[:-1])
    visit_id = np.cumsum(new_day) - 1
    sizes = np.bincount(visit_id)
    in_dup = sizes[visit_id] > 1
    s = s.assign(merged_rows="", n_same_day=sizes[visit_id])
    if not in_dup.any():
        return s, []
    found = []
    dup = s[in_dup]
    dup_visit = visit_id[in_dup]
    is_last = np.r_[dup_visit[1:] != dup_visit[:-1], True]
    rows_text = dup["input_row"].astype(str).groupby(dup_visit, sort=False).agg(";".join)
    if rule == "last":
        dropped = dup.loc[~is_last, "input_row"].to_numpy()
        found.append(
            fnd.make(
                dropped,
                code="same_day_superseded",
                severity="note",
                column="study_date",
                field="study_date",
                message="another study of this patient on the same day comes later: only the last "
                "study of the day is used in follow-up",
            )
        )
        kept = dup[is_last].copy()
        kept["merged_rows"] = rows_text.to_numpy()
        return pd.concat([s[~in_dup], kept]).sort_index(kind="stable"), found

    # rule == "mean": numeric measures averaged; geometry kept only when every study of the day agrees
    g = dup.groupby(dup_visit, sort=False)
    num_cols = [m for m, _, _ in FOLLOWED] + list(BODY_COLUMNS)
    merged = dup[is_last].copy()
    merged[num_cols] = g[num_cols].mean().to_numpy()
    sex = g["sex"].last()  # last non-missing value
    merged["sex"] = sex.to_numpy()
    geo = dup[OUT.geometry].where(dup[OUT.geometry] != "")
    n_geo = geo.groupby(dup_visit, sort=False).nunique()
    n_blank = (dup[OUT.geometry] == "").groupby(dup_visit, sort=False).sum()
    agree = (n_geo == 1) & (n_blank == 0)
    merged[OUT.geometry] = np.where(
        agree.to_numpy(), geo.groupby(dup_visit, sort=False).last().to_numpy(), ""
    )
    merged["study_id"] = (
        dup["study_id"].astype(str).groupby(dup_visit, sort=False).agg(";".join).to_numpy()
    )
    merged[OUT.flags] = (
        dup[OUT.flags]
        .groupby(dup_visit, sort=False)
        .agg(lambda x: ";".join(dict.fromkeys(c for f in x for c in f.split(";") if c)))
        .to_numpy()
    )
    merged["merged_rows"] = rows_text.to_numpy()
    found.append(
        fnd.make(
            dup["input_row"].to_numpy(),
            code="same_day_averaged",
            severity="note",
            column="study_date",
            field="study_date",
            message="several studies of this patient on the same day: their measures are averaged into "
            "one visit",
        )
    )
    disagree_rows = dup["input_row"].to_numpy()[~agree.reindex(dup_visit).to_numpy(dtype=bool)]
    if disagree_rows.size:
        found.append(
            fnd.make(
                disagree_rows,
                code="same_day_geometry_differs",
                severity="warning",
                column=OUT.geometry,
                field=OUT.geometry,
                message="studies of the same day give different geometry classes: the visit's geometry "
                "is left undecided; review the measurements",
            )
        )
    return pd.concat([s[~in_dup], merged]).sort_index(kind="stable"), found


def _consistency_findings(s: pd.DataFrame) -> list[pd.DataFrame]:
    """Sex that changes and adult height that changes by more than 5 cm (``s`` sorted)."""
    found = []
    keys = s["pcode"]
    n_sex = s["sex"].groupby(keys, sort=False).transform("nunique").to_numpy()
    rows = s.index.to_numpy()[(n_sex > 1) & s["sex"].notna().to_numpy()]
    if rows.size:
        found.append(
            fnd.make(
                s.loc[rows, "input_row"].to_numpy(),
                code="sex_changed",
                severity="warning",
                column="sex",
                field="sex",
                values=s.loc[rows, "sex"].to_numpy(dtype=object),
                message="sex differs between this patient's studies: sex-specific cut-offs may be wrong; "
                "check the patient identifier and sex",
            )
        )
    age = s["age_years"].to_numpy()
    adult_h = s["height_cm"].where(~(age < ADULT_AGE_YEARS))
    g = adult_h.groupby(keys, sort=False)
    spread = (g.transform("max") - g.transform("min")).to_numpy()
    with np.errstate(invalid="ignore"):
        bad = (spread > HEIGHT_CHANGE_LIMIT_CM) & adult_h.notna().to_numpy()
    if bad.any():
        found.append(
            fnd.make(
                s["input_row"].to_numpy()[bad],
                code="height_changed",
                severity="warning",
                column="height_cm",
                field="height_cm",
                values=s["height_cm"].to_numpy()[bad],
                message=f"adult height differs by more than {HEIGHT_CHANGE_LIMIT_CM:g} cm between this "
                "patient's studies: indexed LV mass may be wrong; check height and patient identifier",
            )
        )
    return found


def _single_study_findings(
    s: pd.DataFrame, group_pcode, n_visits, n_codes: int
) -> list[pd.DataFrame]:
    """A note on every study of a patient with a single visit."""
    is_single = np.zeros(n_codes, dtype=bool)
    is_single[group_pcode[n_visits == 1]] = True
    rows = s["input_row"].to_numpy()[is_single[s["pcode"].to_numpy()]]
    if rows.size == 0:
        return []
    return [
        fnd.make(
            rows,
            code="single_study",
            severity="note",
            column="patient_id",
            field="patient_id",
            message="only one study (day) of this patient: kept, but no change or trend can be judged",
        )
    ]
