"""Speed and memory of wallstress against hand-written baselines measured in the same run.

A script, not a test: ``python benchmarks/run.py [--quick | --full] [--sizes 10000 100000 ...]``.
Every number is a ratio against a baseline timed in this same run on the same invented rows (no
real people), so the results hold on any machine; the absolute times are printed for context only.

1. ``analyse``: ``wallstress.analyse`` (canonical columns in) vs the same formulas written as bare
   numpy expressions below: ``bare_all_measures`` (every column analyse adds but ``flags``, on the
   default options; checked in the same run to give the same numbers and classes) and, for
   comparison with earlier runs, ``bare_measures`` (13 core measures, classes as text). Both build
   their output DataFrame.
2. CSV end to end: in-process ``wallstress.jobs.analyse_file`` (read, analyse, write results,
   findings and methods) vs a pandas script: read_csv, the bare numpy measures, to_csv.
3. xlsx end to end: ``analyse_file`` xlsx -> xlsx vs a bare python-calamine read plus the bare
   measures plus an openpyxl write-only workbook of the same result table.
4. Peak RSS of a child process running ``analyse_file`` (CSV) vs the in-memory size of its input
   table plus the columns analyse adds (``DataFrame.memory_usage(deep=True)``; the result table
   repeats the input's columns, counted once); and of ``analyse_chunked``.
5. Time per row across sizes (linear growth shows as a flat column).
6. The shapes of a real registry export (``SHAPES``: no ids; integer ids and ISO text dates; text
   ids with leading zeros; every study repeated 3-4 times with 1 % typo values), 10^6 rows each:
   ``analyse_with_findings`` vs the bare numpy of every measure, with the spread between turns.
   ``--shapes-only`` runs just these, e.g. on an older checkout put first on ``PYTHONPATH``.
7. CSV end to end on text ids and ISO text dates as well as on plain numbers.

Writes benchmarks/RESULTS.md (machine, versions, table). ``--quick`` finishes in under a minute.
"""

from __future__ import annotations

import argparse
import os
import platform
import subprocess
import sys
import tempfile
import textwrap
import time
from pathlib import Path

import numpy as np
import pandas as pd

HERE = Path(__file__).resolve().parent
TARGETS = {"analyse": 1.5, "csv": 1.3, "xlsx": 1.5, "rss": 2.5}
SHAPE_TARGETS = {"text_ids": 1.3, "repeats": 2.0}  # issue 17


# --------------------------------------------------------------------------------------------------
# invented data


SHAPES = {
    "plain": "no ids, no dates",
    "int_ids": "integer ids, ISO text dates",
    "text_ids": "text ids (ST-0000001, patient P000001), ISO text dates",
    "repeats": "each study repeated 3-4 times (most rows flagged), text ids and dates",
}


def registry_export(n: int, shape: str, seed: int = 7) -> pd.DataFrame:
    """n invented studies in one of the ``SHAPES`` a real registry export has (no real people).

    ``plain`` has integer study ids only; ``int_ids`` adds whole-number patient ids (about 3
    studies per patient) and ISO text dates over ten years; ``text_ids`` writes both ids as text
    with leading zeros (``ST-0000001``, ``P000001``); ``repeats`` is ``text_ids`` made of
    n / 3.5 distinct studies each written 3 or 4 times (same id, same date: every row is a repeat
    and carries a finding), with 1 % of the rows given a typo value (LVIDd in mm in a cm column).
    """
    if shape == "plain":
        return invented_studies(n, seed)
    if shape == "int_ids":
        return invented_studies(n, seed, follow_up=True)
    if shape == "text_ids":
        df = invented_studies(n, seed, follow_up=True)
        df["study_id"] = pd.Series(np.arange(n)).map("ST-{:07d}".format)
        df["patient_id"] = df["patient_id"].map("P{:06d}".format)
        return df
    if shape == "repeats":
        rng = np.random.default_rng(seed + 2)
        distinct = registry_export(max(1, int(n / 3.5)) + 1, "text_ids", seed)
        times = rng.integers(3, 5, len(distinct))
        rows = np.repeat(np.arange(len(distinct)), times)[:n]
        df = distinct.iloc[rows].reset_index(drop=True)
        typo = rng.random(len(df)) < 0.01
        df.loc[typo, "lvidd_cm"] = df.loc[typo, "lvidd_cm"] * 10
        return df
    raise ValueError(f"unknown shape {shape!r}; one of {sorted(SHAPES)}")


def invented_studies(n: int, seed: int = 7, *, follow_up: bool = False) -> pd.DataFrame:
    """n invented echo studies under canonical names (cm, kg, mmHg); no real people.

    ``follow_up`` adds what a registry export also carries: a patient id (whole numbers, about
    3 studies per patient) and the study date as ISO text over ten years.
    """
    if follow_up:
        df = invented_studies(n, seed)
        rng = np.random.default_rng(seed + 1)
        days = pd.to_timedelta(rng.integers(0, 3650, n), unit="D")
        df["patient_id"] = rng.integers(0, max(1, n // 3), n)
        df["study_date"] = pd.Series((pd.Timestamp("2015-01-01") + days).strftime("%Y-%m-%d"))
        return df
    rng = np.random.default_rng(seed)
    sex = np.where(rng.random(n) < 0.5, "F", "M")
    male = sex == "M"
    lvidd = rng.normal(np.where(male, 5.0, 4.6), 0.45)
    ivsd = rng.normal(1.0, 0.15, n)
    pwd = rng.normal(0.95, 0.13, n)
    sbp = rng.normal(138, 18, n)
    return pd.DataFrame(
        {
            "study_id": np.arange(n),
            "sex": sex,
            "age_years": rng.uniform(25, 85, n).round(0),
            "height_cm": rng.normal(np.where(male, 176, 163), 7).round(1),
            "weight_kg": rng.normal(np.where(male, 84, 70), 12).round(1),
            "sbp_mmhg": sbp.round(0),
            "dbp_mmhg": (sbp - rng.normal(55, 10, n)).round(0),
            "hr_bpm": rng.normal(70, 10, n).round(0),
            "ivsd_cm": ivsd.round(2),
            "lvidd_cm": lvidd.round(2),
            "pwd_cm": pwd.round(2),
            "ivss_cm": (ivsd * rng.normal(1.45, 0.15, n)).round(2),
            "lvids_cm": (lvidd * rng.normal(0.64, 0.05, n)).round(2),
            "pws_cm": (pwd * rng.normal(1.55, 0.15, n)).round(2),
        }
    )


# --------------------------------------------------------------------------------------------------
# the baseline: bare numpy expressions of the same published formulas


def bare_measures(df: pd.DataFrame) -> pd.DataFrame:
    """The core measures as bare numpy (no validation, findings, grades or methods record)."""
    h, w = df["height_cm"].to_numpy(float), df["weight_kg"].to_numpy(float)
    ivsd, lvidd, pwd = (df[c].to_numpy(float) for c in ("ivsd_cm", "lvidd_cm", "pwd_cm"))
    lvids, pws, sbp = (df[c].to_numpy(float) for c in ("lvids_cm", "pws_cm", "sbp_mmhg"))
    sex = df["sex"].to_numpy(object)
    bsa = 0.007184 * w**0.425 * h**0.725  # DuBois 1916
    lvm = 0.8 * 1.04 * ((ivsd + lvidd + pwd) ** 3 - lvidd**3) + 0.6  # Devereux 1986
    lvmi = lvm / bsa
    lvmi_h27 = lvm / (h / 100) ** 2.7
    rwt = 2 * pwd / lvidd
    lvh = np.where(sex == "M", lvmi > 115, lvmi > 95)  # Lang 2015
    conc = rwt > 0.42
    geometry = np.where(
        lvh,
        np.where(conc, "concentric_hypertrophy", "eccentric_hypertrophy"),
        np.where(conc, "concentric_remodelling", "normal"),
    )
    edv = 7 / (2.4 + lvidd) * lvidd**3  # Teichholz 1976
    esv = 7 / (2.4 + lvids) * lvids**3
    fs = (lvidd - lvids) / lvidd * 100
    ef = (edv - esv) / edv * 100
    mess = 0.334 * sbp * lvids / (pws * (1 + pws / lvids))  # Grossman 1975
    a = lvids / 2
    b = a + pws
    cess = 1.35 * sbp * a**2 / (b**2 - a**2) * (1 + b**2 / (a + pws / 2) ** 2)  # Gaasch
    hd = (ivsd + pwd) / 2
    outer = lvidd + hd
    inner = (outer**3 - lvidd**3 + lvids**3) ** (1 / 3)
    mfs = (outer - inner) / outer * 100  # Shimizu 1991 two-shell
    out = pd.DataFrame(
        {
            "bsa_m2": bsa,
            "lv_mass_g": lvm,
            "lvmi_bsa_g_m2": lvmi,
            "lvmi_h27_g_m2_7": lvmi_h27,
            "rwt": rwt,
            "geometry": geometry,
            "fs_pct": fs,
            "edv_teichholz_ml": edv,
            "esv_teichholz_ml": esv,
            "ef_teichholz_pct": ef,
            "mess_kdyn_cm2": mess,
            "cess_kdyn_cm2": cess,
            "midwall_fs_pct": mfs,
        },
        index=df.index,
    )
    return pd.concat([df, out], axis=1)


def _constants() -> dict:
    """The default set's cut-offs and the bundled model coefficients, as plain numbers (read once,
    outside the timed part, so the baseline carries no table lookups)."""
    from wallstress.analysis.references import load_set, model_coefficients

    ref = load_set("ase_eacvi_2015")
    cut = {}
    for measure in ("lvmi_bsa_g_m2", "rwt", "edv_index_ml_m2"):
        for sex in ("F", "M"):
            c = ref.cutoff(measure, sex)
            assert c.comparison == ">", (measure, sex, c.comparison)
            cut[measure, sex] = c.value
    grades = {}
    for measure in ("lvmi_bsa_g_m2", "rwt", "lvidd_cm", "ivsd_cm", "pwd_cm"):
        for sex in ("F", "M"):
            grades[measure, sex] = [
                (c.grade, c.comparison, c.value) for c in ref.grades(measure, sex)
            ]
    coef = {k: v.value for k, v in model_coefficients("mass_prediction").items()}
    line = {k: v.value for k, v in model_coefficients("midwall_stress_line").items()}
    from wallstress.analysis.classify import GEOMETRY_4_NAMES, GEOMETRY_8_NAMES

    return {
        "cut": cut,
        "grades": grades,
        "mass": coef,
        "line": line,
        "g4": list(GEOMETRY_4_NAMES),
        "g8": list(GEOMETRY_8_NAMES),
    }


def bare_all_measures(df: pd.DataFrame, k: dict) -> pd.DataFrame:
    """Every measure column ``analyse`` adds except ``flags``, as bare numpy on the default options.

    No validation, unit handling, findings or methods record; classes and grades as Categoricals
    (as ``analyse`` returns them). ``k`` is :func:`_constants`. ``check_same_measures`` confirms,
    in the same run, that this computes what the tool computes.
    """
    col = {
        c: df[c].to_numpy(float)
        for c in (
            "height_cm",
            "weight_kg",
            "ivsd_cm",
            "lvidd_cm",
            "pwd_cm",
            "lvids_cm",
            "pws_cm",
            "sbp_mmhg",
            "hr_bpm",
        )
    }
    h, w, ivsd, lvidd, pwd = (
        col[c] for c in ("height_cm", "weight_kg", "ivsd_cm", "lvidd_cm", "pwd_cm")
    )
    lvids, pws, sbp = col["lvids_cm"], col["pws_cm"], col["sbp_mmhg"]
    sex = df["sex"].to_numpy(object)
    male, female = sex == "M", sex == "F"
    known_sex = male | female
    cut = k["cut"]

    def by_sex(name):
        return np.where(male, cut[name, "M"], cut[name, "F"])

    bsa = 0.007184 * w**0.425 * h**0.725  # DuBois 1916
    lvm = 0.8 * 1.04 * ((ivsd + lvidd + pwd) ** 3 - lvidd**3) + 0.6  # Devereux 1986
    lvmi = lvm / bsa
    lvmi_h27 = lvm / (h / 100) ** 2.7
    lvmi_h = lvm / (h / 100)
    rwt = 2 * pwd / lvidd
    lvh = lvmi > by_sex("lvmi_bsa_g_m2")  # Lang 2015
    conc = rwt > by_sex("rwt")
    ok4 = known_sex & ~np.isnan(lvmi) & ~np.isnan(rwt)
    geometry = np.where(ok4, 1 + 2 * lvh + conc, 0)  # Ganau 1992
    edv = 7 / (2.4 + lvidd) * lvidd**3  # Teichholz 1976
    esv = 7 / (2.4 + lvids) * lvids**3
    edvi = edv / bsa
    concentricity = lvm / edv ** (2 / 3)
    dil = edvi > by_sex("edv_index_ml_m2")
    geometry_8 = np.where(ok4 & ~np.isnan(edvi), 1 + 4 * lvh + 2 * conc + dil, 0)  # Gaasch 2011

    def grade(values, measure):
        codes = np.where(known_sex & ~np.isnan(values), 1, 0)
        names = ["", "normal"]
        for sex_code, mask in (("F", female), ("M", male)):
            for g, op, v in k["grades"][measure, sex_code]:
                if g not in names:
                    names.append(g)
                hit = values < v if op == "<" else values > v
                codes = np.where(mask & hit, names.index(g), codes)
        return pd.Categorical.from_codes(codes, names)

    fs = (lvidd - lvids) / lvidd * 100
    sv = edv - esv
    ef = sv / edv * 100
    mess = 0.334 * sbp * lvids / (pws * (1 + pws / lvids))  # Grossman 1975
    a = lvids / 2
    b = a + pws
    cess = 1.35 * sbp * a**2 / (b**2 - a**2) * (1 + b**2 / (a + pws / 2) ** 2)  # Gaasch 1979
    outer = lvidd + (ivsd + pwd) / 2
    mfs = (outer - np.cbrt(outer**3 - lvidd**3 + lvids**3)) / outer * 100  # Shimizu 1991
    mfs_pred = k["line"]["intercept_pct"] + k["line"]["slope_pct_per_kdyn_cm2"] * cess
    sw = 0.0144 * sbp * sv  # de Simone
    m = k["mass"]
    lvm_pred = (
        m["intercept"]
        + m["height27"] * (h / 100) ** 2.7
        + m["stroke_work"] * sw
        + m["sex"] * np.where(male, 1.0, np.where(female, 2.0, np.nan))
    )
    nan = np.full(len(df), np.nan)  # Vcf needs ejection time, absent here
    text = pd.Categorical.from_codes
    out = pd.DataFrame(
        {
            "bsa_m2": bsa,
            "lv_mass_g": lvm,
            "lv_mass_method": text(np.where(np.isnan(lvm), 0, 1), ["", "ase_corrected"]),
            "lvmi_bsa_g_m2": lvmi,
            "lvmi_h27_g_m2_7": lvmi_h27,
            "lvmi_h_g_m": lvmi_h,
            "rwt": rwt,
            "geometry": text(geometry, k["g4"]),
            "edv_ml": edv,
            "edv_source": text(np.where(np.isnan(edv), 0, 1), ["", "teichholz"]),
            "edv_index_ml_m2": edvi,
            "concentricity_g_ml23": concentricity,
            "geometry_8": text(geometry_8, k["g8"]),
            "lvmi_grade": grade(lvmi, "lvmi_bsa_g_m2"),
            "rwt_grade": grade(rwt, "rwt"),
            "lvidd_grade": grade(lvidd, "lvidd_cm"),
            "ivsd_grade": grade(ivsd, "ivsd_cm"),
            "pwd_grade": grade(pwd, "pwd_cm"),
            "fs_pct": fs,
            "edv_teichholz_ml": edv,
            "esv_teichholz_ml": esv,
            "sv_teichholz_ml": sv,
            "ef_teichholz_pct": ef,
            "es_pressure_mmhg": sbp,
            "mess_kdyn_cm2": mess,
            "cess_kdyn_cm2": cess,
            "midwall_fs_pct": mfs,
            "midwall_fs_predicted_pct": mfs_pred,
            "midwall_fs_stress_corrected_pct": mfs / mfs_pred * 100,
            "vcf_circ_s": nan,
            "vcfc_circ_s": nan.copy(),
            "stroke_work_g_m": sw,
            "lv_mass_predicted_g": lvm_pred,
            "lv_mass_appropriateness_pct": lvm / lvm_pred * 100,
        },
        index=df.index,
    )
    return pd.concat([df, out], axis=1)


def check_same_measures(df: pd.DataFrame, k: dict) -> None:
    """The all-measures baseline computes what ``analyse`` computes (numbers within 1e-9
    relative, classes and grades code for code) on rows that pass validation; raises otherwise."""
    import wallstress

    got = wallstress.analyse_with_findings(df)
    base = bare_all_measures(df, k)
    clean = ~got.findings.loc[got.findings["severity"] != "note", "row"].pipe(
        lambda r: np.isin(np.arange(len(df)), r.to_numpy())
    )
    for c in base.columns[df.shape[1] :]:
        t, b = got.table[c], base[c]
        if isinstance(b.dtype, pd.CategoricalDtype):
            same = t.astype(str).to_numpy()[clean] == b.astype(str).to_numpy()[clean]
        else:
            same = np.isclose(
                t.to_numpy(float), b.to_numpy(float), rtol=1e-9, atol=0, equal_nan=True
            )[clean]
        if not same.all():
            raise AssertionError(
                f"baseline differs from analyse in {c!r} on {int((~same).sum())} rows"
            )


# --------------------------------------------------------------------------------------------------
# timing helpers


def best_of(fn, repeats: int) -> float:
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def best_of_interleaved(fns, repeats: int) -> list[float]:
    """Best time of each function, the functions taking turns (a burst of load on this shared
    machine then slows all of them, not one)."""
    times = [[] for _ in fns]
    for _ in range(repeats):
        for fn, t in zip(fns, times, strict=True):
            t0 = time.perf_counter()
            fn()
            t.append(time.perf_counter() - t0)
    return [min(t) for t in times]


def child_peak_rss_mib(code: str) -> float:
    """Peak RSS (VmHWM) of a fresh Python child running ``code``, read by the child at its end.

    VmHWM belongs to the new process image, so unlike ``ru_maxrss`` it does not inherit the
    parent's size through fork.
    """
    tail = "\nprint('VmHWM', open('/proc/self/status').read().split('VmHWM:')[1].split()[0])\n"
    done = subprocess.run([sys.executable, "-c", code + tail], capture_output=True, text=True)
    if done.returncode != 0:
        raise RuntimeError(f"child failed ({done.returncode}): {done.stderr[-2000:]}")
    kib = [ln.split()[1] for ln in done.stdout.splitlines() if ln.startswith("VmHWM")][-1]
    return int(kib) / 1024


def machine() -> dict:
    cpu = ""
    try:
        for line in Path("/proc/cpuinfo").read_text().splitlines():
            if line.startswith("model name"):
                cpu = line.split(":", 1)[1].strip()
                break
    except OSError:
        pass
    ram = ""
    try:
        kib = int(Path("/proc/meminfo").read_text().split("MemTotal:")[1].split()[0])
        ram = f"{kib / 1024**2:.1f} GiB"
    except (OSError, IndexError, ValueError):
        pass
    import numpy
    import pandas

    try:
        load = os.getloadavg()[0]
    except OSError:
        load = float("nan")
    return {
        "nproc": os.cpu_count(),
        "ram": ram,
        "cpu": cpu,
        "python": platform.python_version(),
        "numpy": numpy.__version__,
        "pandas": pandas.__version__,
        "load_1min_at_start": f"{load:.1f}",
    }


# --------------------------------------------------------------------------------------------------
# benchmarks


def bench_analyse(sizes, repeats) -> list[dict]:
    import wallstress

    rows = []
    k = _constants()
    wallstress.analyse(invented_studies(100))  # warm-up: imports, reference tables
    check_same_measures(invented_studies(20_000), k)  # the baseline computes what the tool does
    for n in sizes:
        df = invented_studies(n)
        reps = max(repeats, 5) if n <= 10**6 else 1
        t_tool, t_all, t_core = best_of_interleaved(
            [
                lambda df=df: wallstress.analyse(df),
                lambda df=df: bare_all_measures(df, k),
                lambda df=df: bare_measures(df),
            ],
            reps,
        )
        if n == 10**6:  # a registry export: also a patient id and a text date per study
            dfr = invented_studies(n, follow_up=True)
            t_reg, t_reg_base = best_of_interleaved(
                [lambda d=dfr: wallstress.analyse(d), lambda d=dfr: bare_all_measures(d, k)], reps
            )
            rows.append(
                {
                    "bench": "analyse with patient ids and text dates (parsed, repeats checked) "
                    "vs bare numpy, every measure (no dates)",
                    "rows": n,
                    "tool_s": t_reg,
                    "baseline_s": t_reg_base,
                    "target": None,
                }
            )
            del dfr
        target = TARGETS["analyse"] if n == 10**6 else None
        rows.append(
            {
                "bench": "analyse (in process) vs bare numpy, every measure",
                "rows": n,
                "tool_s": t_tool,
                "baseline_s": t_all,
                "target": target,
            }
        )
        rows.append(
            {
                "bench": "analyse (in process) vs bare numpy, 13 core measures (earlier baseline)",
                "rows": n,
                "tool_s": t_tool,
                "baseline_s": t_core,
                "target": target,
            }
        )
    return rows


def bench_shapes(n: int, repeats: int) -> list[dict]:
    """``analyse_with_findings`` on each of the ``SHAPES`` of a real registry export vs the bare
    numpy of every measure on the same rows (which parses no ids or dates and checks nothing),
    taking turns; the spread is the lowest and highest ratio of one turn."""
    import wallstress

    k = _constants()
    wallstress.analyse(invented_studies(100))
    rows = []
    for shape, label in SHAPES.items():
        df = registry_export(n, shape)
        ratios, tool, base = [], [], []
        wallstress.analyse_with_findings(df)  # warm-up turn, untimed (first-touch memory)
        bare_all_measures(df, k)
        for _ in range(repeats):
            t_tool, t_base = best_of_interleaved(
                [
                    lambda d=df: wallstress.analyse_with_findings(d),
                    lambda d=df: bare_all_measures(d, k),
                ],
                1,
            )
            tool.append(t_tool)
            base.append(t_base)
            ratios.append(t_tool / t_base)
        rows.append(
            {
                "bench": f"analyse, registry export: {label}",
                "rows": n,
                "tool_s": min(tool),
                "baseline_s": min(base),
                "spread": (min(ratios), max(ratios)),
                "target": SHAPE_TARGETS.get(shape),
            }
        )
        del df
    return rows


def bench_csv(n, repeats, tmp: Path, shape: str = "plain") -> dict:
    from wallstress.jobs import analyse_file

    src = tmp / "studies.csv"
    registry_export(n, shape).to_csv(src, index=False)
    k = _constants()

    def tool():
        analyse_file(src, tmp / "tool.csv")

    def base():
        bare_all_measures(pd.read_csv(src), k).to_csv(tmp / "base.csv", index=False)

    return {
        "bench": f"CSV end to end (analyse_file, in process): {SHAPES[shape]}",
        "rows": n,
        "tool_s": best_of(tool, repeats),
        "baseline_s": best_of(base, repeats),
        "target": TARGETS["csv"],
    }


def bench_xlsx(n, repeats, tmp: Path) -> dict:
    from openpyxl import Workbook
    from python_calamine import CalamineWorkbook

    from wallstress.jobs import analyse_file

    src = tmp / "studies.xlsx"
    invented_studies(n).to_excel(src, index=False)
    k = _constants()

    def tool():
        analyse_file(src, tmp / "tool.xlsx")

    def base():
        data = CalamineWorkbook.from_path(str(src)).get_sheet_by_index(0).to_python()
        df = pd.DataFrame(data[1:], columns=data[0])
        out = bare_all_measures(df, k)
        wb = Workbook(write_only=True)
        ws = wb.create_sheet("results")
        ws.append(list(out.columns))
        for row in out.itertuples(index=False, name=None):
            ws.append(list(row))
        wb.save(tmp / "base.xlsx")

    return {
        "bench": "xlsx end to end (analyse_file, in process)",
        "rows": n,
        "tool_s": best_of(tool, repeats),
        "baseline_s": best_of(base, repeats),
        "target": TARGETS["xlsx"],
    }


def bench_rss(n, tmp: Path) -> dict:
    import wallstress

    src = tmp / "rss.csv"
    df = invented_studies(n)
    df.to_csv(src, index=False)
    table = pd.read_csv(src)
    out = wallstress.analyse(table)
    ours = out.iloc[:, table.shape[1] :]  # the result repeats the input's columns: count them once
    tables_mib = (
        table.memory_usage(deep=True).sum() + ours.memory_usage(deep=True).sum()
    ) / 1024**2
    imports = child_peak_rss_mib("import wallstress.jobs, wallstress.write.results, pandas, numpy")
    code = textwrap.dedent(
        f"""
        from wallstress.jobs import analyse_file
        analyse_file({str(src)!r}, {str(tmp / "rss.out.csv")!r})
        """
    )
    peak = child_peak_rss_mib(code)
    return {
        "bench": "peak RSS, analyse_file CSV (child process)",
        "rows": n,
        "peak_mib": peak,
        "imports_mib": imports,
        "tables_mib": tables_mib,
        "ratio": peak / tables_mib,
        "ratio_above_imports": (peak - imports) / tables_mib,
        "target": TARGETS["rss"],
    }


def bench_chunked(n, chunk_rows, tmp: Path) -> dict:
    src = tmp / f"registry_{n}.csv"
    if not src.exists():  # generated once per run, in pieces (bounded memory here too)
        step = 10**6
        for start in range(0, n, step):
            part = invented_studies(min(step, n - start), seed=start + 1)
            part["study_id"] = np.arange(start, start + len(part))
            part.to_csv(src, index=False, header=start == 0, mode="a")
    code = textwrap.dedent(
        f"""
        from wallstress.chunked import analyse_chunked
        analyse_chunked({str(src)!r}, {str(tmp / "registry.out.csv")!r}, chunk_rows={chunk_rows})
        """
    )
    t0 = time.perf_counter()
    peak = child_peak_rss_mib(code)
    elapsed = time.perf_counter() - t0
    return {
        "bench": f"peak RSS, analyse_chunked CSV, chunk_rows={chunk_rows} (child)",
        "rows": n,
        "peak_mib": peak,
        "file_mib": src.stat().st_size / 1024**2,
        "elapsed_s": elapsed,
    }


# --------------------------------------------------------------------------------------------------
# report


def render(results: list[dict], info: dict, argv: list[str]) -> str:
    lines = [
        "# wallstress benchmarks",
        "",
        f"Command: `python benchmarks/run.py {' '.join(argv)}`",
        "",
        "Machine: " + ", ".join(f"{k} {v}" for k, v in info.items()),
        "",
        "Ratios are against a baseline timed in the same run on the same invented rows (best of "
        "the repeats). Absolute times are for context only: this machine is shared and its load "
        "varies.",
        "",
        "| benchmark | rows | wallstress [s] | baseline [s] | ratio | target | per row [us] |",
        "|---|---:|---:|---:|---:|---:|---:|",
    ]
    for r in results:
        if "tool_s" in r:
            ratio = r["tool_s"] / r["baseline_s"]
            target = f"<= {r['target']:g}" if r.get("target") else ""
            ok = "" if not r.get("target") else (" (met)" if ratio <= r["target"] else " (NOT met)")
            spread = " (runs {:.2f}-{:.2f})".format(*r["spread"]) if r.get("spread") else ""
            lines.append(
                f"| {r['bench']} | {r['rows']:,} | {r['tool_s']:.3f} | {r['baseline_s']:.3f} | "
                f"{ratio:.2f}{spread}{ok} | {target} | {1e6 * r['tool_s'] / r['rows']:.2f} |"
            )
    lines += ["", "| memory | rows | peak RSS [MiB] | detail |", "|---|---:|---:|---|"]
    for r in results:
        if "tables_mib" in r:
            ok = "met" if r["ratio"] <= r["target"] else "NOT met"
            lines.append(
                f"| {r['bench']} | {r['rows']:,} | {r['peak_mib']:.0f} | input+output tables "
                f"{r['tables_mib']:.0f} MiB; ratio {r['ratio']:.2f} (target <= {r['target']:g}, "
                f"{ok}); imports alone {r['imports_mib']:.0f} MiB, ratio above imports "
                f"{r['ratio_above_imports']:.2f} |"
            )
        elif "file_mib" in r:
            lines.append(
                f"| {r['bench']} | {r['rows']:,} | {r['peak_mib']:.0f} | CSV file "
                f"{r['file_mib']:.0f} MiB; {r['elapsed_s']:.0f} s |"
            )
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    argv = sys.argv[1:] if argv is None else argv
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes, one repeat (< 1 minute)")
    ap.add_argument(
        "--full", action="store_true", help="add 10^7 rows and the 10^7-row chunked CSV"
    )
    ap.add_argument("--sizes", type=int, nargs="+", help="row counts for the analyse benchmark")
    ap.add_argument("--repeats", type=int, default=None)
    ap.add_argument("--out", type=Path, default=HERE / "RESULTS.md")
    ap.add_argument(
        "--shapes-only",
        action="store_true",
        help="only the registry-export shapes (e.g. to measure an older checkout: PYTHONPATH=it)",
    )
    args = ap.parse_args(argv)
    quick = args.quick
    repeats = args.repeats or (1 if quick else 3)
    sizes = args.sizes or ([10**4, 10**5] if quick else [10**4, 10**5, 10**6])
    if args.full and not args.sizes:
        sizes = [*sizes, 10**7]
    info = machine()
    results: list[dict] = []
    with tempfile.TemporaryDirectory(prefix="wallstress-bench-") as d:
        tmp = Path(d)
        shapes_n = 10**5 if quick else 10**6
        steps = [
            lambda: results.extend(bench_shapes(shapes_n, max(repeats, 3))),
            lambda: results.extend(bench_analyse(sizes, repeats)),
            lambda: results.append(bench_csv(3 * 10**4 if quick else 3 * 10**5, repeats, tmp)),
            lambda: results.append(
                bench_csv(3 * 10**4 if quick else 3 * 10**5, repeats, tmp, "text_ids")
            ),
            lambda: results.append(bench_xlsx(5 * 10**3 if quick else 10**5, 1, tmp)),
            lambda: results.append(bench_rss(3 * 10**4 if quick else 10**6, tmp)),
            lambda: results.append(
                bench_chunked(10**5 if quick else 10**6, 2 * 10**4 if quick else 2 * 10**5, tmp)
            ),
        ]
        if args.shapes_only:
            steps = steps[:1]
        if args.full:
            steps.append(lambda: results.append(bench_chunked(10**7, 2 * 10**5, tmp)))
        for step in steps:
            step()
            print(render(results[-1:], {}, argv).split("\n", 8)[-1], end="", flush=True)
    text = render(results, info, argv)
    print()
    print(text)
    args.out.write_text(text, encoding="utf-8")
    print(f"written {args.out}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
