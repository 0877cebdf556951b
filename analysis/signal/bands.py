"""Frequency band layouts and the matrix that sums FFT bins into bands.

One-third-octave bands follow IEC 61260-1:2014 (base-10 system) with ISO 266 R10 nominal mid-band values.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from analysis.errors import ParameterError

__all__ = ["BandLayout", "third_octave_bands", "fractional_octave_bands", "FRACTIONS", "linear_bands", "band_matrix"]

# IEC 61260-1:2014, 5.2: octave frequency ratio for the base-10 system.
_G = 10.0 ** (3.0 / 10.0)
_REFERENCE_HZ = 1000.0
# ISO 266 R10 preferred numbers, as integers (x100) so decade scaling stays exact in floating point.
_R10_MANTISSAS = np.array([100, 125, 160, 200, 250, 315, 400, 500, 630, 800])
# A band is included when its exact mid-band frequency is within 0.1 band index (about 2.3 %) of the range: users
# type nominal values (200 Hz) for bands whose exact mid-band frequency is slightly off (199.53 Hz).
_INDEX_TOLERANCE = 0.1
_KINDS = ("third_octave", "fractional_octave", "linear")
#: The 1/b-octave bandwidth designators offered beside one-third octave (b = 3).
FRACTIONS = (6, 12, 24)


@dataclass(frozen=True, eq=False)
class BandLayout:
    """A set of frequency bands.

    kind: "third_octave", "fractional_octave" or "linear". centres_hz, lower_hz, upper_hz: exact mid-band and
    edge frequencies in Hz, float64 arrays of shape (n_bands,). nominal_hz: the labels users see (ISO 266 R10
    values for one-third-octave bands, the exact centres for the others). Arrays are read-only.
    """

    kind: str
    centres_hz: np.ndarray
    lower_hz: np.ndarray
    upper_hz: np.ndarray
    nominal_hz: np.ndarray

    def __post_init__(self):
        if self.kind not in _KINDS:
            raise ParameterError(f"kind must be one of {_KINDS}; got {self.kind!r}")
        arrays = {}
        for name in ("centres_hz", "lower_hz", "upper_hz", "nominal_hz"):
            value = np.array(getattr(self, name), dtype=np.float64)
            if value.ndim != 1 or value.size == 0:
                raise ParameterError(f"{name} must be a non-empty 1-D array; got shape {value.shape}")
            value.setflags(write=False)
            arrays[name] = value
        shapes = {a.shape for a in arrays.values()}
        if len(shapes) != 1:
            raise ParameterError(f"centres_hz, lower_hz, upper_hz and nominal_hz must have one shape; got {shapes}")
        if not np.all((arrays["lower_hz"] >= 0) & (arrays["lower_hz"] < arrays["upper_hz"])):
            raise ParameterError("every band needs 0 <= lower_hz < upper_hz")
        for name, value in arrays.items():
            object.__setattr__(self, name, value)

    @property
    def n_bands(self) -> int:
        return int(self.centres_hz.size)

    def edges_hz(self) -> np.ndarray:
        """Lower and upper band edges in Hz, shape (n_bands, 2)."""
        return np.column_stack([self.lower_hz, self.upper_hz])


def _check_range(fmin_hz, fmax_hz) -> tuple[float, float]:
    fmin, fmax = float(fmin_hz), float(fmax_hz)
    if not np.isfinite(fmin) or fmin <= 0:
        raise ParameterError(f"fmin_hz must be a finite frequency > 0 Hz; got {fmin_hz!r}")
    if not np.isfinite(fmax) or fmax <= fmin:
        raise ParameterError(f"fmax_hz must be finite and > fmin_hz ({fmin:g} Hz); got {fmax_hz!r}")
    return fmin, fmax


def _r10_nominal(index: np.ndarray) -> np.ndarray:
    """ISO 266 R10 nominal value for band index x (x = 0 is 1000 Hz)."""
    mantissa = _R10_MANTISSAS[np.mod(index, 10)].astype(np.float64)
    exponent = np.floor_divide(index, 10) + 1  # 1000 Hz = 100 x 10^1
    # Multiply or divide by an exact power of ten so 31.5 stays 31.5 rather than 31.499999...
    scale = 10.0 ** np.abs(exponent)
    return np.where(exponent >= 0, mantissa * scale, mantissa / scale)


def third_octave_bands(*, fmin_hz: float, fmax_hz: float) -> BandLayout:
    """One-third-octave bands whose exact mid-band frequency lies in [fmin_hz, fmax_hz].

    IEC 61260-1:2014 base-10: G = 10^(3/10), fm = 1000·G^(x/3) Hz, edges fm·G^(-1/6) and fm·G^(+1/6).
    Nominal values are the ISO 266 R10 preferred numbers, so fmin_hz=20, fmax_hz=20000 gives 31 bands.
    """
    fmin, fmax = _check_range(fmin_hz, fmax_hz)
    # G^(x/3) = 10^(x/10), so the band index is 10·log10(f/1000).
    x_lo = int(np.ceil(10.0 * np.log10(fmin / _REFERENCE_HZ) - _INDEX_TOLERANCE))
    x_hi = int(np.floor(10.0 * np.log10(fmax / _REFERENCE_HZ) + _INDEX_TOLERANCE))
    if x_hi < x_lo:
        raise ParameterError(
            f"no one-third-octave band has its mid-band frequency in fmin_hz..fmax_hz = {fmin:g}..{fmax:g} Hz; "
            "widen the range"
        )
    x = np.arange(x_lo, x_hi + 1)
    centres = _REFERENCE_HZ * _G ** (x / 3.0)
    return BandLayout(
        kind="third_octave",
        centres_hz=centres,
        lower_hz=centres * _G ** (-1.0 / 6.0),
        upper_hz=centres * _G ** (1.0 / 6.0),
        nominal_hz=_r10_nominal(x),
    )


def fractional_octave_bands(*, fraction: int, fmin_hz: float, fmax_hz: float) -> BandLayout:
    """1/b-octave bands (b = ``fraction``: 6, 12 or 24) whose exact mid-band frequency lies in [fmin_hz, fmax_hz].

    IEC 61260-1:2014 base-10, G = 10^(3/10), reference 1000 Hz: for odd b, fm = 1000·G^(x/b); for even b,
    fm = 1000·G^((2x+1)/(2b)) (1000 Hz is then a band edge); edges fm·G^(-1/(2b)) and fm·G^(+1/(2b)). There are no
    preferred nominal values for these bands: the labels are the exact mid-band frequencies to 3 significant
    figures.
    """
    if isinstance(fraction, bool) or fraction not in FRACTIONS:
        raise ParameterError(f"fraction must be one of {', '.join(map(str, FRACTIONS))} (1/b octave); got {fraction!r}")
    fmin, fmax = _check_range(fmin_hz, fmax_hz)
    b = int(fraction)
    lg = np.log10(_G)

    def index(f):  # the real-valued band index of frequency f
        e = np.log10(f / _REFERENCE_HZ) / lg * b
        return e if b % 2 else (e - 0.5)

    x_lo = int(np.ceil(index(fmin) - _INDEX_TOLERANCE))
    x_hi = int(np.floor(index(fmax) + _INDEX_TOLERANCE))
    if x_hi < x_lo:
        raise ParameterError(f"no 1/{b}-octave band has its mid-band frequency in fmin_hz..fmax_hz = "
                             f"{fmin:g}..{fmax:g} Hz; widen the range")
    x = np.arange(x_lo, x_hi + 1)
    centres = _REFERENCE_HZ * _G ** ((x / b) if b % 2 else ((2 * x + 1) / (2 * b)))
    half = _G ** (1.0 / (2 * b))
    nominal = np.array([float(f"{c:.3g}") for c in centres])
    return BandLayout(kind="fractional_octave", centres_hz=centres, lower_hz=centres / half,
                      upper_hz=centres * half, nominal_hz=nominal)


def linear_bands(*, fmin_hz: float, fmax_hz: float, n_bands: int) -> BandLayout:
    """n_bands contiguous bands of equal width in Hz from fmin_hz to fmax_hz (fmin_hz may be 0)."""
    fmin, fmax = float(fmin_hz), float(fmax_hz)
    if not np.isfinite(fmin) or fmin < 0:
        raise ParameterError(f"fmin_hz must be a finite frequency >= 0 Hz; got {fmin_hz!r}")
    if not np.isfinite(fmax) or fmax <= fmin:
        raise ParameterError(f"fmax_hz must be finite and > fmin_hz ({fmin:g} Hz); got {fmax_hz!r}")
    if isinstance(n_bands, bool) or not isinstance(n_bands, (int, np.integer)) or n_bands < 1:
        raise ParameterError(f"n_bands must be an integer >= 1; got {n_bands!r}")
    edges = np.linspace(fmin, fmax, int(n_bands) + 1)
    centres = 0.5 * (edges[:-1] + edges[1:])
    return BandLayout(kind="linear", centres_hz=centres, lower_hz=edges[:-1], upper_hz=edges[1:],
                      nominal_hz=centres)


def band_matrix(freqs_hz, bin_width_hz: float, layout: BandLayout, *, weighting_db=None,
                nyquist_hz: float | None = None) -> np.ndarray:
    """Weights that sum a one-sided power spectrum into bands: band_power = power @ matrix.

    Bin k covers [f_k - df/2, f_k + df/2], clipped to [0, nyquist_hz] (the one-sided DC and Nyquist bins hold only
    half a bin width); its power is split between bands by the fraction of that interval inside each band, so a
    band narrower than a bin still gets its share and each row sums to 1 where bands cover the whole bin.
    weighting_db (shape (n_bins,), e.g. A-weighting in dB) multiplies each row by the power ratio 10^(w/10).
    Returns float64, shape (n_bins, n_bands).
    """
    if not isinstance(layout, BandLayout):
        raise ParameterError(f"layout must be a BandLayout; got {type(layout).__name__}")
    freqs = np.asarray(freqs_hz, dtype=np.float64)
    if freqs.ndim != 1 or freqs.size == 0 or not np.all(np.isfinite(freqs)) or np.any(freqs < 0):
        raise ParameterError(f"freqs_hz must be a non-empty 1-D array of frequencies >= 0 Hz; got shape {freqs.shape}")
    df = float(bin_width_hz)
    if not np.isfinite(df) or df <= 0:
        raise ParameterError(f"bin_width_hz must be a finite width > 0 Hz; got {bin_width_hz!r}")
    lo = np.maximum(freqs - 0.5 * df, 0.0)
    hi = freqs + 0.5 * df
    if nyquist_hz is not None:
        nyq = float(nyquist_hz)
        if not np.isfinite(nyq) or nyq < freqs.max():
            raise ParameterError(f"nyquist_hz must be finite and >= the highest bin frequency; got {nyquist_hz!r}")
        hi = np.minimum(hi, nyq)
    width = hi - lo
    overlap = (np.minimum(hi[:, None], layout.upper_hz[None, :])
               - np.maximum(lo[:, None], layout.lower_hz[None, :]))
    matrix = np.clip(overlap, 0.0, None) / np.where(width > 0, width, np.inf)[:, None]
    if weighting_db is not None:
        w = np.asarray(weighting_db, dtype=np.float64)
        if w.shape != freqs.shape:
            raise ParameterError(f"weighting_db must have the shape of freqs_hz {freqs.shape}; got {w.shape}")
        matrix *= (10.0 ** (w / 10.0))[:, None]  # 10^(-inf/10) = 0: no warning, the bin is excluded
    return matrix
