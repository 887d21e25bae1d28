"""Command line: each command is a thin wrapper over a public function that returns data.

Exit codes: 0 the batch ran (rows may carry flags); 1 the input cannot be used (one line saying why
and what to do); 2 usage; 3 with --strict when any row has an error finding.
"""

from __future__ import annotations

import sys
import traceback
from enum import Enum
from pathlib import Path

import typer

from wallstress import __version__
from wallstress.analysis.references import list_sets, load_set
from wallstress.chunked import analyse_chunked
from wallstress.errors import UNEXPECTED, describe
from wallstress.jobs import (
    analyse_file,
    calibrate_file,
    read_columns_map,
    report_file,
    run_demo,
    track_file,
)
from wallstress.options import Options
from wallstress.prepare.dates import DATE_ORDERS
from wallstress.schema.units import UNIT_CHOICES
from wallstress.schema.vocabulary import CLINICAL_CAUTION, METHOD_CHOICES
from wallstress.tracking.visits import SAME_DAY_RULES
from wallstress.write.safety import protected_inputs
from wallstress.write.template import write_template

DEFAULTS = Options()

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help=(
        "LV mass, geometry, end-systolic wall stress and chamber function for echocardiographic study "
        f"lists. {CLINICAL_CAUTION}"
    ),
)

EXIT_INPUT, EXIT_STRICT = 1, 3
_state = {"debug": False}


def _choices(name: str, values) -> type[Enum]:
    """A typer choice list made from a tuple of method names (the tuples live with the formulas)."""
    return Enum(name, {v: v for v in values}, type=str)


Bsa = _choices("Bsa", METHOD_CHOICES["bsa_method"])
Mass = _choices("Mass", METHOD_CHOICES["mass_method"])
Rwt = _choices("Rwt", METHOD_CHOICES["rwt_method"])
EsPressure = _choices("EsPressure", METHOD_CHOICES["es_pressure"])
StressConstant = _choices("StressConstant", METHOD_CHOICES["stress_constant"])
Units = _choices("Units", UNIT_CHOICES)
SameDay = _choices("SameDay", SAME_DAY_RULES)
DateOrder = _choices("DateOrder", DATE_ORDERS)


def _one_line(text: str) -> str:
    """A message on one line: line breaks (a file name may hold one) shown as \\n, not cut."""
    return str(text).strip().replace("\r", "\\r").replace("\n", "\\n")


def _say(message: str, code: int) -> None:
    if _state["debug"]:
        traceback.print_exc()
    typer.echo(f"wallstress: {_one_line(message)}", err=True)
    raise typer.Exit(code)


def _guard(fn, *args, inputs=(), **kwargs):
    """Run a job; every failure becomes one line on stderr and an exit code (never a traceback).

    ``inputs`` are further files the command reads (a ``--columns`` map, a set CSV): no output may
    be written over them."""
    try:
        with protected_inputs(*inputs):
            return fn(*args, **kwargs)
    except (Exception, KeyboardInterrupt) as exc:  # never a bare traceback for a user's file
        message, code = describe(exc)
        if code == UNEXPECTED:
            message += "; run again with --debug and report it with the traceback"
            code = EXIT_INPUT
        _say(message, code)


def _options(
    reference: str,
    units: Units,
    sheet: str | None,
    columns: Path | None,
    bsa: Bsa | None = None,
    mass: Mass | None = None,
    rwt: Rwt | None = None,
    es_pressure: EsPressure | None = None,
    stress_constant: StressConstant | None = None,
    date_order: DateOrder | None = None,
) -> Options:
    chosen = {
        "bsa_method": bsa,
        "mass_method": mass,
        "rwt_method": rwt,
        "es_pressure": es_pressure,
        "stress_constant": stress_constant,
        "date_order": date_order,
    }
    return Options(
        **{k: v.value for k, v in chosen.items() if v is not None},
        reference=reference,
        units=units.value,
        sheet=sheet,
        columns=read_columns_map(columns) if columns else {},
    )


REF = typer.Option(
    DEFAULTS.reference,
    "--reference",
    "-r",
    help="Reference set name or a set CSV (see 'references').",
)
BSA = typer.Option(Bsa(DEFAULTS.bsa_method), "--bsa", help="Body surface area formula.")
MASS = typer.Option(
    Mass(DEFAULTS.mass_method), "--mass", help="LV mass formula (2D ones need the area columns)."
)
RWT = typer.Option(
    Rwt(DEFAULTS.rwt_method),
    "--rwt",
    help="Relative wall thickness: 2*PWd/LVIDd or (IVSd+PWd)/LVIDd.",
)
ESP = typer.Option(
    EsPressure(DEFAULTS.es_pressure), "--es-pressure", help="End-systolic pressure estimate."
)
SC = typer.Option(
    StressConstant(DEFAULTS.stress_constant),
    "--stress-constant",
    help="Published constants (0.334, 1.35) or exact mmHg->kdyn/cm2.",
)
DATE_ORDER = typer.Option(
    DateOrder(DEFAULTS.date_order),
    "--date-order",
    help="Dates like 04/03/2021: auto (by the column), dmy or mdy.",
)
UNITS = typer.Option(
    Units(DEFAULTS.units), "--units", help="Unit of LV dimensions when headers do not say."
)
SHEET = typer.Option(
    None, "--sheet", help="Sheet to read (default: first sheet with recognised headers)."
)
COLUMNS = typer.Option(
    None, "--columns", help="Your headers -> our fields: CSV 'header,field' or JSON."
)
ESCAPE = typer.Option(
    False,
    "--escape-formulas",
    help="In CSV output, prefix formula-like text (cells and headers) with a quote.",
)
QUIET = typer.Option(False, "--quiet", "-q", help="No progress or summary on the terminal.")


@app.callback()
def _root(
    debug: bool = typer.Option(False, "--debug", help="Show a traceback when something fails."),
    version: bool = typer.Option(False, "--version", help="Print the version and exit."),
):
    _state["debug"] = debug
    if version:
        typer.echo(f"wallstress {__version__}")
        raise typer.Exit(0)


@app.command()
def analyse(
    studies: Path = typer.Argument(..., help="Study list: .xlsx, .csv, .ods or .parquet."),
    out: Path = typer.Option(
        None, "--out", "-o", help="Output .xlsx, .csv or .parquet (default: beside the input)."
    ),
    reference: str = REF,
    bsa: Bsa = BSA,
    mass: Mass = MASS,
    rwt: Rwt = RWT,
    es_pressure: EsPressure = ESP,
    stress_constant: StressConstant = SC,
    units: Units = UNITS,
    date_order: DateOrder = DATE_ORDER,
    sheet: str = SHEET,
    columns: Path = COLUMNS,
    in_place: bool = typer.Option(
        False, "--in-place", help="Write into your workbook (after a backup copy beside it)."
    ),
    strict: bool = typer.Option(
        False, "--strict", help="Exit 3 when any row has an error finding."
    ),
    escape_formulas: bool = ESCAPE,
    chunk_rows: int = typer.Option(
        None,
        "--chunk-rows",
        min=1,
        help="CSV/parquet larger than memory: process this many rows at a time, streaming to "
        ".csv/.parquet (duplicates are then found within a chunk only).",
    ),
    quiet: bool = QUIET,
):
    """Every measure for every study, with flags and a methods record."""

    options = _guard(
        _options,
        reference,
        units,
        sheet,
        columns,
        bsa,
        mass,
        rwt,
        es_pressure,
        stress_constant,
        date_order,
    )
    if chunk_rows:
        _analyse_in_chunks(studies, out, options, chunk_rows, escape_formulas, quiet, strict)
        return
    result = _guard(
        analyse_file,
        studies,
        out,
        options,
        in_place=in_place,
        escape_formulas=escape_formulas,
        quiet=quiet,
        inputs=(columns,),
    )
    _summarise(result.analysis.methods["counts"], result.notes, result.written, quiet, strict)


def _summarise(counts: dict, notes, written, quiet: bool, strict: bool, where: str = "") -> None:
    """The end-of-run lines, and exit 3 under --strict when any row has an error."""
    if not quiet:
        gaps = ""
        if "rows_without_lv_mass" in counts:
            gaps = (
                f", {counts['rows_without_lv_mass']} without LV mass, "
                f"{counts['rows_without_geometry']} without a geometry class"
            )
        skipped = counts.get("rows_not_studies", 0)
        others = f" ({skipped} row(s) not studies, kept without measures)" if skipped else ""
        typer.echo(
            f"{counts.get('studies', counts['rows'])} studies{where}{others}: "
            f"{counts['rows_flagged']} flagged, {counts['rows_with_errors']} with errors{gaps} "
            "(see the findings)."
        )
        for note in notes:
            typer.echo(f"note: {note}")
        for p in written:
            typer.echo(f"wrote {p}")
    if strict and counts["rows_with_errors"]:
        raise typer.Exit(EXIT_STRICT)


def _analyse_in_chunks(studies, out, options, chunk_rows, escape_formulas, quiet, strict) -> None:

    def progress(done: int, total: int | None) -> None:
        if not quiet and sys.stderr.isatty():
            of = f" of {total}" if total else ""
            sys.stderr.write(f"\r{done} rows{of} analysed")
            sys.stderr.flush()

    result = _guard(
        analyse_chunked,
        studies,
        out,
        options,
        chunk_rows=chunk_rows,
        progress=progress,
        escape_formulas=escape_formulas,
    )
    if not quiet and sys.stderr.isatty():
        sys.stderr.write("\n")
    where = f" in {result.chunks} chunks"
    _summarise(result.methods["counts"], result.notes, result.written, quiet, strict, where)


@app.command()
def track(
    studies: Path = typer.Argument(
        ..., help="Study list with patient_id and study_date, several studies per patient."
    ),
    out: Path = typer.Option(
        ..., "--out", "-o", help="Output .xlsx (patients, visits, transitions), .csv or .parquet."
    ),
    reference: str = REF,
    within_sd: float = typer.Option(
        None,
        "--within-sd",
        help="Your lab's within-subject SD of LV mass [g] (LSC = 1.96*sqrt(2)*SD).",
    ),
    same_day: SameDay = typer.Option(
        SameDay(SAME_DAY_RULES[0]), "--same-day", help="Studies of one patient on one day."
    ),
    escape_formulas: bool = ESCAPE,
    units: Units = UNITS,
    date_order: DateOrder = DATE_ORDER,
    sheet: str = SHEET,
    columns: Path = COLUMNS,
    quiet: bool = QUIET,
):
    """Per-patient change against reproducibility, slopes and geometry transitions."""

    options = _guard(_options, reference, units, sheet, columns, date_order=date_order)
    result = _guard(
        track_file,
        studies,
        out,
        options,
        within_subject_sd_g=within_sd,
        same_day=same_day.value,
        escape_formulas=escape_formulas,
        inputs=(columns,),
    )
    if not quiet:
        for line in result.notes:
            typer.echo(line)
        for p in result.written:
            typer.echo(f"wrote {p}")


@app.command()
def report(
    studies: Path = typer.Argument(..., help="Study list (one or many studies per patient)."),
    out: Path = typer.Option(..., "--out", "-o", help="Output .html (one self-contained file)."),
    reference: str = REF,
    figures: Path = typer.Option(
        None, "--figures", help="Also write each figure as PNG and SVG here."
    ),
    units: Units = UNITS,
    date_order: DateOrder = DATE_ORDER,
    sheet: str = SHEET,
    columns: Path = COLUMNS,
    quiet: bool = QUIET,
):
    """Pictures and per-patient pages in one HTML file that works offline."""

    options = _guard(_options, reference, units, sheet, columns, date_order=date_order)
    path = _guard(report_file, studies, out, options, figures_dir=figures, inputs=(columns,))
    if not quiet:
        typer.echo(f"wrote {path}")


@app.command()
def template(out: Path = typer.Option(..., "--out", "-o", help="Output .xlsx")):
    """An empty study list with the expected headers, units and input hints."""

    path = _guard(write_template, out)
    typer.echo(f"wrote {path}")


@app.command()
def references(
    name: str = typer.Argument(None, help="A set name or set CSV; omit to list the bundled sets."),
):
    """The cut-offs in force, each with its source and whether it was checked."""

    if not name:
        for n in list_sets():
            s = load_set(n)
            typer.echo(f"{n:<20} {s.title}")
        typer.echo("\nShow one with: wallstress references NAME")
        return
    s = _guard(load_set, name)
    typer.echo(f"{s.name}: {s.title}\ngeometry decided by {s.mass_index} and rwt\n")
    for r in s.rows[s.rows["kind"] != "setting"].itertuples():
        sex = r.sex if isinstance(r.sex, str) else "both"
        flag = "" if r.verified in ("published", "lab") else f"  [{r.verified}]"
        if r.kind == "cutoff":
            typer.echo(
                f"  {r.measure:<18} {sex:<4} {r.grade:<13} {r.comparison:>2} {r.value:g} {r.unit if isinstance(r.unit, str) else ''}{flag}"
            )
        else:
            typer.echo(f"  {r.measure}.{r.grade} = {r.value:g}{flag}")
    typer.echo("\nSources:")
    for src in dict.fromkeys(s.rows.loc[s.rows["kind"] != "setting", "source"]):
        typer.echo(f"  - {src}")
    typer.echo("\n[from_memory] values were recalled, not checked against the published text.")


@app.command()
def calibrate(
    normals: Path = typer.Argument(..., help="Study list of your lab's healthy subjects."),
    out: Path = typer.Option(
        ..., "--out", "-o", help="Output reference set .csv (use it with --reference)."
    ),
    base: str = typer.Option(
        DEFAULTS.reference, "--base", help="Set whose rows you do not fit are kept from."
    ),
    min_per_sex: int = typer.Option(
        120, "--min-per-sex", help="Subjects needed per sex (CLSI-style nonparametric limit: 120)."
    ),
    allow_small: bool = typer.Option(
        False,
        "--allow-small",
        help="Fit from 40 or more per sex, marking the rows as small-sample.",
    ),
    keep_implausible_line: bool = typer.Option(
        False,
        "--keep-implausible-line",
        help="Write a stress-shortening line whose slope is not negative (marked implausible).",
    ),
    units: Units = UNITS,
    date_order: DateOrder = DATE_ORDER,
    sheet: str = SHEET,
    columns: Path = COLUMNS,
):
    """Your lab's own reference limits and stress-shortening line from its healthy subjects."""

    options = _guard(_options, base, units, sheet, columns, date_order=date_order)
    result = _guard(
        calibrate_file,
        normals,
        out,
        options,
        min_per_sex=min_per_sex,
        allow_small=allow_small,
        keep_implausible_line=keep_implausible_line,
        inputs=(columns,),
    )
    for line in result.notes:
        typer.echo(line)
    for p in result.written:
        typer.echo(f"wrote {p}")


@app.command()
def demo(
    folder: Path = typer.Argument(Path("wallstress-demo"), help="Where to write the demo outputs."),
):
    """The whole job on the bundled, invented sample studies."""

    result = _guard(run_demo, folder)
    for line in result.notes:
        typer.echo(line)
    typer.echo(f"\nAll outputs are in {folder}/")


@app.command()
def serve(
    port: int = typer.Option(8765, "--port", "-p", help="Port of the page (1024-65535)."),
    host: str = typer.Option(
        "127.0.0.1",
        "--host",
        help="Address to listen on. Anything but this computer (127.0.0.1) lets other "
        "computers reach the page: a warning is printed.",
    ),
    no_browser: bool = typer.Option(False, "--no-browser", help="Do not open a browser."),
    max_upload_mb: float = typer.Option(
        200, "--max-upload-mb", help="Largest study list the page takes, in MB."
    ),
):
    """A local web page for people who don't use a terminal: upload, see, download."""
    from wallstress.web.server import serve as run_server

    if not 1024 <= port <= 65535:
        _say(f"--port {port} is not usable; choose a port from 1024 to 65535", 2)
    if not max_upload_mb > 0:
        _say(f"--max-upload-mb {max_upload_mb} is not usable; give a size above 0", 2)
    _guard(run_server, host, port, open_browser=not no_browser, max_upload_mb=max_upload_mb)


def main() -> None:
    try:
        app()
    except KeyboardInterrupt:
        sys.stderr.write("wallstress: interrupted\n")
        sys.exit(130)


if __name__ == "__main__":
    main()
