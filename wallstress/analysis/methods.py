"""The methods record: every formula, its source, the reference set, options and counts.

It goes into the methods sheet (xlsx) or a ``.methods.json`` beside CSV/parquet outputs, and into
the report, so that every number in an output can be traced.
"""

from __future__ import annotations

from datetime import datetime, timezone

import numpy as np

from wallstress import findings as fnd
from wallstress.analysis import flags
from wallstress.schema.outputs import OUTPUTS
from wallstress.schema.vocabulary import CLINICAL_CAUTION, FROM_MEMORY_CAUTION

CAUTIONS = (
    CLINICAL_CAUTION,
    FROM_MEMORY_CAUTION,
    "Linear (M-mode/2D) LV mass assumes a symmetric ellipsoidal ventricle; it misleads with asymmetric "
    "hypertrophy, aneurysm or distorted shape (rows flagged where detectable).",
    "Adult reference values do not apply to children.",
)


def _formula_rows(used: dict) -> list[dict]:
    """One row per output with an equation: the method in force, its equation, source and status."""
    rows = []
    for out in OUTPUTS:
        if not out.methods:
            continue
        chosen = used.get(out.name, {})
        method = chosen.get("constant", "") if out.option == "stress_constant" else ""
        method = method or chosen.get("method", "")
        if method not in out.methods:
            method = next(iter(out.methods))
        m = out.methods[method]
        rows.append(
            {
                "output": out.name,
                "method": method,
                "formula": m.equation,
                "source": m.source,
                "verified": m.verified,
            }
        )
    return rows


def build_methods(
    options, refset, used: dict, mapped, findings, n_rows: int, *, version: str
) -> dict:
    """Assemble the methods record of one run (plain, JSON-serialisable types only)."""
    worst = flags.worst_severity(findings, n_rows)  # one pass: rows with an error, a warning
    errors = int((worst >= fnd.SEVERITY_RANK["error"]).sum())
    flagged = int((worst >= fnd.SEVERITY_RANK["warning"]).sum())
    unverified = [
        f"{r['measure']} {r.get('sex', '')} {r.get('grade', '')}: {r['value']} ({r['source']}; {r['verified']})".replace(
            "  ", " "
        )
        for r in refset.unverified_records()
    ]
    formula_rows = _formula_rows(used)
    unverified += [
        f"{r['output']}: {r['formula']} ({r['source']})"
        for r in formula_rows
        if r["verified"] != "published"
    ]
    for model in ("midwall_stress_line", "mass_prediction"):
        for k, c in refset.coefficients(model).items():
            if c.verified not in ("published", "lab"):
                unverified.append(f"{model}.{k} = {c.value:g} {c.unit} ({c.source}; {c.verified})")
    return {
        "software": {"name": "wallstress", "version": version},
        "run_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "options": options.as_record(),
        "reference_set": {
            "name": refset.name,
            "title": refset.title,
            "path": refset.path,
            "geometry_mass_index": refset.mass_index,
            "warnings": list(getattr(refset, "warnings", [])),
            "rows": refset.as_records(),
        },
        "formulas": formula_rows,
        "coefficients": {k: _plain(v) for k, v in used.items()},
        "column_mapping": [{k: _plain(v) for k, v in m.items()} for m in mapped.mapping],
        "unmapped_columns": [str(c) for c in getattr(mapped, "unmapped", [])],
        "counts": {
            "rows": int(n_rows),
            "rows_flagged": int(flagged),
            "rows_with_errors": int(errors),
            "rows_flagged_means": "rows with at least one warning or error (notes not counted)",
            "findings": int(len(findings)),
        },
        "unverified": unverified,
        "cautions": list(CAUTIONS)
        + [f"The reference set {refset.name} warns: {w}" for w in getattr(refset, "warnings", [])],
    }


def _plain(v):
    if isinstance(v, dict):
        return {str(k): _plain(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_plain(x) for x in v]
    if isinstance(v, (np.floating, np.integer)):
        return v.item()
    return v
