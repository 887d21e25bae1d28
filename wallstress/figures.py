"""Pictures of a batch and of a cohort: geometry plane, LVMI trend, stress-shortening, transitions.

Every function returns a :class:`matplotlib.figure.Figure` built with the object API (no pyplot, no
screen, no global state), so figures can be made in worker threads and saved as PNG or SVG
(:func:`save`). Inputs are tables under canonical names (``Analysis.frame()``, the tracking tables);
missing columns or rows give an emptier picture, never an error. Text taken from the input (patient
ids) is shown literally: ``$`` is escaped so it never starts matplotlib math text.

Colours are the Okabe-Ito palette, which stays distinguishable under the common colour-vision
deficiencies; sexes also differ by marker shape so the plot survives greyscale printing.

wallstress supports, and never replaces, a qualified clinician's judgement and the local lab's
protocols and reference values.

References
----------
Okabe M, Ito K. Color Universal Design (CUD): how to make figures and presentations that are
friendly to colorblind people. J*Fly, 2002 (palette).
Ganau A et al. Patterns of left ventricular hypertrophy and geometric remodeling in essential
hypertension. J Am Coll Cardiol 1992;19:1550-1558 (the four geometry groups).
de Simone G et al. Assessment of left ventricular function by the midwall fractional
shortening/end-systolic stress relation in human hypertension. J Am Coll Cardiol 1994;23:1444-1451.
"""

from __future__ import annotations

import io
from pathlib import Path

import numpy as np
import pandas as pd
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.dates import AutoDateLocator, ConciseDateFormatter
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from .safety import atomic_files

# Okabe-Ito palette (Okabe & Ito 2002).
OKABE_ITO: dict[str, str] = {
    "black": "#000000",
    "orange": "#E69F00",
    "sky_blue": "#56B4E9",
    "bluish_green": "#009E73",
    "yellow": "#F0E442",
    "blue": "#0072B2",
    "vermillion": "#D55E00",
    "reddish_purple": "#CC79A7",
}
GREY = "#8C8C8C"

SEXES: tuple[str, ...] = ("F", "M")
SEX_LABELS: dict[str, str] = {"F": "women", "M": "men", "": "sex not given"}
SEX_COLOURS: dict[str, str] = {"F": OKABE_ITO["vermillion"], "M": OKABE_ITO["blue"], "": GREY}
SEX_MARKERS: dict[str, str] = {"F": "o", "M": "s", "": "^"}

GEOMETRY_CLASSES: tuple[str, ...] = (
    "normal",
    "concentric_remodelling",
    "concentric_hypertrophy",
    "eccentric_hypertrophy",
)
GEOMETRY_LABELS: dict[str, str] = {
    "normal": "normal",
    "concentric_remodelling": "concentric remodelling",
    "concentric_hypertrophy": "concentric hypertrophy",
    "eccentric_hypertrophy": "eccentric hypertrophy",
    "": "undetermined",
}
GEOMETRY_COLOURS: dict[str, str] = {
    "normal": OKABE_ITO["bluish_green"],
    "concentric_remodelling": OKABE_ITO["orange"],
    "concentric_hypertrophy": OKABE_ITO["vermillion"],
    "eccentric_hypertrophy": OKABE_ITO["reddish_purple"],
    "": GREY,
}

# Our own plain-words description of each quadrant of the RWT / LVMI plane.
QUADRANT_TEXT: dict[str, str] = {
    "normal": "Normal\nmass and wall ratio within limits",
    "concentric_remodelling": "Concentric remodelling\nwalls thick for the cavity, mass within limit",
    "concentric_hypertrophy": "Concentric hypertrophy\nmass high, walls thick for the cavity",
    "eccentric_hypertrophy": "Eccentric hypertrophy\nmass high, walls in proportion",
}

MASS_INDEXES: tuple[str, ...] = ("lvmi_bsa_g_m2", "lvmi_h27_g_m2_7")
MASS_INDEX_LABELS: dict[str, str] = {
    "lvmi_bsa_g_m2": "LV mass index, LV mass / BSA [g/m²]",
    "lvmi_h27_g_m2_7": "LV mass index, LV mass / height^2.7 [g/m^2.7]",
}
MASS_INDEX_UNITS: dict[str, str] = {"lvmi_bsa_g_m2": "g/m²", "lvmi_h27_g_m2_7": "g/m^2.7"}

LINE_KEYS: tuple[str, ...] = ("intercept_pct", "slope_pct_per_kdyn_cm2", "residual_sd_pct")
BAND_Z = 1.96  # two-sided 95 % band of a normal residual (common practice, no source)

_RC = {"font.size": 9}
_TEXT_COLOUR = "#222222"


# ----------------------------------------------------------------------------------------------
# small helpers
# ----------------------------------------------------------------------------------------------


def plain_text(value) -> str:
    """Input text made safe for a matplotlib label: shown literally, never as math text."""
    text = "" if value is None else str(value)
    return text.replace("\\", "\\\\").replace("$", r"\$")


def _column(frame: pd.DataFrame | None, name: str) -> np.ndarray:
    """A numeric column as float array (NaN where missing, not numeric, or the column is absent)."""
    if frame is None or name not in frame.columns:
        n = 0 if frame is None else len(frame)
        return np.full(n, np.nan)
    return pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float, na_value=np.nan)


def _sex(frame: pd.DataFrame | None) -> np.ndarray:
    """Sex as 'F', 'M' or '' (anything else)."""
    if frame is None or "sex" not in frame.columns:
        n = 0 if frame is None else len(frame)
        return np.full(n, "", dtype=object)
    s = frame["sex"].astype("string").str.strip().str.upper().str[:1]
    s = s.where(s.isin(list(SEXES)), "").fillna("")
    return s.to_numpy(dtype=object)


def _text_column(frame: pd.DataFrame | None, name: str) -> np.ndarray:
    if frame is None or name not in frame.columns:
        n = 0 if frame is None else len(frame)
        return np.full(n, "", dtype=object)
    return frame[name].astype("string").fillna("").to_numpy(dtype=object)


def _cutoff(reference_set, measure: str, sex: str):
    """The set's abnormal threshold, or None when there is no set or no such cut-off."""
    if reference_set is None:
        return None
    try:
        return reference_set.cutoff(measure, sex)
    except (KeyError, ValueError, LookupError):
        return None


VERIFIED_OK: tuple[str, ...] = ("published", "computed", "lab")
"""Statuses that need no "unverified" mark: read in the source, computed from such a value, or
the lab's own limits."""


def _status(verified) -> str:
    return "" if verified in (None, "", *VERIFIED_OK) else str(verified)


def _status_words(status: str) -> str:
    """'from_memory' -> 'unverified (from memory)'; anything not published reads as unverified."""
    words = str(status).replace("_", " ")
    return "unverified" if words in ("", "unverified") else f"unverified ({words})"


def _new_figure(width_in: float, height_in: float, margins=None) -> tuple[Figure, object]:
    """A figure with one styled axes; ``margins`` (left, bottom, right, top) fixes the layout
    instead of the slower constrained layout (used for the many per-patient figures)."""
    if margins is None:
        fig = Figure(figsize=(width_in, height_in), layout="constrained")
        ax = fig.add_subplot()
    else:
        fig = Figure(figsize=(width_in, height_in))
        left, bottom, right, top = margins
        ax = fig.add_axes((left, bottom, right - left, top - bottom))
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(labelsize=8, colors=_TEXT_COLOUR)
    ax.grid(True, color="#E5E5E5", linewidth=0.6)
    ax.set_axisbelow(True)
    return fig, ax


def _no_data(ax, text: str = "no rows with the values this figure needs") -> None:
    ax.text(
        0.5, 0.5, text, transform=ax.transAxes, ha="center", va="center", color=GREY, fontsize=10
    )


def _check_mass_index(mass_index: str) -> str:
    if mass_index not in MASS_INDEXES:
        raise ValueError(
            f"mass_index={mass_index!r} is not known; pass one of {MASS_INDEXES} "
            "(or None for the reference set's own index)"
        )
    return mass_index


def _time_axis(frame: pd.DataFrame) -> tuple[np.ndarray, str, bool]:
    """Visit times: dates when every visit has one, else years since baseline, else visit order."""
    if "study_date" in frame.columns:
        dates = pd.to_datetime(frame["study_date"], errors="coerce")
        if len(dates) and dates.notna().all():
            return dates.to_numpy(), "Study date", True
    years = _column(frame, "years_since_baseline")
    if len(years) and np.isfinite(years).all():
        return years, "Years since the first study [years]", False
    return np.arange(1, len(frame) + 1, dtype=float), "Visit number", False


def _sort_key(frame: pd.DataFrame) -> np.ndarray:
    years = _column(frame, "years_since_baseline")
    if len(years) and np.isfinite(years).any():
        return years
    if "study_date" in frame.columns:
        dates = pd.to_datetime(frame["study_date"], errors="coerce")
        return dates.to_numpy(dtype="datetime64[ns]").astype("int64").astype(float)
    return np.arange(len(frame), dtype=float)


# ----------------------------------------------------------------------------------------------
# geometry plane
# ----------------------------------------------------------------------------------------------


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
        mass_index = getattr(reference_set, "mass_index", None) or "lvmi_bsa_g_m2"
    _check_mass_index(mass_index)
    fig, ax = _new_figure(7.6, 5.4)
    x = _column(frame, mass_index)
    y = _column(frame, "rwt")
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
    rwt_cuts = {s: _cutoff(reference_set, "rwt", s) for s in SEXES}
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
        px, py = _column(paths, mass_index), _column(paths, "rwt")
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
    px, py = _column(paths, mass_index), _column(paths, "rwt")
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


# ----------------------------------------------------------------------------------------------
# LVMI trend of one patient
# ----------------------------------------------------------------------------------------------


def mass_divisor(visits: pd.DataFrame, mass_index: str) -> np.ndarray:
    """The body-size divisor of a mass index per visit: BSA [m²] or height^2.7 [m^2.7].

    Taken from ``bsa_m2`` / ``height_cm`` when present; otherwise recovered as
    ``lv_mass_g / index`` (the definition of the index). NaN where neither is available.
    """
    _check_mass_index(mass_index)
    if mass_index == "lvmi_bsa_g_m2":
        d = _column(visits, "bsa_m2")
    else:
        d = (_column(visits, "height_cm") / 100.0) ** 2.7
    with np.errstate(divide="ignore", invalid="ignore"):
        fallback = _column(visits, "lv_mass_g") / _column(visits, mass_index)
    d = np.where(np.isfinite(d) & (d > 0), d, fallback)
    return np.where(np.isfinite(d) & (d > 0), d, np.nan)


def lvmi_trend(
    visits_one_patient: pd.DataFrame,
    reference_set,
    *,
    lsc_g: float | None,
    mass_index: str | None = None,
) -> Figure:
    """One patient's LV mass index over time, the sex's limit, and the least significant change.

    Parameters
    ----------
    visits_one_patient : DataFrame
        The patient's visits: the mass index [g/m² or g/m^2.7], ``study_date`` or
        ``years_since_baseline`` [years], ``sex``, ``geometry``, and ``bsa_m2`` [m²] /
        ``height_cm`` [cm] or ``lv_mass_g`` [g] to convert the LSC to the index.
    reference_set : ReferenceSet or None
        Gives the mass index limit for the patient's sex (both limits when sex is not given).
    lsc_g : float or None
        Least significant change of LV mass [g] (e.g. 35 g, Palmieri 1999). Each point gets an
        error bar of +/- ``lsc_g / divisor`` (BSA [m²] or height^2.7 [m^2.7]) in index units: a
        later point outside the first point's bar is a change larger than the measurement's own
        reproducibility. ``None`` draws no bars.
    mass_index : {'lvmi_bsa_g_m2', 'lvmi_h27_g_m2_7'}, optional
        Default: ``lvmi_bsa_g_m2`` when the visits have it, else the set's geometry index.

    Returns
    -------
    Figure

    References
    ----------
    Palmieri V et al. Reliability of echocardiographic assessment of left ventricular structure
    and function: the PRESERVE study. J Am Coll Cardiol 1999;34:1625-1632.
    Bland JM, Altman DG. Measurement error. BMJ 1996;313:744 (LSC = 1.96 sqrt(2) Sw).
    """
    if lsc_g is not None:
        try:
            lsc_value = float(lsc_g)
        except (TypeError, ValueError):
            lsc_value = np.nan
        if not np.isfinite(lsc_value) or lsc_value < 0:
            raise ValueError(
                f"lsc_g={lsc_g!r} is not a usable least significant change; pass a positive "
                "number of grams (e.g. 35, Palmieri 1999) or None for no error bars"
            )
    else:
        lsc_value = None
    visits = visits_one_patient if visits_one_patient is not None else pd.DataFrame()
    if mass_index is None:
        if "lvmi_bsa_g_m2" in visits.columns:
            mass_index = "lvmi_bsa_g_m2"
        else:
            mass_index = getattr(reference_set, "mass_index", None) or "lvmi_bsa_g_m2"
    _check_mass_index(mass_index)
    if len(visits):
        visits = visits.iloc[np.argsort(_sort_key(visits), kind="stable")]
    fig, ax = _new_figure(7.4, 3.4, margins=(0.1, 0.15, 0.66, 0.9))
    t, t_label, is_date = _time_axis(visits) if len(visits) else (np.array([]), "Visit", False)
    y = _column(visits, mass_index)
    ok = np.isfinite(y)
    unit = MASS_INDEX_UNITS[mass_index]

    if lsc_value is not None and ok.any():
        half = lsc_value / mass_divisor(visits, mass_index)
        bar = ok & np.isfinite(half)
        if bar.any():
            ax.errorbar(
                t[bar],
                y[bar],
                yerr=half[bar],
                fmt="none",
                ecolor=GREY,
                elinewidth=1.0,
                capsize=3,
                label=f"± least significant change ({lsc_value:g} g)",
                zorder=2,
            )
    if ok.sum() > 1:
        ax.plot(t[ok], y[ok], color=_TEXT_COLOUR, linewidth=1.0, alpha=0.6, zorder=2.5)
    geometry = _text_column(visits, "geometry")
    for g in (*GEOMETRY_CLASSES, ""):
        m = ok & (geometry == g) if g else ok & ~np.isin(geometry, GEOMETRY_CLASSES)
        if m.any():
            ax.scatter(
                t[m],
                y[m],
                s=36,
                color=GEOMETRY_COLOURS[g],
                edgecolor=_TEXT_COLOUR,
                linewidth=0.5,
                label=GEOMETRY_LABELS[g],
                zorder=3,
            )

    sexes = [s for s in pd.unique(_sex(visits)) if s] if len(visits) else []
    limit_sexes = sexes[:1] if len(sexes) == 1 else list(SEXES)
    for s in limit_sexes:
        c = _cutoff(reference_set, mass_index, s)
        if c is not None and np.isfinite(c.value):
            flag = " (unverified)" if _status(getattr(c, "verified", None)) else ""
            ax.axhline(
                c.value,
                color=SEX_COLOURS[s],
                linestyle="--",
                linewidth=1.2,
                label=f"limit, {SEX_LABELS[s]}: {c.comparison} {c.value:g} {unit}{flag}",
                zorder=1.5,
            )
    if not ok.any():
        _no_data(ax, "no visit with an LV mass index")
    ax.set_xlabel(t_label)
    ax.set_ylabel(MASS_INDEX_LABELS[mass_index].replace("LV mass index, ", "LVMI, "))
    pid = _text_column(visits, "patient_id")
    who = plain_text(pid[0]) if len(pid) and pid[0] else ""
    ax.set_title(
        f"LV mass index over time{(' - patient ' + who) if who else ''}",
        fontsize=10,
        loc="left",
        color=_TEXT_COLOUR,
    )
    if is_date:
        locator = AutoDateLocator(minticks=3, maxticks=7)
        ax.xaxis.set_major_locator(locator)
        ax.xaxis.set_major_formatter(ConciseDateFormatter(locator))
    handles, _ = ax.get_legend_handles_labels()
    if handles:
        ax.legend(fontsize=7, frameon=False, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    return fig


# ----------------------------------------------------------------------------------------------
# stress-shortening
# ----------------------------------------------------------------------------------------------


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
    x = _column(frame, "cess_kdyn_cm2")
    y = _column(frame, "midwall_fs_pct")
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


# ----------------------------------------------------------------------------------------------
# transitions
# ----------------------------------------------------------------------------------------------

_FROM_NAMES = ("first_geometry", "geometry_first", "from_geometry", "from", "first", "baseline")
_TO_NAMES = ("last_geometry", "geometry_last", "to_geometry", "to", "last", "latest")
_COUNT_NAMES = ("n", "count", "patients", "n_patients", "number")
_TOTAL_NAMES = {"total", "all", "sum"}


def transition_matrix(transitions: pd.DataFrame | None) -> pd.DataFrame:
    """A first -> last geometry table as a square count matrix (rows: first, columns: last).

    Accepts a cross-table (index = first class, columns = last class, counts) or a long table
    with from / to / count columns (e.g. ``first_geometry``, ``last_geometry``, ``n``). Totals
    rows or columns are dropped. Known classes come first in their usual order.
    """
    if transitions is None or len(transitions) == 0:
        return pd.DataFrame(dtype=float)
    t = transitions.copy()
    lower = {str(c).lower(): c for c in t.columns}
    f = next((lower[n] for n in _FROM_NAMES if n in lower), None)
    to = next((lower[n] for n in _TO_NAMES if n in lower), None)
    if f is not None and to is not None:
        cnt = next((lower[n] for n in _COUNT_NAMES if n in lower), None)
        values = pd.to_numeric(t[cnt], errors="coerce") if cnt is not None else 1.0
        long = pd.DataFrame(
            {
                "from": t[f].astype("string").fillna(""),
                "to": t[to].astype("string").fillna(""),
                "n": values,
            }
        )
        m = long.pivot_table(index="from", columns="to", values="n", aggfunc="sum", fill_value=0)
    else:
        if f is not None:
            t = t.set_index(f)
        m = t.apply(pd.to_numeric, errors="coerce")
        m = m.loc[:, m.notna().any(axis=0)]
    m.index = [str(i) if i is not None else "" for i in m.index]
    m.columns = [str(c) for c in m.columns]
    m = m.loc[
        [i for i in m.index if i.lower() not in _TOTAL_NAMES],
        [c for c in m.columns if c.lower() not in _TOTAL_NAMES],
    ]
    classes = [g for g in GEOMETRY_CLASSES if g in m.index or g in m.columns]
    others = sorted((set(m.index) | set(m.columns)) - set(classes))
    order = classes + others
    return m.reindex(index=order, columns=order).fillna(0).astype(float)


def transitions_figure(transitions: pd.DataFrame | None) -> Figure:
    """Geometry at the first study (rows) against the last (columns) as a shaded count table.

    Parameters
    ----------
    transitions : DataFrame
        Cross-table or long table, see :func:`transition_matrix`.

    Returns
    -------
    Figure
        Cells shaded by the share of the row (white -> blue), each with its count and row percent;
        the diagonal (no change) outlined.
    """
    m = transition_matrix(transitions)
    n = max(len(m), 1)
    fig = Figure(figsize=(2.2 + 1.25 * n, 1.6 + 0.75 * n), layout="constrained")
    ax = fig.add_subplot()
    if m.empty:
        _no_data(ax, "no patient with two or more studies")
        ax.set_axis_off()
        return fig
    counts = m.to_numpy(dtype=float)
    row_total = counts.sum(axis=1, keepdims=True)
    with np.errstate(divide="ignore", invalid="ignore"):
        share = np.where(row_total > 0, counts / row_total, 0.0)
    cmap = LinearSegmentedColormap.from_list("wallstress_blue", ["#FFFFFF", OKABE_ITO["blue"]])
    ax.imshow(share, cmap=cmap, vmin=0.0, vmax=1.0, aspect="auto")
    for i in range(counts.shape[0]):
        for j in range(counts.shape[1]):
            pct = 100.0 * share[i, j]
            ax.text(
                j,
                i,
                f"{counts[i, j]:.0f}\n{pct:.0f} %" if row_total[i, 0] else f"{counts[i, j]:.0f}",
                ha="center",
                va="center",
                fontsize=8,
                color="white" if share[i, j] > 0.55 else _TEXT_COLOUR,
            )
        ax.add_patch(_cell_outline(i, i))
    labels = [GEOMETRY_LABELS.get(c, plain_text(c)).replace(" ", "\n", 1) for c in m.columns]
    rows = [
        f"{GEOMETRY_LABELS.get(r, plain_text(r))} (n = {row_total[k, 0]:.0f})"
        for k, r in enumerate(m.index)
    ]
    ax.set_xticks(range(len(m.columns)), labels, fontsize=7.5)
    ax.set_yticks(range(len(m.index)), rows, fontsize=7.5)
    ax.tick_params(length=0)
    for side in ax.spines.values():
        side.set_visible(False)
    ax.set_xlabel("Geometry at the last study")
    ax.set_ylabel("Geometry at the first study")
    ax.set_title(
        "Geometry at first and last study (patients; % of row)",
        fontsize=10,
        loc="left",
        color=_TEXT_COLOUR,
    )
    return fig


def _cell_outline(i: int, j: int) -> Rectangle:
    return Rectangle(
        (j - 0.5, i - 0.5), 1, 1, fill=False, edgecolor=_TEXT_COLOUR, linewidth=1.2, zorder=3
    )


# ----------------------------------------------------------------------------------------------
# output
# ----------------------------------------------------------------------------------------------


def to_png(fig: Figure, *, dpi: int = 110) -> bytes:
    """The figure as PNG bytes (white background, no timestamp metadata)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi, facecolor="white", metadata={"Software": None})
    return buf.getvalue()


def to_svg(fig: Figure) -> bytes:
    """The figure as SVG bytes (text as paths, no date metadata: same input, same file)."""
    buf = io.BytesIO()
    fig.savefig(buf, format="svg", facecolor="white", metadata={"Date": None})
    return buf.getvalue()


def save(fig: Figure, directory, stem: str, *, dpi: int = 150) -> tuple[Path, Path]:
    """Write ``<stem>.png`` and ``<stem>.svg`` into ``directory`` (created if needed), atomically.

    Returns
    -------
    (Path, Path)
        The PNG and SVG paths.
    """
    directory = Path(directory)
    directory.mkdir(parents=True, exist_ok=True)
    png, svg = directory / f"{stem}.png", directory / f"{stem}.svg"
    with atomic_files() as batch:
        batch.path(png).write_bytes(to_png(fig, dpi=dpi))
        batch.path(svg).write_bytes(to_svg(fig))
    return png, svg
