"""Which of a lab's healthy subjects a calibration may use, and whether there are enough of them.

A subject is used when its sex is F or M and the pipeline found no error in an input the fitted
measures depend on. CLSI EP28-A3c (2010) asks for at least 120 reference subjects per partition for a
nonparametric reference interval (from memory); fewer are refused unless ``allow_small=True`` and at
least :data:`SMALL_FLOOR` are present.

References
----------
CLSI. Defining, establishing, and verifying reference intervals in the clinical laboratory; approved
guideline, 3rd ed. CLSI document EP28-A3c, 2010 (120 subjects per partition; from memory).
"""

from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd

from wallstress.analysis.result import Analysis
from wallstress.errors import InputError
from wallstress.schema.fields import SEXES
from wallstress.schema.vocabulary import OUT

CLSI_MIN_PER_SEX = 120
"""Reference subjects per partition for a nonparametric interval (CLSI EP28-A3c, 2010; from memory)."""


SMALL_FLOOR = 40
"""Fewest subjects per sex accepted with ``allow_small=True`` (below it the 97.5th centile is in
effect the largest value or two; common practice, no source)."""


EXCLUDING_FLAGS: tuple[str, ...] = ("_impossible", "lvids_not_below_lvidd", "dbp_not_below_sbp")
"""Flag codes (or parts of codes) that exclude a subject: the pipeline found an error in an input
the fitted measures depend on."""


def _as_frame(frame_or_analysis) -> tuple[pd.DataFrame, dict]:
    if isinstance(frame_or_analysis, Analysis):
        return frame_or_analysis.frame().reset_index(drop=True), dict(
            frame_or_analysis.methods or {}
        )
    if isinstance(frame_or_analysis, pd.DataFrame):
        return frame_or_analysis.reset_index(drop=True), {}
    raise TypeError(
        "calibrate() takes an Analysis (from wallstress.analyse_with_findings) or its .frame(), "
        f"got {type(frame_or_analysis).__name__}"
    )


def _eligible(frame: pd.DataFrame) -> tuple[np.ndarray, list[str]]:
    """Mask of usable subjects and notes on what was excluded."""
    n = len(frame)
    notes: list[str] = []
    if "sex" not in frame.columns:
        raise InputError(
            "the healthy subjects have no 'sex' column; sex-specific limits need it (F/M). "
            "Add the column or map yours with --columns"
        )
    sex = frame["sex"].astype(object)
    sex_ok = sex.isin(SEXES).to_numpy()
    if OUT.flags in frame.columns:
        flags = frame[OUT.flags].fillna("").astype(str)
        pattern = "|".join(EXCLUDING_FLAGS)
        err = flags.str.contains(pattern, regex=True).to_numpy()
    else:
        err = np.zeros(n, dtype=bool)
    if (~sex_ok).any():
        notes.append(f"{int((~sex_ok).sum())} subject(s) excluded: sex missing or not F/M.")
    if (err & sex_ok).any():
        notes.append(
            f"{int((err & sex_ok).sum())} subject(s) excluded: an input error flagged by the pipeline "
            f"(flags containing {', '.join(EXCLUDING_FLAGS)})."
        )
    return sex_ok & ~err, notes


def _required(min_per_sex: int, allow_small: bool) -> int:
    if (
        isinstance(min_per_sex, bool)
        or not isinstance(min_per_sex, (int, np.integer))
        or min_per_sex < 2
    ):
        raise ValueError(
            f"min_per_sex={min_per_sex!r} must be a whole number >= 2; the default, "
            f"{CLSI_MIN_PER_SEX}, follows CLSI EP28-A3c"
        )
    return min(int(min_per_sex), SMALL_FLOOR) if allow_small else int(min_per_sex)


def _too_few_message(counts: dict, min_per_sex: int, allow_small: bool) -> str:
    have = ", ".join(f"{s}: {counts[s]}" for s in SEXES)
    if allow_small:
        need = min(min_per_sex, SMALL_FLOOR)
        return (
            f"too few healthy subjects to fit reference limits ({have} usable): even with "
            f"allow_small at least {need} per sex are needed; a nonparametric 97.5th centile needs at "
            f"least {CLSI_MIN_PER_SEX} per sex (CLSI EP28-A3c, 2010). Add subjects, or keep a "
            "published reference set"
        )
    return (
        f"too few healthy subjects to fit reference limits ({have} usable): at least {min_per_sex} "
        f"per sex are needed (a nonparametric 97.5th centile needs {CLSI_MIN_PER_SEX} per sex, CLSI "
        f"EP28-A3c, 2010). Add subjects, or allow a small sample (--allow-small on the command "
        f"line, allow_small=True from Python) to fit from at least {SMALL_FLOOR} per sex with wide "
        "intervals"
    )


def _data_hash(frame: pd.DataFrame, cols: list[str]) -> str:
    h = pd.util.hash_pandas_object(frame[cols], index=False).to_numpy()
    return hashlib.sha256(h.tobytes()).hexdigest()[:12]
