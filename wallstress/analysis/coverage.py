"""Which measures a study list's columns allow, said loudly: for each missing input column, the
measures it stops, the closest unmapped headers and the ``--columns`` line that would map them.

Read from the output registry (each output names its inputs), so that a new measure is covered by
its row there.
"""

from __future__ import annotations

import difflib

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.errors import InputError
from wallstress.schema import fields as schema
from wallstress.schema.outputs import OUTPUTS

# The inputs whose absence is an error (no LV mass, RWT or class) rather than a warning.
LV_DIMENSIONS: tuple[str, ...] = ("ivsd_cm", "lvidd_cm", "pwd_cm")
# optional, or (sex) told by its own finding
_ALWAYS_OPTIONAL = frozenset({"age_years", "hr_bpm", "ejection_time_ms", "sex"})


# The measures a reader looks for first, named first in a message.
_FIRST = ("LV mass", "RWT", "Geometry", "LVMI/BSA", "mESS", "cESS", "FS", "BSA", "Midwall FS")


def stopped_by(missing_field: str) -> list[str]:
    """The measures and classes (registry labels) that need ``missing_field``, the main ones
    first."""
    labels = [
        o.label for o in OUTPUTS if missing_field in o.inputs and (o.is_number or o.unit == "class")
    ]
    return sorted(labels, key=lambda x: _FIRST.index(x) if x in _FIRST else len(_FIRST))


def suggestions(field: str, unmapped, limit: int = 2) -> list[str]:
    """The unmapped headers closest to a field's names (difflib ratio over folded text)."""
    f = schema.BY_NAME[field]
    names = [schema.normalise_header(n) for n in (field, *f.aliases)] + [
        schema.normalise_header(f.meaning)
    ]
    scored = []
    for header in unmapped:
        h = schema.normalise_header(header)
        if not h:
            continue
        best = max(difflib.SequenceMatcher(None, h, n).ratio() for n in names)
        if best >= 0.45:
            scored.append((best, str(header)))
    return [h for _, h in sorted(scored, reverse=True)[:limit]]


def _csv_cell(text: str) -> str:
    """A header as a CSV field (quoted when it holds a comma or a quote, RFC 4180)."""
    return '"' + text.replace('"', '""') + '"' if any(c in text for c in ',"\n') else text


def missing_inputs(columns, unmapped) -> list:
    """File-level findings (row -1), one per input column that stops a measure."""
    have = set(columns)
    needed = {f for o in OUTPUTS for f in o.inputs if o.is_number} - _ALWAYS_OPTIONAL
    parts = []
    for field in sorted(needed - have, key=list(schema.BY_NAME).index):
        stops = stopped_by(field)
        if not stops:
            continue
        close = suggestions(field, unmapped)
        hint = (
            f" Closest unmapped column{'s' if len(close) > 1 else ''}: "
            + ", ".join(repr(c) for c in close)
            + f". To use it, pass --columns with a CSV file of two lines: header,field and "
            f"{_csv_cell(close[0])},{field}"
            if close
            else f" Add a column {field!r} or map yours with --columns (a CSV file whose first "
            "line is header,field, then one line per column: your header,field name)."
        )
        parts.append(
            fnd.make(
                [-1],
                code="input_missing",
                severity="error" if field in LV_DIMENSIONS else "warning",
                column="",
                field=field,
                message=f"No column for {field} ({schema.BY_NAME[field].meaning.rstrip('.')}): "
                f"{', '.join(stops[:6])}{' and more' if len(stops) > 6 else ''} cannot be "
                f"computed on any row.{hint}",
            )
        )
    return parts


def require_lv_dimensions(analysis, source) -> None:
    """Refuse a study list in which no LV dimension column was recognised: nothing it holds could
    give a measure. The message lists its columns and how to map them."""
    if any(f in analysis.canonical.columns for f in schema.LINEAR_FIELDS):
        return
    unmapped = [str(c) for c in analysis.methods.get("unmapped_columns", [])]
    close = [c for f in LV_DIMENSIONS for c in suggestions(f, unmapped, 1)]
    hint = (
        f"; the closest are {', '.join(repr(c) for c in dict.fromkeys(close))}"
        if close
        else f"; its unrecognised columns are {', '.join(repr(c) for c in unmapped[:8])}"
    )
    raise InputError(
        f"{source}: no LV dimension column was recognised (IVSd, LVIDd, PWd, LVIDs...), so no "
        f"measure can be computed{hint}. Map them with --columns (a CSV with lines such as "
        "'your header,lvidd_cm')"
    )


# A blank cell of these stops measures on its row; each such row gets a finding that says which.
KEY_INPUTS: tuple[str, ...] = (
    "height_cm", "weight_kg", "sbp_mmhg", "ivsd_cm", "lvidd_cm", "pwd_cm", "lvids_cm", "pws_cm"
)  # fmt: skip


def blank_inputs(canonical, earlier, labels: dict | None = None) -> list:
    """A finding on each row where a key input's column exists but the row's value is missing,
    naming the measures left empty, so that an empty ``flags`` cell means every measure the row's
    inputs allow was computed. Rows whose value has its own finding already (impossible, not a
    number...) are not told twice."""
    n = len(canonical)
    present = [f for f in KEY_INPUTS if f in canonical.columns]
    said = {f: np.zeros(n, dtype=bool) for f in present}  # rows whose value has a finding
    for part in earlier:
        if part is None or not len(part):
            continue
        field = part["field"]
        if isinstance(field.dtype, pd.CategoricalDtype):  # compared by its codes
            names = [str(c) for c in field.cat.categories]
            codes = field.array.codes
            about = {f: codes == names.index(f) for f in present if f in names}
        else:
            about = {f: (field == f).to_numpy(dtype=bool) for f in present}
        if not about:
            continue  # a rule about other fields (most rules are about one field)
        rows = part["row"].to_numpy(dtype="int64")
        inside = (rows >= 0) & (rows < n)
        for f, is_f in about.items():
            hit = inside & is_f
            if hit.any():
                said[f][rows[hit]] = True
    parts = []
    for field in present:
        blank = np.isnan(canonical[field].to_numpy(dtype=float)) & ~said[field]
        if not blank.any():
            continue
        stops = stopped_by(field)
        f = schema.BY_NAME[field]
        parts.append(
            fnd.make(
                np.flatnonzero(blank),
                code=f"{field}_blank",
                severity="warning" if field in (*LV_DIMENSIONS, "sbp_mmhg") else "note",
                column=str((labels or {}).get(field, field)),
                field=field,
                message=f"{f.meaning.rstrip('.')} is blank, so {', '.join(stops[:4])}"
                f"{' and more' if len(stops) > 4 else ''} could not be computed for this study.",
            )
        )
    return parts
