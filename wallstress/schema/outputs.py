"""The registry of output columns: one row per column that ``analyse`` adds after the user's columns.

Each row names the column, its unit, a label a clinician reads, the function that computes it (one
hop from a column to its formula), the inputs it needs, and, per method, the equation, the source
and whether the source was read (``published``) or recalled (``from_memory``). Column order,
units in headers, the methods record and report labels are all taken from here.

Adding a measure: write the pure function in ``wallstress/formulas/``, add its row here, compute it
in ``wallstress/analysis/measures.py``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from types import MappingProxyType

PUBLISHED, FROM_MEMORY = "published", "from_memory"


@dataclass(frozen=True)
class Method:
    """One way of computing an output: its equation as text, the source, how sure we are of it."""

    equation: str
    source: str
    verified: str = PUBLISHED  # "published" (read in the source) or "from_memory"


@dataclass(frozen=True)
class Output:
    """One output column."""

    name: str
    unit: str  # a unit ("g", "g/m2", "%"), or what a text column holds ("class", "grade", "text")
    label: str  # what a clinician reads (the unit is added where it is shown)
    formula: str  # the function that computes it, as "module.function" under wallstress
    inputs: tuple[str, ...] = ()  # canonical input fields it needs (the first unit of each)
    methods: MappingProxyType = field(default_factory=lambda: MappingProxyType({}))
    option: str = ""  # the Options field that chooses among ``methods``
    decimals: int | None = None  # how many decimals a reader needs (None: text)
    summary: bool = False  # in the report's summary of measures
    tracked: str = ""  # stem of its follow-up columns (``lv_mass`` -> ``lv_mass_first_g``)
    # values beyond which a result is far outside physiology, so its inputs are suspect (a wall
    # typed too thin gives a stress of 700 kdyn/cm2): flagged, not blanked (common practice, no
    # source)
    plausible: tuple[float, float] | None = None

    @property
    def is_number(self) -> bool:
        return self.decimals is not None


def _methods(**by_name: Method) -> MappingProxyType:
    return MappingProxyType(by_name)


def _one(equation: str, source: str, verified: str = PUBLISHED) -> MappingProxyType:
    return _methods(**{"": Method(equation, source, verified)})


LANG_2015 = "Lang RM et al., J Am Soc Echocardiogr 2015;28:1"
LANG_2005 = "Lang RM et al., J Am Soc Echocardiogr 2005;18:1440"
TEICHHOLZ = "Teichholz LE et al., Am J Cardiol 1976;37:7"
SCHILLER = "Schiller NB et al., J Am Soc Echocardiogr 1989;2:358; Lang RM et al. 2005/2015"
DE_SIMONE_1994 = "de Simone G et al., J Am Coll Cardiol 1994;23:1444"
COLAN = "Colan SD et al., J Am Coll Cardiol 1984;4:715 (from memory)"
LINEAR = ("ivsd_cm", "lvidd_cm", "pwd_cm")

OUTPUTS: tuple[Output, ...] = (
    Output(
        "bsa_m2",
        "m2",
        "BSA",
        "formulas.body_size.bsa_m2",
        inputs=("height_cm", "weight_kg"),
        option="bsa_method",
        decimals=2,
        methods=_methods(
            dubois=Method(
                "0.007184 * W^0.425 * H^0.725", "DuBois D, DuBois EF, Arch Intern Med 1916;17:863"
            ),
            mosteller=Method("sqrt(H * W / 3600)", "Mosteller RD, N Engl J Med 1987;317:1098"),
            haycock=Method(
                "0.024265 * H^0.3964 * W^0.5378", "Haycock GB et al., J Pediatr 1978;93:62"
            ),
            gehan_george=Method(
                "0.0235 * H^0.42246 * W^0.51456",
                "Gehan EA, George SL, Cancer Chemother Rep 1970;54:225",
            ),
            boyd=Method(
                "0.0003207 * H^0.3 * Wg^(0.7285 - 0.0188 log10 Wg), Wg in grams",
                "Boyd E, The growth of the surface area of the human body, 1935",
            ),
        ),
    ),
    Output(
        "lv_mass_g",
        "g",
        "LV mass",
        "formulas.mass.lv_mass_linear_g",
        inputs=LINEAR,
        option="mass_method",
        decimals=0,
        summary=True,
        tracked="lv_mass",
        methods=_methods(
            ase_corrected=Method(
                "0.8 * 1.04 * ((IVSd + LVIDd + PWd)^3 - LVIDd^3) + 0.6",
                f"Devereux RB et al., Am J Cardiol 1986;57:450; {LANG_2015}",
            ),
            penn=Method(
                "1.04 * ((IVSd + LVIDd + PWd)^3 - LVIDd^3) - 13.6 (Penn convention dimensions)",
                "Devereux RB, Reichek N, Circulation 1977;55:613 (-13.6 g from memory; abstract -14 g)",
                FROM_MEMORY,
            ),
            area_length=Method(
                "1.05 * (5/6 * A1 * (L + t) - 5/6 * A2 * L), t = sqrt(A1/pi) - sqrt(A2/pi)",
                SCHILLER,
            ),
            truncated_ellipsoid=Method(
                "1.05 * pi * ((b + t)^2 * (2/3 (a + t) + d - d^3 / (3 (a + t)^2)) - b^2 * "
                "(2/3 a + d - d^3 / (3 a^2)))",
                SCHILLER,
            ),
        ),
        plausible=(30, 1000),
    ),
    Output(
        "lv_mass_method",
        "text",
        "LV mass method",
        "analysis.measures.lv_mass",
        inputs=LINEAR,
    ),
    Output(
        "lvmi_bsa_g_m2",
        "g/m2",
        "LVMI/BSA",
        "analysis.measures.mass_indexes",
        inputs=(*LINEAR, "height_cm", "weight_kg"),
        decimals=1,
        summary=True,
        tracked="lvmi_bsa",
        methods=_one("LV mass / BSA", LANG_2015),
        plausible=(20, 400),
    ),
    Output(
        "lvmi_h27_g_m2_7",
        "g/m^2.7",
        "LVMI/height^2.7",
        "formulas.body_size.height_power",
        inputs=(*LINEAR, "height_cm"),
        decimals=1,
        summary=True,
        tracked="lvmi_h27",
        methods=_one(
            "LV mass / height[m]^2.7", "de Simone G et al., J Am Coll Cardiol 1992;20:1251"
        ),
    ),
    Output(
        "lvmi_h_g_m",
        "g/m",
        "LVMI/height",
        "formulas.body_size.height_power",
        inputs=(*LINEAR, "height_cm"),
        decimals=1,
        methods=_one("LV mass / height[m]", LANG_2005),
    ),
    Output(
        "rwt",
        "ratio",
        "RWT",
        "formulas.mass.relative_wall_thickness",
        inputs=("lvidd_cm", "pwd_cm"),
        option="rwt_method",
        decimals=2,
        summary=True,
        tracked="rwt",
        methods=_methods(
            posterior=Method("2 * PWd / LVIDd", LANG_2015),
            septal_posterior=Method(
                "(IVSd + PWd) / LVIDd", "Ganau A et al., J Am Coll Cardiol 1992;19:1550"
            ),
        ),
        plausible=(0.15, 1.2),
    ),
    Output(
        "geometry",
        "class",
        "Geometry",
        "analysis.classify.geometry_4_codes",
        inputs=(*LINEAR, "height_cm", "weight_kg", "sex"),
        methods=_methods(
            ganau_1992=Method(
                "four groups by the set's mass index and RWT thresholds",
                "Ganau A et al., J Am Coll Cardiol 1992;19:1550",
            )
        ),
    ),
    Output(
        "edv_ml",
        "mL",
        "EDV",
        "analysis.measures.volumes_and_geometry_8",
        inputs=("lvidd_cm",),
        decimals=0,
        methods=_one("measured EDV where given, else Teichholz from LVIDd", TEICHHOLZ),
    ),
    Output(
        "edv_source",
        "text",
        "EDV source",
        "analysis.measures.volumes_and_geometry_8",
        inputs=("lvidd_cm",),
    ),
    Output(
        "edv_index_ml_m2",
        "mL/m2",
        "EDV/BSA",
        "analysis.measures.volumes_and_geometry_8",
        inputs=("lvidd_cm", "height_cm", "weight_kg"),
        decimals=1,
        methods=_one("EDV / BSA", LANG_2015),
    ),
    Output(
        "concentricity_g_ml23",
        "g/mL^(2/3)",
        "Concentricity",
        "formulas.mass.concentricity_g_ml23",
        inputs=LINEAR,
        decimals=2,
        methods=_one(
            "LV mass / EDV^(2/3)",
            "Khouri MG et al., Circ Cardiovasc Imaging 2010;3:164; Bang CN et al., "
            "Circ Cardiovasc Imaging 2014",
        ),
    ),
    Output(
        "geometry_8",
        "class",
        "Geometry (8 groups)",
        "analysis.classify.geometry_8_codes",
        inputs=(*LINEAR, "height_cm", "weight_kg", "sex"),
        methods=_one(
            "eight groups adding EDV index (dilated or not)",
            "Gaasch WH, Zile MR, J Am Coll Cardiol 2011;58:1733 (categories; thresholds from "
            "the reference set)",
        ),
    ),
    *(
        Output(f"{stem}_grade", "grade", f"{label} grade", "analysis.classify.grade_codes", inputs)
        for stem, label, inputs in (
            ("lvmi", "LVMI", (*LINEAR, "height_cm", "weight_kg", "sex")),
            ("lvmi_h27", "LVMI/height^2.7", (*LINEAR, "height_cm", "sex")),
            ("rwt", "RWT", ("lvidd_cm", "pwd_cm", "sex")),
            ("lvidd", "LVIDd", ("lvidd_cm", "sex")),
            ("ivsd", "IVSd", ("ivsd_cm", "sex")),
            ("pwd", "PWd", ("pwd_cm", "sex")),
        )
    ),
    Output(
        "fs_pct",
        "%",
        "FS",
        "formulas.shortening.fractional_shortening_pct",
        inputs=("lvidd_cm", "lvids_cm"),
        decimals=1,
        summary=True,
        methods=_one("(LVIDd - LVIDs) / LVIDd * 100", "common practice, no source"),
    ),
    Output(
        "edv_teichholz_ml",
        "mL",
        "EDV Teichholz",
        "formulas.volumes.teichholz_volume_ml",
        inputs=("lvidd_cm",),
        decimals=0,
        methods=_one("7 / (2.4 + LVIDd) * LVIDd^3", TEICHHOLZ),
    ),
    Output(
        "esv_teichholz_ml",
        "mL",
        "ESV Teichholz",
        "formulas.volumes.teichholz_volume_ml",
        inputs=("lvids_cm",),
        decimals=0,
        methods=_one("7 / (2.4 + LVIDs) * LVIDs^3", TEICHHOLZ),
    ),
    Output(
        "sv_teichholz_ml",
        "mL",
        "SV Teichholz",
        "analysis.measures.chamber_function",
        inputs=("lvidd_cm", "lvids_cm"),
        decimals=0,
        methods=_one("EDV - ESV (Teichholz)", TEICHHOLZ),
    ),
    Output(
        "ef_teichholz_pct",
        "%",
        "EF Teichholz",
        "formulas.volumes.ejection_fraction_pct",
        inputs=("lvidd_cm", "lvids_cm"),
        decimals=1,
        methods=_one("(EDV - ESV) / EDV * 100 (Teichholz volumes)", TEICHHOLZ),
    ),
    Output(
        "es_pressure_mmhg",
        "mmHg",
        "End-systolic pressure",
        "formulas.stress.es_pressure_mmhg",
        inputs=("sbp_mmhg",),
        option="es_pressure",
        decimals=0,
        tracked="es_pressure",
        methods=_methods(
            cuff_sbp=Method("mean cuff systolic pressure", "common practice, no source"),
            scaled_sbp=Method(
                "0.9 * SBP",
                "Kelly RP et al., Circulation 1992;86:513; Chen CH et al., J Am Coll Cardiol "
                "2001;38:2028",
            ),
            weighted_mean=Method("(2 * SBP + DBP) / 3", "from memory", FROM_MEMORY),
            measured=Method(
                "measured end-systolic pressure column (cuff SBP where missing)",
                "the lab's measurement",
            ),
        ),
    ),
    Output(
        "mess_kdyn_cm2",
        "kdyn/cm2",
        "mESS",
        "formulas.stress.meridional_es_stress_kdyn_cm2",
        inputs=("sbp_mmhg", "lvids_cm", "pws_cm"),
        option="stress_constant",
        decimals=0,
        summary=True,
        tracked="mess",
        methods=_methods(
            published=Method(
                "0.334 * P * LVIDs / (PWs * (1 + PWs / LVIDs))",
                "Grossman W et al., J Clin Invest 1975;56:56; Reichek N et al., Circulation "
                "1982;65:99 (form checked; constant 0.334 from memory)",
                FROM_MEMORY,
            ),
            exact=Method(
                "(1.333224 / 4) * P * LVIDs / (PWs * (1 + PWs / LVIDs))",
                "Grossman 1975 form with the exact mmHg -> kdyn/cm2 factor",
            ),
        ),
        plausible=(10, 300),
    ),
    Output(
        "cess_kdyn_cm2",
        "kdyn/cm2",
        "cESS",
        "formulas.stress.circumferential_es_stress_kdyn_cm2",
        inputs=("sbp_mmhg", "lvids_cm", "pws_cm"),
        option="stress_constant",
        decimals=0,
        summary=True,
        tracked="cess",
        methods=_methods(
            published=Method(
                "1.35 * P * a^2 / (b^2 - a^2) * (1 + b^2 / (a + PWs/2)^2), a = LVIDs/2, b = a + PWs",
                "Gaasch WH, thick-walled cylinder, as used by "
                f"{DE_SIMONE_1994} (form checked; 1.35 from memory)",
                FROM_MEMORY,
            ),
            exact=Method(
                "1.333224 * P * a^2 / (b^2 - a^2) * (1 + b^2 / (a + PWs/2)^2)",
                "same form with the exact mmHg -> kdyn/cm2 factor (1.24 % lower)",
            ),
        ),
        plausible=(30, 600),
    ),
    Output(
        "midwall_fs_pct",
        "%",
        "Midwall FS",
        "formulas.shortening.midwall_fs_pct",
        inputs=(*LINEAR, "lvids_cm"),
        decimals=1,
        summary=True,
        methods=_one(
            "two-shell ellipsoid: inner = ((LVIDd + Hd)^3 - LVIDd^3 + LVIDs^3)^(1/3), "
            "Hd = (IVSd + PWd)/2; MWS = ((LVIDd + Hd) - inner) / (LVIDd + Hd) * 100",
            "Shimizu G et al., Circulation 1991;83:1676; "
            f"{DE_SIMONE_1994} (method checked; formula form from memory)",
            FROM_MEMORY,
        ),
        plausible=(2, 35),
    ),
    Output(
        "midwall_fs_predicted_pct",
        "%",
        "Midwall FS predicted",
        "formulas.shortening.predicted_from_line",
        inputs=(*LINEAR, "lvids_cm", "sbp_mmhg", "pws_cm"),
        decimals=1,
        methods=_one(
            "intercept + slope * cESS (reference line of the set)",
            "de Simone G et al. 1994/1996 (coefficients NOT found: the bundled line is "
            "approximate, from memory)",
            FROM_MEMORY,
        ),
    ),
    Output(
        "midwall_fs_stress_corrected_pct",
        "%",
        "Stress-corrected midwall FS",
        "formulas.shortening.stress_corrected_pct",
        inputs=(*LINEAR, "lvids_cm", "sbp_mmhg", "pws_cm"),
        decimals=1,
        summary=True,
        methods=_one(
            "observed / predicted midwall FS * 100", "de Simone G et al., Circulation 1996;93:259"
        ),
    ),
    Output(
        "vcf_circ_s",
        "circ/s",
        "Vcf",
        "formulas.shortening.vcf_circ_s",
        inputs=("lvidd_cm", "lvids_cm", "ejection_time_ms"),
        decimals=2,
        methods=_one("FS (fraction) / ejection time [s]", COLAN, FROM_MEMORY),
    ),
    Output(
        "vcfc_circ_s",
        "circ/s",
        "Vcf, rate-corrected",
        "formulas.shortening.vcfc_circ_s",
        inputs=("lvidd_cm", "lvids_cm", "ejection_time_ms", "hr_bpm"),
        decimals=2,
        methods=_one("FS / (ET / sqrt(RR)), RR = 60 / HR [s]", COLAN, FROM_MEMORY),
    ),
    Output(
        "stroke_work_g_m",
        "g*m",
        "Stroke work",
        "formulas.stress.stroke_work_g_m",
        inputs=("sbp_mmhg", "lvidd_cm", "lvids_cm"),
        decimals=1,
        methods=_one(
            "SBP * SV * 0.0144 (mercury density gives 0.013595: the published 0.0144 is 5.9 % "
            "higher; kept because the predicted-mass coefficients were fitted with it)",
            "de Simone G et al. (from memory)",
            FROM_MEMORY,
        ),
    ),
    Output(
        "lv_mass_predicted_g",
        "g",
        "LV mass predicted",
        "formulas.mass.predicted_lv_mass_g",
        inputs=("height_cm", "sex", "sbp_mmhg", "lvidd_cm", "lvids_cm"),
        decimals=0,
        methods=_one(
            "intercept + c1 * height^2.7 + c2 * stroke work + c3 * sex (male 1, female 2)",
            "de Simone G et al. 1996/1998 (rule checked; coefficients from memory)",
            FROM_MEMORY,
        ),
    ),
    Output(
        "lv_mass_appropriateness_pct",
        "%",
        "LV mass, % of predicted",
        "formulas.mass.appropriateness_pct",
        inputs=(*LINEAR, "height_cm", "sex", "sbp_mmhg", "lvids_cm"),
        decimals=0,
        methods=_one(
            "observed / predicted LV mass * 100 (inappropriate above the set's limit)",
            "de Simone G et al. 1996/1998 (rule checked; coefficients from memory)",
            FROM_MEMORY,
        ),
    ),
    Output("flags", "codes", "Flags", "analysis.flags.flag_codes"),
)

BY_OUTPUT: dict[str, Output] = {o.name: o for o in OUTPUTS}
OUTPUT_COLUMNS: tuple[str, ...] = tuple(o.name for o in OUTPUTS)
OUTPUT_UNITS: dict[str, str] = {o.name: o.unit for o in OUTPUTS}
SUMMARY_MEASURES: tuple[str, ...] = tuple(o.name for o in OUTPUTS if o.summary)
# (column, stem of its follow-up names, unit ending; "" for unitless), for tracking
TRACKED_MEASURES: tuple[tuple[str, str, str], ...] = tuple(
    (o.name, o.tracked, o.name[len(o.tracked) + 1 :]) for o in OUTPUTS if o.tracked
)
