"""What a chemist sees during a live run: a terminal panel and a self-refreshing page.

* :class:`TerminalView` — a rich panel (latest spectrum and its time, concentrations,
  current k with its 95 % interval, forecast time to the target, counts of processed /
  duplicate / quarantined files and the latest quarantine reasons).  On a terminal it
  redraws in place; when stderr is not a terminal it writes one log line per event.
* :func:`render_html` — one HTML file with the plot inline as a base64 PNG and a
  ``<meta http-equiv="refresh">`` so any browser opened on the file follows the run
  without a server.  The final page of a run drops the refresh and says why it stopped.
* :class:`PageServer` — optional: serves the output folder on 127.0.0.1 only.
* :class:`LivePlot` — optional matplotlib window (``--plot``); never used in tests.
"""

from __future__ import annotations

import base64
import html
import io
import logging
import threading
from dataclasses import dataclass, field
from functools import partial

import numpy as np
import pandas as pd

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class LiveStatus:
    """Everything the views show, as plain values (built by the live loop).

    ``k``, ``conversion`` and ``time_to_target_s`` are parameter dicts
    (``{"value", "stderr", "ci95", "unit"}``) or None when not (yet) known.
    ``concentrations`` maps signal -> (value, stderr or None) of the latest spectrum.
    """

    folder: str
    started_utc: str
    updated_utc: str
    counts: dict[str, int]
    latest_path: str | None = None
    latest_acquired_utc: str | None = None
    latest_time_s: float | None = None
    concentrations: dict[str, tuple[float | None, float | None]] = field(default_factory=dict)
    concentration_unit: str = "mol/L"
    k: dict | None = None
    k_name: str = "k"
    conversion: dict | None = None
    target_conversion: float | None = None
    time_to_target_s: dict | None = None
    fit_message: str = ""
    quarantined: tuple[tuple[str, str], ...] = ()
    pending: int = 0
    stop_reason: str | None = None


def _fmt(value: float | None, digits: int = 4) -> str:
    return "–" if value is None else f"{value:.{digits}g}"


def format_parameter(parameter: dict | None, digits: int = 4) -> str:
    """``value [lo, hi] unit`` of a parameter dict, or a dash."""
    if not parameter or parameter.get("value") is None:
        return "–"
    text = _fmt(parameter["value"], digits)
    interval = parameter.get("ci95")
    if interval and interval[0] is not None and interval[1] is not None:
        text += f"  (95 %: {_fmt(interval[0], digits)} – {_fmt(interval[1], digits)})"
    unit = parameter.get("unit")
    return f"{text} {unit}" if unit else text


def status_lines(status: LiveStatus) -> list[tuple[str, str]]:
    """The view's content as (label, text) pairs, shared by the terminal and the page."""
    counts = status.counts
    lines = [
        ("folder", status.folder),
        ("latest spectrum", status.latest_path or "none yet"),
        ("acquired", status.latest_acquired_utc or "–"),
    ]
    if status.latest_time_s is not None:
        lines.append(("time from start", f"{status.latest_time_s:.1f} s"))
    for name, (value, stderr) in status.concentrations.items():
        text = _fmt(value)
        if stderr is not None:
            text += f" ± {_fmt(stderr, 2)}"
        lines.append((name, f"{text} {status.concentration_unit}"))
    lines.append((status.k_name, format_parameter(status.k)))
    if status.conversion is not None:
        lines.append(("conversion", format_parameter(status.conversion, 3)))
    if status.target_conversion is not None:
        lines.append((f"time to {status.target_conversion:.0%}",
                      format_parameter(status.time_to_target_s)))
    if status.fit_message:
        lines.append(("fit", status.fit_message))
    lines.append(("files", f"{counts.get('processed', 0)} processed, "
                           f"{counts.get('duplicate', 0)} duplicate, "
                           f"{counts.get('quarantined', 0)} quarantined, "
                           f"{counts.get('replaced', 0)} replaced, {status.pending} waiting"))
    for path, reason in status.quarantined[-5:]:
        lines.append(("quarantined", f"{path}: {reason}"))
    if status.stop_reason:
        lines.append(("stopped", status.stop_reason))
    lines.append(("updated", status.updated_utc))
    return lines


# ---------------------------------------------------------------- figure
def render_png(table: pd.DataFrame, signals: list[str], curve: dict | None = None,
               sigma_suffix: str = "_stderr", title: str = "") -> bytes:
    """PNG of the series: one marker per spectrum and signal, the fitted curves as lines.

    Parameters
    ----------
    table : DataFrame
        Needs ``time_s`` and one column per name in ``signals`` (``<name><sigma_suffix>``
        optional, drawn as error bars).
    curve : dict, optional
        ``{"time_s": [...], name: [...]}`` of the fitted model.
    """
    from matplotlib.figure import Figure  # no pyplot: no global state, no window

    figure = Figure(figsize=(7.0, 4.0), dpi=90)
    axes = figure.add_subplot()
    if len(table):
        for name in signals:
            if name not in table:
                continue
            stderr = table.get(f"{name}{sigma_suffix}")
            axes.errorbar(table["time_s"], table[name],
                          yerr=None if stderr is None else stderr.to_numpy(dtype=float),
                          fmt="o", markersize=3, capsize=0, label=name)
    if curve:
        time_s = np.asarray(curve.get("time_s", []), dtype=float)
        for name, values in curve.items():
            if name != "time_s" and len(values) == len(time_s):
                axes.plot(time_s, values, "-", linewidth=1.2, label=f"{name} fit")
    axes.set_xlabel("time from start / s")
    axes.set_ylabel("concentration")
    if title:
        axes.set_title(title, fontsize=10)
    if axes.get_legend_handles_labels()[0]:
        axes.legend(fontsize=8)
    figure.tight_layout()
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png")
    return buffer.getvalue()


# ---------------------------------------------------------------- page
def render_html(status: LiveStatus, png: bytes | None, refresh_s: float | None) -> str:
    """The run page: a table of the status lines and the plot inline.

    ``refresh_s`` None (the final page) leaves out the meta refresh.
    """
    refresh = "" if refresh_s is None else (
        f'<meta http-equiv="refresh" content="{max(1, int(round(refresh_s)))}">')
    rows = "\n".join(
        f"<tr><th>{html.escape(label)}</th><td>{html.escape(text)}</td></tr>"
        for label, text in status_lines(status))
    image = ""
    if png:
        encoded = base64.b64encode(png).decode("ascii")
        image = f'<img alt="concentrations against time" src="data:image/png;base64,{encoded}">'
    state = "run ended" if status.stop_reason else "live"
    return (
        "<!DOCTYPE html>\n<html lang=\"en\"><head><meta charset=\"utf-8\">"
        f"{refresh}<title>kinetics — {state}</title>"
        "<style>body{font-family:sans-serif;margin:1.5em}th{text-align:left;padding-right:1em;"
        "font-weight:normal;color:#555}td{font-family:monospace}</style></head><body>"
        f"<h1>kinetics — {state}</h1>{image}<table>{rows}</table></body></html>\n"
    )


# ---------------------------------------------------------------- terminal
class TerminalView:
    """The rich panel on stderr (stdout stays free for ``--json``-style output).

    Parameters
    ----------
    enabled : bool
        False shows nothing (tests, ``--no-view``).
    """

    def __init__(self, enabled: bool = True):
        from rich.console import Console

        self.enabled = enabled
        self.console = Console(stderr=True)
        self._live = None

    def _panel(self, status: LiveStatus):
        from rich.panel import Panel
        from rich.table import Table

        table = Table.grid(padding=(0, 2))
        table.add_column(style="dim")
        table.add_column()
        for label, text in status_lines(status):
            table.add_row(label, text)
        title = "kinetics watch" + (" — stopped" if status.stop_reason else "")
        return Panel(table, title=title, expand=False)

    def update(self, status: LiveStatus) -> None:
        if not self.enabled:
            return
        if not self.console.is_terminal:
            return  # the live loop logs one line per file instead
        if self._live is None:
            from rich.live import Live

            self._live = Live(self._panel(status), console=self.console,
                              refresh_per_second=4, transient=False)
            self._live.start()
        else:
            self._live.update(self._panel(status))

    def close(self, status: LiveStatus | None = None) -> None:
        if self._live is not None:
            if status is not None:
                self._live.update(self._panel(status))
            self._live.stop()
            self._live = None
        elif status is not None and self.enabled:
            self.console.print(self._panel(status))


# ---------------------------------------------------------------- optional server
class PageServer:
    """Serves the output folder over HTTP on 127.0.0.1 only, from a daemon thread."""

    def __init__(self, folder, port: int = 0):
        from http.server import SimpleHTTPRequestHandler, ThreadingHTTPServer

        class QuietHandler(SimpleHTTPRequestHandler):
            def log_message(self, *args) -> None:  # keep the terminal view clean
                pass

        handler = partial(QuietHandler, directory=str(folder))
        self.server = ThreadingHTTPServer(("127.0.0.1", port), handler)
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)

    @property
    def url(self) -> str:
        host, port = self.server.server_address[:2]
        return f"http://{host}:{port}/index.html"

    def start(self) -> "PageServer":
        self.thread.start()
        return self

    def stop(self) -> None:
        self.server.shutdown()
        self.server.server_close()


# ---------------------------------------------------------------- optional window
class LivePlot:
    """A matplotlib window redrawn on every refit (``--plot``; needs a display)."""

    def __init__(self):
        import matplotlib.pyplot as plt

        self._plt = plt
        plt.ion()
        self.figure, self.axes = plt.subplots(figsize=(7, 4))

    def update(self, table: pd.DataFrame, signals: list[str], curve: dict | None) -> None:
        self.axes.clear()
        for name in signals:
            if name in table:
                self.axes.plot(table["time_s"], table[name], "o", markersize=3, label=name)
        if curve:
            for name, values in curve.items():
                if name != "time_s":
                    self.axes.plot(curve["time_s"], values, "-", label=f"{name} fit")
        self.axes.set_xlabel("time from start / s")
        self.axes.legend(fontsize=8)
        self.figure.canvas.draw_idle()
        self._plt.pause(0.001)

    def close(self) -> None:
        self._plt.close(self.figure)


__all__ = ["LiveStatus", "TerminalView", "PageServer", "LivePlot", "render_html", "render_png",
           "status_lines", "format_parameter"]
