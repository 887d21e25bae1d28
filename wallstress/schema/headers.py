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
    hit = _by_words(key)
    if hit:
        return hit
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


# Descriptive headers, in English and the languages labs export in, read by their words: a wall or
# the cavity, and the phase of the cycle. Words are matched after accents are folded
# (``télédiastolique`` -> ``telediastolique``). Vocabulary of the trade (common practice, no source).
_SEPTUM = {
    "septum",
    "septal",
    "ivs",
    "interventricular",
    "septo",
    "setto",
    "tabique",
    "septale",
    "septums",
    "kammerseptum",
    "interventriculaire",
    "interventricolare",
}
_POSTERIOR = {
    "posterior",
    "pw",
    "lvpw",
    "inferolateral",
    "hinterwand",
    "posterieure",
    "posteriore",
    "posterieur",
    "hinterwanddicke",
}
_CAVITY = {
    "lvid",
    "internal",
    "cavity",
    "intern",
    "interne",
    "interno",
    "cavite",
    "cavidad",
    "durchmesser",
    "diametre",
    "diametro",
    "diameter",
    "dimension",
    "dimensione",
}
_LV = {
    "lv",
    "left",
    "ventricle",
    "ventricular",
    "vg",
    "lk",
    "vi",
    "ventricule",
    "ventricolo",
    "ventriculo",
    "ventrikel",
    "linksventrikular",
    "lvid",
    "lvidd",
    "lvids",
}
_NOT_LV = {
    "aorta",
    "aortic",
    "root",
    "la",
    "atrium",
    "atrial",
    "rv",
    "right",
    "ao",
    "annulus",
    "outflow",
    "lvot",
    "rvot",
    "ra",
    "mitral",
    "tricuspid",
    "ivc",
    "vena",
}
_DIASTOLE = {
    "diastole",
    "diastolic",
    "diast",
    "dias",
    "d",
    "ed",
    "enddiastolic",
    "telediastolique",
    "diastolique",
    "diastolisch",
    "enddiastolisch",
    "diastolico",
    "telediastolico",
    "diastolica",
    "telediastolica",
    "edd",
}
_SYSTOLE = {
    "systole",
    "systolic",
    "syst",
    "sys",
    "s",
    "es",
    "endsystolic",
    "telesystolique",
    "systolique",
    "systolisch",
    "endsystolisch",
    "sistolico",
    "telesistolico",
    "sistolica",
    "telesistolica",
    "esd",
}
_FIELD_OF = {
    ("septum", "d"): "ivsd_cm",
    ("septum", "s"): "ivss_cm",
    ("posterior", "d"): "pwd_cm",
    ("posterior", "s"): "pws_cm",
    ("cavity", "d"): "lvidd_cm",
    ("cavity", "s"): "lvids_cm",
}  # fmt: skip


def _by_words(key: str) -> tuple[str, str] | None:
    """``("lvidd_cm", "words")`` for "LV internal dimension diastole"; ``"words, phase assumed"``
    when a wall or the cavity is named without a phase (end-diastole, where they are measured by
    convention); None when the words do not name one wall or the cavity, or name another chamber."""
    words = set(key.split()) | {key.replace(" ", "")}
    if {"post", "wall"} <= words:  # "Post. wall"
        words.add("posterior")
    if words & _NOT_LV:
        return None
    parts = [
        name
        for name, vocab in (("septum", _SEPTUM), ("posterior", _POSTERIOR), ("cavity", _CAVITY))
        if words & vocab
    ]
    if parts == ["septum", "posterior"] or len(parts) != 1:
        return None
    part = parts[0]
    if part == "cavity" and not (
        words & _LV or words & {"internal", "intern", "interne", "interno"}
    ):
        return None  # "diameter" alone may be any chamber's or vessel's
    phases = {p for p, vocab in (("d", _DIASTOLE), ("s", _SYSTOLE)) if words & vocab}
    if len(phases) > 1:
        return None
    if not phases:
        if (
            words & {"thickness", "dicke", "epaisseur", "spessore", "grosor", "espesor"}
            or part != "cavity"
            or words & _CAVITY
        ):
            return _FIELD_OF[(part, "d")], "words, phase assumed"
        return None
    return _FIELD_OF[(part, phases.pop())], "words"


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
