"""Reference models on a store (analysis.references): build from stored band levels, score on ingest and on
re-scoring, versions."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis.errors import ProfileError
from analysis.pipeline import analyse_file
from analysis.references import build_reference, rescore
from analysis.scoring import monitor_result
from analysis.store import Store, StoreError
from analysis.worker import ingest_paths
from tests.analysis.conftest import run_cli

REF_LOTS = ["L2601", "L2602", "L2603"]


@pytest.fixture(scope="module")
def truth(small_scenario):
    t = pd.read_csv(small_scenario / "ground_truth.csv")
    t["reference"] = t["reference"].astype(str).str.lower().eq("true")
    return t


@pytest.fixture(scope="module")
def two_phase(small_scenario, truth, tmp_path_factory):
    """A SQLite store that got the reference lots first, then a model, then the other lots (scored on ingest)."""
    folder = tmp_path_factory.mktemp("two-phase")
    url = f"sqlite:///{folder / 'harken.db'}"
    ref = [small_scenario / f for f in truth.loc[truth["reference"], "file"]]
    later = [small_scenario / f for f in truth.loc[~truth["reference"], "file"]]
    ingest_paths(ref, url, 2, progress=False)
    with Store.open(url) as store:
        made = build_reference(store, "demo-dpi", None, REF_LOTS, created_by="ana")
    s = ingest_paths(later, url, 2, progress=False)
    assert s.analysed == len(later)
    return url, made, later


def test_build_stores_active_version_1_per_event_and_scores_every_actuation(small_store, truth):
    url, files = small_store
    # counts from the generator's ground truth: the reference lots' actuations (all normal, so all pass QC) and all
    n_reference = int(truth["lot"].isin(REF_LOTS).sum())
    with Store.open(url, files_dir=files) as store:
        models = store.models()
        n_act = len(store.actuations())
        exported = store.export_actuations()
        audit = store.audit_log()
    assert sorted(models["event"]) == ["dose_release", "metering_click"]
    assert set(models["version"]) == {1} and set(models["status"]) == {"active"}
    assert all(lots == REF_LOTS for lots in models["reference_lots"])
    assert set(models["n_recordings"]) == {n_reference} and set(models["created_by"]) == {"fixture"}
    assert n_act == len(truth)
    for event in ("dose_release", "metering_click"):
        assert exported[f"{event}.model_version"].eq(1).all()
    assert list(audit["action"]).count("reference.build") == 2


def test_ingest_scores_new_recordings_as_analysis_scoring_does(two_phase):
    """Scores written at ingest agree with analysis.scoring.monitor_result on a fresh analysis of the file."""
    url, made, later = two_phase
    with Store.open(url) as store:
        models = {m.event: store.load_model(m.model_id) for m in made}
        exported = store.export_actuations().set_index("file")
    checked = 0
    for path in later[::6]:
        mon = monitor_result(analyse_file(path), models)
        row = exported.loc[path.name]  # files given one by one are named by their file name
        for event, m in mon.items():
            if m["t2_max"] is None:
                assert pd.isna(row[f"{event}.t2_max"])
                continue
            # Band levels are stored (and scored) as float32: agreement to float32 precision, not exactly.
            assert row[f"{event}.t2_max"] == pytest.approx(m["t2_max"], rel=1e-3)
            assert row[f"{event}.spe_max"] == pytest.approx(m["spe_max"], rel=1e-3)
            assert row[f"{event}.trajectory_distance"] == pytest.approx(m["trajectory_distance"], rel=1e-3)
        assert bool(row["flagged"]) == any(m["flagged"] for m in mon.values()), path
        checked += 1
    assert checked == 10


def test_a_new_version_becomes_active_and_the_old_one_stays_readable(two_phase):
    url, made, _ = two_phase
    with Store.open(url) as store:
        aid = int(store.actuations()["actuation_id"].iloc[-1])
        v1 = {m.event: m.model_id for m in made}
        before = store.trajectory(aid, "dose_release")
        made2 = build_reference(store, "demo-dpi", ["dose_release"], ["L2601", "L2602"], created_by="ben")
        models = store.models(event="dose_release").set_index("version")
        after = store.trajectory(aid, "dose_release")
        old = store.trajectory(aid, "dose_release", model_id=v1["dose_release"])
        exported = store.export_actuations()
        all_flags = store.flags(active_only=False)
        active_flags = store.flags()
        assert rescore(store, "demo-dpi") == 0  # everything is scored under the active models already
        store.activate_model(v1["dose_release"], person="ana")  # back to version 1: its scores are there
        assert store.models(event="dose_release").set_index("version")["status"].to_dict() == {1: "active",
                                                                                               2: "retired"}
        assert store.export_actuations()["dose_release.model_version"].eq(1).all()
        actions = list(store.audit_log()["action"])
    assert models["status"].to_dict() == {1: "retired", 2: "active"}
    assert made2[0].version == 2 and made2[0].scored == 120
    assert before.model_version == 1 and after.model_version == 2 and old.model_version == 1
    np.testing.assert_array_equal(old.t2, before.t2)
    assert old.t2.shape == (before.t2.shape[0],) and old.scores.shape[0] == old.t2.shape[0]
    assert exported["dose_release.model_version"].eq(2).all()
    assert exported["metering_click.model_version"].eq(1).all()
    v2_id = made2[0].model_id
    assert set(all_flags["model_id"].dropna()) >= {v1["dose_release"], v2_id}
    assert v1["dose_release"] not in set(active_flags["model_id"].dropna())
    assert actions[-1] == "reference.activate" and actions.count("reference.build") == 3


def test_verdicts_are_recorded_audited_and_exported(two_phase):
    url, _, _ = two_phase
    with Store.open(url) as store:
        fl = store.flags()
        flag = fl.iloc[0]
        store.add_verdict(int(flag["flag_id"]), person="ana", verdict="rig", note="drive belt")
        with pytest.raises(StoreError, match=r"verdict must be one of 'confirmed', .*; got 'maybe'"):
            store.add_verdict(int(flag["flag_id"]), person="ana", verdict="maybe")
        with pytest.raises(StoreError, match=r"no flag with id 999999"):
            store.add_verdict(999999, person="ana", verdict="rig")
        row = store.export_actuations().set_index("actuation_id").loc[int(flag["actuation_id"])]
        log = store.audit_log()
    assert "ana: rig (drive belt)" in row["verdicts"]
    assert log.iloc[-1]["action"] == "verdict.add" and log.iloc[-1]["person"] == "ana"


def test_build_errors_name_the_lot_or_the_event(small_store):
    url, files = small_store
    with Store.open(url, files_dir=files) as store:
        with pytest.raises(StoreError, match=r"no stored actuations of profile 'demo-dpi' in lot\(s\) NOPE "
                                             r"\(lots in the store: L2601, L2602, L2603, L2604, L2605, L2606\)"):
            build_reference(store, "demo-dpi", None, ["L2601", "NOPE"])
        with pytest.raises(ProfileError, match=r"profile 'demo-dpi' has no event 'hiss'"):
            build_reference(store, "demo-dpi", ["hiss"], ["L2601"])
        assert len(store.models()) == 2  # nothing was added


def test_reference_commands(small_scenario, truth, tmp_path):
    url = f"sqlite:///{tmp_path / 'h.db'}"
    files = [small_scenario / f for f in truth.loc[truth["lot"].isin(["L2601", "L2602"]), "file"]]
    ingest_paths(files, url, 2, progress=False)
    code, out, err = run_cli("reference", "build", "--profile", "demo-dpi", "--event", "metering_click",
                             "--lots", "L2601,L2602", "--store", url, "--by", "cli-user")
    assert code == 0, err
    assert "demo-dpi/metering_click: version 1" in out and f"scored {len(files)} stored actuations" in out
    code, out, _ = run_cli("reference", "list", "--store", url)
    assert code == 0 and "metering_click" in out and "cli-user" in out
    code, out, _ = run_cli("rescore", "--store", url)
    assert code == 0 and out.strip() == "demo-dpi: 0 event scorings written"
    code, _, err = run_cli("rescore", "--store", url, "--profile", "demo-dpi", "--event", "dose_release")
    assert code == 1 and "no active reference model for demo-dpi/dose_release" in err


def test_stored_band_levels_are_the_analysis_features_as_float32(two_phase):
    url, _, later = two_phase
    path = later[7]
    res = analyse_file(path)
    with Store.open(url) as store:
        df = store.band_levels("demo-dpi", "dose_release", passed_qc_only=False).set_index("file")
    row = df.loc[path.name]
    f = res.features["dose_release"]
    assert row["levels"].dtype == np.float32 and row["levels"].shape == f.levels_db.shape
    np.testing.assert_array_equal(row["levels"], f.levels_db.astype(np.float32))
    np.testing.assert_array_equal(row["slice_times_s"], f.slice_times_s)
    np.testing.assert_array_equal(row["band_centres_hz"], f.band_centres_hz)
