"""ISO 5725-2 repeatability and reproducibility across rigs (analysis.monitor.precision)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from analysis.monitor import precision_from_groups


def test_rigs_precision_matches_one_way_anova_from_raw_values():
    rng = np.random.default_rng(5)
    groups = [rng.normal(m, 1.0, n) for m, n in ((0.0, 8), (0.7, 12), (-0.3, 5), (0.2, 9))]
    summary = pd.DataFrame({"n": [g.size for g in groups], "mean": [g.mean() for g in groups],
                            "sd": [g.std(ddof=1) for g in groups]})
    got = precision_from_groups(summary["n"], summary["mean"], summary["sd"])
    # Reference: the random-effects one-way ANOVA from the raw values (ISO 5725-2 §7.4; Montgomery, Design and
    # Analysis of Experiments, ch. 13): MS_within, MS_between, n0 = (N - Σn²/N)/(p - 1).
    allv = np.concatenate(groups)
    ss_w = sum(((g - g.mean()) ** 2).sum() for g in groups)
    ss_b = sum(g.size * (g.mean() - allv.mean()) ** 2 for g in groups)
    p, N = len(groups), allv.size
    ms_w, ms_b = ss_w / (N - p), ss_b / (p - 1)
    n0 = (N - sum(g.size**2 for g in groups) / N) / (p - 1)
    assert got.s_r == pytest.approx(math.sqrt(ms_w))
    assert got.s_L == pytest.approx(math.sqrt(max(0.0, (ms_b - ms_w) / n0)))
    assert got.s_R ** 2 == pytest.approx(got.s_r ** 2 + got.s_L ** 2)


def test_too_few_groups_give_nan_and_groups_of_one_are_left_out():
    got = precision_from_groups([5, 1], [0.0, 3.0], [1.0, float("nan")])
    assert got.p == 1 and math.isnan(got.s_r) and math.isnan(got.s_R)
    with pytest.raises(ValueError, match="n, mean and sd must be 1-D arrays of one length"):
        precision_from_groups([5, 6], [0.0], [1.0, 1.0])
