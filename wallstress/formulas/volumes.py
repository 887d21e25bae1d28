"""LV volumes from one diameter (Teichholz) and the ejection fraction from two volumes.

Inputs are scalars, ndarrays or pandas Series (a Series keeps its index); lengths in cm, volumes in
mL. A length or volume that is not finite and > 0 gives NaN.
"""

from __future__ import annotations

import numpy as np

from wallstress.formulas._arrays import as_arrays, positive, restore

# Teichholz 1976: V = 7 / (2.4 + D) * D^3 mL
_TEICHHOLZ_NUMERATOR = 7.0
_TEICHHOLZ_OFFSET_CM = 2.4


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
