"""Registry-size runs: chunked file-to-file analysis with bounded memory, and a path onto dask.

``analyse_chunked(path, out_path)`` reads a CSV or parquet study list a chunk of rows at a time,
analyses each chunk with :func:`wallstress.analysis.pipeline.analyse_with_findings` and streams the results
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
"""

from __future__ import annotations

import contextlib
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.analysis.coverage import require_lv_dimensions
from wallstress.analysis.pipeline import analyse, analyse_with_findings
from wallstress.errors import OutputError
from wallstress.options import Options
from wallstress.read.chunks import _at_least_one, _csv_chunks, _input_kind, _parquet_chunks
from wallstress.read.guards import check_regular_file
from wallstress.read.studies import system_arrow_memory
from wallstress.write import safety
from wallstress.write.results import planned_outputs, results_keys
from wallstress.write.streams import CHUNK_OUTPUT_SUFFIXES, _Sink

DEFAULT_CHUNK_ROWS = 200_000


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


@system_arrow_memory()
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
    outputs = safety.check_outputs(planned_outputs(out, results_keys()), [src])
    with safety.protected_inputs(src):
        return _run(src, kind, outputs, options, chunk_rows, progress, escape_formulas)


def _run(src, kind, outputs, options, chunk_rows, progress, escape_formulas) -> ChunkedResult:
    """The chunked run proper, once its outputs are checked and its input protected."""
    out, findings_out, methods_out = outputs
    suffix = out.suffix.lower()

    digest = safety.sha256_file(src)
    if kind == "csv":
        source, file_findings, chunks = _csv_chunks(src, chunk_rows, options.columns)
        total = None
    else:
        source, file_findings, chunks, total = _parquet_chunks(src, chunk_rows, options.columns)
    source.sha256 = digest

    sink = _Sink(out, findings_out, suffix, source, escape_formulas)
    state = _RunState(options, file_findings)
    state.source_name = src
    with safety.atomic_files() as batch, contextlib.ExitStack() as stack:
        sink.open(batch, stack)
        done = 0
        for raw, cells, numbers in _at_least_one(chunks, source, options.columns):
            result, row_findings = state.analyse(raw, cells, numbers, offset=done)
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
        self.counts = dict.fromkeys(
            ("rows", "rows_flagged", "rows_with_errors", "rows_without_lv_mass",
             "rows_without_geometry", "rows_not_studies", "studies"),
            0,
        )  # fmt: skip
        self.row_findings = 0

    @staticmethod
    def _keys(frame: pd.DataFrame) -> set:
        cols = ["code", "column", "field", "message"]
        return set(map(tuple, frame[cols].astype(str).to_numpy().tolist())) if len(frame) else set()

    def analyse(self, raw: pd.DataFrame, cells: pd.DataFrame, numbers: dict, *, offset: int):
        cols = list(raw.columns)
        frame = raw.rename(columns=self.pin) if self.pin else raw
        if self.pin:
            numbers = {self.pin.get(k, k): v for k, v in numbers.items()}
        a = analyse_with_findings(frame, self.options, prior_findings=cells, numbers=numbers)
        if self.first_methods is None:
            require_lv_dimensions(a, self.source_name)
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
