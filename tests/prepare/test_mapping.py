"""Header mapping, text numbers, sex codes, dates, units to internal units."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st
from openpyxl.utils.datetime import from_excel

from wallstress.errors import InputError
from wallstress.options import Options
from wallstress.prepare.cells import SEX_DTYPE, factorize_text, parse_ids, parse_numbers, parse_sex
from wallstress.prepare.dates import parse_dates
from wallstress.prepare.mapping import map_columns
from wallstress.prepare.validate import validate
from wallstress.schema import fields as schema
from wallstress.schema.headers import match_header


def _codes(m, column=None):
    f = m.findings
    if column is not None:
        f = f[f["column"] == column]
    return set(f["code"])


def test_mm_headers_equal_canonical_cm():
    """1 mm = 0.1 cm (SI prefixes, BIPM SI Brochure 2019): mm headers give the canonical cm values."""
    cm = pd.DataFrame({"ivsd_cm": [0.9, 1.1], "lvidd_cm": [4.7, 5.2], "pwd_cm": [0.9, 1.0]})
    mm = pd.DataFrame({"IVSd (mm)": [9, 11], "LVIDd [mm]": [47, 52], "PWd, mm": [9, 10]})
    a = map_columns(cm).canonical
    b = map_columns(mm).canonical
    pd.testing.assert_frame_equal(a, b, rtol=1e-12)
    bases = {d["field"]: d["unit_basis"] for d in map_columns(mm).mapping}
    assert bases == {"ivsd_cm": "header", "lvidd_cm": "header", "pwd_cm": "header"}
    assert {d["unit_basis"] for d in map_columns(cm).mapping} == {"canonical name"}


def test_imperial_and_kpa_headers():
    """1 in = 2.54 cm, 1 lb = 0.45359237 kg (exact definitions); 16 kPa = 120.01 mmHg
    (1 kPa = 7.50062 mmHg)."""
    raw = pd.DataFrame({"Height (in)": [70.0], "Weight (lb)": [176.0], "SBP (kPa)": [16.0]})
    c = map_columns(raw).canonical
    assert c.loc[0, "height_cm"] == pytest.approx(177.8, abs=1e-12)
    assert c.loc[0, "weight_kg"] == pytest.approx(79.83225712, rel=1e-9)
    assert c.loc[0, "sbp_mmhg"] == pytest.approx(120.01, abs=0.005)


def test_inferred_unit_note_and_option():
    """LVIDd median 48 is mm (common practice, no source); the inference is a column note that says
    how to state the unit; --units mm gives the same numbers with basis 'option'."""
    raw = pd.DataFrame({"LVIDd": [48.0, 52.0], "Height": [1.75, 1.62]})
    m = map_columns(raw)
    assert m.canonical["lvidd_cm"].tolist() == pytest.approx([4.8, 5.2])
    assert m.canonical["height_cm"].tolist() == pytest.approx([175.0, 162.0])
    notes = m.findings[m.findings["code"] == "unit_inferred"]
    assert set(notes["row"]) == {-1} and set(notes["severity"]) == {"note"}
    assert notes["message"].str.contains(r"e.g. .LVIDd \(mm\)").any()
    assert notes["message"].str.contains("--units").any()
    m2 = map_columns(raw, Options(units="mm"))
    assert m2.canonical["lvidd_cm"].tolist() == pytest.approx([4.8, 5.2])
    assert [d["unit_basis"] for d in m2.mapping if d["field"] == "lvidd_cm"] == ["option"]
    # the option never overrides a unit in the header
    m3 = map_columns(pd.DataFrame({"LVIDd (cm)": [4.8]}), Options(units="mm"))
    assert m3.canonical.loc[0, "lvidd_cm"] == pytest.approx(4.8)


def test_unit_doubtful_when_header_contradicts_values():
    """A header saying cm over values of 48: kept as written, but warned. Common practice, no source."""
    m = map_columns(pd.DataFrame({"LVIDd (cm)": [47.0, 48.0, 50.0]}))
    assert m.canonical.loc[0, "lvidd_cm"] == 47.0
    assert "unit_doubtful" in _codes(m)


def test_text_numbers():
    """Decimal comma, units in cells, spaces and mixed separators in one column are read.
    Common practice, no source."""
    raw = pd.DataFrame({"LVIDd (cm)": ["4,8", " 4.9 ", "5.0 cm", "50 mm", "4,7", "", "n/a", "abc"]})
    m = map_columns(raw)
    v = m.canonical["lvidd_cm"].to_numpy()
    np.testing.assert_allclose(v[:5], [4.8, 4.9, 5.0, 5.0, 4.7])
    assert np.isnan(v[5:]).all()
    bad = m.findings[m.findings["code"] == "not_a_number"]
    assert list(bad["row"]) == [7] and list(bad["value"]) == ["abc"]
    assert "unit_in_cells" in _codes(m)


def test_cell_unit_of_wrong_quantity_is_not_a_number():
    """'48 kg' in a length column is not read (kg is not a length). Common practice, no source."""
    value, cell_factor, bad = parse_numbers(pd.Series(["48 kg", "4.8 cm", True]), "length")
    assert np.isnan(value[0]) and bad[0]
    assert value[1] == 4.8 and cell_factor[1] == 1.0
    assert bad[2]


def test_numeric_fast_path_dtype():
    """Already-numeric columns come out float64, NaN in -> NaN out, inf flagged."""
    raw = pd.DataFrame({"lvidd_cm": np.array([4.8, np.nan, np.inf]), "age": [50, 60, 70]})
    m = map_columns(raw)
    assert m.canonical["lvidd_cm"].dtype == np.float64
    assert np.isnan(m.canonical["lvidd_cm"].iloc[1:]).all()
    assert list(m.findings[m.findings["code"] == "not_a_number"]["row"]) == [2]
    assert m.canonical["age_years"].dtype == np.float64


@pytest.mark.parametrize(
    "values,expected",
    [
        (["F", "M", "f", "m"], ["F", "M", "F", "M"]),
        (["female", "Male", "woman", "man"], ["F", "M", "F", "M"]),
        (["w", "m", "W", "M"], ["F", "M", "F", "M"]),  # German weiblich / maennlich
        (["F", "H"], ["F", "M"]),  # French femme / homme
    ],
)
def test_sex_codes(values, expected):
    """Sex codes in common use (common practice, no source)."""
    out, probs = parse_sex(pd.Series(values, dtype=object))
    assert out.tolist() == expected
    assert not any(p.any() for p in probs.values())


def test_sex_numeric_and_ambiguous_not_guessed():
    """Numeric codes and M next to H (Spanish mujer/hombre) are not guessed. Common practice."""
    m = map_columns(pd.DataFrame({"Sex": [1, 2, "F", "x"]}))
    assert m.canonical["sex"].iloc[:2].isna().all()
    assert m.canonical["sex"].iloc[2] == "F"
    assert {"sex_numeric_code", "sex_unreadable"} <= _codes(m)
    out, probs = parse_sex(pd.Series(["M", "H", "M"]))
    assert out.isna().all() and probs["sex_ambiguous"].all()
    sex = map_columns(pd.DataFrame({"sex": ["F", None]})).canonical["sex"]
    assert sex.dtype == SEX_DTYPE and sex.iloc[0] == "F" and pd.isna(sex.iloc[1])


def test_dates_formats_and_serial():
    """ISO 8601; day-first with dots; 1900-system serials checked against openpyxl's from_excel
    (reference library; ECMA-376 Part 1 18.17.4)."""
    s = pd.Series(
        [
            "2020-03-04",
            "04.03.2020",
            43894,
            "20200304",
            dt.date(2020, 3, 4),
            dt.datetime(2020, 3, 4, 10, 30),
            "43894",
            None,
        ],
        dtype=object,
    )
    out, probs = parse_dates(s)
    assert out.dtype == "datetime64[ns]"
    assert (out.iloc[:7].dt.normalize() == pd.Timestamp("2020-03-04")).all()
    assert pd.Timestamp(from_excel(43894)) == pd.Timestamp("2020-03-04")
    assert out.iloc[5] == pd.Timestamp("2020-03-04 10:30")
    assert pd.isna(out.iloc[7])
    assert not probs["date_unreadable"].any()
    # a numeric column of serials
    num, _ = parse_dates(pd.Series([43894.0, 45000.5]))
    assert num.iloc[1] == pd.Timestamp(from_excel(45000.5))


def test_dates_slash_order_from_column():
    """The column's unambiguous rows decide day- vs month-first. Common practice, no source."""
    day, p = parse_dates(pd.Series(["03/04/2020", "13/04/2020"]))
    assert day.iloc[0] == pd.Timestamp("2020-04-03") and not p["date_ambiguous"].any()
    mon, p = parse_dates(pd.Series(["03/04/2020", "04/13/2020"]))
    assert mon.iloc[0] == pd.Timestamp("2020-03-04") and not p["date_ambiguous"].any()
    both, p = parse_dates(pd.Series(["03/04/2020", "13/04/2020", "04/13/2020"]))
    assert pd.isna(both.iloc[0]) and p["date_ambiguous"].tolist() == [True, False, False]
    assert both.iloc[1] == pd.Timestamp("2020-04-13") and both.iloc[2] == pd.Timestamp("2020-04-13")
    unsure, p = parse_dates(pd.Series(["03/04/2020", "05/06/2021"]))
    assert unsure.iloc[0] == pd.Timestamp("2020-04-03")
    assert p["date_ambiguous_assumed"].all()


def test_dates_bad_and_out_of_range():
    """31.02 does not exist; 1890 and next year are out of range (before 1950 / after today)."""
    nxt = f"{pd.Timestamp.now().year + 1}-01-01"
    m = map_columns(pd.DataFrame({"Exam date": ["31.02.2020", "1890-05-01", nxt, "soon"]}))
    d = m.canonical["study_date"]
    assert pd.isna(d.iloc[0]) and pd.isna(d.iloc[3])
    f = m.findings
    assert set(f[f["code"] == "date_unreadable"]["row"]) == {0, 3}
    assert set(f[f["code"] == "date_out_of_range"]["row"]) == {1, 2}


def test_ids_as_text():
    """1001.0 read from a sheet is the id '1001'; empty is NaN. Common practice, no source."""
    assert parse_ids(pd.Series([1001.0, np.nan, 7.5])).tolist()[0] == "1001"
    out = parse_ids(pd.Series([1001.0, " A-7 ", "", None], dtype=object))
    assert out.iloc[0] == "1001" and out.iloc[1] == "A-7"
    assert out.iloc[2:].isna().all() and pd.api.types.is_string_dtype(out.dtype)


@settings(max_examples=200, deadline=None)
@example(["A-7", None, "B"], 1)
@example(["\u3000A", "B"], 0)
@given(
    st.lists(
        st.one_of(
            st.none(),
            st.text(alphabet="A0-~ \t\u00a0\u3000\u2009é", max_size=5),
        ),
        min_size=1,
        max_size=8,
    ),
    st.integers(0, 3),
)
def test_text_ids_left_as_read_only_where_stripping_changes_nothing(texts, skip):
    """Text ids are stripped of spaces at both ends (any Unicode space: the Unicode Standard's
    White_Space property) and an empty id is missing; the shortcut that skips stripping when no
    cell begins or ends with anything but printable ASCII gives the same ids as stripping every
    cell (pyarrow's utf8_trim_whitespace, the reference), also on a slice of a longer array
    (Arrow's offset)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    from wallstress.prepare.cells import _nothing_to_strip

    for kind in (pa.large_string(), pa.string()):  # 64-bit and 32-bit offsets
        whole = pa.array(["  pad  "] * skip + texts, type=kind)
        arr = whole.slice(skip)
        got = parse_ids(pd.Series(pd.array(arr, dtype=pd.StringDtype("pyarrow", np.nan))))
        want = pc.utf8_trim_whitespace(arr).to_pylist()
        want = [None if w is None or w == "" else w for w in want]
        assert [None if pd.isna(g) else g for g in got.tolist()] == want
        if _nothing_to_strip(arr):  # read off the buffers as they are (pandas may widen them)
            assert pc.utf8_trim_whitespace(arr).equals(arr) and "" not in arr.to_pylist()


def test_whole_number_ids_are_exact_integers():
    """A column of whole numbers is read as integer ids (Int64), exactly: 2^60 and 2^60 + 1 are two
    ids, though a float64 cannot tell them apart (IEEE 754 double: 53-bit significand). Blank is
    <NA>; 1001.0 from a sheet is 1001."""
    big = parse_ids(pd.Series([2**60, 2**60 + 1], dtype="int64"))
    assert big.dtype == "Int64" and big.tolist() == [2**60, 2**60 + 1]
    assert float(2**60) == float(2**60 + 1)  # why the integers must not pass through floats
    sheet = parse_ids(pd.Series([1001.0, np.nan, 3.0]))
    assert sheet.dtype == "Int64" and sheet.iloc[0] == 1001 and sheet.isna().tolist()[1]
    raw = pd.DataFrame({"study_id": [2**60, 2**60 + 1, 2**60], "sex": ["F"] * 3})
    _, f = validate(map_columns(raw).canonical)
    assert set(f.loc[f["code"] == "duplicate_study_id", "row"]) == {0, 2}


def test_match_header():
    """Case, spaces, punctuation and bracketed units are ignored. Common practice, no source."""
    assert match_header("  lvid_D (mm) ")[0] == "lvidd_cm"
    assert match_header("Height, in")[0] == "height_cm"
    assert match_header("lvidd mm")[0] == "lvidd_cm"
    assert match_header("weight in kg")[0] == "weight_kg"
    assert match_header("favourite colour") == (None, "")


def test_ids_of_any_python_objects_are_read():
    """Found by the fuzz test: a column mixing a date and a number beyond 64-bit integers."""
    out = parse_ids(pd.Series([pd.Timestamp("2000-01-01"), 9223372036854775808.0], dtype=object))
    # beyond 2**53 a float is not an exact whole number: written as Python writes it
    assert out.iloc[0].startswith("2000-01-01") and out.iloc[1] == "9.223372036854776e+18"


@pytest.mark.parametrize(
    "header, field",
    [
        ("Patient No", "patient_id"),
        ("Patient No.", "patient_id"),
        ("Patient #", "patient_id"),
        ("Hospital number", "patient_id"),
        ("MRN", "patient_id"),
        ("Exam No", "study_id"),
        ("Exam nr", "study_id"),
        ("Study number", "study_id"),
        ("Accession", "study_id"),
        ("Exam date", "study_date"),
    ],
)
def test_identifier_headers_of_real_exports(header, field):
    """How echo and hospital systems name patient and study numbers (common practice, no source)."""
    assert match_header(header)[0] == field


def test_columns_option_and_unknown_field():
    """The lab's own map is used; an unknown target lists the valid names."""
    raw = pd.DataFrame({"Septum d.": [1.0], "Cavity": [5.0]})
    m = map_columns(raw, Options(columns={"Septum d.": "ivsd_cm", "Cavity": "LVIDd"}))
    assert set(m.canonical.columns) == {"ivsd_cm", "lvidd_cm"}
    assert {d["field"]: d["source_column"] for d in m.mapping}["lvidd_cm"] == "Cavity"
    with pytest.raises(InputError, match=r"'nonsense' is not a known field; use one of study_id"):
        map_columns(raw, Options(columns={"Cavity": "nonsense"}))
    with pytest.raises(InputError, match=r"units='inch' is not valid; use one of auto, mm, cm"):
        map_columns(raw, Options(units="inch"))


def test_duplicate_field_first_wins():
    """Two columns for one field: the first is used, the other carried through with a finding."""
    raw = pd.DataFrame({"LVIDd (mm)": [48.0], "lvidd_cm": [9.9], "notes": ["x"]})
    m = map_columns(raw)
    assert m.canonical.loc[0, "lvidd_cm"] == pytest.approx(4.8)
    assert m.unmapped == ["lvidd_cm", "notes"]
    assert "duplicate_field" in _codes(m, "lvidd_cm")


def test_raw_not_mutated_and_index_positional():
    """The raw frame is untouched; the canonical index is 0..n-1 whatever the raw index."""
    raw = pd.DataFrame({"LVIDd": ["4,8", "5,0"], "sex": ["w", "m"]}, index=[10, 3])
    before = raw.copy(deep=True)
    m = map_columns(raw)
    pd.testing.assert_frame_equal(raw, before)
    assert list(m.canonical.index) == [0, 1]


_HEADERS = st.sampled_from(
    [
        *[f.name for f in schema.FIELDS],
        "LVIDd (mm)",
        "IVSd [cm]",
        "Height, in",
        "Weight (lb)",
        "SBP (kPa)",
        "sex",
        "date",
        "junk",
        "",
        "Notes",
        "ivs",
        "A1 (cm²)",
        "ET (s)",
    ]
)
_CELL = st.one_of(
    st.none(),
    st.floats(allow_nan=True, allow_infinity=True),
    st.integers(min_value=-(10**12), max_value=10**12),
    st.text(max_size=12),
    st.booleans(),
    st.sampled_from(["4,8", "48 mm", "F", "m", "03/04/2020", "2020-13-45", "#N/A", "1e400", "-"]),
    st.datetimes(min_value=dt.datetime(1800, 1, 1), max_value=dt.datetime(2200, 1, 1)),
)


@st.composite
def _tables(draw):
    ncol = draw(st.integers(0, 6))
    nrow = draw(st.integers(0, 12))
    headers = [draw(_HEADERS) for _ in range(ncol)]
    data = {}
    for j, _h in enumerate(headers):
        kind = draw(st.sampled_from(["mixed", "float", "int"]))
        if kind == "float":
            col = draw(st.lists(st.floats(allow_nan=True), min_size=nrow, max_size=nrow))
        elif kind == "int":
            col = draw(st.lists(st.integers(-1000, 1000), min_size=nrow, max_size=nrow))
        else:
            col = draw(st.lists(_CELL, min_size=nrow, max_size=nrow))
        data[j] = pd.Series(col, dtype=None if kind != "mixed" else object)
    df = pd.DataFrame(data, index=pd.RangeIndex(nrow)) if ncol else pd.DataFrame(index=range(nrow))
    df.columns = headers
    return df


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(_tables(), st.sampled_from(["auto", "mm", "cm"]))
def test_fuzz_map_columns(raw, unit_option):
    """Fuzzing: only InputError may be raised; rows kept in count and order; raw unchanged."""
    before = raw.copy(deep=True)
    try:
        m = map_columns(raw, Options(units=unit_option))
    except InputError:
        return
    pd.testing.assert_frame_equal(raw, before)
    assert len(m.canonical) == len(raw)
    assert list(m.canonical.index) == list(range(len(raw)))
    for name in m.canonical.columns:
        kind = schema.BY_NAME[name].kind
        col = m.canonical[name]
        if kind == "number":
            assert col.dtype == np.float64
        elif kind == "date":
            assert col.dtype == "datetime64[ns]"
        elif kind == "sex":  # "F", "M" or missing, as a Categorical
            assert col.dtype == SEX_DTYPE
        elif col.dtype == "Int64":  # identifiers read from whole numbers
            src = next(e["source_column"] for e in m.mapping if e["field"] == name)
            first = raw.loc[:, [c == src for c in raw.columns]].iloc[:, 0]  # the one read
            assert first.dtype.kind in "iuf"
        else:  # identifiers as text
            assert pd.api.types.is_string_dtype(col.dtype)
            assert all(isinstance(v, str) or pd.isna(v) for v in col)
    if len(m.findings):
        assert m.findings["row"].between(-1, max(len(raw) - 1, -1)).all()


@settings(max_examples=200, deadline=None)
@given(
    st.lists(
        st.one_of(st.none(), st.sampled_from(["F", "M", "f", " F", "M ", "1", "", "x", "Fe"])),
        min_size=0,
        max_size=12,
    ),
    st.integers(0, 3),
)
def test_factorize_text_vs_pandas(values, start):
    """Each row's stripped text, read by the fast paths (one-byte codes read off the Arrow
    buffer; factorize before stripping), is what pandas' own ``str.strip`` gives row by row
    (the reference); missing stays missing. Slices of a column read alike."""
    s = pd.Series(values, dtype="str").iloc[start:]
    codes, uniq = factorize_text(s)
    got = [None if c < 0 else uniq.iloc[c] for c in codes]
    want = [None if pd.isna(v) else v for v in s.str.strip()]
    assert got == want
    assert uniq.is_unique  # one code per distinct text: " F" and "F" share theirs


@settings(max_examples=200, deadline=None)
@example(["2262-01-05"])  # a year datetime64[ns] holds only in part: both paths leave it unread
@example(["1677-12-31", "2021-03-04"])
@example(["2023-02-29", "2024-02-29"])  # no such day in 2023: the whole column goes the long way
@example([None, "2021-03-04"])
@example([None])
@given(
    st.lists(
        st.one_of(
            # across both ends of what datetime64[ns] holds (1677-09-21 to 2262-04-11)
            st.dates(dt.date(1600, 1, 1), dt.date(2300, 12, 31)).map(lambda d: d.isoformat()),
            st.tuples(st.integers(1990, 2030), st.integers(0, 13), st.integers(0, 32)).map(
                lambda t: f"{t[0]}-{t[1]}-{t[2]}"
            ),
            st.tuples(st.integers(1990, 2030), st.integers(0, 13), st.integers(0, 32)).map(
                lambda t: f"{t[0]:04d}-{t[1]:02d}-{t[2]:02d}"  # plain in form, maybe no such day
            ),
            st.sampled_from(
                [
                    "",
                    "na",
                    "-",
                    None,
                    "2021/02/03",
                    "03/02/2021",
                    "0001-01-01",
                    "0000-01-01",
                    "x",
                    " 2021-02-03",
                    "2021-02-03 ",
                    "2021-02-03T10:00",
                    "20210203",
                ]
            ),
        ),
        min_size=1,
        max_size=10,
    )
)
def test_plain_iso_fast_paths_read_as_the_general_path(texts):
    """Dates read by the one-call path for plain YYYY-MM-DD columns (Arrow's parser, on a whole
    column held as Arrow text, or on its distinct texts with the missing tokens left empty)
    equal those read by the general path (regexes,
    day/month evidence), with the same problems flagged; texts that are not all plain ISO take
    the general path. Reference: the general path itself, whose ISO and day-first rules are
    tested above against ISO 8601."""
    from wallstress.prepare import dates as date_parse

    for s in (pd.Series(texts, dtype="str"), pd.Series(texts, dtype=object)):
        fast = date_parse.parse_dates(s)
        original = date_parse._plain_iso_dates
        date_parse._plain_iso_dates = lambda *args: None
        try:
            general = date_parse.parse_dates(s)
        finally:
            date_parse._plain_iso_dates = original
        pd.testing.assert_series_equal(fast[0], general[0])
        for k in general[1]:
            assert np.array_equal(fast[1][k], general[1][k]), k


def test_plain_iso_path_reads_plain_iso_text_only():
    """The one-call path takes a column only when every present cell is YYYY-MM-DD and a real day
    (ISO 8601-1:2019, calendar date, complete representation, extended format); 2023-02-29 does
    not exist (2023 is not a leap year: Gregorian rule, common practice, no source), so that
    column goes the long way and the cell gets its finding there."""
    from wallstress.prepare import dates as date_parse

    got = date_parse._plain_iso_dates(pd.Series(["2024-02-29", None, "1999-12-31"], dtype="str"))
    assert got.tolist()[0] == pd.Timestamp("2024-02-29") and pd.isna(got.tolist()[1])
    for texts in (["2023-02-29"], ["2021-02-03", "na"], ["2021-2-3"], [None], ["0001-01-01"]):
        assert date_parse._plain_iso_dates(pd.Series(texts, dtype="str")) is None, texts
    # on distinct texts, a missing token marked as such stays empty and the rest are read
    tokens = pd.Series(["2021-02-03", "na"], dtype="str")
    got = date_parse._plain_iso_dates(tokens, np.array([False, True]))
    assert got[0] == pd.Timestamp("2021-02-03") and pd.isna(got[1])
    dates, problems = date_parse.parse_dates(pd.Series(["2023-02-29", "2023-03-01"], dtype="str"))
    assert pd.isna(dates[0]) and dates[1] == pd.Timestamp("2023-03-01")
    assert problems["date_unreadable"].tolist() == [True, False]


def test_placeholder_date_outside_datetime_range_is_a_finding_not_a_stop():
    """'0001-01-01' (a placeholder some exports write for "no date") and '9999-12-31' lie outside
    what datetime64[ns] holds (numpy: 1677-09-21 to 2262-04-11): the cell is left unread with a
    date_unreadable error and the batch goes on (found by the fast-path property test above)."""
    raw = pd.DataFrame(
        {"study_date": ["0001-01-01", "2021-03-04", "9999-12-31", "01/01/0001"], "sex": ["F"] * 4}
    )
    m = map_columns(raw)
    assert m.canonical["study_date"].isna().tolist() == [True, False, True, True]
    f = m.findings
    assert set(f.loc[f["code"] == "date_unreadable", "row"]) == {0, 2, 3}


def test_serial_date_beyond_nanosecond_range_is_unread():
    """Serial 132321 is 2262-04-12 in the 1900 date system (ECMA-376 Part 1, 18.17.4), beyond what
    datetime64[ns] holds (numpy: to 2262-04-11): a finding on its row, not a crash (found by the
    fuzz test above)."""
    m = map_columns(pd.DataFrame({"date": [132321.0, 45000.0]}))
    assert pd.isna(m.canonical["study_date"].iloc[0])
    assert m.canonical["study_date"].iloc[1] == pd.Timestamp("2023-03-15")
    assert "date_unreadable" in set(m.findings.loc[m.findings["row"] == 0, "code"])
