"""Figures of the campaign methods, as :class:`matplotlib.figure.Figure` objects (Agg canvas).

No pyplot state: every function builds its own Figure.  Runs are drawn with the styles of
:func:`kinetics.plots.series_style` (a colour, a line style and a marker each), so the
figures stay readable in greyscale; every axis label is "quantity / unit".

* :func:`global_fit_figure` -- each run's data and the shared fitted curves;
* :func:`vtna_figure` -- the overlay against normalised time, and the score along each order;
* :func:`same_excess_figure` -- the later run shifted in time onto the earlier one;
* :func:`rate_figure` -- RPKA rate against concentration (different or same excess);
* :func:`initial_rates_figure` -- ln r0 against ln factor, each factor's partial plot.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from kinetics.plots import series_style

CONC_LABEL = "concentration / mol L⁻¹"
TIME_LABEL = "time / s"
RATE_LABEL = "rate / mol L⁻¹ s⁻¹"


def _plain(text) -> str:
    return str(text).replace("$", r"\$")


def _figure(width_in=6.4, height_in=3.2, n_axes=1):
    figure = Figure(figsize=(width_in, height_in), layout="constrained")
    FigureCanvasAgg(figure)
    axes = figure.subplots(1, n_axes, squeeze=False)[0]
    return figure, axes


def global_fit_figure(result, runs, species: str = "A") -> Figure:
    """Every run's measured ``[species]`` (markers) and the globally fitted curve (line)."""
    figure, (ax,) = _figure()
    handles, labels = [], []
    for i, run in enumerate(runs):
        if species not in run.observed_mol_per_l:
            continue
        style = series_style(i)
        (points,) = ax.plot(run.time_s, run.observed_mol_per_l[species], linestyle="none", marker=style.marker,
                            color=style.colour, markerfacecolor="none")
        grid = np.linspace(0.0, float(run.time_s[-1]), 200)
        (line,) = ax.plot(grid, result.curve(run.label, grid)[species], linestyle=style.linestyle,
                          color=style.colour)
        handles.append((points, line))
        labels.append(_plain(run.label))
    ax.set_xlabel(TIME_LABEL)
    ax.set_ylabel(f"[{_plain(species)}] / mol L⁻¹")
    ax.set_title(_plain(result.description))
    ax.legend(handles, labels, title="run (markers: data, lines: global fit)", ncols=2,
              handlelength=3.0)
    return figure


def vtna_figure(result, runs) -> Figure:
    """Left: ``[A]`` against the normalised time at the found orders, with the shared curve.
    Right: the overlay score along each order, the 95 % threshold region shaded."""
    figure, (ax, ax_score) = _figure(7.2, 3.2, 2)
    by_label = {run.label: run for run in runs}
    tau_max, spline = result.curve
    for i, label in enumerate(result.labels):
        style = series_style(i)
        tau = result.normalised_time[label]
        ax.plot(tau, by_label[label].observed_mol_per_l[result.observed], linestyle="none", marker=style.marker,
                color=style.colour, markerfacecolor="none", label=_plain(label))
    grid = np.linspace(0.0, 1.0, 200)
    ax.plot(grid * tau_max, spline(grid), color="black", linestyle="-", linewidth=1.0, label="shared curve")
    terms = " ".join(f"[{_plain(s)}]^{o:.2f}" for s, o in result.orders.items())
    total = sum(result.orders.values())
    ax.set_xlabel(f"Σ {terms} Δt / (mol L⁻¹)^{total:.2f} s")
    ax.set_ylabel(f"[{_plain(result.observed)}] / mol L⁻¹")
    ax.legend(title="run")
    for i, (name, (orders, scores)) in enumerate(result.grid.items()):
        if scores.size == 0:
            continue
        style = series_style(i)
        ax_score.plot(orders, scores, color=style.colour, linestyle=style.linestyle, marker=style.marker,
                      markersize=3, label=f"order in {_plain(name)}")
        lo, hi = result.intervals.get(name, (math.nan, math.nan))
        if math.isfinite(lo) and math.isfinite(hi):
            ax_score.axvspan(lo, hi, color=style.colour, alpha=0.15, hatch="//" if i % 2 else "..")
    ax_score.set_yscale("log")
    ax_score.set_xlabel("order / 1")
    ax_score.set_ylabel("overlay score (weighted RSS) / 1")
    ax_score.legend()
    return figure


def same_excess_figure(result, early, late, species: str = "A") -> Figure:
    """The earlier run and the later run shifted by the fitted time shift (overlay test)."""
    figure, (ax,) = _figure()
    first, second = series_style(0), series_style(1)
    ax.plot(early.time_s, early.observed_mol_per_l[species], linestyle=first.linestyle, marker=first.marker,
            color=first.colour, markerfacecolor="none", label=f"{_plain(early.label)}")
    ax.plot(late.time_s + result.time_shift_s, late.observed_mol_per_l[species], linestyle=second.linestyle,
            marker=second.marker, color=second.colour,
            label=f"{_plain(late.label)} shifted by {result.time_shift_s:.4g} s")
    verdict = "does not overlay" if result.flagged else "overlays"
    ax.set_title(f"same excess: {verdict} (rate ratio {result.rate_ratio:.2f}, p = {result.p:.2g})")
    ax.set_xlabel(TIME_LABEL)
    ax.set_ylabel(f"[{_plain(species)}] / mol L⁻¹")
    ax.legend()
    return figure


def rate_figure(courses: Sequence, normalise_order: float | None = None) -> Figure:
    """RPKA: rate against ``[A]`` for each run; with ``normalise_order`` the rate divided by
    ``[B]^order`` (the different-excess overlay at the right order)."""
    figure, (ax,) = _figure()
    for i, course in enumerate(courses):
        style = series_style(i)
        rate = course.rate_mol_per_l_s
        if normalise_order is not None and course.partner_mol_per_l is not None:
            rate = rate / np.maximum(course.partner_mol_per_l, 1e-300) ** normalise_order
        ax.plot(course.concentration_mol_per_l, rate, linestyle=style.linestyle, marker=style.marker,
                color=style.colour, markerfacecolor="none", label=_plain(course.label))
    ax.set_xlabel("[A] / mol L⁻¹")
    if normalise_order is None:
        ax.set_ylabel(RATE_LABEL)
    else:
        ax.set_ylabel(f"rate / [B]^{normalise_order:.2f} / (mol L⁻¹)^{1 - normalise_order:.2f} s⁻¹")
    ax.legend(title="run")
    return figure


def initial_rates_figure(result) -> Figure:
    """One panel per factor: ``ln r0`` corrected for the other factors ("partial") against ``ln x``, with
    the fitted line (a partial-residual plot) and error bars of ``sigma/r0``."""
    n = len(result.factors)
    figure, axes = _figure(3.0 * n + 0.6, 3.0, n)
    r0 = np.array([r.rate_mol_per_l_s for r in result.rates])
    se = np.array([r.stderr for r in result.rates])
    logs = np.log(result.design)
    orders = np.array([o.value for o in result.orders])
    for j, (ax, name) in enumerate(zip(axes, result.factors)):
        style = series_style(j)
        others = np.delete(np.arange(n), j)
        partial = np.log(r0) - logs[:, others] @ orders[others]
        ax.errorbar(logs[:, j], partial, yerr=se / r0, linestyle="none", marker=style.marker, color=style.colour,
                    markerfacecolor="none", capsize=2)
        x = np.linspace(logs[:, j].min(), logs[:, j].max(), 20)
        ax.plot(x, result.ln_k.value + orders[j] * x, color=style.colour, linestyle=style.linestyle,
                label=f"order {orders[j]:.2f}")
        ax.set_xlabel(f"ln([{_plain(name)}] / mol L⁻¹) / 1")
        ax.set_ylabel("partial ln(r₀ / mol L⁻¹ s⁻¹) / 1")
        ax.legend()
    return figure
