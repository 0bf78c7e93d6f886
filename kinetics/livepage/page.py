"""The live page: one HTML file that draws the run's data and keeps itself current.

``index.html`` holds everything the page needs — its style and script (``live.css`` and
``live.js`` of this package, inlined) and the data as they were when it was written —
so it works opened as a file, served on 127.0.0.1, and offline: it names no other
server and loads nothing but ``live.json`` (over HTTP) or ``live-data.js`` (as a file)
from its own folder.  The script updates the page in place; it never reloads it.

The status lines are also written into the HTML as text (escaped), and a browser
without JavaScript gets the figure as an inline PNG and a ``<meta http-equiv="refresh">``
inside ``<noscript>`` (ignored where scripts run), so no browser is left with nothing.
"""

from __future__ import annotations

import base64
import html
import json
from functools import lru_cache
from importlib import resources

from kinetics.jsonio import to_jsonable

__all__ = ["render_page", "asset"]


@lru_cache(maxsize=None)
def asset(name: str) -> str:
    """The text of a file shipped in this package (``live.js``, ``live.css``)."""
    return resources.files("kinetics.livepage").joinpath(name).read_text(encoding="utf-8")


def _inline_json(document: dict) -> str:
    """JSON safe inside a ``<script>`` element: no ``<``, ``>`` or ``&`` (so no ``</script>``)."""
    text = json.dumps(to_jsonable(document), ensure_ascii=True, allow_nan=False, separators=(",", ":"))
    return text.replace("<", "\\u003c").replace(">", "\\u003e").replace("&", "\\u0026")


def render_page(status, png: bytes | None, refresh_s: float | None, document: dict) -> str:
    """The HTML of the live page.

    Parameters
    ----------
    status : kinetics.livepage.status.LiveStatus
        Its lines are written into the page as text, for readers without scripts.
    png : bytes or None
        The static figure (``series.png``), shown only where scripts do not run.
    refresh_s : float or None
        The no-script fallback reloads this often; None (a run that ended) never.
    document : dict
        The page's data (:func:`kinetics.livepage.data.live_document`).
    """
    from kinetics.livepage.status import status_lines

    escape = html.escape
    name, state = str(document.get("run", "")), str(document.get("state", ""))
    refresh = "" if refresh_s is None else (
        f'<noscript><meta http-equiv="refresh" content="{max(1, int(round(refresh_s)))}"></noscript>')
    rows = "\n".join(f"<tr><th>{escape(label)}</th><td>{escape(text)}</td></tr>"
                     for label, text in status_lines(status))
    counts = document.get("counts", {})
    count_items = "".join(
        f'<li class="{cls}"><span class="count" id="count-{key}">{int(counts.get(key, 0))}</span> {label}</li>'
        for key, label, cls in (("taken", "taken", ""), ("quarantined", "quarantined", ""),
                                ("pending", "pending", ""), ("duplicate", "duplicate", "minor"),
                                ("replaced", "replaced", "minor")))
    image = ""
    if png:
        encoded = base64.b64encode(png).decode("ascii")
        image = (f'<noscript><img alt="concentrations against time" '
                 f'src="data:image/png;base64,{encoded}"></noscript>')
    reason = escape(str(document.get("reason") or ""))
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<link rel="icon" href="data:,">
{refresh}<title>kinetics — {escape(name)} — {escape(state)}</title>
<style>{asset("live.css")}</style>
</head><body>
<header>
<h1><span class="app">kinetics ·</span> <span id="run-name">{escape(name)}</span><span id="run-state" class="state state-{escape(state)}">{escape(state)}</span></h1>
<p id="run-reason">{reason}</p>
<ul class="counts">{count_items}</ul>
<p id="k-text">{escape(str(document.get("k_name", "k")))} = {escape(str(document.get("k_text", "–")))}</p>
<p id="forecast"></p>
<p class="meta">data written <span id="updated">{escape(str(document.get("updated_utc", "")))}</span> (UTC) · page checked <span id="checked">–</span></p>
</header>
<main>
<section class="panel"><h2>Concentrations through time</h2>
<div class="plot-row"><div class="plot"><svg id="courses" role="img" aria-label="concentration of each species against time"></svg></div>
<ul class="legend" id="courses-legend"></ul></div>
<p class="hint">Point at a marker for its value; drag to zoom, double-click to reset.<button type="button" id="courses-reset" hidden>reset zoom</button></p>
{image}
</section>
<section class="panel"><h2>Latest spectrum over earlier ones</h2>
<div class="plot-row"><div class="plot"><svg id="spectra" role="img" aria-label="latest spectra against chemical shift"></svg></div>
<ul class="legend" id="spectra-legend"></ul></div>
<p class="hint">Point at the latest trace for δ and intensity; drag to zoom, double-click to reset.<button type="button" id="spectra-reset" hidden>reset zoom</button></p>
</section>
<section class="panel details"><h2>Details</h2>
<table id="status-table">{rows}</table>
</section>
</main>
<div id="tooltip" role="status" hidden></div>
<script type="application/json" id="kinetics-initial">{_inline_json(document)}</script>
<script>{asset("live.js")}</script>
</body></html>
"""
