"""Geometry classes and severity grades from a reference set. Vectorised, sex-specific.

A value is judged against its own sex's thresholds only. Where sex is missing or unreadable the
sex-dependent class is left empty (never guessed); the pipeline flags those rows.

Geometry, four groups (Ganau A et al., J Am Coll Cardiol 1992;19:1550-1558), by the set's mass index
and RWT, each with the set's own thresholds and comparisons:

====================  ==========  ===========
class                 mass index  RWT
====================  ==========  ===========
normal                normal      normal
concentric_remodelling normal     increased
eccentric_hypertrophy increased   normal
concentric_hypertrophy increased  increased
====================  ==========  ===========

Eight groups (Gaasch WH, Zile MR, J Am Coll Cardiol 2011;58:1733-1740) add the end-diastolic volume
index (dilated or not). The published categories are used where they exist; the one combination
without a published name (normal mass, increased RWT, dilated) is called
``dilated_concentric_remodelling`` here.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from .references import ReferenceSet

GEOMETRY_4 = ("normal", "concentric_remodelling", "eccentric_hypertrophy", "concentric_hypertrophy")

# (mass increased, rwt increased, dilated) -> class
GEOMETRY_8 = {
    (False, False, False): "normal",
    (False, True, False): "concentric_remodelling",
    (False, False, True): "eccentric_remodelling",
    (False, True, True): "dilated_concentric_remodelling",
    (True, True, False): "concentric_hypertrophy",
    (True, True, True): "mixed_hypertrophy",
    (True, False, True): "dilated_hypertrophy",
    (True, False, False): "eccentric_hypertrophy",
}


def _sex_array(sex) -> np.ndarray:
    return np.asarray(pd.Series(sex, dtype=object).to_numpy(), dtype=object)


def abnormal(values, sex, refset: ReferenceSet, measure: str) -> np.ndarray:
    """Whether each value is above the set's abnormal threshold for its sex.

    Returns a float array: 1.0 (abnormal), 0.0 (not), NaN (value or sex missing, or the set has no
    threshold for that measure and sex).
    """
    v = np.asarray(values, dtype=float)
    s = _sex_array(sex)
    out = np.full(v.shape, np.nan)
    for code in ("F", "M"):
        cut = refset.cutoff(measure, code)
        if cut is None:
            continue
        m = (s == code) & ~np.isnan(v)
        out[m] = cut.met(v[m]).astype(float)
    return out


def grade(values, sex, refset: ReferenceSet, measure: str) -> np.ndarray:
    """Severity grade per value: ``normal``, ``below_normal`` or the highest upward grade met
    (``increased`` / ``mild`` / ``moderate`` / ``severe``); "" when it cannot be decided."""
    v = np.asarray(values, dtype=float)
    s = _sex_array(sex)
    out = np.full(v.shape, "", dtype=object)
    for code in ("F", "M"):
        cuts = refset.grades(measure, code)
        if not cuts:
            continue
        m = (s == code) & ~np.isnan(v)
        g = np.full(int(m.sum()), "normal", dtype=object)
        vm = v[m]
        for c in cuts:  # below_normal first, then upward grades in ascending order: later wins
            g[c.met(vm)] = c.grade
        out[m] = g
    return out


def geometry_4(mass_index, rwt, sex, refset: ReferenceSet) -> np.ndarray:
    """Four-group geometry (Ganau 1992) under the set's mass index thresholds. "" when undecidable."""
    lvh = abnormal(mass_index, sex, refset, refset.mass_index)
    conc = abnormal(rwt, sex, refset, "rwt")
    out = np.full(lvh.shape, "", dtype=object)
    ok = ~np.isnan(lvh) & ~np.isnan(conc)
    table = np.array(GEOMETRY_4, dtype=object)  # index = 2*lvh + conc... mapped below
    idx = np.where(lvh[ok] == 1, 2, 0) + np.where(conc[ok] == 1, 1, 0)
    # 0 normal, 1 concentric remodelling, 2 eccentric hypertrophy, 3 concentric hypertrophy
    out[ok] = table[idx]
    return out


def geometry_8(mass_index, rwt, edv_index, sex, refset: ReferenceSet) -> np.ndarray:
    """Eight-group geometry (Gaasch & Zile 2011). "" when undecidable or the set has no EDV limit."""
    lvh = abnormal(mass_index, sex, refset, refset.mass_index)
    conc = abnormal(rwt, sex, refset, "rwt")
    dil = abnormal(edv_index, sex, refset, "edv_index_ml_m2")
    out = np.full(lvh.shape, "", dtype=object)
    ok = ~np.isnan(lvh) & ~np.isnan(conc) & ~np.isnan(dil)
    names = np.empty(8, dtype=object)
    for (a, b, c), name in GEOMETRY_8.items():
        names[4 * a + 2 * b + c] = name
    idx = 4 * (lvh[ok] == 1) + 2 * (conc[ok] == 1) + (dil[ok] == 1)
    out[ok] = names[idx.astype(int)]
    return out
