"""`harken serve` and `harken bench dashboard` arguments, wired into a parser like analysis/cli.py's."""

from __future__ import annotations

import argparse

from dashboard import serve_cli
from dashboard.bench import fill_synthetic_store, time_views


def _parser():
    parser = argparse.ArgumentParser(prog="harken")
    sub = parser.add_subparsers(dest="command", required=True)
    bench = sub.add_parser("bench")
    bsub = bench.add_subparsers(dest="bench_command", required=True)
    bsub.add_parser("score")
    serve_cli.register(sub)
    return parser


def test_serve_defaults_and_options():
    a = _parser().parse_args(["serve"])
    assert (a.store, a.host, a.port) == (None, "127.0.0.1", 8050)
    a = _parser().parse_args(["serve", "--store", "sqlite:///x.db", "--port", "9000", "--meeting"])
    assert a.store == "sqlite:///x.db" and a.port == 9000 and a.meeting


def test_bench_dashboard_joins_the_existing_bench_command():
    a = _parser().parse_args(["bench", "dashboard", "--repeat", "1"])
    assert a.command == "bench" and a.bench_command == "dashboard" and a.repeat == 1
    assert serve_cli.dispatch(_parser().parse_args(["bench", "score"])) is None


def test_synthetic_store_and_view_timings(tmp_path):
    from dashboard import create_app

    url = f"sqlite:///{tmp_path / 'b.db'}"
    fill_synthetic_store(url, 400, n_lots=5)
    app = create_app(url, cache_dir=tmp_path / "c")
    with app.harken.store.read() as conn:
        from dashboard import queries

        pts = queries.lot_points(conn, "event_spe_ratio", "dose_release", queries.Filters(profile="bench"))
    assert pts["n_all"].sum() == 400 and pts["lot"].nunique() == 5
    t = time_views(app.harken, repeat=1)
    assert set(t) == {"lots", "rigs", "today"}  # the bench times every view it promises (times are not asserted)
