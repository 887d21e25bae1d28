"""Chamber function: shortening, Teichholz volumes, ejection fraction, midwall and stress-corrected
shortening, velocity of circumferential fibre shortening, and predicted (appropriate) LV mass.

Inputs are scalars, ndarrays or pandas Series (a Series keeps its index); lengths in cm, volumes in
mL, times in ms, rates in beats/min. A length, volume, time or rate that is not finite and > 0 gives
NaN.
"""

from __future__ import annotations

import numbers

import numpy as np

from wallstress.formulas._arrays import as_arrays, check_choice, finite, positive, restore

MIDWALL_MODELS: tuple[str, ...] = ("two_shell_ellipsoid",)

# Teichholz 1976: V = 7 / (2.4 + D) * D^3 mL
_TEICHHOLZ_NUMERATOR = 7.0
_TEICHHOLZ_OFFSET_CM = 2.4

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


def teichholz_volume_ml(diameter_cm):
    """LV volume from one internal diameter (Teichholz).

    Parameters
    ----------
    diameter_cm : scalar, ndarray or Series
        LV internal diameter (end-diastolic or end-systolic). [cm]

    Returns
    -------
    scalar, ndarray or Series
        ``7 / (2.4 + D) * D^3``. [mL]

    Notes
    -----
    Assumes a prolate ellipsoid whose long axis shortens less than the minor axis; unreliable with
    regional wall-motion abnormalities or distorted shape. Domain: D > 0; otherwise NaN.

    References
    ----------
    .. [1] Teichholz LE, Kreulen T, Herman MV, Gorlin R. Problems in echocardiographic volume
       determinations: echocardiographic-angiographic correlations in the presence or absence of
       asynergy. Am J Cardiol. 1976;37:7-11.

    Examples
    --------
    >>> round(float(teichholz_volume_ml(5.0)), 3)
    118.243
    """
    (d,), template = as_arrays(diameter_cm)
    d = positive(d)
    return restore(_TEICHHOLZ_NUMERATOR / (_TEICHHOLZ_OFFSET_CM + d) * d**3, template)


def ejection_fraction_pct(edv_ml, esv_ml):
    """Ejection fraction from end-diastolic and end-systolic volumes.

    Parameters
    ----------
    edv_ml : scalar, ndarray or Series
        End-diastolic volume. [mL]
    esv_ml : scalar, ndarray or Series
        End-systolic volume. [mL]

    Returns
    -------
    scalar, ndarray or Series
        ``(EDV - ESV) / EDV * 100``. [%]

    Notes
    -----
    Domain: 0 < ESV <= EDV; otherwise NaN.

    References
    ----------
    .. [1] Lang RM, Badano LP, Mor-Avi V, et al. Recommendations for cardiac chamber
       quantification by echocardiography in adults. J Am Soc Echocardiogr. 2015;28:1-39.
    """
    (edv, esv), template = as_arrays(edv_ml, esv_ml)
    edv, esv = positive(edv), positive(esv)
    with np.errstate(invalid="ignore"):
        esv = np.where(esv <= edv, esv, np.nan)
    return restore((edv - esv) / edv * 100.0, template)


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
        _require_real(name, value)
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
    c = {k: _require_real(f"coefficients[{k!r}]", coefficients[k]) for k in PREDICTED_MASS_KEYS}
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


def _require_real(name: str, value) -> float:
    if (
        isinstance(value, bool)
        or not isinstance(value, numbers.Real)
        or not np.isfinite(float(value))
    ):
        raise ValueError(f"{name}={value!r} must be a finite real number")
    return float(value)
