"""A CSV or parquet study list read a chunk of rows at a time, with bounded memory.

The header row, delimiter, encoding and decimal mark of a CSV are decided on its first ``HEAD_BYTES``
(by the same reader as a whole file); parquet is read by record batches. Each chunk comes as the same
raw table, and the same cell findings, as :func:`wallstress.read.studies.read_studies` gives.
"""

from __future__ import annotations

import csv
import io
import tempfile
from collections.abc import Iterator
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pyarrow as pa

from wallstress import findings as fnd
from wallstress.errors import InputError
from wallstress.read import studies as readers
from wallstress.read.delimited import number_columns
from wallstress.read.grid import HEADER_SEARCH_ROWS, _blank_to_nan, _cell_findings, _unique_headers
from wallstress.read.guards import check_text_lines
from wallstress.schema.headers import header_score

CHUNK_INPUT_FORMATS: tuple[str, ...] = ("csv", "parquet")


HEAD_BYTES = 64 * 1024
"""Bytes of a CSV read to decide its header row, delimiter, encoding and decimal mark."""


# --------------------------------------------------------------------------------------------------
# inputs


def _input_kind(p: Path) -> str:
    with open(p, "rb") as fh:
        head = fh.read(8)
    if head.startswith(b"PAR1"):
        return "parquet"
    if head.startswith((b"PK\x03\x04", b"PK\x05\x06", b"\xd0\xcf\x11\xe0")):
        raise InputError(
            f"{p}: a workbook cannot be processed in chunks; run without --chunk-rows (up to about "
            "a million rows), or save the study list as CSV or parquet"
        )
    if p.suffix.lower() == ".parquet":
        raise InputError(f"{p}: named .parquet but it is not a parquet file; export it again")
    return "csv"


def _csv_head(p: Path) -> bytes:
    """The first ~64 KiB of the file, cut after the last complete line (more if lines are long)."""
    with open(p, "rb") as fh:
        data = fh.read(HEAD_BYTES)
        while data.count(b"\n") < HEADER_SEARCH_ROWS + 2:
            more = fh.read(HEAD_BYTES)
            if not more:
                return data
            data += more
        if not fh.read(1):
            return data
    if data.startswith(b"\xff\xfe"):  # UTF-16 LE: a line ends with the two bytes 0A 00
        ends = [i for i in range(len(data) - 2, -1, -2) if data[i : i + 2] == b"\n\x00"][:1]
        return data[: ends[0] + 2] if ends else data
    if data.startswith(b"\xfe\xff"):  # UTF-16 BE: 00 0A
        ends = [i for i in range(len(data) - 2, 1, -2) if data[i : i + 2] == b"\x00\n"][:1]
        return data[: ends[0] + 2] if ends else data
    return data[: data.rfind(b"\n") + 1]


def _csv_chunks(p: Path, chunk_rows: int, columns: dict | None = None):
    head = _csv_head(p)
    with tempfile.TemporaryDirectory(prefix="wallstress-head-") as tmp:
        head_path = Path(tmp) / p.name
        head_path.write_bytes(head)
        try:
            st = readers.read_studies(head_path, columns=columns)
        except InputError as exc:  # name the user's file, never the temporary copy of its head
            raise InputError(str(exc).replace(str(head_path), str(p))) from None
    check_text_lines(p, None, st.encoding)  # the whole file, streamed, before any chunk is parsed
    kw = dict(
        sep=st.delimiter,
        header=None,
        dtype=str,
        keep_default_na=False,
        na_filter=False,
        skip_blank_lines=False,
        quotechar='"',
        encoding=st.encoding,
    )
    head_text = head.decode(st.encoding, errors="replace")
    lines = head_text.splitlines()[:200]
    width = max((len(r) for r in csv.reader(lines, delimiter=st.delimiter)), default=1)
    grid = _blank_to_nan(
        pd.read_csv(
            io.StringIO(head_text), names=range(width), engine="c", **{**kw, "encoding": None}
        )
    )
    filled = np.flatnonzero(grid.notna().any(axis=0).to_numpy())
    first_col = int(filled[0]) if filled.size else 0
    headers = list(st.table.columns)
    usecols = list(range(first_col, first_col + len(headers)))
    file_findings = st.findings[st.findings["row"] < 0]
    file_findings = file_findings[file_findings["code"] != "no_rows"].reset_index(drop=True)
    source = SimpleNamespace(
        path=p,
        format="csv",
        sheet=None,
        header_row=st.header_row,
        sha256="",
        encoding=st.encoding,
        delimiter=st.delimiter,
        decimal=st.decimal,
    )

    def chunks() -> Iterator[tuple[pd.DataFrame, pd.DataFrame, dict]]:
        held: pd.DataFrame | None = None  # trailing empty rows, kept until a filled row follows
        try:
            reader = pd.read_csv(
                p,
                names=range(width),
                usecols=usecols,
                skiprows=st.first_data_row,
                chunksize=chunk_rows,
                engine="c",
                **kw,
            )
            for grid in reader:
                grid = _blank_to_nan(grid).reset_index(drop=True)
                if held is not None and len(held):
                    grid = pd.concat([held, grid], ignore_index=True)
                    held = None
                filled_rows = np.flatnonzero(grid.notna().any(axis=1).to_numpy())
                last = int(filled_rows[-1]) + 1 if filled_rows.size else 0
                held, grid = grid.iloc[last:], grid.iloc[:last]
                while len(grid):
                    part, grid = grid.iloc[:chunk_rows], grid.iloc[chunk_rows:]
                    yield _csv_table(part, headers, st.delimiter)
        except (pd.errors.ParserError, UnicodeDecodeError, ValueError) as exc:
            raise InputError(
                f"{p}: a chunk of the CSV cannot be read ({type(exc).__name__}: {exc}); the first "
                f"{HEAD_BYTES // 1024} KiB decided the layout (delimiter {st.delimiter!r}, encoding "
                f"{st.encoding}, {len(headers)} columns): check that later rows follow it, or run "
                "without --chunk-rows"
            ) from exc

    return source, file_findings, chunks()


def _csv_table(grid: pd.DataFrame, headers: list, delimiter: str) -> tuple:
    """One chunk as (cells as written, cell findings, parsed number columns)."""
    table = grid.reset_index(drop=True)
    table.columns = headers
    numbers, _ = number_columns(table, allow_comma=delimiter != ",")
    return table, fnd.concat(_cell_findings(table)), numbers


def _parquet_chunks(p: Path, chunk_rows: int, columns: dict | None = None):
    try:
        import pyarrow.parquet as pq
    except ImportError as exc:  # pragma: no cover - optional dependency
        raise InputError(f"{p}: reading parquet needs pyarrow (pip install pyarrow)") from exc
    try:
        pf = pq.ParquetFile(p)
    except Exception as exc:
        raise InputError(
            f"{p}: the parquet file cannot be read ({type(exc).__name__}: {exc}); write it again"
        ) from exc
    headers = [str(c) for c in pf.schema_arrow.names]
    need = min(3, len(headers))
    score = header_score(headers, columns)
    if score < need:
        raise InputError(
            f"{p}: no recognisable column names ({score} known, at least {need} needed, e.g. "
            "ivsd_cm, lvidd_cm, pwd_cm, height_cm, weight_kg); rename them or map them with --columns"
        )
    uniq, dup = _unique_headers(headers)
    parts = readers._duplicate_header_findings(dup)
    if pf.metadata.num_rows == 0:
        parts.append(
            fnd.make(
                [-1],
                code="no_rows",
                severity="warning",
                message="The study list has column names but no data rows.",
            )
        )
    source = SimpleNamespace(
        path=p,
        format="parquet",
        sheet=None,
        header_row=0,
        sha256="",
        encoding=None,
        delimiter=None,
        decimal=None,
    )

    def chunks():
        try:
            for b in pf.iter_batches(batch_size=chunk_rows):
                df = readers._plain_columns(pa.Table.from_batches([b]))[0].to_pandas()
                df = df.reset_index(drop=True)
                df.columns = uniq
                cells = fnd.concat(_cell_findings(df))
                yield df, cells, {}
        except Exception as exc:
            if isinstance(exc, InputError):
                raise
            raise InputError(
                f"{p}: a row group cannot be read ({type(exc).__name__}: {exc}); write the file again"
            ) from exc

    return source, fnd.concat(parts), chunks(), int(pf.metadata.num_rows)


def _at_least_one(chunks, source, columns=None):
    """The chunks; one empty chunk when the file has no data rows (so that headers get written)."""
    any_chunk = False
    for item in chunks:
        any_chunk = True
        yield item
    if not any_chunk:
        if source.format == "csv":
            st = readers.read_studies(source.path, columns=columns)
            yield st.table.iloc[:0], fnd.empty(), {}
        else:
            import pyarrow.parquet as pq

            df = pq.ParquetFile(source.path).schema_arrow.empty_table().to_pandas()
            df.columns = _unique_headers([str(c) for c in df.columns])[0]
            yield df, fnd.empty(), {}
