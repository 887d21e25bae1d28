"""Geometry at the first study against the last: the count matrix and its shaded table."""

from __future__ import annotations

import numpy as np
import pandas as pd
from matplotlib.colors import LinearSegmentedColormap
from matplotlib.figure import Figure
from matplotlib.patches import Rectangle

from wallstress.figures.common import (
    _TEXT_COLOUR,
    GEOMETRY_CLASSES,
    GEOMETRY_LABELS,
    OKABE_ITO,
    _no_data,
    plain_text,
)

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
