"""analyse(): map -> convert -> validate -> compute -> classify, on a DataFrame. No file I/O here.

One direction of data flow: the user's table is read, never written; the measures are computed from
the canonical copy; the result is the user's columns, unchanged and in order, followed by ours.
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor

import numpy as np
import pandas as pd
from pandas.api.types import union_categoricals

from wallstress import __version__
from wallstress import findings as fnd
from wallstress.analysis import classify
from wallstress.analysis.methods import build_methods
from wallstress.analysis.references import load_set
from wallstress.analysis.result import Analysis
from wallstress.formulas import body_size, function, mass, stress
from wallstress.options import Options
from wallstress.prepare.mapping import map_columns
from wallstress.prepare.validate import validate_parts
from wallstress.schema.fields import OUTPUT_COLUMNS

LINEAR_METHODS = mass.LINEAR_MASS_METHODS
AREA_METHODS = mass.AREA_MASS_METHODS
ES_PRESSURE_CHOICES = (*stress.ES_PRESSURE_METHODS, "measured")

# Large tables are computed in row partitions, one thread each: every measure is a function of its
# own row, numpy releases the GIL inside its array loops, so the partitions run on separate cores
# and the joined result is the same, value for value, as one pass over all rows. A partition holds
# at least PARTITION_MIN_ROWS rows (below that the threads cost more than they save); the number of
# threads is the CPUs this process may use, at most MAX_THREADS, or WALLSTRESS_THREADS if set.
PARTITION_MIN_ROWS = 250_000
MAX_THREADS = 8
THREADS_ENV = "WALLSTRESS_THREADS"

# Findings are built and handed out as Categoricals: their text columns repeat a few strings per
# rule, so codes are far smaller and faster to merge; writers and the report turn them into text.


def _check_options(o: Options) -> None:
    checks = (
        ("bsa_method", o.bsa_method, body_size.BSA_METHODS),
        ("mass_method", o.mass_method, LINEAR_METHODS + AREA_METHODS),
        ("rwt_method", o.rwt_method, mass.RWT_METHODS),
        ("es_pressure", o.es_pressure, ES_PRESSURE_CHOICES),
        ("stress_constant", o.stress_constant, stress.STRESS_CONSTANTS),
        ("units", o.units, ("auto", "mm", "cm")),
    )
    for name, value, valid in checks:
        if value not in valid:
            raise ValueError(f"{name}={value!r} is not known; use one of: {', '.join(valid)}")


def analyse(df: pd.DataFrame, options: Options | None = None) -> pd.DataFrame:
    """Every measure for every row of a study list.

    Parameters
    ----------
    df : DataFrame
        One row per echocardiogram, under canonical names (``schema.FIELDS``) or headers that can be
        mapped (``LVIDd (mm)``, ``Septum``...). Columns it does not know are carried through.
    options : Options, optional
        Reference set, formulas and units; defaults as in :class:`Options`.

    Returns
    -------
    DataFrame
        The input columns, unchanged, followed by ``schema.OUTPUT_COLUMNS``; one row per input row, in
        order. ``flags`` lists each row's finding codes. The text outputs (geometry, grades,
        ``lv_mass_method``, ``edv_source``, ``flags``) are Categoricals of text. Use
        :func:`analyse_with_findings` for the findings table and the methods record.
    """
    return analyse_with_findings(df, options).table


def analyse_with_findings(
    df: pd.DataFrame, options: Options | None = None, *, prior_findings: pd.DataFrame | None = None
) -> Analysis:
    """Like :func:`analyse`, returning the whole :class:`~wallstress.result.Analysis`.

    ``prior_findings`` (e.g. from the reader: error values in cells) join the row flags.
    """
    options = options or Options()
    _check_options(options)
    refset = load_set(options.reference)
    mapped = map_columns(df, options)
    labels = {m["field"]: m["source_column"] for m in mapped.mapping}
    canonical, vparts = validate_parts(mapped.canonical, labels)
    canonical.index = pd.RangeIndex(len(df))
    out, cparts, used = _compute_in_partitions(canonical, options, refset)
    # every step's findings joined once, in step order (within a row: reader, mapping, validation,
    # measures), sorted by row
    findings = fnd.concat([prior_findings, mapped.findings, *vparts, *cparts], categorical=True)
    out["flags"] = fnd.categorical_text(*fnd.flag_codes(findings, len(df)))
    # copy=False: each output its own block (no stacking copy of ~30 float columns); an array that
    # is read-only (a view of an input) or already in another column is copied first
    outputs = pd.DataFrame(_own_arrays(out, OUTPUT_COLUMNS), index=canonical.index, copy=False)
    del out
    table = _append(df, outputs)
    methods = build_methods(options, refset, used, mapped, findings, len(df), version=__version__)
    return Analysis(
        table=table, canonical=canonical, outputs=outputs, findings=findings, methods=methods
    )


def _own_arrays(out: dict, names) -> dict:
    seen: set[int] = set()
    cols = {}
    for k in names:
        v = out[k]
        if isinstance(v, np.ndarray) and (
            not v.flags.writeable or id(v) in seen or v.base is not None
        ):
            v = v.copy()
        seen.add(id(v))
        cols[k] = v
    return cols


def _append(df: pd.DataFrame, outputs: pd.DataFrame) -> pd.DataFrame:
    """The user's columns, then ours; an output name the user already has gets a ``ws_`` prefix."""
    taken = {str(c) for c in df.columns}
    renamed = outputs.rename(columns={c: f"ws_{c}" for c in outputs.columns if c in taken})
    renamed.index = df.index
    return pd.concat([df, renamed], axis=1)


def threads() -> int:
    """Threads ``analyse`` may use: ``WALLSTRESS_THREADS`` if set (a whole number >= 1), else the
    CPUs this process may run on, at most ``MAX_THREADS``."""
    env = os.environ.get(THREADS_ENV, "").strip()
    if env:
        try:
            n = int(env)
        except ValueError:
            n = 0
        if n < 1:
            raise ValueError(f"{THREADS_ENV}={env!r}: give a whole number of threads, 1 or more")
        return n
    try:
        cpus = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not on Linux
        cpus = os.cpu_count() or 1
    return max(1, min(cpus, MAX_THREADS))


def _partition_bounds(n: int, workers: int) -> list[tuple[int, int]]:
    """Row ranges [start, stop) of about equal size, each >= PARTITION_MIN_ROWS (one if n is small)."""
    k = max(1, min(workers, n // PARTITION_MIN_ROWS))
    edges = [n * i // k for i in range(k + 1)]
    return list(zip(edges[:-1], edges[1:], strict=True))


def _compute_in_partitions(c: pd.DataFrame, o: Options, refset) -> tuple[dict, list, dict]:
    """:func:`_compute_columns` over row partitions in threads, joined in row order.

    The first partition runs in the calling thread. Each output column is joined as soon as its
    pieces are taken (the pieces are then freed), so the join holds at most one column twice.
    """
    bounds = _partition_bounds(len(c), threads())

    def work(b):
        return _compute_columns(c.iloc[b[0] : b[1]], o, refset)

    if len(bounds) == 1:
        return work(bounds[0])
    with ThreadPoolExecutor(len(bounds) - 1, thread_name_prefix="wallstress") as pool:
        later = [pool.submit(work, b) for b in bounds[1:]]
        results = [work(bounds[0])] + [f.result() for f in later]
    out: dict[str, object] = {}
    for name in list(results[0][0]):
        pieces = [r[0].pop(name) for r in results]
        if isinstance(pieces[0], pd.Categorical):  # same categories: the codes are joined
            out[name] = union_categoricals(pieces)
        else:
            out[name] = np.concatenate(pieces)
        del pieces
    parts, seen = [], set()
    for (start, _), r in zip(bounds, results, strict=True):
        for f in r[1]:
            rows = f["row"].to_numpy()
            if (rows < 0).all():  # a finding about a column: once, however many partitions say it
                keys = fnd.column_level_keys(f)
                if not seen.issuperset(keys):
                    seen.update(keys)
                    parts.append(f)
            else:
                parts.append(f.assign(row=rows + start) if start else f)
    return out, parts, results[0][2]


def _text(codes, names):
    return fnd.categorical_text(codes, names)


def _compute_columns(c: pd.DataFrame, o: Options, refset) -> tuple[dict, list, dict]:
    """All measures from a validated canonical table, vectorised: (columns, findings, used).

    The findings come as one table per rule, in rule order (joined later with every step's).

    Columns come as a dict (text columns as Categoricals built from codes); ``used`` records
    which formula and which coefficients each measure came from, for the methods record.
    """
    n = len(c)

    def get(name):
        return c[name].to_numpy(dtype=float) if name in c.columns else np.full(n, np.nan)

    def all_nan():  # the result of a formula whose input column is absent: no arithmetic on NaN
        return np.full(n, np.nan)

    sex = c["sex"] if "sex" in c.columns else pd.Series(np.full(n, None, dtype=object))
    masks = classify.sex_masks(sex)  # every sex-specific step below reads these masks only
    parts: list[pd.DataFrame] = []
    used: dict[str, dict] = {}

    def flag(mask, code, severity, message, field=""):
        mask = np.asarray(mask, dtype=bool)
        if mask.any():
            parts.append(
                fnd.make(
                    np.flatnonzero(mask),
                    code=code,
                    severity=severity,
                    message=message,
                    column=field,
                    field=field,
                )
            )

    out: dict[str, object] = {}
    height, weight = get("height_cm"), get("weight_kg")
    ivsd, lvidd, pwd = get("ivsd_cm"), get("lvidd_cm"), get("pwd_cm")
    lvids, pws = get("lvids_cm"), get("pws_cm")

    # body size
    bsa = body_size.bsa_m2(height, weight, method=o.bsa_method)
    out["bsa_m2"] = bsa
    used["bsa_m2"] = {"method": o.bsa_method}

    # LV mass
    linear_method = o.mass_method if o.mass_method in LINEAR_METHODS else "ase_corrected"
    lvm = mass.lv_mass_linear_g(ivsd, lvidd, pwd, method=linear_method)
    method_names = ["", linear_method, o.mass_method]
    method_col = np.where(np.isnan(lvm), 0, 1).astype(np.int8)
    if o.mass_method in AREA_METHODS:
        if o.mass_method == "area_length":
            lvm2d = mass.lv_mass_area_length_g(
                get("epi_area_cm2"), get("endo_area_cm2"), get("lv_length_cm")
            )
        else:
            lvm2d = mass.lv_mass_truncated_ellipsoid_g(
                get("epi_area_cm2"),
                get("endo_area_cm2"),
                get("lv_semimajor_cm"),
                get("lv_truncated_semimajor_cm"),
            )
        has2d = ~np.isnan(lvm2d)
        flag(
            ~has2d & ~np.isnan(lvm),
            "mass_linear_fallback",
            "note",
            f"No complete 2D measurements for {o.mass_method}: LV mass by the linear "
            f"{linear_method} formula instead.",
            "lv_mass_g",
        )
        lvm = np.where(has2d, lvm2d, lvm)
        method_col = np.where(has2d, 2, method_col).astype(np.int8)
        used["lv_mass_g"] = {"method": o.mass_method, "fallback": linear_method}
    else:
        used["lv_mass_g"] = {"method": linear_method}
    out["lv_mass_g"] = lvm
    out["lv_mass_method"] = _text(method_col, method_names)

    h27 = body_size.height_power(height, 2.7)
    with np.errstate(invalid="ignore", divide="ignore"):
        out["lvmi_bsa_g_m2"] = lvm / bsa
        out["lvmi_h27_g_m2_7"] = lvm / h27
        out["lvmi_h_g_m"] = lvm / body_size.height_power(height, 1.0)
    rwt = mass.relative_wall_thickness(lvidd, pwd, ivsd, method=o.rwt_method)
    out["rwt"] = rwt
    used["rwt"] = {"method": o.rwt_method}

    # geometry, four groups
    out["geometry"] = _text(
        classify.geometry_4_codes(out[refset.mass_index], rwt, sex, refset, masks=masks),
        classify.GEOMETRY_4_NAMES,
    )
    used["geometry"] = {"method": "ganau_1992", "mass_index": refset.mass_index}

    # volumes (measured where present, else Teichholz)
    edv_t = function.teichholz_volume_ml(lvidd)
    esv_t = function.teichholz_volume_ml(lvids)
    sv_t = edv_t - esv_t
    have_t = ~np.isnan(edv_t)
    if "lvedv_ml" in c.columns:
        edv_meas = get("lvedv_ml")
        have_meas = ~np.isnan(edv_meas)
        edv = np.where(have_meas, edv_meas, edv_t)
        # 0 none, 1 measured, 2 Teichholz (int8 arithmetic on the masks: no branch per row)
        m = have_meas.view(np.int8)
        source = m + 2 * have_t.view(np.int8) * (1 - m)
        teichholz_used = bool((~have_meas & have_t).any())
    else:  # no measured volumes (an M-mode list): Teichholz on every row that has LVIDd
        edv = edv_t
        source = 2 * have_t.view(np.int8)
        teichholz_used = bool(have_t.any())
    out["edv_ml"] = edv
    out["edv_source"] = _text(source, ["", "measured", "teichholz"])
    # one note for the column, not one per row: where no volume is measured (most M-mode lists)
    # it would sit on every row and hide the flags that matter; edv_source names each row's source
    if teichholz_used:
        parts.append(
            fnd.make(
                [-1],
                code="edv_from_teichholz",
                severity="note",
                message="End-diastolic volume was estimated by Teichholz from LVIDd on the rows "
                "without a measured volume (edv_source 'teichholz'): their volume-based classes "
                "(geometry_8, EDV index, concentricity) are less reliable than with biplane volumes.",
                column="edv_ml",
                field="edv_ml",
            )
        )
    with np.errstate(invalid="ignore", divide="ignore"):
        out["edv_index_ml_m2"] = edv / bsa
    out["concentricity_g_ml23"] = mass.concentricity_g_ml23(lvm, edv)
    out["geometry_8"] = _text(
        classify.geometry_8_codes(
            out[refset.mass_index], rwt, out["edv_index_ml_m2"], sex, refset, masks=masks
        ),
        classify.GEOMETRY_8_NAMES,
    )

    # grades
    for col, measure, values in (
        ("lvmi_grade", "lvmi_bsa_g_m2", out["lvmi_bsa_g_m2"]),
        ("rwt_grade", "rwt", rwt),
        ("lvidd_grade", "lvidd_cm", lvidd),
        ("ivsd_grade", "ivsd_cm", ivsd),
        ("pwd_grade", "pwd_cm", pwd),
    ):
        out[col] = _text(*classify.grade_codes(values, sex, refset, measure, masks=masks))

    # chamber function
    fs = function.fractional_shortening_pct(lvidd, lvids)
    out["fs_pct"] = fs
    out["edv_teichholz_ml"] = edv_t
    out["esv_teichholz_ml"] = esv_t
    out["sv_teichholz_ml"] = sv_t
    out["ef_teichholz_pct"] = function.ejection_fraction_pct(edv_t, esv_t)
    checks = refset.coefficients("linear_method_checks")
    fs_lo, fs_hi = checks["fs_min_pct"].value, checks["fs_max_pct"].value
    with np.errstate(invalid="ignore"):
        flag(
            (fs < fs_lo) | (fs > fs_hi),
            "fs_out_of_range",
            "warning",
            f"Fractional shortening outside {fs_lo:g}-{fs_hi:g} %: check the diameters (or the ventricle is "
            "severely impaired or hyperdynamic).",
            "fs_pct",
        )

    # pressure and stress
    def readings(first, *repeats):  # the columns present (an absent repeat adds nothing)
        return [get(first), *(get(r) for r in repeats if r in c.columns)]

    sbp = stress.mean_of_readings(*readings("sbp_mmhg", "sbp_2_mmhg", "sbp_3_mmhg"))
    dbp = stress.mean_of_readings(*readings("dbp_mmhg", "dbp_2_mmhg", "dbp_3_mmhg"))
    if o.es_pressure == "measured":
        measured = get("es_pressure_measured_mmhg")
        esp = np.where(np.isnan(measured), sbp, measured)
        flag(
            np.isnan(measured) & ~np.isnan(sbp),
            "es_pressure_from_cuff",
            "note",
            "No measured end-systolic pressure: cuff systolic used instead.",
            "es_pressure_mmhg",
        )
    else:
        esp = stress.es_pressure_mmhg(sbp, dbp, method=o.es_pressure)
    out["es_pressure_mmhg"] = esp
    used["es_pressure_mmhg"] = {
        "method": o.es_pressure,
        "readings": "mean of the cuff readings present",
    }
    out["mess_kdyn_cm2"] = stress.meridional_es_stress_kdyn_cm2(
        esp, lvids, pws, constant=o.stress_constant
    )
    cess = stress.circumferential_es_stress_kdyn_cm2(esp, lvids, pws, constant=o.stress_constant)
    out["cess_kdyn_cm2"] = cess
    used["mess_kdyn_cm2"] = used["cess_kdyn_cm2"] = {"constant": o.stress_constant}

    # midwall shortening and its stress correction
    mfs = function.midwall_fs_pct(ivsd, lvidd, pwd, lvids)
    line = refset.coefficients("midwall_stress_line")
    pred = function.predicted_from_line(
        cess, line["intercept_pct"].value, line["slope_pct_per_kdyn_cm2"].value
    )
    out["midwall_fs_pct"] = mfs
    out["midwall_fs_predicted_pct"] = pred
    out["midwall_fs_stress_corrected_pct"] = function.stress_corrected_pct(mfs, pred)
    used["midwall_fs_predicted_pct"] = {
        "line": {k: v.value for k, v in line.items()},
        "verified": sorted({v.verified for v in line.values()}),
    }

    if "ejection_time_ms" in c.columns:
        et, hr = get("ejection_time_ms"), get("hr_bpm")
        out["vcf_circ_s"] = function.vcf_circ_s(fs, et)
        out["vcfc_circ_s"] = function.vcfc_circ_s(fs, et, hr)
    else:
        out["vcf_circ_s"], out["vcfc_circ_s"] = all_nan(), all_nan()

    # appropriateness of LV mass (stroke work from measured volumes where both present)
    if "lvedv_ml" in c.columns and "lvesv_ml" in c.columns:
        edv_meas, esv_meas = get("lvedv_ml"), get("lvesv_ml")
        esv_meas_ok = ~np.isnan(edv_meas) & ~np.isnan(esv_meas)
        sv = np.where(esv_meas_ok, edv_meas - esv_meas, sv_t)
    else:
        sv = sv_t
    sw = stress.stroke_work_g_m(sbp, sv)
    out["stroke_work_g_m"] = sw
    coef = refset.coefficients("mass_prediction")
    # 1.0 male, 0.0 female, NaN unknown: one lookup per row (0 unknown, 1 F, 2 M)
    sex_index = masks["F"].view(np.int8) + 2 * masks["M"].view(np.int8)
    male = np.array([np.nan, 0.0, 1.0])[sex_index]
    pred_lvm = function.predicted_lv_mass_g(height, sw, male, {k: v.value for k, v in coef.items()})
    out["lv_mass_predicted_g"] = pred_lvm
    appr = function.appropriateness_pct(lvm, pred_lvm)
    out["lv_mass_appropriateness_pct"] = appr
    limit = coef["inappropriate_above_pct"].value
    with np.errstate(invalid="ignore"):
        flag(
            appr > limit,
            "inappropriate_lv_mass",
            "note",
            f"LV mass is above {limit:g} % of the mass predicted from sex, height^2.7 and stroke work "
            "(coefficients from memory: interpret with care).",
            "lv_mass_appropriateness_pct",
        )
    used["lv_mass_predicted_g"] = {
        "coefficients": {k: v.value for k, v in coef.items()},
        "verified": sorted({v.verified for v in coef.values()}),
    }

    return out, parts, used
