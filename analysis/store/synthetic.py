"""A synthetic store for benchmarks and tests of scale: rows written straight into the tables, no audio.

Sites, rigs, lots, units, recordings, actuations, event timings, per-event statistics under one active model per
event (with empty model documents: these models cannot be loaded, only counted and queried), flags on about
2 % of actuations, and the per-day summaries the worker would have kept. The big tables are written in bulk
(SQLite: the driver's executemany of plain tuples; PostgreSQL: COPY), so a million actuations take about a minute
or two. Not for anything a person reads as results.
"""

from __future__ import annotations

import json
from datetime import datetime, timedelta

import numpy as np
from sqlalchemy import insert

from . import summaries
from .core import Store
from .schema import lots, reference_models, rigs, sites, units, utc_now

__all__ = ["fill_synthetic_store", "SYNTHETIC_EVENTS"]

SYNTHETIC_EVENTS = ("metering_click", "dose_release")


def _bulk(conn, table: str, columns: list[str], rows: list[tuple]) -> None:
    """Append rows (tuples in ``columns`` order) to ``table`` inside the connection's transaction, the fastest
    way the driver has."""
    if not rows:
        return
    raw = conn.connection.driver_connection
    if conn.dialect.name == "postgresql":
        with raw.cursor() as cur, cur.copy(f"COPY {table} ({', '.join(columns)}) FROM STDIN") as copy:
            for r in rows:
                copy.write_row(r)
    else:
        marks = ", ".join("?" * len(columns))
        raw.executemany(f"INSERT INTO {table} ({', '.join(columns)}) VALUES ({marks})", rows)


def _stamp(t: datetime, dialect: str):
    # SQLite keeps SQLAlchemy's DateTime as ISO text with microseconds; PostgreSQL takes the datetime itself.
    return t.strftime("%Y-%m-%d %H:%M:%S.%f") if dialect == "sqlite" else t


def fill_synthetic_store(url: str, n_actuations: int, *, n_lots: int = 50, seed: int = 1,
                         chunk: int = 50_000) -> None:
    """A store with ``n_actuations`` synthetic actuations over 2 sites x 4 rigs and ``n_lots`` lots."""
    rng = np.random.default_rng(seed)
    now = utc_now()
    with Store.open(url) as store, store.write() as conn:
        d = conn.dialect.name
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
        passed = rng.random(n_actuations) > 0.01
        now_s = _stamp(now, d)
        event_id = traj_id = flag_id = 0
        for a in range(0, n_actuations, chunk):
            sl = slice(a, a + chunk)
            idx, rg, lo, ok = ids[sl], rig[sl], lot[sl], passed[sl]
            n = len(idx)
            times = [start + timedelta(days=int(x) * 2, seconds=int(i % 20_000) * 4) for x, i in zip(lo, idx)]
            _bulk(conn, "recordings", ["id", "content_hash", "original_name", "size_bytes", "received_at", "status",
                                       "profile"],
                  [(int(i), f"{int(i):064x}", f"r{int(i)}.flac", 1, now_s, "analysed", "bench") for i in idx])
            _bulk(conn, "actuations", ["id", "recording_id", "profile", "site_id", "rig_id", "lot_id", "unit_id",
                                       "actuation", "recorded_at", "recorded_at_text", "passed_qc"],
                  [(int(i), int(i), "bench", 1 + int(r) // 4, int(r) + 1, int(x) + 1, int(x) * 8 + int(r) + 1,
                    int(i), _stamp(t, d), t.isoformat() + "+00:00", bool(p))
                   for i, r, x, t, p in zip(idx, rg, lo, times, ok)])
            for k, ev in enumerate(SYNTHETIC_EVENTS):
                onset = 0.3 + 0.1 * k + rng.normal(0, 0.002, n)
                peak = -6 + rng.normal(size=n)
                band = -30 + rng.normal(size=n)
                _bulk(conn, "events", ["id", "actuation_id", "name", "found", "onset_s", "end_s", "duration_s",
                                       "peak_dbfs", "latency_s", "band_energy_db", "dominant_hz", "centroid_hz"],
                      [(event_id + j + 1, int(i), ev, True, float(o), float(o) + 0.1, 0.1, float(pk), float(o) - 0.3,
                        float(b), 1000.0, 2000.0) for j, (i, o, pk, b) in enumerate(zip(idx, onset, peak, band))])
                event_id += n
                ratio = np.exp(rng.normal(-0.5, 0.4, (n, 4)))
                flagged = rng.random(n) < 0.02
                if a == 0:
                    flagged[0] = True  # every model has at least one flag
                _bulk(conn, "trajectories", ["id", "actuation_id", "event", "model_id", "t2_ratio", "spe_ratio",
                                             "trajectory_distance", "event_spe_ratio", "slices_outside", "flagged"],
                      [(traj_id + j + 1, int(i), ev, k + 1, float(x[0]), float(x[1]), float(x[2]), float(x[3]), 0,
                        bool(f)) for j, (i, x, f) in enumerate(zip(idx, ratio, flagged))])
                traj_id += n
                hit = idx[flagged]
                _bulk(conn, "flags", ["id", "actuation_id", "model_id", "event", "statistic", "value", "limit_value",
                                      "reason", "created_at"],
                      [(flag_id + j + 1, int(i), k + 1, ev, "spe", 5.0, 2.0, "SPE 2.5× its limit at slice 3 (0.03 s)",
                        now_s) for j, i in enumerate(hit)])
                flag_id += len(hit)
        if d == "postgresql":
            # COPY with explicit ids leaves the id sequences behind; later inserts must not collide.
            for table, n_rows in (("recordings", n_actuations), ("actuations", n_actuations),
                                  ("events", event_id), ("trajectories", traj_id), ("flags", flag_id)):
                conn.exec_driver_sql(f"SELECT setval(pg_get_serial_sequence('{table}', 'id'), {max(1, n_rows)})")
        # The per-day summaries the views read, as the worker would have kept them, in one pass at the end.
        summaries.rebuild(conn)
