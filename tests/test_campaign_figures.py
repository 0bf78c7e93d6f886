"""Figures of the campaign methods: built without pyplot, labelled "quantity / unit", and
every run drawn with its own marker and line style (readable in greyscale)."""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from test_campaign_support import simulate_campaign, simulate_run  # noqa: E402

from kinetics.campaign import (fit_power_law, orders_from_initial_rates, rate_course, same_excess,  # noqa: E402
                               vtna)
from kinetics.campaign import figures  # noqa: E402
from kinetics.plots import png_bytes  # noqa: E402


def _check(figure, n_series_min=2):
    assert "matplotlib.pyplot" not in sys.modules or not __import__("matplotlib.pyplot").pyplot.get_fignums()
    for ax in figure.axes:
        assert " / " in ax.get_xlabel() and " / " in ax.get_ylabel(), (ax.get_xlabel(), ax.get_ylabel())
    lines = [line for ax in figure.axes for line in ax.get_lines() if line.get_marker() not in ("None", None, "")]
    styles = {(line.get_marker(), str(line.get_linestyle())) for line in lines}
    assert len(styles) >= n_series_min
    assert png_bytes(figure).startswith(b"\x89PNG")


def test_every_method_draws_a_labelled_greyscale_safe_figure():
    rng = np.random.default_rng(5)
    runs = simulate_campaign(rng, design=((0.1, 0.15, 0.01), (0.1, 0.3, 0.01), (0.1, 0.15, 0.02)))
    fit = fit_power_law(runs, profile=False)
    _check(figures.global_fit_figure(fit, runs))
    found = vtna(runs, ["B", "cat"])
    _check(figures.vtna_figure(found, runs))
    early = simulate_run(rng, "early", 0.1, 0.15, 0.01, observe=("A",), n=30)
    late = simulate_run(rng, "late", 0.07, 0.12, 0.01, observe=("A",), n=30)
    _check(figures.same_excess_figure(same_excess(early, late), early, late))
    courses = [rate_course(run) for run in runs]
    _check(figures.rate_figure(courses))
    _check(figures.rate_figure(courses, normalise_order=0.5))
    short = [simulate_run(rng, f"i{i}", a0, b0, cat, t_end_s=200.0, n=20, observe=("A",))
             for i, (a0, b0, cat) in enumerate(((0.1, 0.15, 0.01), (0.2, 0.15, 0.01), (0.1, 0.4, 0.01),
                                                (0.1, 0.15, 0.02), (0.15, 0.3, 0.015)))]
    _check(figures.initial_rates_figure(orders_from_initial_rates(short, ["A", "B", "catalyst"])), 1)
