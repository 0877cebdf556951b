"""`harken bench dashboard`: the Lots, Rigs & sites and Today callbacks on synthetic stores of two sizes.

The store is filled directly through the schema (no audio): sites, rigs, lots, units, recordings, actuations,
event timings, per-event statistics under one active model per event, and flags on about 2 % of actuations.
The number of lots and rigs stays the same at both sizes (more actuations per lot), so what is drawn is the
same and the ratio shows how the work grows with the store. Each view's callback work is timed as the server
does it: the named query, the figure function, and the JSON encoding of what is sent.
"""

from __future__ import annotations

import json
import tempfile
import time
from datetime import datetime, timedelta
from pathlib import Path

import numpy as np

__all__ = ["fill_synthetic_store", "time_views", "run_bench"]

EVENTS = ("metering_click", "dose_release")


def fill_synthetic_store(url: str, n_actuations: int, *, n_lots: int = 50, seed: int = 1) -> None:
    """A store with ``n_actuations`` synthetic actuations over 2 sites x 4 rigs and ``n_lots`` lots."""
    from sqlalchemy import insert

    from analysis.store import Store
    from analysis.store.schema import (actuations, events, flags, lots, recordings, reference_models, rigs, sites,
                                       trajectories, units, utc_now)

    rng = np.random.default_rng(seed)
    now = utc_now()
    with Store.open(url) as store, store.write() as conn:
        conn.execute(insert(sites), [{"id": 1, "name": "Site A"}, {"id": 2, "name": "Site B"}])
        conn.execute(insert(rigs), [{"id": r + 1, "site_id": 1 + r // 4, "name": f"R{r + 1}"} for r in range(8)])
        conn.execute(insert(lots), [{"id": i + 1, "name": f"B{i + 1:04d}"} for i in range(n_lots)])
        conn.execute(insert(units), [{"id": i * 8 + r + 1, "lot_id": i + 1, "name": f"B{i + 1:04d}-{r + 1:02d}"}
                                     for i in range(n_lots) for r in range(8)])
        for k, ev in enumerate(EVENTS):
            conn.execute(insert(reference_models), [dict(
                id=k + 1, profile="bench", event=ev, version=1, status="active", reference_lots=json.dumps(
                    [f"B{i + 1:04d}" for i in range(3)]), parameters="{}", n_recordings=300, n_components=3,
                t2_limit=10.0, spe_limit=20.0, created_by="bench", created_at=now, model_json="{}", model_npz=b"")])
        ids = np.arange(1, n_actuations + 1)
        lot = (ids - 1) * n_lots // n_actuations
        rig = (ids - 1) % 8
        start = datetime(2026, 1, 1)
        t = [start + timedelta(days=int(lo) * 2, seconds=int(i % 20_000) * 4) for lo, i in zip(lot, ids)]
        passed = rng.random(n_actuations) > 0.01
        chunk = 20_000
        for a in range(0, n_actuations, chunk):
            sl = slice(a, a + chunk)
            conn.execute(insert(recordings), [dict(
                id=int(i), content_hash=f"{int(i):064x}", original_name=f"r{int(i)}.flac", size_bytes=1, received_at=now,
                status="analysed", archive_path=None, profile="bench") for i in ids[sl]])
            conn.execute(insert(actuations), [dict(
                id=int(i), recording_id=int(i), profile="bench", site_id=1 + int(r) // 4, rig_id=int(r) + 1,
                lot_id=int(lo) + 1, unit_id=int(lo) * 8 + int(r) + 1, actuation=int(i), recorded_at=tt,
                recorded_at_text=tt.isoformat() + "+00:00", passed_qc=bool(p))
                for i, r, lo, tt, p in zip(ids[sl], rig[sl], lot[sl], t[a:a + chunk], passed[sl])])
            for k, ev in enumerate(EVENTS):
                n = len(ids[sl])
                onset = 0.3 + 0.1 * k + rng.normal(0, 0.002, n)
                conn.execute(insert(events), [dict(
                    actuation_id=int(i), name=ev, found=True, onset_s=float(o), end_s=float(o) + 0.1,
                    duration_s=0.1, peak_dbfs=float(-6 + rng.normal()), latency_s=float(o) - 0.3,
                    band_energy_db=float(-30 + rng.normal()), dominant_hz=1000.0, centroid_hz=2000.0)
                    for i, o in zip(ids[sl], onset)])
                ratio = np.exp(rng.normal(-0.5, 0.4, (n, 4)))
                flagged = rng.random(n) < 0.02
                conn.execute(insert(trajectories), [dict(
                    actuation_id=int(i), event=ev, model_id=k + 1, t2_ratio=float(x[0]), spe_ratio=float(x[1]),
                    trajectory_distance=float(x[2]), event_spe_ratio=float(x[3]), slices_outside=0, flagged=bool(f))
                    for i, x, f in zip(ids[sl], ratio, flagged)])
                conn.execute(insert(flags), [dict(
                    actuation_id=int(i), model_id=k + 1, event=ev, statistic="spe", value=5.0, limit_value=2.0,
                    reason="SPE 2.5× its limit at slice 3 (0.03 s)", created_at=now) for i in ids[sl][flagged]] or
                    [dict(actuation_id=int(ids[sl][0]), model_id=k + 1, event=ev, statistic="spe", value=5.0,
                          limit_value=2.0, reason="SPE 2.5× its limit", created_at=now)])


def _views(ctx):
    from .queries import Filters
    from .views import lots, rigs, today
    from . import figures, queries

    def lots_view():
        chart, cloud, stat = lots.lots_chart_data(ctx.store, "event_spe_ratio", "dose_release",
                                                  Filters(profile="bench"), cache=ctx.drill_cache)
        return figures.lot_chart_figure(chart, stat, cloud=cloud).to_json()

    def rigs_view():
        data = rigs.rigs_data(ctx.store, "t2_ratio", "dose_release", Filters(profile="bench"),
                              cache=ctx.drill_cache)
        st = queries.statistic("t2_ratio")
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
    from .app import create_app

    results = {}
    with tempfile.TemporaryDirectory(prefix="harken-bench-dash-") as tmp:
        for n in sizes:
            url = f"sqlite:///{Path(tmp) / f'bench-{n}.db'}"
            t0 = time.perf_counter()
            fill_synthetic_store(url, n)
            echo(f"filled a synthetic store with {n:,} actuations in {time.perf_counter() - t0:.1f} s")
            app = create_app(url, cache_dir=Path(tmp) / f"cache-{n}")
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
