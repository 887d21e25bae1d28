"""Writers: xlsx splice vs the openpyxl copy path, fast CSV vs DataFrame.to_csv (not a test).

Usage: ``python benchmarks/bench_writers.py [--xlsx-rows 10000 100000] [--csv-rows 300000]``

A user's study list (16 columns, openpyxl write-only) gets a results sheet of 50 columns (40
floats, 5 texts incl. formula-like text, 2 integers, a boolean, a date, a flags column); the same
table is written as CSV. Times are wall-clock seconds in this process; ratios are within one run.
All data are invented.
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd


def results_table(n: int, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    cols: dict[str, object] = {}
    for j in range(40):
        x = rng.normal(100, 30, n)
        x[rng.random(n) < 0.02] = np.nan
        cols[f"measure_{j}_g"] = x
    for j in range(4):
        cols[f"text_{j}"] = pd.array(
            rng.choice(["normal", "concentric_remodelling", "=1+1", "a,b"], n)
        )
    cols["flags"] = rng.choice(["", "height_typical;lvidd_mm_inferred", "sbp_missing"], n)
    cols["row_i"] = np.arange(n)
    cols["count_i"] = rng.integers(0, 1000, n)
    cols["ok"] = rng.random(n) < 0.5
    cols["study_date"] = pd.Timestamp("2015-01-01") + pd.to_timedelta(rng.integers(0, 3650, n), "D")
    cols["note"] = np.where(rng.random(n) < 0.1, "checked by lab lead", None)
    return pd.DataFrame(cols)


def user_workbook(path: Path, n: int) -> None:
    from openpyxl import Workbook

    rng = np.random.default_rng(1)
    wb = Workbook(write_only=True)
    ws = wb.create_sheet("Studies")
    ws.append([f"c{j}" for j in range(16)])
    data = rng.normal(50, 10, (n, 15)).round(1)
    for i in range(n):
        ws.append([f"S{i}", *data[i].tolist()])
    wb.save(path)


def timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def bench_xlsx(rows: int, folder: Path) -> dict:
    from wallstress.write.parts import WriteReport, _Part
    from wallstress.write.xlsx.splice import splice_sheets
    from wallstress.write.xlsx.workbook import _save_workbook_copy

    src = folder / f"user_{rows}.xlsx"
    user_workbook(src, rows)
    table = results_table(rows)
    t_splice = timed(
        lambda: splice_sheets(src, folder / f"splice_{rows}.xlsx", {"wallstress results": table})
    )
    parts = [_Part("wallstress results", "", table, unit_columns="outputs")]
    t_openpyxl = timed(
        lambda: _save_workbook_copy(
            src,
            folder / f"openpyxl_{rows}.xlsx",
            parts,
            {},
            None,
            "wallstress methods",
            WriteReport(),
        )
    )
    return {"rows": rows, "splice_s": t_splice, "openpyxl_copy_s": t_openpyxl}


def bench_csv(rows: int, folder: Path) -> dict:
    from wallstress.write.fast_csv import write_csv

    table = results_table(rows)
    t_fast = timed(lambda: write_csv(table, folder / "fast.csv"))
    t_pandas = timed(lambda: table.to_csv(folder / "pandas.csv", index=False))
    return {"rows": rows, "fast_csv_s": t_fast, "to_csv_s": t_pandas}


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__)
    parser.add_argument("--xlsx-rows", type=int, nargs="*", default=[10_000, 100_000])
    parser.add_argument("--csv-rows", type=int, nargs="*", default=[300_000])
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        print("| benchmark | rows x cols | new [s] | current [s] | speed-up |")
        print("|---|---:|---:|---:|---:|")
        for n in args.xlsx_rows:
            r = bench_xlsx(n, folder)
            print(
                f"| xlsx: splice vs openpyxl copy | {n:,} x 50 | {r['splice_s']:.2f} | "
                f"{r['openpyxl_copy_s']:.2f} | {r['openpyxl_copy_s'] / r['splice_s']:.1f}x |",
                flush=True,
            )
        for n in args.csv_rows:
            r = bench_csv(n, folder)
            print(
                f"| csv: fast_csv vs to_csv | {n:,} x 50 | {r['fast_csv_s']:.2f} | "
                f"{r['to_csv_s']:.2f} | {r['to_csv_s'] / r['fast_csv_s']:.1f}x |",
                flush=True,
            )


if __name__ == "__main__":
    main()
