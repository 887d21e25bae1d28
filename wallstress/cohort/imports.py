"""Adding an export to the store: one transaction per file, never a silent change.

A study is known by its study id (``id:`` + the id as exported) or, without one, by its patient
and date (``pd:`` + patient + ``|`` + ISO date). Importing a file whose SHA-256 is already in the
store changes nothing. A study already in the store with the same values is counted and left; with
another value it is a conflict, recorded with both values and both files, and the newest export
(the one whose latest study is later; on a tie, the one imported last) wins.
"""

from __future__ import annotations

import datetime as _dt
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from wallstress.cohort.exports import Export
from wallstress.cohort.store import NUMBER_FIELDS, TEXT_FIELDS, _now

STUDY_COLUMNS = (
    "study_key",
    *TEXT_FIELDS,
    "study_date",
    *NUMBER_FIELDS,
    "source_file",
    "source_sheet",
    "source_row",
    "source_sha256",
    "import_id",
)
NEWEST_WINS = "newest export wins"


@dataclass
class ImportResult:
    file: str
    status: str  # "imported", "already in the store"
    rows: int = 0
    new_studies: int = 0
    same_studies: int = 0
    conflicts: int = 0
    without_key: int = 0
    notes: list[str] = field(default_factory=list)


def study_keys(canonical: pd.DataFrame) -> pd.Series:
    """Each study's key (None when it has neither a study id nor a patient and a date)."""
    n = len(canonical)
    empty = pd.Series([None] * n, dtype=object)
    sid = _text(canonical["study_id"]) if "study_id" in canonical.columns else empty
    pid = _text(canonical["patient_id"]) if "patient_id" in canonical.columns else empty
    if "study_date" in canonical.columns:
        day = pd.to_datetime(canonical["study_date"], errors="coerce").reset_index(drop=True)
        date = day.dt.strftime("%Y-%m-%dT%H:%M").astype(object).where(day.notna())
    else:
        date = empty
    by_pair = ("pd:" + pid + "|" + date).where(pid.notna() & date.notna())
    key = ("id:" + sid).where(sid.notna(), by_pair)
    return key.astype(object).where(key.notna(), None)


def _text(s: pd.Series) -> pd.Series:
    t = s.reset_index(drop=True).astype("string").str.strip()
    return t.astype(object).where(t.notna() & (t != ""))


def _incoming(export: Export, import_id: int) -> pd.DataFrame:
    c = export.canonical.reset_index(drop=True)
    out = pd.DataFrame({"study_key": study_keys(c)})
    for name in TEXT_FIELDS:
        out[name] = _text(c[name]) if name in c.columns else None
    out["study_date"] = (
        pd.to_datetime(c["study_date"], errors="coerce") if "study_date" in c.columns else pd.NaT
    )
    for name in NUMBER_FIELDS:
        out[name] = pd.to_numeric(c[name], errors="coerce") if name in c.columns else np.nan
    for name in ("source_file", "source_sheet", "source_row", "source_sha256"):
        out[name] = c[name].to_numpy()
    out["import_id"] = import_id
    return out[list(STUDY_COLUMNS)]


def _differs(a: pd.Series, b: pd.Series, number: bool) -> np.ndarray:
    """Both present and not equal (numbers to 1e-9 relative)."""
    both = a.notna().to_numpy() & b.notna().to_numpy()
    if number:
        x, y = a.to_numpy(float), b.to_numpy(float)
        with np.errstate(invalid="ignore"):
            return both & ~np.isclose(x, y, rtol=1e-9, atol=0.0)
    return both & (a.astype(str).to_numpy() != b.astype(str).to_numpy())


def add_export(con, export: Export) -> ImportResult:
    """Add one export in one transaction; the store is unchanged if anything fails."""
    name = export.path.name
    done = con.execute(
        "SELECT imported_utc FROM imports WHERE sha256 = ? ORDER BY import_id LIMIT 1",
        [export.sha256],
    ).fetchall()
    done = done[0] if done else None
    if done:
        return ImportResult(
            name,
            "already in the store",
            len(export.canonical),
            notes=[f"{name}: already imported on {done[0]}; nothing changed"],
        )
    con.execute("BEGIN TRANSACTION")
    try:
        result = _add(con, export)
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise
    return result


def _add(con, export: Export) -> ImportResult:
    name = export.path.name
    import_id = con.execute("SELECT coalesce(max(import_id), 0) + 1 FROM imports").fetchall()[0][0]
    rows = _incoming(export, import_id)
    keyless = rows["study_key"].isna()
    rows = rows[~keyless]
    # a study repeated inside one export: its first row stands for it (the analysis flagged it)
    rows = rows.drop_duplicates("study_key", keep="first").reset_index(drop=True)
    con.register("incoming", rows)
    try:
        old = con.execute(
            "SELECT s.*, i.latest_study_date AS _latest FROM studies s JOIN incoming n "
            "USING (study_key) LEFT JOIN imports i ON s.import_id = i.import_id"
        ).df()
    finally:
        con.unregister("incoming")
    old = old.set_index("study_key")
    known = rows["study_key"].isin(old.index)
    new_rows, seen = rows[~known], rows[known].set_index("study_key")
    conflicts: list[tuple] = []
    theirs = old.loc[seen.index]
    fields = (*TEXT_FIELDS, "study_date", *NUMBER_FIELDS)
    diff = {f: _differs(theirs[f], seen[f], f in NUMBER_FIELDS) for f in fields}
    changed_any = np.logical_or.reduce(list(diff.values())) if len(seen) else np.zeros(0, bool)
    their_latest = pd.to_datetime(theirs["_latest"], errors="coerce")
    if export.latest_date is None:
        newer = np.zeros(len(seen), dtype=bool)
    else:
        newer = (
            their_latest.isna() | (pd.Timestamp(export.latest_date) >= their_latest)
        ).to_numpy()
    keys = seen.index.to_numpy()
    for f in fields:
        hit = np.flatnonzero(diff[f])
        for i in hit:  # only the values that differ: a handful per export
            kept, other = (seen, theirs) if newer[i] else (theirs, seen)
            conflicts.append(
                (
                    import_id,
                    keys[i],
                    f,
                    str(kept[f].iloc[i]),
                    str(other[f].iloc[i]),
                    str(kept["source_file"].iloc[i]),
                    str(other["source_file"].iloc[i]),
                    NEWEST_WINS,
                )
            )
    replace = list(keys[changed_any & newer])
    if replace:
        repl = seen.loc[replace].reset_index()[list(STUDY_COLUMNS)]
        con.register("replacing", repl)
        try:
            con.execute("DELETE FROM studies WHERE study_key IN (SELECT study_key FROM replacing)")
            con.execute("INSERT INTO studies SELECT * FROM replacing")
        finally:
            con.unregister("replacing")
    if len(new_rows):
        con.register("adding", new_rows)
        try:
            con.execute("INSERT INTO studies SELECT * FROM adding")
        finally:
            con.unregister("adding")
    if conflicts:
        con.executemany("INSERT INTO conflicts VALUES (?, ?, ?, ?, ?, ?, ?, ?)", conflicts)
    n_found = _add_findings(con, export, import_id)
    latest = export.latest_date.date() if export.latest_date is not None else None
    con.execute(
        "INSERT INTO imports VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
        [
            import_id,
            name,
            export.sha256,
            _now(),
            len(export.canonical),
            len(new_rows),
            int(known.sum()),
            len(conflicts),
            n_found,
            latest,
            ";".join(f"{k}={v}" for k, v in sorted(export.units.items())),
        ],
    )
    notes = []
    if keyless.any():
        notes.append(
            f"{name}: {int(keyless.sum())} rows have neither a study id nor a patient and "
            "a date; they were not added"
        )
    if conflicts:
        notes.append(
            f"{name}: {len(conflicts)} values differ from an earlier export of the same "
            f"study ({NEWEST_WINS}); see 'wallstress cohort status'"
        )
    return ImportResult(
        name,
        "imported",
        len(export.canonical),
        len(new_rows),
        int(known.sum()),
        len(conflicts),
        int(keyless.sum()),
        notes,
    )


def _add_findings(con, export: Export, import_id: int) -> int:
    f = export.findings
    f = f[f["row"] >= 0]
    if f.empty:
        return 0
    keys = study_keys(export.canonical.reset_index(drop=True))
    rows = pd.DataFrame(
        {
            "study_key": keys.to_numpy()[f["row"].to_numpy()],
            "import_id": import_id,
            "severity": f["severity"].astype(str).to_numpy(),
            "code": f["code"].astype(str).to_numpy(),
            "field": f["field"].astype(str).to_numpy(),
            "value": f["value"].astype(str).to_numpy(),
            "message": f["message"].astype(str).to_numpy(),
        }
    ).dropna(subset=["study_key"])
    con.register("found", rows)
    try:
        con.execute("INSERT INTO study_findings SELECT * FROM found")
    finally:
        con.unregister("found")
    return len(rows)


def load_studies(con) -> pd.DataFrame:
    """Every study in the store, canonical names, the clinic's patient map applied (the id as
    exported kept in ``exported_patient_id``), provenance columns last."""
    s = con.execute("SELECT * FROM studies ORDER BY study_date, study_key").df()
    m = con.execute("SELECT exported_id, patient_id FROM patient_map").fetchall()
    s["exported_patient_id"] = s["patient_id"]
    if m:
        mapping = dict(m)
        s["patient_id"] = s["patient_id"].map(
            lambda v: mapping.get(v, v) if isinstance(v, str) else v
        )
    return s


def save_map(con, mapping: dict[str, str], from_file: str) -> int:
    """Store the clinic's decisions (a later decision for the same id replaces the earlier)."""
    if not mapping:
        return 0
    rows = pd.DataFrame(
        {
            "exported_id": list(mapping),
            "patient_id": list(mapping.values()),
            "decided_utc": _now(),
            "from_file": from_file,
        }
    )
    con.execute("BEGIN TRANSACTION")
    try:
        con.register("decided", rows)
        con.execute(
            "DELETE FROM patient_map WHERE exported_id IN (SELECT exported_id FROM decided)"
        )
        con.execute("INSERT INTO patient_map SELECT * FROM decided")
        con.unregister("decided")
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise
    return len(rows)


def status(con) -> dict:
    """What went in: imports, counts, conflicts, the map in force."""
    q = con.execute
    return {
        "imports": q("SELECT * FROM imports ORDER BY import_id").df(),
        "studies": q("SELECT count(*) FROM studies").fetchall()[0][0],
        "patients_as_exported": q("SELECT count(DISTINCT patient_id) FROM studies").fetchall()[0][
            0
        ],
        "conflicts": q("SELECT * FROM conflicts ORDER BY import_id, study_key, field").df(),
        "patient_map": q("SELECT * FROM patient_map ORDER BY exported_id").df(),
        "today": _dt.date.today().isoformat(),
    }
