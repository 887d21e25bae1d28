"""fast_csv.write_csv against pandas' own CSV writer and reader (the general-purpose reference).

Every check compares with ``DataFrame.to_csv`` read back by ``pandas.read_csv`` (pandas documentation:
IO tools, CSV), or with the original float64 bits, and RFC 4180 (Shafranovich, 2005) for quoting.
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra import pandas as hpd

from wallstress.write.fast_csv import write_csv


def _both(df, tmp_path, **kw):
    ours = tmp_path / "ours.csv"
    ref = tmp_path / "ref.csv"
    write_csv(df, ours, **kw)
    sep = kw.get("delimiter", ",")
    df.to_csv(ref, index=False, sep=sep, decimal=kw.get("decimal", "."))
    return ours, ref


def _read(path, **kw):
    return pd.read_csv(path, **kw)


def test_round_trip_matches_pandas_to_csv(tmp_path):
    """Same values as pandas to_csv read back (pandas IO tools); RFC 4180 quoting of , " and newline."""
    df = pd.DataFrame(
        {
            "study_id": ["S1", "S,2", 'S"3', "S\n4", "S 5", None],
            "lvidd_cm": [5.0, 0.1, np.nan, 1 / 3, 5e-324, 1.7976931348623157e308],
            "ok": [True, False, True, True, False, True],
            "n": [1, 2, 3, 4, 5, 6],
        }
    )
    ours, ref = _both(df, tmp_path)
    pd.testing.assert_frame_equal(_read(ours), _read(ref))


def test_float64_full_precision_bits(tmp_path):
    """Every float64 (subnormal, huge, 1/3) reads back bit for bit (IEEE 754 round trip; numpy)."""
    rng = np.random.default_rng(7)
    x = rng.standard_normal(5000) * 10.0 ** rng.integers(-320, 308, 5000)
    x[:4] = [5e-324, 2.2250738585072014e-308, 1.7976931348623157e308, -0.0]
    df = pd.DataFrame({"x": x, "y": x[::-1].copy()})
    ours = tmp_path / "x.csv"
    write_csv(df, ours)
    back = _read(ours)
    assert np.array_equal(back["x"].to_numpy().view("int64")[4:], x.view("int64")[4:])
    assert np.array_equal(back["y"].to_numpy(), x[::-1])


def test_nan_is_empty_field(tmp_path):
    """NaN and None are written as empty fields, as pandas to_csv does (pandas IO tools)."""
    df = pd.DataFrame({"a": [np.nan, 1.5], "b": [None, "x"]})
    path = tmp_path / "n.csv"
    write_csv(df, path)
    lines = path.read_text().splitlines()
    assert lines[1] == ","
    assert "nan" not in path.read_text().lower()


def test_datetimes_categories_mixed_objects(tmp_path):
    """Datetimes, categoricals and mixed object columns read back as pandas' own output does."""
    df = pd.DataFrame(
        {
            "study_date": pd.to_datetime(["2020-01-02", None, "2021-12-31"]),
            "stamp": pd.to_datetime(
                ["2020-01-02 03:04:05.25", "2020-01-03 00:00:01", None], format="ISO8601"
            ),
            "tz": pd.to_datetime(["2020-01-02 03:04", None, "2020-05-06 00:00"]).tz_localize("UTC"),
            "sex": pd.Categorical(["F", None, "M"]),
            "mixed": [1, "two", dt.date(2020, 1, 3)],
            "nullable": pd.array([1, None, 3], dtype="Int64"),
        }
    )
    ours, ref = _both(df, tmp_path)
    pd.testing.assert_frame_equal(_read(ours), _read(ref))


def test_one_column_with_missing_keeps_rows(tmp_path):
    """A one-column table keeps its rows with missing values (pandas writes them as "")."""
    df = pd.DataFrame({"a": [1.0, np.nan, 2.0]})
    ours, ref = _both(df, tmp_path)
    pd.testing.assert_frame_equal(_read(ours), _read(ref))
    assert len(_read(ours)) == 3


def test_decimal_comma_is_lossless(tmp_path):
    """Decimal comma (European CSV): floats keep full precision (pandas would round them)."""
    x = np.array([0.1, 1 / 3, 123456.78901234567, np.nan, 5e-324])
    df = pd.DataFrame({"x": x, "t": ["a;b", "c", None, "d", "e"]})
    path = tmp_path / "eu.csv"
    write_csv(df, path, delimiter=";", decimal=",")
    back = _read(path, sep=";", decimal=",")
    assert np.array_equal(back["x"].to_numpy(), x, equal_nan=True)
    assert back["t"].tolist()[:2] == ["a;b", "c"]


def test_bom_and_delimiter(tmp_path):
    """utf-8-sig starts with a byte order mark; a tab delimiter is honoured (common practice)."""
    df = pd.DataFrame({"név": ["é", "ü"], "x": [1.25, 2.5]})
    path = tmp_path / "bom.csv"
    write_csv(df, path, delimiter="\t", encoding="utf-8-sig")
    data = path.read_bytes()
    assert data.startswith(b"\xef\xbb\xbf")
    back = pd.read_csv(path, sep="\t", encoding="utf-8-sig")
    assert list(back.columns) == ["név", "x"]
    assert back["x"].tolist() == [1.25, 2.5]


def test_other_encoding_uses_pandas(tmp_path):
    """A non-UTF-8 encoding (latin-1) is written through pandas, values unchanged."""
    df = pd.DataFrame({"a": ["café"], "x": [0.1]})
    path = tmp_path / "l1.csv"
    write_csv(df, path, encoding="latin-1")
    assert "café".encode("latin-1") in path.read_bytes()
    assert pd.read_csv(path, encoding="latin-1")["x"].tolist() == [0.1]


@pytest.mark.parametrize(
    ("kw", "match"),
    [
        ({"delimiter": ",,"}, "delimiter"),
        ({"delimiter": '"'}, "delimiter"),
        ({"decimal": ","}, "decimal"),
    ],
)
def test_bad_arguments_name_the_argument(tmp_path, kw, match):
    """Errors name the argument and the fix (project style)."""
    with pytest.raises(ValueError, match=match):
        write_csv(pd.DataFrame({"a": [1]}), tmp_path / "x.csv", **kw)


_text = st.text(
    alphabet=st.characters(blacklist_categories=("Cs", "Cc"), whitelist_characters=',"\n\r\t;'),
    max_size=12,
)


@settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    hpd.data_frames(
        [
            hpd.column("f", elements=st.floats(allow_nan=True, allow_infinity=True, width=64)),
            hpd.column("g", elements=st.floats(min_value=-1e-300, max_value=1e-300)),
            hpd.column("t", elements=st.one_of(st.none(), _text)),
            hpd.column("b", dtype=bool),
        ],
        index=hpd.range_indexes(min_size=1, max_size=25),
    )
)
def test_random_frames_read_back_like_pandas(tmp_path_factory, df):
    """Random frames (subnormal/huge floats, NaN, inf, text with quotes/commas/newlines/unicode) read
    back to the original values, and to the same values as pandas to_csv output wherever pandas'
    own output reads back (pandas IO tools; RFC 4180: a field holding CR, LF, comma or quote is
    quoted; pandas leaves a lone CR unquoted, so its file loses that row)."""
    df["t"] = df["t"].astype(object)
    tmp = tmp_path_factory.mktemp("h")
    ours, ref = _both(df, tmp)
    opts = {"dtype": {"t": object}, "keep_default_na": False, "na_values": {c: [""] for c in "fgt"}}
    a = _read(ours, **opts)
    assert len(a) == len(df)
    assert np.array_equal(a["f"].to_numpy(), df["f"].to_numpy(), equal_nan=True)
    assert np.array_equal(a["g"].to_numpy(), df["g"].to_numpy(), equal_nan=True)
    want = [None if (pd.isna(v) or v == "") else v for v in df["t"]]
    got = [None if (isinstance(v, float) and np.isnan(v)) else v for v in a["t"]]
    assert got == want
    assert a["b"].tolist() == df["b"].tolist()
    b = _read(ref, **opts)
    if len(b) == len(df) and b["t"].equals(a["t"]):
        pd.testing.assert_frame_equal(a, b)


def test_whole_numbers_found_without_reading_the_text():
    """``.0`` goes exactly where pyarrow's own text of a float is plain digits (reference: the
    pyarrow formatter itself, pyarrow.compute.cast to string, read with a regular expression):
    whole numbers across magnitudes, both signs, -0.0, non-whole, huge, tiny and missing values."""
    import pyarrow as pa
    import pyarrow.compute as pc

    from wallstress.write.fast_csv import _float_text

    rng = np.random.default_rng(0)
    parts = [np.array([0.0, -0.0, 5.0, 0.5, 1e9, 1e10 - 1, 1e10, 1e15, 2e20, 1e-7, np.nan])]
    for lo, hi in ((0, 1e3), (1e3, 1e6), (1e6, 1e9), (1e9, 1e10), (1e10, 1e12), (1e12, 1e22)):
        whole = rng.uniform(lo, hi, 20_000).round(0)
        parts += [whole, -whole, rng.uniform(lo, hi, 2_000)]
    values = pa.array(np.concatenate(parts), from_pandas=True)
    text = pc.cast(values, pa.large_string())
    digits = pc.fill_null(pc.match_substring_regex(text, r"^-?[0-9]+$"), False).to_pylist()
    got = _float_text(values).to_pylist()
    for t, d, g in zip(text.to_pylist(), digits, got, strict=True):
        assert g == (t + ".0" if d else t)
