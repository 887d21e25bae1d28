"""What the command-line modules share: option definitions, choices from the formula tuples, and
the guard that turns every failure into one line and an exit code (never a traceback)."""

from __future__ import annotations

import traceback
from enum import Enum
from pathlib import Path

import typer

from wallstress.errors import UNEXPECTED, describe
from wallstress.jobs import read_columns_map
from wallstress.options import Options
from wallstress.prepare.dates import DATE_ORDERS
from wallstress.schema.units import UNIT_CHOICES
from wallstress.schema.vocabulary import METHOD_CHOICES
from wallstress.tracking.visits import SAME_DAY_RULES
from wallstress.write.safety import protected_inputs

DEFAULTS = Options()

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
