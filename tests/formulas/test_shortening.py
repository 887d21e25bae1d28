"""Chamber function formulas against their published equations (check values recomputed by hand)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from wallstress.formulas import (
    PREDICTED_MASS_COEFFICIENTS_FROM_MEMORY,
    appropriateness_pct,
    ejection_fraction_pct,
    fractional_shortening_pct,
    midwall_fs_pct,
    predicted_from_line,
    predicted_lv_mass_g,
    stress_corrected_pct,
    teichholz_volume_ml,
    vcf_circ_s,
    vcfc_circ_s,
)


def test_fractional_shortening_pct_vs_lang_2015():
    """Lang RM et al., J Am Soc Echocardiogr 2015;28:1: FS = (LVIDd - LVIDs)/LVIDd.
    5.0 / 3.2 cm: 1.8 / 5.0 = 36.0 % (computed)."""
    assert fractional_shortening_pct(5.0, 3.2) == pytest.approx(36.0, abs=5e-2)


def test_fractional_shortening_pct_swapped_diameters_is_nan():
    """LVIDs > LVIDd is not shortening (swapped or mistyped columns): NaN (common practice,
    no source)."""
    assert np.isnan(fractional_shortening_pct(3.2, 5.0))
    assert fractional_shortening_pct(5.0, 5.0) == 0.0


def test_teichholz_volume_ml_vs_teichholz_1976():
    """Teichholz LE et al., Am J Cardiol 1976;37:7: V = 7/(2.4 + D) * D^3.
    5.0 cm: 7/7.4 = 0.945946; * 125 = 118.243 mL. 3.2 cm: 7/5.6 = 1.25; * 32.768 = 40.960 mL
    (computed; rounding 0.001 mL)."""
    assert teichholz_volume_ml(5.0) == pytest.approx(118.243, abs=5e-4)
    assert teichholz_volume_ml(3.2) == pytest.approx(40.960, abs=5e-4)


def test_ejection_fraction_pct_vs_teichholz_1976():
    """EF from the Teichholz volumes (Teichholz 1976): (118.243 - 40.960)/118.243 = 77.283/118.243
    = 65.36 % (computed; rounding 0.005 %)."""
    edv = 7.0 / 7.4 * 125.0
    esv = 7.0 / 5.6 * 32.768
    assert ejection_fraction_pct(edv, esv) == pytest.approx(65.36, abs=5e-3)
    assert ejection_fraction_pct(teichholz_volume_ml(5.0), teichholz_volume_ml(3.2)) == (
        pytest.approx(65.36, abs=5e-3)
    )
    assert np.isnan(ejection_fraction_pct(40.0, 60.0))


def test_midwall_fs_pct_vs_shimizu_1991():
    """Shimizu G et al., Circulation 1991;83:1676; de Simone G et al., J Am Coll Cardiol
    1994;23:1444 (two-shell model; method checked, algebraic form from memory):
    Hd = (IVSd + PWd)/2, inner_s = ((LVIDd + Hd)^3 - LVIDd^3 + LVIDs^3)^(1/3),
    MWS = ((LVIDd + Hd) - inner_s)/(LVIDd + Hd).

    1.0 / 5.0 / 1.0 / 3.2 cm: Hd = 1; 6^3 - 5^3 + 3.2^3 = 216 - 125 + 32.768 = 123.768;
    cube root = 4.98352; (6 - 4.98352)/6 = 0.16941 -> 16.94 % (computed; rounding 0.005 %)."""
    assert midwall_fs_pct(1.0, 5.0, 1.0, 3.2) == pytest.approx(16.94, abs=5e-3)
    assert 123.768 ** (1 / 3) == pytest.approx(4.98352, abs=5e-6)


def test_midwall_fs_pct_below_endocardial_fs_vs_shimizu_1991():
    """Midwall shortening is smaller than endocardial shortening for the same beat (Shimizu 1991,
    the reason for the method; from memory): 16.94 % < 36.0 % for 1.0/5.0/1.0/3.2 cm."""
    assert midwall_fs_pct(1.0, 5.0, 1.0, 3.2) < fractional_shortening_pct(5.0, 3.2)


def test_midwall_fs_pct_bad_model_lists_valid_names():
    """Unknown model names raise ValueError listing the valid ones."""
    with pytest.raises(ValueError, match="two_shell_ellipsoid"):
        midwall_fs_pct(1.0, 5.0, 1.0, 3.2, model="cylinder")


def test_predicted_from_line_vs_scipy_linregress():
    """A reference line fitted by scipy.stats.linregress (invented normal subjects: cESS 120-200
    kdyn/cm2 vs midwall FS) predicts the same values as predicted_from_line(intercept, slope)."""
    cess = np.array([120.0, 140.0, 160.0, 180.0, 200.0])
    mws = np.array([19.5, 18.9, 18.1, 17.6, 16.9])
    fit = stats.linregress(cess, mws)
    x = np.array([130.0, 150.0, 210.0])
    expected = fit.intercept + fit.slope * x
    np.testing.assert_allclose(predicted_from_line(x, fit.intercept, fit.slope), expected)


def test_stress_corrected_pct_vs_de_simone_1994():
    """de Simone G et al., J Am Coll Cardiol 1994;23:1444: stress-corrected midwall shortening =
    observed / predicted * 100 (method checked). 16.94 / 18.0 = 94.11 % (computed)."""
    assert stress_corrected_pct(16.94, 18.0) == pytest.approx(94.11, abs=5e-3)
    assert np.isnan(stress_corrected_pct(16.94, 0.0))


def test_predicted_from_line_bad_coefficients_raise():
    """Non-numeric intercept or slope is a wrong call."""
    with pytest.raises(ValueError, match="slope"):
        predicted_from_line(150.0, 20.0, "x")


def test_vcf_circ_s_vs_colan_1984():
    """Colan SD et al., J Am Coll Cardiol 1984;4:715 (definition from memory): Vcf = FS / ET
    (divided, not multiplied). FS 36 %, ET 300 ms: 0.36 / 0.300 s = 1.20 circ/s (computed)."""
    assert vcf_circ_s(36.0, 300.0) == pytest.approx(1.20, abs=5e-3)


def test_vcfc_circ_s_vs_colan_1984():
    """Colan 1984 (rate correction from memory): Vcfc = FS / (ET / sqrt(RR)), RR = 60/HR s.
    HR 75: RR = 0.8 s, sqrt = 0.894427; 0.300 / 0.894427 = 0.335410 s; 0.36 / 0.335410 = 1.0733
    circ/s (computed). At HR 60 (RR = 1 s) Vcfc equals Vcf."""
    assert vcfc_circ_s(36.0, 300.0, 75.0) == pytest.approx(1.0733, abs=5e-4)
    assert vcfc_circ_s(36.0, 300.0, 60.0) == pytest.approx(vcf_circ_s(36.0, 300.0), rel=1e-12)


def test_predicted_lv_mass_g_vs_de_simone_1998_from_memory():
    """de Simone G et al. 1998 form, coefficients from memory (55.37, 6.64, 0.64, -18.07; sex code
    1 male, 2 female): 170 cm, SW 120.96 g*m. height^2.7 = 1.7^2.7 = 4.18998;
    male: 55.37 + 6.64 * 4.18998 + 0.64 * 120.96 - 18.07 = 55.37 + 27.8215 + 77.4144 - 18.07
    = 142.536 g; female: 18.07 g less = 124.466 g (computed)."""
    c = PREDICTED_MASS_COEFFICIENTS_FROM_MEMORY
    assert predicted_lv_mass_g(170.0, 120.96, True, c) == pytest.approx(142.536, abs=5e-3)
    assert predicted_lv_mass_g(170.0, 120.96, False, c) == pytest.approx(124.466, abs=5e-3)
    sex = pd.Series([True, False, None], index=[3, 4, 5], dtype=object)
    out = predicted_lv_mass_g(170.0, 120.96, sex, c)
    assert isinstance(out, pd.Series) and list(out.index) == [3, 4, 5]
    assert np.isnan(out.iloc[2])


def test_predicted_lv_mass_g_missing_coefficient_raises():
    """A coefficients dict without all four keys is a wrong call; the message names them."""
    with pytest.raises(ValueError, match=r"missing \['sex'\]"):
        predicted_lv_mass_g(170.0, 120.0, True, {"intercept": 1, "height27": 1, "stroke_work": 1})
    with pytest.raises(ValueError, match="finite real number"):
        predicted_lv_mass_g(
            170.0, 120.0, True, {"intercept": math.nan, "height27": 1, "stroke_work": 1, "sex": 1}
        )


def test_appropriateness_pct_vs_de_simone():
    """de Simone G et al. (inappropriate LV mass: observed > 128 % of predicted; rule checked).
    181.976 / 142.536 = 127.67 % (computed): just below the 128 % line."""
    assert appropriateness_pct(181.976, 142.536) == pytest.approx(127.67, abs=5e-3)
    assert appropriateness_pct(181.976, 142.536) < 128.0
    assert np.isnan(appropriateness_pct(181.976, 0.0))
