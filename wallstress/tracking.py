"""Follow-up over years: each patient's remodelling judged against measurement reproducibility.

``track`` takes analysed studies (an :class:`~wallstress.result.Analysis`, a frame with canonical and
output columns, or a raw study list, which it analyses first) and returns, in one :class:`Tracking`:

- ``visits``: one row per patient and study day, in date order, with the change of LV mass, both LV
  mass indexes, RWT and the end-systolic stresses from baseline and from the previous visit, and
  whether each LV mass change reaches the least significant change (LSC);
- ``patients``: one row per patient: span, first and last values, least-squares slopes per year with
  95 % confidence intervals, first and last geometry, and a verdict (codes and plain words);
- ``transitions``: the cohort's movement from first to last geometry class (counts and row %);
- ``prevalence_by_year`` and ``prevalence_by_sex``: the geometry classes by whole year of follow-up;
- ``findings``: what could not be trusted, by position of the study in the input;
- ``methods``: every rule used, with its source.

Everything is computed with grouped, vectorised operations (sort once, then ``bincount`` and
``groupby`` transforms); there is no Python loop over patients on the hot path.

These summaries support, and never replace, a qualified clinician's judgement and the local lab's
protocols and reference values.

References
----------
Bland JM, Altman DG. Measurement error. BMJ 1996;313:744 (within-subject SD, repeatability
    1.96 * sqrt(2) * Sw).
Palmieri V et al. Reliability of echocardiographic assessment of left ventricular structure and
    function: the PRESERVE study. J Am Coll Cardiol 1999;34:1625-1632 (LV mass change of 35 g or
    more is real with >= 95 % likelihood).
Ganau A et al. Patterns of left ventricular hypertrophy and geometric remodeling in essential
    hypertension. J Am Coll Cardiol 1992;19:1550-1558 (four geometry classes).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy import stats

from . import findings as fnd
from .errors import InputError

SAME_DAY_RULES: tuple[str, ...] = ("mean", "last")

GEOMETRY_CLASSES: tuple[str, ...] = (
    "normal",
    "concentric_remodelling",
    "concentric_hypertrophy",
    "eccentric_hypertrophy",
)
UNDETERMINED = "undetermined"
HYPERTROPHY = ("concentric_hypertrophy", "eccentric_hypertrophy")

# (canonical column, stem used in derived names, unit suffix; "" for unitless)
MEASURES: tuple[tuple[str, str, str], ...] = (
    ("lv_mass_g", "lv_mass", "g"),
    ("lvmi_bsa_g_m2", "lvmi_bsa", "g_m2"),
    ("lvmi_h27_g_m2_7", "lvmi_h27", "g_m2_7"),
    ("rwt", "rwt", ""),
    ("mess_kdyn_cm2", "mess", "kdyn_cm2"),
    ("cess_kdyn_cm2", "cess", "kdyn_cm2"),
)
SLOPE_MEASURES: tuple[str, ...] = ("lv_mass_g", "lvmi_bsa_g_m2", "lvmi_h27_g_m2_7", "rwt")
BODY_COLUMNS: tuple[str, ...] = ("height_cm", "weight_kg", "age_years")

# Bland & Altman: 95 % of differences between two measurements of one subject lie within
# 1.96 * sqrt(2) * Sw (the published rounding of the normal quantile is kept on purpose).
_Z95 = 1.96
DAYS_PER_YEAR = 365.25  # Julian year
_NS_PER_DAY = 86_400 * 10**9
HEIGHT_CHANGE_LIMIT_CM = (
    5.0  # adult height change that suggests an entry error: common practice, no source
)
ADULT_AGE_YEARS = 18.0  # common practice, no source
CONFIDENCE = 0.95

CAUTION = (
    "These follow-up summaries support, and never replace, a qualified clinician's judgement and the "
    "local lab's protocols and reference values."
)

MASS_VERDICT_TEXT: dict[str, str] = {
    "single_study": "single study: no trend",
    "mass_not_assessable": "LV mass not available at two visits: change not judged",
    "mass_fell_beyond_noise": "LV mass fell beyond the measurement's reproducibility",
    "mass_rose_beyond_noise": "LV mass rose beyond the measurement's reproducibility",
    "mass_change_within_noise": "change in LV mass within measurement noise",
}
GEOMETRY_VERDICT_TEXT: dict[str, str] = {
    "single_study": "",
    "geometry_not_assessable": "geometry not classified at two visits",
    "geometry_unchanged": "geometry class unchanged",
    "hypertrophy_regressed_to_normal": "hypertrophy regressed to normal geometry",
    "hypertrophy_regressed_to_remodelling": "hypertrophy regressed to concentric remodelling",
    "remodelling_resolved": "concentric remodelling resolved to normal geometry",
    "developed_remodelling": "normal geometry became concentric remodelling",
    "progressed_to_hypertrophy": "progressed to hypertrophy",
    "hypertrophy_pattern_changed": "hypertrophy changed between concentric and eccentric",
}


@dataclass
class Tracking:
    """Result of :func:`track`.

    Attributes
    ----------
    visits, patients, transitions, prevalence_by_year, prevalence_by_sex : DataFrame
        See the module docstring; column names carry their units.
    findings : DataFrame
        Findings table (``wallstress.findings.FINDING_COLUMNS``); ``row`` is the position of the study
        in the input given to :func:`track`.
    methods : dict
        Rules, constants and sources used, with counts and the caution.
    """

    visits: pd.DataFrame
    patients: pd.DataFrame
    transitions: pd.DataFrame
    prevalence_by_year: pd.DataFrame
    prevalence_by_sex: pd.DataFrame
    findings: pd.DataFrame = field(default_factory=fnd.empty)
    methods: dict = field(default_factory=dict)


# ---------------------------------------------------------------------------------------------
# Reproducibility
# ---------------------------------------------------------------------------------------------


def within_subject_sd(first, second) -> float:
    """Within-subject standard deviation from pairs of repeat measurements.

    Parameters
    ----------
    first, second : array-like
        The first and the repeat measurement of each subject, same length (e.g. LV mass [g]).
        Pairs with a NaN are left out.

    Returns
    -------
    float
        Sw in the unit of the measurements; NaN when no complete pair is given.

    Notes
    -----
    ``Sw = sqrt(sum(d^2) / (2 n))`` with ``d`` the difference within a pair and ``n`` the number of
    complete pairs: the mean of the per-subject variances (ddof = 1) of two measurements.

    References
    ----------
    Bland JM, Altman DG. Measurement error. BMJ 1996;313:744.

    >>> round(within_subject_sd([100, 200, 150], [110, 190, 150]), 4)
    5.7735
    """
    a = np.asarray(first, dtype=float).ravel()
    b = np.asarray(second, dtype=float).ravel()
    if a.shape != b.shape:
        raise ValueError(
            f"first and second must have the same length (got {a.size} and {b.size}): "
            "pass one repeat measurement per first measurement"
        )
    d = a - b
    d = d[~np.isnan(d)]
    if d.size == 0:
        return float("nan")
    return float(np.sqrt(np.sum(d * d) / (2 * d.size)))


def least_significant_change(within_sd):
    """Least significant change: the smallest difference between two measurements that is real.

    Parameters
    ----------
    within_sd : float or array-like
        Within-subject standard deviation Sw (e.g. of LV mass [g]).

    Returns
    -------
    float or ndarray
        ``1.96 * sqrt(2) * Sw`` in the unit of Sw (about 2.77 Sw). NaN in, NaN out.

    References
    ----------
    Bland JM, Altman DG. Measurement error. BMJ 1996;313:744.

    >>> round(least_significant_change(10.0), 3)
    27.719
    """
    sw = np.asarray(within_sd, dtype=float)
    out = _Z95 * math.sqrt(2.0) * sw
    return float(out) if out.ndim == 0 else out


def _positive(name: str, value) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a positive number of grams, got {value!r}") from None
    if not np.isfinite(v) or v <= 0:
        raise ValueError(f"{name} must be a positive number of grams, got {value!r}")
    return v


def _resolve_lsc(options, within_subject_sd_g, lsc_g) -> tuple[float, dict]:
    """The LSC of LV mass [g] and the record of where it came from."""
    if within_subject_sd_g is not None and lsc_g is not None:
        raise ValueError(
            "give either within_subject_sd_g or lsc_g, not both: the LSC is computed from Sw "
            f"(got within_subject_sd_g={within_subject_sd_g!r}, lsc_g={lsc_g!r})"
        )
    if lsc_g is not None:
        v = _positive("lsc_g", lsc_g)
        return v, {
            "lsc_lv_mass_g": v,
            "basis": "least significant change given by the user",
            "source": "user",
            "verified": "lab",
        }
    if within_subject_sd_g is not None:
        sw = _positive("within_subject_sd_g", within_subject_sd_g)
        v = least_significant_change(sw)
        return v, {
            "lsc_lv_mass_g": v,
            "within_subject_sd_lv_mass_g": sw,
            "basis": "LSC = 1.96 * sqrt(2) * Sw from the within-subject SD given by the user",
            "source": "Bland JM, Altman DG. Measurement error. BMJ 1996;313:744",
            "verified": "lab",
        }
    from . import references

    reference = getattr(options, "reference", references.DEFAULT_SET)
    try:
        coefs = references.load_set(reference).coefficients("reproducibility")
        set_name = str(reference)
    except Exception:  # a lab's set without reproducibility rows: the bundled defaults
        coefs = references.model_coefficients("reproducibility")
        set_name = "bundled defaults"
    c = coefs["lsc_lv_mass_g"]
    rec = {
        "lsc_lv_mass_g": float(c.value),
        "basis": f"least significant change of LV mass from the reference set ({set_name})",
        "source": c.source,
        "verified": c.verified,
    }
    if "within_subject_sd_lv_mass_g" in coefs:
        rec["within_subject_sd_lv_mass_g"] = float(coefs["within_subject_sd_lv_mass_g"].value)
    if c.verified != "published":
        rec["caution"] = "this LSC was not checked against its published source"
    return float(c.value), rec


# ---------------------------------------------------------------------------------------------
# Input
# ---------------------------------------------------------------------------------------------


def _as_frame(studies, options) -> pd.DataFrame:
    if hasattr(studies, "frame") and callable(studies.frame):
        return studies.frame()
    if not isinstance(studies, pd.DataFrame):
        raise InputError(
            f"track needs an Analysis or a DataFrame of studies, got {type(studies).__name__}"
        )
    if "lv_mass_g" in studies.columns:
        return studies
    from .pipeline import analyse_with_findings

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
    for col in (*(m for m, _, _ in MEASURES), *BODY_COLUMNS):
        if col in frame.columns:
            out[col] = pd.to_numeric(frame[col].reset_index(drop=True), errors="coerce").astype(
                float
            )
        else:
            out[col] = np.nan
    if "geometry" in frame.columns:
        g = frame["geometry"].astype("string").fillna("").reset_index(drop=True)
        out["geometry"] = g.where(g.isin(GEOMETRY_CLASSES), "").astype(object)
    else:
        out["geometry"] = ""
    if "flags" in frame.columns:
        out["flags"] = (
            frame["flags"].astype("string").fillna("").reset_index(drop=True).astype(object)
        )
    else:
        out["flags"] = ""

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


# ---------------------------------------------------------------------------------------------
# Same-day studies
# ---------------------------------------------------------------------------------------------


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
    num_cols = [m for m, _, _ in MEASURES] + list(BODY_COLUMNS)
    merged = dup[is_last].copy()
    merged[num_cols] = g[num_cols].mean().to_numpy()
    sex = g["sex"].last()  # last non-missing value
    merged["sex"] = sex.to_numpy()
    geo = dup["geometry"].where(dup["geometry"] != "")
    n_geo = geo.groupby(dup_visit, sort=False).nunique()
    n_blank = (dup["geometry"] == "").groupby(dup_visit, sort=False).sum()
    agree = (n_geo == 1) & (n_blank == 0)
    merged["geometry"] = np.where(
        agree.to_numpy(), geo.groupby(dup_visit, sort=False).last().to_numpy(), ""
    )
    merged["study_id"] = (
        dup["study_id"].astype(str).groupby(dup_visit, sort=False).agg(";".join).to_numpy()
    )
    merged["flags"] = (
        dup["flags"]
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
                column="geometry",
                field="geometry",
                message="studies of the same day give different geometry classes: the visit's geometry "
                "is left undecided; review the measurements",
            )
        )
    return pd.concat([s[~in_dup], merged]).sort_index(kind="stable"), found


# ---------------------------------------------------------------------------------------------
# Grouped statistics (sorted by group; gid = 0..G-1)
# ---------------------------------------------------------------------------------------------


def grouped_linear_fit(gid, x, y, n_groups: int, confidence: float = CONFIDENCE) -> pd.DataFrame:
    """Least-squares line of ``y`` on ``x`` within each group, from grouped sums.

    Parameters
    ----------
    gid : ndarray of int
        Group of each point, 0..n_groups-1.
    x, y : ndarray of float
        Points; a point with a NaN is left out.
    n_groups : int
        Number of groups.
    confidence : float
        Two-sided level of the slope's confidence interval.

    Returns
    -------
    DataFrame
        One row per group: ``n``, ``slope`` (n >= 2 and x not constant), ``stderr``, ``ci_low``,
        ``ci_high`` (n >= 3; t distribution with n - 2 degrees of freedom).

    Notes
    -----
    ``slope = Sxy / Sxx``, ``stderr = sqrt((Syy - slope Sxy) / (n - 2) / Sxx)`` with sums of
    centred products (two passes, for accuracy); the same numbers as ``scipy.stats.linregress``.
    """
    gid = np.asarray(gid, dtype=np.int64)
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = ~(np.isnan(x) | np.isnan(y))
    g, xv, yv = gid[ok], x[ok], y[ok]
    n = np.bincount(g, minlength=n_groups).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx = np.bincount(g, xv, minlength=n_groups) / n
        my = np.bincount(g, yv, minlength=n_groups) / n
        dx = xv - mx[g]
        dy = yv - my[g]
        sxx = np.bincount(g, dx * dx, minlength=n_groups)
        sxy = np.bincount(g, dx * dy, minlength=n_groups)
        syy = np.bincount(g, dy * dy, minlength=n_groups)
        has_slope = (n >= 2) & (sxx > 0)
        slope = np.where(has_slope, sxy / sxx, np.nan)
        df = n - 2
        resid = np.maximum(syy - slope * sxy, 0.0)
        stderr = np.where(
            has_slope & (df >= 1), np.sqrt(resid / np.where(df >= 1, df, 1) / sxx), np.nan
        )
        tcrit = stats.t.ppf(0.5 + confidence / 2, np.where(df >= 1, df, np.nan))
        half = tcrit * stderr
    return pd.DataFrame(
        {
            "n": n.astype(np.int64),
            "slope": slope,
            "stderr": stderr,
            "ci_low": slope - half,
            "ci_high": slope + half,
        }
    )


def _name(stem: str, what: str, unit: str) -> str:
    return f"{stem}_{what}_{unit}" if unit else f"{stem}_{what}"


# ---------------------------------------------------------------------------------------------
# Main entry
# ---------------------------------------------------------------------------------------------


def track(
    studies, options=None, *, within_subject_sd_g=None, lsc_g=None, same_day="mean"
) -> Tracking:
    """Follow each patient over time and summarise the cohort's geometry.

    Parameters
    ----------
    studies : Analysis or DataFrame
        Analysed studies (an ``Analysis``, or a frame with canonical and output columns, detected by
        ``lv_mass_g``), or a study list not yet analysed (it is analysed with ``options``). Needs
        ``patient_id`` and ``study_date``.
    options : Options, optional
        Run options; ``options.reference`` names the reference set whose reproducibility
        coefficients give the default LSC.
    within_subject_sd_g : float, optional
        The lab's own within-subject SD of LV mass [g]; the LSC is then ``1.96 sqrt(2) Sw``.
    lsc_g : float, optional
        The least significant change of LV mass [g], given directly.
    same_day : {"mean", "last"}
        Several studies of one patient on one day: ``mean`` averages their measures into one visit
        (geometry kept only when all agree), ``last`` keeps the last study of the day (by time, then
        study id, then input order) and notes the others.

    Returns
    -------
    Tracking

    Notes
    -----
    Years since baseline = days since the first visit / 365.25. The baseline of each measure is its
    earliest available value and "previous" is the latest earlier available value. A change in LV
    mass is real when its size reaches the LSC (Palmieri 1999: 35 g or more). Slopes are ordinary
    least squares on years, with a 95 % CI from the t distribution (n - 2 df) where n >= 3.

    References
    ----------
    Bland JM, Altman DG. Measurement error. BMJ 1996;313:744.
    Palmieri V et al. J Am Coll Cardiol 1999;34:1625-1632.
    """
    if same_day not in SAME_DAY_RULES:
        raise ValueError(f"same_day must be one of {SAME_DAY_RULES}, got {same_day!r}")
    if options is None:
        from .options import Options

        options = Options()
    lsc, lsc_record = _resolve_lsc(options, within_subject_sd_g, lsc_g)
    frame = _as_frame(studies, options)
    used, found, counts, patient_ids = _prepare(frame)

    order = np.lexsort(
        (
            used["input_row"].to_numpy(),
            used["sid_order"].to_numpy(),
            used["date_ns"].to_numpy(),
            used["pcode"].to_numpy(),
        )
    )
    s = used.iloc[order].reset_index(drop=True)
    found += _consistency_findings(s)
    v, same_found = _collapse_same_day(s, same_day)
    found += same_found
    v = v.reset_index(drop=True)

    # compact patient index 0..G-1 over patients that have at least one usable study
    pc = v["pcode"].to_numpy()
    new_patient = np.r_[True, pc[1:] != pc[:-1]] if len(v) else np.zeros(0, dtype=bool)
    gid = np.cumsum(new_patient) - 1
    n_groups = int(new_patient.sum())
    starts = np.flatnonzero(new_patient)
    ends = np.r_[starts[1:] - 1, len(v) - 1] if n_groups else starts
    group_pcode = pc[starts]
    ids = patient_ids[group_pcode] if n_groups else np.zeros(0, dtype=object)
    n_studies = np.bincount(s["pcode"].to_numpy(), minlength=len(patient_ids))[group_pcode]

    visits = _visits(v, gid, starts, ids, lsc)
    patients = _patients(visits, gid, starts, ends, ids, n_groups, n_studies, lsc)
    found += _single_study_findings(
        s, group_pcode, patients["n_visits"].to_numpy(), len(patient_ids)
    )
    findings = fnd.concat(found)
    patients["flags"] = _patient_flags(findings, s, group_pcode, len(patient_ids))
    transitions = _transitions(patients)
    by_year, by_sex = _prevalence(visits)

    counts.update(
        {
            "studies_used": int(len(s)),
            "visits": int(len(v)),
            "patients": n_groups,
            "patients_single_study": int((patients["n_visits"] == 1).sum()),
            "patients_in_transitions": int(transitions["n_patients"].sum()),
        }
    )
    methods = _methods(options, lsc_record, same_day, counts)
    return Tracking(visits, patients, transitions, by_year, by_sex, findings, methods)


def _patient_flags(
    findings: pd.DataFrame, s: pd.DataFrame, group_pcode, n_codes: int
) -> np.ndarray:
    """Each patient's tracking finding codes, unique, ';'-separated ("" when none)."""
    out = np.full(len(group_pcode), "", dtype=object)
    if findings.empty or not len(s):
        return out
    pcode_of_row = np.full(int(s["input_row"].max()) + 1, -1, dtype=np.int64)
    pcode_of_row[s["input_row"].to_numpy()] = s["pcode"].to_numpy()
    rows = findings["row"].to_numpy()
    inside = (rows >= 0) & (rows < pcode_of_row.size)
    pcodes = np.full(rows.size, -1, dtype=np.int64)
    pcodes[inside] = pcode_of_row[rows[inside]]
    t = pd.DataFrame({"pcode": pcodes, "code": findings["code"].to_numpy()})
    t = t[t["pcode"] >= 0].drop_duplicates()
    if t.empty:
        return out
    joined = t.groupby("pcode", sort=True)["code"].agg(";".join)
    group_of_pcode = np.full(n_codes, -1, dtype=np.int64)
    group_of_pcode[group_pcode] = np.arange(len(group_pcode))
    out[group_of_pcode[joined.index.to_numpy()]] = joined.to_numpy()
    return out


def _visits(v: pd.DataFrame, gid, starts, ids, lsc: float) -> pd.DataFrame:
    date_ns = v["date_ns"].to_numpy()
    years = (date_ns - date_ns[starts][gid]) / (_NS_PER_DAY * DAYS_PER_YEAR)
    out = {
        "patient_id": ids[gid],
        "visit_number": np.arange(len(v)) - starts[gid] + 1,
        "study_date": pd.to_datetime(date_ns, unit="ns"),
        "years_since_baseline": years,
        "study_id": v["study_id"].to_numpy(),
        "input_row": v["input_row"].to_numpy(),
        "n_same_day": v["n_same_day"].to_numpy(),
        "merged_rows": v["merged_rows"].to_numpy(),
        "sex": v["sex"].to_numpy(),
        "height_cm": v["height_cm"].to_numpy(),
        "weight_kg": v["weight_kg"].to_numpy(),
        "geometry": v["geometry"].to_numpy(),
    }
    keys = pd.Series(gid)
    for col, stem, unit in MEASURES:
        y = v[col].reset_index(drop=True)
        grouped = y.groupby(keys, sort=False)
        base = grouped.transform("first")  # earliest available value
        prev = y.groupby(keys, sort=False).ffill().groupby(keys, sort=False).shift(1)
        out[col] = y.to_numpy()
        for what, ref in (("change_from_baseline", base), ("change_from_previous", prev)):
            d = (y - ref).to_numpy()
            out[_name(stem, what, unit)] = d
            with np.errstate(invalid="ignore", divide="ignore"):
                out[f"{stem}_{what}_pct"] = d / ref.to_numpy() * 100.0
            if col == "lv_mass_g":
                out[f"lv_mass_real_{what}"] = _real(d, lsc)
    out["flags"] = v["flags"].to_numpy()
    return pd.DataFrame(out)


def _real(change, lsc: float) -> pd.Series:
    """True when |change| >= LSC, False below, <NA> when the change is unknown."""
    change = np.asarray(change, dtype=float)
    with np.errstate(invalid="ignore"):
        real = pd.array(np.abs(change) >= lsc, dtype="boolean")
    real[np.isnan(change)] = pd.NA
    return real


def _first_last(values: pd.Series, keys: pd.Series):
    g = values.groupby(keys, sort=False)
    return g.first().to_numpy(), g.last().to_numpy(), g.count().to_numpy()


def _patients(visits, gid, starts, ends, ids, n_groups, n_studies, lsc) -> pd.DataFrame:
    keys = pd.Series(gid)
    years = visits["years_since_baseline"].to_numpy()
    dates = visits["study_date"]
    out = {
        "patient_id": ids,
        "n_visits": np.bincount(gid, minlength=n_groups),
        "n_studies": n_studies,
        "first_date": dates.to_numpy()[starts],
        "last_date": dates.to_numpy()[ends],
        "span_years": years[ends],
    }
    sex_first, sex_last, _ = _first_last(
        visits["sex"].astype("string").reset_index(drop=True), keys
    )
    n_sex = visits["sex"].groupby(keys, sort=False).nunique().to_numpy()
    out["sex"] = np.where(n_sex > 1, "", pd.Series(sex_last).fillna("").to_numpy())

    for col, stem, unit in MEASURES:
        first, last, _ = _first_last(visits[col].reset_index(drop=True), keys)
        out[_name(stem, "first", unit)] = first
        out[_name(stem, "last", unit)] = last
    n_mass = visits["lv_mass_g"].groupby(keys, sort=False).count().to_numpy()
    mass_change = np.where(n_mass >= 2, out["lv_mass_last_g"] - out["lv_mass_first_g"], np.nan)
    out["lv_mass_change_g"] = mass_change
    with np.errstate(invalid="ignore", divide="ignore"):
        out["lv_mass_change_pct"] = mass_change / out["lv_mass_first_g"] * 100.0
    out["lv_mass_real_change"] = _real(mass_change, lsc)

    for col in SLOPE_MEASURES:
        stem, unit = next((st, u) for c, st, u in MEASURES if c == col)
        per = f"{unit}_per_year" if unit else "per_year"
        fit = grouped_linear_fit(gid, years, visits[col].to_numpy(), n_groups)
        out[f"{stem}_slope_{per}"] = fit["slope"].to_numpy()
        out[f"{stem}_slope_ci_low_{per}"] = fit["ci_low"].to_numpy()
        out[f"{stem}_slope_ci_high_{per}"] = fit["ci_high"].to_numpy()
        out[f"{stem}_slope_n"] = fit["n"].to_numpy()

    geo = visits["geometry"].where(visits["geometry"] != "").astype("string").reset_index(drop=True)
    g_first, g_last, n_geo = _first_last(geo, keys)
    g_first = pd.Series(g_first, dtype="string").fillna("").to_numpy(dtype=object)
    g_last = pd.Series(g_last, dtype="string").fillna("").to_numpy(dtype=object)
    out["geometry_first"] = g_first
    out["geometry_last"] = g_last
    out["n_visits_with_geometry"] = n_geo

    single = out["n_visits"] == 1
    mass_code = np.select(
        [single, n_mass < 2, mass_change <= -lsc, mass_change >= lsc],
        ["single_study", "mass_not_assessable", "mass_fell_beyond_noise", "mass_rose_beyond_noise"],
        "mass_change_within_noise",
    )
    first_h = np.isin(g_first, HYPERTROPHY)
    last_h = np.isin(g_last, HYPERTROPHY)
    geo_code = np.select(
        [
            single,
            n_geo < 2,
            g_first == g_last,
            first_h & (g_last == "normal"),
            first_h & (g_last == "concentric_remodelling"),
            (g_first == "concentric_remodelling") & (g_last == "normal"),
            (g_first == "normal") & (g_last == "concentric_remodelling"),
            ~first_h & last_h,
            first_h & last_h,
        ],
        [
            "single_study",
            "geometry_not_assessable",
            "geometry_unchanged",
            "hypertrophy_regressed_to_normal",
            "hypertrophy_regressed_to_remodelling",
            "remodelling_resolved",
            "developed_remodelling",
            "progressed_to_hypertrophy",
            "hypertrophy_pattern_changed",
        ],
        "geometry_not_assessable",
    )
    out["mass_verdict"] = mass_code
    out["geometry_verdict"] = geo_code
    mass_text = pd.Series(mass_code).map(MASS_VERDICT_TEXT)
    geo_text = pd.Series(geo_code).map(GEOMETRY_VERDICT_TEXT)
    out["verdict"] = np.where(geo_text == "", mass_text, mass_text + "; " + geo_text)
    return pd.DataFrame(out)


# ---------------------------------------------------------------------------------------------
# Findings about a patient's studies
# ---------------------------------------------------------------------------------------------


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


# ---------------------------------------------------------------------------------------------
# Cohort tables
# ---------------------------------------------------------------------------------------------


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
            "geometry": visits["geometry"].to_numpy()[order],
            "sex": pd.Series(visits["sex"].to_numpy()[order], dtype="string").fillna("unknown"),
        }
    )
    t = t[~t.duplicated(["pid", "year"])]
    t["geometry"] = t["geometry"].where(t["geometry"] != "", UNDETERMINED)
    classes = [*GEOMETRY_CLASSES, UNDETERMINED]

    def table(by: list[str]) -> pd.DataFrame:
        counts = t.groupby([*by, "geometry"]).size().unstack("geometry", fill_value=0)
        counts = counts.reindex(columns=classes, fill_value=0)
        long = counts.stack().rename("n_patients").reset_index()
        seen = long.groupby(by)["n_patients"].transform("sum")
        classified = long["n_patients"].where(long["geometry"] != UNDETERMINED, 0)
        n_cls = classified.groupby([long[b] for b in by]).transform("sum")
        long["n_seen"] = seen.astype(np.int64)
        long["pct_of_seen"] = long["n_patients"] / seen * 100.0
        with np.errstate(invalid="ignore", divide="ignore"):
            long["pct_of_classified"] = np.where(
                (long["geometry"] != UNDETERMINED) & (n_cls > 0),
                long["n_patients"] / n_cls * 100.0,
                np.nan,
            )
        long["n_patients"] = long["n_patients"].astype(np.int64)
        return long.rename(columns={"year": "follow_up_year"})

    return table(["year"]), table(["sex", "year"])


# ---------------------------------------------------------------------------------------------
# Methods and sheets
# ---------------------------------------------------------------------------------------------


def _methods(options, lsc_record: dict, same_day: str, counts: dict) -> dict:
    from . import __version__

    same_day_text = {
        "mean": "several studies of one patient on one day are averaged into one visit (numeric measures: "
        "mean of available values); the visit's geometry is kept when every study of the day has "
        "the same class (the mean of points in one class stays in it) and left undecided otherwise",
        "last": "several studies of one patient on one day: the last (by time, then study id, then input "
        "order) is used; the others are noted",
    }[same_day]
    return {
        "software": f"wallstress {__version__}",
        "reference_set": getattr(options, "reference", ""),
        "least_significant_change": lsc_record,
        "real_change_rule": "a change in LV mass is real when its size is at least the least significant "
        "change (Palmieri V et al., J Am Coll Cardiol 1999: 35 g or more)",
        "same_day_rule": same_day,
        "same_day_rule_text": same_day_text,
        "order": "studies ordered by patient, date and time, then study id, then input order",
        "years_since_baseline": f"days since the patient's first visit / {DAYS_PER_YEAR} (Julian year)",
        "baseline": "each measure's earliest available value; 'previous' is the latest earlier available value",
        "slopes": "ordinary least squares of each measure on years since baseline, per patient; "
        f"{CONFIDENCE:.0%} CI from the t distribution with n - 2 degrees of freedom, given where n >= 3",
        "geometry_first_last": "the first and last visits with a decided geometry class; transitions and "
        "geometry verdicts need two such visits",
        "prevalence_year": "nearest whole year since baseline; a patient counts once per year (the visit "
        "closest to it)",
        "height_rule": f"adult height (age >= {ADULT_AGE_YEARS:g} years, or age unknown) changing by more than "
        f"{HEIGHT_CHANGE_LIMIT_CM:g} cm between studies is flagged: common practice, no source",
        "verdict_codes": {
            **MASS_VERDICT_TEXT,
            **{k: v for k, v in GEOMETRY_VERDICT_TEXT.items() if v},
        },
        "counts": counts,
        "caution": CAUTION,
    }


def _flatten(d: dict, prefix: str = "") -> list[tuple[str, str]]:
    rows = []
    for k, v in d.items():
        key = f"{prefix}{k}"
        if isinstance(v, dict):
            rows += _flatten(v, key + ".")
        else:
            rows.append((key, str(v)))
    return rows


def tracking_sheets(tracking: Tracking) -> dict[str, pd.DataFrame]:
    """Ordered sheets for a writer: patients, visits, transitions, prevalence, findings, methods."""
    methods = pd.DataFrame(_flatten(tracking.methods), columns=["item", "value"])
    return {
        "patients": tracking.patients,
        "visits": tracking.visits,
        "transitions": tracking.transitions,
        "prevalence_by_year": tracking.prevalence_by_year,
        "prevalence_by_sex": tracking.prevalence_by_sex,
        "tracking_findings": tracking.findings,
        "tracking_methods": methods,
    }
