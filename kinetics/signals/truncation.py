"""Truncation loss: the share of a signal's true area that a window integral misses.

See :mod:`kinetics.signals` (Truncation) and :func:`truncation_loss`.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field

import numpy as np

from kinetics import lineshapes
from kinetics.signals.definitions import LineShape
from kinetics.spectra.peaks import pick_peaks
from kinetics.spectra.spectrum import Spectrum

log = logging.getLogger(__name__)


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

    # columns: unit-area Lorentzians (g / pi) / ((x - c)^2 + g^2), g = FWHM / 2, then 1 and x
    # (a linear baseline); the squared distances and the baseline are computed once, the
    # search only refills the line columns
    k = centres.size
    squared = (x[:, None] - centres[None, :]) ** 2
    design = np.empty((x.size, k + 2))
    design[:, k] = 1.0
    design[:, k + 1] = x - x.mean()

    def fit(width):
        half = 0.5 * width
        np.divide(half / math.pi, squared + half * half, out=design[:, :k])
        return _linear_fit(design, y)

    fwhm = fwhm0
    if refine:
        best = minimize_scalar(lambda log_fwhm: fit(math.exp(log_fwhm))[1],
                               bounds=(math.log(0.4 * fwhm0), math.log(2.0 * fwhm0)), method="bounded",
                               options={"xatol": 1e-3})
        fwhm = math.exp(best.x)
    coef, rms = fit(fwhm)
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


def _find_lines(x, y, noise_sigma: float, fwhm: float) -> np.ndarray:
    """Sub-point positions (ppm) of the local maxima of the window that are lines: above 5 sigma
    and 3 % of the tallest, prominent (4 sigma, 2 %) and at least 0.8 FWHM apart (so noise on a
    line's flank is not a line); refined by the vertex of the parabola through each maximum."""
    top = float(y.max())
    peaks = pick_peaks(y, height=max(5.0 * noise_sigma, 0.03 * top), prominence=max(4.0 * noise_sigma, 0.02 * top),
                       distance_points=max(1, int(0.8 * fwhm / abs(x[1] - x[0]))))
    return x[peaks.index] + peaks.offset_points * (x[1] - x[0])


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
        centres = _find_lines(x, signal, noise_sigma, fwhm)
        if centres.size == 0:
            return _unreliable("no line maximum inside the window")
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


