"""Errors that wallstress raises on purpose.

A row that cannot be computed never raises: it gets NaN and a finding. These exceptions are for a
file or a call that cannot be used at all; the command line turns them into one line and an exit code.
"""

from __future__ import annotations


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
