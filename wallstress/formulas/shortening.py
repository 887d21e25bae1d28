"""Chamber function from the linear dimensions: fractional, midwall and stress-corrected midwall
shortening, and the velocity of circumferential fibre shortening.

Inputs are scalars, ndarrays or pandas Series (a Series keeps its index); lengths in cm, times in ms,
rates in beats/min. A length, time or rate that is not finite and > 0 gives NaN.
"""

from __future__ import annotations

import numpy as np

from wallstress.formulas._arrays import (
    as_arrays,
    check_choice,
    finite,
    positive,
    require_real,
    restore,
)

MIDWALL_MODELS: tuple[str, ...] = ("two_shell_ellipsoid",)


def fractional_shortening_pct(lvidd_cm, lvids_cm):
    """Endocardial fractional shortening.

    Parameters
    ----------
    lvidd_cm : scalar, ndarray or Series
        LV internal diameter at end-diastole. [cm]
    lvids_cm : scalar, ndarray or Series
        LV internal diameter at end-systole. [cm]

    Returns
    -------
    scalar, ndarray or Series
        ``(LVIDd - LVIDs) / LVIDd * 100``. [%]

    Notes
    -----
    Domain: 0 < LVIDs <= LVIDd; LVIDs > LVIDd (swapped or mistyped columns) gives NaN.

    References
    ----------
    .. [1] Lang RM, Badano LP, Mor-Avi V, et al. Recommendations for cardiac chamber
       quantification by echocardiography in adults. J Am Soc Echocardiogr. 2015;28:1-39.

    Examples
    --------
    >>> round(float(fractional_shortening_pct(5.0, 3.2)), 6)
    36.0
    """
    (d, s), template = as_arrays(lvidd_cm, lvids_cm)
    d, s = positive(d), positive(s)
    with np.errstate(invalid="ignore"):
        s = np.where(s <= d, s, np.nan)
    return restore((d - s) / d * 100.0, template)


def midwall_fs_pct(ivsd_cm, lvidd_cm, pwd_cm, lvids_cm, model: str = "two_shell_ellipsoid"):
    """Midwall fractional shortening (two-shell model).

    Parameters
    ----------
    ivsd_cm : scalar, ndarray or Series
        Septal thickness at end-diastole. [cm]
    lvidd_cm : scalar, ndarray or Series
        LV internal diameter at end-diastole. [cm]
    pwd_cm : scalar, ndarray or Series
        Posterior wall thickness at end-diastole. [cm]
    lvids_cm : scalar, ndarray or Series
        LV internal diameter at end-systole. [cm]
    model : str, default "two_shell_ellipsoid"
        One of ``MIDWALL_MODELS``.

    Returns
    -------
    scalar, ndarray or Series
        Midwall fractional shortening. [%]

    Raises
    ------
    ValueError
        If ``model`` is not one of ``MIDWALL_MODELS``.

    Notes
    -----
    The inner half of the wall keeps its volume from end-diastole to end-systole. With
    ``Hd = (IVSd + PWd) / 2`` (the inner shell: a quarter of each wall on each side)::

        inner_s = ((LVIDd + Hd)^3 - LVIDd^3 + LVIDs^3)^(1/3)
        MWS = ((LVIDd + Hd) - inner_s) / (LVIDd + Hd) * 100

    The method is checked (Shimizu 1991; de Simone 1994); the algebraic form is from memory.
    Normal adults about 18 +/- 1.5 %. Domain: all inputs > 0 and LVIDs <= LVIDd; otherwise NaN.

    References
    ----------
    .. [1] Shimizu G, Hirota Y, Kita Y, Kawamura K, Saito T, Gaasch WH. Left ventricular midwall
       mechanics in systemic arterial hypertension: myocardial function is depressed in
       pressure-overload hypertrophy. Circulation. 1991;83:1676-1684.
    .. [2] de Simone G, Devereux RB, Roman MJ, et al. Assessment of left ventricular function by
       the midwall fractional shortening/end-systolic stress relation in human hypertension.
       J Am Coll Cardiol. 1994;23:1444-1451.

    Examples
    --------
    >>> round(float(midwall_fs_pct(1.0, 5.0, 1.0, 3.2)), 2)
    16.94
    """
    check_choice("model", model, MIDWALL_MODELS)
    (ivs, d, pw, s), template = as_arrays(ivsd_cm, lvidd_cm, pwd_cm, lvids_cm)
    ivs, d, pw, s = positive(ivs), positive(d), positive(pw), positive(s)
    with np.errstate(invalid="ignore"):
        s = np.where(s <= d, s, np.nan)
    outer_d = d + (ivs + pw) / 2.0
    inner_s = np.cbrt(outer_d**3 - d**3 + s**3)
    return restore((outer_d - inner_s) / outer_d * 100.0, template)


def predicted_from_line(x, intercept: float, slope: float):
    """A value predicted from a reference line, ``intercept + slope * x``.

    Parameters
    ----------
    x : scalar, ndarray or Series
        Predictor, e.g. circumferential end-systolic stress. [unit of the line's x]
    intercept : float
        Intercept of the reference line (e.g. a lab's own fit in its normal subjects). [unit of y]
    slope : float
        Slope of the reference line. [unit of y per unit of x]

    Returns
    -------
    scalar, ndarray or Series
        Predicted value. [unit of y]

    Raises
    ------
    ValueError
        If ``intercept`` or ``slope`` is not a finite real number.

    Notes
    -----
    Used for the midwall shortening expected at a given cESS (de Simone 1994). The published
    regression coefficients were not found in the text: pass a lab's own line and mark its source.

    References
    ----------
    .. [1] de Simone G, Devereux RB, Roman MJ, et al. Assessment of left ventricular function by
       the midwall fractional shortening/end-systolic stress relation in human hypertension.
       J Am Coll Cardiol. 1994;23:1444-1451.
    """
    for name, value in (("intercept", intercept), ("slope", slope)):
        require_real(name, value)
    (xx,), template = as_arrays(x)
    return restore(float(intercept) + float(slope) * finite(xx), template)


def stress_corrected_pct(observed, predicted):
    """Observed value as a percentage of the value predicted for its load.

    Parameters
    ----------
    observed : scalar, ndarray or Series
        Observed value, e.g. midwall shortening. [%]
    predicted : scalar, ndarray or Series
        Value predicted for the same load, e.g. from ``predicted_from_line``. [%]

    Returns
    -------
    scalar, ndarray or Series
        ``observed / predicted * 100``. [% of predicted]

    Notes
    -----
    Domain: observed finite, predicted > 0; otherwise NaN.

    References
    ----------
    .. [1] de Simone G, Devereux RB, Roman MJ, et al. Assessment of left ventricular function by
       the midwall fractional shortening/end-systolic stress relation in human hypertension.
       J Am Coll Cardiol. 1994;23:1444-1451.
    """
    (obs, pred), template = as_arrays(observed, predicted)
    return restore(finite(obs) / positive(pred) * 100.0, template)


def vcf_circ_s(fs_pct, ejection_time_ms):
    """Mean velocity of circumferential fibre shortening.

    Parameters
    ----------
    fs_pct : scalar, ndarray or Series
        Fractional shortening. [%]
    ejection_time_ms : scalar, ndarray or Series
        LV ejection time. [ms]

    Returns
    -------
    scalar, ndarray or Series
        ``(FS / 100) / (ET / 1000)``. [circ/s]

    Notes
    -----
    Vcf is shortening divided by (not multiplied by) ejection time. Definition from memory.
    Domain: FS finite, ET > 0; otherwise NaN.

    References
    ----------
    .. [1] Colan SD, Borow KM, Neumann A. Left ventricular end-systolic wall stress-velocity of
       fiber shortening relation: a load-independent index of myocardial contractility. J Am Coll
       Cardiol. 1984;4:715-724.
    """
    (fs, et), template = as_arrays(fs_pct, ejection_time_ms)
    return restore((finite(fs) / 100.0) / (positive(et) / 1000.0), template)


def vcfc_circ_s(fs_pct, ejection_time_ms, hr_bpm):
    """Heart-rate-corrected mean velocity of circumferential fibre shortening.

    Parameters
    ----------
    fs_pct : scalar, ndarray or Series
        Fractional shortening. [%]
    ejection_time_ms : scalar, ndarray or Series
        LV ejection time. [ms]
    hr_bpm : scalar, ndarray or Series
        Heart rate. [beats/min]

    Returns
    -------
    scalar, ndarray or Series
        ``(FS / 100) / (ET / sqrt(RR))`` with ``RR = 60 / HR`` [s] and ET in s. [circ/s]
        (as conventionally reported; with RR in s the unit is strictly circ/s^(1/2))

    Notes
    -----
    Ejection time normalised to the RR interval by its square root (Bazett-style). Definition from
    memory. Domain: FS finite, ET > 0, HR > 0; otherwise NaN.

    References
    ----------
    .. [1] Colan SD, Borow KM, Neumann A. Left ventricular end-systolic wall stress-velocity of
       fiber shortening relation: a load-independent index of myocardial contractility. J Am Coll
       Cardiol. 1984;4:715-724.
    """
    (fs, et, hr), template = as_arrays(fs_pct, ejection_time_ms, hr_bpm)
    rr_s = 60.0 / positive(hr)
    et_corrected_s = (positive(et) / 1000.0) / np.sqrt(rr_s)
    return restore((finite(fs) / 100.0) / et_corrected_s, template)
