"""Row-level validation: rules -> findings. Never raises on a bad row; never drops one.

Each rule is vectorised over the whole column. A value outside its field's ``hard`` range
(``schema.py``) is impossible: it is set to NaN in the canonical table (so every measure that needs it
is NaN) and gets an ``error`` finding. A value outside the ``typical`` range is kept and gets a
``warning``. Consistency rules compare fields of the same row.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from wallstress import findings as fnd
from wallstress.schema.fields import BY_NAME

# IVSd / PWd above which the cube formula (which assumes a symmetric ventricle) misleads.
# Common practice, no source: asymmetric septal thickening is usually called at a ratio of 1.3 or more.
SEPTAL_POSTERIOR_RATIO_MAX = 1.3
ADULT_AGE_YEARS = 18


def validate(
    canonical: pd.DataFrame, labels: dict[str, str] | None = None
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Check a canonical table; return (cleaned copy, findings).

    Parameters
    ----------
    canonical : DataFrame
        Canonical fields in internal units, RangeIndex of input row positions.
    labels : dict, optional
        Canonical field -> the user's header, for the findings' ``column``.
    """
    cleaned, parts = validate_parts(canonical, labels)
    return cleaned, fnd.concat(parts, categorical=True)


def validate_parts(
    canonical: pd.DataFrame, labels: dict[str, str] | None = None
) -> tuple[pd.DataFrame, list[pd.DataFrame]]:
    """:func:`validate` with the findings as one table per rule, in rule order (not yet joined:
    the pipeline joins every step's findings once)."""
    labels = labels or {}
    # numbers as float arrays; a rule that blanks values makes a new array (never writes into the
    # input), and the cleaned table is assembled from whole columns once at the end
    nums: dict[str, np.ndarray] = {}
    for name in canonical.columns:
        f = BY_NAME.get(name)
        if f is not None and f.kind == "number":
            nums[name] = canonical[name].to_numpy(dtype=float)
    given = dict(nums)
    parts: list[pd.DataFrame] = []

    def label(name: str) -> str:
        return labels.get(name, name)

    for name, v in nums.items():
        f = BY_NAME[name]
        with np.errstate(invalid="ignore"):
            if f.hard is not None:
                bad = (v < f.hard[0]) | (v > f.hard[1])
                if bad.any():
                    rows = np.flatnonzero(bad)
                    parts.append(
                        fnd.make(
                            rows,
                            code=f"{name}_impossible",
                            severity="error",
                            column=label(name),
                            field=name,
                            values=v[rows],
                            message=(
                                f"{f.meaning} outside {f.hard[0]:g}-{f.hard[1]:g} {f.unit} is impossible; "
                                f"not used. Check the value and its unit."
                            ),
                        )
                    )
                    v = nums[name] = np.where(bad, np.nan, v)
            if f.typical is not None:
                odd = (v < f.typical[0]) | (v > f.typical[1])
                if odd.any():
                    rows = np.flatnonzero(odd)
                    parts.append(
                        fnd.make(
                            rows,
                            code=f"{name}_unusual",
                            severity="warning",
                            column=label(name),
                            field=name,
                            values=v[rows],
                            message=(
                                f"{f.meaning} outside the usual adult {f.typical[0]:g}-{f.typical[1]:g} {f.unit}; "
                                f"used, but check the value and its unit."
                            ),
                        )
                    )

    def col(name):
        return nums.get(name)

    def rule(mask, code, severity, message, field, values=None):
        mask = np.asarray(mask, dtype=bool)
        if mask.any():
            rows = np.flatnonzero(mask)
            parts.append(
                fnd.make(
                    rows,
                    code=code,
                    severity=severity,
                    message=message,
                    column=label(field),
                    field=field,
                    values=None if values is None else np.asarray(values)[rows],
                )
            )

    lvidd, lvids = col("lvidd_cm"), col("lvids_cm")
    if lvidd is not None and lvids is not None:
        with np.errstate(invalid="ignore"):
            bad = lvids >= lvidd
        rule(
            bad,
            "lvids_not_below_lvidd",
            "error",
            "LVIDs is not smaller than LVIDd: systolic measures (FS, volumes, stress, midwall) not computed. "
            "Check that the diameters are not swapped.",
            "lvids_cm",
            lvids,
        )
        if bad.any():
            nums["lvids_cm"] = np.where(bad, np.nan, lvids)

    for sys_name, dia_name, code in (
        ("pws_cm", "pwd_cm", "posterior_wall_thins_in_systole"),
        ("ivss_cm", "ivsd_cm", "septum_thins_in_systole"),
    ):
        s, d = col(sys_name), col(dia_name)
        if s is not None and d is not None:
            with np.errstate(invalid="ignore"):
                rule(
                    s < d,
                    code,
                    "warning",
                    f"{BY_NAME[sys_name].meaning} is thinner than at end-diastole; walls thicken as the "
                    "ventricle ejects. Check the measurement.",
                    sys_name,
                    s,
                )

    ivsd, pwd = col("ivsd_cm"), col("pwd_cm")
    if ivsd is not None and pwd is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            ratio = ivsd / pwd
            rule(
                ratio >= SEPTAL_POSTERIOR_RATIO_MAX,
                "septum_disproportionate",
                "warning",
                f"IVSd/PWd is {SEPTAL_POSTERIOR_RATIO_MAX:g} or more (asymmetric septal thickening): the linear "
                "mass formula assumes a symmetric ventricle and overestimates mass. Consider a 2D or 3D method.",
                "ivsd_cm",
                ratio,
            )

    sbp, dbp = col("sbp_mmhg"), col("dbp_mmhg")
    if sbp is not None and dbp is not None:
        with np.errstate(invalid="ignore"):
            bad = dbp >= sbp
        rule(
            bad,
            "dbp_not_below_sbp",
            "error",
            "Diastolic pressure is not below systolic: pressures not used. Check that they are not swapped.",
            "dbp_mmhg",
            dbp,
        )
        if bad.any():
            nums["sbp_mmhg"] = np.where(bad, np.nan, sbp)
            nums["dbp_mmhg"] = np.where(bad, np.nan, dbp)

    age = col("age_years")
    if age is not None:
        with np.errstate(invalid="ignore"):
            rule(
                age < ADULT_AGE_YEARS,
                "under_18",
                "warning",
                "Under 18 years: adult reference values and cut-offs do not apply; use paediatric z-scores.",
                "age_years",
                age,
            )

    out = canonical
    n = len(out)
    if "sex" not in out.columns:
        parts.append(
            fnd.make(
                [-1],
                code="no_sex_column",
                severity="warning",
                column="sex",
                field="sex",
                message="No sex column: sex-specific classes and grades are left empty. Add a "
                "column 'sex' (F/M) or map yours with --columns.",
            )
        )
        rule(
            np.ones(n, bool),
            "sex_missing",
            "warning",
            "Sex unknown: sex-specific classes and grades left empty.",
            "sex",
        )
    else:
        s = out["sex"]
        if isinstance(s.dtype, pd.CategoricalDtype) and set(s.cat.categories) <= {"F", "M"}:
            unknown = s.array.codes < 0  # the mapped column (cell_parse.SEX_DTYPE): no text compare
        else:
            unknown = ~s.isin(["F", "M"]).to_numpy()
        rule(
            unknown,
            "sex_missing",
            "warning",
            "Sex missing or unreadable: sex-specific classes and grades left empty (never guessed).",
            "sex",
        )

    if "patient_id" in out.columns and "study_date" in out.columns:
        dup = _repeated_pairs(out["patient_id"], out["study_date"])
        rule(
            dup,
            "duplicate_study",
            "warning",
            "Another study of the same patient on the same date: check for a duplicate export.",
            "study_date",
        )
    if "study_id" in out.columns:
        sid = out["study_id"]
        dup = _repeated_ids(sid)
        if dup.any():
            rule(
                dup,
                "duplicate_study_id",
                "warning",
                "The same study identifier appears on more than one row.",
                "study_id",
                sid.to_numpy(dtype=object),
            )

    # changed columns are new arrays; unchanged ones stay the input's Series (shared, copied on write)
    cleaned = pd.DataFrame(
        {
            name: nums[name] if name in nums and nums[name] is not given[name] else canonical[name]
            for name in canonical.columns
        },
        index=canonical.index,
        copy=False,
    )
    return cleaned, parts


def _repeated_ids(sid: pd.Series) -> np.ndarray:
    """True on every row whose identifier (an integer or a text; missing for none) appears on
    another row too.

    Integer ids (``Int64``, as ids written as whole numbers are read) are compared as integers: a
    strictly increasing column (the usual export) is seen to hold no repeats in one pass. Texts
    are hashed (about a quarter of a second per 10^6).
    """
    present = sid.notna().to_numpy()
    if isinstance(sid.dtype, pd.Int64Dtype):  # ids read from whole numbers (cell_parse.parse_ids)
        return _repeated_integers(sid.to_numpy(dtype="int64", na_value=0), present)
    return sid.duplicated(keep=False).to_numpy() & present


def _repeated_pairs(a: pd.Series, b: pd.Series) -> np.ndarray:
    """True on every row whose (a, b) pair, both present, appears on another row too.

    Each column is factorized once and the pair becomes one integer (a's code times the number
    of b's values, plus b's code), so that one hash of integers finds the repeats; a code of -1
    (missing) never matches a pair of present values, and rows with one missing are left out.
    """
    ca, _ = pd.factorize(a)
    cb, ub = pd.factorize(b)
    have = (ca >= 0) & (cb >= 0)
    key = ca.astype(np.int64) * (len(ub) + 1) + cb
    return pd.Series(key).duplicated(keep=False).to_numpy() & have


def _repeated_integers(key: np.ndarray, present: np.ndarray) -> np.ndarray:
    """:func:`_repeated_ids` of integer ids (``key`` arbitrary where ``present`` is False)."""
    if present.all():
        if key.size < 2 or bool((key[1:] > key[:-1]).all()):  # the usual export: increasing
            return np.zeros(key.size, dtype=bool)
        return pd.Series(key).duplicated(keep=False).to_numpy()
    dup = np.zeros(present.size, dtype=bool)  # among the rows that have an id only
    dup[present] = pd.Series(key[present]).duplicated(keep=False).to_numpy()
    return dup
