"""Each row's flags and its worst finding, read off a findings table (``findings.py``).

``flags`` (an output column) lists a row's finding codes, each once, in order of appearance; the
worst severity of a row's findings marks it in the workbooks and the report. Both are vectorised
over every finding: no Python step per row.
"""

from __future__ import annotations

from graphlib import CycleError, TopologicalSorter

import numpy as np
import pandas as pd

from wallstress.findings import SEVERITY_DTYPE, SEVERITY_RANK


def worst_severity(findings: pd.DataFrame, n_rows: int) -> np.ndarray:
    """Each row's worst finding as its :data:`SEVERITY_RANK` (note 0, warning 1, error 2), -1 for
    a row without one; findings about a column or the file (row -1) are left out. One pass per
    severity, the worse ones written last: no group-by."""
    worst = np.full(n_rows, -1, dtype=np.int8)
    rows = findings["row"].to_numpy(dtype="int64")
    severity = findings["severity"]
    if isinstance(severity.dtype, pd.CategoricalDtype) and severity.dtype == SEVERITY_DTYPE:
        rank = severity.array.codes  # the categories are in rank order: a code is its rank
    else:
        # as text (a Categorical of other categories too: parquet read back), unknown or missing -1
        text = pd.Series(severity.to_numpy(dtype=object))
        rank = text.map(SEVERITY_RANK).fillna(-1).to_numpy(dtype=np.int8)
    inside = (rows >= 0) & (rows < n_rows)
    for r in sorted(SEVERITY_RANK.values()):  # in increasing order of severity
        worst[rows[inside & (rank == r)]] = r
    return worst


def flags_per_row(findings: pd.DataFrame, n_rows: int) -> pd.Series:
    """The ``flags`` column: each row's finding codes, unique, in order of appearance, ';'-separated.

    Vectorised (:func:`flag_codes`): each row's codes become one integer, with numpy; each
    distinct sequence of codes (there are few) is joined once and broadcast to its rows.
    """
    codes, texts = flag_codes(findings, n_rows)
    return pd.Series(np.asarray(texts, dtype=object)[codes], dtype=object)


def _digits(key: int, base: int) -> list[int]:
    """The base-``base`` digits of ``key``, least significant first."""
    out = []
    while key:
        key, d = divmod(key, base)
        out.append(d)
    return out


def _runs(rows: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Where each run of equal values of sorted ``rows`` starts, its length, and each entry's
    place in its run (0 for the first)."""
    starts = np.flatnonzero(np.r_[True, rows[1:] != rows[:-1]])
    lengths = np.diff(np.r_[starts, rows.size])
    return starts, lengths, np.arange(rows.size) - np.repeat(starts, lengths)


def _repeated_in_run(values: np.ndarray, rank: np.ndarray) -> np.ndarray:
    """True where a value equals an earlier value of its run (``rank``: place in the run).

    Each entry is compared with the one k places before it, for k = 1, 2, ... while any run is
    longer than k: no hash, and the work is the sum of the squared run lengths (a row has a few
    findings), not a pass over every (row, code) pair.
    """
    seen = np.zeros(values.size, dtype=bool)
    idx = np.flatnonzero(rank >= 1)
    k = 1
    while idx.size:
        seen[idx] |= values[idx] == values[idx - k]
        k += 1
        idx = idx[rank[idx] >= k]
    return seen


def _flags_as_code_sets(rows: np.ndarray, code_id: np.ndarray, names) -> tuple | None:
    """:func:`flag_codes` where one order of the codes agrees with every row (the usual case: a
    code comes from one step, and the steps come in one order). The codes that follow each other
    on a row give that order (a topological sort of at most 63 codes); each row's codes are then
    a set, one bit per code, joined by one ``bitwise_or`` per row, with no ranking or
    de-duplication step, and read back in that order. (row positions, their codes into the
    distinct flag texts, those texts), or None where no order agrees with every row (a row whose
    codes come back to an earlier one) or there are more codes than bits."""
    n = len(names)
    if n > 63 or (code_id.size and code_id.min() < 0):  # more codes than bits, or a code missing
        return None
    same = rows[1:] == rows[:-1]
    c = code_id.astype(np.int16, copy=False)  # n <= 63: a pair's number fits
    pair = np.where(same & (c[1:] != c[:-1]), c[:-1] * n + c[1:], n * n)
    follows = np.bincount(pair, minlength=n * n + 1)[: n * n].reshape(n, n) > 0
    before = {b: set(np.flatnonzero(follows[:, b]).tolist()) for b in range(n)}
    try:
        order = list(TopologicalSorter(before).static_order())
    except CycleError:
        return None
    place = np.empty(n, dtype=np.uint64)
    place[order] = np.arange(n, dtype=np.uint64)
    starts = np.flatnonzero(np.r_[True, ~same])
    key = np.bitwise_or.reduceat(np.left_shift(np.uint64(1), np.take(place, code_id)), starts)
    inverse, uniques = pd.factorize(key)
    in_order = [str(names[c]) for c in order]
    texts = [";".join(in_order[j] for j in range(n) if int(k) >> j & 1) for k in uniques]
    return rows[starts], inverse, texts


def flag_codes(findings: pd.DataFrame, n_rows: int) -> tuple[np.ndarray, list[str]]:
    """:func:`flags_per_row` as integer codes per row into a list of distinct flag texts ("" first)."""
    flag = np.zeros(n_rows, dtype=np.int64)
    texts_out = [""]
    rowpos = findings["row"].to_numpy(dtype="int64")
    keep = rowpos >= 0
    if rowpos.size and not (rowpos[1:] < rowpos[:-1]).any():  # in row order (as joined): the
        keep = slice(int(np.searchsorted(rowpos, 0)), None)  # rows >= 0 are the end, no copy
    if rowpos[keep].size:
        rows = rowpos[keep]
        code = findings["code"]
        if isinstance(code.dtype, pd.CategoricalDtype):
            code_id = code.array.codes[keep]
            code_names = code.array.categories.to_numpy(dtype=object)
        else:
            code_id, code_names = pd.factorize(code.to_numpy(dtype=object)[keep])
        n_codes = len(code_names)
        if rows.size > 1 and (rows[1:] < rows[:-1]).any():  # in row order, stable within a row
            order = np.argsort(rows, kind="stable")
            rows, code_id = rows[order], code_id[order]
        in_order = _flags_as_code_sets(rows, code_id, code_names)
        if in_order is not None:
            at, inverse, texts = in_order
            flag[at] = 1 + inverse
            return flag, texts_out + texts
        code_id = code_id.astype(np.int64)
        starts, lengths, rank = _runs(rows)
        first = ~_repeated_in_run(code_id, rank)  # first occurrence of each (row, code)
        if not first.all():
            rows, code_id = rows[first], code_id[first]
            starts, lengths, rank = _runs(rows)
        width = int(lengths.max())
        base = n_codes + 1
        names = np.asarray(code_names, dtype=object)
        if width * np.log2(base) < 62:
            # each row's code sequence as one integer, digit k (base n_codes + 1) its k-th code
            # plus one, summed per row; the few distinct sequences are read back from their digits
            digit = (base ** np.arange(width, dtype="int64"))[rank]
            key = np.add.reduceat((code_id + 1) * digit, starts)
            inverse, uniques = pd.factorize(key)
            texts = [";".join(names[d - 1] for d in _digits(int(k), base)) for k in uniques]
        else:
            grid = np.full((starts.size, width), -1, dtype="int64")
            grid[np.repeat(np.arange(starts.size), lengths), rank] = code_id
            combos, inverse = np.unique(grid, axis=0, return_inverse=True)
            texts = [";".join(names[c[c >= 0]]) for c in combos]
        flag[rows[starts]] = 1 + np.asarray(inverse).ravel()
        texts_out += texts
    return flag, texts_out
