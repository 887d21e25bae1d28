"""Statistics of a lab's own reference limits: nonparametric centiles, their confidence intervals, a line.

- :func:`upper_centile`: the 97.5th centile, numpy ``'linear'`` (Hyndman & Fan definition 7);
- :func:`centile_ci_ranks` / :func:`centile_summary`: a distribution-free confidence interval of a
  centile from order statistics (binomial ranks);
- :func:`fit_line`: the midwall-shortening vs circumferential end-systolic stress line by ordinary
  least squares, with its residual SD, prediction interval and the lower limit of stress-corrected
  shortening.

References
----------
CLSI. Defining, establishing, and verifying reference intervals in the clinical laboratory; approved
guideline, 3rd ed. CLSI document EP28-A3c, 2010 (90 % confidence interval of each limit; from
memory).
Hyndman RJ, Fan Y. Sample quantiles in statistical packages. Am Stat 1996;50:361-365 (definition 7).
de Simone G et al. Assessment of left ventricular function by the midwall fractional shortening /
end-systolic stress relation in human hypertension. J Am Coll Cardiol 1994;23:1444-1451.
"""

from __future__ import annotations

import numpy as np
from scipy import stats

from wallstress.errors import InputError

CENTILE = 97.5
"""Upper reference limit: the 97.5th centile of healthy subjects. [%]"""


CENTILE_METHOD = "linear"
"""numpy.quantile method; 'linear' is Hyndman & Fan (1996) definition 7."""


CENTILE_METHOD_TEXT = "97.5th centile, nonparametric (numpy 'linear' = Hyndman-Fan type 7)"


CI_LEVEL = 0.90
"""Confidence level of the order-statistic interval reported with each limit (CLSI EP28-A3c)."""


LOWER_LIMIT_CENTILE = 5.0
"""Centile of observed / predicted midwall shortening taken as its lower limit. [%]"""


def upper_centile(values, centile: float = CENTILE) -> float:
    """Nonparametric centile of the finite values (numpy ``'linear'``, Hyndman-Fan type 7).

    Parameters
    ----------
    values : array-like
        Observations; NaN are ignored. [any unit]
    centile : float
        Centile in (0, 100). [%]

    Returns
    -------
    float
        The centile [unit of values]; NaN when there is no finite value.

    References
    ----------
    Hyndman RJ, Fan Y. Sample quantiles in statistical packages. Am Stat 1996;50:361-365.
    """
    if not 0 < centile < 100:
        raise ValueError(f"centile={centile!r} must be strictly between 0 and 100, e.g. 97.5")
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v)]
    if v.size == 0:
        return float("nan")
    return float(np.quantile(v, centile / 100.0, method=CENTILE_METHOD))


def centile_ci_ranks(
    n: int, centile: float = CENTILE, level: float = CI_LEVEL
) -> tuple[int, int, float]:
    """1-based ranks (r, s) of the order statistics bounding a distribution-free interval for a centile.

    The number of observations below the true p-th quantile is Binomial(n, p); ``[x_(r), x_(s)]``
    covers the quantile with probability ``P(r <= X <= s - 1)``. ``r`` is the largest rank with
    ``P(X <= r - 1) <= (1 - level) / 2`` and ``s`` the smallest with ``P(X <= s - 1) >= (1 + level) / 2``.

    Parameters
    ----------
    n : int
        Number of observations.
    centile : float
        Centile. [%]
    level : float
        Nominal confidence level, e.g. 0.90.

    Returns
    -------
    (int, int, float)
        ``r``, ``s`` and the exact coverage; ranks are 0 when no such order statistic exists
        (too few observations), coverage is then NaN.

    References
    ----------
    CLSI EP28-A3c, 2010 (table of ranks for the 90 % confidence interval of a reference limit; for
    n = 120 the ranks are 1 and 7 for the lower, 114 and 120 for the upper limit; from memory).
    """
    if n < 1:
        return 0, 0, float("nan")
    p = centile / 100.0
    tail = (1.0 - level) / 2.0
    k = np.arange(1, n + 1)
    cdf_below = stats.binom.cdf(k - 1, n, p)  # P(X <= k - 1)
    lo_ok = np.flatnonzero(cdf_below <= tail + 1e-12)
    hi_ok = np.flatnonzero(cdf_below >= 1.0 - tail - 1e-12)
    if lo_ok.size == 0 or hi_ok.size == 0:
        return 0, 0, float("nan")
    r, s = int(k[lo_ok[-1]]), int(k[hi_ok[0]])
    coverage = float(stats.binom.cdf(s - 1, n, p) - stats.binom.cdf(r - 1, n, p))
    return r, s, coverage


def centile_summary(values, centile: float = CENTILE, level: float = CI_LEVEL) -> dict:
    """Centile, its order-statistic confidence interval, mean and SD of the finite values.

    Parameters
    ----------
    values : array-like
        Observations; NaN ignored. [any unit]
    centile, level : float
        As in :func:`centile_ci_ranks`.

    Returns
    -------
    dict
        ``n, centile, ci_low, ci_high, ci_coverage, mean, sd`` (values in the unit of ``values``;
        interval bounds NaN when n is too small to bound the centile).
    """
    v = np.sort(np.asarray(values, dtype=float))
    v = v[np.isfinite(v)]
    n = int(v.size)
    r, s, cov = centile_ci_ranks(n, centile, level)
    return {
        "n": n,
        "centile": upper_centile(v, centile),
        "ci_low": float(v[r - 1]) if r else float("nan"),
        "ci_high": float(v[s - 1]) if s else float("nan"),
        "ci_coverage": cov,
        "mean": float(v.mean()) if n else float("nan"),
        "sd": float(v.std(ddof=1)) if n > 1 else float("nan"),
    }


def fit_line(x, y, *, lower_centile: float = LOWER_LIMIT_CENTILE) -> dict:
    """Ordinary least-squares line ``y = intercept + slope * x`` with residual SD and prediction band.

    Parameters
    ----------
    x : array-like
        Circumferential end-systolic stress. [kdyn/cm2]
    y : array-like
        Midwall fractional shortening. [%]
    lower_centile : float
        Centile of ``100 * y / predicted`` reported as the lower limit of stress-corrected
        shortening. [%]

    Returns
    -------
    dict
        ``intercept_pct`` [%], ``slope_pct_per_kdyn_cm2`` [% per kdyn/cm2], ``residual_sd_pct`` [%]
        (sqrt(SSE / (n - 2))), ``n``, ``r2``, ``pi95_half_width_at_mean_pct`` [%]
        (t(0.975, n - 2) * s * sqrt(1 + 1/n), the half-width of the 95 % prediction interval at the
        mean stress), ``x_mean/x_min/x_max_kdyn_cm2``, ``lower_limit_stress_corrected_pct`` [%]
        (the ``lower_centile`` of 100 * observed / predicted, nonparametric) and
        ``lower_limit_parametric_pct`` [%] (100 * (1 - 1.645 s / mean y), for comparison only).
        Pairs with a NaN are dropped.

    Notes
    -----
    The prediction interval at stress ``x0`` is ``yhat(x0) +/- t * s * sqrt(1 + 1/n + (x0 - xbar)^2 /
    Sxx)``; at ``x0 = xbar`` the last term vanishes.

    References
    ----------
    Any regression text, e.g. Draper NR, Smith H. Applied Regression Analysis, 3rd ed., Wiley 1998,
    ch. 1 (from memory).
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.shape != y.shape:
        raise ValueError(f"x and y must have the same shape, got {x.shape} and {y.shape}")
    ok = np.isfinite(x) & np.isfinite(y)
    x, y = x[ok], y[ok]
    n = int(x.size)
    if n < 3 or np.ptp(x) == 0:
        raise InputError(
            f"the stress-shortening line needs at least 3 subjects with different cESS and midwall "
            f"shortening; got {n}"
        )
    xm, ym = x.mean(), y.mean()
    sxx = float(np.sum((x - xm) ** 2))
    slope = float(np.sum((x - xm) * (y - ym)) / sxx)
    intercept = float(ym - slope * xm)
    pred = intercept + slope * x
    resid = y - pred
    sse = float(np.sum(resid**2))
    sst = float(np.sum((y - ym) ** 2))
    s = float(np.sqrt(sse / (n - 2)))
    t = float(stats.t.ppf(0.975, n - 2))
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = 100.0 * y / pred
    return {
        "intercept_pct": intercept,
        "slope_pct_per_kdyn_cm2": slope,
        "residual_sd_pct": s,
        "n": n,
        "r2": 1.0 - sse / sst if sst > 0 else float("nan"),
        "pi95_half_width_at_mean_pct": t * s * float(np.sqrt(1.0 + 1.0 / n)),
        "x_mean_kdyn_cm2": float(xm),
        "x_min_kdyn_cm2": float(x.min()),
        "x_max_kdyn_cm2": float(x.max()),
        "lower_limit_stress_corrected_pct": upper_centile(ratio[pred > 0], lower_centile),
        "lower_limit_parametric_pct": 100.0 * (1.0 - 1.645 * s / float(ym)),
    }
