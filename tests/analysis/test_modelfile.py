"""Reference-model files (analysis.modelfile): JSON + npz, round trip, versions and checksums."""

import json
import zipfile

import numpy as np
import pytest

from analysis.errors import ModelError
from analysis.modelfile import load_model, save_model
from analysis.monitor import FORMAT_NAME, ReferenceModel
from tests.analysis.monitor.test_model import simulate


@pytest.fixture(scope="module")
def reference():
    x, lots = simulate(np.random.default_rng(10), 8, 25)
    return x, lots, ReferenceModel().fit(x, lots=lots, slice_times_s=np.arange(20) * 0.01)


def test_save_load_round_trip_scores_identically(tmp_path, reference):
    x, _, m = reference
    meta = {"profile": "demo-inhaler", "event": "dose release", "lots": ["L1", "L2"], "created_by": "tester"}
    json_path, npz_path = save_model(m, tmp_path / "ref-model", metadata=meta)
    loaded = load_model(json_path)
    a, b = m.score(x[:20]), loaded.score(x[:20])
    for field in ("scores", "t2", "spe", "trajectory_distance", "flagged", "outside_envelope"):
        np.testing.assert_array_equal(getattr(a, field), getattr(b, field))
    assert (a.t2_limit, a.spe_limit, a.t2_ratio_threshold) == (b.t2_limit, b.spe_limit, b.t2_ratio_threshold)
    assert loaded.metadata_ == meta and loaded.get_params() == m.get_params()
    doc = json.loads(json_path.read_text())
    assert doc["format"] == FORMAT_NAME == "harken-reference-model" and doc["format_version"] == 1
    # No pickle: every member is a plain .npy of a numeric dtype and loads with allow_pickle=False.
    with zipfile.ZipFile(npz_path) as zf:
        assert all(name.endswith(".npy") for name in zf.namelist())
    with np.load(npz_path, allow_pickle=False) as npz:
        assert all(npz[k].dtype.kind == "f" for k in npz.files)


def test_load_rejects_newer_version_and_changed_arrays(tmp_path, reference):
    _, _, m = reference
    json_path, npz_path = save_model(m, tmp_path / "m.json")
    doc = json.loads(json_path.read_text())
    doc["format_version"] = 2
    newer = tmp_path / "newer.json"
    newer.write_text(json.dumps(doc))
    (tmp_path / "newer.npz").write_bytes(npz_path.read_bytes())
    with pytest.raises(ModelError, match="format version 2 is not supported; this program reads version 1"):
        load_model(newer)
    npz_path.write_bytes(npz_path.read_bytes() + b"x")
    with pytest.raises(ModelError, match="arrays do not match the checksum"):
        load_model(json_path)
    with pytest.raises(ModelError, match="cannot read reference model"):
        load_model(tmp_path / "missing.json")
