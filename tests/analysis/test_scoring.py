"""Reference models from recordings and monitoring of analysed recordings (analysis.scoring + the CLI)."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from analysis.cli import main
from analysis.errors import ModelError
from analysis.pipeline import analyse_file
from analysis.scoring import find_recordings, load_models, monitor_result


@pytest.fixture(scope="module")
def truth(small_scenario):
    t = pd.read_csv(small_scenario / "ground_truth.csv")
    t["reference"] = t["reference"].astype(str).str.lower().eq("true")
    return t


@pytest.fixture(scope="module")
def model_dir(small_scenario, truth, tmp_path_factory):
    out = tmp_path_factory.mktemp("models")
    refs = [str(small_scenario / f) for f in truth.loc[truth["reference"], "file"]]
    assert main(["model", "fit", "--profile", "demo-dpi", "--out", str(out), "--jobs", "2", *refs]) == 0
    return out


def test_model_fit_writes_one_model_per_event(model_dir):
    assert sorted(p.name for p in model_dir.iterdir()) == [
        "dose_release.json", "dose_release.npz", "metering_click.json", "metering_click.npz",
    ]
    models = load_models([model_dir])
    assert set(models) == {"metering_click", "dose_release"}
    meta = models["dose_release"].metadata_
    assert meta["profile"] == "demo-dpi" and meta["event"] == "dose_release"
    assert meta["reference_lots"] == ["L2601", "L2602", "L2603"]
    assert meta["created_by"] and meta["created_at"]


def test_model_fit_for_one_event_only(small_scenario, truth, tmp_path):
    refs = [str(small_scenario / f) for f in truth.loc[truth["reference"], "file"]]
    assert main(["model", "fit", "--profile", "demo-dpi", "--event", "metering_click", "--out", str(tmp_path),
                 "--components", "2", *refs]) == 0
    models = load_models([tmp_path / "metering_click.json"])
    assert list(models) == ["metering_click"] and models["metering_click"].n_components_ == 2
    single = tmp_path / "one" / "click-model.json"
    assert main(["model", "fit", "--profile", "demo-dpi", "--event", "metering_click", "--out", str(single),
                 *refs]) == 0
    assert sorted(p.name for p in single.parent.iterdir()) == ["click-model.json", "click-model.npz"]
    assert load_models([single])["metering_click"].metadata_["actuation_alpha"] == 0.01  # one event: all of alpha


def test_model_fit_refuses_a_bad_alpha_before_analysing(tmp_path, capsys):
    assert main(["model", "fit", "--profile", "demo-dpi", "--alpha", "2", "--out", str(tmp_path), "nowhere"]) == 1
    assert "--alpha must be a number between 0 and 1" in capsys.readouterr().err


def test_analyse_with_a_model_adds_monitoring(small_scenario, truth, model_dir, capsys):
    row = truth[truth["condition"] == "normal"].iloc[-1]
    assert main(["analyse", str(small_scenario / row["file"]), "--json", "--model", str(model_dir)]) == 0
    out = json.loads(capsys.readouterr().out)
    mon = out["monitoring"]
    assert set(mon) == {"metering_click", "dose_release"}
    for m in mon.values():
        assert {"t2_max", "t2_limit", "spe_max", "spe_limit", "slices_outside", "trajectory_distance", "flagged",
                "reasons"} <= set(m)
        assert isinstance(m["flagged"], bool) and isinstance(m["reasons"], list)
        assert m["t2_limit"] > 0 and m["spe_limit"] > 0
        assert m["flagged"] == bool(m["reasons"])


def test_recording_faults_are_flagged_with_their_quality_check(small_scenario, truth, model_dir):
    models = load_models([model_dir])
    expected_check = {"clipping": "clipping", "dropout": "dropout", "missing_marker": "marker"}
    for condition, check in expected_check.items():
        rows = truth[truth["condition"] == condition]
        assert len(rows) > 0, condition
        for f in rows["file"]:
            result = analyse_file(small_scenario / f)
            mon = monitor_result(result, models)
            assert all(m["flagged"] for m in mon.values()), (f, mon)
            assert any(f"failed its {check} check" in r for m in mon.values() for r in m["reasons"])


def test_a_model_for_another_profile_is_refused(small_scenario, truth, model_dir, tmp_path):
    models = load_models([model_dir])
    result = analyse_file(small_scenario / truth["file"].iloc[0])
    other = models["dose_release"]
    other.metadata_ = dict(other.metadata_, profile="another-device")
    with pytest.raises(ModelError, match=r"the model is for profile 'another-device', the recording uses 'demo-dpi'"):
        monitor_result(result, {"dose_release": other})


def test_missing_model_folder_and_recordings_are_named(tmp_path):
    with pytest.raises(ModelError, match=r"holds no reference model"):
        load_models([tmp_path])
    with pytest.raises(Exception, match=r"nowhere: no such file or folder"):
        find_recordings([tmp_path / "nowhere"])


def test_model_fit_and_the_worker_take_the_same_files_from_a_folder(tmp_path):
    from analysis.worker import find_inbox_files
    from tests.conftest import write_recording

    folder = tmp_path / "in"
    write_recording(folder, "a")
    write_recording(folder / "sub", "b", fmt="WAV", subtype="PCM_16")
    write_recording(folder, ".partial")  # a hidden file: an upload in progress
    (folder / "notes.txt").write_text("not audio")
    (folder / "c.flac").mkdir()  # a folder that only looks like a recording
    names = sorted(p.relative_to(folder).as_posix() for p in find_recordings([folder]))
    assert names == ["a.flac", "sub/b.wav"]
    assert sorted(p.relative_to(folder).as_posix() for p in find_inbox_files(folder)) == names
