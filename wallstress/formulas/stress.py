"""End-systolic wall stress, Laplace's law, end-systolic pressure from the cuff and stroke work.

Inputs are scalars, ndarrays or pandas Series (a Series keeps its index); pressures in mmHg,
lengths in cm, stress in kdyn/cm2 (1 kdyn/cm2 = 100 Pa). A pressure or length that is not finite
and > 0 gives NaN.
"""

from __future__ import annotations

import numpy as np

from wallstress.formulas._arrays import as_arrays, check_choice, positive, restore
from wallstress.formulas.constants import MMHG_KDYN_CM2, MMHG_ML_GF_M

STRESS_CONSTANTS: tuple[str, ...] = ("published", "exact")
ES_PRESSURE_METHODS: tuple[str, ...] = ("cuff_sbp", "scaled_sbp", "weighted_mean")

# Grossman 1975 / Reichek 1982: 0.334 = 1.333/4 rounded up (mmHg -> kdyn/cm2, and D = 2r);
# the printed constant is from memory. "exact" uses 1.33322387/4 = 0.333306 (0.21 % lower).
_MERIDIONAL_K = {"published": 0.334, "exact": MMHG_KDYN_CM2 / 4.0}
# Gaasch thick-walled cylinder as used by de Simone 1994: 1.35 (from memory) approximates the
# mmHg -> kdyn/cm2 factor 1.33322387 (exact is 1.24 % lower than 1.35).
_CIRCUMFERENTIAL_K = {"published": 1.35, "exact": MMHG_KDYN_CM2}
# Kelly 1992, Chen 2001: end-systolic pressure ~ 0.9 * brachial systolic pressure.
_ES_PRESSURE_SBP_FACTOR = 0.9
# de Simone (stroke work = SBP * SV * 0.0144 g*m; the constant as printed, from memory).
# Physical mmHg*mL -> gram-force metre: 13.5951 g/cm3 * 0.1 cm * 0.01 m/cm = 0.0135951; the
# printed 0.0144 is 5.9 % higher. "published" is the default because de Simone's predicted-mass
# coefficients were fitted with it.
_STROKE_WORK_K = {"published": 0.0144, "exact": MMHG_ML_GF_M}


def meridional_es_stress_kdyn_cm2(pressure_mmhg, lvids_cm, pws_cm, constant: str = "published"):
    """Meridional end-systolic wall stress from M-mode/2D linear dimensions.

    Parameters
    ----------
    pressure_mmhg : scalar, ndarray or Series
        End-systolic LV pressure (e.g. from ``es_pressure_mmhg``). [mmHg]
    lvids_cm : scalar, ndarray or Series
        LV internal diameter at end-systole. [cm]
    pws_cm : scalar, ndarray or Series
        LV posterior wall thickness at end-systole. [cm]
    constant : str, default "published"
        One of ``STRESS_CONSTANTS``: ``published`` (0.334) or ``exact``
        (``MMHG_KDYN_CM2 / 4`` = 0.333306).

    Returns
    -------
    scalar, ndarray or Series
        Meridional end-systolic stress. [kdyn/cm2]

    Raises
    ------
    ValueError
        If ``constant`` is not one of ``STRESS_CONSTANTS``.

    Notes
    -----
    ``mESS = 0.334 * P * LVIDs / (PWs * (1 + PWs / LVIDs))``: the force balance of a thick-walled
    sphere of inner radius r = LVIDs/2 and wall h = PWs, ``P r^2 / ((r + h)^2 - r^2)``, with P
    converted to kdyn/cm2. As h/r -> 0 it approaches the thin-walled sphere, ``P r / (2 h)``.
    Domain: all inputs > 0; otherwise NaN.

    References
    ----------
    .. [1] Grossman W, Jones D, McLaurin LP. Wall stress and patterns of hypertrophy in the human
       left ventricle. J Clin Invest. 1975;56:56-64.
    .. [2] Reichek N, Wilson J, St John Sutton M, Plappert TA, Goldberg S, Hirshfeld JW.
       Noninvasive determination of left ventricular end-systolic stress: validation of the
       method and initial application. Circulation. 1982;65:99-108.

    Examples
    --------
    >>> round(float(meridional_es_stress_kdyn_cm2(120.0, 3.2, 1.6)), 2)
    53.44
    """
    check_choice("constant", constant, STRESS_CONSTANTS)
    (p, d, h), template = as_arrays(pressure_mmhg, lvids_cm, pws_cm)
    p, d, h = positive(p), positive(d), positive(h)
    out = _MERIDIONAL_K[constant] * p * d / (h * (1.0 + h / d))
    return restore(out, template)


def circumferential_es_stress_kdyn_cm2(
    pressure_mmhg, lvids_cm, pws_cm, constant: str = "published"
):
    """Circumferential end-systolic wall stress (thick-walled cylinder, midwall).

    Parameters
    ----------
    pressure_mmhg : scalar, ndarray or Series
        End-systolic LV pressure. [mmHg]
    lvids_cm : scalar, ndarray or Series
        LV internal diameter at end-systole. [cm]
    pws_cm : scalar, ndarray or Series
        LV posterior wall thickness at end-systole. [cm]
    constant : str, default "published"
        One of ``STRESS_CONSTANTS``: ``published`` (1.35) or ``exact``
        (``MMHG_KDYN_CM2`` = 1.333224).

    Returns
    -------
    scalar, ndarray or Series
        Circumferential end-systolic stress. [kdyn/cm2]

    Raises
    ------
    ValueError
        If ``constant`` is not one of ``STRESS_CONSTANTS``.

    Notes
    -----
    ``cESS = 1.35 * P * a^2 / (b^2 - a^2) * (1 + b^2 / r^2)`` with inner radius ``a = LVIDs/2``,
    outer radius ``b = a + PWs`` and midwall radius ``r = a + PWs/2`` [cm] (Lamé stress of a
    thick-walled cylinder evaluated at midwall). As PWs/a -> 0 it approaches the thin-walled
    cylinder (hoop stress), ``P a / h``; the ratio is 1 - (h/a)^2 / 8 to second order.
    Domain: all inputs > 0; otherwise NaN.

    References
    ----------
    .. [1] Gaasch WH, Zile MR, Hoshino PK, Apstein CS, Blaustein AS. Stress-shortening relations
       and myocardial blood flow in compensated and failing canine hearts with pressure-overload
       hypertrophy. Circulation. 1989;79:872-883.
    .. [2] de Simone G, Devereux RB, Roman MJ, et al. Assessment of left ventricular function by
       the midwall fractional shortening/end-systolic stress relation in human hypertension.
       J Am Coll Cardiol. 1994;23:1444-1451.

    Examples
    --------
    >>> round(float(circumferential_es_stress_kdyn_cm2(120.0, 3.2, 1.6)), 2)
    150.0
    """
    check_choice("constant", constant, STRESS_CONSTANTS)
    (p, d, h), template = as_arrays(pressure_mmhg, lvids_cm, pws_cm)
    p, d, h = positive(p), positive(d), positive(h)
    a = d / 2.0
    b = a + h
    r_mid = a + h / 2.0
    out = _CIRCUMFERENTIAL_K[constant] * p * a**2 / (b**2 - a**2) * (1.0 + b**2 / r_mid**2)
    return restore(out, template)


def laplace_thin_sphere_kdyn_cm2(pressure_mmhg, radius_cm, wall_cm):
    """Wall tension per wall area of a thin-walled sphere (Laplace's law).

    Parameters
    ----------
    pressure_mmhg : scalar, ndarray or Series
        Transmural pressure. [mmHg]
    radius_cm : scalar, ndarray or Series
        Radius of the sphere. [cm]
    wall_cm : scalar, ndarray or Series
        Wall thickness. [cm]

    Returns
    -------
    scalar, ndarray or Series
        Wall stress ``P r / (2 h)`` with the exact conversion ``MMHG_KDYN_CM2``. [kdyn/cm2]

    Notes
    -----
    Valid for h << r; the thick-walled meridional formula tends to it as h/r -> 0.
    Domain: all inputs > 0; otherwise NaN.

    References
    ----------
    .. [1] Laplace PS. Traité de mécanique céleste, Supplément au dixième livre: Sur l'action
       capillaire. Paris; 1806.
    .. [2] Grossman W, Jones D, McLaurin LP. Wall stress and patterns of hypertrophy in the human
       left ventricle. J Clin Invest. 1975;56:56-64.
    """
    (p, r, h), template = as_arrays(pressure_mmhg, radius_cm, wall_cm)
    p, r, h = positive(p), positive(r), positive(h)
    return restore(MMHG_KDYN_CM2 * p * r / (2.0 * h), template)


def es_pressure_mmhg(sbp_mmhg, dbp_mmhg=None, method: str = "cuff_sbp"):
    """End-systolic LV pressure estimated from cuff pressures.

    Parameters
    ----------
    sbp_mmhg : scalar, ndarray or Series
        Cuff systolic pressure. [mmHg]
    dbp_mmhg : scalar, ndarray or Series, optional
        Cuff diastolic pressure; required for ``weighted_mean``. [mmHg]
    method : str, default "cuff_sbp"
        One of ``ES_PRESSURE_METHODS``:

        - ``cuff_sbp``: SBP itself;
        - ``scaled_sbp``: ``0.9 * SBP`` (Kelly 1992; Chen 2001);
        - ``weighted_mean``: ``(2 SBP + DBP) / 3`` (from memory).

    Returns
    -------
    scalar, ndarray or Series
        End-systolic pressure. [mmHg]

    Raises
    ------
    ValueError
        If ``method`` is unknown, or ``weighted_mean`` is asked for without ``dbp_mmhg``.

    Notes
    -----
    Domain: SBP > 0 (and for ``weighted_mean`` 0 < DBP < SBP); otherwise NaN.

    References
    ----------
    .. [1] Kelly RP, Ting CT, Yang TM, et al. Effective arterial elastance as index of arterial
       vascular load in humans. Circulation. 1992;86:513-521.
    .. [2] Chen CH, Fetics B, Nevo E, et al. Noninvasive single-beat determination of left
       ventricular end-systolic elastance in humans. J Am Coll Cardiol. 2001;38:2028-2034.
    """
    check_choice("method", method, ES_PRESSURE_METHODS)
    if method == "weighted_mean" and dbp_mmhg is None:
        raise ValueError(
            "method='weighted_mean' needs dbp_mmhg; pass the diastolic pressure [mmHg] "
            "or use method='cuff_sbp' or 'scaled_sbp'"
        )
    if method == "weighted_mean":
        (sbp, dbp), template = as_arrays(sbp_mmhg, dbp_mmhg)
        sbp, dbp = positive(sbp), positive(dbp)
        with np.errstate(invalid="ignore"):
            dbp = np.where(dbp < sbp, dbp, np.nan)
        out = (2.0 * sbp + dbp) / 3.0
    else:
        (sbp,), template = as_arrays(sbp_mmhg)
        sbp = positive(sbp)
        # a copy: the guard may hand back the input itself, and the result is the caller's own
        out = np.array(sbp) if method == "cuff_sbp" else _ES_PRESSURE_SBP_FACTOR * sbp
    return restore(out, template)


def mean_of_readings(*readings):
    """Elementwise arithmetic mean of several readings, ignoring missing ones.

    Parameters
    ----------
    *readings : scalar, ndarray or Series
        Repeated measurements of one quantity (e.g. cuff SBP readings 1, 2, 3), all the same shape.
        [any unit, the same for all]

    Returns
    -------
    scalar, ndarray or Series
        Mean of the readings present in each row; NaN where none is present. [same unit]

    Raises
    ------
    ValueError
        If no readings are given.

    Notes
    -----
    A reading that is NaN, inf or <= 0 counts as absent (a pressure, length or rate cannot be
    zero or negative). The averaging rule for several cuff readings in a row: the arithmetic mean
    of the readings present (common practice, no source).
    """
    if not readings:
        raise ValueError("mean_of_readings needs at least one reading; pass e.g. sbp_1, sbp_2")
    arrays, template = as_arrays(*readings)
    if len(arrays) == 1:  # one reading: the mean is the reading itself
        return restore(np.array(positive(arrays[0])), template)  # a copy, never the input
    stacked = np.stack(np.broadcast_arrays(*[positive(a) for a in arrays]))
    present = np.isfinite(stacked)
    count = present.sum(axis=0)
    total = np.where(present, stacked, 0.0).sum(axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(count > 0, total / count, np.nan)
    return restore(out, template)


def stroke_work_g_m(sbp_mmhg, stroke_volume_ml, constant: str = "published"):
    """External stroke work from systolic pressure and stroke volume.

    Parameters
    ----------
    sbp_mmhg : scalar, ndarray or Series
        Cuff systolic pressure. [mmHg]
    stroke_volume_ml : scalar, ndarray or Series
        LV stroke volume. [mL]
    constant : str, default "published"
        One of ``STRESS_CONSTANTS``: ``published`` (0.0144, as printed by de Simone; from
        memory) or ``exact`` (``MMHG_ML_GF_M`` = 0.0135951, from the mercury density).

    Returns
    -------
    scalar, ndarray or Series
        Stroke work. [g*m] (gram-force metre)

    Raises
    ------
    ValueError
        If ``constant`` is not one of ``STRESS_CONSTANTS``.

    Notes
    -----
    ``SW = SBP * SV * 0.0144``. The physical conversion is 1 mmHg * 1 mL = 13.5951 g/cm3 *
    0.1 cm * 1 cm3 = 1.35951 gf*cm = 0.0135951 gf*m, so the printed 0.0144 is 5.9 % higher than the
    mercury-density value. Keep ``published`` when the result feeds de Simone's predicted-mass
    equation, whose coefficients were fitted with it. Domain: both inputs > 0; otherwise NaN.

    References
    ----------
    .. [1] de Simone G, Devereux RB, Kimball TR, et al. Interaction between body size and
       cardiac workload: influence on left ventricular mass during body growth and adulthood.
       Hypertension. 1998;31:1077-1082.
    """
    check_choice("constant", constant, STRESS_CONSTANTS)
    (p, sv), template = as_arrays(sbp_mmhg, stroke_volume_ml)
    return restore(_STROKE_WORK_K[constant] * positive(p) * positive(sv), template)
