"""Tests of wallstress.tracking: follow-up over years.

All cohorts here are invented (no real people). Frames are built by hand with canonical input and
output columns, so the tests do not depend on the analysis pipeline.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from wallstress.analysis.result import Analysis
from wallstress.errors import InputError
from wallstress.findings import FINDING_COLUMNS
from wallstress.tracking import visits
from wallstress.tracking.cohort_tables import GEOMETRY_CLASSES
from wallstress.tracking.statistics import (
    grouped_linear_fit,
    least_significant_change,
    within_subject_sd,
)
from wallstress.tracking.track import Tracking, track, tracking_sheets

N = "normal"
CR = "concentric_remodelling"
CH = "concentric_hypertrophy"
EH = "eccentric_hypertrophy"


def studies(rows: list[dict]) -> pd.DataFrame:
    """An analysed-looking frame from a few dicts; unspecified measures get plausible constants."""
    defaults = {
        "sex": "F",
        "height_cm": 165.0,
        "weight_kg": 70.0,
        "lv_mass_g": 180.0,
        "lvmi_bsa_g_m2": 100.0,
        "lvmi_h27_g_m2_7": 45.0,
        "rwt": 0.40,
        "mess_kdyn_cm2": 60.0,
        "cess_kdyn_cm2": 150.0,
        "geometry": N,
        "flags": "",
    }
    df = pd.DataFrame([{**defaults, **r} for r in rows])
    df["study_date"] = pd.to_datetime(df["study_date"])
    if "study_id" not in df.columns:
        df["study_id"] = [f"S{i:03d}" for i in range(len(df))]
    return df


def random_cohort(seed: int = 3) -> pd.DataFrame:
    """Invented patients with 1..7 visits at irregular dates and noisy measures, some NaN."""
    rng = np.random.default_rng(seed)
    rows = []
    for p in range(40):
        n = int(rng.integers(1, 8))
        start = pd.Timestamp("2012-01-01") + pd.Timedelta(days=int(rng.integers(0, 2000)))
        days = np.sort(rng.choice(np.arange(1, 3000), size=n - 1, replace=False))
        for k, d in enumerate(np.r_[0, days]):
            rows.append(
                {
                    "patient_id": f"P{p:02d}",
                    "study_date": start + pd.Timedelta(days=int(d)),
                    "lv_mass_g": rng.normal(200, 30),
                    "lvmi_bsa_g_m2": rng.normal(105, 15),
                    "lvmi_h27_g_m2_7": rng.normal(48, 6) if rng.random() > 0.1 else np.nan,
                    "rwt": rng.normal(0.42, 0.05),
                    "geometry": rng.choice(GEOMETRY_CLASSES),
                    "study_id": f"{p:02d}-{k}",
                }
            )
    df = studies(rows)
    return df.sample(frac=1.0, random_state=seed).reset_index(drop=True)


# ------------------------------------------------------------------------------------------------
# Reproducibility: within-subject SD and least significant change
# ------------------------------------------------------------------------------------------------


def test_within_subject_sd_hand_example():
    """Sw = sqrt(sum d^2 / (2 n)) (Bland JM, Altman DG, BMJ 1996;313:744, "Measurement error").

    Hand example: differences -10, +10, 0 -> sum d^2 = 200, n = 3 -> Sw = sqrt(200 / 6) = 5.7735.
    """
    assert within_subject_sd([100, 200, 150], [110, 190, 150]) == pytest.approx(
        math.sqrt(200 / 6), rel=1e-12
    )


def test_within_subject_sd_vs_numpy_per_subject_variance():
    """Sw^2 is the mean of the per-subject variances (Bland & Altman BMJ 1996;313:744); the
    variances are computed independently with numpy.var(ddof=1). A NaN pair is left out."""
    rng = np.random.default_rng(7)
    a = rng.normal(180, 40, 50)
    b = a + rng.normal(0, 12, 50)
    expected = math.sqrt(np.mean(np.var(np.c_[a, b], axis=1, ddof=1)))
    a_nan, b_nan = np.r_[a, np.nan], np.r_[b, 200.0]
    assert within_subject_sd(a_nan, b_nan) == pytest.approx(expected, rel=1e-12)


def test_within_subject_sd_nan_and_shape():
    """NaN in, NaN out; mismatched lengths name both arguments (common practice, no source)."""
    assert math.isnan(within_subject_sd([np.nan], [1.0]))
    with pytest.raises(ValueError, match="first and second must have the same length"):
        within_subject_sd([1, 2, 3], [1, 2])


def test_least_significant_change_vs_bland_altman():
    """LSC = 1.96 * sqrt(2) * Sw, printed as 2.77 Sw (Bland JM, Altman DG, BMJ 1996;313:744);
    tolerance matches the two printed decimals."""
    assert least_significant_change(1.0) == pytest.approx(2.77, abs=0.005)
    assert least_significant_change(12.0) == pytest.approx(1.96 * math.sqrt(2) * 12.0, rel=1e-12)
    arr = least_significant_change(np.array([1.0, np.nan]))
    assert arr[0] == pytest.approx(2.7719, abs=1e-4) and math.isnan(arr[1])


def test_palmieri_35_g_matches_within_subject_sd():
    """Palmieri V et al., J Am Coll Cardiol 1999;34:1625: a change of 35 g is real (>= 95 %).
    Through Bland & Altman's LSC this is Sw = 35 / (1.96 sqrt 2) = 12.627 g (computed, 3 decimals)."""
    sw = 35.0 / (1.96 * math.sqrt(2))
    assert sw == pytest.approx(12.627, abs=5e-4)
    assert least_significant_change(sw) == pytest.approx(35.0, rel=1e-12)


def _mass_pairs(changes):
    rows = []
    for i, d in enumerate(changes):
        rows.append({"patient_id": f"P{i}", "study_date": "2020-01-01", "lv_mass_g": 200.0})
        rows.append({"patient_id": f"P{i}", "study_date": "2021-01-01", "lv_mass_g": 200.0 + d})
    return studies(rows)


def test_default_lsc_is_palmieri_35_g():
    """Default LSC from the reference set's reproducibility coefficients: 35 g "or more"
    (Palmieri V et al., J Am Coll Cardiol 1999;34:1625)."""
    t = track(_mass_pairs([35.0, -35.0, 34.9, -34.9, 0.0]))
    assert t.methods["least_significant_change"]["lsc_lv_mass_g"] == 35.0
    assert "Palmieri" in t.methods["least_significant_change"]["source"]
    real = t.patients.set_index("patient_id")["lv_mass_real_change"]
    assert real.tolist() == [True, True, False, False, False]
    verdict = t.patients.set_index("patient_id")["mass_verdict"]
    assert verdict.tolist() == [
        "mass_rose_beyond_noise",
        "mass_fell_beyond_noise",
        "mass_change_within_noise",
        "mass_change_within_noise",
        "mass_change_within_noise",
    ]
    v = t.visits.set_index(["patient_id", "visit_number"])
    assert bool(v.loc[("P0", 2), "lv_mass_real_change_from_baseline"]) is True
    assert pd.isna(v.loc[("P0", 1), "lv_mass_real_change_from_previous"])


def test_lsc_from_given_within_subject_sd():
    """A given Sw gives LSC = 1.96 sqrt(2) Sw (Bland & Altman BMJ 1996;313:744): Sw = 10 g ->
    27.72 g, so a 28 g change is real and a 27 g change is not."""
    t = track(_mass_pairs([28.0, 27.0]), within_subject_sd_g=10.0)
    lsc = t.methods["least_significant_change"]
    assert lsc["lsc_lv_mass_g"] == pytest.approx(27.719, abs=5e-4)
    assert lsc["within_subject_sd_lv_mass_g"] == 10.0
    assert t.patients["lv_mass_real_change"].tolist() == [True, False]


def test_lsc_arguments_checked():
    """Wrong calls name the argument and the fix (common practice, no source)."""
    df = _mass_pairs([10.0])
    with pytest.raises(ValueError, match="either within_subject_sd_g or lsc_g"):
        track(df, within_subject_sd_g=10, lsc_g=30)
    with pytest.raises(ValueError, match="lsc_g must be a positive number"):
        track(df, lsc_g=-1)
    with pytest.raises(ValueError, match="same_day must be one of"):
        track(df, same_day="first")
    t = track(df, lsc_g=5)
    assert t.patients["lv_mass_real_change"].tolist() == [True]


# ------------------------------------------------------------------------------------------------
# Slopes
# ------------------------------------------------------------------------------------------------


def test_slopes_and_ci_vs_scipy_linregress():
    """Per-patient slope and 95 % CI equal scipy.stats.linregress (slope, stderr) with the CI
    slope +/- t(0.975, n - 2) * stderr (scipy.stats.t); same numbers, so tolerance 1e-9."""
    df = random_cohort()
    t = track(df)
    v = t.visits
    checked = 0
    for pid, g in v.groupby("patient_id"):
        p = t.patients.set_index("patient_id").loc[pid]
        for col, name in (
            ("lv_mass_g", "lv_mass_slope_g_per_year"),
            ("lvmi_bsa_g_m2", "lvmi_bsa_slope_g_m2_per_year"),
            ("lvmi_h27_g_m2_7", "lvmi_h27_slope_g_m2_7_per_year"),
            ("rwt", "rwt_slope_per_year"),
        ):
            ok = g[col].notna()
            x, y = g.loc[ok, "years_since_baseline"], g.loc[ok, col]
            if len(x) < 2:
                assert math.isnan(p[name])
                continue
            ref = stats.linregress(x, y)
            assert p[name] == pytest.approx(ref.slope, rel=1e-9, abs=1e-12)
            low = name.replace("_slope_", "_slope_ci_low_")
            high = name.replace("_slope_", "_slope_ci_high_")
            if len(x) >= 3:
                half = stats.t.ppf(0.975, len(x) - 2) * ref.stderr
                assert p[low] == pytest.approx(ref.slope - half, rel=1e-9, abs=1e-12)
                assert p[high] == pytest.approx(ref.slope + half, rel=1e-9, abs=1e-12)
                checked += 1
            else:
                assert math.isnan(p[low]) and math.isnan(p[high])
    assert checked > 50


def test_grouped_linear_fit_vs_linregress_with_nan():
    """grouped_linear_fit on two groups with a NaN point matches scipy.stats.linregress."""
    gid = np.array([0, 0, 0, 0, 1, 1, 1])
    x = np.array([0.0, 1.0, 2.5, 4.0, 0.0, 1.0, 2.0])
    y = np.array([10.0, 12.0, np.nan, 15.5, 3.0, 2.0, 2.5])
    fit = grouped_linear_fit(gid, x, y, 2)
    for g in (0, 1):
        m = (gid == g) & ~np.isnan(y)
        ref = stats.linregress(x[m], y[m])
        assert fit.loc[g, "slope"] == pytest.approx(ref.slope, rel=1e-12)
        assert fit.loc[g, "stderr"] == pytest.approx(ref.stderr, rel=1e-9)
    assert fit["n"].tolist() == [3, 3]


# ------------------------------------------------------------------------------------------------
# Visits: ordering, years, changes
# ------------------------------------------------------------------------------------------------


def test_visits_ordered_and_changes_by_hand():
    """Shuffled input comes out in date order; changes from baseline and previous visit by hand;
    years = days / 365.25 (Julian year, common practice, no source)."""
    df = studies(
        [
            {"patient_id": "A", "study_date": "2022-01-01", "lv_mass_g": 150.0, "rwt": 0.40},
            {"patient_id": "A", "study_date": "2020-01-01", "lv_mass_g": 200.0, "rwt": 0.50},
            {"patient_id": "A", "study_date": "2021-01-01", "lv_mass_g": np.nan, "rwt": 0.45},
        ]
    )
    v = track(df).visits
    assert v["input_row"].tolist() == [1, 2, 0]
    assert v["visit_number"].tolist() == [1, 2, 3]
    assert v["years_since_baseline"].tolist() == pytest.approx([0, 366 / 365.25, 731 / 365.25])
    # NaN in, NaN out; the next visit is compared with the latest available value (200 g)
    assert (
        v["lv_mass_change_from_baseline_g"].iloc[1] != v["lv_mass_change_from_baseline_g"].iloc[1]
    )
    assert v["lv_mass_change_from_previous_g"].iloc[2] == pytest.approx(-50.0)
    assert v["lv_mass_change_from_baseline_pct"].iloc[2] == pytest.approx(-25.0)
    assert v["rwt_change_from_previous"].tolist()[1:] == pytest.approx([-0.05, -0.05])
    assert pd.isna(v["lv_mass_real_change_from_baseline"].iloc[1])
    assert bool(v["lv_mass_real_change_from_baseline"].iloc[2]) is True


def test_missing_patient_column_message():
    """No patient column: an InputError that says which column to map (project contract)."""
    df = studies([{"patient_id": "A", "study_date": "2020-01-01"}]).drop(columns="patient_id")
    with pytest.raises(InputError, match="no patient identifier column: add one named patient_id"):
        track(df)
    with pytest.raises(InputError, match="--columns"):
        track(df)


def test_missing_ids_and_dates_left_out_with_findings():
    """A study without patient id or date cannot be placed: left out with a finding whose row is
    the input position (common practice, no source)."""
    df = studies(
        [
            {"patient_id": "A", "study_date": "2020-01-01"},
            {"patient_id": " ", "study_date": "2020-01-01"},
            {"patient_id": "A", "study_date": pd.NaT},
            {"patient_id": "A", "study_date": "2021-01-01"},
        ]
    )
    t = track(df)
    assert list(t.findings.columns) == list(FINDING_COLUMNS)
    codes = dict(zip(t.findings["row"], t.findings["code"], strict=True))
    assert codes == {1: "no_patient_id", 2: "no_study_date"}
    assert t.visits["input_row"].tolist() == [0, 3]
    assert t.methods["counts"]["studies_used"] == 2


# ------------------------------------------------------------------------------------------------
# Same-day studies
# ------------------------------------------------------------------------------------------------


def _same_day_frame(geometry_b=CH):
    return studies(
        [
            {
                "patient_id": "A",
                "study_date": "2020-05-01",
                "study_id": 2,
                "lv_mass_g": 220.0,
                "geometry": CH,
                "flags": "a",
            },
            {
                "patient_id": "A",
                "study_date": "2020-05-01",
                "study_id": 1,
                "lv_mass_g": 200.0,
                "geometry": geometry_b,
                "flags": "b",
            },
            {
                "patient_id": "A",
                "study_date": "2021-05-01",
                "study_id": 3,
                "lv_mass_g": 190.0,
                "geometry": N,
            },
        ]
    )


def test_same_day_mean():
    """same_day="mean": measures of one day averaged (200 and 220 -> 210 g); geometry kept when
    the studies agree; each merged study gets a note (rule stated in methods)."""
    t = track(_same_day_frame())
    v = t.visits
    assert len(v) == 2
    assert v["lv_mass_g"].iloc[0] == pytest.approx(210.0)
    assert v["geometry"].iloc[0] == CH
    assert v["n_same_day"].iloc[0] == 2
    assert v["merged_rows"].iloc[0] == "1;0"  # ordered by study id
    assert v["study_id"].iloc[0] == "1;2"
    assert set(v["flags"].iloc[0].split(";")) == {"a", "b"}
    assert t.methods["same_day_rule"] == "mean"
    assert set(t.findings.loc[t.findings["code"] == "same_day_averaged", "row"]) == {0, 1}
    assert t.patients["lv_mass_change_g"].iloc[0] == pytest.approx(-20.0)


def test_same_day_mean_geometry_disagreement_left_undecided():
    """Studies of one day with different classes: the visit's geometry is undecided, with a
    warning (common practice, no source)."""
    t = track(_same_day_frame(geometry_b=CR))
    assert t.visits["geometry"].iloc[0] == ""
    assert (t.findings["code"] == "same_day_geometry_differs").sum() == 2


def test_same_day_last():
    """same_day="last": the last study of the day (by study id) is kept (220 g, study 2), the
    other is noted as superseded."""
    t = track(_same_day_frame(geometry_b=CR), same_day="last")
    v = t.visits
    assert len(v) == 2
    assert v["lv_mass_g"].iloc[0] == 220.0
    assert v["input_row"].iloc[0] == 0
    assert v["geometry"].iloc[0] == CH
    sup = t.findings[t.findings["code"] == "same_day_superseded"]
    assert sup["row"].tolist() == [1]
    assert t.methods["same_day_rule"] == "last"


# ------------------------------------------------------------------------------------------------
# Patients: single study, verdicts, consistency findings
# ------------------------------------------------------------------------------------------------


def test_single_study_patients_kept():
    """A one-study patient stays in the patients table, without slope, flagged single_study."""
    df = studies(
        [
            {"patient_id": "A", "study_date": "2020-01-01"},
            {"patient_id": "B", "study_date": "2020-01-01"},
            {"patient_id": "B", "study_date": "2021-01-01"},
        ]
    )
    t = track(df)
    p = t.patients.set_index("patient_id")
    assert list(p.index) == ["A", "B"]
    assert p.loc["A", "n_visits"] == 1
    assert math.isnan(p.loc["A", "lv_mass_slope_g_per_year"])
    assert p.loc["A", "mass_verdict"] == "single_study"
    assert p.loc["A", "verdict"] == "single study: no trend"
    assert "single_study" in p.loc["A", "flags"].split(";")
    assert p.loc["B", "flags"] == ""
    single = t.findings[t.findings["code"] == "single_study"]
    assert single["row"].tolist() == [0]


@pytest.mark.parametrize(
    ("first", "last", "code"),
    [
        (CH, N, "hypertrophy_regressed_to_normal"),
        (EH, N, "hypertrophy_regressed_to_normal"),
        (CH, CR, "hypertrophy_regressed_to_remodelling"),
        (CR, N, "remodelling_resolved"),
        (N, CR, "developed_remodelling"),
        (CR, CH, "progressed_to_hypertrophy"),
        (N, EH, "progressed_to_hypertrophy"),
        (CH, EH, "hypertrophy_pattern_changed"),
        (CR, CR, "geometry_unchanged"),
        (CH, "", "geometry_not_assessable"),
    ],
)
def test_geometry_verdicts(first, last, code):
    """Geometry verdicts follow the four classes of Ganau A et al., J Am Coll Cardiol 1992;19:1550
    (hypertrophy = concentric or eccentric); first and last are visits with a decided class."""
    df = studies(
        [
            {"patient_id": "A", "study_date": "2020-01-01", "geometry": first},
            {"patient_id": "A", "study_date": "2021-01-01", "geometry": last},
        ]
    )
    p = track(df).patients.iloc[0]
    assert p["geometry_verdict"] == code
    assert isinstance(p["verdict"], str) and p["verdict"]


def test_verdict_text_combines_mass_and_geometry():
    """Plain-words verdict: mass part, then geometry part (our own wording)."""
    df = studies(
        [
            {"patient_id": "A", "study_date": "2020-01-01", "lv_mass_g": 250.0, "geometry": CH},
            {"patient_id": "A", "study_date": "2023-01-01", "lv_mass_g": 190.0, "geometry": N},
        ]
    )
    p = track(df).patients.iloc[0]
    assert p["mass_verdict"] == "mass_fell_beyond_noise"
    assert p["verdict"] == (
        "LV mass fell beyond the measurement's reproducibility; "
        "hypertrophy regressed to normal geometry"
    )


def test_sex_change_and_adult_height_change_findings():
    """Sex that changes, or adult height changing by more than 5 cm, gives a warning on the
    patient's studies (common practice, no source); a child's growth and a 5 cm change do not."""
    df = studies(
        [
            {"patient_id": "A", "study_date": "2020-01-01", "sex": "F", "height_cm": 160.0},
            {"patient_id": "A", "study_date": "2021-01-01", "sex": "M", "height_cm": 171.0},
            {"patient_id": "B", "study_date": "2020-01-01", "height_cm": 170.0},
            {"patient_id": "B", "study_date": "2021-01-01", "height_cm": 175.0},
            {"patient_id": "C", "study_date": "2020-01-01", "height_cm": 150.0, "age_years": 12},
            {"patient_id": "C", "study_date": "2022-01-01", "height_cm": 165.0, "age_years": 14},
        ]
    )
    t = track(df)
    f = t.findings
    assert sorted(f.loc[f["code"] == "sex_changed", "row"]) == [0, 1]
    assert sorted(f.loc[f["code"] == "height_changed", "row"]) == [0, 1]
    p = t.patients.set_index("patient_id")
    assert p.loc["A", "sex"] == ""
    assert set(p.loc["A", "flags"].split(";")) == {"sex_changed", "height_changed"}
    assert p.loc["B", "flags"] == "" and p.loc["C", "flags"] == ""


# ------------------------------------------------------------------------------------------------
# Cohort tables
# ------------------------------------------------------------------------------------------------


def test_transition_counts_vs_hand_built_cohort():
    """First -> last geometry counts and row % on a hand-built cohort of 9 followed patients
    (plus one single-study and one with one classified visit, both left out)."""
    pairs = [(N, N), (N, N), (N, CR), (N, CH), (CR, N), (CH, N), (CH, N), (CH, CH), (EH, CH)]
    rows = []
    for i, (a, b) in enumerate(pairs):
        rows.append({"patient_id": f"P{i}", "study_date": "2019-01-01", "geometry": a})
        rows.append({"patient_id": f"P{i}", "study_date": "2020-01-01", "geometry": CR})
        rows.append({"patient_id": f"P{i}", "study_date": "2022-01-01", "geometry": b})
    rows.append({"patient_id": "S", "study_date": "2020-01-01", "geometry": CH})
    rows.append({"patient_id": "U", "study_date": "2020-01-01", "geometry": CH})
    rows.append({"patient_id": "U", "study_date": "2021-01-01", "geometry": ""})
    tr = track(studies(rows)).transitions.set_index(["from_geometry", "to_geometry"])
    assert tr["n_patients"].sum() == 9
    expected = {(N, N): 2, (N, CR): 1, (N, CH): 1, (CR, N): 1, (CH, N): 2, (CH, CH): 1, (EH, CH): 1}
    for a in GEOMETRY_CLASSES:
        for b in GEOMETRY_CLASSES:
            assert tr.loc[(a, b), "n_patients"] == expected.get((a, b), 0)
    assert tr.loc[(N, N), "row_pct"] == pytest.approx(50.0)
    assert tr.loc[(N, CH), "row_pct"] == pytest.approx(25.0)
    assert tr.loc[(CH, N), "row_pct"] == pytest.approx(200 / 3)
    assert tr.loc[(EH, CH), "row_pct"] == pytest.approx(100.0)
    assert tr.loc[(N, N), "n_from"] == 4


def test_prevalence_by_year_and_sex_by_hand():
    """Prevalence by nearest whole year of follow-up and by sex, counted by hand."""
    df = studies(
        [
            {"patient_id": "A", "sex": "F", "study_date": "2020-01-01", "geometry": CH},
            {"patient_id": "A", "sex": "F", "study_date": "2020-12-20", "geometry": N},
            {"patient_id": "B", "sex": "M", "study_date": "2020-01-01", "geometry": CH},
            {"patient_id": "B", "sex": "M", "study_date": "2021-02-01", "geometry": CH},
            {"patient_id": "C", "sex": "M", "study_date": "2020-06-01", "geometry": ""},
        ]
    )
    t = track(df)
    y = t.prevalence_by_year.set_index(["follow_up_year", "geometry"])
    assert y.loc[(0, CH), "n_patients"] == 2
    assert y.loc[(0, "undetermined"), "n_patients"] == 1
    assert y.loc[(0, CH), "pct_of_seen"] == pytest.approx(200 / 3)
    assert y.loc[(0, CH), "pct_of_classified"] == pytest.approx(100.0)
    assert y.loc[(1, N), "n_patients"] == 1 and y.loc[(1, CH), "n_patients"] == 1
    assert y.loc[(1, N), "pct_of_seen"] == pytest.approx(50.0)
    s = t.prevalence_by_sex.set_index(["sex", "follow_up_year", "geometry"])
    assert s.loc[("M", 0, CH), "n_patients"] == 1
    assert s.loc[("M", 0, "undetermined"), "n_patients"] == 1
    assert s.loc[("F", 1, N), "pct_of_seen"] == pytest.approx(100.0)


# ------------------------------------------------------------------------------------------------
# Inputs and sheets
# ------------------------------------------------------------------------------------------------


def test_accepts_analysis_object():
    """An Analysis is read through its frame() (canonical inputs + outputs side by side)."""
    df = studies(
        [
            {"patient_id": "A", "study_date": "2020-01-01", "lv_mass_g": 200.0},
            {"patient_id": "A", "study_date": "2021-01-01", "lv_mass_g": 160.0},
        ]
    )
    inputs = ["study_id", "patient_id", "study_date", "sex", "height_cm", "weight_kg"]
    outputs = df.drop(columns=inputs)
    a = Analysis(table=df, canonical=df[inputs], outputs=outputs, findings=pd.DataFrame())
    t = track(a)
    assert isinstance(t, Tracking)
    assert t.patients["lv_mass_change_g"].iloc[0] == pytest.approx(-40.0)


def test_raw_studies_are_analysed_first(monkeypatch):
    """A frame without lv_mass_g goes through pipeline.analyse_with_findings (stand-in here)."""
    seen = {}

    def fake(df, options):
        seen["called"] = True
        out = df.assign(lv_mass_g=[200.0, 150.0], geometry=[CH, N])
        return Analysis(
            table=out, canonical=df, outputs=out.drop(columns=df.columns), findings=pd.DataFrame()
        )

    monkeypatch.setattr(visits, "analyse_with_findings", fake)
    raw = pd.DataFrame(
        {"patient_id": ["A", "A"], "study_date": pd.to_datetime(["2020-01-01", "2021-01-01"])}
    )
    t = track(raw)
    assert seen["called"]
    assert t.patients["mass_verdict"].iloc[0] == "mass_fell_beyond_noise"


def test_tracking_sheets_and_methods_caution():
    """Sheets in the writer's order; the methods record carries the clinical caution."""
    t = track(random_cohort())
    sheets = tracking_sheets(t)
    assert list(sheets)[:5] == [
        "patients",
        "visits",
        "transitions",
        "prevalence_by_year",
        "prevalence_by_sex",
    ]
    assert all(len(name) <= 31 for name in sheets)
    m = sheets["tracking_methods"].set_index("item")["value"]
    assert "never replace" in m["caution"]
    assert m["least_significant_change.lsc_lv_mass_g"] == "35.0"
    assert len(t.patients) == 40
    assert t.patients["n_studies"].sum() == len(random_cohort())


def test_mixed_patient_id_types_and_numeric_ids():
    """Patient ids given as numbers, or as text with spaces, still group (common practice)."""
    df = studies(
        [
            {"patient_id": 7, "study_date": "2020-01-01"},
            {"patient_id": 7, "study_date": "2021-01-01"},
            {"patient_id": 3, "study_date": "2020-01-01"},
        ]
    )
    p = track(df).patients
    assert p["patient_id"].tolist() == [3, 7]
    assert p["n_visits"].tolist() == [1, 2]
    df["patient_id"] = ["x7 ", "x7", "x3"]
    assert track(df).patients["n_visits"].tolist() == [1, 2]
