"""`harken bench dashboard`: the Lots, Rigs & sites and Today callbacks on synthetic stores of two sizes.

The stores are filled by analysis.store.synthetic (no audio): sites, rigs, lots, units, recordings, actuations,
event timings, per-event statistics under one active model per event, and flags on about 2 % of actuations.
The number of lots and rigs stays the same at both sizes (more actuations per lot), so what is drawn is the
same and the ratio shows how the work grows with the store. Each view's callback work is timed as the server
does it: the named query, the figure function, and the JSON encoding of what is sent.
"""

from __future__ import annotations

import tempfile
import time
from pathlib import Path

__all__ = ["time_views", "run_bench"]


def _views(ctx):
    from analysis.store import Filters, statistic
    from dashboard import figures
    from dashboard.views import lots, rigs, today

    def lots_view():
        chart, cloud, stat = lots.lots_chart_data(ctx.store, "event_spe_ratio", "dose_release",
                                                  Filters(profile="bench"), cache=ctx.drill_cache)
        return figures.lot_chart_figure(chart, stat, cloud=cloud).to_json()

    def rigs_view():
        data = rigs.rigs_data(ctx.store, "t2_ratio", "dose_release", Filters(profile="bench"),
                              cache=ctx.drill_cache)
        st = statistic("t2_ratio")
        return (figures.rig_distribution_figure(data["edges"], data["hist"], data["summary"], st,
                                                reference=data["reference"]).to_json(),
                figures.rig_rates_figure(data["summary"]).to_json(), rigs.numbers_table(data, st).to_plotly_json())

    def today_view():
        return today.render_today(today.today_data(ctx.store, per_rig=10)).to_plotly_json()

    return {"lots": lots_view, "rigs": rigs_view, "today": today_view}


def time_views(ctx, *, repeat: int = 3) -> dict:
    """Best-of-``repeat`` seconds per view callback: "cold" with an empty aggregate cache (the first request
    after the store changed), "warm" with the aggregates cached (every later request until it changes)."""
    out = {}
    for name, fn in _views(ctx).items():
        cold = warm = float("inf")
        for _ in range(repeat):
            ctx.drill_cache.clear()
            t0 = time.perf_counter()
            fn()
            cold = min(cold, time.perf_counter() - t0)
            t0 = time.perf_counter()
            fn()
            warm = min(warm, time.perf_counter() - t0)
        out[name] = {"cold": cold, "warm": warm}
    return out


def _size_name(n: int) -> str:
    for unit, div in (("m", 1_000_000), ("k", 1_000)):
        if n >= div and n % div == 0:
            return f"{n // div}{unit}"
    return str(n)


def _empty_postgres(url: str) -> None:
    from sqlalchemy import create_engine, text

    engine = create_engine(url)
    with engine.begin() as conn:
        conn.execute(text("DROP SCHEMA public CASCADE"))
        conn.execute(text("CREATE SCHEMA public"))
    engine.dispose()


def run_bench(*, sizes=(10_000, 1_000_000), repeat: int = 3, postgres_url: str | None = None, echo=print,
              goal_s: float = 0.3, goal_scaling: float = 1.5) -> dict:
    """Fill a synthetic store of each size (SQLite files, or the PostgreSQL database ``postgres_url``, emptied
    first), time every view cold and warm, and print the times, the cold and warm ratios of the largest size to
    the smallest per view, and whether the goals (every view's cold callback <= ``goal_s`` at the largest size,
    cold scaling <= ``goal_scaling``) are met."""
    from analysis.store.synthetic import fill_synthetic_store
    from dashboard import create_app

    results = {}
    backend = "postgresql" if postgres_url else "sqlite"
    with tempfile.TemporaryDirectory(prefix="harken-bench-dash-") as tmp:
        for n in sizes:
            if postgres_url:
                _empty_postgres(postgres_url)
                url = postgres_url
            else:
                url = f"sqlite:///{Path(tmp) / f'bench-{n}.db'}"
            t0 = time.perf_counter()
            fill_synthetic_store(url, n)
            echo(f"filled a synthetic {backend} store with {n:,} actuations (bulk inserts and the summaries) "
                 f"in {time.perf_counter() - t0:.1f} s")
            app = create_app(url, cache_dir=Path(tmp) / f"cache-{n}", open_reading=True, files_dir=Path(tmp))
            results[n] = time_views(app.harken, repeat=repeat)
            app.harken.store.close()
            for view, s in results[n].items():
                echo(f"view={view} backend={backend} actuations={n} callback_cold_s={s['cold']:.3f} "
                     f"callback_warm_s={s['warm']:.3f}")
    small, big = min(sizes), max(sizes)
    tag = f"{_size_name(big)}_over_{_size_name(small)}"
    ratios = {(v, k): results[big][v][k] / results[small][v][k] for v in results[small] for k in ("cold", "warm")}
    for (v, k), r in ratios.items():
        echo(f"scaling_{v}_{k}_{tag}={r:.2f}")
    cold = max(ratios[(v, "cold")] for v in results[small])
    warm = max(ratios[(v, "warm")] for v in results[small])
    slowest = max(results[big][v]["cold"] for v in results[big])
    echo(f"scaling_{tag}={cold:.2f}  (cold, the largest over the views; warm: {warm:.2f})")
    echo(f"slowest_cold_callback_s_at_{_size_name(big)}={slowest:.3f}")
    met = slowest <= goal_s and cold <= goal_scaling
    echo(f"goal: every cold callback <= {goal_s} s at {_size_name(big)} and scaling <= {goal_scaling}: "
         + ("met" if met else "missed"))
    return {"seconds": results, "ratios": ratios, "scaling": warm, "scaling_cold": cold, "slowest_cold": slowest}
