"""Findings: what was noticed about a row, a column or a file, as one tidy table.

Columns of a findings table (in this order):

- ``row``: 0-based position of the input row; -1 for a finding about a whole column or the file.
- ``column``: the user's header (or the canonical field when there is no user header).
- ``field``: canonical field name ("" when none).
- ``value``: the offending value as text ("" when none).
- ``severity``: ``error`` (the value or row cannot be used for some measure), ``warning`` (used, but
  check it) or ``note`` (information, e.g. a unit that was inferred).
- ``code``: a short snake_case code, also listed in the row's ``flags``.
- ``message``: one plain sentence saying what is wrong and what to do.
"""

from __future__ import annotations

from functools import lru_cache, partial

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

FINDING_COLUMNS: tuple[str, ...] = (
    "row",
    "column",
    "field",
    "value",
    "severity",
    "code",
    "message",
)
SEVERITIES: tuple[str, ...] = ("error", "warning", "note")


# The text columns repeat a few strings over many rows (a rule met by a quarter of 10^6 studies
# repeats its code, column and message 250,000 times), so they are pandas Categoricals: one integer
# code per row and each distinct text once. ``severity`` has fixed, ordered categories (note <
# warning < error) so that every table shares them and a rank mapped from them stays ordered.
TEXT_COLUMNS: tuple[str, ...] = FINDING_COLUMNS[1:]
SEVERITY_DTYPE = pd.CategoricalDtype(("note", "warning", "error"), ordered=True)
SEVERITY_RANK: dict[str, int] = {name: i for i, name in enumerate(SEVERITY_DTYPE.categories)}
# a part of a text column with more distinct texts than this, and most of the column's, keeps its
# categories as they are when the parts are joined (:func:`_union_into_big`)
BIG_PART_CATEGORIES = 4096


def _categorical(codes: np.ndarray, categories, dtype=None) -> pd.Categorical:
    """A Categorical of ``codes`` into ``categories``, which are distinct (they come from a
    factorize, or are one text): not hashed again to check it."""
    if dtype is None:
        arrow = _arrow_text(categories)
        index = pd.Index(list(categories), dtype=object) if arrow is None else pd.Index(categories)
        dtype = _distinct_dtype(index)
    return pd.Categorical.from_codes(
        _small_codes(codes, len(dtype.categories)), dtype=dtype, validate=False
    )


def _arrow_text(values) -> pa.ChunkedArray | None:
    """The Arrow text behind a pandas array or Index of Arrow text (pandas 3's ``str``), else None."""
    dtype = getattr(values, "dtype", None)
    if isinstance(dtype, pd.StringDtype) and dtype.storage == "pyarrow":
        return pa.chunked_array(pa.array(getattr(values, "array", values)))
    return None


def _distinct_dtype(categories: pd.Index) -> pd.CategoricalDtype:
    """An unordered dtype of categories known to be distinct. pandas' public constructor hashes
    them to check (~30 ms per 3 x 10^5 texts, once per rule and per merge); its fast path, where
    this pandas has it, trusts the caller."""
    fast = getattr(pd.CategoricalDtype, "_from_fastpath", None)
    if fast is None:  # pragma: no cover - a pandas without it
        return pd.CategoricalDtype(categories, ordered=False)
    return fast(categories, ordered=False)


def _code_dtype(n_categories: int) -> np.dtype:
    """The smallest signed integer type holding codes 0..n-1 and -1."""
    for t in (np.int8, np.int16, np.int32):
        if n_categories < np.iinfo(t).max:
            return np.dtype(t)
    return np.dtype(np.int64)


def _small_codes(codes, n_categories: int) -> np.ndarray:
    return np.asarray(codes).astype(_code_dtype(n_categories), copy=False)


def _constant(text: str, n: int) -> pd.Categorical:
    """``n`` copies of ``text`` as a Categorical with one category."""
    return pd.Categorical.from_codes(
        np.zeros(n, dtype=np.int8), dtype=_one_text_dtype(str(text)), validate=False
    )


@lru_cache(maxsize=4096)
def _one_text_dtype(text: str) -> pd.CategoricalDtype:
    """The dtype of one category, ``text``: made once per text (a rule's code, message, field
    and the user's header repeat across rules, partitions and files), as it takes ~30 us against
    ~1 us for the Categorical. A dtype is immutable, so it is shared safely."""
    return _distinct_dtype(pd.Index([text], dtype=object))


def _severity(severity: str, n: int) -> pd.Categorical:
    code = SEVERITY_DTYPE.categories.get_loc(severity)
    return pd.Categorical.from_codes(
        np.full(n, code, dtype=np.int8), dtype=SEVERITY_DTYPE, validate=False
    )


def text_codes(values, to_text) -> tuple[np.ndarray, list[str]]:
    """Per-row codes into a list of distinct texts, ``to_text`` called once per distinct value.

    Values that compare equal but have different types (``1``, ``1.0``, ``True``) are told apart,
    so each row's text is exactly ``to_text`` of its own value. Missing values (None, NaN) are
    passed to ``to_text`` once, as the first of them.
    """
    arr = (
        np.asarray(values, dtype=object).ravel()
        if not isinstance(values, np.ndarray)
        else values.ravel()
    )
    n = arr.size
    if n == 0:
        return np.zeros(0, dtype=np.int64), []
    if arr.dtype.kind == "f":
        key, _ = pd.factorize(arr, use_na_sentinel=False)
    elif arr.dtype.kind in "iubU":  # one type throughout: no per-value type check
        key, _ = pd.factorize(arr)
    else:
        arr = arr.astype(object, copy=False)
        vcode, _ = pd.factorize(arr, use_na_sentinel=False)
        tcode, types = pd.factorize(np.fromiter(map(type, arr), dtype=object, count=n))
        key = vcode if len(types) == 1 else pd.factorize(vcode * len(types) + tcode)[0]
    # pandas numbers keys in order of first appearance: each key's first row is where the keys
    # reach a new high (one pass, against a sort in np.unique: ~0.5 against ~9 ms at 1.5 x 10^5)
    first = np.flatnonzero(key > np.r_[-1, np.maximum.accumulate(key)[:-1]])
    texts = [to_text(v) for v in arr[first].tolist()]
    tcodes, categories = pd.factorize(np.asarray(texts, dtype=object))
    return tcodes[key], [str(c) for c in categories]


def _value_codes(values) -> tuple[np.ndarray, list[str]]:
    """The ``value`` column's codes and texts: :func:`text_codes` with :func:`_as_text`, and for a
    pandas text column its own hash (Arrow's for Arrow text) without a Python step per distinct
    value (each text is its own text; missing is "")."""
    if not (isinstance(values, pd.Series) and isinstance(values.dtype, pd.StringDtype)):
        return text_codes(values, _as_text)
    key, uniques = pd.factorize(values)  # -1 for missing
    texts = uniques.to_numpy(dtype=object)
    missing = key < 0
    if missing.any():
        empty_at = np.flatnonzero(texts == "")
        if empty_at.size:
            key = np.where(missing, empty_at[0], key)
        else:
            key = np.where(missing, texts.size, key)
            texts = np.append(texts, "")
    return key, texts.tolist()


def empty(*, categorical: bool = False) -> pd.DataFrame:
    """An empty findings table with the right columns and dtypes (text columns Categorical if asked)."""
    if not categorical:
        return pd.DataFrame(
            {
                "row": pd.Series([], dtype="int64"),
                **{c: pd.Series([], dtype="object") for c in TEXT_COLUMNS},
            }
        )
    return pd.DataFrame(
        {
            "row": pd.Series([], dtype="int64"),
            **{
                c: pd.Series(_severity("note", 0) if c == "severity" else _constant("", 0))
                for c in TEXT_COLUMNS
            },
        }
    )


def make(
    rows,
    *,
    code: str,
    severity: str,
    message: str,
    column: str = "",
    field: str = "",
    values=None,
    value_codes=None,
    messages=None,
) -> pd.DataFrame:
    """Findings for many rows at once (vectorised: one call per rule, not per row).

    Parameters
    ----------
    rows : array-like of int
        0-based row positions (or [-1] for a column- or file-level finding).
    code, severity, message, column, field : str
        The same for every row of this rule.
    values : array-like, optional
        The offending value per row (written as text).
    value_codes : tuple (codes, texts), optional
        The value per row as integer codes into a list of distinct texts (each once), instead of
        ``values``.
    messages : tuple (codes, texts), optional
        A message per row instead of ``message``: integer codes into a list of distinct texts,
        each once (as returned by :func:`text_codes`).

    Returns
    -------
    DataFrame
        ``FINDING_COLUMNS``; ``row`` int64, the text columns Categorical.
    """
    if severity not in SEVERITIES:
        raise ValueError(f"severity must be one of {SEVERITIES}, got {severity!r}")
    rows = np.asarray(rows, dtype="int64").ravel()
    n = rows.size
    if value_codes is not None:
        value = _categorical(*value_codes)
    elif values is None:
        value = _constant("", n)
    else:
        value = _categorical(*_value_codes(values))
    if messages is None:
        msg = _constant(message, n)
    else:
        msg = _categorical(*messages)
    return pd.DataFrame(
        {
            "row": rows,
            "column": _constant(column, n),
            "field": _constant(field, n),
            "value": value,
            "severity": _severity(severity, n),
            "code": _constant(code, n),
            "message": msg,
        }
    )


def _as_text(v) -> str:
    if v is None:
        return ""
    if isinstance(v, float):
        if np.isnan(v):
            return ""
        return f"{v:.6g}"
    return str(v)


def _as_categorical(s: pd.Series, column: str) -> pd.Categorical:
    """A findings text column as a Categorical (tables built elsewhere may hold plain text)."""
    if column == "severity":
        if isinstance(s.dtype, pd.CategoricalDtype) and s.dtype == SEVERITY_DTYPE:
            return s.array
        return pd.Categorical(s.astype(object), dtype=SEVERITY_DTYPE)
    if isinstance(s.dtype, pd.CategoricalDtype):
        arr = s.array
        if arr.categories.dtype == object or _arrow_text(arr.categories) is not None:
            return arr
        return pd.Categorical.from_codes(
            arr.codes, categories=pd.Index(arr.categories, dtype=object), validate=False
        )
    codes, uniques = pd.factorize(s.to_numpy(dtype=object))
    return pd.Categorical.from_codes(
        codes, categories=pd.Index(uniques, dtype=object), validate=False
    )


def concat(parts, *, categorical: bool = False, run=None) -> pd.DataFrame:
    """Concatenate findings tables, sorted by row (file-level first), stable within a row.

    The text columns' categories are merged (``union_categoricals``); rows are reordered by a
    stable argsort of ``row`` only when the parts are not already in order. With
    ``categorical=False`` (default) the text columns come back as plain text (:func:`as_text`), as
    every consumer of a findings table expects; the pipeline keeps them Categorical until its end.
    ``run``: runs a list of functions and gives their results in order (the pipeline shares them
    among its threads); by default one after the other. The order and each column are separate
    tasks.
    """
    parts = [p for p in parts if p is not None and len(p)]
    if not parts:
        return empty(categorical=categorical)
    if any(tuple(p.columns) != FINDING_COLUMNS for p in parts):  # extra or missing columns
        out = pd.concat([as_text(p) for p in parts], ignore_index=True)
        return out.sort_values("row", kind="stable").reset_index(drop=True)
    run = run or (lambda fns: [f() for f in fns])
    lengths = [len(p) for p in parts]

    def in_order():
        """(rows in order, the permutation or None, each finding's part in that order)."""
        rows = np.concatenate([p["row"].to_numpy(dtype="int64") for p in parts])
        part = np.repeat(np.arange(len(parts), dtype=_code_dtype(len(parts))), lengths)
        if rows.size > 1 and (rows[1:] < rows[:-1]).any():
            order = np.argsort(rows, kind="stable")
            return rows[order], order, part[order]
        return rows, None, part

    def joined(c):
        cats = [_as_categorical(p[c], c) for p in parts]
        if len(cats) > 1 and all(_one_code(x) for x in cats):
            return _one_text_per_part(cats, c)  # (each part's code, dtype): placed below
        return cats[0] if len(cats) == 1 else _union(cats, c)

    (rows, order, part), *merged = run([in_order] + [partial(joined, c) for c in TEXT_COLUMNS])
    merged = run([partial(_placed, m, order, part) for m in merged])
    out = pd.DataFrame({"row": rows, **dict(zip(TEXT_COLUMNS, merged, strict=True))})
    return out if categorical else as_text(out)


def _one_code(cat: pd.Categorical) -> bool:
    """Whether every value of a (non-empty) part is the same text, none missing."""
    return cat.codes[0] >= 0 and bool((cat.codes == cat.codes[0]).all())


def _one_text_per_part(cats: list[pd.Categorical], column: str) -> tuple:
    """A column whose every part is one text throughout (a rule's code, column, severity): each
    part's code into the joined categories, and their dtype. Its codes are then looked up per
    finding from its part (one small table), with no table of codes per part to join and reorder."""
    if column == "severity":  # one fixed dtype for every part
        return np.array([x.codes[0] for x in cats], dtype=np.int8), SEVERITY_DTYPE
    texts = np.array([x.categories[x.codes[0]] for x in cats], dtype=object)
    where, union = pd.factorize(texts)
    return _small_codes(where, len(union)), _distinct_dtype(pd.Index(union, dtype=object))


def _placed(merged, order: np.ndarray | None, part: np.ndarray) -> pd.Categorical:
    """A joined column in row order: codes looked up from each finding's part (a column of one
    text per part), or the joined codes reordered."""
    if isinstance(merged, tuple):
        table, dtype = merged
        return pd.Categorical.from_codes(np.take(table, part), dtype=dtype, validate=False)
    return merged if order is None else _reordered(merged, order)


def _reordered(cat: pd.Categorical, order: np.ndarray) -> pd.Categorical:
    return pd.Categorical.from_codes(np.take(cat.codes, order), dtype=cat.dtype, validate=False)


def join_categoricals(pieces: list[pd.Categorical]) -> pd.Categorical | None:
    """Pieces built on one list of categories (a rule's or a group's fixed names, the severities)
    joined by their codes, as ``union_categoricals`` would join them but without checking and
    re-coding each piece (~0.3 ms a piece); None when their categories differ."""
    dtype = pieces[0].dtype
    if not all(
        p.dtype is dtype  # one shared dtype (_one_text_dtype, SEVERITY_DTYPE): no compare
        or (p.dtype.ordered == dtype.ordered and p.categories.equals(dtype.categories))
        for p in pieces
    ):
        return None
    codes = np.concatenate([p.codes for p in pieces])
    return pd.Categorical.from_codes(codes, dtype=dtype, validate=False)


def _union(cats: list[pd.Categorical], column: str) -> pd.Categorical:
    """The parts of one text column joined, categories in order of first appearance (as
    ``union_categoricals`` gives them) but hashed once in all: each part's codes are moved
    through a small table instead of looking its categories up in the whole union (which, with
    10^5 distinct values in one part, is a hash of the union per part)."""
    same = join_categoricals(cats)  # the severities (one fixed dtype), or parts alike
    if same is not None:
        return same
    sizes = [len(c.categories) for c in cats]
    big = int(np.argmax(sizes))
    if sizes[big] > BIG_PART_CATEGORIES and sizes[big] > 2 * (sum(sizes) - sizes[big]):
        return _union_into_big(cats, big)
    every = np.concatenate([c.categories.to_numpy(dtype=object) for c in cats])
    where, union = pd.factorize(every)
    moves = np.split(where, np.cumsum(sizes)[:-1])
    dtype = _distinct_dtype(pd.Index(union, dtype=object))
    return _categorical(_moved_codes(cats, moves, len(union)), union, dtype)


def _moved_codes(cats: list[pd.Categorical], moves: list[np.ndarray], n_categories: int):
    """The parts' codes, each moved through its table (``moves``: a part's category -> the
    union's), written one after the other into one array of the smallest integer type."""
    out = np.empty(sum(len(c) for c in cats), dtype=_code_dtype(n_categories))
    start = 0
    for cat, move in zip(cats, moves, strict=True):
        table = np.append(move, -1).astype(out.dtype)  # code -1 (missing) takes the last: -1
        np.take(table, cat.codes, out=out[start : start + len(cat)])
        start += len(cat)
    return out


def _union_into_big(cats: list[pd.Categorical], big: int) -> pd.Categorical:
    """:func:`_union` where one part (``big``: e.g. the ids of 10^6 repeated studies) holds most
    of the distinct texts: only the other parts' texts are hashed, the big part's are looked up
    in them (a small table) and kept as they are. Categories: the other parts' texts (in order
    of first appearance), then the big part's that are not among them."""
    others = [c for i, c in enumerate(cats) if i != big]
    sizes = [len(c.categories) for c in others]
    every = np.concatenate([c.categories.to_numpy(dtype=object) for c in others])
    where, small = pd.factorize(every)
    big_texts = cats[big].categories
    arrow = _arrow_text(big_texts)
    if arrow is not None and pd.api.types.infer_dtype(small) in ("string", "empty"):
        # Arrow text (ids as read): looked up and kept in Arrow
        arrow = arrow.combine_chunks()
        small_arrow = pa.array(list(small), type=arrow.type)
        found = pc.index_in(arrow, value_set=small_arrow).fill_null(-1).to_numpy()
    else:  # both Index of object: no conversion to Arrow text and back
        arrow = None
        big_texts = big_texts.to_numpy(dtype=object)
        found = pd.Index(small, dtype=object).get_indexer(pd.Index(big_texts, dtype=object))
    new = found < 0  # only in the big part
    move_big = np.where(new, len(small) + np.cumsum(new) - 1, found)
    moves = np.split(where, np.cumsum(sizes)[:-1])
    moves.insert(big, move_big)
    if arrow is not None:
        joined = pa.concat_arrays([small_arrow, arrow.filter(pa.array(new))])
        union = pd.Index(pd.array(joined, dtype=_TEXT_DTYPE))
    else:
        union = pd.Index(np.concatenate([np.asarray(small, dtype=object), big_texts[new]]))
    dtype = _distinct_dtype(union.astype(object) if arrow is None else union)
    return _categorical(_moved_codes(cats, moves, len(union)), union, dtype)


def column_level_keys(findings: pd.DataFrame) -> list[tuple[str, ...]]:
    """(code, column, field, message) of each row of a findings table: what makes a finding about
    a whole column or the file the same finding when several chunks or partitions report it."""
    cols = [findings[c].to_numpy(dtype=object) for c in ("code", "column", "field", "message")]
    # a missing value (None, NaN, NA) is "" (it has no text to compare); a row or two per
    # table, so per value in Python (``astype(str)`` on the frame took ~2 ms a call)
    return [tuple("" if pd.isna(v) else str(v) for v in row) for row in zip(*cols, strict=True)]


def _text_dtype():
    """The dtype pandas gives a text column built from Python strings (``str`` in pandas 3)."""
    return pd.DataFrame({"x": np.array(["a"], dtype=object)})["x"].dtype


_TEXT_DTYPE = _text_dtype()


def categorical_text(codes, names) -> pd.Categorical:
    """``names[codes]`` as a Categorical of text (-1 gives a missing value); names may repeat.

    The pipeline's text outputs (geometry, grades, flags) repeat a few strings over every row: as
    a Categorical each row costs one small integer, and the writers turn them into text per chunk.
    """
    names = [str(x) for x in names]
    distinct = list(dict.fromkeys(names))
    codes = np.asarray(codes)
    if len(distinct) != len(names):  # one gather; code -1 takes the appended -1
        remap = np.array([distinct.index(x) for x in names] + [-1], dtype=np.int64)
        codes = remap[codes]
    # categories in pandas' text dtype, as a parquet file read back gives them
    dtype = pd.CategoricalDtype(pd.Index(distinct, dtype=_TEXT_DTYPE), ordered=False)
    return _categorical(codes, distinct, dtype)


def text_from_codes(codes: np.ndarray, names) -> pd.api.extensions.ExtensionArray | np.ndarray:
    """``names[codes]`` as a plain text column (pandas' default text dtype), built in C.

    ``codes`` are integer positions into ``names`` (-1 gives a missing value). Same values and dtype
    as a column built from the object array ``names[codes]``, without one Python step per cell.
    """
    codes = np.asarray(codes)
    arrow = _arrow_text(names)
    names = np.asarray(names, dtype=object) if arrow is None else names
    if getattr(_TEXT_DTYPE, "storage", None) != "pyarrow":  # pragma: no cover - pandas < 3
        out = names[np.where(codes >= 0, codes, 0)] if len(names) else np.full(codes.size, None)
        return np.where(codes >= 0, out, None).astype(object)
    missing = codes < 0
    idx = pa.array(codes.astype(np.int32, copy=False), mask=missing if missing.any() else None)
    if arrow is not None and len(arrow):  # Arrow text already: no Python string per category
        dictionary = arrow.combine_chunks().cast(pa.large_string())
    else:
        dictionary = pa.array(list(names) if len(names) else [""], type=pa.large_string())
    return pd.array(pc.take(dictionary, idx), dtype=_TEXT_DTYPE)


def as_text(findings: pd.DataFrame) -> pd.DataFrame:
    """A findings table with every Categorical column as plain text (same values, pandas' text dtype).

    For consumers that treat the columns as plain strings (``.map`` then ``max``, parquet files
    read back as text).
    """
    cols = {}
    for c in findings.columns:
        s = findings[c]
        if isinstance(s.dtype, pd.CategoricalDtype):
            cats = s.array.categories
            names = cats if _arrow_text(cats) is not None else cats.to_numpy(dtype=object)
            cols[c] = text_from_codes(s.array.codes, names)
        else:
            cols[c] = s.to_numpy() if c == "row" else s.array
    return pd.DataFrame(cols, index=findings.index)
