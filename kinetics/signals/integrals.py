"""Region integrals with a local (edge) baseline and their standard deviation under correlated noise.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import numpy as np

from kinetics.errors import ConfigError, FitError
from kinetics.linalg import small_linear_algebra
from kinetics.signals.definitions import LineShape
from kinetics.signals.noise import NoiseEstimate, sum_sigma
from kinetics.signals.truncation import truncation_loss
from kinetics.spectra.spectrum import Spectrum

log = logging.getLogger(__name__)


# ---------------------------------------------------------------- region integrals
@dataclass(frozen=True)
class RegionIntegral:
    """A region integral in ppm x intensity with its standard deviation.

    Attributes
    ----------
    name : str
    window_ppm : (low, high) actually integrated (after tracking)
    integral, sigma : float
        Integral and its standard deviation (ppm x intensity).
    nuclei : int
    n_points : int
    baseline : str
        'edges' or 'processed'.
    truncation_loss : float
        Predicted share of the window content's true area that this window and baseline
        miss, in [0, 1) (:func:`truncation_loss`); NaN when it cannot be estimated.
    truncation_note : str
        Why ``truncation_loss`` is NaN (empty otherwise).
    truncation_corrected : bool
        True when ``integral`` and ``sigma`` were divided by (1 - truncation_loss).
    phase_deg : float
        Zero-order phase of the window's complex integral, atan2(D, R) of the dispersion
        and absorption integrals (NaN without an imaginary part); large values mean the
        window is not in pure absorption.
    """

    name: str
    window_ppm: tuple[float, float]
    integral: float
    sigma: float
    nuclei: int = 1
    n_points: int = 0
    baseline: str = "edges"
    truncation_loss: float = float("nan")
    phase_deg: float = float("nan")
    truncation_note: str = ""
    truncation_corrected: bool = False

    @property
    def per_nucleus(self) -> float:
        return self.integral / self.nuclei

    @property
    def per_nucleus_sigma(self) -> float:
        return self.sigma / self.nuclei


def window_indices(ppm: np.ndarray, window_ppm) -> np.ndarray:
    """Indices of the points of ``ppm`` (shape (n,)) within ``window_ppm`` = (low, high), inclusive."""
    lo, hi = window_ppm
    return np.flatnonzero((ppm >= lo) & (ppm <= hi))


def integration_weights(ppm_window: np.ndarray, baseline: str = "edges", edge_fraction: float = 0.1) -> np.ndarray:
    """Weights w (shape (n,)) with integral = dx * sum(w * y) over the window points.

    'edges': the straight line least-squares fitted through the outer ``edge_fraction``
    of the window on each side (at least 3 points each) is subtracted; 'processed': the
    processed spectrum's baseline is trusted (w = 1).
    """
    n = ppm_window.size
    weights = np.ones(n)
    if baseline == "processed":
        return weights
    if baseline != "edges":
        raise ConfigError("baseline", f"unknown baseline {baseline!r}", hint="use 'edges' or 'processed'")
    n_edge = max(3, int(round(edge_fraction * n)))
    if 2 * n_edge >= n:
        raise FitError(f"window of {n} points is too narrow for a baseline through edge windows")
    edge = np.r_[np.arange(n_edge), np.arange(n - n_edge, n)]
    x = (ppm_window - ppm_window.mean())
    design = np.column_stack([np.ones(edge.size), x[edge]])
    # sum over the window of the fitted line = u . beta, beta = pinv(design) y_edge
    u = np.array([n, x.sum()])
    weights[edge] -= u @ np.linalg.pinv(design)
    return weights


def integrate_region(spectrum: Spectrum, window_ppm, noise: NoiseEstimate, *, name: str = "",
                     nuclei: int = 1, baseline: str = "edges", edge_fraction: float = 0.1,
                     width_hz: float | None = None, lineshape: LineShape | None = None,
                     local_phase: bool = False, correct_truncation: bool = False) -> RegionIntegral:
    """Integral of ``spectrum`` over ``window_ppm`` with a local baseline and its sigma.

    Parameters
    ----------
    spectrum : Spectrum
    window_ppm : (low, high)
    noise : NoiseEstimate
        From a signal-free region of the same spectrum.
    nuclei : int
        Nuclei under the signal (gives ``per_nucleus``).
    baseline : {'edges', 'processed'}
    edge_fraction : float
        Share of the window on each side used for the edge baseline.
    width_hz, lineshape : optional
        Known line width / model for the truncation-loss report (estimated otherwise).
    local_phase : bool
        Correct a zero-order phase error local to the window: with absorption and
        dispersion integrals R and D (same weights on real and imaginary parts) the
        integral is sign(R) sqrt(R^2 + D^2), the absorption integral after rotating the
        window by atan2(D, R).  Needs an imaginary part; biased by about sigma^2 / (2 I)
        for weak signals and by dispersion tails cut unevenly by an asymmetric window.
    correct_truncation : bool
        Divide the integral and its sigma by (1 - truncation_loss).  Model-dependent: the
        loss assumes Lorentzian lines (or the ``lineshape`` given) and its own error is not
        propagated into sigma.  When the loss is NaN nothing is corrected
        (``truncation_corrected`` False, a warning is logged).
    """
    with small_linear_algebra():
        return _integrate_region(spectrum, window_ppm, noise, name, nuclei, baseline, edge_fraction, width_hz,
                                 lineshape, local_phase, correct_truncation)


def _integrate_region(spectrum, window_ppm, noise, name, nuclei, baseline, edge_fraction, width_hz, lineshape,
                      local_phase, correct_truncation) -> RegionIntegral:
    idx = window_indices(spectrum.ppm, window_ppm)
    if idx.size < 8:
        raise FitError(f"window {list(window_ppm)} ppm holds only {idx.size} points of the spectrum")
    weights = integration_weights(spectrum.ppm[idx], baseline, edge_fraction)
    dx = spectrum.spacing_ppm
    values = spectrum.real[idx]
    integral = dx * float(weights @ values)
    phase_deg = float("nan")
    if spectrum.imag is not None:
        dispersion = dx * float(weights @ spectrum.imag[idx])
        phase_deg = math.degrees(math.atan2(dispersion, integral))
        if local_phase:
            integral = math.copysign(math.hypot(integral, dispersion), integral)
    sigma = dx * sum_sigma(weights, noise)
    estimate = truncation_loss(spectrum, idx, baseline=baseline, edge_fraction=edge_fraction,
                               noise_sigma=noise.sigma, width_hz=width_hz, lineshape=lineshape)
    corrected = False
    if correct_truncation:
        if np.isfinite(estimate.loss):
            integral, sigma, corrected = integral / (1.0 - estimate.loss), sigma / (1.0 - estimate.loss), True
        else:
            log.warning("%s %s: truncation not corrected (%s)", spectrum.source_path or "spectrum", name or "window",
                        estimate.note)
    return RegionIntegral(name=name, window_ppm=(float(window_ppm[0]), float(window_ppm[1])),
                          integral=integral, sigma=sigma, nuclei=nuclei, n_points=int(idx.size),
                          baseline=baseline, truncation_loss=estimate.loss, phase_deg=phase_deg,
                          truncation_note=estimate.note, truncation_corrected=corrected)


