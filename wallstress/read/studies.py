"""Reading study lists: csv, xlsx, ods and parquet, as the user wrote them.

``read_studies(path)`` returns the raw cells under the user's own headers (one row per study, in file
order) plus everything noticed on the way (encoding, delimiter, decimal comma, header row, folded
units row, duplicate headers, spreadsheet error values, formulas never calculated, over-long cells).
Formulas and units are not touched here: ``prepare.mapping.map_columns`` reads the cells.

A file that cannot be used at all raises ``InputError`` with one line naming the file, what is
wrong and what to do. Workbooks are checked before any parser sees them: a zip container must stay
within ``ZIP_LIMITS`` (entries, uncompressed sizes, compression ratio) and no XML part may declare a
DOCTYPE or entity (entity-expansion attacks). openpyxl, the fallback reader, additionally parses
through defusedxml when it is installed (it is a dependency).

Before anything is read, the path must be a regular file (a device such as ``/dev/zero``, a FIFO or
a socket is refused: it could block or never end) of at most ``READ_LIMIT_BYTES`` (larger CSV and
parquet files go through ``--chunk-rows``). A sheet whose cells reach far beyond its table (a stray
cell at XFD1048576) is measured before the fast reader expands it, and read bounded to its table
(:mod:`wallstress.read.sheet_bounds`).

A file with a header and no data rows is not an error: it returns 0 rows with a ``no_rows`` finding.

This module dispatches by format and reads parquet; the other modules of ``read/`` do the rest.

References
----------
RFC 4180, Common Format and MIME Type for Comma-Separated Values (CSV) Files, 2005.
ECMA-376, Office Open XML File Formats, 5th ed., 2016 (SpreadsheetML cells: ``t="e"`` error values,
``<f>`` formulas with cached ``<v>`` values; 32,767 characters per cell).
OASIS, Open Document Format for Office Applications (OpenDocument) v1.2, 2011.
[MS-OFFCRYPTO], Office Document Cryptography Structure (encrypted OOXML is an OLE compound file
holding ``EncryptionInfo`` and ``EncryptedPackage`` streams).
"""

from __future__ import annotations

import contextlib
import hashlib
import threading
from pathlib import Path

import pandas as pd
import pyarrow as pa

from wallstress import findings as fnd
from wallstress.errors import InputError
from wallstress.read.delimited import (
    _read_csv,
)
from wallstress.read.grid import (
    _cell_findings,
    _file_note,
    _unique_headers,
)
from wallstress.read.guards import (
    _sniff,
    read_file_bytes,
)
from wallstress.read.sheets import (
    _read_workbook,
)
from wallstress.read.study_table import StudyTable
from wallstress.schema.headers import check_columns_option, header_score

FORMATS: tuple[str, ...] = ("csv", "xlsx", "ods", "parquet")


# The file kinds a study list comes in (what ``read_studies`` reads, its contents deciding).
STUDY_LIST_SUFFIXES: tuple[str, ...] = (
    ".xlsx",
    ".xlsm",
    ".ods",
    ".csv",
    ".tsv",
    ".txt",
    ".parquet",
)


def read_studies(
    path, sheet: str | None = None, *, max_rows: int | None = None, columns: dict | None = None
) -> StudyTable:
    """Read a study list (csv, xlsx, ods or parquet) into raw cells under the user's headers.

    Parameters
    ----------
    path : str or Path
        The file. Its contents decide the format (an xlsx named .csv is read as xlsx, with a note).
    sheet : str, optional
        Workbook sheet; default the first sheet whose header row is recognised.
    max_rows : int, optional
        Read at most this many data rows (e.g. for a preview).
    columns : dict, optional
        The lab's own header -> canonical field map (``Options.columns``); such headers count as
        recognised when looking for the header row.

    Returns
    -------
    StudyTable

    Raises
    ------
    InputError
        The file cannot be used (missing, a folder, not a regular file, over ``READ_LIMIT_BYTES``,
        damaged, unsafe, no recognisable header...); one line naming the file, the problem and the fix.
    """
    p = Path(path)
    if max_rows is not None and (not isinstance(max_rows, int) or max_rows < 0):
        raise InputError(f"max_rows={max_rows!r} is not valid; pass a whole number >= 0 or None")
    check_columns_option(columns)
    data = read_file_bytes(p)
    if not data.strip():
        raise InputError(f"{p}: the file is empty; export the study list again with its header row")
    digest = hashlib.sha256(data).hexdigest()
    kind = _sniff(p, data)
    notes: list[pd.DataFrame] = []
    suffix = p.suffix.lower().lstrip(".")
    named = {"xlsm": "xlsx", "tsv": "csv", "txt": "csv"}.get(suffix, suffix)
    if named in FORMATS and named != kind:
        notes.append(
            _file_note(
                "format_differs_from_name",
                f"The file is named .{suffix} but its contents are {kind}; it was read as {kind}.",
            )
        )
    if kind == "csv":
        st = _read_csv(p, data, max_rows, columns)
    elif kind in ("xlsx", "ods"):
        st = _read_workbook(p, kind, sheet, max_rows, columns)
    else:
        st = _read_parquet(p, max_rows, columns)
    st.sha256 = digest
    st.findings = fnd.concat([*notes, st.findings])
    release_parser_memory()
    return st


_POOL_LOCK = threading.Lock()
_POOL_USERS = [0, None]  # jobs running with the system pool, and the pool they found


@contextlib.contextmanager
def system_arrow_memory():
    """Arrow's buffers taken from the C library's allocator (``malloc``) while a job runs, then
    Arrow's default pool again.

    Arrow's default pool (mimalloc) keeps the blocks the CSV parser and the text steps free, mixed
    with the text kept for writing, so that they cannot go back to the system: at 10^6 rows it held
    about 90 MiB more after reading, and the peak of ``analyse_file`` on a CSV was 895 against 827
    MiB with ``malloc`` (benchmarks/, peak RSS), at the same speed. Scoped to the file-level jobs, so
    that a program importing wallstress keeps its own choice: the first job to start sets it and
    the last to end (the web page runs several in threads) puts back the pool it found. Buffers
    remember the pool they came from, so each is freed into the right one.
    """
    with _POOL_LOCK:
        if _POOL_USERS[0] == 0:
            _POOL_USERS[1] = pa.default_memory_pool()
            pa.set_memory_pool(pa.system_memory_pool())
        _POOL_USERS[0] += 1
    try:
        yield
    finally:
        with _POOL_LOCK:
            _POOL_USERS[0] -= 1
            if _POOL_USERS[0] == 0:
                pa.set_memory_pool(_POOL_USERS[1])
                _POOL_USERS[1] = None


def release_parser_memory() -> None:
    """Hand the memory the parsers freed back to the system.

    Arrow's allocator keeps freed blocks for reuse; after reading a CSV of 10^6 rows it held about
    250 MiB that the numpy steps after it cannot use (measured in benchmarks/). A few
    milliseconds.
    """
    pa.default_memory_pool().release_unused()


def _read_parquet(p: Path, max_rows, columns) -> StudyTable:
    try:
        import pyarrow.parquet as pq
    except ImportError as exc:  # optional dependency
        raise InputError(
            f"{p}: reading parquet needs pyarrow; install it (pip install pyarrow) or pass a CSV/xlsx file"
        ) from exc
    try:
        pf = pq.ParquetFile(p)
        if max_rows is not None:
            batches = []
            got = 0
            for b in pf.iter_batches(batch_size=max(1, min(max_rows, 65536))):
                batches.append(b)
                got += b.num_rows
                if got >= max_rows:
                    break
            import pyarrow as pa

            tbl = (
                pa.Table.from_batches(batches, schema=pf.schema_arrow)
                if batches
                else pf.schema_arrow.empty_table()
            )
        else:
            tbl = pf.read()
        tbl, odd = _plain_columns(tbl)
        df = tbl.to_pandas()
    except Exception as exc:
        raise InputError(
            f"{p}: the parquet file cannot be read ({type(exc).__name__}: {exc}); write it again"
        ) from exc
    if max_rows is not None:
        df = df.iloc[:max_rows]
    df = df.reset_index(drop=True)
    headers = [str(c) for c in df.columns]
    need = min(3, len(headers))
    if header_score(headers, columns) < need:
        raise InputError(
            f"{p}: no recognisable column names ({header_score(headers, columns)} known, at least {need} "
            "needed, e.g. ivsd_cm, lvidd_cm, pwd_cm, height_cm, weight_kg); rename them or map them with --columns"
        )
    uniq, dup = _unique_headers(headers)
    df.columns = uniq
    parts = _duplicate_header_findings(dup) + odd
    if len(df) == 0:
        parts.append(
            _file_note("no_rows", "The study list has column names but no data rows.", "warning")
        )
    parts += _cell_findings(df)
    return StudyTable(
        table=df,
        path=p,
        format="parquet",
        sheet=None,
        header_row=0,
        sha256="",
        findings=fnd.concat(parts),
        first_data_row=1,
    )


def _plain_columns(tbl):
    """Columns a study list cannot hold as such, as text, each with a note: bytes (as UTF-8 where
    they are, else hexadecimal) and nested values (lists, structs, maps, as their text)."""
    import pyarrow as pa
    import pyarrow.compute as pc

    notes = []
    for i, field in enumerate(tbl.schema):
        t = field.type
        if pa.types.is_binary(t) or pa.types.is_large_binary(t) or pa.types.is_fixed_size_binary(t):
            try:
                col = pc.cast(tbl.column(i), pa.string())
                how = "as UTF-8 text"
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
                col = pa.array(
                    [None if v is None else "0x" + v.hex() for v in tbl.column(i).to_pylist()],
                    pa.string(),
                )
                how = "as hexadecimal text (not UTF-8)"
        elif pa.types.is_nested(t):
            col = pa.array(
                [None if v is None else str(v) for v in tbl.column(i).to_pylist()], pa.string()
            )
            how = "as text"
        else:
            continue
        tbl = tbl.set_column(i, pa.field(field.name, pa.string()), col)
        notes.append(
            _file_note(
                "column_as_text",
                f"Column {field.name!r} holds {t} values, not numbers or text; carried through "
                f"{how}, not read as a measurement.",
            )
        )
    return tbl, notes


def _duplicate_header_findings(renamed) -> list:
    """One file-level warning per header copy that was renamed to make the names unique."""
    return [
        fnd.make(
            [-1],
            code="duplicate_header",
            severity="warning",
            column=h,
            message=f"A column name appears more than once; this copy was renamed {h!r}.",
        )
        for h in renamed
    ]
