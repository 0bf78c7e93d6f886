"""Processing steps checked against analytic truth, the DFT's definition and nmrglue.

Truth comes from kinetics.simulate: a FID is an exact sum of damped complex exponentials,
so line positions (Hz) and areas (the exponentials' amplitudes) are known exactly.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from kinetics import processing as P
from kinetics import simulate as S
from kinetics.errors import ConfigError
from kinetics.spectra.spectrum import Fid, Spectrum

ACQ = S.Acquisition(observe_mhz=60.0, n_points=8192, spectral_width_ppm=12.0, carrier_ppm=5.0)
SPECIES_A = S.SpeciesSignals("A", (
    S.Multiplet(2.10, 3),                       # CH3 singlet
    S.Multiplet(1.20, 3, j_hz=7.0, multiplicity=3),  # CH3 triplet
    S.Multiplet(4.10, 2, j_hz=7.0, multiplicity=4),  # CH2 quartet
))
SPECIES_B = S.SpeciesSignals("B", (
    S.Multiplet(3.70, 3),
    S.Multiplet(6.50, 1, j_hz=10.0, multiplicity=2),
))
CONC = {"A": 1.0, "B": 0.5}
# (centre ppm, half-width ppm) of each group's integration window
WINDOWS = [(6.5, 0.35), (4.1, 0.3), (3.7, 0.12), (2.1, 0.3), (1.2, 0.3)]


def lorentzian_area_in_windows(lines, windows, width_hz, observe_mhz):
    """Exact area of Lorentzian lines of FWHM ``width_hz`` inside each window (arctan integral)."""
    position_ppm = lines["shift_ppm"] + lines["offset_hz"] / observe_mhz
    areas = []
    for centre, half in windows:
        hi = (centre + half - position_ppm) * observe_mhz
        lo = (centre - half - position_ppm) * observe_mhz
        fraction = (np.arctan(2 * hi / width_hz) - np.arctan(2 * lo / width_hz)) / math.pi
        areas.append(np.sum(lines["amplitude"] * fraction))
    return np.array(areas)


def window_sums(spectrum, windows):
    return np.array([spectrum.real[np.abs(spectrum.ppm - c) <= h].sum() for c, h in windows])


# ---------------------------------------------------------------- FFT axis and sign
@pytest.mark.parametrize("offset_hz", [+37.5, -81.25])
def test_line_at_positive_offset_appears_at_carrier_plus_offset(offset_hz):
    # Source: the DFT's definition (numpy kernel exp(-2 pi i k n / N)) and the shift
    # scale delta = nu / observe_mhz (IUPAC definition of the ppm scale).
    shift = ACQ.carrier_ppm + offset_hz / ACQ.observe_mhz
    fid = S.simulate_fid([S.SpeciesSignals("x", (S.Multiplet(shift, 1, width_hz=0.5),))], {"x": 1.0},
                         np.random.default_rng(0), ACQ)
    spectrum = P.fft(P.zero_fill(fid))
    assert np.all(np.diff(spectrum.ppm) < 0)  # high ppm on the left
    assert spectrum.ppm[0] == pytest.approx(ACQ.carrier_ppm + 6.0, abs=2 * spectrum.spacing_ppm)
    found = P.peak_position(spectrum, shift, 0.2)
    assert abs(found - shift) * ACQ.observe_mhz < 0.02  # Hz
    # the mirror image must be empty: a sign error would put the line there
    mirror = spectrum.real[spectrum.index_of(ACQ.carrier_ppm - offset_hz / ACQ.observe_mhz)]
    assert abs(mirror) < 1e-3 * spectrum.real.max()


def test_first_point_halving_removes_the_baseline_offset():
    # Source: Otting et al. 1986 (first-point scaling; from memory); analytic: the
    # continuous transform of a one-sided exponential has zero real part far off resonance.
    fid = S.simulate_fid([SPECIES_A], CONC, np.random.default_rng(0), ACQ)
    far = lambda s: np.median(s.real[(s.ppm < 10.5) & (s.ppm > 9.0)]) / s.real.max()
    assert abs(far(P.fft(fid, 0.5))) < 1e-4
    assert abs(far(P.fft(fid, 1.0))) > 1e-3


def test_zero_fill_auto_is_a_power_of_two_at_least_twice_n():
    fid = Fid(np.ones(3000, complex), 1e-3, 60.0)
    assert P.zero_fill(fid).n_points == 8192
    assert P.zero_fill(fid, 4096).n_points == 4096
    with pytest.raises(ValueError):
        P.zero_fill(fid, 100)


def test_dc_offset_is_removed():
    # A constant receiver offset becomes a spike at the carrier (common practice).
    fid = S.simulate_fid([SPECIES_A], CONC, np.random.default_rng(0), ACQ)
    shifted = fid.replace(data=fid.data + (0.3 - 0.2j))
    cleaned = P.remove_dc_offset(shifted)
    assert abs(cleaned.data[-1000:].mean()) < 1e-6
    carrier = lambda f: abs(P.fft(f).real[P.fft(f).index_of(ACQ.carrier_ppm)])
    assert carrier(cleaned) < 0.01 * carrier(shifted)


def test_exponential_and_gaussian_apodisation_broaden_by_the_stated_width():
    # Analytic: exp(-pi LB t) adds LB Hz to a Lorentzian FWHM; a Gaussian window of FWHM
    # g convolves with a Gaussian of FWHM g, giving a Voigt whose FWHM follows Olivero and
    # Longbothum 1977: 0.5346 fL + sqrt(0.2166 fL^2 + fG^2) (from memory, ~0.02 % accurate).
    line = S.SpeciesSignals("x", (S.Multiplet(5.5, 1, width_hz=1.0),))
    fid = S.simulate_fid([line], {"x": 1.0}, np.random.default_rng(0), ACQ)

    def fwhm_hz(f):
        s = P.fft(P.zero_fill(f, 65536))
        y = s.real / s.real.max()
        above = np.flatnonzero(y >= 0.5)
        return (s.ppm[above[0]] - s.ppm[above[-1]]) * ACQ.observe_mhz + s.spacing_hz

    assert fwhm_hz(P.apodize_exponential(fid, 2.0)) == pytest.approx(3.0, abs=0.03)
    voigt = 0.5346 * 1.0 + math.sqrt(0.2166 + 2.0 ** 2)
    assert fwhm_hz(P.apodize_gaussian(fid, 2.0)) == pytest.approx(voigt, abs=0.03)


# ---------------------------------------------------------------- phase
def test_manual_phase_matches_nmrglue_and_inverts():
    # Reference library: nmrglue.proc_base.ps multiplies by exp(i (p0 + p1 k / n)) in
    # degrees; ours is p0 + p1 k / (n - 1) with the pivot at the left edge.
    from nmrglue.process import proc_base

    spectrum = P.fft(S.simulate_fid([SPECIES_A], CONC, np.random.default_rng(1), ACQ))
    ours = P.phase(spectrum, 35.0, -120.0)
    theirs = proc_base.ps(spectrum.complex, p0=35.0, p1=-120.0 * (spectrum.n_points / (spectrum.n_points - 1)))
    np.testing.assert_allclose(ours.complex, theirs, rtol=0, atol=1e-9 * np.abs(theirs).max())
    back = P.phase(P.phase(spectrum, 35.0, 80.0, 3.0), -35.0, -80.0, 3.0)
    np.testing.assert_allclose(back.complex, spectrum.complex, atol=1e-9 * np.abs(spectrum.complex).max())


def test_auto_phase_recovers_positions_and_areas_from_random_phase_errors():
    # Issue check: random zero-order errors up to 90 degrees and a first-order error ->
    # known line positions within 0.2 Hz and relative areas within 1 %.  Truth: the
    # simulator's exponentials (positions) and the arctan integral of Lorentzians of FWHM
    # 1 Hz + 0.3 Hz broadening (areas, analytic).  The first-order error is an undeclared
    # part of a 32-point digital-filter delay, as on real receivers.  SNR 3000 (tallest
    # line / sigma); at SNR 1000 the weakest group's area was off by up to ~1.5 % in trials.
    rng = np.random.default_rng(7)
    lines = S.line_list([SPECIES_A, SPECIES_B], CONC)
    truth = lorentzian_area_in_windows(lines, WINDOWS, 1.3, ACQ.observe_mhz)
    pipeline = P.Pipeline.from_config({"group_delay": "header"})
    for _ in range(4):
        p0 = rng.uniform(-90, 90)
        p1 = rng.uniform(-180, 180)
        fid = S.simulate_fid([SPECIES_A, SPECIES_B], CONC, rng, ACQ, snr=3000, phase0_deg=p0,
                             phase1_deg=p1, pivot_ppm=4.0, group_delay_points=32.0)
        result = pipeline(fid)
        assert result.succeeded, result.notes
        measured = window_sums(result.spectrum, WINDOWS)
        ratio = (measured / measured.sum()) / (truth / truth.sum())
        assert np.all(np.abs(ratio - 1) < 0.01), (p0, p1, ratio)
        for singlet in (3.70, 2.10):
            found = P.peak_position(result.spectrum, singlet, 0.03)
            assert abs(found - singlet) * ACQ.observe_mhz < 0.2
        # the triplet's centre line and the quartet's inner lines
        for line_ppm in (1.20, 4.10 + 3.5 / 60, 4.10 - 3.5 / 60):
            found = P.peak_position(result.spectrum, line_ppm, 0.03)
            assert abs(found - line_ppm) * ACQ.observe_mhz < 0.2
        # applied phase equals the simulated error (converted to the found pivot)
        expected_p0 = p0 + p1 * (4.0 - result.pivot_ppm) / (result.spectrum.ppm[0] - result.spectrum.ppm[-1])
        assert abs((result.p0_deg - expected_p0 + 180) % 360 - 180) < 5
        assert abs(result.p1_deg - p1) < 5


def test_undeclared_filter_delay_is_detected_from_the_rising_edge():
    # A 40.4-point delay is a first-order phase of 14 500 degrees; detection must bring it
    # below a point so that ACME finishes the job (issue: "must handle large first-order
    # phase e.g. from an undeclared filter delay").
    rng = np.random.default_rng(3)
    fid = S.simulate_fid([SPECIES_A, SPECIES_B], CONC, rng, ACQ, snr=3000, phase0_deg=40,
                         group_delay_points=40.4, declare_group_delay=False)
    assert fid.group_delay_points == 0
    assert abs(P.detect_group_delay(fid) - 40.4) < 1.0
    result = P.Pipeline.from_config({})(fid)
    lines = S.line_list([SPECIES_A, SPECIES_B], CONC)
    truth = lorentzian_area_in_windows(lines, WINDOWS, 1.3, ACQ.observe_mhz)
    measured = window_sums(result.spectrum, WINDOWS)
    ratio = (measured / measured.sum()) / (truth / truth.sum())
    assert np.all(np.abs(ratio - 1) < 0.01), ratio
    assert any("digital-filter delay" in note for note in result.notes)


def test_no_rising_edge_means_no_delay():
    fid = S.simulate_fid([SPECIES_A], CONC, np.random.default_rng(0), ACQ, snr=100)
    assert P.detect_group_delay(fid) == 0.0


def test_acme_score_prefers_the_correct_phase():
    # Chen et al. 2002: the correctly phased spectrum minimises entropy + penalty.
    spectrum = S.simulate_spectrum([SPECIES_A, SPECIES_B], CONC, np.random.default_rng(0), ACQ)
    right = P.acme_score(spectrum.real)
    for wrong in (10.0, -25.0, 90.0):
        assert P.acme_score(P.phase(spectrum, wrong).real) > right


# ---------------------------------------------------------------- baseline
@pytest.mark.parametrize("config, flat, area", [
    ({"method": "polynomial", "order": 5, "regions_ppm": [[10.8, 7.2], [5.8, 4.8], [3.0, 2.6], [0.6, -0.8]]},
     0.002, 0.02),
    ({"method": "arpls", "lam": 1e9}, 0.002, 0.02),
    # asls (Eilers and Boelens 2005) sags under the lines: measured ~3-5 % area loss here
    ({"method": "asls", "lam": 1e9, "p": 0.001}, 0.005, 0.07),
])
def test_baseline_roll_is_removed(config, flat, area):
    # Truth: the simulator adds a known smooth roll (5 % of the tallest line) to an
    # analytic spectrum; after correction the whole spectrum must match the roll-free one
    # within ``flat`` x height, and the window integrals within ``area`` (window sums are
    # ~1000 points wide, so they magnify any residual offset).
    rng = np.random.default_rng(5)
    clean = S.simulate_spectrum([SPECIES_A, SPECIES_B], CONC, rng, ACQ)
    rolled = S.simulate_spectrum([SPECIES_A, SPECIES_B], CONC, rng, ACQ, baseline_roll=0.05)
    spectrum = P.Pipeline.from_config({"baseline": config, "phase": "none"})(rolled).spectrum
    height = clean.real.max()
    assert np.max(np.abs(rolled.real - clean.real)) > 0.04 * height  # the roll is there
    assert np.max(np.abs(spectrum.real - clean.real)) < flat * height
    ratio = window_sums(spectrum, WINDOWS) / window_sums(clean, WINDOWS)
    assert np.all(np.abs(ratio - 1) < area), ratio


def test_polynomial_baseline_needs_regions():
    spectrum = S.simulate_spectrum([SPECIES_A], CONC, np.random.default_rng(0), ACQ)
    with pytest.raises(ValueError):
        P.correct_baseline(spectrum, "polynomial")


# ---------------------------------------------------------------- referencing and alignment
def test_referencing_puts_tms_at_zero():
    # TMS defines 0 ppm for 1H (IUPAC).  The simulated spectrum is off by a drift of
    # +0.037 ppm; referencing must report -0.037 and put the line at 0.000 ppm.
    tms = S.SpeciesSignals("TMS", (S.Multiplet(0.0, 12, width_hz=0.8),))
    rng = np.random.default_rng(2)
    spectrum = S.simulate_spectrum([SPECIES_A, tms], {"A": 1.0, "TMS": 0.05}, rng, ACQ,
                                   drift_ppm=0.037, snr=500)
    result = P.reference(spectrum, 0.0, 0.3)
    assert result.shift_ppm == pytest.approx(-0.037, abs=0.0005)
    assert P.peak_position(result.spectrum, 0.0, 0.05) == pytest.approx(0.0, abs=0.0005)
    processed = P.Pipeline.from_config({"reference": "tms", "phase": "none"})(spectrum)
    assert processed.reference_shift_ppm == pytest.approx(result.shift_ppm)


def test_referencing_a_named_peak_to_a_target():
    spectrum = S.simulate_spectrum([SPECIES_B], CONC, np.random.default_rng(0), ACQ, drift_ppm=-0.02)
    result = P.reference(spectrum, 3.70, 0.1, target_ppm=3.75)
    assert P.peak_position(result.spectrum, 3.75, 0.05) == pytest.approx(3.75, abs=0.0005)
    assert result.found_ppm == pytest.approx(3.68, abs=0.0005)


def test_alignment_recovers_known_drift_to_a_tenth_of_a_point():
    # Truth: the simulator's per-spectrum drift.  Acceptance: |error| < 0.1 x point spacing.
    rng = np.random.default_rng(11)
    drifts = np.concatenate([[0.0], rng.uniform(-0.03, 0.03, 7)])
    series = [S.simulate_spectrum([SPECIES_A, SPECIES_B], CONC, rng, ACQ, drift_ppm=d, snr=500)
              for d in drifts]
    result = P.align_series(series, (2.4, 1.8), reference_index=0)
    spacing = series[0].spacing_ppm
    np.testing.assert_allclose(result.shifts_ppm, -drifts, atol=0.1 * spacing)
    for spectrum in result.spectra:
        assert P.peak_position(spectrum, 2.1, 0.02) == pytest.approx(2.1, abs=0.1 * spacing)


def test_process_series_reports_alignment_per_spectrum():
    rng = np.random.default_rng(4)
    drifts = [0.0, 0.01, -0.015]
    fids = [S.simulate_fid([SPECIES_A], CONC, rng, ACQ, drift_ppm=d, snr=1000, phase0_deg=30) for d in drifts]
    pipeline = P.Pipeline.from_config({"noise_region_ppm": [10.5, 9.0]})
    result = P.process_series(fids, pipeline, align_window_ppm=(2.4, 1.8))
    assert result.succeeded
    assert len(result.spectra) == 3
    spacing = result.spectra[0].spectrum.spacing_ppm
    np.testing.assert_allclose(result.shifts_ppm, [-d for d in drifts], atol=0.2 * spacing)
    assert all(item.noise_sigma and item.noise_sigma > 0 for item in result.spectra)


# ---------------------------------------------------------------- noise and SNR
def test_noise_estimate_of_pure_noise_equals_the_set_sigma():
    # Truth: white Gaussian noise of the set sigma (numpy Generator); acceptance 5 %.
    rng = np.random.default_rng(9)
    sigma = 2.5
    ppm = np.linspace(10, 0, 16384)
    values = sigma * rng.standard_normal(ppm.size) + 0.3 * ppm  # a linear trend is removed
    spectrum = Spectrum(ppm=ppm, real=values)
    assert P.noise_sigma(spectrum, (9.0, 1.0)) == pytest.approx(sigma, rel=0.05)


def test_snr_is_height_over_one_sigma():
    # The simulator's SNR is tallest line / sigma (1-sigma convention); snr() must agree.
    rng = np.random.default_rng(6)
    spectrum = S.simulate_spectrum([SPECIES_A], CONC, rng, ACQ, snr=200.0)
    assert P.snr(spectrum, 2.1, 0.05, (10.5, 8.0)) == pytest.approx(200.0, rel=0.1)


# ---------------------------------------------------------------- pipeline and config
def test_config_errors_name_the_key():
    with pytest.raises(ConfigError, match="processing.colour"):
        P.Pipeline.from_config({"colour": "red"})
    with pytest.raises(ConfigError, match="processing.line_broadening_hz"):
        P.Pipeline.from_config({"line_broadening_hz": -1})
    with pytest.raises(ConfigError, match="processing.line_broadening_hz"):
        P.Pipeline.from_config({"line_broadening_hz": "wide"})
    with pytest.raises(ConfigError, match="processing.zero_fill"):
        P.Pipeline.from_config({"zero_fill": 3.5})
    with pytest.raises(ConfigError, match="processing.phase"):
        P.Pipeline.from_config({"phase": "sometimes"})
    with pytest.raises(ConfigError, match="processing.phase.p2_deg"):
        P.Pipeline.from_config({"phase": {"p0_deg": 1, "p2_deg": 3}})
    with pytest.raises(ConfigError, match="processing.baseline.method"):
        P.Pipeline.from_config({"baseline": {"method": "spline"}})
    with pytest.raises(ConfigError, match="processing.baseline.regions_ppm"):
        P.Pipeline.from_config({"baseline": "polynomial"})
    with pytest.raises(ConfigError, match="processing.reference.ppm"):
        P.Pipeline.from_config({"reference": {"window_ppm": 0.2}})
    with pytest.raises(ConfigError, match="processing.noise_region_ppm"):
        P.Pipeline.from_config({"noise_region_ppm": [1.0]})
    with pytest.raises(ConfigError, match="processing.dc_offset"):
        P.Pipeline.from_config({"dc_offset": "yes"})
    with pytest.raises(ConfigError, match="processing.group_delay"):
        P.Pipeline.from_config({"group_delay": "guess"})


def test_config_defaults_and_manual_phase():
    pipeline = P.Pipeline.from_config({})
    assert pipeline.line_broadening_hz == 0.3 and pipeline.zero_fill == "auto"
    assert pipeline.phase == "auto" and pipeline.baseline is None and pipeline.reference is None
    fid = S.simulate_fid([SPECIES_A], CONC, np.random.default_rng(0), ACQ, phase0_deg=25.0, phase1_deg=40.0)
    manual = P.Pipeline.from_config({"phase": {"p0_deg": 25.0, "p1_deg": 40.0}})(fid)
    assert (manual.p0_deg, manual.p1_deg) == (25.0, 40.0)
    # the late-start first-order error rolls the baseline a little; lines must be upright
    assert manual.spectrum.real.max() > 50 * abs(manual.spectrum.real.min())


def test_pipeline_on_a_spectrum_applies_only_spectrum_steps():
    spectrum = S.simulate_spectrum([SPECIES_A], CONC, np.random.default_rng(0), ACQ, phase0_deg=50.0)
    result = P.Pipeline.from_config({"line_broadening_hz": 5.0, "zero_fill": 65536})(spectrum)
    assert result.spectrum.n_points == spectrum.n_points  # no zero-filling of a spectrum
    assert result.p0_deg == pytest.approx(50.0, abs=2.0)
    with pytest.raises(TypeError):
        P.Pipeline.from_config({})("not a record")


def test_real_only_spectrum_is_not_phased_and_says_so():
    spectrum = S.simulate_spectrum([SPECIES_A], CONC, np.random.default_rng(0), ACQ)
    real_only = Spectrum(ppm=spectrum.ppm, real=spectrum.real)
    result = P.Pipeline.from_config({})(real_only)
    assert any("imaginary" in note for note in result.notes)


def test_fid_to_spectrum_defaults():
    fid = S.simulate_fid([SPECIES_A], CONC, np.random.default_rng(0), ACQ, phase0_deg=60.0, snr=500)
    spectrum = P.fid_to_spectrum(fid)
    assert spectrum.n_points == 16384
    assert P.peak_position(spectrum, 2.1, 0.05) == pytest.approx(2.1, abs=0.2 / ACQ.observe_mhz)
    assert spectrum.real.max() > 20 * abs(spectrum.real.min())
