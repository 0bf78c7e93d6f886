"""Region integrals: truncation, noise calibration, real spectra, drift tracking."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from kinetics import lineshapes, processing, simulate as sim
from kinetics.series import integrate_file
from kinetics.signals import estimate_noise, integrate_region, track
from kinetics.spectra.spectrum import Spectrum

DATA = Path(__file__).parent / "data"


def _lorentzian_spectrum(centre_ppm=5.0, fwhm_hz=1.0, mhz=60.0, n=65536, area=1.0):
    ppm = np.linspace(12.0, -2.0, n)
    return Spectrum(ppm=ppm, real=lineshapes.lorentzian(ppm, area, centre_ppm, fwhm_hz / mhz), observe_mhz=mhz)


@pytest.mark.parametrize("m", [1.0, 3.0, 10.0, 40.0])
def test_truncated_lorentzian_holds_two_over_pi_arctan_m(m):
    # Analytic: a window of +/- m half-widths holds (2/pi) arctan(m) of the area.
    spectrum = _lorentzian_spectrum()
    half_ppm = 0.5 / 60.0
    noise = estimate_noise(spectrum.replace(real=spectrum.real + np.random.default_rng(0).normal(0, 1e-6, 65536)),
                           (9.0, 11.0))
    window = (5.0 - m * half_ppm, 5.0 + m * half_ppm)
    result = integrate_region(spectrum, window, noise, baseline="processed", width_hz=1.0)
    expected = 2.0 / math.pi * math.atan(m)
    assert result.integral == pytest.approx(expected, rel=2e-3)
    assert result.truncation_loss == pytest.approx(1.0 - expected, abs=2e-3)


def test_reported_loss_includes_the_edge_baseline():
    # The edge baseline removes the tail level inside the window too: the loss the tool
    # reports must match what the integral actually misses (analytic truth: area 1).
    spectrum = _lorentzian_spectrum()
    noise = estimate_noise(spectrum.replace(real=spectrum.real + np.random.default_rng(1).normal(0, 1e-6, 65536)),
                           (9.0, 11.0))
    result = integrate_region(spectrum, (4.9, 5.1), noise, baseline="edges")
    assert 1.0 - result.integral == pytest.approx(result.truncation_loss, abs=3e-3)
    assert result.truncation_loss > 1.0 - 2.0 / math.pi * math.atan(6.0)  # more than the bare window loses


def _noisy_series(draws: int, rng, line_broadening_hz: float, zero_fill: int | None):
    """Seeded FIDs of one singlet, processed by the project's own steps (truth: the test's)."""
    acq = sim.Acquisition(observe_mhz=60.0, n_points=4096, spectral_width_ppm=10.0, carrier_ppm=5.0)
    system = [sim.SpeciesSignals("X", (sim.Multiplet(6.0, 1.0, width_hz=1.0),))]
    out = []
    for _ in range(draws):
        fid = sim.simulate_fid(system, {"X": 1.0}, rng, acq, snr=100.0)
        fid = processing.apodize_exponential(fid, line_broadening_hz)
        if zero_fill:
            fid = processing.zero_fill(fid, zero_fill)
        out.append(processing.fft(fid))
    return out


@pytest.mark.slow
@pytest.mark.parametrize("lb_hz,zero_fill", [(0.0, None), (1.0, 16384)])
def test_integral_sigma_matches_empirical_scatter(lb_hz, zero_fill):
    # Calibration over 200 seeded noise draws; the apodised, 4x zero-filled case is where
    # the correlation between points matters (the white-noise sigma*dx*sqrt(n) is ~15x too small).
    rng = np.random.default_rng(20261201)
    spectra = _noisy_series(200, rng, lb_hz, zero_fill)
    values, sigmas, naive = [], [], []
    for spectrum in spectra:
        noise = estimate_noise(spectrum, [(8.0, 9.8), (0.2, 4.0)])
        result = integrate_region(spectrum, (5.6, 6.4), noise)
        values.append(result.integral)
        sigmas.append(result.sigma)
        n = int(np.sum((spectrum.ppm >= 5.6) & (spectrum.ppm <= 6.4)))
        naive.append(noise.sigma * spectrum.spacing_ppm * math.sqrt(n))
    empirical = np.std(values, ddof=1)
    assert np.mean(sigmas) == pytest.approx(empirical, rel=0.15)
    if lb_hz:
        assert np.mean(naive) < 0.6 * empirical  # the white-noise formula would be badly wrong


# ethyl crotonate / butyl acrylate groups: tests/data/README.md (windows, proton counts
# from the structures; open dataset cheminfo nmr-dataset1).
GROUPS = {
    "ethyl-crotonate.1h.dx": [(6.80, 7.02, 1), (5.66, 5.86, 1), (4.00, 4.20, 2), (1.74, 1.86, 3), (1.13, 1.27, 3)],
    "ethyl-crotonate.1h.fid.dx": [(6.80, 7.02, 1), (5.66, 5.86, 1), (4.00, 4.20, 2), (1.74, 1.86, 3),
                                  (1.13, 1.27, 3)],
    "butyl-acrylate.1h.dx": [(6.25, 6.40, 1), (5.95, 6.12, 1), (5.68, 5.80, 1), (4.02, 4.16, 2), (1.52, 1.66, 2),
                             (1.26, 1.42, 2), (0.82, 0.94, 3)],
}


@pytest.mark.parametrize("name", sorted(GROUPS))
def test_real_spectra_integral_per_nucleus_agrees_within_3_percent(name):
    # Real spectra (cheminfo nmr-dataset1, MIT): the integral per proton of every group
    # lies within 3 % of the mean.  Edge baseline plus a zero-order phase local to each
    # window (the acrylate =CH-CO window is ~16 degrees out of absorption in the file).
    regions = [(f"g{i}", (lo, hi), n) for i, (lo, hi, n) in enumerate(GROUPS[name])]
    info = integrate_file(DATA / name, regions, local_phase=True)
    per = np.array([r["per_nucleus"] for r in info["regions"]])
    assert np.all(np.abs(per / per.mean() - 1.0) < 0.03), per / per.mean()
    assert all(r["sigma"] > 0 for r in info["regions"])


def test_drift_tracking_follows_and_flags():
    # Simulated singlet (truth set here) drifting by 0.03 ppm: the window follows it and
    # reports the shift; 0.12 ppm with a 0.05 ppm tolerance is flagged, not lost.
    rng = np.random.default_rng(5)
    acq = sim.Acquisition(observe_mhz=60.0, n_points=16384, spectral_width_ppm=12.0, carrier_ppm=5.0)
    system = [sim.SpeciesSignals("X", (sim.Multiplet(3.0, 3.0, width_hz=1.0),))]
    ref = sim.simulate_spectrum(system, {"X": 1.0}, rng, acq, snr=200.0)
    noise = estimate_noise(ref, (9.0, 10.5))
    window = (2.9, 3.1)
    base = integrate_region(ref, window, noise).integral
    centroid = 3.0
    moved = sim.simulate_spectrum(system, {"X": 1.0}, rng, acq, snr=200.0, drift_ppm=0.03)
    followed = track(moved, window, centroid, tolerance_ppm=0.05)
    assert followed.shift_ppm == pytest.approx(0.03, abs=0.002)
    assert not followed.left_window
    assert integrate_region(moved, followed.window_ppm, noise).integral == pytest.approx(base, rel=0.01)
    fixed = integrate_region(moved, window, noise).integral
    assert fixed < 0.97 * base  # without tracking the drift costs area
    beyond = sim.simulate_spectrum(system, {"X": 1.0}, rng, acq, snr=200.0, drift_ppm=0.08)
    flagged = track(beyond, window, centroid, tolerance_ppm=0.05)
    assert flagged.left_window
    assert flagged.shift_ppm == pytest.approx(0.05)  # followed as far as allowed
    gone = sim.simulate_spectrum(system, {"X": 1.0}, rng, acq, snr=200.0, drift_ppm=0.15)
    assert track(gone, window, centroid, tolerance_ppm=0.05).left_window
