"""Study lists given as files, folders or globs, each read and mapped on its own, with provenance.

A clinic's exports change over the years: headers, identifier forms and units switch with the echo
system. Each file is therefore read and analysed alone (its own header matching, its own unit
detection), and its studies carry where they came from: file, sheet, row and the file's SHA-256.
Every export's studies are under canonical names in internal units (cm, kg, mmHg), so that a store
(on disk, or in memory for a follow-up straight from files) holds them as one list.
"""

from __future__ import annotations

import glob
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from wallstress.analysis.pipeline import analyse_with_findings
from wallstress.errors import InputError
from wallstress.options import Options
from wallstress.read.studies import STUDY_LIST_SUFFIXES, read_studies, system_arrow_memory
from wallstress.schema.fields import BY_NAME

# the study lists looked for in a folder (text notes beside the exports are not taken for one)
FOLDER_SUFFIXES = tuple(s for s in STUDY_LIST_SUFFIXES if s != ".txt")
PROVENANCE = ("source_file", "source_sheet", "source_row", "source_sha256")


@dataclass
class Export:
    """One study list as read: its canonical studies with provenance, findings, units used."""

    path: Path
    sha256: str
    sheet: str
    canonical: pd.DataFrame  # canonical inputs (internal units) + provenance columns
    findings: pd.DataFrame  # the analyse-stage findings, ``row`` as in ``canonical``
    units: dict[str, str] = field(default_factory=dict)  # field -> unit the file was read in
    latest_date: pd.Timestamp | None = None


def expand(paths) -> list[Path]:
    """Files named, the study lists in folders named (sorted), and glob matches, each once."""
    out: list[Path] = []
    for given in paths:
        p = Path(given)
        if any(ch in str(given) for ch in "*?["):
            found = sorted(Path(m) for m in glob.glob(str(given), recursive=True))
            if not found:
                raise InputError(
                    f"{given}: no file matches this pattern; check the folder and name"
                )
            out += [f for f in found if f.is_file()]
        elif p.is_dir():
            found = sorted(
                f
                for f in p.iterdir()
                if f.is_file()
                and f.suffix.lower() in FOLDER_SUFFIXES
                and not f.name.startswith((".", "~$"))
            )
            if not found:
                raise InputError(
                    f"{p}: this folder holds no study list ({', '.join(FOLDER_SUFFIXES)})"
                )
            out += found
        elif p.is_file():
            out.append(p)
        else:
            raise InputError(f"{given}: no such file or folder; check the name")
    seen, unique = set(), []
    for f in out:
        key = f.resolve()
        if key not in seen:
            seen.add(key)
            unique.append(f)
    return unique


@system_arrow_memory()
def read_export(path: Path, options: Options) -> Export:
    """One file read, mapped and validated on its own (its headers, its units)."""
    study = read_studies(path, sheet=options.sheet, columns=options.columns)
    study, numbers = study.handed_over()
    analysis = analyse_with_findings(
        study.table, options, prior_findings=study.findings, numbers=numbers.pop()
    )
    canonical = analysis.canonical.copy()
    n = len(canonical)
    sheet = str(getattr(study, "sheet", "") or "")
    canonical["source_file"] = path.name
    canonical["source_sheet"] = sheet
    canonical["source_row"] = (
        np.arange(n, dtype=np.int64) + int(getattr(study, "header_row", 0) or 0) + 2
    )
    canonical["source_sha256"] = str(study.sha256)
    units = {
        m["field"]: str(m.get("unit_from") or "")
        for m in analysis.methods.get("column_mapping", [])
        if isinstance(m, dict)
        and m.get("field") in BY_NAME
        and BY_NAME[m["field"]].kind == "number"
    }
    latest = None
    if "study_date" in canonical.columns and canonical["study_date"].notna().any():
        latest = pd.Timestamp(canonical["study_date"].max())
    return Export(path, str(study.sha256), sheet, canonical, analysis.findings, units, latest)


def _when(e) -> tuple[bool, pd.Timestamp]:
    missing = e.latest_date is None or pd.isna(e.latest_date)
    return missing, pd.Timestamp(0) if missing else pd.Timestamp(e.latest_date)


def unit_changes(exports) -> list[str]:
    """Sentences naming each field whose unit differs between exports (the mm -> cm switch of a
    new echo system), in the order of the exports' latest study dates. ``exports``: objects with
    ``path``, ``latest_date`` and ``units`` (an :class:`Export`, or an import of the store)."""
    ordered = sorted(exports, key=_when)
    notes = []
    last: dict[str, tuple[str, str]] = {}
    for e in ordered:
        for name, unit in e.units.items():
            if not unit:
                continue
            if name in last and last[name][0] != unit:
                notes.append(
                    f"{name}: {last[name][1]} gave it in {last[name][0]}, {e.path.name} in {unit}; "
                    "each file was converted by its own unit"
                )
            last[name] = (unit, e.path.name)
    return notes
