"""Bad input: each case gives a specific error naming the file, or a failed quality check; none crashes or hangs."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from analysis.cli import main
from tests.conftest import sidecar_dict, synth_actuation, write_recording


def run_cli(capsys, *args):
    code = main(list(args))
    out = capsys.readouterr()
    return code, out.out, out.err


def analyse_json(capsys, path, *extra):
    code, out, err = run_cli(capsys, "analyse", str(path), "--json", *extra)
    assert code == 0, err
    return json.loads(out)


def qc(result: dict) -> dict:
    return {r["check"]: r for r in result["qc"]}


def test_empty_file(tmp_path, capsys):
    path = tmp_path / "empty.flac"
    path.write_bytes(b"")
    (tmp_path / "empty.json").write_text(json.dumps(sidecar_dict()))
    code, out, err = run_cli(capsys, "analyse", str(path))
    assert code != 0 and out == ""
    assert err.strip() == f"harken: {path}: file is empty (0 bytes)"


def test_truncated_flac(tmp_path, capsys):
    good = write_recording(tmp_path, "good")
    data = good.read_bytes()
    path = tmp_path / "cut.flac"
    path.write_bytes(data[: len(data) // 2])
    (tmp_path / "cut.json").write_text(json.dumps(sidecar_dict()))
    code, _, err = run_cli(capsys, "analyse", str(path))
    assert code != 0
    assert err.startswith(f"harken: {path}: ") and "truncated" in err
    assert err.count("\n") == 1  # one line, no traceback


@pytest.mark.parametrize("suffix", [".flac", ".wav"])
def test_random_bytes_with_an_audio_extension(tmp_path, capsys, suffix):
    path = tmp_path / f"noise{suffix}"
    path.write_bytes(np.random.default_rng(3).bytes(20_000))
    (tmp_path / "noise.json").write_text(json.dumps(sidecar_dict()))
    code, _, err = run_cli(capsys, "analyse", str(path))
    assert code != 0
    assert err.startswith(f"harken: {path}: not a recognised audio file: it does not start with a FLAC, WAV")
    assert "possibly a pipe" not in err and err.count("\n") == 1  # no misleading guess, no decoder warning


def test_nan_and_inf_in_a_float_wav(tmp_path, capsys):
    mic, marker = synth_actuation()
    data = np.column_stack([mic, marker])
    data[1000, 0] = np.nan
    data[2000, 0] = np.inf
    path = write_recording(tmp_path, "nan", fmt="WAV", subtype="FLOAT", data=data)
    code, _, err = run_cli(capsys, "analyse", str(path))
    assert code != 0
    assert err.strip() == f"harken: {path}: contains 2 non-finite sample(s) (NaN or infinity)"


def test_one_sample_file_fails_quality_checks_without_crashing(tmp_path, capsys):
    path = write_recording(tmp_path, "one", data=np.array([[0.1, 0.0]]))
    result = analyse_json(capsys, path)
    checks = qc(result)
    assert checks["duration"]["passed"] is False
    assert checks["marker"]["passed"] is False
    assert all(ev["found"] is False for ev in result["events"])
    assert result["features"] == {}


def test_eight_channel_file_uses_the_mapped_channels(tmp_path, capsys):
    mic, marker = synth_actuation()
    data = np.zeros((mic.size, 8), dtype=np.float32)
    data[:, 5] = mic
    data[:, 2] = marker
    path = write_recording(tmp_path, "eight", data=data, sidecar=sidecar_dict(channels={"mic": 5, "marker": 2}))
    result = analyse_json(capsys, path)
    assert result["recording"]["channels"] == 8
    assert [ev["found"] for ev in result["events"]] == [True, True]
    assert qc(result)["marker"]["passed"] is True


@pytest.mark.parametrize("rate", [8_000, 192_000])
def test_sample_rate_outside_the_profile_fails_its_check(tmp_path, capsys, rate):
    mic, marker = synth_actuation(sample_rate_hz=rate)
    path = write_recording(tmp_path, f"sr{rate}", data=np.column_stack([mic, marker]), sample_rate_hz=rate)
    result = analyse_json(capsys, path)
    check = qc(result)["sample_rate"]
    assert check["passed"] is False and check["value"] == rate
    assert result["features"] == {}
    assert any("outside the profile's range" in n for n in result["recording"]["notes"])


def test_missing_sidecar(tmp_path, capsys):
    path = write_recording(tmp_path, "lonely", sidecar=False)
    code, _, err = run_cli(capsys, "analyse", str(path))
    assert code != 0
    assert err.strip() == (f"harken: {tmp_path / 'lonely.json'}: "
                           "sidecar metadata file is missing (expected beside the recording)")


def test_malformed_sidecar(tmp_path, capsys):
    path = write_recording(tmp_path, "bad")
    (tmp_path / "bad.json").write_text("{not json")
    code, _, err = run_cli(capsys, "analyse", str(path))
    assert code != 0
    assert err.startswith(f"harken: {tmp_path / 'bad.json'}: sidecar is not valid JSON")


def test_profile_with_an_unknown_key(tmp_path, capsys):
    from analysis.profiles import shipped_profiles_dir

    prof = tmp_path / "odd.toml"
    prof.write_text((shipped_profiles_dir() / "demo-dpi.toml").read_text()
                    .replace("[quality]", "[quality]\nloudness = 3"))
    path = write_recording(tmp_path, "rec")
    code, _, err = run_cli(capsys, "analyse", str(path), "--profile", str(prof))
    assert code != 0
    assert err.strip().startswith(f"harken: {prof}: key 'quality.loudness': unknown key")


def test_cli_prints_one_line_and_no_traceback_in_a_real_process(tmp_path):
    path = tmp_path / "junk.wav"
    path.write_bytes(b"RIFF\x00\x00\x00\x00WAVEjunk")
    (tmp_path / "junk.json").write_text(json.dumps(sidecar_dict()))
    proc = subprocess.run(
        [sys.executable, "-m", "analysis.cli", "analyse", str(path)], capture_output=True, text=True, timeout=60
    )
    assert proc.returncode == 1
    assert "Traceback" not in proc.stderr
    assert proc.stderr.count("\n") == 1 and str(path) in proc.stderr


def test_sidecar_naming_an_unknown_profile_names_the_sidecar(tmp_path, capsys):
    path = write_recording(tmp_path, "odd", sidecar=sidecar_dict(profile="nosuch"))
    code, _, err = run_cli(capsys, "analyse", str(path))
    assert code == 1
    assert err.startswith(f"harken: {tmp_path / 'odd.json'}: its profile cannot be used: no device profile named "
                          "'nosuch' (profiles here: demo-dpi)")


def test_silent_calibration_recording_names_its_file(tmp_path, capsys):
    path = write_recording(tmp_path, "rec")
    cal = write_recording(tmp_path / "cal", "cal", data=np.zeros((4800, 1)), sidecar=False)
    code, _, err = run_cli(capsys, "analyse", str(path), "--calibration", str(cal))
    assert code == 1
    assert err.startswith(f"harken: {cal}: not usable as a calibration recording (cal_signal is silent")


def test_unwritable_output_folder_is_one_line(tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    code, _, err = run_cli(capsys, "demo-data", "generate", "--out", str(blocker / "sub"), "--scenario", "small")
    assert code == 1
    assert err.startswith("harken: ") and str(blocker) in err and err.count("\n") == 1
