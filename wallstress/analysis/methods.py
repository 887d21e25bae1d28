"""The methods record: every formula, its source, the reference set, options and counts.

It goes into the methods sheet (xlsx) or a ``.methods.json`` beside CSV/parquet outputs, and into
the report, so that every number in an output can be traced.
"""

from __future__ import annotations

from datetime import datetime, timezone

import numpy as np

CAUTIONS = (
    "wallstress supports, and never replaces, the judgement of a qualified clinician and the local "
    "laboratory's protocols and reference values.",
    "Values marked 'from_memory' were recalled, not checked against the published text: treat "
    "results that depend on them (listed under 'unverified') as provisional.",
    "Linear (M-mode/2D) LV mass assumes a symmetric ellipsoidal ventricle; it misleads with asymmetric "
    "hypertrophy, aneurysm or distorted shape (rows flagged where detectable).",
    "Adult reference values do not apply to children.",
)

# output -> (method name -> (formula, source, verified))
FORMULAS: dict[str, dict[str, tuple[str, str, str]]] = {
    "bsa_m2": {
        "dubois": (
            "0.007184 * W^0.425 * H^0.725",
            "DuBois D, DuBois EF, Arch Intern Med 1916;17:863",
            "published",
        ),
        "mosteller": (
            "sqrt(H * W / 3600)",
            "Mosteller RD, N Engl J Med 1987;317:1098",
            "published",
        ),
        "haycock": (
            "0.024265 * H^0.3964 * W^0.5378",
            "Haycock GB et al., J Pediatr 1978;93:62",
            "published",
        ),
        "gehan_george": (
            "0.0235 * H^0.42246 * W^0.51456",
            "Gehan EA, George SL, Cancer Chemother Rep 1970;54:225",
            "published",
        ),
        "boyd": (
            "0.0003207 * H^0.3 * Wg^(0.7285 - 0.0188 log10 Wg), Wg in grams",
            "Boyd E, The growth of the surface area of the human body, 1935",
            "published",
        ),
    },
    "lv_mass_g": {
        "ase_corrected": (
            "0.8 * 1.04 * ((IVSd + LVIDd + PWd)^3 - LVIDd^3) + 0.6",
            "Devereux RB et al., Am J Cardiol 1986;57:450; Lang RM et al., J Am Soc Echocardiogr 2015;28:1",
            "published",
        ),
        "penn": (
            "1.04 * ((IVSd + LVIDd + PWd)^3 - LVIDd^3) - 13.6 (Penn convention dimensions)",
            "Devereux RB, Reichek N, Circulation 1977;55:613 (-13.6 g from memory; abstract -14 g)",
            "from_memory",
        ),
        "area_length": (
            "1.05 * (5/6 * A1 * (L + t) - 5/6 * A2 * L), t = sqrt(A1/pi) - sqrt(A2/pi)",
            "Schiller NB et al., J Am Soc Echocardiogr 1989;2:358; Lang RM et al. 2005/2015",
            "published",
        ),
        "truncated_ellipsoid": (
            "1.05 * pi * ((b + t)^2 * (2/3 (a + t) + d - d^3 / (3 (a + t)^2)) - b^2 * (2/3 a + d - d^3 / (3 a^2)))",
            "Schiller NB et al., J Am Soc Echocardiogr 1989;2:358; Lang RM et al. 2005/2015",
            "published",
        ),
    },
    "lvmi_bsa_g_m2": {
        "": ("LV mass / BSA", "Lang RM et al., J Am Soc Echocardiogr 2015;28:1", "published")
    },
    "lvmi_h27_g_m2_7": {
        "": (
            "LV mass / height[m]^2.7",
            "de Simone G et al., J Am Coll Cardiol 1992;20:1251",
            "published",
        )
    },
    "lvmi_h_g_m": {
        "": (
            "LV mass / height[m]",
            "Lang RM et al., J Am Soc Echocardiogr 2005;18:1440",
            "published",
        )
    },
    "rwt": {
        "posterior": (
            "2 * PWd / LVIDd",
            "Lang RM et al., J Am Soc Echocardiogr 2015;28:1",
            "published",
        ),
        "septal_posterior": (
            "(IVSd + PWd) / LVIDd",
            "Ganau A et al., J Am Coll Cardiol 1992;19:1550",
            "published",
        ),
    },
    "geometry": {
        "ganau_1992": (
            "four groups by the set's mass index and RWT thresholds",
            "Ganau A et al., J Am Coll Cardiol 1992;19:1550",
            "published",
        )
    },
    "geometry_8": {
        "": (
            "eight groups adding EDV index (dilated or not)",
            "Gaasch WH, Zile MR, J Am Coll Cardiol 2011;58:1733 (categories; thresholds from the reference set)",
            "published",
        )
    },
    "concentricity_g_ml23": {
        "": (
            "LV mass / EDV^(2/3)",
            "Khouri MG et al., Circ Cardiovasc Imaging 2010;3:164; Bang CN et al., Circ Cardiovasc Imaging 2014",
            "published",
        )
    },
    "edv_teichholz_ml": {
        "": ("7 / (2.4 + D) * D^3", "Teichholz LE et al., Am J Cardiol 1976;37:7", "published")
    },
    "fs_pct": {"": ("(LVIDd - LVIDs) / LVIDd * 100", "common practice, no source", "published")},
    "es_pressure_mmhg": {
        "cuff_sbp": ("mean cuff systolic pressure", "common practice, no source", "published"),
        "scaled_sbp": (
            "0.9 * SBP",
            "Kelly RP et al., Circulation 1992;86:513; Chen CH et al., J Am Coll Cardiol 2001;38:2028",
            "published",
        ),
        "weighted_mean": ("(2 * SBP + DBP) / 3", "from memory", "from_memory"),
        "measured": (
            "measured end-systolic pressure column (cuff SBP where missing)",
            "the lab's measurement",
            "published",
        ),
    },
    "mess_kdyn_cm2": {
        "published": (
            "0.334 * P * LVIDs / (PWs * (1 + PWs / LVIDs))",
            "Grossman W et al., J Clin Invest 1975;56:56; Reichek N et al., Circulation 1982;65:99 (form checked; constant 0.334 from memory)",
            "from_memory",
        ),
        "exact": (
            "(1.333224 / 4) * P * LVIDs / (PWs * (1 + PWs / LVIDs))",
            "Grossman 1975 form with the exact mmHg -> kdyn/cm2 factor",
            "published",
        ),
    },
    "cess_kdyn_cm2": {
        "published": (
            "1.35 * P * a^2 / (b^2 - a^2) * (1 + b^2 / (a + PWs/2)^2), a = LVIDs/2, b = a + PWs",
            "Gaasch WH, thick-walled cylinder, as used by de Simone G et al., J Am Coll Cardiol 1994;23:1444 (form checked; 1.35 from memory)",
            "from_memory",
        ),
        "exact": (
            "1.333224 * P * a^2 / (b^2 - a^2) * (1 + b^2 / (a + PWs/2)^2)",
            "same form with the exact mmHg -> kdyn/cm2 factor (1.24 % lower)",
            "published",
        ),
    },
    "midwall_fs_pct": {
        "": (
            "two-shell ellipsoid: inner = ((LVIDd + Hd)^3 - LVIDd^3 + LVIDs^3)^(1/3), Hd = (IVSd + PWd)/2; MWS = ((LVIDd + Hd) - inner) / (LVIDd + Hd) * 100",
            "Shimizu G et al., Circulation 1991;83:1676; de Simone G et al., J Am Coll Cardiol 1994;23:1444 (method checked; formula form from memory)",
            "from_memory",
        )
    },
    "midwall_fs_predicted_pct": {
        "": (
            "intercept + slope * cESS (reference line of the set)",
            "de Simone G et al. 1994/1996 (coefficients NOT found: the bundled line is approximate, from memory)",
            "from_memory",
        )
    },
    "midwall_fs_stress_corrected_pct": {
        "": (
            "observed / predicted midwall FS * 100",
            "de Simone G et al., Circulation 1996;93:259",
            "published",
        )
    },
    "vcf_circ_s": {
        "": (
            "FS (fraction) / ejection time [s]",
            "Colan SD et al., J Am Coll Cardiol 1984;4:715 (from memory)",
            "from_memory",
        )
    },
    "vcfc_circ_s": {
        "": (
            "FS / (ET / sqrt(RR)), RR = 60 / HR [s]",
            "Colan SD et al., J Am Coll Cardiol 1984;4:715 (from memory)",
            "from_memory",
        )
    },
    "stroke_work_g_m": {
        "": (
            "SBP * SV * 0.0144 (mercury density gives 0.013595: the published 0.0144 is 5.9 % higher; kept because the predicted-mass coefficients were fitted with it)",
            "de Simone G et al. (from memory)",
            "from_memory",
        )
    },
    "lv_mass_predicted_g": {
        "": (
            "intercept + c1 * height^2.7 + c2 * stroke work + c3 * sex (male 1, female 2)",
            "de Simone G et al. 1996/1998 (rule checked; coefficients from memory)",
            "from_memory",
        )
    },
}

USED_DEFAULT = {"bsa_m2": "dubois", "rwt": "posterior", "geometry": "ganau_1992"}


def _formula_rows(used: dict) -> list[dict]:
    rows = []
    for output, variants in FORMULAS.items():
        method = used.get(output, {}).get("method", "") or used.get(output, {}).get("constant", "")
        if output in ("mess_kdyn_cm2", "cess_kdyn_cm2"):
            method = used.get(output, {}).get("constant", "published")
        if method not in variants:
            method = next(iter(variants))
        formula, source, verified = variants[method]
        rows.append(
            {
                "output": output,
                "method": method,
                "formula": formula,
                "source": source,
                "verified": verified,
            }
        )
    return rows


def _rows_with(findings, severities: tuple[str, ...], n_rows: int) -> int:
    """How many rows have at least one finding of these severities (no copy of the table)."""
    rows = findings["row"].to_numpy(dtype="int64")
    hit = findings["severity"].isin(severities).to_numpy(dtype=bool) & (rows >= 0)
    seen = np.zeros(max(n_rows, int(rows.max(initial=-1)) + 1), dtype=bool)
    seen[rows[hit]] = True
    return int(seen.sum())


def build_methods(
    options, refset, used: dict, mapped, findings, n_rows: int, *, version: str
) -> dict:
    """Assemble the methods record of one run (plain, JSON-serialisable types only)."""
    errors = _rows_with(findings, ("error",), n_rows)
    flagged = _rows_with(findings, ("error", "warning"), n_rows)
    unverified = [
        f"{r['measure']} {r.get('sex', '')} {r.get('grade', '')}: {r['value']} ({r['source']}; {r['verified']})".replace(
            "  ", " "
        )
        for r in refset.unverified().to_dict("records")
    ]
    formula_rows = _formula_rows(used)
    unverified += [
        f"{r['output']}: {r['formula']} ({r['source']})"
        for r in formula_rows
        if r["verified"] != "published"
    ]
    for model in ("midwall_stress_line", "mass_prediction"):
        for k, c in refset.coefficients(model).items():
            if c.verified not in ("published", "lab"):
                unverified.append(f"{model}.{k} = {c.value:g} {c.unit} ({c.source}; {c.verified})")
    return {
        "software": {"name": "wallstress", "version": version},
        "run_utc": datetime.now(timezone.utc).isoformat(timespec="seconds"),
        "options": options.as_record(),
        "reference_set": {
            "name": refset.name,
            "title": refset.title,
            "path": refset.path,
            "geometry_mass_index": refset.mass_index,
            "rows": refset.as_records(),
        },
        "formulas": formula_rows,
        "coefficients": {k: _plain(v) for k, v in used.items()},
        "column_mapping": [{k: _plain(v) for k, v in m.items()} for m in mapped.mapping],
        "unmapped_columns": [str(c) for c in getattr(mapped, "unmapped", [])],
        "counts": {
            "rows": int(n_rows),
            "rows_flagged": int(flagged),
            "rows_with_errors": int(errors),
            "rows_flagged_means": "rows with at least one warning or error (notes not counted)",
            "findings": int(len(findings)),
        },
        "unverified": unverified,
        "cautions": list(CAUTIONS),
    }


def _plain(v):
    if isinstance(v, dict):
        return {str(k): _plain(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_plain(x) for x in v]
    if isinstance(v, (np.floating, np.integer)):
        return v.item()
    return v
