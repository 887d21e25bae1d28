"""Statistics of follow-up: measurement reproducibility and per-patient slopes, on grouped arrays.

- :func:`within_subject_sd` and :func:`least_significant_change`: how large a change between two
  studies must be to be real (Bland & Altman); :func:`_resolve_lsc` picks the LSC of LV mass a run
  uses (the user's, or the reference set's).
- :func:`grouped_linear_fit`: least-squares slope with its confidence interval within each group,
  from grouped sums (``bincount``), with no loop over groups.

References
----------
Bland JM, Altman DG. Measurement error. BMJ 1996;313:744 (within-subject SD, repeatability
    1.96 * sqrt(2) * Sw).
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import stats

from wallstress.analysis import references

# Bland & Altman: 95 % of differences between two measurements of one subject lie within
# 1.96 * sqrt(2) * Sw (the published rounding of the normal quantile is kept on purpose).
_Z95 = 1.96


CONFIDENCE = 0.95


def within_subject_sd(first, second) -> float:
    """Within-subject standard deviation from pairs of repeat measurements.

    Parameters
    ----------
    first, second : array-like
        The first and the repeat measurement of each subject, same length (e.g. LV mass [g]).
        Pairs with a NaN are left out.

    Returns
    -------
    float
        Sw in the unit of the measurements; NaN when no complete pair is given.

    Notes
    -----
    ``Sw = sqrt(sum(d^2) / (2 n))`` with ``d`` the difference within a pair and ``n`` the number of
    complete pairs: the mean of the per-subject variances (ddof = 1) of two measurements.

    References
    ----------
    Bland JM, Altman DG. Measurement error. BMJ 1996;313:744.

    >>> round(within_subject_sd([100, 200, 150], [110, 190, 150]), 4)
    5.7735
    """
    a = np.asarray(first, dtype=float).ravel()
    b = np.asarray(second, dtype=float).ravel()
    if a.shape != b.shape:
        raise ValueError(
            f"first and second must have the same length (got {a.size} and {b.size}): "
            "pass one repeat measurement per first measurement"
        )
    d = a - b
    d = d[~np.isnan(d)]
    if d.size == 0:
        return float("nan")
    return float(np.sqrt(np.sum(d * d) / (2 * d.size)))


def least_significant_change(within_sd):
    """Least significant change: the smallest difference between two measurements that is real.

    Parameters
    ----------
    within_sd : float or array-like
        Within-subject standard deviation Sw (e.g. of LV mass [g]).

    Returns
    -------
    float or ndarray
        ``1.96 * sqrt(2) * Sw`` in the unit of Sw (about 2.77 Sw). NaN in, NaN out.

    References
    ----------
    Bland JM, Altman DG. Measurement error. BMJ 1996;313:744.

    >>> round(least_significant_change(10.0), 3)
    27.719
    """
    sw = np.asarray(within_sd, dtype=float)
    out = _Z95 * math.sqrt(2.0) * sw
    return float(out) if out.ndim == 0 else out


def _positive(name: str, value) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ValueError(f"{name} must be a positive number of grams, got {value!r}") from None
    if not np.isfinite(v) or v <= 0:
        raise ValueError(f"{name} must be a positive number of grams, got {value!r}")
    return v


def _resolve_lsc(options, within_subject_sd_g, lsc_g) -> tuple[float, dict]:
    """The LSC of LV mass [g] and the record of where it came from."""
    if within_subject_sd_g is not None and lsc_g is not None:
        raise ValueError(
            "give either within_subject_sd_g or lsc_g, not both: the LSC is computed from Sw "
            f"(got within_subject_sd_g={within_subject_sd_g!r}, lsc_g={lsc_g!r})"
        )
    if lsc_g is not None:
        v = _positive("lsc_g", lsc_g)
        return v, {
            "lsc_lv_mass_g": v,
            "basis": "least significant change given by the user",
            "source": "user",
            "verified": "lab",
        }
    if within_subject_sd_g is not None:
        sw = _positive("within_subject_sd_g", within_subject_sd_g)
        v = least_significant_change(sw)
        return v, {
            "lsc_lv_mass_g": v,
            "within_subject_sd_lv_mass_g": sw,
            "basis": "LSC = 1.96 * sqrt(2) * Sw from the within-subject SD given by the user",
            "source": "Bland JM, Altman DG. Measurement error. BMJ 1996;313:744",
            "verified": "lab",
        }

    reference = getattr(options, "reference", references.DEFAULT_SET)
    try:
        coefs = references.load_set(reference).coefficients("reproducibility")
        set_name = str(reference)
    except Exception:  # a lab's set without reproducibility rows: the bundled defaults
        coefs = references.model_coefficients("reproducibility")
        set_name = "bundled defaults"
    c = coefs["lsc_lv_mass_g"]
    rec = {
        "lsc_lv_mass_g": float(c.value),
        "basis": f"least significant change of LV mass from the reference set ({set_name})",
        "source": c.source,
        "verified": c.verified,
    }
    if "within_subject_sd_lv_mass_g" in coefs:
        rec["within_subject_sd_lv_mass_g"] = float(coefs["within_subject_sd_lv_mass_g"].value)
    if c.verified != "published":
        rec["caution"] = "this LSC was not checked against its published source"
    return float(c.value), rec


def grouped_linear_fit(gid, x, y, n_groups: int, confidence: float = CONFIDENCE) -> pd.DataFrame:
    """Least-squares line of ``y`` on ``x`` within each group, from grouped sums.

    Parameters
    ----------
    gid : ndarray of int
        Group of each point, 0..n_groups-1.
    x, y : ndarray of float
        Points; a point with a NaN is left out.
    n_groups : int
        Number of groups.
    confidence : float
        Two-sided level of the slope's confidence interval.

    Returns
    -------
    DataFrame
        One row per group: ``n``, ``slope`` (n >= 2 and x not constant), ``stderr``, ``ci_low``,
        ``ci_high`` (n >= 3; t distribution with n - 2 degrees of freedom).

    Notes
    -----
    ``slope = Sxy / Sxx``, ``stderr = sqrt((Syy - slope Sxy) / (n - 2) / Sxx)`` with sums of
    centred products (two passes, for accuracy); the same numbers as ``scipy.stats.linregress``.
    """
    gid = np.asarray(gid, dtype=np.int64)
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    ok = ~(np.isnan(x) | np.isnan(y))
    g, xv, yv = gid[ok], x[ok], y[ok]
    n = np.bincount(g, minlength=n_groups).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx = np.bincount(g, xv, minlength=n_groups) / n
        my = np.bincount(g, yv, minlength=n_groups) / n
        dx = xv - mx[g]
        dy = yv - my[g]
        sxx = np.bincount(g, dx * dx, minlength=n_groups)
        sxy = np.bincount(g, dx * dy, minlength=n_groups)
        syy = np.bincount(g, dy * dy, minlength=n_groups)
        has_slope = (n >= 2) & (sxx > 0)
        slope = np.where(has_slope, sxy / sxx, np.nan)
        df = n - 2
        resid = np.maximum(syy - slope * sxy, 0.0)
        stderr = np.where(
            has_slope & (df >= 1), np.sqrt(resid / np.where(df >= 1, df, 1) / sxx), np.nan
        )
        tcrit = stats.t.ppf(0.5 + confidence / 2, np.where(df >= 1, df, np.nan))
        half = tcrit * stderr
    return pd.DataFrame(
        {
            "n": n.astype(np.int64),
            "slope": slope,
            "stderr": stderr,
            "ci_low": slope - half,
            "ci_high": slope + half,
        }
    )
