"""The lot / rig rules of analysis.triage (the suggested cause of a signal)."""

import pandas as pd

from analysis.triage import lot_rigs_signalling, rig_lots_signalling


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
