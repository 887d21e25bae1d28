"""Pure, vectorised formulas (numpy only): body size, LV mass, wall stress and chamber function.

Every function takes scalars, ndarrays or pandas Series (a Series keeps its index), returns NaN
where an input is missing or out of its domain, and raises ValueError only for a wrong call (an
unknown method name, listing the valid ones). Values marked
"from memory" in the docstrings were recalled, not read in the source.
"""

from wallstress.formulas.body_size import BSA_METHODS, bsa_m2, height_power
from wallstress.formulas.constants import (
    DYN_CM2_PER_PA,
    KPA_MMHG,
    MMHG_DYN_CM2,
    MMHG_GF_CM2,
    MMHG_KDYN_CM2,
    MMHG_ML_GF_M,
    MMHG_PA,
    MYOCARDIAL_DENSITY_2D_G_ML,
    MYOCARDIAL_DENSITY_G_ML,
)
from wallstress.formulas.mass import (
    AREA_MASS_METHODS,
    LINEAR_MASS_METHODS,
    PREDICTED_MASS_COEFFICIENTS_FROM_MEMORY,
    PREDICTED_MASS_KEYS,
    RWT_METHODS,
    appropriateness_pct,
    concentricity_g_ml23,
    lv_mass_area_length_g,
    lv_mass_linear_g,
    lv_mass_truncated_ellipsoid_g,
    predicted_lv_mass_g,
    relative_wall_thickness,
)
from wallstress.formulas.shortening import (
    MIDWALL_MODELS,
    fractional_shortening_pct,
    midwall_fs_pct,
    predicted_from_line,
    stress_corrected_pct,
    vcf_circ_s,
    vcfc_circ_s,
)
from wallstress.formulas.stress import (
    ES_PRESSURE_METHODS,
    STRESS_CONSTANTS,
    circumferential_es_stress_kdyn_cm2,
    es_pressure_mmhg,
    laplace_thin_sphere_kdyn_cm2,
    mean_of_readings,
    meridional_es_stress_kdyn_cm2,
    stroke_work_g_m,
)
from wallstress.formulas.volumes import ejection_fraction_pct, teichholz_volume_ml

__all__ = [
    "AREA_MASS_METHODS",
    "BSA_METHODS",
    "DYN_CM2_PER_PA",
    "ES_PRESSURE_METHODS",
    "KPA_MMHG",
    "LINEAR_MASS_METHODS",
    "MIDWALL_MODELS",
    "MMHG_DYN_CM2",
    "MMHG_GF_CM2",
    "MMHG_KDYN_CM2",
    "MMHG_ML_GF_M",
    "MMHG_PA",
    "MYOCARDIAL_DENSITY_2D_G_ML",
    "MYOCARDIAL_DENSITY_G_ML",
    "PREDICTED_MASS_COEFFICIENTS_FROM_MEMORY",
    "PREDICTED_MASS_KEYS",
    "RWT_METHODS",
    "STRESS_CONSTANTS",
    "appropriateness_pct",
    "bsa_m2",
    "circumferential_es_stress_kdyn_cm2",
    "concentricity_g_ml23",
    "ejection_fraction_pct",
    "es_pressure_mmhg",
    "fractional_shortening_pct",
    "height_power",
    "laplace_thin_sphere_kdyn_cm2",
    "lv_mass_area_length_g",
    "lv_mass_linear_g",
    "lv_mass_truncated_ellipsoid_g",
    "mean_of_readings",
    "meridional_es_stress_kdyn_cm2",
    "midwall_fs_pct",
    "predicted_from_line",
    "predicted_lv_mass_g",
    "relative_wall_thickness",
    "stress_corrected_pct",
    "stroke_work_g_m",
    "teichholz_volume_ml",
    "vcf_circ_s",
    "vcfc_circ_s",
]
