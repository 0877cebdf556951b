"""The rules of analysis.triage: the suggested cause of a signalling cell or a flagged actuation, and states."""

import pandas as pd
import pytest

from analysis.triage import actuation_state, lot_rigs_signalling, rig_lots_signalling, suggest_cause


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



# ---------------------------------------------------------------------------------------------- decide()
import numpy as np  # noqa: E402

from analysis.monitor.levels import MeanLimits  # noqa: E402
from analysis.triage import decide, evidence_words  # noqa: E402

LOTS = [f"L{i:02d}" for i in range(1, 13)]
RIGS = ["R1", "R2", "R3", "R4"]
REF = LOTS[:4]


def units_table(seed, *, lot_shift=None, rig_shift=None, unit_shift=None, size=1.0):
    """Per-unit means of the log event residual: 2 units per (lot, rig) cell, 16 actuations each, unit-to-unit SD
    0.1 and actuation SD 0.4 (so a unit mean has SD sqrt(0.01 + 0.16/16) = 0.14); one fault added."""
    rng = np.random.default_rng(seed)
    rows = []
    t = pd.Timestamp("2026-01-05")
    for lot in LOTS:
        for rig in RIGS:
            for k in (1, 2):
                unit = f"{lot}-{rig}-{k}"
                m = rng.normal(0, 0.1) + rng.normal(0, 0.4 / 4)
                on_rig = bool(rig_shift) and rig == rig_shift[0] and lot in rig_shift[1]
                if lot == lot_shift or on_rig or unit == unit_shift:
                    m += size
                rows.append(dict(event="ev", statistic="event_spe_ratio", lot=lot, rig=rig, site="S", unit=unit,
                                 n=16, mean=m, first=t, last=t + pd.Timedelta(hours=1)))
            t += pd.Timedelta(hours=3)
    return pd.DataFrame(rows)


LIMITS = {"ev": {"event_spe_ratio": MeanLimits(centre=0.0, var_lot=0.0, var_unit=0.01, var_within=0.16,
                                               alpha=0.001, n_units=32, n_lots=4)}}
NO_FLAGS = pd.DataFrame(columns=["actuation_id", "event", "statistics", "value", "limit", "site", "rig", "lot",
                                 "unit", "recorded_at"])


def by(decisions, level):
    return [d for d in decisions if d.level == level]


def test_a_lot_departing_on_every_rig_is_the_lot():
    d = decide(units_table(1, lot_shift="L08"), LIMITS, NO_FLAGS, reference_lots={"ev": REF})
    lots = by(d, "lot")
    assert [x.lot for x in lots] == ["L08"] and lots[0].cause == "lot"
    assert {x.rig for x in by(d, "cell") if x.lot == "L08"} == set(RIGS)
    assert all(x.cause == "lot" for x in by(d, "cell") + by(d, "unit") if x.lot == "L08")
    assert "departs on 4 of 4 rigs" in evidence_words(lots[0])


def test_a_rig_departing_in_several_lots_is_the_rig():
    d = decide(units_table(2, rig_shift=("R3", LOTS[8:])), LIMITS, NO_FLAGS, reference_lots={"ev": REF})
    rigs = by(d, "rig")
    assert [x.rig for x in rigs] == ["R3"] and rigs[0].cause == "rig"
    cells = by(d, "cell")
    assert {x.lot for x in cells if x.rig == "R3"} == set(LOTS[8:])
    assert all(x.cause == "rig" for x in cells)
    assert not [x for x in by(d, "lot") if x.cause == "lot"]  # one rig's fault never makes a lot
    assert "R3" in evidence_words(rigs[0])


def test_one_unit_is_the_unit_and_makes_no_lot_or_rig():
    d = decide(units_table(3, unit_shift="L09-R2-1", size=1.2), LIMITS, NO_FLAGS, reference_lots={"ev": REF})
    units = by(d, "unit")
    assert [x.unit for x in units] == ["L09-R2-1"] and units[0].cause == "unit"
    assert [x.cause for x in by(d, "cell") if (x.lot, x.rig) == ("L09", "R2")] == ["unit"]
    assert not by(d, "rig") and not [x for x in by(d, "lot") if x.cause == "lot"]


def test_two_unrelated_faults_on_two_rigs_do_not_make_a_lot():
    u = units_table(4)
    u.loc[u["unit"].isin(["L10-R1-1", "L10-R4-2"]), "mean"] += 1.5
    d = decide(u, LIMITS, NO_FLAGS, reference_lots={"ev": REF})
    assert not [x for x in by(d, "lot") if x.cause == "lot"]
    assert {x.unit for x in by(d, "unit")} == {"L10-R1-1", "L10-R4-2"}
    assert all(x.cause == "unit" for x in by(d, "unit"))


def test_flagged_actuations_take_the_recording_or_their_unit_s_cause():
    u = units_table(5, lot_shift="L07")
    flagged = pd.DataFrame([
        dict(actuation_id=1, event=None, statistics=["qc:clipping"], value=0.1, limit=1e-4, site="S", rig="R1",
             lot="L07", unit="L07-R1-1", recorded_at=pd.Timestamp("2026-02-01")),
        dict(actuation_id=2, event="ev", statistics=["event_residual"], value=5.0, limit=2.0, site="S", rig="R2",
             lot="L07", unit="L07-R2-1", recorded_at=pd.Timestamp("2026-02-01")),
        dict(actuation_id=3, event="ev", statistics=["t2"], value=5.0, limit=2.0, site="S", rig="R2", lot="L11",
             unit="L11-R2-1", recorded_at=pd.Timestamp("2026-02-01")),
    ])
    d = {x.actuation_id: x for x in by(decide(u, LIMITS, flagged, reference_lots={"ev": REF}), "actuation")}
    assert d[1].cause == "recording" and "clipping" in evidence_words(d[1])
    assert d[2].cause == "lot"  # its cell is part of a lot that departs on every rig
    assert d[3].cause == "unit"  # a single flag in a quiet cell


def test_normal_data_raise_few_signals():
    raised = [len([x for x in decide(units_table(s), LIMITS, NO_FLAGS, reference_lots={"ev": REF})
                   if x.level in ("lot", "rig", "unit")]) for s in range(10, 20)]
    assert sum(raised) <= 10, raised  # 10 tables of 64 new units, 8 new lots: about one signal per table at most


def backgrounds(seed, *, whine_rig=None, whine_lots=(), one_odd=None):
    """Per-actuation background levels (12 bands, dB): each rig its own spectrum, 0.5 dB noise per band, lot
    to lot 0.2 dB; a whine adds 6 dB in two bands."""
    rng = np.random.default_rng(seed)
    rows, aid = [], 0
    base = {rig: rng.normal(-70, 5, 12) for rig in RIGS}
    t = pd.Timestamp("2026-01-05")
    for lot in LOTS:
        lot_off = rng.normal(0, 0.2, 12)
        for rig in RIGS:
            for _ in range(16):
                aid += 1
                lv = base[rig] + lot_off + rng.normal(0, 0.5, 12)
                if rig == whine_rig and lot in whine_lots:
                    lv[7:9] += 6.0
                if aid == one_odd:
                    lv += 8.0
                rows.append(dict(actuation_id=aid, rig=rig, site="S", lot=lot, recorded_at=t, levels=lv))
                t += pd.Timedelta(minutes=5)
    return pd.DataFrame(rows)


def test_a_rig_whose_background_departs_is_evidence_for_the_rig():
    from analysis.triage import rig_backgrounds

    bg = backgrounds(6, whine_rig="R2", whine_lots=LOTS[9:])
    cells, odd = rig_backgrounds(bg, reference_lots=REF)
    hit = cells[cells["departs"]]
    assert set(zip(hit["lot"], hit["rig"])) == {(lot, "R2") for lot in LOTS[9:]}
    d = decide(units_table(6), LIMITS, NO_FLAGS, reference_lots={"ev": REF}, background=bg)
    rigs = [x for x in by(d, "rig") if x.statistic == "background"]
    assert [x.rig for x in rigs] == ["R2"] and "background" in evidence_words(rigs[0])
    assert set(rigs[0].evidence["background_lots"]) == set(LOTS[9:])


def test_one_recording_whose_background_departs_points_at_the_recording():
    bg = backgrounds(7, one_odd=400)
    row = bg[bg["actuation_id"] == 400].iloc[0]
    flagged = pd.DataFrame([dict(actuation_id=400, event="ev", statistics=["spe"], value=3.0, limit=1.0,
                                 site="S", rig=row["rig"], lot=row["lot"], unit="x", recorded_at=row["recorded_at"])])
    d = decide(units_table(7), LIMITS, flagged, reference_lots={"ev": REF}, background=bg)
    act = by(d, "actuation")
    assert act[0].cause == "recording" and "background" in evidence_words(act[0])
    assert not [x for x in by(d, "rig") if x.statistic == "background"]  # one recording is not a rig


def test_a_signal_without_an_event_is_about_the_rig_background():
    from analysis.triage import subject_words

    assert subject_words("dose_release") == "dose_release"
    for none in (None, "", float("nan")):  # an empty event as the store, pandas or a CSV gives it back
        assert subject_words(none) == "rig background"


def _three_cells_depart(seed):
    u = units_table(seed)
    hit = (u["lot"] == "L10") & u["rig"].isin(["R1", "R2", "R3"])
    u.loc[hit, "mean"] += 1.0  # every unit of three of the lot's four cells
    return u


def test_a_lot_needs_the_same_signature_on_its_rigs():
    # Three of L10's four cells depart. When the same bands carry each departure (one change of the lot) it is
    # the lot; when each cell's departure lies in other bands (three unrelated faults) it is not.
    rng = np.random.default_rng(21)
    shared = rng.normal(size=20)
    same = {rig: shared + 0.3 * rng.normal(size=20) for rig in RIGS}
    own = {rig: np.eye(20)[3 * i] * 2.0 + 0.05 * rng.normal(size=20) for i, rig in enumerate(RIGS)}
    asked = []

    def reader(table):
        def signature_of(event, lot, rig):
            asked.append((event, lot, rig))
            return table[rig]
        return signature_of

    d = decide(_three_cells_depart(22), LIMITS, NO_FLAGS, reference_lots={"ev": REF}, signature_of=reader(same))
    lots = [x for x in by(d, "lot") if x.cause == "lot"]
    assert [x.lot for x in lots] == ["L10"]
    assert set(lots[0].evidence["signature_agreement"]) == {"R1", "R2", "R3"}
    assert min(lots[0].evidence["signature_agreement"].values()) > 0.8
    assert "in the same bands on each" in evidence_words(lots[0])
    assert {a[1] for a in asked} == {"L10"}  # only the cells of a lot that departs on several rigs are read
    d = decide(_three_cells_depart(22), LIMITS, NO_FLAGS, reference_lots={"ev": REF}, signature_of=reader(own))
    assert not [x for x in by(d, "lot") if x.cause == "lot"]
    assert all(x.cause != "lot" for x in by(d, "cell") if x.lot == "L10")
    # without signatures (a store scored before they were kept) the rule is the departure alone
    d = decide(_three_cells_depart(22), LIMITS, NO_FLAGS, reference_lots={"ev": REF},
               signature_of=lambda e, lot, rig: None)
    assert [x.lot for x in by(d, "lot") if x.cause == "lot"] == ["L10"]


def test_signature_agreement_is_each_cosine_against_the_mean_of_the_others():
    from analysis.triage import SIGNATURE_AGREEMENT, agreeing_signatures

    a, b, c = np.array([1.0, 0.0, 0.0]), np.array([2.0, 0.2, 0.0]), np.array([0.0, 0.0, 3.0])
    keep, cos = agreeing_signatures({"R1": a, "R2": b, "R3": c, "R4": None})
    # by hand: R3 against the mean of the unit vectors of R1 and R2, which has no third component -> 0
    ub = b / np.linalg.norm(b)
    rest = (a + ub) / 2
    assert cos["R1"] == pytest.approx(a @ ((ub + c / 3) / 2) / np.linalg.norm((ub + c / 3) / 2))
    assert cos["R3"] == pytest.approx(0.0) and cos["R3"] < SIGNATURE_AGREEMENT
    assert (c / 3) @ rest == pytest.approx(0.0)
    assert keep == ["R1", "R2", "R4"]  # R4 has no signature: nothing speaks against it
    assert agreeing_signatures({"R1": a, "R2": None}) == (["R1", "R2"], {})
