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

This module assembles the page; the parts live in :mod:`wallstress.report.sections` (batch
sections), :mod:`wallstress.report.cohort` (cohort and patient pages), :mod:`wallstress.report.html`
(escaped tables and inline figures), :mod:`wallstress.report.inputs` (reference set, results,
findings) and :mod:`wallstress.report.style` (CSS, Content-Security-Policy).
"""

from __future__ import annotations

import datetime as _dt
import html
from pathlib import Path

import numpy as np

from wallstress import __version__
from wallstress.report.cohort import (
    _cohort_section,
    _patient_pages,
)
from wallstress.report.html import (
    _e,
    _Figures,
)
from wallstress.report.inputs import (
    _findings,
    _frame,
    _resolve_reference_set,
)
from wallstress.report.sections import (
    CAUTION,
    _counts_section,
    _figures_section,
    _flagged_section,
    _methods_section,
    _summary_section,
)
from wallstress.report.style import _CSP, _CSS
from wallstress.write.safety import atomic_path

MAX_PATIENT_PAGES = 200


MAX_FLAGGED_ROWS = 300


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
        f'<div class="meta">made by wallstress {html.escape(__version__)} on {made}; '
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
