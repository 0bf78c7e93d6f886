"""The independent stress series (tests/independent_series.py) and what kinetics makes of it.

The generator shares no code or settings with ``kinetics.simulate``; its files are
checked against nmrglue (reference library) and its physics against scipy.constants
(CODATA) and closed forms.  The end-to-end checks run ``kinetics run CONFIG --json
--no-report`` as a user would, with configs written from the README's config reference,
and compare k with the truth the generator set (issue 11, "Checks against the world").
"""

from __future__ import annotations

import json
import math
import sys
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pytest
import scipy.constants

sys.path.insert(0, str(Path(__file__).resolve().parent))
import independent_series as gen  # noqa: E402


@pytest.fixture(scope="module")
def small_fid_series(tmp_path_factory):
    folder = tmp_path_factory.mktemp("stress") / "fid60"
    sc = gen.Scenario(nominal_mhz=60.0, n_spectra=4)
    truth = gen.write_series(folder, sc, seed=5)
    return folder, sc, truth


def test_observe_frequency_from_codata():
    # 1H gamma/2pi = 42.577478 MHz/T (CODATA via scipy.constants); 1.41 T and 0.94 T magnets
    gamma = scipy.constants.physical_constants["proton gyromag. ratio in MHz/T"][0]
    assert abs(gamma - 42.5775) < 1e-3
    assert gen.Scenario(nominal_mhz=60).observe_mhz == pytest.approx(gamma * 1.41, rel=1e-12)
    assert gen.Scenario(nominal_mhz=40).observe_mhz == pytest.approx(gamma * 0.94, rel=1e-12)


def test_closed_form_spectrum_is_the_fft_of_the_fid():
    # analytic: sum_n z^n = (1 - z^N)/(1 - z); the FFT of the same sampled FID (first point halved)
    sc = gen.Scenario(n_points=2048, sw_hz=1000.0)
    lines = gen.line_list(0.15, 0.01, sc)
    fid = gen.fid_values(lines, sc, 1.3, 25.0, -10.0)
    fid[0] *= 0.5
    via_fft = np.fft.fftshift(np.fft.fft(fid))[::-1]  # high to low, as frequency_grid_hz
    assert np.fft.fftshift(np.fft.fftfreq(2048, 1 / 1000.0))[::-1] == pytest.approx(gen.frequency_grid_hz(sc))
    closed = gen.spectrum_values(lines, sc, 1.3, 25.0, -10.0)
    assert np.max(np.abs(closed - via_fft)) < 1e-9 * np.max(np.abs(via_fft))


def test_rate_laws_are_the_integrated_forms():
    # first order: mean of a0 exp(-k t) over [t, t + D] = a0 exp(-k t) (1 - exp(-k D))/(k D) (analytic)
    sc = gen.Scenario(k=1e-3)
    assert gen.mean_ester(100.0, 50.0, sc) == pytest.approx(
        0.2 * math.exp(-0.1) * (1 - math.exp(-0.05)) / 0.05, rel=1e-12)
    # second order: 1/[A] - 1/[A]0 = k t (analytic)
    sc2 = gen.Scenario(order=2, k=2e-3)
    a = gen.ester_at(np.array([500.0]), sc2)[0]
    assert 1 / a - 1 / 0.2 == pytest.approx(2e-3 * 500.0, rel=1e-12)


def test_water_line_is_45_times_the_quartet():
    sc = gen.Scenario()
    lines = gen.line_list(sc.ester0_mol_per_l, sc.ester0_mol_per_l / 45, sc)
    water = [a / w for s, a, w, solvent in lines if solvent][0]
    quartet = max(a / w for s, a, w, solvent in lines if abs(s - 4.08) < 0.2 and not solvent)
    assert water / quartet == pytest.approx(45.0, rel=1e-12)
    acetyl = {round(s, 2): a for s, a, w, solvent in lines if abs(s - 2.0) < 0.1}
    assert acetyl[2.05] / acetyl[1.93] == pytest.approx(45.0, rel=1e-12)


def test_files_read_the_same_with_nmrglue_and_kinetics(small_fid_series):
    # nmrglue (reference library) and kinetics must read the generator's own writer alike
    nmrglue = pytest.importorskip("nmrglue")
    from kinetics.spectra import read

    folder, sc, truth = small_fid_series
    path = folder / truth.files[0]
    _, pages = nmrglue.jcampdx.read(str(path))
    record = read(path)
    assert np.array_equal(np.asarray(pages[0]), record.data.real)
    assert np.array_equal(np.asarray(pages[1]), record.data.imag)
    assert record.observe_mhz == pytest.approx(sc.observe_mhz, rel=1e-9)
    assert record.dwell_s == pytest.approx(1 / sc.sw_hz)
    assert record.carrier_ppm == pytest.approx(sc.carrier_ppm, abs=1e-8)
    # ##LONG DATE written at +0100; the truth keeps UTC: 08:00 + first_start_s
    assert record.acquired_utc == datetime(2026, 3, 14, 8, 0, 30, tzinfo=timezone.utc)


def test_line_positions_survive_write_and_read(small_fid_series):
    # a line at +f Hz from the carrier sits at carrier + f/nu0 ppm (quadrature convention)
    from kinetics.processing import Pipeline
    from kinetics.spectra import read

    folder, sc, truth = small_fid_series
    spectrum = Pipeline.from_config({"phase": "auto", "phase_exclude_ppm": [[5.03, 4.53]]})(
        read(folder / truth.files[0])).spectrum
    drift_ppm = truth.drift_hz[0] / sc.observe_mhz
    for shift in (gen.STANDARD_PPM, gen.WATER_PPM, 2.05):
        near = np.abs(spectrum.ppm - shift - drift_ppm) < 0.05
        top = spectrum.ppm[near][np.argmax(spectrum.real[near])]
        assert top == pytest.approx(shift + drift_ppm, abs=0.01)


def _run(config: Path, out: Path, capsys) -> dict:
    from kinetics.cli import main

    code = main(["run", str(config), "--out", str(out), "--json", "--no-report"])
    text = capsys.readouterr().out
    assert code == 0, text
    return json.loads(text)


@pytest.mark.parametrize("mhz, choice", [(60.0, dict(baseline_order=2)),
                                         (60.0, dict(baseline_order=3, group_quartets=True)),
                                         (40.0, dict(baseline_order=2))])
def test_kinetics_run_recovers_k(tmp_path, capsys, mhz, choice):
    # issue 11: reasonable configs give k within 1.5 % of the truth, truth inside the 95 % interval
    sc = gen.Scenario(nominal_mhz=mhz, n_spectra=16, interval_s=300.0)
    folder = tmp_path / "series"
    gen.write_series(folder, sc, seed=21)
    config = tmp_path / "run.toml"
    config.write_text(gen.config_text(folder, sc, **choice), encoding="utf-8")
    k = _run(config, tmp_path / "out", capsys)["runs"][0]["k_per_s"]
    assert abs(k["value"] / sc.k - 1) < 0.015
    assert k["ci95"][0] <= sc.k <= k["ci95"][1]
