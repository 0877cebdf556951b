"""The read API gives the same answers on a PostgreSQL store as on the SQLite one (same scenario).

Runs when a test server is reachable (HARKEN_TEST_PG_URL; `. .ci/postgres.sh` starts one); CI requires it.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis.store import Store, queries
from tests.analysis.conftest import drop_pg_database, make_pg_database

CALLS = [
    ("lot_points t2", lambda c: queries.lot_points(c, "t2_ratio", "metering_click")),
    ("lot_points pooled log", lambda c: queries.lot_points(c, "event_spe_ratio", "dose_release", by_rig=False)),
    ("rig_summary", lambda c: queries.rig_summary(c, "onset_s", "dose_release")),
    ("rig_histogram", lambda c: queries.rig_histogram(c, "onset_s", "dose_release", n_bins=12)[1]),
    ("lot_actuations", lambda c: queries.lot_actuations(c, "L2604")),
    ("latest_per_rig", lambda c: queries.latest_per_rig(c, per_rig=5)),
    ("models", lambda c: queries.models(c, counts=True)),
]


@pytest.fixture(scope="module")
def pg_store(small_scenario, tmp_path_factory):
    url = make_pg_database()
    folder = tmp_path_factory.mktemp("dash-pg-files")
    with Store.open(url, files_dir=folder):
        pass
    from analysis.references import build_reference
    from analysis.worker import ingest_paths

    truth = pd.read_csv(small_scenario / "ground_truth.csv")
    ingest_paths([small_scenario / f for f in truth["file"]], url, jobs=1, files_dir=folder)
    with Store.open(url, files_dir=folder) as store:
        build_reference(store, "demo-dpi", None, ["L2601", "L2602", "L2603"], created_by="test-fixture")
    yield url, folder
    drop_pg_database(url)


def _comparable(df: pd.DataFrame) -> pd.DataFrame:
    # times, paths and ids differ between the two stores, and so does a model's checksum, which covers its time
    drop = [c for c in df.columns if c in ("created_at", "recorded_at", "first", "last", "archive_path",
                                           "content_sha256")
            or c.endswith("_id") or c == "id" or c == "model_id"]
    out = df.drop(columns=drop).reset_index(drop=True)
    keys = [c for c in out.columns if out[c].dtype == object]
    for c in keys:  # dicts and lists (model parameters) compare as their text
        out[c] = out[c].map(lambda v: repr(v) if isinstance(v, (dict, list, tuple)) else str(v))
    return out.sort_values(keys or list(out.columns)).reset_index(drop=True) if len(out) else out


@pytest.mark.parametrize("name,call", CALLS, ids=[c[0] for c in CALLS])
def test_queries_agree_between_sqlite_and_postgresql(filled_store, pg_store, name, call):
    lite_url, _ = filled_store
    pg_url, folder = pg_store
    with Store.open(lite_url, create=False) as lite, lite.read() as c1:
        a = _comparable(call(c1))
    with Store.open(pg_url, files_dir=folder, create=False) as pg, pg.read() as c2:
        b = _comparable(call(c2))
    assert list(a.columns) == list(b.columns), name
    assert len(a) == len(b) > 0, name
    for col in a.columns:
        if pd.api.types.is_numeric_dtype(a[col]) and pd.api.types.is_numeric_dtype(b[col]):
            np.testing.assert_allclose(a[col].to_numpy(float), b[col].to_numpy(float), rtol=1e-6, atol=1e-9,
                                       err_msg=f"{name}: {col}")
        else:
            assert a[col].astype(str).tolist() == b[col].astype(str).tolist(), f"{name}: {col}"
