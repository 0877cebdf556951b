"""`harken bench latency` runs end to end against a real worker process and prints its percentiles and the goal
last (no timing is asserted: only that every line is there, consistent, and that each recording was found)."""

from __future__ import annotations

import re

import pytest

from tests.analysis.conftest import run_cli


@pytest.mark.slow
def test_bench_latency_prints_p50_p95_and_the_goal_last():
    code, out, err = run_cli("bench", "latency", "--recordings", "3", "--settle-s", "0.5", "--slow-every", "2",
                             "--jobs", "1")
    assert code == 0, err
    lines = out.strip().splitlines()
    assert lines[0].startswith("worker: watching ") and "file-system events" in lines[0]
    assert re.search(r"^3 recordings delivered one at a time \(1 written in place in chunks", lines[3])
    p50 = float(re.fullmatch(r"inbox_to_today_p50_s=(\d+\.\d\d)", lines[-3]).group(1))
    p95 = float(re.fullmatch(r"inbox_to_today_p95_s=(\d+\.\d\d)", lines[-2]).group(1))
    assert 0 < p50 <= p95
    assert re.fullmatch(r"goal_p95_s=5 \((met|missed)\)", lines[-1])
    # the settle interval is a floor no pick-up can beat: a smaller number would be a recording found early
    assert p50 >= 0.5


def test_bench_latency_refuses_zero_recordings():
    code, _, err = run_cli("bench", "latency", "--recordings", "0")
    assert code == 1 and "--recordings must be at least 1, got 0" in err
