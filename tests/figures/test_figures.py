"""Tests of wallstress.figures: the matplotlib objects, not pixels.

Cut-off values are checked against the published numbers (named in each docstring), not only
against the reference set the figure was given.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest
from matplotlib.collections import PathCollection, PolyCollection
from matplotlib.colors import to_hex
from matplotlib.container import ErrorbarContainer
from matplotlib.figure import Figure
from matplotlib.quiver import Quiver
from scipy import stats

from wallstress.analysis.references import load_set
from wallstress.figures import save as F
from wallstress.figures.common import (
    GEOMETRY_CLASSES,
    GEOMETRY_COLOURS,
    GREY,
    OKABE_ITO,
    QUADRANT_TEXT,
    SEX_COLOURS,
)
from wallstress.figures.geometry_plane import geometry_plane
from wallstress.figures.stress_shortening import stress_shortening
from wallstress.figures.transitions import transition_matrix, transitions_figure
from wallstress.figures.trend import lvmi_trend

PNG_MAGIC = b"\x89PNG\r\n\x1a\n"


# ------------------------------------------------------------------------------------------
# helpers
# ------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Cut:
    value: float
    comparison: str
    source: str
    verified: str


class _StubSet:
    """A tiny reference set whose RWT limit differs by sex (no bundled set does)."""

    name = "stub"
    title = "stub set"
    mass_index = "lvmi_bsa_g_m2"
    _cuts = {
        ("lvmi_bsa_g_m2", "F"): _Cut(90.0, ">", "invented for the test", "lab"),
        ("lvmi_bsa_g_m2", "M"): _Cut(110.0, ">", "invented for the test", "lab"),
        ("rwt", "F"): _Cut(0.41, ">", "invented for the test", "lab"),
        ("rwt", "M"): _Cut(0.44, ">=", "invented for the test", "from_memory"),
    }

    def cutoff(self, measure, sex):
        return self._cuts.get((measure, sex))


def _studies(n=40, seed=3) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    return pd.DataFrame(
        {
            "patient_id": [f"P{i:03d}" for i in range(n)],
            "sex": np.where(np.arange(n) % 3 == 0, "F", np.where(np.arange(n) % 3 == 1, "M", "")),
            "lvmi_bsa_g_m2": rng.normal(100, 20, n),
            "lvmi_h27_g_m2_7": rng.normal(45, 9, n),
            "rwt": rng.normal(0.42, 0.05, n),
            "cess_kdyn_cm2": rng.normal(170, 35, n),
            "midwall_fs_pct": rng.normal(16.5, 2.0, n),
        }
    )


def _axes(fig: Figure):
    return fig.axes[0]


def _vertical_lines(ax) -> list[float]:
    """x positions of axvline artists (xdata constant, ydata spanning the axes 0..1)."""
    out = []
    for ln in ax.get_lines():
        x, y = np.asarray(ln.get_xdata(), float), np.asarray(ln.get_ydata(), float)
        if len(x) == 2 and x[0] == x[1] and list(y) == [0.0, 1.0]:
            out.append(float(x[0]))
    return sorted(out)


def _horizontal_lines(ax) -> list[float]:
    out = []
    for ln in ax.get_lines():
        x, y = np.asarray(ln.get_xdata(), float), np.asarray(ln.get_ydata(), float)
        if len(y) == 2 and y[0] == y[1] and list(x) == [0.0, 1.0]:
            out.append(float(y[0]))
    return sorted(out)


def _scatter_by_colour(ax) -> dict[str, int]:
    counts = {}
    for c in ax.collections:
        if isinstance(c, PathCollection) and len(c.get_offsets()):
            fc = c.get_facecolor()
            if len(fc):
                counts[to_hex(fc[0]).upper()] = counts.get(to_hex(fc[0]).upper(), 0) + len(
                    c.get_offsets()
                )
    return counts


def _texts(fig) -> str:
    return "\n".join(t.get_text() for t in fig.findobj(lambda a: hasattr(a, "get_text")))


# ------------------------------------------------------------------------------------------
# geometry plane
# ------------------------------------------------------------------------------------------


def test_geometry_plane_cutoffs_vs_lang_2015():
    """Mass limits > 95 g/m2 (women) and > 115 g/m2 (men), RWT > 0.42.

    Lang RM et al., J Am Soc Echocardiogr 2015;28:1-39 (Table 6 / LV geometry figure); whole
    numbers and two decimals as printed, so exact comparison.
    """
    fig = geometry_plane(_studies(), load_set("ase_eacvi_2015"))
    ax = _axes(fig)
    assert _vertical_lines(ax) == [95.0, 115.0]
    assert _horizontal_lines(ax) == [0.42]
    assert "g/m²" in ax.get_xlabel() and "BSA" in ax.get_xlabel()
    assert "RWT" in ax.get_ylabel()


def test_geometry_plane_lines_follow_the_set_and_sex():
    """The figure draws the set it is given: one RWT line per sex when the limits differ.

    Common practice, no source (the stub set's values are invented).
    """
    fig = geometry_plane(_studies(), _StubSet())
    ax = _axes(fig)
    assert _vertical_lines(ax) == [90.0, 110.0]
    assert _horizontal_lines(ax) == [0.41, 0.44]
    labels = [ln.get_label() for ln in ax.get_lines()]
    assert any("0.44" in lab and "unverified" in lab for lab in labels)
    assert not any("0.41" in lab and "unverified" in lab for lab in labels)


def test_geometry_plane_height27_index_vs_esc_esh_2018():
    """LVM/height^2.7 > 47 (women) / > 50 (men) g/m^2.7.

    ESC/ESH hypertension guidelines 2018, from memory (sources.md): the values are the
    bundled set's; the figure must mark them unverified.
    """
    rs = load_set("esc_esh_2018_h27")
    fig = geometry_plane(_studies(), rs)
    ax = _axes(fig)
    assert _vertical_lines(ax) == [47.0, 50.0]
    assert "height^2.7" in ax.get_xlabel()
    c = rs.cutoff("lvmi_h27_g_m2_7", "F")
    if c.verified != "published":
        assert any("unverified" in ln.get_label() for ln in ax.get_lines())


def test_geometry_plane_points_by_sex_and_nan_dropped():
    """Each study is one point, coloured by sex; NaN rows are not drawn.

    Common practice, no source.
    """
    df = _studies(30)
    df.loc[[0, 1], "rwt"] = np.nan  # row 0 is F, row 1 is M
    fig = geometry_plane(df, load_set())
    counts = _scatter_by_colour(_axes(fig))
    assert counts[SEX_COLOURS["F"].upper()] == 10 - 1
    assert counts[SEX_COLOURS["M"].upper()] == 10 - 1
    assert counts[GREY.upper()] == 10


def test_geometry_plane_quadrants_named_in_words():
    """The four groups of Ganau A et al., J Am Coll Cardiol 1992;19:1550, in our own words."""
    text = _texts(geometry_plane(_studies(), load_set()))
    for words in QUADRANT_TEXT.values():
        assert words in text


def _arrows(ax):
    q = [c for c in ax.collections if isinstance(c, Quiver)]
    assert len(q) == 1
    q = q[0]
    return np.asarray(q.get_offsets()), np.column_stack([q.U, q.V])


def test_geometry_plane_paths_first_to_last_visit_in_time_order():
    """One arrow per patient with two or more visits, from the earliest to the latest visit
    (whatever the table order). Common practice, no source."""
    visits = pd.DataFrame(
        {
            "patient_id": ["A", "A", "A", "B", "B", "C"],
            "years_since_baseline": [2.0, 0.0, 1.0, 0.0, 3.0, 0.0],
            "sex": ["F", "F", "F", "M", "M", "M"],
            "lvmi_bsa_g_m2": [100.0, 130.0, 115.0, 90.0, 95.0, 80.0],
            "rwt": [0.40, 0.50, 0.45, 0.38, 0.40, 0.36],
        }
    )
    fig = geometry_plane(visits.iloc[0:0], load_set(), paths=visits)
    start, delta = _arrows(_axes(fig))
    np.testing.assert_allclose(start, [[130.0, 0.50], [90.0, 0.38]])
    np.testing.assert_allclose(delta, [[-30.0, -0.10], [5.0, 0.02]], atol=1e-12)
    assert "no rows" not in _texts(fig)


def test_geometry_plane_paths_capped():
    """Only the first max_paths patients get an arrow; the figure says how many were left out."""
    visits = pd.DataFrame(
        {
            "patient_id": np.repeat([f"P{i}" for i in range(5)], 2),
            "years_since_baseline": np.tile([0.0, 1.0], 5),
            "lvmi_bsa_g_m2": np.linspace(80, 130, 10),
            "rwt": np.linspace(0.35, 0.5, 10),
        }
    )
    fig = geometry_plane(visits.iloc[0:0], load_set(), paths=visits, max_paths=3)
    start, _ = _arrows(_axes(fig))
    assert len(start) == 3
    assert "2 more not drawn" in _texts(fig)


def test_geometry_plane_bad_mass_index_names_the_choices():
    with pytest.raises(ValueError, match="mass_index=.*lvmi_bsa_g_m2.*lvmi_h27_g_m2_7"):
        geometry_plane(_studies(), load_set(), mass_index="lvmi_g")


def test_geometry_plane_without_data_or_set_still_renders():
    fig = geometry_plane(pd.DataFrame(), None)
    assert F.to_png(fig).startswith(PNG_MAGIC)
    assert "no rows" in _texts(fig)


# ------------------------------------------------------------------------------------------
# LVMI trend
# ------------------------------------------------------------------------------------------


def _one_patient(**extra) -> pd.DataFrame:
    d = {
        "patient_id": ["Q1"] * 3,
        "study_date": pd.to_datetime(["2019-01-15", "2020-02-01", "2022-06-30"]),
        "sex": ["M"] * 3,
        "lvmi_bsa_g_m2": [130.0, 118.0, 104.0],
        "bsa_m2": [2.0, 1.75, 1.4],
        "geometry": ["concentric_hypertrophy", "concentric_hypertrophy", "normal"],
    }
    d.update(extra)
    return pd.DataFrame(d)


def _error_half_heights(ax) -> np.ndarray:
    cont = [c for c in ax.containers if isinstance(c, ErrorbarContainer)]
    assert len(cont) == 1
    segs = cont[0].lines[2][0].get_segments()
    return np.array([abs(s[1][1] - s[0][1]) / 2 for s in segs])


def test_lvmi_trend_error_bars_are_lsc_over_bsa_vs_palmieri_1999():
    """Bars = +/- 35 g / BSA in g/m2.

    Palmieri V et al., J Am Coll Cardiol 1999;34:1625 (a change of 35 g is real with >= 95 %
    likelihood); 35 / 2.0 = 17.5, 35 / 1.75 = 20, 35 / 1.4 = 25 g/m2 (computed exactly).
    """
    fig = lvmi_trend(_one_patient(), load_set(), lsc_g=35.0)
    np.testing.assert_allclose(_error_half_heights(_axes(fig)), [17.5, 20.0, 25.0], rtol=1e-12)


def test_lvmi_trend_divisor_recovered_from_mass_and_index():
    """Without bsa_m2 the divisor is LV mass / LVMI (the definition of the index).

    Common practice, no source. 250 g / 125 g/m2 = 2.0 m2 -> 35 / 2 = 17.5 g/m2.
    """
    v = _one_patient().drop(columns="bsa_m2")
    v["lvmi_bsa_g_m2"] = [125.0, 100.0, 140.0]
    v["lv_mass_g"] = [250.0, 175.0, 196.0]
    fig = lvmi_trend(v, load_set(), lsc_g=35.0)
    np.testing.assert_allclose(_error_half_heights(_axes(fig)), [17.5, 20.0, 25.0], rtol=1e-12)


def test_lvmi_trend_limit_of_the_sex_vs_lang_2015():
    """A man's limit only: > 115 g/m2; without sex both limits (95 and 115).

    Lang RM et al., J Am Soc Echocardiogr 2015;28:1-39.
    """
    ax = _axes(lvmi_trend(_one_patient(), load_set(), lsc_g=35))
    assert _horizontal_lines(ax) == [115.0]
    ax = _axes(lvmi_trend(_one_patient(sex=["", "", ""]), load_set(), lsc_g=35))
    assert _horizontal_lines(ax) == [95.0, 115.0]
    assert "g/m²" in ax.get_ylabel()
    assert ax.get_xlabel() == "Study date"


def test_lvmi_trend_years_axis_and_unsorted_input():
    """Visits are drawn in time order; years since baseline when dates are missing."""
    v = _one_patient().drop(columns="study_date")
    v["years_since_baseline"] = [3.0, 0.0, 1.0]
    ax = _axes(lvmi_trend(v, load_set(), lsc_g=None))
    assert "years" in ax.get_xlabel().lower()
    line = [ln for ln in ax.get_lines() if len(ln.get_xdata()) == 3][0]
    np.testing.assert_array_equal(line.get_xdata(), [0.0, 1.0, 3.0])
    np.testing.assert_array_equal(line.get_ydata(), [118.0, 104.0, 130.0])
    assert not [c for c in ax.containers if isinstance(c, ErrorbarContainer)]


@pytest.mark.parametrize("bad", [-1.0, float("nan"), "many"])
def test_lvmi_trend_bad_lsc_names_argument(bad):
    with pytest.raises(ValueError, match="lsc_g="):
        lvmi_trend(_one_patient(), load_set(), lsc_g=bad)


def test_lvmi_trend_patient_id_shown_literally():
    """Input text never becomes math text: '$x$' stays visible as typed."""
    fig = lvmi_trend(_one_patient(patient_id=["$x^2$"] * 3), load_set(), lsc_g=35)
    assert r"\$x^2\$" in _axes(fig).get_title(loc="left")
    assert F.to_png(fig).startswith(PNG_MAGIC)


# ------------------------------------------------------------------------------------------
# stress-shortening
# ------------------------------------------------------------------------------------------


def _band(ax):
    polys = [c for c in ax.collections if isinstance(c, PolyCollection)]
    assert len(polys) == 1
    return polys[0].get_paths()[0].vertices


def test_stress_shortening_line_and_95pct_band_vs_scipy():
    """Line y = a + b x; band +/- z sd with z = norm.ppf(0.975) = 1.95996 (scipy), shown as 1.96.

    Two-sided 95 % normal band: common practice; z from scipy.stats.norm. Tolerance: 1.96 vs
    1.95996 (2e-5 relative).
    """
    line = {"intercept_pct": 20.0, "slope_pct_per_kdyn_cm2": -0.02, "residual_sd_pct": 1.5}
    ax = _axes(stress_shortening(_studies(), line))
    ref = [ln for ln in ax.get_lines() if "reference line" in ln.get_label()][0]
    x, y = np.asarray(ref.get_xdata()), np.asarray(ref.get_ydata())
    np.testing.assert_allclose(y, 20.0 - 0.02 * x, rtol=1e-12)
    verts = _band(ax)
    half = np.abs(verts[:, 1] - (20.0 - 0.02 * verts[:, 0]))
    z = stats.norm.ppf(0.975)
    np.testing.assert_allclose(half[np.isfinite(half)], z * 1.5, rtol=2e-5)
    assert "kdyn/cm²" in ax.get_xlabel() and "%" in ax.get_ylabel()


def test_stress_shortening_bundled_line_marked_unverified():
    """The bundled midwall/cESS line is from memory (de Simone G et al., J Am Coll Cardiol
    1994;23:1444: coefficients not found, sources.md), so it must carry "unverified"."""
    coeffs = load_set().coefficients("midwall_stress_line")
    fig = stress_shortening(_studies(), coeffs)
    labels = [ln.get_label() for ln in _axes(fig).get_lines()]
    assert any("unverified" in lab for lab in labels)
    assert "unverified" in _texts(fig)


def test_stress_shortening_published_line_not_marked():
    line = {
        "intercept_pct": 20.0,
        "slope_pct_per_kdyn_cm2": -0.02,
        "residual_sd_pct": 1.5,
        "verified": "published",
    }
    fig = stress_shortening(_studies(), line)
    assert "unverified" not in _texts(fig)


def test_stress_shortening_missing_key_named():
    with pytest.raises(ValueError, match="residual_sd_pct"):
        stress_shortening(_studies(), {"intercept_pct": 20, "slope_pct_per_kdyn_cm2": 0})


def test_stress_shortening_points_only_without_line():
    df = _studies(12)
    fig = stress_shortening(df, None)
    assert sum(_scatter_by_colour(_axes(fig)).values()) == 12


# ------------------------------------------------------------------------------------------
# transitions
# ------------------------------------------------------------------------------------------


def _long_transitions() -> pd.DataFrame:
    rows = []
    counts = {
        ("normal", "normal"): 11,
        ("normal", "concentric_remodelling"): 2,
        ("concentric_hypertrophy", "concentric_remodelling"): 4,
        ("concentric_hypertrophy", "concentric_hypertrophy"): 6,
    }
    for f in GEOMETRY_CLASSES:
        for t in GEOMETRY_CLASSES:
            rows.append({"from_geometry": f, "to_geometry": t, "n_patients": counts.get((f, t), 0)})
    return pd.DataFrame(rows)


def test_transition_matrix_long_and_wide_agree():
    long = _long_transitions()
    m = transition_matrix(long)
    assert list(m.index) == list(GEOMETRY_CLASSES) == list(m.columns)
    assert m.to_numpy().sum() == 23
    assert m.loc["concentric_hypertrophy", "concentric_remodelling"] == 4
    wide = long.pivot(index="from_geometry", columns="to_geometry", values="n_patients")
    wide["total"] = wide.sum(axis=1)
    pd.testing.assert_frame_equal(transition_matrix(wide), m, check_names=False)


def test_transitions_figure_cells_and_labels():
    fig = transitions_figure(_long_transitions())
    ax = _axes(fig)
    assert len(ax.get_images()) == 1
    text = _texts(fig)
    assert "11\n85 %" in text  # 11 of 13 = 84.6 %
    assert "4\n40 %" in text
    assert "last study" in ax.get_xlabel() and "first study" in ax.get_ylabel()


def test_transitions_figure_empty():
    fig = transitions_figure(pd.DataFrame())
    assert "no patient" in _texts(fig)
    assert F.to_png(fig).startswith(PNG_MAGIC)


# ------------------------------------------------------------------------------------------
# palette and output
# ------------------------------------------------------------------------------------------


def test_palette_vs_okabe_ito():
    """Okabe M, Ito K, Color Universal Design, 2002: orange (230,159,0), sky blue (86,180,233),
    bluish green (0,158,115), yellow (240,228,66), blue (0,114,178), vermillion (213,94,0),
    reddish purple (204,121,167). From memory."""
    expected = {
        "orange": (230, 159, 0),
        "sky_blue": (86, 180, 233),
        "bluish_green": (0, 158, 115),
        "yellow": (240, 228, 66),
        "blue": (0, 114, 178),
        "vermillion": (213, 94, 0),
        "reddish_purple": (204, 121, 167),
    }
    for name, rgb in expected.items():
        assert OKABE_ITO[name] == "#{:02X}{:02X}{:02X}".format(*rgb)
    assert set(SEX_COLOURS.values()) <= set(OKABE_ITO.values()) | {GREY}
    assert set(GEOMETRY_COLOURS.values()) <= set(OKABE_ITO.values()) | {GREY}


def test_png_and_svg_render_and_save(tmp_path):
    fig = geometry_plane(_studies(), load_set())
    png = F.to_png(fig)
    assert png.startswith(PNG_MAGIC) and len(png) > 10_000
    root = ET.fromstring(F.to_svg(fig))
    assert root.tag.endswith("svg")
    p, s = F.save(fig, tmp_path / "out", "plane")
    assert p.read_bytes().startswith(PNG_MAGIC)
    assert s.read_bytes().lstrip().startswith(b"<?xml")
    assert sorted(x.name for x in (tmp_path / "out").iterdir()) == ["plane.png", "plane.svg"]


def test_object_api_only_no_pyplot_figures():
    """Figures are built without pyplot's global state."""
    import matplotlib.pyplot as plt

    before = plt.get_fignums()
    geometry_plane(_studies(), load_set())
    transitions_figure(_long_transitions())
    assert plt.get_fignums() == before
