"""Pictures of a batch and of a cohort: geometry plane, LVMI trend, stress-shortening, transitions.

Every function returns a :class:`matplotlib.figure.Figure` built with the object API (no pyplot, no
screen, no global state), so figures can be made in worker threads and saved as PNG or SVG
(:func:`save`). Inputs are tables under canonical names (``Analysis.frame()``, the tracking tables);
missing columns or rows give an emptier picture, never an error. Text taken from the input (patient
ids) is shown literally: ``$`` is escaped so it never starts matplotlib math text.

Colours are the Okabe-Ito palette, which stays distinguishable under the common colour-vision
deficiencies; sexes also differ by marker shape so the plot survives greyscale printing.

This module writes figures out (:func:`to_png`, :func:`to_svg`, :func:`save`); each figure has a
module of its own beside it, the shared palette, labels and helpers are in ``common``.

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

from matplotlib.figure import Figure

from wallstress.write.safety import atomic_files


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
