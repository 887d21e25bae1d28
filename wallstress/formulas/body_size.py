"""Body size: body surface area and height raised to a power, for indexing LV mass and volumes.

Inputs are scalars, ndarrays or pandas Series (a Series keeps its index). A height or weight that
is not finite and > 0 gives NaN.
"""

from __future__ import annotations

import numbers

import numpy as np

from wallstress.formulas._arrays import as_arrays, check_choice, positive, restore

BSA_METHODS: tuple[str, ...] = ("dubois", "mosteller", "haycock", "gehan_george", "boyd")

# DuBois & DuBois 1916: BSA = 0.007184 * W^0.425 * H^0.725
_DUBOIS = (0.007184, 0.725, 0.425)  # (constant, height exponent, weight exponent)
# Haycock et al. 1978: BSA = 0.024265 * H^0.3964 * W^0.5378
_HAYCOCK = (0.024265, 0.3964, 0.5378)
# Gehan & George 1970: BSA = 0.0235 * H^0.42246 * W^0.51456
_GEHAN_GEORGE = (0.0235, 0.42246, 0.51456)
# Mosteller 1987: BSA = sqrt(H * W / 3600)
_MOSTELLER_DIVISOR = 3600.0
# Boyd 1935: BSA = 0.0003207 * H^0.3 * Wg^(0.7285 - 0.0188 * log10(Wg)), weight Wg in grams
_BOYD = (0.0003207, 0.3, 0.7285, 0.0188)  # (constant, height exponent, weight exponent, log slope)


def bsa_m2(height_cm, weight_kg, method: str = "dubois"):
    """Body surface area from height and weight.

    Parameters
    ----------
    height_cm : scalar, ndarray or Series
        Body height. [cm]
    weight_kg : scalar, ndarray or Series
        Body weight. [kg]
    method : str, default "dubois"
        One of ``BSA_METHODS``: ``dubois``, ``mosteller``, ``haycock``, ``gehan_george``, ``boyd``.

    Returns
    -------
    scalar, ndarray or Series
        Body surface area. [m2]

    Raises
    ------
    ValueError
        If ``method`` is not one of ``BSA_METHODS``.

    Notes
    -----
    With H in cm, W in kg (Wg = 1000 W in g):

    - dubois: ``0.007184 * W^0.425 * H^0.725``
    - mosteller: ``sqrt(H * W / 3600)``
    - haycock: ``0.024265 * H^0.3964 * W^0.5378``
    - gehan_george: ``0.0235 * H^0.42246 * W^0.51456``
    - boyd: ``0.0003207 * H^0.3 * Wg^(0.7285 - 0.0188 * log10(Wg))``

    Domain: H > 0, W > 0; anything else (including NaN and inf) gives NaN. The formulas were fitted
    on limited samples (DuBois on nine subjects); at the extremes of body size they differ by
    several percent.

    References
    ----------
    .. [1] DuBois D, DuBois EF. A formula to estimate the approximate surface area if height and
       weight be known. Arch Intern Med. 1916;17:863-871.
    .. [2] Mosteller RD. Simplified calculation of body-surface area. N Engl J Med.
       1987;317:1098.
    .. [3] Haycock GB, Schwartz GJ, Wisotsky DH. Geometric method for measuring body surface area:
       a height-weight formula validated in infants, children, and adults. J Pediatr.
       1978;93:62-66.
    .. [4] Gehan EA, George SL. Estimation of human body surface area from height and weight.
       Cancer Chemother Rep. 1970;54:225-235.
    .. [5] Boyd E. The Growth of the Surface Area of the Human Body. University of Minnesota
       Press; 1935.

    Examples
    --------
    >>> float(bsa_m2(180.0, 80.0, method="mosteller"))
    2.0
    """
    check_choice("method", method, BSA_METHODS)
    (h, w), template = as_arrays(height_cm, weight_kg)
    h, w = positive(h), positive(w)
    with np.errstate(invalid="ignore", divide="ignore"):
        if method == "mosteller":
            out = np.sqrt(h * w / _MOSTELLER_DIVISOR)
        elif method == "boyd":
            k, eh, ew, slope = _BOYD
            wg = w * 1000.0
            out = k * h**eh * wg ** (ew - slope * np.log10(wg))
        else:
            k, eh, ew = {"dubois": _DUBOIS, "haycock": _HAYCOCK, "gehan_george": _GEHAN_GEORGE}[
                method
            ]
            out = k * h**eh * w**ew
    return restore(out, template)


def height_power(height_cm, power: float):
    """Height in metres raised to a power, the divisor of allometric LV mass indexes.

    Parameters
    ----------
    height_cm : scalar, ndarray or Series
        Body height. [cm]
    power : float
        Exponent, e.g. 2.7 (de Simone 1992), 1.7 (Chirinos 2010) or 1 (height). [1]

    Returns
    -------
    scalar, ndarray or Series
        ``(height_cm / 100) ** power``. [m^power]

    Raises
    ------
    ValueError
        If ``power`` is not a finite real number.

    Notes
    -----
    Domain: height > 0; anything else gives NaN.

    References
    ----------
    .. [1] de Simone G, Daniels SR, Devereux RB, et al. Left ventricular mass and body size in
       normotensive children and adults: assessment of allometric relations and impact of
       overweight. J Am Coll Cardiol. 1992;20:1251-1260.
    .. [2] Chirinos JA, Segers P, De Buyzere ML, et al. Left ventricular mass: allometric scaling,
       normative values, effect of obesity, and prognostic performance. Hypertension.
       2010;56:91-98.

    Examples
    --------
    >>> round(float(height_power(200.0, 2.7)), 4)
    6.498
    """
    if (
        isinstance(power, bool)
        or not isinstance(power, numbers.Real)
        or not np.isfinite(float(power))
    ):
        raise ValueError(f"power={power!r} must be a finite real number, e.g. 2.7, 1.7 or 1")
    (h,), template = as_arrays(height_cm)
    h = positive(h)
    return restore((h / 100.0) ** float(power), template)
