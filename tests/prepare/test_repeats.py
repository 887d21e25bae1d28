"""Repeated ids on integer keys: the same rows as pandas' ``duplicated(keep=False)`` (the
reference), whatever the ids' form (text of one length or many, leading zeros, other scripts,
missing cells, whole numbers of any size)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from wallstress.prepare.repeats import (
    distinct_of,
    id_keys,
    packed_text,
    repeated,
    repeated_pairs,
)

# ids of one length (packed) and of many (hashed); digits, letters, other scripts, a space
_TEXT = st.text(alphabet="0123AZ-é 中", min_size=1, max_size=4)
_FIXED = st.text(alphabet="0123AZ-é", min_size=3, max_size=3)


def _reference(ids: pd.Series) -> list[bool]:
    """pandas: rows whose present id is on another row."""
    return (ids.duplicated(keep=False) & ids.notna()).tolist()


@settings(max_examples=300, deadline=None)
@given(st.lists(st.one_of(st.none(), _TEXT), max_size=30))
def test_text_ids_any_length(ids):
    s = pd.Series(ids, dtype="str")
    assert repeated(*id_keys(s)).tolist() == _reference(s)


@settings(max_examples=300, deadline=None)
@given(st.lists(st.one_of(st.none(), _FIXED), max_size=30), st.booleans())
def test_text_ids_of_one_length(ids, sliced):
    """Ids of one byte length are packed, never hashed; equal keys exactly where equal text,
    also for a slice of a longer Arrow array (an offset into its buffers)."""
    s = pd.Series(ids, dtype="str")
    if sliced:
        longer = pd.Series(["XXXX", *ids, "YY"], dtype="str")
        s = longer.iloc[1 : 1 + len(ids)].reset_index(drop=True)
    keys, present, span = id_keys(s)
    assert present.tolist() == s.notna().tolist()
    assert (keys[present] >= 0).all() and (keys[present] < span).all()
    text = s[present].tolist()
    k = keys[present].tolist()
    for i in range(len(text)):
        for j in range(len(text)):
            assert (k[i] == k[j]) == (text[i] == text[j])
    assert repeated(keys, present, span).tolist() == _reference(s)


@settings(max_examples=200, deadline=None)
@given(
    st.lists(
        st.one_of(st.none(), st.integers(-(2**63), 2**63 - 1), st.integers(-3, 3)), max_size=30
    )
)
def test_whole_number_ids_any_size(ids):
    s = pd.Series(ids, dtype="Int64")
    assert repeated(*id_keys(s)).tolist() == _reference(s)


@pytest.mark.parametrize(
    "ids, want",
    [
        (["0042", "042", "0042"], [True, False, True]),  # leading zeros: another id
        (["ST-0000001", "ST-0000002", "ST-0000002"], [False, True, True]),
        (["ST-0000001", None, "ST-0000001"], [True, False, True]),  # missing: never a repeat
        ([None, None], [False, False]),
    ],
)
def test_repeated_ids_examples(ids, want):
    """Common practice, no source: the same identifier text on two rows is a repeat; a missing
    one never is; leading zeros are part of an identifier."""
    assert repeated(*id_keys(pd.Series(ids, dtype="str"))).tolist() == want


def test_wide_fixed_ids_fall_back_to_a_hash():
    """Ids of one length that vary at too many positions to pack in 62 bits still compare
    exactly (hashed)."""
    rng = np.random.default_rng(0)
    ids = ["".join(rng.choice(list("0123456789ABCDEF"), 24)) for _ in range(50)]
    ids += ids[:5]
    s = pd.Series(ids, dtype="str")
    assert repeated(*id_keys(s)).tolist() == _reference(s)


@settings(max_examples=200, deadline=None)
@given(
    st.lists(st.integers(0, 2**62 - 1), max_size=40),
    st.lists(st.integers(0, 39), max_size=40),
    st.integers(0, 2),
)
def test_wide_keys_with_few_or_many_repeats(distinct, copies, spread):
    """Keys too wide to count (the bucketed hash): the rows pandas' ``duplicated(keep=False)``
    marks, whether few rows share a bucket or most, and out of order."""
    keys = distinct + [distinct[i] for i in copies if i < len(distinct)] * spread
    k = np.array(keys[::-1], dtype=np.int64)
    present = np.ones(k.size, dtype=bool)
    want = pd.Series(k).duplicated(keep=False).tolist()
    assert repeated(k, present, 2**62).tolist() == want


def test_wide_keys_with_few_buckets(monkeypatch):
    """Buckets capped far below the rows (as past 5.5 x 10^6 rows): the same rows as pandas'
    ``duplicated(keep=False)``, whether most rows share a bucket or few."""
    from wallstress.prepare import repeats

    monkeypatch.setattr(repeats, "MAX_BUCKET_BITS", 4)
    rng = np.random.default_rng(1)
    for n in (3, 10, 50, 1000):
        k = rng.integers(0, 2**62, n)
        k[: n // 3] = k[n - n // 3 :]
        want = pd.Series(k).duplicated(keep=False).to_numpy()
        np.testing.assert_array_equal(repeated(k, np.ones(n, dtype=bool), 2**62), want)


def test_wide_keys_at_scale():
    """10^5 wide keys, 1 % repeated: the bucketed path (most rows alone in their bucket) marks
    exactly pandas' rows."""
    rng = np.random.default_rng(3)
    k = rng.integers(0, 2**62, 100_000)
    k[rng.integers(0, k.size, 1000)] = k[rng.integers(0, k.size, 1000)]
    want = pd.Series(k).duplicated(keep=False).to_numpy()
    assert want.sum() > 0
    np.testing.assert_array_equal(repeated(k, np.ones(k.size, dtype=bool), 2**62), want)


@settings(max_examples=200, deadline=None)
@given(
    st.lists(
        st.tuples(
            st.one_of(st.none(), st.sampled_from(["P01", "P02", "P10", "Q01"])),
            st.one_of(st.none(), st.integers(0, 3)),
        ),
        max_size=20,
    )
)
def test_repeated_pairs_vs_pandas(pairs):
    pid = pd.Series([p for p, _ in pairs], dtype="str")
    day = pd.Series(
        [
            pd.NaT if d is None else pd.Timestamp("2021-03-01") + pd.Timedelta(days=d)
            for _, d in pairs
        ],
        dtype="datetime64[ns]",
    )
    key = pd.DataFrame({"p": pid, "d": day})
    want = key.duplicated(keep=False) & key.notna().all(axis=1)
    assert repeated_pairs(pid, day).tolist() == want.tolist()


def test_pairs_of_very_wide_patient_keys():
    """Whole-number patient ids spanning more than 2^62 / days are renumbered before pairing."""
    pid = pd.Series([-(2**62), 2**62, -(2**62), 5], dtype="Int64")
    day = pd.Series(pd.to_datetime(["2020-01-01", "2030-01-01", "2020-01-01", "2030-01-01"]))
    assert repeated_pairs(pid, day).tolist() == [True, False, True, False]


@settings(max_examples=200, deadline=None)
@given(st.lists(st.integers(0, 5), min_size=1, max_size=30), st.booleans())
def test_distinct_of(keys, in_order):
    """Codes numbered by first appearance; ``first`` points at each code's first row."""
    k = np.array(sorted(keys) if in_order else keys, dtype=np.int64)
    rows = np.arange(k.size)
    codes, first = distinct_of(k, rows)
    want_codes, uniques = pd.factorize(k)
    assert codes.tolist() == want_codes.tolist()
    assert k[first].tolist() == list(uniques)


def test_packing_reads_arrow_string_too():
    """Arrow ``string`` (32-bit offsets) is packed as ``large_string`` is."""
    for kind in (pa.string(), pa.large_string()):
        text = pa.array(["AB1", None, "AB2", "AB1"], type=kind)
        keys, span = packed_text(text, np.array([True, False, True, True]))
        assert keys[0] == keys[3] != keys[2] and span == 2


def test_a_missing_cell_that_keeps_bytes_is_not_packed():
    """Arrow lets a missing cell keep bytes in the buffer (Apache Arrow columnar format: a null
    slot's length may be positive): such a column is not read as one row per width of bytes."""
    data = b"AB1" + b"XYZ" + b"AB1"
    offsets = np.array([0, 3, 6, 9], dtype=np.int64)
    validity = pa.py_buffer(bytes([0b101]))  # the middle cell missing, its bytes kept
    text = pa.Array.from_buffers(
        pa.large_string(), 3, [validity, pa.py_buffer(offsets.tobytes()), pa.py_buffer(data)]
    )
    assert text.to_pylist() == ["AB1", None, "AB1"]
    assert packed_text(text, np.array([True, False, True])) is None
    s = pd.Series(pd.array(text, dtype="str"))
    assert repeated(*id_keys(s)).tolist() == [True, False, True]
