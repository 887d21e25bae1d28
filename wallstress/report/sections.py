"""The batch sections of the report: summary, geometry by sex, flagged rows, figures, methods.

The methods section carries the clinical caution and lists every value that is from
memory or otherwise unverified.
"""

from __future__ import annotations

import html
from collections.abc import Mapping

import numpy as np
import pandas as pd

from wallstress.analysis.flags import worst_severity
from wallstress.figures.common import (
    GEOMETRY_CLASSES,
    GEOMETRY_LABELS,
    SEX_LABELS,
    SEXES,
    VERIFIED_OK,
    _cutoff,
)
from wallstress.figures.geometry_plane import geometry_plane
from wallstress.figures.stress_shortening import line_values, stress_shortening
from wallstress.findings import SEVERITY_RANK
from wallstress.report.html import (
    COLUMN_LABELS,
    _e,
    _Figures,
    _g,
    _kv,
    _label,
    _render_value,
    _table,
    _verified_text,
)
from wallstress.report.inputs import _coefficients, _geometry_labels, _midwall_line, _sex_labels
from wallstress.schema.outputs import SUMMARY_MEASURES
from wallstress.schema.vocabulary import CLINICAL_CAUTION, OUT

CAUTION = (
    f"{CLINICAL_CAUTION} Check every flagged row, and read each number against the reference "
    "values your lab uses."
)


UNVERIFIED_NOTE = (
    "Values marked from memory (or otherwise unverified) were recalled, not read in the source; "
    "they are usable for orientation but must be checked before any clinical or published use."
)


CUTOFF_MEASURES: tuple[str, ...] = (
    OUT.lvmi_bsa_g_m2,
    OUT.lvmi_h27_g_m2_7,
    OUT.rwt,
    OUT.edv_index_ml_m2,
    OUT.concentricity_g_ml23,
    "lvidd_cm",
    "ivsd_cm",
    "pwd_cm",
)


MODELS: tuple[str, ...] = ("reproducibility", "midwall_stress_line", "mass_prediction")


def _row_rank(rowwise: pd.DataFrame) -> pd.Series:
    """Each row's highest severity (note 0, warning 1, error 2), indexed by the rows that have a
    finding (:func:`wallstress.analysis.flags.worst_severity`)."""
    n = int(rowwise["row"].max()) + 1 if len(rowwise) else 0
    worst = worst_severity(rowwise, n)
    have = np.flatnonzero(worst >= 0)
    return pd.Series(worst[have].astype(int), index=have)


def _summary_section(analysis, frame: pd.DataFrame, findings: pd.DataFrame) -> str:
    n = int(getattr(analysis, "n_rows", len(frame)))
    rowwise = findings[findings["row"] >= 0]
    sev = _row_rank(rowwise)
    if OUT.flags in frame.columns:
        flagged = int(frame[OUT.flags].astype("string").fillna("").str.strip().ne("").sum())
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
    order = [GEOMETRY_LABELS[g] for g in GEOMETRY_CLASSES] + ["undetermined"]
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
    # every row's rank at once; the codes and values are joined only for the rows shown
    row_rank = _row_rank(rowwise)
    n_rows_found = len(row_rank)
    n_err = int((row_rank >= 2).sum())
    n_notes_only = int((row_rank < 1).sum())
    listed = row_rank[row_rank >= 1]
    listed = listed.iloc[np.lexsort((listed.index.to_numpy(), -listed.to_numpy()))]
    n_listed = len(listed)
    listed = listed.iloc[:max_rows]
    some = rowwise[rowwise["row"].isin(listed.index)]
    field = some["field"].astype("string").fillna("")
    value = some["value"].astype("string").fillna("")
    label = field.where(field != "", some["column"].astype("string").fillna(""))
    joined = (
        some.assign(_value=(label + " = " + value).where(value != "", ""))
        .groupby("row", sort=True)
        .agg(
            codes=("code", lambda s: "; ".join(dict.fromkeys(map(str, s)))),
            values=("_value", lambda s: "; ".join(x for x in dict.fromkeys(s) if x)),
        )
    )
    grouped = pd.DataFrame({"_rank": listed}).join(joined)
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
    n = n_listed
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
    mass_index = getattr(reference_set, "mass_index", None) or OUT.lvmi_bsa_g_m2
    parts.append(
        figs.embed(
            geometry_plane(frame, reference_set, mass_index=mass_index),
            "geometry_plane",
            "Relative wall thickness against LV mass index, one point per study; dashed lines: "
            "the reference set's mass limits for women and men; dotted line: the RWT limit.",
        )
    )
    line = _midwall_line(reference_set)
    status = line_values(line)[3] if line is not None else ""
    caption = "Midwall fractional shortening against circumferential end-systolic stress."
    if line is not None:
        caption += " Line and 95 % band: the reference relation of the set"
        caption += "." if status in VERIFIED_OK else f" (UNVERIFIED: {status.replace('_', ' ')})."
    parts.append(figs.embed(stress_shortening(frame, line), "stress_shortening", caption))
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
            for s in SEXES:
                c = _cutoff(reference_set, m, s)
                if c is None:
                    continue
                rows.append(
                    f"<tr><td>{_label(m)}</td><td>{_e(SEX_LABELS[s])}</td>"
                    f'<td class="num">{_e(c.comparison)} {_g(c.value)}</td>'
                    f"<td>{_e(c.source)}</td><td>{_verified_text(c.verified)}</td></tr>"
                )
                if c.verified != "published":
                    unverified_rows.append(
                        (f"cut-off {m}, {SEX_LABELS[s]}", c.value, c.verified, c.source)
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
