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


def run_bench(*, sizes=(10_000, 100_000), repeat: int = 3, echo=print) -> dict:
    from analysis.store.synthetic import fill_synthetic_store
    from dashboard import create_app

    results = {}
    with tempfile.TemporaryDirectory(prefix="harken-bench-dash-") as tmp:
        for n in sizes:
            url = f"sqlite:///{Path(tmp) / f'bench-{n}.db'}"
            t0 = time.perf_counter()
            fill_synthetic_store(url, n)
            echo(f"filled a synthetic store with {n:,} actuations in {time.perf_counter() - t0:.1f} s")
            app = create_app(url, cache_dir=Path(tmp) / f"cache-{n}", open_reading=True)
            results[n] = time_views(app.harken, repeat=repeat)
            app.harken.store.close()
            for view, s in results[n].items():
                echo(f"view={view} actuations={n} callback_cold_s={s['cold']:.3f} callback_warm_s={s['warm']:.3f}")
    small, big = sizes
    ratios = {(v, k): results[big][v][k] / results[small][v][k] for v in results[small] for k in ("cold", "warm")}
    tag = "100k_over_10k" if (small, big) == (10_000, 100_000) else f"{big}_over_{small}"
    for (v, k), r in ratios.items():
        echo(f"scaling_{v}_{k}_{tag}={r:.2f}")
    cold = max(ratios[("lots", "cold")], ratios[("rigs", "cold")])
    warm = max(ratios[("lots", "warm")], ratios[("rigs", "warm")])
    echo(f"scaling_cold_{tag}={cold:.2f}")
    echo(f"scaling_{tag}={warm:.2f}")
    return {"seconds": results, "ratios": ratios, "scaling": warm, "scaling_cold": cold}
