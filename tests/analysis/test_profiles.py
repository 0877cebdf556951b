"""Device profile loading, lookup and validation."""

from __future__ import annotations

import tomllib

import pytest

from analysis.errors import ProfileError
from analysis.profiles import load_profile, parse_profile, shipped_profiles_dir

DEMO = shipped_profiles_dir() / "demo-dpi.toml"


def demo_data() -> dict:
    return tomllib.loads(DEMO.read_text())


def test_shipped_demo_profile_loads_by_name_and_by_path():
    by_name = load_profile("demo-dpi")
    by_path = load_profile(str(DEMO))
    assert by_name == by_path
    assert by_name.event_names == ("metering_click", "dose_release")
    assert by_name.n_markers == 2
    click = by_name.event("metering_click")
    # (0.04 - 0.008) / 0.004 + 1 slices on the fixed grid
    assert click.n_slices == 9
    assert by_name.event("dose_release").n_slices == 39


def test_profiles_dirs_are_searched_before_the_shipped_folder(tmp_path):
    text = DEMO.read_text().replace('name = "demo-dpi"', 'name = "site-variant"')
    (tmp_path / "demo-dpi.toml").write_text(text)
    assert load_profile("demo-dpi", search_dirs=[tmp_path]).name == "site-variant"
    assert load_profile("demo-dpi").name == "demo-dpi"


def test_unknown_profile_name_lists_the_folders(tmp_path):
    with pytest.raises(ProfileError, match=r"no device profile named 'nosuch'.*" + str(tmp_path)):
        load_profile("nosuch", search_dirs=[tmp_path])


@pytest.mark.parametrize(
    "edit,match",
    [
        (lambda d: d["bands"].update(colour="red"), r"key 'bands\.colour': unknown key"),
        (lambda d: d.update(extras={}), r"key 'extras': unknown key"),
        (lambda d: d["events"][0].update(slice_hop_s=-0.01),
         r"key 'events\.metering_click\.slice_hop_s': must be > 0, got -0\.01"),
        (lambda d: d["events"][0].update(slice_window_s=0.5), r"slice_window_s'.*longer than the event's length_s"),
        (lambda d: d["bands"].update(weighting="B"), r"key 'bands\.weighting': must be one of 'none', 'A', got 'B'"),
        (lambda d: d["bands"].update(fmax_hz=100.0), r"key 'bands\.fmax_hz': must be above fmin_hz"),
        (lambda d: d["bands"].update(kind="octave"), r"key 'bands\.kind': must be one of 'third_octave', 'linear'"),
        (lambda d: d["events"][1].update(after="nothing"),
         r"key 'events\.dose_release\.after': must name an earlier event"),
        (lambda d: d["events"][1].update(marker=1), r"two events use the same marker number"),
        (lambda d: d["events"][0].update(window_s=[0.1]), r"window_s': must be a pair of numbers"),
        (lambda d: d["audio"].update(sample_rate_min_hz="fast"),
         r"key 'audio\.sample_rate_min_hz': must be a number, got 'fast'"),
        (lambda d: d["profile"].update(schema=9), r"key 'profile\.schema': is 9, newer than this Harken understands"),
        (lambda d: d["quality"].update(clip_level=2.0), r"key 'quality\.clip_level'.*must be <= 1"),
        (lambda d: d["audio"]["channels"].update(marker=0), r"two roles share one channel"),
        (lambda d: d["events"][1].update(bands={"fmax_hz": 60000.0}),
         r"key 'events\.dose_release\.bands\.fmax_hz': 60000 Hz is above the Nyquist frequency"),
    ],
)
def test_invalid_profiles_name_the_key_and_value(edit, match):
    data = demo_data()
    edit(data)
    with pytest.raises(ProfileError, match=match) as info:
        parse_profile(data, source="site.toml")
    assert str(info.value).startswith("site.toml: ")


def test_profile_file_with_unknown_key_names_the_file(tmp_path):
    path = tmp_path / "odd.toml"
    path.write_text(DEMO.read_text() + '\n[extra]\nfoo = 1\n')
    with pytest.raises(ProfileError, match=r"odd\.toml: key 'extra': unknown key"):
        load_profile(path)


def test_linear_bands_need_a_count():
    data = demo_data()
    data["bands"] = {"kind": "linear", "fmin_hz": 100.0, "fmax_hz": 8000.0}
    with pytest.raises(ProfileError, match=r"key 'bands\.n_bands': is missing"):
        parse_profile(data, source="x")
    data["bands"]["n_bands"] = 24
    assert parse_profile(data, source="x").bands.n_bands == 24


def test_per_event_band_override_inherits_the_rest():
    data = demo_data()
    data["events"][0]["bands"] = {"fmin_hz": 500.0}
    p = parse_profile(data, source="x")
    assert p.event("metering_click").bands.fmin_hz == 500.0
    assert p.event("metering_click").bands.fmax_hz == 16000.0
    assert p.event("dose_release").bands.fmin_hz == 200.0
