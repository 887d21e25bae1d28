"""Errors that wallstress raises on purpose.

A row that cannot be computed never raises: it gets NaN and a finding. These exceptions are for a
file or a call that cannot be used at all; the command line turns them into one line and an exit code.
"""

from __future__ import annotations

import errno


class WallstressError(Exception):
    """Base class: something the user can fix, described in the message."""

    exit_code = 1


class InputError(WallstressError):
    """The input (file, sheet, table) cannot be used. The message says why and what to do."""

    exit_code = 1


class ReferenceSetError(WallstressError):
    """A reference set is unknown or malformed."""

    exit_code = 1


class OutputError(WallstressError):
    """An output cannot be written safely (e.g. it would overwrite the input)."""

    exit_code = 1


def os_message(exc: OSError) -> str:
    """What went wrong with a file, in words, and what to do."""
    where = f" ({exc.filename})" if exc.filename else ""
    if exc.errno == errno.ENOSPC:
        return f"the disk is full{where}; free some space or write elsewhere with -o (nothing was written)"
    if exc.errno in (errno.EACCES, errno.EPERM, errno.EROFS):
        return f"not allowed to write or read{where}; check the folder's permissions or choose another -o"
    if exc.errno == errno.EISDIR:
        return f"a folder was given where a file is needed{where}; give a file name"
    if exc.errno == errno.ENAMETOOLONG:
        return f"a file name is too long{where}; choose a shorter one"
    return f"{exc.strerror or str(exc) or exc.__class__.__name__}{where}"


UNEXPECTED = "unexpected"


def describe(exc: BaseException) -> tuple[str, int | str]:
    """The one message a user sees for a failed job, and its exit code (2 usage, 130 interrupted;
    ``UNEXPECTED`` for a fault of ours, whose message asks for a report). The command line and the
    web page both say it, so a bad file gets the same words everywhere."""
    if isinstance(exc, WallstressError):
        return str(exc) or exc.__class__.__name__, getattr(exc, "exit_code", 1)
    if isinstance(exc, ValueError):  # a wrong option value
        return str(exc), 2
    if isinstance(exc, KeyboardInterrupt):
        return "interrupted; no partial output was left", 130
    if isinstance(exc, MemoryError):
        return (
            "not enough memory for this file; for a large CSV or parquet use --chunk-rows 200000",
            1,
        )
    if isinstance(exc, OSError):
        return os_message(exc), 1
    return f"unexpected problem ({exc.__class__.__name__}: {exc})", UNEXPECTED
