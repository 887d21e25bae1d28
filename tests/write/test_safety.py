"""Never-harm helpers: atomic writes, hashes, backups, formula-like text, workbook parts.

All file tests use real files in ``tmp_path``.
"""

from __future__ import annotations

import hashlib
import os
import re
import shutil
import zipfile

import numpy as np
import openpyxl
import pandas as pd
import pytest
from openpyxl.comments import Comment

from wallstress.errors import OutputError
from wallstress.findings import FINDING_COLUMNS
from wallstress.write import formula_text, safety


def _leftovers(folder):
    return sorted(p.name for p in folder.iterdir() if "wallstress-tmp" in p.name)


# ---------------------------------------------------------------------------------------- hashes


def test_sha256_file_vs_fips_180_2_appendix_b1(tmp_path):
    """SHA-256("abc") = ba7816bf...f20015ad (NIST FIPS 180-2, 2002, Appendix B.1, one-block message)."""
    p = tmp_path / "abc.bin"
    p.write_bytes(b"abc")
    assert safety.sha256_file(p) == (
        "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"
    )


def test_sha256_file_vs_hashlib_multi_chunk(tmp_path):
    """Chunked hashing equals hashlib on the whole buffer (general-purpose reference library)."""
    data = os.urandom(3 * 1024 + 17)
    p = tmp_path / "x.bin"
    p.write_bytes(data)
    assert safety.sha256_file(p, chunk_bytes=1000) == hashlib.sha256(data).hexdigest()


def test_same_file_through_symlink_and_dotdot(tmp_path):
    """Two spellings of one file are the same file (common practice, no source)."""
    real = tmp_path / "a.csv"
    real.write_text("x")
    (tmp_path / "sub").mkdir()
    link = tmp_path / "link.csv"
    link.symlink_to(real)
    assert safety.same_file(link, real)
    assert safety.same_file(tmp_path / "sub" / ".." / "a.csv", real)
    assert not safety.same_file(tmp_path / "b.csv", real)
    assert not safety.same_file(None, real)


# ---------------------------------------------------------------------------------------- atomic


def test_atomic_path_writes_and_leaves_no_temporary(tmp_path):
    target = tmp_path / "out.txt"
    with safety.atomic_path(target) as tmp:
        assert tmp.parent == tmp_path  # same folder, so os.replace is atomic
        tmp.write_text("new")
        assert not target.exists()  # nothing visible until the block ends
    assert target.read_text() == "new"
    assert _leftovers(tmp_path) == []


@pytest.mark.parametrize("exc", [RuntimeError("disk full"), KeyboardInterrupt()])
def test_atomic_path_failure_keeps_previous_output(tmp_path, exc):
    """A failure midway (also Ctrl-C) leaves the previous file intact and no half-written file."""
    target = tmp_path / "out.txt"
    target.write_text("previous")
    with pytest.raises(type(exc)), safety.atomic_path(target) as tmp:
        tmp.write_text("half")
        raise exc
    assert target.read_text() == "previous"
    assert _leftovers(tmp_path) == []


def test_atomic_files_all_or_nothing(tmp_path):
    a, b = tmp_path / "a.csv", tmp_path / "b.json"
    a.write_text("old a")
    with pytest.raises(ValueError), safety.atomic_files() as batch:
        batch.path(a).write_text("new a")
        batch.path(b).write_text("new b")
        raise ValueError("boom")
    assert a.read_text() == "old a" and not b.exists()
    with safety.atomic_files() as batch:
        batch.path(a).write_text("new a")
        batch.path(b).write_text("new b")
    assert a.read_text() == "new a" and b.read_text() == "new b"
    assert _leftovers(tmp_path) == []


def test_atomic_missing_folder_names_it(tmp_path):
    with (
        pytest.raises(OutputError, match="does not exist"),
        safety.atomic_path(tmp_path / "nope" / "x.csv"),
    ):
        pass


def test_atomic_unwritable_folder_simulated(tmp_path, monkeypatch):
    def refuse(*a, **k):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(safety.tempfile, "mkstemp", refuse)
    with (
        pytest.raises(OutputError, match="cannot write in folder"),
        safety.atomic_path(tmp_path / "x.csv"),
    ):
        pass


@pytest.mark.skipif(
    os.name != "posix" or os.geteuid() == 0, reason="root ignores folder permissions"
)
def test_atomic_unwritable_folder_real(tmp_path):
    folder = tmp_path / "ro"
    folder.mkdir()
    (folder / "x.csv").write_text("previous")
    folder.chmod(0o500)
    try:
        with (
            pytest.raises(OutputError, match="cannot write"),
            safety.atomic_path(folder / "x.csv") as t,
        ):
            t.write_text("new")
        assert (folder / "x.csv").read_text() == "previous"
    finally:
        folder.chmod(0o700)


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
def test_atomic_new_file_gets_umask_mode_not_private_temp_mode(tmp_path):
    """mkstemp files are 0600; a finished output gets the usual 0666 & ~umask (common practice, no source)."""
    target = tmp_path / "out.csv"
    with safety.atomic_path(target) as tmp:
        tmp.write_text("x")
    umask = os.umask(0)
    os.umask(umask)
    assert target.stat().st_mode & 0o777 == 0o666 & ~umask


# ---------------------------------------------------------------------------------------- backup


def test_backup_copy_is_byte_identical_and_named(tmp_path):
    src = tmp_path / "lab list.xlsx"
    src.write_bytes(os.urandom(5000))
    first = safety.backup_copy(src)
    second = safety.backup_copy(src)  # same second: must not overwrite the first
    assert re.fullmatch(r"lab list\.wallstress-backup-\d{8}-\d{6}\.xlsx", first.name)
    assert first != second and second.exists()
    for b in (first, second):
        assert b.read_bytes() == src.read_bytes()
    assert _leftovers(tmp_path) == []


# ---------------------------------------------------------------------------------------- formula-like


def test_formula_like_prefixes_vs_csv_injection_list():
    """Triggers = + - @, tab and CR (OWASP "CSV Injection" page; from memory)."""
    assert set(formula_text.FORMULA_PREFIXES) == {"=", "+", "-", "@", "\t", "\r"}
    col = pd.Series(
        ['=HYPERLINK("http://x")', "+A1", "@SUM(A1)", "-2+3", "\tcmd", "\rx", "ok", "a=b", None, 5],
        dtype=object,
    )
    assert formula_text.formula_like_mask(col).tolist() == [
        True, True, True, True, True, True, False, False, False, False,
    ]  # fmt: skip


def test_formula_like_numbers_and_dates_never_flagged():
    """Negative numbers are numbers, not text, and a number written as text ("-3", "+4.5", "-1e3")
    is read by a spreadsheet program as that number, never run (common practice, no source)."""
    text_numbers = pd.Series(["-3", "+4.5", "-1e3", " -0.5 ", "-2+3", "+A1"], dtype=object)
    assert formula_text.formula_like_mask(text_numbers).tolist() == [
        False, False, False, False, True, True,
    ]  # fmt: skip
    assert not formula_text.formula_like_mask(pd.Series([-1.5, np.nan, 3.0])).any()
    assert not formula_text.formula_like_mask(pd.Series([-1, 2])).any()
    assert not formula_text.formula_like_mask(pd.to_datetime(pd.Series(["2020-01-01", None]))).any()
    assert not formula_text.formula_like_mask(pd.Series([np.nan, None], dtype=object)).any()
    assert formula_text.formula_like_mask(pd.Series(["=1"], dtype="string")).all()


def test_formula_like_findings_table():
    table = pd.DataFrame({"note": ["fine", "=1+1", "@x"], "lv_mass_g": [-1.0, 2.0, 3.0]})
    f = formula_text.formula_like_findings(table)
    assert list(f.columns) == list(FINDING_COLUMNS)
    assert f["row"].tolist() == [1, 2]
    assert set(f["code"]) == {"formula_like_text"} and set(f["severity"]) == {"warning"}
    assert f["column"].tolist() == ["note", "note"] and f["value"].tolist() == ["=1+1", "@x"]
    assert formula_text.formula_like_findings(table[["lv_mass_g"]]).empty


def test_escape_formula_text_quotes_only_text():
    table = pd.DataFrame({"note": ["=1+1", "ok", None], "x": [-1.0, np.nan, 2.0]})
    before = table.copy()
    out = formula_text.escape_formula_text(table)
    assert out["note"].tolist()[:2] == ["'=1+1", "ok"] and pd.isna(out["note"].iloc[2])
    assert out["note"].dtype == table["note"].dtype
    assert out["x"].tolist()[0] == -1.0
    pd.testing.assert_frame_equal(table, before)  # input not mutated


def test_hyperlink_like_mask():
    col = pd.Series(
        ["http://x.org", "see www.x.org", "www.x.org", "mailto:a@b", r"\\srv\share", "ok"]
    )
    assert formula_text.hyperlink_like_mask(col).tolist() == [True, False, True, True, True, False]


# ---------------------------------------------------------------------------------------- parts


def _plain_workbook(path, comment=True):
    wb = openpyxl.Workbook()
    ws = wb.active
    ws["A1"] = "x"
    if comment:
        ws["A1"].comment = Comment("a note", "lab")
    wb.save(path)
    return path


def _with_extra_part(src, dest, name, data):
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dest, "w") as zout:
        for item in zin.infolist():
            zout.writestr(item, zin.read(item.filename))
        zout.writestr(name, data)
    return dest


def test_excel_lock_file(tmp_path):
    wb = tmp_path / "list.xlsx"
    shutil.copyfile(_plain_workbook(tmp_path / "a.xlsx"), wb)
    assert safety.excel_lock_file(wb) is None
    (tmp_path / "~$list.xlsx").write_bytes(b"owner")
    assert safety.excel_lock_file(wb).name == "~$list.xlsx"
