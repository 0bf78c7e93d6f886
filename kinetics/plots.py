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

import io
from dataclasses import dataclass
from pathlib import Path
from typing import Mapping, Sequence

import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.figure import Figure

from kinetics.atomic import write_atomic

__all__ = [
    "SeriesStyle",
    "SERIES_STYLES",
    "series_style",
    "stacked_spectra_figure",
    "concentration_figure",
    "arrhenius_figure",
    "eyring_figure",
    "png_bytes",
    "save_png",
]


@dataclass(frozen=True)
class SeriesStyle:
    """How one data series is drawn: colour, line style and marker."""

    colour: str
    linestyle: str | tuple
    marker: str


# The first three series (the usual reactant, product and standard) sit far apart in
# lightness (relative luminance ~0.18, 0.44, 0.66: dark ink, mid orange, light mustard),
# so they differ in greyscale print even by tone; every series also has its own line
# style and marker, so none relies on hue or tone alone.
SERIES_STYLES: tuple[SeriesStyle, ...] = (
    SeriesStyle("#1f2f56", "-", "o"),            # deep ink blue
    SeriesStyle("#b8641a", "--", "s"),           # burnt orange
    SeriesStyle("#d9a52b", (0, (2, 1)), "P"),    # mustard
    SeriesStyle("#2c7a6b", "-.", "^"),           # sea green
    SeriesStyle("#8a2f48", ":", "D"),            # wine
    SeriesStyle("#6f6a5e", (0, (6, 2, 1, 2, 1, 2)), "v"),  # warm grey
    SeriesStyle("#4b3b7a", (0, (8, 3)), "X"),    # indigo
)

_BAND_ALPHA = 0.22
_WINDOW_FILL = "#e3d7b5"
_WINDOW_HATCHES = ("", "//", "\\\\", "..", "xx", "||")
_TRACE_DARK = np.array([0.09, 0.13, 0.27])   # first spectrum
_TRACE_LIGHT = np.array([0.35, 0.62, 0.58])  # last spectrum
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


def _time_scale(max_time_s: float) -> tuple[float, str]:
    """Divisor and unit name so the time axis reads in s, min or h."""
    if max_time_s >= 3 * 3600:
        return 3600.0, "h"
    if max_time_s >= 180:
        return 60.0, "min"
    return 1.0, "s"


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


def stacked_spectra_figure(
    spectra: Sequence,
    *,
    time_s: Sequence[float] | None = None,
    windows=None,
    ppm_limits: tuple[float, float] | None = None,
    max_traces: int = 12,
    title: str | None = None,
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

    figure = _new_figure(7.5, 2.2 + 0.32 * len(chosen))
    ax = figure.add_subplot(1, 1, 1)
    for number, (name, lo, hi) in enumerate(window_list):
        ax.axvspan(lo, hi, facecolor=_WINDOW_FILL, edgecolor="#8c7a4a", alpha=0.55,
                   hatch=_WINDOW_HATCHES[number % len(_WINDOW_HATCHES)], linewidth=0.6, zorder=0)
        # labels of neighbouring windows alternate in height so they do not overprint
        ax.text(0.5 * (lo + hi), 1.0 + 0.045 * (number % 3), _plain(name), transform=ax.get_xaxis_transform(),
                ha="center", va="bottom", fontsize=8, color="#4a3f22", rotation=0, clip_on=False)

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
            ax.text(low, offset, f" {time_s[index] / scale:.3g} {unit}", fontsize=7,
                    va="bottom", ha="left", color=colour, clip_on=False)
    ax.set_xlim(high, low)  # chemical shift increases to the left, as spectra are drawn
    ax.set_xlabel("chemical shift / ppm")
    ax.set_ylabel("intensity, offset per spectrum / arb. units")
    ax.set_yticks([])
    _style_axes(ax)
    ax.grid(False)
    ax.spines["left"].set_visible(False)
    if title:
        figure.suptitle(_plain(title), fontsize=11)
    return figure


# ---------------------------------------------------------------- concentrations
def _as_array_map(values) -> dict[str, np.ndarray]:
    if values is None:
        return {}
    return {str(name): np.asarray(array, float) for name, array in values.items()}


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

    figure = _new_figure(7.5, 6.0 if with_residuals else 4.2)
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
    ax.legend(fontsize=7, frameon=False, ncols=2 if len(observed) > 1 else 1)
    _style_axes(ax)
    if ax_res is not None:
        ax_res.axhline(0.0, color="#444444", linewidth=0.8)
        ax_res.set_ylabel(f"residual / {_plain(concentration_unit)}")
        ax_res.set_xlabel(f"time / {unit}")
        _style_axes(ax_res)
        ax.tick_params(labelbottom=False)
    else:
        ax.set_xlabel(f"time / {unit}")
    if title:
        figure.suptitle(_plain(title), fontsize=11)
    return figure


# ---------------------------------------------------------------- temperature
def _temperature_figure(
    temperature_kelvin, y, y_sigma, *, line, ylabel: str, annotation: str | None,
    labels: Sequence[str] | None, title: str | None,
) -> Figure:
    temperature_kelvin = np.asarray(temperature_kelvin, float)
    x = 1000.0 / temperature_kelvin
    figure = _new_figure(6.0, 4.4)
    ax = figure.add_subplot(1, 1, 1)
    style = series_style(0)
    if line is not None:
        line_x = 1000.0 / np.asarray(line["temperature_kelvin"], float)
        order = np.argsort(line_x)
        if line.get("low") is not None and line.get("high") is not None:
            ax.fill_between(line_x[order], np.asarray(line["low"], float)[order],
                            np.asarray(line["high"], float)[order], color=series_style(1).colour,
                            alpha=_BAND_ALPHA, linewidth=0, label="95 % band")
        ax.plot(line_x[order], np.asarray(line["value"], float)[order], color=series_style(1).colour,
                linestyle=series_style(1).linestyle, linewidth=1.5, label="weighted fit")
    ax.errorbar(x, y, yerr=y_sigma, linestyle="none", marker=style.marker, markersize=5,
                markerfacecolor="white", markeredgecolor=style.colour, ecolor=style.colour,
                capsize=2.5, elinewidth=0.9, label="runs (±1 σ)")
    if labels is not None:
        for xi, yi, text in zip(x, y, labels):
            ax.annotate(_plain(text), (xi, yi), textcoords="offset points", xytext=(5, 4), fontsize=7)
    ax.set_xlabel("1000/T / K⁻¹")
    ax.set_ylabel(ylabel)
    top = ax.secondary_xaxis("top", functions=(lambda v: 1000.0 / np.asarray(v) - 273.15,
                                               lambda c: 1000.0 / (np.asarray(c) + 273.15)))
    top.set_xlabel("temperature / °C", fontsize=8)
    top.tick_params(labelsize=7)
    if annotation:
        ax.text(0.98, 0.96, _plain(annotation), transform=ax.transAxes, ha="right", va="top", fontsize=8,
                bbox={"boxstyle": "round,pad=0.3", "facecolor": "white", "edgecolor": "#999999"})
    ax.legend(fontsize=7, frameon=False, loc="lower left")
    _style_axes(ax)
    ax.spines["top"].set_visible(True)
    if title:
        figure.suptitle(_plain(title), fontsize=11)
    return figure


def _relative_sigma(k, k_stderr) -> np.ndarray | None:
    if k_stderr is None:
        return None
    return np.asarray(k_stderr, float) / np.asarray(k, float)


def arrhenius_figure(
    temperature_kelvin,
    k_per_s,
    k_stderr_per_s=None,
    *,
    line: Mapping[str, Sequence[float]] | None = None,
    annotation: str | None = None,
    labels: Sequence[str] | None = None,
    title: str | None = None,
) -> Figure:
    """Arrhenius plot: ln(k / s⁻¹) against 1000/T, with the fit line and its 95 % band.

    Parameters
    ----------
    temperature_kelvin, k_per_s : array, shape (r,)
        One point per run.
    k_stderr_per_s : array, shape (r,), optional
        Standard error of k; drawn as σ(ln k) = σ(k)/k.
    line : mapping, optional
        ``temperature_kelvin`` (shape (m,)), ``value`` (ln k on it) and optionally ``low``
        and ``high`` (the 95 % band of ln k).
    annotation : str, optional
        Text placed in a box (e.g. "Ea = 75.2 ± 1.1 kJ/mol").
    labels : sequence of str, optional
        Text beside each point (e.g. run names).
    title : str, optional
    """
    y = np.log(np.asarray(k_per_s, float))
    return _temperature_figure(temperature_kelvin, y, _relative_sigma(k_per_s, k_stderr_per_s),
                               line=line, ylabel="ln(k / s⁻¹)", annotation=annotation,
                               labels=labels, title=title)


def eyring_figure(
    temperature_kelvin,
    k_per_s,
    k_stderr_per_s=None,
    *,
    line: Mapping[str, Sequence[float]] | None = None,
    annotation: str | None = None,
    labels: Sequence[str] | None = None,
    title: str | None = None,
) -> Figure:
    """Eyring plot: ln(k/T / s⁻¹ K⁻¹) against 1000/T, with the fit line and its 95 % band.

    Parameters are as for :func:`arrhenius_figure`; ``line['value']`` (and ``low``/``high``)
    are ln(k/T) on ``line['temperature_kelvin']``.
    """
    temperature_kelvin = np.asarray(temperature_kelvin, float)
    y = np.log(np.asarray(k_per_s, float) / temperature_kelvin)
    return _temperature_figure(temperature_kelvin, y, _relative_sigma(k_per_s, k_stderr_per_s),
                               line=line, ylabel="ln((k/T) / s⁻¹ K⁻¹)", annotation=annotation,
                               labels=labels, title=title)


# ---------------------------------------------------------------- output
def png_bytes(figure: Figure, dpi: int = 130) -> bytes:
    """The figure as PNG bytes (no software banner in the metadata)."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", dpi=dpi, metadata=_PNG_METADATA, facecolor="white")
    return buffer.getvalue()


def save_png(figure: Figure, path: str | Path, dpi: int = 130) -> Path:
    """Write the figure as a PNG file atomically (temporary file, then rename)."""
    return write_atomic(path, png_bytes(figure, dpi=dpi))
