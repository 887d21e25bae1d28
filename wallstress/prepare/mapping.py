"""Header mapping: the user's columns -> canonical fields in internal units.

``map_columns(raw, options)`` matches each header (``schema.normalise_header`` + ``schema.ALIASES``,
plus the lab's own ``options.columns``), reads numbers written as text ("4,8", "4.8 cm", " 48 "),
sex codes, dates and ids, and converts every number to the internal unit (cm, kg, mmHg, mL, cm2, ms),
recording how each unit was known: from the canonical name (``lvidd_cm``), the header
(``"LVIDd (mm)"``), the ``units`` option, or inferred from the values (with a note saying how to state
it). Nothing here raises on a bad cell: it becomes NaN with a finding naming the original value.

This module decides which column is which field (and reads "128/82" pressure pairs); each mapped
column is read into its field, units converted, by :mod:`wallstress.prepare.columns`. Header
matching lives in :mod:`wallstress.schema.headers`, cell parsing in :mod:`wallstress.prepare.cells`
(numbers, sex, ids) and :mod:`wallstress.prepare.dates` (dates).

References
----------
ISO 8601-1:2019, Date and time -- Representations for information interchange (ISO dates).
ECMA-376, Office Open XML File Formats, Part 1, 18.17.4 (1900 date system: serial 1 = 1900-01-01,
with the historical 1900-02-29; serials from 61 on count from 1899-12-30).
"""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from functools import partial

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.errors import InputError
from wallstress.options import Options
from wallstress.prepare.cells import parse_pressure_pairs
from wallstress.prepare.columns import column_finding, read_column
from wallstress.prepare.dates import DATE_ORDERS
from wallstress.schema import fields as schema
from wallstress.schema.headers import check_columns_option, match_header
from wallstress.schema.units import UNIT_CHOICES

UNIT_BASES: tuple[str, ...] = ("canonical name", "header", "option", "inferred")
PARALLEL_MIN_ROWS = 100_000  # below this, threads cost more than they save


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


def map_columns(
    raw: pd.DataFrame,
    options: Options | None = None,
    *,
    numbers: dict | None = None,
    workers: int = 1,
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
    workers : int
        Threads to read the columns in, for a list of ``PARALLEL_MIN_ROWS`` rows or more (the
        result is the same).

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
    jobs: list[tuple] = []  # (findings so far, position, column, header, field, fld, how)
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
                column_finding(
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
                column_finding(
                    "phase_assumed",
                    "note",
                    header,
                    fname,
                    f"Column {header!r} names no phase of the cycle; it was read as "
                    f"{fname} (end-diastole, where walls and cavity are measured by convention). "
                    f"If it is end-systolic, map it with --columns ({header},{fname.replace('d_cm', 's_cm')}).",
                )
            )
        jobs.append((len(parts), j, col, header, fname, fld, how))
    # each mapped column is read on its own (Arrow and numpy release the GIL): in threads for a
    # long list; the results are joined in column order, so nothing depends on the threads
    read = partial(read_column, raw, numbers or {}, options)
    if workers > 1 and n >= PARALLEL_MIN_ROWS and len(jobs) > 1:
        # text to parse (dates, sex, ids) takes longest: started first, so that the numbers
        # fill the threads around it
        first = sorted(range(len(jobs)), key=lambda i: jobs[i][5].kind == "number")
        with ThreadPoolExecutor(workers, thread_name_prefix="wallstress-map") as pool:
            done_first = list(pool.map(read, [jobs[i] for i in first]))
        results = [None] * len(jobs)
        for i, r in zip(first, done_first, strict=True):
            results[i] = r
    else:
        results = [read(job) for job in jobs]
    ordered: list[pd.DataFrame] = []
    done = 0
    for job, (values, entry, fparts) in zip(jobs, results, strict=True):
        at, fname = job[0], job[4]
        ordered += parts[done:at] + fparts  # the column's own notes, then its cells' findings
        done = at
        canonical[fname] = values
        mapping.append(entry)
    parts = ordered + parts[done:]

    for j in pairs:
        parts += _map_pressure_pair(raw, j, canonical, mapping, taken, unmapped)

    for user in cols_opt:
        if not any(str(c).strip() == user for c in raw.columns) and not any(
            schema.normalise_header(c) == schema.normalise_header(user) for c in raw.columns
        ):
            parts.append(
                column_finding(
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


def _map_pressure_pair(raw, j, canonical, mapping, taken, unmapped) -> list:
    """A column of "128/82" cells read into sbp_mmhg and dbp_mmhg, unless the list has those
    columns already (then it is carried through unread, with a note)."""
    col = raw.columns[j]
    header = str(col)
    if "sbp_mmhg" in canonical or "dbp_mmhg" in canonical:
        unmapped.append(col)
        return [
            column_finding(
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
