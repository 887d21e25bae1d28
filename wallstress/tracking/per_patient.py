"""The visits and patients tables of follow-up: change from baseline and previous visit, slopes, verdicts.

A change in LV mass is real when its size reaches the least significant change (LSC); with three
or more masses the fitted trend must reach it too, its 95 % CI excluding zero. Each patient gets a
mass verdict and a geometry verdict, as codes and in plain words; blood pressure, end-systolic
pressure and wall stress are followed beside them (first, last, slope with its CI).

References
----------
Palmieri V et al. Reliability of echocardiographic assessment of left ventricular structure and
    function: the PRESERVE study. J Am Coll Cardiol 1999;34:1625-1632 (LV mass change of 35 g or
    more is real with >= 95 % likelihood).
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from wallstress.schema.vocabulary import CONCENTRIC_REMODELLING, HYPERTROPHY, NORMAL, OUT
from wallstress.tracking.statistics import grouped_linear_fit
from wallstress.tracking.visits import _NS_PER_DAY, DAYS_PER_YEAR, FOLLOWED

SLOPE_MEASURES: tuple[str, ...] = (
    OUT.lv_mass_g,
    OUT.lvmi_bsa_g_m2,
    OUT.lvmi_h27_g_m2_7,
    OUT.rwt,
    # afterload over time: the pressures and the wall stress they give
    "sbp_mmhg",
    "dbp_mmhg",
    OUT.es_pressure_mmhg,
    OUT.mess_kdyn_cm2,
    OUT.cess_kdyn_cm2,
)


MASS_VERDICT_TEXT: dict[str, str] = {
    "single_study": "single study: no trend",
    "mass_not_assessable": "LV mass not available at two visits: change not judged",
    "mass_fell_beyond_noise": "LV mass fell beyond the measurement's reproducibility",
    "mass_rose_beyond_noise": "LV mass rose beyond the measurement's reproducibility",
    "mass_change_within_noise": "change in LV mass within measurement noise",
    "mass_change_uncertain": (
        "first and last LV mass differ beyond reproducibility, but the trend over all visits "
        "does not confirm it"
    ),
}


GEOMETRY_VERDICT_TEXT: dict[str, str] = {
    "single_study": "",
    "geometry_not_assessable": "geometry not classified at two visits",
    "geometry_unchanged": "geometry class unchanged",
    "hypertrophy_regressed_to_normal": "hypertrophy regressed to normal geometry",
    "hypertrophy_regressed_to_remodelling": "hypertrophy regressed to concentric remodelling",
    "remodelling_resolved": "concentric remodelling resolved to normal geometry",
    "developed_remodelling": "normal geometry became concentric remodelling",
    "progressed_to_hypertrophy": "progressed to hypertrophy",
    "hypertrophy_pattern_changed": "hypertrophy changed between concentric and eccentric",
}


def _name(stem: str, what: str, unit: str) -> str:
    return f"{stem}_{what}_{unit}" if unit else f"{stem}_{what}"


def _patient_flags(
    findings: pd.DataFrame, s: pd.DataFrame, group_pcode, n_codes: int
) -> np.ndarray:
    """Each patient's tracking finding codes, unique, ';'-separated ("" when none)."""
    out = np.full(len(group_pcode), "", dtype=object)
    if findings.empty or not len(s):
        return out
    pcode_of_row = np.full(int(s["input_row"].max()) + 1, -1, dtype=np.int64)
    pcode_of_row[s["input_row"].to_numpy()] = s["pcode"].to_numpy()
    rows = findings["row"].to_numpy()
    inside = (rows >= 0) & (rows < pcode_of_row.size)
    pcodes = np.full(rows.size, -1, dtype=np.int64)
    pcodes[inside] = pcode_of_row[rows[inside]]
    t = pd.DataFrame({"pcode": pcodes, "code": findings["code"].to_numpy()})
    t = t[t["pcode"] >= 0].drop_duplicates()
    if t.empty:
        return out
    joined = t.groupby("pcode", sort=True)["code"].agg(";".join)
    group_of_pcode = np.full(n_codes, -1, dtype=np.int64)
    group_of_pcode[group_pcode] = np.arange(len(group_pcode))
    out[group_of_pcode[joined.index.to_numpy()]] = joined.to_numpy()
    return out


def _visits(v: pd.DataFrame, gid, starts, ids, lsc: float) -> pd.DataFrame:
    date_ns = v["date_ns"].to_numpy()
    years = (date_ns - date_ns[starts][gid]) / (_NS_PER_DAY * DAYS_PER_YEAR)
    out = {
        "patient_id": ids[gid],
        "visit_number": np.arange(len(v)) - starts[gid] + 1,
        "study_date": pd.to_datetime(date_ns, unit="ns"),
        "years_since_baseline": years,
        "study_id": v["study_id"].to_numpy(),
        "input_row": v["input_row"].to_numpy(),
        "n_same_day": v["n_same_day"].to_numpy(),
        "merged_rows": v["merged_rows"].to_numpy(),
        "sex": v["sex"].to_numpy(),
        "height_cm": v["height_cm"].to_numpy(),
        "weight_kg": v["weight_kg"].to_numpy(),
        OUT.geometry: v[OUT.geometry].to_numpy(),
    }
    keys = pd.Series(gid)
    for col, stem, unit in FOLLOWED:
        y = v[col].reset_index(drop=True)
        grouped = y.groupby(keys, sort=False)
        base = grouped.transform("first")  # earliest available value
        prev = y.groupby(keys, sort=False).ffill().groupby(keys, sort=False).shift(1)
        out[col] = y.to_numpy()
        for what, ref in (("change_from_baseline", base), ("change_from_previous", prev)):
            d = (y - ref).to_numpy()
            out[_name(stem, what, unit)] = d
            with np.errstate(invalid="ignore", divide="ignore"):
                out[f"{stem}_{what}_pct"] = d / ref.to_numpy() * 100.0
            if col == OUT.lv_mass_g:
                out[f"lv_mass_real_{what}"] = _real(d, lsc)
    out[OUT.flags] = v[OUT.flags].to_numpy()
    return pd.DataFrame(out)


def _real(change, lsc: float) -> pd.Series:
    """True when |change| >= LSC, False below, <NA> when the change is unknown."""
    change = np.asarray(change, dtype=float)
    with np.errstate(invalid="ignore"):
        real = pd.array(np.abs(change) >= lsc, dtype="boolean")
    real[np.isnan(change)] = pd.NA
    return real


def _first_last(values: pd.Series, keys: pd.Series):
    g = values.groupby(keys, sort=False)
    return g.first().to_numpy(), g.last().to_numpy(), g.count().to_numpy()


def _patients(visits, gid, starts, ends, ids, n_groups, n_studies, lsc) -> pd.DataFrame:
    keys = pd.Series(gid)
    years = visits["years_since_baseline"].to_numpy()
    dates = visits["study_date"]
    out = {
        "patient_id": ids,
        "n_visits": np.bincount(gid, minlength=n_groups),
        "n_studies": n_studies,
        "first_date": dates.to_numpy()[starts],
        "last_date": dates.to_numpy()[ends],
        "span_years": years[ends],
    }
    sex_first, sex_last, _ = _first_last(
        visits["sex"].astype("string").reset_index(drop=True), keys
    )
    n_sex = visits["sex"].groupby(keys, sort=False).nunique().to_numpy()
    out["sex"] = np.where(n_sex > 1, "", pd.Series(sex_last).fillna("").to_numpy())

    for col, stem, unit in FOLLOWED:
        first, last, _ = _first_last(visits[col].reset_index(drop=True), keys)
        out[_name(stem, "first", unit)] = first
        out[_name(stem, "last", unit)] = last
    n_mass = visits[OUT.lv_mass_g].groupby(keys, sort=False).count().to_numpy()
    mass_change = np.where(n_mass >= 2, out["lv_mass_last_g"] - out["lv_mass_first_g"], np.nan)
    out["lv_mass_change_g"] = mass_change
    with np.errstate(invalid="ignore", divide="ignore"):
        out["lv_mass_change_pct"] = mass_change / out["lv_mass_first_g"] * 100.0
    out["lv_mass_real_change"] = _real(mass_change, lsc)

    for col in SLOPE_MEASURES:
        stem, unit = next((st, u) for c, st, u in FOLLOWED if c == col)
        per = f"{unit}_per_year" if unit else "per_year"
        fit = grouped_linear_fit(gid, years, visits[col].to_numpy(), n_groups)
        out[f"{stem}_slope_{per}"] = fit["slope"].to_numpy()
        out[f"{stem}_slope_ci_low_{per}"] = fit["ci_low"].to_numpy()
        out[f"{stem}_slope_ci_high_{per}"] = fit["ci_high"].to_numpy()
        out[f"{stem}_slope_n"] = fit["n"].to_numpy()

    geo = (
        visits[OUT.geometry]
        .where(visits[OUT.geometry] != "")
        .astype("string")
        .reset_index(drop=True)
    )
    g_first, g_last, n_geo = _first_last(geo, keys)
    g_first = pd.Series(g_first, dtype="string").fillna("").to_numpy(dtype=object)
    g_last = pd.Series(g_last, dtype="string").fillna("").to_numpy(dtype=object)
    out["geometry_first"] = g_first
    out["geometry_last"] = g_last
    out["n_visits_with_geometry"] = n_geo

    single = out["n_visits"] == 1
    # With three or more masses the trend over every visit is weighed, not only the first and last
    # study: the fitted change over the follow-up (slope x span) must reach the LSC and the
    # slope's 95 % CI must exclude zero. A first-to-last change beyond the LSC that the trend does
    # not bear out is "uncertain" (one noisy study can make it).
    slope = out["lv_mass_slope_g_per_year"]
    low, high = out["lv_mass_slope_ci_low_g_per_year"], out["lv_mass_slope_ci_high_g_per_year"]
    with np.errstate(invalid="ignore"):
        fitted = slope * out["span_years"]
        trend_fell = (n_mass >= 3) & (fitted <= -lsc) & (high < 0)
        trend_rose = (n_mass >= 3) & (fitted >= lsc) & (low > 0)
        pair_fell, pair_rose = mass_change <= -lsc, mass_change >= lsc
    two = n_mass == 2
    mass_code = np.select(
        [
            single,
            n_mass < 2,
            (two & pair_fell) | trend_fell,
            (two & pair_rose) | trend_rose,
            ~two & (pair_fell | pair_rose),
        ],
        [
            "single_study",
            "mass_not_assessable",
            "mass_fell_beyond_noise",
            "mass_rose_beyond_noise",
            "mass_change_uncertain",
        ],
        "mass_change_within_noise",
    )
    first_h = np.isin(g_first, HYPERTROPHY)
    last_h = np.isin(g_last, HYPERTROPHY)
    geo_code = np.select(
        [
            single,
            n_geo < 2,
            g_first == g_last,
            first_h & (g_last == NORMAL),
            first_h & (g_last == CONCENTRIC_REMODELLING),
            (g_first == CONCENTRIC_REMODELLING) & (g_last == NORMAL),
            (g_first == NORMAL) & (g_last == CONCENTRIC_REMODELLING),
            ~first_h & last_h,
            first_h & last_h,
        ],
        [
            "single_study",
            "geometry_not_assessable",
            "geometry_unchanged",
            "hypertrophy_regressed_to_normal",
            "hypertrophy_regressed_to_remodelling",
            "remodelling_resolved",
            "developed_remodelling",
            "progressed_to_hypertrophy",
            "hypertrophy_pattern_changed",
        ],
        "geometry_not_assessable",
    )
    out["mass_verdict"] = mass_code
    out["geometry_verdict"] = geo_code
    mass_text = pd.Series(mass_code).map(MASS_VERDICT_TEXT)
    geo_text = pd.Series(geo_code).map(GEOMETRY_VERDICT_TEXT)
    out["verdict"] = np.where(geo_text == "", mass_text, mass_text + "; " + geo_text)
    return pd.DataFrame(out)
