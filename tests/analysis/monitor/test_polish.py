"""Tukey's median polish (analysis.monitor.polish)."""

import math
import statistics

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from analysis.errors import ParameterError
from analysis.monitor.polish import median_polish, polish_frame


def _plain_polish(table, *, max_iter=10, eps=0.01):
    """Tukey's median polish written out cell by cell in plain Python, step for step as the algorithm in the R
    documentation of ``medpolish`` (rows, median of the column effects, columns, median of the row effects; stop
    when the sum of absolute residuals changes by less than eps of itself), with ``na.rm = TRUE``: empty cells
    are left out of every median, and an empty row or column has no effect (NaN)."""
    nr, nc = len(table), len(table[0])
    z = [[float(v) for v in line] for line in table]

    def med(values):
        v = [a for a in values if not math.isnan(a)]
        return statistics.median(v) if v else math.nan

    r, c, t, oldsum = [0.0] * nr, [0.0] * nc, 0.0, 0.0
    for _ in range(max_iter):
        for i in range(nr):
            d = med(z[i])
            z[i] = [a - d for a in z[i]]
            r[i] += d
        d = med(c)
        c = [a - d for a in c]
        t += d
        for j in range(nc):
            d = med([z[i][j] for i in range(nr)])
            for i in range(nr):
                z[i][j] -= d
            c[j] += d
        d = med(r)
        r = [a - d for a in r]
        t += d
        newsum = sum(abs(a) for line in z for a in line if not math.isnan(a))
        if newsum == 0 or abs(newsum - oldsum) < eps * newsum:
            break
        oldsum = newsum
    return t, np.array(r), np.array(c), np.array(z)


def _fitted(mp):
    return mp.overall + mp.row_effects[:, None] + mp.col_effects[None, :] + mp.residuals


def test_the_parachuting_deaths_example():
    # Deaths from sport parachuting by experience (rows) and year 1973-75 (columns), from Velleman & Hoaglin
    # 1981, "Applications, Basics and Computing of Exploratory Data Analysis", p. 224: the data of the example in
    # R's medpolish documentation. That page prints no result; the values below are the result of medpolish as
    # remembered, checked by hand: row medians 14 7 8 10 0 leave column medians 0 -1 0, after which every row
    # and column median is 0 (second sweep: no change, sum of |residuals| 19 both times).
    deaths = np.array([[14, 15, 14], [7, 4, 7], [8, 2, 10], [15, 9, 10], [0, 2, 0]], dtype=float)
    mp = median_polish(deaths)
    assert mp.overall == 8
    np.testing.assert_array_equal(mp.row_effects, [6, -1, 0, 2, -8])
    np.testing.assert_array_equal(mp.col_effects, [0, -1, 0])
    np.testing.assert_array_equal(mp.residuals, [[0, 2, 0], [0, -2, 0], [0, -5, 2], [5, 0, 0], [0, 3, 0]])
    assert np.abs(mp.residuals).sum() == 19
    assert mp.converged and mp.n_iter == 2
    np.testing.assert_array_equal(_fitted(mp), deaths)


def test_the_web_hits_example_published_with_r_output():
    # Hits a day on a book's web site, day of the week (rows) by week (columns), with the output of R's
    # medpolish printed beside it: J. Albert, "Looking at Hits on my Web Page", a post of his blog "Exploring
    # Data" (read in a stored copy): overall 18; day effects -2, 0.5, -0.5, 0, 5.5, 1.75, -5.25; week effects
    # 4.5, -2.75, 1, -1; first residual (Sunday, week 1) 1.5. It takes three sweeps, so it checks the iteration.
    hits = np.array([[22, 12, 17, 15], [23, 15, 27, 17], [17, 26, 21, 14], [26, 13, 18, 18],
                     [24, 27, 28, 13], [28, 17, 17, 19], [14, 11, 13, 13]], dtype=float)
    mp = median_polish(hits)
    assert mp.overall == 18
    np.testing.assert_array_equal(mp.row_effects, [-2, 0.5, -0.5, 0, 5.5, 1.75, -5.25])
    np.testing.assert_array_equal(mp.col_effects, [4.5, -2.75, 1, -1])
    assert mp.residuals[0, 0] == 1.5
    np.testing.assert_array_equal(_fitted(mp), hits)
    assert mp.converged


@pytest.mark.parametrize("seed", range(6))
def test_agrees_with_a_plain_cell_by_cell_polish_on_tables_with_holes(seed):
    rng = np.random.default_rng(seed)
    x = np.round(rng.normal(0, 3, (7, 5)) + np.arange(7)[:, None] - np.arange(5)[None, :], 1)
    x[rng.random(x.shape) < 0.25] = np.nan
    x[seed % 7, :] = np.nan  # an empty row: no effect, and no part in the overall value
    t, r, c, z = _plain_polish(x.tolist())
    mp = median_polish(x)
    assert mp.overall == pytest.approx(t, abs=1e-12)
    np.testing.assert_allclose(mp.row_effects, r, atol=1e-12)
    np.testing.assert_allclose(mp.col_effects, c, atol=1e-12)
    np.testing.assert_allclose(mp.residuals, z, atol=1e-12)
    assert np.isnan(mp.row_effects[seed % 7]) and np.isnan(mp.residuals[seed % 7]).all()


def test_an_additive_table_has_no_residual():
    rows, cols = np.array([0.0, 1.0, 3.0, -2.0, 7.5]), np.array([0.5, -1.0, 2.0, 4.0])
    mp = median_polish(5.0 + rows[:, None] + cols[None, :])
    np.testing.assert_allclose(mp.residuals, 0.0, atol=1e-12)
    assert mp.converged
    # effects are recovered up to the usual centring: median polish leaves the effects with median 0
    assert np.median(mp.row_effects) == pytest.approx(0.0, abs=1e-12)
    assert np.median(mp.col_effects) == pytest.approx(0.0, abs=1e-12)
    np.testing.assert_allclose(mp.row_effects, rows - np.median(rows), atol=1e-12)
    np.testing.assert_allclose(mp.col_effects, cols - np.median(cols), atol=1e-12)
    assert mp.overall == pytest.approx(5.0 + np.median(rows) + np.median(cols))


def test_one_bad_cell_stays_in_its_residual_where_least_squares_spreads_it():
    rng = np.random.default_rng(5)
    n_rows, n_cols = 8, 5
    x = rng.normal(0, 0.1, (n_rows, n_cols))
    x[2, 3] += 10.0
    mp = median_polish(x)
    assert mp.residuals[2, 3] > 9.0
    assert np.abs(np.delete(mp.residuals.ravel(), 2 * n_cols + 3)).max() < 0.5
    assert abs(mp.row_effects[2]) < 0.3 and abs(mp.col_effects[3]) < 0.3
    # The least-squares two-way fit (np.linalg.lstsq on the indicator design): its row 2 effect takes 10/5 of
    # the bad cell and its column 3 effect 10/8, and the other cells of that row and column take it up too.
    design = np.column_stack([np.ones(x.size), np.kron(np.eye(n_rows), np.ones((n_cols, 1))),
                              np.kron(np.ones((n_rows, 1)), np.eye(n_cols))])
    coef, *_ = np.linalg.lstsq(design, x.ravel(), rcond=None)
    ls_resid = (x.ravel() - design @ coef).reshape(x.shape)
    ls_row = coef[1:1 + n_rows] - coef[1:1 + n_rows].mean()
    ls_col = coef[1 + n_rows:] - coef[1 + n_rows:].mean()
    assert ls_row[2] > 1.5 and ls_col[3] > 1.0
    assert ls_resid[2, 3] < 7.5 and np.abs(ls_resid[2, [0, 1, 2, 4]]).min() > 1.0
    assert ls_resid[2, 3] < mp.residuals[2, 3]
    # the robust scale of the residuals is that of the noise (0.1), not of the bad cell
    assert 0.02 < mp.residual_scale < 0.3
    assert mp.residuals[2, 3] / mp.residual_scale > 30


def test_residual_rows_and_columns_have_median_zero_at_convergence():
    rng = np.random.default_rng(11)
    x = rng.standard_cauchy((12, 7)) + np.arange(12)[:, None]
    x[rng.random(x.shape) < 0.15] = np.nan
    mp = median_polish(x, max_iter=200, tol=1e-12)
    assert mp.converged
    # the last half-sweep was over the columns, so their medians are 0; the rows' are 0 once the sweeps settle
    np.testing.assert_allclose(np.nanmedian(mp.residuals, axis=0), 0.0, atol=1e-12)
    assert np.abs(np.nanmedian(mp.residuals, axis=1)).max() < 0.05 * mp.residual_scale
    ok = np.isfinite(x)
    np.testing.assert_allclose(_fitted(mp)[ok], x[ok])


def test_max_iter_bounds_the_sweeps():
    rng = np.random.default_rng(3)
    mp = median_polish(rng.standard_cauchy((15, 9)), max_iter=1, tol=1e-12)
    assert mp.n_iter == 1 and not mp.converged


def test_empty_cells_are_left_out_and_stay_empty():
    x = np.array([[1.0, 2.0, np.nan, np.nan], [3.0, np.nan, 5.0, np.nan], [np.nan] * 4, [2.0, 6.0, 1.0, np.nan]])
    mp = median_polish(x)
    assert np.isnan(mp.residuals[0, 2]) and np.isnan(mp.residuals[2]).all() and np.isnan(mp.residuals[:, 3]).all()
    assert np.isnan(mp.row_effects[2]) and np.isnan(mp.col_effects[3])
    assert np.isfinite(mp.row_effects[[0, 1, 3]]).all() and np.isfinite(mp.col_effects[:3]).all()
    ok = np.isfinite(x)
    np.testing.assert_allclose(_fitted(mp)[ok], x[ok])
    # the empty row and column change nothing about the others
    small = median_polish(x[[0, 1, 3]][:, :3])
    assert small.overall == mp.overall
    np.testing.assert_array_equal(small.row_effects, mp.row_effects[[0, 1, 3]])
    np.testing.assert_array_equal(small.residuals, mp.residuals[[0, 1, 3]][:, :3])


def test_a_single_row_or_column():
    mp = median_polish([[1.0, 4.0, 2.0]])
    np.testing.assert_allclose(_fitted(mp), [[1.0, 4.0, 2.0]])
    np.testing.assert_allclose(mp.residuals, 0.0)
    assert mp.overall == 2.0 and mp.row_effects.tolist() == [0.0]
    mp = median_polish([[1.0], [4.0], [2.0]])
    np.testing.assert_allclose(mp.residuals, 0.0)
    assert mp.overall == 2.0 and mp.col_effects.tolist() == [0.0]
    mp = median_polish([[3.5]])
    assert mp.overall == 3.5 and mp.residuals.tolist() == [[0.0]]


def test_long_tables_keep_their_labels_and_give_robust_sds():
    rng = np.random.default_rng(8)
    lots, rigs = [f"L{i}" for i in range(10)], ["r3", "r1", "r2", "r4"]
    rows = [(lot, rig, 0.3 * i - 0.2 * j + rng.normal(0, 0.1)) for i, lot in enumerate(lots)
            for j, rig in enumerate(rigs) if (i + j) % 5 != 4]  # some lots do not run on some rigs
    frame = pd.DataFrame(rows, columns=["lot", "rig", "z"])
    frame.loc[(frame["lot"] == "L4") & (frame["rig"] == "r2"), "z"] += 2.0
    mp, row_labels, col_labels, cells = polish_frame(frame, row="lot", col="rig", value="z")
    assert row_labels == lots and col_labels == rigs
    assert len(cells) == len(frame) and list(cells.columns) == ["lot", "rig", "residual", "residual_sd"]
    wide = frame.pivot(index="lot", columns="rig", values="z").loc[lots, rigs]
    direct = median_polish(wide.to_numpy())
    np.testing.assert_array_equal(mp.residuals, direct.residuals)
    cell = cells.set_index(["lot", "rig"])
    assert cell.loc[("L4", "r2"), "residual"] == direct.residuals[4, 2]
    # robust SDs: MAD x 1.4826, as scipy.stats.median_abs_deviation(scale="normal")
    scale = stats.median_abs_deviation(cells["residual"], scale="normal")
    assert scale == pytest.approx(1.4826 * np.median(np.abs(cells["residual"] - np.median(cells["residual"]))),
                                  rel=1e-4)
    np.testing.assert_allclose(cells["residual_sd"], cells["residual"] / scale)
    assert cell.loc[("L4", "r2"), "residual_sd"] > 8
    assert cells["residual_sd"].abs().idxmax() == cell.index.get_loc(("L4", "r2"))


def test_the_robust_scale_estimates_the_noise_sd_in_a_large_table():
    # In a large table nearly all residuals are noise, so MAD x 1.4826 estimates the noise SD (here 2.0);
    # narrow tables leave many residuals at or near 0 and a smaller scale (see MedianPolish.residual_scale).
    rng = np.random.default_rng(4)
    x = rng.normal(0, 2.0, (60, 40)) + rng.normal(0, 5, 60)[:, None] + rng.normal(0, 5, 40)[None, :]
    assert 1.7 < median_polish(x).residual_scale < 2.1


def test_a_long_table_whose_residuals_are_mostly_zero_has_no_robust_sd():
    frame = pd.DataFrame({"lot": ["A", "A", "B", "B"], "rig": ["r1", "r2", "r1", "r2"], "z": [0.0, 1.0, 5.0, 6.0]})
    mp, _, _, cells = polish_frame(frame, row="lot", col="rig", value="z")
    assert mp.residual_scale == 0.0 and cells["residual_sd"].isna().all()
    assert mp.row_effects[1] - mp.row_effects[0] == pytest.approx(5.0)


def test_bad_tables_are_refused_with_their_shape():
    with pytest.raises(ParameterError, match=r"2-D table; got shape \(3,\)"):
        median_polish([1.0, 2.0, 3.0])
    with pytest.raises(ParameterError, match=r"2-D table; got shape \(2, 2, 1\)"):
        median_polish(np.zeros((2, 2, 1)))
    with pytest.raises(ParameterError, match=r"2-D table; got shape \(0, 3\)"):
        median_polish(np.zeros((0, 3)))
    with pytest.raises(ParameterError, match=r"the \(2, 2\) table is all empty"):
        median_polish([[np.nan, np.nan], [np.nan, np.nan]])
    with pytest.raises(ParameterError, match=r"the \(1, 2\) table has 1 infinite"):
        median_polish([[1.0, np.inf]])
    with pytest.raises(ParameterError, match="max_iter must be a positive integer; got 0"):
        median_polish([[1.0]], max_iter=0)
    with pytest.raises(ParameterError, match="tol must be a finite number > 0; got -0.1"):
        median_polish([[1.0]], tol=-0.1)


def test_bad_long_tables_are_refused():
    with pytest.raises(ParameterError, match="column 'x'"):
        polish_frame(pd.DataFrame({"a": [1]}), row="a", col="x", value="a")
    frame = pd.DataFrame({"lot": ["A", "A", "B"], "rig": ["r1", "r1", "r1"], "z": [0.0, 1.0, 2.0]})
    with pytest.raises(ParameterError, match=r"one 'z' per \(lot, rig\); 1 repeated, the first \('A', 'r1'\)"):
        polish_frame(frame, row="lot", col="rig", value="z")
