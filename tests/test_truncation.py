"""Truncation loss of region integrals: predicted against the analytic Lorentzian integral.

Truth in these tests is set by the simulations (noise-free first-order multiplets with
Lorentzian lines) and by the Lorentzian integral (analytic): a line of HWHM g at x0 has
(1/pi)(atan((b - x0)/g) - atan((a - x0)/g)) of its area inside [a, b].
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from kinetics import demo, simulate as sim
from kinetics.config import signals_from_list
from kinetics.errors import ConfigError
from kinetics.signals import (LineShape, NoiseEstimate, estimate_noise, integrate_region,
                              window_captured_fraction)

MHZ = 60.0
ACQ = sim.Acquisition(observe_mhz=MHZ, n_points=4096, spectral_width_ppm=12.0, carrier_ppm=4.5)
CENTRE_PPM = 5.0
#: A noise level far below the signal, for noise-free spectra (the thresholds scale with it).
QUIET = NoiseEstimate(sigma=1e-9, autocorrelation=np.array([1.0]), region_ppm=(), n_points=1)


def _true_area(n_nuclei: float, amplitude: float = 1.0) -> float:
    # simulate.py docstring: a Lorentzian of amplitude a has height a / (pi w dwell); its
    # area in Hz is height * pi w / 2 = a / (2 dwell), in ppm divide by the observe MHz.
    return n_nuclei * amplitude / (2.0 * ACQ.dwell_s * MHZ)


def _multiplet_spectrum(n_lines: int, j_hz: float, width_hz: float, rng=None, snr=None):
    m = sim.Multiplet(CENTRE_PPM, 2.0, j_hz=j_hz, multiplicity=n_lines, width_hz=width_hz)
    return sim.simulate_spectrum([sim.SpeciesSignals("X", (m,))], {"X": 1.0},
                                 rng if rng is not None else np.random.default_rng(0), ACQ, snr=snr)


def _window(n_lines: int, j_hz: float, width_hz: float, half_widths: float):
    """Window reaching ``half_widths`` half-widths beyond the outer lines."""
    half_ppm = (0.5 * (n_lines - 1) * j_hz + half_widths * 0.5 * width_hz) / MHZ
    return CENTRE_PPM - half_ppm, CENTRE_PPM + half_ppm


def _analytic_captured(spectrum, window, n_lines, j_hz, width_hz, baseline):
    """The Lorentzian integral (analytic) over the span the rectangle rule covers, minus the
    edge line (mean heights of the two edge windows, integrated over the window)."""
    inside = np.flatnonzero((spectrum.ppm >= window[0]) & (spectrum.ppm <= window[1]))
    dx = spectrum.spacing_ppm
    lo, hi = spectrum.ppm[inside].min() - dx / 2, spectrum.ppm[inside].max() + dx / 2
    g = 0.5 * width_hz / MHZ
    offsets = (np.arange(n_lines) - 0.5 * (n_lines - 1)) * j_hz / MHZ
    weights = np.array([math.comb(n_lines - 1, k) for k in range(n_lines)]) / 2 ** (n_lines - 1)

    def area(u, v):
        return sum(w * (math.atan((v - c) / g) - math.atan((u - c) / g)) / math.pi
                   for w, c in zip(weights, CENTRE_PPM + offsets))

    captured = area(lo, hi)
    if baseline == "edges":
        e = max(3, int(round(0.1 * inside.size))) * dx
        captured -= (hi - lo) / (2 * e) * (area(lo, lo + e) + area(hi - e, hi))
    return captured


CASES = [(1, 0.0, 1.0), (1, 0.0, 2.5), (2, 7.0, 1.0), (2, 7.0, 2.5), (3, 7.0, 1.0), (3, 7.0, 2.5),
         (4, 7.0, 1.0), (4, 7.0, 2.5), (3, 2.5, 1.0)]


@pytest.mark.parametrize("baseline", ["edges", "processed"])
@pytest.mark.parametrize("n_lines,j_hz,width_hz", CASES)
def test_predicted_loss_matches_the_lorentzian_integral(n_lines, j_hz, width_hz, baseline):
    # Noise-free simulated n+1 multiplets (truth set here), windows +/-3..20 half-widths
    # beyond the outer lines: the integral misses what the Lorentzian integral (analytic)
    # says, and the predicted loss, with and without the line shape, agrees within 0.01.
    spectrum = _multiplet_spectrum(n_lines, j_hz, width_hz)
    shape = LineShape(n_lines=n_lines, coupling_hz=j_hz, profile="lorentzian", width_hz=width_hz)
    for half_widths in (3, 5, 10, 20):
        window = _window(n_lines, j_hz, width_hz, half_widths)
        plain = integrate_region(spectrum, window, QUIET, baseline=baseline)
        actual = 1.0 - plain.integral / _true_area(2.0)
        analytic = 1.0 - _analytic_captured(spectrum, window, n_lines, j_hz, width_hz, baseline)
        # the data are point samples: 3-point edge windows on a line's flank average its
        # height to ~0.004 of the area (rectangle rule), elsewhere far better
        assert actual == pytest.approx(analytic, abs=5e-3), half_widths
        modelled = integrate_region(spectrum, window, QUIET, baseline=baseline, lineshape=shape)
        for result in (plain, modelled):
            if actual >= 1.0:  # the edge windows sit on the lines: no meaningful loss
                assert math.isnan(result.truncation_loss) and "outside [0, 1)" in result.truncation_note
            else:
                assert result.truncation_loss == pytest.approx(actual, abs=0.01), (half_widths, result)
                assert 0.0 <= result.truncation_loss < 1.0


@pytest.mark.parametrize("m", [2.0, 5.0, 20.0])
def test_centred_singlet_two_over_pi_arctan_m_without_a_given_width(m):
    # Analytic: +/- m half-widths hold (2/pi) arctan(m); with the edge baseline the line
    # through the edge windows' mean heights (Lorentzian integral over each edge window)
    # is also lost.  The width is measured from the data here.
    spectrum = _multiplet_spectrum(1, 0.0, 2.0)
    window = _window(1, 0.0, 2.0, m)
    inside = np.flatnonzero((spectrum.ppm >= window[0]) & (spectrum.ppm <= window[1]))
    dx = spectrum.spacing_ppm
    m_eff = (0.5 * inside.size * dx) / (1.0 / MHZ)  # the span the points cover, in half-widths
    processed = integrate_region(spectrum, window, QUIET, baseline="processed")
    assert processed.truncation_loss == pytest.approx(1.0 - 2.0 / math.pi * math.atan(m_eff), abs=2e-3)
    e = max(3, int(round(0.1 * inside.size))) / (0.5 * inside.size)  # edge width / half window
    edge_share = (math.atan(m_eff) - math.atan(m_eff * (1 - e))) / math.pi  # one edge window
    expected = 2.0 / math.pi * math.atan(m_eff) - (2 * m_eff) / (2 * e * m_eff) * 2 * edge_share
    edges = integrate_region(spectrum, window, QUIET, baseline="edges")
    assert edges.truncation_loss == pytest.approx(1.0 - expected, abs=2e-3)


def test_formula_reproduces_two_over_pi_arctan_m():
    # Analytic: window_captured_fraction of one centred Lorentzian over +/- m half-widths.
    for m in (1.0, 3.0, 10.0, 40.0):
        assert window_captured_fraction(-m, m, [0.0], [1.0], fwhm_ppm=2.0) == pytest.approx(
            2.0 / math.pi * math.atan(m), rel=1e-12)


def test_demo_ester_triplet_loss_is_the_real_one():
    # The lead's case: the demo's O-CH2 triplet (4.05 ppm, J 6.8 Hz, 1.2 Hz lines, 2 H at
    # 0.4 mol/L, 1e4 per nucleus) integrated over 3.88-4.22 with the edge baseline.
    s = sim.simulate_spectrum(demo.SPIN_SYSTEMS, {"ester": 0.4, "standard": 0.05}, np.random.default_rng(1),
                              demo.ACQUISITION, amplitude_per_nucleus=1e4)
    true = 2 * 0.4 * 1e4 / (2.0 * demo.ACQUISITION.dwell_s * demo.ACQUISITION.observe_mhz)
    for window, area in (((3.88, 4.22), true), ((6.1, 6.3), true * 6 * 0.05 / (2 * 0.4))):
        result = integrate_region(s, window, QUIET)
        assert result.truncation_loss == pytest.approx(1.0 - result.integral / area, abs=0.01)


def test_noisy_triplets_give_bounded_estimates_near_the_truth():
    # Seeded noise at SNR 50 (1 sigma): every estimate lies in [0, 1) and within 0.02 of the
    # noise-free loss (the scatter measured is ~0.003).
    window = _window(3, 6.8, 1.2, 10)
    free = integrate_region(_multiplet_spectrum(3, 6.8, 1.2), window, QUIET)
    truth = 1.0 - free.integral / _true_area(2.0)
    rng = np.random.default_rng(7)
    for _ in range(10):
        s = _multiplet_spectrum(3, 6.8, 1.2, rng=rng, snr=50.0)
        result = integrate_region(s, window, estimate_noise(s, [(8.0, 10.0), (0.0, 2.0)]))
        assert 0.0 <= result.truncation_loss < 1.0, result.truncation_note
        assert result.truncation_loss == pytest.approx(truth, abs=0.02)


def test_unreliable_estimates_are_nan_with_a_reason():
    window = _window(1, 0.0, 1.0, 10)
    # noise only: no clear peak
    rng = np.random.default_rng(3)
    empty = sim.simulate_spectrum([sim.SpeciesSignals("X", (sim.Multiplet(1.0, 1.0),))], {"X": 1.0}, rng, ACQ,
                                  snr=100.0)
    noise = estimate_noise(empty, [(8.0, 10.0)])
    result = integrate_region(empty, window, noise)
    assert math.isnan(result.truncation_loss) and "no clear peak" in result.truncation_note
    # a weak line (SNR 8, below the 20 sigma needed)
    weak = _multiplet_spectrum(1, 0.0, 1.0, rng=rng, snr=8.0)
    result = integrate_region(weak, window, estimate_noise(weak, [(8.0, 10.0)]))
    assert math.isnan(result.truncation_loss) and "no clear peak" in result.truncation_note
    # Gaussian lines are not Lorentzian: the model's misfit is reported, not a number
    gauss = sim.simulate_spectrum([sim.SpeciesSignals("X", (sim.Multiplet(CENTRE_PPM, 2.0, width_hz=0.05,
                                                                          gaussian_hz=2.0, shape="voigt"),))],
                                  {"X": 1.0}, rng, ACQ)
    result = integrate_region(gauss, _window(1, 0.0, 2.0, 10), QUIET)
    assert math.isnan(result.truncation_loss) and "misfit" in result.truncation_note
    # a triplet with J equal to the line width merges into one hump
    merged = _multiplet_spectrum(3, 2.5, 2.5)
    result = integrate_region(merged, _window(3, 2.5, 2.5, 10), QUIET)
    assert math.isnan(result.truncation_loss) and "misfit" in result.truncation_note
    # a given line shape that is not the signal's (a singlet declared for a triplet)
    wrong = integrate_region(_multiplet_spectrum(3, 7.0, 1.0), _window(3, 7.0, 1.0, 10), QUIET,
                             lineshape=LineShape(n_lines=1, width_hz=1.0))
    assert math.isnan(wrong.truncation_loss) and "given line shape" in wrong.truncation_note
    # ... and the merged triplet is resolved when its line shape is given
    shape = LineShape(n_lines=3, coupling_hz=2.5, width_hz=2.5)
    result = integrate_region(merged, _window(3, 2.5, 2.5, 10), QUIET, lineshape=shape)
    assert np.isfinite(result.truncation_loss)


def test_correct_truncation_restores_the_true_area():
    # Truth: the simulated quartet's area (simulate.py scale); the correction divides the
    # integral and its sigma by (1 - loss) only when asked, and never with a NaN loss.
    spectrum = _multiplet_spectrum(4, 7.0, 1.0)
    window = _window(4, 7.0, 1.0, 10)
    plain = integrate_region(spectrum, window, QUIET)
    fixed = integrate_region(spectrum, window, QUIET, correct_truncation=True)
    assert not plain.truncation_corrected and fixed.truncation_corrected
    assert plain.integral < 0.9 * _true_area(2.0)
    assert fixed.integral == pytest.approx(_true_area(2.0), rel=0.005)
    assert fixed.sigma == pytest.approx(plain.sigma / (1.0 - plain.truncation_loss), rel=1e-12)
    merged = _multiplet_spectrum(3, 2.5, 2.5)
    unfixed = integrate_region(merged, _window(3, 2.5, 2.5, 10), QUIET, correct_truncation=True)
    assert not unfixed.truncation_corrected
    assert unfixed.integral == integrate_region(merged, _window(3, 2.5, 2.5, 10), QUIET).integral


def test_correct_truncation_config_key():
    base = {"name": "a", "window_ppm": [1.0, 2.0], "nuclei": 1}
    assert signals_from_list([base])[0].correct_truncation is False
    assert signals_from_list([{**base, "correct_truncation": True}])[0].correct_truncation is True
    with pytest.raises(ConfigError) as error:
        signals_from_list([{**base, "correct_truncation": "yes"}])
    assert error.value.key == "signals[0].correct_truncation"
    with pytest.raises(ConfigError) as error:
        signals_from_list([{**base, "correct_truncation": True, "method": "fit",
                            "lineshape": {"multiplicity": "singlet"}}])
    assert error.value.key == "signals[0].correct_truncation"


@pytest.mark.parametrize("profile,width_hz,gauss_hz", [("voigt", 0.6, 1.5), ("gaussian", 2.0, 0.0)])
def test_given_voigt_or_gaussian_lineshape(profile, width_hz, gauss_hz):
    # Simulated Voigt triplets (truth: simulate.py's exact Voigt lines, a Gaussian being a
    # Voigt with a negligible Lorentzian part): the loss of the given line shape's model
    # (Gaussian CDF erf, Voigt integrated numerically) matches the integral's.
    lorentz, gauss = (width_hz, gauss_hz) if profile == "voigt" else (0.001, width_hz)
    m = sim.Multiplet(CENTRE_PPM, 2.0, j_hz=7.0, multiplicity=3, width_hz=lorentz, gaussian_hz=gauss,
                      shape="voigt")
    spectrum = sim.simulate_spectrum([sim.SpeciesSignals("X", (m,))], {"X": 1.0}, np.random.default_rng(0), ACQ)
    shape = LineShape(n_lines=3, coupling_hz=7.0, profile=profile, width_hz=width_hz, gauss_width_hz=gauss_hz)
    for extra_hz in (4.0, 8.0):
        window = (CENTRE_PPM - (7.0 + extra_hz) / MHZ, CENTRE_PPM + (7.0 + extra_hz) / MHZ)
        for baseline in ("edges", "processed"):
            result = integrate_region(spectrum, window, QUIET, baseline=baseline, lineshape=shape)
            actual = 1.0 - result.integral / _true_area(2.0)
            assert result.truncation_loss == pytest.approx(actual, abs=0.005), (extra_hz, baseline)
