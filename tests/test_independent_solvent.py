"""Issue 11 item 1: a large solvent line's tails are modelled in every fit window they reach.

Checks: an analytic Lorentzian pair (a quartet beside a line 45 times taller) through
the deconvolution with and without the tail column; and the independent stress series
(tests/independent_series.py) at 40 MHz, where without the tail column k moves by more
than its interval when the baseline order or the windows change.
"""

from __future__ import annotations

import math
import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parent))
import independent_series as gen  # noqa: E402

from kinetics import sensitivity as sens, series  # noqa: E402
from kinetics.signals import LineShape, deconvolve  # noqa: E402
from kinetics.signals.deconvolution import Component, solvent_tails  # noqa: E402


def _lorentz(x, centre, fwhm, area):
    """Unit-area Lorentzian times area: area * (w/2)/pi / ((x - c)^2 + (w/2)^2) (analytic)."""
    g = fwhm / 2.0
    return area * g / math.pi / ((x - centre) ** 2 + g ** 2)


def test_tail_column_recovers_a_quartet_beside_a_huge_line():
    mhz = 40.0
    x = np.linspace(3.70, 4.45, 1500)  # ppm; the big line sits at 4.78, 0.33 ppm past the edge
    j, w = 7.0 / mhz, 1.0 / mhz
    quartet = sum(_lorentz(x, 4.08 + (i - 1.5) * j, w, a) for i, a in enumerate((1, 3, 3, 1)))  # area 8
    tallest = 3 * (w / 2) / math.pi / (w / 2) ** 2
    water_w = 2.5 / mhz
    water_area = 45 * tallest * math.pi * water_w / 2  # 45 x the quartet's tallest line
    data = quartet + _lorentz(x, 4.78, water_w, water_area)
    comp = [Component("q", 4.08, LineShape(4, 7.0, "lorentzian", 1.0), 0.01)]
    plain = deconvolve(x, data, comp, mhz, baseline_order=2)
    tails = deconvolve(x, data, comp, mhz, baseline_order=2, solvent_ppm=[4.78])
    assert abs(tails.areas[0, 0] / 8 - 1) < 0.002
    assert abs(plain.areas[0, 0] / 8 - 1) > 3 * abs(tails.areas[0, 0] / 8 - 1)


def test_tail_column_skipped_inside_the_window_and_where_the_baseline_follows():
    x = np.linspace(3.7, 4.4, 500)
    assert solvent_tails(x, [4.0], 2).shape == (500, 0)  # the line is inside: no tail model
    assert solvent_tails(x, [40.0], 2).shape == (500, 0)  # far: a quadratic already follows it
    assert solvent_tails(x, [4.78], 2).shape == (500, 1)


def _spread(records, sc, configs):
    base = gen.run_config("unused", sc, baseline_order=2)
    spectra, measurements, reference = sens.processed_run(base, records)
    quantify = sens.SpectraQuantifier(spectra, measurements, reference)
    out = []
    for choice in configs:
        cfg = gen.run_config("unused", sc, **choice)
        out.append(sens.fitter_for(cfg)(quantify(cfg)))
    return out


CONFIGS = [dict(baseline_order=1), dict(baseline_order=2), dict(baseline_order=3),
           dict(baseline_order=2, window_scale=0.7), dict(baseline_order=2, window_scale=1.3)]


def test_k_at_40_mhz_does_not_move_beyond_its_interval(monkeypatch):
    # issue 11 item 1: baseline order 1..3 and windows +-30 % move k by less than its stated
    # uncertainty, and every interval holds the generator's k
    sc = gen.Scenario(nominal_mhz=40.0, n_spectra=16, interval_s=300.0)
    records, _ = gen.spectrum_records(sc, seed=4005)
    fits = _spread(records, sc, CONFIGS)
    ks = np.array([f.value for f in fits])
    half = min((f.ci95[1] - f.ci95[0]) / 2 for f in fits)
    assert np.ptp(ks) < half, (ks / sc.k - 1, half / sc.k)
    assert all(f.ci95[0] <= sc.k <= f.ci95[1] for f in fits)
    assert np.all(np.abs(ks / sc.k - 1) < 0.015)
    # the same data with the tails left to the local baseline: the choices move k (the check can fail)
    monkeypatch.setattr(series, "solvent_lines_ppm", lambda config: ())
    ks_plain = np.array([f.value for f in _spread(records, sc, CONFIGS)])
    assert np.ptp(ks_plain) > 3 * np.ptp(ks)
