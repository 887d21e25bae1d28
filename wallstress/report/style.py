"""The report's inline style sheet (screen and print) and its Content-Security-Policy.

The policy forbids loading anything but inline images: no scripts, fonts, frames or other requests.
"""

from __future__ import annotations

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
