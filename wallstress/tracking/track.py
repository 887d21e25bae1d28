"""Follow-up over years: each patient's remodelling judged against measurement reproducibility.

``track`` takes analysed studies (an :class:`~wallstress.analysis.result.Analysis`, a frame with canonical and
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

The work is split by subject: :mod:`wallstress.tracking.visits` (studies -> one row per patient and
day), :mod:`wallstress.tracking.per_patient` (visits and patients tables, verdicts),
:mod:`wallstress.tracking.statistics` (reproducibility, LSC, grouped slopes) and :mod:`wallstress.tracking.cohort_tables`
(transitions, prevalence).

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

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from wallstress import __version__
from wallstress import findings as fnd
from wallstress.options import Options
from wallstress.schema.vocabulary import CLINICAL_CAUTION, OUT
from wallstress.tracking.cohort_tables import (
    _prevalence,
    _transitions,
)
from wallstress.tracking.per_patient import (
    GEOMETRY_VERDICT_TEXT,
    MASS_VERDICT_TEXT,
    _patient_flags,
    _patients,
    _visits,
)
from wallstress.tracking.statistics import (
    CONFIDENCE,
    _resolve_lsc,
)
from wallstress.tracking.visits import (
    ADULT_AGE_YEARS,
    DAYS_PER_YEAR,
    HEIGHT_CHANGE_LIMIT_CM,
    SAME_DAY_RULES,
    _as_frame,
    _collapse_same_day,
    _consistency_findings,
    _prepare,
    _single_study_findings,
)

CAUTION = f"Follow-up summaries: {CLINICAL_CAUTION}"


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


# A study list is followed over time when at least this share of its studies belong to patients
# with two or more studies (a lab's list, one study per patient with a few repeats, is not).
# Common practice, no source: the line between a cross-sectional and a longitudinal list.
LONGITUDINAL_SHARE = 0.5


def is_longitudinal(canonical: pd.DataFrame) -> bool:
    """True when the list follows patients over time: it has patient ids and at least
    ``LONGITUDINAL_SHARE`` of its studies belong to patients with two or more studies."""
    if "patient_id" not in canonical.columns:
        return False
    ids = canonical["patient_id"].dropna()
    if ids.empty:
        return False
    repeated = ids.duplicated(keep=False)
    return bool(repeated.sum() >= LONGITUDINAL_SHARE * len(ids))


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
    patients[OUT.flags] = _patient_flags(findings, s, group_pcode, len(patient_ids))
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


def _methods(options, lsc_record: dict, same_day: str, counts: dict) -> dict:

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


SHEETS: tuple[str, ...] = (
    "patients",
    "visits",
    "transitions",
    "prevalence_by_year",
    "prevalence_by_sex",
    "tracking_findings",
    "tracking_methods",
)
"""The tables of a follow-up, in the order they are written."""


def tracking_sheets(tracking: Tracking) -> dict[str, pd.DataFrame]:
    """Ordered sheets for a writer: patients, visits, transitions, prevalence, findings, methods."""
    methods = pd.DataFrame(_flatten(tracking.methods), columns=["item", "value"])
    tables = (
        tracking.patients,
        tracking.visits,
        tracking.transitions,
        tracking.prevalence_by_year,
        tracking.prevalence_by_sex,
        tracking.findings,
        methods,
    )
    return dict(zip(SHEETS, tables, strict=True))
