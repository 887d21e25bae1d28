"""Midwall fractional shortening against circumferential end-systolic stress, with a reference line.

References
----------
de Simone G et al. Assessment of left ventricular function by the midwall fractional
shortening/end-systolic stress relation in human hypertension. J Am Coll Cardiol 1994;23:1444-1451.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from wallstress.figures.common import (
    _TEXT_COLOUR,
    BAND_Z,
    LINE_KEYS,
    OKABE_ITO,
    SEX_COLOURS,
    SEX_LABELS,
    SEX_MARKERS,
    SEXES,
    VERIFIED_OK,
    _column,
    _new_figure,
    _no_data,
    _sex,
    _status_words,
)
from wallstress.schema.vocabulary import OUT


def line_values(line) -> tuple[float, float, float, str]:
    """(intercept [%], slope [%/(kdyn/cm²)], residual SD [%], status) of a reference line.

    ``line`` maps the names in ``LINE_KEYS`` to numbers or to objects with ``.value`` and
    ``.verified`` (``ReferenceSet.coefficients('midwall_stress_line')``). ``status`` is the first
    status outside ``VERIFIED_OK`` (e.g. ``'from_memory'``; ``'unverified'`` when none is given),
    else ``'published'`` or the lab's / computed status.
    """
    missing = [k for k in LINE_KEYS if k not in line]
    if missing:
        raise ValueError(
            f"line is missing {missing}; pass a mapping with {LINE_KEYS} (numbers or "
            "Coefficient objects), e.g. ReferenceSet.coefficients('midwall_stress_line')"
        )
    values = []
    statuses = []
    for k in LINE_KEYS:
        v = line[k]
        values.append(float(getattr(v, "value", v)))
        statuses.append(getattr(v, "verified", None))
    own = line.get("verified") if hasattr(line, "get") else None
    if own is not None:
        statuses = [own]
    statuses = [str(s) for s in statuses if s is not None]
    bad = [s for s in statuses if s not in VERIFIED_OK]
    if not statuses:
        status = "unverified"
    elif bad:
        status = bad[0]
    else:
        status = next((s for s in statuses if s != "published"), "published")
    return values[0], values[1], values[2], status


def stress_shortening(frame: pd.DataFrame, line) -> Figure:
    """Midwall fractional shortening against circumferential end-systolic stress, with a reference line.

    Parameters
    ----------
    frame : DataFrame
        ``cess_kdyn_cm2`` [kdyn/cm²], ``midwall_fs_pct`` [%], ``sex``.
    line : mapping or None
        ``intercept_pct`` [%], ``slope_pct_per_kdyn_cm2`` [%/(kdyn/cm²)], ``residual_sd_pct`` [%]
        (numbers or Coefficient objects; optional ``verified``). The band is
        +/- 1.96 residual SD. The line is labelled "unverified" unless its status is
        ``published``. ``None`` draws the points only.

    Returns
    -------
    Figure

    References
    ----------
    de Simone G et al. J Am Coll Cardiol 1994;23:1444-1451 (the relation; coefficients of the
    bundled line are from memory, unverified).
    Shimizu G et al. Circulation 1991;83:1676-1684 (midwall shortening).
    """
    fig, ax = _new_figure(7.0, 4.6)
    x = _column(frame, OUT.cess_kdyn_cm2)
    y = _column(frame, OUT.midwall_fs_pct)
    sex = _sex(frame)
    ok = np.isfinite(x) & np.isfinite(y)
    dense = ok.sum() > 5000
    for s in (*SEXES, ""):
        m = ok & (sex == s)
        if m.any():
            ax.scatter(
                x[m],
                y[m],
                s=6 if dense else 22,
                marker=SEX_MARKERS[s],
                facecolor=SEX_COLOURS[s],
                edgecolor="none" if dense else "white",
                linewidth=0.4,
                alpha=0.55 if dense else 0.85,
                label=f"{SEX_LABELS[s]} (n = {int(m.sum())})",
                rasterized=dense,
                zorder=3,
            )
    if ok.any():
        lo, hi = np.nanmin(x[ok]), np.nanmax(x[ok])
        pad = max(0.05 * (hi - lo), 10.0)
        lo, hi = max(lo - pad, 0.0), hi + pad
    else:
        lo, hi = 50.0, 300.0
        _no_data(ax)
    if line is not None:
        a, b, sd, status = line_values(line)
        xs = np.linspace(lo, hi, 50)
        ys = a + b * xs
        flag = "" if status in VERIFIED_OK else " (unverified)"
        ax.fill_between(
            xs,
            ys - BAND_Z * sd,
            ys + BAND_Z * sd,
            color=OKABE_ITO["sky_blue"],
            alpha=0.25,
            linewidth=0,
            label=f"95 % band (± {BAND_Z:g} × {sd:g} %)",
            zorder=1,
        )
        ax.plot(
            xs,
            ys,
            color=OKABE_ITO["blue"],
            linewidth=1.5,
            label=f"reference line: {a:g} {'+' if b >= 0 else '-'} {abs(b):g} × cESS{flag}",
            zorder=2,
        )
        if status not in VERIFIED_OK:
            ax.text(
                0.01,
                0.01,
                f"reference line {_status_words(status)}: check it against its source "
                "or fit the lab's own line",
                transform=ax.transAxes,
                ha="left",
                va="bottom",
                fontsize=7,
                color=OKABE_ITO["vermillion"],
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.8, "pad": 1.5},
                zorder=5,
            )
    ax.set_xlim(lo, hi)
    ax.set_xlabel("Circumferential end-systolic stress, cESS [kdyn/cm²]")
    ax.set_ylabel("Midwall fractional shortening [%]")
    ax.set_title(
        "Midwall shortening against end-systolic stress",
        fontsize=10,
        loc="left",
        color=_TEXT_COLOUR,
    )
    handles, _ = ax.get_legend_handles_labels()
    if handles:
        ax.legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return fig
