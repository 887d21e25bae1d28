"""Text a spreadsheet program would run as a formula (or follow as a link) when it opens a CSV.

Our workbooks never hold a formula (text is written as inline text), but a CSV has no cell types: a
spreadsheet program runs ``=...``, ``+...``, ``-...`` and ``@...`` as formulas. Every CSV we write
is checked, headers included: such text gets a ``formula_like_text`` finding and, with
``--escape-formulas``, a leading single quote. A number written as text (``-3``, ``+4.5``) is a
number, not a formula.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from wallstress import findings as _findings
from wallstress.read.delimited import PLAIN_NUMBER

FORMULA_PREFIXES: tuple[str, ...] = ("=", "+", "-", "@", "\t", "\r")
"""First characters that make a spreadsheet program treat a CSV text cell as a formula.

Common practice, no source (the usual CSV-injection list: ``= + - @``, tab and carriage return).
"""

FORMULA_LIKE_CODE = "formula_like_text"

_HYPERLINK_RE = re.compile(r"^\s*(?:https?://|ftp://|mailto:|file:|www\.|\\\\)", re.IGNORECASE)
_PLAIN_NUMBER = rf"\s*{PLAIN_NUMBER}\s*"


def _text_values(col: pd.Series):
    """The column's ``.str`` accessor when it holds text (non-text cells give NA), else None."""
    if not (isinstance(col.dtype, pd.StringDtype) or col.dtype == object):
        return None
    try:
        return col.str
    except AttributeError:  # object column without any text (numbers, dates)
        return None


def formula_like_mask(values) -> np.ndarray:
    """True where a value is text starting with a formula trigger (:data:`FORMULA_PREFIXES`).

    Parameters
    ----------
    values : Series or array-like
        Cells of one column; numbers, dates and missing values are never formula-like.

    Returns
    -------
    ndarray of bool
    """
    col = values if isinstance(values, pd.Series) else pd.Series(np.asarray(values, dtype=object))
    text = _text_values(col)
    if text is None:
        return np.zeros(len(col), dtype=bool)
    starts = text.startswith(FORMULA_PREFIXES).fillna(False).to_numpy(dtype=bool)
    if not starts.any():
        return starts
    # only the cells that start like a formula are matched against a number (a few typos in a
    # column of 10^6 numbers must not cost a regex call per cell)
    rows = np.flatnonzero(starts)
    number = col.iloc[rows].str.fullmatch(_PLAIN_NUMBER).fillna(False).to_numpy(dtype=bool)
    out = starts.copy()  # the mask may be a read-only view of Arrow's buffer
    out[rows[number]] = False
    return out


def hyperlink_like_mask(values) -> np.ndarray:
    """True where a value is text that looks like a link (``http://``, ``www.``, ``mailto:``, UNC path)."""
    col = values if isinstance(values, pd.Series) else pd.Series(np.asarray(values, dtype=object))
    text = _text_values(col)
    if text is None:
        return np.zeros(len(col), dtype=bool)
    return text.contains(_HYPERLINK_RE).fillna(False).to_numpy(dtype=bool)


def formula_like_cells(table: pd.DataFrame) -> pd.DataFrame:
    """Every text cell of ``table`` that a spreadsheet program could run as a formula.

    Returns
    -------
    DataFrame
        Columns ``row`` (0-based position), ``column`` (header) and ``value``; one row per cell.
    """
    parts = []
    for name in table.columns:
        mask = formula_like_mask(table[name])
        if mask.any():
            rows = np.flatnonzero(mask)
            parts.append(
                pd.DataFrame(
                    {
                        "row": rows.astype("int64"),
                        "column": str(name),
                        "value": table[name].iloc[rows].astype(object).to_numpy(),
                    }
                )
            )
    if not parts:
        return pd.DataFrame(
            {
                "row": pd.Series([], dtype="int64"),
                "column": pd.Series([], dtype=object),
                "value": pd.Series([], dtype=object),
            }
        )
    return (
        pd.concat(parts, ignore_index=True)
        .sort_values(["row"], kind="stable")
        .reset_index(drop=True)
    )


def formula_like_findings(
    table: pd.DataFrame, *, escaped: bool = False, headers: bool = True
) -> pd.DataFrame:
    """Findings (code ``formula_like_text``, severity ``warning``) for formula-like text in ``table``.

    Parameters
    ----------
    table : DataFrame
        The table as it is written.
    escaped : bool
        Whether the CSV output prefixed those cells with a single quote.
    headers : bool
        Also a finding (row -1) for each formula-like header (once per table, not per chunk).
    """
    cells = formula_like_cells(table)
    headers = (
        [str(c) for c in table.columns if formula_like_mask(pd.Series([str(c)]))[0]]
        if headers
        else []
    )
    if not len(cells) and not headers:
        return _findings.empty()
    if escaped:
        message = (
            "text starts like a spreadsheet formula; in the CSV output it was prefixed with a single "
            "quote so that a spreadsheet program shows it as text"
        )
    else:
        message = (
            "text starts like a spreadsheet formula; a spreadsheet program opening the CSV output may "
            "run it: check the cell, or write with escape_formulas (--escape-formulas)"
        )
    parts = [
        _findings.make(
            grp["row"].to_numpy(),
            code=FORMULA_LIKE_CODE,
            severity="warning",
            message=message,
            column=str(col),
            values=grp["value"].to_numpy(),
        )
        for col, grp in cells.groupby("column", sort=False)
    ]
    parts += [
        _findings.make(
            [-1],
            code=FORMULA_LIKE_CODE,
            severity="warning",
            message="the header " + message,
            column=h,
            values=[h],
        )
        for h in headers
    ]
    return _findings.concat(parts)


def escape_formula_text(table: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``table`` where formula-like text cells and headers are prefixed with a single
    quote (``'``).

    Only text changes; numbers (negative ones included, as numbers or as number text), dates and
    missing values are kept.
    """
    out = table.copy()
    out.columns = [
        "'" + str(c) if formula_like_mask(pd.Series([str(c)]))[0] else c for c in out.columns
    ]
    for name in out.columns:
        mask = formula_like_mask(out[name])
        if mask.any():
            dtype = out[name].dtype
            col = out[name].astype(object)
            col[mask] = "'" + col[mask].astype(str)
            out[name] = col.astype(dtype) if isinstance(dtype, pd.StringDtype) else col
    return out
