"""Findings tables at registry scale: Categorical text columns, merged and ordered as plain text would be.

The reference for every check here is pandas itself (a general-purpose library) doing the same job
the slow, obvious way: object columns, ``pd.concat`` and a stable ``sort_values`` by row, or one
Python step per row. Common practice, no source.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from wallstress import findings as fnd
from wallstress.analysis import classify, flags
from wallstress.analysis.references import load_set
from wallstress.prepare.cells import parse_sex
from wallstress.prepare.validate import validate

TEXT = fnd.TEXT_COLUMNS


def _plain(f: pd.DataFrame) -> pd.DataFrame:
    """A findings table as object text (the slow reference form)."""
    out = f.astype(object)
    out["row"] = f["row"].to_numpy(dtype="int64")
    return out.reset_index(drop=True)


def _reference_concat(parts) -> pd.DataFrame:
    parts = [_plain(p) for p in parts if p is not None and len(p)]
    out = pd.concat(parts, ignore_index=True)
    return out.sort_values("row", kind="stable").reset_index(drop=True)


def test_make_columns_are_categorical_and_row_int64():
    """Common practice, no source: one code per row, each distinct text stored once."""
    f = fnd.make(
        np.arange(5000), code="edv_from_teichholz", severity="note", message="m", field="edv_ml"
    )
    assert f["row"].dtype == np.int64
    for c in TEXT:
        assert isinstance(f[c].dtype, pd.CategoricalDtype), c
    assert list(f["code"].cat.categories) == ["edv_from_teichholz"]
    assert list(f["severity"].cat.categories) == ["note", "warning", "error"]
    assert f["severity"].cat.ordered
    assert set(f["message"]) == {"m"} and set(f["value"]) == {""}


def test_make_value_text_per_type():
    """Common practice, no source: values that compare equal but differ in type keep their own text
    (1 -> "1", 1.0 -> "1", True -> "True"); NaN and None -> ""; floats to 6 significant digits."""
    vals = np.array([1, 1.0, True, None, np.nan, "4,8 cm", 4.87654321, 0, False], dtype=object)
    f = fnd.make(np.arange(vals.size), code="x", severity="error", message="m", values=vals)
    assert f["value"].astype(object).tolist() == [
        "1",
        "1",
        "True",
        "",
        "",
        "4,8 cm",
        "4.87654",
        "0",
        "False",
    ]


def test_make_per_row_messages():
    """Common practice, no source: per-row messages from (codes, texts)."""
    codes, texts = fnd.text_codes(np.array(["a", "b", "a"], dtype=object), lambda v: f"bad {v!r}")
    f = fnd.make([0, 1, 2], code="x", severity="warning", message="", messages=(codes, texts))
    assert f["message"].astype(object).tolist() == ["bad 'a'", "bad 'b'", "bad 'a'"]


@settings(max_examples=200, deadline=None)
@given(
    st.one_of(
        st.lists(st.one_of(st.floats(), st.sampled_from([1.0, 2.5, 1e7])), max_size=30).map(
            lambda v: np.array(v, dtype=float)
        ),
        st.lists(st.integers(-3, 3), max_size=30).map(lambda v: np.array(v, dtype=np.int64)),
        st.lists(
            st.one_of(st.none(), st.integers(0, 2), st.floats(0, 2), st.booleans(), st.text("ab")),
            max_size=30,
        ).map(lambda v: np.array(v + [None], dtype=object)[:-1] if v else np.array([], object)),
    )
)
def test_text_codes_as_a_sort_of_the_keys_gives_them(values):
    """Each row's text is ``to_text`` of its own value, with the distinct texts in order of first
    appearance: the same codes and texts as when the representative rows are taken by
    ``np.unique`` (numpy's reference, a sort) instead of the keys' running high."""
    codes, texts = fnd.text_codes(values, fnd._as_text)
    assert [texts[c] for c in codes] == [fnd._as_text(v) for v in values.tolist()]
    assert len(set(texts)) == len(texts)
    key = _keys_of(values)
    if key.size:
        first = np.unique(key, return_index=True)[1]
        want_codes, want = pd.factorize(
            np.asarray([fnd._as_text(v) for v in values[first].tolist()], dtype=object)
        )
        assert np.array_equal(codes, want_codes[key]) and texts == [str(t) for t in want]


def _keys_of(values):
    """The keys text_codes numbers its values by (pandas' factorize, as it calls it)."""
    if values.dtype.kind == "f":
        return pd.factorize(values, use_na_sentinel=False)[0]
    if values.dtype.kind in "iubU":
        return pd.factorize(values)[0]
    arr = values.astype(object)
    vcode, _ = pd.factorize(arr, use_na_sentinel=False)
    tcode, types = pd.factorize(np.fromiter(map(type, arr), dtype=object, count=arr.size))
    return vcode if len(types) == 1 else pd.factorize(vcode * len(types) + tcode)[0]


def test_make_rejects_unknown_severity():
    with pytest.raises(ValueError, match="severity must be one of"):
        fnd.make([0], code="x", severity="fatal", message="m")


def _random_parts(seed: int, n_parts: int):
    rng = np.random.default_rng(seed)
    parts = []
    for i in range(n_parts):
        n = int(rng.integers(0, 40))
        rows = np.sort(rng.integers(-1, 30, n))
        vals = rng.choice(np.array([1.5, np.nan, 2.0, 1e7], dtype=object), n) if i % 2 else None
        parts.append(
            fnd.make(
                rows,
                code=f"code_{i % 3}",
                severity=fnd.SEVERITIES[i % 3],
                message=f"message {i % 4}",
                column=f"col {i % 2}",
                field=f"field_{i % 5}",
                values=vals,
            )
        )
    return parts


@settings(max_examples=40, deadline=None)
@given(st.integers(0, 10_000), st.integers(1, 7))
def test_concat_equals_plain_concat_and_stable_sort(seed, n_parts):
    """Reference: pandas ``concat`` + ``sort_values(kind="stable")`` on object columns (common
    practice, no source): same rows, same order, same text."""
    parts = _random_parts(seed, n_parts)
    got = fnd.concat(parts, categorical=True)
    if not sum(len(p) for p in parts):
        assert len(got) == 0 and list(got.columns) == list(fnd.FINDING_COLUMNS)
        return
    pd.testing.assert_frame_equal(_plain(got), _reference_concat(parts))
    assert got["row"].dtype == np.int64
    pd.testing.assert_frame_equal(fnd.concat(parts), fnd.as_text(got))


@pytest.mark.parametrize("arrow", [True, False])
def test_concat_with_one_part_holding_most_texts(arrow):
    """A part with more distinct values than ``BIG_PART_CATEGORIES`` (the ids of many repeated
    studies; Arrow text as read, or Python text) joins the others without hashing its texts again:
    the same table as pandas' concat and stable sort (common practice, no source), including
    values that are in both the big part and a small one, and missing values."""
    n_big = fnd.BIG_PART_CATEGORIES + 500
    ids = [f"ST-{i:07d}" for i in range(n_big)]
    texts = pd.array(ids, dtype="str") if arrow else ids
    rows = np.arange(2 * n_big) % (n_big + 7)
    codes = np.arange(2 * n_big) % n_big
    codes[::97] = -1  # no value shown
    big = fnd.make(
        np.sort(rows), code="dup", severity="warning", message="m", value_codes=(codes, texts)
    )
    if arrow:
        assert isinstance(big["value"].array.categories.dtype, pd.StringDtype)
    small = fnd.make(
        [3, 0, 5], code="x", severity="error", message="m", values=["ST-0000005", 4.5, None]
    )
    other = fnd.make([1], code="y", severity="note", message="m", values=["ST-9999999"])
    parts = [small, big, other]
    got = fnd.concat(parts, categorical=True)
    pd.testing.assert_frame_equal(_plain(got), _reference_concat(parts))
    assert got["value"].array.categories.is_unique
    pd.testing.assert_frame_equal(fnd.concat(parts), fnd.as_text(got))


def test_concat_accepts_plain_text_parts():
    """Tables built elsewhere with plain text columns merge with Categorical ones (common practice,
    no source)."""
    a = fnd.make([2, 0], code="a", severity="note", message="ma")
    b = _plain(fnd.make([1], code="b", severity="error", message="mb", values=[3.25]))
    got = fnd.concat([a, b], categorical=True)
    assert got["code"].astype(object).tolist() == ["a", "b", "a"]
    assert got["row"].tolist() == [0, 1, 2]
    assert got["value"].astype(object).tolist() == ["", "3.25", ""]
    assert isinstance(got["severity"].dtype, pd.CategoricalDtype)


def test_as_text_gives_pandas_default_text():
    """Reference: the dtype pandas itself gives a column of Python strings (common practice, no
    source); values, missing values and order unchanged."""
    f = fnd.concat(_random_parts(3, 5), categorical=True)
    text = fnd.as_text(f)
    default = pd.DataFrame({"x": np.array(["a"], dtype=object)})["x"].dtype
    for c in TEXT:
        assert text[c].dtype == default, c
        assert text[c].astype(object).tolist() == f[c].astype(object).tolist()
    assert text["row"].dtype == np.int64


def test_public_concat_and_empty_are_plain_text():
    """Common practice, no source: tables handed to other modules hold plain text, as before."""
    default = pd.DataFrame({"x": np.array(["a"], dtype=object)})["x"].dtype
    f = fnd.concat(_random_parts(5, 4))
    assert all(f[c].dtype == default for c in TEXT)
    assert all(fnd.empty()[c].dtype == object for c in TEXT)
    assert all(isinstance(fnd.empty(categorical=True)[c].dtype, pd.CategoricalDtype) for c in TEXT)


def test_text_from_codes_equals_object_take():
    """Reference: ``names[codes]`` as an object array converted by pandas (common practice, no
    source); code -1 is a missing value."""
    names = ["", "normal", "mild"]
    codes = np.array([2, 0, 1, -1, 2])
    got = pd.Series(fnd.text_from_codes(codes, names))
    expected = pd.Series(np.array(["mild", "", "normal", None, "mild"], dtype=object))
    pd.testing.assert_series_equal(got, expected.astype(got.dtype))
    assert got.dtype == pd.DataFrame({"x": np.array(["a"], dtype=object)})["x"].dtype


def _flags_by_loop(findings: pd.DataFrame, n: int) -> list[str]:
    per_row: list[dict] = [{} for _ in range(n)]
    for r, c in zip(
        findings["row"].tolist(), findings["code"].astype(object).tolist(), strict=True
    ):
        if r >= 0:
            per_row[r][c] = None
    return [";".join(d) for d in per_row]


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 10_000), st.integers(1, 7))
def test_flag_codes_equal_a_python_loop(seed, n_parts):
    """Reference: one Python step per finding, codes unique per row in order of appearance (common
    practice, no source)."""
    for categorical in (True, False):
        f = fnd.concat(_random_parts(seed, n_parts), categorical=categorical)
        codes, texts = flags.flag_codes(f, 30)
        assert texts[0] == ""
        assert [texts[i] for i in codes] == _flags_by_loop(f, 30)
        assert flags.flags_per_row(f, 30).tolist() == _flags_by_loop(f, 30)


@settings(max_examples=30, deadline=None)
@given(st.integers(0, 10_000), st.integers(1, 7))
def test_flag_codes_of_codes_in_step_order_equal_a_python_loop(seed, n_parts):
    """Each part with a code of its own (as each pipeline step has): the codes of every row come
    in one order, the one-bit-per-code path is taken, and the flags are those of the
    same reference (common practice, no source)."""
    parts = _random_parts(seed, n_parts)
    for i, p in enumerate(parts):
        p["code"] = pd.Categorical([f"step_{i}"] * len(p))
    f = fnd.concat(parts, categorical=True)
    rows = f["row"].to_numpy()
    inside = rows >= 0
    if inside.any():
        code = f["code"].array
        assert flags._flags_as_code_sets(rows[inside], code.codes[inside], code.categories)
    codes, texts = flags.flag_codes(f, 30)
    assert [texts[i] for i in codes] == _flags_by_loop(f, 30)


def test_flag_codes_with_many_codes_per_row_equal_a_python_loop():
    """Rows with more codes than fit one 62-bit key (30 codes on a row) take the table path; the
    same reference as above: one Python step per finding (common practice, no source)."""
    rng = np.random.default_rng(3)
    parts = [
        fnd.make(
            rng.choice(12, size=rng.integers(1, 12), replace=False),
            code=f"c{k}",
            severity="note",
            message="m",
        )
        for k in range(30)
    ]
    parts.append(fnd.make(np.arange(12), code="c0", severity="note", message="again"))
    f = fnd.concat(parts, categorical=True)
    codes, texts = flags.flag_codes(f, 12)
    assert max(t.count(";") for t in texts) + 1 > 62 / np.log2(32)  # wide enough for that path
    assert [texts[i] for i in codes] == _flags_by_loop(f, 12)


def test_grade_codes_equal_per_value_rule_vs_lang_2015():
    """Lang RM et al., J Am Soc Echocardiogr 2015;28:1-39, Table 6 partitions of LVMI (women > 95
    mild, > 108 moderate, > 121 severe; men > 115, > 131, > 148 g/m2), through the bundled set;
    checked against one Python step per value."""
    ref = load_set("ase_eacvi_2015")
    v = np.array([90.0, 96.0, 109.0, 122.0, 116.0, 132.0, 149.0, np.nan, 100.0])
    sex = np.array(["F", "F", "F", "F", "M", "M", "M", "F", None], dtype=object)
    codes, names = classify.grade_codes(v, sex, ref, "lvmi_bsa_g_m2")
    got = [names[i] for i in codes]
    assert got == ["normal", "mild", "moderate", "severe", "mild", "moderate", "severe", "", ""]
    assert classify.grade(v, sex, ref, "lvmi_bsa_g_m2").tolist() == got


def test_geometry_codes_name_tables():
    """Ganau A et al., J Am Coll Cardiol 1992;19:1550 (four groups) and Gaasch WH, Zile MR, J Am Coll
    Cardiol 2011;58:1733 (eight): code 0 is undecided, then the classes by mass, RWT (and dilation)."""
    assert classify.GEOMETRY_4_NAMES == ("", *classify.GEOMETRY_4)
    for i in range(8):
        key = (bool(i & 4), bool(i & 2), bool(i & 1))
        assert classify.GEOMETRY_8_NAMES[1 + i] == classify.GEOMETRY_8[key]


def test_parse_sex_per_distinct_value_equals_per_cell():
    """Common practice, no source: reading each distinct spelling once and spreading it back gives
    the same as reading every cell on its own."""
    spellings = np.array(
        ["F", "m", "Female", "w", "1", "", None, "x?", "Männlich", "M."], dtype=object
    )
    col = pd.Series(np.tile(spellings, 300))
    got, probs = parse_sex(col)
    for i, s in enumerate(spellings):
        one, p1 = parse_sex(pd.Series([s], dtype=object))
        rows = np.arange(i, len(col), len(spellings))
        assert (
            got.iloc[rows].isna().all()
            if pd.isna(one.iloc[0])
            else (got.iloc[rows] == one.iloc[0]).all()
        )
        for k in probs:
            assert (probs[k][rows] == p1[k][0]).all(), (s, k)


def test_validate_leaves_input_alone_and_output_writable():
    """Common practice, no source: validation never changes its input, and its output can be edited
    in place (no read-only views of the input)."""
    given_frame = pd.DataFrame({"lvidd_cm": [5.0, 99.0], "lvids_cm": [3.0, 2.0], "sex": ["F", "M"]})
    before = given_frame.copy()
    cleaned, _ = validate(given_frame)
    pd.testing.assert_frame_equal(given_frame, before)
    assert np.isnan(cleaned["lvidd_cm"].iloc[1])
    cleaned.loc[0, "lvids_cm"] = 2.5
    cleaned.loc[0, "lvidd_cm"] = 4.5
    pd.testing.assert_frame_equal(given_frame, before)


def test_worst_severity_per_row():
    """A row's worst finding ranks error over warning over note; a row without any, or a finding
    about a whole column (row -1), gives -1 (common practice, no source)."""
    f = fnd.concat(
        [
            fnd.make([0, 2], code="a", severity="note", message="m"),
            fnd.make([2, 3], code="b", severity="error", message="m"),
            fnd.make([2, 0], code="c", severity="warning", message="m"),
            fnd.make([-1], code="d", severity="error", message="m"),
        ]
    )
    assert flags.worst_severity(f, 5).tolist() == [1, -1, 2, 2, -1]
    cat = fnd.concat([fnd.make([1], code="b", severity="warning", message="m")], categorical=True)
    assert flags.worst_severity(cat, 2).tolist() == [-1, 1]
    # severities held another way (a Categorical of its own categories, as parquet reads them
    # back; a missing or unknown one): ranked as text, the unknown ones left out
    other = pd.DataFrame(
        {
            "row": [0, 1, 1, 2, 2],
            "severity": pd.Categorical(["warning", None, "error", "note", "bogus"]),
        }
    )
    assert flags.worst_severity(other, 4).tolist() == [1, 2, 0, -1]


def test_column_level_keys_are_text_and_missing_is_empty():
    """The same finding about a column, reported by two partitions or chunks, gives the same key;
    a missing value (None, NaN, NA) has no text and is the empty one (common practice, no
    source)."""
    a = fnd.make([-1], code="unit_inferred", severity="note", message="m", column="c", field="f")
    b = fnd.make([-1], code="unit_inferred", severity="note", message="m", column="c", field="f")
    assert (
        fnd.column_level_keys(a) == fnd.column_level_keys(b) == [("unit_inferred", "c", "f", "m")]
    )
    odd = pd.DataFrame(
        {"code": ["x", None], "column": [np.nan, "c"], "field": [pd.NA, "f"], "message": [1, ""]},
        dtype=object,
    )
    assert fnd.column_level_keys(odd) == [("x", "", "", "1"), ("", "c", "f", "")]
