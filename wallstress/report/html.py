"""HTML building blocks of the report: display text, escaped tables, key-value tables, inline figures.

Every value goes through :func:`_e` (or :func:`_g`), which HTML-escapes it, so no text from a study
list can become markup or script.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import math
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from wallstress.figures import save as fig_mod
from wallstress.figures.common import GEOMETRY_LABELS
from wallstress.schema.display import decimals
from wallstress.schema.outputs import OUTPUTS
from wallstress.schema.vocabulary import OUT

MAX_TABLE_ROWS = 500


_OTHER_LABELS: dict[str, str] = {
    "row": "Data row",
    "study_id": "Study",
    "patient_id": "Patient",
    "study_date": "Date",
    "sex": "Sex",
    "age_years": "Age [years]",
    "years_since_baseline": "Years since first study",
    "sbp_mmhg": "SBP [mmHg]",
    "dbp_mmhg": "DBP [mmHg]",
    "verdict": "Verdict",
    "n_visits": "Visits",
    "first_date": "First study",
    "last_date": "Last study",
    "span_years": "Follow-up [years]",
    "lv_mass_first_g": "LV mass first [g]",
    "lv_mass_last_g": "LV mass last [g]",
    "lv_mass_change_g": "LV mass change [g]",
    "lv_mass_real_change": "Change beyond LSC",
    "lv_mass_slope_g_per_year": "LV mass slope [g/year]",
    "lvmi_bsa_first_g_m2": "LVMI/BSA first [g/m²]",
    "lvmi_bsa_last_g_m2": "LVMI/BSA last [g/m²]",
    "geometry_first": "Geometry first",
    "geometry_last": "Geometry last",
    "lv_mass_change_from_baseline_g": "LV mass change from first [g]",
    "lv_mass_real_change_from_baseline": "Beyond LSC",
    "follow_up_year": "Follow-up year",
    "verdict_text": "In words",
}


def _shown_unit(unit: str) -> str:
    return unit.replace("m2", "m²")


# Labels of every column the report shows: our outputs from the registry, then the others.
COLUMN_LABELS: dict[str, str] = {
    **{
        o.name: f"{o.label} [{_shown_unit(o.unit)}]"
        if o.is_number and o.unit != "ratio"
        else o.label
        for o in OUTPUTS
    },
    **_OTHER_LABELS,
}


def _fmt(v) -> str:
    """A value as short display text ('' for missing)."""
    if v is None or v is pd.NA or v is pd.NaT:
        return ""
    if isinstance(v, bool | np.bool_):
        return "yes" if v else "no"
    if isinstance(v, int | np.integer):
        return str(int(v))
    if isinstance(v, float | np.floating):
        f = float(v)
        if math.isnan(f):
            return ""
        if math.isinf(f):
            return "inf" if f > 0 else "-inf"
        a = abs(f)
        if a == 0:
            return "0"
        if a < 0.01:
            return f"{f:.3g}"
        if a < 1:
            return f"{f:.3f}"
        if a < 100:
            return f"{f:.1f}"
        return f"{f:.0f}"
    if isinstance(v, pd.Timestamp | _dt.datetime):
        if v.hour == v.minute == v.second == 0 and not getattr(v, "microsecond", 0):
            return v.strftime("%Y-%m-%d")
        return v.isoformat(sep=" ")
    if isinstance(v, _dt.date):
        return v.isoformat()
    return str(v)


def _e(v) -> str:
    """Escaped display text of any value."""
    return html.escape(_fmt(v), quote=True)


def _g(v) -> str:
    """A reference value as printed in its table (no rounding, no padding): 0.42, 95, -0.016."""
    try:
        return html.escape(f"{float(v):g}")
    except (TypeError, ValueError):
        return _e(v)


def _label(column) -> str:
    return html.escape(COLUMN_LABELS.get(str(column), str(column)), quote=True)


def _is_num(series: pd.Series) -> bool:
    return pd.api.types.is_numeric_dtype(series) and not pd.api.types.is_bool_dtype(series)


def _table(df: pd.DataFrame, *, max_rows: int = MAX_TABLE_ROWS, index: bool = False, cls="") -> str:
    """A DataFrame as an escaped HTML table, capped at ``max_rows`` rows (the cap is stated)."""
    if df is None or len(df.columns) == 0:
        return '<p class="capped">(no data)</p>'
    shown = df.iloc[:max_rows]
    if index:
        shown = shown.reset_index()
    shown = shown.copy()
    for c in shown.columns:
        if OUT.geometry in str(c) and not _is_num(shown[c]):
            shown[c] = shown[c].map(lambda g: GEOMETRY_LABELS.get(g, g))
    nums = {c: _is_num(shown[c]) for c in shown.columns}
    short = (
        {
            c: nums[c] or shown[c].map(lambda v: len(_fmt(v))).max(skipna=True) <= 24
            for c in shown.columns
        }
        if len(shown)
        else {c: True for c in shown.columns}
    )
    head = "".join(
        f'<th class="num">{_label(c)}</th>' if nums[c] else f"<th>{_label(c)}</th>"
        for c in shown.columns
    )
    cols = [
        _fixed(shown[c], decimals(str(c))) if nums[c] else shown[c].to_numpy(dtype=object)
        for c in shown.columns
    ]
    classes = [
        ' class="num"' if nums[c] else (' class="nw"' if short[c] else "") for c in shown.columns
    ]
    body = []
    for i in range(len(shown)):
        cells = "".join(f"<td{cl}>{_e(col[i])}</td>" for col, cl in zip(cols, classes, strict=True))
        body.append(f"<tr>{cells}</tr>")
    extra = ""
    if len(df) > max_rows:
        extra = (
            f'<p class="capped">showing the first {max_rows} of {len(df)} rows; '
            "the written results hold them all</p>"
        )
    attr = f' class="{html.escape(cls)}"' if cls else ""
    return (
        f"<table{attr}><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>{extra}"
    )


def _fixed(values: pd.Series, places: int | None) -> np.ndarray:
    """A numeric column as text with the decimals its measure needs (the output registry's, or
    its unit's display format); other numbers as :func:`_fmt` writes them."""
    if places is None or not pd.api.types.is_float_dtype(values.dtype):
        return values.to_numpy(dtype=object)
    v = values.to_numpy(dtype=float)
    return np.array(["" if np.isnan(x) else f"{x:.{places}f}" for x in v], dtype=object)


def _kv(pairs) -> str:
    rows = "".join(f"<tr><th>{html.escape(str(k))}</th><td>{v}</td></tr>" for k, v in pairs)
    return f'<table class="kv"><tbody>{rows}</tbody></table>'


def _render_value(v, depth: int = 0) -> str:
    """Any methods-record value (dict, list, table, scalar) as escaped HTML."""
    if depth > 5:
        return _e(repr(v))
    if isinstance(v, pd.DataFrame):
        return _table(v)
    if isinstance(v, Mapping):
        if not v:
            return ""
        return _kv((k, _render_value(x, depth + 1)) for k, x in v.items())
    if isinstance(v, list | tuple | set | pd.Series | np.ndarray):
        items = list(v)
        if not items:
            return ""
        if all(isinstance(x, Mapping) for x in items):
            return _table(pd.DataFrame(items))
        if all(not isinstance(x, Mapping | list | tuple) for x in items) and len(items) <= 12:
            return html.escape(", ".join(_fmt(x) for x in items), quote=True)
        lis = "".join(f"<li>{_render_value(x, depth + 1)}</li>" for x in items[:MAX_TABLE_ROWS])
        more = (
            f"<li>... and {len(items) - MAX_TABLE_ROWS} more</li>"
            if len(items) > MAX_TABLE_ROWS
            else ""
        )
        return f"<ul>{lis}{more}</ul>"
    return _e(v)


def _verified_text(status) -> str:
    s = "" if status is None else str(status)
    if s == "published":
        return "published"
    if s == "computed":
        return "computed from a published value"
    if s == "lab":
        return "lab's own"
    words = s.replace("_", " ") or "unverified"
    return f'<span class="unverified">{html.escape(words)} (unverified)</span>'


class _Figures:
    """Turns figures into inline <figure> blocks; also saves PNG + SVG into figures_dir."""

    def __init__(self, figures_dir):
        self.dir = Path(figures_dir) if figures_dir is not None else None
        self.saved: list[Path] = []

    def embed(self, fig, stem: str, caption: str, *, dpi: int = 100) -> str:
        png = fig_mod.to_png(fig, dpi=dpi)
        if self.dir is not None:
            self.saved.extend(fig_mod.save(fig, self.dir, stem))
        data = base64.b64encode(png).decode("ascii")
        cap = html.escape(caption, quote=True)
        return (
            f'<figure><img alt="{cap}" src="data:image/png;base64,{data}">'
            f"<figcaption>{cap}</figcaption></figure>"
        )
