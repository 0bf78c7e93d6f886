"""The live page's data: one JSON document per redraw, built from a run's state.

The page (:mod:`kinetics.livepage.page`) draws whatever this document holds; it never
reads the run's other files.  The document is written twice, atomically, by
:func:`kinetics.run.outputs.write_page`:

* ``live.json`` — fetched by the page when it is served over HTTP (127.0.0.1);
* ``live-data.js`` — the same document as a script that sets ``window.kineticsLiveData``,
  for a page opened as a file (a ``file://`` page cannot fetch JSON, but it can load a
  script; the page adds a new script tag with a cache-busting query to re-read it).

Shape (every number in SI or the unit named in its key; NaN written as null)::

    {"format": 1, "run": name, "state": "running" | "finished" | "stopped",
     "reason": text or null, "updated_utc", "started_utc", "refresh_s",
     "counts": {"taken", "quarantined", "pending", "duplicate", "replaced"},
     "quarantined": [{"path", "reason"}],          # the latest few
     "status_lines": [[label, text], ...],         # as the terminal view shows them
     "concentration_unit": "mol L⁻¹",
     "time_origin_utc": ISO time of t = 0, or null,
     "series": [{"name", "column", "time_s": [...], "files": [...] | null, "values": [...],
                 "sigma": [...] | null,
                 "fit": {"time_s": [...], "value": [...], "low": [...], "high": [...]} | null}],
     "last_time_s": float | null,
     "forecast": {"target_conversion", "time_s", "ci95_s", "duration_text", "clock_utc",
                  "clock_ci95_utc", "note"} | null,
     "k": parameter dict | null, "k_text": text, "fit_message": text,
     "spectra": [{"file", "time_s", "ppm": [...], "intensity": [...]}],   # oldest first
     "windows": [{"name", "low_ppm", "high_ppm"}],
     "styles": [{"colour", "dash", "marker"}],     # kinetics.plots.SERIES_STYLES
     "colours": {"window_fill", "window_edge", "window_alpha", "traces": [...]}}

Spectra are scaled so the tallest point inside the signal windows is 1 (the report's
stacked-spectra rule), and reduced to a min/max envelope of at most
:data:`MAX_SPECTRUM_BINS` bins, so peaks survive the reduction.
"""

from __future__ import annotations

import logging
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np

from kinetics.errors import KineticsError
from kinetics.jsonio import dumps

log = logging.getLogger(__name__)

DATA_JSON = "live.json"
DATA_SCRIPT = "live-data.js"
DATA_GLOBAL = "kineticsLiveData"
DATA_NAMES = (DATA_JSON, DATA_SCRIPT)

#: spectra shown: the latest over this many earlier ones, minus one
MAX_SPECTRA = 4
#: a spectrum is reduced to a min/max envelope of this many bins (2 points each)
MAX_SPECTRUM_BINS = 1000
#: points of the fitted curve and its band
CURVE_POINTS = 160
#: a forecast further out than this many times the last observation is not drawn
#: (it is still stated in words)
FORECAST_DRAW_FACTOR = 3.0

#: stop reasons of a run that ended on its own (anything else was stopped)
_FINISHED = ("batch run finished", "replay finished", "idle for", "target conversion")


def run_state_word(stop_reason: str | None, final: bool) -> str:
    """"running" while live, "finished" when the run ended on its own, else "stopped"."""
    if not final and not stop_reason:
        return "running"
    if stop_reason and stop_reason.startswith(_FINISHED):
        return "finished"
    return "stopped"


def series_styles() -> list[dict]:
    """The figures' series styles (colour, SVG dash pattern, marker) for the page."""
    import matplotlib

    from kinetics.plots import SERIES_STYLES

    width = 1.6  # the fitted lines' width in the figures
    named = {"-": None, "solid": None, "--": matplotlib.rcParams["lines.dashed_pattern"],
             "-.": matplotlib.rcParams["lines.dashdot_pattern"],
             ":": matplotlib.rcParams["lines.dotted_pattern"]}
    styles = []
    for style in SERIES_STYLES:
        if isinstance(style.linestyle, tuple):
            pattern = style.linestyle[1]
        else:
            pattern = named.get(style.linestyle)
        dash = "" if not pattern else " ".join(f"{value * width:.2f}" for value in pattern)
        styles.append({"colour": style.colour, "dash": dash, "marker": style.marker})
    return styles


def page_colours(n_traces: int) -> dict:
    """Window shading and trace colours of the figures (:data:`kinetics.plots.PAGE_COLOURS`).

    The latest spectrum gets the figures' darkest trace colour, earlier ones step
    towards the lightest, oldest lightest (``traces`` is oldest first).
    """
    from kinetics.plots import PAGE_COLOURS

    dark = np.asarray(PAGE_COLOURS["first_trace"], float)
    light = np.asarray(PAGE_COLOURS["last_trace"], float)
    traces = []
    for index in range(n_traces):
        fraction = 0.0 if n_traces <= 1 else (n_traces - 1 - index) / (n_traces - 1)
        rgb = np.clip(dark + fraction * (light - dark), 0.0, 1.0)
        traces.append("#" + "".join(f"{int(round(v * 255)):02x}" for v in rgb))
    return {"window_fill": PAGE_COLOURS["window_fill"], "window_edge": PAGE_COLOURS["window_edge"],
            "window_alpha": float(PAGE_COLOURS["window_alpha"]), "traces": traces}


def run_name(plan) -> str:
    """The run's name: its config file's stem, else its folder's name."""
    config = getattr(plan, "config", None)
    path = getattr(config, "path", None)
    if path is not None:
        return Path(path).stem
    return Path(str(plan.spec.folder)).name or str(plan.spec.folder)


def _column_array(table, name: str) -> np.ndarray:
    return np.asarray(table[name], dtype=float) if name in table else np.full(len(table), np.nan)


def _time_origin(table) -> datetime | None:
    """Clock time of t = 0: an acquisition time minus its time from the start."""
    column = next((c for c in ("acquired_mid_utc", "acquired_utc") if c in table), None)
    if column is None:
        return None
    for stamp, time_s in zip(table[column], table["time_s"]):
        if not stamp or not isinstance(stamp, str) or time_s != time_s:
            continue
        try:
            moment = datetime.fromisoformat(stamp.replace("Z", "+00:00"))
        except ValueError:
            continue
        if moment.tzinfo is None:
            moment = moment.replace(tzinfo=timezone.utc)
        return moment - timedelta(seconds=float(time_s))
    return None


def _iso(moment: datetime | None) -> str | None:
    if moment is None:
        return None
    return moment.astimezone(timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")


def _forecast(status, target: float | None, origin: datetime | None) -> dict | None:
    parameter = status.time_to_target_s
    if not parameter or parameter.get("value") is None or target is None:
        return None
    value = float(parameter["value"])
    interval = parameter.get("ci95") or [None, None]

    def clock(seconds):
        if origin is None or seconds is None:
            return None
        return _iso(origin + timedelta(seconds=float(seconds)))

    from kinetics.numbers import format_duration

    return {"target_conversion": float(target), "time_s": value, "ci95_s": list(interval),
            "duration_text": format_duration(value, parameter.get("stderr")),
            "clock_utc": clock(value), "clock_ci95_utc": [clock(interval[0]), clock(interval[1])],
            "note": parameter.get("note") or ""}


def _fit_curves(state, t_start: float, t_end: float) -> dict[str, dict]:
    """Table column -> fitted curve with its 95 % band (NaN band when the fit has none)."""
    outcome = state.outcome
    if outcome is None or not outcome.succeeded:
        return {}
    result = outcome.state
    columns = tuple(getattr(state.plan.refit, "columns", ()) or ())
    if result is not None and hasattr(result, "band") and columns and t_end > t_start:
        grid = np.linspace(t_start, t_end, CURVE_POINTS)
        try:
            curve, low, high = (np.atleast_2d(np.asarray(a, float)) for a in result.band(grid))
        except (KineticsError, ValueError, ArithmeticError, RuntimeError, np.linalg.LinAlgError) as error:
            log.info("live page: no band for the fitted curve (%s)", error)
        else:
            if curve.shape[0] == len(columns):
                return {column: {"time_s": grid, "value": curve[i], "low": low[i], "high": high[i]}
                        for i, column in enumerate(columns)}
    if outcome.curve:  # a refitter without a FitResult: its curve, no band
        grid = np.asarray(outcome.curve.get("time_s", []), float)
        return {name: {"time_s": grid, "value": np.asarray(values, float), "low": None, "high": None}
                for name, values in outcome.curve.items() if name != "time_s" and len(values) == len(grid)}
    return {}


def _species_label(column: str) -> str:
    return column[: -len("_concentration")] if column.endswith("_concentration") else column


def _series(state, table, forecast: dict | None) -> list[dict]:
    plan = state.plan
    columns = [c for c in plan.signals if c in table]
    if "mass_balance_total" in table and columns:
        columns.append("mass_balance_total")
    time_s = _column_array(table, "time_s")
    finite = time_s[np.isfinite(time_s)]
    t_start = float(finite.min()) if finite.size else 0.0
    t_end = float(finite.max()) if finite.size else 0.0
    if forecast is not None and forecast["time_s"] <= FORECAST_DRAW_FACTOR * max(t_end, 1e-9):
        t_end = max(t_end, forecast["time_s"])  # the curve runs on to the forecast
    curves = _fit_curves(state, t_start, t_end)
    files = [str(f) for f in table["file"]] if "file" in table else None
    series = []
    for column in columns:
        if column == "mass_balance_total":
            name, sigma_column = "mass balance", "mass_balance_deviation_sigma"
        else:
            name, sigma_column = _species_label(column), f"{column}{plan.sigma_suffix}"
        sigma = _column_array(table, sigma_column) if sigma_column in table else None
        series.append({"name": name, "column": column, "time_s": time_s, "files": files,
                       "values": _column_array(table, column), "sigma": sigma,
                       "fit": curves.get(column)})
    return series


def _envelope(ppm: np.ndarray, intensity: np.ndarray, bins: int) -> tuple[np.ndarray, np.ndarray]:
    """Min and max of each of ``bins`` runs of points, in axis order (peaks survive)."""
    order = np.argsort(ppm)
    ppm, intensity = ppm[order], intensity[order]
    if ppm.size <= 2 * bins:
        return ppm, intensity
    edges = np.linspace(0, ppm.size, bins + 1).astype(int)
    out_ppm, out_y = [], []
    for lo, hi in zip(edges[:-1], edges[1:]):
        chunk = intensity[lo:hi]
        first, second = sorted((int(np.argmin(chunk)), int(np.argmax(chunk))))
        out_ppm += [ppm[lo + first], ppm[lo + second]]
        out_y += [chunk[first], chunk[second]]
    return np.asarray(out_ppm), np.asarray(out_y)


def _windows(plan) -> list[dict]:
    config = getattr(plan, "config", None)
    windows = []
    for signal in getattr(config, "signals", ()) or ():
        low, high = sorted(float(v) for v in signal.window_ppm)
        windows.append({"name": str(signal.name), "low_ppm": low, "high_ppm": high})
    return windows


def _spectra(state, table, windows: list[dict]) -> list[dict]:
    """The latest few spectra kept in memory, oldest first, scaled and reduced."""
    measurements = getattr(state.source, "measurements", None)
    if measurements is None:
        return []
    times = {}
    if "file" in table:
        times = {str(f): float(t) for f, t in zip(table["file"], _column_array(table, "time_s"))}
    kept = []
    for item in measurements():
        spectrum = getattr(item, "spectrum", None)
        if spectrum is None or getattr(spectrum, "ppm", None) is None:
            continue
        time_s = times.get(str(getattr(item, "file", "")), getattr(item, "elapsed_mid_s", None))
        kept.append((np.inf if time_s is None else time_s, item, spectrum))
    kept.sort(key=lambda entry: entry[0])
    kept = kept[-MAX_SPECTRA:]
    traces = []
    for time_s, item, spectrum in kept:
        ppm = np.asarray(spectrum.ppm, float)
        real = np.asarray(spectrum.real, float)
        good = np.isfinite(ppm) & np.isfinite(real)
        traces.append((time_s, item, ppm[good], real[good]))
    heights = []
    for _, _, ppm, real in traces:
        inside = np.zeros(ppm.size, bool)
        for window in windows:
            inside |= (ppm >= window["low_ppm"]) & (ppm <= window["high_ppm"])
        chosen = real[inside] if inside.any() else real
        if chosen.size:
            heights.append(float(np.max(np.abs(chosen))))
    scale = max(heights) if heights and max(heights) > 0 else 1.0
    out = []
    for time_s, item, ppm, real in traces:
        x, y = _envelope(ppm, real / scale, MAX_SPECTRUM_BINS)
        out.append({"file": str(getattr(item, "file", "")),
                    "time_s": None if not np.isfinite(time_s) else float(time_s),
                    "ppm": np.round(x, 5), "intensity": np.round(y, 5)})
    return out


def _estimate_text(parameter: dict | None, fallback) -> str:
    """``(1.493 ± 0.008) × 10⁻⁴ s⁻¹ (95 %: ...)`` (:func:`kinetics.numbers.format_estimate`)."""
    from kinetics.numbers import format_estimate

    if not parameter or parameter.get("value") is None:
        return "–"
    try:
        return format_estimate(parameter)
    except (TypeError, ValueError, ArithmeticError):
        return fallback(parameter)


def status_document(status, final: bool, name: str | None = None, refresh_s: float | None = None) -> dict:
    """The page's data from a :class:`kinetics.livepage.status.LiveStatus` alone (no series,
    no spectra): what a page without a run state shows."""
    from kinetics.livepage.status import format_parameter, status_lines

    counts = status.counts
    return {
        "format": 1,
        "run": name if name is not None else (Path(status.folder).name or status.folder),
        "state": run_state_word(status.stop_reason, final),
        "reason": status.stop_reason,
        "updated_utc": status.updated_utc,
        "started_utc": status.started_utc,
        "refresh_s": float(refresh_s) if refresh_s else 5.0,
        "counts": {"taken": int(counts.get("processed", 0)),
                   "quarantined": int(counts.get("quarantined", 0)),
                   "pending": int(status.pending),
                   "duplicate": int(counts.get("duplicate", 0)),
                   "replaced": int(counts.get("replaced", 0))},
        "quarantined": [{"path": p, "reason": r} for p, r in status.quarantined[-5:]],
        "status_lines": [[label, text] for label, text in status_lines(status)],
        "concentration_unit": "mol L⁻¹",
        "time_origin_utc": None,
        "series": [],
        "last_time_s": None,
        "forecast": None,
        "k": status.k,
        "k_name": status.k_name,
        "k_text": _estimate_text(status.k, format_parameter),
        "fit_message": status.fit_message,
        "spectra": [],
        "windows": [],
        "styles": series_styles(),
        "colours": page_colours(0),
    }


def live_document(state, status, final: bool) -> dict:
    """The page's data for a :class:`kinetics.run.engine.RunState` and its status."""
    document = status_document(status, final, run_name(state.plan), getattr(state, "refresh_s", None))
    table = state.table
    if table is None or "time_s" not in getattr(table, "columns", ()) or not len(table):
        return document
    origin = _time_origin(table)
    forecast = _forecast(status, state.plan.target_conversion, origin)
    windows = _windows(state.plan)
    times = _column_array(table, "time_s")
    finite = times[np.isfinite(times)]
    try:
        spectra = _spectra(state, table, windows)
    except (ValueError, TypeError, AttributeError) as error:  # the page must not stop a run
        log.info("live page: spectra left out (%s)", error)
        spectra = []
    document.update({
        "time_origin_utc": _iso(origin),
        "series": _series(state, table, forecast),
        "last_time_s": float(finite.max()) if finite.size else None,
        "forecast": forecast,
        "spectra": spectra,
        "windows": windows,
        "colours": page_colours(len(spectra)),
    })
    return document


def document_json(document: dict) -> str:
    """``live.json``: the document as strict JSON (NaN as null)."""
    return dumps(document, indent=None) + "\n"


def document_script(document: dict) -> str:
    """``live-data.js``: one statement that sets ``window.kineticsLiveData``.

    The JSON is ASCII-only (``\\u2028`` and every non-ASCII character escaped), so it is
    also a valid JavaScript expression, and nothing in it can end the script early.
    """
    import json

    from kinetics.jsonio import to_jsonable

    text = json.dumps(to_jsonable(document), ensure_ascii=True, allow_nan=False, separators=(",", ":"))
    return f"window.{DATA_GLOBAL} = {text};\n"


__all__ = ["DATA_GLOBAL", "DATA_JSON", "DATA_NAMES", "DATA_SCRIPT", "document_json", "document_script",
           "live_document", "page_colours", "run_name", "run_state_word", "series_styles",
           "status_document"]
