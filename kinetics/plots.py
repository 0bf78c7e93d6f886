"""Figures for a kinetics run: spectra through time, concentration courses, Arrhenius, Eyring.

Every function takes plain inputs (NumPy arrays, mappings of arrays, objects with ``ppm``
and ``real`` such as :class:`kinetics.spectra.spectrum.Spectrum`) and returns a
:class:`matplotlib.figure.Figure` drawn on the Agg canvas.  Nothing touches
``matplotlib.pyplot``, so no figure lives in a global registry and nothing leaks between
calls; the caller saves (:func:`save_png`, :func:`png_bytes`) or embeds the figure.

Styles are this project's own.  Each data series gets a colour *and* a line style *and*
a marker from :data:`SERIES_STYLES`, so curves stay distinguishable when printed in
greyscale.  Every axis label names its unit ("chemical shift / ppm", "time / min",
"concentration / mol L⁻¹", "1000/T / K⁻¹").
"""

from __future__ import annotations

import functools
import io
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping, Sequence

import matplotlib
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from kinetics.atomic import write_atomic

__all__ = [
    "styled",
    "time_scale",
    "species_label",
    "SeriesStyle",
    "SERIES_STYLES",
    "series_style",
    "stacked_spectra_figure",
    "concentration_figure",
    "fit_figure",
    "arrhenius_figure",
    "eyring_figure",
    "global_fit_figure",
    "live_figure",
    "png_bytes",
    "svg_bytes",
    "pdf_bytes",
    "save_png",
    "save_figure",
    "SINGLE_COLUMN_CM",
    "DOUBLE_COLUMN_CM",
    "figure_width_in",
]

SINGLE_COLUMN_CM = 8.5   # one journal column (common practice: 8.3-8.9 cm)
DOUBLE_COLUMN_CM = 17.5  # full page width (common practice: 17-18 cm)


def figure_width_in(width: str | float) -> float:
    """Figure width in inches: ``"single"`` (8.5 cm), ``"double"`` (17.5 cm) or a number of cm."""
    if width == "single":
        return SINGLE_COLUMN_CM / 2.54
    if width == "double":
        return DOUBLE_COLUMN_CM / 2.54
    return float(width) / 2.54


# Print sizes: 8 pt text, 7 pt ticks and legends, thin rules; no TeX (user text is drawn as
# written) and TrueType (Type 42) fonts in PDF, so no Type 3 fonts reach a journal.
_STYLE = {
    "text.usetex": False,
    "font.family": "DejaVu Sans",
    "font.size": 8.0,
    "axes.labelsize": 8.0,
    "axes.titlesize": 8.5,
    "xtick.labelsize": 7.0,
    "ytick.labelsize": 7.0,
    "legend.fontsize": 7.0,
    "axes.linewidth": 0.6,
    "xtick.major.width": 0.6,
    "ytick.major.width": 0.6,
    "lines.linewidth": 1.2,
    "lines.markersize": 4.0,
    "axes.formatter.use_mathtext": True,
    "axes.formatter.limits": (-3, 4),
    "pdf.fonttype": 42,
    "ps.fonttype": 42,
    "svg.fonttype": "path",
    "figure.constrained_layout.h_pad": 0.03,
    "figure.constrained_layout.w_pad": 0.03,
}


def _styled(function):
    """Build the figure inside this module's style (rcParams restored afterwards)."""
    @functools.wraps(function)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(_STYLE):
            return function(*args, **kwargs)
    return wrapper



@dataclass(frozen=True)
class SeriesStyle:
    """How one data series is drawn: colour, line style and marker."""

    colour: str
    linestyle: str | tuple
    marker: str


# The project's palette.  The first three series (the usual reactant, product and standard)
# sit far apart in lightness (relative luminance ~0.18, 0.44, 0.66: dark ink, mid orange,
# light mustard), so they differ in greyscale print even by tone.  All seven stay at least
# ~20 CIELAB units apart under simulated deuteranopia, protanopia and tritanopia as well as
# normal vision (checked in tests/test_plots.py).  Every series also has its own line style
# and marker, so none relies on hue or tone alone.
SERIES_STYLES: tuple[SeriesStyle, ...] = (
    SeriesStyle("#1f2f56", "-", "o"),            # deep ink blue
    SeriesStyle("#b8641a", "--", "s"),           # burnt orange
    SeriesStyle("#d9a52b", (0, (2, 1)), "P"),    # mustard
    SeriesStyle("#56a5dc", "-.", "^"),           # sky blue
    SeriesStyle("#8a3f9e", ":", "D"),            # plum
    SeriesStyle("#4e3324", (0, (6, 2, 1, 2, 1, 2)), "v"),  # dark umber
    SeriesStyle("#9aab8a", (0, (8, 3)), "X"),    # sage
)

_BAND_ALPHA = 0.22
_WINDOW_FILL = "#e3d7b5"
_WINDOW_HATCHES = ("", "//", "\\\\", "..", "xx", "||")
_TRACE_DARK = np.array([0.09, 0.13, 0.27])   # first spectrum
_TRACE_LIGHT = np.array([0.35, 0.62, 0.58])  # last spectrum
#: the shaded signal windows and the trace colour ramp, for the live page (kinetics.livepage)
PAGE_COLOURS = {"window_fill": _WINDOW_FILL, "window_edge": "#8c7a4a", "window_alpha": 0.55,
                "first_trace": tuple(_TRACE_DARK), "last_trace": tuple(_TRACE_LIGHT)}
_PNG_METADATA = {"Software": None}  # keeps the files free of tool banners and URLs


def _plain(text) -> str:
    """User text (species, window and run names, titles) shown as written.

    Matplotlib reads text between two ``$`` as mathtext and raises on what it cannot
    parse (a name like ``cost $\\frac$`` would stop the whole report); an escaped
    dollar is drawn as a plain ``$``.
    """
    return str(text).replace("$", r"\$")


def series_style(index: int) -> SeriesStyle:
    """The style of the ``index``-th data series (cycles after the table ends)."""
    return SERIES_STYLES[index % len(SERIES_STYLES)]


def _new_figure(width_in: float, height_in: float) -> Figure:
    figure = Figure(figsize=(width_in, height_in), layout="constrained")
    FigureCanvasAgg(figure)
    return figure


def _style_axes(ax) -> None:
    ax.grid(True, color="#d8d8d8", linewidth=0.6, linestyle="-")
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    ax.tick_params(direction="out", length=3)


_TIME_DECIMALS = {"s": 0, "min": 1, "h": 2}  # one spacing for every trace label


def _time_scale(max_time_s: float) -> tuple[float, str]:
    """Divisor and unit name so the time axis reads in s, min or h."""
    if max_time_s >= 3 * 3600:
        return 3600.0, "h"
    if max_time_s >= 180:
        return 60.0, "min"
    return 1.0, "s"


# Public names for the other figure modules (kinetics.campaign.figures): the same style
# context and the same choice of time unit, so every figure of the project looks alike.
styled = _styled
time_scale = _time_scale


# ---------------------------------------------------------------- spectra
def _as_trace(item) -> tuple[np.ndarray, np.ndarray]:
    if hasattr(item, "ppm") and hasattr(item, "real"):
        return np.asarray(item.ppm, float), np.asarray(item.real, float)
    ppm, intensity = item
    return np.asarray(ppm, float), np.asarray(intensity, float)


def _as_windows(windows) -> list[tuple[str, float, float]]:
    if windows is None:
        return []
    if isinstance(windows, Mapping):
        items = [(name, *bounds) for name, bounds in windows.items()]
    else:
        items = [tuple(w) for w in windows]
    return [(str(name), float(min(lo, hi)), float(max(lo, hi))) for name, lo, hi in items]


def _pick_traces(n_spectra: int, max_traces: int) -> np.ndarray:
    if n_spectra <= max_traces:
        return np.arange(n_spectra)
    return np.unique(np.round(np.linspace(0, n_spectra - 1, max_traces)).astype(int))


@_styled
def stacked_spectra_figure(
    spectra: Sequence,
    *,
    time_s: Sequence[float] | None = None,
    windows=None,
    ppm_limits: tuple[float, float] | None = None,
    max_traces: int = 12,
    title: str | None = None,
    width: str | float = "double",
    height_in: float | None = None,
) -> Figure:
    """Spectra through time, stacked bottom (first) to top (last), tracked windows shaded.

    Parameters
    ----------
    spectra : sequence of Spectrum or (ppm, intensity) pairs, length n
        Each ``ppm`` and ``intensity`` array has shape (m_i,); spectra may differ in length.
    time_s : sequence of float, shape (n,), optional
        Time of each spectrum from reaction start; labels each trace.
    windows : mapping name -> (low_ppm, high_ppm) or sequence of (name, low, high), optional
        Signal windows to shade (each with its own hatch, so they read in greyscale).  With
        windows the traces are scaled to the tallest signal inside them, and anything
        taller (a solvent line) is clipped at 1.6 times that height.
    ppm_limits : (high_ppm, low_ppm), optional
        Shift range shown; default the range of the first spectrum.
    max_traces : int
        At most this many spectra are drawn, evenly spaced through the series (first and
        last always included).
    title : str, optional
    width : "single", "double" or float (cm)
        Print width (8.5 cm, 17.5 cm or the given centimetres).
    height_in : float, optional
        Figure height in inches (default: grows with the number of traces).

    Returns
    -------
    Figure
    """
    if len(spectra) == 0:
        raise ValueError("stacked_spectra_figure needs at least one spectrum")
    traces = [_as_trace(item) for item in spectra]
    chosen = _pick_traces(len(traces), max(2, int(max_traces)))
    if ppm_limits is None:
        first_ppm = traces[0][0]
        ppm_limits = (float(first_ppm.max()), float(first_ppm.min()))
    high, low = max(ppm_limits), min(ppm_limits)

    window_list = _as_windows(windows)
    heights = []
    for ppm, intensity in (traces[i] for i in chosen):
        inside = (ppm <= high) & (ppm >= low)
        if window_list:
            # scale to the tracked signals, so a huge solvent line does not flatten them
            inside &= np.any([(ppm >= lo) & (ppm <= hi) for _, lo, hi in window_list], axis=0)
        heights.append(np.ptp(intensity[inside]) if inside.any() else 0.0)
    reference_height = max(heights) if heights and max(heights) > 0 else 1.0
    step = 0.35 * reference_height if not window_list else 0.8 * reference_height
    clip_height = None if not window_list else 1.6 * reference_height

    width_in = figure_width_in(width)
    figure = _new_figure(width_in, height_in or min(1.6 + 0.22 * len(chosen), 1.1 * width_in))
    ax = figure.add_subplot(1, 1, 1)
    for number, (name, lo, hi) in enumerate(window_list):
        ax.axvspan(lo, hi, facecolor=_WINDOW_FILL, edgecolor="#8c7a4a", alpha=0.55,
                   hatch=_WINDOW_HATCHES[number % len(_WINDOW_HATCHES)], linewidth=0.6, zorder=0)
        # labels of neighbouring windows alternate in height so they do not overprint
        ax.text(0.5 * (lo + hi), 1.01 + 0.05 * (number % 3), _plain(name), transform=ax.get_xaxis_transform(),
                ha="center", va="bottom", fontsize=7, color="#4a3f22", rotation=0, clip_on=False)

    scale, unit = _time_scale(max(time_s) if time_s is not None and len(time_s) else 0.0)
    for rank, index in enumerate(chosen):
        ppm, intensity = traces[index]
        inside = (ppm <= high + 1e-12) & (ppm >= low - 1e-12)
        fraction = rank / max(1, len(chosen) - 1)
        colour = tuple(_TRACE_DARK + fraction * (_TRACE_LIGHT - _TRACE_DARK))
        offset = rank * step
        shown = intensity[inside] if clip_height is None else np.minimum(intensity[inside], clip_height)
        ax.plot(ppm[inside], shown + offset, color=colour, linewidth=0.8)
        if time_s is not None:
            ax.text(low, offset, f" {time_s[index] / scale:.{_TIME_DECIMALS[unit]}f} {unit}", fontsize=6.5,
                    va="bottom", ha="left", color=colour, clip_on=False)
    ax.set_xlim(high, low)  # chemical shift increases to the left, as spectra are drawn
    ax.set_xlabel("chemical shift / ppm")
    ax.set_ylabel("intensity, offset per spectrum / arb. units")
    ax.set_yticks([])
    _style_axes(ax)
    ax.grid(False)
    ax.spines["left"].set_visible(False)
    if title:
        figure.suptitle(_plain(title), fontsize=9)
    return figure


# ---------------------------------------------------------------- concentrations
def _as_array_map(values) -> dict[str, np.ndarray]:
    if values is None:
        return {}
    return {str(name): np.asarray(array, float) for name, array in values.items()}


@_styled
def concentration_figure(
    time_s,
    observed: Mapping[str, Sequence[float]],
    *,
    sigma: Mapping[str, Sequence[float]] | None = None,
    curve_time_s=None,
    curve: Mapping[str, Sequence[float]] | None = None,
    band: Mapping[str, tuple[Sequence[float], Sequence[float]]] | None = None,
    fitted: Mapping[str, Sequence[float]] | None = None,
    concentration_unit: str = "mol L⁻¹",
    title: str | None = None,
    width: str | float = "double",
    start_label: str | None = None,
) -> Figure:
    """Concentration time courses with fitted curves, 95 % bands and a residual panel.

    Parameters
    ----------
    time_s : array, shape (n,)
        Times of the measured points from reaction start, in s.
    observed : mapping species -> array, shape (n,)
        Measured concentrations (NaN points are skipped).
    sigma : mapping species -> array, shape (n,), optional
        Standard uncertainty of each point (drawn as error bars).
    curve_time_s : array, shape (m,), optional
        Times of the predicted curve, in s.
    curve : mapping species -> array, shape (m,), optional
        Fitted (predicted) concentrations on ``curve_time_s``.
    band : mapping species -> (low, high), each shape (m,), optional
        95 % band of the predicted curve.
    fitted : mapping species -> array, shape (n,), optional
        Model value at the measured times, for residuals; when absent it is interpolated
        from ``curve``.
    concentration_unit : str
        Unit written on the concentration axes (e.g. ``"mol L⁻¹"`` or ``"fraction"``).
    title : str, optional
    width : "single", "double" or float (cm)
    start_label : str, optional
        What time zero is (e.g. "from 08:30"), added to the time axis label.

    Every species gets its own marker, line style and colour; put products, the standard
    and a mass balance (sum of reactant and products) in ``observed`` under their own
    names to show them: each is drawn with its band and residuals where a curve is given.

    Returns
    -------
    Figure
        One panel of courses, and below it a residual panel when a curve is given.
    """
    time_s = np.asarray(time_s, float)
    observed = _as_array_map(observed)
    sigma, curve, fitted = _as_array_map(sigma), _as_array_map(curve), _as_array_map(fitted)
    band = {str(k): (np.asarray(v[0], float), np.asarray(v[1], float)) for k, v in (band or {}).items()}
    if not observed:
        raise ValueError("concentration_figure needs at least one observed species")
    curve_t = None if curve_time_s is None else np.asarray(curve_time_s, float)
    all_times = [time_s] + ([curve_t] if curve_t is not None else [])
    scale, unit = _time_scale(float(np.nanmax(np.concatenate(all_times))) if time_s.size else 0.0)
    with_residuals = bool(curve) and curve_t is not None

    width_in = figure_width_in(width)
    height_in = (0.78 if with_residuals else 0.6) * width_in if width_in < 5 else (4.3 if with_residuals else 3.2)
    figure = _new_figure(width_in, height_in)
    if with_residuals:
        grid = figure.add_gridspec(2, 1, height_ratios=(3, 1.2))
        ax = figure.add_subplot(grid[0])
        ax_res = figure.add_subplot(grid[1], sharex=ax)
    else:
        ax, ax_res = figure.add_subplot(1, 1, 1), None

    for number, (name, values) in enumerate(observed.items()):
        style = series_style(number)
        errors = sigma.get(name)
        ax.errorbar(time_s / scale, values, yerr=errors, linestyle="none", marker=style.marker,
                    markersize=4, markerfacecolor="white", markeredgecolor=style.colour,
                    ecolor=style.colour, elinewidth=0.7, capsize=1.5, label=f"{_plain(name)} measured")
        if name in band and curve_t is not None:
            low, high = band[name]
            ax.fill_between(curve_t / scale, low, high, color=style.colour, alpha=_BAND_ALPHA,
                            linewidth=0, label=f"{_plain(name)} 95 % band")
        if name in curve and curve_t is not None:
            ax.plot(curve_t / scale, curve[name], color=style.colour, linestyle=style.linestyle,
                    linewidth=1.6, label=f"{_plain(name)} fit")
        if ax_res is not None and (name in fitted or name in curve):
            model = fitted[name] if name in fitted else np.interp(time_s, curve_t, curve[name])
            ax_res.errorbar(time_s / scale, values - model, yerr=errors, linestyle="none",
                            marker=style.marker, markersize=3.5, markerfacecolor="white",
                            markeredgecolor=style.colour, ecolor=style.colour, elinewidth=0.6)
    ax.set_ylabel(f"concentration / {_plain(concentration_unit)}")
    # the legend sits above the panel, never over the data
    handles, labels = ax.get_legend_handles_labels()
    n_cols = min(len(labels), 3 if width_in > 5 else 2)
    ax.legend(handles, labels, fontsize=6.5, frameon=False, ncols=max(n_cols, 1), loc="lower left",
              bbox_to_anchor=(0.0, 1.01), borderaxespad=0.0, handlelength=2.4, columnspacing=1.0)
    _style_axes(ax)
    time_label = f"time / {unit}" if not start_label else f"time {_plain(start_label)} / {unit}"
    if ax_res is not None:
        ax_res.axhline(0.0, color="#444444", linewidth=0.8)
        ax_res.set_ylabel(f"residual / {_plain(concentration_unit)}")
        ax_res.set_xlabel(time_label)
        _style_axes(ax_res)
        ax.tick_params(labelbottom=False)
    else:
        ax.set_xlabel(time_label)
    if title:
        figure.suptitle(_plain(title), fontsize=9)
    return figure


def species_label(column: str) -> str:
    """``ester_concentration`` -> ``ester``: the legend names the species, the axis the quantity."""
    return column[: -len("_concentration")] if column.endswith("_concentration") and len(column) > 14 else column


def fit_figure(fit, *, species: Mapping | None = None, concentration_unit: str = "mol L⁻¹",
               n_curve: int = 300, title: str | None = None, width: str | float = "double") -> Figure:
    """A rate-law fit: measured and fitted courses, 95 % band, residuals (:func:`concentration_figure`).

    Parameters
    ----------
    fit : kinetics.rates.fit.FitResult
        Read through ``time_s``, ``observed``/``fitted`` (m, n), ``columns``, ``band(t)``
        and ``data.sigma``.
    species : mapping name -> values or (values, sigma), optional
        Further measured series on the fit's time points (products, the standard, a mass
        balance), each shape (n,), drawn as points with error bars (no curve: the rate law
        did not fit them).
    concentration_unit, title, width : as in :func:`concentration_figure`
    n_curve : int
        Points of the fitted curve and its band.
    """
    time_s = np.asarray(fit.time_s, float)
    observed = np.atleast_2d(np.asarray(fit.observed, float))
    fitted = np.atleast_2d(np.asarray(fit.fitted, float))
    columns = [species_label(str(c)) for c in fit.columns]
    sigma_array = getattr(getattr(fit, "data", None), "sigma", None)
    curve_t = np.linspace(float(time_s.min()), float(time_s.max()), n_curve)
    curve, low, high = (np.atleast_2d(np.asarray(a, float)) for a in fit.band(curve_t))
    observed_map = dict(zip(columns, observed))
    sigma_map = {} if sigma_array is None else dict(zip(columns, np.atleast_2d(sigma_array)))
    for name, values in (species or {}).items():
        if isinstance(values, tuple) and len(values) == 2:
            values, errors = values
            if errors is not None:
                sigma_map[species_label(str(name))] = np.asarray(errors, float)
        values = np.asarray(values, float)
        if values.shape != time_s.shape:
            raise ValueError(f"species {name!r}: {values.shape[0] if values.ndim else 0} values for "
                             f"{time_s.size} time points")
        observed_map[species_label(str(name))] = values
    return concentration_figure(
        time_s, observed_map, sigma=sigma_map or None, curve_time_s=curve_t, curve=dict(zip(columns, curve)),
        band={c: (lo, hi) for c, lo, hi in zip(columns, low, high) if np.all(np.isfinite(lo))},
        fitted=dict(zip(columns, fitted)), concentration_unit=concentration_unit, title=title, width=width)


def live_figure(table, signals: Sequence[str], curve: Mapping | None = None, *, sigma_suffix: str = "_stderr",
                band: Mapping | None = None, title: str | None = None, start_label: str | None = None,
                concentration_unit: str = "mol L⁻¹", width: str | float = "double") -> Figure:
    """The live view's figure: the series so far with the current fit, in the report's style.

    ``table`` needs ``time_s`` and a column per name in ``signals`` (``<name><sigma_suffix>``
    optional, drawn as error bars); ``curve`` is ``{"time_s": [...], name: [...]}`` of the
    fitted model and ``band`` ``{name: (low, high)}`` on the same times.  The residual panel
    appears once a curve is given.  This is :func:`concentration_figure` over a table.
    """
    present = [name for name in signals if name in getattr(table, "columns", ())]
    if not len(table) or not present:
        figure = _new_figure(figure_width_in(width), 2.0)
        ax = figure.add_subplot(1, 1, 1)
        ax.text(0.5, 0.5, "waiting for the first spectrum", ha="center", va="center", transform=ax.transAxes)
        ax.set_axis_off()
        return figure
    time_s = np.asarray(table["time_s"], float)
    observed = {name: np.asarray(table[name], float) for name in present}
    sigma = {name: np.asarray(table[f"{name}{sigma_suffix}"], float) for name in present
             if f"{name}{sigma_suffix}" in table}
    curve_t = curves = None
    if curve:
        curve_t = np.asarray(curve.get("time_s", []), float)
        curves = {name: values for name, values in curve.items()
                  if name != "time_s" and name in observed and len(values) == len(curve_t)}
    return concentration_figure(time_s, observed, sigma=sigma or None, curve_time_s=curve_t if curves else None,
                                curve=curves or None, band=band, concentration_unit=concentration_unit,
                                title=title, width=width, start_label=start_label)


# ---------------------------------------------------------------- temperature
def _is_temperature_result(item) -> bool:
    return hasattr(item, "arrhenius") and hasattr(item, "eyring") and hasattr(item, "temperature_kelvin")


def _result_line(result, which: str, n_line: int = 100) -> dict:
    """The weighted line of a TemperatureResult with its 95 % band, on a temperature grid."""
    t = np.asarray(result.temperature_kelvin, float)
    x = 1.0 / t
    pad = 0.06 * np.ptp(x) if np.ptp(x) > 0 else 0.02 * x.mean()
    grid_x = np.linspace(x.min() - pad, x.max() + pad, n_line)
    value, low, high = getattr(result, which).band95(grid_x, result.basis)
    return {"temperature_kelvin": 1.0 / grid_x, "value": value, "low": low, "high": high}


def _temperature_figure(
    temperature_kelvin, y, y_sigma, *, line, ylabel: str, annotation: str | None,
    labels: Sequence[str] | None, title: str | None, width="single", global_line=None,
) -> Figure:
    temperature_kelvin = np.asarray(temperature_kelvin, float)
    x = 1000.0 / temperature_kelvin
    width_in = figure_width_in(width)
    figure = _new_figure(width_in, 0.92 * width_in if width_in < 5 else 0.6 * width_in)
    ax = figure.add_subplot(1, 1, 1)
    style, line_style, global_style = series_style(0), series_style(1), series_style(3)
    if line is not None:
        line_x = 1000.0 / np.asarray(line["temperature_kelvin"], float)
        order = np.argsort(line_x)
        if line.get("low") is not None and line.get("high") is not None:
            ax.fill_between(line_x[order], np.asarray(line["low"], float)[order],
                            np.asarray(line["high"], float)[order], color=line_style.colour,
                            alpha=_BAND_ALPHA, linewidth=0, label="95 % band")
        ax.plot(line_x[order], np.asarray(line["value"], float)[order], color=line_style.colour,
                linestyle="-", linewidth=1.3, label="weighted line (two-step)")
    if global_line is not None:
        gx = 1000.0 / np.asarray(global_line["temperature_kelvin"], float)
        order = np.argsort(gx)
        ax.plot(gx[order], np.asarray(global_line["value"], float)[order], color=global_style.colour,
                linestyle="--", linewidth=1.3, label="global fit")
    ax.errorbar(x, y, yerr=y_sigma, linestyle="none", marker=style.marker, markersize=4.5,
                markerfacecolor="white", markeredgecolor=style.colour, ecolor=style.colour,
                capsize=2.0, elinewidth=0.8, label="runs (± u)", zorder=3)
    if labels is not None:
        for xi, yi, text in zip(x, y, labels):
            ax.annotate(_plain(text), (xi, yi), textcoords="offset points", xytext=(4, -9), fontsize=6.5)
    ax.set_xlabel("1000/T / K⁻¹")
    ax.set_ylabel(ylabel)
    # ticks a little beyond the data on both sides keep the end labels inside the figure
    span = np.ptp(x) if np.ptp(x) > 0 else 0.05 * x.mean()
    ax.set_xlim(x.min() - 0.1 * span, x.max() + 0.1 * span)
    top = ax.secondary_xaxis("top", functions=(lambda v: 1000.0 / np.asarray(v, float) - 273.15,
                                               lambda c: 1000.0 / (np.asarray(c, float) + 273.15)))
    top.set_xlabel("temperature / °C")
    if annotation:
        ax.text(0.97, 0.96, _plain(annotation), transform=ax.transAxes, ha="right", va="top", fontsize=7,
                bbox={"boxstyle": "round,pad=0.3", "facecolor": "white", "edgecolor": "#999999", "linewidth": 0.5})
    ax.legend(fontsize=6.5, frameon=False, loc="lower left", handlelength=2.4)
    _style_axes(ax)
    ax.spines["top"].set_visible(True)
    if title:
        figure.suptitle(_plain(title), fontsize=9)
    return figure


def _relative_sigma(k, k_stderr) -> np.ndarray | None:
    if k_stderr is None:
        return None
    return np.asarray(k_stderr, float) / np.asarray(k, float)


def _temperature_inputs(first, k_per_s, k_stderr_per_s, line, which):
    """(T, k, u(k), line, k unit) from a TemperatureResult or from plain arrays."""
    if _is_temperature_result(first):
        stderr = None if first.k_stderr is None else np.asarray(first.k_stderr, float)
        return (np.asarray(first.temperature_kelvin, float), np.asarray(first.k, float), stderr,
                line if line is not None else _result_line(first, which), getattr(first, "k_unit", "s^-1"))
    if k_per_s is None:
        raise ValueError("give a TemperatureResult, or temperatures and rate constants")
    return np.asarray(first, float), np.asarray(k_per_s, float), k_stderr_per_s, line, "s^-1"


def _global_ln_k(global_result, grid_kelvin) -> np.ndarray | None:
    if global_result is None or not getattr(global_result, "success", True):
        return None
    return np.log(np.asarray(global_result.k_at(grid_kelvin), float))


@_styled
def arrhenius_figure(
    temperature_kelvin,
    k_per_s=None,
    k_stderr_per_s=None,
    *,
    global_result=None,
    line: Mapping[str, Sequence[float]] | None = None,
    annotation: str | None = None,
    labels: Sequence[str] | None = None,
    title: str | None = None,
    width: str | float = "single",
) -> Figure:
    """Arrhenius plot: ln(k / s⁻¹) against 1000/T, the weighted line, its 95 % band, a °C top axis.

    ``ln k = ln A - Ea / (R T)``: a straight line of slope -Ea/(1000 R) on this axis.

    Either ``arrhenius_figure(result, global_result=None)`` with a
    :class:`kinetics.temperature.TemperatureResult` (line, band, labels and the Ea
    annotation are taken from it; with a :class:`~kinetics.temperature.GlobalFitResult`
    its line is drawn dashed), or the plain-array form below.

    Parameters
    ----------
    temperature_kelvin, k_per_s : array, shape (r,)
        One point per run.
    k_stderr_per_s : array, shape (r,), optional
        Standard error of k; drawn as σ(ln k) = σ(k)/k.
    global_result : GlobalFitResult, optional
        Its ln k(T) is drawn as a dashed line.
    line : mapping, optional
        ``temperature_kelvin`` (shape (m,)), ``value`` (ln k on it) and optionally ``low``
        and ``high`` (the 95 % band of ln k).
    annotation : str, optional
        Text placed in a box (e.g. "Ea = 75.2 ± 1.1 kJ mol⁻¹").
    labels : sequence of str, optional
        Text beside each point (e.g. run names).
    title : str, optional
    width : "single" (default), "double" or float (cm)
    """
    result = temperature_kelvin if _is_temperature_result(temperature_kelvin) else None
    t, k, k_u, line, k_unit = _temperature_inputs(temperature_kelvin, k_per_s, k_stderr_per_s, line, "arrhenius")
    if result is not None:
        from kinetics.numbers import format_uncertain

        ea = result.ea()
        annotation = annotation or f"Ea = {format_uncertain(ea.value, ea.stderr, 'kJ/mol')}"
        labels = labels if labels is not None else list(result.labels)
    global_line = None
    if global_result is not None:
        grid = np.asarray(line["temperature_kelvin"], float) if line is not None else np.linspace(t.min(), t.max(), 50)
        values = _global_ln_k(global_result, grid)
        global_line = None if values is None else {"temperature_kelvin": grid, "value": values}
    from kinetics.numbers import unit_text

    return _temperature_figure(t, np.log(k), _relative_sigma(k, k_u), line=line,
                               ylabel=f"ln(k / {unit_text(k_unit)})", annotation=annotation,
                               labels=labels, title=title, width=width, global_line=global_line)


@_styled
def eyring_figure(
    temperature_kelvin,
    k_per_s=None,
    k_stderr_per_s=None,
    *,
    global_result=None,
    line: Mapping[str, Sequence[float]] | None = None,
    annotation: str | None = None,
    labels: Sequence[str] | None = None,
    title: str | None = None,
    width: str | float = "single",
) -> Figure:
    """Eyring plot: ln((k/T) / s⁻¹ K⁻¹) against 1000/T, with the line, its 95 % band, a °C top axis.

    ``ln(k/T) = ln(κ k_B / h) + ΔS‡/R - ΔH‡/(R T)`` (transition-state theory, κ = 1).
    Called as :func:`arrhenius_figure` (a TemperatureResult, or plain arrays with ``line``
    holding ln(k/T)); from a result the annotation gives ΔH‡ and ΔS‡ rounded with their
    uncertainties.  ``global_result`` draws the global fit's ln(k/T) dashed.
    """
    result = temperature_kelvin if _is_temperature_result(temperature_kelvin) else None
    t, k, k_u, line, k_unit = _temperature_inputs(temperature_kelvin, k_per_s, k_stderr_per_s, line, "eyring")
    if result is not None:
        from kinetics.numbers import format_uncertain

        dh, ds = result.dh(), result.ds()
        annotation = annotation or (f"ΔH‡ = {format_uncertain(dh.value, dh.stderr, 'kJ/mol')}\n"
                                    f"ΔS‡ = {format_uncertain(ds.value, ds.stderr, 'J/(mol K)')}")
        labels = labels if labels is not None else list(result.labels)
    global_line = None
    if global_result is not None:
        grid = np.asarray(line["temperature_kelvin"], float) if line is not None else np.linspace(t.min(), t.max(), 50)
        values = _global_ln_k(global_result, grid)
        global_line = None if values is None else {"temperature_kelvin": grid, "value": values - np.log(grid)}
    from kinetics.numbers import unit_text

    return _temperature_figure(t, np.log(k / t), _relative_sigma(k, k_u), line=line,
                               ylabel=f"ln((k/T) / {unit_text(k_unit)} K⁻¹)", annotation=annotation,
                               labels=labels, title=title, width=width, global_line=global_line)


@_styled
def global_fit_figure(
    runs,
    global_result,
    model=None,
    *,
    concentration_unit: str = "mol L⁻¹",
    width: str | float = "double",
    max_columns: int = 4,
    title: str | None = None,
) -> Figure:
    """Every run's data with the curve of the global fit, one panel per run, residuals below.

    The global fit is ``k(T) = k_ref exp(-(Ea/R)(1/T - 1/T_ref))`` with one rate law over
    all runs; each panel has its own time axis (s, min or h) so runs of very different
    speed stay readable without a logarithmic time axis.

    Parameters
    ----------
    runs : sequence of kinetics.temperature.KineticRun
        ``label``, ``temperature_kelvin``, ``time_s``, ``concentration_mol_per_l`` and
        optionally ``sigma_mol_per_l``.
    global_result : kinetics.temperature.GlobalFitResult
        ``k_at(T)`` and ``nuisance`` (per-run parameters, same order as ``runs``).
    model : kinetics.temperature.GlobalModel, optional
        ``model.function(t, k, **nuisance)``; default: the rate law named by
        ``global_result.model_name``.  Without one only the data are drawn.
    concentration_unit, width, title :
        As for :func:`concentration_figure`.
    max_columns : int
        Panels per row.
    """
    runs = list(runs)
    if not runs:
        raise ValueError("global_fit_figure needs at least one run")
    if model is None and global_result is not None:
        from kinetics.errors import KineticsError

        try:  # the rate law named in the result (a custom function cannot be named: data only)
            model = global_result.model()
        except (KineticsError, ValueError, KeyError):
            model = None
    n_cols = min(len(runs), max_columns)
    n_rows = int(np.ceil(len(runs) / n_cols))
    width_in = figure_width_in(width)
    panel_h = 0.95 * width_in / n_cols
    figure = _new_figure(width_in, n_rows * panel_h * 1.45 + 0.3)
    grid = figure.add_gridspec(2 * n_rows, n_cols, height_ratios=[3, 1.2] * n_rows)
    nuisance = list(getattr(global_result, "nuisance", ())) if global_result is not None else []
    # residuals of a few mmol/L read better in mmol/L than with a "×10⁻³" offset label
    residual_scale, residual_unit = 1.0, concentration_unit
    if concentration_unit == "mol L⁻¹":
        residual_scale, residual_unit = 1e3, "mmol L⁻¹"
    shared = shared_res = None
    for i, run in enumerate(runs):
        row, col = divmod(i, n_cols)
        ax = figure.add_subplot(grid[2 * row, col], sharey=shared)
        ax_res = figure.add_subplot(grid[2 * row + 1, col], sharex=ax, sharey=shared_res)
        shared, shared_res = shared or ax, shared_res or ax_res
        style = series_style(i)
        time_s = np.asarray(run.time_s, float)
        conc = np.asarray(run.concentration_mol_per_l, float)
        sigma = getattr(run, "sigma_mol_per_l", None)
        scale, unit = _time_scale(float(time_s.max()) if time_s.size else 0.0)
        ax.errorbar(time_s / scale, conc, yerr=sigma, linestyle="none", marker=style.marker, markersize=3,
                    markerfacecolor="white", markeredgecolor=style.colour, ecolor=style.colour,
                    elinewidth=0.5, capsize=0, label="measured")
        if model is not None and i < len(nuisance) and time_s.size:
            k = float(global_result.k_at(run.temperature_kelvin))
            curve_t = np.linspace(0.0, float(time_s.max()), 300)
            ax.plot(curve_t / scale, model.function(curve_t, k, **nuisance[i]), color="#222222",
                    linestyle=style.linestyle, linewidth=1.1, label="global fit")
            residual = (conc - model.function(time_s, k, **nuisance[i])) * residual_scale
            ax_res.errorbar(time_s / scale, residual,
                            yerr=None if sigma is None else np.asarray(sigma, float) * residual_scale, linestyle="none", marker=style.marker,
                            markersize=2.5, markerfacecolor="white", markeredgecolor=style.colour,
                            ecolor=style.colour, elinewidth=0.5, capsize=0)
        ax_res.axhline(0.0, color="#444444", linewidth=0.7)
        celsius = f"{run.temperature_kelvin - 273.15:.1f} °C"
        label = str(run.label)
        same = label.replace(" ", "") in {celsius.replace(" ", ""), f"{run.temperature_kelvin - 273.15:g}°C"}
        ax.set_title(celsius if same else f"{_plain(label)}, {celsius}", fontsize=7.5)
        ax_res.set_xlabel(f"time / {unit}")
        ax.tick_params(labelbottom=False)
        if col == 0:
            ax.set_ylabel(f"c / {_plain(concentration_unit)}")  # short: the panels are small
            ax_res.set_ylabel(f"c − fit / {_plain(residual_unit)}", fontsize=7)
        else:
            ax.tick_params(labelleft=False)
            ax_res.tick_params(labelleft=False)
        if i == 0:
            ax.legend(fontsize=6, frameon=False, loc="upper right", handlelength=2.0)
        _style_axes(ax)
        _style_axes(ax_res)
    figure.align_ylabels()
    if title:
        figure.suptitle(_plain(title), fontsize=9)
    return figure


# ---------------------------------------------------------------- output
def _save(figure: Figure, fmt: str, dpi: int) -> bytes:
    buffer = io.BytesIO()
    metadata = _PNG_METADATA if fmt == "png" else ({"Creator": None, "Producer": None} if fmt == "pdf" else {"Creator": None})
    with matplotlib.rc_context({"pdf.fonttype": 42, "ps.fonttype": 42, "svg.fonttype": "path",
                                "svg.hashsalt": "kinetics"}):
        figure.savefig(buffer, format=fmt, dpi=dpi, metadata=metadata, facecolor="white")
    return buffer.getvalue()


def png_bytes(figure: Figure, dpi: int = 300) -> bytes:
    """The figure as PNG bytes (no software banner in the metadata)."""
    return _save(figure, "png", dpi)


def svg_bytes(figure: Figure) -> bytes:
    """The figure as SVG (text as paths, so it looks the same without our fonts)."""
    return _save(figure, "svg", 72)


def pdf_bytes(figure: Figure) -> bytes:
    """The figure as a one-page vector PDF with embedded TrueType (Type 42) fonts, no Type 3."""
    return _save(figure, "pdf", 300)


def save_png(figure: Figure, path: str | Path, dpi: int = 300) -> Path:
    """Write the figure as a PNG file atomically (temporary file, then rename)."""
    return write_atomic(path, png_bytes(figure, dpi=dpi))


def save_figure(figure: Figure, stem: str | Path, formats: Sequence[str] = ("svg", "png"),
                dpi: int = 300) -> dict[str, Path]:
    """Write ``stem.svg``, ``stem.png`` (``dpi``) and/or ``stem.pdf`` atomically; returns format -> path."""
    stem = Path(stem)
    makers = {"svg": lambda: svg_bytes(figure), "png": lambda: png_bytes(figure, dpi), "pdf": lambda: pdf_bytes(figure)}
    return {fmt: write_atomic(stem.with_suffix(f".{fmt}"), makers[fmt]()) for fmt in formats}
