"""Figure functions and the drill-down arithmetic, without a browser."""

from __future__ import annotations

import numpy as np
import pandas as pd
import plotly.graph_objects as go
import pytest

from analysis.monitor import lot_chart
from analysis.store import statistic
from dashboard import figures
from dashboard.drill import spectrogram_db, waveform_envelope


def _chart():
    p = pd.DataFrame({"lot": ["A", "B", "C", "D"], "rig": "R1", "value": [1.0, 1.1, 0.9, 9.0], "n": 5, "n_all": 5,
                      "n_flagged": [0, 0, 0, 3], "first": pd.date_range("2026-01-01", periods=4)})
    return lot_chart(p, reference_lots=["A", "B", "C"], log=True)


def test_lot_chart_figure_draws_cloud_with_webgl_and_clickable_points():
    cloud = pd.DataFrame({"actuation_id": [1, 2, 3], "lot": ["A", "D", "D"], "rig": "R1", "site": "S",
                          "recorded_at": pd.date_range("2026-01-01", periods=3), "value": [1.0, 9.0, 8.0],
                          "flagged": [False, True, True]})
    fig = figures.lot_chart_figure(_chart(), statistic("event_spe_ratio"), cloud=cloud)
    gl = [t for t in fig.data if isinstance(t, go.Scattergl)]
    assert {t.name for t in gl} == {"single actuations (sampled)", "flagged actuations"}
    flagged = next(t for t in gl if t.name == "flagged actuations")
    assert list(flagged.customdata) == [2, 3]  # the id, which a click opens
    assert "R1" in flagged.hovertemplate
    rig = next(t for t in fig.data if t.name == "R1")
    assert list(rig.customdata[0]) == ["lot", "A", "R1"]
    assert fig.layout.yaxis.type == "log"
    assert any(t.name == "signal (limit or run rule)" for t in fig.data)


def test_meeting_look_is_larger_and_dark():
    desk = figures.lot_chart_figure(_chart(), statistic("event_spe_ratio"))
    meet = figures.lot_chart_figure(_chart(), statistic("event_spe_ratio"), meeting=True)
    assert meet.layout.font.size > desk.layout.font.size
    assert meet.layout.paper_bgcolor == "#000000"
    assert meet.layout.height > desk.layout.height


def test_waveform_envelope_matches_bucket_min_max():
    rng = np.random.default_rng(3)
    x = rng.standard_normal(10_001).astype(np.float32)
    t, lo, hi = waveform_envelope(x, sample_rate_hz=1000.0, n_buckets=100)
    edges = np.linspace(0, x.size, 101).astype(int)
    want_lo = [x[a:b].min() for a, b in zip(edges[:-1], edges[1:])]  # reference: plain per-bucket min
    want_hi = [x[a:b].max() for a, b in zip(edges[:-1], edges[1:])]
    np.testing.assert_allclose(lo, want_lo)
    np.testing.assert_allclose(hi, want_hi)
    assert t[1] == pytest.approx(edges[1] / 1000.0)


def test_spectrogram_peak_at_tone_frequency():
    fs = 48_000
    t = np.arange(int(0.5 * fs)) / fs
    x = 0.5 * np.sin(2 * np.pi * 3000.0 * t)
    times, freqs, db = spectrogram_db(x, sample_rate_hz=fs, window_s=0.01)
    peak = freqs[np.argmax(db.mean(axis=0))]
    assert abs(peak - 3000.0) <= 2 * (freqs[1] - freqs[0])  # within two merged bins of the tone
    assert db.shape == (times.size, freqs.size) and times.size <= 480
    # mean-square scaling: a sine of amplitude A sums to A²/2 over the bins (Parseval; Heinzel et al. 2002)
    # (241 bins here, below max_bins, so no bins were merged by their maximum)
    assert freqs.size < 257
    np.testing.assert_allclose((10 ** (db / 10)).sum(axis=1), 0.5**2 / 2, rtol=1e-6)


def test_rig_figures_and_empty_states():
    summary = pd.DataFrame({"site": ["S", "S"], "rig": ["R1", "R2"], "mean": [0.0, 1.0], "n": [5, 5],
                            "flags_per_1000": [10.0, 200.0], "qc_failures_per_1000": [0.0, 5.0]})
    hist = pd.DataFrame({"rig": ["R1", "R2"], "site": ["S", "S"], "bin": [0, 1], "count": [5, 5]})
    fig = figures.rig_distribution_figure(np.array([-1.0, 0.5, 2.0]), hist, summary, statistic("onset_s"),
                                          reference={"mean": 0.0, "sd": 0.5})
    assert list(fig.layout.yaxis.ticktext) == ["R1 (S)", "R2 (S)"]
    rates = figures.rig_rates_figure(summary)
    assert [b.text[1] for b in rates.data] == ["200", "5"]
    empty = figures.rig_distribution_figure(np.array([]), hist.iloc[:0], summary, statistic("onset_s"))
    assert "No values" in empty.layout.annotations[0].text


def test_the_cloud_has_one_trace_per_rig_and_kind_with_one_legend_entry_each():
    cloud = pd.DataFrame({"actuation_id": [1, 2, 3, 4], "lot": ["A", "A", "D", "D"], "rig": ["R1", "R2", "R1", "R2"],
                          "site": "S", "recorded_at": pd.date_range("2026-01-01", periods=4),
                          "value": [1.0, 1.2, 8.0, 9.0], "flagged": [False, False, True, True]})
    fig = figures.lot_chart_figure(_chart(), statistic("event_spe_ratio"), cloud=cloud)
    gl = [t for t in fig.data if isinstance(t, go.Scattergl)]
    assert len(gl) == 4
    assert sorted(int(v) for t in gl for v in t.customdata) == [1, 2, 3, 4]
    shown = [t.name for t in gl if t.showlegend]
    assert sorted(shown) == ["flagged actuations", "single actuations (sampled)"]
    r2 = [t for t in gl if "R2" in t.hovertemplate]
    assert sorted(int(v) for t in r2 for v in t.customdata) == [2, 4]
