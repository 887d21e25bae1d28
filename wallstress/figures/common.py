"""What every figure shares: the palette, labels of sexes, classes and indexes, and small helpers.

Colours are the Okabe-Ito palette, which stays distinguishable under the common colour-vision
deficiencies; sexes also differ by marker shape so the plot survives greyscale printing. Columns are
read leniently (an absent or non-numeric column gives NaN), and text from the input is made literal
for matplotlib (:func:`plain_text`).

References
----------
Okabe M, Ito K. Color Universal Design (CUD): how to make figures and presentations that are
friendly to colorblind people. J*Fly, 2002 (palette).
Ganau A et al. Patterns of left ventricular hypertrophy and geometric remodeling in essential
hypertension. J Am Coll Cardiol 1992;19:1550-1558 (the four geometry groups).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from wallstress.schema.fields import SEXES
from wallstress.schema.vocabulary import GEOMETRY_CLASSES, OUT, in_words

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


SEX_LABELS: dict[str, str] = {"F": "women", "M": "men", "": "sex not given"}


SEX_COLOURS: dict[str, str] = {"F": OKABE_ITO["vermillion"], "M": OKABE_ITO["blue"], "": GREY}


SEX_MARKERS: dict[str, str] = {"F": "o", "M": "s", "": "^"}


GEOMETRY_LABELS: dict[str, str] = {
    **{g: in_words(g) for g in GEOMETRY_CLASSES},
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


MASS_INDEXES: tuple[str, ...] = (OUT.lvmi_bsa_g_m2, OUT.lvmi_h27_g_m2_7)


MASS_INDEX_LABELS: dict[str, str] = {
    OUT.lvmi_bsa_g_m2: "LV mass index, LV mass / BSA [g/m²]",
    OUT.lvmi_h27_g_m2_7: "LV mass index, LV mass / height^2.7 [g/m^2.7]",
}


MASS_INDEX_UNITS: dict[str, str] = {OUT.lvmi_bsa_g_m2: "g/m²", OUT.lvmi_h27_g_m2_7: "g/m^2.7"}


LINE_KEYS: tuple[str, ...] = ("intercept_pct", "slope_pct_per_kdyn_cm2", "residual_sd_pct")


BAND_Z = 1.96  # two-sided 95 % band of a normal residual (common practice, no source)


_RC = {"font.size": 9}


_TEXT_COLOUR = "#222222"


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
