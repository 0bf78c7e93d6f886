"""Concentrations, uncertainty propagation, saturation, conversion, mass balance."""

from __future__ import annotations

import math

import numpy as np
import pytest

from kinetics import quantify, simulate as sim
from kinetics.signals import estimate_noise, integrate_region


def test_saturation_factor_at_five_t1_is_99_33_percent():
    # Formula (Ernst steady state): 90 degrees, TR = 5 T1 -> 1 - e^-5 = 0.99326
    # (TR >= 5 T1: common practice for quantitative spectra).
    assert quantify.saturation_factor(2.0, 10.0, 90.0) == pytest.approx(1.0 - math.exp(-5.0), rel=1e-12)
    assert quantify.saturation_factor(2.0, 10.0, 90.0) == pytest.approx(0.9933, abs=1e-4)
    # small flip angles saturate less: Ernst angle cos(a) = E1 gives the optimum
    e1 = math.exp(-1.0)
    ernst = math.degrees(math.acos(e1))
    f = quantify.saturation_factor(1.0, 1.0, ernst)
    assert f == pytest.approx((1 - e1) / (1 - e1 * e1), rel=1e-12)
    assert quantify.saturation_warning("A", 2.0, 9.9) is not None
    assert quantify.saturation_warning("A", 2.0, 10.0) is None


def test_correcting_simulated_saturated_integrals_restores_them():
    # Simulated truth: two singlets of equal concentration and nuclei, T1 = 1 s and 4 s,
    # recorded with 90 degree pulses every 3 s; each line is scaled by its steady-state
    # factor before noise is added.  Corrected integrals agree within 0.5 %.
    rng = np.random.default_rng(11)
    acq = sim.Acquisition(observe_mhz=60.0, n_points=16384, spectral_width_ppm=12.0, carrier_ppm=5.0)
    t1 = {"fast": 1.0, "slow": 4.0}
    tr = 3.0
    factors = {k: quantify.saturation_factor(v, tr, 90.0) for k, v in t1.items()}
    systems = [sim.SpeciesSignals("fast", (sim.Multiplet(2.0, 3.0, width_hz=1.0),)),
               sim.SpeciesSignals("slow", (sim.Multiplet(4.0, 3.0, width_hz=1.0),))]
    spectrum = sim.simulate_spectrum(systems, {"fast": factors["fast"], "slow": factors["slow"]}, rng, acq,
                                     snr=2000.0)
    noise = estimate_noise(spectrum, (9.0, 10.5))
    raw = {k: integrate_region(spectrum, (c - 0.2, c + 0.2), noise).integral for k, c in (("fast", 2.0), ("slow", 4.0))}
    assert raw["slow"] / raw["fast"] < 0.8  # saturation really distorts the ratio
    corrected = {k: float(quantify.correct_saturation(raw[k], 0.0, factors[k])[0]) for k in raw}
    assert corrected["slow"] / corrected["fast"] == pytest.approx(1.0, abs=0.005)
    relaxed = sim.simulate_spectrum(systems, {"fast": 1.0, "slow": 1.0}, rng, acq)  # fully relaxed, no noise
    for key, centre in (("fast", 2.0), ("slow", 4.0)):
        full = integrate_region(relaxed, (centre - 0.2, centre + 0.2), noise).integral
        assert corrected[key] == pytest.approx(full, rel=0.005)


def test_internal_standard_formula_and_propagated_sigma():
    # c_x = (I_x/N_x)/(I_s/N_s) c_s; sigma checked against a seeded Monte Carlo.
    c, s = quantify.from_standard(6.0, 0.06, 3, 2.0, 0.04, 1, 0.1, 0.001)
    assert c == pytest.approx((6.0 / 3) / (2.0 / 1) * 0.1)
    rng = np.random.default_rng(3)
    draws = ((rng.normal(6.0, 0.06, 200000) / 3) / (rng.normal(2.0, 0.04, 200000) / 1)
             * rng.normal(0.1, 0.001, 200000))
    assert s == pytest.approx(np.std(draws), rel=0.03)


def test_initial_and_relative_modes():
    integrals = np.array([3.0, 2.4, 1.8])
    sig = np.full(3, 0.03)
    c, s = quantify.from_initial(integrals, sig, 3, 3.0, 0.03, 3, 0.5, 0.0)
    assert np.allclose(c, [0.5, 0.4, 0.3])
    frac, fsig = quantify.relative(np.array([[1.0, 0.8], [0.0, 0.2]]), np.array([[0.01, 0.01], [0.01, 0.01]]))
    assert np.allclose(frac.sum(axis=0), 1.0)
    assert np.allclose(frac[:, 1], [0.8, 0.2])
    # derivative rule: sigma_x1 = sqrt(((1 - x1)/S)^2 s1^2 + (x1/S)^2 s2^2) with S = 1
    assert fsig[0, 1] == pytest.approx(math.hypot(0.2 * 0.01, 0.8 * 0.01))


def test_conversion_yield_and_mass_balance_flag():
    c_a = np.array([0.5, 0.4, 0.25])
    c_b = np.array([0.0, 0.1, 0.25])
    sig = np.full(3, 0.002)
    x, _ = quantify.conversion(c_a, sig, 0.5, 0.002)
    assert np.allclose(x, [0.0, 0.2, 0.5])
    y, _ = quantify.product_yield(c_b, sig, 0.5, 0.002)
    assert np.allclose(y, [0.0, 0.2, 0.5])
    ok = quantify.mass_balance([c_a, c_b], [sig, sig])
    assert ok.holds
    leaking = quantify.mass_balance([c_a, c_b * 0.8], [sig, sig])  # 20 % of B lost (e.g. precipitates)
    assert not leaking.holds and leaking.flagged.tolist() == [False, True, True]
