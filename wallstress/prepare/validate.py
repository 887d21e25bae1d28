"""Row-level validation: rules -> findings. Never raises on a bad row; never drops one.

Each rule is vectorised over the whole column. A value outside its field's ``hard`` range
(``schema/fields.py``) is impossible: it is set to NaN in the canonical table (so every measure that needs it
is NaN) and gets an ``error`` finding. A value outside the ``typical`` range is kept and gets a
``warning``. Consistency rules compare fields of the same row.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from wallstress import findings as fnd
from wallstress.schema.fields import BY_NAME, SEXES

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


class _Check:
    """The numbers of a canonical table under validation, and the findings of the rules so far.

    A rule that blanks values makes a new array (never writes into the input); the cleaned table is
    assembled from whole columns once at the end.
    """

    def __init__(self, canonical: pd.DataFrame, labels: dict[str, str], raw=None, numbers=True):
        self.canonical, self.labels = canonical, labels
        # the user's cells, so that a finding shows a value as it was written (4.7 under
        # "LVIDd (mm)", never the 0.47 cm it was read as)
        self.raw = raw if raw is not None and raw.columns.is_unique else None
        self.nums: dict[str, np.ndarray] = {
            name: canonical[name].to_numpy(dtype=float)
            for name in canonical.columns
            if numbers and name in BY_NAME and BY_NAME[name].kind == "number"
        }
        self.given = dict(self.nums)
        self.parts: list[pd.DataFrame] = []

    def col(self, name: str) -> np.ndarray | None:
        return self.nums.get(name)

    def rule(self, mask, code, severity, message, field, values=None, coded=None) -> None:
        """Findings for the rows in ``mask``, showing each one's cell as the user wrote it (else
        ``values``). ``coded``: (codes per row, distinct values) of the canonical column, used as
        the shown values where every flagged cell as written is the same text."""
        mask = np.asarray(mask, dtype=bool)
        if not mask.any():
            return
        rows = np.flatnonzero(mask)
        label = self.labels.get(field)
        shown_codes = None
        if self.raw is not None and label in self.raw.columns:
            cells = self.raw[label].iloc[rows]  # only the rows flagged, as the user wrote them
            if isinstance(cells.dtype, pd.StringDtype):
                shown = cells.reset_index(drop=True)  # text: hashed as text, no object per cell
                shown_codes = None if coded is None else _coded_cells(coded, rows, shown)
            else:
                shown = cells.to_numpy()
        elif coded is not None:
            shown, shown_codes = None, _coded_cells(coded, rows, None)
        else:
            shown = None if values is None else np.asarray(values)[rows]
        self.parts.append(
            fnd.make(
                rows,
                code=code,
                severity=severity,
                message=message,
                column=self.labels.get(field, field),
                field=field,
                values=None if shown_codes is not None else shown,
                value_codes=shown_codes,
            )
        )

    def blank(self, name: str, mask: np.ndarray) -> None:
        if mask.any():
            self.nums[name] = np.where(mask, np.nan, self.nums[name])

    def cleaned(self) -> pd.DataFrame:
        # changed columns are new arrays; unchanged ones stay the input's Series (shared, copied
        # on write)
        c = self.canonical
        return pd.DataFrame(
            {
                name: self.nums[name]
                if name in self.nums and self.nums[name] is not self.given[name]
                else c[name]
                for name in c.columns
            },
            index=c.index,
            copy=False,
        )


def _coded_cells(coded, rows: np.ndarray, cells: pd.Series | None):
    """(codes, distinct texts) of the flagged ``rows`` from a column's codes (``coded``: codes
    per row, distinct values), or None where a flagged cell as written (``cells``) differs from
    its value (spaces around an id): those are shown as written."""
    codes, uniques = coded
    at = codes[rows]
    if cells is not None:
        same = pd.Series(uniques.take(at)).reset_index(drop=True) == cells
        if not same.fillna(False).all():
            return None
    used = np.bincount(at, minlength=len(uniques)) > 0
    renumber = np.cumsum(used) - 1
    return renumber[at], np.asarray(uniques[used], dtype=object).tolist()


def validate_parts(
    canonical: pd.DataFrame,
    labels: dict[str, str] | None = None,
    raw: pd.DataFrame | None = None,
    *,
    across_rows: bool = True,
) -> tuple[pd.DataFrame, list[pd.DataFrame]]:
    """:func:`validate` with the findings as one table per rule, in rule order (not yet joined:
    the pipeline joins every step's findings once). ``raw``: the user's cells, whose text the
    findings show. ``across_rows=False`` leaves out :data:`ACROSS_ROWS` (the pipeline runs
    :func:`across_rows_parts` beside the measures: they read the ids and dates only, and blank
    nothing)."""
    check = _Check(canonical, labels or {}, raw)
    for rule in RULES if across_rows else ROW_RULES:
        rule(check)
    return check.cleaned(), check.parts


def across_rows_parts(
    canonical: pd.DataFrame,
    labels: dict[str, str] | None = None,
    raw: pd.DataFrame | None = None,
    rules: tuple | None = None,
) -> list[pd.DataFrame]:
    """The findings of ``rules`` (of :data:`ACROSS_ROWS`, the last rules of :data:`RULES`)
    alone; each reads ids and dates only, so that each may run in a thread of its own."""
    check = _Check(canonical, labels or {}, raw, numbers=False)
    for rule in ACROSS_ROWS if rules is None else rules:
        rule(check)
    return check.parts


def ranges(check: _Check) -> None:
    """Outside the field's hard range: impossible, blanked, an error; outside typical: a warning."""
    for name in list(check.nums):
        f, v = BY_NAME[name], check.nums[name]
        with np.errstate(invalid="ignore"):
            if f.hard is not None:
                bad = (v < f.hard[0]) | (v > f.hard[1])
                check.rule(
                    bad,
                    f"{name}_impossible",
                    "error",
                    f"{f.meaning.rstrip('.')} outside {f.hard[0]:g}-{f.hard[1]:g} {f.unit} is "
                    "not possible in an adult, so it was not used and the measures that need it "
                    "are left empty. Check the value and its unit (a decimal point, mm or cm).",
                    name,
                    v,
                )
                check.blank(name, bad)
                v = check.nums[name]
            if f.typical is not None:
                check.rule(
                    (v < f.typical[0]) | (v > f.typical[1]),
                    f"{name}_unusual",
                    "warning",
                    f"{f.meaning.rstrip('.')} is outside the usual adult {f.typical[0]:g}-"
                    f"{f.typical[1]:g} {f.unit}. It was used; check the value and its unit.",
                    name,
                    v,
                )


def diameters(check: _Check) -> None:
    """LVIDs must be below LVIDd (else the systolic measures are withheld)."""
    lvidd, lvids = check.col("lvidd_cm"), check.col("lvids_cm")
    if lvidd is None or lvids is None:
        return
    with np.errstate(invalid="ignore"):
        bad = lvids >= lvidd
    check.rule(
        bad,
        "lvids_not_below_lvidd",
        "error",
        "LVIDs is not smaller than LVIDd: systolic measures (FS, volumes, stress, midwall) not "
        "computed. Check that the diameters are not swapped.",
        "lvids_cm",
        lvids,
    )
    check.blank("lvids_cm", bad)


def walls(check: _Check) -> None:
    """Walls thicken in systole; a septum much thicker than the posterior wall misleads the cube."""
    for sys_name, dia_name, code in (
        ("pws_cm", "pwd_cm", "posterior_wall_thins_in_systole"),
        ("ivss_cm", "ivsd_cm", "septum_thins_in_systole"),
    ):
        s, d = check.col(sys_name), check.col(dia_name)
        if s is not None and d is not None:
            with np.errstate(invalid="ignore"):
                check.rule(
                    s < d,
                    code,
                    "warning",
                    f"{BY_NAME[sys_name].meaning.rstrip('.')} is thinner than at end-diastole; "
                    "walls thicken as "
                    "the ventricle ejects. Check the measurement.",
                    sys_name,
                    s,
                )
    ivsd, pwd = check.col("ivsd_cm"), check.col("pwd_cm")
    if ivsd is not None and pwd is not None:
        with np.errstate(invalid="ignore", divide="ignore"):
            ratio = ivsd / pwd
            check.rule(
                ratio >= SEPTAL_POSTERIOR_RATIO_MAX,
                "septum_disproportionate",
                "warning",
                f"IVSd/PWd is {SEPTAL_POSTERIOR_RATIO_MAX:g} or more (asymmetric septal thickening): "
                "the linear mass formula assumes a symmetric ventricle and overestimates mass. "
                "Consider a 2D or 3D method.",
                "ivsd_cm",
                ratio,
            )


def pressures(check: _Check) -> None:
    """Diastolic must be below systolic (else both are withheld)."""
    sbp, dbp = check.col("sbp_mmhg"), check.col("dbp_mmhg")
    if sbp is None or dbp is None:
        return
    with np.errstate(invalid="ignore"):
        bad = dbp >= sbp
    check.rule(
        bad,
        "dbp_not_below_sbp",
        "error",
        "Diastolic pressure is not below systolic: pressures not used. Check that they are not "
        "swapped.",
        "dbp_mmhg",
        dbp,
    )
    check.blank("sbp_mmhg", bad)
    check.blank("dbp_mmhg", bad)


def age(check: _Check) -> None:
    years = check.col("age_years")
    if years is not None:
        with np.errstate(invalid="ignore"):
            check.rule(
                years < ADULT_AGE_YEARS,
                "under_18",
                "warning",
                "Under 18 years: adult reference values and cut-offs do not apply; use paediatric "
                "z-scores.",
                "age_years",
                years,
            )


def sex(check: _Check) -> None:
    """Sex is never guessed: a missing or unreadable one leaves the sex-specific results empty."""
    c = check.canonical
    if "sex" not in c.columns:
        check.parts.append(
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
        check.rule(
            np.ones(len(c), bool),
            "sex_missing",
            "warning",
            "Sex unknown: sex-specific classes and grades left empty.",
            "sex",
        )
        return
    s = c["sex"]
    if isinstance(s.dtype, pd.CategoricalDtype) and set(s.cat.categories) <= set(SEXES):
        unknown = s.array.codes < 0  # the mapped column (cells.SEX_DTYPE): no text compare
    else:
        unknown = ~s.isin(list(SEXES)).to_numpy()
    check.rule(
        unknown,
        "sex_missing",
        "warning",
        "Sex missing or unreadable: sex-specific classes and grades left empty (never guessed).",
        "sex",
    )


def repeated_visits(check: _Check) -> None:
    """The same patient on the same date on more than one row."""
    c = check.canonical
    if "patient_id" in c.columns and "study_date" in c.columns:
        check.rule(
            _repeated_pairs(c["patient_id"], c["study_date"]),
            "duplicate_study",
            "warning",
            "Another study of the same patient on the same date: check for a duplicate export.",
            "study_date",
        )


def repeated_study_ids(check: _Check) -> None:
    """The same study id on more than one row."""
    c = check.canonical
    if "study_id" in c.columns:
        sid = c["study_id"]
        dup, coded = _repeated_ids(sid)
        if dup.any():
            check.rule(
                dup,
                "duplicate_study_id",
                "warning",
                "The same study identifier appears on more than one row.",
                "study_id",
                sid.to_numpy(dtype=object) if coded is None else None,
                coded=coded,
            )


# In order (a rule sees the values the rules before it blanked). A row rule reads its own row; the
# rules across rows compare rows by their ids and dates, which no rule blanks, and come last.
ROW_RULES = (ranges, diameters, walls, pressures, age, sex)
ACROSS_ROWS = (repeated_visits, repeated_study_ids)
RULES = ROW_RULES + ACROSS_ROWS


def _repeated_ids(sid: pd.Series) -> tuple[np.ndarray, tuple[np.ndarray, np.ndarray] | None]:
    """True on every row whose identifier (an integer or a text; missing for none) appears on
    another row too; and, for text ids that were hashed, each row's code into the distinct ids
    (so that the findings show them without hashing them again), else None.

    Integer ids (``Int64``, as ids written as whole numbers are read) are compared as integers,
    Arrow text as text: a strictly increasing column (the usual export) is seen to hold no repeats
    in one pass. Otherwise the ids are hashed once (about 0.15 s per 10^6 texts on 2 cores).
    """
    present = sid.notna().to_numpy()
    if isinstance(sid.dtype, pd.Int64Dtype):  # ids read from whole numbers (cells.parse_ids)
        return _repeated_integers(sid.to_numpy(dtype="int64", na_value=0), present), None
    if isinstance(sid.dtype, pd.StringDtype) and sid.dtype.storage == "pyarrow" and present.all():
        text = pa.chunked_array(pa.array(sid.array)).combine_chunks()
        if len(text) < 2 or pc.all(pc.greater(text[1:], text[:-1])).as_py():  # increasing
            return np.zeros(len(text), dtype=bool), None
    codes, uniques = pd.factorize(sid)  # Arrow's hash for Arrow text; -1 for missing
    coded = (codes, uniques) if present.all() else None
    return _seen_twice(codes), coded


def _seen_twice(codes: np.ndarray) -> np.ndarray:
    """True where a code (>= 0) occurs more than once; -1 (missing) never repeats."""
    present = codes >= 0
    counts = np.bincount(codes[present]) if present.any() else np.zeros(0, dtype=np.int64)
    out = np.zeros(codes.size, dtype=bool)
    out[present] = counts[codes[present]] > 1
    return out


def _repeated_pairs(a: pd.Series, b: pd.Series) -> np.ndarray:
    """True on every row whose (a, b) pair, both present, appears on another row too.

    ``a`` is factorized (its one hash) and ``b``, dates, become whole days; the pair becomes one
    integer (a's code times the span of days, plus the day), and the repeated integers are found
    by sorting them: no second hash. Rows with either missing, or whose ``a`` is on no other row
    (most of a lab's list), are left out before the sort.
    """
    ca, _ = pd.factorize(a)
    day, span = _days(b)
    have = (ca >= 0) & (day >= 0)
    out = np.zeros(len(ca), dtype=bool)
    if have.sum() < 2:
        return out
    have &= _seen_twice(np.where(have, ca, -1))  # a patient seen once has no repeated pair
    if have.sum() < 2:
        return out
    key = ca[have].astype(np.int64) * span + day[have]
    out[have] = _repeated_values(key)
    return out


def _days(dates: pd.Series) -> tuple[np.ndarray, int]:
    """Each date as whole days from the earliest (-1 for missing) and the span in days (>= 1),
    when every date is at midnight (the usual list); otherwise (times of day, or not dates) the
    values are factorized: their codes and how many there are. Either way, equal codes are equal
    values."""
    if pd.api.types.is_datetime64_dtype(dates.dtype):
        v = dates.to_numpy(dtype="datetime64[ns]")
        missing = np.isnat(v)
        ns = v.view(np.int64)
        if missing.all():
            return np.full(v.size, -1, dtype=np.int64), 1
        per_day = 86_400 * 10**9
        if not (ns[~missing] % per_day).any():
            day = ns // per_day
            day -= day[~missing].min()
            day[missing] = -1
            return day, int(day.max()) + 1
    codes, uniques = pd.factorize(dates)
    return codes, max(len(uniques), 1)


def _repeated_values(key: np.ndarray) -> np.ndarray:
    """True where an integer occurs more than once in ``key`` (one sort; the repeated values,
    usually few, are then looked up)."""
    s = np.sort(key)
    same = s[1:] == s[:-1]
    if not same.any():
        return np.zeros(key.size, dtype=bool)
    again = s[1:][same]
    values = again[np.r_[True, again[1:] != again[:-1]]]
    at = np.minimum(np.searchsorted(values, key), values.size - 1)
    return values[at] == key


def _repeated_integers(key: np.ndarray, present: np.ndarray) -> np.ndarray:
    """:func:`_repeated_ids` of integer ids (``key`` arbitrary where ``present`` is False)."""
    if present.all():
        if key.size < 2 or bool((key[1:] > key[:-1]).all()):  # the usual export: increasing
            return np.zeros(key.size, dtype=bool)
        return pd.Series(key).duplicated(keep=False).to_numpy()
    dup = np.zeros(present.size, dtype=bool)  # among the rows that have an id only
    dup[present] = pd.Series(key[present]).duplicated(keep=False).to_numpy()
    return dup
