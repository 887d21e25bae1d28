"""Tests of wallstress.report: one self-contained, escaped HTML file.

The Analysis and Tracking objects are built by hand (invented data, no real people), so the report
is tested apart from the pipeline and the tracking module.
"""

from __future__ import annotations

import base64
import html
import re
from html.parser import HTMLParser
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from wallstress import findings as fnd
from wallstress.analysis import flags
from wallstress.analysis.result import Analysis
from wallstress.figures import save as figures_save
from wallstress.report import page as R
from wallstress.report.html import _fmt
from wallstress.report.sections import _counts_section

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"
EVIL = '<script>alert("x")</script>'
VOID = {"meta", "img", "br", "hr", "link", "input", "col", "wbr", "source", "area", "base"}


# ------------------------------------------------------------------------------------------
# builders (invented data)
# ------------------------------------------------------------------------------------------


def make_analysis(n: int = 12, *, evil_id: str = EVIL, n_flagged: int = 3) -> Analysis:
    """n studies of n/2 invented patients; row 0 has a hostile patient id."""
    i = np.arange(n)
    geometry = np.array(
        ["normal", "concentric_remodelling", "concentric_hypertrophy", "eccentric_hypertrophy", ""]
    )[i % 5]
    canonical = pd.DataFrame(
        {
            "study_id": [f"S{k:04d}" for k in i],
            "patient_id": [evil_id if k == 0 else f"PT{k // 2:03d}" for k in i],
            "study_date": pd.Timestamp("2020-01-01") + pd.to_timedelta(i * 200, unit="D"),
            "sex": np.where(i % 2 == 0, "F", "M"),
            "height_cm": 170.0,
            "weight_kg": 75.0,
        }
    )
    outputs = pd.DataFrame(
        {
            "bsa_m2": 1.87,
            "lv_mass_g": np.linspace(140, 260, n),
            "lvmi_bsa_g_m2": np.linspace(75, 139, n),
            "lvmi_h27_g_m2_7": np.linspace(35, 62, n),
            "rwt": np.linspace(0.33, 0.55, n),
            "geometry": geometry,
            "cess_kdyn_cm2": np.linspace(120, 240, n),
            "midwall_fs_pct": np.linspace(19, 13, n),
            "flags": "",
        }
    )
    rows = np.arange(1, 1 + n_flagged)
    f = fnd.concat(
        [
            fnd.make(
                rows,
                code="lvids_not_below_lvidd",
                severity="error",
                message="LVIDs is not smaller than LVIDd: systolic measures not computed.",
                field="lvids_cm",
                values=np.full(len(rows), 5.5),
            ),
            fnd.make(
                [0],
                code="odd_value",
                severity="warning",
                message=f"value {EVIL} looks odd",
                column=EVIL,
                values=[EVIL],
            ),
            fnd.make([-1], code="unit_inferred", severity="note", message="mm read as cm."),
        ]
    )
    outputs["flags"] = flags.flags_per_row(f, n).to_numpy()
    table = pd.concat([canonical, outputs], axis=1)
    methods = {
        "software": {"name": "wallstress", "version": "0.1.0"},
        "options": {"reference": "ase_eacvi_2015", "bsa_method": "dubois"},
        "reference_set": {"name": "ase_eacvi_2015", "rows": [{"a": 1}]},
        "unverified": ["cess_kdyn_cm2: constant 1.35 from memory", EVIL],
        "note": EVIL,
    }
    return Analysis(table=table, canonical=canonical, outputs=outputs, findings=f, methods=methods)


def make_tracking(n_patients: int = 3) -> SimpleNamespace:
    ids = [EVIL] + [f"PT{k:03d}" for k in range(1, n_patients)]
    visits = pd.DataFrame(
        {
            "patient_id": np.repeat(ids, 3),
            "study_date": np.tile(
                pd.to_datetime(["2019-03-01", "2020-04-01", "2022-05-01"]), n_patients
            ),
            "years_since_baseline": np.tile([0.0, 1.09, 3.17], n_patients),
            "sex": np.repeat(np.where(np.arange(n_patients) % 2 == 0, "F", "M"), 3),
            "bsa_m2": 1.8,
            "lv_mass_g": np.tile([230.0, 210.0, 180.0], n_patients),
            "lvmi_bsa_g_m2": np.tile([127.8, 116.7, 100.0], n_patients),
            "rwt": np.tile([0.50, 0.46, 0.41], n_patients),
            "geometry": np.tile(
                ["concentric_hypertrophy", "concentric_hypertrophy", "normal"], n_patients
            ),
        }
    )
    patients = pd.DataFrame(
        {
            "patient_id": ids,
            "n_visits": 3,
            "lv_mass_change_g": -50.0,
            "verdict": "regressed",
            "verdict_text": [f"LV mass fell 50 g {EVIL}"]
            + ["LV mass fell 50 g"] * (n_patients - 1),
        }
    )
    transitions = pd.DataFrame(
        {
            "from_geometry": ["concentric_hypertrophy", "normal"],
            "to_geometry": ["normal", "normal"],
            "n_patients": [n_patients, 0],
        }
    )
    prev = pd.DataFrame(
        {
            "follow_up_year": [0, 0, 3],
            "geometry": ["concentric_hypertrophy", "normal", "normal"],
            "n_patients": [n_patients, 0, n_patients],
            "n_seen": n_patients,
            "pct_of_seen": [100.0, 0.0, 100.0],
        }
    )
    return SimpleNamespace(
        visits=visits,
        patients=patients,
        transitions=transitions,
        prevalence_by_year=prev,
        prevalence_by_sex=prev.assign(sex="F"),
    )


class _Structure(HTMLParser):
    """Collects tags, attributes and checks that non-void elements are closed in order."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.stack, self.errors, self.tags, self.attrs, self.text = [], [], [], [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append(tag)
        self.attrs.extend((tag, k, v or "") for k, v in attrs)
        if tag not in VOID:
            self.stack.append(tag)

    def handle_endtag(self, tag):
        if not self.stack or self.stack[-1] != tag:
            self.errors.append(f"</{tag}> closes {self.stack[-1:] or 'nothing'}")
        else:
            self.stack.pop()

    def handle_data(self, data):
        self.text.append(data)


def parse(doc: str) -> _Structure:
    p = _Structure()
    p.feed(doc)
    p.close()
    return p


@pytest.fixture(scope="module")
def full_report(tmp_path_factory):
    d = tmp_path_factory.mktemp("rep")
    out = R.write_report(
        make_analysis(),
        d / "report.html",
        tracking=make_tracking(),
        figures_dir=d / "figs",
        title=f"Clinic {EVIL}",
    )
    return out, out.read_text(encoding="utf-8"), d


# ------------------------------------------------------------------------------------------
# structure and sections
# ------------------------------------------------------------------------------------------


def test_report_sections_present(full_report):
    _, doc, _ = full_report
    for ident in ("summary", "counts", "flagged", "figures", "cohort", "patients", "methods"):
        assert f'id="{ident}"' in doc
    for heading in (
        "Batch summary",
        "Geometry by sex",
        "Flagged rows and why",
        "Methods and cautions",
    ):
        assert heading in doc
    assert doc.startswith("<!DOCTYPE html>")


def test_report_is_well_formed(full_report):
    """Every non-void element is closed, in order (common practice, no source)."""
    p = parse(full_report[1])
    assert p.errors == [] and p.stack == []
    assert p.tags.count("html") == 1 and p.tags.count("body") == 1


def test_report_without_tracking_has_no_patient_pages(tmp_path):
    doc = R.write_report(make_analysis(), tmp_path / "r.html").read_text(encoding="utf-8")
    assert 'id="summary"' in doc and 'id="patients"' not in doc and 'class="patient"' not in doc


# ------------------------------------------------------------------------------------------
# escaping and self-containment
# ------------------------------------------------------------------------------------------


def test_report_escapes_input_text(full_report):
    """A patient id, a message, a title and a methods value of '<script>...' stay text."""
    _, doc, _ = full_report
    assert "<script" not in doc.lower()
    assert html.escape(EVIL) in doc
    p = parse(doc)
    assert "script" not in p.tags
    assert EVIL in "".join(p.text)  # shown to the reader as typed


def test_report_escapes_attribute_breakout(tmp_path):
    """A quote in input text cannot leave an attribute (img alt carries the patient id)."""
    evil = '" onerror="alert(1)'
    a = make_analysis(evil_id=evil)
    t = make_tracking()
    t.visits["patient_id"] = t.visits["patient_id"].replace(EVIL, evil)
    t.patients["patient_id"] = t.patients["patient_id"].replace(EVIL, evil)
    doc = R.write_report(a, tmp_path / "r.html", tracking=t).read_text(encoding="utf-8")
    attrs = parse(doc).attrs
    assert not [x for x in attrs if x[1].startswith("on")]


def test_report_has_no_network_resources(full_report):
    """No src=/href= to the network, no http(s) text at all, CSP forbids everything but data: images."""
    _, doc, _ = full_report
    assert "http://" not in doc and "https://" not in doc
    for tag, name, value in parse(doc).attrs:
        if name in ("src", "href", "action", "srcset", "poster", "data"):
            v = value.strip().lower()
            assert v.startswith("#") or v.startswith("data:image/png;base64,"), (tag, name, v[:40])
    assert "default-src 'none'" in doc
    assert "@import" not in doc and "url(" not in doc


def test_report_url_in_input_is_only_text(tmp_path):
    a = make_analysis(evil_id="https://example.invalid/track.png")
    doc = R.write_report(a, tmp_path / "r.html").read_text(encoding="utf-8")
    for _, name, value in parse(doc).attrs:
        if name in ("src", "href"):
            assert "example.invalid" not in value
    assert "https://example.invalid/track.png" in doc  # visible as text in the flagged list


def test_report_images_inline_png(full_report):
    _, doc, _ = full_report
    srcs = [v for t, k, v in parse(doc).attrs if t == "img" and k == "src"]
    # geometry plane, stress-shortening, transitions, cohort paths, one trend per patient (3)
    assert len(srcs) == 4 + 3
    for s in srcs:
        assert base64.b64decode(s.split(",", 1)[1]).startswith(PNG_MAGIC)


def test_report_print_styles(full_report):
    _, doc, _ = full_report
    css = doc[doc.index("<style>") : doc.index("</style>")]
    assert "@media print" in css
    assert re.search(r"\.patient\s*\{[^}]*break-before:\s*page", css)
    assert "background: none" in css


# ------------------------------------------------------------------------------------------
# content
# ------------------------------------------------------------------------------------------


def test_report_summary_counts(full_report):
    """12 rows; rows 1-3 have an error, row 0 a warning (from the findings given)."""
    _, doc, _ = full_report
    summary = doc[doc.index('id="summary"') : doc.index('id="counts"')]
    assert "<th>Rows (studies)</th><td>12</td>" in summary
    assert "<th>Rows with any flag</th><td>4</td>" in summary
    assert re.search(r"Rows with an error[^<]*</th><td>3</td>", summary)
    assert re.search(r"Rows with a warning, no error[^<]*</th><td>1</td>", summary)


def test_report_geometry_by_sex_table():
    """Counts by class and sex equal pandas' own crosstab of the same columns."""
    a = make_analysis(20)
    sec = _counts_section(a.frame())
    frame = a.frame()
    expected = pd.crosstab(frame["geometry"].replace("", "undetermined"), frame["sex"])
    row = re.search(r"<td class=\"nw\">concentric hypertrophy</td>(.*?)</tr>", sec).group(1)
    cells = [int(x) for x in re.findall(r">(\d+)<", row)]
    e = expected.loc["concentric_hypertrophy"]
    assert cells == [int(e.get("F", 0)), int(e.get("M", 0)), int(e.sum())]
    assert "undetermined" in sec


def test_report_flagged_rows_and_reasons(full_report):
    _, doc, _ = full_report
    sec = doc[doc.index('id="flagged"') : doc.index('id="figures"')]
    assert "lvids_not_below_lvidd" in sec and "LVIDs is not smaller than LVIDd" in sec
    assert "mm read as cm." in sec  # file-level finding
    assert "S0001" in sec and "S0003" in sec  # rows 1..3 by study id
    assert sec.index("S0001") < sec.index("S0000")  # errors first


def test_report_caps_long_lists(tmp_path):
    a = make_analysis(40, n_flagged=30)
    doc = R.write_report(
        a, tmp_path / "r.html", tracking=make_tracking(5), max_flagged_rows=5, max_patient_pages=2
    ).read_text(encoding="utf-8")
    assert "showing the first 5 of 31 rows with an error or a warning" in doc
    assert doc.count('class="patient"') == 2
    assert "pages for the first 2 of 5 patients" in doc


def test_report_caution_and_unverified_values(full_report):
    """The caution (project rule) and the from-memory midwall/cESS line (sources.md:
    de Simone 1994 coefficients not found) are listed as unverified."""
    _, doc, _ = full_report
    assert "supports, and never replaces, a qualified clinician" in doc
    assert "reference values" in doc
    methods = doc[doc.index('id="methods"') :]
    unverified = methods[methods.index('id="unverified"') :]
    assert "midwall_stress_line: intercept_pct" in unverified
    assert "from memory (unverified)" in unverified
    assert "constant 1.35 from memory" in methods


def test_report_reference_set_with_sources_vs_lang_2015(full_report):
    """The cut-offs table shows > 95 (women) / > 115 g/m2 (men) with Lang 2015 as source.

    Lang RM et al., J Am Soc Echocardiogr 2015;28:1-39.
    """
    _, doc, _ = full_report
    methods = doc[doc.index('id="methods"') :]
    assert "&gt; 95<" in methods and "&gt; 115<" in methods and "&gt; 0.42<" in methods
    assert "Lang RM et al." in methods
    assert "Reference set: ase_eacvi_2015" in methods


def test_report_patient_pages(full_report):
    """One page per patient with its verdict; the LSC stated is 35 g (Palmieri V et al.,
    J Am Coll Cardiol 1999;34:1625)."""
    _, doc, _ = full_report
    assert doc.count('class="patient"') == 3
    assert "Patient " + html.escape(EVIL) in doc
    assert "regressed" in doc and "LV mass fell 50 g" in doc
    assert "least significant change of LV mass, 35 g" in doc


def test_report_writes_figure_files(full_report):
    _, _, d = full_report
    names = sorted(p.name for p in (d / "figs").iterdir())
    for stem in ("geometry_plane", "stress_shortening", "transitions", "geometry_paths"):
        assert f"{stem}.png" in names and f"{stem}.svg" in names
    trends = [n for n in names if n.startswith("trend_") and n.endswith(".png")]
    assert len(trends) == 3
    assert all(re.fullmatch(r"trend_\d{4}_[A-Za-z0-9._-]+\.png", n) for n in trends)
    assert not [n for n in names if "tmp" in n]


# ------------------------------------------------------------------------------------------
# writing
# ------------------------------------------------------------------------------------------


def test_report_atomic_failure_keeps_old_file(tmp_path, monkeypatch):
    out = tmp_path / "r.html"
    out.write_text("old report", encoding="utf-8")

    def boom(*args, **kwargs):
        raise RuntimeError("figure failed")

    monkeypatch.setattr(figures_save, "to_png", boom)
    with pytest.raises(RuntimeError, match="figure failed"):
        R.write_report(make_analysis(), out)
    assert out.read_text(encoding="utf-8") == "old report"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["r.html"]


def test_report_missing_folder_is_clear(tmp_path):
    from wallstress.errors import OutputError

    with pytest.raises(OutputError, match="does not exist"):
        R.write_report(make_analysis(), tmp_path / "nope" / "r.html")


def test_report_bad_cap_names_argument(tmp_path):
    with pytest.raises(ValueError, match="max_patient_pages=-1"):
        R.write_report(make_analysis(), tmp_path / "r.html", max_patient_pages=-1)


def test_report_tolerates_sparse_inputs(tmp_path):
    """Missing columns, no findings, no methods: a report is still written."""
    canonical = pd.DataFrame({"sex": ["F", "M"]})
    outputs = pd.DataFrame({"rwt": [0.4, np.nan]})
    a = Analysis(canonical, canonical, outputs, fnd.empty(), {})
    t = SimpleNamespace(visits=pd.DataFrame({"patient_id": ["A"]}))
    doc = R.write_report(a, tmp_path / "r.html", tracking=t).read_text(encoding="utf-8")
    assert "Batch summary" in doc and "No row has a finding." in doc
    assert parse(doc).errors == []


def test_fmt_values():
    """Display rounding: whole grams, one decimal for indexes, three for ratios (common practice)."""
    assert _fmt(181.976) == "182"
    assert _fmt(95.44) == "95.4"
    assert _fmt(0.4235) == "0.423"
    assert _fmt(float("nan")) == "" and _fmt(None) == "" and _fmt(pd.NaT) == ""
    assert _fmt(pd.Timestamp("2021-03-04")) == "2021-03-04"
    assert _fmt(np.True_) == "yes"
