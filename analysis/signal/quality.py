"""Recording quality checks: is this recording fit to analyse?

Each check takes a signal (1-D array, full-scale units, ±1.0 = full scale) or a number and returns one
`QCResult`. The checks do not raise for a bad recording, only for bad parameters (`ParameterError`).

Levels are RMS levels re full scale: L = 20·log10(rms), so a full-scale sine reads -3.01 dBFS and a full-scale
square wave 0 dBFS. An all-zero stretch has no finite level; it reads `LEVEL_FLOOR_DBFS` (-300 dBFS) so that every
value stays finite and JSON-safe, and it still fails any level limit.

Non-finite input (NaN, ±inf): the audio reader rejects such files, but the signal checks stay safe on them. A
check whose statistic a non-finite sample would corrupt (DC offset, silence, SNR) returns value NaN and
passed=False with a detail that says how many samples were non-finite; clipping counts ±inf as at the rail and
NaN as not; dropout looks only at exact zeros. Nothing loops over samples, so nothing hangs.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from analysis.errors import ParameterError
from analysis.signal._common import LEVEL_FLOOR_DBFS, as_signal, integer, mean_square_db, number, runs

__all__ = [
    "QCResult",
    "CHECK_NAMES",
    "LEVEL_FLOOR_DBFS",
    "PEAK_TOLERANCE",
    "MAX_PEAK_TOLERANCE",
    "MAX_BIN_WIDTH",
    "check_clipping",
    "check_dropouts",
    "check_dc_offset",
    "check_duration",
    "check_silence",
    "check_sample_rate",
    "check_snr",
    "check_markers",
    "run_quality_checks",
]

CHECK_NAMES = ("clipping", "dropout", "dc_offset", "duration", "silence", "sample_rate", "snr", "marker")


@dataclass(frozen=True)
class QCResult:
    """Outcome of one quality check.

    check: one of CHECK_NAMES. value: the measured statistic, limit: the limit it was compared with (both floats,
    NaN where not applicable; units in `detail`). passed: True when the recording is fit on this count.
    detail: one plain sentence with the numbers and units.
    """

    check: str
    value: float
    limit: float
    passed: bool
    detail: str


def _non_finite(x: np.ndarray) -> int:
    return int(x.size - np.count_nonzero(np.isfinite(x)))


def _not_evaluated(check: str, limit: float, n_bad: int, n: int) -> QCResult:
    return QCResult(check, math.nan, limit, False,
                    f"Not evaluated: {n_bad} of {n} samples are not finite (NaN or infinite).")


def _empty(check: str, limit: float) -> QCResult:
    return QCResult(check, math.nan, limit, False, "Not evaluated: the signal has no samples.")


def _ms(seconds: float) -> str:
    return f"{seconds * 1e3:.1f} ms"


# ---------------------------------------------------------------- checks

#: Within this of a recording's own peak counts as at the peak (full-scale units): one step of a 16-bit file.
PEAK_TOLERANCE = 2.0 ** -15
#: Largest allowed peak tolerance (FS) and histogram bin width (fraction of the own peak) of the clipping check.
MAX_PEAK_TOLERANCE = 0.01
MAX_BIN_WIDTH = 0.5


@dataclass(frozen=True)
class _Pile:
    """One histogram end bin against the nearest occupied bin below it (counts of samples; bin width in FS)."""

    excess: int      # end - ratio·below when that is at least min_run samples, else 0
    end: int
    below: int
    bin_fs: float


@dataclass(frozen=True)
class _Side:
    """One polarity's extreme: its peak (FS), its flat runs at the peak and its histogram pile-up."""

    sign: str        # "+" or "-"
    peak: float      # the largest value of sign·x
    flat: int        # samples in flat runs at the peak (0 when the top is rounded)
    flat_runs: int
    pile: _Pile


def _pile(d: np.ndarray, bin_fs: float, *, ratio: float, run: int, reach: float = math.inf) -> _Pile | None:
    """The end bin (d < bin_fs, d = distance below the peak) against the nearest bin below it that holds samples.

    The nearest occupied bin rather than the adjacent one: a tone whose period is a whole number of samples takes
    only a few values, each repeated once a period, with empty bins between them. d may hold only the samples
    with d < reach (the top of the histogram); None when the nearest occupied bin may lie beyond it.
    """
    end = int(np.count_nonzero(d < bin_fs))
    rest = d[d >= bin_fs]
    step = math.floor(float(rest.min()) / bin_fs) if rest.size else None
    if math.isfinite(reach) and (step is None or (step + 2) * bin_fs > reach):
        return None
    below = int(np.count_nonzero(np.floor(rest / bin_fs) == step)) if step is not None else 0
    excess = end - ratio * below
    return _Pile(int(math.floor(excess)) if excess >= run else 0, end, below, bin_fs)


# Distances below the peak, in coarse bins, within which the histogram's top is read first (then all samples).
_REACHES = (4.0, 32.0, math.inf)


def _side(y: np.ndarray, sign: str, *, tolerance: float, run: int, bin_width: float, ratio: float) -> _Side | None:
    """The extreme of sign·y; y itself is passed for both signs (the negative side reads -min(y) and d = peak + y,
    the same numbers as for -y, without making -y)."""
    peak = float(y.max()) if sign == "+" else -float(y.min())
    if peak <= 0.0:
        return None
    d = peak - y if sign == "+" else peak + y
    # Whole tolerance steps, so that every bin of a quantised file holds the same number of steps.
    coarse_fs = max(1.0, round(bin_width * peak / tolerance)) * tolerance
    # Both counts need only the top of the histogram, usually a small share of the samples: read it within a few
    # coarse bins of the peak, further down only when a bin below is not found there. The widest finite reach is
    # taken from all samples once; the narrower ones from it.
    widest = max(r for r in _REACHES if math.isfinite(r))
    wide = d[d < widest * coarse_fs]
    for reach in _REACHES:
        top = wide[wide < reach * coarse_fs] if reach < widest else wide if reach == widest else d
        # A rounded (locally quadratic) top puts at most 1 + √2 times as many samples within a band of the peak as
        # in the band of the same width below it; a flat top puts nearly all of them in the first.
        fine = _pile(top, tolerance, ratio=ratio, run=run, reach=reach * coarse_fs)
        coarse = _pile(top, coarse_fs, ratio=ratio, run=run, reach=reach * coarse_fs)
        if fine is not None and coarse is not None:
            break
    flat, flat_runs = 0, 0
    if fine.end > ratio * fine.below:
        _, lengths = runs(d < tolerance)
        long_runs = lengths[lengths >= run]
        flat, flat_runs = int(long_runs.sum()), int(long_runs.size)
    return _Side(sign, peak, flat, flat_runs, max(fine, coarse, key=lambda p: p.excess))


def _pct(fraction: float) -> str:
    return f"{fraction * 100:.3g}%"


def _plural(k: int, word: str) -> str:
    return f"{k} {word}{'s' if k != 1 else ''}"


def _peak_words(sides: list[_Side]) -> str:
    if len(sides) == 1:
        return f"own {'positive' if sides[0].sign == '+' else 'negative'} peak of {sides[0].peak:.3f} FS"
    return "own peaks of " + " and ".join(f"{s.sign}{s.peak:.3f}" for s in sides) + " FS"


def _pile_words(s: _Side, tolerance: float, width: float) -> str:
    p = s.pile
    if p.bin_fs == tolerance:
        return f"{s.sign}{s.peak:.3f} FS: {p.end} at the peak against {p.below} at the nearest level below"
    top = f"{width * 100:g}%"
    return f"{s.sign}{s.peak:.3f} FS: {p.end} in the top {top} against {p.below} in the nearest {top} below"


def check_clipping(x, *, clip_level: float = 0.999, min_run: int = 3, max_fraction: float = 1e-4,
                   peak_tolerance: float = PEAK_TOLERANCE, bin_width: float = 0.01,
                   pileup_ratio: float = 3.0) -> QCResult:
    """Clipped samples as a fraction of all samples, counted three ways; the largest count is judged.

    at full scale: samples in runs of >= min_run consecutive samples with |x| >= clip_level (FS).
    flattened: samples in runs of >= min_run within peak_tolerance (FS) of the recording's own positive or
    negative peak; a side counts only when that band holds more than pileup_ratio times the samples of the nearest
    band of the same width below it that holds any (a clean, rounded peak holds at most 1 + √2 times as many).
    piled up: per side, the samples of the amplitude histogram's end bin beyond pileup_ratio times those of the
    nearest occupied bin below it, with bins peak_tolerance wide and bin_width times the own peak wide (in whole
    peak_tolerance steps), whichever shows more; an excess of fewer than min_run samples counts 0.
    value: the largest of the three fractions (0..1); limit: max_fraction; passed: value <= max_fraction.
    NaN samples are never at the rail, ±inf always are; neither takes part in the own-peak counts.
    """
    x = as_signal("x", x)
    level = number("clip_level", clip_level, low=0.0, low_open=True)
    run = integer("min_run", min_run, low=1)
    limit = number("max_fraction", max_fraction, low=0.0, high=1.0)
    tolerance = number("peak_tolerance", peak_tolerance, low=0.0, high=MAX_PEAK_TOLERANCE, low_open=True)
    width = number("bin_width", bin_width, low=0.0, high=MAX_BIN_WIDTH, low_open=True)
    ratio = number("pileup_ratio", pileup_ratio, low=1.0)
    if x.size == 0:
        return _empty("clipping", limit)
    n = x.size
    _, lengths = runs(np.abs(x) >= level)
    long_runs = lengths[lengths >= run]
    full = float(long_runs.sum()) / n
    counts = {"full": (full, f"{_pct(full)} of samples in {_plural(long_runs.size, 'run')} of {run} or more "
                             f"samples at or above {level:g} FS")}

    finite = np.isfinite(x)
    y = (x if finite.all() else np.where(finite, x, 0.0)).astype(np.float64, copy=False)
    sides = [s for s in (_side(y, "+", tolerance=tolerance, run=run, bin_width=width, ratio=ratio),
                         _side(y, "-", tolerance=tolerance, run=run, bin_width=width, ratio=ratio)) if s is not None]
    flat = [s for s in sides if s.flat]
    if flat:
        k = sum(s.flat for s in flat)
        counts["flat"] = (k / n, f"{_plural(k, 'sample')} ({_pct(k / n)}) in "
                                 f"{_plural(sum(s.flat_runs for s in flat), 'run')} flattened at the recording's "
                                 f"{_peak_words(flat)}")
    piled = [s for s in sides if s.pile.excess]
    if piled:
        k = sum(s.pile.excess for s in piled)
        evidence = "; ".join(_pile_words(s, tolerance, width) for s in piled)
        counts["piled"] = (k / n, f"{_plural(k, 'sample')} ({_pct(k / n)}) piled up at the recording's "
                                  f"{_peak_words(piled)} beyond {ratio:g} times the count just below ({evidence})")
    # The largest count is judged and told first; on a tie the full-scale count.
    order = sorted(counts, key=lambda key: -counts[key][0])
    value = counts[order[0]][0]
    also = "".join(f"; also {counts[key][1]}" for key in order[1:] if counts[key][0] > limit)
    return QCResult("clipping", value, limit, value <= limit, f"{counts[order[0]][1]}{also} (limit {_pct(limit)}).")


def check_dropouts(x, *, sample_rate_hz: float, max_dropout_s: float = 0.002) -> QCResult:
    """Longest run of exact zeros, in s; passed when it is no longer than max_dropout_s.

    The detail also counts the runs of zeros longer than the limit. Isolated exact zeros are ordinary in
    quantised audio, so only the longest run is judged.
    """
    x = as_signal("x", x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    limit = number("max_dropout_s", max_dropout_s, low=0.0)
    if x.size == 0:
        return _empty("dropout", limit)
    _, lengths = runs(x == 0)
    longest = float(lengths.max()) / fs if lengths.size else 0.0
    n_over = int(np.count_nonzero(lengths / fs > limit))
    passed = longest <= limit
    detail = (f"Longest run of exact zeros {_ms(longest)}; {n_over} run{'s' if n_over != 1 else ''} "
              f"longer than the limit of {_ms(limit)}.")
    return QCResult("dropout", longest, limit, passed, detail)


def check_dc_offset(x, *, max_dc_offset: float = 0.01) -> QCResult:
    """|mean of x| in full-scale units; passed when it is no more than max_dc_offset."""
    x = as_signal("x", x)
    limit = number("max_dc_offset", max_dc_offset, low=0.0)
    if x.size == 0:
        return _empty("dc_offset", limit)
    n_bad = _non_finite(x)
    if n_bad:
        return _not_evaluated("dc_offset", limit, n_bad, x.size)
    dc = abs(float(np.mean(x, dtype=np.float64)))
    passed = dc <= limit
    return QCResult("dc_offset", dc, limit, passed,
                    f"Mean (DC offset) {dc:.4f} FS in magnitude (limit {limit:.4f} FS).")


def check_duration(n_samples: int, *, sample_rate_hz: float, min_duration_s: float) -> QCResult:
    """Recording length n_samples/sample_rate_hz in s; passed when it is at least min_duration_s."""
    n = integer("n_samples", n_samples, low=0)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    limit = number("min_duration_s", min_duration_s, low=0.0)
    duration = n / fs
    passed = duration >= limit
    return QCResult("duration", duration, limit, passed,
                    f"Recording lasts {duration:.3f} s ({n} samples at {fs:g} Hz); at least {limit:.3f} s needed.")


def check_silence(x, *, min_rms_dbfs: float = -70.0) -> QCResult:
    """Overall RMS level 20·log10(rms) in dBFS; passed when it is at least min_rms_dbfs.

    An all-zero signal reads LEVEL_FLOOR_DBFS (-300 dBFS) and fails.
    """
    x = as_signal("x", x)
    limit = number("min_rms_dbfs", min_rms_dbfs)
    if x.size == 0:
        return _empty("silence", limit)
    n_bad = _non_finite(x)
    if n_bad:
        return _not_evaluated("silence", limit, n_bad, x.size)
    level = float(mean_square_db(np.mean(np.square(x, dtype=np.float64))))
    passed = level >= limit
    return QCResult("silence", level, limit, passed,
                    f"Overall RMS level {level:.1f} dBFS (at least {limit:.1f} dBFS needed).")


def check_sample_rate(sample_rate_hz: float, *, min_hz: float, max_hz: float) -> QCResult:
    """Sample rate within [min_hz, max_hz].

    value: the rate in Hz; limit: the bound it is compared with (min_hz when below it, else max_hz).
    """
    lo = number("min_hz", min_hz, low=0.0, low_open=True)
    hi = number("max_hz", max_hz, low=lo)
    try:
        fs = float(sample_rate_hz)
    except (TypeError, ValueError):
        raise ParameterError(f"sample_rate_hz must be a number; got {sample_rate_hz!r}") from None
    passed = lo <= fs <= hi  # False for NaN
    limit = lo if fs < lo else hi
    where = "within" if passed else "outside"
    return QCResult("sample_rate", fs, limit, passed,
                    f"Sample rate {fs:g} Hz is {where} the allowed {lo:g}–{hi:g} Hz.")


def check_snr(x, *, sample_rate_hz: float, first_event_s: float, background_max_s: float = 0.25,
              min_snr_db: float = 10.0, event_length_s: float | None = None, guard_s: float = 0.005,
              min_background_s: float = 0.02, frame_s: float = 0.01) -> QCResult:
    """Event level over background level, in dB.

    background: RMS level of the quiet stretch that ends guard_s before first_event_s and starts background_max_s
    earlier (or at the recording start); it must be at least min_background_s long.
    event: RMS level of the loudest window of frame_s (sliding by one sample) inside
    [first_event_s, first_event_s + event_length_s] (to the recording end when event_length_s is None).
    value: event level - background level in dB; limit: min_snr_db; passed: value >= min_snr_db.
    A recording without a usable quiet stretch, or whose first event lies outside it, fails with value NaN.
    """
    x = as_signal("x", x)
    fs = number("sample_rate_hz", sample_rate_hz, low=0.0, low_open=True)
    bg_max = number("background_max_s", background_max_s, low=0.0, low_open=True)
    limit = number("min_snr_db", min_snr_db)
    guard = number("guard_s", guard_s, low=0.0)
    bg_min = number("min_background_s", min_background_s, low=0.0, low_open=True)
    frame = number("frame_s", frame_s, low=0.0, low_open=True)
    if event_length_s is not None:
        event_length = number("event_length_s", event_length_s, low=0.0, low_open=True)
    try:
        t0 = float(first_event_s)
    except (TypeError, ValueError):
        raise ParameterError(f"first_event_s must be a number; got {first_event_s!r}") from None
    n = x.size
    duration = n / fs
    if not math.isfinite(t0) or t0 < 0 or t0 >= duration:
        return QCResult("snr", math.nan, limit, False,
                        f"Not evaluated: first event time {t0:g} s is not inside the recording (0–{duration:.3f} s).")
    n_bad = _non_finite(x)
    if n_bad:
        return _not_evaluated("snr", limit, n_bad, n)

    bg_stop = int(round((t0 - guard) * fs))
    bg_start = max(0, int(round((t0 - guard - bg_max) * fs)))
    bg_len = max(0, bg_stop - bg_start)
    if bg_len < int(round(bg_min * fs)) or bg_len == 0:
        return QCResult("snr", math.nan, limit, False,
                        f"Not evaluated: only {_ms(bg_len / fs)} of quiet signal before the first event at "
                        f"{t0:.3f} s (at least {_ms(bg_min)} needed, ending {_ms(guard)} before the event).")
    background_db = float(mean_square_db(np.mean(np.square(x[bg_start:bg_stop], dtype=np.float64))))

    ev_start = min(int(t0 * fs), n - 1)
    ev_stop = n if event_length_s is None else min(n, ev_start + max(1, int(round(event_length * fs))))
    seg = x[ev_start:ev_stop].astype(np.float64)
    width = max(1, min(seg.size, int(round(frame * fs))))
    # Mean square of every window of `width` samples, from one cumulative sum.
    csum = np.concatenate(([0.0], np.cumsum(seg * seg)))
    event_db = float(mean_square_db(np.max(csum[width:] - csum[:-width]) / width))

    snr = event_db - background_db
    passed = snr >= limit
    return QCResult("snr", snr, limit, passed,
                    f"Loudest {_ms(width / fs)} from the first event on ({event_db:.1f} dBFS) is {snr:.1f} dB "
                    f"over the {_ms(bg_len / fs)} background before it ({background_db:.1f} dBFS); "
                    f"at least {limit:.1f} dB needed.")


def check_markers(found: int, expected: int, *, source: str, problem: str | None = None) -> QCResult:
    """Number of marker edges found against the number the device profile expects.

    source: where the markers came from, e.g. "marker channel 1" or "sidecar markers_s". problem: set when the
    source is missing or unreadable (e.g. "the file has 1 channel"); the check then fails with that reason.
    value: edges found (NaN with a problem); limit: edges expected; passed: found == expected and no problem.
    """
    exp = integer("expected", expected, low=0)
    if not isinstance(source, str) or not source:
        raise ParameterError(f"source must be a non-empty string naming where the markers came from; got {source!r}")
    if problem is not None:
        return QCResult("marker", math.nan, float(exp), False, f"No markers from {source}: {problem}.")
    got = integer("found", found, low=0)
    passed = got == exp
    detail = f"{got} marker edge{'s' if got != 1 else ''} on {source} ({exp} expected)."
    return QCResult("marker", float(got), float(exp), passed, detail)


def run_quality_checks(x, *, sample_rate_hz: float, sample_rate_min_hz: float, sample_rate_max_hz: float,
                       min_duration_s: float, clip_level: float = 0.999, clip_min_run: int = 3,
                       max_clipped_fraction: float = 1e-4, clip_peak_tolerance: float = PEAK_TOLERANCE,
                       clip_bin_width: float = 0.01, clip_pileup_ratio: float = 3.0, max_dropout_s: float = 0.002,
                       max_dc_offset: float = 0.01, min_rms_dbfs: float = -70.0) -> tuple[QCResult, ...]:
    """Run the checks that need only the signal, in the fixed order
    sample_rate, duration, clipping, dropout, dc_offset, silence.

    Keyword names follow the device profile's [audio] and [quality] keys. The SNR and marker checks need event
    times and are run by the caller.
    """
    x = as_signal("x", x)
    return (
        check_sample_rate(sample_rate_hz, min_hz=sample_rate_min_hz, max_hz=sample_rate_max_hz),
        check_duration(x.size, sample_rate_hz=sample_rate_hz, min_duration_s=min_duration_s),
        check_clipping(x, clip_level=clip_level, min_run=clip_min_run, max_fraction=max_clipped_fraction,
                       peak_tolerance=clip_peak_tolerance, bin_width=clip_bin_width, pileup_ratio=clip_pileup_ratio),
        check_dropouts(x, sample_rate_hz=sample_rate_hz, max_dropout_s=max_dropout_s),
        check_dc_offset(x, max_dc_offset=max_dc_offset),
        check_silence(x, min_rms_dbfs=min_rms_dbfs),
    )
