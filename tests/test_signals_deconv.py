"""Overlap: global deconvolution of a 60 MHz series against plain region integrals."""

from __future__ import annotations

import numpy as np
import pytest

from kinetics import lineshapes, simulate as sim
from kinetics.config import run_config_from_dict
from kinetics.run import run_series
from kinetics.signals import Component, LineShape, deconvolve

C0 = 0.5  # mol/L of the reactant at t = 0 (the test's truth)


@pytest.fixture(scope="module")
def overlapped_series(tmp_path_factory):
    """10 spectra at 60 MHz: triplet (A, 3H, 1.20 ppm) and quartet (B, 2H, 1.25 ppm),
    0.05 ppm = 3 Hz apart, J = 7 Hz, 1 Hz lines, A -> B first order, plus a singlet
    standard (9H, 0.05 mol/L, 3.30 ppm).  SNR 50 taken as height / (2 sigma) of the
    tallest line of the first spectrum (an instrument convention, from memory), i.e. the
    simulator's 1-sigma snr = 100."""
    folder = tmp_path_factory.mktemp("overlap")
    times = np.linspace(15.0, 3615.0, 10)
    c_a = C0 * np.exp(-times / 1500.0)
    c_b = C0 - c_a
    systems = [sim.SpeciesSignals("A", (sim.Multiplet(1.20, 3, 7.0, 3, 1.0),)),
               sim.SpeciesSignals("B", (sim.Multiplet(1.25, 2, 7.0, 4, 1.0),)),
               sim.SpeciesSignals("S", (sim.Multiplet(3.30, 9, 0.0, 1, 1.0),))]
    acq = sim.Acquisition(observe_mhz=60.0, n_points=16384, spectral_width_ppm=12.0, carrier_ppm=5.0)
    sim.write_series(folder, times, {"A": c_a, "B": c_b, "S": np.full(times.size, 0.05)}, systems,
                     np.random.default_rng(20261201), acquisition=acq, snr=100.0)
    return folder, times, c_a, c_b


def _config(folder, method: str):
    std = {"name": "std", "species": "S", "window_ppm": [3.1, 3.5], "nuclei": 9, "standard": True,
           "concentration_mol_per_l": 0.05, "method": "fit", "lineshape": {"width_hz": 1.0}}
    if method == "fit":
        tracked = [
            {"name": "A_CH3", "species": "A", "window_ppm": [0.95, 1.5], "nuclei": 3, "method": "fit",
             "group": "ethyl", "lineshape": {"multiplicity": "triplet", "j_hz": 7.0, "width_hz": 1.0}},
            {"name": "B_CH2", "species": "B", "window_ppm": [0.95, 1.5], "nuclei": 2, "method": "fit",
             "group": "ethyl", "lineshape": {"multiplicity": "quartet", "j_hz": 7.0, "width_hz": 1.0}}]
    else:  # the best a region integral can do: split the overlap half-way between the centres
        tracked = [{"name": "A_CH3", "species": "A", "window_ppm": [0.95, 1.225], "nuclei": 3},
                   {"name": "B_CH2", "species": "B", "window_ppm": [1.225, 1.5], "nuclei": 2}]
    return run_config_from_dict({
        "run": {"folder": str(folder), "pattern": "*.jdx"},
        "time": {"source": "header", "reaction_start": "2026-01-01T09:00:00Z"},
        "processing": {"phase": "none"},
        "integration": {"noise_region_ppm": [[8.0, 10.5], [-0.8, 0.5]]},
        "signals": tracked + [std],
        "quantify": {"reactant": "A", "product": "B"},
    })


def test_global_deconvolution_recovers_both_concentrations(overlapped_series):
    folder, times, c_a, c_b = overlapped_series
    table = run_series(_config(folder, "fit")).table
    assert np.allclose(table["time_s"], times, atol=1e-6)  # header start + half the 30 s scan
    err_a = np.abs(table["A_CH3_concentration"] - c_a) / C0
    err_b = np.abs(table["B_CH2_concentration"] - c_b) / C0
    # within 2 % (of the initial concentration) at every time point
    assert err_a.max() < 0.02 and err_b.max() < 0.02, (err_a.max(), err_b.max())
    assert all("global_fit" in flags for flags in table["A_CH3_flags"])
    # the reported sigmas are honest: standardised errors of ordinary size
    z = np.r_[(table["A_CH3_concentration"] - c_a) / table["A_CH3_concentration_sigma"],
              (table["B_CH2_concentration"] - c_b) / table["B_CH2_concentration_sigma"]]
    assert np.sqrt(np.mean(z ** 2)) < 2.0
    assert not table["mass_balance_flag"].any()  # A + B is conserved in the truth


def test_region_integrals_are_biased_on_the_same_data(overlapped_series):
    folder, times, c_a, c_b = overlapped_series
    table = run_series(_config(folder, "integral")).table
    err_a = (table["A_CH3_concentration"] - c_a) / C0
    err_b = (table["B_CH2_concentration"] - c_b) / C0
    # each window holds lines of the other multiplet: far beyond the 2 % of the fit
    assert np.abs(err_a).max() > 0.10 and np.abs(err_b).max() > 0.10


def test_per_spectrum_and_global_fit_agree_on_one_spectrum():
    # One noise-free spectrum (analytic truth): a per-spectrum fit from offset starting
    # values recovers the areas, positions and J.
    mhz = 60.0
    ppm = np.linspace(1.5, 0.95, 1200)
    y = (3.0 * lineshapes.multiplet(ppm, 1.0, 1.20, 3, 7.0 / mhz, "lorentzian", 1.0 / mhz)
         + 1.0 * lineshapes.multiplet(ppm, 1.0, 1.25, 4, 7.0 / mhz, "lorentzian", 1.0 / mhz))
    comps = [Component("t", 1.21, LineShape(3, 7.3, "lorentzian", 1.4), 0.05),
             Component("q", 1.24, LineShape(4, 6.8, "lorentzian", 0.8), 0.05)]
    fit = deconvolve(ppm, y + 1e-9 * np.random.default_rng(0).normal(size=ppm.size), comps, mhz)
    assert fit.success
    assert fit.areas[0] == pytest.approx([3.0, 1.0], rel=1e-4)
    assert fit.center_ppm["t"][0] == pytest.approx(1.20, abs=1e-6)
    assert fit.coupling_hz["q"][0] == pytest.approx(7.0, abs=1e-4)
    assert "converged" in fit.report()


@pytest.mark.parametrize("profile,gauss_hz", [("voigt", 0.8), ("gaussian", 0.0)])
def test_other_profiles_recover_area_and_width(profile, gauss_hz):
    # Analytic truth: a doublet of the given profile on a sloping baseline, seeded noise.
    mhz = 60.0
    ppm = np.linspace(2.3, 1.7, 1500)
    shape = LineShape(2, 10.0, profile, 1.0, gauss_hz)
    y = (2.0 * lineshapes.multiplet(ppm, 1.0, 2.0, 2, 10.0 / mhz, profile, 1.0 / mhz, gauss_hz / mhz)
         + 0.5 + 0.3 * (ppm - 2.0))
    y = y + np.random.default_rng(4).normal(0, 0.2, ppm.size)
    fit = deconvolve(ppm, y, [Component("d", 2.004, LineShape(2, 10.4, profile, 1.3, 1.1 * gauss_hz or 0.0), 0.02)],
                     mhz)
    assert fit.success
    assert fit.areas[0, 0] == pytest.approx(2.0, abs=4 * fit.area_stderr[0, 0])
    assert fit.width_hz["d"][0] == pytest.approx(shape.width_hz, abs=0.1)
    assert fit.coupling_hz["d"][0] == pytest.approx(10.0, abs=0.05)
