"""Wall stress, Laplace limits, end-systolic pressure, cuff averaging, stroke work and the unit
constants, against their published equations and definitions.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from wallstress.formulas import (
    DYN_CM2_PER_PA,
    ES_PRESSURE_METHODS,
    KPA_MMHG,
    MMHG_DYN_CM2,
    MMHG_GF_CM2,
    MMHG_KDYN_CM2,
    MMHG_ML_GF_M,
    MMHG_PA,
    STRESS_CONSTANTS,
    circumferential_es_stress_kdyn_cm2,
    es_pressure_mmhg,
    laplace_thin_sphere_kdyn_cm2,
    mean_of_readings,
    meridional_es_stress_kdyn_cm2,
    stroke_work_g_m,
)

# --- unit constants ----------------------------------------------------------------------------


def test_mmhg_pa_vs_bipm_si_brochure_2019():
    """BIPM SI Brochure, 9th ed., 2019 (non-SI units): 1 mmHg = 133.322 Pa; the conventional mmHg
    is 13.5951 g/cm3 (13595.1 kg/m3) * 9.80665 m/s2 * 0.001 m = 133.322387415 Pa (definition)."""
    assert MMHG_PA == pytest.approx(13595.1 * 9.80665 * 0.001, rel=1e-15)
    assert MMHG_PA == pytest.approx(133.322387, abs=5e-7)


def test_kpa_mmhg_vs_definition():
    """1 kPa = 7.50062 mmHg (definition, sources.md 'Units'; rounding 5e-6)."""
    assert KPA_MMHG == pytest.approx(7.50062, abs=5e-6)
    assert 1000.0 / MMHG_PA == pytest.approx(KPA_MMHG, rel=1e-15)


def test_mmhg_dyn_cm2_vs_definition():
    """1 Pa = 1 N/m2 = 1e5 dyn / 1e4 cm2 = 10 dyn/cm2; 1 mmHg = 1333.224 dyn/cm2 = 1.333224
    kdyn/cm2 (definitions)."""
    assert DYN_CM2_PER_PA == 1e5 / 1e4
    assert MMHG_DYN_CM2 == pytest.approx(1333.224, abs=5e-4)
    assert MMHG_KDYN_CM2 == pytest.approx(1.333224, abs=5e-7)


def test_mmhg_gf_cm2_vs_definition():
    """1 mmHg = 1.35951 gf/cm2: a 1 mm column of 13.5951 g/cm3 mercury weighs 1.35951 gf per cm2
    (definition, sources.md 'Units')."""
    assert MMHG_GF_CM2 == pytest.approx(13.5951 * 0.1, abs=5e-6)
    assert MMHG_GF_CM2 == pytest.approx(1.35951, abs=5e-6)


# --- wall stress -------------------------------------------------------------------------------


def test_meridional_es_stress_kdyn_cm2_vs_reichek_1982():
    """Grossman W et al., J Clin Invest 1975;56:56; Reichek N et al., Circulation 1982;65:99:
    mESS = 0.334 P LVIDs / (PWs (1 + PWs/LVIDs)) (form checked, 0.334 from memory).

    120 mmHg, 3.2, 1.6 cm: 0.334 * 120 * 3.2 = 128.256; 1.6 * (1 + 0.5) = 2.4;
    128.256 / 2.4 = 53.44 kdyn/cm2 (computed; rounding 0.005)."""
    assert meridional_es_stress_kdyn_cm2(120.0, 3.2, 1.6) == pytest.approx(53.44, abs=5e-3)


def test_circumferential_es_stress_kdyn_cm2_vs_de_simone_1994():
    """Gaasch thick-walled cylinder as used by de Simone G et al., J Am Coll Cardiol
    1994;23:1444: cESS = 1.35 P a^2/(b^2 - a^2) (1 + b^2/(a + PWs/2)^2) (1.35 from memory).

    120 mmHg, LVIDs 3.2, PWs 1.6: a = 1.6, b = 3.2; a^2/(b^2 - a^2) = 2.56/7.68 = 1/3;
    b^2/2.4^2 = 10.24/5.76 = 16/9; 1 + 16/9 = 25/9; 1.35 * 120 / 3 * 25/9 = 54 * 25/9 = 150.00
    kdyn/cm2 (computed)."""
    assert circumferential_es_stress_kdyn_cm2(120.0, 3.2, 1.6) == pytest.approx(150.0, abs=5e-3)


def test_stress_exact_constants_vs_published_constants():
    """The published 0.334 and 1.35 exceed the exact mmHg -> kdyn/cm2 factors (1.333224/4 =
    0.333306 and 1.333224) by 0.21 % and 1.26 %: 'exact' is 0.21 % and 1.24 % lower (computed from
    the definition of the mmHg)."""
    m_ratio = meridional_es_stress_kdyn_cm2(120.0, 3.2, 1.6, constant="exact") / (
        meridional_es_stress_kdyn_cm2(120.0, 3.2, 1.6)
    )
    c_ratio = circumferential_es_stress_kdyn_cm2(120.0, 3.2, 1.6, constant="exact") / (
        circumferential_es_stress_kdyn_cm2(120.0, 3.2, 1.6)
    )
    assert m_ratio == pytest.approx(1.33322387415 / 4 / 0.334, rel=1e-12)
    assert 1 - m_ratio == pytest.approx(0.0021, abs=5e-5)
    assert c_ratio == pytest.approx(1.33322387415 / 1.35, rel=1e-12)
    assert 1 - c_ratio == pytest.approx(0.0124, abs=5e-5)


def test_laplace_thin_sphere_kdyn_cm2_vs_laplace():
    """Laplace's law for a thin-walled sphere, T = P r / (2 h) (checked, sources.md).
    120 mmHg, r 2 cm, h 0.5 cm: 120 * 1.33322387 * 2 / 1 = 319.974 kdyn/cm2 (computed)."""
    assert laplace_thin_sphere_kdyn_cm2(120.0, 2.0, 0.5) == pytest.approx(319.974, abs=5e-4)


def test_meridional_es_stress_approaches_thin_sphere_vs_laplace():
    """As h/r -> 0 the thick-walled meridional stress (sphere of inner radius r = LVIDs/2) tends to
    the thin-walled sphere P r / (2 h). With the exact constant the ratio is exactly
    1 / (1 + h/LVIDs) = 1 / (1 + h/(2r)) (algebra of the published form); it rises monotonically to
    1 as h/r falls. Laplace's law (checked) and Grossman 1975 form (checked)."""
    r = 2.5
    ratios = []
    for h_over_r in [0.5, 0.1, 0.01, 1e-3, 1e-5]:
        h = h_over_r * r
        thick = meridional_es_stress_kdyn_cm2(120.0, 2 * r, h, constant="exact")
        thin = laplace_thin_sphere_kdyn_cm2(120.0, r, h)
        ratio = thick / thin
        assert ratio == pytest.approx(1.0 / (1.0 + h_over_r / 2.0), rel=1e-12)
        ratios.append(ratio)
    assert all(b > a for a, b in zip(ratios, ratios[1:], strict=False))
    assert ratios[-1] == pytest.approx(1.0, abs=1e-5)
    # The published 0.334 approaches 0.334 / (1.333224 / 4) = 1.0021 of the thin sphere instead.
    pub = meridional_es_stress_kdyn_cm2(120.0, 2 * r, 1e-5 * r)
    assert pub / laplace_thin_sphere_kdyn_cm2(120.0, r, 1e-5 * r) == pytest.approx(1.0021, abs=1e-4)


def test_circumferential_es_stress_approaches_thin_cylinder_vs_laplace():
    """As h/a -> 0 the thick-walled (Lame, midwall) circumferential stress tends to the thin-walled
    cylinder hoop stress P a / h (Laplace's law for a cylinder; written out here, not taken from the
    package). Second-order algebra: ratio = 1 - (h/a)^2/8 + O((h/a)^3)."""
    a = 2.0
    deviations = []
    for h_over_a in [0.5, 0.1, 0.01, 1e-3]:
        h = h_over_a * a
        thick = circumferential_es_stress_kdyn_cm2(120.0, 2 * a, h, constant="exact")
        thin_cylinder = 120.0 * 1.33322387415 * a / h
        ratio = thick / thin_cylinder
        if h_over_a <= 0.1:
            assert ratio == pytest.approx(1 - h_over_a**2 / 8, abs=h_over_a**3)
        deviations.append(abs(ratio - 1))
    assert all(b < a_ for a_, b in zip(deviations, deviations[1:], strict=False))
    assert deviations[-1] < 1e-6


@given(
    lvidd=st.floats(3.0, 7.5),
    shortening=st.floats(0.01, 0.6),
    pwd=st.floats(0.5, 2.0),
    thickening=st.floats(0.01, 1.0),
    pressure=st.floats(80.0, 230.0),
)
def test_meridional_stress_falls_from_end_diastole_to_end_systole(
    lvidd, shortening, pwd, thickening, pressure
):
    """A normally ejecting ventricle (LVIDs < LVIDd, PWs > PWd) has a lower meridional stress at
    end-systole than the same pressure on the end-diastolic dimensions: r falls and h rises
    (common practice, no source)."""
    lvids = lvidd * (1 - shortening)
    pws = pwd * (1 + thickening)
    es = meridional_es_stress_kdyn_cm2(pressure, lvids, pws)
    ed = meridional_es_stress_kdyn_cm2(pressure, lvidd, pwd)
    assert es < ed


def test_stress_bad_constant_lists_valid_names():
    """Unknown constant names raise ValueError listing the valid ones."""
    with pytest.raises(ValueError, match=r"'published', 'exact'"):
        meridional_es_stress_kdyn_cm2(120.0, 3.2, 1.6, constant="rounded")
    with pytest.raises(ValueError, match=r"'published', 'exact'"):
        circumferential_es_stress_kdyn_cm2(120.0, 3.2, 1.6, constant="1.35")
    assert STRESS_CONSTANTS == ("published", "exact")


# --- end-systolic pressure and cuff readings ---------------------------------------------------


def test_es_pressure_mmhg_scaled_sbp_vs_kelly_1992():
    """Kelly RP et al., Circulation 1992;86:513; Chen CH et al., J Am Coll Cardiol 2001;38:2028:
    end-systolic pressure ~ 0.9 * SBP. 120 mmHg -> 108 mmHg (computed)."""
    assert es_pressure_mmhg(120.0, method="scaled_sbp") == pytest.approx(108.0, abs=1e-12)
    assert es_pressure_mmhg(120.0) == pytest.approx(120.0, abs=1e-12)


def test_es_pressure_mmhg_weighted_mean_from_memory():
    """(2 SBP + DBP) / 3 (from memory). 120/80: (240 + 80)/3 = 106.667 mmHg (computed)."""
    assert es_pressure_mmhg(120.0, 80.0, method="weighted_mean") == pytest.approx(106.667, abs=5e-4)
    # diastolic at or above systolic is not a blood pressure: NaN
    assert np.isnan(es_pressure_mmhg(120.0, 125.0, method="weighted_mean"))


def test_es_pressure_mmhg_weighted_mean_without_dbp_raises():
    """weighted_mean needs the diastolic pressure: a wrong call without it."""
    with pytest.raises(ValueError, match="dbp_mmhg"):
        es_pressure_mmhg(120.0, method="weighted_mean")


def test_es_pressure_mmhg_bad_method_lists_valid_names():
    """An unknown method lists all valid names."""
    with pytest.raises(ValueError, match=".*".join(ES_PRESSURE_METHODS)):
        es_pressure_mmhg(120.0, method="mean")


def test_mean_of_readings_vs_common_practice():
    """Several cuff readings in a row: arithmetic mean of the readings present (common practice,
    no source). (120 + 130)/2 = 125; (150 + 140 + 136)/3 = 142; none present -> NaN."""
    r1 = pd.Series([120.0, 150.0, np.nan], index=[7, 8, 9])
    r2 = pd.Series([np.nan, 140.0, np.nan], index=[7, 8, 9])
    r3 = pd.Series([130.0, 136.0, np.nan], index=[7, 8, 9])
    out = mean_of_readings(r1, r2, r3)
    assert isinstance(out, pd.Series) and list(out.index) == [7, 8, 9]
    assert out.iloc[0] == pytest.approx(125.0, abs=1e-12)
    assert out.iloc[1] == pytest.approx(142.0, abs=1e-12)
    assert np.isnan(out.iloc[2])
    np.testing.assert_allclose(
        mean_of_readings(np.array([120.0, np.nan]), np.array([130.0, 100.0])), [125.0, 100.0]
    )


def test_mean_of_readings_without_readings_raises():
    """Calling with no readings is a wrong call."""
    with pytest.raises(ValueError, match="at least one reading"):
        mean_of_readings()


# --- stroke work -------------------------------------------------------------------------------


def test_stroke_work_g_m_vs_de_simone_from_memory():
    """de Simone G et al. (Hypertension 1998; from memory as to the paper): SW = SBP * SV * 0.0144
    g*m. 120 mmHg, 70 mL: 120 * 70 * 0.0144 = 120.96 g*m (computed)."""
    assert stroke_work_g_m(120.0, 70.0) == pytest.approx(120.96, abs=5e-3)


def test_stroke_work_constant_vs_mercury_density():
    """Check of 0.0144 against the mercury density (definition of the mmHg): 1 mmHg * 1 mL =
    13.5951 g/cm3 * 0.1 cm * 1 cm3 = 1.35951 gf*cm = 0.0135951 gf*m. The printed 0.0144 is
    5.92 % higher than that; 'exact' uses 0.0135951 (120 mmHg, 70 mL -> 114.199 g*m)."""
    assert MMHG_ML_GF_M == pytest.approx(13.5951 * 0.1 / 100.0, abs=1e-9)
    assert 0.0144 / MMHG_ML_GF_M - 1 == pytest.approx(0.0592, abs=5e-4)
    assert stroke_work_g_m(120.0, 70.0, constant="exact") == pytest.approx(114.199, abs=5e-4)


def test_stroke_work_invalid_is_nan():
    """Zero stroke volume or pressure is not an ejection: NaN."""
    assert np.isnan(stroke_work_g_m(120.0, 0.0))
    assert np.isnan(stroke_work_g_m(-1.0, 70.0))
    assert math.isnan(stroke_work_g_m(np.nan, 70.0))
