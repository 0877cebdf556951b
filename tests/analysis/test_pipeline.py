"""One recording -> one result, on synthetic actuations with known event times (tests/conftest.py)."""

from __future__ import annotations

import json

import numpy as np
import pytest

from analysis.cli import main
from analysis.pipeline import analyse_file, analyse_signals
from analysis.profiles import load_profile
from tests.conftest import FS, sidecar_dict, synth_actuation, write_recording

PROFILE = load_profile("demo-dpi")
HOP = 0.001  # the onset detector's hop; the goal is one hop of accuracy on synthetic clicks


def test_events_are_found_at_their_known_times_from_the_marker_channel(recording):
    result = analyse_file(recording)
    assert result.passed_qc, [r.detail for r in result.qc if not r.passed]
    click, release = result.events
    assert click.method == "marker" and release.method == "marker"
    assert click.onset_s == pytest.approx(0.302, abs=HOP)
    assert release.onset_s == pytest.approx(0.405, abs=HOP)
    assert click.latency_s == pytest.approx(0.002, abs=HOP)
    assert release.latency_s == pytest.approx(0.025, abs=HOP)
    assert result.markers_s == pytest.approx((0.300, 0.380), abs=1 / FS)


def test_markers_from_the_sidecar_on_a_mono_file(tmp_path):
    mic, _ = synth_actuation()
    path = write_recording(
        tmp_path, data=mic[:, None], sidecar=sidecar_dict(channels={"mic": 0}, markers_s=[0.3, 0.38])
    )
    result = analyse_file(path)
    assert result.marker_source == "sidecar markers_s"
    assert [ev.method for ev in result.events] == ["marker", "marker"]
    assert result.events[1].onset_s == pytest.approx(0.405, abs=HOP)


def test_missing_marker_falls_back_to_onset_detection_and_fails_the_marker_check():
    mic, marker = synth_actuation(marker_times_s=(0.300,))
    result = analyse_signals(mic, sample_rate_hz=FS, profile=PROFILE, marker=marker, marker_source="marker channel 1")
    checks = {r.check: r for r in result.qc}
    assert not checks["marker"].passed
    click, release = result.events
    assert click.method == "marker"
    assert release.method == "onset" and release.found
    assert release.onset_s == pytest.approx(0.405, abs=HOP)


def test_features_sit_on_the_fixed_slice_grid_of_each_event(recording):
    result = analyse_file(recording)
    click = result.features["metering_click"]
    release = result.features["dose_release"]
    assert click.levels_db.shape == (9, 15)  # the click's bands start at 630 Hz (its 8 ms slices)
    assert release.levels_db.shape == (39, 20)
    # slice k is centred at k*hop + window/2 after the onset
    np.testing.assert_allclose(release.slice_times_s, 0.01 * np.arange(39) + 0.01, atol=1e-9)
    # the click is a 3 kHz damped sine: its dominant frequency is within a bin of 3 kHz
    assert click.dominant_hz == pytest.approx(3000.0, abs=1 / 0.008)
    assert release.reference == "dBFS"


def test_missing_event_is_reported_not_raised():
    rng = np.random.default_rng(1)
    mic = (rng.standard_normal(FS) * 1e-3).astype(np.float32)
    result = analyse_signals(mic, sample_rate_hz=FS, profile=PROFILE, marker=None, marker_source="none")
    assert [ev.found for ev in result.events] == [False, False]
    assert result.events[1].reason  # says why
    assert result.features == {}
    assert not result.passed_qc


def test_analyse_json_has_the_documented_keys(recording, capsys):
    assert main(["analyse", str(recording), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert set(out) == {"recording", "qc", "events", "features"}
    assert {"check", "value", "limit", "passed"} <= set(out["qc"][0])
    assert {"name", "found", "onset_s", "end_s", "duration_s", "peak_dbfs", "latency_s"} <= set(out["events"][0])
    assert out["features"]["dose_release"]["slices"] == 39
    assert out["features"]["dose_release"]["bands"] == 20
    assert len(out["features"]["dose_release"]["band_centres_hz"]) == 20


def test_analyse_text_prints_the_events(recording, capsys):
    assert main(["analyse", str(recording)]) == 0
    out = capsys.readouterr().out
    assert "metering_click" in out and "dose_release" in out
    assert "39 slices x 20 bands" in out


def test_calibration_makes_levels_read_re_20_micropascal(recording, tmp_path, capsys):
    # a calibrator tone of 94 dB SPL = 1 Pa RMS (IEC 60942 class calibrators; 20*log10(1/20e-6) = 93.98 dB)
    t = np.arange(FS) / FS
    cal = write_recording(tmp_path / "cal", "cal", data=(0.1 * np.sin(2 * np.pi * 1000 * t))[:, None], sidecar=False)
    assert main(["analyse", str(recording), "--json"]) == 0
    plain = json.loads(capsys.readouterr().out)
    assert main(["analyse", str(recording), "--json", "--calibration", str(cal)]) == 0
    calibrated = json.loads(capsys.readouterr().out)
    shift = (calibrated["features"]["dose_release"]["band_energy_db"]
             - plain["features"]["dose_release"]["band_energy_db"])
    # RMS of the tone is 0.1/sqrt(2) FS, so 1 FS RMS = 94 - 20*log10(0.0707) = 117.0 dB SPL
    assert shift == pytest.approx(94.0 - 20 * np.log10(0.1 / np.sqrt(2)), abs=0.05)


def test_resonance_features_follow_the_cavity_the_generator_built(small_scenario):
    # The demo generator writes each actuation's Helmholtz frequency (from the cavity's geometry and the air's
    # temperature) to its ground truth; the dose release's resonance in 900-1600 Hz (the shipped profile's range)
    # must read it without bias and within a few per cent on each recording: the resonator is driven by noise,
    # so one 0.4 s event reads it to about 1 % (SD), and a dented cavity (+6 %) reads about 6 % higher.
    import pandas as pd

    truth = pd.read_csv(small_scenario / "ground_truth.csv")
    truth = pd.concat([truth[truth["condition"] == "normal"].iloc[::4], truth[truth["condition"] == "damaged_cavity"]])
    rel = []
    for r in truth.itertuples(index=False):
        res = analyse_file(small_scenario / r.file).features["dose_release"].resonances
        assert len(res) == 1 and (res[0].low_hz, res[0].high_hz) == (900.0, 1600.0)
        assert np.isfinite(res[0].bandwidth_hz) and res[0].bandwidth_hz > 0
        rel.append(res[0].frequency_hz / r.helmholtz_hz - 1.0)
    rel = np.asarray(rel)
    assert np.all(np.abs(rel) < 0.03), rel
    assert abs(rel.mean()) < 0.005 and rel.std() < 0.015, (rel.mean(), rel.std())


def test_resonances_are_in_the_json(recording, capsys):
    assert main(["analyse", str(recording), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    (res,) = out["features"]["dose_release"]["resonances"]
    assert (res["low_hz"], res["high_hz"]) == (900.0, 1600.0) and 900.0 <= res["frequency_hz"] <= 1600.0
    assert out["features"]["metering_click"]["resonances"] == []


def test_windowed_onset_search_agrees_with_the_whole_recording_search(small_scenario):
    # The pipeline computes the flux of each event's search window only, normalised by the quiet stretch before
    # the first window; the whole-recording search (onset_candidates, normalised by the whole flux) must place
    # every event the same on the generator's recordings: with their markers, and without them (the fallback
    # window of the profile, from the recording start).
    from analysis import io
    from analysis.pipeline import ONSET_LOG_GAMMA
    from analysis.signal.events import find_event, onset_candidates

    spec = PROFILE.events[0]
    assert spec.detector == "flux"
    files = sorted(small_scenario.rglob("*.flac"))
    assert len(files) == 120
    found = {"marker": 0, "onset": 0}
    for path in files:
        audio = io.read_audio(path)
        mic, fs = audio.channel(0), audio.sample_rate_hz
        whole = onset_candidates(mic, sample_rate_hz=fs, log_gamma=ONSET_LOG_GAMMA)
        with_markers = analyse_file(path)
        without = analyse_signals(mic, sample_rate_hz=fs, profile=PROFILE)
        m = with_markers.markers_s[0]
        for result, window in (
            (with_markers, dict(search_start_s=m + spec.window_s[0], search_stop_s=m + spec.window_s[1], marker_s=m)),
            (without, dict(search_start_s=spec.search_s[0], search_stop_s=spec.search_s[1], marker_s=None)),
        ):
            expected = find_event(mic, sample_rate_hz=fs, name=spec.name, max_length_s=spec.length_s,
                                  log_gamma=ONSET_LOG_GAMMA, onsets=whole, **window)
            assert result.event(spec.name) == expected, (path.name, window)
            found[expected.method] += expected.found
    assert found["marker"] == 120 and found["onset"] >= 100, found  # both kinds of window were exercised
