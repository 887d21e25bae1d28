"""Units: reading them from headers, converting them to internal units, inferring them from values.

Internal units (see ``schema``): length cm, mass kg, pressure mmHg, volume mL, area cm2, time ms.
Every factor below is computed from its definition, not retyped:

- 1 in = 2.54 cm exactly (international yard and pound agreement, 1959).
- 1 lb = 0.45359237 kg exactly (same agreement).
- 1 mmHg = 133.322387415 Pa (conventional millimetre of mercury: 13.5951 g/cm3 x 9.80665 m/s2 x 1 mm),
  so 1 kPa = 1000 / 133.322387415 mmHg = 7.50062 mmHg.

``factor(quantity, unit)`` is the number to multiply a value in ``unit`` by to get the internal unit.

References
----------
BIPM, The International System of Units (SI Brochure), 9th ed., 2019 (prefixes; mmHg as a
non-SI unit equal to 133.322387415 Pa).
"""

from __future__ import annotations

import re
from typing import NamedTuple

import numpy as np

from wallstress.formulas.constants import MMHG_PA
from wallstress.schema import fields as schema

# --- definitions -----------------------------------------------------------------------------------
CM_PER_INCH = 2.54  # exact, by definition
KG_PER_POUND = 0.45359237  # exact, by definition
PA_PER_MMHG = MMHG_PA  # conventional mmHg, by definition (formulas.constants)
MMHG_PER_KPA = 1000.0 / PA_PER_MMHG

# How a length column without a unit in its header is read: inferred from its values, or as given.
UNIT_CHOICES: tuple[str, ...] = ("auto", "mm", "cm")

QUANTITIES: tuple[str, ...] = (
    "length",
    "mass",
    "pressure",
    "volume",
    "area",
    "time",
    "rate",
    "age",
)

# factor to the internal unit, per quantity and canonical unit spelling
_FACTORS: dict[str, dict[str, float]] = {
    "length": {"mm": 0.1, "cm": 1.0, "m": 100.0, "in": CM_PER_INCH},
    "mass": {"kg": 1.0, "g": 1e-3, "lb": KG_PER_POUND},
    "pressure": {"mmHg": 1.0, "kPa": MMHG_PER_KPA},
    "volume": {"mL": 1.0, "L": 1000.0},
    "area": {"cm2": 1.0, "mm2": 0.01, "m2": 1e4},
    "time": {"ms": 1.0, "s": 1000.0},
    "rate": {"bpm": 1.0},
    "age": {"years": 1.0},
}
UNITS: dict[str, tuple[str, ...]] = {q: tuple(u) for q, u in _FACTORS.items()}
"""Valid unit names per quantity (canonical spelling)."""

# spellings seen in headers and cells -> canonical unit
_SPELLINGS: dict[str, str] = {
    "mm": "mm",
    "millimetre": "mm",
    "millimetres": "mm",
    "millimeter": "mm",
    "millimeters": "mm",
    "cm": "cm",
    "centimetre": "cm",
    "centimetres": "cm",
    "centimeter": "cm",
    "centimeters": "cm",
    "m": "m",
    "metre": "m",
    "metres": "m",
    "meter": "m",
    "meters": "m",
    "in": "in",
    "inch": "in",
    "inches": "in",
    '"': "in",
    "''": "in",
    "kg": "kg",
    "kgs": "kg",
    "kilogram": "kg",
    "kilograms": "kg",
    "kilo": "kg",
    "kilos": "kg",
    "g": "g",
    "gram": "g",
    "grams": "g",
    "gramme": "g",
    "grammes": "g",
    "lb": "lb",
    "lbs": "lb",
    "pound": "lb",
    "pounds": "lb",
    "mmhg": "mmHg",
    "mm hg": "mmHg",
    "torr": "mmHg",
    "kpa": "kPa",
    "ml": "mL",
    "millilitre": "mL",
    "millilitres": "mL",
    "milliliter": "mL",
    "milliliters": "mL",
    "cc": "mL",
    "cm3": "mL",
    "cm^3": "mL",
    "cm³": "mL",
    "l": "L",
    "litre": "L",
    "litres": "L",
    "liter": "L",
    "liters": "L",
    "cm2": "cm2",
    "cm^2": "cm2",
    "cm²": "cm2",
    "sq cm": "cm2",
    "sqcm": "cm2",
    "mm2": "mm2",
    "mm^2": "mm2",
    "mm²": "mm2",
    "m2": "m2",
    "m^2": "m2",
    "m²": "m2",
    "ms": "ms",
    "msec": "ms",
    "msecs": "ms",
    "millisecond": "ms",
    "milliseconds": "ms",
    "s": "s",
    "sec": "s",
    "secs": "s",
    "second": "s",
    "seconds": "s",
    "bpm": "bpm",
    "beats min": "bpm",
    "beats/min": "bpm",
    "/min": "bpm",
    "min-1": "bpm",
    "y": "years",
    "yr": "years",
    "yrs": "years",
    "year": "years",
    "years": "years",
}
# spellings trusted as a bare last word of a header without brackets or a comma ("lvidd mm")
_BARE_OK = frozenset(
    s for s in _SPELLINGS if len(s) >= 2 and s not in {"in", "cc", "yr", "m2", "sec", "second"}
)
_QUANTITY_OF = {u: q for q, us in _FACTORS.items() for u in us}


def normalise_unit(text: object) -> str | None:
    """Canonical spelling of a unit, or None when ``text`` is not a known unit.

    >>> normalise_unit(" MM Hg "), normalise_unit("lbs"), normalise_unit("furlong")
    ('mmHg', 'lb', None)
    """
    if text is None:
        return None
    s = " ".join(str(text).strip().lower().replace("µ", "u").split())
    s = s.strip(".:;")
    if s in _SPELLINGS:
        return _SPELLINGS[s]
    s2 = s.replace(" ", "")
    return _SPELLINGS.get(s2)


def quantity_of(unit: str) -> str | None:
    """The quantity a canonical unit measures ("length", "mass", ...), or None."""
    return _QUANTITY_OF.get(unit)


_BRACKETS = re.compile(r"[\(\[\{]([^\)\]\}]*)[\)\]\}]")


def parse_header_unit(header: object) -> str | None:
    """The unit a header states, in canonical spelling, or None.

    Read, in order: text in brackets (``"LVIDd (mm)"``, ``"IVSd [cm]"``), text after the last comma
    or slash-free separator (``"Height, in"``), a trailing unit word (``"lvidd_mm"``, ``"SBP kPa"``).
    Single-letter units (m, s, g, L) and ``in`` are read only in brackets, after a comma or after an
    underscore, so that "LVID s" or "Height in" is not mistaken; callers should still check that the
    unit's quantity fits the field (``quantity_of``).

    >>> parse_header_unit("LVIDd (mm)"), parse_header_unit("Height, in"), parse_header_unit("SBP")
    ('mm', 'in', None)
    """
    if header is None:
        return None
    text = str(header).strip()
    if not text:
        return None
    for inner in _BRACKETS.findall(text):
        u = normalise_unit(inner)
        if u is not None:
            return u
        for part in re.split(r"[,;\s]+", inner):
            u = normalise_unit(part)
            if u is not None and part.lower() in _BARE_OK | {"m", "s", "g", "l", "in"}:
                return u
    outside = _BRACKETS.sub(" ", text).strip()
    if "," in outside:
        tail = outside.rsplit(",", 1)[1].strip()
        u = normalise_unit(tail)
        if u is not None:
            return u
        words = tail.split()
        if words and words[0].lower() == "in" and len(words) == 2:
            return normalise_unit(words[1])
    m = re.search(r"(?:^|[\s_\-])([A-Za-z\u00b2\u00b3\^0-9/]+)$", outside)
    if m:
        word = m.group(1)
        sep = outside[m.start(1) - 1] if m.start(1) > 0 else ""
        low = word.lower()
        if low in _BARE_OK or (sep == "_" and low in {"m", "s", "g", "l", "in"}):
            # a bare trailing word must not be the whole header ("mm" alone is not a field)
            if m.start(1) > 0:
                return normalise_unit(word)
    m = re.search(r"(mm\s*hg)$", outside, flags=re.IGNORECASE)
    if m and m.start(1) > 0:
        return "mmHg"
    return None


def factor(quantity: str, unit: str) -> float:
    """Multiplier from ``unit`` to the internal unit of ``quantity``.

    Parameters
    ----------
    quantity : str
        One of ``QUANTITIES`` ("length", "mass", "pressure", "volume", "area", "time", ...).
    unit : str
        A unit of that quantity, any known spelling ("mm", "lbs", "kPa", "mm Hg").

    Returns
    -------
    float
        Factor such that ``value_in_unit * factor`` is in the internal unit [cm, kg, mmHg, mL, cm2,
        ms].

    Raises
    ------
    ValueError
        Unknown quantity, or a unit not of that quantity; the message lists the valid names.

    >>> factor("length", "mm"), factor("mass", "lb"), round(factor("pressure", "kPa"), 5)
    (0.1, 0.45359237, 7.50062)
    """
    if quantity not in _FACTORS:
        raise ValueError(f"quantity={quantity!r} is not known; use one of {QUANTITIES}")
    canon = normalise_unit(unit)
    if canon is None or canon not in _FACTORS[quantity]:
        raise ValueError(f"unit={unit!r} is not a unit of {quantity}; use one of {UNITS[quantity]}")
    return _FACTORS[quantity][canon]


class InferredUnit(NamedTuple):
    """The result of ``infer_unit``."""

    unit: str
    confidence: str  # "high", "low" or "none"
    reason: str


# candidate units per field when the header says nothing; the internal unit first
_CANDIDATES: dict[str, tuple[str, ...]] = {
    "height_cm": ("cm", "m", "in", "mm"),
    "weight_kg": ("kg", "lb", "g"),
}
_CANDIDATES_BY_QUANTITY: dict[str, tuple[str, ...]] = {
    "length": ("cm", "mm"),
    "mass": ("kg", "g"),
    "pressure": ("mmHg", "kPa"),
    "volume": ("mL", "L"),
    "area": ("cm2", "mm2"),
    "time": ("ms", "s"),
}


_CENTRAL = (0.15, 0.85)  # central part of the typical range, on a log scale
MEDIAN_SAMPLE = 1 << 16  # values a unit is inferred from, evenly spaced over a longer column


def candidate_units(field: str) -> tuple[str, ...]:
    """Units ``infer_unit`` chooses between for a field (the internal unit first)."""
    f = schema.BY_NAME[field]
    return _CANDIDATES.get(field) or _CANDIDATES_BY_QUANTITY.get(f.quantity) or (f.unit,)


def infer_unit(field: str, values) -> InferredUnit:
    """Infer the unit of a numeric column from the median of its values.

    Each candidate unit (``candidate_units``) converts the median to the internal unit; a candidate
    is plausible when that lands inside the field's ``typical`` range (``schema.Field.typical``).
    One plausible candidate: confidence "high". Several: the internal unit if among them, else the
    first; confidence "high" only for the internal unit in the central 15-85 % of its typical range
    (log scale), else "low". None: the candidate whose converted median lies closest (on a log
    scale) to the typical range, confidence "low". No finite positive values: the internal unit,
    confidence "none".

    Parameters
    ----------
    field : str
        Canonical numeric field name (``schema.NUMERIC_FIELDS``).
    values : array-like
        The column's values as written [unknown unit].

    Returns
    -------
    InferredUnit
        ``(unit, confidence, reason)``; ``reason`` is one sentence for the user.

    Notes
    -----
    The ranges are screening limits (common practice, no source): an LVIDd median of 48 can only be
    mm, a height median of 1.75 only metres. A column of more than ``2 * MEDIAN_SAMPLE`` values is
    judged by the median of ``MEDIAN_SAMPLE`` values taken at even steps through it (the
    reason says so): the median of 65,536 values lies within a fraction of a percentile of the
    whole column's, far inside the gaps between candidate units.

    >>> infer_unit("lvidd_cm", [47, 48, 52]).unit
    'mm'
    """
    if field not in schema.BY_NAME or schema.BY_NAME[field].kind != "number":
        raise ValueError(
            f"field={field!r} is not a numeric field; use one of {schema.NUMERIC_FIELDS}"
        )
    f = schema.BY_NAME[field]
    arr = np.asarray(values, dtype="float64").ravel()
    of = ""
    if arr.size > 2 * MEDIAN_SAMPLE:  # a registry column: the median of evenly spaced values
        arr = arr[np.linspace(0, arr.size - 1, MEDIAN_SAMPLE).astype(np.int64)]
        of = f" of {MEDIAN_SAMPLE:,} evenly spaced values"
    arr = arr[np.isfinite(arr) & (arr > 0)]
    cands = candidate_units(field)
    if arr.size == 0 or f.typical is None:
        return InferredUnit(f.unit, "none", f"no usable values; {f.unit} assumed")
    med = float(np.median(arr, overwrite_input=True))  # arr is our own filtered copy
    lo, hi = f.typical
    q = f.quantity
    conv = {u: med * _FACTORS[q][u] if q in _FACTORS else med for u in cands}
    plausible = [u for u in cands if lo <= conv[u] <= hi]
    if len(plausible) == 1:
        u = plausible[0]
        return InferredUnit(
            u, "high", f"median{of} {med:.4g} fits {u} only (typical {lo:g}-{hi:g} {f.unit})"
        )
    if plausible:
        u = f.unit if f.unit in plausible else plausible[0]
        # the internal unit in the middle of its typical range is a confident reading even when
        # another unit would also fit (weight 80: kg, not 36 kg written in lb)
        pos = (np.log(conv[u]) - np.log(lo)) / (np.log(hi) - np.log(lo))
        confidence = "high" if u == f.unit and _CENTRAL[0] <= pos <= _CENTRAL[1] else "low"
        return InferredUnit(
            u,
            confidence,
            f"median{of} {med:.4g} fits {', '.join(plausible)} (typical {lo:g}-{hi:g} {f.unit})",
        )

    def distance(u: str) -> float:
        v = conv[u]
        if lo <= v <= hi:
            return 0.0
        with np.errstate(divide="ignore"):  # a median that underflows to 0 is infinitely far
            return min(abs(np.log(v / lo)), abs(np.log(v / hi)))

    u = min(cands, key=distance)
    return InferredUnit(
        u, "low", f"median{of} {med:.4g} fits no unit well (typical {lo:g}-{hi:g} {f.unit})"
    )
