"""wallstress.chunked.dask_analyse: the same results as the in-memory analyse, on a local cluster.

Reference: wallstress.analyse on the whole table in memory (its values are tested against the
published formulas in test_pipeline.py). Invented data only (no real people).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

dd = pytest.importorskip("dask.dataframe")
distributed = pytest.importorskip("distributed")

import wallstress  # noqa: E402
from wallstress import Options  # noqa: E402
from wallstress.chunked import dask_analyse  # noqa: E402


def invented_registry(n: int, seed: int = 5) -> pd.DataFrame:
    """Invented studies under canonical names (units stated by the names)."""
    rng = np.random.default_rng(seed)
    lvidd = rng.normal(4.8, 0.5, n).round(2)
    df = pd.DataFrame(
        {
            "study_id": [f"R{i:05d}" for i in range(n)],
            "sex": rng.choice(["F", "M", None], n, p=[0.48, 0.48, 0.04]),
            "height_cm": rng.normal(170, 9, n).round(1),
            "weight_kg": rng.normal(78, 12, n).round(1),
            "sbp_mmhg": rng.normal(138, 15, n).round(0),
            "dbp_mmhg": rng.normal(82, 9, n).round(0),
            "ivsd_cm": rng.normal(1.0, 0.15, n).round(2),
            "lvidd_cm": lvidd,
            "pwd_cm": rng.normal(0.95, 0.12, n).round(2),
            "lvids_cm": (lvidd * rng.normal(0.64, 0.06, n)).round(2),
            "pws_cm": rng.normal(1.5, 0.2, n).round(2),
        }
    )
    df.loc[3, "lvidd_cm"] = -1.0  # impossible: flagged, kept
    return df


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None
    )
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


@pytest.mark.slow
@pytest.mark.parametrize(
    "options", [None, Options(bsa_method="mosteller", es_pressure="scaled_sbp")]
)
def test_dask_equals_in_memory(tmp_path, client, options):
    """Partition by partition on 2 worker processes == in memory on the whole table (common practice,
    no source). Rules between rows (duplicates) are per partition: the data have none."""
    df = invented_registry(400)
    folder = tmp_path / "registry"
    dd.from_pandas(df, npartitions=4).to_parquet(folder, write_index=False)
    ddf = dd.read_parquet(folder)
    assert ddf.npartitions >= 2
    got = dask_analyse(ddf, options).compute().reset_index(drop=True)
    expected = wallstress.analyse(pd.read_parquet(folder), options).reset_index(drop=True)
    categorical = [
        c for c in expected.columns if isinstance(expected[c].dtype, pd.CategoricalDtype)
    ]
    assert categorical  # geometry, grades, flags: plain text from dask
    expected = expected.astype(dict.fromkeys(categorical, str))
    pd.testing.assert_frame_equal(got, expected, check_dtype=False)
    assert list(got.columns) == list(expected.columns)


def test_meta_matches_a_real_partition():
    """The meta built from a zero-row analyse has the columns and dtypes a partition returns."""
    df = invented_registry(20)
    ddf = dd.from_pandas(df, npartitions=2)
    lazy = dask_analyse(ddf)
    part = wallstress.analyse(df.iloc[:10])
    part = part.astype(
        {c: str for c in part.columns if isinstance(part[c].dtype, pd.CategoricalDtype)}
    )
    assert list(lazy.columns) == list(part.columns)
    ours = list(part.columns[df.shape[1] :])  # input dtypes are dask's own (it may convert text)
    assert dict(lazy.dtypes[ours].astype(str)) == dict(part.dtypes[ours].astype(str))
