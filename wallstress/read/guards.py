"""Checks on a study-list file before any parser sees it: what it is, and whether it is safe to open.

The contents decide the format (zip package: xlsx or ods; ``PAR1``: parquet; otherwise text). Refused
with one line saying why and what to do: legacy binary workbooks (.xls), password-protected
(encrypted) workbooks, damaged or misnamed packages, zip containers beyond ``ZIP_LIMITS`` (entries,
uncompressed sizes, compression ratio: zip bombs) and XML parts that declare a DOCTYPE or entity
(entity-expansion attacks).

References
----------
ECMA-376, Office Open XML File Formats, 5th ed., 2016.
OASIS, Open Document Format for Office Applications (OpenDocument) v1.2, 2011.
[MS-OFFCRYPTO], Office Document Cryptography Structure (encrypted OOXML is an OLE compound file
holding ``EncryptionInfo`` and ``EncryptedPackage`` streams).
"""

from __future__ import annotations

import io
import os
import re
import stat
import zipfile
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from wallstress.errors import InputError


@dataclass(frozen=True)
class ZipLimits:
    """Limits a workbook's zip container must respect before it is parsed (zip-bomb guard)."""

    max_entries: int = 10_000
    max_entry_bytes: int = 2 * 1024**3  # uncompressed, per entry
    max_total_bytes: int = 4 * 1024**3  # uncompressed, all entries
    max_ratio: float = 200.0  # uncompressed / compressed, for entries over ratio_floor_bytes
    ratio_floor_bytes: int = 1024**2


ZIP_LIMITS = ZipLimits()


READ_LIMIT_BYTES = 512 * 1024**2  # a whole study list read into memory at once

# A study list has one row per study and tens to a few thousand columns (the widest we read is
# 20,000). A line of more fields than MAX_FIELDS is not a study list, and parsing it would take
# memory out of all proportion (a 50 MB line of 25 million fields): it is refused before any parser
# runs. A long line of few fields (one 50 MB comment) is read, with a finding on the cell.
MAX_FIELDS = 100_000
_LONG_LINE = 64 * 1024  # lines longer than this have their delimiters counted
_SCAN_BYTES = 16 * 1024**2


def check_text_lines(p: Path, data: bytes | None, encoding: str, delimiters=(",", ";", "\t", "|")):
    """Refuse, before parsing, a text file with a line of ``MAX_FIELDS`` fields or more.

    Delimiters are counted as bytes, quoted ones too, which only errs towards refusing absurd lines.
    ``data`` is the file's bytes, or None to stream the file at ``p`` in windows (a file read in
    chunks); either way no second copy of the file is made.
    """
    if encoding.startswith("utf-16"):  # rare: check the text as UTF-8 bytes
        raw = data if data is not None else p.read_bytes()
        data = raw.decode(encoding, errors="replace").encode("utf-8")
    seps = [d.encode() for d in delimiters]

    def windows():
        if data is not None:
            for s in range(0, len(data), _SCAN_BYTES):
                yield data[s : s + _SCAN_BYTES]
            return
        with open(p, "rb") as fh:
            while block := fh.read(_SCAN_BYTES):
                yield block

    line_no, open_len, open_counts = 1, 0, [0] * len(seps)
    for block in windows():
        ends = np.flatnonzero(np.frombuffer(block, dtype=np.uint8) == 10)
        starts = np.concatenate([[0], ends + 1])
        stops = np.concatenate([ends, [len(block)]])
        lengths = stops - starts
        lengths[0] += open_len  # the line carried over from the last window
        for i in np.flatnonzero(lengths > _LONG_LINE):
            a, b = int(starts[i]), int(stops[i])
            counts = [block.count(sep, a, b) for sep in seps]
            if i == 0:
                counts = [c + o for c, o in zip(counts, open_counts, strict=True)]
            if i < len(ends):  # a whole line: judge it
                _check_fields(p, line_no + int(i), counts, delimiters)
        # the last segment stays open into the next window
        a = int(starts[-1])
        tail = [block.count(sep, a) for sep in seps]
        if len(ends):
            open_len, open_counts = int(lengths[-1]), tail
        else:
            open_len += len(block)
            open_counts = [c + o for c, o in zip(tail, open_counts, strict=True)]
        _check_fields(p, line_no + len(ends), open_counts, delimiters)
        line_no += len(ends)


def _check_fields(p: Path, line: int, counts, delimiters) -> None:
    for n, d in zip(counts, delimiters, strict=True):
        if n >= MAX_FIELDS:
            raise InputError(
                f"{p}: line {line} has more than {MAX_FIELDS:,} fields (at least {n + 1:,} separated by "
                f"{d!r}); a study list has one row per study and at most a few thousand columns: "
                "check that this is the file you meant"
            )


def _size_text(n: int) -> str:
    for unit, size in (("GiB", 1024**3), ("MiB", 1024**2), ("KiB", 1024)):
        if n >= size:
            return f"{n / size:.1f} {unit}"
    return f"{n} bytes"


def check_regular_file(p: Path) -> os.stat_result:
    """The file's ``os.stat`` after checking that it exists and is a regular file (symlinks are
    followed; a folder, device, FIFO or socket is refused with one line). Nothing is opened.

    Raises
    ------
    InputError
        Missing, unreadable, a folder, or not a regular file.
    """
    try:
        st = os.stat(p)
    except FileNotFoundError:
        raise InputError(f"{p}: file not found; check the path and the file name") from None
    except OSError as exc:
        raise InputError(
            f"{p}: cannot be read ({exc.strerror or exc}); check the path and its permissions"
        ) from None
    if stat.S_ISDIR(st.st_mode):
        raise InputError(f"{p}: is a folder, not a file; pass the study list file itself")
    if not stat.S_ISREG(st.st_mode):
        what = (
            "a FIFO (named pipe)"
            if stat.S_ISFIFO(st.st_mode)
            else "a socket"
            if stat.S_ISSOCK(st.st_mode)
            else "a device"
        )
        raise InputError(
            f"{p}: is {what}, not a regular file; save the study list as a file and pass that"
        )
    return st


def read_file_bytes(p: Path, limit: int = READ_LIMIT_BYTES) -> bytes:
    """The bytes of a regular file of at most ``limit`` bytes, or an ``InputError`` saying why not.

    Checked before anything is read: the path exists, is a regular file (after following
    symlinks; a device such as ``/dev/zero``, a FIFO or a socket could block or never end) and its
    size is within ``limit``. A file whose size grows past ``limit`` while it is read (or that
    reports a wrong size) is refused too: at most ``limit + 1`` bytes are ever read.

    Parameters
    ----------
    p : Path
        The study-list file.
    limit : int
        Largest file read at once. [bytes]

    Raises
    ------
    InputError
        Missing, a folder, not a regular file, unreadable, or larger than ``limit``.
    """
    st = check_regular_file(p)
    too_big = (
        f"{p}: the file is {{size}}, more than the {_size_text(limit)} read at once; for a CSV or "
        "parquet study list use --chunk-rows (e.g. --chunk-rows 100000), or split the file"
    )
    if st.st_size > limit:
        raise InputError(too_big.format(size=_size_text(st.st_size)))
    try:
        with open(p, "rb") as fh:
            data = fh.read(limit + 1)
    except OSError as exc:
        raise InputError(
            f"{p}: cannot be read ({exc.strerror or exc}); check its permissions"
        ) from exc
    if len(data) > limit:
        raise InputError(too_big.format(size=f"over {_size_text(limit)}"))
    return data


_OLE_MAGIC = b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1"


_ENCRYPTED_MARK = "EncryptedPackage".encode("utf-16-le")


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
