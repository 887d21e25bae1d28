"""Shared test helpers. Published-value tests name their source beside each check."""

from __future__ import annotations

import pandas as pd
import pytest


def canonical_row(**overrides) -> dict:
    """One study under canonical names, internal units. The dimensions are the worked example of
    ../shared/sources.md (IVSd 1.0, LVIDd 5.0, PWd 1.0, LVIDs 3.2, PWs 1.6 cm, 120 mmHg)."""
    row = {
        "study_id": "S1",
        "patient_id": "P1",
        "study_date": "2024-03-01",
        "sex": "F",
        "height_cm": 180.0,
        "weight_kg": 80.0,
        "sbp_mmhg": 120.0,
        "dbp_mmhg": 80.0,
        "hr_bpm": 60.0,
        "ivsd_cm": 1.0,
        "lvidd_cm": 5.0,
        "pwd_cm": 1.0,
        "ivss_cm": 1.4,
        "lvids_cm": 3.2,
        "pws_cm": 1.6,
    }
    row.update(overrides)
    return row


@pytest.fixture
def worked_example() -> pd.DataFrame:
    return pd.DataFrame([canonical_row()])
