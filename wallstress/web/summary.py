"""What the page shows of a finished run, as plain values for the templates (no formula here).

Counts come from the run's methods record, flagged rows from its findings, the key measures from
its results (labels and decimals from the output registry, classes in words), the geometry plane
from :mod:`wallstress.figures`, and for a follow-up the patients from ``wallstress.track``.
Tables are cut to their first rows; the page says how many more the downloads hold.
"""

from __future__ import annotations

import base64

import numpy as np
import pandas as pd

from wallstress.analysis.references import load_set
from wallstress.schema.display import KEY_COLUMNS, decimals, label
from wallstress.schema.vocabulary import CLINICAL_CAUTION, FROM_MEMORY_CAUTION, OUT, in_words

MAX_TABLE_ROWS = 1000
MAX_FLAGGED = 200

# the follow-up columns a clinician reads first, with what the page calls them
PATIENT_COLUMNS: tuple[tuple[str, str, int | None], ...] = (
    ("patient_id", "Patient", None),
    ("n_visits", "Visits", 0),
    ("span_years", "Years followed", 1),
    ("lv_mass_first_g", "LV mass first (g)", 0),
    ("lv_mass_last_g", "LV mass last (g)", 0),
    ("lv_mass_slope_g_per_year", "LV mass slope (g/year)", 1),
    ("lv_mass_slope_ci_low_g_per_year", "95% CI low", 1),
    ("lv_mass_slope_ci_high_g_per_year", "95% CI high", 1),
    ("mess_first_kdyn_cm2", "mESS first (kdyn/cm2)", 0),
    ("mess_last_kdyn_cm2", "mESS last (kdyn/cm2)", 0),
    ("geometry_first", "Geometry first", None),
    ("geometry_last", "Geometry last", None),
    ("verdict", "Verdict", None),
)


def _cell(value, places: int | None) -> tuple[str, str]:
    """(text shown, sort key) of one value; missing shows as an empty cell."""
    if value is None or (isinstance(value, float) and np.isnan(value)) or value is pd.NA:
        return "", ""
    if isinstance(value, pd.Timestamp):
        return ("", "") if pd.isna(value) else (value.strftime("%Y-%m-%d"),) * 2
    if places is not None and isinstance(value, int | float | np.integer | np.floating):
        return f"{float(value):.{places}f}", repr(float(value))
    text = str(value)
    return text, text


def _table(frame: pd.DataFrame, columns, max_rows: int) -> dict:
    """Header labels, rows of (text, sort key, is number) and how many rows were left out."""
    shown = frame.iloc[:max_rows]
    head, cols = [], []
    for name, heading, places in columns:
        if name in shown.columns:
            head.append(heading)
            cols.append((shown[name].tolist(), places))
    rows = [
        [(*_cell(values[i], places), places is not None) for values, places in cols]
        for i in range(len(shown))
    ]
    return {"head": head, "rows": rows, "more": max(0, len(frame) - max_rows)}


def _key_measures(analysis) -> dict:
    frame = analysis.frame()
    frame = frame.loc[:, ~frame.columns.duplicated()].copy()
    for name in (OUT.geometry,):
        if name in frame.columns:
            frame[name] = (
                frame[name].astype(object).map(lambda v: in_words(v) if isinstance(v, str) else v)
            )
    if "study_date" in frame.columns:
        frame["study_date"] = pd.to_datetime(frame["study_date"], errors="coerce")
    columns = [(c, label(c), decimals(c)) for c in KEY_COLUMNS if c in frame.columns]
    return _table(frame, columns, MAX_TABLE_ROWS)


def _flagged(analysis) -> dict:
    f = analysis.findings
    f = f[(f["row"] >= 0) & (f["severity"].astype(str) != "note")]
    ids = analysis.canonical.get("study_id")
    rows = []
    for r in f.iloc[:MAX_FLAGGED].itertuples(index=False):
        study = "" if ids is None or pd.isna(ids.iloc[r.row]) else str(ids.iloc[r.row])
        rows.append(
            {
                "row": int(r.row) + 1,
                "study": study,
                "severity": str(r.severity),
                "column": str(r.column),
                "value": str(r.value),
                "message": str(r.message),
            }
        )
    notes = analysis.findings[analysis.findings["row"] < 0]
    return {
        "rows": rows,
        "more": max(0, len(f) - MAX_FLAGGED),
        "about_columns": [
            {"severity": str(n.severity), "column": str(n.column), "message": str(n.message)}
            for n in notes.itertuples(index=False)
        ],
    }


def _plane_png(analysis, options) -> str:
    """The geometry plane as a base64 PNG (inline in the page; no request)."""
    from wallstress.figures.geometry_plane import geometry_plane
    from wallstress.figures.save import to_png

    frame = analysis.frame()
    frame = frame.loc[:, ~frame.columns.duplicated()]
    try:
        refset = load_set(options.reference)
    except Exception:  # the run already read it; a figure without cut-offs rather than none
        refset = None
    fig = geometry_plane(frame, refset)
    return base64.b64encode(to_png(fig)).decode("ascii")


def _geometry_counts(analysis) -> list[tuple[str, int]]:
    g = analysis.outputs.get(OUT.geometry)
    if g is None:
        return []
    counts = g.astype(object).where(g.notna(), "").value_counts()
    return [(in_words(k) if k else "not decided", int(v)) for k, v in counts.items()]


def summarise(results, tracking, options) -> dict:
    """Everything the results page shows of one run (``results``: the JobResult of
    ``analyse_file``; ``tracking``: ``wallstress.track`` of it, or None)."""
    analysis = results.analysis
    counts = analysis.methods.get("counts", {})
    out = {
        "counts": [
            ("Rows read", counts.get("rows", analysis.n_rows)),
            ("Studies", counts.get("studies", analysis.n_rows)),
            ("Rows flagged (warning or error)", counts.get("rows_flagged", 0)),
            ("Rows with an error", counts.get("rows_with_errors", 0)),
            ("Rows that are not studies", counts.get("rows_not_studies", 0)),
            ("Studies without LV mass", counts.get("rows_without_lv_mass", 0)),
            ("Studies without a geometry class", counts.get("rows_without_geometry", 0)),
        ],
        "classes": _geometry_counts(analysis),
        "flagged": _flagged(analysis),
        "measures": _key_measures(analysis),
        "plane_png": _plane_png(analysis, options),
        "options": analysis.methods.get("options", {}),
        "cautions": [CLINICAL_CAUTION, FROM_MEMORY_CAUTION],
        "unverified": list(analysis.methods.get("unverified", [])),
        "patients": None,
        "imports": [],  # a cohort store's imports (set by the cohort run)
        "open_proposals": 0,
    }
    if tracking is not None:
        p = tracking.patients.copy()
        for c in ("geometry_first", "geometry_last"):
            if c in p.columns:
                p[c] = p[c].astype(object).map(lambda v: in_words(v) if isinstance(v, str) else v)
        out["patients"] = _table(p, PATIENT_COLUMNS, MAX_TABLE_ROWS)
        verdicts = p["verdict"].astype(str).value_counts() if "verdict" in p.columns else {}
        out["verdicts"] = [(str(k), int(v)) for k, v in verdicts.items()]
    return out
