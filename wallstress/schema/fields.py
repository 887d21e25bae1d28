"""Canonical fields: name, internal unit, plausible ranges, meaning and header aliases.

Internal units are cm, kg, mmHg, mL, ms and years. Every field has two ranges in its internal unit:

- ``hard``: outside it the value is physically impossible for a human LV study; the value is not used
  (NaN in every measure that needs it) and the row gets an error finding.
- ``typical``: outside it the value is possible but unusual for an adult study; it is used, and the
  row gets a warning finding, because it is the commonest sign of a unit or typing error.

Each field's ``range_source`` says where its ranges come from: mostly broad bounds from clinical
experience (common practice, no source). They are screening limits, not reference values;
reference values live in ``reference_tables/``. A linear LV dimension outside its hard range (an
LVIDd of 2.6 cm, a PWd of 0.11 cm: a decimal point or unit typed wrong) never reaches a class.
"""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass, field

SEXES: tuple[str, ...] = ("F", "M")  # the canonical sex codes, women first


_LINEAR_RANGES = (
    "hard: beyond what an adult left ventricle measured by M-mode or 2D can be, or where the "
    "linear mass formula no longer applies (common practice, no source); typical: wide enough to "
    "hold the guideline normal ranges and hypertrophy or dilatation grades (Lang RM et al., J Am "
    "Soc Echocardiogr 2015;28:1; Lang RM et al., J Am Soc Echocardiogr 2005;18:1440)"
)


@dataclass(frozen=True)
class Field:
    """One canonical column."""

    name: str
    kind: str  # "id", "date", "sex", "number"
    unit: str  # internal unit ("" when not a number)
    quantity: str  # "length", "mass", "pressure", "volume", "area", "time", "rate", "age", ""
    meaning: str
    hard: tuple[float, float] | None = None
    typical: tuple[float, float] | None = None
    aliases: tuple[str, ...] = field(default_factory=tuple)
    range_source: str = "common practice, no source"


def _f(*args, **kwargs) -> Field:
    return Field(*args, **kwargs)


FIELDS: tuple[Field, ...] = (
    _f(
        "study_id",
        "id",
        "",
        "",
        "Identifier of the echocardiogram.",
        aliases=(
            "study",
            "study id",
            "exam id",
            "examid",
            "accession",
            "accession number",
            "accession no",
            "echo id",
            "record id",
            "exam no",
            "exam nr",
            "exam number",
            "study no",
            "study nr",
            "study number",
            "echo no",
            "echo number",
        ),
    ),
    _f(
        "patient_id",
        "id",
        "",
        "",
        "Identifier of the patient (pseudonymous).",
        aliases=(
            "patient",
            "patient id",
            "mrn",
            "pid",
            "subject",
            "subject id",
            "case id",
            "participant",
            "patient number",
            "patient no",
            "patient nr",
            "pt id",
            "pt no",
            "medical record number",
            "hospital number",
            "hospital no",
        ),
    ),
    _f(
        "study_date",
        "date",
        "",
        "",
        "Date of the study.",
        aliases=(
            "date",
            "exam date",
            "echo date",
            "visit date",
            "study date",
            "scan date",
            "examination date",
            "exam datetime",
        ),
    ),
    _f(
        "sex",
        "sex",
        "",
        "",
        "Sex (F or M); sex-specific cut-offs need it.",
        aliases=("gender", "sex f m", "sex mf"),
    ),
    _f(
        "age_years",
        "number",
        "years",
        "age",
        "Age at the study.",
        (0, 120),
        (16, 100),
        aliases=("age", "age y", "age yrs"),
    ),
    _f(
        "height_cm",
        "number",
        "cm",
        "length",
        "Body height.",
        (90, 250),
        (140, 210),
        aliases=("height", "ht", "stature", "body height"),
    ),
    _f(
        "weight_kg",
        "number",
        "kg",
        "mass",
        "Body weight.",
        (20, 400),
        (40, 200),
        aliases=("weight", "wt", "body weight", "mass kg"),
    ),
    _f(
        "sbp_mmhg",
        "number",
        "mmHg",
        "pressure",
        "Cuff systolic blood pressure.",
        (50, 300),
        (80, 230),
        aliases=(
            "sbp",
            "systolic",
            "systolic bp",
            "sys bp",
            "bp sys",
            "sbp 1",
            "sbp1",
            "systolic 1",
            "systolic blood pressure",
            "sys",
        ),
    ),
    _f(
        "dbp_mmhg",
        "number",
        "mmHg",
        "pressure",
        "Cuff diastolic blood pressure.",
        (20, 180),
        (40, 130),
        aliases=(
            "dbp",
            "diastolic",
            "diastolic bp",
            "dia bp",
            "bp dia",
            "dbp 1",
            "dbp1",
            "diastolic 1",
            "diastolic blood pressure",
            "dia",
        ),
    ),
    _f(
        "sbp_2_mmhg",
        "number",
        "mmHg",
        "pressure",
        "Second cuff systolic reading.",
        (50, 300),
        (80, 230),
        aliases=("sbp 2", "sbp2", "systolic 2"),
    ),
    _f(
        "dbp_2_mmhg",
        "number",
        "mmHg",
        "pressure",
        "Second cuff diastolic reading.",
        (20, 180),
        (40, 130),
        aliases=("dbp 2", "dbp2", "diastolic 2"),
    ),
    _f(
        "sbp_3_mmhg",
        "number",
        "mmHg",
        "pressure",
        "Third cuff systolic reading.",
        (50, 300),
        (80, 230),
        aliases=("sbp 3", "sbp3", "systolic 3"),
    ),
    _f(
        "dbp_3_mmhg",
        "number",
        "mmHg",
        "pressure",
        "Third cuff diastolic reading.",
        (20, 180),
        (40, 130),
        aliases=("dbp 3", "dbp3", "diastolic 3"),
    ),
    _f(
        "es_pressure_measured_mmhg",
        "number",
        "mmHg",
        "pressure",
        "Measured end-systolic pressure (e.g. calibrated carotid tonometry), used when present and chosen.",
        (40, 300),
        (60, 220),
        aliases=("esp", "es pressure", "end systolic pressure", "pes"),
    ),
    _f(
        "hr_bpm",
        "number",
        "bpm",
        "rate",
        "Heart rate during the study.",
        (15, 300),
        (40, 150),
        aliases=("hr", "heart rate", "pulse", "rate"),
    ),
    _f(
        "ivsd_cm",
        "number",
        "cm",
        "length",
        "Interventricular septal thickness at end-diastole.",
        (0.4, 3.0),
        (0.5, 2.0),
        aliases=("ivsd", "ivs d", "ivs", "septum", "ivstd", "ivs diastole", "septal thickness"),
        range_source=_LINEAR_RANGES,
    ),
    _f(
        "lvidd_cm",
        "number",
        "cm",
        "length",
        "LV internal diameter at end-diastole.",
        (3.0, 10.0),
        (3.5, 7.5),
        aliases=("lvidd", "lvid d", "lvedd", "lvdd", "lvid diastole", "edd"),
        range_source=_LINEAR_RANGES,
    ),
    _f(
        "pwd_cm",
        "number",
        "cm",
        "length",
        "LV posterior wall thickness at end-diastole.",
        (0.4, 3.0),
        (0.5, 2.0),
        aliases=(
            "pwd",
            "lvpwd",
            "pw d",
            "lvpw d",
            "lvpwtd",
            "pwtd",
            "posterior wall",
            "pw diastole",
        ),
        range_source=_LINEAR_RANGES,
    ),
    _f(
        "ivss_cm",
        "number",
        "cm",
        "length",
        "Interventricular septal thickness at end-systole.",
        (0.5, 4.0),
        (0.7, 2.6),
        aliases=("ivss", "ivs s", "ivsts", "ivs systole"),
        range_source=_LINEAR_RANGES,
    ),
    _f(
        "lvids_cm",
        "number",
        "cm",
        "length",
        "LV internal diameter at end-systole.",
        (1.0, 9.0),
        (1.8, 6.5),
        aliases=("lvids", "lvid s", "lvesd", "lvds", "lvid systole", "esd"),
        range_source=_LINEAR_RANGES,
    ),
    _f(
        "pws_cm",
        "number",
        "cm",
        "length",
        "LV posterior wall thickness at end-systole.",
        (0.5, 4.0),
        (0.7, 2.6),
        aliases=("pws", "lvpws", "pw s", "lvpw s", "lvpwts", "pwts", "pw systole"),
        range_source=_LINEAR_RANGES,
    ),
    _f(
        "lvedv_ml",
        "number",
        "mL",
        "volume",
        "LV end-diastolic volume measured (e.g. biplane).",
        (5, 800),
        (40, 300),
        aliases=("lvedv", "edv", "lv edv", "edv biplane", "lvedv biplane"),
    ),
    _f(
        "lvesv_ml",
        "number",
        "mL",
        "volume",
        "LV end-systolic volume measured (e.g. biplane).",
        (1, 700),
        (10, 200),
        aliases=("lvesv", "esv", "lv esv", "esv biplane", "lvesv biplane"),
    ),
    _f(
        "epi_area_cm2",
        "number",
        "cm2",
        "area",
        "Short-axis epicardial area at the papillary muscles (A1).",
        (5, 150),
        (15, 80),
        aliases=("epi area", "a1", "epicardial area"),
    ),
    _f(
        "endo_area_cm2",
        "number",
        "cm2",
        "area",
        "Short-axis endocardial area at the papillary muscles (A2).",
        (1, 100),
        (5, 50),
        aliases=("endo area", "a2", "endocardial area"),
    ),
    _f(
        "lv_length_cm",
        "number",
        "cm",
        "length",
        "LV long axis, widest short-axis level to apex plus to mitral plane (a + d).",
        (2, 16),
        (5, 11),
        aliases=("lv length", "lv long axis", "long axis"),
    ),
    _f(
        "lv_semimajor_cm",
        "number",
        "cm",
        "length",
        "Semi-major axis from the widest short-axis radius to the apex (a).",
        (1, 14),
        (3, 9),
        aliases=("semimajor", "semi major axis"),
    ),
    _f(
        "lv_truncated_semimajor_cm",
        "number",
        "cm",
        "length",
        "Truncated semi-major axis from the widest short-axis radius to the mitral plane (d).",
        (0.1, 6),
        (1, 4),
        aliases=("truncated semimajor", "truncated semi major axis"),
    ),
    _f(
        "ejection_time_ms",
        "number",
        "ms",
        "time",
        "LV ejection time.",
        (100, 600),
        (200, 400),
        aliases=("et", "lvet", "ejection time"),
    ),
)

BY_NAME: dict[str, Field] = {f.name: f for f in FIELDS}
NUMERIC_FIELDS: tuple[str, ...] = tuple(f.name for f in FIELDS if f.kind == "number")
LINEAR_FIELDS: tuple[str, ...] = ("ivsd_cm", "lvidd_cm", "pwd_cm", "ivss_cm", "lvids_cm", "pws_cm")


def _fold_accents(s: str) -> str:
    """``größe`` -> ``grosse``, ``télédiastolique`` -> ``telediastolique`` (Unicode NFKD, marks
    dropped), so that headers in other languages match by their letters."""
    s = s.replace("ß", "ss").replace("æ", "ae").replace("ø", "o")
    return "".join(c for c in unicodedata.normalize("NFKD", s) if not unicodedata.combining(c))


def normalise_header(text: object) -> str:
    """Fold a header for matching: lower case, units in brackets removed, punctuation to spaces.

    >>> normalise_header("  LVIDd (mm) ")
    'lvidd'
    >>> normalise_header("IVS_d [cm]")
    'ivs d'
    """
    s = _fold_accents(str(text).strip().lower())
    s = re.sub(r"[\(\[\{].*?[\)\]\}]", " ", s)
    s = re.sub(r"[^0-9a-z]+", " ", s)
    return " ".join(s.split())


# Headers of the body and pressure fields in the languages labs export in (German, French, Spanish,
# Italian, Dutch, Portuguese); the LV dimensions are read by their words (``schema.headers``).
OTHER_LANGUAGES: dict[str, tuple[str, ...]] = {
    "patient_id": ("patienten id", "patientennummer", "n patient", "numero patient", "ipp",
                   "id paziente", "codice paziente", "numero de historia", "nhc", "patientnummer"),
    "study_id": ("untersuchung", "untersuchungsnummer", "examen", "n examen", "numero examen",
                 "esame", "estudio", "onderzoek"),
    "study_date": ("datum", "untersuchungsdatum", "date examen", "date de l examen", "fecha",
                   "fecha estudio", "data esame", "data", "datum onderzoek"),
    "sex": ("geschlecht", "sexe", "sexo", "sesso", "geslacht", "genre"),
    "age_years": ("alter", "age ans", "edad", "eta", "leeftijd", "idade"),
    "height_cm": ("grosse", "korpergrosse", "taille", "talla", "altura", "altezza", "statura",
                  "lengte", "estatura"),
    "weight_kg": ("gewicht", "korpergewicht", "poids", "peso", "massa corporea"),
    "sbp_mmhg": ("systolischer blutdruck", "pas", "pression systolique", "pression arterielle systolique",
                 "presion sistolica", "pressione sistolica", "sys rr", "rr sys", "rr systolisch"),
    "dbp_mmhg": ("diastolischer blutdruck", "pad", "pression diastolique",
                 "pression arterielle diastolique", "presion diastolica", "pressione diastolica",
                 "dia rr", "rr dia", "rr diastolisch"),
    "hr_bpm": ("herzfrequenz", "puls", "fc", "frequence cardiaque", "frecuencia cardiaca",
               "frequenza cardiaca", "hartfrequentie"),
}  # fmt: skip


# Headers of one column holding both cuff pressures as "128/82": read into sbp_mmhg and dbp_mmhg.
PRESSURE_PAIR_HEADERS: frozenset[str] = frozenset(
    {"bp", "blood pressure", "bp mmhg", "cuff bp", "nibp", "arterial pressure", "blutdruck", "rr",
     "pression arterielle", "tension arterielle", "ta", "pa", "presion arterial", "pa mmhg",
     "pressione arteriosa", "bloeddruk", "pressao arterial", "bp sys dia", "bp systolic diastolic"}
)  # fmt: skip


def _alias_index() -> dict[str, str]:
    index: dict[str, str] = {}
    for f in FIELDS:
        for name in (
            f.name,
            f.name.replace("_", " "),
            *f.aliases,
            *OTHER_LANGUAGES.get(f.name, ()),
        ):
            index.setdefault(normalise_header(name), f.name)
            index.setdefault(normalise_header(name).replace(" ", ""), f.name)
    return index


ALIASES: dict[str, str] = _alias_index()
