"""The generated small scenario: files, sidecars, ground truth, determinism, and the physics visible in the audio."""

import csv
import json

import numpy as np
import pytest
import soundfile as sf
from scipy.signal import welch

from analysis.demo import GROUND_TRUTH_COLUMNS, generate
from analysis.errors import ScenarioError
from analysis.io import read_sidecar

FS = 48000
G3 = 10.0 ** 0.3            # IEC 61260-1:2014 base-10 octave ratio


@pytest.fixture(scope="module")
def small(tmp_path_factory):
    out = tmp_path_factory.mktemp("small_a") / "inbox"
    calls = []
    summary = generate(out, scenario="small", jobs=2, progress=lambda done, total: calls.append((done, total)))
    with (out / "ground_truth.csv").open(newline="", encoding="utf-8") as fh:
        rows = list(csv.DictReader(fh))
    return out, summary, rows, calls


@pytest.fixture(scope="module")
def audio(small):
    out, _, rows, _ = small
    return {r["file"]: sf.read(out / r["file"], always_2d=True)[0] for r in rows}


def rows_where(rows, **kw):
    return [r for r in rows if all(r[k] == v for k, v in kw.items())]


def test_summary_and_progress(small):
    out, summary, rows, calls = small
    assert summary.n_actuations == len(rows) == 120
    assert summary.conditions["normal"] + sum(v for k, v in summary.conditions.items() if k != "normal") == 120
    assert calls[-1] == (120, 120) and len(calls) == 120
    assert summary.ground_truth == out / "ground_truth.csv"


def test_ground_truth_covers_every_file(small):
    out, _, rows, _ = small
    flac = {p.relative_to(out).as_posix() for p in out.rglob("*.flac")}
    assert flac == {r["file"] for r in rows}
    assert len({r["file"] for r in rows}) == len(rows)
    assert {p.with_suffix(".json") for p in out.rglob("*.flac")} == set(out.rglob("*.json"))
    with (out / "ground_truth.csv").open(encoding="utf-8") as fh:
        assert tuple(fh.readline().strip().split(",")) == GROUND_TRUTH_COLUMNS
    for r in rows:
        assert r["file"] == f"{r['site']}/{r['rig']}/{r['lot']}/{r['unit']}_{int(r['actuation']):03d}.flac"
    assert all(r["condition"] == "normal" for r in rows if r["reference"] == "true")
    assert {r["lot"] for r in rows if r["reference"] == "true"} == {"L2601", "L2602", "L2603"}


def test_sidecars_validate_and_hold_no_labels(small):
    out, _, rows, _ = small
    allowed = {"site", "rig", "lot", "unit", "actuation", "recorded_at", "profile", "channels", "markers_s", "notes"}
    for r in rows:
        path = (out / r["file"]).with_suffix(".json")
        doc = json.loads(path.read_text(encoding="utf-8"))
        assert set(doc) <= allowed
        assert r["condition"] not in json.dumps(doc) or r["condition"] == "normal"
        side = read_sidecar(path)
        assert (side.site, side.rig, side.lot, side.unit, side.actuation) == (
            r["site"], r["rig"], r["lot"], r["unit"], int(r["actuation"]))
        assert side.profile == "demo-dpi"
        assert side.recorded_at.isoformat() == r["recorded_at"]
        offset = {"Northfield": "+01:00", "Lakeside": "-05:00"}[r["site"]]
        assert r["recorded_at"].endswith(offset)


def test_channels_and_markers(small, audio):
    out, _, rows, _ = small
    for r in rows:
        x = audio[r["file"]]
        doc = json.loads((out / r["file"]).with_suffix(".json").read_text(encoding="utf-8"))
        assert x.shape[0] == int(1.2 * FS)
        missing = r["condition"] == "missing_marker"
        expected = [float(r["marker_1_s"])] + ([] if missing else [float(r["marker_2_s"])])
        if r["rig"] == "LS-R2":
            assert x.shape[1] == 1 and doc["channels"] == {"mic": 0} and "marker" not in doc["channels"]
            assert doc["markers_s"] == pytest.approx(expected, abs=1e-4)
        else:
            assert x.shape[1] == 2 and doc["channels"] == {"mic": 0, "marker": 1} and "markers_s" not in doc
            on = x[:, 1] > 0.4
            rises = np.flatnonzero(on[1:] & ~on[:-1]) + 1
            assert rises / FS == pytest.approx(expected, abs=1.5 / FS)
            assert np.max(x[:, 1]) == pytest.approx(0.8, abs=1e-4)
            assert np.count_nonzero(on) == pytest.approx(len(expected) * 0.002 * FS, abs=len(expected))
        # timeline of demo-dpi.toml: marker 1 at 0.30 ± 0.01 s, click 1-5 ms after, marker 2 at click + 0.08 ± 0.005
        m1, click, m2 = (float(r[k]) for k in ("marker_1_s", "click_onset_s", "marker_2_s"))
        assert abs(m1 - 0.30) <= 0.010 and 0.001 <= click - m1 <= 0.005 and abs(m2 - click - 0.08) <= 0.005
        assert 0.010 <= float(r["burst_onset_s"]) - m2 <= 0.040


def test_determinism_same_seed_same_bytes(small, tmp_path):
    out, _, rows, _ = small
    again = tmp_path / "again"
    generate(again, scenario="small", jobs=1)           # other job count, same seed
    files = sorted(p.relative_to(out) for p in out.rglob("*") if p.is_file())
    assert files == sorted(p.relative_to(again) for p in again.rglob("*") if p.is_file())
    for rel in files:
        assert (out / rel).read_bytes() == (again / rel).read_bytes(), rel


def test_other_seed_other_audio(small, tmp_path):
    out, _, rows, _ = small
    other = tmp_path / "other"
    generate(other, scenario="small", seed=8, jobs=1)
    first = rows[0]["file"]
    assert (out / first).read_bytes() != (other / first).read_bytes()


def test_refuses_non_empty_folder(small):
    out, *_ = small
    with pytest.raises(ScenarioError, match="must be new or empty"):
        generate(out, scenario="small")


def test_bad_jobs(tmp_path):
    with pytest.raises(ScenarioError, match=r"jobs must be an integer >= 1, got 0"):
        generate(tmp_path / "x", scenario="small", jobs=0)


def peak_hz(x, lo_hz, hi_hz, nperseg=8192):
    f, p = welch(x, FS, nperseg=min(nperseg, len(x)))
    band = (f >= lo_hz) & (f <= hi_hz)
    return f[band][np.argmax(p[band])]


def helmholtz_from_row(r):
    # Kinsler et al. 2000, Fundamentals of Acoustics 4th ed.: f = (c/2π)·sqrt(A/(V·L')), L' = L + 1.7a (end correction
    # from memory), c = 331.3·sqrt(1 + T/273.15); computed here from the row's geometry, not by the generator.
    a = float(r["neck_radius_mm"]) * 1e-3
    c = 331.3 * np.sqrt(1.0 + float(r["temperature_c"]) / 273.15)
    area = np.pi * a**2
    return c / (2 * np.pi) * np.sqrt(area / (float(r["cavity_volume_cm3"]) * 1e-6
                                             * (float(r["neck_length_mm"]) * 1e-3 + 1.7 * a)))


def dose_window(x, r, start_s=0.05, length_s=0.5):
    i0 = int((float(r["marker_2_s"]) + start_s) * FS)
    return x[i0:i0 + int(length_s * FS), 0]


def test_resonance_peak_within_a_third_octave_of_helmholtz(small, audio):
    _, _, rows, _ = small
    ratios = []
    for r in rows_where(rows, condition="normal"):
        fh = helmholtz_from_row(r)
        assert float(r["helmholtz_hz"]) == pytest.approx(fh, rel=1e-4)
        ratios.append(peak_hz(dose_window(audio[r["file"]], r), 600.0, 3000.0) / fh)
    # one-third-octave band centred on the Helmholtz value: G^(±1/6) (IEC 61260-1)
    assert np.all(np.abs(np.log(ratios) / np.log(G3)) <= 1.0 / 6.0)


def test_damaged_cavity_shifts_the_resonance(small, audio):
    _, _, rows, _ = small
    normal = np.median([peak_hz(dose_window(audio[r["file"]], r), 600.0, 3000.0)
                        for r in rows_where(rows, condition="normal")])
    unit = np.median([peak_hz(dose_window(audio[r["file"]], r), 600.0, 3000.0)
                      for r in rows_where(rows, unit="L2605-01")])
    assert unit / normal == pytest.approx(1.06, abs=0.025)          # scenario: shift_pct = 6


@pytest.mark.parametrize("site, mains", [("Northfield", 50.0), ("Lakeside", 60.0)])
def test_hum_fundamental_per_site(small, audio, site, mains):
    _, _, rows, _ = small
    for r in rows_where(rows, site=site, condition="normal")[::4]:
        x = audio[r["file"]][:, 0]
        assert peak_hz(x, 40.0, 75.0, nperseg=len(x)) == pytest.approx(mains, abs=1.0)


def test_flow_band_level_follows_u6_in_generated_data():
    # Same unit and rig, flow ×1 and ×2: the 2 kHz one-third-octave band level of the flow plateau (after the powder
    # burst has ended) rises by 60·log10(2) = 18.06 dB (Curle 1955 dipole law; IEC 61260-1 band edges)
    import dataclasses

    from analysis.demo import load_scenario, plan_scenario
    from analysis.demo.synth import render_actuation

    p = plan_scenario(load_scenario("small"))[0].params
    steps = []
    for pair in range(4):
        levels = []
        for k, factor in enumerate((1.0, 2.0)):
            out = render_actuation(dataclasses.replace(p, flow_factor=factor), np.random.default_rng(10 * pair + k))
            m2 = out.truth["marker_2_s"]
            x = out.samples[int((m2 + 0.30) * FS):int((m2 + 0.60) * FS), 0]
            f, pxx = welch(x, FS, nperseg=2048)
            band = (f >= 2000 * G3 ** (-1 / 6)) & (f < 2000 * G3 ** (1 / 6))
            # remove the actuation's own ±1 % flow jitter with the same law, leaving the ×2 step
            levels.append(10 * np.log10(pxx[band].sum()) - 60 * np.log10(out.truth["flow_rel"] / factor))
        steps.append(levels[1] - levels[0])
    assert np.mean(steps) == pytest.approx(18.06, abs=0.4)


def test_normal_recordings_do_not_clip_and_stand_above_background(small, audio):
    _, _, rows, _ = small
    for r in rows_where(rows, condition="normal"):
        x = audio[r["file"]][:, 0]
        assert np.max(np.abs(x)) < 10 ** (-3 / 20)                      # below -3 dBFS
        background = np.sqrt(np.mean(x[: int(0.25 * FS)] ** 2))
        event = np.sqrt(np.mean(dose_window(audio[r["file"]], r, 0.0, 0.4) ** 2))
        assert 20 * np.log10(event / background) > 10.0               # profile quality.min_snr_db
        zero_run = longest_run(x == 0.0)
        assert zero_run <= 0.002 * FS                                  # profile quality.max_dropout_s


def longest_run(mask):
    if not mask.any():
        return 0
    edges = np.diff(np.concatenate([[0], mask.astype(int), [0]]))
    return int(np.max(np.flatnonzero(edges == -1) - np.flatnonzero(edges == 1)))


def test_clipping_day_clips(small, audio):
    _, _, rows, _ = small
    clipped = rows_where(rows, condition="clipping")
    assert clipped
    for r in clipped:
        x = audio[r["file"]][:, 0]
        assert longest_run(np.abs(x) >= 0.999) >= 3                     # profile quality.clip_level / clip_min_run
        assert 4.0 <= float(r["severity"]) <= 6.0


def test_dropout_is_exact_zeros_inside_the_dose_release(small, audio):
    _, _, rows, _ = small
    for r in rows_where(rows, condition="dropout"):
        x = audio[r["file"]][:, 0]
        start, length = float(r["dropout_start_s"]), float(r["dropout_s"])
        assert 0.020 <= length <= 0.060
        i0, i1 = round(start * FS), round((start + length) * FS)
        assert np.all(x[i0:i1] == 0.0) and x[i0 - 1] != 0.0
        assert float(r["burst_onset_s"]) <= start <= float(r["burst_onset_s"]) + 0.3
        assert float(r["severity"]) == pytest.approx(1000 * length, abs=0.01)


def impact_centroid_hz(x, r):
    i0 = int(float(r["burst_onset_s"]) * FS)
    f, p = welch(x[i0:i0 + int(0.1 * FS), 0], FS, nperseg=1024)
    band = (f >= 3000) & (f <= 16000)
    return np.sum(f[band] * p[band]) / np.sum(p[band])


def test_coarse_carrier_lowers_the_impact_centre(small, audio):
    _, _, rows, _ = small
    ref = np.median([impact_centroid_hz(audio[r["file"]], r) for r in rows if r["reference"] == "true"])
    coarse = np.median([impact_centroid_hz(audio[r["file"]], r) for r in rows_where(rows, condition="coarse_carrier")])
    # scenario: diameter ×1.16 -> ring frequency /1.16 (-14 %); the flow noise under the burst dilutes the shift
    assert 0.80 < coarse / ref < 0.96
    assert float(rows_where(rows, condition="coarse_carrier")[0]["severity"]) == pytest.approx(100 * (1 / 1.16 - 1),
                                                                                                abs=0.01)


def squeal_band_db(x):
    f, p = welch(x[: int(0.28 * FS), 0], FS, nperseg=4096)
    band = (f >= 3300) & (f <= 3500)
    return 10 * np.log10(p[band].sum())


def test_rig_squeal_grows_on_its_rig(small, audio):
    _, _, rows, _ = small
    before = np.median([squeal_band_db(audio[r["file"]]) for r in rows_where(rows, rig="LS-R1", reference="true")])
    late = [r for r in rows_where(rows, condition="rig_squeal") if float(r["severity"]) >= -31.0]
    assert late
    for r in late:
        assert squeal_band_db(audio[r["file"]]) > before + 10.0          # -30 dB re flow, in the quiet stretch
    early = [r for r in rows_where(rows, condition="rig_squeal") if float(r["severity"]) <= -50.0]
    assert early and np.median([squeal_band_db(audio[r["file"]]) for r in early]) < before + 6.0   # subtle early
