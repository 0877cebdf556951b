"""Suggested causes from simple evidence, and flag wording."""

from __future__ import annotations

import pandas as pd

from dashboard.triage import actuation_state, describe_flag, suggest_cause


def _evidence(cells):
    return pd.DataFrame([{"lot": lot, "rig": rig, "actuations": n, "flagged": f} for lot, rig, n, f in cells])


def test_quality_check_failure_points_at_the_recording():
    ev = _evidence([("L1", "R1", 5, 5), ("L1", "R2", 5, 5)])
    cause, why = suggest_cause(["qc:clipping", "spe"], lot="L1", rig="R1", evidence=ev)
    assert cause == "recording" and "clipping" in why


def test_one_lot_flagging_across_rigs_points_at_the_lot():
    ev = _evidence([("L1", "R1", 5, 2), ("L1", "R2", 5, 3), ("L1", "R3", 5, 0), ("L2", "R1", 5, 0)])
    cause, why = suggest_cause(["t2"], lot="L1", rig="R1", evidence=ev)
    assert cause == "lot" and "2 of 3 rigs" in why


def test_same_rig_flagging_across_lots_points_at_the_rig():
    ev = _evidence([("L1", "R1", 5, 2), ("L2", "R1", 5, 3), ("L1", "R2", 5, 0), ("L2", "R2", 5, 0),
                    ("L1", "R3", 5, 0), ("L2", "R3", 5, 0)])
    cause, why = suggest_cause(["spe"], lot="L2", rig="R1", evidence=ev)
    assert cause == "rig" and "rig R1" in why


def test_otherwise_the_unit():
    ev = _evidence([("L1", "R1", 100, 1), ("L2", "R1", 100, 0), ("L1", "R2", 100, 0)])
    cause, _ = suggest_cause(["trajectory"], lot="L1", rig="R1", evidence=ev)
    assert cause == "unit"  # one flag in 100 is below the 20 % signal fraction


def test_flag_words_name_event_statistic_and_amount():
    text = describe_flag("spe", "dose_release", "SPE 5.2× its limit at slice 7 (0.08 s)", 17.0, 3.3)
    assert text.startswith("dose release — SPE: SPE 5.2×")
    assert "Quality check 'dropout' failed" in describe_flag("qc:dropout", None, "zeros for 45 ms")
    assert "(value 4.2, limit 2)" in describe_flag("trajectory", "metering_click", "outside", 4.2, 2.0)


def test_states():
    assert actuation_state(passed_qc=False, n_model_flags=0, n_qc_flags=1) == "quality check failed"
    assert actuation_state(passed_qc=True, n_model_flags=2, n_qc_flags=0) == "flagged"
    assert actuation_state(passed_qc=True, n_model_flags=0, n_qc_flags=0) == "analysed"
