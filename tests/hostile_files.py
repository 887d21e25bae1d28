"""A corpus of broken and hostile study-list files, made on demand into a folder (no binary junk kept).

Each entry is ``(name, maker, expect, detail)``: ``maker(folder) -> path`` writes the file;
``expect`` is "error" (``read_studies`` must raise ``InputError`` whose message matches the regex
``detail``) or "finding" (it must return, with a finding whose code is ``detail``).

All data are invented.
"""

from __future__ import annotations

import io
import random
import struct
import zipfile
from pathlib import Path

import openpyxl

GOOD_HEADER = ["study_id", "sex", "height_cm", "weight_kg", "IVSd (mm)", "LVIDd (mm)", "PWd (mm)"]
GOOD_ROWS = [["D001", "F", 162, 61, 9, 47, 9], ["D002", "M", 178, 84, 11, 52, 10]]


def _csv_text(header=GOOD_HEADER, rows=GOOD_ROWS, sep=",") -> str:
    lines = [sep.join(map(str, header))] + [sep.join(map(str, r)) for r in rows]
    return "\n".join(lines) + "\n"


def good_xlsx(path: Path, header=GOOD_HEADER, rows=GOOD_ROWS, title="Studies") -> Path:
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = title
    ws.append(header)
    for r in rows:
        ws.append(r)
    wb.save(path)
    return path


def _write(folder: Path, name: str, data: bytes | str) -> Path:
    p = folder / name
    if isinstance(data, str):
        data = data.encode("utf-8")
    p.write_bytes(data)
    return p


def _random_bytes(n: int, seed: int = 7) -> bytes:
    rnd = random.Random(seed)
    return bytes(rnd.getrandbits(8) for _ in range(n))


def _ole_file(streams_marker: bytes = b"") -> bytes:
    # An OLE compound-file signature and header, padded; enough for format sniffing.
    header = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 16 + struct.pack("<HH", 0x3E, 3)
    return header + b"\x00" * (512 - len(header)) + streams_marker + b"\x00" * 1024


def missing(folder: Path) -> Path:
    return folder / "no_such_file.csv"


def empty_file(folder: Path) -> Path:
    return _write(folder, "empty.csv", b"")


def blank_file(folder: Path) -> Path:
    return _write(folder, "blank.csv", "\n\n   \n")


def header_only(folder: Path) -> Path:
    return _write(folder, "header_only.csv", ",".join(GOOD_HEADER) + "\n")


def random_xlsx(folder: Path) -> Path:
    return _write(folder, "random.xlsx", _random_bytes(4096))


def random_csv(folder: Path) -> Path:
    return _write(folder, "random.csv", _random_bytes(4096, seed=11))


def nul_csv(folder: Path) -> Path:
    return _write(folder, "nul.csv", _csv_text().encode() + b"\x00\x00\x00junk")


def not_cp1252(folder: Path) -> Path:
    # 0x81 and 0x8d are undefined in Windows-1252 and invalid alone in UTF-8
    return _write(folder, "bytes.csv", _csv_text().encode() + b"D003,F,1\x81\x8d,60,9,47,9\n")


def legacy_xls(folder: Path) -> Path:
    return _write(folder, "old.xls", _ole_file(b"W\x00o\x00r\x00k\x00b\x00o\x00o\x00k\x00"))


def encrypted_xlsx(folder: Path) -> Path:
    marker = (
        "EncryptionInfo".encode("utf-16-le") + b"\x00\x00" + "EncryptedPackage".encode("utf-16-le")
    )
    return _write(folder, "locked.xlsx", _ole_file(marker))


def ole_named_xlsx(folder: Path) -> Path:
    return _write(
        folder, "renamed_xls.xlsx", _ole_file(b"W\x00o\x00r\x00k\x00b\x00o\x00o\x00k\x00")
    )


def zip_bomb_ratio(folder: Path) -> Path:
    p = folder / "bomb.xlsx"
    with zipfile.ZipFile(p, "w", compression=zipfile.ZIP_DEFLATED, compresslevel=9) as zf:
        zf.writestr("[Content_Types].xml", "<Types/>")
        zf.writestr("xl/workbook.xml", "<workbook/>")
        zf.writestr("xl/worksheets/sheet1.xml", b"\x00" * (40 * 1024**2))
    return p


def zip_bomb_entries(folder: Path) -> Path:
    p = folder / "many_parts.xlsx"
    with zipfile.ZipFile(p, "w", compression=zipfile.ZIP_STORED) as zf:
        zf.writestr("xl/workbook.xml", "<workbook/>")
        for i in range(10_001):
            zf.writestr(f"xl/media/p{i}.bin", b"")
    return p


def _replace_part(src: Path, dst: Path, part: str, data: bytes) -> Path:
    with zipfile.ZipFile(src) as zin, zipfile.ZipFile(dst, "w", zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            zout.writestr(info, data if info.filename == part else zin.read(info.filename))
    return dst


BILLION_LAUGHS = (
    b'<?xml version="1.0"?>\n<!DOCTYPE lolz [\n <!ENTITY lol "lol">\n'
    + b"".join(
        f' <!ENTITY lol{i} "{("&lol" + (str(i - 1) if i > 1 else "") + ";") * 10}">\n'.encode()
        for i in range(1, 10)
    )
    + b']>\n<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main">'
    b'<sheetData><row r="1"><c r="A1" t="inlineStr"><is><t>&lol9;</t></is></c></row></sheetData>'
    b"</worksheet>"
)


def entity_expansion(folder: Path) -> Path:
    good = good_xlsx(folder / "_good_for_entities.xlsx")
    return _replace_part(good, folder / "entities.xlsx", "xl/worksheets/sheet1.xml", BILLION_LAUGHS)


def external_entity(folder: Path) -> Path:
    good = good_xlsx(folder / "_good_for_xxe.xlsx")
    xxe = (
        b'<?xml version="1.0"?><!DOCTYPE w [<!ENTITY x SYSTEM "file:///etc/passwd">]>'
        b'<worksheet xmlns="http://schemas.openxmlformats.org/spreadsheetml/2006/main"><sheetData>'
        b'<row r="1"><c r="A1" t="inlineStr"><is><t>&x;</t></is></c></row></sheetData></worksheet>'
    )
    return _replace_part(good, folder / "xxe.xlsx", "xl/worksheets/sheet1.xml", xxe)


def truncated_xlsx(folder: Path) -> Path:
    good = good_xlsx(folder / "_good_for_truncation.xlsx").read_bytes()
    return _write(folder, "truncated.xlsx", good[: len(good) // 2])


def zip_without_workbook(folder: Path) -> Path:
    buf = io.BytesIO()
    with zipfile.ZipFile(buf, "w") as zf:
        zf.writestr("notes.txt", "not a workbook")
    return _write(folder, "archive.xlsx", buf.getvalue())


def missing_sheet(folder: Path) -> Path:
    return good_xlsx(folder / "sheets.xlsx")


def no_header_csv(folder: Path) -> Path:
    return _write(folder, "no_header.csv", "a,b,c,d\n1,2,3,4\n5,6,7,8\n")


def title_rows_only(folder: Path) -> Path:
    return _write(folder, "titles.csv", "Echo lab export\nGenerated by hand\n\n")


def corrupt_parquet(folder: Path) -> Path:
    return _write(folder, "broken.parquet", b"PAR1" + _random_bytes(256, seed=3) + b"PAR1")


def no_header_xlsx(folder: Path) -> Path:
    return good_xlsx(folder / "unknown_headers.xlsx", header=["a", "b", "c", "d", "e", "f", "g"])


def error_cells_xlsx(folder: Path) -> Path:
    p = folder / "errors.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append(GOOD_HEADER)
    ws.append(["D001", "F", 162, 61, "#DIV/0!", 47, 9])  # openpyxl stores this as an error cell
    ws.append(["D002", "M", 178, 84, 11, "=E2*5", 10])  # formula never calculated
    wb.save(p)
    return p


def error_text_csv(folder: Path) -> Path:
    rows = [["D001", "F", 162, 61, "#N/A", 47, 9], *GOOD_ROWS[1:]]
    return _write(folder, "error_text.csv", _csv_text(rows=rows))


def long_cell_csv(folder: Path) -> Path:
    header = [*GOOD_HEADER, "comment"]
    rows = [[*GOOD_ROWS[0], "x" * 40_000], [*GOOD_ROWS[1], "ok"]]
    return _write(folder, "long_cell.csv", _csv_text(header=header, rows=rows))


def duplicate_headers_csv(folder: Path) -> Path:
    header = [*GOOD_HEADER, "LVIDd (mm)"]
    rows = [[*r, 50] for r in GOOD_ROWS]
    return _write(folder, "duplicates.csv", _csv_text(header=header, rows=rows))


def ragged_csv(folder: Path) -> Path:
    text = _csv_text() + "D003,F,160,58,9,46,9,extra,cells\n"
    return _write(folder, "ragged.csv", text)


def xlsx_named_csv(folder: Path) -> Path:
    good = good_xlsx(folder / "_good_for_rename.xlsx").read_bytes()
    return _write(folder, "really_xlsx.csv", good)


CORPUS: list[tuple[str, object, str, str]] = [
    ("missing", missing, "error", r"file not found"),
    ("empty_file", empty_file, "error", r"empty\.csv: the file is empty"),
    ("blank_file", blank_file, "error", r"the file is empty"),
    ("header_only", header_only, "finding", "no_rows"),
    (
        "random_xlsx",
        random_xlsx,
        "error",
        r"random\.xlsx: the file is named \.xlsx but is not a workbook",
    ),
    (
        "random_csv",
        random_csv,
        "error",
        r"random\.csv: (binary content|not readable|no recognisable header)",
    ),
    ("nul_csv", nul_csv, "error", r"binary content \(NUL bytes\)"),
    ("not_cp1252", not_cp1252, "error", r"not readable as UTF-8 or Windows-1252"),
    ("legacy_xls", legacy_xls, "error", r"old\.xls: .*legacy binary workbook.*save it as \.xlsx"),
    ("encrypted_xlsx", encrypted_xlsx, "error", r"locked\.xlsx: .*password-protected"),
    ("ole_named_xlsx", ole_named_xlsx, "error", r"legacy binary workbook .*save it as \.xlsx"),
    ("zip_bomb_ratio", zip_bomb_ratio, "error", r"bomb\.xlsx: .*compressed \d+:1 .*zip bomb"),
    ("zip_bomb_entries", zip_bomb_entries, "error", r"10002 parts .*zip bomb"),
    ("entity_expansion", entity_expansion, "error", r"DOCTYPE/ENTITY"),
    ("external_entity", external_entity, "error", r"DOCTYPE/ENTITY"),
    ("truncated_xlsx", truncated_xlsx, "error", r"truncated\.xlsx: the workbook is damaged"),
    ("zip_without_workbook", zip_without_workbook, "error", r"holds no workbook"),
    ("no_header_csv", no_header_csv, "error", r"no recognisable header in the first 20 rows"),
    ("title_rows_only", title_rows_only, "error", r"no recognisable header"),
    (
        "corrupt_parquet",
        corrupt_parquet,
        "error",
        r"broken\.parquet: the parquet file cannot be read",
    ),
    ("no_header_xlsx", no_header_xlsx, "error", r"no recognisable header"),
    ("error_cells_xlsx", error_cells_xlsx, "finding", "spreadsheet_error"),
    ("uncalculated_formula", error_cells_xlsx, "finding", "formula_not_calculated"),
    ("error_text_csv", error_text_csv, "finding", "spreadsheet_error"),
    ("long_cell_csv", long_cell_csv, "finding", "cell_too_long"),
    ("duplicate_headers_csv", duplicate_headers_csv, "finding", "duplicate_header"),
    ("xlsx_named_csv", xlsx_named_csv, "finding", "format_differs_from_name"),
]


# ---- round 2: files found by hand (issue 8) -------------------------------------------------

_ROWS_200 = [[f"D{i:03d}", "MF"[i % 2], 150 + i % 40, 55 + i % 30, 9, 47, 9] for i in range(200)]


def stray_cells_xlsx(folder: Path) -> Path:
    """200 study rows plus one stray cell at XFD1 and one at A1048576 (the sheet's limits)."""
    p = folder / "stray_cells.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.title = "Studies"
    ws.append(GOOD_HEADER)
    for r in _ROWS_200:
        ws.append(r)
    ws["XFD1"] = "stray"
    ws["A1048576"] = "stray"
    wb.save(p)
    return p


_ODS_NS = (
    'xmlns:office="urn:oasis:names:tc:opendocument:xmlns:office:1.0" '
    'xmlns:table="urn:oasis:names:tc:opendocument:xmlns:table:1.0" '
    'xmlns:text="urn:oasis:names:tc:opendocument:xmlns:text:1.0"'
)


def _ods_cell(v, repeat: int = 1) -> str:
    rep = f' table:number-columns-repeated="{repeat}"' if repeat > 1 else ""
    if v is None:
        return f"<table:table-cell{rep}/>"
    if isinstance(v, str):
        return f'<table:table-cell{rep} office:value-type="string"><text:p>{v}</text:p></table:table-cell>'
    return (
        f'<table:table-cell{rep} office:value-type="float" office:value="{v}">'
        f"<text:p>{v}</text:p></table:table-cell>"
    )


def ods_file(path: Path, rows_xml: str, sheet: str = "Studies") -> Path:
    """A minimal OpenDocument spreadsheet (OASIS ODF 1.2) from ``<table:table-row>`` XML."""
    content = (
        f'<?xml version="1.0" encoding="UTF-8"?><office:document-content {_ODS_NS} '
        f'office:version="1.2"><office:body><office:spreadsheet><table:table table:name="{sheet}">'
        f"{rows_xml}</table:table></office:spreadsheet></office:body></office:document-content>"
    )
    manifest = (
        '<?xml version="1.0" encoding="UTF-8"?><manifest:manifest xmlns:manifest="urn:oasis:names:'
        'tc:opendocument:xmlns:manifest:1.0" manifest:version="1.2"><manifest:file-entry '
        'manifest:full-path="/" manifest:media-type="application/vnd.oasis.opendocument.spreadsheet"/>'
        '<manifest:file-entry manifest:full-path="content.xml" manifest:media-type="text/xml"/>'
        "</manifest:manifest>"
    )
    with zipfile.ZipFile(path, "w", zipfile.ZIP_DEFLATED) as zf:
        zf.writestr(zipfile.ZipInfo("mimetype"), "application/vnd.oasis.opendocument.spreadsheet")
        zf.writestr("META-INF/manifest.xml", manifest)
        zf.writestr("content.xml", content)
    return path


def _ods_rows(rows) -> str:
    return "".join(
        "<table:table-row>" + "".join(_ods_cell(v) for v in r) + "</table:table-row>" for r in rows
    )


def stray_cells_ods(folder: Path) -> Path:
    """ods: 200 rows, then repeated empty rows/cells up to a stray cell at the sheet's far corner."""
    far = (
        '<table:table-row table:number-rows-repeated="1048370">'
        '<table:table-cell table:number-columns-repeated="16384"/></table:table-row>'
        "<table:table-row>" + _ods_cell(None, 16383) + _ods_cell("stray") + "</table:table-row>"
    )
    return ods_file(folder / "stray_cells.ods", _ods_rows([GOOD_HEADER, *_ROWS_200]) + far)


def repeated_values_ods(folder: Path) -> Path:
    """ods: one value repeated over 16,000 columns and 10^6 rows (16 x 10^9 cells if expanded)."""
    rep = (
        '<table:table-row table:number-rows-repeated="1000000">'
        + _ods_cell(1, 16000)
        + "</table:table-row>"
    )
    return ods_file(folder / "repeated.ods", _ods_rows([GOOD_HEADER, *GOOD_ROWS]) + rep)


def huge_cell_csv(folder: Path, size: int = 50 * 1024**2) -> Path:
    """A CSV with one 50 MB quoted comment cell (Python's csv module stops at 131,072 chars)."""
    header = [*GOOD_HEADER, "comment"]
    body = _csv_text(header=header, rows=[[*GOOD_ROWS[0], "ok"]])
    big = ",".join(map(str, GOOD_ROWS[1])) + ',"' + "y" * size + '"\n'
    return _write(folder, "huge_cell.csv", body + big)


def wide_csv(folder: Path, n_extra: int = 20_000, n_rows: int = 50) -> Path:
    """50 rows x 20,004 columns: the usual headers then 20,000 invented extra columns."""
    header = ["study_id", "IVSd (mm)", "LVIDd (mm)", "PWd (mm)"] + [
        f"extra_{j}" for j in range(n_extra)
    ]
    extra = ",".join(str(j % 97) for j in range(n_extra))
    lines = [",".join(header)] + [f"W{i:03d},9,47,9,{extra}" for i in range(n_rows)]
    return _write(folder, "wide.csv", "\n".join(lines) + "\n")


def nul_middle_csv(folder: Path) -> Path:
    """A NUL byte in the middle of a cell, far past the start of the file."""
    rows = [[f"N{i:04d}", "F", 160, 60, 9, 47, 9] for i in range(5000)]
    text = _csv_text(rows=rows).encode()
    mid = len(text) // 2
    return _write(folder, "nul_middle.csv", text[:mid] + b"\x00" + text[mid:])


def bom_only_csv(folder: Path) -> Path:
    return _write(folder, "bom_only.csv", b"\xef\xbb\xbf")


def empty_sheet_part_xlsx(folder: Path) -> Path:
    """An xlsx whose xl/worksheets/sheet1.xml is 0 bytes."""
    good = good_xlsx(folder / "_good_for_empty_part.xlsx")
    return _replace_part(good, folder / "empty_part.xlsx", "xl/worksheets/sheet1.xml", b"")


def many_sheets_xlsx(folder: Path, n: int = 200) -> Path:
    """200 sheets of notes; the study list is on the last one."""
    p = folder / "many_sheets.xlsx"
    wb = openpyxl.Workbook()
    wb.active.title = "Sheet 1"
    wb.active.append(["notes only"])
    for i in range(2, n):
        wb.create_sheet(f"Sheet {i}").append(["notes", "only", i])
    ws = wb.create_sheet("Studies")
    ws.append(GOOD_HEADER)
    for r in GOOD_ROWS:
        ws.append(r)
    wb.save(p)
    return p


UNICODE_SHEET = "Échos «2024» 'Ålborg' \"Süd\" ü"[:31]


def unicode_sheet_xlsx(folder: Path) -> Path:
    """A 31-character sheet name with non-ASCII letters and both kinds of quote."""
    return good_xlsx(folder / "unicode_sheet.xlsx", title=UNICODE_SHEET)


def repeated_header_csv(folder: Path) -> Path:
    """Concatenated exports: the header row comes back every 10 lines."""
    lines = []
    for block in range(5):
        lines.append(",".join(GOOD_HEADER))
        lines += [f"R{block}{i},F,160,60,9,47,9" for i in range(9)]
    return _write(folder, "repeated_header.csv", "\n".join(lines) + "\n")


ODD_NUMBERS = ["1e400", "-0", "∞", "NaN", "1.2.3", "١٢", "47"]


def odd_numbers_csv(folder: Path) -> Path:
    """Number-like text a parser may get wrong: overflow, negative zero, infinity sign, NaN, two
    decimal points, Arabic-Indic digits; one plain value."""
    rows = [[f"O{i}", "F", 160, 60, 9, v, 9] for i, v in enumerate(ODD_NUMBERS)]
    return _write(folder, "odd_numbers.csv", _csv_text(rows=rows))


def odd_dates_xlsx(folder: Path) -> Path:
    """A study_date column with '0000-00-00' (text) and serial 2958466 (the day after 9999-12-31,
    stored as a date-formatted number)."""
    p = folder / "odd_dates.xlsx"
    wb = openpyxl.Workbook()
    ws = wb.active
    ws.append([*GOOD_HEADER, "study_date"])
    ws.append([*GOOD_ROWS[0], "0000-00-00"])
    ws.append([*GOOD_ROWS[1], 2958466])
    ws.cell(row=3, column=len(GOOD_HEADER) + 1).number_format = "yyyy-mm-dd"
    ws.append(["D003", "F", 160, 60, 9, 47, 9, 45000])
    ws.cell(row=4, column=len(GOOD_HEADER) + 1).number_format = "yyyy-mm-dd"
    wb.save(p)
    return p


def odd_dates_csv(folder: Path) -> Path:
    rows = [[*GOOD_ROWS[0], "0000-00-00"], [*GOOD_ROWS[1], "2958466"]]
    return _write(
        folder, "odd_dates.csv", _csv_text(header=[*GOOD_HEADER, "study_date"], rows=rows)
    )


def gzip_named_csv(folder: Path) -> Path:
    import gzip

    return _write(folder, "zipped.csv", gzip.compress(_csv_text().encode()))


def dev_zero_link(folder: Path) -> Path:
    p = folder / "studies.csv"
    p.symlink_to("/dev/zero")
    return p


def fifo_csv(folder: Path) -> Path:
    import os

    p = folder / "pipe.csv"
    os.mkfifo(p)
    return p


def folder_named_xlsx(folder: Path) -> Path:
    p = folder / "x.xlsx"
    p.mkdir()
    return p


def sparse_2g_csv(folder: Path) -> Path:
    """A 2 GB sparse file (all NUL bytes, no disk used) named .csv."""
    p = folder / "sparse.csv"
    with open(p, "wb") as fh:
        fh.truncate(2 * 1024**3)
    return p


def big_text_csv(folder: Path) -> Path:
    """A sparse file whose first bytes are a real header, then 2 GB of NUL: must be refused on its
    size, not read."""
    p = folder / "big.csv"
    with open(p, "wb") as fh:
        fh.write(_csv_text().encode())
        fh.truncate(2 * 1024**3)
    return p


def shared_strings_xlsx(folder: Path, n: int = 1_000_000) -> Path:
    """A workbook whose sharedStrings.xml holds 10^6 unique strings though few cells use them."""
    good = good_xlsx(folder / "_good_for_sst.xlsx")
    ns = "http://schemas.openxmlformats.org/spreadsheetml/2006/main"
    sst = (
        f'<?xml version="1.0" encoding="UTF-8"?><sst xmlns="{ns}" count="{n}" uniqueCount="{n}">'
        + "".join(f"<si><t>s{i:07d}</t></si>" for i in range(n))
        + "</sst>"
    ).encode()
    p = folder / "shared_strings.xlsx"
    with zipfile.ZipFile(good) as zin, zipfile.ZipFile(p, "w", zipfile.ZIP_DEFLATED) as zout:
        for info in zin.infolist():
            data = zin.read(info.filename)
            if info.filename == "[Content_Types].xml" and b"sharedStrings" not in data:
                data = data.replace(
                    b"</Types>",
                    b'<Override PartName="/xl/sharedStrings.xml" ContentType="application/'
                    b'vnd.openxmlformats-officedocument.spreadsheetml.sharedStrings+xml"/></Types>',
                )
            if info.filename == "xl/_rels/workbook.xml.rels" and b"sharedStrings" not in data:
                data = data.replace(
                    b"</Relationships>",
                    b'<Relationship Id="rIdSst" Type="http://schemas.openxmlformats.org/'
                    b'officeDocument/2006/relationships/sharedStrings" Target="sharedStrings.xml"/>'
                    b"</Relationships>",
                )
            if info.filename != "xl/sharedStrings.xml":
                zout.writestr(info, data)
        zout.writestr("xl/sharedStrings.xml", sst)
    return p


CORPUS += [
    ("stray_cells_xlsx", stray_cells_xlsx, "finding", "stray_cells_ignored"),
    ("stray_cells_ods", stray_cells_ods, "finding", "stray_cells_ignored"),
    (
        "repeated_values_ods",
        repeated_values_ods,
        "error",
        r"repeated\.ods: sheet 'Studies' holds a table of 1000003 rows x 16000 columns",
    ),
    ("huge_cell_csv", huge_cell_csv, "finding", "cell_too_long"),
    ("nul_middle_csv", nul_middle_csv, "error", r"binary content \(NUL bytes\)"),
    ("bom_only_csv", bom_only_csv, "error", r"bom_only\.csv: .*(empty|no data)"),
    (
        "empty_sheet_part_xlsx",
        empty_sheet_part_xlsx,
        "error",
        r"empty_part\.xlsx: sheet 'Studies' cannot be read .*save it again",
    ),
    ("repeated_header_csv", repeated_header_csv, "finding", "header_repeated"),
    ("many_sheets_xlsx", many_sheets_xlsx, "finding", "sheet_chosen"),
    ("gzip_named_csv", gzip_named_csv, "error", r"zipped\.csv: not readable as UTF-8"),
    ("dev_zero_link", dev_zero_link, "error", r"studies\.csv: is a device, not a regular file"),
    ("fifo_csv", fifo_csv, "error", r"pipe\.csv: is a FIFO \(named pipe\)"),
    ("folder_named_xlsx", folder_named_xlsx, "error", r"x\.xlsx: is a folder"),
    ("sparse_2g_csv", sparse_2g_csv, "error", r"sparse\.csv: the file is 2\.0 GiB, more than"),
    ("big_text_csv", big_text_csv, "error", r"big\.csv: the file is 2\.0 GiB, .*--chunk-rows"),
]

# through the command line: (maker, expected exit code, regex on the one line printed)
CLI_CASES: list[tuple[str, object, int, str]] = [
    (name, maker, 0 if expect == "finding" else 1, "" if expect == "finding" else detail)
    for name, maker, expect, detail in CORPUS
    if name not in ("missing", "uncalculated_formula")
]
