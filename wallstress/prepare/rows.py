"""Rows of a study list that are not studies: wholly blank rows, trailers and totals ("End of
export: 40 studies", "Total") and one-cell footnotes ("* measured by ...").

Such rows still come out, in their place, but without measures, without flags and without being
counted as studies; one file-level finding names them. Vectorised: only rows with at most two
filled cells are looked at as text.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.schema import fields as schema

# the first word of a trailer, total or footnote row, as a whole word ("Total", "End of export: 40
# studies", "n = 40", "* measured ..."); "NOTE-12" or "Summary7" are not (common practice, no source)
_TRAILER = re.compile(
    r"^\s*(?:(?:total|totals|sum|end\s+of|count|average|mean|median|footnote|note|notes|source|"
    r"generated|exported|export|printed|page\s+\d+|summe|gesamt|fin\s+de|nombre)(?=$|[\s:=.,;(])"
    r"|n\s*=|\*|#\s)",
    re.IGNORECASE,
)


def lv_given(canonical: pd.DataFrame) -> pd.DataFrame:
    """Which LV dimensions each row gives (a finite value, before any check blanks one): what
    :func:`non_study_rows` reads of the mapped table, one byte per cell, so that the mapped
    values themselves need not be kept for it."""
    lv = [c for c in schema.LINEAR_FIELDS if c in canonical.columns]
    return pd.DataFrame(  # copy=False: each mask its own column, not copied into one block
        {c: np.isfinite(canonical[c].to_numpy(dtype=float)) for c in lv},
        index=canonical.index,
        copy=False,
    )


def non_study_rows(raw: pd.DataFrame, given: pd.DataFrame, blanked=()) -> np.ndarray:
    """True for each row that is blank, or a trailer or footnote with no LV dimension.

    ``given``: :func:`lv_given` of the mapped table. ``blanked``: rows whose cells the reader
    emptied (error values, uncalculated formulas); they had content and stay studies."""
    n = len(raw)
    out = np.zeros(n, dtype=bool)
    if n == 0:
        return out
    # a row with IVSd, LVIDd and PWd all given is a study: only the others are looked at
    main = [c for c in ("ivsd_cm", "lvidd_cm", "pwd_cm") if c in given.columns]
    complete = np.ones(n, dtype=bool) if len(main) == 3 else np.zeros(n, dtype=bool)
    for c in main if len(main) == 3 else ():
        complete &= given[c].to_numpy(dtype=bool)
    look = np.flatnonzero(~complete)
    if not look.size:
        out[np.asarray(blanked, dtype="int64")] = False
        return out
    sub = raw.iloc[look]
    filled = sub.notna().to_numpy()
    n_filled = filled.sum(axis=1)
    has_lv = np.zeros(look.size, dtype=bool)
    for c in given.columns:  # only the rows looked at, column by column (no 2-D copy)
        has_lv |= given[c].to_numpy(dtype=bool)[look]
    found = n_filled == 0
    # a trailer or total names itself in its first cell and fills few others ("Total,,,,40");
    # a footnote is one cell of several words with no LV dimension
    for i in np.flatnonzero((n_filled > 0) & (n_filled <= 3)):
        first = sub.iat[i, int(np.argmax(filled[i]))]
        if not isinstance(first, str):
            continue
        if _TRAILER.match(first) or (
            n_filled[i] == 1 and not has_lv[i] and len(first.split()) >= 3
        ):
            found[i] = True
    out[look] = found
    out[np.asarray(blanked, dtype="int64")] = False
    return out


def not_study_finding(mask: np.ndarray, raw: pd.DataFrame) -> pd.DataFrame:
    """One file-level note naming the rows that are not studies (1-based data rows)."""
    rows = np.flatnonzero(mask)
    shown = ", ".join(str(r + 1) for r in rows[:10]) + (" ..." if len(rows) > 10 else "")
    example = next(
        (str(raw.iat[r, int(np.argmax(raw.iloc[r].notna().to_numpy()))]) for r in rows
         if raw.iloc[r].notna().any()),
        "",
    )  # fmt: skip
    what = f" (for example {example[:60]!r})" if example else ""
    return fnd.make(
        [-1],
        code="not_a_study",
        severity="note",
        message=f"{len(rows)} row(s) of the list are not studies: blank rows, trailers or "
        f"footnotes{what}, at data row(s) {shown}. They are kept in their place without measures "
        "and are not counted as studies.",
    )
