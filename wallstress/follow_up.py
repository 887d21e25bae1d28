"""Jobs over a clinic's exports across the years: the cohort store and follow-up over several
study lists and stores (built on :mod:`wallstress.cohort`, :mod:`wallstress.tracking` and the
writers, like :mod:`wallstress.jobs`)."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from wallstress.analysis.pipeline import analyse_with_findings
from wallstress.errors import InputError, OutputError
from wallstress.jobs import JobResult
from wallstress.options import Options
from wallstress.schema.fields import BY_NAME
from wallstress.write.results import planned_outputs, sheet_keys, write_sheets
from wallstress.write.safety import (
    atomic_path,
    check_outputs,
    protected_inputs,
    same_file,
    sha256_file,
)

_CANONICAL = set(BY_NAME)


@dataclass
class CohortAdd:
    """What ``cohort add`` did: one result per file imported or already in, files that failed
    (name, message), the proposed patient matches and notes (unit switches, conflicts)."""

    imports: list = field(default_factory=list)
    failed: list[tuple[str, str]] = field(default_factory=list)
    proposals: pd.DataFrame | None = None
    notes: list[str] = field(default_factory=list)


def cohort_add(store, paths, options: Options | None = None, *, patient_map=None) -> CohortAdd:
    """Add study lists (files, folders, globs) to a cohort store, each file one transaction."""
    from types import SimpleNamespace

    from wallstress.cohort.exports import expand, read_export, unit_changes
    from wallstress.cohort.imports import ImportResult, add_export, load_studies, save_map
    from wallstress.cohort.patients import propose, read_map
    from wallstress.cohort.store import open_store
    from wallstress.errors import describe

    options = options or Options()
    store = Path(store)
    files = expand(paths)
    if any(same_file(store, f) for f in files):
        raise OutputError(
            f"{store} is among the files to add; give the store and the exports apart"
        )
    mapping = read_map(patient_map) if patient_map else {}
    result, exports = CohortAdd(), []
    known = _imported_hashes(store)
    with protected_inputs(*files):
        for f in files:
            try:
                digest = sha256_file(f)
                if digest in known:  # nothing to read: the store has it
                    result.imports.append(
                        ImportResult(
                            f.name,
                            "already in the store",
                            notes=[
                                f"{f.name}: already imported on {known[digest]}; nothing changed"
                            ],
                        )
                    )
                    continue
                exports.append(read_export(f, options))
            except Exception as exc:  # one file's problem does not stop the others
                result.failed.append((f.name, describe(exc)[0]))
        result.notes += [n for r in result.imports for n in r.notes]
        if not exports and not mapping:
            return result
        con = open_store(store, create=True)
        try:
            for export in exports:
                done = add_export(con, export)
                result.imports.append(done)
                result.notes += done.notes
            if mapping:
                save_map(con, mapping, Path(patient_map).name)
            earlier = con.execute(
                "SELECT file_name, latest_study_date, units FROM imports ORDER BY import_id"
            ).fetchall()
            seen = [
                SimpleNamespace(
                    path=Path(name),
                    latest_date=latest,
                    units=dict(kv.split("=", 1) for kv in (units or "").split(";") if "=" in kv),
                )
                for name, latest, units in earlier
            ]
            result.notes += [f"unit changed between exports: {n}" for n in unit_changes(seen)]
            result.proposals = _open_proposals(con, load_studies(con), propose)
        finally:
            con.close()
    return result


def _imported_hashes(store: Path) -> dict[str, str]:
    """SHA-256 -> when, of the files a store already holds (empty for a new store)."""
    from wallstress.cohort.store import open_store

    if not store.exists():
        return {}
    con = open_store(store, read_only=True)
    try:
        return dict(
            con.execute("SELECT sha256, min(imported_utc) FROM imports GROUP BY sha256").fetchall()
        )
    finally:
        con.close()


def _open_proposals(con, studies: pd.DataFrame, propose) -> pd.DataFrame:
    """Proposed matches not yet decided in the store's map."""
    proposals = propose(studies.assign(patient_id=studies["exported_patient_id"]))
    decided = {r[0] for r in con.execute("SELECT exported_id FROM patient_map").fetchall()}
    return proposals[~proposals["exported_id"].isin(decided)].reset_index(drop=True)


def cohort_status(store) -> dict:
    """What went into a store: imports, counts, conflicts, the map, open proposals."""
    from wallstress.cohort.imports import load_studies, status
    from wallstress.cohort.patients import propose
    from wallstress.cohort.store import open_store

    con = open_store(store, read_only=True)
    try:
        out = status(con)
        out["proposals"] = _open_proposals(con, load_studies(con), propose)
    finally:
        con.close()
    return out


def cohort_export(store, folder) -> list[Path]:
    """Each table of the store as ``folder/TABLE.parquet`` (studies with provenance, imports,
    findings, conflicts, the patient map) for the dask path or another tool."""
    from wallstress.cohort.store import open_store

    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise OutputError(f"{folder} is a file; give a folder for the parquet files")
    folder.mkdir(parents=True, exist_ok=True)
    con = open_store(store, read_only=True)
    written = []
    try:
        for table in ("studies", "imports", "study_findings", "conflicts", "patient_map"):
            target = folder / f"{table}.parquet"
            check_outputs([target], [Path(store)])
            with atomic_path(target) as tmp:  # DuckDB writes it, in pieces, without pandas
                con.execute(f"COPY (SELECT * FROM {table}) TO '{_sql_text(tmp)}' (FORMAT parquet)")
            written.append(target)
    finally:
        con.close()
    return written


def _sql_text(path) -> str:
    return str(path).replace("'", "''")


@dataclass
class TrackSources(JobResult):
    tracking: object = None
    patients: int = 0
    proposals: pd.DataFrame | None = None


def track_sources(
    sources,
    out,
    options: Options | None = None,
    *,
    patient_map=None,
    within_subject_sd_g: float | None = None,
    same_day: str = "mean",
    escape_formulas: bool = False,
) -> TrackSources:
    """Follow-up over several study lists and cohort stores: each file read by its own headers and
    units, provenance kept, the clinic's patient map applied (and kept in a store given). Files go
    through a store in memory, so that a study in two exports is one study and a value that
    differs is a conflict, as in a store on disk."""
    from wallstress.cohort.exports import PROVENANCE, expand, read_export, unit_changes
    from wallstress.cohort.imports import add_export, load_studies, save_map
    from wallstress.cohort.patients import apply_map, propose, read_map
    from wallstress.cohort.store import is_store, open_store, scratch_store
    from wallstress.tracking.track import SHEETS as TRACKING_SHEETS
    from wallstress.tracking.track import track, tracking_sheets

    options = options or Options()
    out = Path(out)
    stores = [Path(s) for s in sources if Path(s).is_file() and is_store(s)]
    files = expand([s for s in sources if Path(s) not in stores])
    extra = ["proposed matches", "conflicts", "exports"]
    check_outputs(planned_outputs(out, sheet_keys([*TRACKING_SHEETS, *extra])), [*files, *stores])
    mapping = read_map(patient_map) if patient_map else {}
    frames, listed, exports, conflicts = [], [], [], []
    with protected_inputs(*files, *stores):
        for s in stores:
            con = open_store(s, read_only=not mapping)
            try:
                if mapping:
                    save_map(con, mapping, Path(patient_map).name)
                frames.append(load_studies(con))
                conflicts.append(con.execute("SELECT * FROM conflicts").df())
                listed.append(
                    con.execute(
                        "SELECT file_name, sha256, rows, new_studies, conflicts, units FROM imports"
                    )
                    .df()
                    .assign(store=s.name)
                )
            finally:
                con.close()
        exports = [read_export(f, options) for f in files]
    if exports:  # through a store in memory: one study per key, conflicts as the store has them
        con = scratch_store()
        try:
            for e in exports:
                add_export(con, e)
            frames.append(load_studies(con))
            conflicts.append(con.execute("SELECT * FROM conflicts").df())
            listed.append(
                con.execute(
                    "SELECT file_name, sha256, rows, new_studies, conflicts, units FROM imports"
                ).df()
            )
        finally:
            con.close()
    if not frames:
        raise InputError("no study list or cohort store was given; name files, folders or a store")
    studies = pd.concat(frames, ignore_index=True)
    studies["patient_id"] = apply_map(studies["patient_id"], mapping)
    proposals = propose(studies.assign(patient_id=studies["exported_patient_id"]))
    decided = set(mapping)
    proposals = proposals[~proposals["exported_id"].isin(decided)]
    if stores:  # decisions already kept in a store count too
        proposals = proposals[
            ~proposals["exported_id"].isin(
                studies.loc[
                    studies["patient_id"] != studies["exported_patient_id"], "exported_patient_id"
                ]
            )
        ]
    fields = [c for c in studies.columns if c in _CANONICAL]
    analysis = analyse_with_findings(studies[fields], options)
    tracking = track(analysis, options, within_subject_sd_g=within_subject_sd_g, same_day=same_day)
    rows = tracking.visits["input_row"].to_numpy()  # a visit's (last) study: where it came from
    for name in (*PROVENANCE, "exported_patient_id"):
        if name in studies.columns:
            tracking.visits[name] = studies[name].to_numpy()[rows]
    notes_units = unit_changes(exports)
    methods = {
        **analysis.methods,
        "tracking": tracking.methods,
        "sources": {"stores": [s.name for s in stores], "files": [f.name for f in files]},
        "unit_changes_between_exports": notes_units or "none",
        "patient_map": Path(patient_map).name if patient_map else "none given",
    }
    sheets = {
        **tracking_sheets(tracking),
        "proposed matches": proposals,
        "conflicts": pd.concat(conflicts, ignore_index=True),
        "exports": pd.concat(listed, ignore_index=True),
    }
    written = write_sheets(out, sheets, methods, escape_formulas=escape_formulas)
    p = tracking.patients
    notes = [
        f"{len(p)} patients, {len(tracking.visits)} visits from {len(files)} files and "
        f"{len(stores)} stores"
    ]
    notes += [f"unit changed between exports: {n}" for n in notes_units]
    n_conflicts = sum(len(c) for c in conflicts)
    if n_conflicts:
        notes.append(
            f"{n_conflicts} values differ between exports of the same study (the newest export "
            "wins); see the sheet 'conflicts'"
        )
    if len(proposals):
        notes.append(
            f"{len(proposals)} identifiers look like another patient's (see the sheet 'proposed "
            "matches'); nothing was merged: pass the ones you confirm with --patient-map"
        )
    if "verdict" in p.columns:
        for verdict, count in p["verdict"].value_counts().items():
            notes.append(f"  {verdict}: {count}")
    return TrackSources(
        analysis,
        list(getattr(written, "paths", written)),
        notes,
        tracking=tracking,
        patients=len(p),
        proposals=proposals,
    )
