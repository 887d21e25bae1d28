"""The report fits the list: a lab's cross-sectional list (one study per patient, a few repeats)
gets no cohort-over-time section and no patient pages; a clinic's longitudinal list gets both,
with pages only for patients seen twice or more, verdicts in words and one heading per section."""

from __future__ import annotations

import re

import pytest

from wallstress.jobs import report_file, sample_dir


@pytest.fixture(scope="module")
def pages(tmp_path_factory):
    d = tmp_path_factory.mktemp("reports")
    out = {}
    for name in ("fernhill_echo_lab.xlsx", "fernhill_followup.xlsx"):
        out[name] = report_file(sample_dir() / name, d / f"{name}.html").read_text("utf-8")
    return out


def test_cross_sectional_list_has_no_follow_up(pages):
    html = pages["fernhill_echo_lab.xlsx"]
    assert 'id="patients"' not in html and "Cohort over time" not in html
    assert "Batch summary" in html and "Flagged rows and why" in html


def test_longitudinal_list_has_patient_pages_in_words(pages):
    html = pages["fernhill_followup.xlsx"]
    assert "Cohort over time" in html and "<h2>Patient pages</h2>" in html
    headings = re.findall(r"<h[23][^>]*>([^<]*)</h[23]>", html)
    repeated = {h for h in headings if headings.count(h) > 1 and not h.startswith("Patient ")}
    assert not repeated, repeated  # one heading per section
    for code in ("mass_change_within_noise", "mass_rose_beyond_noise", "geometry_unchanged"):
        assert f">{code}<" not in html  # verdicts in words, no raw codes in cells
    # pages only for patients with two or more visits
    n_pages = len(re.findall(r'<div class="patient"', html))
    assert 0 < n_pages <= 48
