"""Figures and report sections of the campaign methods.

Figures are :class:`matplotlib.figure.Figure` objects on the Agg canvas, built in the style
of :mod:`kinetics.plots` (same fonts, sizes, palette; no pyplot state).  Runs are drawn
with :func:`kinetics.plots.series_style` (a colour, a line style and a marker each), so the
figures stay readable in greyscale; every axis label is "quantity / unit"; time axes read
in s, min or h as :func:`kinetics.plots.time_scale` chooses.

* :func:`global_fit_figure` -- each run's data, the shared fitted curves and the residuals;
* :func:`vtna_figure` -- the overlay against normalised time, and the score along each order;
* :func:`same_excess_figure` -- the later run shifted in time onto the earlier one;
* :func:`rate_figure` -- RPKA rate against concentration (different or same excess);
* :func:`initial_rates_figure` -- ln r0 against ln factor, each factor's partial plot.

:func:`report_sections` turns a :class:`~kinetics.campaign.runner.CampaignOutcome` into
report sections (figures with captions that say what to look for, tables with human
headings and units) and :func:`write_campaign_report` writes ``<out>/report/`` with
:func:`kinetics.report.write_report` (HTML, PDF, CSV tables, SVG and 300-dpi PNG figures).
"""

from __future__ import annotations

import hashlib
import logging
import math
from pathlib import Path
from typing import Sequence

import numpy as np
import pandas as pd
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure
from matplotlib.legend_handler import HandlerTuple

from kinetics import numbers
from kinetics.errors import KineticsError
from kinetics.plots import figure_width_in, series_style, styled, time_scale

log = logging.getLogger(__name__)

CONC_LABEL = "concentration / mol L⁻¹"
TIME_LABEL = "time / s"
RATE_LABEL = "rate / mol L⁻¹ s⁻¹"


def _plain(text) -> str:
    return str(text).replace("$", r"\$")


def _figure(width_in=6.4, height_in=3.2, n_axes=1):
    figure = Figure(figsize=(width_in, height_in), layout="constrained")
    FigureCanvasAgg(figure)
    axes = figure.subplots(1, n_axes, squeeze=False)[0]
    for ax in axes:
        _style_axes(ax)
    return figure, axes


def _style_axes(ax) -> None:
    ax.grid(True, color="#d8d8d8", linewidth=0.6, linestyle="-")
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(direction="out", length=3)


def _max_time(runs) -> float:
    return max((float(np.max(run.time_s)) for run in runs if len(run.time_s)), default=0.0)


# ---------------------------------------------------------------- figures
@styled
def global_fit_figure(result, runs, species: str = "A", width: str | float = "double") -> Figure:
    """Every run's measured ``[species]`` (markers), the globally fitted curve (line, same
    style) and, below, measured minus fitted for each run."""
    width_in = figure_width_in(width)
    figure = Figure(figsize=(width_in, 4.4 if width_in > 5 else 3.6), layout="constrained")
    FigureCanvasAgg(figure)
    grid = figure.add_gridspec(2, 1, height_ratios=(3, 1.3))
    ax = figure.add_subplot(grid[0])
    ax_res = figure.add_subplot(grid[1], sharex=ax)
    scale, unit = time_scale(_max_time(runs))
    handles, labels = [], []
    residual_scale, residual_unit = 1e3, "mmol L⁻¹"
    for i, run in enumerate(runs):
        if species not in run.observed_mol_per_l:
            continue
        style = series_style(i)
        t = np.asarray(run.time_s, float)
        y = np.asarray(run.observed_mol_per_l[species], float)
        (points,) = ax.plot(t / scale, y, linestyle="none", marker=style.marker, markersize=3.2,
                            color=style.colour, markerfacecolor="white")
        grid_t = np.linspace(0.0, float(t[-1]), 200)
        (line,) = ax.plot(grid_t / scale, result.curve(run.label, grid_t)[species], linestyle=style.linestyle,
                          color=style.colour, linewidth=1.1)
        model = np.asarray(result.curve(run.label, t)[species], float)
        ax_res.plot(t / scale, (y - model) * residual_scale, linestyle="none", marker=style.marker, markersize=2.6,
                    color=style.colour, markerfacecolor="white")
        handles.append((points, line))
        labels.append(_plain(run.label))
    ax_res.axhline(0.0, color="#444444", linewidth=0.7)
    ax.set_xlabel(f"time / {unit}")
    ax.xaxis.label.set_visible(False)  # the residual panel below carries the time axis
    ax.tick_params(labelbottom=False)
    ax.set_ylabel(f"[{_plain(species)}] / mol L⁻¹")
    ax_res.set_xlabel(f"time / {unit}")
    ax_res.set_ylabel(f"measured − fit / {residual_unit}", fontsize=7)
    ax.legend(handles, labels, title="run: markers data, lines global fit", ncols=2, handlelength=3.0,
              fontsize=6.5, title_fontsize=6.5, frameon=False, loc="upper right",
              handler_map={tuple: HandlerTuple(ndivide=None)})
    _style_axes(ax)
    _style_axes(ax_res)
    figure.align_ylabels()
    return figure


@styled
def vtna_figure(result, runs, width: str | float = "double") -> Figure:
    """Left: ``[A]`` against the normalised time at the found orders, with the shared curve.
    Right: the overlay score along each order, the 95 % interval shaded."""
    width_in = figure_width_in(width)
    figure, (ax, ax_score) = _figure(width_in, 0.42 * width_in, 2)
    by_label = {run.label: run for run in runs}
    tau_max, spline = result.curve
    for i, label in enumerate(result.labels):
        style = series_style(i)
        tau = result.normalised_time[label]
        ax.plot(tau, by_label[label].observed_mol_per_l[result.observed], linestyle="none", marker=style.marker,
                markersize=3.2, color=style.colour, markerfacecolor="white", label=_plain(label))
    grid = np.linspace(0.0, 1.0, 200)
    ax.plot(grid * tau_max, spline(grid), color="black", linestyle="-", linewidth=1.0, label="shared curve")
    terms = " ".join(f"[{_plain(s)}]$^{{{o:.2f}}}$" for s, o in result.orders.items())
    total = sum(result.orders.values())
    ax.set_xlabel(f"Σ {terms} Δt / (mol L⁻¹)$^{{{total:.2f}}}$ s")
    ax.set_ylabel(f"[{_plain(result.observed)}] / mol L⁻¹")
    ax.legend(title="run", fontsize=6.5, title_fontsize=6.5, frameon=False)
    for i, (name, (orders, scores)) in enumerate(result.grid.items()):
        if scores.size == 0:
            continue
        style = series_style(i)
        ax_score.plot(orders, scores, color=style.colour, linestyle=style.linestyle, marker=style.marker,
                      markersize=3, markerfacecolor="white", label=f"order in {_plain(name)}")
        lo, hi = result.intervals.get(name, (math.nan, math.nan))
        if math.isfinite(lo) and math.isfinite(hi):
            ax_score.axvspan(lo, hi, color=style.colour, alpha=0.18, hatch="//" if i % 2 else "..", linewidth=0)
    ax_score.set_yscale("log")
    ax_score.set_xlabel("order / 1")
    ax_score.set_ylabel("overlay score (weighted RSS) / 1")
    ax_score.legend(fontsize=6.5, frameon=False)
    return figure


@styled
def same_excess_figure(result, early, late, species: str = "A", width: str | float = "single") -> Figure:
    """The earlier run and the later run shifted by the fitted time shift (overlay test)."""
    width_in = figure_width_in(width)
    figure, (ax,) = _figure(width_in, 0.8 * width_in if width_in < 5 else 3.2)
    first, second = series_style(0), series_style(1)
    scale, unit = time_scale(max(float(np.max(early.time_s)), float(np.max(late.time_s)) + result.time_shift_s))
    ax.plot(early.time_s / scale, early.observed_mol_per_l[species], linestyle=first.linestyle,
            marker=first.marker, markersize=3.2, linewidth=0.9, color=first.colour, markerfacecolor="white",
            label=f"{_plain(early.label)}")
    shift = numbers.format_duration(result.time_shift_s)
    ax.plot((late.time_s + result.time_shift_s) / scale, late.observed_mol_per_l[species],
            linestyle=second.linestyle, marker=second.marker, markersize=3.2, linewidth=0.9, color=second.colour,
            markerfacecolor="white", label=f"{_plain(late.label)}, shifted by {shift}")
    verdict = "do not overlay" if result.flagged else "overlay"
    ax.set_title(f"{verdict}: rate ratio {result.rate_ratio:.2f}", fontsize=7.5)
    ax.set_xlabel(f"time / {unit}")
    ax.set_ylabel(f"[{_plain(species)}] / mol L⁻¹")
    ax.legend(fontsize=6.5, frameon=False)
    return figure


@styled
def rate_figure(courses: Sequence, normalise_order: float | None = None, species: str = "A",
                partner: str = "B", width: str | float = "single") -> Figure:
    """RPKA: rate against ``[A]`` for each run; with ``normalise_order`` the rate divided by
    ``[B]^order`` (the different-excess overlay at the right order)."""
    width_in = figure_width_in(width)
    figure, (ax,) = _figure(width_in, 0.8 * width_in if width_in < 5 else 3.2)
    for i, course in enumerate(courses):
        style = series_style(i)
        rate = course.rate_mol_per_l_s
        if normalise_order is not None and course.partner_mol_per_l is not None:
            rate = rate / np.maximum(course.partner_mol_per_l, 1e-300) ** normalise_order
        ax.plot(course.concentration_mol_per_l, rate, linestyle=style.linestyle, marker=style.marker,
                markersize=2.8, markevery=max(1, len(rate) // 12), linewidth=0.9, color=style.colour,
                markerfacecolor="white", label=_plain(course.label))
    ax.set_xlabel(f"[{_plain(species)}] / mol L⁻¹")
    if normalise_order is None:
        ax.set_ylabel(RATE_LABEL)
    else:
        ax.set_ylabel(f"rate / [{_plain(partner)}]$^{{{normalise_order:.2f}}}$ / "
                      f"(mol L⁻¹)$^{{{1 - normalise_order:.2f}}}$ s⁻¹")
    ax.legend(title="run", fontsize=6.5, title_fontsize=6.5, frameon=False)
    return figure


@styled
def initial_rates_figure(result, width: str | float = "double") -> Figure:
    """One panel per factor: ``ln r0`` corrected for the other factors ("partial") against ``ln x``, with
    the fitted line (a partial-residual plot) and error bars of ``sigma/r0``."""
    n = len(result.factors)
    width_in = max(figure_width_in(width), 2.3 * n)
    figure, axes = _figure(width_in, 2.5, n)
    r0 = np.array([r.rate_mol_per_l_s for r in result.rates])
    se = np.array([r.stderr for r in result.rates])
    logs = np.log(result.design)
    orders = np.array([o.value for o in result.orders])
    for j, (ax, name) in enumerate(zip(axes, result.factors)):
        style = series_style(j)
        others = np.delete(np.arange(n), j)
        partial = np.log(r0) - logs[:, others] @ orders[others]
        ax.errorbar(logs[:, j], partial, yerr=se / r0, linestyle="none", marker=style.marker, color=style.colour,
                    markerfacecolor="white", capsize=2, markersize=3.5, elinewidth=0.7)
        x = np.linspace(logs[:, j].min(), logs[:, j].max(), 20)
        ax.plot(x, result.ln_k.value + orders[j] * x, color=style.colour, linestyle=style.linestyle,
                label=f"order {orders[j]:.2f}")
        ax.set_xlabel(f"ln([{_plain(name)}] / mol L⁻¹) / 1")
        ax.set_ylabel("partial ln(r₀ / mol L⁻¹ s⁻¹) / 1")
        ax.legend(fontsize=6.5, frameon=False)
    return figure


# ---------------------------------------------------------------- report
def _unit(unit) -> str:
    """A parameter unit as people read it (``(mol L^-1)^(1-n) s^-1, n = 2.49`` typeset)."""
    text = numbers.unit_text(unit or "")
    return "" if text == "1" else text.replace("(1-n)", "(1−n)")


def _parameter_name(name: str, catalyst: str | None) -> str:
    if name.startswith("order_"):
        species = name[len("order_"):]
        return f"order in {species}" + (" (catalyst)" if species in (catalyst, "catalyst") else "")
    if name.startswith("K_"):
        return f"K_{name[2:]} (binding constant of {name[2:]})"
    if name.startswith("c0_") and "@" in name:
        species, run = name[3:].split("@", 1)
        return f"[{species}]₀ of {run}"
    if name in ("ea_kj_per_mol", "Ea"):
        return "Ea"
    return name


def _parameters_table(fit, catalyst, name: str, heading: str, caption: str):
    """Shared constants and orders (per-run initial concentrations go to the CSV only)."""
    from kinetics.report import TableBlock

    rows, shown = [], []
    for p in fit.parameters:
        entry = p.to_dict()
        interval = entry.get("ci95") or (None, None)
        rows.append({"parameter": p.name, "value": entry.get("value"), "stderr": entry.get("stderr"),
                     "ci95_low": interval[0], "ci95_high": interval[1], "unit": entry.get("unit", "")})
        if "@" in p.name:
            continue
        ok = all(x is not None and math.isfinite(float(x)) for x in interval)
        shown.append({"parameter": _parameter_name(p.name, catalyst),
                      "value ± u": numbers.format_uncertain(entry.get("value"), entry.get("stderr")),
                      "95 % interval": numbers.format_interval(*interval) if ok else "–",
                      "unit": _unit(entry.get("unit")) or "1"})
    return TableBlock(heading, pd.DataFrame(rows), name=name, caption=caption, display=pd.DataFrame(shown))


def _fit_caption(fit, extra: str = "") -> str:
    weighted = "weighted by each point's standard uncertainty" if getattr(fit, "weighted", False) else "unweighted"
    status = "converged" if fit.converged else f"did NOT converge ({fit.message})"
    return (f"{fit.description}; {fit.n_points} points, {fit.dof} degrees of freedom, χ² {fit.chi_square:.4g} "
            f"({weighted}); fit {status}. Value ± standard uncertainty; 95 % interval (profile likelihood where "
            f"computed, else from the covariance).{extra} Per-run initial concentrations are in the CSV table.")


def _design_table(outcome):
    from kinetics.report import TableBlock

    config = outcome.config
    species = []
    for run in config.runs:
        for name in run.initial_dict():
            if name not in species:
                species.append(name)
    rows, shown = [], []
    for run in config.runs:
        got = outcome.loaded.get(run.label)
        initial = run.initial_dict()
        t_c = None if run.temperature_kelvin is None else run.temperature_kelvin - 273.15
        row = {"run": run.label, "temperature_c": t_c, "catalyst_mol_per_l": run.catalyst_mol_per_l,
               **{f"initial_{s}_mol_per_l": initial.get(s) for s in species},
               "n_points": None if got is None else int(got.time_s.size),
               "in_headline_fit": got is not None and run.label not in outcome.excluded, "source": run.source}
        rows.append(row)
        show = {"run": run.label, "θ / °C": "–" if t_c is None else f"{t_c:.1f}",
                "catalyst / mol L⁻¹": numbers.format_value(run.catalyst_mol_per_l, 3)}
        for s in species:
            show[f"[{s}]₀ / mol L⁻¹"] = numbers.format_value(initial.get(s), 3) if initial.get(s) is not None else "–"
        show["points"] = "not loaded" if got is None else str(int(got.time_s.size))
        show["in the fit"] = "no" if got is None or run.label in outcome.excluded else "yes"
        shown.append(show)
    return TableBlock("Runs and their design", pd.DataFrame(rows), name="campaign_runs",
                      caption="Initial concentrations and catalyst loading as given in the campaign config; "
                              "'in the fit': used by the headline global fit.", display=pd.DataFrame(shown))


def _different_excess(outcome):
    """RPKA different-excess runs: the largest group at one catalyst loading and temperature
    whose excess [partner]0 − [reactant]0 differs (None when there is no such group)."""
    from kinetics.campaign.rpka import different_excess_order

    config = outcome.config
    reactant, partner = config.reactant, config.partner
    if partner is None:
        return None
    groups = {}
    for run in outcome.runs:
        if run.label in outcome.excluded:
            continue
        a0, b0 = run.initial(reactant), run.initial(partner)
        if a0 is None or b0 is None or reactant not in run.observed_mol_per_l:
            continue
        key = (None if run.catalyst_mol_per_l is None else round(math.log(run.catalyst_mol_per_l), 3),
               None if run.temperature_kelvin is None else round(run.temperature_kelvin, 1))
        groups.setdefault(key, []).append(run)
    best = None
    for group in groups.values():
        excesses = {round((run.initial(partner) - run.initial(reactant)) / max(run.initial(partner), 1e-12), 2)
                    for run in group}
        if len(excesses) >= 2 and (best is None or len(group) > len(best)):
            best = group
    if best is None:
        return None
    try:
        return different_excess_order(best, reactant, partner)
    except KineticsError as error:
        log.warning("different-excess plot skipped: %s", error)
        return None


def report_sections(outcome) -> list:
    """The campaign's report sections: runs, global fit, VTNA, RPKA (same and different
    excess), initial rates; each figure with a caption saying what to look for."""
    from kinetics.report import FigureBlock, Section, TableBlock

    config = outcome.config
    reactant = config.reactant
    by_label = {run.label: run for run in outcome.runs}
    sections = [Section("Runs", (_design_table(outcome),),
                        intro=f"{len(outcome.runs)} of {len(config.runs)} runs loaded "
                              f"({outcome.info.get('where', 'here')})."
                              + "".join(f" Run {f.label} could not be used: {f.reason}." for f in outcome.failures))]

    for key, fit, heading in (("global_fit", outcome.fit, "Global fit"),
                              ("global_fit_all_runs", outcome.fit_all, "Global fit of every run, for comparison")):
        if fit is None:
            continue
        used = [by_label[label] for label in dict.fromkeys(b[0] for b in fit.blocks) if label in by_label]
        blocks = []
        left_out = ""
        if key == "global_fit" and outcome.excluded:
            left_out = f" Left out: {', '.join(outcome.excluded)} (it does not overlay its same-excess partner)."
        try:
            blocks.append(FigureBlock(
                "Courses and the global fit", global_fit_figure(fit, used, reactant),
                f"Markers: measured [{reactant}] of each run; lines: the one rate law fitted to every run at once "
                "(shared constants and orders). Lower panel: measured minus fitted. Look for residuals scattered "
                "about zero in every run: a run whose residuals trend is not described by the shared rate law."
                + left_out, name=f"{key}_courses"))
        except (KineticsError, KeyError, ValueError) as error:
            log.warning("figure %s skipped: %s", key, error)
        blocks.append(_parameters_table(fit, config.catalyst, key, "Rate constant and orders",
                                        _fit_caption(fit, left_out)))
        intro = ("One rate law, rate = k Π [i]^n_i (or the written mechanism), fitted to the courses of all runs at "
                 "once; k and the orders are shared, each run keeps its own initial concentrations."
                 if key == "global_fit" else
                 "The same fit with every run, so the effect of the runs left out can be seen.")
        sections.append(Section(heading, tuple(blocks), intro=intro))

    if outcome.vtna is not None:
        result = outcome.vtna
        runs = [by_label[label] for label in result.labels if label in by_label]
        rows, shown = [], []
        for name, order in result.orders.items():
            lo, hi = result.intervals.get(name, (math.nan, math.nan))
            rows.append({"species": name, "order": order, "ci95_low": lo, "ci95_high": hi})
            ok = math.isfinite(lo) and math.isfinite(hi)
            shown.append({"order in": name + (" (catalyst)" if name == config.catalyst else ""),
                          "order": numbers.format_value(order, 3),
                          "95 % interval": numbers.format_interval(lo, hi) if ok else "–"})
        blocks = []
        try:
            blocks.append(FigureBlock(
                "Variable time normalisation", vtna_figure(result, runs),
                f"Left: [{result.observed}] of runs {', '.join(result.labels)} against the time normalised by the "
                "concentrations of the other species raised to their orders. When the orders are right the "
                "courses of all runs fall on one curve (the shared curve drawn); a fan of separate curves means "
                "an order is wrong. Right: the overlay score along each order; its minimum is the order found, "
                "the shaded band its 95 % interval.", name="vtna"))
        except (KineticsError, KeyError, ValueError) as error:
            log.warning("VTNA figure skipped: %s", error)
        blocks.append(TableBlock("Orders from VTNA", pd.DataFrame(rows), name="vtna_orders", display=pd.DataFrame(shown),
                                 caption=f"Automatic search for the best overlay (score {result.score:.4g} with "
                                         f"{result.dof} degrees of freedom); 95 % intervals from the profile of the "
                                         "score." + "".join(f" {n}" for n in result.notes)))
        sections.append(Section("Variable Time Normalization Analysis (VTNA)", tuple(blocks),
                                intro="Burés, Angew. Chem. Int. Ed. 2016, 55, 16084 and 2028: the time axis replaced "
                                      "by Σ [B]^b Δt, so runs that differ in [B] overlay at the right order b."))

    rpka_blocks = []
    if outcome.same_excess:
        for i, pair in enumerate(outcome.same_excess, start=1):
            early, late = by_label.get(pair.early), by_label.get(pair.late)
            if early is None or late is None:
                continue
            look = ("They do not overlay: at the same composition one run is slower, so its catalyst loses activity "
                    "during the run or the product it has formed inhibits."
                    if pair.flagged else "They overlay: no sign of catalyst deactivation or product inhibition.")
            try:
                rpka_blocks.append(FigureBlock(
                    f"Same excess: {pair.early} and {pair.late}", same_excess_figure(pair, early, late, reactant),
                    f"[{reactant}] of run {pair.early} and of run {pair.late} (started later on the same course), "
                    f"shifted in time onto it. {look}", name=f"same_excess_{i}"))
            except (KineticsError, KeyError, ValueError) as error:
                log.warning("same-excess figure skipped: %s", error)
        frame = pd.DataFrame([{k: v for k, v in r.to_dict().items() if k not in ("rate_ratio_ci95", "message")}
                              | {"rate_ratio_ci95_low": r.rate_ratio_ci95[0],
                                 "rate_ratio_ci95_high": r.rate_ratio_ci95[1]} for r in outcome.same_excess])
        shift_unit, shift_scale = numbers.duration_unit(max(abs(r.time_shift_s) for r in outcome.same_excess))
        shown = pd.DataFrame([{
            "earlier run": r.early, "later run": r.late,
            f"time shift / {shift_unit}": numbers.format_value(r.time_shift_s / shift_scale, 3),
            "rate ratio (later ÷ earlier)": f"{r.rate_ratio:.3f}",
            "rate ratio 95 % interval": numbers.format_interval(*r.rate_ratio_ci95)
            if all(math.isfinite(x) for x in r.rate_ratio_ci95) else "–",
            "p": numbers.format_value(r.p, 2), "overlay": "no" if r.flagged else "yes",
            "slower run": r.slower or "–"} for r in outcome.same_excess])
        messages = " ".join(numbers_sentence(r.message) for r in outcome.same_excess if r.flagged)
        rpka_blocks.append(TableBlock("Same-excess pairs", frame, name="same_excess", display=shown,
                                      caption="Rate ratio: the later run's rate over the earlier run's at the same "
                                              "composition (1 when they overlay); p: F test of ratio 1. "
                                              + messages))
    different = _different_excess(outcome)
    if different is not None:
        courses = list(different.courses)
        partner = config.partner
        try:
            rpka_blocks.append(FigureBlock(
                "Different excess: rate against concentration", rate_figure(courses, None, reactant, partner),
                f"Rate −d[{reactant}]/dt from each smoothed course against [{reactant}]; the runs differ in "
                f"[{partner}], so at the same [{reactant}] their rates differ by the order in {partner}.",
                name="different_excess_rates"))
            rpka_blocks.append(FigureBlock(
                f"Different excess: rate / [{partner}]^{different.order:.2f}",
                rate_figure(courses, different.order, reactant, partner),
                f"The same rates divided by [{partner}] raised to the order found ({different.order:.2f}): at the "
                "right order the curves fall on one another.", name="different_excess_normalised"))
        except (KineticsError, KeyError, ValueError) as error:
            log.warning("different-excess figure skipped: %s", error)
        frame = pd.DataFrame([{"partner": partner, "order": different.order, "stderr": different.stderr,
                               "ci95_low": different.ci95[0], "ci95_high": different.ci95[1], "dof": different.dof}])
        shown = pd.DataFrame([{"order in": partner,
                               "order ± u": numbers.format_uncertain(different.order, different.stderr),
                               "95 % interval": numbers.format_interval(*different.ci95),
                               "runs": ", ".join(c.label for c in courses)}])
        rpka_blocks.append(TableBlock("Order from the different-excess runs", frame, name="different_excess_order",
                                      display=shown,
                                      caption="Pooled log-log regression of the rate on [partner] at fixed "
                                              f"[{reactant}]; smoothed rates at nearby concentrations are "
                                              "correlated, so the interval is indicative (the global fit gives the "
                                              "calibrated one)."))
    if rpka_blocks:
        sections.append(Section("Reaction Progress Kinetic Analysis (RPKA)", tuple(rpka_blocks),
                                intro="Blackmond, Angew. Chem. Int. Ed. 2005, 44, 4302: runs of the same excess pass "
                                      "through the same compositions and must overlay when shifted in time; a "
                                      "mismatch means catalyst deactivation or product inhibition. Runs of different "
                                      "excess give the order in the partner."))

    if outcome.initial_rates is not None:
        result = outcome.initial_rates
        blocks = []
        try:
            blocks.append(FigureBlock(
                "Initial rates", initial_rates_figure(result),
                "Each panel: ln r₀ of every run, corrected for the other factors at their fitted orders, against the "
                "log of one factor; the slope is the order in that factor. Points off the line point to a run or "
                "a factor the power law does not describe.", name="initial_rates"))
        except (KineticsError, KeyError, ValueError) as error:
            log.warning("initial-rates figure skipped: %s", error)
        rates = pd.DataFrame([{"run": r.label, "rate_mol_per_l_s": r.rate_mol_per_l_s, "stderr": r.stderr,
                               "n_points": r.n_points, "conversion_covered": r.conversion_covered}
                              for r in result.rates])
        exponent = int(math.floor(math.log10(max(abs(r.rate_mol_per_l_s) for r in result.rates) or 1.0)))
        shown = pd.DataFrame([{"run": r.label,
                               f"r₀ ± u / 10{numbers.superscript(exponent)} mol L⁻¹ s⁻¹":
                                   _pair(r.rate_mol_per_l_s, r.stderr, exponent),
                               "points": str(r.n_points), "conversion covered / %": f"{100 * r.conversion_covered:.0f}"}
                              for r in result.rates])
        blocks.append(TableBlock("Initial rate of each run", rates, name="initial_rates_per_run", display=shown,
                                 caption="Straight line through the points before 15 % conversion."))
        orders = pd.DataFrame([{"factor": f, **{k: v for k, v in o.to_dict().items() if k != "ci95"},
                                "ci95_low": (o.to_dict().get("ci95") or (None, None))[0],
                                "ci95_high": (o.to_dict().get("ci95") or (None, None))[1]}
                               for f, o in zip(result.factors, result.orders)])
        shown = pd.DataFrame([{"order in": f, "order ± u": numbers.format_uncertain(o.value, o.stderr),
                               "95 % interval": numbers.format_interval(*(o.to_dict().get("ci95") or (math.nan,) * 2))}
                              for f, o in zip(result.factors, result.orders)])
        blocks.append(TableBlock("Orders from initial rates", orders, name="initial_rate_orders", display=shown,
                                 caption=f"ln r₀ = ln k + Σ nᵢ ln xᵢ by least squares, {result.dof} degrees of "
                                         f"freedom, reduced χ² {result.reduced_chi_square:.2f}."))
        sections.append(Section("Initial rates", tuple(blocks),
                                intro="The rate at the start of each run against the design factors, on log-log axes."))
    return sections


def _pair(value: float, stderr: float, exponent: int) -> str:
    if not (math.isfinite(stderr) and stderr > 0):
        return numbers.format_value(value / 10 ** exponent, 3)
    r = numbers.round_pair(value, stderr, exponent=exponent)
    return f"{r.value} ± {r.uncertainty}"


def numbers_sentence(text: str) -> str:
    text = str(text).strip()
    text = text[:1].upper() + text[1:]
    return text if text.endswith((".", "!", "?")) else text + "."


def campaign_summary(outcome) -> dict:
    """The key results: k and each order with its interval, K_P when fitted, the same-excess verdicts."""
    summary = {}
    if outcome.fit is not None:
        left = f" (without {', '.join(outcome.excluded)})" if outcome.excluded else ""
        summary["rate law"] = f"{outcome.fit.description}{left}"
        for p in outcome.fit.parameters:
            if "@" in p.name:
                continue
            entry = p.to_dict()
            unit = _unit(entry.get("unit"))
            summary[_parameter_name(p.name, outcome.config.catalyst)] = numbers.format_estimate(
                {**entry, "unit": ""}) + (f" {unit}" if unit else "")
    if outcome.vtna is not None:
        summary["orders from VTNA"] = "; ".join(
            f"{name} {numbers.format_value(order, 3)} (95 %: {numbers.format_interval(*outcome.vtna.intervals[name])})"
            if all(math.isfinite(x) for x in outcome.vtna.intervals.get(name, (math.nan,) * 2))
            else f"{name} {numbers.format_value(order, 3)}" for name, order in outcome.vtna.orders.items())
    for r in outcome.same_excess:
        summary[f"same excess, {r.early} / {r.late}"] = (
            f"{'do NOT overlay' if r.flagged else 'overlay'} (rate ratio {r.rate_ratio:.2f}, "
            f"95 %: {numbers.format_interval(*r.rate_ratio_ci95)})")
    return summary


def _input_files(outcome) -> pd.DataFrame:
    rows = []
    for run in outcome.config.runs:
        path = run.table if run.table is not None else None
        digest = ""
        if path is not None and Path(path).is_file():
            digest = hashlib.sha256(Path(path).read_bytes()).hexdigest()
        rows.append({"run": run.label, "file": str(run.source), "sha256": digest})
    return pd.DataFrame(rows, columns=["run", "file", "sha256"])


def write_campaign_report(outcome, folder: str | Path | None = None):
    """Write the campaign report (``<out>/report/`` by default); returns :class:`kinetics.report.ReportFiles`."""
    from kinetics import report as rp

    config = outcome.config
    folder = Path(folder) if folder is not None else Path(outcome.out_dir) / "report"
    text = None
    if getattr(config, "path", None) is not None and Path(config.path).is_file():
        text = Path(config.path).read_text(encoding="utf-8")
    warnings = [numbers_sentence(w) for w in outcome.warnings] + [f"Note: {n}" for n in outcome.notes]
    return rp.write_report(folder, *report_sections(outcome), title=f"Campaign: {config.name}",
                           provenance=rp.Provenance(config_text=text, input_files=_input_files(outcome),
                                                    extra={"runs executed": str(outcome.info.get("where", ""))}),
                           summary=campaign_summary(outcome), warnings=warnings)
