"""Which canonical field a user's header names, and in which unit (from the header text).

A header matches through ``schema.normalise_header`` and ``schema.ALIASES``, or through the lab's
own map (``Options.columns``), which is checked here and always wins.
"""

from __future__ import annotations

import numpy as np

from wallstress.errors import InputError
from wallstress.schema import fields as schema
from wallstress.schema import units


def _resolve_field_name(name: object) -> str | None:
    text = str(name).strip()
    if text in schema.BY_NAME:
        return text
    key = schema.normalise_header(text)
    return schema.ALIASES.get(key) or schema.ALIASES.get(key.replace(" ", ""))


def check_columns_option(columns: dict | None) -> dict[str, str]:
    """Validate ``options.columns`` (user header -> canonical name or alias); return header -> field.

    Raises
    ------
    InputError
        A target that is no canonical field; the message lists the valid names.
    """
    out: dict[str, str] = {}
    for user, target in (columns or {}).items():
        fname = _resolve_field_name(target)
        if fname is None:
            raise InputError(
                f"columns: {user!r} -> {target!r}: {target!r} is not a known field; "
                f"use one of {', '.join(schema.BY_NAME)}"
            )
        out[str(user).strip()] = fname
    return out


def match_header(header: object, columns: dict[str, str] | None = None) -> tuple[str | None, str]:
    """The canonical field a header names, and how it was matched.

    Returns ``(field, how)``: ``how`` is "option" (from ``columns``), "canonical name"
    (``lvidd_cm``), "alias" (``LVIDd (mm)``, ``septum``) or "" when nothing matched.

    >>> match_header("LVIDd (mm)"), match_header("lvidd_cm"), match_header("Height, in")
    (('lvidd_cm', 'alias'), ('lvidd_cm', 'canonical name'), ('height_cm', 'alias'))
    """
    text = "" if header is None else str(header).strip()
    if columns:
        if text in columns:
            return columns[text], "option"
        low = schema.normalise_header(text)
        for k, v in columns.items():
            if schema.normalise_header(k) == low and low:
                return v, "option"
    if text in schema.BY_NAME:
        return text, "canonical name"
    key = schema.normalise_header(text)
    if not key:
        return None, ""
    for name in schema.BY_NAME:
        if key == schema.normalise_header(name) and schema.BY_NAME[name].kind == "number":
            return name, "canonical name"
    hit = schema.ALIASES.get(key) or schema.ALIASES.get(key.replace(" ", ""))
    if hit:
        return hit, "alias"
    # a unit written as a trailing word or after a comma: "lvidd mm", "height, in"
    words = key.split()
    if len(words) >= 2 and units.normalise_unit(words[-1]) is not None:
        rest = " ".join(words[:-1])
        if rest.endswith(" in"):  # "weight in kg"
            rest = rest[:-3]
        hit = schema.ALIASES.get(rest) or schema.ALIASES.get(rest.replace(" ", ""))
        if hit:
            return hit, "alias"
    return None, ""


def header_score(headers, columns: dict | None = None) -> int:
    """How many distinct canonical fields a row of headers names (used to find the header row)."""
    cols = check_columns_option(columns) if columns else None
    found = set()
    for h in headers:
        if h is None or (isinstance(h, float) and np.isnan(h)):
            continue
        f, _ = match_header(h, cols)
        if f:
            found.add(f)
    return len(found)


def _header_unit(header: object, fld: schema.Field) -> str | None:
    u = units.parse_header_unit(header)
    if u is not None and units.quantity_of(u) == fld.quantity:
        return u
    return None
