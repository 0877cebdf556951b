"""A synthetic store for benchmarks and tests of scale: rows written straight into the tables, no audio.

Sites, rigs, lots, units, recordings, actuations, event timings, per-event statistics under one active model per
event (with empty model documents: these models cannot be loaded, only counted and queried), and flags on about
2 % of actuations. Not for anything a person reads as results.
"""

from __future__ import annotations

import json
from datetime import datetime, timedelta

import numpy as np
from sqlalchemy import insert

from .core import Store
from .schema import (
    actuations,
    events,
    flags,
    lots,
    recordings,
    reference_models,
    rigs,
    sites,
    trajectories,
    units,
    utc_now,
)

__all__ = ["fill_synthetic_store", "SYNTHETIC_EVENTS"]

SYNTHETIC_EVENTS = ("metering_click", "dose_release")


def fill_synthetic_store(url: str, n_actuations: int, *, n_lots: int = 50, seed: int = 1) -> None:
    """A store with ``n_actuations`` synthetic actuations over 2 sites x 4 rigs and ``n_lots`` lots."""
    rng = np.random.default_rng(seed)
    now = utc_now()
    with Store.open(url) as store, store.write() as conn:
        conn.execute(insert(sites), [{"id": 1, "name": "Site A"}, {"id": 2, "name": "Site B"}])
        conn.execute(insert(rigs), [{"id": r + 1, "site_id": 1 + r // 4, "name": f"R{r + 1}"} for r in range(8)])
        conn.execute(insert(lots), [{"id": i + 1, "name": f"B{i + 1:04d}"} for i in range(n_lots)])
        conn.execute(insert(units), [{"id": i * 8 + r + 1, "lot_id": i + 1, "name": f"B{i + 1:04d}-{r + 1:02d}"}
                                     for i in range(n_lots) for r in range(8)])
        for k, ev in enumerate(SYNTHETIC_EVENTS):
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
                id=int(i), content_hash=f"{int(i):064x}", original_name=f"r{int(i)}.flac", size_bytes=1,
                received_at=now, status="analysed", archive_path=None, profile="bench") for i in ids[sl]])
            conn.execute(insert(actuations), [dict(
                id=int(i), recording_id=int(i), profile="bench", site_id=1 + int(r) // 4, rig_id=int(r) + 1,
                lot_id=int(lo) + 1, unit_id=int(lo) * 8 + int(r) + 1, actuation=int(i), recorded_at=tt,
                recorded_at_text=tt.isoformat() + "+00:00", passed_qc=bool(p))
                for i, r, lo, tt, p in zip(ids[sl], rig[sl], lot[sl], t[a:a + chunk], passed[sl])])
            for k, ev in enumerate(SYNTHETIC_EVENTS):
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
