"""Automatic phasing: peak-phase regression ("peaks") and ACME entropy minimisation ("acme").

See :func:`auto_phase` for both methods and what was measured with them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy import optimize

from kinetics.linalg import complex_lstsq, small_linear_algebra
from kinetics.processing.steps import phase
from kinetics.spectra.peaks import difference_sigma, pick_peaks, robust_sigma
from kinetics.spectra.spectrum import Spectrum


@dataclass(frozen=True)
class PhaseResult:
    """Outcome of :func:`auto_phase`.

    Attributes
    ----------
    spectrum : Spectrum
        The phased spectrum.
    p0_deg, p1_deg : float
        Applied zero- and first-order phase (degrees, p0 wrapped to (-180, 180]).
    pivot_ppm : float
        Pivot of the first-order term.
    score : float
        ``"acme"``: final ACME objective (lower is better); ``"peaks"``: weighted rms
        residual (degrees) of the measured signal phases about the fitted line.
    succeeded : bool
        Whether the optimiser converged (``"acme"``) or signals were found (``"peaks"``).
    message : str
        Why not, when it did not.
    """

    spectrum: Spectrum
    p0_deg: float
    p1_deg: float
    pivot_ppm: float
    score: float
    succeeded: bool
    message: str = ""


@dataclass(frozen=True)
class PhaseHint:
    """A phase to start automatic phasing from: the previous spectrum's, in a series whose
    phase is stable (``ProcessedSpectrum.phase_used``).

    Attributes
    ----------
    p0_deg, p1_deg : float
        Zero- and first-order phase, degrees.
    pivot_ppm : float
        Pivot of ``p1_deg``.
    """

    p0_deg: float
    p1_deg: float
    pivot_ppm: float

    def about(self, pivot_ppm: float, width_ppm: float) -> tuple[float, float]:
        """(p0, p1) in degrees of the same phase line about another pivot.

        ``p0 + p1 (pivot - x) / W = p0' + p1 (pivot' - x) / W`` gives
        ``p0' = p0 + p1 (pivot - pivot') / W``.
        """
        return self.p0_deg + self.p1_deg * (self.pivot_ppm - pivot_ppm) / width_ppm, self.p1_deg


def acme_score(real: np.ndarray, penalty_weight: float = 1000.0, noise_sigma: float = 0.0) -> float:
    """ACME objective: entropy of the first derivative plus a negativity penalty.

    Chen, Weng, Goh and Garland 2002, J. Magn. Reson. 158, 164-168 (from memory)::

        h_i = |R'_i| / sum |R'|,   E = -sum h_i ln h_i,
        P = gamma * sum_{R_i < 0} R_i^2       (R scaled to max |R| = 1)

    A correctly phased spectrum has sharp, positive absorption lines: its derivative is
    concentrated on few points (low entropy) and it has little negative area.

    Parameters
    ----------
    real : ndarray, shape (n,)
        Real part of the trial spectrum.
    penalty_weight : float, default 1000
        gamma (from memory of the paper's choice; scale-free here because ``R`` is
        normalised).  With it the penalty dominates: on simulated spectra a weaker one
        (gamma / n) left p1 errors of tens of degrees, this one a few degrees.
    noise_sigma : float, default 0
        Noise standard deviation of ``real``; only values below ``-3 sigma`` are
        penalised (optional; on simulations at SNR 1000 it helped some spectra and not
        others, so it is off by default).
    """
    real = np.asarray(real, dtype=float)
    scale = float(np.max(np.abs(real)))
    if scale == 0:
        return 0.0
    # h = |R'| / sum |R'| does not change when R is scaled, so the entropy is computed on
    # the raw derivative d: E = ln T - sum d ln d / T with T = sum d (fewer passes)
    derivative = np.abs(np.diff(real))
    total = float(derivative.sum())
    entropy = 0.0
    if total > 0:
        log_d = np.zeros_like(derivative)
        np.log(derivative, out=log_d, where=derivative > 0)
        entropy = math.log(total) - float(derivative @ log_d) / total
    # noise alone dips below zero whatever the phase; optionally only dips beyond
    # 3 sigma count
    negative = real[real < -3.0 * noise_sigma] + 3.0 * noise_sigma
    return float(entropy + penalty_weight * float(negative @ negative) / (scale * scale))


def auto_phase(
    spectrum: Spectrum,
    method: str = "peaks",
    pivot_ppm: float | None = None,
    p1_range_deg: float = 360.0,
    region_ppm: tuple[float, float] | None = None,
    noise_sigma: float | None = None,
    exclude_ppm: Sequence[tuple[float, float]] = (),
    start: PhaseHint | None = None,
) -> PhaseResult:
    """Find the zero- and first-order phase automatically.

    Two methods:

    ``"peaks"`` (default): peak-phase regression.  Each signal's own phase is measured
    and a straight line ``phi = p0 + p1 * (pivot - ppm) / width`` is fitted through them:

    1. The noise sigma is estimated from the spectrum itself (median absolute deviation
       of the first differences of the real and imaginary parts), the line width from
       the half-height widths of the most prominent peaks of the magnitude spectrum.
    2. Signal regions are the points where a band-pass (difference of two Gaussian
       smoothings, which ignores baselines and broad solvent tails) of the complex
       spectrum exceeds 6 of its own robust sigmas, widened by two line widths.
    3. Large (solvent) lines: each range of ``exclude_ppm``, and any line over 10 times
       taller than every other region (left out over +/- 2 of its magnitude widths), has
       its far tails removed: ``sum_k c_k / (x - x_s)^k`` (k = 1..3, the asymptotic
       expansion of a line at the range's tallest point ``x_s``) plus a cubic, with
       complex coefficients fitted by least squares to the signal-free points.  Such a
       line's tails reach every other signal, and its phase alone cannot fix p1.
    4. A first estimate per region: the phase of its complex integral after removing a
       complex straight line through both ends (for symmetric line shapes the
       dispersion part integrates to zero, so any multiplet or overlap gives its
       phase).  Line (6) is fitted through these.
    5. Refinement: in the roughly phased spectrum, the absorption maxima of each region
       give line positions; the region is fitted by linear least squares with a complex
       Lorentzian ``1 / (g - i (x - x_j))`` and its derivative per line (which absorbs a
       small position error) plus a complex quadratic baseline; the sign of the
       dispersion (data conventions differ) is the one fitting the strongest region
       better.  The region's phase is that of the sum of its Lorentzian coefficients
       (lines under 5 % of the largest left out).  A region whose fit leaves more than
       1.8 times the expected residual (noise variance plus (0.3 % of its tallest
       point)^2: unresolved or non-Lorentzian lines) keeps its integral estimate.
    6. The straight line is fitted by weighted least squares (weights 1 / (sd^2 + 1 deg^2),
       sd from the noise) with Cauchy reweighting (scale 10 degrees) against outliers,
       started from the best point of a p1 grid (10-degree steps over the allowed range,
       p0 from the weighted circular mean), so phase wrapping never matters.  p1 stays
       within ``[-p1_range_deg, p1_range_deg]``.  Signals spanning less than 5 % of the
       width leave p1 undetermined: it is set to 0 and the result says so.
    7. Only when the tallest line of a region exceeds 1000 noise sigmas, the result is
       polished by the noise-aware ACME score within +/- 5 deg (p0) and +/- 10 deg (p1)
       (bounded Powell; see :func:`_polish_with_acme` for why).

    No spectrum-wide score is optimised at moderate SNR, so noise and a dominant line
    cannot pull the result the way they pull an entropy score.  Measured on demo-like
    spectra (60 MHz, 4096 points, multiplets, water line 20 times the tallest signal,
    1 % baseline roll, random p0 in +-90 and p1 in +-45 deg): largest error at any line
    2.2 deg at SNR 150 (ACME: 17-71 deg), 1.9 deg at 40 MHz and SNR 300, 2.9-4.4 deg at
    SNR 60 (60-100 MHz); at SNR 30 the weak groups leave errors of 5-25 deg (ACME 50-80).

    ``"acme"``: ACME entropy minimisation (Chen et al. 2002; objective
    :func:`acme_score`).  ACME has many local minima in p1, so p1 is scanned on a grid
    (20-degree steps) over ``[-p1_range_deg, p1_range_deg]``; for each trial p1 the
    zero-order phase is set in closed form to minus the angle of ``sum z |z|``, and the
    best grid point is polished by Nelder-Mead on (p0, p1).  Measured on 60 MHz demo-like
    spectra at SNR 150 it is biased by the noise (p1 errors of tens of degrees); it is
    kept for comparison and for clean, high-SNR data.

    Large first-order phases from a filter delay should first be removed with
    :func:`remove_group_delay` (the remainder is below a point, i.e. below 360 degrees).

    Parameters
    ----------
    spectrum : Spectrum
        Transformed spectrum with an imaginary part, shape (n,).
    method : {"peaks", "acme"}, default "peaks"
    pivot_ppm : float, optional
        Pivot for p1; default the tallest scored point of the magnitude spectrum.
    p1_range_deg : float, default 360
        Half-width of the allowed p1, degrees.
    region_ppm : (high, low), optional
        Only points within this region are used.  The outer 5 % of the spectrum on each
        side are never used (filter roll-off).
    noise_sigma : float, optional
        ``"acme"`` only: noise standard deviation, so that only dips beyond 3 sigma are
        penalised (default 0: every negative value counts, as in ACME).  ``"peaks"``
        estimates its own.
    exclude_ppm : sequence of (high, low), optional
        Ranges left out, e.g. a large solvent line in a non-deuterated solvent (with
        ``"peaks"`` its tails are also modelled and removed, step 3).
    start : PhaseHint, optional
        A phase known to be close (the previous spectrum's, when a series' phase is
        stable).  ``"acme"`` starts Nelder-Mead there instead of scanning the p1 grid;
        ``"peaks"`` uses it as the rough phase of step 5 instead of the integrals' line
        (steps 1-3 and 6-7 run as without it).  On the real FID of tests/data the result
        with the FID's own phase as start equals the result without one.

    Returns
    -------
    PhaseResult
        ``score`` is the ACME objective (``"acme"``) or the weighted rms residual of the
        phase line in degrees (``"peaks"``).
    """
    with small_linear_algebra():
        return _auto_phase(spectrum, method, pivot_ppm, p1_range_deg, region_ppm, noise_sigma, exclude_ppm, start)


def _auto_phase(spectrum, method, pivot_ppm, p1_range_deg, region_ppm, noise_sigma, exclude_ppm, start):
    if spectrum.imag is None:
        raise ValueError("auto-phasing needs the imaginary part, and this spectrum has none")
    if method not in PHASE_METHODS:
        raise ValueError(f"unknown auto-phase method {method!r} (use {' or '.join(PHASE_METHODS)})")
    z = spectrum.complex
    ppm = spectrum.ppm
    inside = _phase_mask(ppm, region_ppm, exclude_ppm)
    if pivot_ppm is None:
        scored = np.where(inside, np.abs(z), -np.inf)
        pivot_ppm = float(ppm[int(np.argmax(scored))])
    rough = None if start is None else start.about(pivot_ppm, float(ppm[0] - ppm[-1]))
    if method == "acme":
        ramp = np.deg2rad((pivot_ppm - ppm) / (ppm[0] - ppm[-1]))
        p0_deg, p1_deg, score, ok, message = _phase_by_acme(
            z[inside], ramp[inside], p1_range_deg, 0.0 if noise_sigma is None else noise_sigma, initial=rough)
    else:
        p0_deg, p1_deg, score, ok, message = _phase_by_peaks(
            z, ppm, inside, exclude_ppm, pivot_ppm, p1_range_deg, start=rough)
    p0_deg = float((p0_deg + 180.0) % 360.0 - 180.0)
    phased = phase(spectrum, p0_deg, p1_deg, pivot_ppm)
    return PhaseResult(phased, p0_deg, float(p1_deg), float(pivot_ppm), float(score), ok, message)


PHASE_METHODS = ("peaks", "acme")


def _phase_mask(ppm, region_ppm, exclude_ppm) -> np.ndarray:
    # the outer 5 % on each side are left out: a digital filter's gain falls off there,
    # and the distorted edges would bias the phase (measured on simulated filtered FIDs)
    inside = np.zeros(ppm.size, bool)
    edge = int(0.05 * ppm.size)
    inside[edge:ppm.size - edge] = True
    if region_ppm is not None:
        inside &= (ppm <= max(region_ppm)) & (ppm >= min(region_ppm))
    for high, low in exclude_ppm:
        inside &= ~((ppm <= max(high, low)) & (ppm >= min(high, low)))
    if not np.any(inside):
        raise ValueError("auto-phasing has no points left to score (check region and exclusions)")
    return inside


# --- peak-phase regression (method "peaks"); the numbers below were tuned on simulated
# 60 MHz spectra (SNR 30-300, multiplets, water line, baseline roll) and checked on the
# real 500 MHz FID of tests/data
_DETECT_SIGMAS = 6.0        # band-pass threshold, robust sigmas of the band-passed spectrum
_MARGIN_WIDTHS = 2.0        # regions are widened by this many line widths on each side
_ANCHOR_WIDTHS = 2.0        # end segments defining the integral's straight-line baseline
_PEAK_SIGMAS = 5.0          # absorption maxima used as Lorentzian positions
_CHI2_MAX = 1.8             # region fits worse than this (residual / noise variance) keep the integral
_SHAPE_TOLERANCE = 0.003     # relative misfit of a region's Lorentzian fit still accepted
_MINOR_LINE = 0.05          # lines below this fraction of a region's largest are ignored
_POLISH_SNR = 1000.0        # above this SNR (tallest line in a region) ACME polishes the result
_SYSTEMATIC_DEG = 1.0       # floor on each phase's standard deviation in the line fit
_OUTLIER_DEG = 10.0         # Cauchy scale of the robust line fit


def _noise_level(z: np.ndarray, inside: np.ndarray, lag: int) -> float:
    """Noise sigma per component from the MAD of differences ``lag`` points apart (robust to
    the few points on lines; :func:`kinetics.spectra.peaks.difference_sigma`); a tiny
    positive level for noise-free data."""
    sigma = difference_sigma(z, lag, where=inside, quantised_fallback=False)
    return sigma if sigma > 0 else 1e-9 * float(np.max(np.abs(z[inside])))


def _line_width_points(magnitude: np.ndarray, inside: np.ndarray, sigma: float) -> float:
    """Absorption FWHM in points: median half-height width of the 5 most prominent magnitude
    peaks, divided by sqrt(3) (a Lorentzian's magnitude is sqrt(3) times wider)."""
    from scipy import signal

    candidates = pick_peaks(magnitude, height=10.0 * sigma).index
    top = _most_prominent(magnitude, candidates[inside[candidates]], 10.0 * sigma, 5)
    if top.size == 0:
        return 4.0
    widths = signal.peak_widths(magnitude, top, rel_height=0.5)[0]
    return max(2.0, float(np.median(widths)) / math.sqrt(3.0))


def _most_prominent(values: np.ndarray, candidates: np.ndarray, minimum: float, count: int) -> np.ndarray:
    """The ``count`` most prominent of the maxima ``candidates`` whose prominence is at least
    ``minimum`` (indices; fewer when fewer qualify).

    For values >= 0 (a magnitude) a maximum's prominence never exceeds its height, so the
    candidates are taken by falling height and the search stops once the next height
    cannot beat the ``count``-th prominence found: the same choice as computing every
    prominence (thousands of noise maxima on dispersion tails), at a fraction of the cost.
    """
    from scipy import signal

    order = candidates[np.argsort(values[candidates], kind="stable")[::-1]]
    chosen, prominences = [], []
    start, batch = 0, 4 * count
    while start < order.size:
        chunk = order[start:start + batch]
        prominence = signal.peak_prominences(values, chunk)[0]
        keep = prominence >= minimum
        chosen.extend(chunk[keep])
        prominences.extend(prominence[keep])
        start, batch = start + batch, 2 * batch  # growing batches: few calls however many maxima
        if len(prominences) >= count and (start >= order.size or
                                          values[order[start]] <= np.sort(prominences)[-count]):
            break
    chosen, prominences = np.asarray(chosen, int), np.asarray(prominences)
    return chosen[np.argsort(prominences)[::-1][:count]]


def _signal_regions(z: np.ndarray, inside: np.ndarray, width_points: float) -> list[tuple[int, int]]:
    from scipy import ndimage

    # difference of Gaussian smoothings (scales s and 4 s points), applied as a product
    # in the conjugate domain (two FFTs; faster than direct convolution for wide lines)
    s1 = max(1.0, 0.5 * width_points)
    f = np.fft.fftfreq(z.size)
    window = np.exp(-2.0 * (math.pi * s1 * f) ** 2) - np.exp(-2.0 * (math.pi * 4.0 * s1 * f) ** 2)
    band = np.fft.fft(np.fft.ifft(z) * window)
    sigma = robust_sigma(np.concatenate([band.real[inside], band.imag[inside]]))
    found = (np.abs(band) > _DETECT_SIGMAS * sigma) & inside
    margin = int(math.ceil(_MARGIN_WIDTHS * width_points))
    # binary dilation by 2 margin + 1 points (outside the array counts as empty), from a
    # running count: O(n) whatever the margin (ndimage's is O(n margin))
    count = np.concatenate([[0], np.cumsum(found)])
    index = np.arange(z.size)
    grown = count[np.minimum(index + margin + 1, z.size)] - count[np.maximum(index - margin, 0)] > 0
    labels, _ = ndimage.label(grown)
    regions = [(s[0].start, s[0].stop) for s in ndimage.find_objects(labels)]
    # a region reaching an edge or an excluded range would be cut off mid-line
    return [(a, b) for a, b in regions if inside[a:b].all()]


def _dominant_line(magnitude, inside, regions):
    """(index, half-width in points) of a line over 10 times taller than every other
    region's (an undeclared solvent line), to be treated like an excluded range; or None.

    Such a line's tails reach every other signal and its phase alone cannot fix p1, so it
    is left out and its tails removed as for ``exclude_ppm``; the range left out is
    +/- 2 of its magnitude half-height widths."""
    from scipy import signal

    if len(regions) < 2:
        return None
    tops = np.array([a + int(np.argmax(magnitude[a:b])) for a, b in regions])
    heights = magnitude[tops]
    order = np.argsort(heights)[::-1]
    if heights[order[0]] < 10.0 * heights[order[1]]:
        return None
    top = int(tops[order[0]])
    width = float(signal.peak_widths(magnitude, [top], rel_height=0.5)[0][0])
    return top, int(math.ceil(2.0 * width))


def _remove_solvent_tails(z, inside, regions, centres, width_points):
    """z minus the fitted far tails of lines at ``centres`` (indices) and a cubic, shape (n,)
    (unchanged outside ``inside``)."""
    n = z.size
    free = inside.copy()
    for a, b in regions:
        free[a:b] = False
    if free.sum() < 50:
        return z
    index = np.arange(n, dtype=float)
    columns = []
    for centre in centres:
        u = (index - centre) / width_points
        u[np.abs(u) < 1e-6] = 1e-6
        inverse = 1.0 / u
        columns += [inverse, inverse * inverse, inverse * inverse * inverse]
    t = 2.0 * index / (n - 1) - 1.0
    columns += [np.ones(n), t, t * t, t * t * t]
    design = np.stack(columns, 1)
    # real normal equations: a complex SVD-based lstsq cost ~50 ms here (see kinetics.linalg)
    coefficients = complex_lstsq(design[free], z[free])
    # the real design times the real and imaginary coefficients (no complex copy of it);
    # only where it is valid: inside the excluded ranges the expansion diverges
    tails = design @ coefficients.real + 1j * (design @ coefficients.imag)
    return np.where(inside, z - tails, z)


def _region_integral(segment: np.ndarray, anchor: int, sigma: float):
    """(complex integral after a straight line through both end segments, its noise sd)."""
    n = segment.size
    za, zb = segment[:anchor].mean(), segment[-anchor:].mean()
    xa, xb = (anchor - 1) / 2.0, n - 1 - (anchor - 1) / 2.0
    x = np.arange(n)
    base = za + (zb - za) * (x - xa) / (xb - xa)
    weights = np.ones(n)
    # the baseline is a linear functional of the end points: its share of the noise
    weights[:anchor] -= np.sum((xb - x) / (xb - xa)) / anchor
    weights[-anchor:] -= np.sum((x - xa) / (xb - xa)) / anchor
    return np.sum(segment - base), sigma * math.sqrt(np.sum(weights * weights))


def _region_lines(segment, rough_rad, sigma, half_width, sign):
    """Lorentzian fit of one region: per-line (offset in points, complex coefficient), the
    residual sum of squares, chi2 per degree of freedom, and the coefficients' real
    covariance / sigma^2, shape (L, L)."""
    absorption = (segment * np.exp(1j * rough_rad)).real
    # ripples and satellites under 1 % of the region's tallest line are not modelled (the
    # shape tolerance of chi2 covers them); at high SNR they would multiply the lines
    floor = max(_PEAK_SIGMAS * sigma, 0.01 * float(np.max(np.abs(segment))))
    found = pick_peaks(absorption, height=floor, prominence=floor)
    if len(found) == 0:
        return [], np.inf, np.inf, None
    positions = found.position
    x = np.arange(segment.size, dtype=float)
    lorentz = 1.0 / (half_width - 1j * sign * (x[:, None] - positions[None, :]))
    t = (x - x.mean()) / max(1.0, x[-1])
    design = np.concatenate([lorentz, 1j * sign * lorentz * lorentz,
                             np.ones((x.size, 1)), t[:, None], (t * t)[:, None]], 1)
    # complex least squares as a real one (stacked real and imaginary parts)
    k = design.shape[1]
    real = np.empty((2 * x.size, 2 * k))
    real[:x.size, :k], real[:x.size, k:] = design.real, -design.imag
    real[x.size:, :k], real[x.size:, k:] = design.imag, design.real
    # BLAS products in one thread (auto_phase runs under small_linear_algebra): einsum's
    # plain loops were 10 times slower on regions of thousands of points, and
    # multithreaded gemm on a busy machine 10-20 times slower still
    normal = real.T @ real
    try:
        inverse = np.linalg.inv(normal)
    except np.linalg.LinAlgError:
        return [], np.inf, np.inf, None
    solution = inverse @ (real.T @ np.concatenate([segment.real, segment.imag]))
    coefficients = solution[:k] + 1j * solution[k:]
    residual = float(np.sum(np.abs(segment - design @ coefficients) ** 2))
    dof = max(1, x.size - design.shape[1])
    # model error (line shape, width) counts at high SNR: a fit within 0.3 % of the
    # tallest point is good enough however small the noise
    level = sigma * sigma + (_SHAPE_TOLERANCE * float(np.max(np.abs(segment)))) ** 2
    chi2 = residual / (2.0 * level * dof)
    # (the real-real block of the inverse is the covariance of Re c / sigma^2, and equal
    # to the imaginary-imaginary block)
    lines = [(float(p), coefficients[j]) for j, p in enumerate(positions)]
    return lines, residual, chi2, inverse[:positions.size, :positions.size]


def _fit_phase_line(u, phi, sd, p1_range_rad):
    """Robust weighted fit of phi = p0 + p1 u (radians); returns p0, p1, weighted rms, note."""
    weights = 1.0 / (sd * sd + math.radians(_SYSTEMATIC_DEG) ** 2)
    spread = math.sqrt(np.average((u - np.average(u, weights=weights)) ** 2, weights=weights))
    if u.size < 2 or spread < 0.05 / math.sqrt(12.0) or np.ptp(u) < 0.05:
        p0 = float(np.angle(np.sum(weights * np.exp(1j * phi))))
        return p0, 0.0, 0.0, "p1 not determined (signals span under 5 % of the width): set to 0"
    step = math.radians(10.0)
    grid = np.arange(-p1_range_rad, p1_range_rad + 0.5 * step, step)
    sums = (weights * np.exp(1j * (phi[None, :] - grid[:, None] * u[None, :]))).sum(1)
    best = int(np.argmax(np.abs(sums)))
    p0, p1 = float(np.angle(sums[best])), float(grid[best])
    design = np.stack([np.ones_like(u), u], 1)
    for _ in range(30):
        r = np.angle(np.exp(1j * (phi - p0 - p1 * u)))
        w = weights / (1.0 + (r / math.radians(_OUTLIER_DEG)) ** 2)
        step0, step1 = np.linalg.solve(design.T @ (w[:, None] * design), design.T @ (w * r))
        p0, p1 = p0 + step0, p1 + step1
        if max(abs(step0), abs(step1)) < 1e-8:
            break
    note = ""
    if abs(p1) > p1_range_rad:
        p1 = math.copysign(p1_range_rad, p1)
        p0 = float(np.angle(np.sum(weights * np.exp(1j * (phi - p1 * u)))))
        note = "p1 reached the end of its allowed range"
    r = np.angle(np.exp(1j * (phi - p0 - p1 * u)))
    rms = math.degrees(math.sqrt(np.average(r * r, weights=weights)))
    return p0, p1, rms, note


def _phase_by_peaks(z, ppm, inside, exclude_ppm, pivot_ppm, p1_range_deg, start=None):
    n = z.size
    width_ppm = ppm[0] - ppm[-1]
    # first differences: on apodised, zero-filled FIDs neighbouring noise points are
    # correlated and this underestimates sigma (measured 7 times on a 0.3 Hz-broadened
    # 11 s FID); differences a line width apart were tried and overestimate it from the
    # lines; the thresholds below were tuned with this estimate
    sigma = _noise_level(z, inside, 1)
    width_points = _line_width_points(np.abs(z), inside, sigma)
    regions = _signal_regions(z, inside, width_points)
    centres = []
    for high, low in exclude_ppm:
        excluded = np.flatnonzero((ppm <= max(high, low)) & (ppm >= min(high, low)))
        if excluded.size:
            centres.append(int(excluded[np.argmax(np.abs(z[excluded]))]))
    dominant = _dominant_line(np.abs(z), inside, regions)
    if dominant is not None:
        centre, half_width_points = dominant
        inside = inside.copy()
        inside[max(0, centre - half_width_points):centre + half_width_points + 1] = False
        centres.append(centre)
        regions = [(a, b) for a, b in regions if inside[a:b].all()]
    if centres:
        z = _remove_solvent_tails(z, inside, regions, centres, width_points)
        width_points = _line_width_points(np.abs(z), inside, sigma)
        regions = _signal_regions(z, inside, width_points)
    anchor = max(2, int(round(_ANCHOR_WIDTHS * width_points)))
    regions = [(a, b) for a, b in regions if b - a >= 3 * anchor]
    if not regions:
        return 0.0, 0.0, 0.0, False, "no signal regions found above the noise: not phased"
    index_to_u = lambda k: (pivot_ppm - np.interp(k, np.arange(n), ppm)) / width_ppm
    integrals = [_region_integral(z[a:b], anchor, sigma) for a, b in regions]
    centre_u = np.array([index_to_u(0.5 * (a + b - 1)) for a, b in regions])
    phi = np.array([-np.angle(value) for value, _ in integrals])
    sd = np.array([s / max(abs(value), 1e-300) for value, s in integrals])
    p1_range = math.radians(p1_range_deg)
    if start is None:
        p0, p1, rms, note = _fit_phase_line(centre_u, phi, sd, p1_range)
    else:
        p0, p1 = math.radians(start[0]), math.radians(float(np.clip(start[1], -p1_range_deg, p1_range_deg)))

    # refinement: Lorentzian fits per region, the dispersion sign taken from the strongest
    strongest = int(np.argmax([abs(value) / s for value, s in integrals]))
    a, b = regions[strongest]
    rough = p0 + p1 * index_to_u(np.arange(a, b))
    half_width = 0.5 * width_points
    sign = min((1, -1), key=lambda s: _region_lines(z[a:b], rough, sigma, half_width, s)[1])
    us, phis, sds = centre_u.copy(), phi.copy(), sd.copy()
    for k, (a, b) in enumerate(regions):
        rough = p0 + p1 * index_to_u(np.arange(a, b))
        lines, _, chi2, covariance = _region_lines(z[a:b], rough, sigma, half_width, sign)
        if chi2 > _CHI2_MAX or not lines:
            continue  # keep the integral's estimate
        # one phase per region, from the sum of its lines' coefficients: closely spaced
        # lines trade amplitude between them, their sum is well determined; lines under
        # 5 % of the largest (ripples, artefacts) are left out
        amplitude = np.abs([c for _, c in lines])
        chosen = np.flatnonzero(amplitude >= _MINOR_LINE * amplitude.max())
        total = sum(lines[j][1] for j in chosen)
        spread = sigma * math.sqrt(max(float(covariance[np.ix_(chosen, chosen)].sum()), 0.0))
        if abs(total) <= 3.0 * spread:
            continue
        position = sum(amplitude[j] * lines[j][0] for j in chosen) / amplitude[chosen].sum()
        us[k], phis[k], sds[k] = index_to_u(a + position), -np.angle(total), spread / abs(total)
    p0, p1, rms, note = _fit_phase_line(us, phis, sds, p1_range)
    p0_deg, p1_deg = math.degrees(p0), math.degrees(p1)
    # the tallest line within the fitted regions (not a solvent tail at an exclusion's edge)
    if max(float(np.max(np.abs(z[a:b]))) for a, b in regions) > _POLISH_SNR * sigma:
        p0_deg, p1_deg = _polish_with_acme(z, ppm, inside, pivot_ppm, sigma, p0_deg, p1_deg, p1_range_deg)
        note = "; ".join(filter(None, [note, "polished by ACME within 5 deg (p0) and 10 deg (p1)"]))
    return p0_deg, p1_deg, rms, True, note


def _polish_with_acme(z, ppm, inside, pivot_ppm, sigma, p0_deg, p1_deg, p1_range_deg):
    """Bounded ACME refinement (+/- 5 deg p0, +/- 10 deg p1, p1 within its range) on the
    scored points ``inside``.

    Used only at high SNR, where ACME is not biased by noise: on simulated spectra at SNR
    3000 both methods were within 0.3 deg, while on the real 500 MHz FID of tests/data
    (real, slightly non-Lorentzian lines) they differed by 3 deg in p0 and ACME's phase
    gave per-proton integrals closer to the proton counts (within 4 % against 7 %)."""
    ramp = np.deg2rad((pivot_ppm - ppm) / (ppm[0] - ppm[-1]))
    score = _AcmeScorer(z, inside, float(ramp[0]), float(ramp[1] - ramp[0]), sigma)
    bounds = [(p0_deg - 5.0, p0_deg + 5.0),
              (max(p1_deg - 10.0, -p1_range_deg), min(p1_deg + 10.0, p1_range_deg))]
    result = optimize.minimize(score, np.array([p0_deg, float(np.clip(p1_deg, *bounds[1]))]),
                               method="Powell", bounds=bounds, options={"xtol": 0.05, "ftol": 1e-6, "maxfev": 120})
    return float(result.x[0]), float(result.x[1])


class _AcmeScorer:
    """ACME score (:func:`acme_score`) of ``Re(z exp(i (p0 + p1 ramp)))`` on the points
    ``inside``, for an optimiser that calls it ~100 times on tens of thousands of points.

    Two savings, same numbers: the first-order rotation is kept while only p0 moves
    (Powell moves p0 alone in a third of its steps; then a call costs two products), and
    the work arrays are allocated once (fresh arrays of this size cost page faults on
    every call: measured a quarter of the time)."""

    def __init__(self, z: np.ndarray, inside: np.ndarray, ramp_start: float, ramp_step: float, noise_sigma: float):
        self.index = np.flatnonzero(inside)
        self.n = z.size
        self.z_re, self.z_im = z.real[self.index], z.imag[self.index]
        self.ramp_start, self.ramp_step = ramp_start, ramp_step
        self.noise_sigma = noise_sigma
        m = self.index.size
        self.rotated_re, self.rotated_im, self.real, self.work = (np.empty(m) for _ in range(4))
        self.derivative, self.log_derivative = np.empty(m - 1), np.zeros(m - 1)
        self.p1 = None

    def _rotate(self, p1: float) -> None:
        if p1 == self.p1:
            return
        phasor = _linear_phasor(p1 * self.ramp_start, p1 * self.ramp_step, self.n)[self.index]
        np.multiply(self.z_re, phasor.real, out=self.rotated_re)
        np.multiply(self.z_im, phasor.imag, out=self.work)
        self.rotated_re -= self.work
        np.multiply(self.z_re, phasor.imag, out=self.rotated_im)
        np.multiply(self.z_im, phasor.real, out=self.work)
        self.rotated_im += self.work
        self.p1 = p1

    def __call__(self, params) -> float:
        self._rotate(float(params[1]))
        p0 = math.radians(params[0])
        real = np.multiply(self.rotated_re, math.cos(p0), out=self.real)
        real -= np.multiply(self.rotated_im, math.sin(p0), out=self.work)
        scale = max(float(real.max()), -float(real.min()))
        if scale == 0:
            return 0.0
        # the formula of acme_score, written into the kept arrays
        derivative = np.subtract(real[1:], real[:-1], out=self.derivative)
        np.abs(derivative, out=derivative)
        total = float(derivative.sum())
        entropy = 0.0
        if total > 0:
            self.log_derivative.fill(0.0)
            np.log(derivative, out=self.log_derivative, where=derivative > 0)
            entropy = math.log(total) - float(derivative @ self.log_derivative) / total
        floor = -3.0 * self.noise_sigma
        negative = real[real < floor] - floor
        return float(entropy + 1000.0 * float(negative @ negative) / (scale * scale))


def _linear_phasor(offset_rad: float, step_rad: float, n: int, block: int = 256) -> np.ndarray:
    """exp(i (offset + step k)) for k = 0..n-1, as an outer product of two short phasor
    vectors (a few times faster than n sines and cosines; error ~1e-13)."""
    rows = -(-n // block)
    coarse = np.exp(1j * (offset_rad + step_rad * block * np.arange(rows)))
    fine = np.exp(1j * step_rad * np.arange(block))
    return np.outer(coarse, fine).ravel()[:n]


def _phase_by_acme(zr, ramp, p1_range_deg, noise_sigma: float = 0.0, p1_step_deg: float = 20.0, initial=None):
    weight = np.abs(zr)
    start, step = float(ramp[0]), float(ramp[1] - ramp[0]) if ramp.size > 1 else 0.0
    linear = np.allclose(ramp, start + step * np.arange(ramp.size), rtol=0, atol=1e-9)

    def rotated_real(p0_deg: float, p1_deg: float) -> np.ndarray:
        if linear:
            phasor = _linear_phasor(np.deg2rad(p0_deg) + p1_deg * start, p1_deg * step, zr.size)
        else:
            phasor = np.exp(1j * (np.deg2rad(p0_deg) + p1_deg * ramp))
        return zr.real * phasor.real - zr.imag * phasor.imag

    def closed_form_p0(p1_deg: float) -> float:
        if linear:
            w = zr * _linear_phasor(p1_deg * start, p1_deg * step, zr.size)
        else:
            w = zr * np.exp(1j * p1_deg * ramp)
        return float(-np.degrees(np.angle(np.sum(w * weight))))

    def score(params: np.ndarray) -> float:
        return acme_score(rotated_real(params[0], params[1]), noise_sigma=noise_sigma)

    trials = []
    if initial is not None:
        trials.append((0.0, float(initial[0]), float(initial[1])))
    for p1 in np.arange(-p1_range_deg, p1_range_deg + 0.5 * p1_step_deg, p1_step_deg) if initial is None else ():
        p0 = closed_form_p0(p1)
        trials.append((score(np.array([p0, p1])), p0, p1))
    trials.sort()
    best = None
    for _, p0, p1 in trials[:1]:
        result = optimize.minimize(
            score, np.array([p0, p1]), method="Nelder-Mead",
            options={"xatol": 0.05, "fatol": 1e-8, "maxiter": 2000, "initial_simplex":
                     np.array([[p0, p1], [p0 + 10, p1], [p0, p1 + 0.5 * p1_step_deg]])},
        )
        if best is None or result.fun < best.fun:
            best = result
    message = "" if best.success else f"Nelder-Mead did not converge: {best.message}"
    return float(best.x[0]), float(best.x[1]), float(best.fun), bool(best.success), message


