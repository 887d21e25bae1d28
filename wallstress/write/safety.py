"""Never-harm helpers for writing: atomic files, input hashes, backups, formula-like text, workbook parts.

Everything that touches the user's disk on the writing side goes through here:

- :func:`atomic_files` writes one or more files through temporary files in the target folder and
  moves them into place with ``os.replace`` only when every one of them was written; on any exception
  (``KeyboardInterrupt`` included) the temporaries are removed and earlier outputs stay intact.
- :func:`protected_inputs` names the inputs of a run: no atomic write may target one of them, and a
  commit is refused (nothing replaced) when one changed while the run was working;
  :func:`check_outputs` compares every planned output with every input before any work starts.
- Temporaries are named ``.NAME.PID.RANDOM.wallstress-tmp``; those of a process that is gone (a run
  killed with SIGKILL) are removed by the next run that writes in the same folder.
- :func:`sha256_file` and :func:`backup_copy` back the "input is never changed" invariant.
"""

from __future__ import annotations

import contextlib
import contextvars
import glob
import hashlib
import os
import re
import shutil
import tempfile
from collections.abc import Iterator
from datetime import datetime
from pathlib import Path

from wallstress.errors import OutputError

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


_PROTECTED: contextvars.ContextVar[tuple] = contextvars.ContextVar(
    "wallstress_protected_inputs", default=()
)


def _signature(path: Path) -> tuple | None:
    try:
        st = os.stat(path)
    except OSError:
        return None
    return (st.st_dev, st.st_ino, st.st_size, st.st_mtime_ns)


@contextlib.contextmanager
def protected_inputs(*paths) -> Iterator[None]:
    """While the block runs, the files in ``paths`` are inputs: no atomic write may target one of
    them (:class:`AtomicFiles` refuses), and a commit is refused, replacing nothing, when one of
    them changed since the block began. ``None`` entries are ignored."""
    entries = tuple((Path(p), _signature(Path(p))) for p in paths if p is not None)
    token = _PROTECTED.set(_PROTECTED.get() + entries)
    try:
        yield
    finally:
        _PROTECTED.reset(token)


def _input_named(target: Path) -> Path | None:
    return next((p for p, _ in _PROTECTED.get() if same_file(target, p)), None)


def check_outputs(outputs, inputs=()) -> list[Path]:
    """Refuse, before any work, a set of outputs that would harm an input or each other.

    Every planned output (main file and side files) is compared with every input (``inputs`` and
    the :func:`protected_inputs` in force; resolved path and same file) and with the others; an
    output that is an existing folder, or whose folder does not exist, is refused too.

    Returns
    -------
    list of Path
        The outputs, as paths.

    Raises
    ------
    OutputError
        One line naming the output and what to do.
    """
    every_input = [Path(i) for i in inputs if i is not None] + [p for p, _ in _PROTECTED.get()]
    outs: list[Path] = []
    for out in map(Path, outputs):
        if out.is_dir():
            raise OutputError(f"{out} is a folder; give a file name for the output (-o)")
        harmed = next((i for i in every_input if same_file(out, i)), None)
        if harmed is not None:
            what = (
                "your input" if same_file(harmed, out) and harmed == out else f"the input {harmed}"
            )
            raise OutputError(
                f"writing {out} would overwrite {what}; choose another -o (inputs are never "
                "written over)"
            )
        twin = next((o for o in outs if same_file(out, o)), None)
        if twin is not None:
            raise OutputError(f"two outputs of this run would both be {out}; choose another -o")
        folder = out.parent if str(out.parent) else Path(".")
        if not folder.is_dir():
            raise OutputError(
                f"output folder {str(folder)!r} does not exist; create it or choose another -o"
            )
        outs.append(out)
    return outs


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


TEMP_SUFFIX = ".wallstress-tmp"


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except (PermissionError, OSError):
        return True
    return True


def remove_stale_temporaries(folder: Path, name: str) -> list[Path]:
    """Remove our temporaries of ``name`` in ``folder`` left by a process that is gone (a run
    killed before it could clean up); a running process's temporaries are left alone."""
    removed = []
    pattern = os.path.join(glob.escape(str(folder)), f".{glob.escape(name)}.*{TEMP_SUFFIX}")
    for found in glob.glob(pattern):
        middle = os.path.basename(found)[len(name) + 2 : -len(TEMP_SUFFIX)]
        pid_text = middle.split(".", 1)[0]
        if pid_text.isdigit() and int(pid_text) != os.getpid() and not _alive(int(pid_text)):
            with contextlib.suppress(OSError):
                os.unlink(found)
                removed.append(Path(found))
    return removed


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
        if target.is_dir():
            raise OutputError(f"{target} is a folder; give a file name for the output")
        harmed = _input_named(target)
        if harmed is not None:
            raise OutputError(
                f"writing {target} would overwrite the input {harmed}; choose another output name "
                "(inputs are never written over)"
            )
        remove_stale_temporaries(folder, target.name)
        try:
            fd, tmp = tempfile.mkstemp(
                prefix=f".{target.name}.{os.getpid()}.", suffix=TEMP_SUFFIX, dir=folder
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
        for path, before in _PROTECTED.get():
            if _signature(path) != before:
                raise OutputError(
                    f"the input {path} changed while this run was working; nothing was written "
                    "(earlier outputs are as they were): run again"
                )
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
