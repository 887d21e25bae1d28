"""The cohort store at registry scale (a script, not a test): import and follow-up from the store
against the in-memory path, on invented studies (no real people), in the same run.

1. Import: ``cohort add`` of one CSV export of N studies (text patient ids, ISO text dates) into a
   new store, against reading and analysing the same file in memory (``read_studies`` +
   ``analyse_with_findings``), which the import does first.
2. Follow-up: ``track`` of P patients x V visits from the store (load, re-analyse, track, write
   the workbook) against ``track`` of the same CSV (read, analyse, track, write).

Run:  python benchmarks/bench_cohort.py [n_import] [n_patients] [n_visits]
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from run import invented_studies  # noqa: E402


def clinic_export(n_patients: int, n_visits: int, seed: int = 5) -> pd.DataFrame:
    df = invented_studies(n_patients * n_visits, seed)
    rng = np.random.default_rng(seed)
    df["patient_id"] = np.repeat([f"P{i:07d}" for i in range(n_patients)], n_visits)
    start = pd.Timestamp("2012-01-01") + pd.to_timedelta(rng.integers(0, 3000, n_patients), "D")
    visit = np.tile(np.arange(n_visits), n_patients)
    dates = np.repeat(start.to_numpy(), n_visits) + (visit * 365).astype("timedelta64[D]")
    df["study_date"] = pd.Series(dates).dt.strftime("%Y-%m-%d")
    df["study_id"] = [f"S{i:08d}" for i in range(len(df))]
    return df


def timed(fn):
    t0 = time.perf_counter()
    out = fn()
    return time.perf_counter() - t0, out


def main(argv=None) -> None:
    argv = sys.argv[1:] if argv is None else argv
    n_import = int(argv[0]) if argv else 100_000
    n_patients = int(argv[1]) if len(argv) > 1 else 100_000
    n_visits = int(argv[2]) if len(argv) > 2 else 5
    from wallstress.analysis.pipeline import analyse_with_findings
    from wallstress.follow_up import cohort_add, track_sources
    from wallstress.jobs import track_file
    from wallstress.options import Options
    from wallstress.read.studies import read_studies

    with tempfile.TemporaryDirectory(prefix="wallstress-cohort-bench-") as d:
        d = Path(d)
        src = d / "export.csv"
        clinic_export(n_import // 5, 5).to_csv(src, index=False)

        def in_memory():
            s = read_studies(src)
            return analyse_with_findings(s.table, prior_findings=s.findings, numbers=s.numbers)

        in_memory()  # warm-up (imports)
        t_mem, _ = timed(in_memory)
        t_add, done = timed(lambda: cohort_add(d / "import.duckdb", [src], Options()))
        assert done.imports[0].new_studies == n_import, done.imports
        t_again, _ = timed(lambda: cohort_add(d / "import.duckdb", [src], Options()))
        print(
            f"import {n_import:,} studies: {t_add:.2f} s; read+analyse in memory {t_mem:.2f} s;"
            f" ratio {t_add / t_mem:.2f}; the same file again {t_again:.2f} s (nothing changed)"
        )

        big = d / "clinic.csv"
        clinic_export(n_patients, n_visits).to_csv(big, index=False)
        store = d / "clinic.duckdb"
        t_fill, _ = timed(lambda: cohort_add(store, [big], Options()))
        t_file, r_file = timed(lambda: track_file(big, d / "from_file.parquet"))
        t_store, r_store = timed(lambda: track_sources([store], d / "from_store.parquet"))
        assert r_store.patients == n_patients
        print(
            f"follow-up {n_patients:,} patients x {n_visits} visits: from the store "
            f"{t_store:.2f} s; from the CSV in memory {t_file:.2f} s; ratio "
            f"{t_store / t_file:.2f} (the store filled in {t_fill:.2f} s)"
        )


if __name__ == "__main__":
    main()
