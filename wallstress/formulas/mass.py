"""LV mass (linear and 2D methods), relative wall thickness and concentricity.

Inputs are scalars, ndarrays or pandas Series (a Series keeps its index); lengths in cm, areas in
cm2, volumes in mL, mass in g. A length, area or volume that is not finite and > 0 gives NaN, as does
a result that is not a possible mass (<= 0 g).
"""

from __future__ import annotations

import numpy as np

from wallstress.formulas._arrays import as_arrays, check_choice, positive, require_real, restore
from wallstress.formulas.constants import MYOCARDIAL_DENSITY_2D_G_ML, MYOCARDIAL_DENSITY_G_ML

LINEAR_MASS_METHODS: tuple[str, ...] = ("ase_corrected", "penn")
AREA_MASS_METHODS: tuple[str, ...] = ("area_length", "truncated_ellipsoid")
RWT_METHODS: tuple[str, ...] = ("posterior", "septal_posterior")

# Devereux 1986 (ASE convention, regression on necropsy mass): LVM = 0.8 * [1.04 * cube] + 0.6 g
_ASE_SLOPE = 0.8  # Devereux 1986, corrected-ASE equation
_ASE_INTERCEPT_G = 0.6  # Devereux 1986, corrected-ASE equation [g] (grams, not milligrams)
# Devereux & Reichek 1977 (Penn convention): LVM = 1.04 * cube - 13.6 g; the abstract rounds the
# intercept to -14 g (intercept from memory: not read in the paper's text).
_PENN_INTERCEPT_G = -13.6
# Schiller 1989 / Lang 2015 appendix: area-length and truncated ellipsoid carry 5/6 and 2/3 factors.
_AREA_LENGTH_FACTOR = 5.0 / 6.0

# Keys of the predicted-mass equation (de Simone 1998 form, see predicted_lv_mass_g).
PREDICTED_MASS_KEYS: tuple[str, ...] = ("intercept", "height27", "stroke_work", "sex")
# de Simone 1998 coefficients as recalled, NOT read in the paper (from memory). The pipeline takes
# the coefficients in force from reference_tables; this dict is for examples and tests only.
PREDICTED_MASS_COEFFICIENTS_FROM_MEMORY: dict[str, float] = {
    "intercept": 55.37,
    "height27": 6.64,
    "stroke_work": 0.64,
    "sex": -18.07,
}
_SEX_CODE_MALE = 1.0  # de Simone 1998 coding (from memory): 1 = male, 2 = female
_SEX_CODE_FEMALE = 2.0


def lv_mass_linear_g(ivsd_cm, lvidd_cm, pwd_cm, method: str = "ase_corrected"):
    """LV mass from end-diastolic linear dimensions (cube formula).

    Parameters
    ----------
    ivsd_cm : scalar, ndarray or Series
        Interventricular septal thickness at end-diastole. [cm]
    lvidd_cm : scalar, ndarray or Series
        LV internal diameter at end-diastole. [cm]
    pwd_cm : scalar, ndarray or Series
        LV posterior wall thickness at end-diastole. [cm]
    method : str, default "ase_corrected"
        One of ``LINEAR_MASS_METHODS``:

        - ``ase_corrected``: ASE convention (leading edge to leading edge), Devereux 1986;
        - ``penn``: Penn convention (endocardial echoes excluded from the walls and included in
          the cavity), Devereux & Reichek 1977.

    Returns
    -------
    scalar, ndarray or Series
        LV mass. [g]

    Raises
    ------
    ValueError
        If ``method`` is not one of ``LINEAR_MASS_METHODS``.

    Notes
    -----
    With ``cube = (IVSd + LVIDd + PWd)^3 - LVIDd^3`` [cm3 = mL]:

    - ase_corrected: ``0.8 * 1.04 * cube + 0.6`` [g]
    - penn: ``1.04 * cube - 13.6`` [g] (the abstract prints -14 g; from memory)

    The dimensions must be in cm: the 0.6 is grams, so a formula evaluated in mm and divided by
    1000 afterwards must add the 0.6 after the division (otherwise it adds 0.6 mg).
    Domain: all dimensions > 0; a Penn result <= 0 g (very small hearts) gives NaN. Penn-convention
    dimensions are not interchangeable with ASE-convention ones.

    References
    ----------
    .. [1] Devereux RB, Alonso DR, Lutas EM, et al. Echocardiographic assessment of left
       ventricular hypertrophy: comparison to necropsy findings. Am J Cardiol. 1986;57:450-458.
    .. [2] Devereux RB, Reichek N. Echocardiographic determination of left ventricular mass in
       man. Anatomic validation of the method. Circulation. 1977;55:613-618.
    .. [3] Lang RM, Badano LP, Mor-Avi V, et al. Recommendations for cardiac chamber
       quantification by echocardiography in adults. J Am Soc Echocardiogr. 2015;28:1-39.

    Examples
    --------
    >>> round(float(lv_mass_linear_g(1.0, 5.0, 1.0)), 3)
    181.976
    """
    check_choice("method", method, LINEAR_MASS_METHODS)
    (ivs, lvid, pw), template = as_arrays(ivsd_cm, lvidd_cm, pwd_cm)
    ivs, lvid, pw = positive(ivs), positive(lvid), positive(pw)
    cube_ml = (ivs + lvid + pw) ** 3 - lvid**3
    if method == "ase_corrected":
        out = _ASE_SLOPE * MYOCARDIAL_DENSITY_G_ML * cube_ml + _ASE_INTERCEPT_G
    else:
        out = MYOCARDIAL_DENSITY_G_ML * cube_ml + _PENN_INTERCEPT_G
    return restore(positive(out), template)


def lv_mass_area_length_g(epi_area_cm2, endo_area_cm2, lv_length_cm):
    """LV mass by the 2D area-length method.

    Parameters
    ----------
    epi_area_cm2 : scalar, ndarray or Series
        Short-axis epicardial area at the papillary-muscle level, A1. [cm2]
    endo_area_cm2 : scalar, ndarray or Series
        Short-axis endocardial area at the same level, A2. [cm2]
    lv_length_cm : scalar, ndarray or Series
        LV long axis from the short-axis plane to the apex plus to the mitral plane, L = a + d.
        [cm]

    Returns
    -------
    scalar, ndarray or Series
        LV mass. [g]

    Notes
    -----
    ``LVM = 1.05 * (5/6 * A1 * (L + t) - 5/6 * A2 * L)`` with mean wall thickness
    ``t = sqrt(A1 / pi) - sqrt(A2 / pi)`` [cm]. ``5/6 * A * L`` is the volume of a "bullet": a
    cylinder of length L/2 capped by a half-ellipsoid of height L/2.
    Domain: A1 > A2 > 0, L > 0; otherwise NaN.

    References
    ----------
    .. [1] Schiller NB, Shah PM, Crawford M, et al. Recommendations for quantitation of the left
       ventricle by two-dimensional echocardiography. J Am Soc Echocardiogr. 1989;2:358-367.
    .. [2] Lang RM, Badano LP, Mor-Avi V, et al. Recommendations for cardiac chamber
       quantification by echocardiography in adults. J Am Soc Echocardiogr. 2015;28:1-39.
    """
    (a1, a2, length), template = as_arrays(epi_area_cm2, endo_area_cm2, lv_length_cm)
    a1, a2, length = positive(a1), positive(a2), positive(length)
    t = positive(np.sqrt(a1 / np.pi) - np.sqrt(a2 / np.pi))
    shell_ml = _AREA_LENGTH_FACTOR * a1 * (length + t) - _AREA_LENGTH_FACTOR * a2 * length
    return restore(positive(MYOCARDIAL_DENSITY_2D_G_ML * shell_ml), template)


def _truncated_ellipsoid_ml(b, a, d):
    # Volume of an ellipsoid of revolution (semi-minor b, semi-major a) from its apex to a plane d
    # beyond the equator: pi * b^2 * (2/3 a + d - d^3 / (3 a^2)).
    return np.pi * b**2 * (2.0 / 3.0 * a + d - d**3 / (3.0 * a**2))


def lv_mass_truncated_ellipsoid_g(
    epi_area_cm2, endo_area_cm2, semimajor_cm, truncated_semimajor_cm
):
    """LV mass by the 2D truncated-ellipsoid method.

    Parameters
    ----------
    epi_area_cm2 : scalar, ndarray or Series
        Short-axis epicardial area at the papillary-muscle level, A1. [cm2]
    endo_area_cm2 : scalar, ndarray or Series
        Short-axis endocardial area at the same level, A2. [cm2]
    semimajor_cm : scalar, ndarray or Series
        Semi-major axis from the widest short-axis radius to the (endocardial) apex, a. [cm]
    truncated_semimajor_cm : scalar, ndarray or Series
        Truncated semi-major axis from the widest short-axis radius to the mitral plane, d. [cm]

    Returns
    -------
    scalar, ndarray or Series
        LV mass. [g]

    Notes
    -----
    With ``b = sqrt(A2 / pi)`` (short-axis cavity radius) and ``t = sqrt(A1 / pi) - b`` (mean wall
    thickness) [cm]::

        LVM = 1.05 * pi * ((b + t)^2 * (2/3 (a + t) + d - d^3 / (3 (a + t)^2))
                           - b^2 * (2/3 a + d - d^3 / (3 a^2)))

    Each bracket is the volume of an ellipsoid of revolution cut by a plane d below its equator
    (epicardial shell, then cavity). Domain: A1 > A2 > 0, a > 0, 0 < d <= a (the cut plane must
    lie inside the cavity ellipsoid); otherwise NaN.

    References
    ----------
    .. [1] Schiller NB, Shah PM, Crawford M, et al. Recommendations for quantitation of the left
       ventricle by two-dimensional echocardiography. J Am Soc Echocardiogr. 1989;2:358-367.
    .. [2] Lang RM, Badano LP, Mor-Avi V, et al. Recommendations for cardiac chamber
       quantification by echocardiography in adults. J Am Soc Echocardiogr. 2015;28:1-39.
    """
    (a1, a2, a, d), template = as_arrays(
        epi_area_cm2, endo_area_cm2, semimajor_cm, truncated_semimajor_cm
    )
    a1, a2, a, d = positive(a1), positive(a2), positive(a), positive(d)
    with np.errstate(invalid="ignore"):
        d = np.where(d <= a, d, np.nan)
    b = np.sqrt(a2 / np.pi)
    t = positive(np.sqrt(a1 / np.pi) - b)
    shell_ml = _truncated_ellipsoid_ml(b + t, a + t, d) - _truncated_ellipsoid_ml(b, a, d)
    return restore(positive(MYOCARDIAL_DENSITY_2D_G_ML * shell_ml), template)


def relative_wall_thickness(lvidd_cm, pwd_cm, ivsd_cm=None, method: str = "posterior"):
    """Relative wall thickness at end-diastole.

    Parameters
    ----------
    lvidd_cm : scalar, ndarray or Series
        LV internal diameter at end-diastole. [cm]
    pwd_cm : scalar, ndarray or Series
        LV posterior wall thickness at end-diastole. [cm]
    ivsd_cm : scalar, ndarray or Series, optional
        Septal thickness at end-diastole; required for ``septal_posterior``. [cm]
    method : str, default "posterior"
        One of ``RWT_METHODS``: ``posterior`` (``2 PWd / LVIDd``, Lang 2015) or
        ``septal_posterior`` (``(IVSd + PWd) / LVIDd``).

    Returns
    -------
    scalar, ndarray or Series
        Relative wall thickness. [1] (a fraction, not percent)

    Raises
    ------
    ValueError
        If ``method`` is unknown, or ``septal_posterior`` is asked for without ``ivsd_cm``.

    Notes
    -----
    Domain: all dimensions > 0; otherwise NaN.

    References
    ----------
    .. [1] Ganau A, Devereux RB, Roman MJ, et al. Patterns of left ventricular hypertrophy and
       geometric remodeling in essential hypertension. J Am Coll Cardiol. 1992;19:1550-1558.
    .. [2] Lang RM, Badano LP, Mor-Avi V, et al. Recommendations for cardiac chamber
       quantification by echocardiography in adults. J Am Soc Echocardiogr. 2015;28:1-39.

    Examples
    --------
    >>> float(relative_wall_thickness(5.0, 1.0))
    0.4
    """
    check_choice("method", method, RWT_METHODS)
    if method == "septal_posterior" and ivsd_cm is None:
        raise ValueError(
            "method='septal_posterior' needs ivsd_cm; pass the septal thickness [cm] "
            "or use method='posterior'"
        )
    if method == "posterior":
        (lvid, pw), template = as_arrays(lvidd_cm, pwd_cm)
        walls = 2.0 * positive(pw)
    else:
        (lvid, pw, ivs), template = as_arrays(lvidd_cm, pwd_cm, ivsd_cm)
        walls = positive(ivs) + positive(pw)
    return restore(walls / positive(lvid), template)


def concentricity_g_ml23(lv_mass_g, edv_ml):
    """LV concentricity: mass over end-diastolic volume to the 2/3 power.

    Parameters
    ----------
    lv_mass_g : scalar, ndarray or Series
        LV mass. [g]
    edv_ml : scalar, ndarray or Series
        LV end-diastolic volume. [mL]

    Returns
    -------
    scalar, ndarray or Series
        ``LVM / EDV^(2/3)``. [g/mL^(2/3)]

    Notes
    -----
    The 2/3 power makes the ratio dimensionally homogeneous with a mass per area, so it does not
    rise merely with heart size. Domain: both > 0; otherwise NaN.

    References
    ----------
    .. [1] Khouri MG, Peshock RM, Ayers CR, de Lemos JA, Drazner MH. A 4-tiered classification of
       left ventricular hypertrophy based on left ventricular geometry: the Dallas heart study.
       Circ Cardiovasc Imaging. 2010;3:164-171.
    .. [2] Bang CN, Gerdts E, Aurigemma GP, et al. Four-group classification of left ventricular
       hypertrophy based on ventricular concentricity and dilatation identifies a low-risk
       subset of eccentric hypertrophy in hypertensive patients. Circ Cardiovasc Imaging.
       2014;7:422-429.

    Examples
    --------
    >>> round(float(concentricity_g_ml23(150.0, 120.0)), 3)
    6.166
    """
    (m, v), template = as_arrays(lv_mass_g, edv_ml)
    return restore(positive(m) / positive(v) ** (2.0 / 3.0), template)


def predicted_lv_mass_g(height_cm, stroke_work_g_m, sex_is_male, coefficients: dict):
    """LV mass predicted from height, stroke work and sex (de Simone form).

    Parameters
    ----------
    height_cm : scalar, ndarray or Series
        Body height. [cm]
    stroke_work_g_m : scalar, ndarray or Series
        Stroke work, e.g. from ``stress.stroke_work_g_m``. [g*m]
    sex_is_male : bool, ndarray or Series
        True (1) for male, False (0) for female; anything else (NaN, None, pandas NA) is unknown
        and gives NaN.
    coefficients : dict
        ``{"intercept": .., "height27": .., "stroke_work": .., "sex": ..}`` (``PREDICTED_MASS_KEYS``),
        taken from a reference table. Extra keys are ignored.

    Returns
    -------
    scalar, ndarray or Series
        Predicted LV mass. [g]

    Raises
    ------
    ValueError
        If a coefficient is missing or not a finite number.

    Notes
    -----
    ``LVM_pred = intercept + height27 * (H/100)^2.7 + stroke_work * SW + sex * code`` with
    ``code = 1`` for male and ``2`` for female. The coefficients recalled for de Simone 1998 are in
    ``PREDICTED_MASS_COEFFICIENTS_FROM_MEMORY`` (55.37, 6.64, 0.64, -18.07; from memory, not read).
    Observed mass above 128 % of predicted is "inappropriate" (rule checked). Domain: H > 0,
    SW > 0; otherwise NaN.

    References
    ----------
    .. [1] de Simone G, Devereux RB, Kimball TR, et al. Interaction between body size and cardiac
       workload: influence on left ventricular mass during body growth and adulthood.
       Hypertension. 1998;31:1077-1082. (citation from memory)
    .. [2] de Simone G, Verdecchia P, Pede S, Gorini M, Maggioni AP. Prognosis of inappropriate
       left ventricular mass in hypertension: the MAVI Study. Hypertension. 2002;40:470-476.
       (citation from memory)
    """
    if not isinstance(coefficients, dict):
        raise ValueError(
            f"coefficients must be a dict with keys {PREDICTED_MASS_KEYS}, "
            f"got {type(coefficients).__name__}"
        )
    missing = [k for k in PREDICTED_MASS_KEYS if k not in coefficients]
    if missing:
        raise ValueError(
            f"coefficients is missing {missing}; pass all of {PREDICTED_MASS_KEYS} "
            "(e.g. from the reference table of the set in use)"
        )
    c = {k: require_real(f"coefficients[{k!r}]", coefficients[k]) for k in PREDICTED_MASS_KEYS}
    (h, sw, male), template = as_arrays(height_cm, stroke_work_g_m, sex_is_male)
    sex_code = np.where(
        male == 1.0, _SEX_CODE_MALE, np.where(male == 0.0, _SEX_CODE_FEMALE, np.nan)
    )
    out = (
        c["intercept"]
        + c["height27"] * (positive(h) / 100.0) ** 2.7
        + c["stroke_work"] * positive(sw)
        + c["sex"] * sex_code
    )
    return restore(out, template)


def appropriateness_pct(observed_g, predicted_g):
    """Observed LV mass as a percentage of the mass predicted for the workload.

    Parameters
    ----------
    observed_g : scalar, ndarray or Series
        Observed LV mass. [g]
    predicted_g : scalar, ndarray or Series
        Predicted LV mass, e.g. from ``predicted_lv_mass_g``. [g]

    Returns
    -------
    scalar, ndarray or Series
        ``observed / predicted * 100``. [% of predicted]

    Notes
    -----
    Domain: both > 0; otherwise NaN. Above 128 % is "inappropriate" LV mass (de Simone).

    References
    ----------
    .. [1] de Simone G, Verdecchia P, Pede S, Gorini M, Maggioni AP. Prognosis of inappropriate
       left ventricular mass in hypertension: the MAVI Study. Hypertension. 2002;40:470-476.
       (citation from memory)
    """
    (obs, pred), template = as_arrays(observed_g, predicted_g)
    return restore(positive(obs) / positive(pred) * 100.0, template)
