"""The lot-by-lot chart's limits and run rules (analysis.monitor.lotchart) on hand-made points."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from analysis.monitor import lot_chart


def _points(values, rigs=None, lots=None):
    n = len(values)
    return pd.DataFrame({
        "lot": lots or [f"L{i:02d}" for i in range(n)], "rig": rigs or ["R1"] * n, "value": values,
        "first": pd.date_range("2026-01-01", periods=n, freq="D"), "n": 5, "n_all": 5, "n_flagged": 0,
    })


def test_limits_are_centre_plus_minus_three_mr_bar_over_d2():
    ref = [10.0, 12.0, 11.0, 13.0, 12.0]
    p = _points(ref + [11.5])
    chart = lot_chart(p, reference_lots=[f"L{i:02d}" for i in range(5)])
    mr_bar = np.mean(np.abs(np.diff(ref)))
    d2 = 1.128  # d2 for moving ranges of 2 (NIST/SEMATECH e-Handbook 6.3.2.2; Montgomery table VI)
    assert chart.centre == pytest.approx(np.mean(ref))
    assert chart.ucl == pytest.approx(np.mean(ref) + 3 * mr_bar / d2, rel=1e-3)
    assert chart.lcl == pytest.approx(np.mean(ref) - 3 * mr_bar / d2, rel=1e-3)
    assert "reference lots" in chart.limits_from
    assert not chart.points["signal"].any()


def test_point_beyond_limit_signals_with_rule_we1():
    p = _points([10.0, 12.0, 11.0, 13.0, 12.0, 30.0])
    chart = lot_chart(p, reference_lots=[f"L{i:02d}" for i in range(5)])
    last = chart.points.iloc[-1]
    assert last["beyond"] and last["signal"]
    assert "we1" in last["rules"].split(",")  # Western Electric rule 1: one point beyond 3σ


def test_log_statistic_charted_on_natural_log():
    vals = [1.0, 1.2, 0.9, 1.1, 1.0, 50.0]
    chart = lot_chart(_points(vals), reference_lots=[f"L{i:02d}" for i in range(5)], log=True)
    np.testing.assert_allclose(chart.points["y"], np.log(vals))
    assert chart.to_display(chart.centre) == pytest.approx(np.exp(np.mean(np.log(vals[:5]))))
    assert chart.points.iloc[-1]["signal"]


def test_rules_checked_per_rig_and_nelson_available():
    # 9 points on one side of the centre line on rig R2 only: Nelson rule 2 fires there (Nelson 1984).
    ref = [10.0, 10.4, 9.6, 10.2, 9.8, 10.1, 9.9, 10.3, 9.7, 10.0]
    high = [10.5] * 9
    p = _points(ref + high, rigs=["R1"] * 10 + ["R2"] * 9,
                lots=[f"A{i}" for i in range(10)] + [f"B{i}" for i in range(9)])
    chart = lot_chart(p, reference_lots=[f"A{i}" for i in range(10)], rules="nelson")
    r2 = chart.points[chart.points["rig"] == "R2"]
    assert "nelson2" in r2.iloc[-1]["rules"]
    assert not chart.points[chart.points["rig"] == "R1"]["rules"].str.contains("nelson2").any()
    with pytest.raises(ValueError, match="rules must be one of we, nelson, none; got 'x'"):
        lot_chart(p, rules="x")


def test_without_reference_lots_limits_come_from_all_points():
    chart = lot_chart(_points([1.0, 2.0, 1.5]), reference_lots=[])
    assert "all 3 points" in chart.limits_from
    assert chart.centre == pytest.approx(1.5)
