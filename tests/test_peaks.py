"""The shared noise and peak primitives (kinetics.spectra.peaks).

References: numpy (polyfit, std), scipy.signal.find_peaks, analytic vertices of sampled
parabolas and Lorentzians, and Gaussian noise whose sigma the test sets (fixed seeds,
bands)."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.signal import find_peaks

from kinetics.spectra import peaks


def test_difference_sigma_recovers_white_noise_under_lines_and_a_baseline():
    rng = np.random.default_rng(1)
    x = np.arange(8192, dtype=float)
    lines = sum(h / (1 + ((x - c) / 3.0) ** 2) for c, h in [(1000, 500.0), (4000, 2000.0), (6000, 800.0)])
    values = lines + 1e-3 * (x - 4000) + rng.normal(0, 2.0, x.size)
    assert peaks.difference_sigma(values) == pytest.approx(2.0, rel=0.05)


def test_complex_values_pool_both_parts_and_a_mask_limits_the_pairs():
    rng = np.random.default_rng(2)
    values = rng.normal(0, 3.0, 4000) + 1j * rng.normal(0, 3.0, 4000)
    assert peaks.difference_sigma(values) == pytest.approx(3.0, rel=0.05)
    where = np.zeros(4000, bool)
    where[:2000] = True
    values[2000:] *= 100.0  # only the masked-in half counts
    assert peaks.difference_sigma(values, where=where) == pytest.approx(3.0, rel=0.07)


def test_quantised_data_fall_back_on_the_mean_deviation():
    values = np.zeros(100)
    values[::10] = 1.0  # MAD of the differences is 0
    assert peaks.difference_sigma(values, quantised_fallback=False) == 0.0
    assert peaks.difference_sigma(values) > 0.0


def test_detrended_sigma_equals_numpy_after_a_polynomial_fit():
    rng = np.random.default_rng(3)
    x = np.linspace(-1, 1, 300)
    values = 5 + 2 * x - 3 * x * x + rng.normal(0, 0.7, x.size)
    for order in (1, 2):
        residual = values - np.polyval(np.polyfit(x, values, order), x)
        assert peaks.detrended_sigma(values, order) == pytest.approx(np.std(residual, ddof=order + 1), rel=1e-10)


def test_parabolic_offset_is_the_vertex_of_a_sampled_parabola():
    # y = -(x - 0.3)^2 sampled at -1, 0, 1: vertex 0.3 (analytic)
    y = [-(k - 0.3) ** 2 for k in (-1, 0, 1)]
    assert peaks.parabolic_offset(*y) == pytest.approx(0.3)
    assert peaks.parabolic_offset(1.0, 0.0, 1.0) == 0.0  # a minimum: no offset
    values = np.array([0.0, *y, 0.0])
    assert peaks.parabolic_offsets(values, [2])[0] == pytest.approx(0.3)
    assert peaks.parabolic_offsets(values, [0, 4]).tolist() == [0.0, 0.0]


def test_pick_peaks_agrees_with_find_peaks_and_locates_lorentzians():
    rng = np.random.default_rng(4)
    x = np.arange(4000, dtype=float)
    centres = [500.3, 1800.7, 3200.45]
    values = sum(100.0 / (1 + ((x - c) / 4.0) ** 2) for c in centres) + rng.normal(0, 0.5, x.size)
    found = peaks.pick_peaks(values, height=10.0, prominence=10.0, widths=True)
    reference, _ = find_peaks(values, height=10.0, prominence=10.0)
    assert found.index.tolist() == reference.tolist()
    assert np.allclose(found.position, centres, atol=0.1)
    assert np.allclose(found.width_points, 8.0, rtol=0.05)  # FWHM of a Lorentzian of HWHM 4
    assert found.index[found.tallest(1)[0]] == reference[np.argmax(values[reference])]
    above = peaks.pick_peaks(values - 50.0, level=-50.0, height=10.0, prominence=10.0)
    assert above.index.tolist() == reference.tolist()


def test_bad_input_is_refused():
    with pytest.raises(ValueError):
        peaks.difference_sigma(np.ones((3, 3)))
    with pytest.raises(ValueError):
        peaks.difference_sigma(np.ones(5), lag=0)
    with pytest.raises(ValueError):
        peaks.pick_peaks(np.array([0.0, np.nan, 1.0]))
