"""Synthetic FIDs, spectra and whole reaction series whose truth is known.

Spin systems are first order: a multiplet is a set of lines split by one or more
couplings, each coupling to ``n`` equivalent partners giving ``n + 1`` lines with binomial
intensities (Pascal's triangle).  A species' signal amplitude is
``n_nuclei * concentration * amplitude_per_nucleus``.

Time domain (exact for the FFT).  The FID is a sum of damped complex exponentials::

    x[k] = sum_j a_j exp(i phi_j) exp((2 pi i f_j - pi w_j) t_k) * g_j(t_k),   t_k = k * dwell

with ``f_j`` the line's offset from the carrier (Hz), ``w_j`` its Lorentzian FWHM (Hz)
and, for Voigt lines, ``g_j(t) = exp(-(pi g t)^2 / (4 ln 2))`` a Gaussian envelope of
FWHM ``g`` Hz.  Transformed by :func:`kinetics.processing.fft` (first point halved) a
Lorentzian line of amplitude ``a`` has height ``a / (pi w dwell)`` and the area of every
line is proportional to ``a`` - so processing tests know the exact positions and areas.

Signal-to-noise.  ``snr`` is defined as the height of the tallest point of the noise-free,
correctly phased real spectrum of the species (solvent excluded), transformed without
apodisation or zero-filling, divided by the standard deviation ``sigma`` of the noise in
the real part of that spectrum (1-sigma convention).  Complex white noise of
per-component standard deviation ``sigma / sqrt(n)`` is added to the FID, which gives
exactly ``sigma`` per component after an unnormalised DFT of ``n`` points.

Phase errors.  The error is ``-phi(ppm)`` with ``phi`` as in
:func:`kinetics.processing.phase`, so ``phase(spectrum, p0_deg, p1_deg, pivot_ppm)``
with the same numbers undoes it.  :func:`simulate_spectrum` multiplies the analytic
spectrum by ``exp(-i phi)``.  :func:`simulate_fid` makes the first-order part as a real
instrument does, by starting the sampling late by ``tau = p1 / 360`` dwell times
(``x[k] = s(tau + k dwell)``), so it also carries the broad baseline roll a late start
causes (the signal between 0 and tau is missing); the zero-order part is a constant
receiver phase.  With a digital-filter delay (``group_delay_points > 0``) the
first-order part is instead an extra, undeclared band-limited delay, which (like real
filtered data) leaves a flat baseline once phased.
"""

from __future__ import annotations

import csv
import io
import json
import math
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np
from scipy import special

from kinetics.atomic import guard_output, write_atomic
from kinetics.spectra.spectrum import Fid, Spectrum

__all__ = [
    "Multiplet",
    "SpeciesSignals",
    "Acquisition",
    "line_list",
    "simulate_fid",
    "simulate_spectrum",
    "write_series",
]

_LN2 = math.log(2.0)


@dataclass(frozen=True)
class Multiplet:
    """One first-order multiplet.

    Attributes
    ----------
    shift_ppm : float
        Centre of the multiplet.
    n_nuclei : float
        Nuclei contributing (the multiplet's total area per unit concentration).
    j_hz : float or tuple of float, default 0
        Coupling constant(s) in Hz.
    multiplicity : int or tuple of int, default 1
        Lines per coupling (``n + 1`` for ``n`` equivalent partners): 1 singlet,
        2 doublet, 3 triplet, 4 quartet ...; a tuple with ``j_hz`` gives e.g. a doublet
        of quartets ``(2, 4)`` with ``j_hz=(15.5, 6.9)``.
    width_hz : float, default 1.0
        Lorentzian full width at half height (Hz).
    shape : {"lorentzian", "voigt"}, default "lorentzian"
    gaussian_hz : float, default 0.0
        Gaussian FWHM (Hz) of a Voigt line.
    """

    shift_ppm: float
    n_nuclei: float = 1.0
    j_hz: float | tuple[float, ...] = 0.0
    multiplicity: int | tuple[int, ...] = 1
    width_hz: float = 1.0
    shape: str = "lorentzian"
    gaussian_hz: float = 0.0

    def __post_init__(self) -> None:
        js = self.j_hz if isinstance(self.j_hz, tuple) else (self.j_hz,)
        ms = self.multiplicity if isinstance(self.multiplicity, tuple) else (self.multiplicity,)
        if len(js) != len(ms):
            raise ValueError("j_hz and multiplicity need the same number of entries")
        if any(int(m) != m or m < 1 for m in ms):
            raise ValueError(f"multiplicity must be whole numbers >= 1, got {self.multiplicity}")
        if any(j < 0 for j in js):
            raise ValueError("coupling constants must be >= 0 Hz")
        if not self.width_hz > 0:
            raise ValueError(f"width_hz must be > 0, got {self.width_hz}")
        if self.shape not in ("lorentzian", "voigt"):
            raise ValueError(f"shape must be 'lorentzian' or 'voigt', got {self.shape!r}")
        if self.shape == "voigt" and not self.gaussian_hz > 0:
            raise ValueError("a Voigt line needs gaussian_hz > 0")
        if self.gaussian_hz < 0 or self.n_nuclei < 0:
            raise ValueError("gaussian_hz and n_nuclei must be >= 0")

    @property
    def couplings(self) -> tuple[tuple[float, int], ...]:
        js = self.j_hz if isinstance(self.j_hz, tuple) else (self.j_hz,)
        ms = self.multiplicity if isinstance(self.multiplicity, tuple) else (self.multiplicity,)
        return tuple(zip((float(j) for j in js), (int(m) for m in ms)))

    def lines(self) -> tuple[np.ndarray, np.ndarray]:
        """Offsets from the centre (Hz) and relative intensities (summing to 1), shape (L,) each."""
        offsets = np.zeros(1)
        weights = np.ones(1)
        for j_hz, lines in self.couplings:
            k = np.arange(lines)
            split = (k - (lines - 1) / 2.0) * j_hz
            binomial = special.comb(lines - 1, k) / 2.0 ** (lines - 1)
            offsets = (offsets[:, None] + split[None, :]).ravel()
            weights = (weights[:, None] * binomial[None, :]).ravel()
        return offsets, weights

    @property
    def effective_gaussian_hz(self) -> float:
        return self.gaussian_hz if self.shape == "voigt" else 0.0


@dataclass(frozen=True)
class SpeciesSignals:
    """The multiplets of one species (e.g. all 1H signals of a reactant)."""

    species: str
    multiplets: tuple[Multiplet, ...]

    def __post_init__(self) -> None:
        object.__setattr__(self, "multiplets", tuple(self.multiplets))
        if not self.multiplets:
            raise ValueError(f"species {self.species!r} has no multiplets")


@dataclass(frozen=True)
class Acquisition:
    """How a spectrum is sampled.

    Attributes
    ----------
    observe_mhz : float, default 60.0
        Observe frequency (MHz).
    n_points : int, default 16384
        Complex points of the FID (and of a simulated spectrum).
    spectral_width_ppm : float, default 12.0
        Spectral width in ppm (SW in Hz = width * observe_mhz).
    carrier_ppm : float, default 5.0
        Shift at the centre of the spectrum.
    nucleus : str, default "1H"
    """

    observe_mhz: float = 60.0
    n_points: int = 16384
    spectral_width_ppm: float = 12.0
    carrier_ppm: float = 5.0
    nucleus: str = "1H"

    @property
    def spectral_width_hz(self) -> float:
        return self.spectral_width_ppm * self.observe_mhz

    @property
    def dwell_s(self) -> float:
        return 1.0 / self.spectral_width_hz

    def ppm_axis(self) -> np.ndarray:
        """The axis :func:`kinetics.processing.fft` gives for ``n_points``, shape (n,), decreasing."""
        n = self.n_points
        offset_hz = (np.arange(n) - n // 2) * (self.spectral_width_hz / n)
        return (self.carrier_ppm + offset_hz / self.observe_mhz)[::-1]


def line_list(
    spin_systems: Sequence[SpeciesSignals],
    concentrations: Mapping[str, float],
    amplitude_per_nucleus: float = 1.0,
    drift_ppm: float = 0.0,
    solvent: Multiplet | None = None,
) -> dict[str, np.ndarray]:
    """Every line as arrays: ``shift_ppm`` (centre shift of its multiplet, drift added),
    ``offset_hz`` (within the multiplet), ``amplitude``, ``width_hz``, ``gaussian_hz`` and
    ``is_solvent`` (bool), each shape (L,).  Species missing from ``concentrations`` count as 0."""
    rows = []
    entries = [(m, concentrations.get(s.species, 0.0), False) for s in spin_systems for m in s.multiplets]
    if solvent is not None:
        entries.append((solvent, 1.0, True))
    for multiplet, concentration, is_solvent in entries:
        offsets, weights = multiplet.lines()
        amplitude = multiplet.n_nuclei * float(concentration) * amplitude_per_nucleus * weights
        for offset, amp in zip(offsets, amplitude):
            rows.append((multiplet.shift_ppm + drift_ppm, offset, amp, multiplet.width_hz,
                         multiplet.effective_gaussian_hz, is_solvent))
    if not rows:
        raise ValueError("no lines to simulate")
    columns = list(zip(*rows))
    names = ("shift_ppm", "offset_hz", "amplitude", "width_hz", "gaussian_hz")
    lines = {name: np.asarray(col, float) for name, col in zip(names, columns)}
    lines["is_solvent"] = np.asarray(columns[5], bool)
    return lines


def _phase_error(acquisition: Acquisition, phase0_deg, phase1_deg, pivot_ppm):
    """(constant phase in rad, acquisition delay tau in s) that make the error phi(ppm) of the module docstring."""
    ppm_axis = acquisition.ppm_axis()
    width_ppm = ppm_axis[0] - ppm_axis[-1]
    pivot = ppm_axis[0] if pivot_ppm is None else pivot_ppm
    c = (pivot - acquisition.carrier_ppm) / width_ppm
    # phi(f) = p0 + p1 (c - f / SW_axis): the f-dependent part is a late start tau
    sw_axis_hz = width_ppm * acquisition.observe_mhz
    tau_s = phase1_deg / (360.0 * sw_axis_hz)
    return -math.radians(phase0_deg + phase1_deg * c), tau_s


def _spectrum_phase(acquisition: Acquisition, phase0_deg, phase1_deg, pivot_ppm) -> np.ndarray:
    ppm_axis = acquisition.ppm_axis()
    width_ppm = ppm_axis[0] - ppm_axis[-1]
    pivot = ppm_axis[0] if pivot_ppm is None else pivot_ppm
    return -np.deg2rad(phase0_deg + phase1_deg * (pivot - ppm_axis) / width_ppm)


def _fid_of_lines(lines, acquisition: Acquisition, phase0_rad: float = 0.0, tau_s: float = 0.0) -> np.ndarray:
    """Sampled ``s(tau + k dwell)`` of ``s(t) = sum a exp(i phase0) exp((2 pi i f - pi w) t) g(t)``."""
    t = np.arange(acquisition.n_points) * acquisition.dwell_s + tau_s  # for the Gaussian envelope
    freq_hz = (lines["shift_ppm"] - acquisition.carrier_ppm) * acquisition.observe_mhz + lines["offset_hz"]
    rate = 2j * math.pi * freq_hz - math.pi * lines["width_hz"]
    coefficient = lines["amplitude"] * np.exp(1j * phase0_rad)
    # lines sharing a Gaussian width share its envelope
    gaussian = lines["gaussian_hz"]
    data = np.zeros(t.size, complex)
    for g in np.unique(gaussian):
        chosen = np.flatnonzero(gaussian == g)
        part = _sum_of_exponentials(coefficient[chosen] * np.exp(rate[chosen] * tau_s),
                                    rate[chosen] * acquisition.dwell_s, t.size)
        if g > 0:
            part *= np.exp(-((math.pi * g * t) ** 2) / (4.0 * _LN2))
        data += part
    return data


def _sum_of_exponentials(coefficient: np.ndarray, rate_per_point: np.ndarray, n: int, block: int = 128) -> np.ndarray:
    """``x[k] = sum_j c_j exp(r_j k)`` for k < n, as a (n/block x L) @ (L x block) product.

    With ``k = q * block + r``: ``exp(r_j k) = exp(r_j block q) exp(r_j r)``, so only
    ``(n / block + block) * L`` exponentials are needed instead of ``n * L``.
    """
    rows = -(-n // block)
    coarse = np.exp(np.outer(np.arange(rows) * block, rate_per_point)) * coefficient  # (rows, L)
    fine = np.exp(np.outer(rate_per_point, np.arange(block)))  # (L, block)
    return (coarse @ fine).ravel()[:n]


def _band_limited_delay(data: np.ndarray, delay_points: float, beta: float = 8.0) -> np.ndarray:
    """Delay a one-sided FID by ``delay_points`` as a digital filter does.

    The filter is a causal, linear-phase FIR: a Kaiser-windowed sinc centred on the delay
    (taps ``0 .. 2 * delay``), so its pre-response is the rising edge before the delay and
    nothing is lost before the first sample.  Its gain is 1 within 1e-4 over the central
    80 % of the spectral width (measured) and falls off towards the edges, like a real
    receiver's.
    """
    data = np.array(data, copy=True)
    # the analogue signal steps up at t = 0; a band-limited sample there takes the
    # midpoint, s(0) / 2 (which is why filtered data need no first-point scaling)
    data[0] *= 0.5
    half = max(delay_points, 1.0)
    taps = np.arange(int(math.floor(2 * delay_points)) + 1)
    u = (taps - delay_points) / (half + 1.0)
    window = special.i0(beta * np.sqrt(np.clip(1.0 - u * u, 0.0, None))) / special.i0(beta)
    kernel = np.sinc(taps - delay_points) * window
    kernel /= kernel.sum()  # unit gain at the carrier
    from scipy.signal import fftconvolve

    return fftconvolve(data, kernel)[: data.size]


def _spectrum_of_lines(lines, acquisition: Acquisition) -> np.ndarray:
    """Complex analytic spectrum on ``acquisition.ppm_axis()`` scaled like the DFT of the FID."""
    ppm = acquisition.ppm_axis()
    axis_hz = (ppm - acquisition.carrier_ppm) * acquisition.observe_mhz
    freq_hz = (lines["shift_ppm"] - acquisition.carrier_ppm) * acquisition.observe_mhz + lines["offset_hz"]
    out = np.zeros(ppm.size, complex)
    scale = 1.0 / acquisition.dwell_s  # continuous transform / dwell = DFT
    for f, amp, w, g in zip(freq_hz, lines["amplitude"], lines["width_hz"], lines["gaussian_hz"]):
        # the integral of a x exp(i 2 pi f t - pi w t) exp(-i 2 pi nu t) over t >= 0
        b = math.pi * w + 2j * math.pi * (axis_hz - f)
        if g > 0:
            a = (math.pi * g) ** 2 / (4.0 * _LN2)
            shape = 0.5 * math.sqrt(math.pi / a) * special.wofz(1j * b / (2.0 * math.sqrt(a)))
        else:
            shape = 1.0 / b
        out += amp * shape * scale
    return out


def _baseline_roll(acquisition: Acquisition, amplitude: float) -> np.ndarray:
    """A smooth roll across the spectrum (shape (n,)), ``amplitude`` at its largest."""
    u = np.linspace(0.0, 1.0, acquisition.n_points)
    roll = 0.6 * np.cos(math.pi * u) + 0.4 * np.sin(2.0 * math.pi * u + 0.3)
    return amplitude * roll / np.max(np.abs(roll))


def _noise_free_height(lines, acquisition: Acquisition) -> float:
    species = {k: v[~lines["is_solvent"]] for k, v in lines.items()}
    if species["amplitude"].size == 0 or not np.any(species["amplitude"] > 0):
        return 0.0
    spectrum = _spectrum_of_lines(species, acquisition)
    return float(spectrum.real.max())


def _noise_sigma(lines, acquisition, snr, noise_sigma, reference_height):
    if noise_sigma is not None:
        return float(noise_sigma)
    if snr is None:
        return 0.0
    height = reference_height if reference_height is not None else _noise_free_height(lines, acquisition)
    if height <= 0:
        raise ValueError("snr needs a signal: every species amplitude is zero (give noise_sigma)")
    return height / float(snr)


def _record_kwargs(acquisition: Acquisition, acquired_utc, duration_s, n_scans, header):
    return dict(nucleus=acquisition.nucleus, observe_mhz=acquisition.observe_mhz,
                acquired_utc=acquired_utc, duration_s=duration_s, n_scans=n_scans,
                header=dict(header or {}))


def simulate_fid(
    spin_systems: Sequence[SpeciesSignals],
    concentrations: Mapping[str, float],
    rng: np.random.Generator,
    acquisition: Acquisition = Acquisition(),
    *,
    amplitude_per_nucleus: float = 1.0,
    snr: float | None = None,
    noise_sigma: float | None = None,
    snr_reference_height: float | None = None,
    phase0_deg: float = 0.0,
    phase1_deg: float = 0.0,
    pivot_ppm: float | None = None,
    baseline_roll: float = 0.0,
    drift_ppm: float = 0.0,
    solvent: Multiplet | None = None,
    group_delay_points: float = 0.0,
    declare_group_delay: bool = True,
    acquired_utc: datetime | None = None,
    duration_s: float | None = None,
    n_scans: int | None = None,
    header: Mapping[str, str] | None = None,
) -> Fid:
    """A FID of the given species at the given concentrations.

    Parameters
    ----------
    spin_systems : sequence of SpeciesSignals
    concentrations : mapping species -> float
        Concentration (any unit, e.g. mol/L); missing species are absent.
    rng : numpy.random.Generator
        Source of the noise.
    acquisition : Acquisition
        Observe frequency, points, spectral width, carrier.
    amplitude_per_nucleus : float, default 1.0
        FID amplitude of one nucleus at unit concentration.
    snr : float, optional
        Signal-to-noise as defined in the module docstring; ``noise_sigma`` (the
        standard deviation in the spectrum, per component) overrides it.  No noise when
        both are None.
    snr_reference_height : float, optional
        Height the SNR refers to (default: this FID's tallest species point); pass the
        first spectrum's height to keep the noise constant across a series.
    phase0_deg, phase1_deg, pivot_ppm : float
        Phase error (undone by ``processing.phase`` with the same numbers); pivot default
        the left edge.
    baseline_roll : float, default 0
        Amplitude of a smooth baseline roll as a fraction of the tallest species point.
    drift_ppm : float, default 0
        Field drift: every line moved by this much.
    solvent : Multiplet, optional
        A (large) solvent line; its ``n_nuclei`` is its amplitude at unit concentration.
    group_delay_points : float, default 0
        Digital-filter delay: the FID is delayed by this many points with a band-limited
        shift (:func:`_band_limited_delay`), giving the rising edge of a real receiver.
        When it is > 0 the first-order error is made the way such receivers make it, as
        an extra delay of ``-phase1_deg / 360`` points the record does not declare
        (keep ``group_delay_points`` >= about 16 so the pre-response lost before the
        first sample is negligible); when it is 0, by a late start (see module
        docstring).
    declare_group_delay : bool, default True
        Whether the returned record states the delay (False imitates a file that does not).
    acquired_utc, duration_s, n_scans, header
        Passed to the record.

    Returns
    -------
    Fid
        ``acquisition.n_points`` complex points.
    """
    lines = line_list(spin_systems, concentrations, amplitude_per_nucleus, drift_ppm, solvent)
    phase0_rad, tau_s = _phase_error(acquisition, phase0_deg, phase1_deg, pivot_ppm)
    n = acquisition.n_points
    if group_delay_points:
        # the first-order error joins the filter delay: phase(p1) undoes a delay of -p1/360
        total_delay = group_delay_points + tau_s * acquisition.spectral_width_hz * -1.0
        if total_delay < 0:
            raise ValueError("phase1_deg / 360 must not exceed group_delay_points")
        data = _band_limited_delay(_fid_of_lines(lines, acquisition, phase0_rad), total_delay)
    else:
        data = _fid_of_lines(lines, acquisition, phase0_rad, tau_s)
    height = None
    if baseline_roll or snr is not None:
        height = snr_reference_height if snr_reference_height is not None else _noise_free_height(lines, acquisition)
    if baseline_roll:
        # the inverse of processing.fft (first point halved, shifted, reversed), so the roll
        # appears exactly as drawn
        roll = _baseline_roll(acquisition, baseline_roll * height)[::-1]
        added = np.fft.ifft(np.fft.ifftshift(roll))
        added[0] *= 2.0
        data = data + added
    sigma = _noise_sigma(lines, acquisition, snr, noise_sigma, height)
    if sigma:
        scale = sigma / math.sqrt(n)
        data = data + scale * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    return Fid(
        data=data, dwell_s=acquisition.dwell_s, carrier_ppm=acquisition.carrier_ppm,
        group_delay_points=group_delay_points if declare_group_delay else 0.0,
        **_record_kwargs(acquisition, acquired_utc, duration_s, n_scans, header),
    )


def simulate_spectrum(
    spin_systems: Sequence[SpeciesSignals],
    concentrations: Mapping[str, float],
    rng: np.random.Generator,
    acquisition: Acquisition = Acquisition(),
    *,
    amplitude_per_nucleus: float = 1.0,
    snr: float | None = None,
    noise_sigma: float | None = None,
    snr_reference_height: float | None = None,
    phase0_deg: float = 0.0,
    phase1_deg: float = 0.0,
    pivot_ppm: float | None = None,
    baseline_roll: float = 0.0,
    drift_ppm: float = 0.0,
    solvent: Multiplet | None = None,
    acquired_utc: datetime | None = None,
    duration_s: float | None = None,
    n_scans: int | None = None,
    header: Mapping[str, str] | None = None,
) -> Spectrum:
    """An analytic spectrum (Lorentzian or Voigt lines, real and imaginary parts).

    Same parameters and scale as :func:`simulate_fid`: the result matches
    ``processing.fft(simulate_fid(...))`` without apodisation or zero-filling, up to the
    DFT's periodic wrap of the line tails.  Noise is added independently to real and
    imaginary parts with standard deviation ``sigma``.  Shape (``acquisition.n_points``,).
    """
    lines = line_list(spin_systems, concentrations, amplitude_per_nucleus, drift_ppm, solvent)
    values = _spectrum_of_lines(lines, acquisition)
    values = values * np.exp(1j * _spectrum_phase(acquisition, phase0_deg, phase1_deg, pivot_ppm))
    n = acquisition.n_points
    height = None
    if baseline_roll or snr is not None:
        height = snr_reference_height if snr_reference_height is not None else _noise_free_height(lines, acquisition)
    if baseline_roll:
        values = values + _baseline_roll(acquisition, baseline_roll * height)
    sigma = _noise_sigma(lines, acquisition, snr, noise_sigma, height)
    if sigma:
        values = values + sigma * (rng.standard_normal(n) + 1j * rng.standard_normal(n))
    return Spectrum(ppm=acquisition.ppm_axis(), real=values.real, imag=values.imag,
                    **_record_kwargs(acquisition, acquired_utc, duration_s, n_scans, header))


# ------------------------------------------------------------------ series on disk
def _file_name(index: int, kind: str, fmt: str) -> str:
    stem = "fid" if kind == "fid" else "spectrum"
    return f"{stem}_{index + 1:04d}.{'jdx' if fmt == 'jcamp' else 'csv'}"


def write_series(
    folder: str | Path,
    times_s: Sequence[float],
    concentrations: Mapping[str, Sequence[float]],
    spin_systems: Sequence[SpeciesSignals],
    rng: np.random.Generator,
    *,
    acquisition: Acquisition = Acquisition(),
    start_utc: datetime = datetime(2026, 1, 1, 9, 0, 0, tzinfo=timezone.utc),
    scan_duration_s: float = 30.0,
    n_scans: int = 8,
    format: str = "jcamp",
    kind: str = "spectrum",
    compression: str = "dif",
    snr: float | None = 200.0,
    phase0_deg: Sequence[float] | float = 0.0,
    phase1_deg: Sequence[float] | float = 0.0,
    drift_ppm: Sequence[float] | float = 0.0,
    baseline_roll: float = 0.0,
    solvent: Multiplet | None = None,
    amplitude_per_nucleus: float = 1.0,
    group_delay_points: float = 0.0,
    declare_group_delay: bool = True,
    title: str = "simulated reaction",
) -> Path:
    """Write a folder of spectra (or FIDs) as an instrument would, plus a manifest of the truth.

    Spectrum ``i`` is named ``spectrum_0001.jdx`` (``fid_0001.jdx``; ``.csv`` for CSV),
    starts at ``start_utc + times_s[i] - scan_duration_s / 2`` (so ``times_s`` are the
    acquisition *midpoints*, the moments the averaged spectrum represents) and lasts
    ``scan_duration_s``; both go into the file header (JCAMP-DX ``##LONG DATE``) via the
    record's ``acquired_utc`` and ``duration_s``.

    Parameters
    ----------
    folder : path
        Created if needed.
    times_s : sequence of float, shape (m,)
        Acquisition midpoints, seconds after ``start_utc`` (the reaction start).
    concentrations : mapping species -> sequence, each shape (m,)
        The truth, e.g. mol/L.
    spin_systems : sequence of SpeciesSignals
    rng : numpy.random.Generator
    acquisition : Acquisition, default 60 MHz, 16k points, 12 ppm
    start_utc : datetime (UTC), default 2026-01-01T09:00:00Z
    scan_duration_s : float, default 30 s
    n_scans : int, default 8
    format : {"jcamp", "csv"}, default "jcamp"
    kind : {"spectrum", "fid"}, default "spectrum" (FIDs only as JCAMP-DX)
    compression : str, default "dif"
        JCAMP-DX ordinate form, passed to the writer ("affn" or "dif").
    snr : float or None, default 200
        SNR of the first spectrum (module docstring); the noise sigma is then held
        constant across the series, as on a real instrument.
    phase0_deg, phase1_deg, drift_ppm : float or sequence of shape (m,)
        Per-spectrum phase errors and field drift.
    baseline_roll : float, default 0
        Roll amplitude as a fraction of the first spectrum's tallest point.
    solvent : Multiplet, optional
    amplitude_per_nucleus : float, default 1.0
    group_delay_points, declare_group_delay : float, bool
        Digital-filter delay of FIDs (see :func:`simulate_fid`); ignored for spectra.
    title : str
        JCAMP-DX ``##TITLE`` prefix.

    Returns
    -------
    Path
        The manifest ``truth.json`` (also ``truth.csv``: one row per file).
    """
    if format not in ("jcamp", "csv"):
        raise ValueError(f"format must be 'jcamp' or 'csv', got {format!r}")
    if kind not in ("spectrum", "fid"):
        raise ValueError(f"kind must be 'spectrum' or 'fid', got {kind!r}")
    if kind == "fid" and format != "jcamp":
        raise ValueError("FIDs are written as JCAMP-DX only")
    times = np.asarray(times_s, float)
    m = times.size
    curves = {name: np.broadcast_to(np.asarray(values, float), (m,)) for name, values in concentrations.items()}
    p0 = np.broadcast_to(np.asarray(phase0_deg, float), (m,))
    p1 = np.broadcast_to(np.asarray(phase1_deg, float), (m,))
    drift = np.broadcast_to(np.asarray(drift_ppm, float), (m,))
    folder = Path(folder)
    with guard_output(folder):
        folder.mkdir(parents=True, exist_ok=True)
    writer = _writer(format, kind, compression)

    first = {name: float(curve[0]) for name, curve in curves.items()}
    reference_height = _noise_free_height(
        line_list(spin_systems, first, amplitude_per_nucleus), acquisition)
    if snr is not None and reference_height <= 0:
        raise ValueError("the first spectrum has no signal to define the SNR against")
    sigma = None if snr is None else reference_height / snr
    if kind == "fid":
        def simulate(*args, **kwargs):
            return simulate_fid(*args, group_delay_points=group_delay_points,
                                declare_group_delay=declare_group_delay, **kwargs)
    else:
        simulate = simulate_spectrum
    rows = []
    for i in range(m):
        acquired = start_utc + timedelta(seconds=float(times[i]) - scan_duration_s / 2.0)
        name = _file_name(i, kind, format)
        record = simulate(
            spin_systems, {k: float(v[i]) for k, v in curves.items()}, rng, acquisition,
            amplitude_per_nucleus=amplitude_per_nucleus, noise_sigma=sigma,
            snr_reference_height=reference_height, phase0_deg=float(p0[i]),
            phase1_deg=float(p1[i]), baseline_roll=baseline_roll, drift_ppm=float(drift[i]),
            solvent=solvent, acquired_utc=acquired, duration_s=scan_duration_s,
            n_scans=n_scans, header={"TITLE": f"{title} {i + 1}"},
        )
        writer(folder / name, record)
        rows.append({
            "file": name, "acquired_utc": acquired.isoformat().replace("+00:00", "Z"),
            "time_mid_s": float(times[i]), "duration_s": scan_duration_s,
            "phase0_deg": float(p0[i]), "phase1_deg": float(p1[i]), "drift_ppm": float(drift[i]),
            **{f"concentration.{k}": float(v[i]) for k, v in curves.items()},
        })
    manifest = {
        "start_utc": start_utc.isoformat().replace("+00:00", "Z"),
        "observe_mhz": acquisition.observe_mhz, "n_points": acquisition.n_points,
        "spectral_width_ppm": acquisition.spectral_width_ppm, "carrier_ppm": acquisition.carrier_ppm,
        "nucleus": acquisition.nucleus, "kind": kind, "format": format,
        "snr_first_spectrum": snr, "noise_sigma": sigma, "baseline_roll": baseline_roll,
        "group_delay_points": group_delay_points if kind == "fid" else 0.0,
        "group_delay_declared": bool(declare_group_delay),
        "amplitude_per_nucleus": amplitude_per_nucleus,
        "time_convention": "time_mid_s = acquisition midpoint, seconds after start_utc",
        "species": [_species_dict(s) for s in spin_systems],
        "solvent": None if solvent is None else _multiplet_dict(solvent),
        "files": rows,
    }
    path = folder / "truth.json"
    write_atomic(path, json.dumps(manifest, indent=2) + "\n")
    table = io.StringIO(newline="")
    out = csv.DictWriter(table, fieldnames=list(rows[0]))
    out.writeheader()
    out.writerows(rows)
    write_atomic(folder / "truth.csv", table.getvalue())
    return path


def _multiplet_dict(multiplet: Multiplet) -> dict:
    return {"shift_ppm": multiplet.shift_ppm, "n_nuclei": multiplet.n_nuclei,
            "couplings": [{"j_hz": j, "multiplicity": n} for j, n in multiplet.couplings],
            "width_hz": multiplet.width_hz, "shape": multiplet.shape, "gaussian_hz": multiplet.gaussian_hz}


def _species_dict(signals: SpeciesSignals) -> dict:
    return {"species": signals.species, "multiplets": [_multiplet_dict(m) for m in signals.multiplets]}


def _writer(format: str, kind: str, compression: str):
    if format == "csv":
        from kinetics.spectra.delimited import write_csv

        return write_csv
    from kinetics.spectra import jcampdx

    if kind == "fid":
        return lambda path, record: jcampdx.write_fid(path, record, compression=compression)
    return lambda path, record: jcampdx.write_spectrum(path, record, compression=compression)
