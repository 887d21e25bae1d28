"""Vocabularies and texts shared by every stage: geometry classes, method choices, codes in words,
the clinical caution."""

from __future__ import annotations

from wallstress.formulas import body_size, mass, stress
from wallstress.schema.outputs import BY_OUTPUT, OUTPUT_COLUMNS

# The four geometry classes (Ganau 1992), in reading order; "" where a row cannot be classed.
GEOMETRY_CLASSES: tuple[str, ...] = (
    NORMAL := "normal",
    CONCENTRIC_REMODELLING := "concentric_remodelling",
    CONCENTRIC_HYPERTROPHY := "concentric_hypertrophy",
    ECCENTRIC_HYPERTROPHY := "eccentric_hypertrophy",
)
HYPERTROPHY: tuple[str, ...] = (CONCENTRIC_HYPERTROPHY, ECCENTRIC_HYPERTROPHY)


def in_words(value: str) -> str:
    """A class, grade or verdict code as words: ``concentric_remodelling`` -> ``concentric remodelling``."""
    return str(value).replace("_", " ")


# The choices each method option takes, from the formula modules' tuples (the CLI and Options
# checks read these; nothing retypes them).
METHOD_CHOICES: dict[str, tuple[str, ...]] = {
    "bsa_method": body_size.BSA_METHODS,
    "mass_method": mass.LINEAR_MASS_METHODS + mass.AREA_MASS_METHODS,
    "rwt_method": mass.RWT_METHODS,
    "es_pressure": (*stress.ES_PRESSURE_METHODS, "measured"),
    "stress_constant": stress.STRESS_CONSTANTS,
}


# The caution every output carries (methods record, workbooks, report, CLI help, template).
CLINICAL_CAUTION = (
    "wallstress supports, and never replaces, a qualified clinician's judgement and the local "
    "laboratory's protocols and reference values."
)
FROM_MEMORY_CAUTION = (
    "Values marked 'from_memory' were recalled, not checked against the published text: treat "
    "results that depend on them (listed under 'unverified') as provisional."
)


class _OutputNames:
    """``OUT.lv_mass_g == "lv_mass_g"``: other stages name an output column through the registry,
    so a column renamed or dropped here fails loudly where it is used, never as an empty column."""

    __slots__ = ()

    def __getattr__(self, name: str) -> str:
        if name in BY_OUTPUT:
            return name
        raise AttributeError(f"{name!r} is not an output column (see wallstress.schema.outputs)")

    def __dir__(self):
        return list(OUTPUT_COLUMNS)


OUT = _OutputNames()
