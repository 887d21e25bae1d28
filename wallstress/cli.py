"""Command line: each command is a thin wrapper over a public function that returns data.

Exit codes: 0 the batch ran (rows may carry flags); 1 the input cannot be used (one line saying why
and what to do); 2 usage; 3 with --strict when any row has an error finding.
"""

from __future__ import annotations

import sys
from pathlib import Path

import typer

from wallstress import __version__
from wallstress.analysis.references import list_sets, load_set
from wallstress.chunked import analyse_chunked
from wallstress.cohort.store import is_store
from wallstress.follow_up import track_sources
from wallstress.jobs import (
    analyse_file,
    calibrate_file,
    report_file,
    run_demo,
    track_file,
)
from wallstress.schema.vocabulary import CLINICAL_CAUTION
from wallstress.tracking.visits import SAME_DAY_RULES
from wallstress.write.template import write_template

app = typer.Typer(
    add_completion=False,
    no_args_is_help=True,
    help=(
        "LV mass, geometry, end-systolic wall stress and chamber function for echocardiographic study "
        f"lists. {CLINICAL_CAUTION}"
    ),
)


# names the commands use, defined once in cli_common
from wallstress.cli_cohort import cohort_app  # noqa: E402
from wallstress.cli_common import (  # noqa: E402
    BSA,
    COLUMNS,
    DATE_ORDER,
    DEFAULTS,
    ESCAPE,
    ESP,
    EXIT_STRICT,
    MASS,
    QUIET,
    REF,
    RWT,
    SC,
    SHEET,
    UNITS,
    Bsa,
    DateOrder,
    EsPressure,
    Mass,
    Rwt,
    SameDay,
    StressConstant,
    Units,
    _guard,
    _options,
    _say,
    _state,
)

app.add_typer(cohort_app, name="cohort")


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
    studies: list[Path] = typer.Argument(
        ...,
        help="Study lists (files, folders, globs) or cohort stores, with patient ids and dates.",
    ),
    out: Path = typer.Option(
        ..., "--out", "-o", help="Output .xlsx (patients, visits, transitions), .csv or .parquet."
    ),
    patient_map: Path = typer.Option(
        None,
        "--patient-map",
        help="CSV exported_id,patient_id: identifiers you confirm are one patient (kept in a "
        "store given).",
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
    """Per-patient change against reproducibility, slopes, BP and wall stress, transitions."""

    options = _guard(_options, reference, units, sheet, columns, date_order=date_order)
    single = len(studies) == 1 and studies[0].is_file() and not is_store(studies[0])
    if not single or patient_map is not None:
        result = _guard(
            track_sources,
            studies,
            out,
            options,
            patient_map=patient_map,
            within_subject_sd_g=within_sd,
            same_day=same_day.value,
            escape_formulas=escape_formulas,
            inputs=(columns, patient_map),
        )
        if not quiet:
            for line in result.notes:
                typer.echo(line)
            for p in result.written:
                typer.echo(f"wrote {p}")
        return
    studies = studies[0]
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
    path = _guard(
        report_file, studies, out, options, figures_dir=figures, quiet=quiet, inputs=(columns,)
    )
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
    store: Path = typer.Option(
        None, "--store", help="A clinic's cohort store whose patients the page may follow."
    ),
):
    """A local web page for people who don't use a terminal: upload, see, download."""
    from wallstress.web.server import serve as run_server

    if not 1024 <= port <= 65535:
        _say(f"--port {port} is not usable; choose a port from 1024 to 65535", 2)
    if not max_upload_mb > 0:
        _say(f"--max-upload-mb {max_upload_mb} is not usable; give a size above 0", 2)
    _guard(
        run_server,
        host,
        port,
        open_browser=not no_browser,
        max_upload_mb=max_upload_mb,
        store=store,
    )


def main() -> None:
    try:
        app()
    except KeyboardInterrupt:
        sys.stderr.write("wallstress: interrupted\n")
        sys.exit(130)


if __name__ == "__main__":
    main()
