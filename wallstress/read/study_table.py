"""A study list as read: :class:`StudyTable` (raw cells under the user's headers, and what was noticed)."""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path

import pandas as pd

from wallstress import findings as fnd


@dataclass
class StudyTable:
    """A study list as read.

    Attributes
    ----------
    table : DataFrame
        Raw cells under the user's own headers (made unique), one row per study, file order, as
        the file holds them: a CSV's cells as their text (``000123`` stays ``000123``), a
        workbook's as its cell types (numbers, text, dates, booleans); NaN for empty cells.
        Written back unchanged.
    path : Path
    format : str
        One of ``FORMATS`` (the contents decide, not the file name).
    sheet : str or None
        Sheet read from a workbook.
    header_row : int
        0-based row of the header in the file (the sheet, for workbooks).
    sha256 : str
        Hex digest of the input file's bytes.
    encoding, delimiter, decimal : str or None
        CSV only: encoding used (``utf-8``, ``utf-8-sig``, ``utf-16``, ``cp1252``), field
        delimiter, decimal mark ("." or ",").
    findings : DataFrame
        Findings table; file-level findings have ``row == -1``; row findings use positions in
        ``table``.
    sheets : list of str
        All sheets of a workbook (empty for csv/parquet).
    first_data_row : int
        0-based row in the file of ``table``'s first row.
    numbers : dict
        Header -> float64 values, for the text columns whose every non-empty cell is a number
        (the decimal mark applied): the computation's own parsed copy, so the table keeps the text.
    """

    table: pd.DataFrame
    path: Path
    format: str
    sheet: str | None
    header_row: int
    sha256: str
    encoding: str | None = None
    delimiter: str | None = None
    decimal: str | None = None
    findings: pd.DataFrame = field(default_factory=fnd.empty)
    sheets: list = field(default_factory=list)
    first_data_row: int = 1
    numbers: dict = field(default_factory=dict)

    def handed_over(self) -> tuple[StudyTable, list[dict]]:
        """This table without its parsed numbers, and them in a one-item list, for a caller that
        writes no workbook (the numbers serve a workbook's number cells only): it passes
        ``numbers.pop()`` to the analysis, so that no frame but the analysis's holds them, and
        the analysis frees those it does not keep (a column a check blanked values of: ~8 MB
        at 10^6 rows)."""
        return replace(self, numbers={}), [self.numbers]
