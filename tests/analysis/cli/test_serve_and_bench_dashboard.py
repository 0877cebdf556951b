"""`harken serve` and `harken bench dashboard` on the command line, and the synthetic store the bench fills."""

from __future__ import annotations

from analysis.cli import build_parser
from analysis.cli import serve as serve_cmd
from analysis.cli.bench import _dashboard
from analysis.cli.bench_dashboard import time_views
from analysis.store import Filters, queries
from analysis.store.synthetic import fill_synthetic_store


def test_serve_defaults_and_options():
    a = build_parser().parse_args(["serve"])
    assert (a.store, a.host, a.port) == (None, "127.0.0.1", 8050) and a.func is serve_cmd.run
    a = build_parser().parse_args(["serve", "--store", "sqlite:///x.db", "--port", "9000", "--meeting"])
    assert a.store == "sqlite:///x.db" and a.port == 9000 and a.meeting


def test_bench_dashboard_is_a_bench_command():
    a = build_parser().parse_args(["bench", "dashboard", "--repeat", "1"])
    assert a.command == "bench" and a.bench_command == "dashboard" and a.repeat == 1 and a.func is _dashboard


def test_synthetic_store_and_view_timings(tmp_path):
    from dashboard import create_app

    url = f"sqlite:///{tmp_path / 'b.db'}"
    fill_synthetic_store(url, 400, n_lots=5)
    app = create_app(url, cache_dir=tmp_path / "c")
    with app.harken.store.read() as conn:
        pts = queries.lot_points(conn, "event_spe_ratio", "dose_release", Filters(profile="bench"))
    assert pts["n_all"].sum() == 400 and pts["lot"].nunique() == 5
    t = time_views(app.harken, repeat=1)
    assert set(t) == {"lots", "rigs", "today"}  # the bench times every view it promises (times are not asserted)
