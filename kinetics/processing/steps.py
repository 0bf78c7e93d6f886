"""Processing steps, one pure function each: time domain, FFT, phase, baseline, reference, align, noise.

Every step takes a record (:class:`~kinetics.spectra.spectrum.Fid` or
:class:`~kinetics.spectra.spectrum.Spectrum`) and returns a new one; nothing is edited in
place.  Conventions (frequency axis, phase, SNR) are in :mod:`kinetics.processing`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from kinetics.spectra.peaks import detrended_sigma, parabolic_offset
from kinetics.spectra.spectrum import Fid, Spectrum


# ------------------------------------------------------------------ time domain
def remove_dc_offset(fid: Fid, tail_fraction: float = 0.2) -> Fid:
    """Subtract the mean of the FID's last ``tail_fraction`` of points (complex).

    By the end of the acquisition the signal has decayed, so the tail's mean is the
    receiver's constant offset, which would otherwise become a spike at the carrier.

    Parameters
    ----------
    fid : Fid
        Raw FID, ``data`` shape (n,).
    tail_fraction : float, default 0.2
        Fraction (0, 0.5] of the points, taken from the end, that estimate the offset
        (common practice: the last 10-25 %).
    """
    if not 0.0 < tail_fraction <= 0.5:
        raise ValueError(f"tail_fraction must be in (0, 0.5], got {tail_fraction}")
    n_tail = max(1, int(round(fid.n_points * tail_fraction)))
    offset = fid.data[-n_tail:].mean()
    return fid.replace(data=fid.data - offset)


def detect_group_delay(fid: Fid, search_points: int = 512, threshold: float = 0.2) -> float:
    """Digital-filter delay in points, estimated from the FID's rising edge (0 if none).

    A digital filter delays the FID: the first points are near zero and the signal then
    rises steeply.  The delay is taken as the point of steepest rise of ``|x|``
    (for a symmetric filter the step response is steepest at its group delay), refined
    to a fraction of a point by a parabola through the three largest differences.  The
    remaining error (a fraction of a point) is a first-order phase that
    :func:`auto_phase` removes.

    Parameters
    ----------
    fid : Fid
        FID, ``data`` shape (n,).
    search_points : int, default 512
        How many leading points are searched for the edge.
    threshold : float, default 0.2
        A rising edge is declared only when ``|x[0]|`` is below ``threshold`` times the
        largest ``|x|`` among the searched points; a FID that starts at its maximum
        (no filter delay) returns 0.0.

    Returns
    -------
    float
        Delay in points (>= 0).
    """
    magnitude = np.abs(fid.data[: max(4, min(search_points, fid.n_points))])
    peak = magnitude.max()
    if peak == 0 or magnitude[0] >= threshold * peak:
        return 0.0
    rise = np.diff(magnitude)
    # only the part before the first maximum counts: the edge precedes the signal
    first_max = int(np.argmax(magnitude >= 0.5 * peak))
    k = int(np.argmax(rise[: max(1, first_max + 1)]))
    offset = 0.0
    if 0 < k < rise.size - 1:
        y0, y1, y2 = rise[k - 1], rise[k], rise[k + 1]
        denominator = y0 - 2 * y1 + y2
        if denominator < 0:
            offset = 0.5 * (y0 - y2) / denominator
    # rise[k] lies between points k and k+1
    return float(k + 0.5 + offset)


def remove_group_delay(fid: Fid, delay_points: float | None = None) -> Fid:
    """Rotate the digital-filter delay's whole points to the end of the FID.

    The points before the delay are the filter's response *before* t = 0; for the
    periodic signal the DFT assumes, they belong at negative times, i.e. at the very end
    of the array.  So zero-fill first and call this afterwards: the integer part of the
    delay is removed by a circular shift of the zero-filled array; the fractional part
    is kept in ``group_delay_points`` and :func:`fft` removes it as a first-order phase
    ``2 pi * delay * offset_hz / SW`` (a fractional shift in the time domain would
    ring).  Rolling before zero-filling leaves the edge in the middle of the array and
    distorts the baseline.

    Parameters
    ----------
    fid : Fid
        FID whose first ``delay_points`` are the filter's rising edge, shape (n,).
    delay_points : float, optional
        Delay in points; default ``fid.group_delay_points`` (the declared delay).
    """
    delay = fid.group_delay_points if delay_points is None else float(delay_points)
    if delay < 0:
        raise ValueError(f"delay_points must be >= 0, got {delay}")
    whole = int(math.floor(delay))
    if whole >= fid.n_points:
        raise ValueError(f"delay of {delay} points exceeds the FID's {fid.n_points} points")
    data = np.roll(fid.data, -whole) if whole else fid.data
    return fid.replace(data=data, group_delay_points=delay - whole)


def apodize_exponential(fid: Fid, line_broadening_hz: float) -> Fid:
    """Multiply by ``exp(-pi * LB * t)``: adds ``LB`` Hz to every Lorentzian FWHM.

    Areas are unchanged (the value at t = 0 is untouched).  ``t`` is counted from the
    filter delay ``fid.group_delay_points``, so apply before :func:`remove_group_delay`.
    ``fid.data`` shape (n,).
    """
    if line_broadening_hz == 0:
        return fid
    window = np.exp(-math.pi * line_broadening_hz * _time_from_echo(fid))
    return fid.replace(data=fid.data * window)


def apodize_gaussian(fid: Fid, gaussian_hz: float) -> Fid:
    """Multiply by ``exp(-(pi * g * t)^2 / (4 ln 2))``: convolves lines with a Gaussian of FWHM ``g`` Hz.

    Areas are unchanged.  ``fid.data`` shape (n,).
    """
    if gaussian_hz == 0:
        return fid
    t = _time_from_echo(fid)
    window = np.exp(-((math.pi * gaussian_hz * t) ** 2) / (4.0 * math.log(2.0)))
    return fid.replace(data=fid.data * window)


def _time_from_echo(fid: Fid) -> np.ndarray:
    # the signal's t = 0 is at point group_delay_points; the filter's pre-response
    # before it counts as negative time, windowed symmetrically
    return np.abs(np.arange(fid.n_points) - fid.group_delay_points) * fid.dwell_s


def zero_fill(fid: Fid, size: int | str = "auto") -> Fid:
    """Append zeros to ``size`` points.

    Parameters
    ----------
    fid : Fid
        FID, ``data`` shape (n,).
    size : int or "auto", default "auto"
        Target number of points (>= n).  ``"auto"`` is the smallest power of two that is
        at least twice ``n`` (one doubling recovers the information in the imaginary
        part; common practice).
    """
    n = fid.n_points
    if size == "auto":
        target = 1 << int(math.ceil(math.log2(2 * n)))
    else:
        target = int(size)
        if target < n:
            raise ValueError(f"zero_fill size {target} is smaller than the FID's {n} points")
    if target == n:
        return fid
    return fid.replace(data=np.concatenate([fid.data, np.zeros(target - n, complex)]))


def fft(fid: Fid, first_point_scale: float = 0.5) -> Spectrum:
    """Fourier-transform a FID into a spectrum on a decreasing ppm axis.

    Parameters
    ----------
    fid : Fid
        FID, ``data`` shape (n,), already zero-filled if wanted.
    first_point_scale : float, default 0.5
        Factor for the first point before the transform: 0.5 makes the discrete sum the
        trapezoid rule of the continuous transform, so no constant offset appears
        (Otting et al. 1986, J. Magn. Reson. 66, 187; from memory).

    Returns
    -------
    Spectrum
        ``n`` points; the point of offset ``f`` Hz is at ``carrier_ppm + f / observe_mhz``;
        a remaining fractional ``fid.group_delay_points`` has been removed as a
        first-order phase.  The header gains ``processing.spectral_width_hz``.
    """
    data = np.array(fid.data, copy=True)
    data[0] *= first_point_scale
    n = data.size
    spectral_width_hz = fid.spectral_width_hz
    transformed = np.fft.fftshift(np.fft.fft(data))
    offset_hz = (np.arange(n) - n // 2) * (spectral_width_hz / n)
    if fid.group_delay_points:
        transformed *= np.exp(2j * math.pi * fid.group_delay_points * offset_hz / spectral_width_hz)
    transformed, offset_hz = transformed[::-1], offset_hz[::-1]
    header = dict(fid.header)
    header["processing.spectral_width_hz"] = repr(spectral_width_hz)
    return Spectrum(
        ppm=fid.carrier_ppm + offset_hz / fid.observe_mhz,
        real=transformed.real,
        imag=transformed.imag,
        nucleus=fid.nucleus,
        observe_mhz=fid.observe_mhz,
        acquired_utc=fid.acquired_utc,
        duration_s=fid.duration_s,
        n_scans=fid.n_scans,
        source_path=fid.source_path,
        sha256=fid.sha256,
        header=header,
        decoupler=fid.decoupler,
    )


# ------------------------------------------------------------------ phase
def _phase_ramp(ppm: np.ndarray, p0_deg: float, p1_deg: float, pivot_ppm: float) -> np.ndarray:
    width_ppm = ppm[0] - ppm[-1]
    return np.deg2rad(p0_deg + p1_deg * (pivot_ppm - ppm) / width_ppm)


def phase(spectrum: Spectrum, p0_deg: float, p1_deg: float = 0.0, pivot_ppm: float | None = None) -> Spectrum:
    """Apply a zero- and first-order phase correction.

    ``spectrum.complex * exp(i * phi)`` with ``phi = p0 + p1 * (pivot_ppm - ppm) / width_ppm``
    (degrees; see the module docstring).

    Parameters
    ----------
    spectrum : Spectrum
        Needs the imaginary part (shape (n,)); a real-only spectrum cannot be phased.
    p0_deg : float
        Zero-order phase in degrees.
    p1_deg : float, default 0
        First-order phase in degrees across the full spectral width.
    pivot_ppm : float, optional
        Shift where the first-order term is zero; default the left edge ``ppm[0]``.
    """
    if spectrum.imag is None:
        raise ValueError("phasing needs the imaginary part, and this spectrum has none")
    pivot = spectrum.ppm[0] if pivot_ppm is None else pivot_ppm
    rotated = spectrum.complex * np.exp(1j * _phase_ramp(spectrum.ppm, p0_deg, p1_deg, pivot))
    return spectrum.replace(real=rotated.real, imag=rotated.imag)




# ------------------------------------------------------------------ baseline
def correct_baseline(
    spectrum: Spectrum,
    method: str = "arpls",
    lam: float = 1e7,
    p: float = 0.01,
    order: int = 3,
    regions_ppm: Sequence[tuple[float, float]] | None = None,
) -> tuple[Spectrum, np.ndarray]:
    """Subtract a baseline estimated with pybaselines.

    Parameters
    ----------
    spectrum : Spectrum
        Phased spectrum, shape (n,).
    method : {"arpls", "asls", "polynomial"}, default "arpls"
        ``"asls"``: asymmetric least squares (Eilers and Boelens 2005);
        ``"arpls"``: asymmetrically reweighted penalised least squares (Baek et al.
        2015), more robust to noise;  both Whittaker smoothers from
        ``pybaselines.whittaker``.  ``"polynomial"``: a polynomial of ``order`` fitted
        only to the signal-free ``regions_ppm`` (``pybaselines.polynomial.poly`` with
        zero weight elsewhere).
    lam : float, default 1e7
        Whittaker smoothness (dimensionless; larger is stiffer).  Scaled internally by
        ``(n / 16384)^4`` so the same value gives the same stiffness in ppm at any point
        count (the second-difference penalty scales with the fourth power of density).
    p : float, default 0.01
        asls asymmetry (weight of points above the baseline).
    order : int, default 3
        Polynomial order.
    regions_ppm : sequence of (high, low), required for "polynomial"
        Signal-free regions in ppm.

    Returns
    -------
    (Spectrum, ndarray shape (n,))
        Corrected spectrum (imaginary part kept as is) and the subtracted baseline.
    """
    from pybaselines import polynomial, whittaker

    y = spectrum.real
    n = y.size
    lam_scaled = lam * (n / 16384.0) ** 4
    if method == "asls":
        baseline, _ = whittaker.asls(y, lam=lam_scaled, p=p)
    elif method == "arpls":
        baseline, _ = whittaker.arpls(y, lam=lam_scaled)
    elif method == "polynomial":
        if not regions_ppm:
            raise ValueError("polynomial baseline needs regions_ppm (signal-free regions)")
        weights = np.zeros(n)
        for region in regions_ppm:
            high, low = max(region), min(region)
            weights[(spectrum.ppm <= high) & (spectrum.ppm >= low)] = 1.0
        if weights.sum() <= order:
            raise ValueError("the signal-free regions hold too few points for the polynomial")
        # fit on a centred axis: keeps the Vandermonde matrix well conditioned
        x = spectrum.ppm - spectrum.ppm.mean()
        baseline, _ = polynomial.poly(y, x_data=x, poly_order=order, weights=weights)
    else:
        raise ValueError(f"unknown baseline method {method!r}")
    return spectrum.replace(real=y - baseline), np.asarray(baseline)




# ------------------------------------------------------------------ referencing
@dataclass(frozen=True)
class ReferenceResult:
    """Outcome of :func:`reference`: the shifted spectrum, where the peak was found, the shift applied."""

    spectrum: Spectrum
    found_ppm: float
    shift_ppm: float




def peak_position(spectrum: Spectrum, centre_ppm: float, window_ppm: float) -> float:
    """Shift (ppm) of the tallest point within ``centre_ppm +/- window_ppm``, refined by a parabola."""
    inside = np.flatnonzero(np.abs(spectrum.ppm - centre_ppm) <= window_ppm)
    if inside.size == 0:
        raise ValueError(f"no points within {centre_ppm} +/- {window_ppm} ppm")
    k = int(inside[np.argmax(spectrum.real[inside])])
    if 0 < k < spectrum.n_points - 1:
        offset = parabolic_offset(*spectrum.real[k - 1 : k + 2])
    else:
        offset = 0.0
    step = spectrum.ppm[1] - spectrum.ppm[0]  # negative
    return float(spectrum.ppm[k] + offset * step)


def shift_axis(spectrum: Spectrum, shift_ppm: float) -> Spectrum:
    """The same intensities on an axis moved by ``shift_ppm`` (no resampling)."""
    return spectrum.replace(ppm=spectrum.ppm + shift_ppm)


def reference(spectrum: Spectrum, peak_ppm: float = 0.0, window_ppm: float = 0.3,
              target_ppm: float | None = None) -> ReferenceResult:
    """Move the axis so a reference peak (TMS, a solvent line, any named peak) sits at ``target_ppm``.

    Parameters
    ----------
    spectrum : Spectrum
        Phased spectrum, shape (n,).
    peak_ppm : float, default 0.0
        Where the reference peak is expected (TMS: 0.0); the search window is centred here.
    window_ppm : float, default 0.3
        Half-width of the search window in ppm: the tallest point within
        ``peak_ppm +/- window_ppm`` is taken, refined to sub-point precision by a parabola.
    target_ppm : float, optional
        Where the peak should be; default ``peak_ppm``.
    """
    target = peak_ppm if target_ppm is None else target_ppm
    found = peak_position(spectrum, peak_ppm, window_ppm)
    shift = target - found
    return ReferenceResult(shift_axis(spectrum, shift), found, float(shift))


# ------------------------------------------------------------------ alignment
@dataclass(frozen=True)
class AlignmentResult:
    """Outcome of :func:`align_series`.

    Attributes
    ----------
    spectra : tuple of Spectrum
        Aligned spectra (axes moved, intensities untouched).
    shifts_ppm : ndarray, shape (m,)
        Shift added to each spectrum's axis (0 for the reference spectrum).
    reference_index : int
        The spectrum the others were aligned to.
    """

    spectra: tuple[Spectrum, ...]
    shifts_ppm: np.ndarray
    reference_index: int


def _window_on(spectrum: Spectrum, grid_ppm: np.ndarray) -> np.ndarray:
    # np.interp needs an increasing abscissa
    return np.interp(grid_ppm[::-1], spectrum.ppm[::-1], spectrum.real[::-1])[::-1]


def align_series(
    spectra: Sequence[Spectrum],
    window_ppm: tuple[float, float],
    reference_index: int = 0,
    max_shift_ppm: float = 0.1,
) -> AlignmentResult:
    """Align a series to one of its spectra by cross-correlation on a ppm window.

    Each spectrum's real part on the window (interpolated onto the reference spectrum's
    points there, mean removed) is cross-correlated with the reference's; the lag of
    the maximum is refined by a parabola through its neighbours (sub-point accuracy) and
    its negative is added to the spectrum's axis.

    Parameters
    ----------
    spectra : sequence of Spectrum
        The series (m spectra).
    window_ppm : (high, low)
        Region holding sharp, persistent lines (e.g. a standard's singlet).
    reference_index : int, default 0
        Spectrum the others are aligned to.
    max_shift_ppm : float, default 0.1
        Largest shift searched.
    """
    if not spectra:
        raise ValueError("no spectra to align")
    ref = spectra[reference_index]
    high, low = max(window_ppm), min(window_ppm)
    inside = (ref.ppm <= high) & (ref.ppm >= low)
    if inside.sum() < 5:
        raise ValueError(f"the alignment window {window_ppm} holds fewer than 5 points")
    grid = ref.ppm[inside]
    step_ppm = float(grid[0] - grid[1])
    max_lag = max(1, int(math.ceil(max_shift_ppm / step_ppm)))
    target = ref.real[inside] - ref.real[inside].mean()
    m = target.size
    shifts = np.zeros(len(spectra))
    aligned = []
    for index, spectrum in enumerate(spectra):
        if index == reference_index:
            aligned.append(spectrum)
            continue
        # sample a wider window so lags up to max_lag see real data, not padding
        wide = np.concatenate([grid[0] + step_ppm * np.arange(max_lag, 0, -1), grid,
                               grid[-1] - step_ppm * np.arange(1, max_lag + 1)])
        values = _window_on(spectrum, wide)
        values = values - values[max_lag:max_lag + m].mean()
        lags = np.arange(-max_lag, max_lag + 1)
        corr = np.array([np.dot(target, values[max_lag + lag:max_lag + lag + m]) for lag in lags])
        k = int(np.argmax(corr))
        offset = parabolic_offset(*corr[k - 1:k + 2]) if 0 < k < corr.size - 1 else 0.0
        lag = lags[k] + offset
        # values[i + lag] matches target[i]: the spectrum's features sit lag points to
        # the right (lower ppm), so its axis must move up by lag * step
        shift = float(lag * step_ppm)
        shifts[index] = shift
        aligned.append(shift_axis(spectrum, shift))
    return AlignmentResult(tuple(aligned), shifts, reference_index)


# ------------------------------------------------------------------ noise and SNR
def noise_sigma(spectrum: Spectrum, region_ppm: tuple[float, float]) -> float:
    """Standard deviation of the real part in a signal-free region after removing a linear trend.

    Parameters
    ----------
    spectrum : Spectrum
        Shape (n,).
    region_ppm : (high, low)
        Signal-free region; needs at least 10 points.

    Returns
    -------
    float
        sigma with ``ddof=2`` (two parameters of the trend were fitted).
    """
    high, low = max(region_ppm), min(region_ppm)
    inside = (spectrum.ppm <= high) & (spectrum.ppm >= low)
    if inside.sum() < 10:
        raise ValueError(f"noise region {region_ppm} holds fewer than 10 points")
    # the axis is uniform, so a line in the index is a line in ppm
    return detrended_sigma(spectrum.real[inside], order=1)


def snr(spectrum: Spectrum, peak_ppm: float, window_ppm: float, noise_region_ppm: tuple[float, float]) -> float:
    """Signal-to-noise ratio of a peak: tallest point near ``peak_ppm`` / noise sigma.

    Convention: height over ONE standard deviation of the noise (not 2 sigma).
    """
    inside = np.abs(spectrum.ppm - peak_ppm) <= window_ppm
    if not inside.any():
        raise ValueError(f"no points within {peak_ppm} +/- {window_ppm} ppm")
    return float(spectrum.real[inside].max() / noise_sigma(spectrum, noise_region_ppm))


