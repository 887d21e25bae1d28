"""Reading cells as the user wrote them: numbers written as text, sex codes, identifiers.

Vectorised per column: each distinct text is parsed once (``factorize``) and the result spread back.
Nothing here raises on a bad cell: it becomes NaN (or empty) and the caller writes a finding.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa

from wallstress import units

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


def _expand(values: np.ndarray, codes: np.ndarray, fill) -> np.ndarray:
    out = np.asarray(values)[np.where(codes >= 0, codes, 0)] if len(values) else None
    if out is None:
        return np.full(len(codes), fill, dtype=np.asarray(values).dtype if len(values) else object)
    out = out.copy()
    out[codes < 0] = fill
    return out


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


SEX_DTYPE = pd.CategoricalDtype(["F", "M"], ordered=False)


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
    codes, t = _factorize(_as_text(s))
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
    per_row = _expand(which, codes, 0).astype(np.int8) - np.int8(1)
    out = pd.Series(pd.Categorical.from_codes(per_row, dtype=SEX_DTYPE, validate=False))
    return out, {
        "sex_ambiguous": _expand(ambiguous, codes, False).astype(bool),
        "sex_numeric_code": _expand(numeric, codes, False).astype(bool),
        "sex_unreadable": _expand(unreadable, codes, False).astype(bool),
    }


def parse_ids(s: pd.Series) -> pd.Series:
    """Identifiers as text (NaN for empty); 1001.0 read from a sheet becomes "1001".

    A column of whole numbers comes back in pandas' text dtype (built by Arrow, no Python string
    per row); other columns as object text.
    """
    n = len(s)
    if pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype):
        v = s.to_numpy(dtype="float64", na_value=np.nan)
        integral = np.isfinite(v) & (np.floor(v) == v) & (np.abs(v) < 2**53)
        other = np.isfinite(v) & ~integral
        if not other.any():
            whole = np.where(integral, v, 0).astype("int64")
            text = pa.array(whole, mask=~integral).cast(pa.large_string())
            return pd.Series(pd.array(text, dtype=pd.StringDtype("pyarrow", na_value=np.nan)))
        out = np.full(n, np.nan, dtype=object)
        if integral.any():
            out[integral] = v[integral].astype("int64").astype(str).astype(object)
        out[other] = pd.Series(v[other]).astype(str).to_numpy(dtype=object)
        return pd.Series(out, dtype=object)
    arr = s.to_numpy(dtype=object)
    is_float = np.fromiter((type(x) is float for x in arr), dtype=bool, count=n)
    t = _as_text(s).reset_index(drop=True)
    if is_float.any():
        fl = pd.Series(arr[is_float], dtype="float64")
        t[is_float] = parse_ids(fl).to_numpy()
    t = t.astype(object).where(t.notna() & (t != ""), np.nan)
    return pd.Series(t.to_numpy(dtype=object), dtype=object)
