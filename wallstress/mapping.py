"""Header mapping: the user's columns -> canonical fields in internal units.

``map_columns(raw, options)`` matches each header (``schema.normalise_header`` + ``schema.ALIASES``,
plus the lab's own ``options.columns``), reads numbers written as text ("4,8", "4.8 cm", " 48 "),
sex codes, dates and ids, and converts every number to the internal unit (cm, kg, mmHg, mL, cm2, ms),
recording how each unit was known: from the canonical name (``lvidd_cm``), the header
(``"LVIDd (mm)"``), the ``units`` option, or inferred from the values (with a note saying how to state
it). Nothing here raises on a bad cell: it becomes NaN with a finding naming the original value.

References
----------
ISO 8601-1:2019, Date and time -- Representations for information interchange (ISO dates).
ECMA-376, Office Open XML File Formats, Part 1, 18.17.4 (1900 date system: serial 1 = 1900-01-01,
with the historical 1900-02-29; serials from 61 on count from 1899-12-30).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress import schema, units
from wallstress.errors import InputError
from wallstress.options import Options

UNIT_OPTIONS: tuple[str, ...] = ("auto", "mm", "cm")
UNIT_BASES: tuple[str, ...] = ("canonical name", "header", "option", "inferred")

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

DATE_MIN = pd.Timestamp("1950-01-01")
_SERIAL_ORIGIN = pd.Timestamp("1899-12-30")  # 1900 system, valid from serial 61 (1900-03-01)


@dataclass
class Mapped:
    """Result of ``map_columns``.

    Attributes
    ----------
    canonical : DataFrame
        RangeIndex 0..n-1 (positions of the input rows); one column per canonical field found:
        numbers float64 in internal units, ``sex`` "F"/"M"/NaN (object), ``study_date``
        datetime64[ns] (NaT where unreadable), ids str with NaN for empty (object).
    mapping : list of dict
        One dict per mapped column: ``source_column``, ``field``, ``unit_from``, ``unit_basis``
        (one of ``UNIT_BASES``; "" for non-numeric fields), ``factor``.
    findings : DataFrame
        Findings table (``wallstress.findings``).
    unmapped : list
        The user's columns not mapped (carried through untouched).
    """

    canonical: pd.DataFrame
    mapping: list = field(default_factory=list)
    findings: pd.DataFrame = field(default_factory=fnd.empty)
    unmapped: list = field(default_factory=list)


# --- header matching -------------------------------------------------------------------------------


def _resolve_field_name(name: object) -> str | None:
    text = str(name).strip()
    if text in schema.BY_NAME:
        return text
    key = schema.normalise_header(text)
    return schema.ALIASES.get(key) or schema.ALIASES.get(key.replace(" ", ""))


def check_columns_option(columns: dict | None) -> dict[str, str]:
    """Validate ``options.columns`` (user header -> canonical name or alias); return header -> field.

    Raises
    ------
    InputError
        A target that is no canonical field; the message lists the valid names.
    """
    out: dict[str, str] = {}
    for user, target in (columns or {}).items():
        fname = _resolve_field_name(target)
        if fname is None:
            raise InputError(
                f"columns: {user!r} -> {target!r}: {target!r} is not a known field; "
                f"use one of {', '.join(schema.BY_NAME)}"
            )
        out[str(user).strip()] = fname
    return out


def match_header(header: object, columns: dict[str, str] | None = None) -> tuple[str | None, str]:
    """The canonical field a header names, and how it was matched.

    Returns ``(field, how)``: ``how`` is "option" (from ``columns``), "canonical name"
    (``lvidd_cm``), "alias" (``LVIDd (mm)``, ``septum``) or "" when nothing matched.

    >>> match_header("LVIDd (mm)"), match_header("lvidd_cm"), match_header("Height, in")
    (('lvidd_cm', 'alias'), ('lvidd_cm', 'canonical name'), ('height_cm', 'alias'))
    """
    text = "" if header is None else str(header).strip()
    if columns:
        if text in columns:
            return columns[text], "option"
        low = schema.normalise_header(text)
        for k, v in columns.items():
            if schema.normalise_header(k) == low and low:
                return v, "option"
    if text in schema.BY_NAME:
        return text, "canonical name"
    key = schema.normalise_header(text)
    if not key:
        return None, ""
    for name in schema.BY_NAME:
        if key == schema.normalise_header(name) and schema.BY_NAME[name].kind == "number":
            return name, "canonical name"
    hit = schema.ALIASES.get(key) or schema.ALIASES.get(key.replace(" ", ""))
    if hit:
        return hit, "alias"
    # a unit written as a trailing word or after a comma: "lvidd mm", "height, in"
    words = key.split()
    if len(words) >= 2 and units.normalise_unit(words[-1]) is not None:
        rest = " ".join(words[:-1])
        if rest.endswith(" in"):  # "weight in kg"
            rest = rest[:-3]
        hit = schema.ALIASES.get(rest) or schema.ALIASES.get(rest.replace(" ", ""))
        if hit:
            return hit, "alias"
    return None, ""


def header_score(headers, columns: dict | None = None) -> int:
    """How many distinct canonical fields a row of headers names (used to find the header row)."""
    cols = check_columns_option(columns) if columns else None
    found = set()
    for h in headers:
        if h is None or (isinstance(h, float) and np.isnan(h)):
            continue
        f, _ = match_header(h, cols)
        if f:
            found.add(f)
    return len(found)


def _header_unit(header: object, fld: schema.Field) -> str | None:
    u = units.parse_header_unit(header)
    if u is not None and units.quantity_of(u) == fld.quantity:
        return u
    return None


# --- value parsing (vectorised per column) ---------------------------------------------------------

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
        bad = ~np.isfinite(v) & ~np.isnan(v)
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


def parse_sex(s: pd.Series) -> tuple[pd.Series, dict[str, np.ndarray]]:
    """Sex codes -> "F"/"M"/NaN (object), with masks of the rows that could not be read.

    F/M, W(eiblich)/M, F/H (femme/homme) and words in several languages are read. "m" is taken as
    male unless the same column also uses "h" (then M could be the Spanish "mujer"): both are left
    unread. Numeric codes (1/2, 0/1) are never guessed.

    Returns
    -------
    sex : Series (object)
    problems : dict
        ``{"sex_ambiguous": mask, "sex_numeric_code": mask, "sex_unreadable": mask}``.
    """
    t = _as_text(s)
    low = t.str.lower().str.rstrip(".")
    missing = _is_missing_text(t)
    out = pd.Series(np.full(len(s), np.nan, dtype=object), dtype=object)
    is_f = low.isin(_FEMALE).to_numpy()
    is_m = low.isin(_MALE).to_numpy()
    out[is_f] = "F"
    out[is_m] = "M"
    letters = set(pd.unique(low[low.str.len() == 1].dropna()))
    ambiguous = np.zeros(len(s), dtype=bool)
    if "h" in letters and "m" in letters:
        ambiguous = low.isin({"m", "h"}).to_numpy()
        out[ambiguous] = np.nan
    numeric = low.str.fullmatch(r"[+-]?\d+(?:\.0*)?").fillna(False).to_numpy(dtype=bool) & ~missing
    unreadable = ~missing & ~is_f & ~is_m & ~numeric
    return out, {
        "sex_ambiguous": ambiguous,
        "sex_numeric_code": numeric,
        "sex_unreadable": unreadable,
    }


_ISO_RE = (
    r"^(\d{4})[-/.](\d{1,2})[-/.](\d{1,2})"
    r"(?:[ T](\d{1,2}):(\d{2})(?::(\d{2})(?:\.\d+)?)?)?(?:Z|[+-]\d{2}:?\d{2})?$"
)
_DMY_RE = (
    r"^(\d{1,2})([./-])(\d{1,2})\2(\d{4}|\d{2})(?:[ T](\d{1,2}):(\d{2})(?::(\d{2})(?:\.\d+)?)?)?$"
)


def _assemble(y, m, d, hh=None, mm=None, ss=None) -> pd.Series:
    parts = {"year": y, "month": m, "day": d}
    for k, v in (("hour", hh), ("minute", mm), ("second", ss)):
        if v is not None:
            parts[k] = pd.to_numeric(v, errors="coerce").fillna(0)
    df = pd.DataFrame(parts).astype("float64")
    ok = df[["year", "month", "day"]].notna().all(axis=1)
    res = pd.Series(pd.NaT, index=df.index, dtype="datetime64[ns]")
    if ok.any():
        res[ok] = pd.to_datetime(df[ok].astype("int64"), errors="coerce").astype("datetime64[ns]")
    return res


def parse_dates(s: pd.Series, *, today: pd.Timestamp | None = None) -> tuple[pd.Series, dict]:
    """Dates written any common way -> datetime64[ns] (NaT where unreadable), with problem masks.

    Read: datetime values; ISO text (2020-03-04); day-first text with dots (04.03.2020, always
    day-first); slash or dash text (04/03/2020), day- or month-first as the column's unambiguous
    rows show (a first number > 12 means day-first, a second > 12 month-first); 8-digit 20200304;
    spreadsheet serial numbers (1900 system); other text via pandas' own parser.

    Problems: ``date_ambiguous_assumed`` (the column never shows its order: day-first assumed),
    ``date_ambiguous`` (the column shows both orders: left unread), ``date_unreadable``,
    ``date_out_of_range`` (before 1950 or after today; kept).
    """
    today = (today or pd.Timestamp.now()).normalize()
    n = len(s)
    none = np.zeros(n, dtype=bool)
    probs = {
        k: none.copy() for k in ("date_ambiguous_assumed", "date_ambiguous", "date_unreadable")
    }
    if pd.api.types.is_datetime64_any_dtype(s.dtype):
        v = s
        if getattr(s.dtype, "tz", None) is not None:
            v = s.dt.tz_localize(None)
        out = pd.Series(v.to_numpy(), dtype="datetime64[ns]")
    elif pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype):
        out, bad = _from_serial(s.to_numpy(dtype="float64", na_value=np.nan))
        probs["date_unreadable"] = bad
    else:
        out, probs = _dates_from_text(s, probs)
    out = out.reset_index(drop=True)
    probs["date_out_of_range"] = (out.notna() & ((out < DATE_MIN) | (out > today))).to_numpy()
    return out, probs


def _from_serial(v: np.ndarray) -> tuple[pd.Series, np.ndarray]:
    ok = np.isfinite(v) & (v >= 61) & (v < 2958466)
    res = pd.Series(pd.NaT, index=range(len(v)), dtype="datetime64[ns]")
    if ok.any():
        res[ok] = _SERIAL_ORIGIN + pd.to_timedelta(np.round(v[ok] * 86400.0), unit="s")
    bad = ~np.isnan(v) & ~ok
    return res, bad


def _dates_from_text(s: pd.Series, probs: dict) -> tuple[pd.Series, dict]:
    codes, uniq = _factorize(_as_text(s))
    out_u, probs_u = _dates_from_unique(uniq, {k: np.zeros(len(uniq), bool) for k in probs})
    out = pd.Series(_expand(out_u.to_numpy(dtype="datetime64[ns]"), codes, np.datetime64("NaT")))
    return out.astype("datetime64[ns]"), {
        k: _expand(v, codes, False).astype(bool) for k, v in probs_u.items()
    }


def _dates_from_unique(t: pd.Series, probs: dict) -> tuple[pd.Series, dict]:
    n = len(t)
    missing = _is_missing_text(t)
    out = pd.Series(pd.NaT, index=range(n), dtype="datetime64[ns]")
    done = missing.copy()

    iso = t.str.extract(_ISO_RE)
    m_iso = iso[0].notna().to_numpy() & ~done
    if m_iso.any():
        out[m_iso] = _assemble(iso[0], iso[1], iso[2], iso[3], iso[4], iso[5])[m_iso]
        done |= m_iso

    ymd = t.str.extract(r"^(\d{4})(\d{2})(\d{2})$")
    m_ymd = ymd[0].notna().to_numpy() & ~done
    if m_ymd.any():
        out[m_ymd] = _assemble(ymd[0], ymd[1], ymd[2])[m_ymd]
        done |= m_ymd

    ser = t.str.fullmatch(r"\d{5}(?:\.\d+)?").fillna(False).to_numpy(dtype=bool) & ~done
    if ser.any():
        vals = pd.to_numeric(t.where(ser), errors="coerce").to_numpy(
            dtype="float64", na_value=np.nan
        )
        res, _ = _from_serial(vals)
        out[ser] = res[ser]
        done |= ser

    dmy = t.str.extract(_DMY_RE)
    m_dmy = dmy[0].notna().to_numpy() & ~done
    if m_dmy.any():
        a = pd.to_numeric(dmy[0], errors="coerce")
        b = pd.to_numeric(dmy[2], errors="coerce")
        y = pd.to_numeric(dmy[3], errors="coerce")
        two = dmy[3].str.len() == 2
        cutoff = pd.Timestamp.now().year % 100
        y = y.where(~two, np.where(y <= cutoff, 2000 + y, 1900 + y))
        dot = (dmy[1] == ".").to_numpy()
        slash = m_dmy & ~dot
        a_np, b_np = a.to_numpy(), b.to_numpy()
        day_ev = slash & (a_np > 12) & (b_np <= 12)
        mon_ev = slash & (b_np > 12) & (a_np <= 12)
        unsure = slash & (a_np <= 12) & (b_np <= 12) & (a_np != b_np)
        dayfirst = np.ones(len(t), dtype=bool)
        if mon_ev.any() and not day_ev.any():
            dayfirst = np.where(slash, False, True)
        if mon_ev.any():
            dayfirst = np.where(mon_ev, False, dayfirst)
        if day_ev.any():
            dayfirst = np.where(day_ev, True, dayfirst)
        if mon_ev.any() and day_ev.any():
            probs["date_ambiguous"] = unsure.copy()
        elif not mon_ev.any() and not day_ev.any():
            probs["date_ambiguous_assumed"] = unsure.copy()
        day = np.where(dayfirst, a_np, b_np)
        mon = np.where(dayfirst, b_np, a_np)
        res = _assemble(y, pd.Series(mon), pd.Series(day), dmy[4], dmy[5], dmy[6])
        take = m_dmy & ~probs["date_ambiguous"]
        out[take] = res[take]
        done |= m_dmy

    rest = ~done
    if rest.any():
        with np.errstate(all="ignore"):
            try:
                guess = pd.to_datetime(t[rest], errors="coerce", format="mixed", dayfirst=True)
                if getattr(guess.dtype, "tz", None) is not None:
                    guess = guess.dt.tz_localize(None)
                out[rest] = guess.astype("datetime64[ns]").to_numpy()
            except (ValueError, TypeError, OverflowError):
                pass
    probs["date_unreadable"] = ~missing & out.isna().to_numpy() & ~probs["date_ambiguous"]
    return out, probs


def parse_ids(s: pd.Series) -> pd.Series:
    """Identifiers as text (object dtype, NaN for empty); 1001.0 read from a sheet becomes "1001"."""
    n = len(s)
    if pd.api.types.is_numeric_dtype(s.dtype) and not pd.api.types.is_bool_dtype(s.dtype):
        v = s.to_numpy(dtype="float64", na_value=np.nan)
        integral = np.isfinite(v) & (np.floor(v) == v) & (np.abs(v) < 2**53)
        out = np.full(n, np.nan, dtype=object)
        if integral.any():
            out[integral] = v[integral].astype("int64").astype(str).astype(object)
        other = np.isfinite(v) & ~integral
        if other.any():
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


# --- the mapping ------------------------------------------------------------------------------------


def _unit_name(header: str) -> str:
    return header if header else "the column"


def map_columns(raw: pd.DataFrame, options: Options | None = None) -> Mapped:
    """Map the user's columns to canonical fields in internal units.

    Parameters
    ----------
    raw : DataFrame
        Cells under the user's own headers, one row per study (``readers.StudyTable.table``).
        Not modified.
    options : Options, optional
        ``columns`` (user header -> canonical field) and ``units`` ("auto", "mm", "cm": unit of the
        linear LV dimensions whose header states none).

    Returns
    -------
    Mapped

    Raises
    ------
    InputError
        ``options.columns`` names an unknown field, or ``options.units`` is not one of
        ``UNIT_OPTIONS``.
    """
    options = options or Options()
    if options.units not in UNIT_OPTIONS:
        raise InputError(
            f"units={options.units!r} is not valid; use one of {', '.join(UNIT_OPTIONS)}"
        )
    cols_opt = check_columns_option(options.columns)
    n = len(raw)
    parts: list[pd.DataFrame] = []
    canonical: dict[str, object] = {}
    mapping: list[dict] = []
    unmapped: list = []
    taken: dict[str, str] = {}

    for j, col in enumerate(raw.columns):
        header = "" if col is None else str(col)
        fname, how = match_header(col, cols_opt)
        if fname is None:
            unmapped.append(col)
            continue
        if fname in taken:
            unmapped.append(col)
            parts.append(
                fnd.make(
                    [-1],
                    code="duplicate_field",
                    severity="warning",
                    column=header,
                    field=fname,
                    message=f"Column {header!r} also names {fname}, already read from column "
                    f"{taken[fname]!r}; the first is used and this one is carried through unread. "
                    "Rename one of them or map them with --columns.",
                )
            )
            continue
        taken[fname] = header
        fld = schema.BY_NAME[fname]
        s = raw.iloc[:, j].reset_index(drop=True)
        if fld.kind == "number":
            values, entry, fparts = _map_number(s, header, fld, how, options.units)
            canonical[fname] = values
            mapping.append(entry)
            parts.extend(fparts)
            continue
        if fld.kind == "sex":
            out, probs = parse_sex(s)
            canonical[fname] = out
            parts.extend(_row_findings(s, header, fname, probs, _SEX_MESSAGES))
        elif fld.kind == "date":
            out, probs = parse_dates(s)
            canonical[fname] = out
            parts.extend(_row_findings(s, header, fname, probs, _DATE_MESSAGES))
        else:
            canonical[fname] = parse_ids(s)
        mapping.append(
            {"source_column": col, "field": fname, "unit_from": "", "unit_basis": "", "factor": 1.0}
        )

    for user in cols_opt:
        if not any(str(c).strip() == user for c in raw.columns) and not any(
            schema.normalise_header(c) == schema.normalise_header(user) for c in raw.columns
        ):
            parts.append(
                fnd.make(
                    [-1],
                    code="columns_option_unused",
                    severity="warning",
                    column=user,
                    field=cols_opt[user],
                    message=f"--columns names {user!r}, but the table has no such column; "
                    "check the spelling of the header.",
                )
            )

    frame = pd.DataFrame(canonical, index=pd.RangeIndex(n))
    for name, v in canonical.items():
        if isinstance(v, pd.Series):
            frame[name] = pd.Series(v.to_numpy(), index=frame.index, dtype=v.dtype)
    return Mapped(canonical=frame, mapping=mapping, findings=fnd.concat(parts), unmapped=unmapped)


_SEX_MESSAGES = {
    "sex_ambiguous": (
        "error",
        "Sex code {v!r} is ambiguous in a column that uses both M and H (M may mean male or, in "
        "Spanish, mujer); write F or M.",
    ),
    "sex_numeric_code": (
        "error",
        "Sex written as a number ({v!r}) is not guessed; write F or M, or recode the column.",
    ),
    "sex_unreadable": ("error", "Sex {v!r} is not readable; write F or M."),
}
_DATE_MESSAGES = {
    "date_ambiguous_assumed": (
        "warning",
        "Date {v!r} could be day-first or month-first and the column never shows which; "
        "day-first was assumed. Write dates as YYYY-MM-DD to be sure.",
    ),
    "date_ambiguous": (
        "error",
        "Date {v!r} could be day-first or month-first and the column uses both orders; it was "
        "not read. Write dates as YYYY-MM-DD.",
    ),
    "date_unreadable": ("error", "Date {v!r} is not readable; write it as YYYY-MM-DD."),
    "date_out_of_range": (
        "warning",
        "Date {v!r} is before 1950 or after today; check it.",
    ),
}


def _row_findings(s: pd.Series, header: str, fname: str, probs: dict, messages: dict) -> list:
    out = []
    for code, mask in probs.items():
        if mask is None or not np.any(mask):
            continue
        severity, template = messages[code]
        rows = np.flatnonzero(mask)
        vals = s.to_numpy(dtype=object)[rows]
        # one message per distinct value keeps the table compact and the text exact
        msg = pd.Series(vals, dtype=object).map(lambda v, t=template: t.format(v=_short(v)))
        f = fnd.make(
            rows, code=code, severity=severity, column=header, field=fname, message="", values=vals
        )
        f["message"] = msg.to_numpy(dtype=object)
        out.append(f)
    return out


def _short(v: object, limit: int = 60) -> str:
    text = str(v)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _map_number(s: pd.Series, header: str, fld: schema.Field, how: str, units_option: str):
    parts = []
    q = fld.quantity
    value, cell_factor, bad = parse_numbers(s, q)
    header_unit = _header_unit(header, fld)
    if header_unit is not None and how != "canonical name":
        unit_from, basis = header_unit, "header"
    elif how == "canonical name":
        unit_from, basis = fld.unit, "canonical name"
    elif units_option != "auto" and fld.name in schema.LINEAR_FIELDS:
        unit_from, basis = units_option, "option"
    else:
        unit_from, basis = None, "inferred"

    plain = np.isnan(cell_factor)
    if unit_from is None:
        guess = units.infer_unit(fld.name, value[plain])
        unit_from = guess.unit
        alternatives = len(units.candidate_units(fld.name)) > 1
        if alternatives and guess.confidence != "none":
            other = units.candidate_units(fld.name)[1] if guess.unit == fld.unit else guess.unit
            example = f"{header.strip() or fld.name} ({other})"
            sev = "note" if guess.confidence == "high" else "warning"
            code = "unit_inferred" if guess.confidence == "high" else "unit_uncertain"
            how_to = " or pass --units mm|cm" if fld.name in schema.LINEAR_FIELDS else ""
            conv = "" if guess.unit == fld.unit else f" and converted to {fld.unit}"
            parts.append(
                fnd.make(
                    [-1],
                    code=code,
                    severity=sev,
                    column=header,
                    field=fld.name,
                    message=f"Column {_unit_name(header)!r} states no unit: {guess.reason}; read as "
                    f"{guess.unit}{conv}. To state it, write the unit in the header, e.g. "
                    f"{example!r}{how_to}.",
                )
            )
    else:
        guess = units.infer_unit(fld.name, value[plain]) if plain.any() else None
        if (
            guess is not None
            and guess.confidence == "high"
            and guess.unit != unit_from
            and len(units.candidate_units(fld.name)) > 1
        ):
            parts.append(
                fnd.make(
                    [-1],
                    code="unit_doubtful",
                    severity="warning",
                    column=header,
                    field=fld.name,
                    message=f"Column {_unit_name(header)!r} is read as {unit_from} ({basis}), but "
                    f"its values look like {guess.unit}: {guess.reason}. Check the unit.",
                )
            )
    col_factor = units.factor(q, unit_from) if q in units.UNITS else 1.0
    with np.errstate(invalid="ignore", over="ignore"):
        internal = value * np.where(plain, col_factor, cell_factor)
    internal = np.where(np.isfinite(internal), internal, np.nan).astype("float64")
    if (~plain).any():
        parts.append(
            fnd.make(
                [-1],
                code="unit_in_cells",
                severity="note",
                column=header,
                field=fld.name,
                message=f"Column {_unit_name(header)!r}: {int((~plain).sum())} cells state their own "
                "unit (e.g. '4.8 cm'); each was converted with its own unit.",
            )
        )
    if bad.any():
        rows = np.flatnonzero(bad)
        parts.append(
            fnd.make(
                rows,
                code="not_a_number",
                severity="error",
                column=header,
                field=fld.name,
                values=s.to_numpy(dtype=object)[rows],
                message=f"{_unit_name(header)!r}: the cell is not a number in a unit of {q}; "
                "it was not used. Write a plain number (e.g. 4.8).",
            )
        )
    entry = {
        "source_column": s.name,
        "field": fld.name,
        "unit_from": unit_from,
        "unit_basis": basis,
        "factor": float(col_factor),
    }
    return pd.Series(internal, dtype="float64"), entry, parts
