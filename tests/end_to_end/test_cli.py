"""The command line, through typer's CliRunner and real files in tmp_path."""

from __future__ import annotations

import hashlib

import pandas as pd
import pytest
from typer.testing import CliRunner

from tests.conftest import canonical_row
from wallstress.cli import app
from wallstress.jobs import sample_dir

runner = CliRunner()


def _sha(p):
    return hashlib.sha256(p.read_bytes()).hexdigest()


@pytest.fixture
def study_csv(tmp_path):
    rows = [canonical_row(study_id=f"S{i}", patient_id=f"P{i}") for i in range(4)]
    rows[1]["lvids_cm"] = 5.5  # LVIDs >= LVIDd: an error finding
    p = tmp_path / "studies.csv"
    pd.DataFrame(rows).to_csv(p, index=False)
    return p


def test_references_lists_sets_and_marks_unverified():
    r = runner.invoke(app, ["references"])
    assert r.exit_code == 0 and "ase_eacvi_2015" in r.output and "esc_esh_2018_h27" in r.output
    r = runner.invoke(app, ["references", "esc_esh_2018_h27"])
    assert r.exit_code == 0
    assert "[from_memory]" in r.output and ">=" in r.output and "Sources:" in r.output


def test_analyse_csv_to_xlsx_input_unchanged(study_csv, tmp_path):
    before = _sha(study_csv)
    out = tmp_path / "out.xlsx"
    r = runner.invoke(app, ["analyse", str(study_csv), "-o", str(out)])
    assert r.exit_code == 0, r.output
    assert _sha(study_csv) == before
    assert out.is_file() and "4 studies" in r.output
    sheets = pd.read_excel(out, sheet_name=None, engine="openpyxl")
    assert len(sheets) >= 3


def test_strict_exits_3_on_error_rows(study_csv, tmp_path):
    r = runner.invoke(
        app, ["analyse", str(study_csv), "-o", str(tmp_path / "o.csv"), "--strict", "-q"]
    )
    assert r.exit_code == 3


def test_missing_file_is_one_line_exit_1(tmp_path):
    r = runner.invoke(app, ["analyse", str(tmp_path / "nope.xlsx")])
    assert r.exit_code == 1
    assert "Traceback" not in r.output
    assert len([x for x in r.output.splitlines() if x.strip()]) == 1


def test_random_bytes_xlsx_is_one_line_exit_1(tmp_path):
    p = tmp_path / "junk.xlsx"
    p.write_bytes(bytes(range(256)) * 20)
    r = runner.invoke(app, ["analyse", str(p)])
    assert r.exit_code == 1 and "Traceback" not in r.output and "junk.xlsx" in r.output


def test_output_equal_to_input_is_refused(study_csv):
    before = _sha(study_csv)
    r = runner.invoke(app, ["analyse", str(study_csv), "-o", str(study_csv)])
    assert r.exit_code == 1 and "in-place" in r.output
    assert _sha(study_csv) == before


def test_unknown_reference_set_says_which_exist(study_csv, tmp_path):
    r = runner.invoke(
        app, ["analyse", str(study_csv), "-o", str(tmp_path / "o.csv"), "--reference", "nope"]
    )
    assert r.exit_code == 1 and "ase_eacvi_2015" in r.output


def test_bad_option_value_is_usage_error(study_csv):
    r = runner.invoke(app, ["analyse", str(study_csv), "--bsa", "dubios"])
    assert r.exit_code == 2


def test_template_writes_workbook(tmp_path):
    out = tmp_path / "t.xlsx"
    r = runner.invoke(app, ["template", "-o", str(out)])
    assert r.exit_code == 0 and out.is_file()


def test_track_on_sample_cohort(tmp_path):
    out = tmp_path / "fu.xlsx"
    r = runner.invoke(app, ["track", str(sample_dir() / "fernhill_followup.xlsx"), "-o", str(out)])
    assert r.exit_code == 0, r.output
    sheets = pd.read_excel(out, sheet_name=None, engine="openpyxl")
    names = " ".join(sheets)
    assert "patients" in names and "transitions" in names


def test_demo_runs_end_to_end(tmp_path):
    r = runner.invoke(app, ["demo", str(tmp_path / "demo")])
    assert r.exit_code == 0, r.output
    made = {p.name for p in (tmp_path / "demo").iterdir()}
    assert "fernhill_echo_lab.wallstress.xlsx" in made and "fernhill_followup.report.html" in made
    assert "clinician" in r.output


def test_report_draws_cutoffs_from_any_folder(tmp_path, monkeypatch):
    """Regression: the bundled set must be found by name wherever the command runs (Lang 2015: > 95
    g/m2 women, > 115 g/m2 men, drawn on the geometry plane)."""
    from wallstress.figures.geometry_plane import geometry_plane
    from wallstress.jobs import _read_and_analyse
    from wallstress.options import Options
    from wallstress.report.inputs import _resolve_reference_set

    monkeypatch.chdir(tmp_path)
    _, analysis = _read_and_analyse(sample_dir() / "fernhill_echo_lab.xlsx", Options())
    ref, problem = _resolve_reference_set(analysis, None)
    assert problem == "" and ref.name == "ase_eacvi_2015"
    fig = geometry_plane(analysis.frame(), ref)
    xs = {round(line.get_xdata()[0], 6) for line in fig.axes[0].get_lines()}
    assert {95.0, 115.0} <= xs


def test_chunked_analyse_matches_in_memory(study_csv, tmp_path):
    """--chunk-rows streams the same results as the in-memory run (row order and values)."""
    whole, chunked = tmp_path / "whole.csv", tmp_path / "chunked.csv"
    assert runner.invoke(app, ["analyse", str(study_csv), "-o", str(whole), "-q"]).exit_code == 0
    r = runner.invoke(app, ["analyse", str(study_csv), "-o", str(chunked), "--chunk-rows", "3"])
    assert r.exit_code == 0, r.output
    assert "in 2 chunks" in r.output
    a, b = pd.read_csv(whole), pd.read_csv(chunked)
    pd.testing.assert_frame_equal(a, b)


def test_chunked_refuses_workbooks(tmp_path):
    r = runner.invoke(
        app,
        [
            "analyse",
            str(sample_dir() / "fernhill_echo_lab.xlsx"),
            "-o",
            str(tmp_path / "o.csv"),
            "--chunk-rows",
            "10",
        ],
    )
    assert r.exit_code == 1 and "chunk-rows" in r.output
