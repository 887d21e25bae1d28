"""File-level jobs: read -> analyse / track -> write. Each returns data; the CLI only prints.

The follow-up, report and calibration stages are imported by the jobs that use them: their
dependencies (scipy, matplotlib) would otherwise add about 100 MiB and a second to every run of
``analyse``.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field, replace
from pathlib import Path

import pandas as pd

from wallstress.analysis.coverage import require_lv_dimensions
from wallstress.analysis.pipeline import analyse_with_findings
from wallstress.analysis.result import Analysis
from wallstress.bundled import data_dir
from wallstress.errors import InputError, OutputError
from wallstress.options import Options
from wallstress.progress import Progress
from wallstress.read.studies import read_studies, system_arrow_memory
from wallstress.schema.vocabulary import CLINICAL_CAUTION
from wallstress.write.results import (
    planned_outputs,
    results_keys,
    sheet_keys,
    write_results,
    write_sheets,
)
from wallstress.write.safety import check_outputs, protected_inputs, same_file
from wallstress.write.xlsx.workbook import check_fits_xlsx


@dataclass
class JobResult:
    analysis: Analysis | None
    written: list[Path] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def rows_with_errors(self) -> int:
        return int(self.analysis.methods["counts"]["rows_with_errors"]) if self.analysis else 0


def read_columns_map(path: str | Path | None) -> dict:
    """A lab's header map: JSON object {header: field} or a CSV with columns header,field."""
    if not path:
        return {}
    p = Path(path)
    if not p.is_file():
        raise InputError(
            f"{p}: column map not found; give a CSV with columns header,field or a JSON object"
        )
    try:
        if p.suffix.lower() == ".json":
            data = json.loads(p.read_text(encoding="utf-8-sig"))
            if not isinstance(data, dict):
                raise ValueError("not an object")
            return {str(k): str(v) for k, v in data.items()}
        t = pd.read_csv(p, dtype=str, encoding="utf-8-sig")
    except Exception as exc:
        raise InputError(
            f"{p}: column map cannot be read ({exc}); use CSV columns header,field or a JSON object"
        ) from exc
    cols = [c.strip().lower() for c in t.columns]
    if cols[:2] != ["header", "field"]:
        raise InputError(
            f"{p}: column map needs the columns 'header' and 'field' (found {list(t.columns)})"
        )
    return dict(zip(t.iloc[:, 0].astype(str), t.iloc[:, 1].astype(str).str.strip(), strict=True))


def _loud_notes(analysis: Analysis) -> list[str]:
    """The file-level findings a user must see on the terminal: inputs that stop measures."""
    f = analysis.findings
    hit = f[(f["row"] < 0) & (f["code"] == "input_missing")]
    return [str(m) for m in hit["message"]]


def _source_methods(analysis: Analysis, study) -> None:
    analysis.methods["input"] = {
        "file": study.path.name,
        "sha256": study.sha256,
        "format": study.format,
        "sheet": study.sheet,
        "header_row": study.header_row,
    }


@system_arrow_memory()
def analyse_file(
    path: str | Path,
    out: str | Path | None = None,
    options: Options | None = None,
    *,
    in_place: bool = False,
    escape_formulas: bool = False,
    quiet: bool = True,
) -> JobResult:
    """Analyse one study-list file and write results next to it (never over it)."""
    options = options or Options()
    path = Path(path)
    out_path = Path(out) if out else default_output(path)
    if in_place:
        out_path = path
    elif same_file(out_path, path):
        raise OutputError(
            f"{out_path}: this would overwrite your input; choose another -o or pass --in-place"
        )
    else:
        check_outputs(planned_outputs(out_path, results_keys()), [path])

    with (
        protected_inputs(*([] if in_place else [path]), *reference_files(options)),
        Progress(4, enabled=None if not quiet else False) as bar,
    ):
        study = read_studies(path, sheet=options.sheet, columns=options.columns)
        workbook = out_path.suffix.lower() in (".xlsx", ".xlsm")
        if workbook:
            check_fits_xlsx(*study.table.shape, out_path)  # refuse before computing, not after
        bar.step(f"read {len(study.table)} rows")
        if in_place or workbook:
            numbers = [study.numbers]
        else:
            study, numbers = study.handed_over()
        analysis = analyse_with_findings(
            study.table, options, prior_findings=study.findings, numbers=numbers.pop()
        )
        _source_methods(analysis, study)
        require_lv_dimensions(analysis, path)
        bar.step("measures computed")
        written = write_results(
            analysis, out_path, study, in_place=in_place, escape_formulas=escape_formulas
        )
        bar.step("written")
    notes = _loud_notes(analysis) + list(getattr(written, "notes", []) or [])
    paths = list(getattr(written, "paths", written))
    bar.step("done")
    return JobResult(analysis, paths, notes)


def reference_files(options: Options) -> list[Path]:
    """The lab's own reference-set file, when ``options.reference`` names one (an input too)."""
    ref = Path(options.reference)
    return [ref] if ref.suffix.lower() == ".csv" and ref.is_file() else []


def default_output(path: Path) -> Path:
    """``studies.xlsx`` -> ``studies.wallstress.xlsx`` (csv and ods -> xlsx; parquet stays parquet)."""
    suffix = path.suffix.lower()
    ext = ".parquet" if suffix == ".parquet" else ".xlsx"
    return path.with_name(f"{path.stem}.wallstress{ext}")


def with_options(options: Options, **changes) -> Options:
    """A copy of options with the given non-None changes."""
    return replace(options, **{k: v for k, v in changes.items() if v is not None})


def _read_and_analyse(path, options: Options):
    study = read_studies(Path(path), sheet=options.sheet, columns=options.columns)
    study, numbers = study.handed_over()
    analysis = analyse_with_findings(
        study.table, options, prior_findings=study.findings, numbers=numbers.pop()
    )
    _source_methods(analysis, study)
    require_lv_dimensions(analysis, path)
    return study, analysis


@system_arrow_memory()
def track_file(
    path: str | Path,
    out: str | Path,
    options: Options | None = None,
    *,
    within_subject_sd_g: float | None = None,
    same_day: str = "mean",
    escape_formulas: bool = False,
) -> JobResult:
    """Follow-up of a clinic cohort: patients, visits, transitions and methods, written to ``out``."""

    from wallstress.tracking.track import SHEETS as TRACKING_SHEETS
    from wallstress.tracking.track import track, tracking_sheets

    options = options or Options()
    path, out = Path(path), Path(out)
    check_outputs(planned_outputs(out, sheet_keys(TRACKING_SHEETS)), [path])
    with protected_inputs(path, *reference_files(options)):
        _, analysis = _read_and_analyse(path, options)
        tracking = track(
            analysis, options, within_subject_sd_g=within_subject_sd_g, same_day=same_day
        )
        methods = {**analysis.methods, "tracking": tracking.methods}
        written = write_sheets(
            out, tracking_sheets(tracking), methods, escape_formulas=escape_formulas
        )
    p = tracking.patients
    notes = [f"{len(p)} patients, {len(tracking.visits)} visits"]
    if "verdict" in p.columns:
        for verdict, count in p["verdict"].value_counts().items():
            notes.append(f"  {verdict}: {count}")
    notes += [f"note: {n}" for n in getattr(written, "notes", [])]
    return JobResult(analysis, list(getattr(written, "paths", written)), notes)


@system_arrow_memory()
def report_file(
    path: str | Path,
    out: str | Path,
    options: Options | None = None,
    *,
    figures_dir=None,
    quiet: bool = True,
) -> Path:
    """One self-contained HTML report; the cohort over time and per-patient pages when the list
    follows patients over time (``tracking.track.is_longitudinal``)."""

    options = options or Options()
    out = Path(out)
    check_outputs([out], [path])
    if figures_dir is not None and Path(figures_dir).exists() and not Path(figures_dir).is_dir():
        raise OutputError(
            f"--figures {figures_dir} is a file; give a folder for the figures (it is created)"
        )
    from wallstress.report.page import write_report
    from wallstress.tracking.track import is_longitudinal, track

    with (
        protected_inputs(Path(path), *reference_files(options)),
        Progress(4, enabled=None if not quiet else False) as bar,
    ):
        _, analysis = _read_and_analyse(path, options)
        bar.step(f"read and analysed {analysis.n_rows} rows")
        tracking = None
        if is_longitudinal(analysis.canonical):  # a lab's cross-sectional list: no patient pages
            tracking = track(analysis, options)
        bar.step("followed patients" if tracking is not None else "one study per patient")
        written = write_report(analysis, out, tracking=tracking, figures_dir=figures_dir)
        bar.step("report drawn and written")
        bar.step("done")
        return written


@system_arrow_memory()
def calibrate_file(
    path: str | Path,
    out: str | Path,
    options: Options | None = None,
    *,
    min_per_sex: int = 120,
    allow_small: bool = False,
    keep_implausible_line: bool = False,
) -> JobResult:
    """A lab's own reference set from its healthy subjects."""

    options = options or Options()
    check_outputs([Path(out)], [path])
    with protected_inputs(Path(path), *reference_files(options)):
        return _calibrate(path, out, options, min_per_sex, allow_small, keep_implausible_line)


def _calibrate(path, out, options, min_per_sex, allow_small, keep_implausible_line) -> JobResult:
    from wallstress.calibration.fit import calibrate
    from wallstress.calibration.set_writer import write_set

    _, analysis = _read_and_analyse(path, options)
    cal = calibrate(
        analysis,
        base_set=options.reference,
        lab_name=Path(path).stem,
        min_per_sex=min_per_sex,
        allow_small=allow_small,
        source_file=Path(path).name,
        keep_implausible_line=keep_implausible_line,
    )
    written = write_set(cal, Path(out))
    return JobResult(analysis, [written], list(cal.notes))


def sample_dir() -> Path:
    """The bundled, invented sample studies (installed with the package)."""

    folder = data_dir("sample_studies")
    if not (folder / "fernhill_echo_lab.xlsx").is_file():
        raise InputError(f"the sample studies are missing from {folder}; reinstall wallstress")
    return folder


def run_demo(folder: str | Path = "wallstress-demo") -> JobResult:
    """The whole job on the invented sample studies: analyse, track, report, calibrate."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    samples = sample_dir()
    notes: list[str] = []
    written: list[Path] = []
    lab = analyse_file(
        samples / "fernhill_echo_lab.xlsx", folder / "fernhill_echo_lab.wallstress.xlsx"
    )
    c = lab.analysis.methods["counts"]
    notes.append(
        f"echo lab study list: {c['rows']} studies, {c['rows_flagged']} flagged, "
        f"{c['rows_with_errors']} with errors -> {lab.written[0].name}"
    )
    written += lab.written
    fu = track_file(samples / "fernhill_followup.xlsx", folder / "fernhill_followup.tracking.xlsx")
    notes.append(f"follow-up clinic: {fu.notes[0]} -> {fu.written[0].name}")
    notes += fu.notes[1:]
    written += fu.written
    rep = report_file(
        samples / "fernhill_followup.xlsx",
        folder / "fernhill_followup.report.html",
        figures_dir=folder / "figures",
    )
    notes.append(f"report: {rep.name} (figures in figures/)")
    written.append(rep)
    lab_rep = report_file(
        samples / "fernhill_echo_lab.xlsx", folder / "fernhill_echo_lab.report.html"
    )
    notes.append(f"report: {lab_rep.name}")
    from wallstress.calibration.fit import calibrate
    from wallstress.calibration.set_writer import write_set

    try:
        _, normals = _read_and_analyse(samples / "fernhill_normals.csv", Options())
        cal = calibrate(
            normals,
            lab_name="fernhill_normals",
            allow_small=True,
            source_file="fernhill_normals.csv",
        )
        p = write_set(cal, folder / "fernhill_own_limits.csv")
        notes.append(
            f"lab's own limits from {normals.n_rows} healthy volunteers -> {p.name} "
            "(use it with --reference)"
        )
        written.append(p)
    except InputError as exc:
        notes.append(f"calibrate: {exc}")
    notes.append(f"These are invented data. {CLINICAL_CAUTION}")
    return JobResult(lab.analysis, written, notes)
