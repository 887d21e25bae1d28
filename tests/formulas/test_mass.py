"""LV mass, relative wall thickness and concentricity against published equations.

Check values are recomputed here by hand (arithmetic in comments) or with scipy.integrate.quad
(volumes of the geometric solids the 2D formulas assume), not copied from the implementation.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate

from wallstress.formulas import (
    AREA_MASS_METHODS,
    LINEAR_MASS_METHODS,
    MYOCARDIAL_DENSITY_2D_G_ML,
    MYOCARDIAL_DENSITY_G_ML,
    RWT_METHODS,
    concentricity_g_ml23,
    lv_mass_area_length_g,
    lv_mass_linear_g,
    lv_mass_truncated_ellipsoid_g,
    relative_wall_thickness,
)


def test_lv_mass_linear_g_vs_devereux_1986():
    """Devereux RB et al., Am J Cardiol 1986;57:450 (ASE-corrected cube, used by Lang RM et al.,
    J Am Soc Echocardiogr 2015;28:1): LVM = 0.8 * 1.04 * ((IVSd + LVIDd + PWd)^3 - LVIDd^3) + 0.6.

    IVSd 1.0, LVIDd 5.0, PWd 1.0 cm: 7^3 - 5^3 = 343 - 125 = 218 mL; * 1.04 = 226.72 g
    (uncorrected cube); * 0.8 = 181.376; + 0.6 = 181.976 g (computed; rounding 0.001 g).
    """
    assert lv_mass_linear_g(1.0, 5.0, 1.0) == pytest.approx(181.976, abs=5e-4)
    # 0.9 / 4.8 / 0.8 cm: 6.5^3 - 4.8^3 = 274.625 - 110.592 = 164.033; * 0.832 = 136.4755; + 0.6
    assert lv_mass_linear_g(0.9, 4.8, 0.8) == pytest.approx(137.0755, abs=5e-4)


def test_lv_mass_linear_g_uncorrected_cube_vs_devereux_1986():
    """Devereux 1986: the corrected value is 0.8 * (uncorrected cube, 1.04 * shell volume) + 0.6 g;
    for 1.0 / 5.0 / 1.0 cm the uncorrected cube is 1.04 * 218 = 226.72 g (computed)."""
    uncorrected = MYOCARDIAL_DENSITY_G_ML * ((1.0 + 5.0 + 1.0) ** 3 - 5.0**3)
    assert uncorrected == pytest.approx(226.72, abs=5e-3)
    assert lv_mass_linear_g(1.0, 5.0, 1.0) == pytest.approx(0.8 * 226.72 + 0.6, abs=5e-4)


def test_lv_mass_linear_g_intercept_is_grams_not_milligrams_regression():
    """Regression for a trap seen in public code (sources.md): evaluating the formula in mm and
    adding 0.6 before dividing by 1000 adds 0.6 mg instead of 0.6 g.

    In mm: 70^3 - 50^3 = 218000 mm3; 0.832 * 218000 = 181376; (181376 + 0.6) / 1000 = 181.3766 g,
    0.5994 g below the correct 181.976 g. Converting mm to cm first must give the correct value.
    """
    trap_g = (0.8 * 1.04 * ((10.0 + 50.0 + 10.0) ** 3 - 50.0**3) + 0.6) / 1000.0
    assert trap_g == pytest.approx(181.3766, abs=5e-5)
    correct = lv_mass_linear_g(10.0 / 10, 50.0 / 10, 10.0 / 10)
    assert correct == pytest.approx(181.976, abs=5e-4)
    assert correct - trap_g == pytest.approx(0.5994, abs=1e-4)


def test_lv_mass_linear_g_penn_vs_devereux_reichek_1977():
    """Devereux RB, Reichek N, Circulation 1977;55:613 (Penn convention): 1.04 * cube - 13.6 g
    (-13.6 g body text, -14 g abstract: from memory). 1.0 / 5.0 / 1.0 cm: 226.72 - 13.6 = 213.12 g.
    """
    assert lv_mass_linear_g(1.0, 5.0, 1.0, method="penn") == pytest.approx(213.12, abs=5e-3)


def test_lv_mass_linear_g_penn_negative_result_is_nan():
    """A Penn result <= 0 g (tiny dimensions) is not a mass: NaN (common practice, no source).
    0.2 / 1.0 / 0.2 cm: 1.04 * (1.4^3 - 1) - 13.6 = 1.04 * 1.744 - 13.6 = -11.79 g -> NaN."""
    assert np.isnan(lv_mass_linear_g(0.2, 1.0, 0.2, method="penn"))


def _bullet_volume_ml(area_cm2: float, length_cm: float) -> float:
    """Volume of a cylinder of length L/2 capped by a half-ellipsoid of height L/2, both with
    cross-section ``area``: integrate the cross-sectional area along the long axis."""
    half = length_cm / 2.0
    cylinder, _ = integrate.quad(lambda z: area_cm2, 0.0, half)
    cap, _ = integrate.quad(lambda z: area_cm2 * (1.0 - (z / half) ** 2), 0.0, half)
    return cylinder + cap


def test_lv_mass_area_length_g_vs_schiller_1989():
    """Schiller NB et al., J Am Soc Echocardiogr 1989;2:358 (and Lang 2015 appendix):
    LVM = 1.05 * (5/6 A1 (L + t) - 5/6 A2 L), t = sqrt(A1/pi) - sqrt(A2/pi).

    A1 40, A2 20 cm2, L 8 cm by hand: t = 3.568248 - 2.523133 = 1.045115 cm;
    5/6 * 40 * 9.045115 = 301.5038; 5/6 * 20 * 8 = 133.3333; difference 168.1705 mL;
    * 1.05 = 176.579 g (computed). The 5/6 factor is also checked as the volume of the "bullet"
    solid by numerical integration (scipy.integrate.quad).
    """
    assert lv_mass_area_length_g(40.0, 20.0, 8.0) == pytest.approx(176.579, abs=5e-4)
    t = math.sqrt(40.0 / math.pi) - math.sqrt(20.0 / math.pi)
    by_quad = 1.05 * (_bullet_volume_ml(40.0, 8.0 + t) - _bullet_volume_ml(20.0, 8.0))
    assert lv_mass_area_length_g(40.0, 20.0, 8.0) == pytest.approx(by_quad, rel=1e-9)


def _truncated_ellipsoid_volume_ml(b: float, a: float, d: float) -> float:
    """Ellipsoid of revolution (semi-minor b, semi-major a) from its apex (z = a) to the plane
    z = -d: integrate the circular cross-section pi b^2 (1 - z^2/a^2)."""
    v, _ = integrate.quad(lambda z: math.pi * b**2 * (1.0 - z**2 / a**2), -d, a)
    return v


def test_lv_mass_truncated_ellipsoid_g_vs_schiller_1989():
    """Schiller NB et al., J Am Soc Echocardiogr 1989;2:358 (Lang 2015 appendix), density 1.05:
    shell = truncated ellipsoid (b + t, a + t, d) minus cavity (b, a, d), b = sqrt(A2/pi),
    t = sqrt(A1/pi) - b. The published closed form is checked against the volume of the assumed
    solid integrated numerically (scipy.integrate.quad)."""
    for a1, a2, a, d in [(40.0, 20.0, 5.5, 2.5), (55.0, 25.0, 6.0, 3.0), (30.0, 14.0, 4.5, 1.0)]:
        b = math.sqrt(a2 / math.pi)
        t = math.sqrt(a1 / math.pi) - b
        expected = MYOCARDIAL_DENSITY_2D_G_ML * (
            _truncated_ellipsoid_volume_ml(b + t, a + t, d)
            - _truncated_ellipsoid_volume_ml(b, a, d)
        )
        assert lv_mass_truncated_ellipsoid_g(a1, a2, a, d) == pytest.approx(expected, rel=1e-9)


def test_lv_mass_truncated_ellipsoid_g_full_ellipsoid_limit():
    """With d = a the cavity is a whole ellipsoid, 4/3 pi b^2 a (geometry, common practice, no
    source). A2 = pi (b = 1 cm), a = 2: 4/3 pi * 1 * 2 = 8.37758 mL. Wall shell for A1 = 4 pi
    (b + t = 2, t = 1), a + t = 3, d = 2: pi * 4 * (2 + 2 - 8/27) = 46.5421 mL; minus 8.37758 =
    38.1645 mL; * 1.05 = 40.0728 g (computed)."""
    assert lv_mass_truncated_ellipsoid_g(4 * math.pi, math.pi, 2.0, 2.0) == pytest.approx(
        40.0728, abs=5e-4
    )


def test_lv_mass_truncated_ellipsoid_g_out_of_domain_is_nan():
    """d > a (cut plane outside the cavity) and A1 <= A2 give NaN (common practice, no source)."""
    assert np.isnan(lv_mass_truncated_ellipsoid_g(40.0, 20.0, 2.0, 2.5))
    assert np.isnan(lv_mass_truncated_ellipsoid_g(20.0, 20.0, 5.5, 2.5))
    assert np.isnan(lv_mass_area_length_g(20.0, 25.0, 8.0))


def test_relative_wall_thickness_vs_lang_2015():
    """Lang RM et al., J Am Soc Echocardiogr 2015;28:1: RWT = 2 PWd / LVIDd, cut-off 0.42.
    PWd 1.0, LVIDd 5.0: 2/5 = 0.40 (normal); PWd 1.1, LVIDd 4.8: 2.2/4.8 = 0.4583 (concentric)."""
    assert relative_wall_thickness(5.0, 1.0) == pytest.approx(0.40, abs=5e-5)
    assert relative_wall_thickness(4.8, 1.1) == pytest.approx(0.4583, abs=5e-5)
    assert relative_wall_thickness(4.8, 1.1) > 0.42 > relative_wall_thickness(5.0, 1.0)


def test_relative_wall_thickness_septal_posterior_vs_ganau_1992():
    """Ganau A et al., J Am Coll Cardiol 1992;19:1550 (relative wall thickness from both walls;
    form from memory): (IVSd + PWd) / LVIDd; 1.2 + 1.0 over 5.0 = 0.44 (computed)."""
    out = relative_wall_thickness(5.0, 1.0, ivsd_cm=1.2, method="septal_posterior")
    assert out == pytest.approx(0.44, abs=5e-5)


def test_relative_wall_thickness_septal_posterior_without_ivsd_raises():
    """Asking for the septal method without the septum is a wrong call."""
    with pytest.raises(ValueError, match="ivsd_cm"):
        relative_wall_thickness(5.0, 1.0, method="septal_posterior")


def test_concentricity_g_ml23_vs_khouri_2010():
    """Khouri MG et al., Circ Cardiovasc Imaging 2010;3:164; Bang CN et al., Circ Cardiovasc
    Imaging 2014: concentricity = LVM / EDV^(2/3). 150 g, 120 mL: 120^2 = 14400,
    14400^(1/3) = 24.3288; 150 / 24.3288 = 6.166 g/mL^(2/3) (computed)."""
    assert concentricity_g_ml23(150.0, 120.0) == pytest.approx(6.166, abs=5e-4)
    assert 14400 ** (1 / 3) == pytest.approx(24.3288, abs=5e-5)


@pytest.mark.parametrize(
    ("call", "names"),
    [
        (lambda: lv_mass_linear_g(1, 5, 1, method="cube"), LINEAR_MASS_METHODS),
        (lambda: relative_wall_thickness(5, 1, method="septal"), RWT_METHODS),
    ],
)
def test_bad_method_names_list_the_valid_ones(call, names):
    """Unknown method names raise ValueError listing every valid name."""
    pattern = ".*".join(names)
    with pytest.raises(ValueError, match=pattern):
        call()


def test_area_mass_methods_tuple_names_the_two_2d_methods():
    """The 2D method names are the published ones (Schiller 1989)."""
    assert AREA_MASS_METHODS == ("area_length", "truncated_ellipsoid")


def test_lv_mass_linear_g_series_and_array():
    """Series keeps its index; ndarray in gives ndarray out; scalar gives a float."""
    s = pd.Series([1.0, 1.2], index=[10, 20])
    out = lv_mass_linear_g(s, 5.0, s)
    assert isinstance(out, pd.Series) and list(out.index) == [10, 20]
    arr = lv_mass_linear_g(np.array([1.0, 1.2]), 5.0, 1.0)
    assert isinstance(arr, np.ndarray) and arr.shape == (2,)
    assert isinstance(lv_mass_linear_g(1.0, 5.0, 1.0), float)
