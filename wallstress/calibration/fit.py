"""A lab's own reference limits and stress-shortening line, fitted from its healthy subjects.

``calibrate`` takes the analysed study list of a lab's healthy (reference) subjects and returns a
complete reference set in the set-file format of :mod:`wallstress.analysis.references`:

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

The statistics live in :mod:`~wallstress.calibration.limit_stats` (centiles, their intervals, the
line), the choice of subjects in :mod:`~wallstress.calibration.normals`, the rows in
:mod:`~wallstress.calibration.fitted_rows`; :func:`~wallstress.calibration.set_writer.write_set` writes
the set.

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

import pandas as pd

from wallstress import __version__
from wallstress.analysis.references import (
    DEFAULT_SET,
    SET_COLUMNS,
    load_set,
)
from wallstress.calibration.fitted_rows import (
    LINE_X,
    LINE_Y,
    base_cutoffs,
    copied_rows,
    limit_rows,
    line_rows,
    set_row,
)
from wallstress.calibration.limit_stats import (
    CENTILE_METHOD_TEXT,
)
from wallstress.calibration.normals import (
    CLSI_MIN_PER_SEX,
    SEXES,
    _as_frame,
    _data_hash,
    _eligible,
    _required,
    _too_few_message,
)
from wallstress.errors import InputError
from wallstress.schema.vocabulary import CLINICAL_CAUTION, OUT

FITTED_MEASURES: tuple[tuple[str, str], ...] = (
    (OUT.lvmi_bsa_g_m2, "g/m2"),
    (OUT.lvmi_h27_g_m2_7, "g/m^2.7"),
    (OUT.rwt, ""),
    (OUT.edv_index_ml_m2, "mL/m2"),
    (OUT.concentricity_g_ml23, "g/mL^(2/3)"),
    ("lvidd_cm", "cm"),
    ("ivsd_cm", "cm"),
    ("pwd_cm", "cm"),
    (OUT.mess_kdyn_cm2, "kdyn/cm2"),
    (OUT.cess_kdyn_cm2, "kdyn/cm2"),
)
"""Measures given a lab upper limit (97.5th centile), with their units."""


CAUTION = (
    "A lab's own limits describe its own healthy subjects, equipment and measuring habits only. "
    f"{CLINICAL_CAUTION}"
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


def calibrate(
    frame_or_analysis,
    *,
    base_set: str = DEFAULT_SET,
    lab_name: str = "lab",
    min_per_sex: int = CLSI_MIN_PER_SEX,
    allow_small: bool = False,
    rwt_pooled: bool = True,
    source_file: str | None = None,
    keep_implausible_line: bool = False,
) -> Calibration:
    """A lab's own reference set from the analysed study list of its healthy subjects.

    Parameters
    ----------
    frame_or_analysis : Analysis or DataFrame
        The healthy subjects analysed by :func:`wallstress.analysis.pipeline.analyse_with_findings`, or its
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
    keep_implausible_line : bool
        Write a stress-shortening line whose slope is not negative (marked implausible); by
        default such a line is not written and the base set's line is kept.

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
    analysed = any(m in frame.columns for m in (OUT.lvmi_bsa_g_m2, OUT.rwt, LINE_X, LINE_Y))
    if not analysed:  # a raw study list has the dimensions but none of the measures
        wanted = ", ".join([m for m, _ in FITTED_MEASURES] + [LINE_X, LINE_Y])
        raise InputError(
            f"nothing to fit: none of the measure columns ({wanted}) is present. Pass the result of "
            "wallstress.analyse_with_findings(normals) (or its .frame()), not the raw study list"
        )
    for m, _ in FITTED_MEASURES[:5]:  # the measures (the dimensions come with any analysed list)
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

    lab_rows, summary, fitted, kept = limit_rows(
        frame, usable, sex, present, required, base_cutoffs(base), label, stamp, rwt_pooled, notes
    )
    line: dict = {}
    if have_line:
        line, line_set_rows = line_rows(
            frame, usable, required, label, stamp, notes, keep_implausible_line
        )
        lab_rows += line_set_rows
    copied = copied_rows(base, line, fitted, kept)

    n_total = sum(counts.values())

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
    settings = [
        set_row(
            "setting",
            "title",
            note=f"{lab_name} own limits (n={n_total}: {counts['F']} F, {counts['M']} M)",
        ),
        set_row("setting", "geometry_mass_index", note=base.mass_index),
        set_row(
            "setting",
            "base_set",
            note=f"{base.name} ({base.title}); rows not fitted copied with their sources",
        ),
        set_row("setting", "caution", note=CAUTION),
        *(
            set_row("setting", "calibration_warning", note=n)
            for n in notes
            if any(w in n for w in ("not fitted", "not negative", "small sample", "dropped"))
        ),
    ]
    rows = pd.DataFrame(settings + lab_rows + copied, columns=list(SET_COLUMNS))
    rows["value"] = pd.to_numeric(rows["value"], errors="coerce")
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
