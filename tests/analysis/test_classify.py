"""Geometry and grades: each set's own thresholds and comparisons, sex-specific, never guessed."""

from __future__ import annotations

import numpy as np
from hypothesis import given
from hypothesis import strategies as st

from wallstress.analysis import classify, references

L15 = references.load_set("ase_eacvi_2015")
ESH = references.load_set("esc_esh_2018_h27")


def test_geometry_4_quadrants_vs_ganau_1992():
    """Ganau A et al., J Am Coll Cardiol 1992;19:1550: normal / concentric remodelling (normal mass, high
    RWT) / eccentric hypertrophy (high mass, normal RWT) / concentric hypertrophy (both high), with
    Lang 2015 thresholds (LVMI > 95 women, > 115 men; RWT > 0.42)."""
    lvmi = [80, 80, 120, 120, 110, 110]
    rwt = [0.35, 0.50, 0.35, 0.50, 0.35, 0.50]
    sex = ["F", "F", "F", "F", "M", "M"]
    got = classify.geometry_4(lvmi, rwt, sex, L15)
    assert list(got) == [
        "normal",
        "concentric_remodelling",
        "eccentric_hypertrophy",
        "concentric_hypertrophy",
        "normal",
        "concentric_remodelling",
    ]


def test_exactly_at_cutoff_follows_each_sets_comparison():
    """Lang 2015 states RWT > 0.42 (checked); ESC/ESH 2018 states RWT >= 0.43 (from memory). A study
    exactly at the threshold is normal under '>' and increased under '>='."""
    assert classify.abnormal([0.42], ["F"], L15, "rwt")[0] == 0.0
    assert classify.abnormal([0.43], ["F"], ESH, "rwt")[0] == 1.0
    assert classify.abnormal([95.0], ["F"], L15, "lvmi_bsa_g_m2")[0] == 0.0


@given(
    st.sampled_from(["ase_eacvi_2015", "ase_eae_2005", "esc_esh_2018_h27"]),
    st.sampled_from(["rwt", "lvmi_bsa_g_m2", "lvmi_h27_g_m2_7"]),
    st.sampled_from(["F", "M"]),
)
def test_property_at_cutoff(set_name, measure, sex):
    """Property: a value exactly at a set's abnormal threshold is abnormal iff the set's comparison is '>='."""
    s = references.load_set(set_name)
    cut = s.cutoff(measure, sex)
    if cut is None:
        return
    assert classify.abnormal([cut.value], [sex], s, measure)[0] == (
        1.0 if cut.comparison == ">=" else 0.0
    )


def test_missing_sex_leaves_class_empty():
    """Common practice, no source: sex-specific cut-offs need the sex; never guess it."""
    got = classify.geometry_4([200, 200], [0.6, 0.6], [None, "x"], L15)
    assert list(got) == ["", ""]
    assert list(classify.grade([200], [None], L15, "lvmi_bsa_g_m2")) == [""]


def test_nan_in_gives_empty_class():
    assert list(classify.geometry_4([np.nan, 100], [0.4, np.nan], ["F", "F"], L15)) == ["", ""]


def test_grades_vs_lang_2005_table6():
    """Lang 2005 Table 6, women LVMI: 43-95 normal, 96-108 mild, 109-121 moderate, >= 122 severe."""
    got = classify.grade([90, 96, 108, 109, 121, 122], ["F"] * 6, L15, "lvmi_bsa_g_m2")
    assert list(got) == ["normal", "mild", "mild", "moderate", "moderate", "severe"]


def test_below_normal_grade_vs_lang_2015():
    """Lang 2015: LVIDd normal 3.8-5.2 cm in women (checked)."""
    got = classify.grade([3.7, 4.5, 5.3], ["F"] * 3, L15, "lvidd_cm")
    assert list(got) == ["below_normal", "normal", "increased"]


def test_geometry_8_vs_gaasch_zile_2011():
    """Gaasch WH, Zile MR, J Am Coll Cardiol 2011;58:1733: with LVH, RWT and EDV index both increased is
    mixed hypertrophy; increased EDV with normal RWT is dilated hypertrophy; normal mass with dilation
    is eccentric remodelling (categories checked; thresholds from Lang 2015)."""
    got = classify.geometry_8(
        [120, 120, 80, 120], [0.5, 0.35, 0.35, 0.35], [70, 70, 70, 50], ["F"] * 4, L15
    )
    assert list(got) == [
        "mixed_hypertrophy",
        "dilated_hypertrophy",
        "eccentric_remodelling",
        "eccentric_hypertrophy",
    ]


def test_geometry_8_empty_without_dilation_limit():
    """A set without an EDV-index limit cannot decide dilation: the eight-group class stays empty."""
    assert list(classify.geometry_8([60], [0.5], [70], ["F"], ESH)) == [""]


def test_height27_set_decides_by_height27_index():
    """ESC/ESH 2018 (from memory): hypertrophy by LVM/height^2.7 > 47 g/m^2.7 in women."""
    assert list(classify.geometry_4([48.0], [0.40], ["F"], ESH)) == ["eccentric_hypertrophy"]
