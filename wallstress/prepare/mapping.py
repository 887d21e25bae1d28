"""Header mapping: the user's columns -> canonical fields in internal units.

``map_columns(raw, options)`` matches each header (``schema.normalise_header`` + ``schema.ALIASES``,
plus the lab's own ``options.columns``), reads numbers written as text ("4,8", "4.8 cm", " 48 "),
sex codes, dates and ids, and converts every number to the internal unit (cm, kg, mmHg, mL, cm2, ms),
recording how each unit was known: from the canonical name (``lvidd_cm``), the header
(``"LVIDd (mm)"``), the ``units`` option, or inferred from the values (with a note saying how to state
it). Nothing here raises on a bad cell: it becomes NaN with a finding naming the original value.

This module maps columns and converts units; header matching lives in :mod:`wallstress.schema.headers`,
cell parsing in :mod:`wallstress.prepare.cells` (numbers, sex, ids) and :mod:`wallstress.prepare.dates`
(dates).

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
from wallstress.errors import InputError
from wallstress.formulas._arrays import finite_or_nan
from wallstress.options import Options
from wallstress.prepare.cells import (
    parse_ids,
    parse_numbers,
    parse_pressure_pairs,
    parse_sex,
    plain_integers,
)
from wallstress.prepare.dates import (
    DATE_ORDERS,
    parse_dates,
)
from wallstress.schema import fields as schema
from wallstress.schema import units
from wallstress.schema.headers import (
    _header_unit,
    check_columns_option,
    match_header,
)
from wallstress.schema.units import UNIT_CHOICES

UNIT_BASES: tuple[str, ...] = ("canonical name", "header", "option", "inferred")


@dataclass
class Mapped:
    """Result of ``map_columns``.

    Attributes
    ----------
    canonical : DataFrame
        RangeIndex 0..n-1 (positions of the input rows); one column per canonical field found:
        numbers float64 in internal units (a read-only view of the user's column when no
        conversion is needed), ``sex`` a Categorical of "F"/"M" (NaN where unread),
        ``study_date`` datetime64[ns] (NaT where unreadable), ids nullable ``Int64`` when the
        column holds whole numbers only, else text (pandas' text dtype, Arrow-backed in pandas 3)
        with NaN for empty.
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


def _unit_name(header: str) -> str:
    return header if header else "the column"


def map_columns(
    raw: pd.DataFrame, options: Options | None = None, *, numbers: dict | None = None
) -> Mapped:
    """Map the user's columns to canonical fields in internal units.

    Parameters
    ----------
    raw : DataFrame
        Cells under the user's own headers, one row per study (``StudyTable.table``).
        Not modified.
    options : Options, optional
        ``columns`` (user header -> canonical field) and ``units`` ("auto", "mm", "cm": unit of the
        linear LV dimensions whose header states none).
    numbers : dict, optional
        Header -> float64: the reader's parsed copy of a text column of numbers
        (``StudyTable.numbers``). Numbers and dates are read from it; identifiers only where every
        text is an integer written plainly (``1001``, never ``000123``), so an id is never altered.

    Returns
    -------
    Mapped

    Raises
    ------
    InputError
        ``options.columns`` names an unknown field, or ``options.units`` is not one of
        ``UNIT_CHOICES``.
    """
    options = options or Options()
    if options.date_order not in DATE_ORDERS:
        raise InputError(
            f"date_order={options.date_order!r} is not valid; use one of {', '.join(DATE_ORDERS)}"
        )
    if options.units not in UNIT_CHOICES:
        raise InputError(
            f"units={options.units!r} is not valid; use one of {', '.join(UNIT_CHOICES)}"
        )
    cols_opt = check_columns_option(options.columns)
    n = len(raw)
    parts: list[pd.DataFrame] = []
    canonical: dict[str, object] = {}
    mapping: list[dict] = []
    unmapped: list = []
    taken: dict[str, str] = {}

    pairs: list[int] = []  # columns holding "128/82"
    for j, col in enumerate(raw.columns):
        header = "" if col is None else str(col)
        fname, how = match_header(col, cols_opt)
        if fname is None:
            if schema.normalise_header(header) in schema.PRESSURE_PAIR_HEADERS:
                pairs.append(j)
            else:
                unmapped.append(col)
            continue
        if fname in taken:
            unmapped.append(col)
            parts.append(
                _column_finding(
                    "duplicate_field",
                    "warning",
                    header,
                    fname,
                    f"Column {header!r} also names {fname}, already read from column "
                    f"{taken[fname]!r}; the first is used and this one is carried through unread. "
                    "Rename one of them or map them with --columns.",
                )
            )
            continue
        taken[fname] = header
        fld = schema.BY_NAME[fname]
        if how == "words, phase assumed":
            parts.append(
                _column_finding(
                    "phase_assumed",
                    "note",
                    header,
                    fname,
                    f"Column {header!r} names no phase of the cycle; it was read as "
                    f"{fname} (end-diastole, where walls and cavity are measured by convention). "
                    f"If it is end-systolic, map it with --columns ({header},{fname.replace('d_cm', 's_cm')}).",
                )
            )
        s = raw.iloc[:, j].reset_index(drop=True)
        parsed = (numbers or {}).get(col)
        # the reader's numbers for numbers and dates; for ids only where the text is the number
        if parsed is not None and (
            fld.kind in ("number", "date") or (fld.kind == "id" and plain_integers(s))
        ):
            s = pd.Series(parsed, copy=False, name=s.name)
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
            out, probs = parse_dates(s, order=options.date_order)
            canonical[fname] = out
            assumed = probs.pop("date_ambiguous_assumed")
            if assumed.any():  # the column never shows its order: one finding for the column
                parts.append(
                    _column_finding(
                        "date_order_assumed",
                        "warning",
                        header,
                        fname,
                        f"No date in column {header!r} shows whether it is day-first or "
                        f"month-first ({int(assumed.sum())} could be either); they were read "
                        "day-first (04/03/2021 = 4 March). If they are month-first, run again with "
                        "--date-order mdy; write dates as YYYY-MM-DD to be sure.",
                    )
                )
            parts.extend(_row_findings(s, header, fname, probs, _DATE_MESSAGES))
        else:
            canonical[fname] = parse_ids(s)
        mapping.append(
            {"source_column": col, "field": fname, "unit_from": "", "unit_basis": "", "factor": 1.0}
        )

    for j in pairs:
        parts += _map_pressure_pair(raw, j, canonical, mapping, taken, unmapped)

    for user in cols_opt:
        if not any(str(c).strip() == user for c in raw.columns) and not any(
            schema.normalise_header(c) == schema.normalise_header(user) for c in raw.columns
        ):
            parts.append(
                _column_finding(
                    "columns_option_unused",
                    "warning",
                    user,
                    cols_opt[user],
                    f"--columns names {user!r}, but the table has no such column; "
                    "check the spelling of the header.",
                )
            )

    # one column per field, not stacked into shared blocks (no copy of every column at 10^6 rows)
    index = pd.RangeIndex(n)
    frame = pd.DataFrame(
        {
            name: pd.Series(v.array, index=index, dtype=v.dtype, copy=False)
            if isinstance(v, pd.Series)
            else v
            for name, v in canonical.items()
        },
        index=index,
        copy=False,
    )
    return Mapped(
        canonical=frame,
        mapping=mapping,
        findings=fnd.concat(parts, categorical=True),
        unmapped=unmapped,
    )


def _column_finding(code: str, severity: str, column: str, field: str, message: str):
    """A finding about a whole column (row -1)."""
    return fnd.make([-1], code=code, severity=severity, column=column, field=field, message=message)


def _map_pressure_pair(raw, j, canonical, mapping, taken, unmapped) -> list:
    """A column of "128/82" cells read into sbp_mmhg and dbp_mmhg, unless the list has those
    columns already (then it is carried through unread, with a note)."""
    col = raw.columns[j]
    header = str(col)
    if "sbp_mmhg" in canonical or "dbp_mmhg" in canonical:
        unmapped.append(col)
        return [
            _column_finding(
                "pressure_pair_unused",
                "note",
                header,
                "sbp_mmhg",
                f"Column {header!r} holds blood pressures, but the list has separate "
                "systolic and diastolic columns; those were used.",
            )
        ]
    s = raw.iloc[:, j].reset_index(drop=True)
    sbp, dbp, bad = parse_pressure_pairs(s)
    canonical["sbp_mmhg"], canonical["dbp_mmhg"] = sbp, dbp
    for fname in ("sbp_mmhg", "dbp_mmhg"):
        taken[fname] = header
        mapping.append(
            {
                "source_column": col,
                "field": fname,
                "unit_from": "mmHg",
                "unit_basis": "systolic/diastolic cell",
                "factor": 1.0,
            }  # fmt: skip
        )
    if not bad.any():
        return []
    rows = np.flatnonzero(bad)
    return [
        fnd.make(
            rows,
            code="pressure_unreadable",
            severity="error",
            column=header,
            field="sbp_mmhg",
            values=s.to_numpy(dtype=object)[rows],
            message=f"The blood pressure in {header!r} is not written as systolic/diastolic "
            "(for example 128/82); the pressures of this row are not used.",
        )
    ]


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
    "date_unreadable": (
        "error",
        "Date {v!r} is not readable as a calendar date between 1678 and 2261; write it as "
        "YYYY-MM-DD.",
    ),
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
        msgs = fnd.text_codes(vals, lambda v, t=template: t.format(v=_short(v)))
        out.append(
            fnd.make(
                rows,
                code=code,
                severity=severity,
                column=header,
                field=fname,
                message="",
                values=vals,
                messages=msgs,
            )
        )
    return out


def _short(v: object, limit: int = 60) -> str:
    text = str(v)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _plain_number_dtype(dtype) -> bool:
    """Integers or floats (not bool, not complex): read as they are, no text parsing."""
    return (
        pd.api.types.is_numeric_dtype(dtype)
        and not pd.api.types.is_bool_dtype(dtype)
        and not pd.api.types.is_complex_dtype(dtype)
    )


def _example(fld: schema.Field) -> str:
    """A plausible value of a field, as a user would type it (the middle of its typical range)."""
    if fld.typical is None:
        return "4.8"
    mid = (fld.typical[0] + fld.typical[1]) / 2
    return f"{mid:.1f}" if mid < 10 else f"{mid:.0f}"


def _map_number(s: pd.Series, header: str, fld: schema.Field, how: str, units_option: str):
    parts = []
    q = fld.quantity
    if _plain_number_dtype(s.dtype):  # numbers already (the usual case): no text to read
        value = s.to_numpy(dtype="float64", na_value=np.nan)
        cell_factor = bad = None
        if not finite_or_nan(value):  # inf is not a measurement
            bad = np.isinf(value)
            value = np.where(bad, np.nan, value)
    else:
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

    plain = None if cell_factor is None else np.isnan(cell_factor)
    # no cell states its own unit (the usual case): no masking copies
    all_plain = plain is None or bool(plain.all())
    plain_values = value if all_plain else value[plain]
    if unit_from is None:
        guess = units.infer_unit(fld.name, plain_values)
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
        guess = units.infer_unit(fld.name, plain_values) if plain_values.size else None
        if (
            guess is not None
            and guess.confidence == "high"
            and guess.unit != unit_from
            and len(units.candidate_units(fld.name)) > 1
        ):
            parts.append(
                _column_finding(
                    "unit_doubtful",
                    "warning",
                    header,
                    fld.name,
                    f"Column {_unit_name(header)!r} is read as {unit_from} ({basis}), but "
                    f"its values look like {guess.unit}: {guess.reason}. Check the unit.",
                )
            )
    col_factor = units.factor(q, unit_from) if q in units.UNITS else 1.0
    if all_plain and col_factor == 1.0:
        # already in the internal unit: no copy of the column. value may be the user's own
        # numbers, so the canonical column is a read-only view (nothing downstream writes into
        # its inputs; a write would raise instead of changing the user's table)
        internal = value.view()
        internal.flags.writeable = False
    else:
        with np.errstate(invalid="ignore", over="ignore"):
            factors = col_factor if all_plain else np.where(plain, col_factor, cell_factor)
            internal = np.asarray(value * factors, dtype="float64")  # a new array
        # finite values times a factor of at most 1 stay finite; a larger factor may overflow
        if (not all_plain or col_factor > 1) and not finite_or_nan(internal):
            internal[~np.isfinite(internal)] = np.nan
    if not all_plain:
        parts.append(
            _column_finding(
                "unit_in_cells",
                "note",
                header,
                fld.name,
                f"Column {_unit_name(header)!r}: {int((~plain).sum())} cells state their own "
                "unit (e.g. '4.8 cm'); each was converted with its own unit.",
            )
        )
    if bad is not None and bad.any():
        rows = np.flatnonzero(bad)
        parts.append(
            fnd.make(
                rows,
                code="not_a_number",
                severity="error",
                column=header,
                field=fld.name,
                values=s.to_numpy(dtype=object)[rows],
                message=f"The cell of {_unit_name(header)!r} is not a number in a unit of {q}, so "
                f"it was not used. Write a plain number, for example {_example(fld)}.",
            )
        )
    entry = {
        "source_column": s.name,
        "field": fld.name,
        "unit_from": unit_from,
        "unit_basis": basis,
        "factor": float(col_factor),
    }
    return pd.Series(internal, dtype="float64", copy=False), entry, parts
