"""The store file: DuckDB, in process, one file; schema versioned and migrated on open.

Tables (schema version 2):

- ``meta``: key, value (``schema_version``, ``created_utc``, ``created_by``).
- ``imports``: one row per import attempt that changed the store or was refused as a repeat:
  id, file name, SHA-256, when, rows, new studies, studies already in, conflicts, findings,
  the units the file was read in, the file's latest study date.
- ``studies``: one row per study (``study_key``): canonical inputs in internal units, patient id
  as exported, provenance (file, sheet, row, SHA-256, import id).
- ``study_findings``: the analyse-stage findings of each study, by import.
- ``conflicts``: the same study exported twice with another value: both values, both files, the
  rule applied.
- ``patient_map``: the clinic's decisions, identifier as exported -> the patient it belongs to.

A second process that opens the store while another writes to it gets a clear message (DuckDB
allows one writing process per file).
"""

from __future__ import annotations

import datetime as _dt
from pathlib import Path

from wallstress import __version__
from wallstress.errors import InputError
from wallstress.schema.fields import FIELDS

SCHEMA_VERSION = 2

# canonical inputs kept per study (numbers in internal units)
NUMBER_FIELDS: tuple[str, ...] = tuple(f.name for f in FIELDS if f.kind == "number")
TEXT_FIELDS: tuple[str, ...] = ("study_id", "patient_id", "sex")

_V1 = [
    "CREATE TABLE meta (key VARCHAR PRIMARY KEY, value VARCHAR)",
    """CREATE TABLE imports (
        import_id INTEGER PRIMARY KEY, file_name VARCHAR, sha256 VARCHAR, imported_utc VARCHAR,
        rows BIGINT, new_studies BIGINT, same_studies BIGINT, conflicts BIGINT, findings BIGINT,
        latest_study_date DATE)""",
    f"""CREATE TABLE studies (
        study_key VARCHAR PRIMARY KEY, study_id VARCHAR, patient_id VARCHAR, sex VARCHAR,
        study_date TIMESTAMP, {", ".join(f"{n} DOUBLE" for n in NUMBER_FIELDS)},
        source_file VARCHAR, source_sheet VARCHAR, source_row BIGINT, source_sha256 VARCHAR,
        import_id INTEGER)""",
    """CREATE TABLE study_findings (
        study_key VARCHAR, import_id INTEGER, severity VARCHAR, code VARCHAR, field VARCHAR,
        value VARCHAR, message VARCHAR)""",
    """CREATE TABLE conflicts (
        import_id INTEGER, study_key VARCHAR, field VARCHAR, kept_value VARCHAR,
        other_value VARCHAR, kept_file VARCHAR, other_file VARCHAR, rule VARCHAR)""",
    """CREATE TABLE patient_map (
        exported_id VARCHAR PRIMARY KEY, patient_id VARCHAR, decided_utc VARCHAR,
        from_file VARCHAR)""",
]

# version 1 -> 2: each import records the units its file was read in (the mm -> cm switch)
_MIGRATIONS = {1: ["ALTER TABLE imports ADD COLUMN units VARCHAR DEFAULT ''"]}


def _now() -> str:
    return _dt.datetime.now(_dt.timezone.utc).strftime("%Y-%m-%dT%H:%M:%SZ")


def create_schema(con, version: int = SCHEMA_VERSION) -> None:
    """A new store's tables at ``version`` (a lower version only to test migrations)."""
    for sql in _V1:
        con.execute(sql)
    con.execute("INSERT INTO meta VALUES ('schema_version', '1')")
    con.execute("INSERT INTO meta VALUES ('created_utc', ?)", [_now()])
    con.execute("INSERT INTO meta VALUES ('created_by', ?)", [f"wallstress {__version__}"])
    migrate(con, target=version)


def schema_version(con) -> int:
    rows = con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchall()
    return int(rows[0][0])


def migrate(con, target: int = SCHEMA_VERSION) -> list[int]:
    """Bring the store to ``target``, one version at a time, each step one transaction."""
    done = []
    while (now := schema_version(con)) < target:
        con.execute("BEGIN TRANSACTION")
        try:
            for sql in _MIGRATIONS[now]:
                con.execute(sql)
            con.execute("UPDATE meta SET value = ? WHERE key = 'schema_version'", [str(now + 1)])
            con.execute("COMMIT")
        except Exception:
            con.execute("ROLLBACK")
            raise
        done.append(now + 1)
    return done


def open_store(path, *, create: bool = False, read_only: bool = False):
    """A connection to the store at ``path`` (made when ``create``), at the current schema.

    Raises InputError: no store there (and not ``create``); not a store; made by a newer
    wallstress; or held by another process.
    """
    import duckdb

    path = Path(path)
    if not path.exists() and not create:
        raise InputError(
            f"{path}: no cohort store here; make one with 'wallstress cohort add {path} FILES...'"
        )
    if path.is_dir():
        raise InputError(f"{path} is a folder; give the store's file name (e.g. clinic.duckdb)")
    new = not path.exists()
    try:
        con = duckdb.connect(str(path), read_only=read_only and not new)
    except duckdb.IOException as exc:
        if "lock" in str(exc).lower():
            raise InputError(
                f"{path}: the store is in use by another program (an import still running?); "
                "wait for it to finish, then try again"
            ) from exc
        raise InputError(f"{path}: not a cohort store this version can open ({exc})") from exc
    except duckdb.Error as exc:
        raise InputError(f"{path}: not a cohort store ({exc})") from exc
    try:
        if new:
            create_schema(con)
        tables = {
            r[0] for r in con.execute("SELECT table_name FROM information_schema.tables").fetchall()
        }
        if "meta" not in tables:
            raise InputError(f"{path}: a DuckDB file, but not a wallstress cohort store")
        version = schema_version(con)
        if version > SCHEMA_VERSION:
            raise InputError(
                f"{path}: made by a newer wallstress (store version {version}, this one reads up "
                f"to {SCHEMA_VERSION}); update wallstress"
            )
        if version < SCHEMA_VERSION and not read_only:
            migrate(con)
    except Exception:
        con.close()
        raise
    if read_only and not new and version < SCHEMA_VERSION:  # upgrade once, then read
        con.close()
        open_store(path).close()
        return open_store(path, read_only=True)
    return con


def is_store(path) -> bool:
    """True when ``path`` is a DuckDB file (its header says so), i.e. possibly a cohort store."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(12)
    except OSError:
        return False
    return head[8:12] == b"DUCK"


def scratch_store():
    """An empty store in memory: the same rules for a follow-up straight from files."""
    import duckdb

    con = duckdb.connect(":memory:")
    create_schema(con)
    return con
