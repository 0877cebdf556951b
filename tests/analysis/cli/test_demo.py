"""`harken demo` end to end on the small scenario: stored signals, the validation report, PLS."""

from __future__ import annotations

import pandas as pd

from analysis.cli.demo import run_demo


def test_demo_runs_end_to_end_and_flags_every_recording_fault(tmp_path):
    lines = []
    table = run_demo(tmp_path, scenario="small", jobs=2, echo=lines.append)
    assert (tmp_path / "results.csv").exists()
    from analysis.store import Store

    with Store.open(f"sqlite:///{tmp_path / 'harken.db'}") as store:
        models = store.models()
        assert sorted(models.loc[models["status"] == "active", "event"]) == ["dose_release", "metering_click"]
        assert len(store.recordings()) == 120
    truth = pd.read_csv(tmp_path / "inbox" / "ground_truth.csv")
    assert len(table) == len(truth)
    for condition in ("clipping", "dropout", "missing_marker"):
        assert table.loc[table["condition"] == condition, "flagged"].all(), condition
    text = "\n".join(lines)
    assert "detection by condition" in text and "signals in the store" in text
    assert "validation against the ground truth" in text and "suggested cause right for" in text
    # the coarse-carrier lot moves its lot-by-lot point on most rigs: a stored lot signal names the lot
    coarse_lot = truth.loc[truth["condition"] == "coarse_carrier", "lot"].iloc[0]
    with Store.open(f"sqlite:///{tmp_path / 'harken.db'}") as store:
        sig = store.signals()
    lot_sig = sig[(sig["level"] == "lot") & (sig["lot"] == coarse_lot)]
    assert len(lot_sig) and (lot_sig["cause"] == "lot").any(), sig[["level", "lot", "cause"]]
    assert f"lot {coarse_lot}, dose_release -> lot" in text
    # PLS from the release sound to the carrier size, held out by lot: the coarse lot reads coarser
    pred = table["dose_release.predicted_carrier_d50_um"]
    assert pred[table["condition"] == "coarse_carrier"].mean() > pred[table["reference"]].mean() + 1.0
    assert "carrier size from the dose-release sound" in text
    # the demo's people, each with the password printed once, which signs them in
    from analysis.store.users import check_password

    printed = {ln.split()[0]: ln.split() for ln in lines if ln.startswith("  demo-")}
    assert {n: v[1] for n, v in printed.items()} == {"demo-tech": "technician", "demo-owner": "method_owner",
                                                     "demo-admin": "admin"}
    with Store.open(f"sqlite:///{tmp_path / 'harken.db'}") as store, store.read() as conn:
        for name, (_, role, password) in printed.items():
            assert check_password(conn, name, password).role == role
    assert len({v[2] for v in printed.values()}) == 3  # random, not one shared password
    # a second run reuses the generated recordings
    again = []
    run_demo(tmp_path, scenario="small", jobs=2, echo=again.append)
    assert again[0].startswith("using the recordings already generated")
    assert any(line.startswith("ingested 120 recordings") for line in again)  # a fresh store each run
