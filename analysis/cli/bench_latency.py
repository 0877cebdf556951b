"""`harken bench latency`: recordings dropped into a running worker's inbox, timed until Today's query has them.

Set-up, not timed: the small demo scenario is generated; its reference lots are ingested into a fresh SQLite store
and the reference models built from them (as `harken demo` does); a `harken worker` process is started on an empty
inbox. Then recordings of the other lots are delivered one at a time as a rig does: the recording under a
temporary name, renamed when whole, then its sidecar likewise; every ``slow_every``-th is instead written in place
in 10 chunks over about 1 s after its sidecar. Each gets a fresh ``recorded_at`` (it was just recorded). Today's
question (dashboard.views.today.changes_key) is asked every 50 ms, and on each change Today's data (today_data)
is read until the recording is among its rows. The latency runs from the moment the delivery is complete to that
read. The first recording after the worker started is timed but not counted (it loads the profile and models).
A random pause of 0 to 0.5 s between deliveries keeps them from falling in step with the worker's own timing.
"""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from ..errors import AnalysisError

__all__ = ["bench_latency", "GOAL_P95_S"]

#: What "new recordings on screen in seconds" means: 95 % of them on Today within this many seconds.
GOAL_P95_S = 5.0
#: A recording not in Today's data this long after its delivery counts as lost: the bench stops and says so.
GIVE_UP_S = 60.0
ASK_EVERY_S = 0.05


def _deliver(src: Path, dest: Path, *, recorded_at: str, slow: bool) -> float:
    """Put ``src`` and its sidecar (with ``recorded_at``) into the inbox as ``dest``; returns the monotonic time
    at which the delivery was complete."""
    side = json.loads(src.with_suffix(".json").read_text())
    side["recorded_at"] = recorded_at
    side_bytes = json.dumps(side).encode()
    data = src.read_bytes()
    dest.parent.mkdir(parents=True, exist_ok=True)

    def atomic(path: Path, content: bytes) -> None:
        tmp = path.with_name(f".{path.name}.part")
        tmp.write_bytes(content)
        os.replace(tmp, path)

    if slow:
        atomic(dest.with_suffix(".json"), side_bytes)
        step = len(data) // 10 + 1
        with open(dest, "wb") as f:
            for i in range(0, len(data), step):
                f.write(data[i:i + step])
                f.flush()
                time.sleep(0.1)
    else:
        atomic(dest, data)
        atomic(dest.with_suffix(".json"), side_bytes)
    return time.monotonic()


def _until_on_today(store, name: str, since: float, worker, err: Path) -> float:
    """Seconds from ``since`` until Today's data lists the recording delivered as ``name``."""
    from dashboard.views.today import changes_key, today_data

    seen = None
    while True:
        key = changes_key(store)
        if key != seen:
            seen = key
            rows = today_data(store, per_rig=10)["rows"]
            if (rows["file"] == name).any():
                return time.monotonic() - since
        if time.monotonic() - since > GIVE_UP_S or worker.poll() is not None:
            tail = "\n".join(err.read_text(errors="replace").splitlines()[-5:])
            raise AnalysisError(f"{name}: not on Today {GIVE_UP_S:g} s after its delivery (worker "
                                f"{'exited' if worker.poll() is not None else 'running'}; its last lines:\n{tail})")
        time.sleep(ASK_EVERY_S)


def bench_latency(*, n_recordings: int = 20, watch: str = "auto", settle_s: float | None = None,
                  poll_s: float | None = None, jobs: int | None = None, slow_every: int = 4, seed: int = 1,
                  echo=print) -> dict:
    """Deliver ``n_recordings`` (after one not counted) into a running worker's inbox and time each until Today's
    data has it. Returns {"latencies_s": [...], "p50_s": ..., "p95_s": ...}."""
    import pandas as pd

    from ..demo import generate
    from ..references import build_reference
    from ..store import Store
    from ..worker import ingest_paths

    if n_recordings < 1:
        raise AnalysisError(f"--recordings must be at least 1, got {n_recordings}")
    rng = np.random.default_rng(seed)
    with tempfile.TemporaryDirectory(prefix="harken-bench-latency-") as tmp:
        tmp = Path(tmp)
        gen = tmp / "scenario"
        generate(gen, scenario="small")
        truth = pd.read_csv(gen / "ground_truth.csv")
        is_ref = truth["reference"].astype(str).str.lower().isin(["true", "1"])
        ref_lots = sorted(set(truth.loc[is_ref, "lot"]))
        others = list(truth.loc[~is_ref, "file"])
        if n_recordings + 1 > len(others):
            raise AnalysisError(f"--recordings {n_recordings}: the small scenario has {len(others)} recordings "
                                f"outside its reference lots (one more is delivered first, not counted)")
        url = f"sqlite:///{tmp / 'harken.db'}"
        ingest_paths([gen / f for f in truth.loc[is_ref, "file"]], url, jobs=jobs, progress=False)
        profile = json.loads((gen / others[0]).with_suffix(".json").read_text())["profile"]
        with Store.open(url) as store:
            build_reference(store, profile, None, ref_lots, created_by="harken bench latency")
        inbox, err = tmp / "inbox", tmp / "worker.err"
        inbox.mkdir()
        cmd = [sys.executable, "-m", "analysis.cli", "worker", "--inbox", str(inbox), "--store", url,
               "--watch", watch]
        for flag, value in (("--settle-s", settle_s), ("--poll-s", poll_s), ("--jobs", jobs)):
            if value is not None:
                cmd += [flag, str(value)]
        with open(err, "w") as e:
            worker = subprocess.Popen(cmd, stdout=subprocess.DEVNULL, stderr=e)
        try:
            start = time.monotonic()
            while "watching" not in err.read_text(errors="replace"):
                if worker.poll() is not None or time.monotonic() - start > GIVE_UP_S:
                    raise AnalysisError(f"the worker did not start: {err.read_text(errors='replace')[-500:]}")
                time.sleep(ASK_EVERY_S)
            how = next(x for x in err.read_text(errors="replace").splitlines() if x.startswith("watching"))
            picks = [others[i] for i in sorted(rng.choice(len(others), n_recordings + 1, replace=False))]
            with Store.open(url, create=False) as store:
                lat, slow = [], []
                for i, name in enumerate(picks):
                    is_slow = i > 0 and slow_every > 0 and i % slow_every == 0
                    now = pd.Timestamp.now(tz="UTC").isoformat(timespec="seconds")
                    done = _deliver(gen / name, inbox / name, recorded_at=now, slow=is_slow)
                    s = _until_on_today(store, name, done, worker, err)
                    if i == 0:
                        first = s
                    else:
                        lat.append(s)
                        if is_slow:
                            slow.append(s)
                    time.sleep(float(rng.uniform(0.0, 0.5)))
        finally:
            worker.send_signal(signal.SIGINT)
            try:
                worker.wait(timeout=30)
            except subprocess.TimeoutExpired:
                worker.kill()
                worker.wait()
            passes = [float(m) for m in re.findall(r"^pass: .* in (\d+\.\d) s", err.read_text(errors="replace"),
                                                   flags=re.MULTILINE)]
    lat_a = np.asarray(lat)
    p50, p95 = (float(np.percentile(lat_a, q)) for q in (50, 95))
    echo(f"worker: {how}")
    echo(f"store: a fresh SQLite file with the small scenario's reference lots ({', '.join(ref_lots)}) and their "
         "reference models")
    echo(f"first recording after the worker started: {first:.2f} s (not counted)")
    echo(f"{len(lat)} recordings delivered one at a time ({len(slow)} written in place in chunks over ~1 s): "
         f"min {lat_a.min():.2f} s, max {lat_a.max():.2f} s"
         + (f"; the chunked ones: max {max(slow):.2f} s" if slow else ""))
    if passes:
        echo(f"the worker's passes (take, analyse, score, store; {len(passes)}): median {np.median(passes):.1f} s, "
             f"max {max(passes):.1f} s")
    echo(f"inbox_to_today_p50_s={p50:.2f}")
    echo(f"inbox_to_today_p95_s={p95:.2f}")
    echo(f"goal_p95_s={GOAL_P95_S:g} ({'met' if p95 <= GOAL_P95_S else 'missed'})")
    return {"latencies_s": lat, "p50_s": p50, "p95_s": p95, "first_s": first}
