"""The geometry plane: relative wall thickness against LV mass index, cut-offs, groups and patient paths.

References
----------
Ganau A et al. Patterns of left ventricular hypertrophy and geometric remodeling in essential
hypertension. J Am Coll Cardiol 1992;19:1550-1558 (the four geometry groups).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from wallstress.figures.common import (
    _TEXT_COLOUR,
    GEOMETRY_COLOURS,
    GREY,
    MASS_INDEX_LABELS,
    MASS_INDEX_UNITS,
    QUADRANT_TEXT,
    SEX_COLOURS,
    SEX_LABELS,
    SEX_MARKERS,
    SEXES,
    _check_mass_index,
    _column,
    _cutoff,
    _new_figure,
    _no_data,
    _sex,
    _sort_key,
    _status,
    plain_text,
)
from wallstress.schema.vocabulary import OUT


def geometry_plane(
    frame: pd.DataFrame,
    reference_set,
    *,
    mass_index: str | None = None,
    paths: pd.DataFrame | None = None,
    max_paths: int = 500,
) -> Figure:
    """Relative wall thickness against LV mass index, with the set's cut-offs and the four groups.

    Parameters
    ----------
    frame : DataFrame
        One row per study with ``rwt`` [-], the mass index column [g/m² or g/m^2.7] and ``sex``
        ('F'/'M'; others drawn grey).
    reference_set : ReferenceSet or None
        Gives the sex-specific mass index limits and the RWT limit (``cutoff(measure, sex)``).
        ``None`` draws the points without cut-offs.
    mass_index : {'lvmi_bsa_g_m2', 'lvmi_h27_g_m2_7'}, optional
        Index on the x axis. Default: the set's own geometry index (``reference_set.mass_index``).
    paths : DataFrame, optional
        A visits table (``patient_id``, ``years_since_baseline`` or ``study_date``, ``rwt``, the
        mass index, ``sex``): one arrow per patient from the first visit (dot) to the last, in
        time order, coloured by sex.
    max_paths : int
        At most this many patients' paths are drawn (the first in table order); the figure says
        how many were left out.

    Returns
    -------
    Figure
        One axes; vertical dashed lines at the women's and men's mass limits, a horizontal line
        at the RWT limit (two if the set gives different limits by sex).

    References
    ----------
    Ganau A et al. J Am Coll Cardiol 1992;19:1550-1558 (the four groups).
    Lang RM et al. J Am Soc Echocardiogr 2015;28:1-39 (cut-offs of the default set).
    """
    if mass_index is None:
        mass_index = getattr(reference_set, "mass_index", None) or OUT.lvmi_bsa_g_m2
    _check_mass_index(mass_index)
    fig, ax = _new_figure(7.6, 5.4)
    x = _column(frame, mass_index)
    y = _column(frame, OUT.rwt)
    sex = _sex(frame)
    ok = np.isfinite(x) & np.isfinite(y)
    dense = ok.sum() > 5000
    size = 6 if dense else 22
    for s in (*SEXES, ""):
        m = ok & (sex == s)
        if m.any():
            ax.scatter(
                x[m],
                y[m],
                s=size,
                marker=SEX_MARKERS[s],
                facecolor=SEX_COLOURS[s],
                edgecolor="white" if not dense else "none",
                linewidth=0.4,
                alpha=0.55 if dense else 0.85,
                label=f"{SEX_LABELS[s]} (n = {int(m.sum())})",
                rasterized=dense,
                zorder=3,
            )

    unit = MASS_INDEX_UNITS[mass_index]
    x_cuts, y_cuts = [], []
    for s in SEXES:
        c = _cutoff(reference_set, mass_index, s)
        if c is not None and np.isfinite(c.value):
            x_cuts.append(c.value)
            flag = " (unverified)" if _status(getattr(c, "verified", None)) else ""
            ax.axvline(
                c.value,
                color=SEX_COLOURS[s],
                linestyle="--",
                linewidth=1.2,
                label=f"mass limit, {SEX_LABELS[s]}: {c.comparison} {c.value:g} {unit}{flag}",
                zorder=2,
            )
    rwt_cuts = {s: _cutoff(reference_set, OUT.rwt, s) for s in SEXES}
    values = {s: c.value for s, c in rwt_cuts.items() if c is not None and np.isfinite(c.value)}
    if values:
        same = len(set(values.values())) == 1
        for s, v in values.items():
            c = rwt_cuts[s]
            flag = " (unverified)" if _status(getattr(c, "verified", None)) else ""
            who = "" if same else f", {SEX_LABELS[s]}"
            y_cuts.append(v)
            ax.axhline(
                v,
                color=_TEXT_COLOUR if same else SEX_COLOURS[s],
                linestyle=":",
                linewidth=1.2,
                label=f"RWT limit{who}: {c.comparison} {v:g}{flag}",
                zorder=2,
            )
            if same:
                break

    n_paths_left_out = 0
    if paths is not None and len(paths):
        n_paths_left_out = _draw_paths(ax, paths, mass_index, max_paths)

    # Limits: the data and the cut-offs, with a margin.
    xs = np.concatenate([x[ok], x_cuts]) if (ok.any() or x_cuts) else np.array([60.0, 140.0])
    ys = np.concatenate([y[ok], y_cuts]) if (ok.any() or y_cuts) else np.array([0.25, 0.6])
    if paths is not None and len(paths):
        px, py = _column(paths, mass_index), _column(paths, OUT.rwt)
        pm = np.isfinite(px) & np.isfinite(py)
        xs, ys = np.concatenate([xs, px[pm]]), np.concatenate([ys, py[pm]])
    lo_x, hi_x = np.nanmin(xs), np.nanmax(xs)
    lo_y, hi_y = np.nanmin(ys), np.nanmax(ys)
    pad_x = max(0.08 * (hi_x - lo_x), 5.0)
    pad_y = max(0.08 * (hi_y - lo_y), 0.03)
    ax.set_xlim(max(lo_x - pad_x, 0.0), hi_x + pad_x)
    ax.set_ylim(max(lo_y - pad_y, 0.0), hi_y + pad_y)

    if x_cuts and y_cuts:
        corners = {
            "normal": (0.01, 0.01, "left", "bottom"),
            "concentric_remodelling": (0.01, 0.99, "left", "top"),
            "concentric_hypertrophy": (0.99, 0.99, "right", "top"),
            "eccentric_hypertrophy": (0.99, 0.01, "right", "bottom"),
        }
        for key, (qx, qy, ha, va) in corners.items():
            ax.text(
                qx,
                qy,
                QUADRANT_TEXT[key],
                transform=ax.transAxes,
                ha=ha,
                va=va,
                fontsize=7.5,
                color=GEOMETRY_COLOURS[key],
                fontweight="bold",
                linespacing=1.2,
                bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.75, "pad": 1.5},
                zorder=4,
            )
    if not ok.any() and (paths is None or not len(paths)):
        _no_data(ax)

    ax.set_xlabel(MASS_INDEX_LABELS[mass_index])
    ax.set_ylabel("Relative wall thickness, RWT [-]")
    set_name = getattr(reference_set, "name", None)
    title = "LV geometry: wall ratio against mass"
    if set_name:
        title += f"  (cut-offs: {plain_text(set_name)})"
    ax.set_title(title, fontsize=10, loc="left", color=_TEXT_COLOUR)
    if n_paths_left_out:
        ax.text(
            0.5,
            -0.02,
            f"paths drawn for the first {max_paths} patients; {n_paths_left_out} more not drawn",
            transform=ax.transAxes,
            ha="center",
            va="top",
            fontsize=7,
            color=GREY,
        )
    handles, _ = ax.get_legend_handles_labels()
    if handles:
        ax.legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return fig


def _draw_paths(ax, paths: pd.DataFrame, mass_index: str, max_paths: int) -> int:
    """One arrow per patient from the first to the last visit (vectorised: one quiver).

    Visits without both values are skipped; patients with fewer than two usable visits get no
    arrow. Returns how many patients were left out by ``max_paths``.
    """
    if "patient_id" not in paths.columns:
        return 0
    px, py = _column(paths, mass_index), _column(paths, OUT.rwt)
    sex = _sex(paths)
    pid = paths["patient_id"].astype("string").fillna("").to_numpy(dtype=object)
    codes, uniques = pd.factorize(pid, sort=False)
    n_patients = len(uniques)
    keep = np.isfinite(px) & np.isfinite(py) & (codes >= 0) & (codes < max_paths)
    order = np.lexsort((_sort_key(paths), codes))
    order = order[keep[order]]
    if order.size:
        c = codes[order]
        first = np.r_[True, c[1:] != c[:-1]]
        last = np.r_[c[1:] != c[:-1], True]
        i0, i1 = order[first], order[last]
        moved = i0 != i1
        i0, i1 = i0[moved], i1[moved]
        if i0.size:
            colours = [SEX_COLOURS[s] for s in sex[i0]]
            ax.scatter(px[i0], py[i0], s=10, color=colours, zorder=4)
            ax.quiver(
                px[i0],
                py[i0],
                px[i1] - px[i0],
                py[i1] - py[i0],
                color=colours,
                angles="xy",
                scale_units="xy",
                scale=1.0,
                width=0.0035,
                headwidth=4.0,
                headlength=5.0,
                alpha=0.8,
                zorder=4,
            )
            for s_ in pd.unique(sex[i0]):
                ax.plot(
                    [],
                    [],
                    color=SEX_COLOURS[s_],
                    marker="o",
                    markersize=3,
                    label=f"{SEX_LABELS[s_]}: first visit (dot) to last (arrow)",
                )
    return max(n_patients - max_paths, 0)
