"""The per-day summaries (analysis.store.summaries): kept by the worker, re-scoring and activation in step with
the raw rows, checked by ``harken check summaries``, and sampled the way the module says."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sqlalchemy import text

from analysis.references import rescore
from analysis.store import Filters, Store, queries, summaries
from analysis.store.synthetic import fill_synthetic_store
from tests.analysis.conftest import run_cli


def test_the_worker_keeps_them_equal_to_the_raw_rows(small_store):
    url, files = small_store  # ingested by two worker processes, then a reference built and everything scored
    with Store.open(url, files_dir=files, create=False) as store, store.read() as conn:
        assert summaries.differences(conn) == []
        n = conn.execute(text("SELECT count(*) FROM actuations")).scalar()
        assert conn.execute(text("SELECT sum(n_all) FROM cell_counts")).scalar() == n
        # every statistic of every event under every model that scored it has its rows
        stats = conn.execute(text("SELECT DISTINCT statistic FROM stat_summaries")).scalars().all()
        assert {"t2_ratio", "spe_ratio", "onset_s", "peak_dbfs"} <= set(stats)


def test_the_sums_are_the_numpy_sums_of_the_export(filled_store):
    # An independent computation: numpy over the exported rows, per lot and rig (over units and days).
    url, _ = filled_store
    with Store.open(url, create=False) as store:
        ex = store.export_actuations()
        with store.read() as conn:
            got = pd.read_sql(text(
                "SELECT l.name AS lot, r.name AS rig, sum(s.n) AS n, sum(s.s1) AS s1, sum(s.s2) AS s2 "
                "FROM stat_summaries s JOIN lots l ON l.id = s.lot_id JOIN rigs r ON r.id = s.rig_id "
                "WHERE s.event = 'dose_release' AND s.statistic = 'peak_dbfs' AND s.model_id = 0 "
                "GROUP BY l.name, r.name"), conn).set_index(["lot", "rig"])
    ok = ex[ex["passed_qc"].astype(bool)]
    v = ok["dose_release.peak_dbfs"].astype(float)
    want = pd.DataFrame({"n": v.groupby([ok["lot"], ok["rig"]]).count(),
                         "s1": v.groupby([ok["lot"], ok["rig"]]).sum(),
                         "s2": (v * v).groupby([ok["lot"], ok["rig"]]).sum()})
    m = want.join(got.add_suffix("_got"), how="inner")
    assert len(m) == len(want) > 10
    assert (m["n"] == m["n_got"]).all()
    np.testing.assert_allclose(m["s1_got"], m["s1"], rtol=1e-12)
    np.testing.assert_allclose(m["s2_got"], m["s2"], rtol=1e-12)


def test_rescore_and_activation_keep_them_in_step(store_copy):
    with Store.open(store_copy, create=False) as store:
        models = store.models()
        old = models[(models["event"] == "dose_release") & (models["status"] == "active")].iloc[0]
        model = store.load_model(int(old["id"]))
        meta = {"reference_lots": ["L2601", "L2602"], "n_recordings": 10}
        new_id, _ = store.insert_model(profile="demo-dpi", event="dose_release", model=model, meta=meta,
                                       created_by="test")  # active now: the old version's flags stop counting
        with store.read() as conn:
            assert summaries.differences(conn) == []
            before = conn.execute(text("SELECT sum(n_model_flagged) FROM cell_counts")).scalar()
        assert rescore(store, "demo-dpi", events=["dose_release"]) > 0  # scores under the new version
        with store.read() as conn:
            assert summaries.differences(conn) == []
            rows = conn.execute(text("SELECT count(*) FROM stat_summaries WHERE model_id = :m"), {"m": new_id}).scalar()
            assert rows > 0
            after = conn.execute(text("SELECT sum(n_model_flagged) FROM cell_counts")).scalar()
        assert after >= before  # the new version's flags count once it has scored
        store.activate_model(int(old["id"]), person="test")  # back to the old version
        with store.read() as conn:
            assert summaries.differences(conn) == []


def test_the_check_names_a_changed_row_and_repair_rewrites_it(store_copy):
    with Store.open(store_copy, create=False) as store, store.write() as conn:
        conn.execute(text("UPDATE stat_summaries SET n = n + 1 WHERE rowid = (SELECT min(rowid) FROM stat_summaries "
                          "WHERE statistic = 'onset_s')"))
        conn.execute(text("DELETE FROM cell_counts WHERE rowid = (SELECT min(rowid) FROM cell_counts)"))
    rc, out, _ = run_cli("check", "summaries", "--store", store_copy)
    assert rc == 1
    assert "stat_summaries: n of (event=" in out and "statistic=onset_s" in out
    assert "cell_counts: missing row" in out
    assert "2 difference(s)" in out
    rc, out, _ = run_cli("check", "summaries", "--store", store_copy, "--repair")
    assert rc == 0 and "rewrote the summaries" in out
    rc, out, _ = run_cli("check", "summaries", "--store", store_copy)
    assert rc == 0 and "they agree" in out


def test_the_sample_is_the_lowest_keys_of_each_stratum_and_every_flagged_one(tmp_path):
    url = f"sqlite:///{tmp_path / 's.db'}"
    fill_synthetic_store(url, 6000, n_lots=5)  # 150 actuations per lot and rig: more than a stratum keeps
    with Store.open(url, create=False) as store, store.read() as conn:
        acts = pd.read_sql(text("SELECT id, profile, lot_id, rig_id FROM actuations"), conn)
        flagged = set(conn.execute(text("SELECT DISTINCT actuation_id FROM flags")).scalars())
        got = pd.read_sql(text("SELECT actuation_id, profile, lot_id, rig_id, rank FROM cloud_sample"), conn)
        assert summaries.differences(conn) == []
    # Knuth's multiplicative hash, computed here in Python integers (from memory: 2654435761, modulo 2^32).
    acts["key"] = [(int(i) * 2654435761) % 2**32 for i in acts["id"]]
    acts["flagged"] = acts["id"].isin(flagged)
    k = summaries.SAMPLE_PER_STRATUM
    strata = ["profile", "lot_id", "rig_id"]
    plain = acts[~acts["flagged"]]
    assert (plain.groupby(strata).size() > k).all()
    want = plain.sort_values(["key", "id"]).groupby(strata, sort=False).head(k)
    kept = got[got["rank"] > 0]
    assert set(kept["actuation_id"]) == set(want["id"])
    for _, g in kept.groupby(strata):
        assert sorted(g["rank"]) == list(range(1, k + 1))
    # every flagged actuation, ranked -1, -2, ... from the newest within its stratum
    marked = got[got["rank"] < 0]
    assert set(marked["actuation_id"]) == flagged
    for _, g in marked.groupby(strata):
        assert list(g.sort_values("actuation_id", ascending=False)["rank"]) == list(range(-1, -len(g) - 1, -1))
    # an even sample: the kept ids of a stratum spread over its whole run of ids, not its first ones
    span = kept.groupby(strata)["actuation_id"].agg(["min", "max"])
    whole = acts.groupby(strata)["id"].agg(["min", "max"])
    assert ((span["max"] - span["min"]) > 0.8 * (whole["max"] - whole["min"])).all()


def test_the_cloud_and_histogram_read_the_sample_beyond_their_budget(tmp_path):
    url = f"sqlite:///{tmp_path / 's.db'}"
    fill_synthetic_store(url, 6000, n_lots=5)
    f = Filters(profile="bench")
    with Store.open(url, create=False) as store, store.read() as conn:
        every = queries.actuation_cloud(conn, "t2_ratio", "dose_release", f, max_points=10_000)
        some = queries.actuation_cloud(conn, "t2_ratio", "dose_release", f, max_points=400, max_flagged=80)
        edges, hist = queries.rig_histogram(conn, "t2_ratio", "dose_release", f, n_bins=10, max_values=400)
    assert len(every) == 6000
    assert every["flagged"].sum() > 80
    unflagged = some[~some["flagged"]]
    # 5 lots x 8 rigs = 40 strata share 400 points: 10 each, every stratum present
    assert unflagged.groupby(["lot", "rig"]).size().between(8, 10).all()
    assert unflagged.groupby(["lot", "rig"]).ngroups == 40
    # 80 flagged over 40 strata: the newest 2 of each (the ones flagged in the full cloud)
    fl = some[some["flagged"]]
    assert len(fl) <= 80 and fl.groupby(["lot", "rig"]).size().max() <= 2
    assert set(fl["actuation_id"]) <= set(every.loc[every["flagged"], "actuation_id"])
    # the sample's 400, less its actuations that failed their quality checks (about 1 %: they give no value)
    assert 370 <= hist["count"].sum() <= 400 and len(edges) == 11
