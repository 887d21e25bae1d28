"""Units: factors from their definitions, header units, inference from plausible ranges."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.constants as sc

from wallstress.schema import units


def test_factor_length_vs_scipy_constants():
    """1 in = 0.0254 m exactly (scipy.constants.inch; international yard and pound, 1959)."""
    assert units.factor("length", "in") == pytest.approx(sc.inch / sc.centi, rel=1e-15)
    assert units.factor("length", "mm") == pytest.approx(sc.milli / sc.centi, rel=1e-15)
    assert units.factor("length", "m") == pytest.approx(1 / sc.centi, rel=1e-15)


def test_factor_mass_vs_scipy_constants():
    """1 lb = 0.45359237 kg exactly (scipy.constants.pound); 1 g = 1e-3 kg."""
    assert units.factor("mass", "lb") == pytest.approx(sc.pound, rel=1e-15)
    assert units.factor("mass", "lbs") == pytest.approx(sc.pound, rel=1e-15)
    assert units.factor("mass", "g") == pytest.approx(sc.gram, rel=1e-15)


def test_factor_pressure_vs_definition():
    """1 kPa = 7.50062 mmHg (conventional mmHg = 133.322387415 Pa, BIPM SI Brochure 2019, Table 8;
    sources.md 'Units'). Rounded to 6 significant figures in the source: tolerance 1e-6 relative."""
    assert units.factor("pressure", "kPa") == pytest.approx(7.50062, rel=1e-6)


def test_factor_pressure_vs_scipy_torr():
    """scipy.constants.mmHg is the torr (101325/760 Pa), 1.5e-7 relative below the conventional
    mmHg (BIPM SI Brochure 2019); agreement to 1e-6 relative is expected, not more."""
    assert units.factor("pressure", "kPa") == pytest.approx(sc.kilo / sc.mmHg, rel=1e-6)
    assert units.factor("pressure", "kPa") != pytest.approx(sc.kilo / sc.mmHg, rel=1e-9)


def test_factor_volume_time_area():
    """SI prefixes (BIPM SI Brochure 2019): 1 L = 1000 mL, 1 s = 1000 ms, 1 mm2 = 0.01 cm2."""
    assert units.factor("volume", "L") == 1000.0
    assert units.factor("volume", "ml") == 1.0
    assert units.factor("time", "s") == 1000.0
    assert units.factor("area", "mm2") == pytest.approx(0.01)


def test_factor_errors_name_argument_and_valid_units():
    """Wrong call: the message names the argument, the value and the valid names."""
    with pytest.raises(ValueError, match=r"unit='kg' is not a unit of length; use one of \('mm'"):
        units.factor("length", "kg")
    with pytest.raises(ValueError, match=r"quantity='speed' is not known"):
        units.factor("speed", "m")


@pytest.mark.parametrize(
    "header,unit",
    [
        ("LVIDd (mm)", "mm"),
        ("IVSd [cm]", "cm"),
        ("Weight (lb)", "lb"),
        ("Weight (lbs)", "lb"),
        ("Height, in", "in"),
        ("SBP (kPa)", "kPa"),
        ("SBP (mm Hg)", "mmHg"),
        ("sbp_mmhg", "mmHg"),
        ("lvidd_mm", "mm"),
        ("Height_m", "m"),
        ("Height (m)", "m"),
        ("EDV (ml)", "mL"),
        ("A1 (cm²)", "cm2"),
        ("ET (s)", "s"),
        ("Weight in kg", "kg"),
        ("LVIDd (mm, end-diastole)", "mm"),
        ("LVIDd", None),
        ("LVID s", None),  # 's' here is systole, not seconds
        ("Height in", None),  # a bare 'in' is not read without brackets or a comma
        ("LVIDd (2)", None),
        ("mm", None),
        ("", None),
        (None, None),
    ],
)
def test_parse_header_unit(header, unit):
    """Units as written in lab headers. Common practice, no source."""
    assert units.parse_header_unit(header) == unit


def test_infer_lvidd_mm():
    """An LVIDd median of 48 can only be mm (adult LVIDd 3.8-5.8 cm, Lang RM et al., J Am Soc
    Echocardiogr 2015;28:1, Table 1; 48 cm is impossible). Common practice, no source."""
    got = units.infer_unit("lvidd_cm", [46, 48, 52, 55])
    assert got.unit == "mm" and got.confidence == "high"
    assert units.infer_unit("lvidd_cm", [4.6, 4.8, 5.2]).unit == "cm"


def test_infer_walls_mm():
    """Wall thickness median 9-11 is mm (0.6-1.0 cm normal, Lang 2015 Table 1)."""
    assert units.infer_unit("ivsd_cm", [9, 10, 11]).unit == "mm"
    assert units.infer_unit("pwd_cm", [0.9, 1.0, 1.1]).unit == "cm"


def test_infer_height():
    """Height 1.75 is metres, 69 is inches, 175 cm. Common practice, no source."""
    assert units.infer_unit("height_cm", [1.62, 1.75, 1.80]).unit == "m"
    assert units.infer_unit("height_cm", [64, 69, 72]).unit == "in"
    assert units.infer_unit("height_cm", [162, 175, 180]).unit == "cm"
    assert units.infer_unit("height_cm", [1620, 1750, 1800]).unit == "mm"


def test_infer_weight_kg_confident_lb_not_guessed():
    """Weight 60-90 reads as kg with confidence; a median of 170 could be kg or lb: low confidence.
    Common practice, no source."""
    g = units.infer_unit("weight_kg", [62, 75, 88])
    assert (g.unit, g.confidence) == ("kg", "high")
    g = units.infer_unit("weight_kg", [160, 170, 180])
    assert (g.unit, g.confidence) == ("kg", "low")
    assert units.infer_unit("weight_kg", [250, 300, 330]).unit == "lb"


def test_infer_pressure_kpa():
    """SBP median 16 is kPa (16 kPa = 120 mmHg); 120 is mmHg. Common practice, no source."""
    assert units.infer_unit("sbp_mmhg", [15, 16, 18]).unit == "kPa"
    assert units.infer_unit("sbp_mmhg", [115, 120, 140]).unit == "mmHg"


def test_infer_nan_and_empty():
    """NaN in: ignored; nothing usable: internal unit, confidence 'none'."""
    g = units.infer_unit("lvidd_cm", [np.nan, np.nan])
    assert (g.unit, g.confidence) == ("cm", "none")
    assert units.infer_unit("lvidd_cm", [np.nan, 48, 50, np.inf]).unit == "mm"


def test_infer_bad_field():
    """A wrong call names the argument and lists valid fields."""
    with pytest.raises(ValueError, match=r"field='sex' is not a numeric field"):
        units.infer_unit("sex", [1, 2])


def test_long_column_judged_by_evenly_spaced_values():
    """Above 2 x MEDIAN_SAMPLE values the unit comes from the median of evenly spaced values; it
    decides as the whole column does, and says so (LVIDd in mm, Lang 2015 Table 1 as above;
    the sample's median against numpy's median of the whole column, a reference library)."""
    rng = np.random.default_rng(3)
    n = 5 * units.MEDIAN_SAMPLE
    mm = rng.normal(48, 5, n)
    mm[rng.random(n) < 0.02] = np.nan  # gaps do not matter
    got = units.infer_unit("lvidd_cm", mm)
    assert (got.unit, got.confidence) == ("mm", "high")
    assert "evenly spaced" in got.reason
    quoted = float(got.reason.split("values ")[1].split()[0])
    assert abs(quoted - np.nanmedian(mm)) < 0.2  # within 0.04 SD of the whole column's median
    short = units.infer_unit("lvidd_cm", mm[: units.MEDIAN_SAMPLE])
    assert "evenly spaced" not in short.reason and short.unit == "mm"
