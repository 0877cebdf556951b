"""`harken bench ingest` runs end to end and ends with the ratio line (no timing is asserted)."""

from __future__ import annotations

import re

import pytest

from tests.analysis.conftest import run_cli


@pytest.mark.slow
def test_bench_ingest_prints_rate_and_ratio_last(small_scenario):
    code, out, err = run_cli("bench", "ingest", "--jobs", "2", "--inbox", small_scenario)
    assert code == 0, err
    lines = out.strip().splitlines()
    assert re.fullmatch(r"ratio_to_analyse=\d+\.\d\d", lines[-1])
    assert any(re.search(r"ingest into a fresh SQLite store: .* \(\d+\.\d recordings/s; 120 analysed", line)
               for line in lines)
