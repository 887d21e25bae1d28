"""csv and parquet outputs: the main table, one side file per other table, ``name.methods.json``.

CSV keeps the study list's delimiter, decimal mark and BOM when the input was CSV; formula-like text
is reported (finding ``formula_like_text``) and optionally escaped. All files of one write are
committed together (:func:`wallstress.write.safety.atomic_files`).
"""

from __future__ import annotations

import json

import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from wallstress import findings as _findings
from wallstress.errors import OutputError
from wallstress.schema.outputs import OUTPUT_COLUMNS
from wallstress.write import formula_text, safety
from wallstress.write.fast_csv import write_csv
from wallstress.write.methods_sheet import _json_default, methods_record
from wallstress.write.parts import WriteReport, _sidecar


def _write_flat(out, suffix, parts, methods, source, escape_formulas) -> WriteReport:
    report = WriteReport()
    main = parts[0].frame
    if suffix == ".csv":
        report.formula_like = formula_text.formula_like_findings(main, escaped=escape_formulas)
        done = " and were prefixed with a single quote" if escape_formulas else ""
        if len(report.formula_like):
            report.notes.append(
                f"{len(report.formula_like)} text cell(s) or header(s) of {out.name} start like a "
                f"spreadsheet formula{done} (finding formula_like_text)"
            )
        for part in parts[1:]:  # the other tables: counted in a note
            n = len(formula_text.formula_like_findings(part.frame))
            if n:
                report.notes.append(
                    f"{n} text cell(s) or header(s) of {_sidecar(out, part.key).name} start like a "
                    f"spreadsheet formula{done}"
                    + ("" if escape_formulas else "; write with --escape-formulas to escape them")
                )
    outputs = [out] + [_sidecar(out, p.key) for p in parts if p.key]
    methods_json = _sidecar(out, "methods", ".json")
    with safety.atomic_files() as batch:
        for part, target in zip(parts, outputs, strict=True):
            frame = part.frame
            if part.key == "findings" and len(report.formula_like):
                frame = _add_missing_findings(frame, report.formula_like)
            tmp = batch.path(target)
            if suffix == ".csv":
                if part.unit_columns == "outputs":  # the results: the user's columns first
                    frame = numbers_as_shown(frame, frame.shape[1] - len(OUTPUT_COLUMNS))
                _to_csv(frame, tmp, source, escape_formulas)  # Categoricals as text, by slice
            else:
                if part.key == "findings":  # text columns, as the chunked path writes them
                    frame = _findings.as_text(frame)
                _to_parquet(frame, tmp, part.sheet, report)
        record = methods_record(
            methods, source, notes=report.notes, outputs=[*outputs, methods_json]
        )
        batch.path(methods_json).write_text(
            json.dumps(record, indent=2, ensure_ascii=False, default=_json_default) + "\n",
            encoding="utf-8",
        )
    report.extend([*outputs, methods_json])
    return report


def numbers_as_shown(frame: pd.DataFrame, n_user: int) -> pd.DataFrame:
    """The user's float columns (the first ``n_user``, from a workbook or parquet) as the text a
    spreadsheet shows for them: ``10`` for 10.0, not ``10.0``; shortest round-trip text otherwise
    (Arrow's float formatting). Text columns (a CSV's cells as written) are left as they are."""
    floats = [
        j for j in range(max(n_user, 0)) if pd.api.types.is_float_dtype(frame.iloc[:, j].dtype)
    ]
    if not floats:
        return frame
    out = frame.copy(deep=False)
    for j in floats:
        values = pa.array(frame.iloc[:, j].to_numpy(dtype="float64"), from_pandas=True)
        out.isetitem(j, pd.Series(pc.cast(values, pa.string()), dtype="str", index=frame.index))
    return out


def _to_csv(frame, tmp, source, escape_formulas) -> None:
    delimiter, decimal, encoding = ",", ".", "utf-8"
    if source is not None and str(getattr(source, "format", "")).lower().lstrip(".") in (
        "csv",
        "tsv",
        "txt",
    ):
        delimiter = getattr(source, "delimiter", None) or ","
        decimal = getattr(source, "decimal", None) or "."
        if str(getattr(source, "encoding", "") or "").lower().replace("_", "-") == "utf-8-sig":
            encoding = "utf-8-sig"
    if decimal == delimiter:
        delimiter = ";"
    if escape_formulas:
        frame = formula_text.escape_formula_text(frame)
    write_csv(frame, tmp, delimiter=delimiter, decimal=decimal, encoding=encoding)


PARQUET_OBJECT_KINDS = (
    "string",
    "empty",
    "floating",
    "integer",
    "boolean",
    "mixed-integer-float",
    "date",
    "datetime",
    "decimal",
    "bytes",
)
"""Kinds of object column (``pandas.api.types.infer_dtype``) that parquet stores as they are."""


def parquet_ready(frame: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    """``frame`` as parquet can store it, and what was changed: repeated column names numbered,
    object columns of mixed values written as text. The input is not modified."""
    cols = [str(c) for c in frame.columns]
    mixed = [
        j
        for j in range(frame.shape[1])
        if frame.iloc[:, j].dtype == object
        and pd.api.types.infer_dtype(frame.iloc[:, j], skipna=True) not in PARQUET_OBJECT_KINDS
    ]
    repeated = len(set(cols)) != len(cols)
    if not repeated and not mixed and cols == list(frame.columns):
        return frame, []
    notes = []
    frame = frame.copy()
    if repeated:
        seen: dict[str, int] = {}
        unique = []
        for c in cols:
            seen[c] = seen.get(c, 0) + 1
            unique.append(c if seen[c] == 1 else f"{c} ({seen[c]})")
        notes.append("repeated column names numbered for parquet")
        cols = unique
    frame.columns = cols
    for j in mixed:
        frame.isetitem(j, frame.iloc[:, j].map(lambda v: None if _is_missing(v) else str(v)))
        notes.append(f"column {cols[j]!r} holds mixed values; written as text in parquet")
    return frame, notes


def _to_parquet(frame, tmp, sheet, report) -> None:
    frame, notes = parquet_ready(frame)
    report.notes.extend(f"{sheet!r}: {n}" for n in notes)
    try:
        frame.to_parquet(tmp, index=False)
    except ImportError as exc:
        raise OutputError(
            "writing .parquet needs pyarrow (pip install pyarrow); or write .csv/.xlsx"
        ) from exc


def _is_missing(v) -> bool:
    try:
        return bool(pd.isna(v))
    except (TypeError, ValueError):
        return False


def _add_missing_findings(findings: pd.DataFrame, extra: pd.DataFrame) -> pd.DataFrame:
    if "code" in findings.columns and (findings["code"] == formula_text.FORMULA_LIKE_CODE).any():
        return findings
    return _findings.concat([findings, extra])
