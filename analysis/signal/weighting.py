"""Frequency weightings A and C of IEC 61672-1:2013 (annex E, analytic form), in dB."""

from __future__ import annotations

import numpy as np

from analysis.errors import ParameterError

__all__ = ["a_weighting_db", "c_weighting_db", "weighting_db", "WEIGHTINGS"]

# IEC 61672-1:2013, annex E: pole frequencies derived from fL = 10^1.5, fH = 10^3.9 and fA = 10^2.45 Hz.
_F1_HZ = 20.598997
_F2_HZ = 107.65265
_F3_HZ = 737.86223
_F4_HZ = 12194.217
# Normalisation constants so that each weighting is 0 dB at 1 kHz (IEC 61672-1:2013, annex E).
_A1000_DB = 2.000
_C1000_DB = 0.062

WEIGHTINGS = ("none", "A", "C")


def _frequencies(f_hz) -> np.ndarray:
    f = np.asarray(f_hz, dtype=np.float64)
    if not np.all(np.isfinite(f)) or np.any(f < 0):
        raise ParameterError("f_hz must hold finite frequencies >= 0 Hz")
    return f


def a_weighting_db(f_hz) -> np.ndarray:
    """A-weighting in dB at frequencies f_hz (any shape); 0 Hz gives -inf.

    IEC 61672-1:2013 annex E:
    A = 20·log10(f4²f⁴ / ((f²+f1²)·sqrt((f²+f2²)(f²+f3²))·(f²+f4²))) + 2.000 dB.
    """
    fsq = _frequencies(f_hz) ** 2
    ratio = (_F4_HZ**2 * fsq**2) / (
        (fsq + _F1_HZ**2) * np.sqrt((fsq + _F2_HZ**2) * (fsq + _F3_HZ**2)) * (fsq + _F4_HZ**2)
    )
    with np.errstate(divide="ignore"):  # log10(0) = -inf at DC is the right answer
        return 20.0 * np.log10(ratio) + _A1000_DB


def c_weighting_db(f_hz) -> np.ndarray:
    """C-weighting in dB at frequencies f_hz (any shape); 0 Hz gives -inf.

    IEC 61672-1:2013 annex E: C = 20·log10(f4²f² / ((f²+f1²)(f²+f4²))) + 0.062 dB.
    """
    fsq = _frequencies(f_hz) ** 2
    ratio = (_F4_HZ**2 * fsq) / ((fsq + _F1_HZ**2) * (fsq + _F4_HZ**2))
    with np.errstate(divide="ignore"):
        return 20.0 * np.log10(ratio) + _C1000_DB


def weighting_db(name: str, f_hz) -> np.ndarray:
    """Weighting `name` ("none", "A" or "C") in dB at f_hz; "none" is 0 dB everywhere."""
    if name == "A":
        return a_weighting_db(f_hz)
    if name == "C":
        return c_weighting_db(f_hz)
    if name == "none":
        return np.zeros_like(_frequencies(f_hz))
    raise ParameterError(f"weighting must be one of {WEIGHTINGS}; got {name!r}")
