"""The signals table: kept by the worker's commits and by re-scoring, read by the export, the dashboard and
`harken validate` (analysis.store.signals, analysis.store.queries.signals)."""

from __future__ import annotations

import json

import pandas as pd
import pytest

from analysis.store import Store, queries
from tests.analysis.conftest import run_cli

REQUIRED = ["level", "event", "statistic", "value", "limit", "rule", "site", "rig", "lot", "unit", "cause",
            "evidence", "model_version", "active"]


def test_the_shared_store_holds_signals_at_every_level(small_store, small_scenario):
    url, files = small_store
    truth = pd.read_csv(small_scenario / "ground_truth.csv")
    coarse = truth.loc[truth["condition"] == "coarse_carrier", "lot"].iloc[0]
    with Store.open(url, files_dir=files) as store:
        sig = store.signals()
        exported = store.export_actuations()
    assert set(sig["level"]) >= {"actuation", "cell", "lot", "unit"}
    lot = sig[(sig["level"] == "lot") & (sig["lot"] == coarse)]
    assert len(lot) and set(lot["cause"]) == {"lot"}, sig[["level", "lot", "cause"]]
    assert lot["evidence"].str.contains("departs on").all()
    assert lot["model_version"].notna().all()
    # an actuation signal for every flagged actuation; quality-check failures point at the recording
    acts = sig[sig["level"] == "actuation"]
    assert set(acts["actuation_id"]) == set(exported.loc[exported["flagged"], "actuation_id"])
    qc = exported.loc[exported["qc_failed"] != "", "actuation_id"]
    assert set(acts.loc[acts["actuation_id"].isin(qc), "cause"]) == {"recording"}
    # the export names the cause of flagged actuations only
    assert (exported.loc[exported["flagged"], "cause"] != "").all()
    assert (exported.loc[~exported["flagged"], "cause"] == "").all()
    assert sig["active"].all() and sig["first_seen"].notna().all()


def test_the_worker_updates_signals_as_recordings_arrive(store_url, small_scenario, tmp_path):
    # References first, then the rest through the worker: the lot signal comes from the worker's commits alone.
    from analysis.references import build_reference
    from analysis.worker import ingest_paths

    truth = pd.read_csv(small_scenario / "ground_truth.csv")
    ref = truth["reference"].astype(str).str.lower().eq("true")
    ingest_paths([small_scenario / f for f in truth.loc[ref, "file"]], store_url, 1, files_dir=tmp_path,
                 progress=False)
    with Store.open(store_url, files_dir=tmp_path) as store:
        build_reference(store, "demo-dpi", None, sorted(set(truth.loc[ref, "lot"])), created_by="test")
        before = store.signals()
    assert not len(before[before["level"].isin(["lot", "cell"])])  # the reference lots are not judged
    ingest_paths([small_scenario / f for f in truth.loc[~ref, "file"]], store_url, 1, files_dir=tmp_path,
                 progress=False)
    coarse = truth.loc[truth["condition"] == "coarse_carrier", "lot"].iloc[0]
    with Store.open(store_url, files_dir=tmp_path) as store:
        after = store.signals()
        again = store.refresh_signals("demo-dpi")  # nothing changed since the last commit: nothing new
        kept = store.signals()
    assert ((after["level"] == "lot") & (after["lot"] == coarse) & (after["cause"] == "lot")).any()
    assert again["new"] == 0 and again["ended"] == 0 and again["active"] == len(after)
    pd.testing.assert_series_equal(after.set_index("signal_id")["first_seen"].sort_index(),
                                   kept.set_index("signal_id")["first_seen"].sort_index())


def test_a_new_reference_ends_signals_it_no_longer_raises_and_keeps_them(store_copy, filled_store):
    _, info = filled_store
    truth = info["truth"]
    coarse = truth.loc[truth["condition"] == "coarse_carrier", "lot"].iloc[0]
    from analysis.references import build_reference

    with Store.open(store_copy) as store:
        old = store.signals()
        old_lot = old[(old["level"] == "lot") & (old["lot"] == coarse)]
        assert len(old_lot)
        # the coarse lot becomes a reference lot: it is no longer judged, its signal ends but stays stored
        build_reference(store, info["profile"], None, sorted(set(info["reference_lots"]) | {coarse}),
                        created_by="test")
        now = store.signals(active_only=False)
    ended = now[now["signal_id"].isin(old_lot["signal_id"])]
    assert len(ended) == len(old_lot) and not ended["active"].any()
    assert not len(now[(now["active"]) & (now["level"] == "lot") & (now["lot"] == coarse)])


def test_export_signals_writes_the_columns_in_csv_and_parquet(small_store, tmp_path):
    url, files = small_store
    out = tmp_path / "signals.csv"
    code, text, _ = run_cli("export", "signals", "--store", url, "--out", out)
    assert code == 0 and "rows" in text
    got = pd.read_csv(out)
    assert set(REQUIRED) <= set(got.columns)
    with Store.open(url, files_dir=files) as store:
        assert len(got) == len(store.signals())
    pq = tmp_path / "signals.parquet"
    code, _, _ = run_cli("export", "signals", "--store", url, "--format", "parquet", "--out", pq)
    assert code == 0 and len(pd.read_parquet(pq)) == len(got)


def test_units_table_gives_each_unit_against_its_limit(small_store, small_scenario):
    url, files = small_store
    truth = pd.read_csv(small_scenario / "ground_truth.csv")
    coarse = truth.loc[truth["condition"] == "coarse_carrier", "lot"].iloc[0]
    with Store.open(url, files_dir=files) as store, store.read() as conn:
        units = queries.units_table(conn, "demo-dpi", "dose_release", lot=coarse)
        sig = queries.signals(conn, levels=("unit",))
        none = queries.units_table(conn, "demo-dpi", "no_such_event", lot=coarse)
    assert set(units["unit"]) == set(truth.loc[truth["lot"] == coarse, "unit"])
    assert (units["limit"] > 1.0).all() and (units["n"] > 0).all()
    flagged = set(sig.loc[(sig["event"] == "dose_release") & (sig["statistic"] == "event_spe_ratio")
                          & (sig["lot"] == coarse), "unit"])
    assert flagged <= set(units.loc[units["signal"], "unit"])
    assert none.empty


def test_damaged_cavity_units_stand_out_on_the_resonance_block(small_store, small_scenario):
    # The small scenario dents one unit's cavity by +6 % and another's by +2 % (ground truth); the third-octave
    # bands cannot see either. At the unit level the resonance block's T² of the unit's mean features: the
    # +6 % unit signals with the unit as its cause and the evidence names the frequency's rise; both damaged
    # units lie above every normal new unit (the +2 % one, about 3 unit SDs of the device's natural spread, stays
    # below the limit that 12 reference units allow, so it does not signal).
    url, files = small_store
    truth = pd.read_csv(small_scenario / "ground_truth.csv")
    dented = truth[truth["condition"] == "damaged_cavity"].groupby("unit")["severity"].first()
    big, small = dented.idxmax(), dented.idxmin()
    assert (dented[big], dented[small]) == (6.0, 2.0)
    with Store.open(url, files_dir=files) as store, store.read() as conn:
        sig = queries.signals(conn, levels=("unit",))
        units = queries.units_table(conn, "demo-dpi", "dose_release", statistic="resonance_t2")
    res = sig[sig["statistic"] == "resonance_t2"]
    assert list(res["unit"]) == [big], res[["unit", "value", "limit"]]
    row = res.iloc[0]
    assert row["cause"] == "unit" and row["value"] > row["limit"]
    pct = float(row["evidence"].split("peak frequency in 900-1600 Hz ")[1].split(" %")[0])
    assert 4.0 < pct < 8.0, row["evidence"]  # +6 % and the unit's own place in the natural spread
    new = units[~units["reference"]].set_index("unit")
    normal = new.drop(index=[big, small])
    assert new.at[small, "value"] > normal["value"].max() and new.at[big, "signal"]
    assert not normal["signal"].any()


def test_validate_reports_in_json_and_html(small_store, small_scenario, tmp_path):
    url, _ = small_store
    html = tmp_path / "v.html"
    code, text, _ = run_cli("validate", "--truth", small_scenario / "ground_truth.csv", "--store", url, "--json",
                            "--out", html)
    assert code == 0
    rep = json.loads(text)
    assert set(rep) >= {"conditions", "false_alarms", "triage"}
    for cond in ("coarse_carrier", "damaged_cavity", "rig_squeal", "clipping"):
        assert set(rep["conditions"][cond]) >= {"actuations", "flagged", "units", "units_flagged", "lots",
                                                "lots_signalled"}
    assert rep["conditions"]["coarse_carrier"]["lots_signalled"] == rep["conditions"]["coarse_carrier"]["lots"]
    assert rep["conditions"]["clipping"]["caught"] == rep["conditions"]["clipping"]["total"]
    assert set(rep["false_alarms"]) >= {"actuation_rate", "unit_rate"}
    assert set(rep["triage"]) >= {"right", "total", "matrix"} and rep["triage"]["total"] > 0
    assert rep["triage"]["matrix"]["recording"]["recording"] > 0
    page = html.read_text()
    assert "<script" not in page and "Suggested cause against the true cause" in page


def test_validate_refuses_a_truth_table_without_causes(small_store, tmp_path):
    url, _ = small_store
    bad = tmp_path / "truth.csv"
    bad.write_text("file,condition\na.flac,normal\n")
    code, _, err = run_cli("validate", "--truth", bad, "--store", url)
    assert code != 0 and "truth.csv" in err and "cause" in err
    wrong = tmp_path / "wrong.csv"
    wrong.write_text("file,condition,cause\nnot-in-store.flac,normal,\n")
    code, _, err = run_cli("validate", "--truth", wrong, "--store", url)
    assert code != 0 and "none of its 1 files" in err


@pytest.mark.parametrize("level", ["bogus"])
def test_unknown_signal_levels_are_refused(small_store, level):
    url, files = small_store
    from analysis.store import StoreError

    with Store.open(url, files_dir=files) as store, store.read() as conn, pytest.raises(StoreError, match="bogus"):
        queries.signals(conn, levels=(level,))


def test_rescore_with_nothing_to_score_still_fills_the_signals(store_copy):
    # as after an upgrade to the signals revision: the table is empty until something refreshes it
    from analysis.store.schema import signals as table

    with Store.open(store_copy) as store:
        n = len(store.signals())
        with store.write() as conn:
            conn.execute(table.delete())
        assert store.signals().empty
    code, _, _ = run_cli("rescore", "--store", store_copy)
    with Store.open(store_copy) as store:
        assert code == 0 and len(store.signals()) == n > 0
