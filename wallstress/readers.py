"""Reading study lists: csv, xlsx, ods and parquet, as the user wrote them.

``read_studies(path)`` returns the raw cells under the user's own headers (one row per study, in file
order) plus everything noticed on the way (encoding, delimiter, decimal comma, header row, folded
units row, duplicate headers, spreadsheet error values, formulas never calculated, over-long cells).
Formulas and units are not touched here: ``mapping.map_columns`` reads the cells.

A file that cannot be used at all raises ``InputError`` with one line naming the file, what is
wrong and what to do. Workbooks are checked before any parser sees them: a zip container must stay
within ``ZIP_LIMITS`` (entries, uncompressed sizes, compression ratio) and no XML part may declare a
DOCTYPE or entity (entity-expansion attacks). openpyxl, the fallback reader, additionally parses
through defusedxml when it is installed (it is a dependency).

A file with a header and no data rows is not an error: it returns 0 rows with a ``no_rows`` finding.

References
----------
RFC 4180, Common Format and MIME Type for Comma-Separated Values (CSV) Files, 2005.
ECMA-376, Office Open XML File Formats, 5th ed., 2016 (SpreadsheetML cells: ``t="e"`` error values,
``<f>`` formulas with cached ``<v>`` values; 32,767 characters per cell).
OASIS, Open Document Format for Office Applications (OpenDocument) v1.2, 2011.
[MS-OFFCRYPTO], Office Document Cryptography Structure (encrypted OOXML is an OLE compound file
holding ``EncryptionInfo`` and ``EncryptedPackage`` streams).
"""

from __future__ import annotations

import csv
import hashlib
import io
import re
import zipfile
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress import units
from wallstress.errors import InputError
from wallstress.mapping import check_columns_option, header_score

FORMATS: tuple[str, ...] = ("csv", "xlsx", "ods", "parquet")
HEADER_SEARCH_ROWS = 20
MAX_CELL_CHARS = 32_767
DELIMITERS: tuple[str, ...] = ("\t", ";", "|", ",")  # order of preference when several fit
SPREADSHEET_ERRORS = frozenset(
    {
        "#DIV/0!",
        "#N/A",
        "#NAME?",
        "#NULL!",
        "#NUM!",
        "#REF!",
        "#VALUE!",
        "#SPILL!",
        "#CALC!",
        "#GETTING_DATA",
        "#FIELD!",
        "#BLOCKED!",
        "#CONNECT!",
        "#BUSY!",
        "#UNKNOWN!",
        "#N/A!",
    }
)


@dataclass(frozen=True)
class ZipLimits:
    """Limits a workbook's zip container must respect before it is parsed (zip-bomb guard)."""

    max_entries: int = 10_000
    max_entry_bytes: int = 2 * 1024**3  # uncompressed, per entry
    max_total_bytes: int = 4 * 1024**3  # uncompressed, all entries
    max_ratio: float = 200.0  # uncompressed / compressed, for entries over ratio_floor_bytes
    ratio_floor_bytes: int = 1024**2


ZIP_LIMITS = ZipLimits()

_OLE_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"
_ENCRYPTED_MARK = "EncryptedPackage".encode("utf-16-le")


@dataclass
class StudyTable:
    """A study list as read.

    Attributes
    ----------
    table : DataFrame
        Raw cells under the user's own headers (made unique), one row per study, file order.
        Numbers as numbers where the file has numbers, text as text, NaN for empty cells.
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


def read_studies(
    path, sheet: str | None = None, *, max_rows: int | None = None, columns: dict | None = None
) -> StudyTable:
    """Read a study list (csv, xlsx, ods or parquet) into raw cells under the user's headers.

    Parameters
    ----------
    path : str or Path
        The file. Its contents decide the format (an xlsx named .csv is read as xlsx, with a note).
    sheet : str, optional
        Workbook sheet; default the first sheet whose header row is recognised.
    max_rows : int, optional
        Read at most this many data rows (e.g. for a preview).
    columns : dict, optional
        The lab's own header -> canonical field map (``Options.columns``); such headers count as
        recognised when looking for the header row.

    Returns
    -------
    StudyTable

    Raises
    ------
    InputError
        The file cannot be used; one line naming the file, the problem and the fix.
    """
    p = Path(path)
    if max_rows is not None and (not isinstance(max_rows, int) or max_rows < 0):
        raise InputError(f"max_rows={max_rows!r} is not valid; pass a whole number >= 0 or None")
    check_columns_option(columns)
    if not p.exists():
        raise InputError(f"{p}: file not found; check the path and the file name")
    if p.is_dir():
        raise InputError(f"{p}: is a folder, not a file; pass the study list file itself")
    try:
        data = p.read_bytes()
    except OSError as exc:
        raise InputError(
            f"{p}: cannot be read ({exc.strerror or exc}); check its permissions"
        ) from exc
    if not data.strip():
        raise InputError(f"{p}: the file is empty; export the study list again with its header row")
    digest = hashlib.sha256(data).hexdigest()
    kind = _sniff(p, data)
    notes: list[pd.DataFrame] = []
    suffix = p.suffix.lower().lstrip(".")
    named = {"xlsm": "xlsx", "tsv": "csv", "txt": "csv"}.get(suffix, suffix)
    if named in FORMATS and named != kind:
        notes.append(
            _file_note(
                "format_differs_from_name",
                f"The file is named .{suffix} but its contents are {kind}; it was read as {kind}.",
            )
        )
    if kind == "csv":
        st = _read_csv(p, data, max_rows, columns)
    elif kind in ("xlsx", "ods"):
        st = _read_workbook(p, kind, sheet, max_rows, columns)
    else:
        st = _read_parquet(p, max_rows, columns)
    st.sha256 = digest
    st.findings = fnd.concat([*notes, st.findings])
    return st


# --- format detection and container checks ---------------------------------------------------------


def _sniff(p: Path, data: bytes) -> str:
    suffix = p.suffix.lower()
    head = data[:8]
    if head.startswith(b"PK\x03\x04") or head.startswith(b"PK\x05\x06"):
        return _zip_kind(p, data)
    if head == _OLE_MAGIC:
        if _ENCRYPTED_MARK in data:
            raise InputError(
                f"{p}: the workbook is password-protected (encrypted); open it, remove the password "
                "and save an unprotected copy as .xlsx"
            )
        raise InputError(
            f"{p}: this is a legacy binary workbook (.xls), which is not read; open it and save it "
            "as .xlsx (or export CSV UTF-8)"
        )
    if head.startswith(b"PAR1"):
        return "parquet"
    if suffix in (".xlsx", ".xlsm", ".ods", ".xls", ".parquet"):
        what = {".parquet": "a parquet file"}.get(suffix, "a workbook")
        raise InputError(
            f"{p}: the file is named {suffix} but is not {what} (its contents are not a "
            f"{'parquet file' if suffix == '.parquet' else 'zip-packaged workbook'}); it may be damaged "
            "or misnamed: export the study list again"
        )
    return "csv"


def _zip_kind(p: Path, data: bytes) -> str:
    try:
        zf = zipfile.ZipFile(io.BytesIO(data))
    except (zipfile.BadZipFile, ValueError, OSError) as exc:
        raise InputError(
            f"{p}: the workbook is damaged (not a readable zip package: {exc}); export it again"
        ) from exc
    with zf:
        check_zip(p, zf)
        names = set(zf.namelist())
        if "mimetype" in names:
            mt = zf.read("mimetype")[:100]
            if b"opendocument.spreadsheet" in mt:
                return "ods"
            raise InputError(
                f"{p}: an OpenDocument file that is not a spreadsheet ({mt.decode('ascii', 'replace')}); "
                "save the study list as .ods or .xlsx"
            )
        if "xl/workbook.xml" in names or any(n.startswith("xl/") for n in names):
            return "xlsx"
        if any(n.startswith("word/") or n.startswith("ppt/") for n in names):
            raise InputError(
                f"{p}: this is a text document or slide file, not a workbook; save the study list as .xlsx"
            )
    raise InputError(
        f"{p}: a zip archive that holds no workbook; pass the .xlsx, .ods or .csv file itself"
    )


def check_zip(p: Path, zf: zipfile.ZipFile, limits: ZipLimits = ZIP_LIMITS) -> None:
    """Refuse a zip container that would expand beyond ``limits`` (checked on the directory only).

    Raises
    ------
    InputError
        Too many entries, an entry or the total too large when uncompressed, or a compression
        ratio typical of a zip bomb.
    """
    infos = zf.infolist()
    fix = "if the file is genuine, export a smaller study list (or CSV)"
    if len(infos) > limits.max_entries:
        raise InputError(
            f"{p}: the workbook package has {len(infos)} parts (limit {limits.max_entries}); "
            f"refused as a possible zip bomb; {fix}"
        )
    total = 0
    for info in infos:
        size = int(info.file_size)
        total += size
        if size > limits.max_entry_bytes:
            raise InputError(
                f"{p}: part {info.filename!r} expands to {size} bytes (limit "
                f"{limits.max_entry_bytes}); refused as a possible zip bomb; {fix}"
            )
        if size > limits.ratio_floor_bytes:
            ratio = size / max(int(info.compress_size), 1)
            if ratio > limits.max_ratio:
                raise InputError(
                    f"{p}: part {info.filename!r} is compressed {ratio:.0f}:1 (limit "
                    f"{limits.max_ratio:.0f}:1); refused as a possible zip bomb; {fix}"
                )
    if total > limits.max_total_bytes:
        raise InputError(
            f"{p}: the workbook expands to {total} bytes (limit {limits.max_total_bytes}); "
            f"refused as a possible zip bomb; {fix}"
        )


_DTD_RE = re.compile(rb"<!\s*(DOCTYPE|ENTITY)", re.IGNORECASE)


def check_xml_parts(p: Path, zf: zipfile.ZipFile, max_prolog_bytes: int = 1024**2) -> None:
    """Refuse XML parts that declare a DOCTYPE or ENTITY (entity expansion, external entities).

    A DOCTYPE may only stand in the prolog, before the root element, so each part is read only up
    to its root element (at most ``max_prolog_bytes``). Workbooks written by spreadsheet programs
    never declare one.
    """
    for info in zf.infolist():
        name = info.filename
        if not (name.endswith(".xml") or name.endswith(".rels") or name.endswith(".vml")):
            continue
        with zf.open(info) as fh:
            buf = b""
            while len(buf) < max_prolog_bytes:
                chunk = fh.read(65536)
                if not chunk:
                    break
                buf += chunk
                if _root_started(buf):
                    break
        text = buf
        if text.startswith((b"\xff\xfe", b"\xfe\xff")):
            text = buf.decode("utf-16", "ignore").encode("utf-8")
        if _DTD_RE.search(text[: _root_offset(text) or len(text)]) or (
            not _root_started(text) and len(buf) >= max_prolog_bytes
        ):
            raise InputError(
                f"{p}: part {name!r} declares a DOCTYPE/ENTITY (XML entity expansion); refused as "
                "unsafe; open the file in a spreadsheet program and save a fresh copy"
            )


_ROOT_RE = re.compile(rb"<[A-Za-z_]")


def _root_offset(buf: bytes) -> int | None:
    # skip comments and processing instructions / declarations
    pos = 0
    while True:
        m = _ROOT_RE.search(buf, pos)
        if not m:
            return None
        start = m.start()
        prefix = buf[:start]
        if prefix.count(b"<!--") > prefix.count(b"-->"):
            pos = start + 1
            continue
        return start


def _root_started(buf: bytes) -> bool:
    return _root_offset(buf) is not None


def _file_note(code: str, message: str, severity: str = "note") -> pd.DataFrame:
    return fnd.make([-1], code=code, severity=severity, message=message)


# --- CSV ---------------------------------------------------------------------------------------------


def _decode(p: Path, data: bytes) -> tuple[str, str]:
    if data.startswith(b"\xef\xbb\xbf"):
        enc = "utf-8-sig"
    elif data.startswith((b"\xff\xfe", b"\xfe\xff")):
        enc = "utf-16"
    else:
        enc = "utf-8"
    try:
        text = data.decode(enc)
    except UnicodeDecodeError:
        if enc != "utf-8":
            raise InputError(
                f"{p}: the text is not valid {enc}; save it again as CSV UTF-8"
            ) from None
        try:
            text = data.decode("cp1252")
            enc = "cp1252"
        except UnicodeDecodeError:
            raise InputError(
                f"{p}: not readable as UTF-8 or Windows-1252 text (binary content?); "
                "save the study list as CSV UTF-8 or .xlsx"
            ) from None
    if "\x00" in text[:65536]:
        raise InputError(
            f"{p}: binary content (NUL bytes), not a text table; pass a CSV, .xlsx, .ods or .parquet file"
        )
    return text, enc


_QUOTED = re.compile(r'"(?:[^"]|"")*"')


def detect_delimiter(lines: list[str]) -> str:
    """The field delimiter of CSV text: tab, ';', '|' or ',' (first that splits the lines evenly).

    Quoted fields are ignored. A candidate fits when at least 80 % of the non-empty lines contain it
    the same number of times (and at least once); several fitting candidates are taken in the order
    of ``DELIMITERS`` (',' last, because it is also a decimal mark).
    """
    body = [_QUOTED.sub("", ln) for ln in lines if ln.strip()]
    if not body:
        return ","
    best = None
    for d in DELIMITERS:
        counts = np.array([ln.count(d) for ln in body])
        if counts.max() == 0:
            continue
        vals, freq = np.unique(counts[counts > 0], return_counts=True)
        mode = vals[np.argmax(freq)]
        share = float(np.mean(counts == mode))
        if share >= 0.8:
            return d
        if best is None or share > best[1]:
            best = (d, share)
    return best[0] if best else ","


def _read_csv(p: Path, data: bytes, max_rows, columns) -> StudyTable:
    text, enc = _decode(p, data)
    notes = []
    if enc == "cp1252":
        notes.append(
            _file_note(
                "encoding_cp1252",
                "The file is not UTF-8; it was read as Windows-1252 (cp1252). Check accented names, or save it as CSV UTF-8.",
            )
        )
    sample = text[:200_000].splitlines()[:200]
    delim = detect_delimiter(sample)
    nrows = None if max_rows is None else max_rows + HEADER_SEARCH_ROWS + 2
    width = max((len(r) for r in csv.reader(sample, delimiter=delim)), default=1)
    kw = dict(
        sep=delim,
        header=None,
        dtype=str,
        keep_default_na=False,
        na_filter=False,
        skip_blank_lines=False,
        quotechar='"',
        nrows=nrows,
    )
    try:
        grid = pd.read_csv(io.StringIO(text), names=range(width), engine="c", **kw)
    except (pd.errors.ParserError, ValueError):
        width = max((len(r) for r in csv.reader(io.StringIO(text), delimiter=delim)), default=1)
        try:
            grid = pd.read_csv(io.StringIO(text), names=range(width), engine="python", **kw)
        except (pd.errors.ParserError, ValueError, csv.Error) as exc:
            raise InputError(
                f"{p}: the CSV cannot be parsed ({exc}); check quotes and delimiters"
            ) from exc
    grid = _blank_to_nan(grid)
    table, header_row, first, parts = _frame_from_grid(p, grid, columns, None, None)
    if max_rows is not None:
        table = table.iloc[:max_rows].reset_index(drop=True)
    cell_parts = _cell_findings(table)  # before numbers: "#N/A" in a number column -> NaN
    table, dec = _numbers_from_text(table, allow_comma=delim != ",")
    parts = [*notes, *parts, *cell_parts]
    if dec == ",":
        parts.append(
            _file_note(
                "decimal_comma", "Numbers use a decimal comma; they were read as decimal numbers."
            )
        )
    return StudyTable(
        table=table,
        path=p,
        format="csv",
        sheet=None,
        header_row=header_row,
        sha256="",
        encoding=enc,
        delimiter=delim,
        decimal=dec,
        findings=fnd.concat(parts),
        first_data_row=first,
    )


def _blank_to_nan(grid: pd.DataFrame, strip: bool = True) -> pd.DataFrame:
    """Empty (or, with ``strip``, whitespace-only) text cells -> NaN."""
    out = {}
    for c in grid.columns:
        s = grid[c]
        if strip and pd.api.types.is_string_dtype(s.dtype) and s.dtype != object:
            blank = s.isna().to_numpy() | s.str.strip().eq("").fillna(True).to_numpy(dtype=bool)
            out[c] = s.where(~blank)  # keeps the vectorised ``str`` dtype
            continue
        s = s.astype(object)
        if strip:
            blank = s.isna().to_numpy() | s.astype("str").str.strip().eq("").to_numpy()
        else:
            blank = s.isna().to_numpy() | s.eq("").to_numpy()
        out[c] = s.where(~blank, np.nan)
    return pd.DataFrame(out, index=grid.index)


_PLAIN_NUM = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"
_COMMA_NUM = r"[+-]?(?:\d+(?:[.,]\d*)?|[.,]\d+)(?:[eE][+-]?\d+)?"


def _numbers_from_text(table: pd.DataFrame, allow_comma: bool) -> tuple[pd.DataFrame, str]:
    """Columns whose every non-empty cell is a number become float64; others stay text."""
    dec = "."
    out = {}
    for j, _c in enumerate(table.columns):
        s = table.iloc[:, j]
        t = s.astype("str").str.strip()
        nonempty = s.notna()
        if not nonempty.any():
            out[j] = s
            continue
        tt = t[nonempty]
        if tt.str.fullmatch(_PLAIN_NUM).all():
            out[j] = t.where(nonempty).astype("float64")
        elif (
            allow_comma
            and tt.str.fullmatch(_COMMA_NUM).all()
            and not tt.str.contains(r"\d,\d{3}(?:[.,]|$)").all()
        ):
            out[j] = pd.to_numeric(
                t.where(nonempty).str.replace(",", ".", regex=False), errors="coerce"
            ).astype("float64")
            dec = ","
        else:
            out[j] = s
    res = pd.DataFrame(out)
    res.columns = table.columns
    return res, dec


# --- header detection (shared) -----------------------------------------------------------------------


def _cell_text(v) -> str:
    if v is None or (isinstance(v, float) and np.isnan(v)):
        return ""
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v).strip()


def _frame_from_grid(p: Path, grid: pd.DataFrame, columns, sheet: str | None, merged) -> tuple:
    """Find the header row, fold a units row / group row, name columns, return the data table."""
    where = f" of sheet {sheet!r}" if sheet else ""
    grid = grid.reset_index(drop=True)
    grid.columns = range(grid.shape[1])
    # drop leading/trailing columns that are empty everywhere
    filled = grid.notna().any(axis=0).to_numpy()
    if not filled.any():
        raise InputError(f"{p}: no data{where}: every cell is empty; export the study list again")
    first_col, last_col = np.flatnonzero(filled)[[0, -1]]
    grid = grid.iloc[:, first_col : last_col + 1]
    grid.columns = range(grid.shape[1])
    merged = [((r0, c0 - first_col), (r1, c1 - first_col)) for (r0, c0), (r1, c1) in (merged or [])]
    # drop trailing empty rows
    rows_filled = grid.notna().any(axis=1).to_numpy()
    last_row = int(np.flatnonzero(rows_filled)[-1])
    grid = grid.iloc[: last_row + 1]

    head = grid.iloc[:HEADER_SEARCH_ROWS]
    texts = [[_cell_text(v) for v in row] for row in head.itertuples(index=False, name=None)]
    width = max(sum(1 for t in r if t) for r in texts)
    need = min(3, width)
    header_row = None
    for i, row in enumerate(texts):
        if sum(1 for t in row if t) >= need and header_score(row, columns) >= need:
            header_row = i
            break
    if header_row is None:
        best = max(range(len(texts)), key=lambda i: header_score(texts[i], columns))
        raise InputError(
            f"{p}: no recognisable header in the first {HEADER_SEARCH_ROWS} rows{where} (best row "
            f"{best + 1} names {header_score(texts[best], columns)} known columns, at least {need} "
            "needed, e.g. IVSd, LVIDd, PWd, height, weight); rename the headers (see `wallstress "
            "template`) or map them with --columns"
        )
    parts = []
    headers = list(texts[header_row])
    data_start = header_row + 1

    # a group row above ("Diastole" over IVS/LVID/PW)
    if header_row > 0:
        group = list(texts[header_row - 1])
        for (r0, c0), (r1, c1) in merged:
            if r0 <= header_row - 1 <= r1 and 0 <= c0 < len(group):
                for c in range(c0 + 1, min(c1 + 1, len(group))):
                    group[c] = group[c0]
        if not merged:
            last = ""
            for c in range(len(group)):
                last = group[c] or last
                group[c] = last
        combined, changed = _combine_group(headers, group, columns)
        if changed:
            headers = combined
            parts.append(
                _file_note(
                    "header_two_rows",
                    f"The header spans two rows (rows {header_row} and {header_row + 1}); {changed} column names were combined from both, e.g. {next(h for h in combined if h)!r}.",
                )
            )

    # a units row below ("mm", "(cm)", "kg")
    if data_start < len(grid):
        below = [_cell_text(v) for v in grid.iloc[data_start]]
        cells = [b for b in below if b]
        if cells and all(units.normalise_unit(b.strip("()[]{} ")) for b in cells):
            for c, b in enumerate(below):
                if b and headers[c]:
                    headers[c] = f"{headers[c]} ({b.strip('()[]{} ')})"
            data_start += 1
            parts.append(
                _file_note(
                    "units_row_folded",
                    f"Row {header_row + 2} holds only units; they were added to the headers (e.g. {next(h for h, b in zip(headers, below, strict=False) if b and h)!r}).",
                )
            )

    headers, dup = _unique_headers(headers)
    for h in dup:
        parts.append(
            fnd.make(
                [-1],
                code="duplicate_header",
                severity="warning",
                column=h,
                message=f"The header {h.rsplit(' (', 1)[0]!r} appears more than once; this copy was renamed {h!r}. Rename it if it is a different measurement.",
            )
        )
    table = grid.iloc[data_start:].reset_index(drop=True)
    table.columns = headers
    if len(table) == 0:
        parts.append(
            _file_note(
                "no_rows", f"The study list{where} has a header but no data rows.", "warning"
            )
        )
    return table, header_row, data_start, parts


def _combine_group(headers, group, columns):
    from wallstress.mapping import match_header

    cols = check_columns_option(columns) if columns else None
    out = list(headers)
    changed = 0
    for c, (h, g) in enumerate(zip(headers, group, strict=False)):
        if not h or not g or g == h:
            continue
        plain, _ = match_header(h, cols)
        for cand in (f"{h} {g}", f"{g} {h}"):
            f, _ = match_header(cand, cols)
            if f and f != plain:
                out[c] = cand
                changed += 1
                break
    return out, changed


def _unique_headers(headers):
    seen: dict[str, int] = {}
    out, dup = [], []
    for c, h in enumerate(headers):
        name = h or f"column_{c + 1}"
        key = name.lower()
        if key in seen:
            seen[key] += 1
            new = f"{name} ({seen[key]})"
            while new.lower() in seen:
                seen[key] += 1
                new = f"{name} ({seen[key]})"
            seen[new.lower()] = 1
            out.append(new)
            dup.append(new)
        else:
            seen[key] = 1
            out.append(name)
    return out, dup


def _cell_findings(table: pd.DataFrame, error_cells=None) -> list:
    """Spreadsheet error values -> NaN with a finding; over-long cells -> finding (kept)."""
    parts = []
    for j, col in enumerate(table.columns):
        s = table.iloc[:, j]
        if s.dtype != object and not pd.api.types.is_string_dtype(s.dtype):
            continue
        if s.dtype == object:
            arr = s.to_numpy(dtype=object)
            is_str = np.fromiter((type(x) is str for x in arr), dtype=bool, count=len(arr))
            if not is_str.any():
                continue
            t = s.where(is_str).astype("str")
        else:
            t = s
            is_str = t.notna().to_numpy()
        t = t.str.strip()
        err = np.zeros(len(s), dtype=bool)
        hashes = t.str.startswith("#").fillna(False).to_numpy(dtype=bool)
        if hashes.any():
            err = t.str.upper().isin(SPREADSHEET_ERRORS).to_numpy(dtype=bool) & is_str
        if err.any():
            rows = np.flatnonzero(err)
            parts.append(
                fnd.make(
                    rows,
                    code="spreadsheet_error",
                    severity="error",
                    column=str(col),
                    values=s.to_numpy(dtype=object)[rows],
                    message=f"{col!r}: the cell holds a spreadsheet error value; it was read as empty. Fix the formula in the file.",
                )
            )
            table.iloc[rows, j] = np.nan
        long = (t.str.len().fillna(0).to_numpy() > MAX_CELL_CHARS) & is_str
        if long.any():
            rows = np.flatnonzero(long)
            parts.append(
                fnd.make(
                    rows,
                    code="cell_too_long",
                    severity="warning",
                    column=str(col),
                    message=f"{col!r}: the cell holds more than {MAX_CELL_CHARS} characters, more than a spreadsheet cell can hold; it was kept but will be cut by spreadsheet programs.",
                )
            )
    return parts


# --- workbooks ---------------------------------------------------------------------------------------


def _read_workbook(p: Path, kind: str, sheet, max_rows, columns) -> StudyTable:
    with zipfile.ZipFile(p) as zf:
        check_zip(p, zf)
        check_xml_parts(p, zf)
    import python_calamine as pc

    parts = []
    try:
        wb = pc.CalamineWorkbook.from_path(str(p))
        names = list(wb.sheet_names)
    except Exception as exc:  # calamine raises its own error types
        if kind == "ods":
            raise InputError(
                f"{p}: the spreadsheet cannot be read ({exc}); save it again as .ods or .xlsx"
            ) from exc
        wb = None
        names = _openpyxl_sheet_names(p)
        parts.append(
            _file_note(
                "read_with_openpyxl",
                f"The fast reader failed ({type(exc).__name__}); the workbook was read with openpyxl instead.",
            )
        )
    if sheet is not None and sheet not in names:
        raise InputError(
            f"{p}: there is no sheet {sheet!r}; the sheets are {', '.join(repr(n) for n in names)}; "
            "pass one of them with --sheet"
        )
    candidates = [sheet] if sheet is not None else names
    last_error = None
    for name in candidates:
        try:
            grid, merged = _sheet_grid(p, wb, name, max_rows)
        except InputError:
            raise
        except Exception as exc:
            if wb is None:
                raise InputError(
                    f"{p}: sheet {name!r} cannot be read ({exc}); save the workbook again"
                ) from exc
            grid, merged = _openpyxl_grid(p, name, max_rows), []
            parts.append(
                _file_note(
                    "read_with_openpyxl",
                    f"Sheet {name!r} was read with openpyxl (the fast reader failed: {type(exc).__name__}).",
                )
            )
        if grid.empty or not grid.notna().to_numpy().any():
            last_error = InputError(
                f"{p}: sheet {name!r} is empty; pass the sheet with the study list with --sheet"
            )
            continue
        try:
            table, header_row, first, fparts = _frame_from_grid(p, grid, columns, name, merged)
        except InputError as exc:
            last_error = exc
            if sheet is not None:
                raise
            continue
        if kind == "xlsx":
            fparts += _xlsx_cell_scan(p, name, table, header_row, first, grid)
        table = _tidy_spreadsheet_columns(table)
        if max_rows is not None:
            table = table.iloc[:max_rows].reset_index(drop=True)
        if sheet is None and len(names) > 1:
            fparts.append(
                _file_note(
                    "sheet_chosen",
                    f"Read sheet {name!r}, the first whose headers are recognised (sheets: {', '.join(names)}); pass --sheet to choose another.",
                )
            )
        return StudyTable(
            table=table,
            path=p,
            format=kind,
            sheet=name,
            header_row=header_row,
            sha256="",
            findings=fnd.concat([*parts, *fparts, *_cell_findings(table)]),
            sheets=names,
            first_data_row=first,
        )
    if len(candidates) > 1:
        raise InputError(
            f"{p}: no sheet has a recognisable header row (sheets: {', '.join(names)}); rename the "
            "headers (e.g. IVSd, LVIDd, PWd, height, weight), map them with --columns, or pass --sheet"
        )
    raise last_error or InputError(f"{p}: the workbook has no sheets; export the study list again")


def _sheet_grid(p: Path, wb, name: str, max_rows):
    if wb is None:
        return _openpyxl_grid(p, name, max_rows), []
    sh = wb.get_sheet_by_name(name)
    nrows = None if max_rows is None else max_rows + HEADER_SEARCH_ROWS + 2
    rows = (
        sh.to_python(skip_empty_area=False, nrows=nrows)
        if nrows
        else sh.to_python(skip_empty_area=False)
    )
    merged = list(getattr(sh, "merged_cell_ranges", None) or [])
    if not rows:
        return pd.DataFrame(), merged
    grid = pd.DataFrame(rows, dtype=object)
    return _blank_to_nan(grid, strip=False), merged


def _openpyxl_sheet_names(p: Path) -> list[str]:
    import openpyxl

    try:
        wb = openpyxl.load_workbook(p, read_only=True, data_only=True)
    except Exception as exc:
        raise InputError(
            f"{p}: the workbook cannot be read ({type(exc).__name__}: {exc}); save it again as .xlsx"
        ) from exc
    try:
        return list(wb.sheetnames)
    finally:
        wb.close()


def _openpyxl_grid(p: Path, name: str, max_rows) -> pd.DataFrame:
    import openpyxl

    wb = openpyxl.load_workbook(p, read_only=True, data_only=True)
    try:
        ws = wb[name]
        limit = None if max_rows is None else max_rows + HEADER_SEARCH_ROWS + 2
        rows = []
        for i, r in enumerate(ws.iter_rows(values_only=True)):
            if limit is not None and i >= limit:
                break
            rows.append(r)
    finally:
        wb.close()
    if not rows:
        return pd.DataFrame()
    return _blank_to_nan(pd.DataFrame(rows, dtype=object))


def _tidy_spreadsheet_columns(table: pd.DataFrame) -> pd.DataFrame:
    """Object columns holding only numbers become float64 (numbers stay numbers, text stays text)."""
    out = {}
    for j in range(table.shape[1]):
        s = table.iloc[:, j]
        if s.dtype == object:
            inferred = s.infer_objects()
            if pd.api.types.is_numeric_dtype(inferred.dtype) and not pd.api.types.is_bool_dtype(
                inferred.dtype
            ):
                s = inferred.astype("float64")
            elif pd.api.types.is_datetime64_any_dtype(inferred.dtype):
                s = inferred
        out[j] = s
    res = pd.DataFrame(out, index=table.index)
    res.columns = table.columns
    return res


_CELL_REF = re.compile(r"^([A-Z]+)(\d+)$")


def _col_index(letters: str) -> int:
    n = 0
    for ch in letters:
        n = n * 26 + (ord(ch) - 64)
    return n - 1


def _sheet_part(zf: zipfile.ZipFile, name: str) -> str | None:
    from defusedxml import ElementTree as DET

    ns_main = "{http://schemas.openxmlformats.org/spreadsheetml/2006/main}"
    ns_rel = "{http://schemas.openxmlformats.org/officeDocument/2006/relationships}"
    wbx = DET.fromstring(zf.read("xl/workbook.xml"))
    rid = None
    for s in wbx.iter(f"{ns_main}sheet"):
        if s.get("name") == name:
            rid = s.get(f"{ns_rel}id")
    if rid is None:
        return None
    rels = DET.fromstring(zf.read("xl/_rels/workbook.xml.rels"))
    for r in rels:
        if r.get("Id") == rid:
            target = r.get("Target", "")
            return target.lstrip("/") if target.startswith("/") else "xl/" + target
    return None


def _xlsx_cell_scan(
    p: Path, name: str, table: pd.DataFrame, header_row: int, first: int, grid
) -> list:
    """Find error cells (``t="e"``) and formulas with no cached value in the sheet's XML.

    The calamine reader returns both as empty cells; this scan says which they were. It streams the
    part and parses (with defusedxml) only when the raw text contains an error cell or a formula.
    """
    try:
        with zipfile.ZipFile(p) as zf:
            part = _sheet_part(zf, name)
            if part is None or part not in zf.namelist():
                return []
            with zf.open(part) as fh:
                found = False
                tail = b""
                while True:
                    chunk = fh.read(1 << 20)
                    if not chunk:
                        break
                    buf = tail + chunk
                    if b't="e"' in buf or b"<f>" in buf or b"<f " in buf or b"<f/>" in buf:
                        found = True
                        break
                    tail = buf[-8:]
            if not found:
                return []
            from defusedxml.ElementTree import iterparse

            ns = "{http://schemas.openxmlformats.org/spreadsheetml/2006/main}"
            errors, uncached = [], []
            with zf.open(part) as fh:
                for _, el in iterparse(fh, events=("end",)):
                    if el.tag != f"{ns}c":
                        continue
                    ref = el.get("r", "")
                    v = el.find(f"{ns}v")
                    f = el.find(f"{ns}f")
                    vtext = v.text if v is not None else None
                    if el.get("t") == "e":
                        errors.append((ref, vtext or ""))
                    elif f is not None and not vtext:
                        uncached.append((ref, "=" + (f.text or "")))
                    el.clear()
    except (zipfile.BadZipFile, KeyError, OSError, ValueError) as exc:
        return [
            _file_note(
                "cell_scan_failed",
                f"Error values and uncalculated formulas could not be checked ({type(exc).__name__}).",
                "warning",
            )
        ]
    except Exception as exc:  # defusedxml refusals and parse errors
        raise InputError(
            f"{p}: sheet {name!r} has unsafe or damaged XML ({type(exc).__name__}); save a fresh copy of the workbook"
        ) from exc
    col_offset = int(np.flatnonzero(grid.notna().any(axis=0).to_numpy())[0])
    parts = []
    for cells, code, sev, msg in (
        (
            errors,
            "spreadsheet_error",
            "error",
            "the cell holds a spreadsheet error value; it was read as empty. Fix the formula in the file.",
        ),
        (
            uncached,
            "formula_not_calculated",
            "error",
            "the cell holds a formula that was never calculated (the file was written by a program, not saved by a spreadsheet program); it was read as empty. Open and save the file in a spreadsheet program, or write values.",
        ),
    ):
        by_col: dict[int, tuple[list, list]] = {}
        for ref, val in cells:
            m = _CELL_REF.match(ref)
            if not m:
                continue
            r = int(m.group(2)) - 1 - first
            c = _col_index(m.group(1)) - col_offset
            if 0 <= r < len(table) and 0 <= c < table.shape[1]:
                by_col.setdefault(c, ([], []))
                by_col[c][0].append(r)
                by_col[c][1].append(val)
        for c, (rows, vals) in sorted(by_col.items()):
            col = str(table.columns[c])
            table.iloc[rows, c] = np.nan
            parts.append(
                fnd.make(
                    rows,
                    code=code,
                    severity=sev,
                    column=col,
                    values=vals,
                    message=f"{col!r}: {msg}",
                )
            )
    return parts


# --- parquet -----------------------------------------------------------------------------------------


def _read_parquet(p: Path, max_rows, columns) -> StudyTable:
    try:
        import pyarrow.parquet as pq
    except ImportError as exc:  # optional dependency
        raise InputError(
            f"{p}: reading parquet needs pyarrow; install it (pip install pyarrow) or pass a CSV/xlsx file"
        ) from exc
    try:
        pf = pq.ParquetFile(p)
        if max_rows is not None:
            batches = []
            got = 0
            for b in pf.iter_batches(batch_size=max(1, min(max_rows, 65536))):
                batches.append(b)
                got += b.num_rows
                if got >= max_rows:
                    break
            import pyarrow as pa

            tbl = (
                pa.Table.from_batches(batches, schema=pf.schema_arrow)
                if batches
                else pf.schema_arrow.empty_table()
            )
        else:
            tbl = pf.read()
        df = tbl.to_pandas()
    except Exception as exc:
        raise InputError(
            f"{p}: the parquet file cannot be read ({type(exc).__name__}: {exc}); write it again"
        ) from exc
    if max_rows is not None:
        df = df.iloc[:max_rows]
    df = df.reset_index(drop=True)
    headers = [str(c) for c in df.columns]
    need = min(3, len(headers))
    if header_score(headers, columns) < need:
        raise InputError(
            f"{p}: no recognisable column names ({header_score(headers, columns)} known, at least {need} "
            "needed, e.g. ivsd_cm, lvidd_cm, pwd_cm, height_cm, weight_kg); rename them or map them with --columns"
        )
    uniq, dup = _unique_headers(headers)
    df.columns = uniq
    parts = [
        fnd.make(
            [-1],
            code="duplicate_header",
            severity="warning",
            column=h,
            message=f"A column name appears more than once; this copy was renamed {h!r}.",
        )
        for h in dup
    ]
    if len(df) == 0:
        parts.append(
            _file_note("no_rows", "The study list has column names but no data rows.", "warning")
        )
    parts += _cell_findings(df)
    return StudyTable(
        table=df,
        path=p,
        format="parquet",
        sheet=None,
        header_row=0,
        sha256="",
        findings=fnd.concat(parts),
        first_data_row=1,
    )
