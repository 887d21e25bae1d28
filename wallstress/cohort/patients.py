"""Which exported identifiers are one patient: proposals, never merges, and the clinic's map.

Two identifiers are *proposed* as one patient when they differ only in form (case, spaces, dashes,
dots, underscores, leading zeros of a number: ``HT0001``, ``ht-0001``, ``HT 1``), or when their
studies never overlap in time, come from different exports, and their sex, height (within 3 cm)
and age (birth year within 1 year) agree. A proposal is a line of a suggested map: a
match by form fills ``patient_id``; a match by person only names the ``candidate`` and leaves
``patient_id`` blank (two people of the same sex, height and age are not rare), for the clinic to
fill where it agrees. Nothing is merged until the clinic's map (``exported_id,patient_id``) says so.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from wallstress.errors import InputError

MAP_COLUMNS = ("exported_id", "patient_id", "reason")  # a proposal adds "candidate"
HEIGHT_TOLERANCE_CM = 3.0  # common practice, no source
BIRTH_YEAR_TOLERANCE = 1.0  # common practice, no source


def id_form(text: str) -> str:
    """An identifier with its form taken away: upper case, no separators, no leading zeros."""
    return str(id_forms(pd.Series([text])).iloc[0])


def id_forms(ids: pd.Series) -> pd.Series:
    """:func:`id_form` of a column of identifiers, with vectorised text methods."""
    t = ids.astype(str).str.upper().str.replace(r"[\s\-_./]+", "", regex=True)
    return t.str.replace(r"(^|\D)0+(\d)", r"\1\2", regex=True)


def propose(studies: pd.DataFrame) -> pd.DataFrame:
    """Proposed matches: ``exported_id``, ``patient_id`` (the proposed patient: the form seen in
    the newest export), ``reason``. ``studies``: canonical rows with ``patient_id``,
    ``study_date``, ``source_file`` and, where known, ``sex``, ``height_cm``, ``age_years``."""
    s = studies.dropna(subset=["patient_id"]).copy()
    if s.empty:
        return pd.DataFrame(columns=[*MAP_COLUMNS, "candidate"])
    s["patient_id"] = s["patient_id"].astype(str)
    ids = pd.Series(s["patient_id"].unique())
    forms = dict(zip(ids, id_forms(ids), strict=True))  # each distinct id once, vectorised
    s["_form"] = s["patient_id"].map(forms)
    latest = s.groupby("patient_id")["study_date"].max()
    per_form = s.drop_duplicates("patient_id")
    shared = per_form["_form"].duplicated(keep=False)
    rows = []
    for _, group in per_form[shared].groupby("_form"):  # only forms held by two or more ids
        ids_here = sorted(group["patient_id"], key=lambda i: latest.get(i, pd.NaT))
        target = ids_here[-1]
        rows += [(i, target, "identifiers differ only in form") for i in ids_here[:-1]]
    formed = {r[0] for r in rows} | {r[1] for r in rows}
    out = pd.DataFrame(rows, columns=list(MAP_COLUMNS))
    out["candidate"] = out["patient_id"]
    weak = pd.DataFrame(_by_person(s[~s["patient_id"].isin(formed)]), columns=list(MAP_COLUMNS))
    # a person-like match is only a candidate: its patient_id is left blank for the clinic to fill
    weak["candidate"], weak["patient_id"] = weak["patient_id"], ""
    return pd.concat([out, weak], ignore_index=True).drop_duplicates("exported_id")


def _by_person(s: pd.DataFrame) -> list[tuple[str, str, str]]:
    """Identifiers of different exports whose studies do not overlap in time and whose sex,
    height and birth year agree: one proposal when the match is unique both ways."""
    if not {"sex", "height_cm", "age_years", "study_date", "source_file"} <= set(s.columns):
        return []
    d = (
        s.assign(
            birth=s["study_date"].dt.year - s["age_years"],
        )
        .groupby(["_form"])
        .agg(
            pid=("patient_id", "last"),
            sex=("sex", "first"),  # the first given
            height=("height_cm", "median"),
            birth=("birth", "median"),
            first=("study_date", "min"),
            last=("study_date", "max"),
            first_file=("source_file", "first"),
            last_file=("source_file", "last"),
        )
    )
    d = d.dropna(subset=["sex", "height", "birth", "first", "last"]).reset_index(drop=True)
    if len(d) < 2:
        return []
    # compared within buckets of one sex and birth year (and the next year): never all pairs
    d["_b"] = np.floor(d["birth"]).astype(int)
    buckets = {k: g.index.to_numpy() for k, g in d.groupby(["sex", "_b"])}
    h, b = d["height"].to_numpy(float), d["birth"].to_numpy(float)
    first, last = d["first"].to_numpy(), d["last"].to_numpy()
    codes, _ = pd.factorize(pd.concat([d["first_file"], d["last_file"]]))
    first_file, last_file = codes[: len(d)], codes[len(d) :]
    pairs = []
    for (sex, year), here in buckets.items():
        near = np.concatenate(
            [buckets.get((sex, y), np.zeros(0, dtype=int)) for y in (year - 1, year, year + 1)]
        )
        ok = (
            (np.abs(h[here, None] - h[None, near]) <= HEIGHT_TOLERANCE_CM)
            & (np.abs(b[here, None] - b[None, near]) <= BIRTH_YEAR_TOLERANCE)
            & (last[here, None] < first[None, near])  # i ends before j begins
            & (last_file[here, None] != first_file[None, near])  # in different exports
        )
        i, j = np.nonzero(ok)
        pairs += list(zip(here[i].tolist(), near[j].tolist(), strict=True))
    if not pairs:
        return []
    left = pd.Series([i for i, _ in pairs]).value_counts()
    right = pd.Series([j for _, j in pairs]).value_counts()
    return [
        (
            str(d["pid"].iloc[i]),
            str(d["pid"].iloc[j]),
            "same sex, height and birth year; studies before and after a change of export",
        )
        for i, j in pairs
        if left[i] == 1 and right[j] == 1  # unique both ways
    ]


def read_map(path) -> dict[str, str]:
    """A clinic's map (CSV ``exported_id,patient_id[,reason]``): exported id -> patient."""
    try:
        m = pd.read_csv(path, dtype=str, keep_default_na=False)
    except (OSError, ValueError) as exc:
        raise InputError(f"{path}: cannot read the patient map ({exc})") from exc
    missing = {"exported_id", "patient_id"} - set(m.columns)
    if missing:
        raise InputError(
            f"{path}: the patient map needs the columns exported_id,patient_id (missing "
            f"{', '.join(sorted(missing))}); 'wallstress cohort status STORE --map-out FILE' writes one"
        )
    m = m[(m["exported_id"].str.strip() != "") & (m["patient_id"].str.strip() != "")]
    return dict(zip(m["exported_id"].str.strip(), m["patient_id"].str.strip(), strict=True))


def apply_map(patient_id: pd.Series, mapping: dict[str, str]) -> pd.Series:
    """Patient ids with the clinic's decisions applied (ids not in the map unchanged)."""
    if not mapping:
        return patient_id
    text = patient_id.astype("string").astype(object).where(patient_id.notna())
    return text.map(lambda v: mapping.get(v, v) if isinstance(v, str) else v)
