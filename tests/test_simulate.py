"""The simulator against first-order NMR rules and analytic line shapes.

Invented spin systems only; the truth is what each test sets.
"""

from __future__ import annotations

import json
import math
from datetime import datetime, timedelta, timezone

import numpy as np
import pytest

from kinetics import processing as P
from kinetics import simulate as S

ACQ = S.Acquisition(observe_mhz=60.0, n_points=8192, spectral_width_ppm=12.0, carrier_ppm=5.0)
ESTER = S.SpeciesSignals("ester", (
    S.Multiplet(4.10, 2, j_hz=7.1, multiplicity=4),
    S.Multiplet(1.25, 3, j_hz=7.1, multiplicity=3),
    S.Multiplet(2.05, 3),
))
ALCOHOL = S.SpeciesSignals("alcohol", (S.Multiplet(3.65, 2, j_hz=7.0, multiplicity=4),
                                       S.Multiplet(1.18, 3, j_hz=7.0, multiplicity=3)))


def test_multiplets_follow_pascals_triangle():
    # First-order rule (common practice): n equivalent partners give n + 1 lines with
    # binomial intensities, spaced by J.
    offsets, weights = S.Multiplet(1.0, 2, j_hz=7.0, multiplicity=4).lines()
    np.testing.assert_allclose(offsets, [-10.5, -3.5, 3.5, 10.5])
    np.testing.assert_allclose(weights * 8, [1, 3, 3, 1])
    offsets, weights = S.Multiplet(6.9, 1, j_hz=(15.5, 6.9), multiplicity=(2, 4)).lines()  # dq
    assert offsets.size == 8 and weights.sum() == pytest.approx(1.0)
    np.testing.assert_allclose(sorted(weights * 16), [1, 1, 1, 1, 3, 3, 3, 3])
    assert offsets.max() - offsets.min() == pytest.approx(15.5 + 3 * 6.9)


def test_bad_multiplets_are_refused():
    with pytest.raises(ValueError):
        S.Multiplet(1.0, 1, j_hz=(7.0, 2.0), multiplicity=3)
    with pytest.raises(ValueError):
        S.Multiplet(1.0, 1, width_hz=0)
    with pytest.raises(ValueError):
        S.Multiplet(1.0, 1, shape="voigt")  # needs gaussian_hz


def test_areas_scale_with_nuclei_times_concentration():
    # Truth set here: ester 0.8 mol/L, alcohol 0.2 mol/L; a line's area is its amplitude,
    # n_nuclei x c x weight.  Expected window areas: exact arctan integrals of the
    # Lorentzians (1 Hz FWHM) over each window, tails of neighbours included.
    concentrations = {"ester": 0.8, "alcohol": 0.2}
    spectrum = P.fft(P.zero_fill(S.simulate_fid([ESTER, ALCOHOL], concentrations,
                                                np.random.default_rng(0), ACQ)))
    lines = S.line_list([ESTER, ALCOHOL], concentrations)
    position = lines["shift_ppm"] + lines["offset_hz"] / 60.0

    def expected(c, half):
        hi, lo = (c + half - position) * 60.0, (c - half - position) * 60.0
        return np.sum(lines["amplitude"] * (np.arctan(2 * hi) - np.arctan(2 * lo)) / math.pi)

    area = lambda c, half: spectrum.real[np.abs(spectrum.ppm - c) <= half].sum()
    ratio = area(2.05, 0.25) / area(3.65, 0.25)
    assert ratio == pytest.approx(expected(2.05, 0.25) / expected(3.65, 0.25), rel=0.005)
    assert ratio == pytest.approx((3 * 0.8) / (2 * 0.2), rel=0.1)  # the plain proton count


def test_fid_and_analytic_spectrum_agree():
    # The analytic transform (Lorentzian 1 / (pi w + 2 pi i (nu - f)), scaled by 1/dwell)
    # must equal the DFT of the simulated FID with the first point halved, up to the DFT's
    # periodic wrap of the tails.
    for multiplet in (S.Multiplet(3.0, 1, width_hz=1.5),
                      S.Multiplet(7.0, 1, width_hz=1.0, shape="voigt", gaussian_hz=2.0)):
        system = [S.SpeciesSignals("x", (multiplet,))]
        fid = S.simulate_fid(system, {"x": 1.0}, np.random.default_rng(0), ACQ, phase0_deg=30)
        analytic = S.simulate_spectrum(system, {"x": 1.0}, np.random.default_rng(0), ACQ, phase0_deg=30)
        transformed = P.fft(fid)
        np.testing.assert_allclose(transformed.ppm, analytic.ppm)
        scale = np.abs(analytic.complex).max()
        assert np.max(np.abs(transformed.real - analytic.real)) < 0.01 * scale
        assert np.max(np.abs(transformed.imag - analytic.imag)) < 0.02 * scale


def test_lorentzian_height_and_voigt_width():
    # Lorentzian of amplitude a, FWHM w: height a / (pi w dwell) (analytic).  Voigt FWHM:
    # Olivero and Longbothum 1977, 0.5346 fL + sqrt(0.2166 fL^2 + fG^2) (from memory).
    acq = S.Acquisition(observe_mhz=60.0, n_points=65536, spectral_width_ppm=12.0, carrier_ppm=5.0)
    lorentz = S.simulate_spectrum([S.SpeciesSignals("x", (S.Multiplet(5.0, 2.0, width_hz=1.2),))],
                                  {"x": 1.0}, np.random.default_rng(0), acq)
    assert lorentz.real.max() == pytest.approx(2.0 / (math.pi * 1.2 * acq.dwell_s), rel=1e-3)
    voigt = S.simulate_spectrum([S.SpeciesSignals("x", (S.Multiplet(5.0, 1, width_hz=1.0, shape="voigt",
                                                                     gaussian_hz=1.5),))],
                                {"x": 1.0}, np.random.default_rng(0), acq)
    above = np.flatnonzero(voigt.real >= 0.5 * voigt.real.max())
    fwhm = (voigt.ppm[above[0]] - voigt.ppm[above[-1]]) * 60.0 + voigt.spacing_hz
    assert fwhm == pytest.approx(0.5346 + math.sqrt(0.2166 + 1.5 ** 2), abs=0.02)


def test_noise_follows_the_snr_definition():
    # SNR := tallest noise-free species point / sigma of the real part (module docstring).
    rng = np.random.default_rng(1)
    clean = P.fft(S.simulate_fid([ESTER], {"ester": 1.0}, rng, ACQ))
    noisy = P.fft(S.simulate_fid([ESTER], {"ester": 1.0}, rng, ACQ, snr=150.0))
    sigma = np.std((noisy.real - clean.real)[(noisy.ppm < 10.5) & (noisy.ppm > 6.0)])
    assert clean.real.max() / sigma == pytest.approx(150.0, rel=0.05)
    spectrum = S.simulate_spectrum([ESTER], {"ester": 1.0}, rng, ACQ, snr=150.0)
    assert P.snr(spectrum, 2.05, 0.05, (10.5, 6.0)) == pytest.approx(150.0, rel=0.1)


def test_same_seed_same_data():
    a = S.simulate_fid([ESTER], {"ester": 1.0}, np.random.default_rng(42), ACQ, snr=50)
    b = S.simulate_fid([ESTER], {"ester": 1.0}, np.random.default_rng(42), ACQ, snr=50)
    c = S.simulate_fid([ESTER], {"ester": 1.0}, np.random.default_rng(43), ACQ, snr=50)
    np.testing.assert_array_equal(a.data, b.data)
    assert not np.array_equal(a.data, c.data)


def test_drift_and_solvent():
    solvent = S.Multiplet(4.79, 500, width_hz=2.0)
    spectrum = S.simulate_spectrum([ESTER], {"ester": 0.05}, np.random.default_rng(0), ACQ,
                                   drift_ppm=0.02, solvent=solvent)
    assert P.peak_position(spectrum, 2.05, 0.1) == pytest.approx(2.07, abs=0.001)
    # the solvent line dwarfs the species (~x100) but the SNR reference excludes it
    assert spectrum.real.max() == pytest.approx(spectrum.real[spectrum.index_of(4.81)], rel=0.05)


def test_filter_delay_gives_a_rising_edge():
    # A digital filter delays the FID: near-zero first points, then a steep rise at the
    # delay (Bruker-style receivers; the real FID in tests/data shows ~72 points).
    fid = S.simulate_fid([ESTER], {"ester": 1.0}, np.random.default_rng(0), ACQ,
                         group_delay_points=24.0, declare_group_delay=False)
    magnitude = np.abs(fid.data)
    assert magnitude[:12].max() < 0.05 * magnitude.max()
    assert abs(int(np.argmax(np.diff(magnitude[:60]))) - 23.5) <= 1


def test_write_series_writes_an_instrument_like_folder(tmp_path):
    pytest.importorskip("kinetics.spectra.jcampdx")
    from kinetics.spectra.reader import read

    times = np.array([60.0, 360.0, 660.0])
    k_per_s = 1e-3
    ester = 0.5 * np.exp(-k_per_s * times)
    start = datetime(2026, 3, 2, 8, 30, tzinfo=timezone.utc)
    manifest = S.write_series(tmp_path / "run", times, {"ester": ester, "alcohol": 0.5 - ester},
                              [ESTER, ALCOHOL], np.random.default_rng(0), acquisition=ACQ,
                              start_utc=start, scan_duration_s=40.0, drift_ppm=[0.0, 0.002, 0.004])
    truth = json.loads(manifest.read_text())
    files = sorted(p.name for p in (tmp_path / "run").glob("*.jdx"))
    assert files == ["spectrum_0001.jdx", "spectrum_0002.jdx", "spectrum_0003.jdx"]
    assert [row["file"] for row in truth["files"]] == files
    assert truth["files"][1]["concentration.ester"] == pytest.approx(ester[1])
    assert (tmp_path / "run" / "truth.csv").read_text().startswith("file,")
    second = read(tmp_path / "run" / "spectrum_0002.jdx")
    assert second.acquired_utc == start + timedelta(seconds=360.0 - 20.0)
    assert second.duration_s == pytest.approx(40.0)
    assert second.observe_mhz == pytest.approx(60.0)
    assert P.peak_position(second, 2.05, 0.05) == pytest.approx(2.052, abs=0.002)


def test_write_series_fids_and_csv(tmp_path):
    pytest.importorskip("kinetics.spectra.jcampdx")
    from kinetics.spectra.reader import read

    small = S.Acquisition(observe_mhz=60.0, n_points=4096, spectral_width_ppm=12.0, carrier_ppm=5.0)
    S.write_series(tmp_path / "fid", [30.0, 90.0], {"ester": [1.0, 0.9]}, [ESTER],
                   np.random.default_rng(0), acquisition=small, kind="fid", snr=300,
                   phase0_deg=30.0, phase1_deg=-60.0, group_delay_points=20.0)
    fid = read(tmp_path / "fid" / "fid_0001.jdx")
    assert type(fid).__name__ == "Fid" and fid.n_points == 4096
    assert fid.dwell_s == pytest.approx(small.dwell_s, rel=1e-6)
    assert fid.group_delay_points == pytest.approx(20.0)  # declared; the p1 part is not
    spectrum = P.fid_to_spectrum(fid)
    assert P.peak_position(spectrum, 2.05, 0.05) == pytest.approx(2.05, abs=0.003)

    S.write_series(tmp_path / "csv", [30.0], {"ester": [1.0]}, [ESTER], np.random.default_rng(0),
                   acquisition=small, format="csv")
    assert read(tmp_path / "csv" / "spectrum_0001.csv").n_points == 4096
    with pytest.raises(ValueError):
        S.write_series(tmp_path / "x", [1.0], {"ester": [1.0]}, [ESTER], np.random.default_rng(0),
                       format="csv", kind="fid")
