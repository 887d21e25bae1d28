"""Registry-size runs: chunked file-to-file analysis with bounded memory, and a path onto dask.

``analyse_chunked(path, out_path)`` reads a CSV or parquet study list a chunk of rows at a time,
analyses each chunk with :func:`wallstress.pipeline.analyse_with_findings` and streams the results
and findings to ``out_path`` (``.csv`` or ``.parquet``) and its sidecars, so that peak memory depends
on ``chunk_rows``, not on the size of the file. Outputs are written to temporary files in the target
folder and moved into place together at the end (``os.replace``): a run that fails or is interrupted
leaves no output and keeps a previous one.

``dask_analyse(ddf)`` maps :func:`wallstress.analyse` over the partitions of a dask DataFrame.

Every row is analysed by exactly the same code as in memory, so each row's measures and flags are the
same. What chunking cannot do is written into the methods record (``chunked.limits``): rules that
compare rows with each other (duplicate studies, duplicate study ids) only see rows of the same chunk;
the column units are decided on the first chunk and then held for the whole file; the header,
delimiter, encoding and decimal mark are decided on the first 64 KiB.

wallstress supports, and never replaces, a qualified clinician's judgement and the local lab's
protocols and reference values.
"""

from __future__ import annotations

import contextlib
import csv
import io
import os
import shutil
import tempfile
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.analysis.pipeline import analyse, analyse_with_findings
from wallstress.errors import InputError, OutputError
from wallstress.options import Options
from wallstress.read import studies as readers
from wallstress.read.delimited import _numbers_from_text
from wallstress.read.grid import HEADER_SEARCH_ROWS, _blank_to_nan, _cell_findings, _unique_headers
from wallstress.read.guards import check_regular_file
from wallstress.schema.headers import header_score
from wallstress.write import safety
from wallstress.write.fast_csv import write_csv

CHUNK_INPUT_FORMATS: tuple[str, ...] = ("csv", "parquet")
CHUNK_OUTPUT_SUFFIXES: tuple[str, ...] = (".csv", ".parquet")
DEFAULT_CHUNK_ROWS = 200_000
HEAD_BYTES = 64 * 1024
"""Bytes of a CSV read to decide its header row, delimiter, encoding and decimal mark."""

CHUNKING_LIMITS: tuple[str, ...] = (
    "Rules that compare rows with each other (duplicate_study: same patient and date; "
    "duplicate_study_id) were applied within each chunk only: duplicates in different chunks are "
    "not flagged.",
    "Units of columns whose header states none were inferred on the first chunk and then held for "
    "the whole file.",
    "CSV: header row, delimiter, encoding and decimal mark were decided on the first 64 KiB of the "
    "file; whether a column is read as numbers or as text is decided per chunk.",
)


@dataclass
class ChunkedResult:
    """What :func:`analyse_chunked` did.

    Attributes
    ----------
    written : list of Path
        Results file, findings file, methods JSON (in that order).
    methods : dict
        The methods record as written (counts summed over chunks, input SHA-256, chunking limits).
    rows : int
        Data rows analysed (= rows written).
    chunks : int
        Chunks processed.
    notes : list of str
        Plain sentences for the user (also in the methods record).
    """

    written: list[Path]
    methods: dict
    rows: int
    chunks: int
    notes: list[str] = field(default_factory=list)

    @property
    def rows_with_errors(self) -> int:
        return int(self.methods.get("counts", {}).get("rows_with_errors", 0))


# --------------------------------------------------------------------------------------------------
# public API


def analyse_chunked(
    path: str | os.PathLike,
    out_path: str | os.PathLike | None = None,
    options: Options | None = None,
    *,
    chunk_rows: int = DEFAULT_CHUNK_ROWS,
    progress: Callable[[int, int | None], None] | None = None,
    escape_formulas: bool = False,
) -> ChunkedResult:
    """Analyse a CSV or parquet study list chunk by chunk, streaming results to disk.

    Parameters
    ----------
    path : path-like
        The study list: CSV (any delimiter/encoding the reader accepts) or parquet. Workbooks are
        refused (an xlsx sheet holds at most 1,048,575 rows: use the in-memory path).
    out_path : path-like, optional
        ``.csv`` or ``.parquet``; default ``<stem>.wallstress.<csv|parquet>`` beside the input.
        Beside it: ``<stem>.findings.<csv|parquet>`` and ``<stem>.methods.json``.
    options : Options, optional
        As for :func:`wallstress.analyse`.
    chunk_rows : int
        Rows per chunk (>= 1). Peak memory grows with it; 200,000 rows is about 0.5 GB.
    progress : callable, optional
        Called as ``progress(rows_done, rows_total)`` after each chunk (``rows_total`` is None for
        CSV, whose length is not known in advance).
    escape_formulas : bool
        CSV output only: prefix formula-like text cells with a single quote.

    Returns
    -------
    ChunkedResult

    Raises
    ------
    InputError
        The input cannot be used (not CSV/parquet, no recognisable header, unreadable chunk).
    OutputError
        The output would overwrite the input, or has a suffix other than .csv/.parquet.
    """
    options = options or Options()
    if (
        isinstance(chunk_rows, bool)
        or not isinstance(chunk_rows, (int, np.integer))
        or chunk_rows < 1
    ):
        raise ValueError(
            f"chunk_rows={chunk_rows!r} is not valid; pass a whole number >= 1, e.g. 200000"
        )
    chunk_rows = int(chunk_rows)
    src = Path(path)
    check_regular_file(src)  # a folder, device or FIFO is refused before anything is read
    kind = _input_kind(src)
    out = Path(out_path) if out_path is not None else src.with_name(f"{src.stem}.wallstress.{kind}")
    suffix = out.suffix.lower()
    if suffix not in CHUNK_OUTPUT_SUFFIXES:
        raise OutputError(
            f"chunked output {out.name!r}: use a name ending in {' or '.join(CHUNK_OUTPUT_SUFFIXES)} "
            "(an xlsx sheet cannot hold a registry; for small lists run without chunking)"
        )
    findings_out = out.with_name(f"{out.stem}.findings{suffix}")
    methods_out = out.with_name(f"{out.stem}.methods.json")
    for target in (out, findings_out, methods_out):
        if safety.same_file(target, src):
            raise OutputError(
                f"writing {str(target)!r} would overwrite your input; choose another -o"
            )

    digest = safety.sha256_file(src)
    if kind == "csv":
        source, file_findings, chunks = _csv_chunks(src, chunk_rows, options.columns)
        total = None
    else:
        source, file_findings, chunks, total = _parquet_chunks(src, chunk_rows, options.columns)
    source.sha256 = digest

    sink = _Sink(out, findings_out, suffix, source, escape_formulas)
    state = _RunState(options, file_findings)
    with safety.atomic_files() as batch, contextlib.ExitStack() as stack:
        sink.open(batch, stack)
        done = 0
        for raw, cells in _at_least_one(chunks, source, options.columns):
            result, row_findings = state.analyse(raw, cells, offset=done)
            sink.write(result, row_findings, offset=done)
            done += len(raw)
            if progress is not None:
                progress(done, total)
        sink.close_rows()
        methods = state.methods(source, sink, done)
        notes = list(methods.get("chunked", {}).get("notes", []))
        sink.finish(state.file_findings, methods, [out, findings_out, methods_out], notes, batch)
    return ChunkedResult(
        written=[out, findings_out, methods_out],
        methods=sink.record,
        rows=done,
        chunks=state.chunks,
        notes=notes,
    )


def dask_analyse(ddf, options: Options | None = None):
    """:func:`wallstress.analyse` over every partition of a dask DataFrame (lazy).

    Parameters
    ----------
    ddf : dask.dataframe.DataFrame
        Study rows under canonical names or mappable headers (e.g. from
        ``dask.dataframe.read_parquet``).
    options : Options, optional
        As for :func:`wallstress.analyse`.

    Returns
    -------
    dask.dataframe.DataFrame
        The input columns followed by ``schema.OUTPUT_COLUMNS``, partition by partition, index kept.

    Notes
    -----
    Each partition is analysed on its own, so rules that compare rows (duplicate studies) see only
    their partition, and the unit of a column whose header states none is inferred per partition:
    put units in the headers (``lvidd_mm``, ``LVIDd (mm)``) or pass ``Options(units="mm"|"cm")`` for
    a registry. Text outputs (geometry, grades, flags) come as plain text rather than the
    Categoricals of :func:`wallstress.analyse`, so that every partition has one dtype; the meta
    comes from a zero-row analysis of ``ddf._meta``.
    """
    options = options or Options()
    meta = _analyse_as_text(ddf._meta, options)
    return ddf.map_partitions(_analyse_as_text, options, meta=meta)


def _analyse_as_text(df: pd.DataFrame, options: Options) -> pd.DataFrame:
    """:func:`analyse` with its Categorical text outputs as plain text.

    Each partition's Categoricals would have their own categories (the flags seen there); plain
    text gives every partition, and the meta, one dtype.
    """
    table = analyse(df, options)
    text = pd.Series(["x"]).dtype
    ours = table.columns[df.shape[1] :]
    return table.astype({c: text for c in ours if isinstance(table[c].dtype, pd.CategoricalDtype)})


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
        st = readers.read_studies(head_path, columns=columns)
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

    def chunks() -> Iterator[tuple[pd.DataFrame, pd.DataFrame]]:
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


def _csv_table(
    grid: pd.DataFrame, headers: list, delimiter: str
) -> tuple[pd.DataFrame, pd.DataFrame]:
    table = grid.reset_index(drop=True)
    table.columns = headers
    table, _ = _numbers_from_text(table, allow_comma=delimiter != ",")
    return table, fnd.concat(_cell_findings(table))


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
                df = b.to_pandas().reset_index(drop=True)
                df.columns = uniq
                cells = fnd.concat(_cell_findings(df))
                yield df, cells
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
            yield st.table.iloc[:0], fnd.empty()
        else:
            import pyarrow.parquet as pq

            df = pq.ParquetFile(source.path).schema_arrow.empty_table().to_pandas()
            df.columns = _unique_headers([str(c) for c in df.columns])[0]
            yield df, fnd.empty()


# --------------------------------------------------------------------------------------------------
# per-chunk analysis


class _RunState:
    """What carries from chunk to chunk: units held, file-level findings, summed counts."""

    def __init__(self, options: Options, file_findings: pd.DataFrame):
        self.options = options
        self.file_findings = file_findings
        self._seen = self._keys(file_findings)
        self.first_methods: dict | None = None
        self.pin: dict = {}
        self.chunks = 0
        self.counts = {"rows": 0, "rows_flagged": 0, "rows_with_errors": 0}
        self.row_findings = 0

    @staticmethod
    def _keys(frame: pd.DataFrame) -> set:
        cols = ["code", "column", "field", "message"]
        return set(map(tuple, frame[cols].astype(str).to_numpy().tolist())) if len(frame) else set()

    def analyse(self, raw: pd.DataFrame, cells: pd.DataFrame, *, offset: int):
        cols = list(raw.columns)
        frame = raw.rename(columns=self.pin) if self.pin else raw
        a = analyse_with_findings(frame, self.options, prior_findings=cells)
        table = a.table
        if self.pin:
            table.columns = cols + list(table.columns[len(cols) :])
        found = a.findings
        if self.pin:
            back = {v: k for k, v in self.pin.items()}
            found = found.assign(column=found["column"].map(lambda c: back.get(c, c)))
        if self.first_methods is None:
            self.first_methods = a.methods
            self.pin = self._pins(a.methods, cols)
        self.chunks += 1
        c = a.methods["counts"]
        for k in self.counts:
            self.counts[k] += int(c[k])
        file_level = found[found["row"] < 0]
        if len(file_level):
            keys = fnd.column_level_keys(file_level)
            new = [k not in self._seen for k in keys]
            if any(new):
                self.file_findings = pd.concat(
                    [self.file_findings, file_level[new]], ignore_index=True
                )
                self._seen.update(keys)
        rows = found[found["row"] >= 0]
        self.row_findings += len(rows)
        return table, rows

    @staticmethod
    def _pins(methods: dict, cols: list) -> dict:
        """Columns whose unit was inferred -> the same header with that unit stated, for later chunks."""
        pin = {}
        taken = {str(c) for c in cols}
        for m in methods.get("column_mapping", []):
            if m.get("unit_basis") == "inferred" and m.get("unit_from"):
                name = m["source_column"]
                pinned = f"{name} ({m['unit_from']})"
                if pinned not in taken:
                    pin[name] = pinned
        return pin

    def methods(self, source, sink, rows: int) -> dict:
        m = dict(self.first_methods or {})
        counts = dict(m.get("counts", {}))
        counts.update(self.counts)
        counts["rows"] = rows
        counts["findings"] = self.row_findings + len(self.file_findings)
        m["counts"] = counts
        m["input"] = {
            "file": source.path.name,
            "sha256": source.sha256,
            "format": source.format,
            "sheet": None,
            "header_row": source.header_row,
        }
        notes = list(sink.notes())
        m["chunked"] = {
            "chunk_rows": sink.chunk_rows_seen,
            "chunks": self.chunks,
            "limits": list(CHUNKING_LIMITS),
            "units_held_from_first_chunk": dict(self.pin),
            "notes": notes,
        }
        return m


# --------------------------------------------------------------------------------------------------
# outputs


class _Sink:
    """Streams results and row findings to temporaries; assembles the findings file at the end."""

    def __init__(self, out: Path, findings_out: Path, suffix: str, source, escape_formulas: bool):
        self.out, self.findings_out, self.suffix = out, findings_out, suffix
        self.source, self.escape = source, escape_formulas
        self.delimiter, self.decimal, self.encoding = _csv_format(source)
        self.formula_like = 0
        self.chunk_rows_seen = 0
        self.record: dict = {}
        self._rows_tmp: Path | None = None
        self._n_row_findings = 0

    # setup
    def open(self, batch, stack: contextlib.ExitStack) -> None:
        self._out_tmp = batch.path(self.out)
        self._findings_tmp = batch.path(self.findings_out)
        fd, rows_tmp = tempfile.mkstemp(
            prefix=f".{self.findings_out.name}.rows.",
            suffix=".wallstress-tmp",
            dir=self.findings_out.parent if str(self.findings_out.parent) else ".",
        )
        os.close(fd)
        self._rows_tmp = Path(rows_tmp)
        stack.callback(self._rows_tmp.unlink, missing_ok=True)
        self._results = None
        self._rows = None
        stack.callback(self.close_rows)
        self._header_done = False

    def write(self, table: pd.DataFrame, row_findings: pd.DataFrame, *, offset: int) -> None:
        self.chunk_rows_seen = max(self.chunk_rows_seen, len(table))
        if self.suffix == ".csv":
            like = safety.formula_like_findings(table, escaped=self.escape)
            if len(like):
                self.formula_like += len(like)
                row_findings = fnd.concat([row_findings, like])
            frame = safety.escape_formula_text(table) if self.escape else table
        else:
            frame = table
        row_findings = row_findings.assign(row=row_findings["row"].to_numpy(dtype="int64") + offset)
        self._n_row_findings += len(row_findings)
        if self.suffix == ".csv":
            if self._results is None:
                self._results = open(self._out_tmp, "wb")  # noqa: SIM115 (closed by the batch)
                self._rows = open(self._rows_tmp, "wb")  # noqa: SIM115
            write_csv(
                frame,
                self._results,
                header=not self._header_done,
                delimiter=self.delimiter,
                decimal=self.decimal,
                encoding=self.encoding,
            )
            write_csv(
                fnd.as_text(row_findings),
                self._rows,
                header=False,
                delimiter=self.delimiter,
                decimal=self.decimal,
            )
        else:
            import pyarrow as pa
            import pyarrow.parquet as pq

            t = pa.Table.from_pandas(_parquet_ready(frame), preserve_index=False)
            if self._results is None:
                self._results = pq.ParquetWriter(self._out_tmp, _no_null_types(t.schema))
                self._rows = pq.ParquetWriter(self._rows_tmp, _FINDINGS_SCHEMA())
            try:
                t = t.cast(self._results.schema)
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError, ValueError) as exc:
                raise OutputError(
                    f"a later chunk's columns do not match the first chunk's types ({exc}); write a .csv "
                    "output instead, or give the input consistent column types"
                ) from exc
            self._results.write_table(t)
            self._rows.write_table(_findings_table(row_findings))
        self._header_done = True

    def close_rows(self) -> None:
        for h in (self._results, self._rows):
            if h is not None:
                h.close()
        self._results = self._rows = None

    def notes(self) -> list[str]:
        if self.suffix == ".csv" and self.formula_like:
            return [
                f"{self.formula_like} text cell(s) start like a spreadsheet formula"
                + (" and were prefixed with a single quote" if self.escape else "")
                + " (finding formula_like_text)"
            ]
        return []

    def finish(self, file_findings, methods, outputs, notes, batch) -> None:
        from wallstress.write.methods_sheet import _json_default, methods_record

        file_findings = file_findings.reset_index(drop=True)
        if self.suffix == ".csv":
            with open(self._findings_tmp, "w", encoding=self.encoding, newline="") as fh:
                file_findings.to_csv(fh, index=False, sep=self.delimiter, decimal=self.decimal)
                with open(self._rows_tmp, encoding="utf-8", newline="") as rows:
                    shutil.copyfileobj(rows, fh, 1 << 20)
        else:
            import pyarrow.parquet as pq

            with pq.ParquetWriter(self._findings_tmp, _FINDINGS_SCHEMA()) as w:
                w.write_table(_findings_table(file_findings))
                for b in pq.ParquetFile(self._rows_tmp).iter_batches(batch_size=1 << 16):
                    w.write_batch(b)
        import json

        self.record = methods_record(methods, self.source, notes=notes, outputs=outputs)
        batch.path(outputs[2]).write_text(
            json.dumps(self.record, indent=2, ensure_ascii=False, default=_json_default) + "\n",
            encoding="utf-8",
        )


def _csv_format(source) -> tuple[str, str, str]:
    """Delimiter, decimal mark and encoding of a CSV output, as the in-memory writer chooses them."""
    delimiter, decimal, encoding = ",", ".", "utf-8"
    if source.format == "csv":
        delimiter = source.delimiter or ","
        decimal = source.decimal or "."
        if str(source.encoding or "").lower().replace("_", "-") == "utf-8-sig":
            encoding = "utf-8-sig"
    if decimal == delimiter:
        delimiter = ";"
    return delimiter, decimal, encoding


def _FINDINGS_SCHEMA():
    import pyarrow as pa

    return pa.schema(
        [("row", pa.int64())] + [(c, pa.large_string()) for c in fnd.FINDING_COLUMNS[1:]]
    )


def _findings_table(frame: pd.DataFrame):
    import pyarrow as pa

    cols = [pa.array(frame["row"].to_numpy(dtype="int64"))]
    for c in fnd.FINDING_COLUMNS[1:]:
        cols.append(
            pa.array(frame[c].to_numpy(dtype=object), type=pa.large_string(), from_pandas=True)
        )
    return pa.Table.from_arrays(cols, schema=_FINDINGS_SCHEMA())


def _no_null_types(schema):
    import pyarrow as pa

    return pa.schema(
        [f.with_type(pa.large_string()) if pa.types.is_null(f.type) else f for f in schema],
        metadata=schema.metadata,
    )


def _parquet_ready(frame: pd.DataFrame) -> pd.DataFrame:
    """As the in-memory parquet writer: numbered repeated names, mixed object columns as text."""
    from wallstress.write.flat import parquet_ready

    return parquet_ready(frame)[0]


__all__ = [
    "CHUNKING_LIMITS",
    "CHUNK_INPUT_FORMATS",
    "CHUNK_OUTPUT_SUFFIXES",
    "DEFAULT_CHUNK_ROWS",
    "ChunkedResult",
    "analyse_chunked",
    "dask_analyse",
]
