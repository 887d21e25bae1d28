"""One patient's LV mass index over time, with the limit for the patient's sex and LSC error bars."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.dates import AutoDateLocator, ConciseDateFormatter
from matplotlib.figure import Figure

from wallstress.figures.common import (
    _TEXT_COLOUR,
    GEOMETRY_CLASSES,
    GEOMETRY_COLOURS,
    GEOMETRY_LABELS,
    GREY,
    MASS_INDEX_LABELS,
    MASS_INDEX_UNITS,
    SEX_COLOURS,
    SEX_LABELS,
    SEXES,
    _check_mass_index,
    _column,
    _cutoff,
    _new_figure,
    _no_data,
    _sex,
    _sort_key,
    _status,
    _text_column,
    _time_axis,
    plain_text,
)
from wallstress.schema.vocabulary import OUT


def mass_divisor(visits: pd.DataFrame, mass_index: str) -> np.ndarray:
    """The body-size divisor of a mass index per visit: BSA [m²] or height^2.7 [m^2.7].

    Taken from ``bsa_m2`` / ``height_cm`` when present; otherwise recovered as
    ``lv_mass_g / index`` (the definition of the index). NaN where neither is available.
    """
    _check_mass_index(mass_index)
    if mass_index == OUT.lvmi_bsa_g_m2:
        d = _column(visits, OUT.bsa_m2)
    else:
        d = (_column(visits, "height_cm") / 100.0) ** 2.7
    with np.errstate(divide="ignore", invalid="ignore"):
        fallback = _column(visits, OUT.lv_mass_g) / _column(visits, mass_index)
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
        if OUT.lvmi_bsa_g_m2 in visits.columns:
            mass_index = OUT.lvmi_bsa_g_m2
        else:
            mass_index = getattr(reference_set, "mass_index", None) or OUT.lvmi_bsa_g_m2
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
    geometry = _text_column(visits, OUT.geometry)
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
