"""Tukey's median polish (analysis.monitor.polish)."""

import numpy as np
import pandas as pd
import pytest

from analysis.errors import ParameterError
from analysis.monitor.polish import median_polish, polish_frame


def test_the_parachuting_deaths_example():
    # Deaths from sport parachuting by experience (rows) and year 1973-75 (columns): Velleman & Hoaglin 1981,
    # "Applications, Basics and Computing of Exploratory Data Analysis", p. 224, the example of R's medpolish
    # documentation. Published result as remembered (and checked by hand, one sweep of rows then columns):
    # overall 8, rows 6 -1 0 2 -8, columns 0 -1 0.
    deaths = np.array([[14, 15, 14], [7, 4, 7], [8, 2, 10], [15, 9, 10], [0, 2, 0]], dtype=float)
    mp = median_polish(deaths)
    assert mp.overall == 8
    np.testing.assert_array_equal(mp.row_effects, [6, -1, 0, 2, -8])
    np.testing.assert_array_equal(mp.col_effects, [0, -1, 0])
    np.testing.assert_array_equal(mp.residuals, [[0, 2, 0], [0, -2, 0], [0, -5, 2], [5, 0, 0], [0, 3, 0]])
    assert mp.converged
    fitted = mp.overall + mp.row_effects[:, None] + mp.col_effects[None, :] + mp.residuals
    np.testing.assert_allclose(fitted, deaths)


def test_an_additive_table_has_no_residual():
    rows, cols = np.array([0.0, 1.0, 3.0, -2.0]), np.array([0.5, -1.0, 2.0])
    mp = median_polish(5.0 + rows[:, None] + cols[None, :])
    np.testing.assert_allclose(mp.residuals, 0.0, atol=1e-12)
    # effects are recovered up to the usual centring (medians of the effects are zero)
    np.testing.assert_allclose(mp.row_effects - np.median(mp.row_effects), rows - np.median(rows))
    np.testing.assert_allclose(mp.col_effects - np.median(mp.col_effects), cols - np.median(cols))


def test_one_bad_cell_stays_in_its_residual_where_least_squares_spreads_it():
    rng = np.random.default_rng(5)
    x = rng.normal(0, 0.1, (8, 5))
    x[2, 3] += 10.0
    mp = median_polish(x)
    assert mp.residuals[2, 3] > 9.0
    assert np.abs(np.delete(mp.residuals.ravel(), 2 * 5 + 3)).max() < 0.5
    assert abs(mp.row_effects[2]) < 0.3 and abs(mp.col_effects[3]) < 0.3
    # least squares (row and column means) moves row 2 by 10/5 and column 3 by 10/8
    ls_row = x.mean(axis=1) - x.mean()
    assert ls_row[2] > 1.5
    assert mp.residual_scale < 0.3


def test_empty_cells_are_left_out_and_stay_empty():
    x = np.array([[1.0, 2.0, np.nan], [3.0, np.nan, 5.0], [np.nan, np.nan, np.nan]])
    mp = median_polish(x)
    assert np.isnan(mp.residuals[0, 2]) and np.isnan(mp.residuals[2]).all()
    ok = np.isfinite(x)
    fitted = mp.overall + mp.row_effects[:, None] + mp.col_effects[None, :] + mp.residuals
    np.testing.assert_allclose(fitted[ok], x[ok])


def test_a_single_row_or_column():
    mp = median_polish([[1.0, 4.0, 2.0]])
    fitted = mp.overall + mp.row_effects[:, None] + mp.col_effects[None, :] + mp.residuals
    np.testing.assert_allclose(fitted, [[1.0, 4.0, 2.0]])
    np.testing.assert_allclose(mp.residuals, 0.0)
    mp = median_polish([[1.0], [4.0], [2.0]])
    np.testing.assert_allclose(mp.residuals, 0.0)


def test_long_tables_keep_their_labels():
    frame = pd.DataFrame({"lot": ["A", "A", "B", "B", "C"], "rig": ["r1", "r2", "r1", "r2", "r1"],
                          "z": [0.0, 1.0, 5.0, 6.0, 0.5]})
    mp, rows, cols, res = polish_frame(frame, row="lot", col="rig", value="z")
    assert rows == ["A", "B", "C"] and cols == ["r1", "r2"]
    assert len(res) == 5 and set(res.columns) == {"lot", "rig", "residual"}
    assert mp.row_effects[1] - mp.row_effects[0] == pytest.approx(5.0)


def test_bad_tables_are_refused_with_their_shape():
    with pytest.raises(ParameterError, match=r"2-D table; got shape \(3,\)"):
        median_polish([1.0, 2.0, 3.0])
    with pytest.raises(ParameterError, match="all empty"):
        median_polish([[np.nan, np.nan]])
    with pytest.raises(ParameterError, match="max_iter"):
        median_polish([[1.0]], max_iter=0)
    with pytest.raises(ParameterError, match="column 'x'"):
        polish_frame(pd.DataFrame({"a": [1]}), row="a", col="x", value="a")
