"""Where ``wallstress.analyse`` spends its time and memory at registry scale (issue 7).

A script, not a test: ``python benchmarks/profile_analyse.py [--rows 1000000] [--repeats 3]
[--profile] [--rss]``. Times ``analyse`` against the bare numpy baseline of ``run.py``
(``bare_measures``) on the same invented rows in the same process and prints the best of
``--repeats`` and their ratio; ``--profile`` adds a cProfile listing of one analyse run (top 30 by
cumulative time); ``--rss`` measures the peak RSS of a child process running ``analyse`` alone
against the in-memory size of its input and output tables.
"""

from __future__ import annotations

import argparse
import cProfile
import pstats
import sys
from pathlib import Path

HERE = Path(__file__).resolve().parent
sys.path.insert(0, str(HERE))

from run import bare_measures, best_of, child_peak_rss_mib, invented_studies  # noqa: E402


def main(argv=None) -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--rows", type=int, default=1_000_000)
    p.add_argument("--repeats", type=int, default=3)
    p.add_argument("--profile", action="store_true")
    p.add_argument("--rss", action="store_true")
    a = p.parse_args(argv)

    import wallstress

    wallstress.analyse(invented_studies(100))
    df = invented_studies(a.rows)
    t_bare = best_of(lambda: bare_measures(df), a.repeats)
    t_tool = best_of(lambda: wallstress.analyse(df), a.repeats)
    print(
        f"rows {a.rows:,}: analyse {t_tool:.3f} s, bare numpy {t_bare:.3f} s, ratio {t_tool / t_bare:.2f}"
    )
    if a.profile:
        prof = cProfile.Profile()
        prof.enable()
        wallstress.analyse(df)
        prof.disable()
        pstats.Stats(prof).sort_stats("cumulative").print_stats(30)
    if a.rss:
        code = (
            f"import sys; sys.path.insert(0, {str(HERE)!r})\n"
            "from run import invented_studies\nimport wallstress\n"
            f"df = invented_studies({a.rows})\nout = wallstress.analyse(df)\n"
        )
        base = child_peak_rss_mib("import wallstress, numpy, pandas")
        peak = child_peak_rss_mib(code)
        out = wallstress.analyse(df)
        tables = (df.memory_usage(deep=True).sum() + out.memory_usage(deep=True).sum()) / 2**20
        print(
            f"peak RSS of analyse on {a.rows:,} rows: {peak:.0f} MiB (imports alone {base:.0f} MiB); "
            f"input+output tables {tables:.0f} MiB; ratio {peak / tables:.2f}, above imports "
            f"{(peak - base) / tables:.2f}"
        )


if __name__ == "__main__":
    main()
