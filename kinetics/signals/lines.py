"""Lines picked from a spectrum: position, height, width and signal-to-noise ratio.

The height threshold is the larger of a number of noise sigmas and a fraction of the
tallest line (the tallest but one when the tallest is a dominant line, more than
``DOMINANT_FACTOR`` times the next: a solvent line or a large excess of one compound).
The noise is the signals' estimate from signal-free stretches
(:func:`kinetics.signals.noise.estimate_noise`), the picking the shared picker of
:mod:`kinetics.spectra.peaks`.  Nothing here assumes a nucleus: positions are in ppm,
widths in Hz.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from kinetics.errors import FitError
from kinetics.spectra import peaks as peak_tools
from kinetics.spectra.spectrum import Spectrum

#: A line this many times taller than every other multiplet is "dominant" (a solvent line
#: in 1H; a large excess of one compound in any nucleus).
DOMINANT_FACTOR = 5.0


@dataclass(frozen=True)
class Peak:
    """One picked line: position, height, FWHM and signal-to-noise ratio."""

    shift_ppm: float
    height: float
    width_hz: float
    snr: float


def noise_sigma(spectrum: Spectrum) -> float:
    """Noise of the real part: the signals' estimate from signal-free stretches (it allows
    for the correlation zero-filling and apodisation put between neighbouring points);
    the shared difference estimate when no stretch is found."""
    from kinetics.signals.noise import estimate_noise

    try:
        sigma = float(estimate_noise(spectrum).sigma)
    except (FitError, ValueError):
        sigma = peak_tools.difference_sigma(spectrum.real)
    return sigma if sigma > 0 else float(np.std(spectrum.real)) or 1.0


def pick_peaks(spectrum: Spectrum, snr_threshold: float = 8.0,
               min_relative_height: float = 0.02) -> tuple[list[Peak], float, float]:
    """Lines that rise above the noise and are not negligible next to the main signals.

    The height threshold is the larger of ``snr_threshold`` noise sigmas and
    ``min_relative_height`` times the tallest line (the tallest but one when the tallest
    is a dominant solvent line, more than 5 times the next).  On a low-field benchtop
    spectrum the noise term decides; on a high-field spectrum with SNR in the thousands
    the relative term keeps 13C satellites, spinning sidebands and traces out.

    Returns
    -------
    peaks : list of Peak, high shift first (positions refined between points)
    noise_sigma : float
    threshold : float
        The height threshold used (intensity units).
    """
    level = float(np.median(spectrum.real))
    noise = noise_sigma(spectrum)
    threshold = snr_threshold * noise
    found = peak_tools.pick_peaks(spectrum.real, height=threshold, prominence=threshold, level=level, widths=True)
    if len(found) == 0:
        return [], noise, threshold
    heights = np.sort(found.height)[::-1]
    main = heights[1] if heights.size > 1 and heights[0] > DOMINANT_FACTOR * heights[1] else heights[0]
    threshold = max(threshold, float(min_relative_height * main))
    keep = found.height >= threshold
    position = np.interp(found.position[keep], np.arange(spectrum.n_points), spectrum.ppm)
    spacing_hz = spectrum.spacing_hz
    peaks = [Peak(float(ppm), float(h), float(w * spacing_hz), float(h / noise))
             for ppm, h, w in zip(position, found.height[keep], found.width_points[keep])]
    return sorted(peaks, key=lambda p: -p.shift_ppm), noise, threshold


__all__ = ["DOMINANT_FACTOR", "Peak", "noise_sigma", "pick_peaks"]
