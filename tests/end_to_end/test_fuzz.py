"""Property-based fuzzing of analyse() on generated tables: random headers, types, values and sizes.

Whatever the table, analyse() either returns one row per input row, in order, with the user's cells
unchanged, or raises the documented InputError (e.g. a --columns map naming an unknown field).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

import wallstress
from wallstress.errors import InputError
from wallstress.schema.fields import FIELDS

HEADERS = [f.name for f in FIELDS] + [
    "IVSd (mm)",
    "LVIDd [cm]",
    "Gender",
    "Weight (lb)",
    "SBP (kPa)",
    "notes",
    "",
    "  ",
    "LVIDd (mm)",
    "Höhe",
    "=cmd()",
    "123",
]
CELLS = st.one_of(
    st.none(),
    st.floats(allow_nan=True, allow_infinity=True),
    st.integers(min_value=-(10**12), max_value=10**12),
    st.text(max_size=12),
    st.sampled_from(
        ["F", "m", "female", "4,8", "48 mm", "#DIV/0!", "=1+1", "2024-02-30", "03/04/2020", "NaN"]
    ),
    st.booleans(),
)


@st.composite
def tables(draw):
    n_cols = draw(st.integers(min_value=0, max_value=8))
    n_rows = draw(st.integers(min_value=0, max_value=12))
    headers = draw(
        st.lists(st.sampled_from(HEADERS) | st.text(max_size=10), min_size=n_cols, max_size=n_cols)
    )
    data = {}
    for h in headers:
        data[f"{h}"] = draw(st.lists(CELLS, min_size=n_rows, max_size=n_rows))
    df = pd.DataFrame(data) if data else pd.DataFrame(index=range(n_rows))
    if len(set(data)) < n_cols:  # duplicate headers collapse in a dict; keep the frame as built
        pass
    return df


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(tables())
def test_analyse_never_loses_or_reorders_rows(df):
    before = df.copy()
    try:
        out = wallstress.analyse(df)
    except InputError:
        return
    assert len(out) == len(df)
    assert list(out.index) == list(df.index)
    pd.testing.assert_frame_equal(df, before)  # input not mutated
    pd.testing.assert_frame_equal(out.iloc[:, : df.shape[1]], before, check_column_type=False)
    assert out["flags"].astype(object).map(lambda x: isinstance(x, str)).all()
    ours = [  # an output name the input already has comes with a ws_ prefix
        f"ws_{c}" if c in df.columns else c
        for c in ("lv_mass_g", "rwt", "mess_kdyn_cm2", "cess_kdyn_cm2")
    ]
    numeric = out[ours].to_numpy(dtype=float)
    assert not np.isinf(numeric).any()  # invalid input gives NaN, never inf


def test_duplicate_headers_are_kept():
    df = pd.DataFrame([[1.0, 5.0, 1.0, 4.8]], columns=["ivsd_cm", "lvidd_cm", "pwd_cm", "lvidd_cm"])
    out = wallstress.analyse(df)
    assert len(out) == 1 and list(out.columns[:4]) == list(df.columns)
