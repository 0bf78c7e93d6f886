"""Line-shape layer checked against NIST StRD Gauss1-3 and analytic line-shape facts."""

from __future__ import annotations

import math
import re
from pathlib import Path

import numpy as np
import pytest
from scipy import integrate

from kinetics import lineshapes

NIST = Path(__file__).parent / "data" / "nist"


def _load_nist(name: str):
    """Starting points, certified values and SDs, and data of a NIST StRD file."""
    lines = (NIST / f"{name}.dat").read_text().splitlines()
    start1, start2, cert, sd = [], [], [], []
    for line in lines:
        match = re.match(r"\s*b(\d)\s*=\s*(\S+)\s+(\S+)\s+(\S+)\s+(\S+)", line)
        if match:
            start1.append(float(match[2]))
            start2.append(float(match[3]))
            cert.append(float(match[4]))
            sd.append(float(match[5]))
    first = next(i for i, line in enumerate(lines) if re.match(r"Data:\s+y\s+x", line.strip()))
    data = np.array([[float(v) for v in line.split()] for line in lines[first + 1:] if line.strip()])
    return np.array(start1), np.array(start2), np.array(cert), np.array(sd), data[:, 1], data[:, 0]


def _lre(estimate, certified):
    """Log relative error, the number of agreeing significant digits (NIST's measure)."""
    rel = np.abs(estimate - certified) / np.abs(certified)
    return -np.log10(np.maximum(rel, 1e-16))


@pytest.mark.parametrize("name", ["Gauss1", "Gauss2", "Gauss3"])
@pytest.mark.parametrize("start", [0, 1])
def test_nist_gauss_certified_values(name, start):
    # Source: NIST/ITL StRD nonlinear regression, certified values (tests/data/nist).
    start1, start2, certified, certified_sd, x, y = _load_nist(name)
    model, params = lineshapes.nist_gauss_model()
    for k, value in enumerate(start1 if start == 0 else start2):
        params[f"b{k + 1}"].set(value=value)
    fit = model.fit(y, params, x=x, method="leastsq",
                    max_nfev=20000, fit_kws={"xtol": 1e-14, "ftol": 1e-14, "gtol": 1e-14})
    assert fit.success
    estimate = np.array([fit.params[f"b{k + 1}"].value for k in range(8)])
    stderr = np.array([fit.params[f"b{k + 1}"].stderr for k in range(8)])
    assert np.all(_lre(estimate, certified) >= 6.0), (estimate, certified)
    assert np.all(_lre(stderr, certified_sd) >= 3.0), (stderr, certified_sd)


@pytest.mark.parametrize("profile,extra", [("lorentzian", 0.0), ("gaussian", 0.0), ("voigt", 0.7)])
def test_lines_have_unit_area_and_stated_fwhm(profile, extra):
    # Analytic: each profile integrates to its area; Lorentzian/Gaussian height at
    # centre +/- fwhm/2 is half the maximum (definition of FWHM).
    area, centre, fwhm = 2.5, 0.3, 0.8
    value, _ = integrate.quad(lambda v: lineshapes.line(v, area, centre, profile, fwhm, extra),
                              -np.inf, np.inf, limit=400)
    assert value == pytest.approx(area, rel=1e-6)
    if profile != "voigt":
        top = lineshapes.line(np.array([centre]), area, centre, profile, fwhm)[0]
        half = lineshapes.line(np.array([centre + fwhm / 2]), area, centre, profile, fwhm)[0]
        assert half == pytest.approx(top / 2, rel=1e-9)


def test_multiplet_pascal_intensities_and_spacing():
    # First-order n+1 rule: a quartet is 1:3:3:1 with lines J apart (textbook NMR).
    assert np.allclose(lineshapes.binomial_weights(4) * 8, [1, 3, 3, 1])
    assert np.allclose(lineshapes.line_offsets(3, 7.0), [-7.0, 0.0, 7.0])
    x = np.linspace(-40, 40, 80001)
    y = lineshapes.multiplet(x, 1.0, 0.0, 4, 7.0, "lorentzian", 0.5)
    assert np.trapezoid(y, x) == pytest.approx(1.0, abs=0.01)  # tails beyond +/-40 lost
    peaks = x[1:-1][(y[1:-1] > y[:-2]) & (y[1:-1] > y[2:])]
    assert np.allclose(peaks, [-10.5, -3.5, 3.5, 10.5], atol=0.01)


def test_lorentzian_window_fraction_is_two_over_pi_arctan_m():
    # Analytic: a window of +/- m half-widths holds (2/pi) arctan(m) of a Lorentzian.
    for m in (0.5, 1.0, 5.0, 50.0):
        assert lineshapes.lorentzian_window_fraction(-m, m, 0.0, 2.0) == pytest.approx(2 / math.pi * math.atan(m))
