"""The ``wallstress cohort`` commands: a clinic's yearly exports kept in one store file."""

from __future__ import annotations

from pathlib import Path

import typer

from wallstress.cli_common import (
    COLUMNS,
    DATE_ORDER,
    EXIT_INPUT,
    REF,
    SHEET,
    UNITS,
    DateOrder,
    Units,
    _guard,
    _one_line,
    _options,
)
from wallstress.follow_up import cohort_add, cohort_export, cohort_status

cohort_app = typer.Typer(
    no_args_is_help=True,
    help="A clinic's yearly exports kept in one store file (DuckDB, no server).",
)


@cohort_app.command("add")
def cohort_add_command(
    store: Path = typer.Argument(..., help="The store file (made if missing), e.g. clinic.duckdb."),
    files: list[Path] = typer.Argument(..., help="Study lists to add: files, folders or globs."),
    patient_map: Path = typer.Option(
        None, "--patient-map", help="CSV exported_id,patient_id: your decisions, kept in the store."
    ),
    reference: str = REF,
    units: Units = UNITS,
    date_order: DateOrder = DATE_ORDER,
    sheet: str = SHEET,
    columns: Path = COLUMNS,
):
    """Add exports to the store, once each, with provenance; conflicts and matches reported."""
    options = _guard(_options, reference, units, sheet, columns, date_order=date_order)
    done = _guard(
        cohort_add, store, files, options, patient_map=patient_map, inputs=(columns, patient_map)
    )
    for r in done.imports:
        extra = f", {r.conflicts} conflicting values" if r.conflicts else ""
        typer.echo(
            f"{r.file}: {r.status}"
            + (
                f" ({r.rows} rows: {r.new_studies} new studies, {r.same_studies} already in{extra})"
                if r.status == "imported"
                else ""
            )
        )
    for line in done.notes:
        typer.echo(line)
    if done.proposals is not None and len(done.proposals):
        typer.echo(
            f"{len(done.proposals)} identifiers proposed as another patient's; nothing merged. "
            f"See them with: wallstress cohort status {store} --map-out MAP.csv"
        )
    for name, message in done.failed:
        typer.echo(f"wallstress: {name}: not added: {_one_line(message)}", err=True)
    if done.failed:
        raise typer.Exit(EXIT_INPUT)


@cohort_app.command("status")
def cohort_status_command(
    store: Path = typer.Argument(..., help="The store file."),
    map_out: Path = typer.Option(
        None,
        "--map-out",
        help="Write the proposed patient matches as a CSV to edit and pass with --patient-map.",
    ),
):
    """What went into the store: imports, counts, conflicts, proposed patient matches."""
    st = _guard(cohort_status, store)
    imports = st["imports"]
    typer.echo(
        f"{store}: {len(imports)} imports, {st['studies']} studies, "
        f"{st['patients_as_exported']} patient ids as exported, {len(st['patient_map'])} decided "
        "matches"
    )
    for r in imports.itertuples(index=False):
        typer.echo(
            f"  {r.imported_utc}  {r.file_name}  {r.rows} rows, {r.new_studies} new, "
            f"{r.same_studies} already in, {r.conflicts} conflicts  sha256 {r.sha256[:12]}"
        )
    for r in st["conflicts"].itertuples(index=False):
        typer.echo(
            f"  conflict: {r.study_key} {r.field}: kept {r.kept_value} ({r.kept_file}), other "
            f"{r.other_value} ({r.other_file}); {r.rule}"
        )
    proposals = st["proposals"]
    typer.echo(f"{len(proposals)} proposed patient matches (nothing merged without your map)")
    if map_out is not None:
        _guard(_write_map, proposals, map_out, inputs=(store,))
        typer.echo(
            f"wrote {map_out}: check each line (blank patient_id: fill it only if you agree with "
            "the candidate), then pass it with --patient-map"
        )


def _write_map(proposals, path: Path) -> None:
    from wallstress.write.safety import atomic_path

    with atomic_path(path) as tmp:
        proposals.to_csv(tmp, index=False)


@cohort_app.command("export")
def cohort_export_command(
    store: Path = typer.Argument(..., help="The store file."),
    folder: Path = typer.Argument(..., help="Folder for the parquet files (made if missing)."),
):
    """The store's tables as parquet files (for dask or another tool)."""
    written = _guard(cohort_export, store, folder)
    for p in written:
        typer.echo(f"wrote {p}")
