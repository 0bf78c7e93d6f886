"""What a run writes: its ledger lock, the series table, the fit, the figure and the page.

* ``fit.json`` (the fit as JSON, with the counts, the quarantined files and, at the end,
  the stop reason) — rewritten after every turn;
* ``series.csv`` (the table), ``series.png`` (:func:`render_png`), the live page's data
  ``live.json`` and ``live-data.js`` and ``index.html`` (:func:`render_html`, the page of
  :mod:`kinetics.livepage`: interactive plots that follow the run without reloading) —
  rewritten at most once per refresh interval, and at the end;
* ``ledger.sqlite`` (:mod:`kinetics.store`); :class:`RunLock` keeps a second writer out.

Every file is written atomically (:func:`kinetics.atomic.write_atomic`), so a reader or a
crash never sees half a file.
"""

from __future__ import annotations

import fcntl
import os
from pathlib import Path

import pandas as pd

from kinetics.atomic import write_atomic
from kinetics.jsonio import dumps
from kinetics.livepage.status import (LiveStatus, format_duration_parameter,  # noqa: F401 (the view's names)
                                       format_parameter, status_lines)
from kinetics.store import OutputError, output_error, utc_now_iso

LEDGER_NAME = "ledger.sqlite"
#: every file a run writes besides the ledger (the page server serves exactly these)
OUTPUT_NAMES = ("series.csv", "fit.json", "series.png", "index.html", "live.json", "live-data.js")


# ---------------------------------------------------------------- the output folder
def prepare_out_dir(out_dir: Path) -> Path:
    """Create the output folder and check it is writable (clear error otherwise)."""
    out_dir = Path(out_dir)
    try:
        out_dir.mkdir(parents=True, exist_ok=True)
        probe = out_dir / f".write-test.{os.getpid()}"
        probe.write_bytes(b"")
        probe.unlink()
    except OSError as error:
        raise output_error(out_dir, error) from error
    return out_dir


class RunLock:
    """An exclusive lock on the output folder: one writer per ledger (freed on kill -9)."""

    def __init__(self, out_dir: Path):
        self.path = Path(out_dir) / ".run.lock"
        self._handle = None

    def __enter__(self) -> "RunLock":
        try:
            self._handle = open(self.path, "a")
            fcntl.flock(self._handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except BlockingIOError as error:
            raise OutputError(self.path.parent, "another run is writing to this output folder",
                              "stop it first, or choose another --out") from error
        except OSError as error:
            raise output_error(self.path, error) from error
        return self

    def __exit__(self, *exc) -> None:
        if self._handle is not None:
            self._handle.close()


def remove_stale_temporaries(out_dir: Path) -> None:
    """Delete temporaries a killed run left behind (the caller holds the run lock)."""
    for name in OUTPUT_NAMES:
        for stale in out_dir.glob(f".{name}.*.tmp"):
            try:
                stale.unlink()
            except OSError:
                pass


# ---------------------------------------------------------------- status, figure and page
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
    from kinetics import plots  # the one figure style; imported here to keep matplotlib off the import path

    figure = plots.live_figure(table, signals, curve, sigma_suffix=sigma_suffix, title=title or None)
    return plots.png_bytes(figure, dpi=110)


# ---------------------------------------------------------------- page
def render_html(status: LiveStatus, png: bytes | None, refresh_s: float | None,
                document: dict | None = None) -> str:
    """The run page (:mod:`kinetics.livepage`): interactive plots that follow the run in
    place, the status lines as text, and for a browser without scripts the PNG inline
    and a refresh every ``refresh_s`` (None, the final page: no refresh).

    ``document`` is the page's data (:func:`kinetics.livepage.live_document`); without
    it the page shows the status alone.
    """
    from kinetics import livepage

    if document is None:
        document = livepage.status_document(status, final=refresh_s is None, refresh_s=refresh_s)
    return livepage.render_page(status, png, refresh_s, document)


def _float(value) -> float | None:
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if value == value else None


def run_status(state, pending: int = 0, stop_reason: str | None = None) -> LiveStatus:
    """The status of a :class:`kinetics.run.engine.RunState` as the views show it."""
    plan, outcome, table = state.plan, state.outcome, state.table
    latest_path = latest_acquired = latest_time = None
    concentrations: dict[str, tuple[float | None, float | None]] = {}
    if table is not None and len(table):
        last = table.iloc[-1]
        latest_path = next((str(last[c]) for c in ("path", "file") if c in table), None)
        latest_acquired = next((str(last[c]) for c in ("acquired_utc", "acquired_mid_utc")
                                if c in table), None)
        latest_time = float(last["time_s"])
        for name in plan.signals:
            if name in table:
                stderr = last.get(f"{name}{plan.sigma_suffix}")
                concentrations[name] = (_float(last[name]), _float(stderr))
    return LiveStatus(
        folder=str(plan.spec.folder), started_utc=state.started_utc,
        updated_utc=utc_now_iso(), counts=state.ledger.counts(), latest_path=latest_path,
        latest_acquired_utc=latest_acquired, latest_time_s=latest_time,
        concentrations=concentrations,
        k=outcome.k if outcome else None,
        conversion=outcome.conversion if outcome else None,
        target_conversion=plan.target_conversion,
        time_to_target_s=outcome.time_to_target_s if outcome else None,
        fit_message="" if outcome is None or outcome.succeeded else outcome.message,
        quarantined=tuple(state.ledger.quarantined()), pending=pending,
        stop_reason=stop_reason)


def write_table_and_fit(state, table: pd.DataFrame, status: LiveStatus, stop_reason: str | None,
                        final: bool) -> None:
    """``series.csv`` (unless ``table`` is None) and ``fit.json`` of a run state, atomically."""
    if table is not None:
        write_atomic(state.out_dir / "series.csv", table.to_csv(index=False))
    document = {
        "final": final,
        "stop_reason": stop_reason,
        "counts": status.counts,
        "n_points": int(len(state.table)) if state.table is not None else 0,
        "k": status.k,
        "conversion": status.conversion,
        "target_conversion": state.plan.target_conversion,
        "time_to_target_s": status.time_to_target_s,
        "quarantined": [{"path": p, "reason": r} for p, r in status.quarantined],
        "fit": state.outcome.fit if state.outcome else None,
        "processing_uncertainty": state.outcome.processing if state.outcome else None,
        "warnings": state.outcome.warnings if state.outcome else [],
    }
    write_atomic(state.out_dir / "fit.json", dumps(document) + "\n")


def figure_png(state, table: pd.DataFrame) -> bytes:
    """The run's figure (concentrations and the fitted curve) as PNG bytes."""
    return render_png(table, list(state.plan.signals), state.outcome.curve if state.outcome else None,
                      state.plan.sigma_suffix)


def write_page(state, status: LiveStatus, png: bytes, final: bool) -> None:
    """``series.png``, the live page's data (``live.json``, ``live-data.js``) and
    ``index.html`` of a run state, each atomically; the data before the page."""
    from kinetics import livepage

    write_atomic(state.out_dir / "series.png", png)
    document = livepage.live_document(state, status, final)
    write_atomic(state.out_dir / livepage.DATA_JSON, livepage.document_json(document))
    write_atomic(state.out_dir / livepage.DATA_SCRIPT, livepage.document_script(document))
    write_atomic(state.out_dir / "index.html",
                 render_html(status, png, None if final else state.refresh_s, document))


__all__ = ["LEDGER_NAME", "LiveStatus", "OUTPUT_NAMES", "RunLock", "format_parameter", "prepare_out_dir",
           "remove_stale_temporaries", "render_html", "render_png", "run_status", "status_lines",
           "write_atomic"]
