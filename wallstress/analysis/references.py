"""Reference sets: cut-offs, severity partitions and model coefficients, each row with its source.

A reference set is one CSV file (bundled under ``reference_tables/`` or a lab's own path) with columns
``kind, measure, sex, grade, comparison, value, unit, source, verified, note``:

- ``kind = cutoff``: a grade threshold. ``grade`` is ``below_normal`` (comparison ``<`` or ``<=``) or
  one of ``increased``, ``mild``, ``moderate``, ``severe`` (comparison ``>`` or ``>=``). The abnormal
  threshold of a measure is its lowest upward threshold. Each row states its own comparison, because
  published sets differ on ``>`` versus ``>=``.
- ``kind = setting``: ``measure = title`` or ``geometry_mass_index`` (the index that decides
  hypertrophy in the geometry classes), the value in ``note``.
- ``kind = coefficient``: ``measure = model``, ``grade = parameter``; overrides the bundled
  ``models.csv`` for this set (e.g. a lab's own stress-shortening line).

``verified`` is ``published`` (checked against the paper's text), ``from_memory`` (recalled, not
read), ``computed`` (derived from a published value) or ``lab`` (fitted by a lab from its own subjects).
"""

from __future__ import annotations

import functools
from dataclasses import dataclass
from pathlib import Path

import pandas as pd

from wallstress.bundled import data_dir
from wallstress.errors import ReferenceSetError
from wallstress.options import Options
from wallstress.schema.fields import SEXES
from wallstress.schema.vocabulary import OUT

SET_COLUMNS = (
    "kind",
    "measure",
    "sex",
    "grade",
    "comparison",
    "value",
    "unit",
    "source",
    "verified",
    "note",
)
MODEL_COLUMNS = ("model", "parameter", "sex", "value", "unit", "source", "verified", "note")
UPWARD_GRADES = ("increased", "mild", "moderate", "severe")
DOWNWARD_GRADES = ("below_normal",)
COMPARISONS = (">", ">=", "<", "<=")
VERIFIED = ("published", "from_memory", "computed", "lab")
DEFAULT_SET = Options.reference  # the set used when none is named
MASS_INDEXES = (OUT.lvmi_bsa_g_m2, OUT.lvmi_h27_g_m2_7)


@dataclass(frozen=True)
class Cutoff:
    """One threshold: a value ``v`` meets it when ``v <comparison> value``."""

    value: float
    comparison: str
    source: str
    verified: str
    grade: str = "increased"

    def met(self, values):
        """Boolean array: which values meet this threshold (NaN never does)."""
        import numpy as np

        v = np.asarray(values, dtype=float)
        with np.errstate(invalid="ignore"):
            return {
                ">": v > self.value,
                ">=": v >= self.value,
                "<": v < self.value,
                "<=": v <= self.value,
            }[self.comparison]


@dataclass(frozen=True)
class Coefficient:
    value: float
    unit: str
    source: str
    verified: str
    note: str = ""


def _tables() -> Path:
    return data_dir("reference_tables")


def list_sets() -> list[str]:
    """Names of the bundled reference sets."""
    return sorted(
        p.name[:-4]
        for p in _tables().iterdir()
        if p.name.endswith(".csv") and p.name != "models.csv"
    )


@functools.lru_cache(maxsize=1)
def _models() -> pd.DataFrame:
    with _tables().joinpath("models.csv").open("r", encoding="utf-8") as fh:
        return pd.read_csv(fh, dtype={"sex": str}, keep_default_na=False, na_values=[""])


def model_coefficients(model: str) -> dict[str, Coefficient]:
    """Bundled coefficients of one model (``reproducibility``, ``midwall_stress_line``,
    ``mass_prediction``, ``linear_method_checks``)."""
    t = _models()
    rows = t[t["model"] == model]
    if rows.empty:
        known = ", ".join(sorted(t["model"].unique()))
        raise ReferenceSetError(f"unknown model {model!r}; known models: {known}")
    return {
        r.parameter: Coefficient(
            float(r.value), str(r.unit), str(r.source), str(r.verified), _text(r.note)
        )
        for r in rows.itertuples()
    }


def _text(v) -> str:
    return "" if v is None or (isinstance(v, float) and v != v) else str(v)


class ReferenceSet:
    """A loaded reference set. Use :func:`load_set`."""

    def __init__(self, name: str, rows: pd.DataFrame, path: str):
        self.name = name
        self.rows = rows
        self.path = path
        self._coefficients: dict[str, dict[str, Coefficient]] = {}  # model -> its coefficients
        self._records: list[dict] | None = None  # as_records, once
        self._unverified: list[dict] | None = None  # unverified_records, once
        settings = {r.measure: _text(r.note) for r in rows[rows["kind"] == "setting"].itertuples()}
        self.title = settings.get("title", name)
        # warnings a calibration wrote into the set (a line not written, a small sample...): they
        # travel into every analysis that uses the set (methods record, report)
        self.warnings = [
            _text(r.note)
            for r in rows[
                (rows["kind"] == "setting") & (rows["measure"] == "calibration_warning")
            ].itertuples()
        ]
        mass_index = settings.get("geometry_mass_index", "")
        if not mass_index:
            have = set(rows.loc[rows["kind"] == "cutoff", "measure"])
            mass_index = next((m for m in MASS_INDEXES if m in have), MASS_INDEXES[0])
        if mass_index not in MASS_INDEXES:
            raise ReferenceSetError(
                f"reference set {name!r}: geometry_mass_index {mass_index!r} is not one of {MASS_INDEXES}"
            )
        self.mass_index = mass_index
        cut = rows[rows["kind"] == "cutoff"]
        self._cutoffs: dict[tuple[str, str], list[Cutoff]] = {}
        for r in cut.itertuples():
            c = Cutoff(
                float(r.value), str(r.comparison), str(r.source), str(r.verified), str(r.grade)
            )
            for sex in SEXES if _text(r.sex) in ("", "both", "all") else (str(r.sex),):
                self._cutoffs.setdefault((r.measure, sex), []).append(c)

    def __repr__(self) -> str:
        return f"ReferenceSet({self.name!r}, {len(self.rows)} rows)"

    def measures(self) -> list[str]:
        return sorted({m for m, _ in self._cutoffs})

    def grades(self, measure: str, sex: str) -> list[Cutoff]:
        """All thresholds of one measure for one sex, upward grades in ascending order."""
        return sorted(
            self._cutoffs.get((measure, sex), []), key=lambda c: (c.grade in UPWARD_GRADES, c.value)
        )

    def cutoff(self, measure: str, sex: str) -> Cutoff | None:
        """The abnormal (lowest upward) threshold of a measure for one sex, or None."""
        up = [c for c in self._cutoffs.get((measure, sex), []) if c.grade in UPWARD_GRADES]
        return min(up, key=lambda c: c.value) if up else None

    def coefficients(self, model: str) -> dict[str, Coefficient]:
        """Model coefficients: this set's own rows override the bundled defaults.

        Read from the tables once per set and model (a new dict each call).
        """
        if model not in self._coefficients:
            self._coefficients[model] = self._read_coefficients(model)
        return dict(self._coefficients[model])

    def _read_coefficients(self, model: str) -> dict[str, Coefficient]:
        out = model_coefficients(model) if model in set(_models()["model"]) else {}
        own = self.rows[(self.rows["kind"] == "coefficient") & (self.rows["measure"] == model)]
        for r in own.itertuples():
            out[str(r.grade)] = Coefficient(
                float(r.value), _text(r.unit), _text(r.source), _text(r.verified), _text(r.note)
            )
        if not out:
            raise ReferenceSetError(
                f"no coefficients for model {model!r} in set {self.name!r} or the defaults"
            )
        return out

    def unverified(self) -> pd.DataFrame:
        """Rows whose value was not checked against a published text."""
        r = self.rows[self.rows["kind"].isin(["cutoff", "coefficient"])]
        return r[r["verified"] != "published"]

    def unverified_records(self) -> list[dict]:
        """:meth:`unverified` as plain dicts: new dicts each call, read once per set (~1.4 ms)."""
        if self._unverified is None:
            self._unverified = self.unverified().to_dict("records")
        return [dict(r) for r in self._unverified]

    def as_records(self) -> list[dict]:
        """The set's rows as plain dicts (for the methods record): new dicts each call, read
        from the rows once per set (the methods record of every run asks; ~5 ms each time)."""
        if self._records is None:
            keep = self.rows[self.rows["kind"] != "setting"]
            self._records = [
                {k: _text(v) if not isinstance(v, float) else v for k, v in rec.items()}
                for rec in keep.to_dict("records")
            ]
        return [dict(r) for r in self._records]


def _read_set_csv(source, label: str) -> pd.DataFrame:
    try:
        rows = pd.read_csv(
            source,
            dtype={"sex": str, "grade": str, "note": str},
            keep_default_na=False,
            na_values=[""],
        )
    except Exception as exc:  # a malformed lab file
        raise ReferenceSetError(
            f"reference set {label}: cannot be read as CSV ({exc}); see 'wallstress references' for the format"
        ) from exc
    missing = [c for c in SET_COLUMNS if c not in rows.columns]
    if missing:
        raise ReferenceSetError(
            f"reference set {label}: missing columns {missing}; a set needs {', '.join(SET_COLUMNS)}"
        )
    _check_rows(rows, label)
    return rows


def _check_rows(rows: pd.DataFrame, label: str) -> None:
    bad_kind = set(rows["kind"]) - {"cutoff", "setting", "coefficient"}
    if bad_kind:
        raise ReferenceSetError(
            f"reference set {label}: unknown kind {sorted(bad_kind)}; use cutoff, setting or coefficient"
        )
    cut = rows[rows["kind"] == "cutoff"]
    bad = cut[~cut["comparison"].isin(COMPARISONS)]
    if len(bad):
        raise ReferenceSetError(
            f"reference set {label}: row {bad.index[0] + 2} has comparison {bad['comparison'].iloc[0]!r}; use one of {COMPARISONS}"
        )
    grades = set(cut["grade"]) - set(UPWARD_GRADES) - set(DOWNWARD_GRADES)
    if grades:
        raise ReferenceSetError(
            f"reference set {label}: unknown grade {sorted(grades)}; use {UPWARD_GRADES + DOWNWARD_GRADES}"
        )
    values = pd.to_numeric(rows.loc[rows["kind"] != "setting", "value"], errors="coerce")
    if values.isna().any():
        raise ReferenceSetError(
            f"reference set {label}: a cutoff or coefficient row has no numeric value"
        )
    unknown_v = set(rows.loc[rows["kind"] != "setting", "verified"]) - set(VERIFIED)
    if unknown_v:
        raise ReferenceSetError(
            f"reference set {label}: verified must be one of {VERIFIED}, got {sorted(unknown_v)}"
        )
    sexes = set(cut["sex"].fillna("")) - {"F", "M", "", "both", "all"}
    if sexes:
        raise ReferenceSetError(
            f"reference set {label}: sex must be F, M or empty (both), got {sorted(sexes)}"
        )


@functools.lru_cache(maxsize=32)
def _load_bundled(name: str) -> ReferenceSet:
    with _tables().joinpath(f"{name}.csv").open("r", encoding="utf-8") as fh:
        rows = _read_set_csv(fh, name)
    return ReferenceSet(name, rows, f"bundled: reference_tables/{name}.csv")


def load_set(name_or_path: str | Path = DEFAULT_SET) -> ReferenceSet:
    """Load a bundled set by name, or a lab's own set from a CSV path.

    An unknown name raises :class:`ReferenceSetError` listing the known ones.
    """
    if isinstance(name_or_path, ReferenceSet):
        return name_or_path
    text = str(name_or_path)
    if text in list_sets():
        return _load_bundled(text)
    path = Path(text)
    if path.suffix.lower() == ".csv" or path.exists():
        if not path.is_file():
            raise ReferenceSetError(f"reference set file {path} does not exist")
        rows = _read_set_csv(path, str(path))
        return ReferenceSet(path.stem, rows, str(path))
    raise ReferenceSetError(
        f"unknown reference set {text!r}; bundled sets: {', '.join(list_sets())}; or give the path of a set CSV"
    )
