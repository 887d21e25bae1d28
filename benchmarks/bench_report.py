"""The HTML report at registry scale (a script, not a test): time, peak memory and file size of
``wallstress report`` on invented study lists (no real people) of 10^5 and 10^6 studies, each in a
child process; cross-sectional (one study per patient) and longitudinal (each patient 3-4 times).

Run:  python benchmarks/bench_report.py [rows ...]
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from run import child_peak_rss_mib, registry_export  # noqa: E402


def main(argv=None) -> None:
    argv = sys.argv[1:] if argv is None else argv
    sizes = [int(a) for a in argv] or [100_000, 1_000_000]
    with tempfile.TemporaryDirectory(prefix="wallstress-report-bench-") as d:
        d = Path(d)
        for n in sizes:
            for shape, label in (("text_ids", "cross-sectional"), ("repeats", "longitudinal")):
                src = d / f"{shape}_{n}.csv"
                df = registry_export(n, shape)
                if shape == "text_ids":  # one study per patient
                    df["patient_id"] = df["study_id"].str.replace("ST-", "P", regex=False)
                df.to_csv(src, index=False)
                del df
                out = d / f"{shape}_{n}.html"
                code = (
                    "from wallstress.jobs import report_file\n"
                    f"report_file({str(src)!r}, {str(out)!r})\n"
                )
                t0 = time.perf_counter()
                try:
                    peak = child_peak_rss_mib(code)
                except (RuntimeError, subprocess.SubprocessError) as exc:
                    print(f"{n:>9,} {label:16} failed: {exc}")
                    continue
                took = time.perf_counter() - t0
                print(
                    f"{n:>9,} studies, {label:16} {took:7.1f} s  peak RSS {peak:6.0f} MiB  "
                    f"HTML {out.stat().st_size / 2**20:5.1f} MiB",
                    flush=True,
                )


if __name__ == "__main__":
    main()
