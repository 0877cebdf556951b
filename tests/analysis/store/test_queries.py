"""The read API's SQL aggregates against pandas over the store's own per-actuation export (an independent path)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis.store import Filters, Store, queries, statistic


@pytest.fixture(scope="module")
def conn_and_export(filled_store):
    url, info = filled_store
    store = Store.open(url, create=False)
    export = store.export_actuations()
    with store.read() as conn:
        yield store, conn, export
    store.close()


def test_lot_points_match_pandas_groupby(conn_and_export):
    _, conn, ex = conn_and_export
    got = queries.lot_points(conn, "onset_s", "dose_release")
    ok = ex[ex["passed_qc"].astype(bool)]  # values only from actuations that passed their quality checks
    want = ok.groupby(["lot", "rig"])["dose_release.onset_s"].agg(["mean", "std", "count"]).reset_index()
    assert len(got) == 24  # every cell: 6 lots x 4 rigs in the small scenario (demo_data/scenarios/small.toml)
    n_all = ex.groupby(["lot", "rig"]).size()
    assert (got.set_index(["lot", "rig"]).loc[n_all.index, "n_all"] == n_all).all()
    with_values = got[got["n"] > 0]  # a cell whose actuations all failed QC (the clipping day) has no value
    assert len(with_values) < len(got)
    m = with_values.merge(want, on=["lot", "rig"])
    assert len(m) == len(want) == len(with_values)
    np.testing.assert_allclose(m["value"], m["mean"], rtol=1e-9)
    np.testing.assert_allclose(m["sd"], m["std"], rtol=1e-6)
    assert (m["n"] == m["count"]).all()
    assert list(got["first"]) == sorted(got["first"])


def test_log_statistic_is_geometric_mean(conn_and_export):
    _, conn, ex = conn_and_export
    got = queries.lot_points(conn, "event_spe_ratio", "dose_release", by_rig=False).set_index("lot")
    col = ex["dose_release.event_spe_ratio"].where(ex["passed_qc"].astype(bool))
    want = np.exp(np.log(col.where(col > 0)).groupby(ex["lot"]).mean())
    np.testing.assert_allclose(got.loc[want.index, "value"], want, rtol=1e-9)
    assert set(got["rig"]) == {"all rigs"}


def test_lot_points_flag_counts_match_export(conn_and_export):
    _, conn, ex = conn_and_export
    got = queries.lot_points(conn, "t2_ratio", "metering_click").set_index(["lot", "rig"])
    want = ex.groupby(["lot", "rig"])["flagged"].sum()
    assert (got.loc[want.index, "n_flagged"] == want).all()


def test_filters_restrict_rows(conn_and_export):
    _, conn, ex = conn_and_export
    f = Filters(sites=("Lakeside",))
    got = queries.lot_points(conn, "onset_s", "dose_release", f)
    assert set(got["site"]) == {"Lakeside"}
    day = pd.Timestamp("2026-03-09").date()
    got = queries.lot_points(conn, "onset_s", "dose_release", Filters(date_from=day, date_to=day))
    assert set(got["lot"]) == {"L2604"}  # the lot recorded on 2026-03-09 (small.toml)


def test_rig_summary_rates_match_the_export(conn_and_export):
    _, conn, ex = conn_and_export
    got = queries.rig_summary(conn, "t2_ratio", "metering_click").set_index("rig")
    want = ex.groupby("rig")["flagged"].agg(["sum", "mean"])  # the export decides "flagged" in pandas
    assert (got.loc[want.index, "flagged"] == want["sum"]).all() and want["sum"].sum() > 0
    np.testing.assert_allclose(got.loc[want.index, "flags_per_1000"], 1000 * want["mean"])
    qc_failed = (~ex["passed_qc"].astype(bool)).groupby(ex["rig"]).sum()
    assert (got.loc[qc_failed.index, "qc_failed"] == qc_failed).all()


def test_rig_histogram_counts_every_value(conn_and_export):
    _, conn, ex = conn_and_export
    edges, hist = queries.rig_histogram(conn, "onset_s", "dose_release", n_bins=12)
    assert len(edges) == 13
    per_rig = hist.groupby("rig")["count"].sum()
    want = ex[ex["passed_qc"].astype(bool)].groupby("rig")["dose_release.onset_s"].count()
    assert (per_rig.loc[want.index] == want).all()
    assert hist["bin"].between(0, 11).all()


def test_actuation_cloud_keeps_flagged_and_thins_the_rest(conn_and_export):
    _, conn, ex = conn_and_export
    full = queries.actuation_cloud(conn, "t2_ratio", "metering_click", max_points=10_000)
    assert len(full) == ex["metering_click.t2_ratio"].notna().sum()
    thin = queries.actuation_cloud(conn, "t2_ratio", "metering_click", max_points=20)
    n_flagged = int(full["flagged"].sum())
    assert set(full.loc[full["flagged"], "actuation_id"]) <= set(thin["actuation_id"])
    # about 20 others: with more lots x rigs (24) than points, a hash-chosen share of 20/24 of the strata
    assert len(thin) - n_flagged <= 30
    assert len(thin) < len(full)


def test_latest_per_rig_are_the_latest(conn_and_export):
    _, conn, ex = conn_and_export
    got = queries.latest_per_rig(conn, per_rig=3)
    assert got.groupby("rig").size().max() == 3
    ids = set(got["actuation_id"])
    for _rig, g in ex.groupby("rig"):
        order = g.assign(t=pd.to_datetime(g["recorded_at"], utc=True)).sort_values(["t", "actuation_id"])
        assert set(order["actuation_id"].tail(3)) <= ids


def test_typical_reference_actuation_is_nearest_the_envelope_centre(conn_and_export):
    _, conn, ex = conn_and_export
    ref_lots = queries.reference_lots(conn, "demo-dpi", "dose_release")
    assert ref_lots == ["L2601", "L2602", "L2603"]  # small.toml's reference_lots
    cand = ex[ex["lot"].isin(ref_lots) & ex["passed_qc"].astype(bool)]
    want = int(cand.loc[cand["dose_release.trajectory_distance"].idxmin(), "actuation_id"])
    assert queries.typical_reference_actuation(conn, "demo-dpi", "dose_release") == want


def test_triage_evidence_counts(conn_and_export):
    _, conn, ex = conn_and_export
    ev = queries.triage_evidence(conn, ["L2606"], ["LS-R1"])
    assert {"L2606"} <= set(ev["lot"])
    assert (ev.groupby("lot")["actuations"].sum() == ex[ex["lot"].isin(set(ev["lot"]))].groupby("lot").size()).all()


def test_actuation_detail_and_flags(conn_and_export):
    _, conn, ex = conn_and_export
    aid = int(ex.loc[ex["flagged"], "actuation_id"].iloc[0])
    d = queries.actuation_detail(conn, aid)
    assert d["id"] == aid and d["archive_path"]
    assert set(d["events"]["name"]) == {"metering_click", "dose_release"}
    fl = queries.flags(conn, actuation_ids=[aid])
    assert len(fl) >= 1 and (fl["actuation_id"] == aid).all()
    assert queries.actuation_detail(conn, 10**9) is None


def test_statistic_rejects_unknown_key():
    with pytest.raises(ValueError, match="statistic must be one of .* got 'nope'"):
        statistic("nope")
