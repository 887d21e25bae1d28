"""Write a table to CSV fast and without loss: pyarrow's C++ CSV writer where it can, else pandas.

Fast path (decimal mark ``"."``, a one-character delimiter, UTF-8 with or without BOM): the frame's
columns become Arrow arrays and :func:`pyarrow.csv.write_csv` writes them. Output semantics are those
of ``DataFrame.to_csv(index=False)``: same header names and delimiter, one line per row, RFC 4180
quoting (a field holding the delimiter, a quote or a line break is quoted, quotes doubled), missing
values (NaN, None, NA, NaT) as empty fields. Differences that read back to the same values:

- every text field is quoted (pyarrow's minimal quoting style quotes all text, needed or not);
- floats are written as the shortest text that reads back to the same float64 (``0.1``,
  ``1e-310``, ``5.0``), exactly pandas' ``repr`` text; infinities as ``inf``/``-inf``; a float
  column holding a whole number is written as text, so its fields are quoted too;
- booleans as ``true``/``false`` (pandas writes ``True``/``False``; both are read as booleans by
  pandas, spreadsheet programs and most CSV readers).

Datetimes are written by pandas' own formatting (as ``to_csv`` does: ``2020-01-02`` for a column of
midnights, else ``2020-01-02 03:04:05[.fff]``, time zone offsets kept); categorical columns as their
values; object columns holding anything but one type as ``str(value)``.

Any other decimal mark or encoding, or a frame pyarrow cannot take, goes through ``to_csv``, with
floats converted to their shortest round-trip text first so that no precision is lost.

References
----------
Shafranovich Y. Common Format and MIME Type for Comma-Separated Values (CSV) Files. RFC 4180, 2005.
Apache Arrow, pyarrow.csv.write_csv and WriteOptions (quoting_style), documentation of pyarrow 26.
"""

from __future__ import annotations

import contextlib
import os

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pa_csv

from wallstress.findings import text_from_codes

FAST_ENCODINGS: tuple[str, ...] = ("utf-8", "utf-8-sig")
_BOM = b"\xef\xbb\xbf"


def write_csv(
    df: pd.DataFrame,
    path,
    *,
    delimiter: str = ",",
    decimal: str = ".",
    encoding: str = "utf-8",
    header: bool = True,
) -> None:
    """Write ``df`` (without its index) to ``path`` as CSV, every value at full precision.

    Parameters
    ----------
    df : DataFrame
        The table; column names (as text) make the header line.
    path : path-like or binary file
        The file to write (the caller handles atomicity: pass a temporary path beside the target),
        or a file opened in binary mode to append to (for a table written chunk by chunk).
    delimiter : str
        Field separator, one character (``","``, ``";"``, ``"\\t"``...).
    decimal : str
        Decimal mark of numbers (``"."`` or ``","``); must differ from ``delimiter``.
    encoding : str
        Text encoding; ``"utf-8"`` and ``"utf-8-sig"`` (with a byte order mark) take the fast path.
    header : bool
        Write the header line (and, for ``"utf-8-sig"``, the byte order mark) first.

    Raises
    ------
    ValueError
        ``delimiter`` is not one character other than a quote or line break, or equals ``decimal``.
    """
    if not isinstance(df, pd.DataFrame):
        raise TypeError(f"df must be a pandas DataFrame, got {type(df).__name__}")
    if not isinstance(delimiter, str) or len(delimiter) != 1 or delimiter in '"\r\n':
        raise ValueError(
            f"delimiter must be one character other than a quote or line break, got {delimiter!r}; "
            "use ',', ';' or '\\t'"
        )
    if not isinstance(decimal, str) or len(decimal) != 1 or decimal == delimiter:
        raise ValueError(
            f"decimal must be one character different from the delimiter {delimiter!r}, got "
            f"{decimal!r}; use '.' or ','"
        )
    enc = str(encoding).lower().replace("_", "-")
    enc = {"utf8": "utf-8", "utf8-sig": "utf-8-sig"}.get(enc, enc)
    # one column: pandas writes a missing value as "" so that its line is not blank (a reader would
    # skip a blank line and lose the row); pyarrow writes an empty line
    one_column_gaps = df.shape[1] == 1 and bool(df.iloc[:, 0].isna().any())
    if decimal == "." and enc in FAST_ENCODINGS and not one_column_gaps:
        try:
            # the text of a slice of rows at a time: the whole table as Arrow text would be
            # several times the size of the frame itself
            whole = _whole_number_columns(df)
            first = arrow_table(df.iloc[:SLICE_ROWS], whole)
        except (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError, UnicodeError):
            first = None
        if first is not None and _write_slices(df, path, first, whole, header, delimiter, enc):
            return
    _write_with_pandas(
        df, path, delimiter=delimiter, decimal=decimal, encoding=encoding, header=header
    )


# rows converted to text at a time: 16,384 rows of a 45-column result are about 15 MiB of text
# (65,536 held 60 MiB more at the peak of a 10^6-row CSV, and were no faster)
SLICE_ROWS = 16_384


def _write_slices(df, path, first, whole, header, delimiter, enc) -> bool:
    """Write the first slice's table, then each further slice converted in turn. False if a later
    slice cannot be converted (the file is then left for the pandas path to write afresh)."""
    start = path.tell() if hasattr(path, "write") else None
    with _binary(path) as fh:
        if enc == "utf-8-sig" and header:
            fh.write(_BOM)
        pa_csv.write_csv(first, fh, write_options=_options(header, delimiter))
        for i in range(SLICE_ROWS, len(df), SLICE_ROWS):
            try:
                table = arrow_table(df.iloc[i : i + SLICE_ROWS], whole)
            except (pa.ArrowInvalid, pa.ArrowTypeError, pa.ArrowNotImplementedError, UnicodeError):
                if start is not None:
                    fh.seek(start)
                    fh.truncate()
                return False
            pa_csv.write_csv(table, fh, write_options=_options(False, delimiter))
    return True


def _options(header: bool, delimiter: str) -> pa_csv.WriteOptions:
    return pa_csv.WriteOptions(include_header=header, delimiter=delimiter)


def _whole_number_columns(df: pd.DataFrame) -> set[int]:
    """Positions of float columns holding a whole number anywhere (written as text with ``.0``,
    decided for the whole column so that every slice writes it alike)."""
    out = set()
    for j in range(df.shape[1]):
        col = df.iloc[:, j]
        if pd.api.types.is_float_dtype(col.dtype):
            arr = col.to_numpy(dtype="float64", na_value=np.nan)
            with np.errstate(invalid="ignore"):
                if (np.isfinite(arr) & (arr == np.trunc(arr))).any():
                    out.add(j)
    return out


@contextlib.contextmanager
def _binary(target):
    """An open binary file: the one given (left open), or ``target`` opened for writing."""
    if hasattr(target, "write"):
        yield target
    else:
        with open(os.fspath(target), "wb") as fh:
            yield fh


def arrow_table(df: pd.DataFrame, whole: set[int] | None = None) -> pa.Table:
    """``df`` as an Arrow table that the CSV writer renders as ``to_csv`` would (see module notes).

    Column names become text (repeats allowed); NaN becomes null in float columns. ``whole``: the
    positions of float columns to write as text with ``.0`` (default: those holding a whole number).
    """
    if whole is None:
        whole = _whole_number_columns(df)
    arrays = [_arrow_column(df.iloc[:, j], j in whole) for j in range(df.shape[1])]
    names = [str(c) for c in df.columns]
    if not arrays:
        return pa.table({})
    return pa.Table.from_arrays(arrays, names=names)


def categorical_as_text(col: pd.Series) -> pa.Array | None:
    """A Categorical of text as an Arrow text array (missing -> null); None for other categories.

    The codes index the categories in C (:func:`wallstress.findings.text_from_codes`).
    """
    cats = col.dtype.categories
    if pd.api.types.infer_dtype(cats, skipna=False) not in ("string", "empty"):
        return None
    return _as_text(text_from_codes(col.array.codes, cats))


def _arrow_column(col: pd.Series, whole_number: bool = False) -> pa.Array:
    dtype = col.dtype
    if isinstance(dtype, pd.CategoricalDtype):
        text = categorical_as_text(col)
        if text is not None:
            return text
        col = col.astype(object).where(col.notna(), None)
        dtype = col.dtype
    if pd.api.types.is_datetime64_any_dtype(dtype) or pd.api.types.is_timedelta64_dtype(dtype):
        return _as_text(col.astype(str).where(col.notna(), None))
    if pd.api.types.is_float_dtype(dtype):
        return _float_column(col.to_numpy(dtype="float64", na_value=np.nan), whole_number)
    if pd.api.types.is_bool_dtype(dtype) or pd.api.types.is_numeric_dtype(dtype):
        if pd.api.types.is_complex_dtype(dtype):
            return _as_text(col.map(str).where(col.notna(), None))
        arr = pa.array(col, from_pandas=True)
        return arr.combine_chunks() if isinstance(arr, pa.ChunkedArray) else arr
    if isinstance(dtype, pd.StringDtype):
        return _as_text(col)
    values = col.to_numpy(dtype=object)
    kind = pd.api.types.infer_dtype(values, skipna=True)
    if kind in ("string", "empty"):
        return _as_text(values)
    if kind in ("floating", "integer", "mixed-integer-float", "boolean"):
        try:
            return pa.array(values, from_pandas=True)
        except (pa.ArrowInvalid, pa.ArrowTypeError, OverflowError):
            pass
    if kind in ("datetime", "datetime64", "date", "timedelta", "period"):
        text = pd.Series(values).map(str, na_action="ignore")
        return _as_text(text.where(pd.Series(values).notna(), None))
    # mixed objects: str(value), as to_csv writes them
    text = [None if _missing(v) else str(v) for v in values]
    return _as_text(text)


def _float_column(arr: np.ndarray, whole_number: bool) -> pa.Array:
    """Floats as pyarrow writes them, but whole numbers keep ``.0`` (``5.0``, as pandas writes them).

    pyarrow renders 5.0 as ``5``, which a reader takes for an integer column; a column holding a
    whole number (``whole_number``) is written as its shortest round-trip text with ``.0`` added
    where the text has no point or exponent (the fields are then quoted, and read back as the same
    floats).
    """
    values = pa.array(arr, from_pandas=True)
    return _float_text(values) if whole_number else values


# below this magnitude pyarrow writes a whole float as plain digits (1e10 already as "1e+10";
# checked in tests/test_fast_csv.py against its formatter)
_PLAIN_WHOLE_BELOW = 1e10


def _float_text(values: pa.Array) -> pa.Array:
    """Shortest round-trip text of float64 values, ``.0`` added to whole numbers (nulls kept).

    A whole number below 1e10 in magnitude is found with numpy; the text of larger ones is
    checked (its form, digits or exponent, depends on the formatter).
    """
    text = pc.cast(values, pa.large_string())
    arr = values.to_numpy(zero_copy_only=False)
    with np.errstate(invalid="ignore"):
        whole = np.isfinite(arr) & (arr == np.trunc(arr))
        small = whole & (np.abs(arr) < _PLAIN_WHOLE_BELOW)
    add = pa.array(small)
    if (whole & ~small).any():
        digits = pc.fill_null(pc.match_substring_regex(text, r"^-?[0-9]+$"), False)
        add = pc.or_(add, digits)
    large = pa.large_string()
    dotted = pc.binary_join_element_wise(text, pa.scalar(".0", large), pa.scalar("", large))
    return pc.if_else(add, dotted, text)


def _as_text(values) -> pa.Array:
    arr = pa.array(values, type=pa.large_string(), from_pandas=True)
    return arr.combine_chunks() if isinstance(arr, pa.ChunkedArray) else arr


def _missing(v) -> bool:
    if v is None or v is pd.NA or v is pd.NaT:
        return True
    if isinstance(v, (float, np.floating)):
        return bool(np.isnan(v))
    return isinstance(v, (np.datetime64, np.timedelta64)) and bool(np.isnat(v))


def _write_with_pandas(df, path, *, delimiter, decimal, encoding, header=True) -> None:
    """``to_csv`` with floats as shortest round-trip text (pandas would round them with a decimal mark)."""
    out = df
    float_cols = [j for j in range(df.shape[1]) if pd.api.types.is_float_dtype(df.iloc[:, j].dtype)]
    if float_cols:
        out = df.copy()
        for j in float_cols:
            col = df.iloc[:, j]
            arr = col.to_numpy(dtype="float64", na_value=np.nan)
            text = _float_text(pa.array(arr, from_pandas=True))
            if decimal != ".":
                text = pc.replace_substring(text, ".", decimal)
            out.isetitem(j, pd.Series(text.to_numpy(zero_copy_only=False), index=col.index))
    if hasattr(path, "write") and encoding.lower().replace("_", "-") == "utf-8-sig" and not header:
        encoding = "utf-8"  # appending: the byte order mark was written with the header
    out.to_csv(path, index=False, sep=delimiter, decimal=decimal, encoding=encoding, header=header)


__all__ = ["FAST_ENCODINGS", "arrow_table", "write_csv"]
