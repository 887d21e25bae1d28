"""The ASE/EAE 2005 severity partitions against the published table, at and on both sides of
every boundary.

Source: Lang RM et al., Recommendations for chamber quantification, J Am Soc Echocardiogr
2005;18:1440-1463, Table 6 (left ventricular mass and geometry) and its LV dimension table, read in
two reproductions of the table (the ECGpedia repository page; ecgwaves.com). The published ranges
are whole numbers (g/m2, g/m, g/m^2.7) or two decimals (RWT) or one decimal (cm); a value above the
upper end of one range belongs to the next (the set's ">" rows).
"""

from __future__ import annotations

import numpy as np
import pytest

from wallstress.analysis import classify
from wallstress.analysis.references import load_set

# measure: {sex: [(upper end of normal, mild, moderate) ... as published]}
PUBLISHED = {
    "lvmi_bsa_g_m2": {"F": ((43, 95), (96, 108), (109, 121), 122), "M": ((49, 115), (116, 131), (132, 148), 149)},
    "lvmi_h_g_m": {"F": ((41, 99), (100, 115), (116, 128), 129), "M": ((52, 126), (127, 144), (145, 162), 163)},
    "lvmi_h27_g_m2_7": {"F": ((18, 44), (45, 51), (52, 58), 59), "M": ((20, 48), (49, 55), (56, 63), 64)},
    "rwt": {"F": ((0.22, 0.42), (0.43, 0.47), (0.48, 0.52), 0.53), "M": ((0.24, 0.42), (0.43, 0.46), (0.47, 0.51), 0.52)},
    "ivsd_cm": {"F": ((0.6, 0.9), (1.0, 1.2), (1.3, 1.5), 1.6), "M": ((0.6, 1.0), (1.1, 1.3), (1.4, 1.6), 1.7)},
    "pwd_cm": {"F": ((0.6, 0.9), (1.0, 1.2), (1.3, 1.5), 1.6), "M": ((0.6, 1.0), (1.1, 1.3), (1.4, 1.6), 1.7)},
    "lvidd_cm": {"F": ((3.9, 5.3), (5.4, 5.7), (5.8, 6.1), 6.2), "M": ((4.2, 5.9), (6.0, 6.3), (6.4, 6.8), 6.9)},
}  # fmt: skip
GRADES = ("normal", "mild", "moderate", "severe")
SET = load_set("ase_eae_2005")


def _grade(value: float, sex: str, measure: str) -> str:
    return str(classify.grade(np.array([value]), np.array([sex], dtype=object), SET, measure)[0])


def _cases():
    for measure, by_sex in PUBLISHED.items():
        for sex, (normal, mild, moderate, severe_from) in by_sex.items():
            ranges = (normal, mild, moderate, (severe_from, severe_from * 1.5))
            for grade, (lo, hi) in zip(GRADES, ranges, strict=True):
                yield measure, sex, grade, lo, hi


@pytest.mark.parametrize("measure,sex,grade,lo,hi", list(_cases()))
def test_partition_matches_lang_2005_table_6(measure, sex, grade, lo, hi):
    """Both ends of each published range get that range's grade."""
    assert _grade(lo, sex, measure) == grade
    assert _grade(hi, sex, measure) == grade


@pytest.mark.parametrize("measure,sex,grade,lo,hi", [c for c in _cases() if c[2] != "normal"])
def test_just_below_a_published_range_is_the_grade_before(measure, sex, grade, lo, hi):
    """A value at the upper end of the range before (lo minus one step of the published rounding)."""
    step = 0.01 if measure == "rwt" else (0.1 if measure.endswith("_cm") else 1)
    before = GRADES[GRADES.index(grade) - 1]
    assert _grade(round(lo - step, 2), sex, measure) == before


def test_mens_rwt_is_not_graded_with_the_womens_steps():
    """0.47 is moderate for men but mild for women (published: men 0.47-0.51, women 0.43-0.47)."""
    assert _grade(0.47, "M", "rwt") == "moderate" and _grade(0.47, "F", "rwt") == "mild"
    assert _grade(0.52, "M", "rwt") == "severe" and _grade(0.52, "F", "rwt") == "moderate"
