"""The methods record as written: the ``.methods.json`` record and the two-column methods sheet.

The record is the run's ``methods`` (formulas, sources, options, reference set) plus the input file
and its SHA-256, the software version and run time, the outputs written, the writer's notes, the
cautions, and every value marked as recalled rather than checked (``from_memory``).
"""

from __future__ import annotations

from datetime import date, datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd

from wallstress import __version__
from wallstress.schema.vocabulary import CLINICAL_CAUTION, FROM_MEMORY_CAUTION

CAUTIONS: tuple[str, ...] = (CLINICAL_CAUTION, FROM_MEMORY_CAUTION)


def methods_rows(
    methods: dict,
    source=None,
    *,
    notes=(),
    outputs=(),
    run_utc: str | None = None,
) -> pd.DataFrame:
    """The methods record as two columns, ``item`` and ``value``, for the methods sheet.

    First the run (software, time, input file and its SHA-256, sheet, outputs), then the cautions,
    the values from memory, the writer's notes, then every entry of ``methods`` flattened
    (``options.reference``, ``formulas 3``: ``output: ...; method: ...``).
    """
    record = methods_record(methods, source, notes=notes, outputs=outputs, run_utc=run_utc)
    rows: list[tuple[str, object]] = [
        ("software", f"wallstress {record['written']['software_version']}"),
        ("run time (UTC)", record["written"]["run_utc"]),
    ]
    for k, label in (
        ("file", "input file"),
        ("sha256", "input SHA-256"),
        ("format", "input format"),
        ("sheet", "input sheet"),
        ("header_row", "input header row"),
    ):
        v = record["input"].get(k)
        if v not in (None, ""):
            rows.append((label, v))
    for out in record["written"]["outputs"]:
        rows.append(("output file", out))
    for c in record["cautions"]:
        rows.append(("caution", c))
    for v in record["values_from_memory"]:
        rows.append(("value from memory", v))
    for n in record["written"]["notes"]:
        rows.append(("warning", n))
    skip = {"cautions", "unverified", "input", "written", "values_from_memory"}
    for k, v in methods.items():
        if k in skip:
            continue
        rows.extend(_flatten(v, str(k)))
    return pd.DataFrame(rows, columns=["item", "value"])


def methods_record(methods: dict, source=None, *, notes=(), outputs=(), run_utc=None) -> dict:
    """The methods record as written to ``.methods.json``: ``methods`` plus input, run and cautions."""
    record = dict(methods)
    inp = dict(record.get("input") or {}) if isinstance(record.get("input"), dict) else {}
    if source is not None:
        path = getattr(source, "path", None)
        inp.update(
            {
                "file": Path(path).name if path else "",
                "sha256": getattr(source, "sha256", "") or "",
                "format": getattr(source, "format", "") or "",
                "sheet": getattr(source, "sheet", None),
                "header_row": getattr(source, "header_row", None),
            }
        )
    record["input"] = inp
    cautions = [str(c) for c in (methods.get("cautions") or [])]
    for c in CAUTIONS:
        if c not in cautions:
            cautions.append(c)
    record["cautions"] = cautions
    record["values_from_memory"] = from_memory_items(methods)
    record["written"] = {
        "software_version": __version__,
        "run_utc": run_utc or datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "outputs": [Path(o).name for o in outputs],
        "notes": list(notes),
    }
    return record


def from_memory_items(methods: dict) -> list[str]:
    """Everything the methods record marks as recalled rather than checked.

    Uses ``methods["unverified"]`` when present; otherwise every entry whose ``verified`` is
    ``from_memory`` (named by its path and identifying fields).
    """
    if methods.get("unverified"):
        return [str(x) for x in methods["unverified"]]
    out: list[str] = []

    def walk(obj, path):
        if isinstance(obj, dict):
            if str(obj.get("verified", "")).lower() in ("from_memory", "from memory"):
                ident = [
                    str(obj[k])
                    for k in ("output", "measure", "name", "set", "sex", "index", "grade", "method")
                    if obj.get(k) not in (None, "")
                ]
                label = " ".join(ident) if ident else path
                src = obj.get("source")
                out.append(f"{label} ({src})" if src else label)
            for k, v in obj.items():
                walk(v, f"{path}.{k}" if path else str(k))
        elif isinstance(obj, (list, tuple)):
            for i, v in enumerate(obj, 1):
                walk(v, f"{path} {i}")

    walk(methods, "")
    return list(dict.fromkeys(out))


def _json_default(v):
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (np.floating,)):
        return float(v) if np.isfinite(v) else None
    if isinstance(v, (np.bool_,)):
        return bool(v)
    if isinstance(v, (datetime, date, pd.Timestamp)):
        return v.isoformat()
    if isinstance(v, (set, frozenset, tuple)):
        return list(v)
    if isinstance(v, pd.DataFrame):
        return v.to_dict("records")
    if isinstance(v, pd.Series):
        return v.tolist()
    return str(v)


def _scalar_text(v):
    if isinstance(v, (np.integer,)):
        return int(v)
    if isinstance(v, (np.floating, float)):
        return float(v) if np.isfinite(v) else ""
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, str)):
        return v
    if v is None:
        return ""
    return str(v)


def _is_scalar(v) -> bool:
    return not isinstance(v, (dict, list, tuple, set, pd.DataFrame, pd.Series, np.ndarray))


def _flatten(obj, prefix: str) -> list[tuple[str, object]]:
    if isinstance(obj, pd.DataFrame):
        obj = obj.to_dict("records")
    if isinstance(obj, (pd.Series, np.ndarray, set)):
        obj = list(obj)
    if isinstance(obj, dict):
        if not obj:
            return [(prefix, "")]
        rows = []
        for k, v in obj.items():
            rows.extend(_flatten(v, f"{prefix}.{k}" if prefix else str(k)))
        return rows
    if isinstance(obj, (list, tuple)):
        if all(_is_scalar(x) for x in obj):
            return [(prefix, "; ".join(str(_scalar_text(x)) for x in obj))]
        rows = []
        for i, x in enumerate(obj, 1):
            if isinstance(x, dict) and all(_is_scalar(v) for v in x.values()):
                rows.append(
                    (f"{prefix} {i}", "; ".join(f"{k}: {_scalar_text(v)}" for k, v in x.items()))
                )
            else:
                rows.extend(_flatten(x, f"{prefix} {i}"))
        return rows
    return [(prefix, _scalar_text(obj))]
