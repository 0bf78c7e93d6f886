"""The live page of a run: an interactive view that follows the run without reloading.

* :mod:`kinetics.livepage.data` — the page's data (one JSON document per redraw, from a
  run state): the concentration courses with the fit, its 95 % band and the forecast of
  completion, the latest spectra with the signal windows, run name, counts and status.
* :mod:`kinetics.livepage.page` — ``index.html``: the data as written, the status as text,
  and this package's own ``live.js`` (SVG plots with zoom and hover values, in the
  figures' palette and markers) and ``live.css`` inlined.  No third-party script, no
  network: the page reads only ``live.json`` (served) or ``live-data.js`` (as a file).

:func:`kinetics.run.outputs.write_page` writes the three files atomically.
"""

from kinetics.livepage.data import (DATA_GLOBAL, DATA_JSON, DATA_NAMES, DATA_SCRIPT, document_json,
                                    document_script, live_document, run_state_word, status_document)
from kinetics.livepage.page import render_page

__all__ = ["DATA_GLOBAL", "DATA_JSON", "DATA_NAMES", "DATA_SCRIPT", "document_json", "document_script",
           "live_document", "render_page", "run_state_word", "status_document"]
