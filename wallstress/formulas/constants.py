"""Physical and conventional constants, computed from their definitions where they have one.

Units: pressure in mmHg, Pa, dyn/cm2 and kdyn/cm2 (1 kdyn/cm2 = 1000 dyn/cm2 = 100 Pa); density in
g/mL (= g/cm3); acceleration in m/s2.

References
----------
.. [1] BIPM, The International System of Units (SI Brochure), 9th ed., 2019, Table 8
   (non-SI units: 1 mmHg = 133.322 Pa) and the definition of standard gravity.
.. [2] Devereux RB, Alonso DR, Lutas EM, et al. Echocardiographic assessment of left ventricular
   hypertrophy: comparison to necropsy findings. Am J Cardiol. 1986;57:450-458.
.. [3] Schiller NB, Shah PM, Crawford M, et al. Recommendations for quantitation of the left
   ventricle by two-dimensional echocardiography. J Am Soc Echocardiogr. 1989;2:358-367.
.. [4] Lang RM, Badano LP, Mor-Avi V, et al. Recommendations for cardiac chamber quantification
   by echocardiography in adults. J Am Soc Echocardiogr. 2015;28:1-39.
"""

from __future__ import annotations

# --- pressure -------------------------------------------------------------------------------
# Conventional millimetre of mercury: 13.5951 g/cm3 * 1 mm * standard gravity, defined as exactly
# 133.322387415 Pa [1].
MMHG_PA: float = 133.322387415
# 1 Pa = 1 N/m2 = 1e5 dyn / 1e4 cm2 = 10 dyn/cm2 (definition of the dyne and the pascal).
DYN_CM2_PER_PA: float = 10.0
# 1 mmHg in dyn/cm2 (= 1333.22387415).
MMHG_DYN_CM2: float = MMHG_PA * DYN_CM2_PER_PA
# 1 mmHg in kdyn/cm2 (= 1.33322387415), the unit of wall stress in the echo literature.
MMHG_KDYN_CM2: float = MMHG_DYN_CM2 / 1000.0
# 1 kPa in mmHg (= 7.50061683).
KPA_MMHG: float = 1000.0 / MMHG_PA

# Standard acceleration of gravity, exact by definition [1]. [m/s2]
STANDARD_GRAVITY_M_S2: float = 9.80665
# Conventional density of mercury used in the definition of the mmHg. [g/cm3]
MERCURY_DENSITY_G_CM3: float = 13.5951
# 1 mmHg in gram-force per cm2 (= 1.35951): MMHG_PA / (g_n * 1 g / 1 cm2) = 133.322 / 98.0665.
MMHG_GF_CM2: float = MMHG_PA / (STANDARD_GRAVITY_M_S2 * 1e-3 / 1e-4)
# 1 mmHg * 1 mL in gram-force metres (= 0.0135951): gf/cm2 * cm3 = gf cm, and 1 cm = 0.01 m.
MMHG_ML_GF_M: float = MMHG_GF_CM2 * 0.01

# --- myocardium -----------------------------------------------------------------------------
# Specific gravity of myocardium used with the linear (cube) mass formulas: Devereux 1986 [2],
# kept in the ASE-corrected formula by Lang 2015 [4]. [g/mL]
MYOCARDIAL_DENSITY_G_ML: float = 1.04
# Density used with the 2D area-length and truncated-ellipsoid formulas: Schiller 1989 [3],
# Lang 2015 appendix [4]. [g/mL]
MYOCARDIAL_DENSITY_2D_G_ML: float = 1.05
