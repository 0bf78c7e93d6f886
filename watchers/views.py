"""What a chemist sees during a live run: a terminal panel and an interactive page.

* :class:`TerminalView` — a rich panel (latest spectrum and its time, concentrations,
  current k with its 95 % interval, forecast time to the target, counts of processed /
  duplicate / quarantined files and the latest quarantine reasons).  On a terminal it
  redraws in place; when stderr is not a terminal it writes one log line per event.
* :func:`render_html` (library code in :mod:`kinetics.run.outputs` and
  :mod:`kinetics.livepage`, re-exported) — ``index.html``: the courses with fit, 95 % band
  and forecast, the latest spectra, counts and status, drawn by the page's own script
  (zoom, hover values) and updated in place from ``live.json`` (served) or
  ``live-data.js`` (opened as a file), never reloaded; it needs no network.
* :class:`PageServer` — optional: serves the live page and its data on 127.0.0.1 only.
* :class:`LivePlot` — optional matplotlib window (``--plot``), drawn by
  :func:`kinetics.plots.live_figure` (the page's and the report's style); never used in tests.
"""

from __future__ import annotations

import logging
import threading

import numpy as np
import pandas as pd

from kinetics.run.outputs import (LiveStatus, format_parameter, render_html,  # noqa: F401
                                   render_png, status_lines)

log = logging.getLogger(__name__)


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
        from rich.text import Text  # a Text is never read as markup: names print as written

        table = Table.grid(padding=(0, 2))
        table.add_column(style="dim")
        table.add_column()
        for label, text in status_lines(status):
            table.add_row(Text(str(label)), Text(str(text)))
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
    """Serves the live page and its assets over HTTP on 127.0.0.1 only, from a daemon thread.

    Only the names in :data:`kinetics.run.outputs.OUTPUT_NAMES` (``index.html``,
    ``live.json``, ``live-data.js``, ``series.png``, ``fit.json``, ``series.csv``) directly
    inside ``folder`` are served (a query string such as the page's cache-busting
    ``?v=...`` is ignored),
    and ``/`` answers with ``index.html``.  Everything else — the ledger, any other file,
    a directory listing, a path leaving the folder — is 404.
    """

    def __init__(self, folder, port: int = 0):
        from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
        from pathlib import Path
        from urllib.parse import unquote, urlsplit

        from kinetics.run.outputs import OUTPUT_NAMES

        root = Path(folder)
        types = {".html": "text/html; charset=utf-8", ".png": "image/png",
                 ".json": "application/json", ".csv": "text/csv; charset=utf-8",
                 ".js": "text/javascript; charset=utf-8"}

        class PageHandler(BaseHTTPRequestHandler):
            def log_message(self, *args) -> None:  # keep the terminal view clean
                pass

            def _answer(self, head_only: bool) -> None:
                path = unquote(urlsplit(self.path).path)
                name = "index.html" if path == "/" else path[1:] if path.startswith("/") else ""
                body = None
                if name in OUTPUT_NAMES:  # an exact name: no '/', no '..', no ledger
                    page = root / name
                    try:  # the run writes regular files; a link could point anywhere
                        body = None if page.is_symlink() else page.read_bytes()
                    except OSError:
                        body = None
                if body is None:
                    self.send_error(404, "not found")
                    return
                self.send_response(200)
                self.send_header("Content-Type", types[Path(name).suffix])
                self.send_header("Content-Length", str(len(body)))
                self.send_header("Cache-Control", "no-store")
                self.end_headers()
                if not head_only:
                    self.wfile.write(body)

            def do_GET(self) -> None:
                self._answer(head_only=False)

            def do_HEAD(self) -> None:
                self._answer(head_only=True)

        self.server = ThreadingHTTPServer(("127.0.0.1", port), PageHandler)
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
    """A matplotlib window redrawn on every refit (``--plot``; needs a display).

    Each update draws :func:`kinetics.plots.live_figure` (the series so far, the fit and
    the residuals, in the figures' style) into the window's figure.
    """

    def __init__(self):
        import matplotlib.pyplot as plt

        self._plt = plt
        plt.ion()
        self.figure = plt.figure(figsize=(7, 4.5))

    def update(self, table: pd.DataFrame, signals: list[str], curve: dict | None,
               sigma_suffix: str = "_sigma") -> None:
        from kinetics import plots

        drawn = plots.live_figure(table, signals, curve, sigma_suffix=sigma_suffix)
        # the library draws on its own Agg figure; the window shows a copy of its pixels
        canvas = drawn.canvas
        canvas.draw()
        self.figure.clear()
        self.figure.figimage(np.asarray(canvas.buffer_rgba()), resize=True)
        self.figure.canvas.draw_idle()
        self._plt.pause(0.001)

    def close(self) -> None:
        self._plt.close(self.figure)


__all__ = ["LiveStatus", "TerminalView", "PageServer", "LivePlot", "render_html", "render_png",
           "status_lines", "format_parameter"]
