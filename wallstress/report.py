"""One self-contained HTML report of a batch (and, optionally, of a cohort followed over time).

The file works offline and alone: pictures are inline PNG (``data:`` URIs), styles are inline, and
there are no scripts, fonts or any other request; a Content-Security-Policy in the page forbids
loading anything but inline images. Every value taken from the input is HTML-escaped, so no text
from a study list can become markup or script. The file is written atomically (a temporary file in
the target folder, then ``os.replace``).

Sections: batch summary; counts by geometry and sex; measures by sex; flagged rows and why;
figures; with tracking, the cohort (verdicts, transitions, prevalence) and a page per patient (trend
figure, visits, verdict); methods and cautions (reference set with sources, every value that is
from memory or otherwise unverified, the methods record).

wallstress supports, and never replaces, a qualified clinician's judgement and the local lab's
protocols and reference values.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import math
import os
import re
from collections.abc import Mapping
from pathlib import Path

import numpy as np
import pandas as pd

from . import figures as fig_mod
from .safety import atomic_path

CAUTION = (
    "wallstress supports, and never replaces, a qualified clinician's judgement and the local "
    "lab's protocols and reference values. Check every flagged row, and read each number against "
    "the reference values your lab uses."
)
UNVERIFIED_NOTE = (
    "Values marked from memory (or otherwise unverified) were recalled, not read in the source; "
    "they are usable for orientation but must be checked before any clinical or published use."
)

MAX_PATIENT_PAGES = 200
MAX_FLAGGED_ROWS = 300
MAX_TABLE_ROWS = 500

SEVERITY_RANK: dict[str, int] = {"note": 0, "warning": 1, "error": 2}

COLUMN_LABELS: dict[str, str] = {
    "row": "Data row",
    "study_id": "Study",
    "patient_id": "Patient",
    "study_date": "Date",
    "sex": "Sex",
    "age_years": "Age [years]",
    "years_since_baseline": "Years since first study",
    "bsa_m2": "BSA [m²]",
    "lv_mass_g": "LV mass [g]",
    "lvmi_bsa_g_m2": "LVMI/BSA [g/m²]",
    "lvmi_h27_g_m2_7": "LVMI/height^2.7 [g/m^2.7]",
    "rwt": "RWT",
    "geometry": "Geometry",
    "fs_pct": "FS [%]",
    "ef_teichholz_pct": "EF Teichholz [%]",
    "mess_kdyn_cm2": "mESS [kdyn/cm²]",
    "cess_kdyn_cm2": "cESS [kdyn/cm²]",
    "midwall_fs_pct": "Midwall FS [%]",
    "midwall_fs_predicted_pct": "Midwall FS predicted [%]",
    "midwall_fs_stress_corrected_pct": "Stress-corrected midwall FS [%]",
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
    "flags": "Flags",
}
SUMMARY_MEASURES: tuple[str, ...] = (
    "lv_mass_g",
    "lvmi_bsa_g_m2",
    "lvmi_h27_g_m2_7",
    "rwt",
    "fs_pct",
    "mess_kdyn_cm2",
    "cess_kdyn_cm2",
    "midwall_fs_pct",
    "midwall_fs_stress_corrected_pct",
)
VISIT_COLUMNS: tuple[str, ...] = (
    "study_date",
    "years_since_baseline",
    "study_id",
    "lv_mass_g",
    "lvmi_bsa_g_m2",
    "lvmi_h27_g_m2_7",
    "rwt",
    "geometry",
)
VISIT_EXTRA_COLUMNS: tuple[str, ...] = (
    "lv_mass_change_from_baseline_g",
    "lv_mass_real_change_from_baseline",
    "cess_kdyn_cm2",
    "midwall_fs_pct",
    "flags",
)
PATIENT_COLUMNS: tuple[str, ...] = (
    "patient_id",
    "sex",
    "n_visits",
    "span_years",
    "lv_mass_first_g",
    "lv_mass_last_g",
    "lv_mass_change_g",
    "lv_mass_real_change",
    "lv_mass_slope_g_per_year",
    "geometry_first",
    "geometry_last",
    "verdict",
)
CUTOFF_MEASURES: tuple[str, ...] = (
    "lvmi_bsa_g_m2",
    "lvmi_h27_g_m2_7",
    "rwt",
    "edv_index_ml_m2",
    "concentricity_g_ml23",
    "lvidd_cm",
    "ivsd_cm",
    "pwd_cm",
)
MODELS: tuple[str, ...] = ("reproducibility", "midwall_stress_line", "mass_prediction")
FALLBACK_LSC_G = 35.0  # Palmieri V et al., J Am Coll Cardiol 1999 (used only without a set)

_CSS = """
:root { --ink:#1d1d1d; --muted:#5d5d5d; --rule:#d9d9d9; --band:#f3f6f9; --warn:#D55E00;
        --accent:#0072B2; }
* { box-sizing: border-box; }
body { font: 14px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, "Helvetica Neue", Arial,
       sans-serif; color: var(--ink); margin: 0; background: #fff; }
header.top { padding: 18px 28px 10px; border-bottom: 3px solid var(--accent); }
header.top h1 { margin: 0 0 4px; font-size: 22px; }
.meta { color: var(--muted); font-size: 12.5px; }
main { padding: 6px 28px 40px; max-width: 1180px; }
nav { margin: 10px 0 0; font-size: 13px; }
nav a { color: var(--accent); margin-right: 14px; text-decoration: none; }
section { margin-top: 26px; }
h2 { font-size: 18px; border-bottom: 1px solid var(--rule); padding-bottom: 4px; }
h3 { font-size: 15.5px; margin-bottom: 6px; }
.caution { border-left: 5px solid var(--warn); background: #fdf1ea; padding: 9px 14px;
           margin: 14px 0; }
.unverified { color: var(--warn); font-weight: 600; }
table { border-collapse: collapse; margin: 8px 0 12px; font-size: 12.5px; }
th, td { border-bottom: 1px solid var(--rule); padding: 3px 9px; text-align: left;
         vertical-align: top; }
th { background: var(--band); font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; }
td.num, td.nw { white-space: nowrap; }
table.kv th { width: 22em; }
.sev-error { color: #a33a00; font-weight: 600; }
.sev-warning { color: #8a5a00; }
.sev-note { color: var(--muted); }
.scroll { overflow-x: auto; max-width: 100%; }
figure { margin: 10px 0 18px; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: 12.5px; margin-top: 3px; }
.patient { border-top: 2px solid var(--rule); margin-top: 28px; padding-top: 4px; }
.verdict { font-size: 15px; font-weight: 600; }
.capped { color: var(--muted); font-style: italic; }
code { font-size: 12px; }
@media print {
  * { background: none !important; box-shadow: none !important; }
  body { font-size: 11pt; color: #000; }
  nav { display: none; }
  main { max-width: none; padding: 0; }
  header.top { border-bottom: 2px solid #000; }
  .caution { border: 1px solid #000; }
  .patient { break-before: page; page-break-before: always; border-top: none; }
  section.methods { break-before: page; page-break-before: always; }
  figure, table { break-inside: avoid; page-break-inside: avoid; }
  figure img { border: none; }
  .scroll { overflow: visible; }
}
"""

_CSP = "default-src 'none'; img-src data:; style-src 'unsafe-inline'; base-uri 'none'; form-action 'none'"


# ----------------------------------------------------------------------------------------------
# formatting
# ----------------------------------------------------------------------------------------------


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
        if "geometry" in str(c) and not _is_num(shown[c]):
            shown[c] = shown[c].map(lambda g: fig_mod.GEOMETRY_LABELS.get(g, g))
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
    cols = [shown[c].to_numpy(dtype=object) for c in shown.columns]
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


# ----------------------------------------------------------------------------------------------
# inputs
# ----------------------------------------------------------------------------------------------


def _resolve_reference_set(analysis, reference_set):
    """(ReferenceSet or None, problem text or '')."""
    if reference_set is not None and not isinstance(reference_set, str | os.PathLike):
        return reference_set, ""
    name = reference_set
    methods = getattr(analysis, "methods", None) or {}
    if name is None:
        ref = methods.get("reference_set")
        if isinstance(ref, Mapping):
            from .references import list_sets

            bundled = ref.get("name") in list_sets()
            name = ref.get("name") if bundled else (ref.get("path") or ref.get("name"))
        elif isinstance(ref, str):
            name = ref
    if name is None:
        opts = methods.get("options")
        if isinstance(opts, Mapping):
            name = opts.get("reference")
    try:
        from .references import DEFAULT_SET, load_set

        return load_set(name or DEFAULT_SET), ""
    except Exception as exc:  # a report must still be written without cut-offs
        return None, f"reference set {name!r} could not be loaded ({exc}); figures show no cut-offs"


def _coefficients(reference_set, model: str) -> dict:
    try:
        if reference_set is not None:
            return dict(reference_set.coefficients(model))
        from .references import model_coefficients

        return dict(model_coefficients(model))
    except Exception:
        return {}


def _lsc_g(reference_set) -> tuple[float, str, str]:
    """(LSC of LV mass [g], source, verified)."""
    c = _coefficients(reference_set, "reproducibility").get("lsc_lv_mass_g")
    if c is not None and np.isfinite(getattr(c, "value", np.nan)):
        return float(c.value), str(c.source), str(c.verified)
    return (
        FALLBACK_LSC_G,
        "Palmieri V et al., J Am Coll Cardiol 1999 (built-in fallback)",
        "published",
    )


def _midwall_line(reference_set):
    line = _coefficients(reference_set, "midwall_stress_line")
    return line if all(k in line for k in fig_mod.LINE_KEYS) else None


def _frame(analysis) -> pd.DataFrame:
    try:
        frame = analysis.frame()
    except Exception:
        frame = getattr(analysis, "table", pd.DataFrame())
    return frame.loc[:, ~frame.columns.duplicated()].reset_index(drop=True)


def _findings(analysis) -> pd.DataFrame:
    f = getattr(analysis, "findings", None)
    if f is None or not isinstance(f, pd.DataFrame):
        return pd.DataFrame(
            columns=["row", "column", "field", "value", "severity", "code", "message"]
        )
    f = f.copy()
    for c in ("row", "column", "field", "value", "severity", "code", "message"):
        if c not in f.columns:
            f[c] = -1 if c == "row" else ""
    f["row"] = pd.to_numeric(f["row"], errors="coerce").fillna(-1).astype("int64")
    return f


def _sex_labels(frame: pd.DataFrame) -> pd.Series:
    s = pd.Series(fig_mod._sex(frame), index=frame.index)
    return s.map({"F": "women", "M": "men", "": "sex not given"})


def _geometry_labels(frame: pd.DataFrame) -> pd.Series:
    if "geometry" not in frame.columns:
        return pd.Series(["undetermined"] * len(frame), index=frame.index)
    g = frame["geometry"].astype("string").fillna("").str.strip()
    return g.map(lambda x: fig_mod.GEOMETRY_LABELS.get(x, x or "undetermined"))


# ----------------------------------------------------------------------------------------------
# figures
# ----------------------------------------------------------------------------------------------


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


def _safe_stem(text: str) -> str:
    return re.sub(r"[^A-Za-z0-9._-]+", "_", str(text)).strip("._")[:40] or "patient"


# ----------------------------------------------------------------------------------------------
# sections
# ----------------------------------------------------------------------------------------------


def _summary_section(analysis, frame: pd.DataFrame, findings: pd.DataFrame) -> str:
    n = int(getattr(analysis, "n_rows", len(frame)))
    rowwise = findings[findings["row"] >= 0]
    sev = rowwise.groupby("row")["severity"].agg(
        lambda s: max((SEVERITY_RANK.get(x, 0) for x in s), default=0)
    )
    if "flags" in frame.columns:
        flagged = int(frame["flags"].astype("string").fillna("").str.strip().ne("").sum())
    else:
        flagged = int(rowwise["row"].nunique())
    n_err = int((sev == 2).sum())
    n_warn = int((sev == 1).sum())
    n_note = int((sev == 0).sum())
    file_level = int((findings["row"] < 0).sum())
    decided = int(_geometry_labels(frame).ne("undetermined").sum()) if len(frame) else 0
    pairs = [
        ("Rows (studies)", _e(n)),
        ("Rows with any flag", _e(flagged)),
        ("Rows with an error (a measure could not be computed)", _e(n_err)),
        ("Rows with a warning, no error (computed; check the value)", _e(n_warn)),
        ("Rows with notes only (information)", _e(n_note)),
        ("Rows with a geometry class", _e(decided)),
        ("Findings about the whole file or a column", _e(file_level)),
    ]
    if "patient_id" in frame.columns:
        pairs.insert(1, ("Patients", _e(frame["patient_id"].dropna().nunique())))
    methods = getattr(analysis, "methods", None) or {}
    inp = methods.get("input")
    if isinstance(inp, Mapping):
        for k in ("file", "path", "sheet", "sha256"):
            if inp.get(k):
                pairs.append((f"Input {k}", _e(inp[k])))
    return (
        '<section id="summary"><h2>Batch summary</h2>'
        + _kv(pairs)
        + "<p>A flagged row keeps its place and its own values; measures that could not be "
        'computed for it are left empty. See <a href="#flagged">flagged rows</a>.</p></section>'
    )


def _counts_section(frame: pd.DataFrame) -> str:
    if not len(frame):
        return '<section id="counts"><h2>Geometry by sex</h2><p>No rows.</p></section>'
    geo = _geometry_labels(frame)
    sex = _sex_labels(frame)
    tab = pd.crosstab(geo, sex, margins=True, margins_name="all")
    order = [fig_mod.GEOMETRY_LABELS[g] for g in fig_mod.GEOMETRY_CLASSES] + ["undetermined"]
    rows = [r for r in order if r in tab.index] + [r for r in tab.index if r not in order]
    cols = [c for c in ("women", "men", "sex not given", "all") if c in tab.columns]
    tab = tab.loc[rows, cols]
    tab.index.name = "Geometry"
    parts = ['<section id="counts"><h2>Geometry by sex</h2>', _table(tab, index=True)]
    measures = [m for m in SUMMARY_MEASURES if m in frame.columns]
    if measures:
        values = frame[measures].apply(pd.to_numeric, errors="coerce")
        values["sex"] = sex.to_numpy()
        g = values.groupby("sex", sort=False)
        out = []
        for m in measures:
            q = g[m].quantile([0.25, 0.5, 0.75]).unstack()
            cnt = g[m].count()
            for s in ("women", "men", "sex not given"):
                if s in cnt.index and cnt[s] > 0:
                    out.append(
                        {
                            "Measure": COLUMN_LABELS.get(m, m),
                            "Sex": s,
                            "n": int(cnt[s]),
                            "Median": q.loc[s, 0.5],
                            "25th centile": q.loc[s, 0.25],
                            "75th centile": q.loc[s, 0.75],
                        }
                    )
        if out:
            parts.append("<h3>Measures by sex (median and interquartile range)</h3>")
            parts.append(_table(pd.DataFrame(out)))
    parts.append("</section>")
    return "".join(parts)


def _flagged_section(frame: pd.DataFrame, findings: pd.DataFrame, max_rows: int) -> str:
    parts = ['<section id="flagged"><h2>Flagged rows and why</h2>']
    whole = findings[findings["row"] < 0]
    if len(whole):
        parts.append("<h3>About the file or a whole column</h3>")
        parts.append(_table(whole[["column", "severity", "code", "message"]], max_rows=max_rows))
    rowwise = findings[findings["row"] >= 0]
    if not len(rowwise):
        parts.append("<p>No row has a finding.</p></section>")
        return "".join(parts)
    rank = rowwise["severity"].map(SEVERITY_RANK).fillna(0)
    by_code = (
        rowwise.assign(_rank=rank)
        .groupby("code", sort=False)
        .agg(
            _rank=("_rank", "max"),
            rows=("row", "nunique"),
            message=("message", "first"),
        )
        .sort_values(["_rank", "rows"], ascending=False)
    )
    names = {v: k for k, v in SEVERITY_RANK.items()}
    codes_table = pd.DataFrame(
        {
            "code": by_code.index.to_numpy(),
            "severity": by_code["_rank"].astype(int).map(names).to_numpy(),
            "rows": by_code["rows"].to_numpy(),
            "message": by_code["message"].to_numpy(),
        }
    )
    parts.append("<h3>Findings by code</h3>" + _table(codes_table, max_rows=max_rows))
    field = rowwise["field"].astype("string").fillna("")
    value = rowwise["value"].astype("string").fillna("")
    label = field.where(field != "", rowwise["column"].astype("string").fillna(""))
    grouped = (
        rowwise.assign(_rank=rank, _value=(label + " = " + value).where(value != "", ""))
        .groupby("row", sort=True)
        .agg(
            _rank=("_rank", "max"),
            codes=("code", lambda s: "; ".join(dict.fromkeys(map(str, s)))),
            values=("_value", lambda s: "; ".join(x for x in dict.fromkeys(s) if x)),
        )
    )
    n_rows_found = len(grouped)
    n_err = int((grouped["_rank"] >= 2).sum())
    n_notes_only = int((grouped["_rank"] < 1).sum())
    grouped = grouped[grouped["_rank"] >= 1]
    grouped = grouped.iloc[np.lexsort((grouped.index.to_numpy(), -grouped["_rank"].to_numpy()))]
    out = pd.DataFrame({"row": grouped.index.to_numpy() + 1})
    positions = grouped.index.to_numpy()
    valid = positions < len(frame)
    for c in ("study_id", "patient_id", "study_date"):
        if c in frame.columns:
            vals = np.full(len(positions), None, dtype=object)
            vals[valid] = frame[c].to_numpy(dtype=object)[positions[valid]]
            out[c] = vals
    out["severity"] = grouped["_rank"].astype(int).map(names).to_numpy()
    out["codes"] = grouped["codes"].to_numpy()
    out["values"] = grouped["values"].to_numpy()
    n = len(out)
    parts.append(
        f"<h3>Rows with an error or a warning</h3><p>{n_rows_found} row(s) have findings: "
        f"{n_err} with an error, {n - n_err} with a warning, {n_notes_only} with notes only "
        "(notes are listed by code above). What each code means is in the table above. Errors "
        "first; data row 1 is the first row under the headers.</p>"
    )
    if not n:
        parts.append("<p>No row has an error or a warning.</p></section>")
        return "".join(parts)
    shown = out.iloc[:max_rows]
    head = "".join(f"<th>{_label(c)}</th>" for c in shown.columns)
    body = []
    for rec in shown.itertuples(index=False):
        d = rec._asdict()
        cells = []
        for c in shown.columns:
            if c == "severity":
                cells.append(f'<td class="sev-{_e(d[c])}">{_e(d[c])}</td>')
            elif c not in ("values", "codes"):
                cells.append(f'<td class="nw">{_e(d[c])}</td>')
            else:
                cells.append(f"<td>{_e(d[c])}</td>")
        body.append("<tr>" + "".join(cells) + "</tr>")
    parts.append(f"<table><thead><tr>{head}</tr></thead><tbody>{''.join(body)}</tbody></table>")
    if n > max_rows:
        parts.append(
            f'<p class="capped">showing the first {max_rows} of {n} rows with an error or a '
            "warning; the findings table written with the results lists every one</p>"
        )
    parts.append("</section>")
    return "".join(parts)


def _figures_section(frame, reference_set, figs: _Figures) -> str:
    parts = ['<section id="figures"><h2>Figures</h2>']
    mass_index = getattr(reference_set, "mass_index", None) or "lvmi_bsa_g_m2"
    parts.append(
        figs.embed(
            fig_mod.geometry_plane(frame, reference_set, mass_index=mass_index),
            "geometry_plane",
            "Relative wall thickness against LV mass index, one point per study; dashed lines: "
            "the reference set's mass limits for women and men; dotted line: the RWT limit.",
        )
    )
    line = _midwall_line(reference_set)
    status = fig_mod.line_values(line)[3] if line is not None else ""
    caption = "Midwall fractional shortening against circumferential end-systolic stress."
    if line is not None:
        caption += " Line and 95 % band: the reference relation of the set"
        caption += (
            "." if status in fig_mod.VERIFIED_OK else f" (UNVERIFIED: {status.replace('_', ' ')})."
        )
    parts.append(figs.embed(fig_mod.stress_shortening(frame, line), "stress_shortening", caption))
    parts.append("</section>")
    return "".join(parts)


def _tracking_table(tracking, name: str):
    t = getattr(tracking, name, None)
    return t if isinstance(t, pd.DataFrame) else None


def _cohort_section(tracking, reference_set, figs: _Figures) -> str:
    parts = ['<section id="cohort"><h2>Cohort over time</h2>']
    patients = _tracking_table(tracking, "patients")
    visits = _tracking_table(tracking, "visits")
    if patients is not None and "verdict" in patients.columns:
        counts = patients["verdict"].astype("string").fillna("").value_counts(sort=True)
        tab = pd.DataFrame({"Verdict": counts.index.to_numpy(), "Patients": counts.to_numpy()})
        parts.append("<h3>Verdicts</h3>" + _table(tab))
    transitions = _tracking_table(tracking, "transitions")
    if transitions is not None and len(transitions):
        parts.append("<h3>Geometry at the first and the last study</h3>")
        parts.append(
            figs.embed(
                fig_mod.transitions_figure(transitions),
                "transitions",
                "Patients by geometry at their first (rows) and last (columns) study; the "
                "outlined diagonal is no change.",
            )
        )
        matrix = fig_mod.transition_matrix(transitions).astype("int64")
        matrix.index = [fig_mod.GEOMETRY_LABELS.get(i, i) for i in matrix.index]
        matrix.columns = [fig_mod.GEOMETRY_LABELS.get(c, c) for c in matrix.columns]
        matrix.index.name = "first \\ last"
        parts.append(_table(matrix, index=True))
    if visits is not None and len(visits):
        mass_index = getattr(reference_set, "mass_index", None) or "lvmi_bsa_g_m2"
        if mass_index in visits.columns and "rwt" in visits.columns:
            parts.append(
                figs.embed(
                    fig_mod.geometry_plane(
                        visits.iloc[0:0], reference_set, mass_index=mass_index, paths=visits
                    ),
                    "geometry_paths",
                    "Each patient's move on the geometry plane: an arrow from the first visit "
                    "(dot) to the last.",
                )
            )
    for name, heading in (
        ("prevalence_by_year", "Geometry by year of follow-up"),
        ("prevalence_by_sex", "Geometry by sex"),
    ):
        t = _prevalence_wide(_tracking_table(tracking, name))
        if t is not None and len(t):
            parts.append(f"<h3>{html.escape(heading)}</h3>")
            parts.append(_table(t, index=not isinstance(t.index, pd.RangeIndex)))
    if patients is not None and len(patients):
        cols = [c for c in PATIENT_COLUMNS if c in patients.columns] or list(patients.columns)
        parts.append("<h3>Patients</h3>" + _table(patients[cols]))
    parts.append("</section>")
    return "".join(parts)


def _prevalence_wide(t):
    """A long prevalence table (follow_up_year, geometry, n_patients, pct_of_seen[, sex]) as one
    row per year (and sex) and one column per class, "n (pct %)"; other shapes pass through."""
    need = {"follow_up_year", "geometry", "n_patients"}
    if t is None or not need.issubset(t.columns):
        return t
    keys = [c for c in ("sex", "follow_up_year") if c in t.columns]
    n = t["n_patients"].map(_fmt)
    if "pct_of_seen" in t.columns:
        n = n + " (" + t["pct_of_seen"].map(lambda v: f"{v:.0f}" if v == v else "") + " %)"
    cell = t.assign(
        _cell=n, geometry=t["geometry"].map(lambda g: fig_mod.GEOMETRY_LABELS.get(g, g))
    )
    wide = cell.pivot_table(index=keys, columns="geometry", values="_cell", aggfunc="first")
    order = [fig_mod.GEOMETRY_LABELS.get(g, g) for g in (*fig_mod.GEOMETRY_CLASSES, "")]
    wide = wide[
        [c for c in order if c in wide.columns] + [c for c in wide.columns if c not in order]
    ]
    if "n_seen" in t.columns:
        wide.insert(0, "patients seen", t.groupby(keys)["n_seen"].first())
    wide.columns.name = None
    return wide.reset_index()


def _patient_pages(tracking, reference_set, figs: _Figures, max_pages: int) -> str:
    visits = _tracking_table(tracking, "visits")
    patients = _tracking_table(tracking, "patients")
    if visits is None or "patient_id" not in visits.columns or not len(visits):
        return ""
    ids = visits["patient_id"].astype("string").fillna("")
    if patients is not None and "patient_id" in patients.columns:
        order = list(dict.fromkeys(patients["patient_id"].astype("string").fillna("").tolist()))
        order += [p for p in dict.fromkeys(ids.tolist()) if p not in set(order)]
        info = patients.assign(_pid=patients["patient_id"].astype("string").fillna(""))
        info = info.drop_duplicates("_pid").set_index("_pid")
    else:
        order = list(dict.fromkeys(ids.tolist()))
        info = None
    lsc, lsc_source, lsc_verified = _lsc_g(reference_set)
    groups = dict(tuple(visits.groupby(ids.to_numpy(), sort=False)))
    parts = ['<section id="patients"><h2>Patients</h2>']
    total = len(order)
    if total > max_pages:
        parts.append(
            f'<p class="capped">pages for the first {max_pages} of {total} patients, to keep this '
            "file a reasonable size; the tracking output lists every patient</p>"
        )
    parts.append(
        f"<p>Error bars: the least significant change of LV mass, {lsc:g} g "
        f"({html.escape(lsc_source)}; {_verified_text(lsc_verified)}), converted to the index by "
        "the visit's body size. A change larger than the bars is larger than the measurement's "
        "own reproducibility.</p>"
    )
    for k, pid in enumerate(order[:max_pages]):
        v = groups.get(pid)
        if v is None:
            v = visits.iloc[0:0]
        parts.append(f'<div class="patient" id="patient-{k}"><h3>Patient {html.escape(pid)}</h3>')
        row = info.loc[pid] if info is not None and pid in info.index else None
        if row is not None:
            verdict = row.get("verdict", "")
            text = row.get("verdict_text", "")
            if _fmt(verdict) or _fmt(text):
                parts.append(f'<p class="verdict">{_e(verdict)}</p><p>{_e(text)}</p>')
            extra = [
                (
                    COLUMN_LABELS.get(c, c),
                    _e(fig_mod.GEOMETRY_LABELS.get(row[c], row[c]) if "geometry" in c else row[c]),
                )
                for c in (*PATIENT_COLUMNS, "mass_verdict", "geometry_verdict")
                if c in row.index
                and c not in ("patient_id", "verdict", "verdict_text")
                and _fmt(row[c])
            ]
            if extra:
                parts.append(_kv(extra[:24]))
        parts.append(
            figs.embed(
                fig_mod.lvmi_trend(v, reference_set, lsc_g=lsc),
                f"trend_{k:04d}_{_safe_stem(pid)}",
                f"LV mass index over time, patient {pid}; dashed line: the limit for the "
                "patient's sex.",
                dpi=96,
            )
        )
        cols = [c for c in (*VISIT_COLUMNS, *VISIT_EXTRA_COLUMNS) if c in v.columns]
        if not cols:
            cols = [c for c in v.columns if c not in ("patient_id", "sex")][:14]
        parts.append(_table(v[cols]))
        parts.append("</div>")
    parts.append("</section>")
    return "".join(parts)


def _methods_section(analysis, reference_set, ref_problem: str) -> str:
    parts = ['<section id="methods" class="methods"><h2>Methods and cautions</h2>']
    parts.append(f'<p class="caution">{html.escape(CAUTION)}</p>')
    parts.append(f"<p>{html.escape(UNVERIFIED_NOTE)}</p>")
    if ref_problem:
        parts.append(f'<p class="unverified">{html.escape(ref_problem)}</p>')
    unverified_rows = []
    if reference_set is not None:
        parts.append(
            f"<h3>Reference set: {_e(getattr(reference_set, 'name', ''))}</h3>"
            f"<p>{_e(getattr(reference_set, 'title', ''))}. Geometry uses "
            f"{_label(getattr(reference_set, 'mass_index', ''))}.</p>"
        )
        rows = []
        for m in CUTOFF_MEASURES:
            for s in fig_mod.SEXES:
                c = fig_mod._cutoff(reference_set, m, s)
                if c is None:
                    continue
                rows.append(
                    f"<tr><td>{_label(m)}</td><td>{_e(fig_mod.SEX_LABELS[s])}</td>"
                    f'<td class="num">{_e(c.comparison)} {_g(c.value)}</td>'
                    f"<td>{_e(c.source)}</td><td>{_verified_text(c.verified)}</td></tr>"
                )
                if c.verified != "published":
                    unverified_rows.append(
                        (f"cut-off {m}, {fig_mod.SEX_LABELS[s]}", c.value, c.verified, c.source)
                    )
        if rows:
            parts.append(
                "<table><thead><tr><th>Measure</th><th>Sex</th><th>Abnormal when</th>"
                "<th>Source</th><th>Status</th></tr></thead><tbody>"
                + "".join(rows)
                + "</tbody></table>"
            )
    coef_rows = []
    for model in MODELS:
        for key, c in _coefficients(reference_set, model).items():
            coef_rows.append(
                f"<tr><td>{_e(model)}</td><td>{_e(key)}</td>"
                f'<td class="num">{_g(getattr(c, "value", c))} {_e(getattr(c, "unit", ""))}</td>'
                f"<td>{_e(getattr(c, 'source', ''))}</td>"
                f"<td>{_verified_text(getattr(c, 'verified', None))}</td></tr>"
            )
            status = getattr(c, "verified", None)
            if status not in ("published", "computed", "lab"):
                unverified_rows.append(
                    (f"{model}: {key}", getattr(c, "value", c), status, getattr(c, "source", ""))
                )
    if coef_rows:
        parts.append(
            "<h3>Model coefficients</h3><table><thead><tr><th>Model</th><th>Parameter</th>"
            "<th>Value</th><th>Source</th><th>Status</th></tr></thead><tbody>"
            + "".join(coef_rows)
            + "</tbody></table>"
        )
    parts.append('<h3 id="unverified">Values from memory or otherwise unverified</h3>')
    if unverified_rows:
        lis = "".join(
            f"<li><b>{_e(what)}</b> = {_g(val)}: {_verified_text(st)}; {_e(src)}</li>"
            for what, val, st, src in unverified_rows
        )
        parts.append(f"<ul>{lis}</ul>")
    else:
        parts.append("<p>None among the cut-offs and coefficients shown.</p>")
    methods = getattr(analysis, "methods", None) or {}
    if methods.get("unverified"):
        parts.append("<p>Listed by the run itself as unverified:</p>")
        parts.append(_render_value(methods["unverified"]))
    if methods:
        record = dict(methods)
        ref = record.get("reference_set")
        if isinstance(ref, Mapping) and "rows" in ref:
            record["reference_set"] = {k: v for k, v in ref.items() if k != "rows"}
        record.pop("unverified", None)
        parts.append("<h3>Methods record of the run</h3>")
        parts.append(_render_value(record))
    parts.append("</section>")
    return "".join(parts)


# ----------------------------------------------------------------------------------------------
# public
# ----------------------------------------------------------------------------------------------


def render_report(
    analysis,
    *,
    tracking=None,
    figures_dir=None,
    title: str | None = None,
    reference_set=None,
    max_patient_pages: int = MAX_PATIENT_PAGES,
    max_flagged_rows: int = MAX_FLAGGED_ROWS,
) -> str:
    """The report as one HTML string (see :func:`write_report`)."""
    for name, value in (
        ("max_patient_pages", max_patient_pages),
        ("max_flagged_rows", max_flagged_rows),
    ):
        if not isinstance(value, int | np.integer) or value < 0:
            raise ValueError(f"{name}={value!r} is not usable; pass a whole number >= 0")
    rs, ref_problem = _resolve_reference_set(analysis, reference_set)
    frame = _frame(analysis)
    findings = _findings(analysis)
    figs = _Figures(figures_dir)
    title_text = title or "wallstress report"
    try:
        from . import __version__ as version
    except ImportError:  # pragma: no cover
        version = "?"
    run_utc = (getattr(analysis, "methods", None) or {}).get("run_utc")
    made = str(run_utc) if run_utc else _dt.datetime.now().strftime("%Y-%m-%d %H:%M")
    nav = [("summary", "Summary"), ("counts", "Geometry by sex"), ("flagged", "Flagged rows")]
    nav.append(("figures", "Figures"))
    if tracking is not None:
        nav += [("cohort", "Cohort"), ("patients", "Patients")]
    nav.append(("methods", "Methods and cautions"))
    body = [
        '<header class="top">',
        f"<h1>{html.escape(title_text)}</h1>",
        f'<div class="meta">made by wallstress {html.escape(str(version))} on {made}; '
        f"reference set {_e(getattr(rs, 'name', 'none'))}</div>",
        "<nav>" + "".join(f'<a href="#{a}">{html.escape(t)}</a>' for a, t in nav) + "</nav>",
        "</header><main>",
        f'<p class="caution"><b>Caution.</b> {html.escape(CAUTION)} '
        f'Values from memory are listed under <a href="#unverified">unverified values</a>.</p>',
        _summary_section(analysis, frame, findings),
        _counts_section(frame),
        _flagged_section(frame, findings, max_flagged_rows),
        _figures_section(frame, rs, figs),
    ]
    if tracking is not None:
        body.append(_cohort_section(tracking, rs, figs))
        body.append(_patient_pages(tracking, rs, figs, max_patient_pages))
    body.append(_methods_section(analysis, rs, ref_problem))
    body.append("</main>")
    return (
        '<!DOCTYPE html>\n<html lang="en"><head><meta charset="utf-8">'
        f'<meta http-equiv="Content-Security-Policy" content="{_CSP}">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        f"<title>{html.escape(title_text)}</title><style>{_CSS}</style></head><body>"
        + "".join(body)
        + "</body></html>\n"
    )


def write_report(
    analysis,
    out_path,
    *,
    tracking=None,
    figures_dir=None,
    title: str | None = None,
    reference_set=None,
    max_patient_pages: int = MAX_PATIENT_PAGES,
    max_flagged_rows: int = MAX_FLAGGED_ROWS,
) -> Path:
    """Write one self-contained HTML report of an analysis (and optionally its tracking).

    Parameters
    ----------
    analysis : Analysis
        From :func:`wallstress.analyse_with_findings` (``frame()``, ``findings``, ``methods``).
    out_path : path-like
        The HTML file to write (its folder must exist). Written atomically.
    tracking : Tracking, optional
        From :func:`wallstress.track` (``visits``, ``patients``, ``transitions``,
        ``prevalence_by_year``, ``prevalence_by_sex``); adds the cohort section and a page per
        patient.
    figures_dir : path-like, optional
        Also write every figure there as PNG and SVG (folder created if needed).
    title : str, optional
        Title of the report (default "wallstress report"); escaped like every other text.
    reference_set : ReferenceSet or str, optional
        The cut-offs to draw; default: the set named in ``analysis.methods`` (else the default
        set).
    max_patient_pages : int
        Per-patient pages for at most this many patients (default 200); the report says when
        patients were left out.
    max_flagged_rows : int
        At most this many flagged rows listed (default 300), with the count of the rest.

    Returns
    -------
    Path
        The written report.
    """
    out = Path(out_path)
    text = render_report(
        analysis,
        tracking=tracking,
        figures_dir=figures_dir,
        title=title,
        reference_set=reference_set,
        max_patient_pages=max_patient_pages,
        max_flagged_rows=max_flagged_rows,
    )
    with atomic_path(out) as tmp:
        tmp.write_text(text, encoding="utf-8")
    return out
