"""Results, findings and methods streamed to .csv or .parquet a chunk at a time.

Every file is written to a temporary file in the target folder; :meth:`_Sink.commit` moves them all
into place together at the end, so a run that fails or is interrupted leaves no output and keeps a
previous one.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import tempfile
from pathlib import Path

import pandas as pd

from wallstress import findings as fnd
from wallstress.errors import OutputError
from wallstress.schema.outputs import OUTPUT_COLUMNS
from wallstress.write import formula_text
from wallstress.write.fast_csv import write_csv
from wallstress.write.flat import numbers_as_shown, parquet_ready
from wallstress.write.methods_sheet import _json_default, methods_record

CHUNK_OUTPUT_SUFFIXES: tuple[str, ...] = (".csv", ".parquet")


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
        self.header_findings = fnd.empty()

    def write(self, table: pd.DataFrame, row_findings: pd.DataFrame, *, offset: int) -> None:
        self.chunk_rows_seen = max(self.chunk_rows_seen, len(table))
        if self.suffix == ".csv":
            like = formula_text.formula_like_findings(table, escaped=self.escape, headers=False)
            if offset == 0:  # the headers, once
                self.header_findings = formula_text.formula_like_findings(
                    table.iloc[:0], escaped=self.escape
                )
                self.formula_like += len(self.header_findings)
            if len(like):
                self.formula_like += len(like)
                row_findings = fnd.concat([row_findings, like])
            frame = numbers_as_shown(table, table.shape[1] - len(OUTPUT_COLUMNS))
            frame = formula_text.escape_formula_text(frame) if self.escape else frame
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

        file_findings = fnd.concat([file_findings, self.header_findings]).reset_index(drop=True)
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

    return parquet_ready(frame)[0]
