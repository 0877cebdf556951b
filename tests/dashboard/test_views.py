"""Views without a browser: the app factory, layouts built from URLs (deep links), and each view's data and
figure functions as its callback calls them."""

from __future__ import annotations

import pytest

from analysis.cautions import CAUTIONS
from analysis.store import Filters, queries, statistic
from dashboard import create_app
from dashboard.urlstate import parse_query
from dashboard.views import VIEWS, actuation, lots, references, rigs, today, trajectories, view_for_path


def _find(component, cid):
    """The component with id ``cid`` inside a layout tree (or None)."""
    if getattr(component, "id", None) == cid:
        return component
    children = getattr(component, "children", None)
    if children is None:
        return None
    for c in children if isinstance(children, (list, tuple)) else [children]:
        if hasattr(c, "to_plotly_json"):
            hit = _find(c, cid)
            if hit is not None:
                return hit
    return None


def test_import_builds_nothing_and_factory_opens_store(app):
    import dashboard

    assert not [v for v in vars(dashboard).values() if v.__class__.__name__ == "Dash"]
    assert app.server.secret_key
    assert app.harken.store.schema_version() >= 1


def test_factory_refuses_a_missing_store(tmp_path):
    from analysis.store import StoreError

    with pytest.raises(StoreError, match="does not exist"):
        create_app(f"sqlite:///{tmp_path / 'none.db'}", cache_dir=tmp_path / "c", open_reading=True)


def test_secret_key_is_shared_through_the_cache_folder(filled_store, tmp_path):
    url, _ = filled_store
    a = create_app(url, cache_dir=tmp_path / "c", open_reading=True)
    b = create_app(url, cache_dir=tmp_path / "c", open_reading=True)
    assert a.server.secret_key == b.server.secret_key


@pytest.mark.parametrize("path,name", [("/", "today"), ("/today", "today"), ("/lots", "lots"), ("/rigs", "rigs"),
                                       ("/trajectories", "trajectories"), ("/references", "references"),
                                       ("/about", "about"), ("/actuation/12", "actuation")])
def test_paths_route_to_views(path, name):
    view, args = view_for_path(path)
    assert view.NAME == name
    if name == "actuation":
        assert args == {"actuation_id": 12}
    assert view_for_path("/nowhere")[0] is None
    assert view_for_path("/actuation/../etc")[0] is None


def test_every_view_layout_renders(ctx):
    for name, view in VIEWS.items():
        if name == "actuation":
            tree = view.layout(ctx, {}, actuation_id=1)
        else:
            tree = view.layout(ctx, {})
        assert tree.to_plotly_json()


def test_lots_deep_link_sets_the_controls_and_rejects_junk(ctx):
    q = parse_query("?stat=t2_ratio&event=metering_click&site=Lakeside&rig=LS-R1,NOPE&group=pooled&rules=nelson"
                    "&from=2026-03-04&lot=L2604%7CLS-R1")
    tree = lots.layout(ctx, q)
    assert _find(tree, "lots-stat").value == "t2_ratio"
    assert _find(tree, "lots-event").value == "metering_click"
    assert _find(tree, "lots-site").value == ["Lakeside"]
    assert _find(tree, "lots-rig").value == ["LS-R1"]
    assert _find(tree, "lots-group").value == "pooled"
    assert _find(tree, "lots-rules").value == "nelson"
    assert _find(tree, "lots-dates").start_date == "2026-03-04"
    assert _find(tree, "lots-selected").data == "L2604|LS-R1"
    junk = lots.layout(ctx, {"stat": "drop table", "event": "x"})
    assert _find(junk, "lots-stat").value == "event_spe_ratio"
    assert _find(junk, "lots-event").value == "dose_release"


def test_url_state_names_cover_every_control():
    for view in (lots, rigs, trajectories, today, actuation):
        keys = [k for k, _, _ in view.URL_STATE]
        assert len(keys) == len(set(keys))
        assert all(cid.startswith(view.NAME + "-") for _, cid, _ in view.URL_STATE)


def test_lots_chart_data(ctx):
    chart, cloud, stat = lots.lots_chart_data(ctx.store, "event_spe_ratio", "dose_release", Filters())
    assert len(chart.points) == 24 and chart.log
    assert cloud["flagged"].any()
    text = lots.chart_summary(chart, stat)
    assert "fitted to the 3 reference lots" in text
    detail = lots.lot_detail(ctx.store, "L2604|NF-R1")
    table = _find(detail, "lots-detail-table")
    assert len(table.children[1].children) == 5  # 5 actuations per unit and rig (small.toml)


def test_today_data_states_and_causes(ctx):
    data = today.today_data(ctx.store, per_rig=5)
    rows, fl = data["rows"], data["flags"]
    assert rows.groupby("rig").size().max() == 5
    assert set(rows["state"]) <= {"analysed", "flagged", "quality check failed"}
    assert set(fl["cause"]) <= {"recording", "rig", "lot", "unit"}
    qc = fl[fl["statistic"].str.startswith("qc:")]
    assert (qc["cause"] == "recording").all()
    assert len(qc) > 0, "the latest recordings of the small scenario include a quality-check failure"
    assert fl["words"].str.len().gt(10).all()
    tree = today.render_today(data)
    assert _find(tree, "today-flags") is not None


def test_today_lists_stored_signals_with_their_cause_and_next_step(ctx):
    from analysis.triage import NEXT_STEP

    data = today.today_data(ctx.store, per_rig=5)
    sig = data["signals"]
    assert len(sig) and set(sig["level"]) <= {"lot", "rig", "cell", "unit"}
    assert "actuation" not in set(sig["level"])
    # the coarse lot of the small scenario is listed as a lot signal even though few of its actuations flag
    lot = sig[(sig["level"] == "lot") & (sig["lot"] == "L2604")]
    assert len(lot) and (lot["cause"] == "lot").all()
    assert data["counts"]["signals"] == len(sig)
    block = today.render_signals(sig)
    items = _find(block, "today-signals").children
    assert len(items) == min(len(sig), today.MAX_SIGNALS)
    text = str(block.to_plotly_json())
    assert "Suggested cause: lot" in text and NEXT_STEP["lot"] in text
    # flags of the latest recordings take their cause from the stored actuation signals
    with ctx.store.read() as conn:
        stored = queries.signals(conn, levels=("actuation",))
    fl = data["flags"]
    for aid, cause in fl.groupby("actuation_id")["cause"].first().items():
        assert cause in set(stored.loc[stored["actuation_id"] == aid, "cause"]), aid


def test_lots_rings_the_stored_signals_and_lists_units(ctx):
    with ctx.store.read() as conn:
        cells = queries.signals(conn, levels=("cell",))
    cells = cells[(cells["event"] == "dose_release") & (cells["statistic"] == "event_spe_ratio")]
    chart, cloud, st = lots.lots_chart_data(ctx.store, "event_spe_ratio", "dose_release", Filters())
    stored = lots.stored_marks(ctx.store, "event_spe_ratio", "dose_release", None, by_rig=True, rules="we")
    assert set(zip(stored["lot"], stored["rig"])) == set(zip(cells["lot"], cells["rig"]))
    fig = lots.figures.lot_chart_figure(chart, st, cloud=cloud, stored=stored)
    ring = [t for t in fig.data if t.name == "stored signal"]
    assert len(ring) == 1 and len(ring[0].x) == len(stored)
    assert all("suggested cause:" in t for t in ring[0].text)
    assert not [t for t in fig.data if t.name == "signal (limit or run rule)"]  # no second computation drawn
    assert "stored signals" in lots.chart_summary(chart, st, stored).lower()
    # a statistic the store keeps no signals for: the chart's own checks, said so
    assert lots.stored_marks(ctx.store, "t2_ratio", "dose_release", None, by_rig=True, rules="we") is None
    pooled = lots.stored_marks(ctx.store, "event_spe_ratio", "dose_release", None, by_rig=False, rules="we")
    assert set(pooled["rig"]) <= {"all rigs"} and "L2604" in set(pooled["lot"])
    detail = lots.lot_detail(ctx.store, "L2604|NF-R1", profile="demo-dpi", event="dose_release")
    units = _find(detail, "lots-units")
    assert units is not None and len(units.children[1].children) >= 1


def test_the_units_list_shows_the_resonance_block_and_rings_the_dented_unit(ctx):
    # The small scenario dents L2605-01's cavity by +6 %: its event residual stays within its limit, its resonance
    # T² does not, and the Units list reached from the lot says so on its row.
    detail = lots.lot_detail(ctx.store, "L2605|all rigs", profile="demo-dpi", event="dose_release")
    tbl = _find(detail, "lots-units")
    head = [th.children for th in tbl.children[0].children.children]
    assert "Resonance T²" in head and "Its limit" in head
    rows = {tr.children[0].children: tr for tr in tbl.children[1].children}
    assert rows["L2605-01"].className == "row-flagged"
    col = head.index("Resonance T²")
    value, limit = (float(rows["L2605-01"].children[i].children) for i in (col, col + 1))
    assert value > limit
    assert all(tr.className is None for u, tr in rows.items() if u != "L2605-01")


def test_rigs_shows_each_rig_background_over_its_lots(ctx):
    cells = rigs.fingerprint_data(ctx.store, "demo-dpi")
    assert len(cells) and set(cells.columns) >= {"lot", "rig", "median", "limit", "departs"}
    with ctx.store.read() as conn:
        lots_new = set(queries.lot_names(conn)) - set(queries.reference_lots(conn, "demo-dpi", "dose_release"))
    assert set(cells["lot"]) <= lots_new and (cells["limit"] > 0).all()
    fig = rigs.figures.rig_fingerprint_figure(cells)
    lines = [t for t in fig.data if t.mode == "lines+markers"]
    assert len(lines) == cells["rig"].nunique()
    assert rigs.figures.rig_fingerprint_figure(None).layout.annotations  # an empty store says why
    one_site = cells["site"].iloc[0]
    assert set(rigs.fingerprint_data(ctx.store, "demo-dpi", [one_site])["site"]) == {one_site}


def test_today_shows_quarantined_recordings(store_copy, tmp_path):
    from analysis.store import Store

    with Store.open(store_copy, create=False) as s:
        c = s.claim("f" * 64, "broken.flac", 10, worker="t", claim_timeout_s=60)
        s.commit_quarantine(c.recording_id, worker="t", reason="not a readable audio file (truncated)",
                            quarantine_path=str(tmp_path / "broken.flac"), sidecar_json='{"rig": "NF-R1"}')
    app = create_app(store_copy, cache_dir=tmp_path / "c", open_reading=True)
    data = today.today_data(app.harken.store)
    assert data["counts"]["quarantined"] == 1
    q = data["quarantine"].iloc[0]
    assert q["reason"].startswith("not a readable") and q["rig"] == "NF-R1"


def test_rigs_data_and_numbers(ctx):
    data = rigs.rigs_data(ctx.store, "event_spe_ratio", "dose_release", Filters())
    s = data["summary"]
    assert len(s) == 4 and s["offset_sd"].notna().all()
    assert data["reference"]["lots"] == ["L2601", "L2602", "L2603"]
    block = rigs.numbers_table(data, statistic("event_spe_ratio"))
    assert "ISO 5725-2" in _find(block, "rigs-precision").children


def test_trajectories_data_and_figures(ctx):
    assert trajectories.parse_ids("3, 5 x 7;9") == [3, 5, 7, 9]
    data = trajectories.trajectories_data(ctx, "demo-dpi", "metering_click", lots_=["L2606"])
    assert len(data["trajs"]) == 20  # 4 units x 5 actuations (small.toml)
    figs = trajectories.trajectory_figures(data, x=0, y=1)
    assert figs["plane"].data and "20 actuations" in figs["note"]
    none = trajectories.trajectory_figures(trajectories.trajectories_data(ctx, "demo-dpi", "metering_click"))
    assert "Choose lots" in none["time"].layout.annotations[0].text


def test_actuation_view_figures(ctx):
    with ctx.store.read() as conn:
        fl = queries.flags(conn, actuation_ids=range(1, 121))
    aid = int(fl.loc[fl["statistic"] == "spe", "actuation_id"].iloc[0])
    f = actuation.actuation_figures(ctx, aid, "dose_release")
    assert f["slice_options"][0]["value"] == "worst"
    assert f["waveform"].data and f["spectrogram"].data[0].type == "heatmap"
    assert len(f["contributions"].data) == 2
    f2 = actuation.actuation_figures(ctx, aid, "dose_release", "3")
    assert "slice 3" in f2["bands"].layout.title.text
    tree = actuation.layout(ctx, {}, actuation_id=aid)
    assert _find(tree, "actuation-audio-this").src == f"/audio/{aid}.wav"
    assert _find(tree, "actuation-audio-ref") is not None
    assert "No actuation" in str(actuation.layout(ctx, {}, actuation_id=10**8).to_plotly_json())


def test_about_carries_the_cautions(ctx):
    from dashboard.views import about

    tree = about.layout(ctx, {})
    texts = [li.children for li in _find(tree, "about-cautions").children]
    assert texts == list(CAUTIONS)
    assert "playback starts at a low volume" in CAUTIONS[3]


def test_reference_build_runs_as_a_job_function(store_copy, tmp_path):
    from analysis.store import Store

    assert references.check_build("demo-dpi", ["L2601"], ["metering_click"], " ").startswith("Sign in as a method")
    seen = []
    made = references.build_models(store_copy, None, "demo-dpi", ["L2601", "L2602", "L2603"], ["metering_click"],
                                   "tester", progress=lambda i, n, m: seen.append((i, n)))
    assert seen[0] == (0, 1) and seen[-1] == (1, 1)
    assert references._f(made[0], "version") == 2
    with Store.open(store_copy, create=False) as s:
        m = s.models(event="metering_click")
        assert list(m["status"]) == ["active", "pending"]  # a dashboard build waits for its signed approval
        assert (s.audit_log()["person"] == "tester").any()


def test_cached_aggregates_follow_the_store(store_copy, tmp_path):
    from analysis.store import summaries
    from analysis.store.schema import flags, utc_now

    app = create_app(store_copy, cache_dir=tmp_path / "c", open_reading=True)
    ctx = app.harken
    args = (ctx.store, "t2_ratio", "metering_click", Filters())
    first, _, _ = lots.lots_chart_data(*args, cache=ctx.drill_cache)
    again, _, _ = lots.lots_chart_data(*args, cache=ctx.drill_cache)
    assert again.points["n_flagged"].sum() == first.points["n_flagged"].sum()
    with ctx.store.read() as conn:
        clean = queries.lot_actuations(conn, "L2601")
    aid = int(clean.loc[clean["n_flags"] == 0, "actuation_id"].iloc[0])
    with ctx.store.write() as conn:  # a new quality-check flag: the store's fingerprint changes
        conn.execute(flags.insert().values(actuation_id=aid, model_id=None, event=None, statistic="qc:test",
                                           value=1.0, limit_value=0.5, reason="test", created_at=utc_now()))
        summaries.refresh_for(conn, [aid])  # as every write of the store's own does, in its transaction
    after, _, _ = lots.lots_chart_data(*args, cache=ctx.drill_cache)
    assert after.points["n_flagged"].sum() == first.points["n_flagged"].sum() + 1


def test_dashboard_imports_no_worker_and_builds_no_app():
    import subprocess
    import sys

    code = ("import sys, dashboard, dashboard.views;"
            "print('analysis.worker' in sys.modules, "
            "any(type(v).__name__ == 'Dash' for v in vars(dashboard).values()))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True).stdout.split()
    assert out == ["False", "False"]


def test_an_unreadable_model_degrades_to_a_note(ctx):
    def broken(model_id):
        from analysis.errors import ModelError

        raise ModelError("reference model is incomplete or damaged (test)")

    ctx.store.load_model = broken
    ctx.store.active_models = lambda profile: broken(0)
    ctx.extra.pop("models", None)
    f = actuation.actuation_figures(ctx, 104, "dose_release")
    assert "cannot be read" in f["note"] and f["waveform"].data
    t = trajectories.trajectory_figures(trajectories.trajectories_data(ctx, "demo-dpi", "dose_release",
                                                                       lots_=["L2606"]))
    assert "cannot be read" in t["note"]


def test_today_and_the_demo_name_a_background_signal_alike():
    import pandas as pd

    from analysis.cli.demo import signal_lines

    sig = pd.DataFrame([{"level": "rig", "lot": None, "rig": "R-9", "unit": None, "site": "S", "event": None,
                         "statistic": "background", "cause": "rig", "evidence": "its background departs",
                         "first": "2026-01-02", "last": "2026-01-03", "active": True}])
    import json

    import plotly

    rendered = json.dumps(today.render_signals(sig), cls=plotly.utils.PlotlyJSONEncoder)
    assert "rig background" in rendered
    assert any("rig R-9, rig background -> rig" in line for line in signal_lines(sig))
