"""Reading cells as the user wrote them: numbers written as text, sex codes, identifiers.

Vectorised per column: each distinct text is parsed once (``factorize``) and the result spread back.
Nothing here raises on a bad cell: it becomes NaN (or empty) and the caller writes a finding.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from wallstress.schema import units
from wallstress.schema.fields import SEXES

MISSING_TOKENS = frozenset(
    {
        "",
        "na",
        "n/a",
        "n.a.",
        "nan",
        "none",
        "null",
        "-",
        "--",
        "---",
        "—",
        "–",
        ".",
        "missing",
        "nd",
        "n.d.",
    }
)


_FEMALE = frozenset(
    {
        "f",
        "w",
        "female",
        "woman",
        "women",
        "fem",
        "weiblich",
        "frau",
        "femme",
        "feminin",
        "féminin",
        "femenino",
        "femenina",
        "feminino",
        "mujer",
        "donna",
        "kvinna",
        "kvinde",
        "kvinne",
        "vrouw",
    }
)


_MALE = frozenset(
    {
        "m",
        "male",
        "man",
        "men",
        "mann",
        "männlich",
        "maennlich",
        "masculin",
        "masculino",
        "hombre",
        "homme",
        "uomo",
        "mand",
        "h",
    }
)


_NUM_RE = r"^([+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?)\s*(\S.*)?$"


def _as_text(s: pd.Series) -> pd.Series:
    """Values as stripped text (pandas ``str`` dtype, vectorised string methods), NaN kept."""
    if not pd.api.types.is_string_dtype(s.dtype) or s.dtype == object:
        s = s.astype(object).where(s.notna()).astype("str")
    return s.str.strip().reset_index(drop=True)


def _factorize(t: pd.Series) -> tuple[np.ndarray, pd.Series]:
    """Codes (-1 for NaN) and the distinct values: slow text parsing runs once per distinct value."""
    codes, uniq = pd.factorize(t, use_na_sentinel=True)
    return codes, pd.Series(np.asarray(uniq, dtype=object), dtype="str")


def _arrow_text(s: pd.Series) -> pa.Array | None:
    """The column as one Arrow string array when pandas already holds it so (``str`` dtype), else
    None."""
    if not isinstance(s.dtype, pd.StringDtype) or s.dtype.storage != "pyarrow":
        return None
    arr = pa.array(s.array)
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    return arr if pa.types.is_large_string(arr.type) or pa.types.is_string(arr.type) else None


def text_buffers(text: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """The offsets (one more than the cells, from the array's own offset) and the data bytes of
    Arrow text (``string`` or ``large_string``), as numpy views of its buffers: no copy. Cell
    ``i`` is ``data[offsets[i]:offsets[i + 1]]``; a missing cell's offsets may hold bytes."""
    offset_type = np.int64 if pa.types.is_large_string(text.type) else np.int32
    _, offsets, data = text.buffers()
    edges = np.frombuffer(offsets, dtype=offset_type)[text.offset : text.offset + len(text) + 1]
    return edges, np.frombuffer(data, dtype=np.uint8) if data else np.zeros(0, dtype=np.uint8)


def _single_byte_codes(arr: pa.Array) -> tuple[np.ndarray, list[str]] | None:
    """Codes and distinct texts of a string array whose every present value is one byte long
    (a sex column of F/M, a code column of digits), read off the data buffer without hashing a
    string per row; None when any value is longer or empty."""
    n = len(arr)
    if n == 0:
        return None
    lengths = pc.binary_length(arr)
    lo, hi = pc.min_max(lengths).values()
    if lo.as_py() != 1 or hi.as_py() != 1:  # also None when every value is missing
        return None
    edges, data = text_buffers(arr)
    starts = edges[:-1]
    missing = arr.is_null().to_numpy(zero_copy_only=False) if arr.null_count else None
    if missing is not None:  # a missing value's offset may point past the data
        starts = np.where(missing, 0, starts)
    byte = data[starts].astype(np.int16)  # one byte: ASCII
    if missing is not None:
        byte[missing] = -1
    present = np.flatnonzero(np.bincount(byte[byte >= 0], minlength=128))
    lookup = np.full(129, -1, dtype=np.int64)  # byte -> code; index -1 (missing) stays -1
    lookup[present] = np.arange(present.size)
    return lookup[byte], [chr(b) for b in present]


def factorize_text(s: pd.Series) -> tuple[np.ndarray, pd.Series]:
    """Codes (-1 for missing) into the distinct stripped texts of a column, as
    ``_factorize(_as_text(s))`` gives them.

    A column already held as Arrow text is factorized before stripping (stripping is a function of
    the text, so the result is the same) and a column of one-byte values without hashing; other
    columns go through ``_as_text``, which tells 1, 1.0 and "1" apart by their text.
    """
    arr = _arrow_text(s)
    if arr is None:
        return _factorize(_as_text(s))
    fast = _single_byte_codes(arr)
    if fast is not None:
        codes, texts = fast
        raw = pd.Series(texts, dtype="str")
    else:
        codes, uniq = pd.factorize(s, use_na_sentinel=True)
        raw = pd.Series(np.asarray(uniq, dtype=object), dtype="str")
    # distinct raw texts may strip to the same text (" F" and "F"): merge their codes
    stripped = raw.str.strip()
    merged, uniq = pd.factorize(stripped, use_na_sentinel=True)
    codes = np.asarray(codes)
    if len(uniq) != len(raw):
        codes = _expand(merged, codes, -1)
    return codes, pd.Series(np.asarray(uniq, dtype=object), dtype="str")


def _expand(values: np.ndarray, codes: np.ndarray, fill) -> np.ndarray:
    """``values[codes]`` per row, ``fill`` where the code is -1 (one gather: the fill is appended
    as the last value, which index -1 takes)."""
    values = np.asarray(values)
    if values.size == 0:  # every code is -1
        return np.full(
            len(codes), fill, dtype=object if values.dtype.kind in "OUS" else values.dtype
        )
    if values.dtype.kind in "OUS":
        values = values.astype(object)
    return np.append(values, np.asarray([fill], dtype=values.dtype))[codes]


def _is_missing_text(t: pd.Series) -> np.ndarray:
    return (t.isna() | t.str.lower().isin(MISSING_TOKENS)).to_numpy(dtype=bool)


def parse_numbers(s: pd.Series, quantity: str = "") -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Read a column of numbers written any common way.

    Parameters
    ----------
    s : Series
        Raw cells: numbers, or text such as "4,8", "4.8 cm", " 48 ".
    quantity : str
        Quantity of the field (``units.QUANTITIES``); a unit written in a cell is accepted only if
        it is a unit of this quantity.

    Returns
    -------
    value : ndarray of float64
        The number as written (not converted) [unit of the cell or the column]; NaN where empty or
        unreadable.
    cell_factor : ndarray of float64
        Factor to the internal unit where a cell states its own unit ("4.8 cm"); NaN elsewhere.
    bad : ndarray of bool
        True where a non-empty cell could not be read as a number.
    """
    n = len(s)
    nan = np.full(n, np.nan)
    if pd.api.types.is_bool_dtype(s.dtype):
        return nan, nan.copy(), s.notna().to_numpy(dtype=bool)
    if pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_complex_dtype(s.dtype):
        v = s.to_numpy(dtype="float64", na_value=np.nan)
        bad = np.isinf(v)
        if bad.any():
            v = np.where(bad, np.nan, v)
        return v, nan, bad
    codes, uniq = _factorize(_as_text(s))
    v_u, f_u, bad_u = _numbers_from_text(uniq, quantity)
    return (
        _expand(v_u, codes, np.nan).astype("float64"),
        _expand(f_u, codes, np.nan).astype("float64"),
        _expand(bad_u, codes, False).astype(bool),
    )


def _numbers_from_text(t: pd.Series, quantity: str):
    n = len(t)
    nan = np.full(n, np.nan)
    missing = _is_missing_text(t)
    ext = t.str.extract(_NUM_RE)
    numtxt = ext[0].str.replace(",", ".", regex=False)
    value = pd.to_numeric(numtxt, errors="coerce").to_numpy(dtype="float64", na_value=np.nan)
    unit_txt = ext[1]
    cell_factor = nan.copy()
    has_unit = unit_txt.notna().to_numpy()
    unit_ok = np.ones(n, dtype=bool)
    if has_unit.any():
        table = {}
        for u in pd.unique(unit_txt[has_unit]):
            canon = units.normalise_unit(u)
            try:
                table[u] = units.factor(quantity, canon) if canon else np.nan
            except ValueError:
                table[u] = np.nan
        fac = unit_txt.map(table).to_numpy(dtype="float64", na_value=np.nan)
        cell_factor = np.where(has_unit, fac, np.nan)
        unit_ok = ~has_unit | np.isfinite(fac)
    good = np.isfinite(value) & unit_ok & ~missing
    bad = ~missing & ~good
    value = np.where(good, value, np.nan)
    cell_factor = np.where(good, cell_factor, np.nan)
    return value, cell_factor, bad


SEX_DTYPE = pd.CategoricalDtype(list(SEXES), ordered=False)


def parse_sex(s: pd.Series) -> tuple[pd.Series, dict[str, np.ndarray]]:
    """Sex codes -> "F"/"M"/NaN (a Categorical, ``SEX_DTYPE``), with masks of the rows that could
    not be read.

    F/M, W(eiblich)/M, F/H (femme/homme) and words in several languages are read. "m" is taken as
    male unless the same column also uses "h" (then M could be the Spanish "mujer"): both are left
    unread. Numeric codes (1/2, 0/1) are never guessed.

    Returns
    -------
    sex : Series (Categorical of "F", "M"; NaN where unread)
    problems : dict
        ``{"sex_ambiguous": mask, "sex_numeric_code": mask, "sex_unreadable": mask}``.
    """
    # each distinct text is read once (a column of 10^6 rows holds a handful of spellings)
    codes, t = factorize_text(s)
    low = t.str.lower().str.rstrip(".")
    missing = _is_missing_text(t)
    is_f = low.isin(_FEMALE).to_numpy()
    is_m = low.isin(_MALE).to_numpy()
    letters = set(pd.unique(low[low.str.len() == 1].dropna()))
    ambiguous = np.zeros(len(t), dtype=bool)
    if "h" in letters and "m" in letters:
        ambiguous = low.isin({"m", "h"}).to_numpy()
    numeric = low.str.fullmatch(r"[+-]?\d+(?:\.0*)?").fillna(False).to_numpy(dtype=bool) & ~missing
    unreadable = ~missing & ~is_f & ~is_m & ~numeric
    # per distinct text: 0 unread (NaN), 1 "F", 2 "M"
    which = np.where(ambiguous, 0, np.where(is_m, 2, np.where(is_f, 1, 0)))
    # a Categorical of "F"/"M" (missing where unread): one small code per row, and the sex masks
    # of every later step are integer comparisons instead of one text comparison per row
    per_row = _expand(which.astype(np.int8) - np.int8(1), codes, np.int8(-1))
    out = pd.Series(pd.Categorical.from_codes(per_row, dtype=SEX_DTYPE, validate=False))

    # a mask per problem, spread over the rows only when some distinct text has it
    def per_text(mask):
        return _expand(mask, codes, False) if mask.any() else np.zeros(len(codes), dtype=bool)

    return out, {
        "sex_ambiguous": per_text(ambiguous),
        "sex_numeric_code": per_text(numeric),
        "sex_unreadable": per_text(unreadable),
    }


_PAIR = r"^\s*(\d{2,3}(?:[.,]\d+)?)\s*/\s*(\d{2,3}(?:[.,]\d+)?)\s*(?:mm\s*hg)?\s*$"


def parse_pressure_pairs(s: pd.Series) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Cuff pressures written as one cell, "128/82" (or "128 / 82 mmHg"): (systolic, diastolic,
    bad) in mmHg; NaN where empty or unreadable, ``bad`` where a non-empty cell is not a pair.

    Each distinct text is read once.
    """
    codes, uniq = _factorize(_as_text(s))
    got = uniq.str.extract(_PAIR, flags=re.IGNORECASE)
    sys_u = pd.to_numeric(got[0].str.replace(",", "."), errors="coerce").to_numpy(dtype=float)
    dia_u = pd.to_numeric(got[1].str.replace(",", "."), errors="coerce").to_numpy(dtype=float)
    bad_u = (~_is_missing_text(uniq)) & np.isnan(sys_u)
    return (
        _expand(sys_u, codes, np.nan).astype("float64"),
        _expand(dia_u, codes, np.nan).astype("float64"),
        _expand(bad_u, codes, False).astype(bool),
    )


_PLAIN_INTEGER = r"^-?(?:0|[1-9][0-9]*)$"


def plain_integers(s: pd.Series) -> bool:
    """True when every non-empty cell is an integer written plainly ("1001", "-3"; not "000123",
    "+5", "1e3" or "1001.0"), so that the number and the text are the same identifier."""
    text = _arrow_text(s)
    if text is None:
        text = pa.array(_as_text(s).to_numpy(dtype=object), type=pa.string(), from_pandas=True)
    ok = pc.match_substring_regex(text, _PLAIN_INTEGER)
    return bool(pc.all(pc.or_(ok, pc.is_null(ok))).as_py() is not False)


def parse_ids(s: pd.Series) -> pd.Series:
    """Identifiers, exactly as written; NaN (or <NA>) for empty.

    A column of whole numbers (1001, or 1001.0 as a sheet stores it) comes back as pandas'
    nullable ``Int64``: the number is the identifier, and ids compare and group as integers
    without one text per row. Any other column comes back as pandas' text dtype (Arrow-backed in
    pandas 3; a column of text stays Arrow text, never one Python object per cell), 1001.0 in it
    written "1001".
    """
    if pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype):
        if s.dtype.kind == "i" or (s.dtype.kind == "u" and s.dtype.itemsize < 8):  # exact
            return s.astype("Int64").reset_index(drop=True)
        v = s.to_numpy(dtype="float64", na_value=np.nan)
        integral = np.isfinite(v) & (np.floor(v) == v) & (np.abs(v) < 2**53)
        if not (np.isfinite(v) & ~integral).any():
            whole = np.where(integral, v, 0).astype("int64")
            return pd.Series(pd.arrays.IntegerArray(whole, ~integral))
        return pd.Series(_ids_as_text(v), dtype=_TEXT_DTYPE)
    text = _arrow_text(s)
    if text is None and s.dtype == object:
        text = _all_text(s.to_numpy(dtype=object))
    if text is not None:  # text throughout (the usual export): stays Arrow text, no object per cell
        t = text
        if not _nothing_to_strip(text):
            t = pc.utf8_trim_whitespace(text)
            t = pc.if_else(pc.equal(t, ""), pa.scalar(None, t.type), t)
        if getattr(_TEXT_DTYPE, "storage", None) != "pyarrow":  # pragma: no cover - pandas < 3
            return pd.Series(t.to_numpy(zero_copy_only=False), dtype=object)
        return pd.Series(pd.array(t, dtype=_TEXT_DTYPE))
    n = len(s)
    arr = s.to_numpy(dtype=object)
    is_float = np.fromiter((type(x) is float for x in arr), dtype=bool, count=n)
    t = _as_text(s).reset_index(drop=True)
    if is_float.any():
        t[is_float] = _ids_as_text(arr[is_float].astype("float64"))
    return t.where(t.notna() & (t != ""))


def _nothing_to_strip(text: pa.Array) -> bool:
    """True when every present cell of Arrow text begins and ends with a printable ASCII
    character other than a space (bytes 0x21-0x7E), read off the offsets and the first and last
    bytes: stripping it then changes no cell and empties none (at 10^6 ids, ~3 ms against ~15 ms
    for stripping). A cell that begins or ends with any other byte (a space, a tab, any
    character beyond ASCII, which may be a space of another script) gives False."""
    if text.null_count == len(text):
        return True
    edges, cells = text_buffers(text)
    starts, ends = edges[:-1], edges[1:]
    if text.null_count:
        present = text.is_valid().to_numpy(zero_copy_only=False)
        starts, ends = starts[present], ends[present]
    if not starts.size:
        return True
    if (ends <= starts).any():  # an empty cell: stripping makes it missing
        return False
    printable = np.uint8(0x7E - 0x21)  # below 0x21, the difference wraps above this
    return bool(
        ((cells[starts] - np.uint8(0x21)) <= printable).all()
        and ((cells[ends - 1] - np.uint8(0x21)) <= printable).all()
    )


# pandas' own dtype for a column of text (``str``, Arrow-backed, in pandas 3)
_TEXT_DTYPE = pd.Series(np.array(["a"], dtype=object)).dtype


def _all_text(arr: np.ndarray) -> pa.Array | None:
    """An object column as one Arrow string array when every present cell is a ``str`` (missing
    as None or NaN), else None (numbers among the text: the general path writes each as an id)."""
    try:
        text = pa.array(arr, from_pandas=True)
    except (pa.ArrowException, OverflowError, TypeError, ValueError):  # not text throughout
        return None
    return text if pa.types.is_string(text.type) or pa.types.is_large_string(text.type) else None


def _ids_as_text(v: np.ndarray) -> np.ndarray:
    """Numbers as identifier text: whole numbers without ".0" ("1001"), others as Python writes
    them, NaN for missing (object array)."""
    integral = np.isfinite(v) & (np.floor(v) == v) & (np.abs(v) < 2**53)
    other = np.isfinite(v) & ~integral
    out = np.full(v.size, np.nan, dtype=object)
    if integral.any():
        out[integral] = v[integral].astype("int64").astype(str).astype(object)
    if other.any():
        out[other] = pd.Series(v[other]).astype(str).to_numpy(dtype=object)
    return out
