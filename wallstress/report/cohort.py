"""The follow-up sections of the report: the cohort (verdicts, transitions, prevalence) and patient pages."""

from __future__ import annotations

import html
import re

import numpy as np
import pandas as pd

from wallstress.figures.common import GEOMETRY_CLASSES, GEOMETRY_LABELS
from wallstress.figures.geometry_plane import geometry_plane
from wallstress.figures.transitions import transition_matrix, transitions_figure
from wallstress.figures.trend import lvmi_trend
from wallstress.report.html import COLUMN_LABELS, _e, _Figures, _fmt, _kv, _table, _verified_text
from wallstress.report.inputs import _lsc_g
from wallstress.schema.vocabulary import OUT

VISIT_COLUMNS: tuple[str, ...] = (
    "study_date",
    "years_since_baseline",
    "study_id",
    OUT.lv_mass_g,
    OUT.lvmi_bsa_g_m2,
    OUT.lvmi_h27_g_m2_7,
    OUT.rwt,
    OUT.geometry,
)


VISIT_EXTRA_COLUMNS: tuple[str, ...] = (
    "lv_mass_change_from_baseline_g",
    "lv_mass_real_change_from_baseline",
    OUT.cess_kdyn_cm2,
    OUT.midwall_fs_pct,
    OUT.flags,
)


PATIENT_COLUMNS: tuple[str, ...] = (
    "patient_id",
    "sex",
    "n_visits",
    "span_years",
    "lv_mass_first_g",
    "lv_mass_last_g",
    "lv_mass_change_g",
    "lv_mass_real_change",
    "lv_mass_slope_g_per_year",
    "sbp_first_mmhg",
    "sbp_last_mmhg",
    "mess_first_kdyn_cm2",
    "mess_last_kdyn_cm2",
    "geometry_first",
    "geometry_last",
    "verdict",
)


def _safe_stem(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", str(text)).strip("._")[:40] or "patient"


def _tracking_table(tracking, name: str):
    t = getattr(tracking, name, None)
    return t if isinstance(t, pd.DataFrame) else None


def _cohort_section(tracking, reference_set, figs: _Figures) -> str:
    parts = ['<section id="cohort"><h2>Cohort over time</h2>']
    patients = _tracking_table(tracking, "patients")
    visits = _tracking_table(tracking, "visits")
    if patients is not None and "verdict" in patients.columns:
        counts = patients["verdict"].astype("string").fillna("").value_counts(sort=True)
        tab = pd.DataFrame({"Verdict": counts.index.to_numpy(), "Patients": counts.to_numpy()})
        parts.append("<h3>Verdicts</h3>" + _table(tab))
    transitions = _tracking_table(tracking, "transitions")
    if transitions is not None and len(transitions):
        parts.append("<h3>Geometry at the first and the last study</h3>")
        parts.append(
            figs.embed(
                transitions_figure(transitions),
                "transitions",
                "Patients by geometry at their first (rows) and last (columns) study; the "
                "outlined diagonal is no change.",
            )
        )
        matrix = transition_matrix(transitions).astype("int64")
        matrix.index = [GEOMETRY_LABELS.get(i, i) for i in matrix.index]
        matrix.columns = [GEOMETRY_LABELS.get(c, c) for c in matrix.columns]
        matrix.index.name = "first \\ last"
        parts.append(_table(matrix, index=True))
    if visits is not None and len(visits):
        mass_index = getattr(reference_set, "mass_index", None) or OUT.lvmi_bsa_g_m2
        if mass_index in visits.columns and OUT.rwt in visits.columns:
            parts.append(
                figs.embed(
                    geometry_plane(
                        visits.iloc[0:0], reference_set, mass_index=mass_index, paths=visits
                    ),
                    "geometry_paths",
                    "Each patient's move on the geometry plane: an arrow from the first visit "
                    "(dot) to the last.",
                )
            )
    for name, heading in (
        ("prevalence_by_year", "Geometry by year of follow-up"),
        ("prevalence_by_sex", "Geometry by sex and year of follow-up"),
    ):
        t = _prevalence_wide(_tracking_table(tracking, name))
        if t is not None and len(t):
            parts.append(f"<h3>{html.escape(heading)}</h3>")
            parts.append(_table(t, index=not isinstance(t.index, pd.RangeIndex)))
    if patients is not None and len(patients):
        cols = [c for c in PATIENT_COLUMNS if c in patients.columns] or list(patients.columns)
        parts.append("<h3>Every patient, one line each</h3>" + _table(patients[cols]))
    parts.append("</section>")
    return "".join(parts)


def _prevalence_wide(t):
    """A long prevalence table (follow_up_year, geometry, n_patients, pct_of_seen[, sex]) as one
    row per year (and sex) and one column per class, "n (pct %)"; other shapes pass through."""
    need = {"follow_up_year", OUT.geometry, "n_patients"}
    if t is None or not need.issubset(t.columns):
        return t
    keys = [c for c in ("sex", "follow_up_year") if c in t.columns]
    n = t["n_patients"].map(_fmt)
    if "pct_of_seen" in t.columns:
        n = n + " (" + t["pct_of_seen"].map(lambda v: f"{v:.0f}" if v == v else "") + " %)"
    cell = t.assign(_cell=n, geometry=t[OUT.geometry].map(lambda g: GEOMETRY_LABELS.get(g, g)))
    wide = cell.pivot_table(index=keys, columns=OUT.geometry, values="_cell", aggfunc="first")
    order = [GEOMETRY_LABELS.get(g, g) for g in (*GEOMETRY_CLASSES, "")]
    wide = wide[
        [c for c in order if c in wide.columns] + [c for c in wide.columns if c not in order]
    ]
    if "n_seen" in t.columns:
        wide.insert(0, "patients seen", t.groupby(keys)["n_seen"].first())
    wide.columns.name = None
    return wide.reset_index()


# verdicts that make a patient's page worth reading first (tracking's codes)
_REAL_CHANGE = ("mass_fell_beyond_noise", "mass_rose_beyond_noise", "mass_change_uncertain")
_NO_CLASS_CHANGE = ("single_study", "geometry_not_assessable", "geometry_unchanged")


def _patient_pages(tracking, reference_set, figs: _Figures, max_pages: int) -> str:
    visits = _tracking_table(tracking, "visits")
    patients = _tracking_table(tracking, "patients")
    if visits is None or "patient_id" not in visits.columns or not len(visits):
        return ""
    ids = visits["patient_id"].astype("string").fillna("")
    if patients is not None and "patient_id" in patients.columns:
        # pages for patients followed (two visits or more), those whose change is real first
        followed = patients
        if "n_visits" in patients.columns:
            followed = patients[pd.to_numeric(patients["n_visits"], errors="coerce") >= 2]
        moved = np.zeros(len(followed), dtype=bool)
        if "mass_verdict" in followed.columns:
            moved |= followed["mass_verdict"].astype(str).isin(_REAL_CHANGE).to_numpy()
        if "geometry_verdict" in followed.columns:
            moved |= ~followed["geometry_verdict"].astype(str).isin(_NO_CLASS_CHANGE).to_numpy()
        followed = followed.iloc[np.argsort(~moved, kind="stable")]
        order = list(dict.fromkeys(followed["patient_id"].astype("string").fillna("").tolist()))
        info = patients.assign(_pid=patients["patient_id"].astype("string").fillna(""))
        info = info.drop_duplicates("_pid").set_index("_pid")
    else:
        order = list(dict.fromkeys(ids.tolist()))
        info = None
    lsc, lsc_source, lsc_verified = _lsc_g(reference_set)
    groups = dict(tuple(visits.groupby(ids.to_numpy(), sort=False)))
    parts = ['<section id="patients"><h2>Patient pages</h2>']
    total = len(order)
    if total > max_pages:
        parts.append(
            f'<p class="capped">pages for the first {max_pages} of {total} patients, to keep this '
            "file a reasonable size; the tracking output lists every patient</p>"
        )
    parts.append(
        f"<p>Error bars: the least significant change of LV mass, {lsc:g} g "
        f"({html.escape(lsc_source)}; {_verified_text(lsc_verified)}), converted to the index by "
        "the visit's body size. A change larger than the bars is larger than the measurement's "
        "own reproducibility.</p>"
    )
    for k, pid in enumerate(order[:max_pages]):
        v = groups.get(pid)
        if v is None:
            v = visits.iloc[0:0]
        parts.append(f'<div class="patient" id="patient-{k}"><h3>Patient {html.escape(pid)}</h3>')
        row = info.loc[pid] if info is not None and pid in info.index else None
        if row is not None:
            verdict = row.get("verdict", "")
            text = row.get("verdict_text", "")
            if _fmt(verdict) or _fmt(text):
                parts.append(f'<p class="verdict">{_e(verdict)}</p><p>{_e(text)}</p>')
            extra = [
                (
                    COLUMN_LABELS.get(c, c),
                    _e(GEOMETRY_LABELS.get(row[c], row[c]) if OUT.geometry in c else row[c]),
                )
                for c in PATIENT_COLUMNS
                if c in row.index
                and c not in ("patient_id", "verdict", "verdict_text")
                and _fmt(row[c])
            ]
            if extra:
                parts.append(_kv(extra[:24]))
        parts.append(
            figs.embed(
                lvmi_trend(v, reference_set, lsc_g=lsc),
                f"trend_{k:04d}_{_safe_stem(pid)}",
                f"LV mass index over time, patient {pid}; dashed line: the limit for the "
                "patient's sex.",
                dpi=96,
            )
        )
        cols = [
            c
            for c in (*VISIT_COLUMNS, *VISIT_EXTRA_COLUMNS)
            if c in v.columns and v[c].astype("string").fillna("").str.strip().ne("").any()
        ]  # no column that is empty for every visit
        if not cols:
            cols = [c for c in v.columns if c not in ("patient_id", "sex")][:14]
        parts.append(_table(v[cols]))
        parts.append("</div>")
    parts.append("</section>")
    return "".join(parts)
