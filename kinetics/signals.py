"""Tracked signals: region integrals with a local baseline, drift tracking, deconvolution.

Units
-----
An *integral* is the sum of intensities times the point spacing in ppm, i.e. it is in
**ppm x intensity** (rectangle rule on the true ppm spacing; for a band-limited spectrum
this equals the trapezoid rule up to the end points).  Fitted areas use the same unit, so
``integral`` and ``fit`` signals are interchangeable downstream.

Integral uncertainty
--------------------
An integral is a linear combination ``I = dx * sum_i w_i y_i`` of the spectrum points
(``w_i = 1`` inside the window, minus the weights of the straight baseline fitted through
the two edge windows).  With noise of standard deviation ``sigma`` and autocorrelation
``rho(k)`` (estimated from a signal-free region, as zero-filling and apodisation make
neighbouring points correlated)

    sigma_I = sigma * dx * sqrt( sum_k rho(k) * a_w(k) ),   a_w(k) = sum_i w_i w_(i+k),

summed over lags -L..L where ``rho`` is still significant.  For plain weights (no baseline)
``a_w(k) = n - |k|``, so ``sigma_I = sigma * dx * sqrt(n * sum_k (1 - |k|/n) rho(k))``,
which is ``sigma * dx * sqrt(n)`` for white noise.

Truncation
----------
A window of +/- m half-widths centred on a Lorentzian holds (2/pi) arctan(m) of its area;
a line of HWHM g at x0 has (1/pi)(atan((b - x0)/g) - atan((a - x0)/g)) of its area in
[a, b].  :func:`truncation_loss` models the window content as lines (the signal's
``LineShape`` when given, else Lorentzians at the maxima found, with the width measured on
the tallest line) and integrates the model the way the data are integrated, edge baseline
included (:func:`window_captured_fraction`), so the reported loss is the share of the
signal's true area missed by the user's window and baseline choice.  It is NaN, with a
note saying why, when the data do not support an estimate.  ``correct_truncation``
divides an integral by (1 - loss): model-dependent, it assumes Lorentzian lines.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field

import lmfit
import numpy as np

from kinetics import lineshapes
from kinetics.errors import ConfigError, FitError
from kinetics.spectra.spectrum import Spectrum

log = logging.getLogger(__name__)

METHODS = ("integral", "fit")
BASELINES = ("edges", "processed")


# ---------------------------------------------------------------- definitions
@dataclass(frozen=True)
class LineShape:
    """Line-shape model of a ``fit`` signal: a first-order n+1 multiplet.

    Attributes
    ----------
    n_lines : int
        Number of lines (1 singlet, 2 doublet, 3 triplet, 4 quartet, ...).
    coupling_hz : float
        J between adjacent lines in Hz (starting value; fitted).
    profile : str
        'lorentzian', 'gaussian' or 'voigt'.
    width_hz : float
        FWHM in Hz of each line (Lorentzian part for a Voigt); starting value, fitted.
    gauss_width_hz : float
        Gaussian FWHM in Hz of a Voigt line (starting value, fitted); ignored otherwise.
    """

    n_lines: int = 1
    coupling_hz: float = 0.0
    profile: str = "lorentzian"
    width_hz: float = 1.0
    gauss_width_hz: float = 0.0


@dataclass(frozen=True)
class SignalDefinition:
    """One tracked signal.

    Attributes
    ----------
    name : str
        Unique name (a table column prefix).
    species : str
        Chemical species it belongs to (several signals may share one).
    window_ppm : tuple of float
        (low, high) integration / fit window in ppm, low < high.
    nuclei : int
        Number of nuclei under the signal (per molecule).
    method : str
        'integral' (region integral with local baseline) or 'fit' (deconvolution).
    lineshape : LineShape or None
        Required for method 'fit'.
    concentration_mol_per_l : float or None
        Known concentration: makes this signal an internal standard.
    concentration_sigma_mol_per_l : float
        Uncertainty of that concentration (0 when exact).
    tolerance_ppm : float
        How far the window may follow a drifting signal (0 switches tracking off).
    group : str
        Fit signals of one group are deconvolved together over the union of their windows.
    correct_truncation : bool
        'integral' only: divide the integral and its sigma by (1 - predicted truncation
        loss); model-dependent (assumes Lorentzian lines), see :func:`integrate_region`.
    """

    name: str
    species: str
    window_ppm: tuple[float, float]
    nuclei: int = 1
    method: str = "integral"
    lineshape: LineShape | None = None
    concentration_mol_per_l: float | None = None
    concentration_sigma_mol_per_l: float = 0.0
    tolerance_ppm: float = 0.0
    group: str = ""
    correct_truncation: bool = False

    @property
    def is_standard(self) -> bool:
        return self.concentration_mol_per_l is not None

    @property
    def fit_group(self) -> str:
        return self.group or self.name

    @property
    def center_ppm(self) -> float:
        return 0.5 * (self.window_ppm[0] + self.window_ppm[1])


def validate_signals(signals, ppm_range: tuple[float, float] | None = None,
                     key: str = "signals") -> None:
    """Check a list of definitions; raise ConfigError naming ``signals[i].field``.

    Rules: unique names, low < high, nuclei >= 1, a known method, a line shape for
    'fit', ``correct_truncation`` only for 'integral', a positive standard concentration, windows inside ``ppm_range`` when given, and
    no two windows overlapping unless both signals are 'fit' signals of one group (and
    then not with the same centre and line shape, which would make the two alike).
    """
    names = set()
    for i, sig in enumerate(signals):
        where = f"{key}[{i}]"
        if sig.name in names:
            raise ConfigError(f"{where}.name", f"duplicate signal name {sig.name!r}")
        names.add(sig.name)
        lo, hi = sig.window_ppm
        if not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
            raise ConfigError(f"{where}.window_ppm", f"need [low, high] with low < high, got {list(sig.window_ppm)}")
        if not (isinstance(sig.nuclei, int) and sig.nuclei >= 1):
            raise ConfigError(f"{where}.nuclei", f"number of nuclei must be a whole number >= 1, got {sig.nuclei!r}")
        if sig.method not in METHODS:
            raise ConfigError(f"{where}.method", f"unknown method {sig.method!r}", hint="use 'integral' or 'fit'")
        if sig.method == "fit" and sig.lineshape is None:
            raise ConfigError(f"{where}.lineshape", "method 'fit' needs a line-shape model")
        if sig.lineshape is not None:
            _validate_lineshape(sig.lineshape, f"{where}")
        if sig.is_standard and not (sig.concentration_mol_per_l > 0):
            raise ConfigError(f"{where}.concentration_mol_per_l", "a standard's concentration must be > 0")
        if sig.tolerance_ppm < 0:
            raise ConfigError(f"{where}.tolerance_ppm", "must be >= 0")
        if sig.correct_truncation and sig.method != "integral":
            raise ConfigError(f"{where}.correct_truncation", "only region integrals are corrected for truncation",
                              hint="a fitted area already includes the line tails; remove the key")
        if ppm_range is not None:
            low_axis, high_axis = min(ppm_range), max(ppm_range)
            if lo < low_axis or hi > high_axis:
                raise ConfigError(f"{where}.window_ppm",
                                  f"window {list(sig.window_ppm)} lies outside the axis "
                                  f"{low_axis:.3f}..{high_axis:.3f} ppm")
    for i, a in enumerate(signals):
        for j in range(i + 1, len(signals)):
            b = signals[j]
            if a.window_ppm[0] < b.window_ppm[1] and b.window_ppm[0] < a.window_ppm[1]:
                if a.method == b.method == "fit" and a.fit_group == b.fit_group:
                    # a component starts at its window's centre: two alike starts cannot tell
                    # which line is which, and the fit may swap them between spectra
                    if abs(a.center_ppm - b.center_ppm) < 1e-6 and a.lineshape == b.lineshape:
                        raise ConfigError(f"{key}[{j}].window_ppm",
                                          f"{b.name!r} and {a.name!r} ({key}[{i}]) have the same window "
                                          "centre and line shape, so the fit cannot tell them apart",
                                          hint="centre each signal's window on its own line")
                    continue
                raise ConfigError(f"{key}[{j}].window_ppm",
                                  f"window of {b.name!r} overlaps that of {a.name!r} ({key}[{i}])",
                                  hint="separate the windows, or make both method 'fit' in one group")


def _validate_lineshape(shape: LineShape, where: str) -> None:
    if not (isinstance(shape.n_lines, int) and shape.n_lines >= 1):
        raise ConfigError(f"{where}.lineshape.lines", "number of lines must be >= 1")
    if shape.profile not in lineshapes.PROFILES:
        raise ConfigError(f"{where}.lineshape.profile", f"unknown profile {shape.profile!r}",
                          hint=f"use one of {', '.join(lineshapes.PROFILES)}")
    if not shape.width_hz > 0:
        raise ConfigError(f"{where}.lineshape.width_hz", "line width must be > 0 Hz")
    if shape.n_lines > 1 and not shape.coupling_hz > 0:
        raise ConfigError(f"{where}.lineshape.j_hz", "a multiplet needs J > 0 Hz")
    if shape.profile == "voigt" and not shape.gauss_width_hz > 0:
        raise ConfigError(f"{where}.lineshape.gauss_width_hz", "a Voigt line needs a Gaussian width > 0 Hz")


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


def _detrend(values: np.ndarray, order: int = 2) -> np.ndarray:
    x = np.linspace(-1.0, 1.0, values.size)
    coef = np.polynomial.polynomial.polyfit(x, values, order)
    return values - np.polynomial.polynomial.polyval(x, coef)


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
            out.append(_detrend(spectrum.real[mask], order))
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
        candidates.append((float(np.std(_detrend(spectrum.real[start:stop]))), (float(lo), float(hi))))
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


def _window_indices(ppm: np.ndarray, window_ppm) -> np.ndarray:
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
    idx = _window_indices(spectrum.ppm, window_ppm)
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


# ---------------------------------------------------------------- truncation loss
#: Tallest line of the window, in noise sigmas, below which no loss is estimated.
TRUNCATION_MIN_SNR = 20.0
#: Lines narrower than this many points cannot have their width measured.
TRUNCATION_MIN_POINTS_PER_FWHM = 2.0
#: Systematic RMS misfit of the Lorentzian model (share of the tallest line) above which it is not trusted.
TRUNCATION_MAX_MISFIT = 0.02


@dataclass(frozen=True)
class TruncationEstimate:
    """Predicted share of a signal's true area that a window and baseline miss.

    Attributes
    ----------
    loss : float
        In [0, 1); NaN when no reliable estimate could be made (``note`` says why).
    note : str
        Empty when the estimate is reliable, else the reason it is NaN.
    centres_ppm : ndarray, shape (k,)
        Lines of the model of the window content.
    areas : ndarray, shape (k,)
        Their shares of the modelled area (sum 1).
    fwhm_ppm : float
        Line FWHM used (Lorentzian part for a Voigt).
    """

    loss: float
    note: str = ""
    centres_ppm: np.ndarray = field(default_factory=lambda: np.zeros(0))
    areas: np.ndarray = field(default_factory=lambda: np.zeros(0))
    fwhm_ppm: float = float("nan")


def lorentzian_window_fraction_m(m: float) -> float:
    """(2/pi) arctan(m): area share of a Lorentzian inside +/- m half-widths."""
    return 2.0 / math.pi * math.atan(m)


def _unreliable(note: str) -> TruncationEstimate:
    log.debug("truncation loss not estimated: %s", note)
    return TruncationEstimate(float("nan"), note)


def _line_cdf(x, centres, profile: str, fwhm: float, fwhm_gauss: float = 0.0) -> np.ndarray:
    """Cumulative area of unit-area lines at ``centres`` (shape (k,)) up to ``x`` (shape (p,)) -> (p, k).

    Lorentzian: atan((x - c)/g)/pi + 1/2 with g = fwhm/2; Gaussian: (1 + erf((x - c)/(s sqrt 2)))/2.
    A Voigt has no closed form: its profile is integrated numerically across the span of ``x``
    (trapezoid, >= 40 points per FWHM), which is all the interval areas below need.
    """
    from scipy.special import erf

    x = np.asarray(x, float)[:, None]
    c = np.asarray(centres, float)[None, :]
    if profile == "lorentzian":
        return np.arctan((x - c) / (0.5 * fwhm)) / math.pi + 0.5
    if profile == "gaussian":
        s = fwhm / (2.0 * math.sqrt(2.0 * math.log(2.0)))
        return 0.5 * (1.0 + erf((x - c) / (s * math.sqrt(2.0))))
    from scipy.integrate import cumulative_trapezoid

    lo, hi = float(x.min()), float(x.max())
    total = lineshapes.voigt(0.0, 1.0, 0.0, fwhm, fwhm_gauss)
    width = 1.0 / (math.pi * total)  # ~HWHM of the Voigt (exact for a Lorentzian)
    grid = np.linspace(lo, hi, int(min(200001, max(2001, 40 * (hi - lo) / width))))
    profile_values = lineshapes.voigt(grid[:, None], 1.0, c, fwhm, fwhm_gauss)
    cumulative = cumulative_trapezoid(profile_values, grid, axis=0, initial=0.0)
    return np.stack([np.interp(x[:, 0], grid, cumulative[:, j]) for j in range(c.shape[1])], axis=1)


def window_captured_fraction(lo_ppm: float, hi_ppm: float, centres_ppm, areas, *, profile: str = "lorentzian",
                             fwhm_ppm: float, fwhm_gauss_ppm: float = 0.0, edge_ppm: float = 0.0) -> float:
    """Share of the total area of ``areas``-weighted lines that a window integral returns.

    With A[u, v] the model's area inside [u, v] (for a Lorentzian line of HWHM g at x0,
    (1/pi)(atan((v - x0)/g) - atan((u - x0)/g))), window [a, b] of width W and edge windows of
    width E (``edge_ppm``; 0 for no baseline)::

        captured = A[a, b] - W / (2 E) * (A[a, a + E] + A[b - E, b])

    The second term is the edge baseline: the least-squares line through two equal edge
    windows of a symmetric window, integrated over it, is W times the mean of the two
    edge windows' mean heights, A[.]/E.  The result can be negative (window too narrow).
    """
    areas = np.asarray(areas, float)
    points = [lo_ppm, hi_ppm] + ([lo_ppm + edge_ppm, hi_ppm - edge_ppm] if edge_ppm > 0 else [])
    cdf = _line_cdf(points, centres_ppm, profile, fwhm_ppm, fwhm_gauss_ppm) @ areas
    captured = cdf[1] - cdf[0]
    if edge_ppm > 0:
        captured -= (hi_ppm - lo_ppm) / (2.0 * edge_ppm) * ((cdf[2] - cdf[0]) + (cdf[1] - cdf[3]))
    return float(captured / areas.sum())


def _edge_line(x: np.ndarray, y: np.ndarray, n_edge: int) -> np.ndarray:
    """Straight line through the mean heights of the two edge windows, on ``x``."""
    xl, yl = x[:n_edge].mean(), y[:n_edge].mean()
    xr, yr = x[-n_edge:].mean(), y[-n_edge:].mean()
    return yl + (yr - yl) * (x - xl) / (xr - xl)


def _lorentz_design(x: np.ndarray, centres: np.ndarray, fwhm: float) -> np.ndarray:
    """Columns: unit-area Lorentzians at ``centres``, then 1 and x (a linear baseline). (n, k + 2)."""
    lines = lineshapes.lorentzian(x[:, None], 1.0, centres[None, :], fwhm)
    return np.column_stack([lines, np.ones_like(x), x - x.mean()])


def _linear_fit(design: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, float]:
    """Least-squares coefficients (normal equations: a few columns, well scaled) and the RMS residual."""
    scale = np.sqrt(np.sum(design * design, axis=0))
    scaled = design / scale
    coef = np.linalg.solve(scaled.T @ scaled, scaled.T @ y) / scale
    return coef, float(np.sqrt(np.mean((y - design @ coef) ** 2)))


def _fit_lines(x, y, centres, fwhm0: float, refine: bool = True):
    """Areas (and, if ``refine``, the common Lorentzian FWHM) of lines at ``centres`` fitting the window.

    Variable projection: areas and a linear baseline are solved linearly for each trial
    FWHM (bounded search over 0.4-2 x ``fwhm0``).  Returns (fwhm, areas (k,), rms residual).
    """
    from scipy.optimize import minimize_scalar

    fwhm = fwhm0
    if refine:
        best = minimize_scalar(lambda log_fwhm: _linear_fit(_lorentz_design(x, centres, math.exp(log_fwhm)), y)[1],
                               bounds=(math.log(0.4 * fwhm0), math.log(2.0 * fwhm0)), method="bounded",
                               options={"xatol": 1e-3})
        fwhm = math.exp(best.x)
    coef, rms = _linear_fit(_lorentz_design(x, centres, fwhm), y)
    return fwhm, coef[: centres.size], rms


def _half_height_fwhm(x: np.ndarray, y: np.ndarray, top: int, height: float) -> float:
    """FWHM of the line at index ``top`` (peak ``height``) from interpolated half-height crossings; NaN if unseen."""
    half = 0.5 * height
    below = np.flatnonzero(y[:top] <= half)
    above = np.flatnonzero(y[top:] <= half)
    if below.size == 0 or above.size == 0:
        return float("nan")
    i, j = below[-1], top + above[0]
    left = x[i] + (half - y[i]) * (x[i + 1] - x[i]) / (y[i + 1] - y[i])
    right = x[j - 1] + (half - y[j - 1]) * (x[j] - x[j - 1]) / (y[j] - y[j - 1])
    return float(right - left)


def _peak_positions(x: np.ndarray, y: np.ndarray, peaks: np.ndarray) -> np.ndarray:
    """Sub-point peak positions: vertex of the parabola through each maximum and its neighbours."""
    y0, y1, y2 = y[peaks - 1], y[peaks], y[peaks + 1]
    curvature = y0 - 2.0 * y1 + y2
    shift = np.where(curvature < 0, 0.5 * (y0 - y2) / np.where(curvature < 0, curvature, -1.0), 0.0)
    return x[peaks] + np.clip(shift, -0.5, 0.5) * (x[1] - x[0])


def _find_lines(x, y, noise_sigma: float, fwhm: float):
    """Local maxima of the window that are lines: above 5 sigma and 3 % of the tallest, prominent
    (4 sigma, 2 %) and at least 0.8 FWHM apart (so noise on a line's flank is not a line)."""
    from scipy.signal import find_peaks

    top = float(y.max())
    peaks, _ = find_peaks(y, height=max(5.0 * noise_sigma, 0.03 * top),
                          prominence=max(4.0 * noise_sigma, 0.02 * top),
                          distance=max(1, int(0.8 * fwhm / abs(x[1] - x[0]))))
    return peaks


def _multiplet_centre(x, y, shape: LineShape, observe_mhz: float, top: int) -> tuple[float, float]:
    """Centre of the ``shape`` multiplet that best fits the window (least squares, area and linear
    baseline free) and the RMS residual of that fit."""
    from scipy.optimize import minimize_scalar

    fwhm = shape.width_hz / observe_mhz
    coupling = shape.coupling_hz / observe_mhz
    span = 0.5 * (shape.n_lines - 1) * coupling + fwhm
    basis = np.column_stack([np.ones_like(x), x - x.mean()])
    q, _ = np.linalg.qr(basis)

    def rss(centres):
        t = lineshapes.multiplet(x, 1.0, np.atleast_1d(centres), shape.n_lines, coupling, shape.profile, fwhm,
                                 shape.gauss_width_hz / observe_mhz)
        yp = y - q @ (q.T @ y)
        tp = t - (t @ q) @ q.T
        return float(yp @ yp) - (tp @ yp) ** 2 / np.maximum(np.sum(tp * tp, axis=1), 1e-300)

    step = fwhm / 4.0
    grid = x[top] + np.arange(-span, span + step, step)
    best = grid[int(np.argmin(rss(grid)))]
    result = minimize_scalar(lambda c: float(rss(c)[0]), bounds=(best - step, best + step), method="bounded",
                             options={"xatol": 1e-3 * step})
    return float(result.x), math.sqrt(max(float(result.fun), 0.0) / x.size)


def truncation_loss(spectrum: Spectrum, idx: np.ndarray, *, baseline: str = "edges", edge_fraction: float = 0.1,
                    noise_sigma: float = 0.0, width_hz: float | None = None,
                    lineshape: LineShape | None = None) -> TruncationEstimate:
    """Predicted share of the window content's true area that the window integral misses.

    The window content is modelled as lines of a common width and the model is integrated
    the way the data are (:func:`window_captured_fraction`): for a Lorentzian line of HWHM g
    at x0 the area inside [a, b] is (1/pi)(atan((b - x0)/g) - atan((a - x0)/g)), and the
    edge baseline subtracts W/(2E) times the line's areas in the two edge windows of width
    E (the straight line through their mean heights, integrated over the window of width
    W).  [a, b] is the span the rectangle rule covers (outer points +/- half a spacing).
    For one centred Lorentzian and the 'processed' baseline, loss = 1 - (2/pi) arctan(m)
    for a window of +/- m half-widths.

    The model:

    * with ``lineshape``: its n+1 multiplet (binomial areas, J, width and profile as given),
      centred where it fits the window best (least squares, free linear baseline);
    * otherwise Lorentzian lines at the local maxima of the window (above 5 sigma and 3 %
      of the tallest, prominence 4 sigma and 2 %, 0.8 FWHM apart), sharing the FWHM measured at the tallest
      line's half height (or ``width_hz``), refined with the areas by a least-squares fit
      of the window (variable projection, linear baseline free).  The areas come from that
      fit, so any n+1 multiplet whose lines are resolved is described by what is seen.

    Limits (the estimate is NaN with ``note`` saying why): the tallest line is below
    ``TRUNCATION_MIN_SNR`` sigmas or has no maximum inside the window; its half height is
    not reached inside the window; the line spans fewer than 2 points per FWHM; the model
    misfits the window by more than 2 % RMS of the tallest line beyond what the noise
    explains (Gaussian lines taken for Lorentzians, lines merged into one hump, a phase
    error, a given line shape that is not the signal's); the predicted loss is not in
    [0, 1) (window too narrow for the edge baseline).  Lines closer than about one FWHM are seen
    as one broader line (overestimated loss, usually caught by the misfit check); lines of
    another signal whose maxima lie inside the window are counted as window content; tails
    of lines outside the window are not.

    Parameters
    ----------
    spectrum : Spectrum
    idx : ndarray of int, shape (n,)
        The window's points (consecutive indices).
    baseline, edge_fraction : as for :func:`integration_weights`
    noise_sigma : float
        Noise standard deviation (intensity), for the peak thresholds.
    width_hz : float, optional
        Known line FWHM (ignored when ``lineshape`` is given).
    lineshape : LineShape, optional

    Returns
    -------
    TruncationEstimate
    """
    dx = spectrum.spacing_ppm
    order = np.argsort(spectrum.ppm[idx])
    x, y = spectrum.ppm[idx][order], spectrum.real[idx][order]
    n = x.size
    n_edge = max(3, int(round(edge_fraction * n)))
    edge_ppm = n_edge * dx if baseline == "edges" else 0.0
    level = _edge_line(x, y, n_edge) if baseline == "edges" else np.zeros(n)
    signal = y - level
    top = int(np.argmax(signal))
    height = float(signal[top])
    if not height > TRUNCATION_MIN_SNR * noise_sigma or height <= 0:
        return _unreliable(f"no clear peak (tallest {height / noise_sigma if noise_sigma else 0:.1f} sigma,"
                           f" needs {TRUNCATION_MIN_SNR:g})")
    if top in (0, n - 1):
        return _unreliable("the tallest point is on the window edge")
    lo, hi = float(x[0] - 0.5 * dx), float(x[-1] + 0.5 * dx)
    mhz = spectrum.observe_mhz
    if lineshape is not None:
        fwhm = lineshape.width_hz / mhz
        if fwhm < TRUNCATION_MIN_POINTS_PER_FWHM * dx:
            return _unreliable("lines narrower than 2 points")
        centre, misfit = _multiplet_centre(x, y, lineshape, mhz, top)
        centres = centre + lineshapes.line_offsets(lineshape.n_lines, lineshape.coupling_hz / mhz)
        areas = lineshapes.binomial_weights(lineshape.n_lines)
        profile, gauss = lineshape.profile, lineshape.gauss_width_hz / mhz
    else:
        profile, gauss = "lorentzian", 0.0
        fwhm = _half_height_fwhm(x, signal, top, height) if width_hz is None else width_hz / mhz
        if not np.isfinite(fwhm):
            return _unreliable("half height not reached inside the window (line wider than the window)")
        if fwhm < TRUNCATION_MIN_POINTS_PER_FWHM * dx:
            return _unreliable("line narrower than 2 points: its width cannot be measured")
        peaks = _find_lines(x, signal, noise_sigma, fwhm)
        if peaks.size == 0:
            return _unreliable("no line maximum inside the window")
        centres = _peak_positions(x, signal, peaks)
        for _ in range(2):  # a second pass without lines the fit gives no positive area
            fwhm, areas, misfit = _fit_lines(x, y, centres, fwhm, refine=width_hz is None)
            if np.all(areas > 0):
                break
            centres = centres[areas > 0]
            if centres.size == 0:
                break
        if centres.size == 0 or np.any(areas <= 0):
            return _unreliable("the found lines have no positive area in the fit")
    # misfit beyond what the noise explains (3 standard errors of a mean square over n points)
    systematic = math.sqrt(max(misfit ** 2 - noise_sigma ** 2 * (1.0 + 3.0 * math.sqrt(2.0 / n)), 0.0))
    if systematic > TRUNCATION_MAX_MISFIT * height:
        what = "the given line shape" if lineshape is not None else "Lorentzian lines"
        return _unreliable(f"{what} misfit the window by {100 * systematic / height:.1f} % of the tallest line"
                           " (unresolved lines, another profile or a phase error)")
    captured = window_captured_fraction(lo, hi, centres, areas, profile=profile, fwhm_ppm=fwhm,
                                        fwhm_gauss_ppm=gauss, edge_ppm=edge_ppm)
    loss = 1.0 - captured
    if not 0.0 <= loss < 1.0:
        if -1e-9 < loss < 0.0:
            loss = 0.0
        else:
            return _unreliable(f"predicted loss {loss:.3g} is outside [0, 1): window too narrow for its lines")
    return TruncationEstimate(float(loss), "", np.asarray(centres, float), np.asarray(areas, float) / np.sum(areas),
                              float(fwhm))


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
    idx = _window_indices(spectrum.ppm, window_ppm)
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
        return TrackResult(0.0, (lo, hi), _max_on_edge(spectrum, (lo, hi)))
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
    left = abs(wanted) > tolerance_ppm or _max_on_edge(spectrum, window)
    return TrackResult(shift, window, bool(left))


def _max_on_edge(spectrum: Spectrum, window_ppm) -> bool:
    idx = _window_indices(spectrum.ppm, window_ppm)
    values = spectrum.real[idx]
    top = int(np.argmax(values))
    edge = max(1, idx.size // 50)
    return top < edge or top >= idx.size - edge


# ---------------------------------------------------------------- deconvolution
@dataclass(frozen=True)
class Component:
    """One multiplet of a deconvolution: starting values and limits.

    Attributes
    ----------
    name : str
    center_ppm : float
        Starting centre.
    lineshape : LineShape
        Number of lines, starting J and widths, profile.
    tolerance_ppm : float
        The centre may move this far from its start.
    """

    name: str
    center_ppm: float
    lineshape: LineShape
    tolerance_ppm: float = 0.05


@dataclass(frozen=True)
class DeconvolutionResult:
    """A (global) deconvolution: shared line-shape parameters, per-spectrum areas.

    Attributes
    ----------
    names : tuple of str, shape (k,)
    areas : ndarray, shape (n_spectra, k)
        Multiplet areas (ppm x intensity).
    area_stderr : ndarray, shape (n_spectra, k)
        From the full covariance (shared and per-spectrum parameters together).
    center_ppm, width_hz, coupling_hz : dict name -> (value, stderr)
    residual_sigma : float
        Pooled residual standard deviation.
    success : bool
    message : str
    n_function_evals : int
    """

    names: tuple
    areas: np.ndarray
    area_stderr: np.ndarray
    center_ppm: dict
    width_hz: dict
    coupling_hz: dict
    residual_sigma: float
    success: bool
    message: str
    n_function_evals: int = 0
    gauss_width_hz: dict = field(default_factory=dict)

    def report(self) -> str:
        """Plain-text summary of the shared parameters and the first spectrum's areas."""
        lines = [f"deconvolution: {'converged' if self.success else 'FAILED'} ({self.message}); "
                 f"{self.areas.shape[0]} spectra, residual sigma {self.residual_sigma:.4g}"]
        for k, name in enumerate(self.names):
            c, cs = self.center_ppm[name]
            w, ws = self.width_hz[name]
            line = f"  {name}: centre {c:.5f} +/- {cs:.1e} ppm, FWHM {w:.3f} +/- {ws:.1e} Hz"
            if name in self.coupling_hz:
                j, js = self.coupling_hz[name]
                line += f", J {j:.3f} +/- {js:.1e} Hz"
            line += f", area[0] {self.areas[0, k]:.5g} +/- {self.area_stderr[0, k]:.2g}"
            lines.append(line)
        return "\n".join(lines)


def _nonlinear_params(components, observe_mhz: float) -> lmfit.Parameters:
    params = lmfit.Parameters()
    for k, comp in enumerate(components):
        shape = comp.lineshape
        tol_hz = max(comp.tolerance_ppm * observe_mhz, 1e-6)
        params.add(f"c{k}_offset_hz", value=0.0, min=-tol_hz, max=tol_hz)
        params.add(f"c{k}_width_hz", value=shape.width_hz, min=0.05 * shape.width_hz, max=20.0 * shape.width_hz)
        if shape.n_lines > 1:
            params.add(f"c{k}_j_hz", value=shape.coupling_hz, min=0.5 * shape.coupling_hz,
                       max=1.5 * shape.coupling_hz)
        if shape.profile == "voigt":
            params.add(f"c{k}_gauss_hz", value=shape.gauss_width_hz, min=0.05 * shape.gauss_width_hz,
                       max=20.0 * shape.gauss_width_hz)
    return params


def _basis(ppm: np.ndarray, values: dict, components, observe_mhz: float, baseline_order: int) -> np.ndarray:
    """Design matrix, shape (..., n, k + baseline_order + 1): unit-area multiplets then baseline."""
    columns = []
    for k, comp in enumerate(components):
        shape = comp.lineshape
        centre = comp.center_ppm + values[f"c{k}_offset_hz"] / observe_mhz
        columns.append(lineshapes.multiplet(
            ppm, 1.0, centre, shape.n_lines, values.get(f"c{k}_j_hz", 0.0) / observe_mhz, shape.profile,
            values[f"c{k}_width_hz"] / observe_mhz, values.get(f"c{k}_gauss_hz", 0.0) / observe_mhz))
    x = (ppm - ppm.mean(axis=-1, keepdims=True)) / max(np.ptp(ppm) / 2.0, 1e-12)
    for order in range(baseline_order + 1):
        columns.append(x ** order)
    return np.stack(columns, axis=-1)


def _solve_linear(design: np.ndarray, data: np.ndarray) -> np.ndarray:
    """Least-squares amplitudes, shape (S, m), for design (n, m) or (S, n, m) and data (S, n)."""
    # normal equations: a handful of well-scaled columns, and far faster than an SVD per call
    if design.ndim == 2:
        normal, rhs = design.T @ design, design.T @ data.T
        try:
            return np.linalg.solve(normal, rhs).T
        except np.linalg.LinAlgError:
            return np.linalg.lstsq(design, data.T, rcond=None)[0].T
    normal = np.einsum("sni,snj->sij", design, design)
    rhs = np.einsum("sni,sn->si", design, data)
    ridge = 1e-12 * np.max(np.abs(np.diagonal(normal, axis1=1, axis2=2)), axis=1)
    normal = normal + ridge[:, None, None] * np.eye(normal.shape[-1])
    return np.linalg.solve(normal, rhs[..., None])[..., 0]


def _predict(design: np.ndarray, coef: np.ndarray) -> np.ndarray:
    if design.ndim == 2:
        return coef @ design.T
    return np.einsum("snm,sm->sn", design, coef)


def deconvolve(ppm: np.ndarray, data: np.ndarray, components, observe_mhz: float,
               baseline_order: int = 1) -> DeconvolutionResult:
    """Fit multiplets to one or many spectra sharing positions, widths and J.

    Variable projection (Golub and Pereyra 1973): the nonlinear parameters (centre offsets,
    widths, J, shared by all spectra) are fitted by lmfit (Levenberg-Marquardt) on the
    residual left after the per-spectrum amplitudes (multiplet areas and a polynomial
    baseline of ``baseline_order``) have been solved by linear least squares.  Area
    standard errors come from the full Jacobian of all parameters (shared and
    per-spectrum) at the optimum, sigma^2 (J^T J)^-1 with the pooled residual variance,
    evaluated blockwise (Schur complement) so the cost grows linearly with the spectra.

    Parameters
    ----------
    ppm : ndarray, shape (n,) or (S, n)
        Axis of the fit window (one shared axis, or one per spectrum).
    data : ndarray, shape (S, n) or (n,)
        Intensities of the window in each spectrum.
    components : sequence of Component, length k
    observe_mhz : float
        Converts Hz (widths, J) to ppm.
    baseline_order : int
        Polynomial baseline per spectrum (0 constant, 1 straight line, ...).
    """
    data = np.atleast_2d(np.asarray(data, dtype=float))
    ppm = np.asarray(ppm, dtype=float)
    if ppm.shape[-1] != data.shape[-1]:
        raise FitError(f"axis has {ppm.shape[-1]} points but the data {data.shape[-1]}")
    n_spectra, n_points = data.shape
    k = len(components)
    n_linear = k + baseline_order + 1
    if n_points <= n_linear + 4:
        raise FitError(f"fit window of {n_points} points is too small for {k} multiplets")
    params = _nonlinear_params(components, observe_mhz)

    def residual(p):
        values = p.valuesdict()
        design = _basis(ppm, values, components, observe_mhz, baseline_order)
        coef = _solve_linear(design, data)
        return (data - _predict(design, coef)).ravel()

    _coarse_start(params, ppm, data, components, observe_mhz, baseline_order)
    minimizer = lmfit.Minimizer(residual, params)
    result = minimizer.minimize(method="leastsq")
    values = result.params.valuesdict()
    design = _basis(ppm, values, components, observe_mhz, baseline_order)
    coef = _solve_linear(design, data)
    resid = data - _predict(design, coef)
    free = [name for name, par in result.params.items() if par.vary]
    dof = data.size - len(free) - n_spectra * n_linear
    if dof <= 0:
        raise FitError("more parameters than data points in the deconvolution")
    sigma2 = float(np.sum(resid ** 2) / dof)
    at_bound = [name for name in free if _at_bound(result.params[name])]
    cov_theta, cov_coef = _full_covariance(ppm, values, free, components, observe_mhz, baseline_order,
                                           design, coef, sigma2)
    theta_err = dict(zip(free, np.sqrt(np.clip(np.diag(cov_theta), 0, None))))
    area_err = np.sqrt(np.clip(np.diagonal(cov_coef, axis1=1, axis2=2)[:, :k], 0, None))
    success = bool(result.success) and not at_bound
    message = result.message if not at_bound else f"parameters at their limits: {', '.join(at_bound)}"
    centres, widths, couplings, gauss = {}, {}, {}, {}
    for i, comp in enumerate(components):
        centres[comp.name] = (comp.center_ppm + values[f"c{i}_offset_hz"] / observe_mhz,
                              theta_err.get(f"c{i}_offset_hz", np.nan) / observe_mhz)
        widths[comp.name] = (values[f"c{i}_width_hz"], theta_err.get(f"c{i}_width_hz", np.nan))
        if f"c{i}_j_hz" in values:
            couplings[comp.name] = (values[f"c{i}_j_hz"], theta_err.get(f"c{i}_j_hz", np.nan))
        if f"c{i}_gauss_hz" in values:
            gauss[comp.name] = (values[f"c{i}_gauss_hz"], theta_err.get(f"c{i}_gauss_hz", np.nan))
    if not success:
        log.warning("deconvolution did not converge cleanly: %s", message)
    return DeconvolutionResult(
        names=tuple(c.name for c in components), areas=coef[:, :k].copy(), area_stderr=area_err,
        center_ppm=centres, width_hz=widths, coupling_hz=couplings, residual_sigma=math.sqrt(sigma2),
        success=success, message=str(message), n_function_evals=int(result.nfev), gauss_width_hz=gauss)


def _coarse_start(params: lmfit.Parameters, ppm: np.ndarray, data: np.ndarray, components,
                  observe_mhz: float, baseline_order: int) -> None:
    """Move the starting centres to the best point of a grid search (in place).

    Narrow overlapped multiplets give a least-squares surface with local minima about a
    line width apart in the centres, so Levenberg-Marquardt needs a start within roughly
    half a width.  Each centre offset is gridded over its tolerance in steps of 0.35 line
    widths (starting J and widths), and the residual sum of squares after the linear
    solve is evaluated for every grid point at once from Gram matrices: jointly for up
    to two components, coordinate-wise (two passes) for more.  Spectra with different
    axes are searched on their mean axis (the grid only picks the start).
    """
    axis = ppm if ppm.ndim == 1 else ppm.mean(axis=0)
    names = [f"c{k}_offset_hz" for k in range(len(components))]
    grids, columns = [], []
    for k, comp in enumerate(components):
        shape = comp.lineshape
        par = params[names[k]]
        grid = _grid(par.min, par.max, 0.35 * shape.width_hz)
        centres = comp.center_ppm + grid / observe_mhz
        columns.append(lineshapes.multiplet(
            axis[None, :], 1.0, centres, shape.n_lines, shape.coupling_hz / observe_mhz,
            shape.profile, shape.width_hz / observe_mhz, shape.gauss_width_hz / observe_mhz))
        grids.append(grid)
    x = (axis - axis.mean()) / max(np.ptp(axis) / 2.0, 1e-12)
    baseline = np.array([x ** order for order in range(baseline_order + 1)])
    best = [int(np.argmin(np.abs(g))) for g in grids]
    if len(components) <= 2:
        rss = _rss_grid(columns, baseline, data)
        best = list(np.unravel_index(int(np.argmin(rss)), rss.shape))
    else:
        for _ in range(2):
            for k in range(len(components)):
                others = [columns[j][best[j]] for j in range(len(components)) if j != k]
                rss = _rss_grid([columns[k]], np.vstack(others + [baseline]), data)
                best[k] = int(np.argmin(rss))
    for name, grid, index in zip(names, grids, best):
        params[name].set(value=float(grid[index]))


def _grid(low: float, high: float, step: float, limit: int = 81) -> np.ndarray:
    count = min(limit, int(math.floor((high - low) / step)) + 1)
    return np.union1d(np.linspace(low, high, max(count, 2)), [0.0] if low <= 0 <= high else [])


def _rss_grid(varying, fixed: np.ndarray, data: np.ndarray) -> np.ndarray:
    """Residual sum of squares of data (S, n) on [varying columns..., fixed (f, n)].

    ``varying`` holds one or two candidate sets (G_i, n); the result has shape (G_1,) or
    (G_1, G_2): RSS = sum_s (y_s.y_s - r_s^T M^-1 r_s) with the normal matrix M and
    right-hand sides r of each combination, solved in one batched call.
    """
    yy = float(np.sum(data ** 2))
    ff, fy = fixed @ fixed.T, fixed @ data.T
    f = fixed.shape[0]
    if len(varying) == 1:
        c = varying[0]
        g = c.shape[0]
        normal = np.zeros((g, f + 1, f + 1))
        normal[:, 0, 0] = np.einsum("gn,gn->g", c, c)
        normal[:, 0, 1:] = normal[:, 1:, 0] = c @ fixed.T
        normal[:, 1:, 1:] = ff
        rhs = np.concatenate([(c @ data.T)[:, None, :], np.broadcast_to(fy, (g,) + fy.shape)], axis=1)
        shape = (g,)
    else:
        a, b = varying
        ga, gb = a.shape[0], b.shape[0]
        normal = np.zeros((ga, gb, f + 2, f + 2))
        normal[..., 0, 0] = np.einsum("gn,gn->g", a, a)[:, None]
        normal[..., 1, 1] = np.einsum("gn,gn->g", b, b)[None, :]
        normal[..., 0, 1] = normal[..., 1, 0] = a @ b.T
        normal[..., 0, 2:] = normal[..., 2:, 0] = (a @ fixed.T)[:, None, :]
        normal[..., 1, 2:] = normal[..., 2:, 1] = (b @ fixed.T)[None, :, :]
        normal[..., 2:, 2:] = ff
        rhs = np.zeros((ga, gb, f + 2, data.shape[0]))
        rhs[..., 0, :] = (a @ data.T)[:, None, :]
        rhs[..., 1, :] = (b @ data.T)[None, :, :]
        rhs[..., 2:, :] = fy
        shape = (ga, gb)
        normal = normal.reshape((-1,) + normal.shape[2:])
        rhs = rhs.reshape((-1,) + rhs.shape[2:])
    ridge = 1e-12 * np.max(np.abs(np.diagonal(normal, axis1=1, axis2=2)), axis=1)
    normal = normal + ridge[:, None, None] * np.eye(normal.shape[-1])
    solution = np.linalg.solve(normal, rhs)
    return (yy - np.einsum("gms,gms->g", rhs, solution)).reshape(shape)


def _at_bound(par: lmfit.Parameter) -> bool:
    span = par.max - par.min
    return bool(np.isfinite(span) and min(par.value - par.min, par.max - par.value) < 1e-6 * span)


def _full_covariance(ppm, values, free, components, observe_mhz, baseline_order, design, coef, sigma2):
    """Covariance of the shared parameters and of each spectrum's amplitudes (blockwise).

    With G_s = dA/dtheta c_s (n x p), the normal matrix of all parameters is
    [[sum_s G_s^T G_s, G_s^T A_s], [A_s^T G_s, A_s^T A_s]]; the Schur complement
    S = sum_s G_s^T G_s - sum_s G_s^T A_s H_s A_s^T G_s (H_s = (A_s^T A_s)^-1) gives
    cov(theta) = sigma^2 S^-1 and cov(c_s) = sigma^2 (H_s + H_s A_s^T G_s S^-1 G_s^T A_s H_s).
    """
    n_spectra = coef.shape[0]
    design_s = np.broadcast_to(design, (n_spectra,) + design.shape[-2:]) if design.ndim == 2 else design
    grads = []
    for name in free:
        step = 1e-4 * max(abs(values[name]), 1e-2)
        up, down = dict(values), dict(values)
        up[name] += step
        down[name] -= step
        d_design = (_basis(ppm, up, components, observe_mhz, baseline_order)
                    - _basis(ppm, down, components, observe_mhz, baseline_order)) / (2 * step)
        d_design = np.broadcast_to(d_design, design_s.shape)
        grads.append(np.einsum("snm,sm->sn", d_design, coef))
    gram = np.einsum("sni,snj->sij", design_s, design_s)
    hinv = np.linalg.inv(gram)
    if not grads:
        return np.zeros((0, 0)), sigma2 * hinv
    g = np.stack(grads, axis=-1)                                # (S, n, p)
    cross = np.einsum("snp,snm->spm", g, design_s)              # G^T A, (S, p, m)
    schur = np.einsum("snp,snq->pq", g, g) - np.einsum("spm,smk,sqk->pq", cross, hinv, cross)
    schur_inv = np.linalg.pinv(schur)
    hq = np.einsum("smk,spk->smp", hinv, cross)                 # H A^T G, (S, m, p)
    cov_coef = hinv + np.einsum("smp,pq,snq->smn", hq, schur_inv, hq)
    return sigma2 * schur_inv, sigma2 * cov_coef


def window_data(spectrum: Spectrum, window_ppm, n_points: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Axis and intensities of a window; with ``n_points`` a fixed count from the high edge."""
    idx = _window_indices(spectrum.ppm, window_ppm)
    if n_points is not None:
        start = idx[0] if idx.size else spectrum.index_of(window_ppm[1])
        idx = np.arange(start, min(start + n_points, spectrum.n_points))
    return spectrum.ppm[idx], spectrum.real[idx]


def fit_window(signals) -> tuple[float, float]:
    """Union of the windows of a group of fit signals."""
    return (min(s.window_ppm[0] for s in signals), max(s.window_ppm[1] for s in signals))


def components_for(signals) -> list[Component]:
    """Deconvolution components of a group of fit signals (start at the window centres).

    A centre may move by the signal's ``tolerance_ppm`` when one is given, else by a
    quarter of its window: an explicit tolerance is how a user keeps two close lines of
    one group from trading places.
    """
    return [Component(name=s.name, center_ppm=s.center_ppm, lineshape=s.lineshape,
                      tolerance_ppm=s.tolerance_ppm if s.tolerance_ppm > 0
                      else 0.25 * (s.window_ppm[1] - s.window_ppm[0]))
            for s in signals]
