"""The rows of a lab's own reference set: its fitted limits, its stress-shortening line, and the
base set's rows it keeps.

The statistics come from :mod:`wallstress.calibration.limit_stats`; these functions turn them into
set-file rows (``references.SET_COLUMNS``) with a source that names the lab's data and its hash.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from wallstress.analysis.references import SET_COLUMNS, UPWARD_GRADES, ReferenceSet
from wallstress.calibration.limit_stats import (
    CENTILE_METHOD_TEXT,
    LOWER_LIMIT_CENTILE,
    centile_summary,
    fit_line,
)
from wallstress.calibration.normals import CLSI_MIN_PER_SEX
from wallstress.schema.fields import SEXES
from wallstress.schema.vocabulary import OUT

LINE_MODEL = "midwall_stress_line"
LINE_X, LINE_Y = OUT.cess_kdyn_cm2, OUT.midwall_fs_pct


def set_row(
    kind,
    measure,
    sex="",
    grade="",
    comparison="",
    value=np.nan,
    unit="",
    source="",
    verified="",
    note="",
) -> dict:
    """One row of a set file."""
    return {
        "kind": kind,
        "measure": measure,
        "sex": sex,
        "grade": grade,
        "comparison": comparison,
        "value": value,
        "unit": unit,
        "source": source,
        "verified": verified,
        "note": note,
    }


def small_note(n: int) -> str:
    if n < CLSI_MIN_PER_SEX:
        return f"small sample: n={n}, interval wide (CLSI EP28-A3c asks for {CLSI_MIN_PER_SEX})"
    return ""


def base_cutoffs(base: ReferenceSet) -> pd.DataFrame:
    rows = base.rows
    return rows[rows["kind"] == "cutoff"].copy()


def limit_rows(frame, usable, sex, present, required, base_cut, label, stamp, rwt_pooled, notes):
    """The lab's upper limits (97.5th centiles) of each present measure, by sex (RWT pooled by
    default): ``(set rows, summary rows, (measure, sex) replaced, base partitions kept)``.

    A measure with too few values is not fitted (a note says so; the base set's rows stay).
    """
    lab_rows: list[dict] = []
    summary: list[dict] = []
    fitted: set[tuple[str, str]] = set()  # (measure, sex) replaced; sex "" = both
    kept_partitions: list = []
    for measure, unit in present:
        values = pd.to_numeric(frame[measure], errors="coerce").to_numpy(dtype=float)
        pooled = measure == OUT.rwt and rwt_pooled
        groups = [("", usable)] if pooled else [(s, usable & (sex == s)) for s in SEXES]
        need = required * (2 if pooled else 1)
        results = []
        for s, mask in groups:
            res = centile_summary(values[mask])
            results.append((s, res))
        short = [(s, r["n"]) for s, r in results if r["n"] < need]
        if short:
            notes.append(
                f"{measure}: not fitted, too few values ("
                + ", ".join(f"{s or 'both'}: {k}" for s, k in short)
                + f"; {need} needed); the base set's rows are kept."
            )
            continue
        for s, res in results:
            sexes = SEXES if s == "" else (s,)
            base_rows = base_cut[(base_cut["measure"] == measure)]
            base_rows = base_rows[
                base_rows["sex"].fillna("").isin(list(sexes) + ["", "both", "all"])
            ]
            up = base_rows[base_rows["grade"].isin(UPWARD_GRADES)].sort_values("value")
            grade = "increased"
            base_value = np.nan
            if len(up):
                lowest = up.iloc[0]
                base_value = float(lowest["value"])
                grade = str(lowest["grade"])
            limit = res["centile"]
            small = small_note(res["n"])
            ci = (
                f"90 % CI {res['ci_low']:.4g}-{res['ci_high']:.4g} (order statistics, coverage "
                f"{res['ci_coverage']:.3f})"
                if np.isfinite(res["ci_high"])
                else "90 % CI not available for this n"
            )
            parts = [p for p in (small, ci) if p]
            if pooled:
                parts.append("pooled over both sexes (one limit, as the published RWT limit)")
            if measure == OUT.edv_index_ml_m2 and OUT.edv_source in frame.columns:
                src = frame.loc[usable, OUT.edv_source].fillna("").astype(str).value_counts()
                parts.append(
                    "EDV from "
                    + ", ".join(f"{k or 'none'} {v}" for k, v in src.items())
                    + "; use only with volumes measured the same way"
                )
            lab_rows.append(
                set_row(
                    "cutoff",
                    measure,
                    s,
                    grade,
                    ">",
                    limit,
                    unit,
                    f"{label}: n={res['n']} {'F+M' if pooled else s}, {CENTILE_METHOD_TEXT}; {stamp}",
                    "lab",
                    "; ".join(parts),
                )
            )
            summary.append(
                {
                    "measure": measure,
                    "sex": s or "both",
                    "n": res["n"],
                    "centile_97_5": limit,
                    "ci90_low": res["ci_low"],
                    "ci90_high": res["ci_high"],
                    "ci_coverage": res["ci_coverage"],
                    "mean": res["mean"],
                    "sd": res["sd"],
                    "base_value": base_value,
                    "unit": unit,
                    "note": small,
                }
            )
            for sx in sexes:
                fitted.add((measure, sx))
            # severity partitions of the base above the lab's limit are kept (the rows of the
            # replaced grade, one per sex when pooled, are not partitions)
            for r in up[up["grade"] != grade].itertuples():
                if float(r.value) > limit:
                    kept_partitions.append((measure, s, r.Index))
                else:
                    notes.append(
                        f"{measure} {s or 'both'}: base {r.grade} threshold {r.value:g} dropped, it is "
                        f"not above the lab's limit {limit:.4g}."
                    )
    return lab_rows, summary, fitted, kept_partitions


def line_rows(
    frame, usable, required, label, stamp, notes, keep_implausible: bool = False
) -> tuple[dict, list[dict]]:
    """The lab's midwall-shortening / cESS line (both sexes pooled) as coefficient rows:
    ``(line, rows)``, both empty when there are too few subjects with both values, or when the
    slope is not negative (midwall shortening falls as stress rises: a flat or rising line is not
    physiology, de Simone G et al., J Am Coll Cardiol 1994;23:1444) unless ``keep_implausible``."""
    line: dict = {}
    rows: list[dict] = []
    x = pd.to_numeric(frame.loc[usable, LINE_X], errors="coerce").to_numpy(dtype=float)
    y = pd.to_numeric(frame.loc[usable, LINE_Y], errors="coerce").to_numpy(dtype=float)
    n_pairs = int((np.isfinite(x) & np.isfinite(y)).sum())
    if n_pairs < 2 * required:
        notes.append(
            f"{LINE_MODEL}: not fitted, {n_pairs} subjects with cESS and midwall shortening "
            f"({2 * required} needed); the base set's or bundled line is kept."
        )
    else:
        line = fit_line(x, y)
        src = (
            f"{label}: n={line['n']} (F+M pooled), ordinary least squares of midwall FS on cESS; "
            f"{stamp}"
        )
        rng = (
            f"fitted over cESS {line['x_min_kdyn_cm2']:.0f}-{line['x_max_kdyn_cm2']:.0f} kdyn/cm2 "
            f"(outside it the line is extrapolated); r2={line['r2']:.3f}; both sexes pooled"
        )
        small = small_note(line["n"])
        rows = [
            set_row(
                "coefficient",
                LINE_MODEL,
                "",
                "intercept_pct",
                "",
                line["intercept_pct"],
                "%",
                src,
                "lab",
                "; ".join(p for p in (rng, small) if p),
            ),
            set_row(
                "coefficient",
                LINE_MODEL,
                "",
                "slope_pct_per_kdyn_cm2",
                "",
                line["slope_pct_per_kdyn_cm2"],
                "%/(kdyn/cm2)",
                src,
                "lab",
                "",
            ),
            set_row(
                "coefficient",
                LINE_MODEL,
                "",
                "residual_sd_pct",
                "",
                line["residual_sd_pct"],
                "%",
                src,
                "lab",
                f"sqrt(SSE/(n-2)); 95 % prediction interval at the mean cESS "
                f"+/-{line['pi95_half_width_at_mean_pct']:.3g} %",
            ),
            set_row(
                "coefficient",
                LINE_MODEL,
                "",
                "lower_limit_stress_corrected_pct",
                "",
                line["lower_limit_stress_corrected_pct"],
                "%",
                src,
                "lab",
                f"{LOWER_LIMIT_CENTILE:g}th centile (numpy 'linear') of observed/predicted*100 in "
                f"the lab's healthy subjects; parametric 100*(1-1.645*SD/mean) would give "
                f"{line['lower_limit_parametric_pct']:.3g}",
            ),
        ]
        if not line["slope_pct_per_kdyn_cm2"] < 0:
            why = (
                f"{LINE_MODEL}: the slope is not negative ({line['slope_pct_per_kdyn_cm2']:.4g} "
                f"%/(kdyn/cm2), r2={line['r2']:.3f}): these subjects do not show the expected fall "
                "of midwall shortening with stress"
            )
            if not keep_implausible:
                notes.append(
                    f"{why}; the line was NOT written as a usable line (the base set's line is "
                    "kept). Check the measurements, or keep it anyway, marked, with "
                    "--keep-implausible-line."
                )
                return {}, []
            notes.append(f"{why}; kept on request and marked as implausible in the set.")
            for r in rows:
                r["note"] = "; ".join(
                    p for p in (r["note"], "IMPLAUSIBLE: slope not negative") if p
                )
        notes.append(
            f"{LINE_MODEL}: fitted over both sexes pooled (n={line['n']}); lower limit of "
            f"stress-corrected midwall shortening = {LOWER_LIMIT_CENTILE:g}th centile of "
            "observed/predicted in these subjects."
        )
    return line, rows


def copied_rows(base: ReferenceSet, line: dict, fitted: set, kept_partitions: list) -> list[dict]:
    """Every base-set row the lab did not replace, with its source and verified status (severity
    partitions above the lab's limit are kept and say so)."""
    keep_idx = {idx for _, _, idx in kept_partitions}
    copied = []
    for r in base.rows.itertuples():
        if r.kind == "setting":
            continue
        if r.kind == "coefficient" and r.measure == LINE_MODEL and line:
            continue
        if r.kind == "cutoff":
            rsex = "" if pd.isna(r.sex) or r.sex in ("both", "all") else str(r.sex)
            replaced = any((r.measure, sx) in fitted for sx in ((rsex,) if rsex else SEXES))
            if replaced and r.grade in UPWARD_GRADES and r.Index not in keep_idx:
                continue
        rec = {c: getattr(r, c) for c in SET_COLUMNS}
        if r.Index in keep_idx:
            extra = f"severity partition from {base.name}, kept above the lab's own limit"
            rec["note"] = (
                f"{rec['note']}; {extra}" if isinstance(rec["note"], str) and rec["note"] else extra
            )
        copied.append(rec)

    return copied
