"""A lab's reference set written as a set-file CSV, atomically and with formula-like text escaped."""

from __future__ import annotations

from pathlib import Path

from wallstress.analysis.references import SET_COLUMNS
from wallstress.calibration.fit import Calibration
from wallstress.errors import OutputError
from wallstress.write.formula_text import escape_formula_text
from wallstress.write.safety import atomic_path


def write_set(calibration: Calibration, out_path) -> Path:
    """Write a calibration as a reference-set CSV, atomically (temporary file, then ``os.replace``).

    Parameters
    ----------
    calibration : Calibration
        From :func:`calibrate`.
    out_path : str or Path
        Target ``.csv``; its folder must exist. Use it with ``Options(reference=str(path))`` or
        ``--reference``.

    Returns
    -------
    Path
        The written file.

    Raises
    ------
    OutputError
        The path does not end in ``.csv``, is a folder, or its folder does not exist.
    """

    path = Path(out_path)
    if path.suffix.lower() != ".csv":
        raise OutputError(
            f"out_path={str(path)!r} must end in .csv (a reference set is a CSV file)"
        )
    if path.is_dir():
        raise OutputError(f"out_path={str(path)!r} is a folder; give a file name ending in .csv")
    table = escape_formula_text(calibration.rows[list(SET_COLUMNS)])
    with atomic_path(path) as tmp:
        table.to_csv(tmp, index=False, encoding="utf-8", float_format="%.10g", lineterminator="\n")
    return path
