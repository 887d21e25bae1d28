"""Add our sheets to a copy of the user's ``.xlsx`` without parsing or rewriting their parts.

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
characters without ``[]:*?/\\``, not ``History`` and not repeating a name of the workbook
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

import re
import zipfile
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path, PurePosixPath
from xml.sax.saxutils import escape as _xml_escape
from xml.sax.saxutils import quoteattr as _quoteattr

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc
from defusedxml import ElementTree as SafeET

from wallstress.errors import OutputError
from wallstress.read.sheet_bounds import col_letters
from wallstress.write.fast_csv import _missing, categorical_as_text

EXCEL_MAX_ROWS = 1_048_576
EXCEL_MAX_COLUMNS = 16_384
EXCEL_MAX_TEXT = 32_767
EXCEL_MAX_SHEET_NAME = 31
EXACT_INT_LIMIT = 2**53  # larger integers are not exactly representable as a spreadsheet number

DATE_FORMAT = "yyyy-mm-dd"
DATETIME_FORMAT = "yyyy-mm-dd hh:mm:ss"

MAIN_NS = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
REL_NS = "http://schemas.openxmlformats.org/officeDocument/2006/relationships"
PKG_REL_NS = "http://schemas.openxmlformats.org/package/2006/relationships"
CT_NS = "http://schemas.openxmlformats.org/package/2006/content-types"
STRICT_NS = ("http://purl.oclc.org/ooxml/",)
REL_OFFICE_DOCUMENT = REL_NS + "/officeDocument"
REL_WORKSHEET = REL_NS + "/worksheet"
REL_STYLES = REL_NS + "/styles"
CT_WORKSHEET = "application/vnd.openxmlformats-officedocument.spreadsheetml.worksheet+xml"
CT_STYLES = "application/vnd.openxmlformats-officedocument.spreadsheetml.styles+xml"
CT_WORKBOOK = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet.main+xml"

# Built-in number formats (ECMA-376 Part 1, 18.8.30): used by id instead of adding a custom one.
_BUILTIN_FORMATS: dict[str, int] = {
    "General": 0,
    "0": 1,
    "0.00": 2,
    "#,##0": 3,
    "#,##0.00": 4,
    "0%": 9,
    "0.00%": 10,
}
_INVALID_SHEET_CHARS = re.compile(r"[\[\]\*\?/\\:]")
_RESERVED_SHEET_NAMES = ("history",)  # Excel keeps "History" for change tracking
_ILLEGAL_XML_RE2 = r"[\x00-\x08\x0B\x0C\x0E-\x1F\x{FFFE}\x{FFFF}]"
_ILLEGAL_XML_PY = re.compile("[\x00-\x08\x0b\x0c\x0e-\x1f\ufffe\uffff\ud800-\udfff]")
_XSTRING_ESCAPE = r"_(x[0-9A-Fa-f]{4}_)"
_FORMULA_START = r"^[=+\-@\t\r]"  # as wallstress.safety.FORMULA_PREFIXES
_CHUNK_ROWS = 16_384
_COMPRESSLEVEL = 1  # our sheets: fast deflate (about 1.3x the size of level 6, 4x faster)
_EPOCHS = {False: np.datetime64("1899-12-30", "us"), True: np.datetime64("1904-01-01", "us")}
_FIRST_DAY = {False: np.datetime64("1900-03-01", "us"), True: np.datetime64("1904-01-01", "us")}


class SpliceError(OutputError):
    """The workbook package cannot be spliced safely; the caller should use another writer."""


@dataclass(frozen=True)
class SheetSpec:
    """One table with options of its own (else the call's ``header_units``/``number_formats``).

    Parameters
    ----------
    frame : DataFrame or callable
        The table; column names become the header row. A callable ``f(notes) -> DataFrame`` is
        called once the sheets before it are planned, with the notes so far (for a methods sheet
        that must list them: every note is known before any cell is written).
    header_units : dict of str -> str, optional
        Column name -> unit; the header becomes ``"name [unit]"`` (names holding ``[`` are kept).
    number_formats : dict of str -> str, optional
        Column name -> display format code (e.g. ``"0.0"``), applied to numeric columns only.
    widths : sequence of float or None, optional
        Column widths [characters] by position; None (or a short sequence) sizes the rest by content.
    """

    frame: pd.DataFrame | Callable[[list[str]], pd.DataFrame]
    header_units: Mapping[str, str] | None = None
    number_formats: Mapping[str, str] | None = None
    widths: Sequence[float | None] | None = None


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


def _parse(data: bytes, part: str):
    if data is None:
        raise SpliceError(f"the package part {part!r} is missing")
    head = data[:200].lstrip(b"\xef\xbb\xbf")
    if data[:2] in (b"\xff\xfe", b"\xfe\xff"):
        raise SpliceError(f"{part!r} is UTF-16 XML; this writer edits UTF-8 parts only")
    m = re.match(rb"<\?xml[^>]*encoding=[\"']([^\"']+)", head)
    if m and m.group(1).lower().replace(b"_", b"-") not in (b"utf-8", b"utf8"):
        raise SpliceError(f"{part!r} is encoded as {m.group(1).decode()!r}, not UTF-8")
    try:
        return SafeET.fromstring(data)
    except Exception as exc:  # ParseError, or a DTD/entity defusedxml refuses
        raise SpliceError(f"cannot read the package part {part!r} ({exc})") from exc


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


def _ns(tag: str) -> str:
    return tag[1:].split("}", 1)[0] if tag.startswith("{") else ""


class _Registries:
    """The four registries: what they hold, and text edits that keep everything else."""

    def __init__(self, members: dict[str, bytes]) -> None:
        self.members = members
        self.names_lower = {n.lower() for n in members}
        self.text: dict[str, str] = {}
        self.expect: dict[str, dict[str, int]] = {}

        rels = _parse(members.get("_rels/.rels"), "_rels/.rels")
        targets = [
            r.get("Target", "")
            for r in rels
            if _local(r.tag) == "Relationship" and r.get("Type") == REL_OFFICE_DOCUMENT
        ]
        if not targets:
            strict = any(str(r.get("Type", "")).startswith(STRICT_NS) for r in rels)
            raise SpliceError(
                "the workbook is in strict Office Open XML, which this writer does not edit; save it "
                "as a standard .xlsx"
                if strict
                else "the package names no workbook part (_rels/.rels); it is not an xlsx workbook"
            )
        self.wb_part = targets[0].lstrip("/")
        parent = str(PurePosixPath(self.wb_part).parent)
        self.wb_dir = "" if parent == "." else parent
        wb_name = PurePosixPath(self.wb_part).name
        self.wb_rels_part = f"{self.wb_dir}/_rels/{wb_name}.rels".lstrip("/")

        wb = _parse(members.get(self.wb_part), self.wb_part)
        if _ns(wb.tag) != MAIN_NS:
            raise SpliceError(
                f"the workbook part uses the namespace {_ns(wb.tag)!r} (strict OOXML or another "
                "format); save it as a standard .xlsx"
            )
        sheets = wb.find(f"{{{MAIN_NS}}}sheets")
        if sheets is None:
            raise SpliceError("the workbook part has no <sheets>; it is not a usable workbook")
        self.sheet_names = [s.get("name", "") for s in sheets]
        self.sheet_ids = [int(s.get("sheetId", "0") or 0) for s in sheets]
        pr = wb.find(f"{{{MAIN_NS}}}workbookPr")
        self.date1904 = pr is not None and pr.get("date1904", "0").lower() in ("1", "true")
        self.n_sheets = len(self.sheet_names)

        wrels = _parse(members.get(self.wb_rels_part), self.wb_rels_part)
        self.rel_ids = [r.get("Id", "") for r in wrels]
        styles = [r.get("Target", "") for r in wrels if r.get("Type") == REL_STYLES]
        self.n_rels = len(self.rel_ids)
        self.styles_part = self._resolve(styles[0]) if styles else None

        ct = _parse(members.get("[Content_Types].xml"), "[Content_Types].xml")
        self.overrides = {o.get("PartName", "").lower() for o in ct if _local(o.tag) == "Override"}
        wb_type = [
            o.get("ContentType", "")
            for o in ct
            if o.get("PartName", "").lower() == "/" + self.wb_part.lower()
        ]
        if any("macroenabled" in t.lower() for t in wb_type) or any(
            n.lower().endswith("vbaproject.bin") for n in members
        ):
            raise SpliceError(
                "the workbook is macro-enabled; an .xlsx copy cannot carry its macros, so write our "
                "sheets to a separate workbook"
            )
        self.n_ct = len(ct)

    def _resolve(self, target: str) -> str:
        if target.startswith("/"):
            return target.lstrip("/")
        parts: list[str] = [p for p in self.wb_dir.split("/") if p]
        for p in target.split("/"):
            if p == "..":
                parts = parts[:-1]
            elif p not in ("", "."):
                parts.append(p)
        return "/".join(parts)

    def _get(self, part: str) -> str:
        if part not in self.text:
            self.text[part] = self.members[part].decode("utf-8-sig")
        return self.text[part]

    def _new_rel_id(self) -> str:
        taken = set(self.rel_ids)
        n = 1 + max([int(m.group(1)) for i in taken if (m := re.fullmatch(r"rId(\d+)", i))] + [0])
        while f"rId{n}" in taken:
            n += 1
        self.rel_ids.append(f"rId{n}")
        return f"rId{n}"

    def _new_part(self, stem: str) -> str:
        folder = f"{self.wb_dir}/worksheets" if stem == "sheet" else self.wb_dir
        n = 1
        while True:
            name = f"{folder}/{stem}{n}.xml".lstrip("/")
            if name.lower() not in self.names_lower and "/" + name.lower() not in self.overrides:
                self.names_lower.add(name.lower())
                return name
            n += 1

    def _bump(self, part: str, key: str, by: int) -> None:
        self.expect.setdefault(part, {})
        self.expect[part][key] = self.expect[part].get(key, 0) + by

    def add_sheets(self, names: list[str]) -> list[str]:
        wb_text = self._get(self.wb_part)
        # the relationships prefix is declared on each new element: some writers bind it only on
        # their own <sheet> elements, so a workbook-level binding cannot be assumed
        r_attr, r_decl = "r:id", f' xmlns:r="{REL_NS}"'
        p = _element_prefix(wb_text, "sheets")
        next_id = max(self.sheet_ids + [0]) + 1
        parts, sheet_xml, rel_xml, ct_xml = [], [], [], []
        for name in names:
            part = self._new_part("sheet")
            rid = self._new_rel_id()
            sheet_xml.append(
                f'<{p}sheet{r_decl} name={_quoteattr(name)} sheetId="{next_id}" {r_attr}="{rid}"/>'
            )
            next_id += 1
            target = part[len(self.wb_dir) + 1 :] if self.wb_dir else part
            rel_xml.append(self._rel(rid, REL_WORKSHEET, target))
            ct_xml.append(self._override(part, CT_WORKSHEET))
            parts.append(part)
        self.text[self.wb_part] = _insert_children(wb_text, "sheets", "".join(sheet_xml))
        self._bump(self.wb_part, "sheets", len(names))
        self._add_rels("".join(rel_xml), len(names))
        self._add_overrides("".join(ct_xml), len(names))
        return parts

    def _rel(self, rid: str, rel_type: str, target: str) -> str:
        p = _element_prefix(self._get(self.wb_rels_part), "Relationships")
        return f'<{p}Relationship Id="{rid}" Type="{rel_type}" Target={_quoteattr(target)}/>'

    def _override(self, part: str, ctype: str) -> str:
        p = _element_prefix(self._get("[Content_Types].xml"), "Types")
        return f'<{p}Override PartName={_quoteattr("/" + part)} ContentType="{ctype}"/>'

    def _add_rels(self, xml: str, n: int) -> None:
        text = self._get(self.wb_rels_part)
        self.text[self.wb_rels_part] = _insert_children(text, "Relationships", xml)
        self._bump(self.wb_rels_part, "", n)

    def _add_overrides(self, xml: str, n: int) -> None:
        text = self._get("[Content_Types].xml")
        self.text["[Content_Types].xml"] = _insert_children(text, "Types", xml)
        self._bump("[Content_Types].xml", "", n)

    def add_styles(self, formats: list[str]) -> dict[str, int]:
        if self.styles_part is None:  # a package without a styles part: give it ours
            self.styles_part = self._new_part("styles")
            self.members[self.styles_part] = None
            self.text[self.styles_part] = _MINIMAL_STYLES
            target = self.styles_part[len(self.wb_dir) + 1 :] if self.wb_dir else self.styles_part
            self._add_rels(self._rel(self._new_rel_id(), REL_STYLES, target), 1)
            self._add_overrides(self._override(self.styles_part, CT_STYLES), 1)
        part = self.styles_part
        if part not in self.members:
            raise SpliceError(f"the styles part {part!r} named by the workbook is missing")
        root = _parse(self.text[part].encode() if part in self.text else self.members[part], part)
        if _ns(root.tag) != MAIN_NS:
            raise SpliceError(f"the styles part uses the namespace {_ns(root.tag)!r}")
        found = {_local(c.tag): c for c in root}
        for needed in ("fonts", "cellXfs"):
            if needed not in found or not len(found[needed]):
                raise SpliceError(f"the styles part has no usable <{needed}>; cannot add formats")
        text = self._get(part)
        p = _element_prefix(text, "styleSheet")
        font_id = len(found["fonts"])
        xf_base = len(found["cellXfs"])
        has_style_xf = "cellStyleXfs" in found and len(found["cellStyleXfs"])
        xf_id = ' xfId="0"' if has_style_xf else ""

        # numFmts: built-ins by id, others as new custom ids after the largest in use
        existing = [int(e.get("numFmtId", "0")) for e in found.get("numFmts", [])]
        next_fmt = max(existing + [163]) + 1
        fmt_ids, fmt_xml = {}, []
        for code in formats:
            if code in _BUILTIN_FORMATS:
                fmt_ids[code] = _BUILTIN_FORMATS[code]
            else:
                fmt_ids[code] = next_fmt
                fmt_xml.append(f'<{p}numFmt numFmtId="{next_fmt}" formatCode={_quoteattr(code)}/>')
                next_fmt += 1
        if fmt_xml:
            if "numFmts" in found:
                text = _insert_children(text, "numFmts", "".join(fmt_xml), len(fmt_xml))
            else:
                text = _insert_first_child(
                    text,
                    "styleSheet",
                    f'<{p}numFmts count="{len(fmt_xml)}">{"".join(fmt_xml)}</{p}numFmts>',
                )
            self._bump(part, "numFmts", len(fmt_xml))

        text = _insert_children(text, "fonts", _bold_font(found["fonts"][0], p), 1)
        self._bump(part, "fonts", 1)
        xfs = [
            f'<{p}xf numFmtId="0" fontId="{font_id}" fillId="0" borderId="0"{xf_id} applyFont="1"/>',
            f'<{p}xf numFmtId="0" fontId="0" fillId="0" borderId="0"{xf_id} quotePrefix="1"/>',
        ]
        ids = {"header": xf_base, "text_quoted": xf_base + 1}
        for code in formats:
            ids[code] = xf_base + len(xfs)
            xfs.append(
                f'<{p}xf numFmtId="{fmt_ids[code]}" fontId="0" fillId="0" borderId="0"{xf_id} '
                'applyNumberFormat="1"/>'
            )
        text = _insert_children(text, "cellXfs", "".join(xfs), len(xfs))
        self._bump(part, "cellXfs", len(xfs))
        self.text[part] = text
        return ids

    def edited(self) -> dict[str, bytes]:
        """The edited parts as UTF-8 bytes, each checked by parsing it and counting its entries."""
        out = {}
        for part, text in self.text.items():
            data = text.encode("utf-8")
            root = _parse(data, part)
            original = self.members.get(part)
            if original is not None:
                old = _parse(original, part)
                for key, added in self.expect.get(part, {}).items():
                    now = len(root) if key == "" else len(_child(root, key))
                    was = len(old) if key == "" else len(_child(old, key))
                    if now != was + added:
                        raise SpliceError(
                            f"editing {part!r} did not give the expected entries; not spliced"
                        )
            out[part] = data
        return out


def _child(root, local: str):
    for c in root:
        if _local(c.tag) == local:
            return c
    return []


_OPEN_TAG = r"<(?P<prefix>(?:[\w.-]+:)?){local}(?=[\s/>])(?P<attrs>[^>]*?)(?P<empty>/?)>"


def _element_prefix(text: str, local: str) -> str:
    m = re.search(_OPEN_TAG.format(local=re.escape(local)), text)
    if m is None:
        raise SpliceError(f"no <{local}> element found where expected")
    return m.group("prefix")


def _insert_children(text: str, local: str, xml: str, n_new: int = 0) -> str:
    """``xml`` appended as the last children of the first ``<local>`` element.

    A ``count`` attribute on the element, when there is one, grows by ``n_new``.
    """
    m = re.search(_OPEN_TAG.format(local=re.escape(local)), text)
    if m is None:
        raise SpliceError(f"no <{local}> element found where expected")
    prefix, attrs = m.group("prefix"), m.group("attrs")
    if n_new:
        attrs = _bump_count(attrs, n_new)
    if m.group("empty"):
        new_open = f"<{prefix}{local}{attrs}>{xml}</{prefix}{local}>"
        return text[: m.start()] + new_open + text[m.end() :]
    close = re.compile(rf"</{re.escape(prefix)}{re.escape(local)}\s*>")
    c = close.search(text, m.end())
    if c is None:
        raise SpliceError(f"<{local}> is not closed")
    return (
        text[: m.start()]
        + f"<{prefix}{local}{attrs}>"
        + text[m.end() : c.start()]
        + xml
        + text[c.start() :]
    )


def _bump_count(attrs: str, n: int) -> str:
    m = re.search(r'(\scount\s*=\s*["\'])(\d+)(["\'])', attrs)
    if m is None:
        return attrs
    return attrs[: m.start()] + f"{m.group(1)}{int(m.group(2)) + n}{m.group(3)}" + attrs[m.end() :]


def _insert_first_child(text: str, local: str, xml: str) -> str:
    m = re.search(_OPEN_TAG.format(local=re.escape(local)), text)
    if m is None or m.group("empty"):
        raise SpliceError(f"no <{local}> element with content found")
    return text[: m.end()] + xml + text[m.end() :]


def _bold_font(font0, p: str) -> str:
    """The workbook's default font (its size, colour, name...) with bold added."""
    parts = [f"<{p}b/>"]
    for child in font0:
        local = _local(child.tag)
        if local in ("b", "extLst") or _ns(child.tag) != MAIN_NS:
            continue
        attrs = "".join(f" {k}={_quoteattr(v)}" for k, v in child.attrib.items() if "}" not in k)
        parts.append(f"<{p}{local}{attrs}/>")
    return f"<{p}font>{''.join(parts)}</{p}font>"


_MINIMAL_STYLES = (
    '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    f'<styleSheet xmlns="{MAIN_NS}">'
    '<fonts count="1"><font><sz val="11"/><name val="Calibri"/><family val="2"/></font></fonts>'
    '<fills count="2"><fill><patternFill patternType="none"/></fill>'
    '<fill><patternFill patternType="gray125"/></fill></fills>'
    '<borders count="1"><border><left/><right/><top/><bottom/><diagonal/></border></borders>'
    '<cellStyleXfs count="1"><xf numFmtId="0" fontId="0" fillId="0" borderId="0"/></cellStyleXfs>'
    '<cellXfs count="1"><xf numFmtId="0" fontId="0" fillId="0" borderId="0" xfId="0"/></cellXfs>'
    '<cellStyles count="1"><cellStyle name="Normal" xfId="0" builtinId="0"/></cellStyles>'
    "</styleSheet>"
)


def _minimal_package() -> dict[str, bytes]:
    decl = '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n'
    return {
        "[Content_Types].xml": (
            f'{decl}<Types xmlns="{CT_NS}">'
            '<Default Extension="rels" ContentType="application/vnd.openxmlformats-package.'
            'relationships+xml"/><Default Extension="xml" ContentType="application/xml"/>'
            f'<Override PartName="/xl/workbook.xml" ContentType="{CT_WORKBOOK}"/>'
            f'<Override PartName="/xl/styles.xml" ContentType="{CT_STYLES}"/></Types>'
        ).encode(),
        "_rels/.rels": (
            f'{decl}<Relationships xmlns="{PKG_REL_NS}">'
            f'<Relationship Id="rId1" Type="{REL_OFFICE_DOCUMENT}" Target="xl/workbook.xml"/>'
            "</Relationships>"
        ).encode(),
        "xl/workbook.xml": (
            f'{decl}<workbook xmlns="{MAIN_NS}" xmlns:r="{REL_NS}">'
            '<bookViews><workbookView activeTab="0"/></bookViews><sheets></sheets></workbook>'
        ).encode(),
        "xl/_rels/workbook.xml.rels": (
            f'{decl}<Relationships xmlns="{PKG_REL_NS}">'
            f'<Relationship Id="rId1" Type="{REL_STYLES}" Target="styles.xml"/></Relationships>'
        ).encode(),
        "xl/styles.xml": _MINIMAL_STYLES.encode(),
    }


# ------------------------------------------------------------------------------------------------
# the streaming sheet writer
#
# Every column becomes, chunk by chunk, two arrays: a kind per cell (below) and the cell's value as
# text (pyarrow strings). A cell is then '<c r="' + column letters + row number + PREFIX[kind] +
# value + SUFFIX[kind], and a row the join of its cells: pyarrow kernels, no Python loop over cells.

_EMPTY, _NUMBER, _BOOL, _TEXT, _DATE, _DATETIME, _TEXT_QUOTED = range(7)
_T_OPEN = '<is><t xml:space="preserve">'
_T_CLOSE = "</t></is></c>"


@dataclass
class _Column:
    header: str
    kind: str  # "float", "int", "bool", "date", "text", "mixed", "empty"
    values: object  # numpy array (float/int/bool/date serials) or pyarrow array (text, mixed)
    kinds: np.ndarray | None  # per-cell kind when fixed at planning (int, date, mixed)
    number_format: str | None
    date_format: str | None
    width: float


@dataclass
class _Plan:
    n_rows: int
    columns: list[_Column]

    @property
    def formats(self) -> set[str]:
        out = {f for c in self.columns for f in (c.number_format, c.date_format) if f}
        if any(c.kind == "mixed" and c.date_format for c in self.columns):
            out.add(DATE_FORMAT)  # a mixed column may hold dates and datetimes
        return out


def _plan_sheet(spec: SheetSpec, sheet: str, date1904: bool, notes: list[str]) -> _Plan:
    frame = spec.frame
    units = dict(spec.header_units or {})
    formats = dict(spec.number_formats or {})
    widths = list(spec.widths or [])
    columns = []
    for j in range(frame.shape[1]):
        name = str(frame.columns[j])
        header = name if "[" in name or not units.get(name) else f"{name} [{units[name]}]"
        header = _clean_texts([header], notes, sheet, "header")[0]
        col = _prepare(frame.iloc[:, j], header, sheet, date1904, notes)
        if col.kind in ("float", "int", "mixed") and formats.get(name):
            col.number_format = formats[name]
        wanted = widths[j] if j < len(widths) else None
        col.width = float(wanted) if wanted else min(60.0, max(8.0, len(header) + 2, col.width + 2))
        columns.append(col)
    return _Plan(len(frame), columns)


def _prepare(col: pd.Series, header: str, sheet: str, date1904: bool, notes) -> _Column:
    """One column as arrays ready for chunked encoding (type decisions made once per column)."""
    dtype = col.dtype
    where = f"sheet {sheet!r}, column {header!r}"
    if isinstance(dtype, pd.CategoricalDtype):
        text = categorical_as_text(col)
        if text is not None:
            return _text_column(text, header, where, notes)
        col = col.astype(object)
        dtype = col.dtype
    if pd.api.types.is_bool_dtype(dtype):
        mask = col.isna().to_numpy()
        return _Column(
            header, "bool", col.to_numpy(dtype=bool, na_value=False), mask, None, None, 5
        )
    if pd.api.types.is_float_dtype(dtype):
        arr = col.to_numpy(dtype="float64", na_value=np.nan)
        _note_infinite(arr, where, notes)
        return _Column(header, "float", arr, None, None, None, 12)
    if pd.api.types.is_integer_dtype(dtype):
        mask = col.isna().to_numpy()
        if dtype.kind == "u" or str(dtype).lower().startswith("uint"):
            values = col.to_numpy(dtype=object, na_value=None)
            return _mixed(values, header, where, date1904, notes)
        arr = col.to_numpy(dtype="int64", na_value=0)
        kinds = np.where(mask, _EMPTY, _NUMBER).astype("int8")
        big = (
            np.abs(arr) > EXACT_INT_LIMIT
        ) & ~mask  # np.abs(min int64) < 0 -> not caught; see below
        big |= (arr == np.iinfo("int64").min) & ~mask
        if big.any():
            kinds[big] = _TEXT
            notes.append(
                f"{where}: {int(big.sum())} integer(s) beyond 2**53 written as text (a spreadsheet "
                "number would round them)"
            )
        return _Column(header, "int", arr, kinds, None, None, 12)
    if isinstance(dtype, pd.DatetimeTZDtype):
        text = col.map(lambda v: v.isoformat(), na_action="ignore").astype(object)
        return _text_column(text.where(col.notna(), None).tolist(), header, where, notes)
    if pd.api.types.is_datetime64_any_dtype(dtype):
        stamps = col.to_numpy(dtype="datetime64[us]")
        return _dates(stamps, col.isna().to_numpy(), header, where, date1904, notes)
    if isinstance(dtype, pd.StringDtype):
        return _text_column(col, header, where, notes)
    values = col.to_numpy(dtype=object)
    inferred = pd.api.types.infer_dtype(values, skipna=True)
    if inferred == "string":
        return _text_column(values, header, where, notes)
    if inferred == "floating":
        arr = pd.to_numeric(pd.Series(values), errors="coerce").to_numpy(dtype="float64")
        _note_infinite(arr, where, notes)
        return _Column(header, "float", arr, None, None, None, 12)
    if inferred == "empty":
        return _Column(header, "empty", None, None, None, None, 0)
    return _mixed(values, header, where, date1904, notes)


def _note_infinite(arr: np.ndarray, where: str, notes) -> None:
    n_inf = int(np.isinf(arr).sum())
    if n_inf:
        notes.append(f"{where}: {n_inf} infinite value(s) written as empty cells")


def _dates(stamps, missing, header, where, date1904, notes) -> _Column:
    epoch, first = _EPOCHS[date1904], _FIRST_DAY[date1904]
    early = (stamps < first) & ~missing
    serial = (stamps - epoch).astype("int64") / 86_400_000_000.0
    kinds = np.where(missing, _EMPTY, _DATE).astype("int8")
    present = stamps[~missing]
    date_only = bool(len(present)) and bool(
        (present == present.astype("datetime64[D]").astype("datetime64[us]")).all()
    )
    if not date_only:
        kinds[kinds == _DATE] = _DATETIME
    values = pc.cast(pa.array(serial), pa.string())
    if early.any():
        iso = pd.Series(stamps[early]).map(lambda v: v.isoformat()).tolist()
        if date_only:
            iso = [t[:10] for t in iso]
        values = _put(values, np.flatnonzero(early), iso)
        kinds[early] = _TEXT
        notes.append(
            f"{where}: {int(early.sum())} date(s) before {str(first)[:10]} written as ISO text "
            "(the workbook's date system starts later)"
        )
    fmt = DATE_FORMAT if date_only else DATETIME_FORMAT
    return _Column(header, "date", values, kinds, None, fmt, 10 if date_only else 19)


def _put(values: pa.Array, positions: np.ndarray, texts: list[str]) -> pa.Array:
    py = values.to_pylist()
    for i, t in zip(positions.tolist(), texts, strict=True):
        py[i] = t
    return pa.array(py, type=pa.large_string())


def _text_column(values, header, where, notes) -> _Column:
    try:
        if isinstance(values, pa.Array):
            arr = values.cast(pa.large_string())
        else:
            arr = pa.array(values, type=pa.large_string(), from_pandas=True)
    except (pa.ArrowInvalid, pa.ArrowTypeError, UnicodeError):
        text = [None if _missing(v) else str(v) for v in values]
        arr = pa.array(_clean_texts(text, notes, where, "text"), type=pa.large_string())
    if isinstance(arr, pa.ChunkedArray):
        arr = arr.combine_chunks()
    arr = _limit_texts(arr, where, notes)
    longest = pc.max(pc.utf8_length(arr)).as_py() if len(arr) else 0
    return _Column(header, "text", arr, None, None, None, float(longest or 0))


def _limit_texts(arr: pa.Array, where: str, notes) -> pa.Array:
    """Control characters -> U+FFFD; text longer than a cell holds (UTF-16 units) cut, with notes."""
    if len(arr) and pc.any(pc.match_substring_regex(arr, _ILLEGAL_XML_RE2)).as_py():
        n = pc.sum(pc.match_substring_regex(arr, _ILLEGAL_XML_RE2)).as_py()
        arr = pc.replace_substring_regex(arr, _ILLEGAL_XML_RE2, "\ufffd")
        notes.append(
            f"{where}: control characters in {n} cell(s) replaced by U+FFFD (xlsx cannot store them)"
        )
    # a character is at most 2 UTF-16 units, so only text of more than half the limit can exceed it
    long = pc.greater(pc.utf8_length(arr), EXCEL_MAX_TEXT // 2).to_numpy(zero_copy_only=False)
    long = np.flatnonzero(np.nan_to_num(long.astype(float), nan=0.0) > 0)
    cut = []
    for i in long.tolist():
        text = arr[i].as_py()
        units = text.encode("utf-16-le")
        if len(units) // 2 > EXCEL_MAX_TEXT:
            cut.append((i, units[: 2 * EXCEL_MAX_TEXT].decode("utf-16-le", errors="ignore")))
    if cut:
        arr = _put(arr, np.array([i for i, _ in cut]), [t for _, t in cut])
        notes.append(
            f"{where}: {len(cut)} text cell(s) longer than {EXCEL_MAX_TEXT} characters (the xlsx "
            "cell limit) were cut to it; the full text is in the CSV/parquet outputs"
        )
    return arr


def _clean_texts(texts: list, notes, where: str, what: str) -> list:
    out, n = [], 0
    for t in texts:
        if isinstance(t, str) and _ILLEGAL_XML_PY.search(t):
            t = _ILLEGAL_XML_PY.sub("\ufffd", t)
            n += 1
        out.append(t)
    if n:
        notes.append(f"{where}: control characters in {n} {what} value(s) replaced by U+FFFD")
    return out


def _mixed(values, header, where, date1904, notes) -> _Column:
    """An object column of mixed values: each value by its own type (a Python pass, off the hot path)."""
    n = len(values)
    kinds = np.zeros(n, dtype="int8")
    texts: list = [None] * n
    epoch, first = _EPOCHS[date1904].astype(datetime), _FIRST_DAY[date1904].astype(datetime)
    n_inf = n_early = 0
    for i, v in enumerate(values):
        if _missing(v):
            continue
        if isinstance(v, (bool, np.bool_)):
            kinds[i], texts[i] = _BOOL, "1" if v else "0"
        elif isinstance(v, (int, np.integer)):
            if abs(int(v)) > EXACT_INT_LIMIT:
                kinds[i], texts[i] = _TEXT, str(int(v))
            else:
                kinds[i], texts[i] = _NUMBER, str(int(v))
        elif isinstance(v, (float, np.floating)):
            if np.isfinite(v):
                kinds[i], texts[i] = _NUMBER, repr(float(v))
            else:
                n_inf += 1
        elif isinstance(v, datetime) and v.tzinfo is None:
            dt = v.replace(tzinfo=None)
            if dt < first:
                kinds[i], texts[i], n_early = _TEXT, dt.isoformat(), n_early + 1
            else:
                kinds[i] = _DATETIME
                texts[i] = repr((dt - epoch).total_seconds() / 86400.0)
        elif isinstance(v, date) and not isinstance(v, datetime):
            if v < first.date():
                kinds[i], texts[i], n_early = _TEXT, v.isoformat(), n_early + 1
            else:
                kinds[i], texts[i] = _DATE, str((v - epoch.date()).days)
        elif isinstance(v, datetime):
            kinds[i], texts[i] = _TEXT, v.isoformat()
        else:
            kinds[i], texts[i] = _TEXT, str(v)
    if n_inf:
        notes.append(f"{where}: {n_inf} infinite value(s) written as empty cells")
    if n_early:
        notes.append(f"{where}: {n_early} date(s) before {str(first)[:10]} written as ISO text")
    arr = pa.array(_clean_texts(texts, notes, where, "text"), type=pa.large_string())
    arr = _limit_texts(arr, where, notes)
    has_date = bool((kinds == _DATE).any() or (kinds == _DATETIME).any())
    longest = pc.max(pc.utf8_length(arr)).as_py() if n else 0
    col = _Column(header, "mixed", arr, kinds, None, None, float(min(longest or 0, 60)))
    if has_date:
        col.date_format = DATETIME_FORMAT if (kinds == _DATETIME).any() else DATE_FORMAT
    return col


def _affixes(col: _Column, style_ids: dict[str, int]) -> tuple[pa.Array, pa.Array]:
    def s(code):
        return f' s="{style_ids[code]}"' if code else ""

    date_fmt = col.date_format
    prefix = [
        None,
        f'"{s(col.number_format)}><v>',
        '" t="b"><v>',
        f'" t="inlineStr">{_T_OPEN}',
        f'"{s(DATE_FORMAT if DATE_FORMAT in style_ids else date_fmt)}><v>',
        f'"{s(date_fmt)}><v>',
        f'" s="{style_ids["text_quoted"]}" t="inlineStr">{_T_OPEN}',
    ]
    if date_fmt == DATE_FORMAT:
        prefix[_DATETIME] = prefix[_DATE]
    suffix = [None, "</v></c>", "</v></c>", _T_CLOSE, "</v></c>", "</v></c>", _T_CLOSE]
    return pa.array(prefix, type=pa.large_string()), pa.array(suffix, type=pa.large_string())


def _chunk(col: _Column, a: int, b: int) -> tuple[np.ndarray, pa.Array | None]:
    """Kinds and value texts of rows ``a:b`` of one column."""
    n = b - a
    if col.kind == "empty":
        return np.zeros(n, dtype="int8"), None
    if col.kind == "float":
        arr = col.values[a:b]
        finite = np.isfinite(arr)
        kinds = np.where(finite, _NUMBER, _EMPTY).astype("int8")
        return kinds, pc.cast(pa.array(arr, mask=~finite), pa.large_string())
    if col.kind == "int":
        return col.kinds[a:b], pc.cast(pa.array(col.values[a:b]), pa.large_string())
    if col.kind == "bool":
        kinds = np.where(col.kinds[a:b], _EMPTY, _BOOL).astype("int8")
        return kinds, pa.array(np.where(col.values[a:b], "1", "0"), type=pa.large_string())
    if col.kind == "text":
        values = col.values.slice(a, n)
        present = pc.is_valid(values).to_numpy(zero_copy_only=False)
        kinds = np.where(present, _TEXT, _EMPTY).astype("int8")
        if n:
            quoted = pc.fill_null(pc.match_substring_regex(values, _FORMULA_START), False)
            kinds[quoted.to_numpy(zero_copy_only=False)] = _TEXT_QUOTED
        return kinds, values
    # date and mixed: kinds fixed at planning
    kinds = col.kinds[a:b].copy()
    values = col.values.slice(a, n)
    if n and col.kind == "mixed":
        quoted = pc.fill_null(pc.match_substring_regex(values, _FORMULA_START), False)
        kinds[quoted.to_numpy(zero_copy_only=False) & (kinds == _TEXT)] = _TEXT_QUOTED
    return kinds, values


def _escape(values: pa.Array) -> pa.Array:
    values = pc.replace_substring(values, "&", "&amp;")
    values = pc.replace_substring(values, "<", "&lt;")
    values = pc.replace_substring(values, ">", "&gt;")
    return pc.replace_substring_regex(values, _XSTRING_ESCAPE, r"_x005F_\1")


def _write_buffer(fh, arr: pa.Array) -> None:
    """Write the concatenation of a null-free string array's values (its data buffer, no copy)."""
    arr = arr.combine_chunks() if isinstance(arr, pa.ChunkedArray) else arr
    if not len(arr):
        return
    width = np.int64 if pa.types.is_large_string(arr.type) else np.int32
    offsets = np.frombuffer(arr.buffers()[1], dtype=width)[arr.offset : arr.offset + len(arr) + 1]
    fh.write(memoryview(arr.buffers()[2])[int(offsets[0]) : int(offsets[-1])])


def _write_sheet(fh, plan: _Plan, style_ids: dict[str, int]) -> None:
    cols = plan.columns
    n_cols, n_rows = len(cols), plan.n_rows
    last = f"{col_letters(n_cols - 1)}{n_rows + 1}" if n_cols else "A1"
    head = [
        '<?xml version="1.0" encoding="UTF-8" standalone="yes"?>\n',
        f'<worksheet xmlns="{MAIN_NS}" xmlns:r="{REL_NS}">',
        f'<dimension ref="A1:{last}"/>' if n_cols else '<dimension ref="A1"/>',
        '<sheetViews><sheetView workbookViewId="0">',
    ]
    if n_cols:
        head.append(
            '<pane ySplit="1" topLeftCell="A2" activePane="bottomLeft" state="frozen"/>'
            '<selection pane="bottomLeft" activeCell="A2" sqref="A2"/>'
        )
    head.append('</sheetView></sheetViews><sheetFormatPr defaultRowHeight="15"/>')
    if n_cols:
        head.append("<cols>")
        head.extend(
            f'<col min="{j + 1}" max="{j + 1}" width="{c.width:.6g}" customWidth="1"/>'
            for j, c in enumerate(cols)
        )
        head.append("</cols>")
    head.append("<sheetData>")
    if n_cols:
        head.append('<row r="1">')
        head.extend(
            f'<c r="{col_letters(j)}1" s="{style_ids["header"]}" t="inlineStr">{_T_OPEN}'
            f"{_escape_py(c.header)}{_T_CLOSE}"
            for j, c in enumerate(cols)
        )
        head.append("</row>")
    fh.write("".join(head).encode("utf-8"))

    if n_cols:
        letters = [f'<c r="{col_letters(j)}' for j in range(n_cols)]
        affixes = [_affixes(c, style_ids) for c in cols]
        for a in range(0, n_rows, _CHUNK_ROWS):
            b = min(a + _CHUNK_ROWS, n_rows)
            rownum = pc.cast(pa.array(np.arange(a + 2, b + 2, dtype="int64")), pa.large_string())
            cells = []
            for j, col in enumerate(cols):
                kinds, values = _chunk(col, a, b)
                if values is None or not (kinds != _EMPTY).any():
                    continue
                if values.type != pa.large_string():
                    values = values.cast(pa.large_string())
                if col.kind in ("text", "mixed", "date"):
                    values = _escape(values)
                prefix, suffix = affixes[j]
                k = pa.array(kinds)
                cells.append(_join(letters[j], rownum, prefix.take(k), values, suffix.take(k), ""))
            rows = _join(
                '<row r="',
                rownum,
                '">',
                *cells,
                "</row>",
                "",
                null_handling="replace",
                null_replacement="",
            )
            _write_buffer(fh, rows)

    tail = ["</sheetData>"]
    if n_cols:
        tail.append(f'<autoFilter ref="A1:{last}"/>')
    tail.append(
        '<pageMargins left="0.7" right="0.7" top="0.75" bottom="0.75" header="0.3" footer="0.3"/>'
    )
    tail.append("</worksheet>")
    fh.write("".join(tail).encode("utf-8"))


def _join(*parts, null_handling: str = "emit_null", null_replacement: str = ""):
    """``pc.binary_join_element_wise`` with plain strings as large-string scalars (last: separator)."""
    args = [pa.scalar(p, pa.large_string()) if isinstance(p, str) else p for p in parts]
    return pc.binary_join_element_wise(
        *args, null_handling=null_handling, null_replacement=null_replacement
    )


def _escape_py(text: str) -> str:
    return re.sub(_XSTRING_ESCAPE, r"_x005F_\1", _xml_escape(text))


__all__ = [
    "EXCEL_MAX_COLUMNS",
    "EXCEL_MAX_ROWS",
    "EXCEL_MAX_TEXT",
    "SheetSpec",
    "SpliceError",
    "SplicedSheets",
    "new_workbook",
    "splice_sheets",
    "valid_sheet_name",
]
