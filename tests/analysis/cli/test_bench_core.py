"""The benchmarks run and print their ratios last (their values are measurements, not asserted)."""

from __future__ import annotations

import math
import re

import pytest

from analysis.cli.bench_core import bench_analyse, bench_score


def _ratio(line: str, name: str) -> float:
    m = re.fullmatch(rf"{name}=([0-9.]+)", line)
    assert m, line
    value = float(m.group(1))
    assert math.isfinite(value) and value > 0
    return value


def test_bench_analyse_prints_its_ratios_last():
    lines = []
    result = bench_analyse(n_files=4, repeat=1, out=lines.append)
    assert result["files"] == 4
    # the printed ratios are the quotients of the per-recording times printed above them
    ms = {key: float(re.search(r"([0-9.]+) ms per recording", line).group(1))
          for key, line in zip(("ours", "floor", "peer"), lines[1:4])}
    assert _ratio(lines[-2], "ratio_to_floor") == pytest.approx(ms["ours"] / ms["floor"], rel=0.02)
    assert _ratio(lines[-1], "speedup_vs_peer") == pytest.approx(ms["peer"] / ms["ours"], rel=0.02)
    # and against the older floor, whose flux frames span the whole recording
    older = float(re.search(r"older floor: ([0-9.]+) ms per recording", lines[4]).group(1))
    assert _ratio(lines[-3], "ratio_to_whole_flux_floor") == pytest.approx(ms["ours"] / older, rel=0.02)


def test_bench_score_prints_its_ratio_last():
    lines = []
    result = bench_score(n_actuations=300, n_slices=10, n_bands=12, repeat=1, out=lines.append)
    assert result["rows"] == 3000
    score_ms, floor_ms = (float(re.search(r"([0-9.]+) ms", line).group(1)) for line in lines[1:3])
    assert _ratio(lines[-1], "ratio_to_floor") == pytest.approx(score_ms / floor_ms, rel=0.02)
