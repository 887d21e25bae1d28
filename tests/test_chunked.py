"""Chunked file-to-file analysis (wallstress.chunked.analyse_chunked).

The reference for every equality check is the in-memory path on the same file
(``wallstress.jobs.analyse_file`` / ``wallstress.analyse``), whose values are themselves tested against
the published formulas in test_pipeline.py; one worked example is checked again here through the
chunked path. Invented data only (no real people).
"""

from __future__ import annotations

import hashlib
import json

import numpy as np
import pandas as pd
import pytest

import wallstress
from tests.conftest import canonical_row
from wallstress import Options
from wallstress import chunked as scale
from wallstress.errors import InputError, OutputError
from wallstress.jobs import analyse_file

CHUNK = 7


def invented_studies(n: int, seed: int = 11, *, headers: str = "canonical") -> pd.DataFrame:
    """Invented studies (no real people): plausible adult dimensions, a few unusable values."""
    rng = np.random.default_rng(seed)
    lvidd = rng.normal(4.8, 0.5, n).round(2)
    df = pd.DataFrame(
        {
            "study_id": [f"E{i:05d}" for i in range(n)],
            "patient_id": [f"P{i:05d}" for i in range(n)],
            "study_date": "2023-05-04",
            "sex": rng.choice(["F", "M", "", "f"], n, p=[0.45, 0.45, 0.05, 0.05]),
            "height_cm": rng.normal(170, 9, n).round(1),
            "weight_kg": rng.normal(78, 12, n).round(1),
            "sbp_mmhg": rng.normal(138, 15, n).round(0),
            "dbp_mmhg": rng.normal(82, 9, n).round(0),
            "ivsd_cm": rng.normal(1.0, 0.15, n).round(2),
            "lvidd_cm": lvidd,
            "pwd_cm": rng.normal(0.95, 0.12, n).round(2),
            "lvids_cm": (lvidd * rng.normal(0.64, 0.06, n)).round(2),
            "pws_cm": rng.normal(1.5, 0.2, n).round(2),
            "comment": rng.choice(["", "=HYPERLINK(1)", "ok"], n),
        }
    )
    if n > 3:
        df.loc[1, "lvidd_cm"] = -4.0  # impossible: flagged, never dropped
        df.loc[2, "lvids_cm"] = df.loc[2, "lvidd_cm"] + 0.3  # systolic not below diastolic
        df.loc[3, "sbp_mmhg"] = np.nan
    if headers == "lab":  # the lab's own headers in mm, no unit stated: units are inferred
        for c in ("ivsd_cm", "lvidd_cm", "pwd_cm", "lvids_cm", "pws_cm"):
            df[c] = (df[c] * 10).round(1)
        df = df.rename(
            columns={
                "ivsd_cm": "IVSd",
                "lvidd_cm": "LVIDd",
                "pwd_cm": "PWd",
                "lvids_cm": "LVIDs",
                "pws_cm": "PWs",
                "height_cm": "Height",
                "weight_kg": "Weight",
            }
        )
    return df


def _read(path):
    return pd.read_csv(path) if str(path).endswith(".csv") else pd.read_parquet(path)


def _write_input(df: pd.DataFrame, path):
    if str(path).endswith(".csv"):
        df.to_csv(path, index=False)
    else:
        df.to_parquet(path, index=False)
    return path


@pytest.mark.parametrize("inp", ["studies.csv", "studies.parquet"])
@pytest.mark.parametrize("ext", ["csv", "parquet"])
def test_chunked_equals_in_memory(tmp_path, inp, ext):
    """Reference: the in-memory path on the same file (analyse_file). Every row once, in order, same
    values, flags, findings (with global row numbers) and counts (common practice, no source)."""
    src = _write_input(invented_studies(52, headers="lab"), tmp_path / inp)
    mem = analyse_file(src, tmp_path / f"mem.{ext}")
    res = scale.analyse_chunked(src, tmp_path / f"chunked.{ext}", chunk_rows=CHUNK)
    assert res.chunks == 8 and res.rows == 52
    pd.testing.assert_frame_equal(
        _read(tmp_path / f"chunked.{ext}"), _read(tmp_path / f"mem.{ext}")
    )
    got_f, mem_f = (
        _read(tmp_path / f"chunked.findings.{ext}"),
        _read(tmp_path / f"mem.findings.{ext}"),
    )
    # file-level unit notes quote the median of the rows seen (the first chunk): same code, column,
    # severity and unit; only the quoted median may differ
    same = ["row", "column", "field", "severity", "code"]
    pd.testing.assert_frame_equal(got_f[same], mem_f[same])
    rows = mem_f["row"] >= 0
    pd.testing.assert_frame_equal(got_f[rows], mem_f[rows])
    counts = {k: v for k, v in mem.analysis.methods["counts"].items()}
    assert res.methods["counts"] == counts
    assert res.written == [
        tmp_path / f"chunked.{ext}",
        tmp_path / f"chunked.findings.{ext}",
        tmp_path / "chunked.methods.json",
    ]


def test_chunked_equals_analyse_on_the_table(tmp_path):
    """Reference: wallstress.analyse on the table as read (common practice, no source)."""
    df = invented_studies(30)
    src = _write_input(df, tmp_path / "s.parquet")
    scale.analyse_chunked(src, tmp_path / "out.parquet", chunk_rows=4)
    expected = wallstress.analyse(pd.read_parquet(src))
    got = pd.read_parquet(tmp_path / "out.parquet")
    pd.testing.assert_frame_equal(got, expected, check_dtype=False)


def test_worked_example_through_chunks_vs_devereux_1986(tmp_path):
    """Devereux RB et al., Am J Cardiol 1986;57:450 (ASE-corrected cube): 1.0/5.0/1.0 cm -> 181.976 g
    (computed in ../shared/sources.md); Teichholz LE et al., Am J Cardiol 1976;37:7: 5.0 cm -> 118.243 mL.
    Rows 0 and 2 carry the example; the chunk boundary falls between them."""
    rows = [canonical_row(study_id=f"S{i}", lvidd_cm=5.0 if i != 1 else 4.5) for i in range(3)]
    src = _write_input(pd.DataFrame(rows), tmp_path / "w.csv")
    scale.analyse_chunked(src, tmp_path / "w.out.csv", chunk_rows=2)
    out = pd.read_csv(tmp_path / "w.out.csv")
    assert out["study_id"].tolist() == ["S0", "S1", "S2"]
    for i in (0, 2):
        assert out.loc[i, "lv_mass_g"] == pytest.approx(181.976, abs=5e-4)
        assert out.loc[i, "edv_teichholz_ml"] == pytest.approx(118.243, abs=5e-4)


@pytest.mark.parametrize("n", [1, CHUNK - 1, CHUNK, CHUNK + 1, 2 * CHUNK + 1])
@pytest.mark.parametrize("ext", ["csv", "parquet"])
def test_chunk_boundaries(tmp_path, n, ext):
    """Odd sizes around the chunk size: every row comes out once, in order, as in memory (common
    practice, no source)."""
    src = _write_input(invented_studies(n, seed=n), tmp_path / f"b.{ext}")
    analyse_file(src, tmp_path / f"mem.{ext}")
    res = scale.analyse_chunked(src, tmp_path / f"chk.{ext}", chunk_rows=CHUNK)
    got = _read(tmp_path / f"chk.{ext}")
    assert res.rows == n == len(got)
    assert res.chunks == -(-n // CHUNK)
    assert got["study_id"].tolist() == [f"E{i:05d}" for i in range(n)]
    pd.testing.assert_frame_equal(got, _read(tmp_path / f"mem.{ext}"))


def test_csv_trailing_blank_rows_dropped_middle_blank_rows_kept(tmp_path):
    """As the in-memory reader: empty rows at the end of a CSV are not studies; an empty row between
    studies stays a (flagged) row, so that row numbers match the file (common practice, no source)."""
    df = invented_studies(9)
    text = df.to_csv(index=False)
    lines = text.splitlines()
    blank = "," * (df.shape[1] - 1)
    lines = lines[:5] + [blank] + lines[5:] + [blank, blank, ""]
    src = tmp_path / "blank.csv"
    src.write_text("\n".join(lines) + "\n", encoding="utf-8")
    analyse_file(src, tmp_path / "mem.csv")
    res = scale.analyse_chunked(src, tmp_path / "chk.csv", chunk_rows=3)
    assert res.rows == 10
    pd.testing.assert_frame_equal(
        pd.read_csv(tmp_path / "chk.csv"), pd.read_csv(tmp_path / "mem.csv")
    )


def test_semicolon_decimal_comma_csv(tmp_path):
    """A European export (';' delimiter, decimal comma) is written back the same way, as in memory
    (common practice, no source)."""
    df = invented_studies(12)
    src = tmp_path / "eu.csv"
    df.to_csv(src, index=False, sep=";", decimal=",")
    analyse_file(src, tmp_path / "mem.csv")
    scale.analyse_chunked(src, tmp_path / "chk.csv", chunk_rows=5)
    assert (tmp_path / "chk.csv").read_bytes() == (tmp_path / "mem.csv").read_bytes()


def test_methods_record(tmp_path):
    """Input SHA-256 by streaming equals hashlib over the whole file; counts summed; chunking limits
    and the clinical caution are recorded (common practice, no source)."""
    src = _write_input(invented_studies(20, headers="lab"), tmp_path / "m.csv")
    res = scale.analyse_chunked(src, tmp_path / "m.out.csv", chunk_rows=6)
    record = json.loads((tmp_path / "m.out.methods.json").read_text(encoding="utf-8"))
    assert record["input"]["sha256"] == hashlib.sha256(src.read_bytes()).hexdigest()
    assert record["counts"]["rows"] == 20
    assert record["chunked"]["chunks"] == 4
    assert any("duplicate" in x for x in record["chunked"]["limits"])
    assert set(record["chunked"]["units_held_from_first_chunk"]) >= {"IVSd", "LVIDd", "PWd"}
    assert any("never replaces" in c for c in record["cautions"])
    for key in ("counts", "input", "chunked", "cautions"):
        assert res.methods[key] == record[key]


def test_units_are_held_from_the_first_chunk(tmp_path):
    """Units decided once for the file: later rows whose values alone would look like cm are still
    read in the unit inferred on the first chunk (mm), so a column never changes unit mid-file and a
    10x error is flagged, never silent (common practice, no source)."""
    df = invented_studies(10, headers="lab")
    df.loc[5:, "LVIDd"] = 4.8  # looks like cm; read as mm it is 0.48 cm: impossible
    src = _write_input(df, tmp_path / "u.csv")
    res = scale.analyse_chunked(src, tmp_path / "u.out.csv", chunk_rows=5)
    assert res.methods["chunked"]["units_held_from_first_chunk"]["LVIDd"] == "LVIDd (mm)"
    out = pd.read_csv(tmp_path / "u.out.csv", keep_default_na=False)
    assert out.loc[5:, "lv_mass_g"].eq("").all()
    assert out.loc[5:, "flags"].str.contains("lvidd_cm_impossible").all()
    findings = pd.read_csv(tmp_path / "u.out.findings.csv")
    assert set(findings.loc[findings["code"] == "lvidd_cm_impossible", "column"]) == {"LVIDd"}


def test_failure_mid_way_leaves_no_output_and_keeps_the_previous(tmp_path, monkeypatch):
    """Atomic writes (design invariant): an exception in a later chunk leaves the previous outputs
    byte for byte and no temporary files (common practice, no source)."""
    src = _write_input(invented_studies(20), tmp_path / "a.csv")
    out = tmp_path / "a.out.csv"
    scale.analyse_chunked(src, out, chunk_rows=5)
    before = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    real = scale.analyse_with_findings
    calls = {"n": 0}

    def failing(*args, **kwargs):
        calls["n"] += 1
        if calls["n"] == 3:
            raise RuntimeError("disk on fire")
        return real(*args, **kwargs)

    monkeypatch.setattr(scale, "analyse_with_findings", failing)
    with pytest.raises(RuntimeError, match="disk on fire"):
        scale.analyse_chunked(src, out, chunk_rows=5)
    after = {p.name: p.read_bytes() for p in tmp_path.iterdir()}
    assert after == before
    calls["n"] = 0
    with pytest.raises(RuntimeError):
        scale.analyse_chunked(src, tmp_path / "fresh.parquet", chunk_rows=5)
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(before)


def test_empty_study_list(tmp_path):
    """A header and no rows: headers written, zero rows, no error (common practice, no source)."""
    src = _write_input(invented_studies(5).iloc[:0], tmp_path / "e.parquet")
    res = scale.analyse_chunked(src, tmp_path / "e.out.csv", chunk_rows=5)
    got = pd.read_csv(tmp_path / "e.out.csv")
    assert res.rows == 0 and len(got) == 0 and "lv_mass_g" in got.columns


def test_refusals_name_the_fix(tmp_path):
    """Wrong calls raise with the value and what to pass instead (style.md)."""
    src = _write_input(invented_studies(5), tmp_path / "r.csv")
    with pytest.raises(ValueError, match=r"chunk_rows=0 .*whole number >= 1"):
        scale.analyse_chunked(src, tmp_path / "x.csv", chunk_rows=0)
    with pytest.raises(OutputError, match=r"\.csv or \.parquet"):
        scale.analyse_chunked(src, tmp_path / "x.xlsx")
    with pytest.raises(OutputError, match="overwrite your input"):
        scale.analyse_chunked(src, src)
    book = tmp_path / "book.xlsx"
    invented_studies(3).to_excel(book, index=False)
    with pytest.raises(InputError, match="without --chunk-rows"):
        scale.analyse_chunked(book, tmp_path / "x.csv")
    with pytest.raises(InputError, match="not found"):
        scale.analyse_chunked(tmp_path / "missing.csv", tmp_path / "x.csv")


def test_progress_callback(tmp_path):
    """progress(rows_done, rows_total) after each chunk; the total is known for parquet only."""
    seen = []
    src = _write_input(invented_studies(11), tmp_path / "p.parquet")
    scale.analyse_chunked(
        src, tmp_path / "p.out.parquet", chunk_rows=4, progress=lambda d, t: seen.append((d, t))
    )
    assert seen == [(4, 11), (8, 11), (11, 11)]


def test_duplicates_across_chunks_are_a_stated_limit(tmp_path):
    """Duplicate study ids in different chunks are not flagged (stated in the methods record);
    within one chunk they are, as in memory (common practice, no source)."""
    df = invented_studies(6)
    df.loc[[0, 1, 5], "study_id"] = "SAME"
    src = _write_input(df, tmp_path / "d.csv")
    res = scale.analyse_chunked(src, tmp_path / "d.out.csv", chunk_rows=3)
    flags = pd.read_csv(tmp_path / "d.out.csv", keep_default_na=False)["flags"]
    assert "duplicate_study_id" in flags[0] and "duplicate_study_id" in flags[1]
    assert "duplicate_study_id" not in flags[5]
    assert any("duplicate" in x for x in res.methods["chunked"]["limits"])


def test_lab_column_map_is_used(tmp_path):
    """Options.columns (the lab's header -> field map) reaches the chunked reader as it reaches the
    in-memory one (common practice, no source)."""
    df = invented_studies(9).rename(columns={"ivsd_cm": "sept", "pwd_cm": "post"})
    src = _write_input(df, tmp_path / "map.csv")
    opts = Options(columns={"sept": "ivsd_cm", "post": "pwd_cm"})
    analyse_file(src, tmp_path / "mem.csv", opts)
    scale.analyse_chunked(src, tmp_path / "chk.csv", opts, chunk_rows=4)
    got = pd.read_csv(tmp_path / "chk.csv")
    pd.testing.assert_frame_equal(got, pd.read_csv(tmp_path / "mem.csv"))
    assert got["lv_mass_g"].notna().sum() >= 7
