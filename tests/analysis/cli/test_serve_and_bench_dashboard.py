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
    a = build_parser().parse_args(["serve", "--files", "/srv/harken", "--open-reading", "--trusted-header", "X-U",
                                   "--trusted-proxy", "10.0.0.2", "--trusted-proxy", "10.0.0.3", "--idle-minutes",
                                   "10", "--secure-cookies"])
    assert a.files == "/srv/harken" and a.open_reading and a.trusted_proxy == ["10.0.0.2", "10.0.0.3"]
    assert (a.trusted_header, a.idle_minutes, a.secure_cookies) == ("X-U", 10.0, True)


def test_the_dashboard_finds_the_archive_where_it_is_told(tmp_path):
    # a PostgreSQL store's archive lives where --files says; the dashboard must read it from there too
    from dashboard import create_app

    url = f"sqlite:///{tmp_path / 'b.db'}"
    fill_synthetic_store(url, 20, n_lots=2)
    app = create_app(url, cache_dir=tmp_path / "c", open_reading=True, files_dir=tmp_path / "shared")
    assert app.harken.store.files_dir == tmp_path / "shared"
    import pytest

    from analysis.errors import ParameterError

    with pytest.raises(ParameterError, match="--trusted-header needs at least one --trusted-proxy"):
        serve_cmd.serve(url, trusted_header="X-U")


def test_bench_dashboard_is_a_bench_command():
    a = build_parser().parse_args(["bench", "dashboard", "--repeat", "1"])
    assert a.command == "bench" and a.bench_command == "dashboard" and a.repeat == 1 and a.func is _dashboard


def test_synthetic_store_and_view_timings(tmp_path):
    from dashboard import create_app

    url = f"sqlite:///{tmp_path / 'b.db'}"
    fill_synthetic_store(url, 400, n_lots=5)
    app = create_app(url, cache_dir=tmp_path / "c", open_reading=True)
    with app.harken.store.read() as conn:
        pts = queries.lot_points(conn, "event_spe_ratio", "dose_release", Filters(profile="bench"))
    assert pts["n_all"].sum() == 400 and pts["lot"].nunique() == 5
    t = time_views(app.harken, repeat=1)
    assert set(t) == {"lots", "rigs", "today"}  # the bench times every view it promises (times are not asserted)


def test_the_network_warning_is_given_for_open_reading_on_every_host_but_this_machine():
    assert serve_cmd.network_warning("127.0.0.1", 8050, open_reading=True) is None
    assert serve_cmd.network_warning("::1", 1, open_reading=True) is None
    assert serve_cmd.network_warning("0.0.0.0", 8050) is None  # signing in is required: nothing to warn of
    words = serve_cmd.network_warning("0.0.0.0", 8050, open_reading=True)
    assert "without sign-in for reading" in words and "8050" in words


def test_threads_out_of_range_are_refused(tmp_path):
    import pytest

    from analysis.errors import ParameterError

    with pytest.raises(ParameterError, match="--threads must be from 1 to 256; got 0"):
        serve_cmd.serve(f"sqlite:///{tmp_path / 'none.db'}", threads=0)


def test_harken_serve_runs_on_waitress_with_the_headers_and_warns_on_the_network(tmp_path):
    """The real command in its own process: the production server answers (its Server header), the security
    headers are on, and listening on every address prints the warning to stderr."""
    import socket
    import subprocess
    import sys
    import time
    import urllib.request

    url = f"sqlite:///{tmp_path / 's.db'}"
    fill_synthetic_store(url, 60, n_lots=2)
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    proc = subprocess.Popen([sys.executable, "-m", "analysis.cli", "serve", "--store", url, "--host", "0.0.0.0",
                             "--port", str(port), "--threads", "2", "--cache-dir", str(tmp_path / "c"),
                             "--open-reading"],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline, answer = time.monotonic() + 60, None
        while answer is None and time.monotonic() < deadline and proc.poll() is None:
            try:
                answer = urllib.request.urlopen(f"http://127.0.0.1:{port}/health", timeout=5)
            except OSError:
                time.sleep(0.3)
        assert answer is not None, proc.stderr.read() if proc.poll() is not None else "no answer in 60 s"
        assert answer.status == 200 and answer.headers["Server"] == "harken"  # waitress's ident, not Werkzeug
        assert "frame-ancestors 'none'" in answer.headers["Content-Security-Policy"]
    finally:
        proc.terminate()
        out, err = proc.communicate(timeout=30)
    assert "warning: --host 0.0.0.0 with --open-reading serves the dashboard to the network" in err
    assert f"http://0.0.0.0:{port}/" in out and "2 threads" in out
