"""Write results, findings and the methods record next to (never over) the user's data.

Formats, chosen by the suffix of the output path:

- ``.xlsx``: from an ``.xlsx`` study list, a copy of the user's workbook (every sheet, formula,
  comment, style, defined name and column width of theirs kept) with three sheets of ours added
  ("wallstress results", "wallstress findings", "wallstress methods"). When the workbook holds parts
  the spreadsheet library cannot carry over (macros, drawings, pivot tables, extensions...), no
  degraded copy is written: a separate workbook holds our sheets, and the notes and methods say so.
  From any other source, a new workbook with those three sheets.
- ``.csv``: the results table (the user's columns, then ours), ``name.findings.csv`` and
  ``name.methods.json`` beside it.
- ``.parquet``: likewise (``name.findings.parquet``, ``name.methods.json``).

Never-harm rules (see :mod:`wallstress.write.safety`): every file goes through a temporary file in the
target folder and ``os.replace``; the input file is never changed except with ``in_place``, and then
only after a verified backup; text is written as text (no cell of ours becomes a formula, error value
or link); formula-like text in CSV outputs is reported and optionally escaped.

This module plans a write and dispatches it by format; the work is done in
:mod:`wallstress.write.xlsx.workbook` (workbooks) and :mod:`wallstress.write.flat` (csv, parquet).
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.compute as pc

from wallstress import findings as _findings
from wallstress.analysis import flags
from wallstress.errors import OutputError
from wallstress.schema.display import KEY_COLUMNS, label
from wallstress.schema.vocabulary import OUT, in_words
from wallstress.write import safety
from wallstress.write.flat import (
    _write_flat,
)
from wallstress.write.parts import WriteReport, _Part, _sidecar
from wallstress.write.xlsx.workbook import (
    _write_in_place,
    _write_xlsx,
)

OUTPUT_SUFFIXES: tuple[str, ...] = (".xlsx", ".csv", ".parquet")


_REFUSED_SUFFIXES = {
    ".xlsm": "macro-enabled workbooks are not written (macros cannot be carried over safely)",
    ".xls": "the old binary Excel format is not written",
    ".xlsb": "binary Excel workbooks are not written",
    ".ods": "OpenDocument spreadsheets are not written yet",
}


SHEET_RESULTS = "wallstress results"


SHEET_FINDINGS = "wallstress findings"


SHEET_METHODS = "wallstress methods"


SHEET_KEY_MEASURES = "wallstress key measures"


DEFAULT_SHEET_NAMES: dict[str, str] = {
    "results": SHEET_RESULTS,
    "key_measures": SHEET_KEY_MEASURES,
    "findings": SHEET_FINDINGS,
    "methods": SHEET_METHODS,
}


def write_results(
    analysis,
    out_path,
    source=None,
    *,
    in_place: bool = False,
    escape_formulas: bool = False,
    sheet_names: dict | None = None,
) -> WriteReport:
    """Write an analysis (results, findings, methods) next to the user's data.

    Parameters
    ----------
    analysis : wallstress.analysis.result.Analysis
        What the run produced; ``analysis.table`` is written as the results.
    out_path : path-like or None
        Output file; its suffix chooses the format (``.xlsx``, ``.csv``, ``.parquet``). May be None,
        or the input workbook itself, only with ``in_place``.
    source : StudyTable, optional
        The study list as read (``path``, ``format``, ``sheet``, ``header_row``, ``sha256``,
        ``encoding``, ``delimiter``, ``decimal``); None for DataFrame input.
    in_place : bool
        Add our sheets to the user's own ``.xlsx`` after a verified backup beside it.
    escape_formulas : bool
        CSV only: prefix formula-like text cells with a single quote.
    sheet_names : dict, optional
        Our sheet names by role (``results``, ``findings``, ``methods``); defaults
        :data:`DEFAULT_SHEET_NAMES`. A name already used in the workbook gets a number.

    Returns
    -------
    WriteReport
        A list of the written paths, with ``notes``, ``formula_like`` findings and ``backup``.

    Raises
    ------
    OutputError
        Unsupported suffix, an output that would overwrite the input, an input changed since it was
        read, a workbook open in a spreadsheet program (``in_place``), a table too big for xlsx, or a
        folder that cannot be written.
    """
    names = dict(DEFAULT_SHEET_NAMES)
    if sheet_names:
        unknown = set(sheet_names) - set(names)
        if unknown:
            raise OutputError(
                f"sheet_names has unknown role(s) {sorted(unknown)}; use {sorted(names)}"
            )
        names.update(sheet_names)
    table = analysis.table
    if in_place or Path(out_path or "").suffix.lower() == ".xlsx":
        table = numbers_as_numbers(table, getattr(source, "numbers", None))
    parts = [_Part(names["results"], "", table, unit_columns="outputs")]
    methods = dict(analysis.methods or {})
    if in_place or Path(out_path or "").suffix.lower() == ".xlsx":  # a sheet to read and print
        key, marks = with_marks(key_measures(analysis), analysis)
        parts.append(_Part(names["key_measures"], "", key, unit_columns="labels", marks=marks))
        # its labels, one step from the names the results sheet uses
        methods["key_measures_sheet_columns"] = {label(c): c for c in key.columns}
    parts.append(
        _Part(names["findings"], results_keys()[1], _findings_for_writing(analysis.findings))
    )
    return _write_bundle(
        out_path,
        parts,
        methods,
        source=source,
        in_place=in_place,
        escape_formulas=escape_formulas,
        methods_sheet=names["methods"],
    )


def key_measures(analysis) -> pd.DataFrame:
    """The compact table a clinician reads and prints (``schema.display.KEY_COLUMNS``): one row
    per study, in the input's order, classes in words; the workbook shows it under readable labels
    (its columns keep the machine names, which the methods sheet pairs with the labels)."""
    frame = analysis.frame()
    frame = frame.loc[:, ~frame.columns.duplicated()]
    cols = {}
    for name in KEY_COLUMNS:
        if name not in frame.columns:
            continue
        values = frame[name]
        if isinstance(values.dtype, pd.CategoricalDtype) and name not in ("sex", OUT.flags):
            values = values.astype(object).map(lambda v: in_words(v) if isinstance(v, str) else v)
        cols[name] = values.reset_index(drop=True)
    return pd.DataFrame(cols)


def with_marks(key: pd.DataFrame, analysis) -> tuple[pd.DataFrame, tuple]:
    """The key-measures table with its ``check`` column (the row's worst finding) and a legend,
    and the sheet's conditional marks: rows with an error; LVMI and RWT beyond the limits of the
    reference set in force (sex-specific where the set is)."""
    from wallstress.analysis.references import load_set
    from wallstress.read.sheet_bounds import col_letters

    key = key.copy()
    n = len(key)
    # the row's worst finding; a note does not count
    worst = flags.worst_severity(analysis.findings, n)
    key["check"] = np.array(["", "", "warning", "error"], dtype=object)[worst + 1]
    letter = {c: col_letters(j) for j, c in enumerate(key.columns)}
    check, last = letter["check"], n + 1
    marks = [(f"A2:{check}{last}", f'${check}2="error"', "error")]
    set_name = str((analysis.methods.get("options") or {}).get("reference") or "")
    try:
        refset = load_set(set_name) if set_name else None
    except Exception:  # the run read it already; without it, only the error marks
        refset = None
    said = []
    for measure in (OUT.lvmi_bsa_g_m2, OUT.lvmi_h27_g_m2_7, OUT.rwt):
        if refset is None or measure not in letter:
            continue
        cuts = {sex: refset.cutoff(measure, sex) for sex in ("F", "M")}
        if any(c is None or c.comparison != ">" for c in cuts.values()):
            continue
        c, sex = letter[measure], letter.get("sex")
        f_cut, m_cut = cuts["F"].value, cuts["M"].value
        if f_cut == m_cut or sex is None:
            rule = f"AND(ISNUMBER({c}2),{c}2>{f_cut:g})"
            said.append(f"{label(measure)} > {f_cut:g}")
        else:
            rule = (
                f'AND(ISNUMBER({c}2),OR(AND(${sex}2="F",{c}2>{f_cut:g}),'
                f'AND(${sex}2="M",{c}2>{m_cut:g})))'
            )
            said.append(f"{label(measure)} > {f_cut:g} (F), > {m_cut:g} (M)")
        marks.append((f"{c}2:{c}{last}", rule, "limit"))
    legend = [
        f"Blue: above the limit of the reference set {set_name} ({'; '.join(said)})"
        if said
        else "Blue: (no reference limits could be loaded)",
        "Orange: the row has an error finding (see Check, Flags and the findings sheet)",
        "Marks only: the values are as computed; check them against your lab's own limits.",
    ]
    shown = (legend + [None] * n)[:n]
    key["marks"] = pd.Series(shown, dtype=object)
    marks_col = col_letters(len(letter))
    if n >= 2:
        marks += [(f"{marks_col}2", "TRUE", "limit"), (f"{marks_col}3", "TRUE", "error")]
    return key, tuple(marks)


# A number written plainly: the text a spreadsheet shows for the number is the text of the cell
# (no leading zero, no sign "+", no exponent, no trailing zero after the decimal mark).
_PLAIN_DECIMAL = r"^-?(?:0|[1-9][0-9]*)(?:[.,][0-9]*[1-9])?$"


def numbers_as_numbers(table: pd.DataFrame, numbers: dict | None) -> pd.DataFrame:
    """For a workbook, the CSV columns of numbers as number cells; every other cell as its text.

    A column becomes numbers only when every non-empty cell is a number written plainly (``165``,
    ``4.8``, ``4,8``): ``000123``, ``+5``, ``1e3`` and ``4.80`` stay text, so no identifier or
    written form is altered. ``numbers`` is the reader's parsed copy (``StudyTable.numbers``).
    """
    swap = {}
    for name, values in (numbers or {}).items():
        if name in table.columns:
            text = pa.array(table[name].astype("str").array)
            plain = pc.match_substring_regex(text, _PLAIN_DECIMAL)
            if pc.all(pc.or_(plain, pc.is_null(plain))).as_py() is not False:
                swap[name] = values
    if not swap:
        return table
    out = table.copy(deep=False)
    for name, values in swap.items():
        out[name] = values
    return out


def write_sheets(
    out_path,
    sheets: dict,
    methods: dict,
    *,
    source=None,
    in_place: bool = False,
    escape_formulas: bool = False,
    methods_sheet: str = "methods",
) -> WriteReport:
    """Write several tables (e.g. tracking: patients, visits, transitions, prevalence) and a methods record.

    Parameters
    ----------
    out_path : path-like
        ``.xlsx`` (one sheet per table, plus the methods sheet), ``.csv`` or ``.parquet`` (the first
        table in ``out_path``, each other one in ``name.<sheet>.csv|parquet``, methods in
        ``name.methods.json``).
    sheets : dict of str -> DataFrame
        Tables in order; names are sheet names (made valid and unique where needed).
    methods : dict
        The methods record (nested dicts and lists are flattened into readable rows).
    source, in_place, escape_formulas
        As in :func:`write_results`.
    methods_sheet : str
        Name of the methods sheet.

    Returns
    -------
    WriteReport
    """
    if not sheets:
        raise OutputError("write_sheets got no tables; pass sheets={'name': DataFrame, ...}")
    parts = []
    for i, (name, frame) in enumerate(sheets.items()):
        if not isinstance(frame, pd.DataFrame):
            raise OutputError(
                f"sheets[{name!r}] is a {type(frame).__name__}, not a DataFrame; pass DataFrames"
            )
        parts.append(_Part(str(name), sheet_keys(sheets)[i], frame))
    return _write_bundle(
        out_path,
        parts,
        methods or {},
        source=source,
        in_place=in_place,
        escape_formulas=escape_formulas,
        methods_sheet=methods_sheet,
    )


def planned_outputs(out_path, keys) -> list[Path]:
    """Every file a write to ``out_path`` makes: the main file and, for .csv / .parquet, one side
    file per further table key (``name.KEY.csv``) and ``name.methods.json``."""
    out = Path(out_path)
    if _check_suffix(out) == ".xlsx":
        return [out]
    return [out, *(_sidecar(out, k) for k in keys if k), _sidecar(out, "methods", ".json")]


def results_keys() -> list[str]:
    """The side-file keys of :func:`write_results` (results in the main file, then findings)."""
    return ["", "findings"]


def sheet_keys(names) -> list[str]:
    """The side-file keys of :func:`write_sheets` for tables named ``names`` (the first is main)."""
    return ["" if i == 0 else _slug(str(n)) for i, n in enumerate(names)]


def _write_bundle(out_path, parts, methods, *, source, in_place, escape_formulas, methods_sheet):
    src_path = Path(source.path) if source is not None and getattr(source, "path", None) else None
    src_hash_before = safety.sha256_file(src_path) if src_path and src_path.is_file() else None

    if in_place:
        report = _write_in_place(out_path, parts, methods, source, src_path, methods_sheet)
    else:
        if out_path is None:
            raise OutputError(
                "no output path given; pass -o OUT.xlsx|.csv|.parquet (or --in-place)"
            )
        out = Path(out_path)
        suffix = _check_suffix(out)
        planned = planned_outputs(out, [p.key for p in parts])
        for p in planned:
            if safety.same_file(p, src_path):
                raise OutputError(
                    f"writing {str(p)!r} would overwrite your input; choose another -o or pass --in-place"
                )
        if suffix == ".xlsx":
            report = _write_xlsx(out, parts, methods, source, src_path, methods_sheet)
        else:
            report = _write_flat(out, suffix, parts, methods, source, escape_formulas)

    if src_hash_before is not None and not in_place:
        if safety.sha256_file(src_path) != src_hash_before:  # pragma: no cover - defensive
            raise OutputError(f"the input {str(src_path)!r} changed while writing; check it")
    return report


def _check_suffix(out: Path) -> str:
    suffix = out.suffix.lower()
    if suffix in _REFUSED_SUFFIXES:
        raise OutputError(
            f"cannot write {out.name!r}: {_REFUSED_SUFFIXES[suffix]}; "
            f"choose an output ending in {', '.join(OUTPUT_SUFFIXES)}"
        )
    if suffix not in OUTPUT_SUFFIXES:
        raise OutputError(
            f"unknown output type {suffix or '(no suffix)'!r} for {out.name!r}; "
            f"choose an output ending in {', '.join(OUTPUT_SUFFIXES)}"
        )
    return suffix


def _findings_for_writing(findings) -> pd.DataFrame:
    """The findings as given: Categorical text columns are turned into text by each writer, a slice
    at a time (at 10^6 studies the findings as plain text would be several hundred MB)."""
    if findings is None:
        return _findings.empty()
    return findings


def _slug(name: str) -> str:
    s = re.sub(r"[^0-9A-Za-z]+", "-", name.strip().lower()).strip("-")
    return s or "sheet"
