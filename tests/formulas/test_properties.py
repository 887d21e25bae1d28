"""Properties every formula must have, checked with hypothesis over plausible adult ranges.

- LV mass rises with each wall thickness and with LVIDd at fixed walls (geometry of the cube
  formula: d/dLVIDd [(w + LVIDd)^3 - LVIDd^3] = 3 ((w + LVIDd)^2 - LVIDd^2) > 0; common practice,
  no source).
- A Series in gives a Series out with the same index; an ndarray gives an ndarray.
- NaN in any numeric input gives NaN out; zero or negative lengths (and other quantities that must
  be positive) give NaN, never an exception.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from wallstress import formulas as f

wall = st.floats(0.5, 2.0)
cavity = st.floats(3.0, 7.5)
step = st.floats(0.01, 0.5)


@given(ivsd=wall, lvidd=cavity, pwd=wall, dw=step, method=st.sampled_from(f.LINEAR_MASS_METHODS))
def test_lv_mass_rises_with_each_wall_and_cavity(ivsd, lvidd, pwd, dw, method):
    """Mass rises with IVSd, with PWd, and with LVIDd at fixed walls (common practice, no source)."""
    base = f.lv_mass_linear_g(ivsd, lvidd, pwd, method=method)
    assert f.lv_mass_linear_g(ivsd + dw, lvidd, pwd, method=method) > base
    assert f.lv_mass_linear_g(ivsd, lvidd, pwd + dw, method=method) > base
    assert f.lv_mass_linear_g(ivsd, lvidd + dw, pwd, method=method) > base


@given(lvidd=cavity, pwd=wall, dw=step)
def test_rwt_rises_with_wall_and_falls_with_cavity(lvidd, pwd, dw):
    """RWT rises with the wall and falls with the cavity (definition; common practice, no source)."""
    base = f.relative_wall_thickness(lvidd, pwd)
    assert f.relative_wall_thickness(lvidd, pwd + dw) > base
    assert f.relative_wall_thickness(lvidd + dw, pwd) < base


@given(h=st.floats(140.0, 210.0), w=st.floats(35.0, 200.0), method=st.sampled_from(f.BSA_METHODS))
def test_bsa_rises_with_height_and_weight(h, w, method):
    """Every BSA formula rises with height and with weight in the adult range (common practice,
    no source)."""
    base = f.bsa_m2(h, w, method=method)
    assert f.bsa_m2(h + 1.0, w, method=method) > base
    assert f.bsa_m2(h, w + 1.0, method=method) > base
    assert 1.0 < base < 3.5


@given(
    lvidd=cavity,
    frac=st.floats(0.0, 0.6),
    ivsd=wall,
    pwd=wall,
)
def test_midwall_fs_between_zero_and_endocardial_fs(lvidd, frac, ivsd, pwd):
    """0 <= midwall FS <= endocardial FS: the midwall moves less than the endocardium (Shimizu
    1991, as the basis of the method; from memory)."""
    lvids = lvidd * (1 - frac)
    mws = f.midwall_fs_pct(ivsd, lvidd, pwd, lvids)
    fs = f.fractional_shortening_pct(lvidd, lvids)
    assert -1e-9 <= mws <= fs + 1e-9


# name -> (function, valid positional args, keyword args, positions that must be > 0)
CASES = {
    "bsa_m2": (f.bsa_m2, (170.0, 70.0), {}, (0, 1)),
    "bsa_m2_boyd": (f.bsa_m2, (170.0, 70.0), {"method": "boyd"}, (0, 1)),
    "height_power": (f.height_power, (170.0,), {"power": 2.7}, (0,)),
    "lv_mass_ase": (f.lv_mass_linear_g, (1.0, 5.0, 1.0), {}, (0, 1, 2)),
    "lv_mass_penn": (f.lv_mass_linear_g, (1.0, 5.0, 1.0), {"method": "penn"}, (0, 1, 2)),
    "lv_mass_al": (f.lv_mass_area_length_g, (40.0, 20.0, 8.0), {}, (0, 1, 2)),
    "lv_mass_te": (f.lv_mass_truncated_ellipsoid_g, (40.0, 20.0, 5.5, 2.5), {}, (0, 1, 2, 3)),
    "rwt": (f.relative_wall_thickness, (5.0, 1.0), {}, (0, 1)),
    "rwt_septal": (
        f.relative_wall_thickness,
        (5.0, 1.0, 1.1),
        {"method": "septal_posterior"},
        (0, 1, 2),
    ),
    "concentricity": (f.concentricity_g_ml23, (150.0, 120.0), {}, (0, 1)),
    "mess": (f.meridional_es_stress_kdyn_cm2, (120.0, 3.2, 1.6), {}, (0, 1, 2)),
    "mess_exact": (
        f.meridional_es_stress_kdyn_cm2,
        (120.0, 3.2, 1.6),
        {"constant": "exact"},
        (0, 1, 2),
    ),
    "cess": (f.circumferential_es_stress_kdyn_cm2, (120.0, 3.2, 1.6), {}, (0, 1, 2)),
    "laplace": (f.laplace_thin_sphere_kdyn_cm2, (120.0, 2.0, 1.0), {}, (0, 1, 2)),
    "esp_cuff": (f.es_pressure_mmhg, (120.0,), {}, (0,)),
    "esp_scaled": (f.es_pressure_mmhg, (120.0,), {"method": "scaled_sbp"}, (0,)),
    "esp_weighted": (f.es_pressure_mmhg, (120.0, 80.0), {"method": "weighted_mean"}, (0, 1)),
    "stroke_work": (f.stroke_work_g_m, (120.0, 70.0), {}, (0, 1)),
    "fs": (f.fractional_shortening_pct, (5.0, 3.2), {}, (0, 1)),
    "teichholz": (f.teichholz_volume_ml, (5.0,), {}, (0,)),
    "ef": (f.ejection_fraction_pct, (120.0, 50.0), {}, (0, 1)),
    "midwall": (f.midwall_fs_pct, (1.0, 5.0, 1.0, 3.2), {}, (0, 1, 2, 3)),
    "line": (f.predicted_from_line, (150.0,), {"intercept": 20.0, "slope": -0.02}, ()),
    "stress_corrected": (f.stress_corrected_pct, (16.9, 18.0), {}, (1,)),
    "vcf": (f.vcf_circ_s, (36.0, 300.0), {}, (1,)),
    "vcfc": (f.vcfc_circ_s, (36.0, 300.0, 70.0), {}, (1, 2)),
    "predicted_mass": (
        f.predicted_lv_mass_g,
        (170.0, 120.0, 1.0),
        {"coefficients": f.PREDICTED_MASS_COEFFICIENTS_FROM_MEMORY},
        (0, 1),
    ),
    "appropriateness": (f.appropriateness_pct, (180.0, 150.0), {}, (0, 1)),
}


@pytest.mark.parametrize("name", sorted(CASES))
def test_valid_scalar_inputs_give_finite_float(name):
    """The valid example inputs give a finite float (so the NaN checks below can fail)."""
    func, args, kwargs, _ = CASES[name]
    out = func(*args, **kwargs)
    assert isinstance(out, float) and math.isfinite(out)


@pytest.mark.parametrize("name", sorted(CASES))
def test_nan_in_any_input_gives_nan(name):
    """NaN in any numeric input gives NaN out (NaN in, NaN out)."""
    func, args, kwargs, _ = CASES[name]
    for i in range(len(args)):
        bad = list(args)
        bad[i] = np.nan
        assert np.isnan(func(*bad, **kwargs)), f"{name}: NaN at position {i}"


@pytest.mark.parametrize("name", sorted(CASES))
@pytest.mark.parametrize("bad_value", [0.0, -1.0, -np.inf, np.inf])
def test_non_positive_or_infinite_quantities_give_nan(name, bad_value):
    """Zero, negative or infinite lengths, areas, volumes, pressures, times and rates give NaN,
    never an exception (common practice, no source)."""
    func, args, kwargs, positions = CASES[name]
    for i in positions:
        bad = list(args)
        bad[i] = bad_value
        assert np.isnan(func(*bad, **kwargs)), f"{name}: {bad_value} at position {i}"


@pytest.mark.parametrize("name", sorted(CASES))
@pytest.mark.parametrize("bad_value", [np.nan, 0.0, -1.0, -np.inf, np.inf])
def test_bad_value_in_an_array_blanks_only_its_row(name, bad_value):
    """In an array, one bad value blanks its own row only; the valid rows keep their values
    (NaN in, NaN out, row by row; common practice, no source). Arrays take the guards' fast path
    (nothing to blank) and their slow path (something to blank), which scalars never reach."""
    func, args, kwargs, positions = CASES[name]
    expected = func(*args, **kwargs)
    for i in positions:
        arrays = [np.full(4, a) for a in args]
        arrays[i][2] = bad_value
        out = func(*arrays, **kwargs)
        assert np.isnan(out[2]), f"{name}: {bad_value} at position {i}"
        np.testing.assert_allclose(np.delete(out, 2), expected, rtol=1e-12)
    clean = func(*[np.full(4, a) for a in args], **kwargs)
    np.testing.assert_allclose(clean, expected, rtol=1e-12)


@pytest.mark.parametrize("name", sorted(CASES))
def test_result_is_never_an_input_array(name):
    """The result is the caller's own array: writing into it leaves every input unchanged (the
    guards may hand back an input that needs no blanking; common practice, no source)."""
    func, args, kwargs, _ = CASES[name]
    arrays = [np.full(3, a) for a in args]
    out = func(*arrays, **kwargs)
    assert not any(np.shares_memory(out, a) for a in arrays), name


def test_mean_of_one_reading_is_a_copy():
    """One reading: its mean is the reading itself, as a new array (common practice, no source)."""
    sbp = np.array([120.0, 130.0])
    out = f.mean_of_readings(sbp)
    np.testing.assert_array_equal(out, sbp)
    assert not np.shares_memory(out, sbp)


@settings(max_examples=30)
@given(
    n=st.integers(1, 20),
    labels=st.sampled_from(["int", "str", "shuffled"]),
    name=st.sampled_from(sorted(CASES)),
)
def test_series_in_gives_series_out_with_same_index(n, labels, name):
    """Series inputs give a Series with the same index; values equal the scalar results."""
    func, args, kwargs, _ = CASES[name]
    if labels == "int":
        index = pd.RangeIndex(100, 100 + n)
    elif labels == "str":
        index = pd.Index([f"s{i}" for i in range(n)])
    else:
        index = pd.Index(list(range(n))[::-1])
    series_args = [pd.Series(np.full(n, a), index=index) for a in args]
    out = func(*series_args, **kwargs)
    assert isinstance(out, pd.Series)
    assert out.index.equals(index)
    np.testing.assert_allclose(out.to_numpy(), func(*args, **kwargs))
    # An ndarray in gives an ndarray of the same shape.
    arr = func(*[np.full(n, a) for a in args], **kwargs)
    assert isinstance(arr, np.ndarray) and arr.shape == (n,)


def test_nullable_pandas_series_na_gives_nan():
    """pandas nullable Float64 with NA is read as NaN (not an exception)."""
    s = pd.Series([1.0, pd.NA], dtype="Float64", index=["a", "b"])
    out = f.lv_mass_linear_g(s, 5.0, 1.0)
    assert out.index.tolist() == ["a", "b"]
    assert np.isfinite(out["a"]) and np.isnan(out["b"])


@pytest.mark.parametrize(
    ("func", "kwargs", "names"),
    [
        (f.bsa_m2, {"height_cm": 170, "weight_kg": 70, "method": "x"}, f.BSA_METHODS),
        (
            f.lv_mass_linear_g,
            {"ivsd_cm": 1, "lvidd_cm": 5, "pwd_cm": 1, "method": "x"},
            f.LINEAR_MASS_METHODS,
        ),
        (f.relative_wall_thickness, {"lvidd_cm": 5, "pwd_cm": 1, "method": "x"}, f.RWT_METHODS),
        (
            f.meridional_es_stress_kdyn_cm2,
            {"pressure_mmhg": 120, "lvids_cm": 3, "pws_cm": 1, "constant": "x"},
            f.STRESS_CONSTANTS,
        ),
        (f.es_pressure_mmhg, {"sbp_mmhg": 120, "method": "x"}, f.ES_PRESSURE_METHODS),
        (
            f.stroke_work_g_m,
            {"sbp_mmhg": 120, "stroke_volume_ml": 70, "constant": "x"},
            f.STRESS_CONSTANTS,
        ),
        (
            f.midwall_fs_pct,
            {"ivsd_cm": 1, "lvidd_cm": 5, "pwd_cm": 1, "lvids_cm": 3, "model": "x"},
            f.MIDWALL_MODELS,
        ),
    ],
)
def test_bad_method_name_message_lists_valid_names(func, kwargs, names):
    """A bad method name raises ValueError naming the argument, the value and every valid name."""
    pattern = r"='x'.*" + ".*".join(f"'{n}'" for n in names)
    with pytest.raises(ValueError, match=pattern):
        func(**kwargs)
