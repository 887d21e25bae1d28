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

from wallstress.analysis.references import ReferenceSet
from wallstress.schema.fields import SEXES
from wallstress.schema.vocabulary import (
    CONCENTRIC_HYPERTROPHY,
    CONCENTRIC_REMODELLING,
    ECCENTRIC_HYPERTROPHY,
    NORMAL,
    OUT,
)

# code order: 1 + mass increased * 2 + rwt increased
GEOMETRY_4 = (NORMAL, CONCENTRIC_REMODELLING, ECCENTRIC_HYPERTROPHY, CONCENTRIC_HYPERTROPHY)

# (mass increased, rwt increased, dilated) -> class
GEOMETRY_8 = {
    (False, False, False): NORMAL,
    (False, True, False): CONCENTRIC_REMODELLING,
    (False, False, True): "eccentric_remodelling",
    (False, True, True): "dilated_concentric_remodelling",
    (True, True, False): CONCENTRIC_HYPERTROPHY,
    (True, True, True): "mixed_hypertrophy",
    (True, False, True): "dilated_hypertrophy",
    (True, False, False): ECCENTRIC_HYPERTROPHY,
}


def _sex_array(sex) -> np.ndarray:
    return np.asarray(pd.Series(sex, dtype=object).to_numpy(), dtype=object)


def sex_masks(sex) -> dict[str, np.ndarray]:
    """``{"F": mask, "M": mask}`` of the rows of each sex (anything else is in neither).

    A Categorical (as the pipeline's canonical ``sex``) is read from its codes.
    """
    if isinstance(getattr(sex, "dtype", None), pd.CategoricalDtype):
        cat = sex.array if isinstance(sex, pd.Series) else sex
        where = {str(c): i for i, c in enumerate(cat.categories)}
        return {
            code: cat.codes == where[code] if code in where else np.zeros(len(cat), dtype=bool)
            for code in SEXES
        }
    s = _sex_array(sex)
    return {code: s == code for code in SEXES}


def _masks(sex, masks):
    return sex_masks(sex) if masks is None else masks


# The selections below are int8 arithmetic on 0/1 masks, not np.where or masked copies: with masks
# that change from row to row (sex, thresholds met) the branch-free arithmetic is many times faster.


def _as_int8(mask: np.ndarray) -> np.ndarray:
    return mask.view(np.int8) if mask.dtype == bool else mask.astype(np.int8)


def _abnormal_codes(v: np.ndarray, refset: ReferenceSet, measure: str, masks) -> np.ndarray:
    """int8 per value: 1 above its sex's abnormal threshold, 0 not, -1 undecided (value or sex
    missing, or no threshold for that measure and sex)."""
    met = np.zeros(v.shape, dtype=np.int8)
    decided = np.zeros(v.shape, dtype=bool)
    for code in SEXES:
        cut = refset.cutoff(measure, code)
        if cut is not None:  # the sexes' masks are disjoint: each row gains from its own sex only
            met += _as_int8(masks[code] & cut.met(v))
            decided |= masks[code]
    decided &= ~np.isnan(v)
    d = _as_int8(decided)
    return met * d + (d - np.int8(1))  # met where decided, -1 elsewhere


def abnormal(values, sex, refset: ReferenceSet, measure: str, *, masks=None) -> np.ndarray:
    """Whether each value is above the set's abnormal threshold for its sex.

    Returns a float array: 1.0 (abnormal), 0.0 (not), NaN (value or sex missing, or the set has no
    threshold for that measure and sex). ``masks`` (from :func:`sex_masks`) saves re-reading sex.
    """
    v = np.asarray(values, dtype=float)
    codes = _abnormal_codes(v, refset, measure, _masks(sex, masks))
    return np.where(codes < 0, np.nan, codes.astype(float))


def grade_codes(
    values, sex, refset: ReferenceSet, measure: str, *, masks=None
) -> tuple[np.ndarray, list[str]]:
    """Severity grade per value as integer codes into a list of names (code 0 is "", undecided)."""
    v = np.asarray(values, dtype=float)
    masks = _masks(sex, masks)
    names = ["", "normal"]
    codes = np.zeros(v.shape, dtype=np.int8)
    known = ~np.isnan(v)
    for code in SEXES:
        cuts = refset.grades(measure, code)
        if not cuts:
            continue
        graded = np.ones(v.shape, dtype=np.int8)  # normal
        for c in cuts:  # below_normal first, then upward grades in ascending order: later wins
            if c.grade not in names:
                names.append(c.grade)
            graded += _as_int8(c.met(v)) * (np.int8(names.index(c.grade)) - graded)
        codes += graded * _as_int8(masks[code] & known)  # the sexes' masks are disjoint
    return codes, names


def grade(values, sex, refset: ReferenceSet, measure: str) -> np.ndarray:
    """Severity grade per value: ``normal``, ``below_normal`` or the highest upward grade met
    (``increased`` / ``mild`` / ``moderate`` / ``severe``); "" when it cannot be decided."""
    codes, names = grade_codes(values, sex, refset, measure)
    return np.asarray(names, dtype=object)[codes]


GEOMETRY_4_NAMES: tuple[str, ...] = ("",) + GEOMETRY_4  # code 0: undecidable
GEOMETRY_8_NAMES: tuple[str, ...] = ("",) + tuple(
    GEOMETRY_8[(bool(i & 4), bool(i & 2), bool(i & 1))] for i in range(8)
)  # code 1 + 4*mass + 2*rwt + dilated


def geometry_4_codes(mass_index, rwt, sex, refset: ReferenceSet, *, masks=None) -> np.ndarray:
    """Four-group geometry as codes into ``GEOMETRY_4_NAMES`` (0 when undecidable)."""
    masks = _masks(sex, masks)
    lvh = _abnormal_codes(np.asarray(mass_index, dtype=float), refset, refset.mass_index, masks)
    conc = _abnormal_codes(np.asarray(rwt, dtype=float), refset, OUT.rwt, masks)
    # 1 normal, 2 concentric remodelling, 3 eccentric hypertrophy, 4 concentric hypertrophy
    idx = 1 + 2 * lvh + conc
    return idx * _as_int8((lvh >= 0) & (conc >= 0))


def geometry_4(mass_index, rwt, sex, refset: ReferenceSet) -> np.ndarray:
    """Four-group geometry (Ganau 1992) under the set's mass index thresholds. "" when undecidable."""
    return np.asarray(GEOMETRY_4_NAMES, dtype=object)[
        geometry_4_codes(mass_index, rwt, sex, refset)
    ]


def geometry_8_codes(
    mass_index, rwt, edv_index, sex, refset: ReferenceSet, *, masks=None
) -> np.ndarray:
    """Eight-group geometry as codes into ``GEOMETRY_8_NAMES`` (0 when undecidable)."""
    masks = _masks(sex, masks)
    lvh = _abnormal_codes(np.asarray(mass_index, dtype=float), refset, refset.mass_index, masks)
    conc = _abnormal_codes(np.asarray(rwt, dtype=float), refset, OUT.rwt, masks)
    dil = _abnormal_codes(np.asarray(edv_index, dtype=float), refset, OUT.edv_index_ml_m2, masks)
    idx = 1 + 4 * lvh + 2 * conc + dil
    return idx * _as_int8((lvh >= 0) & (conc >= 0) & (dil >= 0))


def geometry_8(mass_index, rwt, edv_index, sex, refset: ReferenceSet) -> np.ndarray:
    """Eight-group geometry (Gaasch & Zile 2011). "" when undecidable or the set has no EDV limit."""
    codes = geometry_8_codes(mass_index, rwt, edv_index, sex, refset)
    return np.asarray(GEOMETRY_8_NAMES, dtype=object)[codes]
