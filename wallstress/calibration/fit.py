"""A lab's own reference limits and stress-shortening line, fitted from its healthy subjects.

``calibrate`` takes the analysed study list of a lab's healthy (reference) subjects and returns a
complete reference set in the set-file format of :mod:`wallstress.references`:

- **Upper reference limits** (kind ``cutoff``, verified ``lab``): the 97.5th centile, by sex, of
  LVMI by BSA and by height^2.7, EDV index and concentricity, and of RWT (pooled over both sexes by
  default, as the published limit is one value for both; see ``rwt_pooled``). The centile is
  nonparametric: numpy's ``'linear'`` method, which is Hyndman & Fan's definition 7. Each limit carries
  a distribution-free 90 % confidence interval from order statistics (binomial ranks), the interval
  CLSI asks to report with a reference limit. The lab's limit replaces the base set's abnormal
  (lowest upward) threshold of that measure and sex and takes its grade name (``mild`` where the
  base has severity partitions, else ``increased``); the base's higher partitions are kept only
  where they lie above the lab's limit.
- **The midwall-shortening vs circumferential end-systolic stress line** (kind ``coefficient``,
  measure ``midwall_stress_line``): ordinary least squares over all subjects, both sexes pooled, with
  its residual SD and the 95 % prediction interval. The lower limit of stress-corrected midwall
  shortening is defined here as the 5th centile (numpy ``'linear'``) of observed / predicted * 100 in
  the same subjects: the fraction of healthy subjects called depressed is then 5 % by construction,
  whatever the shape of the residuals.
- **Everything else is copied from the base set** (severity partitions above the lab's limit, LVIDd,
  wall thicknesses, other models), with its original source and verified status, so the lab's set is
  complete and can be used with ``Options(reference=path)`` or ``--reference``.

How many subjects: CLSI EP28-A3c (2010) asks for at least 120 reference subjects per partition for a
nonparametric reference interval (from memory). Fewer are refused unless ``allow_small=True`` and at
least :data:`SMALL_FLOOR` are present; such rows say "small sample" in their note.

This module builds the set; the statistics live in :mod:`wallstress.limit_stats` (centiles, their
intervals, the line) and the choice of subjects in :mod:`wallstress.healthy_subjects`. Their names
stay importable from here.

The limits of a lab's own healthy subjects support, never replace, a qualified clinician's judgement
and the lab's protocols; they describe the lab's own reference population and methods only.

References
----------
CLSI. Defining, establishing, and verifying reference intervals in the clinical laboratory; approved
guideline, 3rd ed. CLSI document EP28-A3c, 2010 (120 subjects per partition, nonparametric; 90 %
confidence interval of each limit; from memory).
Hyndman RJ, Fan Y. Sample quantiles in statistical packages. Am Stat 1996;50:361-365 (definition 7).
de Simone G et al. Assessment of left ventricular function by the midwall fractional shortening /
end-systolic stress relation in human hypertension. J Am Coll Cardiol 1994;23:1444-1451.
Khouri MG et al. A 4-tiered classification of left ventricular hypertrophy based on left ventricular
geometry. Circ Cardiovasc Imaging 2010;3:164-171 (limits as 97.5th centiles of a healthy subgroup).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from wallstress import __version__
from wallstress.analysis.references import (
    DEFAULT_SET,
    SET_COLUMNS,
    UPWARD_GRADES,
    ReferenceSet,
    load_set,
)
from wallstress.calibration.limit_stats import (
    CENTILE_METHOD_TEXT,
    LOWER_LIMIT_CENTILE,
    centile_summary,
    fit_line,
)

# moved to modules of their own; re-exported so that ``from wallstress.calibrate import ...`` keeps working
from wallstress.calibration.normals import (
    CLSI_MIN_PER_SEX,
    SEXES,
    _as_frame,
    _data_hash,
    _eligible,
    _required,
    _too_few_message,
)
from wallstress.errors import InputError, OutputError

FITTED_MEASURES: tuple[tuple[str, str], ...] = (
    ("lvmi_bsa_g_m2", "g/m2"),
    ("lvmi_h27_g_m2_7", "g/m^2.7"),
    ("rwt", ""),
    ("edv_index_ml_m2", "mL/m2"),
    ("concentricity_g_ml23", "g/mL^(2/3)"),
)
"""Measures given a lab upper limit (97.5th centile), with their units."""


LINE_MODEL = "midwall_stress_line"


LINE_X, LINE_Y = "cess_kdyn_cm2", "midwall_fs_pct"


CAUTION = (
    "A lab's own limits describe its own healthy subjects, equipment and measuring habits only. "
    "wallstress supports, never replaces, a qualified clinician's judgement and the lab's protocols "
    "and reference values."
)


@dataclass
class Calibration:
    """A lab's fitted reference set.

    Attributes
    ----------
    rows : DataFrame
        The complete set in the set-file format (``references.SET_COLUMNS``), ready for
        :func:`write_set`: settings, the lab's cutoffs and line, then the rows copied from the base set.
    summary : DataFrame
        One row per fitted limit: ``measure, sex, n, centile_97_5, ci90_low, ci90_high, ci_coverage,
        mean, sd, base_value, unit, note``.
    line : dict
        The midwall-shortening / cESS line: ``intercept_pct, slope_pct_per_kdyn_cm2,
        residual_sd_pct, n, r2, pi95_half_width_at_mean_pct, x_mean_kdyn_cm2, x_min_kdyn_cm2,
        x_max_kdyn_cm2, lower_limit_stress_corrected_pct, lower_limit_parametric_pct`` (empty when the
        line could not be fitted).
    notes : list of str
        What was excluded, decided and copied, and the caution.
    """

    rows: pd.DataFrame
    summary: pd.DataFrame
    line: dict
    notes: list[str] = field(default_factory=list)
    base_set: str = ""
    lab_name: str = ""


def _row(
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


def _small_note(n: int) -> str:
    if n < CLSI_MIN_PER_SEX:
        return f"small sample: n={n}, interval wide (CLSI EP28-A3c asks for {CLSI_MIN_PER_SEX})"
    return ""


def _base_cutoffs(base: ReferenceSet) -> pd.DataFrame:
    rows = base.rows
    return rows[rows["kind"] == "cutoff"].copy()


def calibrate(
    frame_or_analysis,
    *,
    base_set: str = DEFAULT_SET,
    lab_name: str = "lab",
    min_per_sex: int = CLSI_MIN_PER_SEX,
    allow_small: bool = False,
    rwt_pooled: bool = True,
    source_file: str | None = None,
) -> Calibration:
    """A lab's own reference set from the analysed study list of its healthy subjects.

    Parameters
    ----------
    frame_or_analysis : Analysis or DataFrame
        The healthy subjects analysed by :func:`wallstress.pipeline.analyse_with_findings`, or its
        ``.frame()`` (columns ``sex``, ``flags`` and the measures: ``lvmi_bsa_g_m2`` [g/m2],
        ``lvmi_h27_g_m2_7`` [g/m^2.7], ``rwt`` [-], ``edv_index_ml_m2`` [mL/m2],
        ``concentricity_g_ml23`` [g/mL^(2/3)], ``cess_kdyn_cm2`` [kdyn/cm2], ``midwall_fs_pct`` [%]).
        A measure whose column is absent is not fitted (its base rows are kept).
    base_set : str
        Reference set (name or path) whose rows the lab does not fit are copied from, and whose
        ``geometry_mass_index`` the lab set keeps.
    lab_name : str
        Name of the lab (or of its normals file), used in the title and each row's source.
    min_per_sex : int
        Usable subjects needed per sex. Default 120 (CLSI EP28-A3c, 2010; from memory).
    allow_small : bool
        Fit from fewer than ``min_per_sex`` (but at least 40) per sex; rows say "small sample".
    rwt_pooled : bool
        One RWT limit for both sexes (default; the published limit is one value for both sexes) or
        one per sex.
    source_file : str, optional
        File name of the normals, written into each row's source (default: ``lab_name``).

    Returns
    -------
    Calibration

    Raises
    ------
    InputError
        No sex column; too few usable subjects per sex (the message says how many are needed); or no
        measure column to fit.
    """
    required = _required(min_per_sex, allow_small)
    frame, methods = _as_frame(frame_or_analysis)
    base = load_set(base_set)
    usable, notes = _eligible(frame)
    sex = frame["sex"].astype(object).to_numpy()
    counts = {s: int((usable & (sex == s)).sum()) for s in SEXES}
    if min(counts.values()) < required:
        raise InputError(_too_few_message(counts, int(min_per_sex), allow_small))

    present = [(m, u) for m, u in FITTED_MEASURES if m in frame.columns]
    have_line = LINE_X in frame.columns and LINE_Y in frame.columns
    if not present and not have_line:
        wanted = ", ".join([m for m, _ in FITTED_MEASURES] + [LINE_X, LINE_Y])
        raise InputError(
            f"nothing to fit: none of the measure columns ({wanted}) is present. Pass the result of "
            "wallstress.analyse_with_findings(normals) (or its .frame()), not the raw study list"
        )
    for m, _ in FITTED_MEASURES:
        if m not in frame.columns:
            notes.append(f"{m}: column absent, not fitted; the base set's rows are kept.")

    label = source_file or lab_name
    used_cols = ["sex"] + [m for m, _ in present] + ([LINE_X, LINE_Y] if have_line else [])
    digest = _data_hash(frame.loc[usable], used_cols)
    opts = methods.get("options", {})
    opt_text = (
        f"; analysed with bsa={opts.get('bsa_method')}, mass={opts.get('mass_method')}, "
        f"rwt={opts.get('rwt_method')}, es_pressure={opts.get('es_pressure')}, "
        f"stress_constant={opts.get('stress_constant')}"
        if opts
        else ""
    )
    stamp = f"wallstress {__version__}, data sha256 {digest}{opt_text}"

    base_cut = _base_cutoffs(base)
    lab_rows: list[dict] = []
    summary: list[dict] = []
    fitted: set[tuple[str, str]] = set()  # (measure, sex) replaced; sex "" = both
    kept_partitions: list[dict] = []

    for measure, unit in present:
        values = pd.to_numeric(frame[measure], errors="coerce").to_numpy(dtype=float)
        pooled = measure == "rwt" and rwt_pooled
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
            small = _small_note(res["n"])
            ci = (
                f"90 % CI {res['ci_low']:.4g}-{res['ci_high']:.4g} (order statistics, coverage "
                f"{res['ci_coverage']:.3f})"
                if np.isfinite(res["ci_high"])
                else "90 % CI not available for this n"
            )
            parts = [p for p in (small, ci) if p]
            if pooled:
                parts.append("pooled over both sexes (one limit, as the published RWT limit)")
            if measure == "edv_index_ml_m2" and "edv_source" in frame.columns:
                src = frame.loc[usable, "edv_source"].fillna("").astype(str).value_counts()
                parts.append(
                    "EDV from "
                    + ", ".join(f"{k or 'none'} {v}" for k, v in src.items())
                    + "; use only with volumes measured the same way"
                )
            lab_rows.append(
                _row(
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

    # the stress-shortening line
    line: dict = {}
    if have_line:
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
            small = _small_note(line["n"])
            lab_rows += [
                _row(
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
                _row(
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
                _row(
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
                _row(
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
                notes.append(
                    f"{LINE_MODEL}: the slope is not negative ({line['slope_pct_per_kdyn_cm2']:.4g} "
                    f"%/(kdyn/cm2), r2={line['r2']:.3f}): these subjects do not show the expected fall "
                    "of midwall shortening with stress; check the measurements before using the line."
                )
            notes.append(
                f"{LINE_MODEL}: fitted over both sexes pooled (n={line['n']}); lower limit of "
                f"stress-corrected midwall shortening = {LOWER_LIMIT_CENTILE:g}th centile of "
                "observed/predicted in these subjects."
            )

    # rows copied from the base set
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

    n_total = sum(counts.values())
    settings = [
        _row(
            "setting",
            "title",
            note=f"{lab_name} own limits (n={n_total}: {counts['F']} F, {counts['M']} M)",
        ),
        _row("setting", "geometry_mass_index", note=base.mass_index),
        _row(
            "setting",
            "base_set",
            note=f"{base.name} ({base.title}); rows not fitted copied with their sources",
        ),
        _row("setting", "caution", note=CAUTION),
    ]
    rows = pd.DataFrame(settings + lab_rows + copied, columns=list(SET_COLUMNS))
    rows["value"] = pd.to_numeric(rows["value"], errors="coerce")

    unverified = [c for c in copied if c["verified"] not in ("published", "lab")]
    if unverified:
        notes.append(
            f"{len(unverified)} row(s) copied from {base.name} are not checked against their published "
            "text (verified = from_memory/computed); they stay marked."
        )
    if min(counts.values()) < CLSI_MIN_PER_SEX:
        notes.append(
            f"small sample ({counts['F']} F, {counts['M']} M): fewer than the {CLSI_MIN_PER_SEX} per sex "
            "CLSI EP28-A3c (2010, from memory) asks for; the limits are imprecise, see their 90 % CI."
        )
    notes.append(
        f"limits = {CENTILE_METHOD_TEXT}; RWT {'pooled over both sexes' if rwt_pooled else 'by sex'}; "
        f"used {n_total} of {len(frame)} subjects."
    )
    notes.append(
        "Analyse patients with the same options (BSA formula, stress constant, ES pressure) as these "
        "normals, or the lab's limits and line do not apply."
    )
    notes.append(CAUTION)
    summary_df = pd.DataFrame(
        summary,
        columns=[
            "measure",
            "sex",
            "n",
            "centile_97_5",
            "ci90_low",
            "ci90_high",
            "ci_coverage",
            "mean",
            "sd",
            "base_value",
            "unit",
            "note",
        ],
    )
    return Calibration(
        rows=rows, summary=summary_df, line=line, notes=notes, base_set=base.name, lab_name=lab_name
    )


def write_set(calibration: Calibration, out_path) -> Path:
    """Write a calibration as a reference-set CSV, atomically (temporary file, then ``os.replace``).

    Parameters
    ----------
    calibration : Calibration
        From :func:`calibrate`.
    out_path : str or Path
        Target ``.csv``; its folder must exist. Use it with ``Options(reference=str(path))`` or
        ``--reference``.

    Returns
    -------
    Path
        The written file.

    Raises
    ------
    OutputError
        The path does not end in ``.csv``, is a folder, or its folder does not exist.
    """
    from wallstress.write.safety import atomic_path, escape_formula_text

    path = Path(out_path)
    if path.suffix.lower() != ".csv":
        raise OutputError(
            f"out_path={str(path)!r} must end in .csv (a reference set is a CSV file)"
        )
    if path.is_dir():
        raise OutputError(f"out_path={str(path)!r} is a folder; give a file name ending in .csv")
    table = escape_formula_text(calibration.rows[list(SET_COLUMNS)])
    with atomic_path(path) as tmp:
        table.to_csv(tmp, index=False, encoding="utf-8", float_format="%.10g", lineterminator="\n")
    return path
