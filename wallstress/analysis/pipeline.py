"""analyse(): map -> convert -> validate -> compute -> classify, on a DataFrame. No file I/O here.

One direction of data flow: the user's table is read, never written; the measures are computed from
the canonical copy; the result is the user's columns, unchanged and in order, followed by ours.
"""

from __future__ import annotations

import os
import threading
from concurrent.futures import ThreadPoolExecutor
from contextlib import contextmanager
from dataclasses import replace
from functools import partial

import numpy as np
import pandas as pd
from pandas.api.types import union_categoricals

from wallstress import __version__
from wallstress import findings as fnd
from wallstress.analysis import flags
from wallstress.analysis.coverage import blank_inputs, missing_inputs
from wallstress.analysis.measures import compute
from wallstress.analysis.methods import build_methods
from wallstress.analysis.references import load_set
from wallstress.analysis.result import Analysis
from wallstress.options import Options
from wallstress.prepare.mapping import map_columns
from wallstress.prepare.rows import lv_given, non_study_rows, not_study_finding
from wallstress.prepare.validate import (
    ACROSS_ROWS,
    ACROSS_ROWS_FIELDS,
    across_rows_parts,
    validate_parts,
)
from wallstress.schema.outputs import OUTPUT_COLUMNS
from wallstress.schema.units import UNIT_CHOICES
from wallstress.schema.vocabulary import METHOD_CHOICES, OUT

# Large tables are computed in row partitions, PARTITIONS_PER_THREAD per thread, each taken by the
# next free thread: every measure is a function of its own row, numpy releases the GIL inside its
# array loops, so the partitions run on separate cores and the joined result is the same, value for
# value, as one pass over all rows. A partition holds at least PARTITION_MIN_ROWS rows (below that
# the threads cost more than they save); the number of threads is the CPUs this process may use, at
# most MAX_THREADS, or WALLSTRESS_THREADS if set.
PARTITION_MIN_ROWS = 250_000
PARTITIONS_PER_THREAD = 2
MAX_THREADS = 8
THREADS_ENV = "WALLSTRESS_THREADS"

# Findings are built and handed out as Categoricals: their text columns repeat a few strings per
# rule, so codes are far smaller and faster to merge; writers and the report turn them into text.


def _check_options(o: Options) -> None:
    checks = [(name, getattr(o, name), valid) for name, valid in METHOD_CHOICES.items()]
    checks.append(("units", o.units, UNIT_CHOICES))
    for name, value, valid in checks:
        if value not in valid:
            raise ValueError(f"{name}={value!r} is not known; use one of: {', '.join(valid)}")


def analyse(df: pd.DataFrame, options: Options | None = None) -> pd.DataFrame:
    """Every measure for every row of a study list.

    Parameters
    ----------
    df : DataFrame
        One row per echocardiogram, under canonical names (``schema.FIELDS``) or headers that can be
        mapped (``LVIDd (mm)``, ``Septum``...). Columns it does not know are carried through.
    options : Options, optional
        Reference set, formulas and units; defaults as in :class:`Options`.

    Returns
    -------
    DataFrame
        The input columns, unchanged, followed by ``schema.OUTPUT_COLUMNS``; one row per input row, in
        order. ``flags`` lists each row's finding codes. The text outputs (geometry, grades,
        ``lv_mass_method``, ``edv_source``, ``flags``) are Categoricals of text. Use
        :func:`analyse_with_findings` for the findings table and the methods record.
    """
    return analyse_with_findings(df, options).table


def analyse_with_findings(
    df: pd.DataFrame,
    options: Options | None = None,
    *,
    prior_findings: pd.DataFrame | None = None,
    numbers: dict | None = None,
) -> Analysis:
    """Like :func:`analyse`, returning the whole :class:`~wallstress.analysis.result.Analysis`.

    ``prior_findings`` (e.g. from the reader: error values in cells) join the row flags.
    ``numbers`` (header -> float64, ``StudyTable.numbers``) are the reader's parsed copies of text
    columns of numbers: the computation reads them, ``df`` keeps the text.
    """
    options = options or Options()
    _check_options(options)
    refset = load_set(options.reference)
    mapped = map_columns(df, options, numbers=numbers, workers=threads())
    del numbers  # what the measures read is in mapped.canonical; the rest is the caller's
    labels = {m["field"]: m["source_column"] for m in mapped.mapping}
    fields = list(mapped.canonical.columns)
    # what the checks across rows and the rows that are not studies read of the mapped values,
    # so that a mapped column a row rule blanks values of is not held twice (as mapped and as
    # checked) while the measures run: ~8 MB per such column at 10^6 rows
    given = lv_given(mapped.canonical)
    ids_dates = mapped.canonical[[c for c in ACROSS_ROWS_FIELDS if c in fields]]
    # the checks across rows (repeats: hashing ids) read only ids and dates: each is started
    # first, beside the row rules (this thread) and the measures' partitions; their findings take
    # their place after those of the row rules
    with _helpers(threads() - 1) as pool:
        across = [
            _start(pool, across_rows_parts, ids_dates, labels, df, (rule,)) for rule in ACROSS_ROWS
        ]
        canonical, vparts = validate_parts(mapped.canonical, labels, df, across_rows=False)
        canonical.index = pd.RangeIndex(len(df))
        mapped = replace(mapped, canonical=canonical)  # the values as checked, held once

        def checked():
            """Every check's findings (the row rules', then those across rows), the blank
            inputs' and the rows that are not studies: once the checks across rows are done, in
            a thread of the pool beside the measures."""
            every = vparts + [part for task in across for part in _finish(task)]
            blanks = blank_inputs(canonical, [prior_findings, mapped.findings, *every], labels)
            blanked = _blanked_by_reader(prior_findings)
            return every, blanks, non_study_rows(df, given, blanked=blanked)

        checks = _start(pool, checked)  # after the checks across rows, before the partitions
        out, cparts, used = _compute_in_partitions(canonical, options, refset, pool)
        vparts, blanks, skip = _finish(checks)
        # every step's findings joined once, in step order (within a row: reader, mapping,
        # validation, measures), sorted by row; the columns joined in the threads too
        missing = missing_inputs(fields, mapped.unmapped)
        parts = [prior_findings, mapped.findings, *missing, *vparts, *blanks, *cparts]
        if skip.any():  # not studies: no flags, one note
            parts = [_without_rows(p, skip) for p in parts] + [not_study_finding(skip, df)]
        findings = fnd.concat(parts, categorical=True, run=partial(_shared, pool))
        del parts
        row_flags = _start(pool, flags.flag_codes, findings, len(df))  # beside the methods record
        methods = build_methods(
            options, refset, used, mapped, findings, len(df), version=__version__
        )
        out[OUT.flags] = fnd.categorical_text(*_finish(row_flags))
    # copy=False: each output its own block (no stacking copy of ~30 float columns); an array that
    # is read-only (a view of an input) or already in another column is copied first
    outputs = pd.DataFrame(_own_arrays(out, OUTPUT_COLUMNS), index=canonical.index, copy=False)
    del out
    table = _append(df, outputs)
    counts = methods["counts"]
    studies = ~skip
    counts["rows_not_studies"] = int(skip.sum())
    counts["studies"] = int(studies.sum())
    counts["rows_without_lv_mass"] = int((np.isnan(outputs[OUT.lv_mass_g]) & studies).sum())
    counts["rows_without_geometry"] = int(((outputs[OUT.geometry].cat.codes <= 0) & studies).sum())
    return Analysis(
        table=table, canonical=canonical, outputs=outputs, findings=findings, methods=methods
    )


def _blanked_by_reader(prior) -> np.ndarray:
    """Rows whose cells the reader emptied (error values, uncalculated formulas): they had
    content, so they are studies with findings, never blank rows."""
    if prior is None or not len(prior):
        return np.zeros(0, dtype="int64")
    hit = prior["code"].isin(("formula_not_calculated", "spreadsheet_error")).to_numpy(dtype=bool)
    rows = prior["row"].to_numpy(dtype="int64")[hit]
    return rows[rows >= 0]


def _without_rows(part, skip: np.ndarray):
    """A findings table without the findings of the rows in ``skip`` (file-level ones kept)."""
    if part is None or not len(part):
        return part
    rows = part["row"].to_numpy()
    keep = (rows < 0) | ~skip[np.clip(rows, 0, len(skip) - 1)]
    return part if keep.all() else part[keep]


def _own_arrays(out: dict, names) -> dict:
    seen: set[int] = set()
    cols = {}
    for k in names:
        v = out[k]
        if isinstance(v, np.ndarray) and (
            not v.flags.writeable or id(v) in seen or v.base is not None
        ):
            v = v.copy()
        seen.add(id(v))
        cols[k] = v
    return cols


def _append(df: pd.DataFrame, outputs: pd.DataFrame) -> pd.DataFrame:
    """The user's columns, then ours; an output name the user already has gets a ``ws_`` prefix."""
    taken = {str(c) for c in df.columns}
    renamed = outputs.rename(columns={c: f"ws_{c}" for c in outputs.columns if c in taken})
    renamed.index = df.index
    return pd.concat([df, renamed], axis=1)


def threads() -> int:
    """Threads ``analyse`` may use: ``WALLSTRESS_THREADS`` if set (a whole number >= 1), else the
    CPUs this process may run on, at most ``MAX_THREADS``."""
    env = os.environ.get(THREADS_ENV, "").strip()
    if env:
        try:
            n = int(env)
        except ValueError:
            n = 0
        if n < 1:
            raise ValueError(f"{THREADS_ENV}={env!r}: give a whole number of threads, 1 or more")
        return n
    try:
        cpus = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        cpus = os.cpu_count() or 1
    return max(1, min(cpus, MAX_THREADS))


def _partition_bounds(n: int, parts: int) -> list[tuple[int, int]]:
    """Row ranges [start, stop) of about equal size, at most ``parts``, each >=
    PARTITION_MIN_ROWS (one if n is small)."""
    k = max(1, min(parts, n // PARTITION_MIN_ROWS))
    edges = [n * i // k for i in range(k + 1)]
    return list(zip(edges[:-1], edges[1:], strict=True))


@contextmanager
def _helpers(n: int):
    """A pool of ``n`` threads beside the calling one (None for none: everything runs in the
    calling thread), so that at most :func:`threads` threads work at once."""
    if n < 1:
        yield None
        return
    with ThreadPoolExecutor(n, thread_name_prefix="wallstress") as pool:
        yield pool


def _start(pool: ThreadPoolExecutor | None, fn, *args) -> tuple:
    """A task handed to the pool, to be taken back by :func:`_finish`."""
    return (None if pool is None else pool.submit(fn, *args)), fn, args


def _shared(pool: ThreadPoolExecutor | None, fns: list) -> list:
    """The results of ``fns`` (functions of no argument), in order; the calling thread and the
    pool's threads each take the next one not yet taken, until none is left."""
    if pool is None or len(fns) < 2:
        return [f() for f in fns]
    results: list = [None] * len(fns)
    queue = iter(range(len(fns)))
    lock = threading.Lock()

    def take():
        while True:
            with lock:
                i = next(queue, None)
            if i is None:
                return
            results[i] = fns[i]()

    helpers = [pool.submit(take) for _ in range(threads() - 1)]
    take()
    for h in helpers:
        h.result()
    return results


def _finish(task: tuple):
    """A task's result: a task no thread of the pool has started yet is run in the calling
    thread (which would otherwise only wait), so the work is shared however long each part
    takes."""
    future, fn, args = task
    if future is None or future.cancel():
        return fn(*args)
    return future.result()


class _Into(dict):
    """A partition's output columns: each float column is copied into the whole table's array
    (made by the first partition that has it) as soon as a group puts it here, and read back from
    there, so that the partition's own array is freed at once: a partition never holds its ~25
    float columns beside the whole table's (~50 MB at 250,000 rows, per thread).

    Safe because the groups only put columns (``out[name] = values``) and never change one
    afterwards (:func:`~wallstress.analysis.measures.compute`)."""

    def __init__(self, whole: dict, lock: threading.Lock, n: int, start: int, stop: int):
        super().__init__()
        self.whole, self.lock, self.n, self.start, self.stop = whole, lock, n, start, stop
        self.written: set[str] = set()

    def __setitem__(self, name, values):
        if (
            isinstance(values, np.ndarray)
            and values.dtype == np.float64
            and values.shape == (self.stop - self.start,)
        ):
            with self.lock:
                whole = self.whole.get(name)
                if whole is None:
                    whole = self.whole[name] = np.empty(self.n, dtype=np.float64)
            piece = whole[self.start : self.stop]
            np.copyto(piece, values)
            values = piece
            self.written.add(name)
        super().__setitem__(name, values)


def _compute_in_partitions(
    c: pd.DataFrame, o: Options, refset, pool: ThreadPoolExecutor | None
) -> tuple[dict, list, dict]:
    """:func:`~wallstress.analysis.measures.compute` over row partitions, shared between the
    calling thread and ``pool``'s (:func:`_shared`), joined in row order.

    ``PARTITIONS_PER_THREAD`` partitions per thread, so that a thread freed early (the checks
    across rows take less time than the row rules) takes the ones left. Each partition writes
    its number columns into the whole table's arrays as they are computed (:class:`_Into`, in
    its own thread: no join of ~25 columns of 10^6 rows at the end); the Categoricals (one byte
    per row) are joined after.
    """
    n = len(c)
    bounds = _partition_bounds(n, threads() * PARTITIONS_PER_THREAD)
    numbers: dict[str, np.ndarray] = {}
    lock = threading.Lock()

    def work(b):
        into = _Into(numbers, lock, n, *b)
        out, parts, used = compute(c.iloc[b[0] : b[1]], o, refset, out=into, first_row=b[0])
        out = {name: None if name in into.written else v for name, v in out.items()}
        return out, parts, used

    # this thread starts with the first partition; the pool's threads join in as soon as the
    # checks across rows (handed to them earlier) are done
    results = _shared(pool, [partial(work, b) for b in bounds])
    out: dict[str, object] = {}
    for name in list(results[0][0]):
        pieces = [r[0].pop(name) for r in results]
        if any(p is None for p in pieces):  # written into ``numbers`` (by every partition, or
            for (start, stop), p in zip(bounds, pieces, strict=True):  # by most: the rest now)
                if p is not None:
                    numbers[name][start:stop] = p
            out[name] = numbers.pop(name)
        elif isinstance(pieces[0], pd.Categorical):  # each group's fixed categories
            joined = fnd.join_categoricals(pieces)
            out[name] = union_categoricals(pieces) if joined is None else joined
        else:
            out[name] = np.concatenate(pieces)
        del pieces
    parts, seen = [], set()
    for r in results:  # the rows of the findings on rows are the whole table's already
        for f in r[1]:
            if (f["row"].to_numpy() < 0).all():  # about a column: once, however many say it
                keys = fnd.column_level_keys(f)
                if not seen.issuperset(keys):
                    seen.update(keys)
                    parts.append(f)
            else:
                parts.append(f)
    return out, parts, results[0][2]
