"""Noise of a spectrum from signal-free points: standard deviation and autocorrelation.

Zero-filling and apodisation correlate neighbouring points; the autocorrelation is what
makes an integral's standard deviation right (:func:`sum_sigma`; see
:mod:`kinetics.signals`).  The detrending primitive is shared with the rest of the code
base (:mod:`kinetics.spectra.peaks`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from kinetics.errors import FitError
from kinetics.spectra.peaks import detrend
from kinetics.spectra.spectrum import Spectrum


# ---------------------------------------------------------------- noise
@dataclass(frozen=True)
class NoiseEstimate:
    """Noise of a spectrum from signal-free points.

    Attributes
    ----------
    sigma : float
        Standard deviation of the noise (intensity units).
    autocorrelation : ndarray, shape (L + 1,)
        rho(0..L): correlation between points k apart, rho(0) = 1.
    region_ppm : tuple of (low, high)
        The signal-free ranges used.
    n_points : int
    """

    sigma: float
    autocorrelation: np.ndarray
    region_ppm: tuple
    n_points: int

    @property
    def correlation_factor(self) -> float:
        """sum over lags -L..L of rho(k): the variance inflation of a long window sum."""
        rho = self.autocorrelation
        return float(rho[0] + 2.0 * rho[1:].sum())


def _autocovariance(segments: list[np.ndarray], max_lag: int) -> tuple[np.ndarray, int]:
    """Pooled autocovariance c(0..max_lag) of detrended segments (biased estimator)."""
    total = np.zeros(max_lag + 1)
    count = 0
    for seg in segments:
        n = seg.size
        lags = min(max_lag, n - 1)
        spectrum = np.fft.rfft(seg, 2 * n)
        acov = np.fft.irfft(np.abs(spectrum) ** 2)[: lags + 1]
        total[: lags + 1] += acov
        count += n
    return total / count, count


def _segments_from_ranges(spectrum: Spectrum, ranges, order: int) -> list[np.ndarray]:
    out = []
    for lo, hi in ranges:
        mask = (spectrum.ppm >= min(lo, hi)) & (spectrum.ppm <= max(lo, hi))
        if mask.sum() >= 16:
            out.append(detrend(spectrum.real[mask], order))
    return out


def auto_noise_ranges(spectrum: Spectrum, exclude_ppm=(), n_segments: int = 32) -> list[tuple[float, float]]:
    """Signal-free ranges found automatically.

    The axis is cut into ``n_segments`` pieces; pieces touching an excluded window are
    dropped, each remaining piece is detrended (quadratic) and the pieces whose standard
    deviation is within 1.5x the quietest one are kept (pooling them limits the low bias
    of taking the single minimum).
    """
    ppm = spectrum.ppm
    edges = np.linspace(0, ppm.size, n_segments + 1).astype(int)
    candidates = []
    for start, stop in zip(edges[:-1], edges[1:]):
        hi, lo = ppm[start], ppm[stop - 1]
        if any(lo <= w_hi and w_lo <= hi for w_lo, w_hi in exclude_ppm):
            continue
        candidates.append((float(np.std(detrend(spectrum.real[start:stop], 2))), (float(lo), float(hi))))
    if not candidates:
        raise FitError("no signal-free region left for the noise estimate; give noise_region_ppm")
    quietest = min(sd for sd, _ in candidates)
    return [rng for sd, rng in candidates if sd <= 1.5 * quietest]


def estimate_noise(spectrum: Spectrum, region_ppm=None, exclude_ppm=(), max_lag: int = 2048,
                   detrend_order: int = 1) -> NoiseEstimate:
    """Noise standard deviation and autocorrelation from signal-free points.

    Each signal-free segment is detrended by a polynomial of ``detrend_order`` (1 matches
    the straight edge baseline of the integrals: slow baseline wander is not counted as
    noise, because the local baseline removes it), the pooled autocovariance is computed
    by FFT (biased estimator, which tapers the long lags), and rho(k) = c(k) / c(0).  The
    lags up to three times the first insignificant one are kept (see
    :func:`_correlation_length`).

    Parameters
    ----------
    spectrum : Spectrum
    region_ppm : (low, high) or list of them, optional
        Signal-free range(s); found by :func:`auto_noise_ranges` when omitted.
    exclude_ppm : sequence of (low, high)
        Windows that hold signals (never used for the noise when searching automatically).
    max_lag : int
        Largest lag of the correlation estimate.
    detrend_order : int
        Polynomial removed from each segment before the estimate.
    """
    if region_ppm is None:
        ranges = auto_noise_ranges(spectrum, exclude_ppm)
    elif np.ndim(region_ppm) == 1:
        ranges = [tuple(region_ppm)]
    else:
        ranges = [tuple(r) for r in region_ppm]
    segments = _segments_from_ranges(spectrum, ranges, detrend_order)
    if not segments:
        raise FitError(f"noise region {ranges} holds fewer than 16 points of the spectrum")
    acov, count = _autocovariance(segments, min(max_lag, max(seg.size for seg in segments) - 1))
    if not acov[0] > 0:
        raise FitError(f"noise region {ranges} is flat (zero noise); choose another noise_region_ppm")
    rho = acov / acov[0]
    rho = rho[: _correlation_length(rho, count) + 1].copy()
    removed = (detrend_order + 1) * len(segments)
    sigma = math.sqrt(acov[0] * count / max(count - removed, 1))
    return NoiseEstimate(sigma=sigma, autocorrelation=rho, region_ppm=tuple(ranges), n_points=count)


def _correlation_length(rho: np.ndarray, count: int) -> int:
    """Largest lag kept: three times the first lag where rho is no longer significant.

    Significance is |rho| < 2 / sqrt(count) for a 3-lag running mean.  Keeping every
    lag makes each sigma noisy (the noise of rho at long lags adds up, about +/-20 % for
    a 500-point window), cutting at the first insignificant lag drops the long tail that
    exponential apodisation gives the correlation (sigma ~15 % low); three times that lag
    keeps all but a few per cent of a Lorentzian correlation's sum.
    """
    threshold = 2.0 / math.sqrt(count)
    smooth = np.convolve(np.abs(rho), np.ones(3) / 3.0, mode="same")
    below = np.flatnonzero(smooth[1:] < threshold)
    first = int(below[0]) + 1 if below.size else rho.size - 1
    return int(min(rho.size - 1, 3 * first + 2))


def sum_sigma(weights: np.ndarray, noise: NoiseEstimate) -> float:
    """Standard deviation of sum_i w_i y_i for correlated noise: sigma sqrt(sum_k rho(k) a_w(k))."""
    rho = noise.autocorrelation
    n = weights.size
    lags = min(rho.size, n)
    auto = np.correlate(weights, weights, mode="full")[n - 1: n - 1 + lags]  # a_w(0..lags-1)
    variance = rho[0] * auto[0] + 2.0 * float(np.dot(rho[1:lags], auto[1:lags]))
    return noise.sigma * math.sqrt(max(variance, 0.0))


