"""Helpers shared by the signal modules (private): parameter checks, runs of a mask, levels of mean squares."""

from __future__ import annotations

import math

import numpy as np

from analysis.errors import ParameterError

__all__ = ["LEVEL_FLOOR_DBFS", "number", "integer", "as_signal", "runs", "mean_square_db"]

#: Level reported for an all-zero stretch: finite, JSON-safe, below any sensible limit.
LEVEL_FLOOR_DBFS = -300.0
_FLOOR_MEAN_SQUARE = 10.0 ** (LEVEL_FLOOR_DBFS / 10.0)


def number(name: str, value, *, low: float | None = None, high: float | None = None,
            low_open: bool = False) -> float:
    """A finite float in [low, high] (or (low, high] with low_open), else ParameterError naming the parameter."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise ParameterError(f"{name} must be a number; got {value!r}") from None
    bad = not math.isfinite(v)
    if low is not None:
        bad = bad or (v <= low if low_open else v < low)
    if high is not None:
        bad = bad or v > high
    if bad:
        lo = "" if low is None else (f" > {low:g}" if low_open else f" >= {low:g}")
        hi = "" if high is None else f" <= {high:g}"
        both = " and" if lo and hi else ""
        raise ParameterError(f"{name} must be a finite number{lo}{both}{hi}; got {value!r}")
    return v


def integer(name: str, value, *, low: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
        raise ParameterError(f"{name} must be an integer >= {low}; got {value!r}")
    return int(value)


def as_signal(name: str, x) -> np.ndarray:
    """The signal as a 1-D float array (float32 kept, anything else as float64)."""
    a = np.asarray(x)
    if a.ndim != 1:
        raise ParameterError(f"{name} must be a 1-D array of samples; got an array of shape {a.shape}")
    if a.dtype != np.float32:
        try:
            a = a.astype(np.float64, copy=False)
        except (TypeError, ValueError):
            raise ParameterError(f"{name} must hold numbers; got dtype {a.dtype}") from None
    return a


def runs(mask: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start indices and lengths of the runs of True in a 1-D boolean mask (int64 arrays, by start)."""
    # From the True positions alone: a mask is mostly False here (zeros, samples at the rail), so this costs one
    # pass over the mask and then work in proportion to its True samples.
    where = np.flatnonzero(mask)
    if where.size == 0:
        return where, where.copy()
    breaks = np.flatnonzero(np.diff(where) != 1)
    starts = where[np.concatenate(([0], breaks + 1))]
    stops = where[np.concatenate((breaks, [where.size - 1]))] + 1
    return starts, stops - starts


def mean_square_db(ms: float | np.ndarray):
    """10·log10 of a mean square, with all-zero input at LEVEL_FLOOR_DBFS."""
    return 10.0 * np.log10(np.maximum(ms, _FLOOR_MEAN_SQUARE))
