"""Every hostile file of the corpus through the command line: one line, the right exit code, no
traceback, and (for files that can be read) outputs written.

Exit codes are the project's own (design.md: 0 the batch ran, 1 the input cannot be used). The
file-format facts behind each case are named in tests/hostile_files.py and tests/read/test_bad_inputs.py;
common practice, no source.
"""

from __future__ import annotations

import re
import subprocess
import sys

import pytest
from typer.testing import CliRunner

from tests import hostile_files as bad_inputs
from wallstress.cli import app

runner = CliRunner()


@pytest.mark.parametrize(
    "name,maker,code,detail", bad_inputs.CLI_CASES, ids=[c[0] for c in bad_inputs.CLI_CASES]
)
@pytest.mark.parametrize("ext", ["xlsx", "csv"])
def test_cli_corpus(tmp_path, name, maker, code, detail, ext):
    """``wallstress analyse FILE -o out.EXT``: exit 0 with outputs, or exit 1 with one line that
    names the file and matches the expected reason; never a traceback or 'unexpected problem'."""
    path = maker(tmp_path)
    out = tmp_path / f"out.{ext}"
    r = runner.invoke(app, ["analyse", str(path), "-o", str(out), "--quiet"])
    text = r.output
    assert "Traceback" not in text and "unexpected problem" not in text, text
    assert r.exit_code == code, text
    if code == 0:
        assert out.exists()
    else:
        lines = [ln for ln in text.splitlines() if ln.strip()]
        assert len(lines) == 1, text
        assert path.name in lines[0]
        assert re.search(detail, lines[0]), lines[0]


def test_cli_wide_csv_to_xlsx_refused(tmp_path):
    """50 x 20,004 columns cannot fit an xlsx sheet (16,384 columns, Excel specifications and
    limits): one line saying to write .csv or .parquet."""
    p = bad_inputs.wide_csv(tmp_path)
    r = runner.invoke(app, ["analyse", str(p), "-o", str(tmp_path / "out.xlsx"), "--quiet"])
    assert r.exit_code == 1
    assert "more than an xlsx sheet holds" in r.output and ".csv" in r.output
    assert not (tmp_path / "out.xlsx").exists()


def test_cli_stray_cells_process_survives(tmp_path):
    """A real process (the crash was an abort of the whole interpreter, exit 134, invisible to an
    in-process runner): exit 0, the results written, and the stray cells named in the findings."""
    p = bad_inputs.stray_cells_xlsx(tmp_path)
    out = tmp_path / "out.csv"
    r = subprocess.run(
        [
            sys.executable,
            "-c",
            "from wallstress.cli import app; app()",
            "analyse",
            str(p),
            "-o",
            str(out),
        ],
        capture_output=True,
        text=True,
        timeout=600,
    )
    assert r.returncode == 0, r.stderr[-2000:]
    findings = (tmp_path / "out.findings.csv").read_text(encoding="utf-8-sig")
    assert "stray_cells_ignored" in findings and "XFD1, A1048576" in findings
