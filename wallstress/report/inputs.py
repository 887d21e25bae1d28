"""What the report reads from a run: the reference set, its coefficients, the results and findings.

Each reader degrades instead of failing: a report is still written (saying what is missing) when the
reference set cannot be loaded or a table is absent.
"""

from __future__ import annotations

import os
from collections.abc import Mapping

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.analysis.references import DEFAULT_SET, list_sets, load_set, model_coefficients
from wallstress.figures.common import GEOMETRY_LABELS, LINE_KEYS, _sex
from wallstress.schema.vocabulary import OUT

FALLBACK_LSC_G = 35.0  # Palmieri V et al., J Am Coll Cardiol 1999 (used only without a set)


def _resolve_reference_set(analysis, reference_set):
    """(ReferenceSet or None, problem text or '')."""
    if reference_set is not None and not isinstance(reference_set, str | os.PathLike):
        return reference_set, ""
    name = reference_set
    methods = getattr(analysis, "methods", None) or {}
    if name is None:
        ref = methods.get("reference_set")
        if isinstance(ref, Mapping):
            bundled = ref.get("name") in list_sets()
            name = ref.get("name") if bundled else (ref.get("path") or ref.get("name"))
        elif isinstance(ref, str):
            name = ref
    if name is None:
        opts = methods.get("options")
        if isinstance(opts, Mapping):
            name = opts.get("reference")
    try:
        return load_set(name or DEFAULT_SET), ""
    except Exception as exc:  # a report must still be written without cut-offs
        return None, f"reference set {name!r} could not be loaded ({exc}); figures show no cut-offs"


def _coefficients(reference_set, model: str) -> dict:
    try:
        if reference_set is not None:
            return dict(reference_set.coefficients(model))

        return dict(model_coefficients(model))
    except Exception:
        return {}


def _lsc_g(reference_set) -> tuple[float, str, str]:
    """(LSC of LV mass [g], source, verified)."""
    c = _coefficients(reference_set, "reproducibility").get("lsc_lv_mass_g")
    if c is not None and np.isfinite(getattr(c, "value", np.nan)):
        return float(c.value), str(c.source), str(c.verified)
    return (
        FALLBACK_LSC_G,
        "Palmieri V et al., J Am Coll Cardiol 1999 (built-in fallback)",
        "published",
    )


def _midwall_line(reference_set):
    line = _coefficients(reference_set, "midwall_stress_line")
    return line if all(k in line for k in LINE_KEYS) else None


def _frame(analysis) -> pd.DataFrame:
    try:
        frame = analysis.frame()
    except Exception:
        frame = getattr(analysis, "table", pd.DataFrame())
    return frame.loc[:, ~frame.columns.duplicated()].reset_index(drop=True)


def _findings(analysis) -> pd.DataFrame:
    f = getattr(analysis, "findings", None)
    if f is None or not isinstance(f, pd.DataFrame):
        return pd.DataFrame(
            columns=["row", "column", "field", "value", "severity", "code", "message"]
        )
    f = fnd.as_text(f)
    for c in ("row", "column", "field", "value", "severity", "code", "message"):
        if c not in f.columns:
            f[c] = -1 if c == "row" else ""
    f["row"] = pd.to_numeric(f["row"], errors="coerce").fillna(-1).astype("int64")
    return f


def _sex_labels(frame: pd.DataFrame) -> pd.Series:
    s = pd.Series(_sex(frame), index=frame.index)
    return s.map({"F": "women", "M": "men", "": "sex not given"})


def _geometry_labels(frame: pd.DataFrame) -> pd.Series:
    if OUT.geometry not in frame.columns:
        return pd.Series(["undetermined"] * len(frame), index=frame.index)
    g = frame[OUT.geometry].astype("string").fillna("").str.strip()
    return g.map(lambda x: GEOMETRY_LABELS.get(x, x or "undetermined"))
