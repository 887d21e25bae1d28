"""Never-harm helpers for writing: atomic files, input hashes, backups, formula-like text, workbook parts.

Everything that touches the user's disk on the writing side goes through here:

- :func:`atomic_files` writes one or more files through temporary files in the target folder and
  moves them into place with ``os.replace`` only when every one of them was written; on any exception
  (``KeyboardInterrupt`` included) the temporaries are removed and earlier outputs stay intact.
- :func:`sha256_file` and :func:`backup_copy` back the "input is never changed" invariant.
- :func:`formula_like_mask`, :func:`formula_like_cells` and :func:`escape_formula_text` deal with text
  that a spreadsheet program would run as a formula when it opens a CSV file.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import re
import shutil
import tempfile
from collections.abc import Iterator
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd

from wallstress import findings as _findings
from wallstress.errors import OutputError

FORMULA_PREFIXES: tuple[str, ...] = ("=", "+", "-", "@", "\t", "\r")
"""First characters that make a spreadsheet program treat a CSV text cell as a formula.

Common practice, no source (the usual CSV-injection list: ``= + - @``, tab and carriage return).
"""

FORMULA_LIKE_CODE = "formula_like_text"

_HYPERLINK_RE = re.compile(r"^\s*(?:https?://|ftp://|mailto:|file:|www\.|\\\\)", re.IGNORECASE)


# --------------------------------------------------------------------------------------------------
# hashes and paths


def sha256_file(path: str | os.PathLike, *, chunk_bytes: int = 1 << 20) -> str:
    """SHA-256 of a file's bytes, as 64 lower-case hex digits.

    Parameters
    ----------
    path : path-like
        The file to hash.
    chunk_bytes : int
        Read size. [bytes]
    """
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for block in iter(lambda: fh.read(chunk_bytes), b""):
            digest.update(block)
    return digest.hexdigest()


def same_file(a: str | os.PathLike | None, b: str | os.PathLike | None) -> bool:
    """True when two paths name the same file (symlinks, ``..`` and case-folding file systems included)."""
    if a is None or b is None:
        return False
    pa, pb = Path(a), Path(b)
    try:
        if pa.exists() and pb.exists():
            return os.path.samefile(pa, pb)
    except OSError:
        pass
    return os.path.normcase(os.path.abspath(pa)) == os.path.normcase(os.path.abspath(pb))


def excel_lock_file(path: str | os.PathLike) -> Path | None:
    """The ``~$name.xlsx`` owner file Excel and LibreOffice leave while a workbook is open, if present."""
    p = Path(path)
    for candidate in (p.with_name("~$" + p.name), p.with_name(".~lock." + p.name + "#")):
        if candidate.exists():
            return candidate
    return None


def _new_file_mode() -> int:
    umask = os.umask(0)
    os.umask(umask)
    return 0o666 & ~umask


# --------------------------------------------------------------------------------------------------
# atomic writing


class AtomicFiles:
    """Temporary files for a set of targets; moved into place together by :func:`atomic_files`."""

    def __init__(self) -> None:
        self._pairs: list[tuple[Path, Path]] = []

    def path(self, target: str | os.PathLike) -> Path:
        """A fresh temporary path in ``target``'s folder; write the target's content there.

        Raises
        ------
        OutputError
            When the folder does not exist or cannot be written.
        """
        target = Path(target)
        folder = target.parent if str(target.parent) else Path(".")
        if not folder.is_dir():
            raise OutputError(
                f"output folder {str(folder)!r} does not exist; create it or choose another -o"
            )
        try:
            fd, tmp = tempfile.mkstemp(
                prefix=f".{target.name}.", suffix=".wallstress-tmp", dir=folder
            )
        except OSError as exc:
            raise OutputError(
                f"cannot write in folder {str(folder)!r} ({exc.strerror}); choose another -o"
            ) from exc
        os.close(fd)
        tmp_path = Path(tmp)
        self._pairs.append((tmp_path, target))
        return tmp_path

    @property
    def targets(self) -> list[Path]:
        return [t for _, t in self._pairs]

    def _commit(self) -> None:
        mode = _new_file_mode()
        for tmp, target in self._pairs:
            try:
                keep = os.stat(target).st_mode & 0o7777 if target.exists() else mode
                os.chmod(tmp, keep)
                with open(tmp, "rb+") as fh:
                    os.fsync(fh.fileno())
            except OSError:
                pass
        for tmp, target in self._pairs:
            os.replace(tmp, target)
        self._pairs = []

    def _discard(self) -> None:
        for tmp, _ in self._pairs:
            with contextlib.suppress(OSError):
                tmp.unlink()
        self._pairs = []


@contextlib.contextmanager
def atomic_files() -> Iterator[AtomicFiles]:
    """Write several files all-or-nothing: temporaries in each target's folder, then ``os.replace``.

    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> with atomic_files() as batch:
    ...     _ = batch.path(d / "a.txt").write_text("hello")
    >>> (d / "a.txt").read_text()
    'hello'

    On any exception inside the block (``KeyboardInterrupt`` included) every temporary file is
    removed, no target is touched, and the exception propagates.
    """
    batch = AtomicFiles()
    try:
        yield batch
    except BaseException:
        batch._discard()
        raise
    try:
        batch._commit()
    except BaseException:
        batch._discard()
        raise


@contextlib.contextmanager
def atomic_path(target: str | os.PathLike) -> Iterator[Path]:
    """One-file form of :func:`atomic_files`: yields the temporary path to write ``target``'s content to."""
    with atomic_files() as batch:
        yield batch.path(target)


def backup_copy(path: str | os.PathLike, *, now: datetime | None = None) -> Path:
    """Copy a file beside itself as ``name.wallstress-backup-YYYYmmdd-HHMMSS.ext`` and verify it.

    Parameters
    ----------
    path : path-like
        The user's file.
    now : datetime, optional
        Time stamp for the name (default: local time now).

    Returns
    -------
    Path
        The backup, byte-identical to ``path`` (checked by SHA-256).

    Raises
    ------
    OutputError
        When the copy cannot be written or does not match the original.
    """
    src = Path(path)
    stamp = (now or datetime.now()).strftime("%Y%m%d-%H%M%S")
    base = f"{src.stem}.wallstress-backup-{stamp}"
    dest = src.with_name(base + src.suffix)
    n = 2
    while dest.exists():
        dest = src.with_name(f"{base}-{n}{src.suffix}")
        n += 1
    try:
        with atomic_path(dest) as tmp:
            shutil.copyfile(src, tmp)
            shutil.copystat(src, tmp)
    except OSError as exc:
        raise OutputError(
            f"cannot write the backup {str(dest)!r} ({exc}); nothing was changed. "
            "Free some space or check permissions, or write to another file with -o instead of --in-place"
        ) from exc
    if sha256_file(dest) != sha256_file(src):
        raise OutputError(
            f"the backup {str(dest)!r} does not match {str(src)!r}; nothing was changed. "
            "Write to another file with -o instead of --in-place"
        )
    return dest


# --------------------------------------------------------------------------------------------------
# formula-like and link-like text


def _text_values(col: pd.Series):
    """The column's ``.str`` accessor when it holds text (non-text cells give NA), else None."""
    if not (isinstance(col.dtype, pd.StringDtype) or col.dtype == object):
        return None
    try:
        return col.str
    except AttributeError:  # object column without any text (numbers, dates)
        return None


def formula_like_mask(values) -> np.ndarray:
    """True where a value is text starting with a formula trigger (:data:`FORMULA_PREFIXES`).

    Parameters
    ----------
    values : Series or array-like
        Cells of one column; numbers, dates and missing values are never formula-like.

    Returns
    -------
    ndarray of bool
    """
    col = values if isinstance(values, pd.Series) else pd.Series(np.asarray(values, dtype=object))
    text = _text_values(col)
    if text is None:
        return np.zeros(len(col), dtype=bool)
    hit = text.startswith(FORMULA_PREFIXES)
    return hit.fillna(False).to_numpy(dtype=bool)


def hyperlink_like_mask(values) -> np.ndarray:
    """True where a value is text that looks like a link (``http://``, ``www.``, ``mailto:``, UNC path)."""
    col = values if isinstance(values, pd.Series) else pd.Series(np.asarray(values, dtype=object))
    text = _text_values(col)
    if text is None:
        return np.zeros(len(col), dtype=bool)
    return text.contains(_HYPERLINK_RE).fillna(False).to_numpy(dtype=bool)


def formula_like_cells(table: pd.DataFrame) -> pd.DataFrame:
    """Every text cell of ``table`` that a spreadsheet program could run as a formula.

    Returns
    -------
    DataFrame
        Columns ``row`` (0-based position), ``column`` (header) and ``value``; one row per cell.
    """
    parts = []
    for name in table.columns:
        mask = formula_like_mask(table[name])
        if mask.any():
            rows = np.flatnonzero(mask)
            parts.append(
                pd.DataFrame(
                    {
                        "row": rows.astype("int64"),
                        "column": str(name),
                        "value": table[name].iloc[rows].astype(object).to_numpy(),
                    }
                )
            )
    if not parts:
        return pd.DataFrame(
            {
                "row": pd.Series([], dtype="int64"),
                "column": pd.Series([], dtype=object),
                "value": pd.Series([], dtype=object),
            }
        )
    return (
        pd.concat(parts, ignore_index=True)
        .sort_values(["row"], kind="stable")
        .reset_index(drop=True)
    )


def formula_like_findings(table: pd.DataFrame, *, escaped: bool = False) -> pd.DataFrame:
    """Findings (code ``formula_like_text``, severity ``warning``) for formula-like text in ``table``.

    Parameters
    ----------
    table : DataFrame
        The table as it is written.
    escaped : bool
        Whether the CSV output prefixed those cells with a single quote.
    """
    cells = formula_like_cells(table)
    if not len(cells):
        return _findings.empty()
    if escaped:
        message = (
            "text starts like a spreadsheet formula; in the CSV output it was prefixed with a single "
            "quote so that a spreadsheet program shows it as text"
        )
    else:
        message = (
            "text starts like a spreadsheet formula; a spreadsheet program opening the CSV output may "
            "run it: check the cell, or write with escape_formulas (--escape-formulas)"
        )
    parts = [
        _findings.make(
            grp["row"].to_numpy(),
            code=FORMULA_LIKE_CODE,
            severity="warning",
            message=message,
            column=str(col),
            values=grp["value"].to_numpy(),
        )
        for col, grp in cells.groupby("column", sort=False)
    ]
    return _findings.concat(parts)


def escape_formula_text(table: pd.DataFrame) -> pd.DataFrame:
    """A copy of ``table`` where formula-like text cells are prefixed with a single quote (``'``).

    Only text cells change; numbers (negative ones included), dates and missing values are kept.
    """
    out = table.copy()
    for name in out.columns:
        mask = formula_like_mask(out[name])
        if mask.any():
            dtype = out[name].dtype
            col = out[name].astype(object)
            col[mask] = "'" + col[mask].astype(str)
            out[name] = col.astype(dtype) if isinstance(dtype, pd.StringDtype) else col
    return out


# --------------------------------------------------------------------------------------------------
# workbook parts openpyxl would lose

_LOSSY_PREFIXES: tuple[tuple[str, str], ...] = (
    ("xl/vbaProject.bin", "macros (VBA project)"),
    ("xl/drawings/drawing", "drawings, shapes or charts"),
    ("xl/charts/", "charts"),
    ("xl/chartsheets/", "chart sheets"),
    ("xl/media/", "images"),
    ("xl/pivotTables/", "pivot tables"),
    ("xl/pivotCache/", "pivot tables"),
    ("xl/slicers/", "slicers"),
    ("xl/slicerCaches/", "slicers"),
    ("xl/timelines/", "timelines"),
    ("xl/timelineCaches/", "timelines"),
    ("xl/externalLinks/", "external links"),
    ("xl/threadedComments/", "threaded comments"),
    ("xl/embeddings/", "embedded objects"),
    ("xl/activeX/", "ActiveX controls"),
    ("xl/ctrlProps/", "form controls"),
    ("xl/model/", "a data model"),
    ("xl/connections.xml", "data connections"),
    ("xl/queryTables/", "query tables"),
    ("xl/richData/", "pictures in cells or rich data types"),
    ("xl/metadata.xml", "dynamic-array formulas or cell metadata"),
    ("xl/dialogsheets/", "dialog sheets"),
    ("xl/macrosheets/", "Excel 4 macro sheets"),
    ("customXml/", "custom XML data"),
)

_VML_NON_NOTE_RE = re.compile(rb'ObjectType\s*=\s*"(?!Note")', re.IGNORECASE)
