"""The rules of analysis.triage: the suggested cause of a signalling cell or a flagged actuation, and states."""

import pandas as pd

from analysis.triage import actuation_state, cell_causes, lot_rigs_signalling, rig_lots_signalling, suggest_cause


def cells(rows):
    return pd.DataFrame(rows, columns=["lot", "rig", "signal"])


def test_a_lot_needs_two_rigs_and_half_of_those_it_ran_on():
    c = cells([("L1", "R1", True), ("L1", "R2", True), ("L1", "R3", False), ("L1", "R4", False),
               ("L2", "R1", True), ("L2", "R2", False), ("L2", "R3", False),
               ("L3", "R1", True), ("L3", "R2", True), ("L3", "R3", False), ("L3", "R4", False), ("L3", "R5", False)])
    assert lot_rigs_signalling(c, "L1") == ["R1", "R2"]  # 2 of 4: half
    assert lot_rigs_signalling(c, "L2") is None  # one rig is never enough
    assert lot_rigs_signalling(c, "L3") is None  # 2 of 5: less than half


def test_a_rig_needs_two_lots_in_their_order():
    c = cells([("L3", "R1", True), ("L1", "R1", True), ("L2", "R1", False), ("L1", "R2", True)])
    assert rig_lots_signalling(c, "R1") == ["L3", "L1"]
    assert rig_lots_signalling(c, "R2") is None



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


def test_states():
    assert actuation_state(passed_qc=False, n_model_flags=0, n_qc_flags=1) == "quality check failed"
    assert actuation_state(passed_qc=True, n_model_flags=2, n_qc_flags=0) == "flagged"
    assert actuation_state(passed_qc=True, n_model_flags=0, n_qc_flags=0) == "analysed"


def test_cell_causes_explain_lots_first_then_rigs_then_single_cells():
    # L2 signals on 3 of 3 rigs: the lot. R1 signals in L1 and L3 (L2 is the lot's): the rig. L4 on R3 alone.
    c = pd.DataFrame([(lot, rig, sig) for lot, rig, sig in [
        ("L1", "R1", True), ("L1", "R2", False), ("L1", "R3", False),
        ("L2", "R1", True), ("L2", "R2", True), ("L2", "R3", True),
        ("L3", "R1", True), ("L3", "R2", False), ("L3", "R3", False),
        ("L4", "R1", False), ("L4", "R2", False), ("L4", "R3", True)]], columns=["lot", "rig", "signal"])
    got = [(c.cause, c.lot, c.rig, c.cells) for c in cell_causes(c)]
    assert got == [("lot", "L2", None, (("L2", "R1"), ("L2", "R2"), ("L2", "R3"))),
                   ("rig", None, "R1", (("L1", "R1"), ("L3", "R1"))),
                   ("unit", "L4", "R3", (("L4", "R3"),))]
