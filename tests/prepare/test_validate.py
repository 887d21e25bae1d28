"""Row validation: impossible values become NaN with an error, unusual ones are kept with a warning."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from wallstress.prepare.mapping import map_columns
from wallstress.prepare.repeats import repeated_pairs
from wallstress.prepare.validate import validate


def _codes(findings, row):
    return set(findings.loc[findings["row"] == row, "code"])


def test_impossible_value_is_nan_and_error():
    c, f = validate(pd.DataFrame({"lvidd_cm": [5.0, 48.0, -2.0, 0.0], "sex": ["F"] * 4}))
    assert c["lvidd_cm"].tolist()[0] == 5.0 and c["lvidd_cm"].iloc[1:].isna().all()
    for r in (1, 2, 3):
        assert "lvidd_cm_impossible" in _codes(f, r)
    assert (f.loc[f["code"] == "lvidd_cm_impossible", "severity"] == "error").all()


def test_unusual_value_is_kept_with_warning():
    c, f = validate(pd.DataFrame({"lvidd_cm": [8.5], "sex": ["M"]}))
    assert c["lvidd_cm"].iloc[0] == 8.5
    assert "lvidd_cm_unusual" in _codes(f, 0)


def test_every_typical_range_lies_within_its_hard_range():
    """The range check compares only the values outside typical with the hard range, which is
    right only if a value outside hard is always outside typical. Common practice, no source:
    what is impossible is also unusual."""
    from wallstress.schema.fields import BY_NAME

    for name, f in BY_NAME.items():
        if f.hard is not None and f.typical is not None:
            assert f.hard[0] <= f.typical[0] <= f.typical[1] <= f.hard[1], name


@settings(max_examples=150, deadline=None)
@given(
    st.lists(
        st.one_of(st.floats(allow_nan=True, allow_infinity=True), st.sampled_from([2.9, 3.0, 3.4])),
        min_size=1,
        max_size=12,
    )
)
def test_range_findings_as_two_separate_comparisons(values):
    """Impossible (outside 3.0-10.0 cm for LVIDd) and unusual (outside 3.5-7.5 cm, not
    impossible) rows, blanked values and findings, against both comparisons written out on
    every value (the ranges of schema/fields.py; common practice, no source)."""
    from wallstress.schema.fields import BY_NAME

    f = BY_NAME["lvidd_cm"]
    v = np.array(values, dtype=float)
    c, found = validate(pd.DataFrame({"lvidd_cm": v, "sex": ["F"] * len(v)}))
    with np.errstate(invalid="ignore"):
        bad = (v < f.hard[0]) | (v > f.hard[1])
        unusual = ~bad & ((v < f.typical[0]) | (v > f.typical[1]))
    got = c["lvidd_cm"].to_numpy()
    assert np.array_equal(np.isnan(got), np.isnan(v) | bad)
    for code, want in (("lvidd_cm_impossible", bad), ("lvidd_cm_unusual", unusual)):
        rows = found.loc[found["code"] == code, "row"].tolist()
        assert rows == np.flatnonzero(want).tolist(), code


def test_lvids_not_below_lvidd():
    """Common practice, no source: the cavity is smaller at end-systole than at end-diastole."""
    c, f = validate(
        pd.DataFrame({"lvidd_cm": [5.0, 5.0], "lvids_cm": [5.2, 3.2], "sex": ["F", "F"]})
    )
    assert np.isnan(c["lvids_cm"].iloc[0]) and c["lvids_cm"].iloc[1] == 3.2
    assert "lvids_not_below_lvidd" in _codes(f, 0) and "lvids_not_below_lvidd" not in _codes(f, 1)


def test_walls_thinning_in_systole_warned():
    """Common practice, no source: walls thicken during ejection."""
    _, f = validate(
        pd.DataFrame(
            {"pwd_cm": [1.0], "pws_cm": [0.9], "ivsd_cm": [1.0], "ivss_cm": [1.3], "sex": ["F"]}
        )
    )
    assert "posterior_wall_thins_in_systole" in _codes(f, 0)
    assert "septum_thins_in_systole" not in _codes(f, 0)


def test_disproportionate_septum_ratio_1_3():
    """IVSd/PWd >= 1.3 (common practice, no source): linear mass misleads."""
    _, f = validate(pd.DataFrame({"ivsd_cm": [1.3, 1.29], "pwd_cm": [1.0, 1.0], "sex": ["F", "F"]}))
    assert "septum_disproportionate" in _codes(f, 0)
    assert "septum_disproportionate" not in _codes(f, 1)


def test_pressures_swapped():
    c, f = validate(pd.DataFrame({"sbp_mmhg": [80.0], "dbp_mmhg": [120.0], "sex": ["F"]}))
    assert c[["sbp_mmhg", "dbp_mmhg"]].isna().all(axis=None)
    assert "dbp_not_below_sbp" in _codes(f, 0)


def test_duplicates_same_patient_same_day():
    df = pd.DataFrame(
        {
            "patient_id": ["a", "a", "b"],
            "study_date": pd.to_datetime(["2024-01-01"] * 3),
            "study_id": ["1", "2", "2"],
            "sex": ["F"] * 3,
        }
    )
    _, f = validate(df)
    assert {0, 1} == set(f.loc[f["code"] == "duplicate_study", "row"])
    assert {1, 2} == set(f.loc[f["code"] == "duplicate_study_id", "row"])


def test_no_sex_column_is_a_file_level_and_row_finding():
    _, f = validate(pd.DataFrame({"lvidd_cm": [5.0]}))
    assert "no_sex_column" in set(f.loc[f["row"] == -1, "code"])
    assert "sex_missing" in _codes(f, 0)


def test_input_not_mutated_and_never_raises_on_junk():
    df = pd.DataFrame({"lvidd_cm": [np.nan, np.inf, -np.inf, 1e300], "sex": [None, "F", 3, "M"]})
    before = df.copy()
    c, f = validate(df)
    pd.testing.assert_frame_equal(df, before)
    assert len(c) == 4


@pytest.mark.parametrize(
    "ids, repeated",
    [
        ([0, np.nan, 5, 5], {2, 3}),  # a missing id is no repeat of id 0
        ([np.nan, 0, np.nan], set()),
        ([3, 1, 3, 2], {0, 2}),  # not in order
        ([1, 2, 3, 4], set()),  # increasing: no repeat
        (["1001", "01001", "1001"], {0, 2}),  # "01001" is another text than "1001"
        (["7", "7.0", None, "7"], {0, 3}),
    ],
)
def test_repeated_study_ids_whatever_their_form(ids, repeated):
    """The same identifier text on two rows is a repeat; a missing one never is (common practice,
    no source). Numeric ids are read as text ("1001.0" from a sheet is "1001") and compared."""
    raw = pd.DataFrame({"study_id": ids, "sex": ["F"] * len(ids)})
    m = map_columns(raw)
    _, f = validate(m.canonical)
    assert set(f.loc[f["code"] == "duplicate_study_id", "row"]) == repeated


@settings(max_examples=300, deadline=None)
@given(
    st.lists(
        st.tuples(st.one_of(st.none(), st.integers(0, 3)), st.one_of(st.none(), st.integers(0, 3))),
        max_size=15,
    ),
    st.sampled_from(["days", "hours", "text ids"]),
)
def test_repeated_pairs_vs_pandas_duplicated(pairs, form):
    """Rows whose (patient, date) pair is repeated are those pandas' DataFrame.duplicated
    (keep=False) marks, among rows with both present (the reference); two studies of one day
    at different times are not a repeat."""
    if form == "text ids":
        pid = pd.Series([None if p is None else f"P{p:03d}" for p, _ in pairs], dtype="str")
    else:
        pid = pd.Series([p for p, _ in pairs], dtype="Int64")
    step = pd.Timedelta(hours=6) if form == "hours" else pd.Timedelta(days=1)
    day = pd.Series(
        [pd.NaT if d is None else pd.Timestamp("2020-01-01") + d * step for _, d in pairs],
        dtype="datetime64[ns]",
    )
    key = pd.DataFrame({"p": pid, "d": day})
    want = key.duplicated(keep=False).to_numpy() & key.notna().all(axis=1).to_numpy()
    assert repeated_pairs(pid, day).tolist() == want.tolist()


@pytest.mark.parametrize(
    "ids, repeated, shown",
    [
        # written with spaces: the same id (trimmed), each shown as the user wrote it
        ([" A1", "A1", "B2", "A1 "], {0, 1, 3}, [" A1", "A1", "A1 "]),
        (["A1", "B2", "A1", "C3"], {0, 2}, ["A1", "A1"]),
        (["A1", None, "A1", ""], {0, 2}, ["A1", "A1"]),  # missing ids are no repeat
        (["0042", "42", "0042"], {0, 2}, ["0042", "0042"]),  # leading zeros kept
    ],
)
def test_repeated_study_ids_show_the_cells_as_written(ids, repeated, shown):
    """A repeated study id's finding shows each cell exactly as written, through the codes of
    the repeat check or, where spaces surround an id, the cell itself (the user's data is
    sacred: common practice, no source)."""
    import wallstress

    df = pd.DataFrame({"Study ID": pd.Series(ids, dtype="str"), "sex": ["F"] * len(ids)})
    f = wallstress.analyse_with_findings(df).findings
    dup = f[f["code"] == "duplicate_study_id"]
    assert set(dup["row"]) == repeated
    assert dup.sort_values("row")["value"].astype(str).tolist() == shown
