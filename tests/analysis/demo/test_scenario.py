"""Scenario files: the shipped ones meet the issue's sizes; bad files fail with errors naming key and value."""

import datetime as dt
import re

import pytest

from analysis.demo import FAULT_KINDS, SCENARIO_DIR, load_scenario, plan_scenario
from analysis.errors import ScenarioError

SMALL = (SCENARIO_DIR / "small.toml").read_text(encoding="utf-8")


def write(tmp_path, text):
    path = tmp_path / "edited.toml"
    path.write_text(text, encoding="utf-8")
    return path


def test_default_size_and_shape():
    sc = load_scenario("default")
    plans = plan_scenario(sc)
    assert 1800 <= len(plans) <= 2300
    assert len(sc.sites) == 2 and {s.mains_hz for s in sc.sites} == {50.0, 60.0}
    assert len(sc.rigs) == 5 and len(sc.lots) >= 12
    assert (max(lot.start for lot in sc.lots) - min(lot.start for lot in sc.lots)).days >= 6 * 7 - 7
    assert 3 <= len(sc.reference_lots) <= 4
    assert {p.condition for p in plans} == {"normal", *FAULT_KINDS}
    assert sum(r.markers == "sidecar" for r in sc.rigs) == 1


def test_small_size_and_every_fault():
    plans = plan_scenario(load_scenario("small"))
    assert 100 <= len(plans) <= 140
    assert {p.condition for p in plans} == {"normal", *FAULT_KINDS}
    assert all(p.condition == "normal" for p in plans if p.reference)
    assert sum(p.reference for p in plans) >= 40


def test_load_by_path_and_seed_override(tmp_path):
    sc = load_scenario(write(tmp_path, SMALL))
    assert sc.name == "small"
    a = plan_scenario(sc)
    b = plan_scenario(sc, seed=sc.seed + 1)
    assert a[0].params != b[0].params
    assert plan_scenario(sc)[0].params == a[0].params


def test_unknown_name():
    with pytest.raises(ScenarioError, match=r"scenario 'nosuch' not found .*known: .*default.*small"):
        load_scenario("nosuch")


@pytest.mark.parametrize(
    "old, new, message",
    [
        ("mains_hz = 50", "mains_hz = 55", r"sites\[0\]\.mains_hz must be 50 or 60, got 55"),
        ('utc_offset = "+01:00"', 'utc_offset = "CET"', r"sites\[0\]\.utc_offset must be a UTC offset .*got 'CET'"),
        ('markers = "sidecar"', 'markers = "log"', r"rigs\[3\]\.markers must be \"channel\" or \"sidecar\", got 'log'"),
        ("units_per_lot = 4", "units_per_lot = 0", r"plan\.units_per_lot must be between 1 and 999, got 0"),
        ('subtype = "PCM_16"', 'subtype = "FLOAT"',
         r"recording\.subtype must be \"PCM_16\" or \"PCM_24\", got 'FLOAT'"),
        ("mic_distance_m = 0.10\ngain_db = 0.0\ndrive_hz = 137.0",
         "mic_distance_m = 0.10\ngain_db = 0.0\ndrive_hz = 137.0\nfocus = 1", r"rigs\[0\]\.focus is not a known key"),
        ('kind = "clipping"', 'kind = "hiss"', r"faults\[4\]\.kind must be one of coarse_carrier, .*got 'hiss'"),
        ('lot = "L2604"', 'lot = "L9999"', r"faults\[0\]\.lot must be a lot from \[\[lots\]\], got 'L9999'"),
        ('{ unit = "L2605-02", actuation = 3 }', '{ unit = "L2605-02", actuation = 9 }',
         r"faults\[5\]\.targets\[0\]\.actuation must be between 1 and 5, got 9"),
        ('reference_lots = ["L2601", "L2602", "L2603"]', 'reference_lots = ["L2601", "L2699"]',
         r"scenario\.reference_lots must be a list of lots from \[\[lots\]\]"),
        ("start = 2026-03-02", 'start = "March"', r"lots\[0\]\.start must be a TOML date like 2026-03-02, got 'March'"),
        ("seed = 7", "seed = -1", r"scenario\.seed must be >= 0, got -1"),
    ],
)
def test_validation_errors_name_key_and_value(tmp_path, old, new, message):
    assert old in SMALL
    path = write(tmp_path, SMALL.replace(old, new, 1))
    with pytest.raises(ScenarioError, match=re.escape(str(path)) + ": " + message):
        load_scenario(path)


def test_fault_on_reference_lot_is_refused(tmp_path):
    sc = load_scenario(write(tmp_path, SMALL.replace('lot = "L2604"', 'lot = "L2602"')))
    with pytest.raises(ScenarioError,
                       match=r"faults\[0\] \(coarse_carrier\) hits L2602-01 .*reference lots must be normal"):
        plan_scenario(sc)


def test_two_faults_on_one_actuation_are_refused(tmp_path):
    sc = load_scenario(write(tmp_path, SMALL.replace('units = ["L2605-01"]', 'units = ["L2604-01"]')))
    with pytest.raises(ScenarioError,
                       match=r"faults\[0\] \(coarse_carrier\) and faults\[1\] \(damaged_cavity\) both hit"):
        plan_scenario(sc)


def test_fault_that_matches_nothing_is_refused(tmp_path):
    sc = load_scenario(write(tmp_path, SMALL.replace("date = 2026-03-13", "date = 2026-03-14")))
    with pytest.raises(ScenarioError, match=r"faults\[4\] \(clipping\) matches no actuation"):
        plan_scenario(sc)


def test_invalid_toml(tmp_path):
    path = write(tmp_path, SMALL + "\n[[sites]\n")
    with pytest.raises(ScenarioError, match=r"not valid TOML"):
        load_scenario(path)


def test_faults_land_where_the_scenario_says():
    sc = load_scenario("small")
    plans = plan_scenario(sc)
    by = {(p.unit, p.actuation): p for p in plans}
    assert {p.lot for p in plans if p.condition == "coarse_carrier"} == {"L2604"}
    assert {p.rig for p in plans if p.condition == "coarse_carrier"} == {r.id for r in sc.rigs}
    assert {p.unit for p in plans if p.condition == "damaged_cavity"} == {"L2605-01", "L2606-02"}
    squeal = [p for p in plans if p.condition == "rig_squeal"]
    assert {p.rig for p in squeal} == {"LS-R1"}
    assert all(dt.date.fromisoformat(p.recorded_at[:10]) >= dt.date(2026, 3, 11) for p in squeal)
    assert [p.severity for p in squeal] == sorted(p.severity for p in squeal)      # growing
    assert squeal[-1].severity == pytest.approx(-30.0)
    assert all(p.fault_start == "2026-03-11" for p in squeal)
    clip = [p for p in plans if p.condition == "clipping"]
    assert {(p.rig, p.recorded_at[:10]) for p in clip} == {("NF-R1", "2026-03-13")}
    assert by[("L2605-02", 3)].condition == "dropout" and by[("L2606-04", 2)].condition == "dropout"
    assert by[("L2605-02", 5)].condition == "missing_marker"
    assert by[("L2605-04", 4)].condition == "missing_marker" and by[("L2605-04", 4)].rig == "LS-R2"


def test_name_defaults_to_file_stem(tmp_path):
    path = tmp_path / "my-lab.toml"
    path.write_text(SMALL.replace('name = "small"\n', "", 1), encoding="utf-8")
    assert load_scenario(path).name == "my-lab"
