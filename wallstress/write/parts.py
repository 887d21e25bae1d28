"""What a write is given and what it gives back: the tables to write and the :class:`WriteReport`."""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from wallstress import findings as _findings


class WriteReport(list):
    """The files written (the object is a ``list[Path]``) plus what the caller should know.

    Attributes
    ----------
    notes : list of str
        Plain sentences for the user (e.g. a separate workbook was written instead of a copy).
    formula_like : DataFrame
        Findings (code ``formula_like_text``) for text cells of the results that a spreadsheet program
        could run as formulas when it opens a CSV output; empty for xlsx and parquet outputs.
    backup : Path or None
        The verified backup of the user's workbook (``in_place`` only).
    """

    def __init__(self, paths=()) -> None:
        super().__init__(Path(p) for p in paths)
        self.notes: list[str] = []
        self.formula_like: pd.DataFrame = _findings.empty()
        self.backup: Path | None = None

    @property
    def paths(self) -> list[Path]:
        return list(self)

    def __repr__(self) -> str:
        return f"WriteReport(paths={list(self)!r}, notes={self.notes!r}, backup={self.backup!r})"


@dataclass
class _Part:
    """One table to write: sheet name, sidecar key (CSV/parquet) and which columns get units."""

    sheet: str
    key: str  # "" for the main file
    frame: pd.DataFrame
    unit_columns: str = "all"  # "all", "outputs", "labels" (readable headers) or "none"
    marks: tuple = ()  # conditional marks of the sheet (xlsx): (range, formula, kind)


def _sidecar(out: Path, key: str, suffix: str | None = None) -> Path:
    return out.with_name(f"{out.stem}.{key}{suffix or out.suffix}")
