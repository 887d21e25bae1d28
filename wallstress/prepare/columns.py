"""One mapped column read into its canonical field, with the findings on its cells: numbers
converted to the internal unit (and how the unit was known), sex codes, dates, identifiers.

:func:`wallstress.prepare.mapping.map_columns` decides which column is which field; each column is
then read here on its own (so that a long list's columns can be read in threads).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.formulas._arrays import finite_or_nan
from wallstress.options import Options
from wallstress.prepare.cells import parse_ids, parse_numbers, parse_sex, plain_integers
from wallstress.prepare.dates import parse_dates
from wallstress.schema import fields as schema
from wallstress.schema import units
from wallstress.schema.headers import _header_unit


def _unit_name(header: str) -> str:
    return header if header else "the column"


def column_finding(code: str, severity: str, column: str, field: str, message: str):
    """A finding about a whole column (row -1)."""
    return fnd.make([-1], code=code, severity=severity, column=column, field=field, message=message)


def read_column(raw: pd.DataFrame, numbers: dict, options: Options, job: tuple) -> tuple:
    """One mapped column read into its canonical field: (values, mapping entry, findings).

    ``job`` is as :func:`~wallstress.prepare.mapping.map_columns` lists it: (findings before it,
    position, column, header, field name, the field's schema entry, how the header matched).
    """
    _, j, col, header, fname, fld, how = job
    s = raw.iloc[:, j].reset_index(drop=True)
    parsed = numbers.get(col)
    # the reader's numbers for numbers and dates; for ids only where the text is the number
    if parsed is not None and (
        fld.kind in ("number", "date") or (fld.kind == "id" and plain_integers(s))
    ):
        s = pd.Series(parsed, copy=False, name=s.name)
    if fld.kind == "number":
        return _map_number(s, header, fld, how, options.units)
    parts = []
    if fld.kind == "sex":
        out, probs = parse_sex(s)
        parts.extend(_row_findings(s, header, fname, probs, _SEX_MESSAGES))
    elif fld.kind == "date":
        out, probs = parse_dates(s, order=options.date_order)
        assumed = probs.pop("date_ambiguous_assumed")
        if assumed.any():  # the column never shows its order: one finding for the column
            parts.append(
                column_finding(
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
        out = parse_ids(s)
    entry = {"source_column": col, "field": fname, "unit_from": "", "unit_basis": "", "factor": 1.0}
    return out, entry, parts


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
                column_finding(
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
            column_finding(
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
