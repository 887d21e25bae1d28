"""Array plumbing shared by the formula modules (numpy only, no pandas import).

A formula takes scalars, ndarrays or pandas Series. ``as_arrays`` turns every input into a float
ndarray (missing values, including pandas ``NA``, become NaN) and remembers the first Series it saw;
``restore`` gives the result back in the caller's type: a Series with that Series' index, a 0-d
result as a numpy float, anything else as an ndarray.
"""

from __future__ import annotations

import numbers
from collections.abc import Sequence

import numpy as np


def _is_series(value: object) -> bool:
    # Duck-typed so that the formula modules never import pandas.
    return hasattr(value, "index") and hasattr(value, "to_numpy") and getattr(value, "ndim", 0) == 1


def _to_float(value: object) -> np.ndarray:
    if value is None:
        return np.asarray(np.nan)
    if hasattr(value, "to_numpy"):
        try:
            return value.to_numpy(dtype=float, na_value=np.nan)
        except (TypeError, ValueError):
            return np.asarray(value.to_numpy(dtype=object), dtype=float)
    return np.asarray(value, dtype=float)


def as_arrays(*values: object) -> tuple[list[np.ndarray], object | None]:
    """Float arrays of ``values`` and the Series (if any) whose index the result keeps.

    Raises
    ------
    ValueError
        When two Series inputs carry different indexes (positional arithmetic would pair the wrong
        rows): align them first, e.g. ``b.reindex(a.index)``.
    """
    template = None
    for value in values:
        if _is_series(value):
            if template is None:
                template = value
            elif not value.index.equals(template.index):
                raise ValueError(
                    "Series inputs have different indexes; align them first "
                    "(e.g. other.reindex(first.index)) so each row pairs with its own values"
                )
    return [_to_float(v) for v in values], template


def restore(result: np.ndarray, template: object | None):
    """``result`` in the caller's type (see module docstring)."""
    result = np.asarray(result, dtype=float)
    if template is not None:
        if result.shape != (len(template),):
            result = np.broadcast_to(result, (len(template),)).copy()
        return type(template)(result, index=template.index)
    if result.ndim == 0:
        return np.float64(result[()])
    return result


def _within(x: np.ndarray, *, above_zero: bool, at_zero: bool) -> bool:
    """True when every non-NaN value of ``x`` is finite and above (or at) zero: the guard would
    change nothing. Two reductions without temporaries, cheaper than building the guarded copy."""
    if x.ndim == 0 or x.size == 0 or x.dtype.kind != "f":
        return False
    lo, hi = np.fmin.reduce(x, axis=None), np.fmax.reduce(x, axis=None)  # NaN only if all NaN
    if np.isnan(hi):  # every value NaN: nothing to blank
        return True
    if not hi < np.inf:  # +inf present
        return False
    if not above_zero:
        return bool(lo > -np.inf)
    return bool(lo >= 0) if at_zero else bool(lo > 0)


def finite_or_nan(x: np.ndarray) -> bool:
    """True when ``x`` (a float array) holds no +/-inf; NaN is allowed. Two reductions, no
    temporary array."""
    return x.size == 0 or _within(x, above_zero=False, at_zero=False)


def positive(x: np.ndarray) -> np.ndarray:
    """``x`` where it is finite and > 0, NaN elsewhere (lengths, pressures, volumes, times).

    Returns ``x`` itself when nothing needs blanking (the formulas never write into their inputs);
    a caller that hands the result out as its own copies it.
    """
    if _within(x, above_zero=True, at_zero=False):
        return x
    with np.errstate(invalid="ignore"):
        return np.where(np.isfinite(x) & (x > 0), x, np.nan)


def non_negative(x: np.ndarray) -> np.ndarray:
    """``x`` where it is finite and >= 0, NaN elsewhere (``x`` itself when nothing changes)."""
    if _within(x, above_zero=True, at_zero=True):
        return x
    with np.errstate(invalid="ignore"):
        return np.where(np.isfinite(x) & (x >= 0), x, np.nan)


def finite(x: np.ndarray) -> np.ndarray:
    """``x`` where it is finite, NaN elsewhere (+/-inf becomes NaN; ``x`` itself when none)."""
    if _within(x, above_zero=False, at_zero=False):
        return x
    return np.where(np.isfinite(x), x, np.nan)


def check_choice(name: str, value: str, valid: Sequence[str]) -> str:
    """Return ``value`` if it is one of ``valid``; otherwise raise a ValueError that lists them."""
    if value not in valid:
        listed = ", ".join(repr(v) for v in valid)
        raise ValueError(f"{name}={value!r} is not a known method; pass one of: {listed}")
    return value


def require_real(name: str, value) -> float:
    if (
        isinstance(value, bool)
        or not isinstance(value, numbers.Real)
        or not np.isfinite(float(value))
    ):
        raise ValueError(f"{name}={value!r} must be a finite real number")
    return float(value)
