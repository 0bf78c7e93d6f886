"""Drift tracking: re-centre a signal's window on the signal, within a tolerance.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kinetics.signals.integrals import window_indices
from kinetics.spectra.spectrum import Spectrum


# ---------------------------------------------------------------- drift tracking
@dataclass(frozen=True)
class TrackResult:
    """Where a signal sits in one spectrum relative to the reference.

    Attributes
    ----------
    shift_ppm : float
        Window displacement applied (limited to +/- tolerance).
    window_ppm : (low, high)
        The window after re-centring.
    left_window : bool
        True when the signal moved further than the tolerance or its maximum sits on the
        window edge: the integral is still reported, but flagged.
    """

    shift_ppm: float
    window_ppm: tuple[float, float]
    left_window: bool


def centroid_ppm(spectrum: Spectrum, window_ppm, threshold: float = 0.0) -> float:
    """Intensity-weighted mean shift of the window content above ``threshold``.

    The content is taken above a straight line through the two end points; only the
    part above ``threshold`` (e.g. 3 noise sigmas) counts, so noise far from the signal
    does not pull the centroid towards the window centre.
    """
    idx = window_indices(spectrum.ppm, window_ppm)
    ppm, values = spectrum.ppm[idx], spectrum.real[idx]
    line = np.interp(ppm, [ppm[-1], ppm[0]], [values[-1], values[0]])
    positive = np.clip(values - line - threshold, 0, None)
    if positive.sum() <= 0:
        return 0.5 * (window_ppm[0] + window_ppm[1])
    return float(np.sum(ppm * positive) / positive.sum())


def track(spectrum: Spectrum, window_ppm, reference_centroid_ppm: float, tolerance_ppm: float,
          iterations: int = 8, threshold: float = 0.0) -> TrackResult:
    """Re-centre ``window_ppm`` on the signal (centroid iterations) within ``tolerance_ppm``.

    The shift is measured against the centroid the signal had in the reference spectrum,
    so a window that was not centred on its signal reports no spurious drift.
    ``threshold`` is passed to :func:`centroid_ppm` (3 noise sigmas in the series path).
    """
    lo, hi = window_ppm
    if tolerance_ppm <= 0:
        return TrackResult(0.0, (lo, hi), max_on_edge(spectrum, (lo, hi)))
    shift = 0.0
    wanted = 0.0
    for _ in range(iterations):
        wanted = centroid_ppm(spectrum, (lo + shift, hi + shift), threshold) - reference_centroid_ppm
        new = float(np.clip(wanted, -tolerance_ppm, tolerance_ppm))
        if abs(new - shift) < 0.1 * spectrum.spacing_ppm:
            shift = new
            break
        shift = new
    window = (lo + shift, hi + shift)
    left = abs(wanted) > tolerance_ppm or max_on_edge(spectrum, window)
    return TrackResult(shift, window, bool(left))


def max_on_edge(spectrum: Spectrum, window_ppm) -> bool:
    """True when the tallest point of the window lies in its outer 2 % on either side."""
    idx = window_indices(spectrum.ppm, window_ppm)
    values = spectrum.real[idx]
    top = int(np.argmax(values))
    edge = max(1, idx.size // 50)
    return top < edge or top >= idx.size - edge


