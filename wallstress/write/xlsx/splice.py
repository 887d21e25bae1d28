r"""Add our sheets to a copy of the user's ``.xlsx`` without parsing or rewriting their parts.

Every zip member of the user's package is copied with its bytes unchanged (sheets, formulas, comments,
styles, defined names, drawings, charts, pivot tables, extensions...), except four small registries
that gain entries for our sheets: ``[Content_Types].xml`` (an ``Override`` per sheet), the workbook
part (a ``<sheet>`` per sheet in ``<sheets>``), its relationships (a ``Relationship`` per sheet) and
the styles part (a bold font, our number formats and cell formats appended at the END of ``fonts``,
``numFmts`` and ``cellXfs``, so every style index of the user's keeps its meaning). Those four are read
with defusedxml to learn names, ids and namespace prefixes, and edited by inserting text before the
closing tag: namespace declarations, ``mc:Ignorable`` prefixes and everything else stay byte for byte.
Each edit is checked by parsing the result again.

Our sheets are written by a streaming XML writer built on pyarrow string kernels (no Python loop over
cells for numeric, boolean, date or text columns):

- numbers: ``<v>`` with the shortest text that reads back to the same float64 (full precision);
  integers beyond 2**53 (which a spreadsheet would round) are written as text;
- text: ALWAYS an inline string (``t="inlineStr"``), XML-escaped, ``xml:space="preserve"``; a
  literal ``_xHHHH_`` is escaped as ``_x005F_xHHHH_`` (spreadsheet programs read ``_xHHHH_`` as a
  character code); control characters XML cannot hold become U+FFFD (with a note); text that starts
  like a formula gets a ``quotePrefix`` cell format, so it stays text even when a user edits the cell.
  Nothing from the data can become a formula, an error value or a link;
- missing (NaN, None, NA, NaT) and infinite values: no cell (infinities with a note);
- booleans: ``t="b"``;
- naive dates/datetimes: serial numbers with a date format (``yyyy-mm-dd`` for a column that holds
  only midnights, else ``yyyy-mm-dd hh:mm:ss``), in the workbook's own date system (1900 or 1904), so
  they sort and filter as dates; a date before the system's first reliable day (1900-03-01, or
  1904-01-01) and any time-zone-aware value are written as ISO 8601 text;
- a header row (bold, optional units ``"name [unit]"``), frozen, with an auto-filter; column widths.

Excel's limits are kept: 1,048,576 rows and 16,384 columns per sheet (more raises
:class:`~wallstress.errors.OutputError`: write CSV or parquet instead), sheet names of at most 31
characters without ``[]:*?/\``, not ``History`` and not repeating a name of the workbook
(case-insensitive: a number is added), cell text of at most 32,767 characters (longer text is cut,
with a note). A package this module cannot splice safely (strict OOXML, an encrypted or non-zip file,
a missing or unusual registry) raises :class:`SpliceError`, so the caller can fall back to another
writer. Atomicity is the caller's: pass a temporary path in the target folder.

References
----------
ECMA-376 Office Open XML File Formats, 5th edition (2016), Part 1 (SpreadsheetML: sheet, cell,
inline string, styles; ST_Xstring ``_xHHHH_`` escapes, 22.9.2.19) and Part 2 (Open Packaging
Conventions: content types, relationships). Excel's sheet and cell limits: Microsoft, "Excel
specifications and limits" (common practice, no source read for this module).
"""

from __future__ import annotations

import zipfile
from collections.abc import Mapping, Sequence
from datetime import datetime
from pathlib import Path

import pandas as pd

from wallstress.errors import OutputError
from wallstress.write.xlsx.registries import SpliceError, _minimal_package, _Registries
from wallstress.write.xlsx.sheet_xml import (
    _COMPRESSLEVEL,
    _ILLEGAL_XML_PY,
    _INVALID_SHEET_CHARS,
    _RESERVED_SHEET_NAMES,
    EXCEL_MAX_COLUMNS,
    EXCEL_MAX_ROWS,
    EXCEL_MAX_SHEET_NAME,
    SheetSpec,
    _plan_sheet,
    _write_sheet,
)


class SplicedSheets(list):
    """The sheet names used, in order (the object is a ``list[str]``), plus notes for the user.

    Attributes
    ----------
    notes : list of str
        Plain sentences: text cut to the cell limit, control characters replaced, infinite values
        left empty, dates written as text...
    style_ids : dict of str -> int
        The ``cellXfs`` indices this write appended, by role (``header``, ``text_quoted``) or format
        code; the user's indices below them are unchanged.
    """

    def __init__(self, names=()) -> None:
        super().__init__(names)
        self.notes: list[str] = []
        self.style_ids: dict[str, int] = {}


# ------------------------------------------------------------------------------------------------
# public entry points


def splice_sheets(
    source_xlsx,
    target,
    sheets: Mapping[str, pd.DataFrame | SheetSpec],
    *,
    header_units: Mapping[str, str] | None = None,
    number_formats: Mapping[str, str] | None = None,
) -> SplicedSheets:
    """Write a copy of ``source_xlsx`` to ``target`` with ``sheets`` added after the user's sheets.

    Parameters
    ----------
    source_xlsx : path-like
        The user's workbook (``.xlsx``, transitional OOXML). It is only read.
    target : path-like
        The file to write (a temporary path in the target folder; the caller renames it).
    sheets : dict of str -> DataFrame or SheetSpec
        Our tables, in order; keys are the wanted sheet names (made valid and unique).
    header_units, number_formats : dict of str -> str, optional
        Column name -> unit for the header (``"name [unit]"``) and column name -> display format,
        for every table given as a plain DataFrame.

    Returns
    -------
    SplicedSheets
        The sheet names used (``list[str]``), with ``notes`` and ``style_ids``.

    Raises
    ------
    SpliceError
        The package cannot be spliced safely (strict OOXML, encrypted or not a zip, odd registries);
        nothing useful was written and the caller should use another writer.
    OutputError
        A table is bigger than an xlsx sheet holds, or ``target`` is ``source_xlsx``.
    """
    source_xlsx, target = Path(source_xlsx), Path(target)
    if target.exists() and source_xlsx.exists() and target.samefile(source_xlsx):
        raise OutputError(
            f"target {str(target)!r} is the source workbook itself; pass a temporary path beside it"
        )
    specs = _specs(sheets, header_units, number_formats)
    try:
        zin = zipfile.ZipFile(source_xlsx)
    except (zipfile.BadZipFile, OSError) as exc:
        raise SpliceError(
            f"{source_xlsx.name!r} is not a readable xlsx zip package ({exc}); encrypted workbooks "
            "are not zip files: save an unencrypted copy, or write to a new workbook"
        ) from exc
    with zin:
        members = {i.filename: zin.read(i) for i in _check_members(zin, source_xlsx.name)}
        return _write_package(zin.infolist(), members, zin.comment, target, specs)


def new_workbook(
    target,
    sheets: Mapping[str, pd.DataFrame | SheetSpec],
    *,
    header_units: Mapping[str, str] | None = None,
    number_formats: Mapping[str, str] | None = None,
) -> SplicedSheets:
    """Write a new workbook holding only ``sheets`` (same sheet writer as :func:`splice_sheets`).

    Parameters
    ----------
    target : path-like
        The file to write (a temporary path in the target folder; the caller renames it).
    sheets, header_units, number_formats
        As in :func:`splice_sheets`.

    Returns
    -------
    SplicedSheets
    """
    specs = _specs(sheets, header_units, number_formats)
    members = _minimal_package()
    infos = [zipfile.ZipInfo(name, date_time=_now()) for name in members]
    for info in infos:
        info.compress_type = zipfile.ZIP_DEFLATED
    return _write_package(infos, members, b"", Path(target), specs)


def valid_sheet_name(wanted: str, used: Sequence[str]) -> str:
    """A legal sheet name close to ``wanted`` that is not in ``used`` (case-insensitive).

    >>> valid_sheet_name("results: [all]", ["Results_ _all_"])
    'results_ _all_ 2'
    >>> valid_sheet_name("History", [])
    'History 2'
    """
    base = _INVALID_SHEET_CHARS.sub("_", _ILLEGAL_XML_PY.sub("_", str(wanted))).strip()
    base = base.strip("'").strip() or "sheet"
    base = base[:EXCEL_MAX_SHEET_NAME]
    taken = {u.casefold() for u in used} | set(_RESERVED_SHEET_NAMES)
    name, n = base, 2
    while name.casefold() in taken:
        tail = f" {n}"
        name = base[: EXCEL_MAX_SHEET_NAME - len(tail)].rstrip() + tail
        n += 1
    return name


# ------------------------------------------------------------------------------------------------
# the package


def _specs(sheets, header_units, number_formats) -> list[tuple[str, SheetSpec]]:
    if not isinstance(sheets, Mapping) or not sheets:
        raise OutputError("sheets must be a non-empty dict of sheet name -> DataFrame or SheetSpec")
    out = []
    for name, value in sheets.items():
        if isinstance(value, pd.DataFrame):
            value = SheetSpec(value, header_units, number_formats)
        if not isinstance(value, SheetSpec) or not (
            isinstance(value.frame, pd.DataFrame) or callable(value.frame)
        ):
            raise OutputError(
                f"sheets[{name!r}] is a {type(value).__name__}; pass a DataFrame or a SheetSpec"
            )
        if isinstance(value.frame, pd.DataFrame):
            _check_size(name, value.frame)
        out.append((str(name), value))
    return out


def _check_size(name: str, frame) -> None:
    if not isinstance(frame, pd.DataFrame):
        raise OutputError(
            f"the table for sheet {name!r} is a {type(frame).__name__}, not a DataFrame"
        )
    n_rows, n_cols = frame.shape
    if n_rows + 1 > EXCEL_MAX_ROWS or n_cols > EXCEL_MAX_COLUMNS:
        raise OutputError(
            f"the table for sheet {name!r} has {n_rows} rows and {n_cols} columns, more than an "
            f"xlsx sheet holds ({EXCEL_MAX_ROWS - 1} rows below the header, {EXCEL_MAX_COLUMNS} "
            "columns); write to a .csv or .parquet output instead"
        )


def _check_members(zin: zipfile.ZipFile, label: str) -> list[zipfile.ZipInfo]:
    infos = zin.infolist()
    names = [i.filename for i in infos]
    if len(set(names)) != len(names):
        raise SpliceError(f"{label!r} repeats a zip member name; it is not a valid xlsx package")
    for i in infos:
        if i.flag_bits & 0x1:
            raise SpliceError(f"{label!r} has encrypted zip members; save an unencrypted copy")
    for required in ("[Content_Types].xml", "_rels/.rels"):
        if required not in names:
            raise SpliceError(f"{label!r} has no {required}; it is not an OOXML package")
    return infos


def _write_package(infos, members, comment, target, specs) -> SplicedSheets:
    reg = _Registries(members)
    result = SplicedSheets()
    used = list(reg.sheet_names)
    names = []
    for wanted, _spec in specs:
        names.append(valid_sheet_name(wanted, used))
        used.append(names[-1])
    sheet_parts = reg.add_sheets(names)

    plans = []
    for name, (_, spec) in zip(names, specs, strict=True):
        if not isinstance(spec.frame, pd.DataFrame):  # a table built from the notes so far
            frame = spec.frame(list(result.notes))
            _check_size(name, frame)
            spec = SheetSpec(frame, spec.header_units, spec.number_formats, spec.widths)
        plans.append(_plan_sheet(spec, name, reg.date1904, result.notes))
    formats = sorted({f for p in plans for f in p.formats})
    style_ids = reg.add_styles(formats)
    result.style_ids.update(style_ids)
    edited = reg.edited()

    try:
        with zipfile.ZipFile(target, "w", zipfile.ZIP_DEFLATED, allowZip64=True) as zout:
            zout.comment = comment
            for info in infos:
                data = edited.get(info.filename, members.get(info.filename))
                zout.writestr(_copy_info(info), data)
            for part in edited:  # new parts (a styles part for a package that had none)
                if members.get(part) is None:
                    zout.writestr(_new_info(part), edited[part], compresslevel=6)
            for plan, part in zip(plans, sheet_parts, strict=True):
                with zout.open(_new_info(part), "w", force_zip64=True) as fh:
                    _write_sheet(fh, plan, style_ids)
    except BaseException:
        target.unlink(missing_ok=True)
        raise
    result.extend(names)
    return result


def _copy_info(info: zipfile.ZipInfo) -> zipfile.ZipInfo:
    out = zipfile.ZipInfo(info.filename, date_time=info.date_time)
    out.compress_type = info.compress_type
    out.external_attr = info.external_attr
    out.create_system = info.create_system
    out.comment = info.comment
    return out


def _new_info(name: str) -> zipfile.ZipInfo:
    info = zipfile.ZipInfo(name, date_time=_now())
    info.compress_type = zipfile.ZIP_DEFLATED
    info._compresslevel = _COMPRESSLEVEL  # honoured by ZipFile.open(..., "w") in CPython 3.8+
    info.external_attr = 0o600 << 16
    return info


def _now() -> tuple:
    return max(datetime.now(), datetime(1980, 1, 1)).timetuple()[:6]
