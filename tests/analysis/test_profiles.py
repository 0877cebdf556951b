"""Device profile loading, lookup and validation."""

from __future__ import annotations

import hashlib
import inspect
import re
import tomllib

import pytest

from analysis.errors import ProfileError
from analysis.profiles import find_profile, is_profile_name, load_profile, parse_profile, shipped_profiles_dir
from analysis.signal.quality import check_clipping

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
        (lambda d: d["bands"].update(kind="octave"),
         r"key 'bands\.kind': must be one of 'third_octave', 'fractional_octave', 'linear'"),
        (lambda d: d["events"][1].update(after="nothing"),
         r"key 'events\.dose_release\.after': must name an earlier event"),
        (lambda d: d["events"][1].update(marker=1), r"two events use the same marker number"),
        (lambda d: d["events"][0].update(window_s=[0.1]), r"window_s': must be a pair of numbers"),
        (lambda d: d["audio"].update(sample_rate_min_hz="fast"),
         r"key 'audio\.sample_rate_min_hz': must be a number, got 'fast'"),
        (lambda d: d["profile"].update(schema=9), r"key 'profile\.schema': is 9, newer than this Harken understands"),
        (lambda d: d["quality"].update(clip_level=2.0), r"key 'quality\.clip_level'.*must be <= 1"),
        (lambda d: d["quality"].update(clip_peak_tolerance=0.5),
         r"key 'quality\.clip_peak_tolerance': is in full-scale units and must be <= 0\.01 .*got 0\.5"),
        (lambda d: d["quality"].update(clip_peak_tolerance=0),
         r"key 'quality\.clip_peak_tolerance': must be > 0, got 0"),
        (lambda d: d["quality"].update(clip_bin_width=0.8),
         r"key 'quality\.clip_bin_width': is a fraction of the recording's own peak and must be <= 0\.5, got 0\.8"),
        (lambda d: d["quality"].update(clip_pileup_ratio=0.5),
         r"key 'quality\.clip_pileup_ratio': must be >= 1\.0, got 0\.5"),
        (lambda d: d["quality"].update(clip_pileup_ratio="high"),
         r"key 'quality\.clip_pileup_ratio': must be a number, got 'high'"),
        (lambda d: d["audio"]["channels"].update(marker=0), r"two roles share one channel"),
        (lambda d: d["events"][1].update(bands={"fmax_hz": 60000.0}),
         r"key 'events\.dose_release\.bands\.fmax_hz': 60000 Hz is above the Nyquist frequency"),
        (lambda d: d["events"][1].update(resonances_hz=[900.0, 1600.0]),
         r"key 'events\.dose_release\.resonances_hz\[0\]': must be a pair of numbers \[low, high\] in Hz, got 900\.0"),
        (lambda d: d["events"][1].update(resonances_hz="900-1600"),
         r"key 'events\.dose_release\.resonances_hz': must be a list of \[low, high\] ranges in Hz"),
        (lambda d: d["events"][1].update(resonances_hz=[[1600.0, 900.0]]),
         r"resonances_hz\[0\]': must have 0 < low < high, got \[1600\.0, 900\.0\]"),
        (lambda d: d["events"][1].update(resonances_hz=[[9000.0, 23000.0]]),
         r"resonances_hz\[0\]': 23000 Hz is not below the Nyquist frequency of sample_rate_min_hz \(22050 Hz\)"),
        # 20 ms slices resolve 50 Hz: a range needs two of those bins
        (lambda d: d["events"][1].update(resonances_hz=[[1000.0, 1080.0]]),
         r"resonances_hz\[0\]': is 80 Hz wide; the event's 0\.02 s slices resolve 50 Hz, so a range needs at least "
         r"100 Hz"),
        (lambda d: d["events"][1].update(resonances_hz=[[900.0, 1600.0], [1500.0, 2500.0]]),
         r"resonances_hz\[1\]': overlaps an earlier range"),
    ],
)
def test_invalid_profiles_name_the_key_and_value(edit, match):
    data = demo_data()
    edit(data)
    with pytest.raises(ProfileError, match=match) as info:
        parse_profile(data, source="site.toml")
    assert str(info.value).startswith("site.toml: ")


def test_resonance_ranges_are_read_per_event_and_default_to_none():
    prof = load_profile("demo-dpi")
    assert prof.event("dose_release").resonances_hz == ((900.0, 1600.0),)
    assert prof.event("metering_click").resonances_hz == ()
    data = demo_data()
    data["events"][0]["resonances_hz"] = [[2000, 3000], [5000.0, 7000]]
    assert parse_profile(data, source="x").event("metering_click").resonances_hz == ((2000.0, 3000.0),
                                                                                     (5000.0, 7000.0))


def test_own_peak_clipping_keys_are_read_and_default_to_the_checks_defaults():
    q = load_profile("demo-dpi").quality
    # the shipped profile writes out the defaults: one 16-bit step, 1% bins, a ratio of 3
    assert (q.clip_peak_tolerance, q.clip_bin_width, q.clip_pileup_ratio) == (2.0 ** -15, 0.01, 3.0)
    defaults = inspect.signature(check_clipping).parameters
    data = demo_data()
    for key in ("clip_peak_tolerance", "clip_bin_width", "clip_pileup_ratio"):
        del data["quality"][key]
    q = parse_profile(data, source="x").quality
    assert q.clip_peak_tolerance == defaults["peak_tolerance"].default
    assert q.clip_bin_width == defaults["bin_width"].default
    assert q.clip_pileup_ratio == defaults["pileup_ratio"].default
    data["quality"].update(clip_peak_tolerance=1e-4, clip_bin_width=0.02, clip_pileup_ratio=4)
    q = parse_profile(data, source="x").quality
    assert (q.clip_peak_tolerance, q.clip_bin_width, q.clip_pileup_ratio) == (1e-4, 0.02, 4.0)


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


def test_fractional_octave_bands_need_a_fraction_of_6_12_or_24():
    data = demo_data()
    data["events"][1]["bands"] = {"kind": "fractional_octave", "fmin_hz": 400.0}
    with pytest.raises(ProfileError, match=r"key 'events\.dose_release\.bands\.fraction': is missing"):
        parse_profile(data, source="x")
    data["events"][1]["bands"]["fraction"] = 5
    with pytest.raises(ProfileError, match=r"fraction.*must be 6, 12 or 24.*got 5"):
        parse_profile(data, source="x")
    data["events"][1]["bands"]["fraction"] = 12
    spec = parse_profile(data, source="x").event("dose_release").bands
    assert (spec.kind, spec.fraction, spec.fmin_hz, spec.fmax_hz) == ("fractional_octave", 12, 400.0, 16000.0)
    data["bands"]["fraction"] = 12  # on a third-octave layout
    with pytest.raises(ProfileError, match=r"key 'bands\.fraction': only applies to kind = 'fractional_octave'"):
        parse_profile(data, source="x")


def test_a_twelfth_octave_event_is_analysed_in_its_bands(tmp_path):
    from analysis.demo import generate
    from analysis.pipeline import analyse_file
    from analysis.signal.bands import fractional_octave_bands

    data = demo_data()
    data["events"][1]["bands"] = {"kind": "fractional_octave", "fraction": 12, "fmin_hz": 400.0}
    prof = parse_profile(data, source="x")
    generate(tmp_path, scenario="small", jobs=1)
    rec = next(tmp_path.rglob("*.flac"))
    res = analyse_file(rec, profile=prof)
    got = res.features["dose_release"].band_centres_hz
    want = fractional_octave_bands(fraction=12, fmin_hz=400.0, fmax_hz=16000.0).centres_hz
    assert got.shape == want.shape and (got == want).all()
    assert res.features["dose_release"].levels_db.shape[1] == want.size


def test_per_event_band_override_inherits_the_rest():
    data = demo_data()
    data["events"][0]["bands"] = {"fmin_hz": 500.0}
    p = parse_profile(data, source="x")
    assert p.event("metering_click").bands.fmin_hz == 500.0
    assert p.event("metering_click").bands.fmax_hz == 16000.0
    assert p.event("dose_release").bands.fmin_hz == 200.0


# ---------------------------------------------------------------------------------- lookup by name only

REFUSED = ["/etc/passwd", "../x", "a/b", "x.toml", "demo-dpi.toml", "..", ".hidden", "a\\b", "demo-dpi\n", "",
           "x" * 65, "C:x", "name with space"]
REFUSAL = (r"^profile: .* is not a device profile name \(1 to 64 letters, digits, '\.', '_' or '-'; a path is never "
           r"taken\)$")


def _profile_text(name: str, *, version: int | None = None) -> str:
    text = DEMO.read_text().replace('name = "demo-dpi"', f'name = "{name}"')
    if version is None:
        return "\n".join(line for line in text.splitlines() if not line.startswith("version ="))
    return re.sub(r"(?m)^version = \d+ ", f"version = {version} ", text)


def test_find_profile_takes_a_plain_name():
    prof = find_profile("demo-dpi")
    assert prof == load_profile("demo-dpi")
    assert prof.name == "demo-dpi" and prof.source == str(DEMO)


def test_find_profile_searches_the_given_folders_first(tmp_path):
    (tmp_path / "demo-dpi.toml").write_text(_profile_text("demo-dpi").replace("Invented", "Site copy of the"))
    (tmp_path / "mine_2.0.toml").write_text(_profile_text("mine_2.0"))  # '.', '_' and digits belong in a name
    assert find_profile("demo-dpi", search_dirs=[tmp_path]).source == str(tmp_path / "demo-dpi.toml")
    assert find_profile("demo-dpi", search_dirs=[tmp_path]).description.startswith("Site copy")
    assert find_profile("mine_2.0", search_dirs=[tmp_path]).name == "mine_2.0"


@pytest.mark.parametrize("name", REFUSED)
def test_find_profile_refuses_anything_but_a_name(tmp_path, name):
    (tmp_path / "x.toml").write_text(_profile_text("x"))  # '../x' and 'x.toml' would reach this file as paths
    sub = tmp_path / "profiles"
    sub.mkdir()
    with pytest.raises(ProfileError, match=REFUSAL):
        find_profile(name, search_dirs=[sub])
    assert not is_profile_name(name)


@pytest.mark.parametrize("pair", [
    ("/etc/passwd", "/etc/no-such-file-here"),
    ("{tmp}/real.toml", "{tmp}/ghost.toml"),
    ("../real", "../ghost"),
    ("real.toml", "ghost.toml"),
])
def test_a_refused_path_does_not_tell_whether_the_file_exists(tmp_path, pair):
    (tmp_path / "real.toml").write_text(_profile_text("real"))
    sub = tmp_path / "profiles"
    sub.mkdir()
    existing, absent = (p.format(tmp=tmp_path) for p in pair)
    messages = []
    for name in (existing, absent):
        with pytest.raises(ProfileError) as info:
            find_profile(name, search_dirs=[sub])
        messages.append(str(info.value).replace(name, "NAME"))
    assert messages[0] == messages[1]
    assert "exist" not in messages[0] and "real" not in messages[0]


def test_an_unknown_name_lists_the_known_names_not_the_folders(tmp_path):
    first, second = tmp_path / "a", tmp_path / "b"
    first.mkdir()
    second.mkdir()
    (first / "mine.toml").write_text(_profile_text("mine"))
    (second / "other.toml").write_text(_profile_text("other"))
    (second / "mine.toml").write_text(_profile_text("mine"))  # listed once
    (second / "not a name.toml").write_text(_profile_text("x"))  # not a profile name: not offered
    (second / "notes.txt").write_text("not a profile")
    with pytest.raises(ProfileError) as info:
        find_profile("nosuch", search_dirs=[first, second])
    assert str(info.value) == "nosuch: no device profile named 'nosuch' (profiles here: demo-dpi, mine, other)"
    assert str(tmp_path) not in str(info.value) and str(shipped_profiles_dir()) not in str(info.value)


@pytest.mark.parametrize("inside", ["demo-dpi", "site-variant"])
def test_a_profile_whose_name_differs_from_its_file_name_is_refused(tmp_path, inside):
    (tmp_path / "foo.toml").write_text(_profile_text(inside))
    with pytest.raises(ProfileError) as info:
        find_profile("foo", search_dirs=[tmp_path])
    assert str(info.value) == (f"foo.toml: key 'profile.name' is {inside!r}; the file foo.toml must be called 'foo' "
                               "inside too")
    assert str(tmp_path) not in str(info.value)


def test_a_mismatched_file_is_not_passed_over_for_the_shipped_one(tmp_path):
    (tmp_path / "demo-dpi.toml").write_text(_profile_text("site-variant"))
    with pytest.raises(ProfileError, match=r"^demo-dpi\.toml: key 'profile\.name' is 'site-variant'"):
        find_profile("demo-dpi", search_dirs=[tmp_path])


@pytest.mark.parametrize("name,ok", [
    ("demo-dpi", True), ("A", True), ("9", True), ("x" * 64, True), ("a.b_c-d", True),
    ("x" * 65, False), ("-lead", False), ("_lead", False), ("x.toml", False), ("a b", False), ("é", False),
    (None, False), (3, False), (b"demo", False),
])
def test_is_profile_name(name, ok):
    assert is_profile_name(name) is ok


def test_a_profile_name_inside_the_file_must_be_a_name():
    data = demo_data()
    data["profile"]["name"] = "../etc"
    with pytest.raises(ProfileError, match=r"^site\.toml: key 'profile\.name': must be 1 to 64 letters, digits, "
                                           r"'\.', '_' or '-', got '\.\./etc'$"):
        parse_profile(data, source="site.toml")


# ------------------------------------------------------------------------------------- version and checksum

def test_version_defaults_to_1_and_is_read_from_the_profile_table(tmp_path):
    (tmp_path / "plain.toml").write_text(_profile_text("plain"))
    (tmp_path / "third.toml").write_text(_profile_text("third", version=3))
    assert "version" not in tomllib.loads((tmp_path / "plain.toml").read_text())["profile"]
    assert find_profile("plain", search_dirs=[tmp_path]).version == 1
    assert find_profile("third", search_dirs=[tmp_path]).version == 3
    assert find_profile("demo-dpi").version == tomllib.loads(DEMO.read_text())["profile"]["version"]


@pytest.mark.parametrize("bad,match", [
    (0, r"key 'profile\.version': must be >= 1, got 0$"),
    (-2, r"key 'profile\.version': must be >= 1, got -2$"),
    ("2", r"key 'profile\.version': must be an integer, got '2'$"),
    (True, r"key 'profile\.version': must be an integer, got True$"),
    (1.5, r"key 'profile\.version': must be an integer, got 1\.5$"),
])
def test_a_bad_version_names_the_key_and_value(bad, match):
    data = demo_data()
    data["profile"]["version"] = bad
    with pytest.raises(ProfileError, match=r"^site\.toml: " + match):
        parse_profile(data, source="site.toml")


def test_sha256_is_that_of_the_files_bytes(tmp_path):
    path = tmp_path / "mine.toml"
    path.write_bytes(_profile_text("mine").encode())
    first = find_profile("mine", search_dirs=[tmp_path])
    # hashlib is the reference: the checksum is of the bytes on disk, whatever TOML makes of them
    assert first.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    path.write_bytes(path.read_bytes() + b"\n# a comment changes the file, not the profile\n")
    second = find_profile("mine", search_dirs=[tmp_path])
    assert second.sha256 == hashlib.sha256(path.read_bytes()).hexdigest() != first.sha256
    assert second.events == first.events and second.bands == first.bands
    assert find_profile("demo-dpi").sha256 == hashlib.sha256(DEMO.read_bytes()).hexdigest()
    assert load_profile(path).sha256 == second.sha256  # by path (the command line's way), the same
    assert parse_profile(demo_data(), source="memory").sha256 == ""  # no file, no checksum
