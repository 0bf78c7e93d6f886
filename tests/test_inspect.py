"""``kinetics inspect``: header, axis and peaks, and ``--json`` as exactly one object."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from kinetics import cli
from kinetics.spectra import Fid, Spectrum
from kinetics.spectra import inspect as inspect_module
from kinetics.spectra.delimited import write_csv
from kinetics.spectra.inspect import inspect_file, noise_sigma

DATA = Path(__file__).parent / "data"
SPECTRUM_FILES = sorted(DATA.glob("*.dx"))


def test_every_data_file_gives_one_json_object(capsys):
    assert len(SPECTRUM_FILES) == 3  # tests/data/README.md lists three spectrum files
    for path in SPECTRUM_FILES:
        assert cli.main(["inspect", str(path), "--json"]) == 0
        out = capsys.readouterr().out
        info = json.loads(out)  # raises if stdout holds anything but one JSON document
        assert isinstance(info, dict)
        assert info["format"] == "jcamp-dx" and info["nucleus"] == "1H"
        assert len(info["ppm_range"]) == 2 and info["ppm_range"][0] > info["ppm_range"][1]
        assert 1 <= len(info["peaks"]) <= 10


def test_json_via_the_installed_command_has_clean_stdout():
    path = DATA / "ethyl-crotonate.1h.fid.dx"
    done = subprocess.run([sys.executable, "-m", "kinetics.cli", "inspect", str(path), "--json"],
                          capture_output=True, text=True, timeout=120, check=True)
    info = json.loads(done.stdout)
    assert info["kind"] == "fid" and info["points"] == 8192


def test_real_files_fields():
    # Source: file headers (tests/data/README.md): 32768 points at 600.13 MHz, TMS at 0 ppm.
    info = inspect_file(DATA / "butyl-acrylate.1h.dx")
    assert info["points"] == 32768 and info["kind"] == "spectrum"
    assert info["observe_mhz"] == pytest.approx(600.133706048414)
    assert info["ppm_range"][0] == pytest.approx(16.39691)
    assert info["acquired"] == "2006-02-21T14:47:00+00:00"
    assert info["title"] == "butyl-acrylate 1H, CDCl3"
    # The tallest line is the butyl CH3 triplet (0.82-0.94 ppm window, README); all snr huge.
    assert 0.82 <= info["peaks"][0]["ppm"] <= 0.94
    assert all(peak["snr"] > 5 for peak in info["peaks"])


def test_fid_and_its_spectrum_show_the_same_tallest_line():
    # The FID is the raw data behind ethyl-crotonate.1h.dx (README): after transformation its
    # tallest peak must sit where the instrument's own spectrum has it (ethyl CH3, 1.13-1.27).
    spectrum = inspect_file(DATA / "ethyl-crotonate.1h.dx")
    fid = inspect_file(DATA / "ethyl-crotonate.1h.fid.dx")
    assert fid["kind"] == "fid" and fid["points"] == 8192
    assert 1.13 <= spectrum["peaks"][0]["ppm"] <= 1.27
    assert fid["peaks"][0]["ppm"] == pytest.approx(spectrum["peaks"][0]["ppm"], abs=0.005)
    assert fid["ppm_range"][0] == pytest.approx(spectrum["ppm_range"][0], abs=0.01)


def _lorentz_spectrum(rng, sigma=2.0):
    # Invented: three Lorentzian lines of known position and height on Gaussian noise.
    ppm = np.linspace(10, 0, 8000)
    lines = [(7.0, 1000.0), (3.2, 400.0), (1.1, 60.0)]
    real = sum(h / (1 + ((ppm - c) / 0.003) ** 2) for c, h in lines) + rng.normal(0, sigma, ppm.size)
    return Spectrum(ppm=ppm, real=real, observe_mhz=60.0), lines


def test_peaks_and_snr_on_invented_spectrum(tmp_path):
    spectrum, lines = _lorentz_spectrum(np.random.default_rng(4))
    info = inspect_file(write_csv(tmp_path / "s.csv", spectrum))
    assert info["format"] == "delimited"
    found = info["peaks"][:3]
    for (centre, height), peak in zip(lines, found):
        assert peak["ppm"] == pytest.approx(centre, abs=0.001)
        assert peak["height"] == pytest.approx(height, rel=0.05)
        assert peak["snr"] == pytest.approx(height / 2.0, rel=0.15)  # noise sigma set to 2


def test_noise_estimate_matches_known_sigma():
    rng = np.random.default_rng(9)
    spectrum, _ = _lorentz_spectrum(rng, sigma=3.0)
    assert noise_sigma(spectrum.real) == pytest.approx(3.0, rel=0.05)


def test_fid_fallback_is_a_magnitude_fft(monkeypatch):
    # Invented FID: one line at +120 Hz from a 4.0 ppm carrier at 60 MHz -> 6.0 ppm.
    t = np.arange(4096) * 2e-4
    fid = Fid(data=np.exp((2j * np.pi * 120 - 3) * t), dwell_s=2e-4, observe_mhz=60.0, carrier_ppm=4.0)
    spectrum = inspect_module._magnitude_spectrum(fid)
    assert spectrum.ppm[np.argmax(spectrum.real)] == pytest.approx(6.0, abs=2 * spectrum.spacing_ppm)
    monkeypatch.setitem(sys.modules, "kinetics.processing", None)  # import now fails
    transformed, how = inspect_module._to_spectrum(fid)
    assert "fallback" in how and transformed.n_points == 4096


def test_unreadable_file_is_a_clean_cli_error(tmp_path, capsys):
    path = tmp_path / "broken.dx"
    path.write_text("##TITLE= x\n##DATA TYPE= NMR SPECTRUM\n")
    assert cli.main(["inspect", str(path), "--json"]) == 2
    captured = capsys.readouterr()
    assert captured.out == "" and "truncated" in captured.err
