"""Every measure of a validated canonical table, one function per group of output columns.

Each group reads the canonical inputs (cm, kg, mmHg, mL, ms), calls the pure formulas of
``wallstress.formulas`` and the classifiers, and writes its columns into one shared ``Measures``:
the columns (text columns as Categoricals built from integer codes), the findings of its rules, and
which formula and coefficients it used (for the methods record). The registry
``wallstress.schema.outputs`` names, for each column, the function here or in ``formulas`` that
computes it. Vectorised throughout: no loop over rows.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.analysis import classify
from wallstress.formulas import body_size, mass, shortening, stress, volumes
from wallstress.options import Options
from wallstress.schema.outputs import OUTPUTS


@dataclass
class Measures:
    """The inputs of one (partition of a) table and what the groups computed from them."""

    canonical: pd.DataFrame
    options: Options
    refset: object
    out: dict = field(default_factory=dict)  # output column -> array or Categorical
    parts: list = field(default_factory=list)  # findings tables, in rule order
    used: dict = field(default_factory=dict)  # output column -> formula / coefficients used
    sbp: np.ndarray | None = None  # mean cuff SBP, set by afterload for stroke work
    first_row: int = 0  # the partition's first row in the whole table (the findings' rows)

    def __post_init__(self):
        c = self.canonical
        self.n = len(c)
        self.sex = (
            c["sex"] if "sex" in c.columns else pd.Series(np.full(self.n, None, dtype=object))
        )
        self.masks = classify.sex_masks(self.sex)  # every sex-specific step reads these masks only

    def has(self, name: str) -> bool:
        return name in self.canonical.columns

    def get(self, name: str) -> np.ndarray:
        """A canonical input as floats (all NaN when the column is absent)."""
        if self.has(name):
            return self.canonical[name].to_numpy(dtype=float)
        return np.full(self.n, np.nan)

    def flag(self, mask, code: str, severity: str, message: str, field: str = "") -> None:
        """A finding on every row of ``mask``."""
        mask = np.asarray(mask, dtype=bool)
        if mask.any():
            self.parts.append(
                fnd.make(
                    np.flatnonzero(mask) + self.first_row,
                    code=code,
                    severity=severity,
                    message=message,
                    column=field,
                    field=field,
                )
            )


def compute(
    c: pd.DataFrame, o: Options, refset, out: dict | None = None, first_row: int = 0
) -> tuple[dict, list, dict]:
    """All measures from a validated canonical table: (columns, findings, used).

    ``out``: the mapping the columns are put in (by ``out[name] = values`` only, never changed
    after), e.g. one that writes them straight into a larger table; a new dict by default.
    ``first_row``: where ``c`` starts in the whole table (a partition), added to the rows of the
    findings on rows (a finding about a column keeps row -1)."""
    m = Measures(c, o, refset, {} if out is None else out, first_row=first_row)
    for group in GROUPS:
        group(m)
    return m.out, m.parts, m.used


def _text(codes, names):
    return fnd.categorical_text(codes, names)


def bsa(m: Measures) -> None:
    m.out["bsa_m2"] = body_size.bsa_m2(
        m.get("height_cm"), m.get("weight_kg"), method=m.options.bsa_method
    )
    m.used["bsa_m2"] = {"method": m.options.bsa_method}


def lv_mass(m: Measures) -> None:
    """LV mass by the chosen method; a 2D method falls back to the linear one row by row."""
    o = m.options
    linear = o.mass_method if o.mass_method in mass.LINEAR_MASS_METHODS else "ase_corrected"
    lvm = mass.lv_mass_linear_g(m.get("ivsd_cm"), m.get("lvidd_cm"), m.get("pwd_cm"), method=linear)
    method_names = ["", linear, o.mass_method]
    method_col = np.where(np.isnan(lvm), 0, 1).astype(np.int8)
    if o.mass_method in mass.AREA_MASS_METHODS:
        if o.mass_method == "area_length":
            lvm2d = mass.lv_mass_area_length_g(
                m.get("epi_area_cm2"), m.get("endo_area_cm2"), m.get("lv_length_cm")
            )
        else:
            lvm2d = mass.lv_mass_truncated_ellipsoid_g(
                m.get("epi_area_cm2"),
                m.get("endo_area_cm2"),
                m.get("lv_semimajor_cm"),
                m.get("lv_truncated_semimajor_cm"),
            )
        has2d = ~np.isnan(lvm2d)
        m.flag(
            ~has2d & ~np.isnan(lvm),
            "mass_linear_fallback",
            "note",
            f"No complete 2D measurements for {o.mass_method}: LV mass by the linear "
            f"{linear} formula instead.",
            "lv_mass_g",
        )
        lvm = np.where(has2d, lvm2d, lvm)
        method_col = np.where(has2d, 2, method_col).astype(np.int8)
        m.used["lv_mass_g"] = {"method": o.mass_method, "fallback": linear}
    else:
        m.used["lv_mass_g"] = {"method": linear}
    m.out["lv_mass_g"] = lvm
    m.out["lv_mass_method"] = _text(method_col, method_names)


def mass_indexes(m: Measures) -> None:
    lvm, height = m.out["lv_mass_g"], m.get("height_cm")
    with np.errstate(invalid="ignore", divide="ignore"):
        m.out["lvmi_bsa_g_m2"] = lvm / m.out["bsa_m2"]
        m.out["lvmi_h27_g_m2_7"] = lvm / body_size.height_power(height, 2.7)
        m.out["lvmi_h_g_m"] = lvm / body_size.height_power(height, 1.0)


def geometry(m: Measures) -> None:
    """RWT and the four geometry classes (Ganau 1992) by the set's mass index and RWT limits."""
    o, refset = m.options, m.refset
    rwt = mass.relative_wall_thickness(
        m.get("lvidd_cm"), m.get("pwd_cm"), m.get("ivsd_cm"), method=o.rwt_method
    )
    m.out["rwt"] = rwt
    m.used["rwt"] = {"method": o.rwt_method}
    m.out["geometry"] = _text(
        classify.geometry_4_codes(m.out[refset.mass_index], rwt, m.sex, refset, masks=m.masks),
        classify.GEOMETRY_4_NAMES,
    )
    m.used["geometry"] = {"method": "ganau_1992", "mass_index": refset.mass_index}


def volumes_and_geometry_8(m: Measures) -> None:
    """EDV (measured where present, else Teichholz), its index, concentricity, eight groups."""
    edv_t = volumes.teichholz_volume_ml(m.get("lvidd_cm"))
    m.out["edv_teichholz_ml"] = edv_t
    have_t = ~np.isnan(edv_t)
    if m.has("lvedv_ml"):
        edv_meas = m.get("lvedv_ml")
        have_meas = ~np.isnan(edv_meas)
        edv = np.where(have_meas, edv_meas, edv_t)
        # 0 none, 1 measured, 2 Teichholz (int8 arithmetic on the masks: no branch per row)
        measured = have_meas.view(np.int8)
        source = measured + 2 * have_t.view(np.int8) * (1 - measured)
        teichholz_used = bool((~have_meas & have_t).any())
    else:  # no measured volumes (an M-mode list): Teichholz on every row that has LVIDd
        edv = edv_t
        source = 2 * have_t.view(np.int8)
        teichholz_used = bool(have_t.any())
    m.out["edv_ml"] = edv
    m.out["edv_source"] = _text(source, ["", "measured", "teichholz"])
    # one note for the column, not one per row: where no volume is measured (most M-mode lists)
    # it would sit on every row and hide the flags that matter; edv_source names each row's source
    if teichholz_used:
        m.parts.append(
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
        m.out["edv_index_ml_m2"] = edv / m.out["bsa_m2"]
    m.out["concentricity_g_ml23"] = mass.concentricity_g_ml23(m.out["lv_mass_g"], edv)
    m.out["geometry_8"] = _text(
        classify.geometry_8_codes(
            m.out[m.refset.mass_index],
            m.out["rwt"],
            m.out["edv_index_ml_m2"],
            m.sex,
            m.refset,
            masks=m.masks,
        ),
        classify.GEOMETRY_8_NAMES,
    )


def grades(m: Measures) -> None:
    """Severity grades of the mass index, RWT, LVIDd and the walls by the set's partitions."""
    for col, measure, values in (
        ("lvmi_grade", "lvmi_bsa_g_m2", m.out["lvmi_bsa_g_m2"]),
        ("lvmi_h27_grade", "lvmi_h27_g_m2_7", m.out["lvmi_h27_g_m2_7"]),
        ("rwt_grade", "rwt", m.out["rwt"]),
        ("lvidd_grade", "lvidd_cm", m.get("lvidd_cm")),
        ("ivsd_grade", "ivsd_cm", m.get("ivsd_cm")),
        ("pwd_grade", "pwd_cm", m.get("pwd_cm")),
    ):
        m.out[col] = _text(*classify.grade_codes(values, m.sex, m.refset, measure, masks=m.masks))


def chamber_function(m: Measures) -> None:
    """Fractional shortening and the Teichholz volumes, stroke volume and ejection fraction."""
    fs = shortening.fractional_shortening_pct(m.get("lvidd_cm"), m.get("lvids_cm"))
    edv_t = m.out["edv_teichholz_ml"]
    esv_t = volumes.teichholz_volume_ml(m.get("lvids_cm"))
    m.out["fs_pct"] = fs
    m.out["esv_teichholz_ml"] = esv_t
    m.out["sv_teichholz_ml"] = edv_t - esv_t
    m.out["ef_teichholz_pct"] = volumes.ejection_fraction_pct(edv_t, esv_t)
    checks = m.refset.coefficients("linear_method_checks")
    fs_lo, fs_hi = checks["fs_min_pct"].value, checks["fs_max_pct"].value
    with np.errstate(invalid="ignore"):
        m.flag(
            (fs < fs_lo) | (fs > fs_hi),
            "fs_out_of_range",
            "warning",
            f"Fractional shortening outside {fs_lo:g}-{fs_hi:g} %: check the diameters (or the "
            "ventricle is severely impaired or hyperdynamic).",
            "fs_pct",
        )


def _mean_reading(m: Measures, first: str, *repeats: str) -> np.ndarray:
    """Mean of the cuff readings present (an absent repeat column adds nothing)."""
    return stress.mean_of_readings(m.get(first), *(m.get(r) for r in repeats if m.has(r)))


def afterload(m: Measures) -> None:
    """End-systolic pressure from the cuff (or measured), meridional and circumferential stress."""
    o = m.options
    sbp = _mean_reading(m, "sbp_mmhg", "sbp_2_mmhg", "sbp_3_mmhg")
    dbp = _mean_reading(m, "dbp_mmhg", "dbp_2_mmhg", "dbp_3_mmhg")
    m.sbp = sbp  # stroke work (appropriateness) uses the same mean
    if o.es_pressure == "measured":
        measured = m.get("es_pressure_measured_mmhg")
        esp = np.where(np.isnan(measured), sbp, measured)
        m.flag(
            np.isnan(measured) & ~np.isnan(sbp),
            "es_pressure_from_cuff",
            "note",
            "No measured end-systolic pressure: cuff systolic used instead.",
            "es_pressure_mmhg",
        )
    else:
        esp = stress.es_pressure_mmhg(sbp, dbp, method=o.es_pressure)
    m.out["es_pressure_mmhg"] = esp
    m.used["es_pressure_mmhg"] = {
        "method": o.es_pressure,
        "readings": "mean of the cuff readings present",
    }
    lvids, pws = m.get("lvids_cm"), m.get("pws_cm")
    m.out["mess_kdyn_cm2"] = stress.meridional_es_stress_kdyn_cm2(
        esp, lvids, pws, constant=o.stress_constant
    )
    m.out["cess_kdyn_cm2"] = stress.circumferential_es_stress_kdyn_cm2(
        esp, lvids, pws, constant=o.stress_constant
    )
    m.used["mess_kdyn_cm2"] = m.used["cess_kdyn_cm2"] = {"constant": o.stress_constant}


def midwall(m: Measures) -> None:
    """Midwall shortening and its stress correction by the set's midwall-stress line."""
    mfs = shortening.midwall_fs_pct(
        m.get("ivsd_cm"), m.get("lvidd_cm"), m.get("pwd_cm"), m.get("lvids_cm")
    )
    line = m.refset.coefficients("midwall_stress_line")
    pred = shortening.predicted_from_line(
        m.out["cess_kdyn_cm2"], line["intercept_pct"].value, line["slope_pct_per_kdyn_cm2"].value
    )
    m.out["midwall_fs_pct"] = mfs
    m.out["midwall_fs_predicted_pct"] = pred
    m.out["midwall_fs_stress_corrected_pct"] = shortening.stress_corrected_pct(mfs, pred)
    m.used["midwall_fs_predicted_pct"] = {
        "line": {k: v.value for k, v in line.items()},
        "verified": sorted({v.verified for v in line.values()}),
    }


def fibre_velocity(m: Measures) -> None:
    """Vcf and rate-corrected Vcf where the list has an ejection time (else NaN, no arithmetic)."""
    if m.has("ejection_time_ms"):
        fs, et = m.out["fs_pct"], m.get("ejection_time_ms")
        m.out["vcf_circ_s"] = shortening.vcf_circ_s(fs, et)
        m.out["vcfc_circ_s"] = shortening.vcfc_circ_s(fs, et, m.get("hr_bpm"))
    else:
        m.out["vcf_circ_s"], m.out["vcfc_circ_s"] = np.full(m.n, np.nan), np.full(m.n, np.nan)


def appropriateness(m: Measures) -> None:
    """Stroke work, the LV mass predicted from sex, height^2.7 and stroke work, and their ratio."""
    sv = m.out["sv_teichholz_ml"]
    if m.has("lvedv_ml") and m.has("lvesv_ml"):  # measured volumes where both are present
        edv_meas, esv_meas = m.get("lvedv_ml"), m.get("lvesv_ml")
        sv = np.where(~np.isnan(edv_meas) & ~np.isnan(esv_meas), edv_meas - esv_meas, sv)
    sw = stress.stroke_work_g_m(m.sbp, sv)
    m.out["stroke_work_g_m"] = sw
    coef = m.refset.coefficients("mass_prediction")
    # 1.0 male, 0.0 female, NaN unknown: one lookup per row (0 unknown, 1 F, 2 M)
    sex_index = m.masks["F"].view(np.int8) + 2 * m.masks["M"].view(np.int8)
    male = np.array([np.nan, 0.0, 1.0])[sex_index]
    pred_lvm = mass.predicted_lv_mass_g(
        m.get("height_cm"), sw, male, {k: v.value for k, v in coef.items()}
    )
    m.out["lv_mass_predicted_g"] = pred_lvm
    appr = mass.appropriateness_pct(m.out["lv_mass_g"], pred_lvm)
    m.out["lv_mass_appropriateness_pct"] = appr
    limit = coef["inappropriate_above_pct"].value
    with np.errstate(invalid="ignore"):
        m.flag(
            appr > limit,
            "inappropriate_lv_mass",
            "note",
            f"LV mass is above {limit:g} % of the mass predicted from sex, height^2.7 and stroke "
            "work (coefficients from memory: interpret with care).",
            "lv_mass_appropriateness_pct",
        )
    m.used["lv_mass_predicted_g"] = {
        "coefficients": {k: v.value for k, v in coef.items()},
        "verified": sorted({v.verified for v in coef.values()}),
    }


def plausibility(m: Measures) -> None:
    """A warning where a result is far outside physiology (the registry's ``plausible`` range):
    one of its inputs is probably mistyped, even though each was within its own range."""
    for out in OUTPUTS:
        if out.plausible is None or out.name not in m.out:
            continue
        lo, hi = out.plausible
        v = np.asarray(m.out[out.name], dtype=float)
        with np.errstate(invalid="ignore"):
            m.flag(
                (v < lo) | (v > hi),
                f"{out.name}_implausible",
                "warning",
                f"{out.label} is outside {lo:g}-{hi:g} {out.unit}, far outside physiology: check the "
                f"measurements it comes from ({', '.join(out.inputs)}).",
                out.name,
            )


# In order: a group reads only what the groups before it wrote.
GROUPS = (
    bsa,
    lv_mass,
    mass_indexes,
    geometry,
    volumes_and_geometry_8,
    grades,
    chamber_function,
    afterload,
    midwall,
    fibre_velocity,
    appropriateness,
    plausibility,
)
