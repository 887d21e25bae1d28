"""Reference sets: every row carries a source and a verification status; published values as read."""

from __future__ import annotations

import pandas as pd
import pytest

from wallstress.analysis import references
from wallstress.errors import ReferenceSetError


@pytest.mark.parametrize("name", references.list_sets())
def test_every_row_has_source_and_status(name):
    s = references.load_set(name)
    rows = s.rows[s.rows["kind"] != "setting"]
    assert rows["source"].str.len().gt(10).all()
    assert rows["verified"].isin(references.VERIFIED).all()
    assert s.mass_index in references.MASS_INDEXES


def test_lvmi_partitions_vs_lang_2005_table6():
    """Lang RM et al., J Am Soc Echocardiogr 2005;18:1440, Table 6 (linear method, g/m2): women 43-95 /
    96-108 / 109-121 / >=122, men 49-115 / 116-131 / 132-148 / >=149 (checked, sources.md)."""
    s = references.load_set("ase_eae_2005")
    for sex, cuts in (("F", [95, 108, 121]), ("M", [115, 131, 148])):
        assert [c.value for c in s.grades("lvmi_bsa_g_m2", sex)] == cuts
        assert all(c.comparison == ">" for c in s.grades("lvmi_bsa_g_m2", sex))


def test_default_cutoffs_vs_lang_2015():
    """Lang RM et al., J Am Soc Echocardiogr 2015;28:1: LVMI > 95 (women) / > 115 g/m2 (men), RWT > 0.42,
    EDV/BSA upper 61 / 74 mL/m2 (checked, sources.md)."""
    s = references.load_set()
    assert (s.cutoff("lvmi_bsa_g_m2", "F").value, s.cutoff("lvmi_bsa_g_m2", "M").value) == (95, 115)
    assert s.cutoff("rwt", "F").value == 0.42 and s.cutoff("rwt", "F").comparison == ">"
    assert (s.cutoff("edv_index_ml_m2", "F").value, s.cutoff("edv_index_ml_m2", "M").value) == (
        61,
        74,
    )
    assert s.cutoff("lvmi_bsa_g_m2", "F").verified == "published"


def test_hypertension_set_uses_height27_and_ge():
    """ESC/ESH 2018 (from memory): LVM/height^2.7 > 47 women / > 50 men, RWT >= 0.43. The set must say so
    and mark the values from_memory."""
    s = references.load_set("esc_esh_2018_h27")
    assert s.mass_index == "lvmi_h27_g_m2_7"
    assert s.cutoff("rwt", "M").comparison == ">="
    assert s.cutoff("lvmi_h27_g_m2_7", "F").verified == "from_memory"
    assert len(s.unverified()) > 0


def test_reproducibility_default_vs_palmieri_1999():
    """Palmieri V et al., J Am Coll Cardiol 1999: a change of 35 g or more is real (checked); Sw from
    LSC = 1.96 * sqrt(2) * Sw (Bland & Altman)."""
    c = references.model_coefficients("reproducibility")
    assert c["lsc_lv_mass_g"].value == 35
    assert c["within_subject_sd_lv_mass_g"].value == pytest.approx(35 / (1.96 * 2**0.5), abs=1e-3)


def test_unknown_set_lists_known():
    with pytest.raises(ReferenceSetError, match="bundled sets: .*ase_eacvi_2015"):
        references.load_set("no_such_set")


def test_lab_set_from_file(tmp_path):
    p = tmp_path / "ours.csv"
    pd.DataFrame(
        [
            dict(kind="setting", measure="title", note="Our lab"),
            dict(
                kind="cutoff",
                measure="lvmi_bsa_g_m2",
                sex="F",
                grade="increased",
                comparison=">=",
                value=90,
                unit="g/m2",
                source="our normals",
                verified="lab",
            ),
            dict(
                kind="cutoff",
                measure="rwt",
                sex="",
                grade="increased",
                comparison=">",
                value=0.45,
                unit="",
                source="our normals",
                verified="lab",
            ),
            dict(
                kind="coefficient",
                measure="midwall_stress_line",
                grade="intercept_pct",
                value=21.0,
                unit="%",
                source="our normals",
                verified="lab",
            ),
        ]
    ).to_csv(p, index=False)
    s = references.load_set(str(p))
    assert s.title == "Our lab"
    assert s.cutoff("lvmi_bsa_g_m2", "F").comparison == ">="
    assert s.cutoff("rwt", "M").value == 0.45  # empty sex = both
    line = s.coefficients("midwall_stress_line")
    assert line["intercept_pct"].value == 21.0 and line["intercept_pct"].verified == "lab"
    assert (
        line["slope_pct_per_kdyn_cm2"].verified == "from_memory"
    )  # default kept where not overridden


@pytest.mark.parametrize(
    "change, message",
    [
        ({"comparison": "=>"}, "comparison"),
        ({"grade": "huge"}, "unknown grade"),
        ({"verified": "sure"}, "verified must be"),
        ({"value": "abc"}, "numeric value"),
    ],
)
def test_malformed_lab_set_says_what_is_wrong(tmp_path, change, message):
    row = dict(
        kind="cutoff",
        measure="rwt",
        sex="F",
        grade="increased",
        comparison=">",
        value=0.42,
        unit="",
        source="x",
        verified="lab",
        note="",
    )
    row.update(change)
    p = tmp_path / "bad.csv"
    pd.DataFrame([row]).to_csv(p, index=False)
    with pytest.raises(ReferenceSetError, match=message):
        references.load_set(str(p))


def test_records_read_once_and_handed_out_as_new_dicts():
    """The methods record of every run lists the set's rows: read from the rows once per set,
    each run gets its own dicts, so that one run's record cannot change the next one's. The
    records are the set's rows other than settings (the bundled table itself)."""
    s = references.load_set(references.DEFAULT_SET)
    first = s.as_records()
    assert len(first) == int((s.rows["kind"] != "setting").sum())
    first[0]["value"] = "changed"
    first.append({"measure": "added"})
    second = s.as_records()
    assert second[0]["value"] != "changed" and len(second) == len(first) - 1
    h27 = references.load_set("esc_esh_2018_h27")  # a bundled set with unverified rows
    unverified = h27.unverified_records()
    assert unverified and unverified == h27.unverified().to_dict("records")
    unverified[0]["value"] = "changed"
    assert h27.unverified_records()[0]["value"] != "changed"
