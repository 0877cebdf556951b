"""`harken bench ingest`: ingest a demo scenario into a fresh store and compare with the bare analysis.

Both are measured in the same run on the same files with the same number of processes (pool start included in
both; module imports, a one-off cost, in neither). The last line is ``ratio_to_analyse=<ingest time / analysis time>``.
"""

from __future__ import annotations

import resource
import tempfile
import time
from pathlib import Path

__all__ = ["bench_ingest"]


def bench_ingest(*, scenario: str = "small", jobs: int | None = None, store_url: str | None = None,
                 inbox: str | Path | None = None, echo=print):
    """Ingest time vs bare analysis time of a generated scenario (or of the recordings already in ``inbox``,
    which are left in place). Returns (recordings, analysis s, ingest s)."""
    from .. import store as _store  # noqa: F401  (imported before timing: a one-off cost, not per recording)
    from ..demo import generate
    from ..scoring import analyse_many, find_recordings
    from ..worker import ingest_paths, jobs_or_cores

    jobs = jobs_or_cores(jobs)
    with tempfile.TemporaryDirectory(prefix="harken-bench-") as tmp:
        if inbox is None:
            inbox = Path(tmp) / "inbox"
            generate(inbox, scenario=scenario, jobs=jobs)
        else:
            scenario = str(inbox)
        files = find_recordings([inbox])
        t0 = time.perf_counter()
        results = analyse_many(files, jobs=jobs)
        t_analyse = time.perf_counter() - t0
        failed = sum(1 for _, r, _ in results if r is None)
        del results
        url = store_url or f"sqlite:///{Path(tmp) / 'bench.db'}"
        t0 = time.perf_counter()
        summary = ingest_paths([inbox], url, jobs, files_dir=Path(tmp), progress=False)
        t_ingest = time.perf_counter() - t0
    n = len(files)
    rss_mb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    echo(f"scenario {scenario!r}: {n} recordings, {jobs} process(es)")
    echo(f"bare analysis: {t_analyse:.2f} s ({n / t_analyse:.1f} recordings/s, {failed} unreadable)")
    echo(f"ingest into {'the given store' if store_url else 'a fresh SQLite store'}: {t_ingest:.2f} s "
         f"({n / t_ingest:.1f} recordings/s; {summary})")
    echo(f"max RSS of this process: {rss_mb:.0f} MB")
    echo(f"ratio_to_analyse={t_ingest / t_analyse:.2f}")
    return n, t_analyse, t_ingest
