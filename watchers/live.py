"""The live loop: new file -> measure -> ledger -> warm-start refit -> outputs.

Steps per loop turn (``tick_s`` apart):

1. ask the :class:`~watchers.folder.FolderWatcher` which files became complete;
2. :func:`process_ready`: hash each, skip what the ledger already holds (a restart does
   not reprocess), measure the new ones (a file that does not parse is quarantined with
   the reason, the run goes on), order them by acquisition time and hand them to
   :meth:`kinetics.store.Ledger.ingest`, one transaction per file;
3. when something was counted: rebuild the series table from the ledger, refit with the
   previous fit as the starting point, and write the outputs — ``series.csv``,
   ``fit.json``, ``series.png``, ``index.html`` — each atomically (temporary file in the
   output folder, then ``os.replace``), so a reader or a crash never sees half a file;
4. check the stop conditions: target conversion reached (the lower end of its 95 %
   interval at or above the target), idle for N minutes, maximum duration, a replay that
   has finished and been taken in, Ctrl-C or SIGTERM.  Each ends with a final report: a
   fit from scratch on the whole ledger table (identical to the batch run's), ``fit.json``
   marked final with the stop reason, and the final ``index.html``.

:func:`batch_run` takes a finished folder through the very same :func:`process_ready`
and final fit, so a batch run and a live run over the same files write the same ledger
rows and the same fit by construction.

The science is injected as a :class:`Pipeline` (a measurer, a table builder and a
refitter); :func:`build_from_config` wires the project's series and rates modules.
"""

from __future__ import annotations

import fcntl
import logging
import os
import signal
import threading
import time
from dataclasses import dataclass, field, replace
from datetime import datetime
from pathlib import Path
from typing import Any, Callable, Protocol

import pandas as pd

from kinetics.errors import InputFileError, KineticsError
from kinetics.jsonio import dumps
from kinetics.spectra.spectrum import sha256_of_file
from kinetics.store import FileMeasurement, FileRow, Ledger, OutputError, output_error, utc_now_iso
from watchers.folder import FolderWatcher, ReadyFile, WatchSpec, acquisition_sort_key, list_wanted
from watchers.views import LiveStatus, TerminalView, render_html, render_png

log = logging.getLogger(__name__)

LEDGER_NAME = "ledger.sqlite"
OUTPUT_NAMES = ("series.csv", "fit.json", "series.png", "index.html")


# ---------------------------------------------------------------- the injected science
class Measurer(Protocol):
    """path -> the file's measurement; raises InputFileError when the file is bad."""

    def __call__(self, path: Path) -> FileMeasurement: ...


@dataclass(frozen=True)
class FitOutcome:
    """One (re)fit of the series, as the live loop and the views need it.

    Attributes
    ----------
    succeeded : bool
        Whether the fit converged; ``message`` says why not.
    fit : dict
        The fit as JSON (``FitResult.to_dict()``), written to ``fit.json``.
    k : dict or None
        The rate constant as a parameter dict (value, stderr, ci95, unit).
    conversion : dict or None
        Fitted conversion at the latest spectrum, as a parameter dict (unit "").
    time_to_target_s : dict or None
        Forecast time from reaction start to the target conversion.
    curve : dict or None
        ``{"time_s": [...], signal: [...]}`` of the fitted model for the plot.
    state : object
        What a warm start needs (the FitResult); never serialised.
    """

    succeeded: bool
    message: str
    fit: dict
    k: dict | None = None
    conversion: dict | None = None
    time_to_target_s: dict | None = None
    curve: dict | None = None
    state: Any = None


class Refitter(Protocol):
    """(series table, previous outcome or None for a fit from scratch) -> FitOutcome."""

    def __call__(self, table: pd.DataFrame, previous: FitOutcome | None) -> FitOutcome: ...


@dataclass(frozen=True)
class Pipeline:
    """The science of one run, injected into the live loop and the batch run.

    Attributes
    ----------
    spec : WatchSpec
        Folder, include/exclude patterns, recursion (the quiet period and poll mode
        may be overridden by :class:`LiveOptions`).
    measure : Measurer
    build_table : callable (Ledger) -> DataFrame
        The ledger's counted files -> the series table (``time_s`` plus one column per
        signal), rebuilt from the ledger alone so a restart needs nothing else.
    refit : Refitter
    signals : tuple of str
        Columns of the series table to plot and show.
    sigma_suffix : str
        ``<signal><sigma_suffix>`` is the column of each signal's standard uncertainty.
    config_text : str
        The config the run is made from (kept in the ledger).
    target_conversion : float or None
        Stop once reached (fraction, 0-1).
    """

    spec: WatchSpec
    measure: Measurer
    build_table: Callable[[Ledger], pd.DataFrame]
    refit: Refitter
    signals: tuple[str, ...]
    config_text: str
    target_conversion: float | None = None
    sigma_suffix: str = "_stderr"


@dataclass(frozen=True)
class LiveOptions:
    """How the live loop runs (all times in seconds; None switches a limit off)."""

    out_dir: Path
    quiet_period_s: float | None = None
    poll: bool | None = None
    max_duration_s: float | None = None
    idle_s: float | None = None
    tick_s: float = 0.1
    refresh_s: float = 5.0
    view: bool = True
    serve_port: int | None = None
    plot: bool = False
    handle_signals: bool = True


@dataclass(frozen=True)
class RunSummary:
    """How a run ended: the reason, the counts and the final fit outcome."""

    stop_reason: str
    counts: dict[str, int]
    outcome: FitOutcome | None
    out_dir: Path


# ---------------------------------------------------------------- atomic outputs
def write_atomic(path: Path, data: bytes | str) -> None:
    """Write ``data`` to ``path`` via a temporary file in the same folder and a rename.

    Raises
    ------
    OutputError
        The folder is not writable or the disk is full; no temporary file is left behind
        and the previous version of ``path`` (if any) is untouched.
    """
    path = Path(path)
    payload = data.encode("utf-8") if isinstance(data, str) else data
    temporary = path.with_name(f".{path.name}.{os.getpid()}.tmp")
    try:
        with open(temporary, "wb") as handle:
            handle.write(payload)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(temporary, path)
    except OSError as error:
        try:
            temporary.unlink()
        except OSError:
            pass
        raise output_error(path, error) from error


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


# ---------------------------------------------------------------- one batch of ready files
@dataclass
class _Candidate:
    ready: ReadyFile
    sha256: str | None = None
    measurement: FileMeasurement | None = None
    error: InputFileError | None = None
    sort_key: tuple = field(default_factory=tuple)


def _stat_key(path: Path) -> tuple[int, int] | None:
    try:
        stat = os.stat(path)
    except FileNotFoundError:
        return None
    return stat.st_size, stat.st_mtime_ns


def _measure_safely(measure: Measurer, path: Path):
    """(measurement, None), or (None, InputFileError) for a file that cannot be measured.

    Whatever a parser or measurer raises on a bad file becomes a quarantine reason: a bad
    file never stops a live run.
    """
    try:
        return measure(path), None
    except InputFileError as error:
        return None, error
    except Exception as error:  # noqa: BLE001 - any failure on one file quarantines that file
        log.debug("measuring %s failed", path, exc_info=True)
        return None, InputFileError(path, f"could not be measured: {type(error).__name__}: {error}",
                                    hint="the file is quarantined; the run goes on")


def process_ready(ready: list[ReadyFile], ledger: Ledger, measure: Measurer,
                  known: dict[str, tuple[int, int, str]] | None = None,
                  ) -> tuple[list[FileRow], list[ReadyFile], list[ReadyFile]]:
    """Take a group of complete files into the ledger, in acquisition order.

    Acquisition order is the header's acquisition time when the file has one (the file
    is parsed here anyway), else the modification time, then the name.

    Parameters
    ----------
    ready : list of ReadyFile
    ledger : Ledger
    measure : Measurer
    known : dict, optional
        :meth:`Ledger.latest_stat`, to skip files already taken without hashing them.

    Returns
    -------
    rows : list of FileRow
        New ledger rows (processed, quarantined or duplicate), in ingest order.
    handled : list of ReadyFile
        Files that need no further look (taken now or already in the ledger).
    changed : list of ReadyFile
        Files that changed while being read: to be looked at again.
    """
    known = known if known is not None else {}
    candidates, handled, changed = [], [], []
    for item in ready:
        previous = known.get(item.relpath)
        if previous is not None and previous[:2] == (item.size_bytes, item.mtime_ns):
            handled.append(item)
            continue
        try:
            sha = sha256_of_file(item.path)
        except FileNotFoundError:
            continue  # deleted after it was complete: nothing to take
        except OSError as error:  # no read permission, a disk error: never stop the run
            log.warning("cannot read %s yet (%s); it is looked at again later", item.path, error)
            continue
        action = ledger.decide(item.relpath, sha).action
        if action == "known":
            handled.append(item)
            continue
        candidate = _Candidate(item, sha)
        if action == "new":
            candidate.measurement, candidate.error = _measure_safely(measure, item.path)
        if _stat_key(item.path) != (item.size_bytes, item.mtime_ns):
            changed.append(item)
            continue
        acquired = candidate.measurement.acquired_utc if candidate.measurement else None
        seconds = acquired.timestamp() if acquired is not None else item.mtime_ns / 1e9
        candidate.sort_key = (seconds,) + acquisition_sort_key(item)[1:]
        candidates.append(candidate)
    candidates.sort(key=lambda c: c.sort_key)
    rows = []
    for candidate in candidates:
        def measured(candidate=candidate) -> FileMeasurement:
            if candidate.error is not None:
                raise candidate.error
            if candidate.measurement is None:  # a duplicate whose twin has just gone
                measurement, error = _measure_safely(measure, candidate.ready.path)
                if error is not None:
                    raise error
                return measurement
            return candidate.measurement

        row = ledger.ingest(candidate.ready.relpath, candidate.sha256, candidate.ready.size_bytes,
                            candidate.ready.mtime_ns, measured, candidate.ready.first_seen_utc)
        handled.append(candidate.ready)
        if row is not None:
            rows.append(row)
            known[candidate.ready.relpath] = (candidate.ready.size_bytes,
                                              candidate.ready.mtime_ns, candidate.sha256)
    return rows, handled, changed


# ---------------------------------------------------------------- refit and outputs
class RunState:
    """Ledger + outputs of one run: what the live loop and the batch run share."""

    def __init__(self, pipeline: Pipeline, out_dir: Path, refresh_s: float = 5.0):
        self.pipeline = pipeline
        self.out_dir = prepare_out_dir(out_dir)
        self.refresh_s = refresh_s
        _remove_stale_temporaries(self.out_dir)
        self.ledger = Ledger(self.out_dir / LEDGER_NAME)
        self.ledger.save_config(pipeline.config_text)
        self.outcome: FitOutcome | None = None
        self.table: pd.DataFrame | None = None
        self.started_utc = utc_now_iso()
        self.latest: FileRow | None = None

    def close(self) -> None:
        self.ledger.close()

    def refit(self, from_scratch: bool = False) -> FitOutcome | None:
        """Rebuild the table from the ledger and refit (warm start unless from scratch)."""
        # A table or fit that cannot be made yet (too few points, a numerical failure) is
        # shown as such; it must not end a live run that later spectra may rescue.
        try:
            self.table = self.pipeline.build_table(self.ledger)
        except (KineticsError, ValueError, ArithmeticError) as error:
            self.table = None
            self.outcome = FitOutcome(False, f"series table: {error}",
                                      {"succeeded": False, "message": str(error)})
            return self.outcome
        if self.table is None or len(self.table) == 0:
            self.outcome = None
            return None
        previous = None if from_scratch else self.outcome
        try:
            self.outcome = self.pipeline.refit(self.table, previous)
        except (KineticsError, ValueError, ArithmeticError) as error:
            self.outcome = FitOutcome(False, str(error), {"succeeded": False, "message": str(error)})
        self.ledger.record_refit(self.outcome.fit, len(self.table))
        return self.outcome

    def status(self, pending: int = 0, stop_reason: str | None = None) -> LiveStatus:
        outcome = self.outcome
        latest_path = latest_acquired = latest_time = None
        concentrations: dict[str, tuple[float | None, float | None]] = {}
        if self.table is not None and len(self.table):
            last = self.table.iloc[-1]
            latest_path = next((str(last[c]) for c in ("path", "file") if c in self.table), None)
            latest_acquired = next((str(last[c]) for c in ("acquired_utc", "acquired_mid_utc")
                                    if c in self.table), None)
            latest_time = float(last["time_s"])
            for name in self.pipeline.signals:
                if name in self.table:
                    stderr = last.get(f"{name}{self.pipeline.sigma_suffix}")
                    concentrations[name] = (_float(last[name]), _float(stderr))
        return LiveStatus(
            folder=str(self.pipeline.spec.folder), started_utc=self.started_utc,
            updated_utc=utc_now_iso(), counts=self.ledger.counts(), latest_path=latest_path,
            latest_acquired_utc=latest_acquired, latest_time_s=latest_time,
            concentrations=concentrations,
            k=outcome.k if outcome else None,
            conversion=outcome.conversion if outcome else None,
            target_conversion=self.pipeline.target_conversion,
            time_to_target_s=outcome.time_to_target_s if outcome else None,
            fit_message="" if outcome is None or outcome.succeeded else outcome.message,
            quarantined=tuple(self.ledger.quarantined()), pending=pending,
            stop_reason=stop_reason)

    def write_outputs(self, pending: int = 0, stop_reason: str | None = None,
                      final: bool = False) -> LiveStatus:
        """Write series.csv, fit.json, series.png and index.html, each atomically."""
        status = self.status(pending, stop_reason)
        table = self.table if self.table is not None else pd.DataFrame({"time_s": []})
        write_atomic(self.out_dir / "series.csv", table.to_csv(index=False))
        document = {
            "final": final,
            "stop_reason": stop_reason,
            "counts": status.counts,
            "n_points": int(len(table)),
            "k": status.k,
            "conversion": status.conversion,
            "target_conversion": self.pipeline.target_conversion,
            "time_to_target_s": status.time_to_target_s,
            "quarantined": [{"path": p, "reason": r} for p, r in status.quarantined],
            "fit": self.outcome.fit if self.outcome else None,
        }
        write_atomic(self.out_dir / "fit.json", dumps(document) + "\n")
        png = render_png(table, list(self.pipeline.signals),
                         self.outcome.curve if self.outcome else None, self.pipeline.sigma_suffix)
        write_atomic(self.out_dir / "series.png", png)
        write_atomic(self.out_dir / "index.html",
                     render_html(status, png, None if final else self.refresh_s))
        return status


def _remove_stale_temporaries(out_dir: Path) -> None:
    """Delete temporaries a killed run left behind (the caller holds the run lock)."""
    for name in OUTPUT_NAMES:
        for stale in out_dir.glob(f".{name}.*.tmp"):
            try:
                stale.unlink()
            except OSError:
                pass


def _float(value) -> float | None:
    try:
        value = float(value)
    except (TypeError, ValueError):
        return None
    return value if value == value else None


def target_reached(outcome: FitOutcome | None, target: float | None) -> bool:
    """True when the lower end of the fitted conversion's 95 % interval is >= target."""
    if outcome is None or target is None or not outcome.succeeded or not outcome.conversion:
        return False
    interval = outcome.conversion.get("ci95")
    low = interval[0] if interval else None
    return low is not None and low >= target


# ---------------------------------------------------------------- batch
def batch_run(pipeline: Pipeline | str | Path, out_dir: Path) -> RunSummary:
    """A finished folder through the live code path: same ledger rows, same final fit.

    Every wanted file is taken by :func:`process_ready` in acquisition order, then one fit
    from scratch on the ledger table is written with the outputs (marked final).

    Parameters
    ----------
    pipeline : Pipeline, or the path of a run config (see :func:`build_from_config`)
    out_dir : Path
        Gets ``ledger.sqlite``, ``series.csv``, ``fit.json``, ``series.png``, ``index.html``.
    """
    from watchers.folder import check_folder

    if not isinstance(pipeline, Pipeline):
        pipeline = build_from_config(Path(pipeline), Path(out_dir) / LEDGER_NAME)

    folder = check_folder(pipeline.spec.folder)
    pipeline = replace(pipeline, spec=replace(pipeline.spec, folder=folder))
    out_dir = prepare_out_dir(out_dir)
    with RunLock(out_dir):
        state = RunState(pipeline, out_dir)
        try:
            now = utc_now_iso()
            ready = [ReadyFile(folder / rel, rel, st.st_size, st.st_mtime_ns, now)
                     for rel, st in list_wanted(pipeline.spec)]
            ready.sort(key=acquisition_sort_key)
            process_ready(ready, state.ledger, pipeline.measure, state.ledger.latest_stat())
            outcome = state.refit(from_scratch=True)
            state.write_outputs(stop_reason="batch run finished", final=True)
            return RunSummary("batch run finished", state.ledger.counts(), outcome, out_dir)
        finally:
            state.close()


# ---------------------------------------------------------------- live
class _StopFlag:
    """Set by SIGTERM / SIGINT (or by a caller) to end the loop at the next turn."""

    def __init__(self):
        self.event = threading.Event()
        self.reason: str | None = None

    def set(self, reason: str) -> None:
        self.reason = self.reason or reason
        self.event.set()


def _install_signal_handlers(flag: _StopFlag) -> list:
    previous = []
    for number, reason in ((signal.SIGTERM, "SIGTERM received"), (signal.SIGINT, "interrupted (Ctrl-C)")):
        def handler(signum, frame, reason=reason):
            flag.set(reason)
        previous.append((number, signal.signal(number, handler)))
    return previous


def run_live(pipeline: Pipeline, options: LiveOptions, stop: _StopFlag | None = None,
             replay_done: Callable[[], bool] | None = None,
             on_turn: Callable[[RunState], None] | None = None) -> RunSummary:
    """Follow the folder until a stop condition; end with the final report.

    Parameters
    ----------
    pipeline : Pipeline
    options : LiveOptions
    stop : _StopFlag, optional
        Lets a caller (a thread, a test) end the run; SIGTERM/SIGINT also set it.
    replay_done : callable () -> bool, optional
        When given, the run ends once it returns True and every file has been taken.
    on_turn : callable (RunState) -> None, optional
        Called after each loop turn that took files (tests use it to end a run).

    Raises
    ------
    InputFileError
        The watched folder is missing.
    OutputError
        The output folder is not writable or its disk is full (the ledger stays intact).
    """
    spec = pipeline.spec
    if options.quiet_period_s is not None:
        spec = replace(spec, quiet_period_s=options.quiet_period_s)
    if options.poll is not None:
        spec = replace(spec, poll=options.poll)
    stop = stop or _StopFlag()
    watcher = FolderWatcher(spec)
    watcher.start()
    previous_handlers = []
    view = TerminalView(enabled=options.view)
    server = plot = None
    try:
        pipeline = replace(pipeline, spec=watcher.spec)
        out_dir = prepare_out_dir(options.out_dir)
        if options.handle_signals and threading.current_thread() is threading.main_thread():
            previous_handlers = _install_signal_handlers(stop)
        with RunLock(out_dir):
            state = RunState(pipeline, out_dir, options.refresh_s)
            try:
                if options.serve_port is not None:
                    from watchers.views import PageServer

                    server = PageServer(out_dir, options.serve_port).start()
                    log.warning("serving the run page at %s", server.url)
                if options.plot:
                    from watchers.views import LivePlot

                    plot = LivePlot()
                reason = _loop(state, watcher, options, stop, replay_done, on_turn, view, plot)
                state.refit(from_scratch=True)
                status = state.write_outputs(watcher.pending, reason, final=True)
                view.close(status)
                return RunSummary(reason, status.counts, state.outcome, out_dir)
            finally:
                state.close()
    finally:
        watcher.stop()
        if server is not None:
            server.stop()
        if plot is not None:
            plot.close()
        for number, handler in previous_handlers:
            signal.signal(number, handler)
        view.close()


def _loop(state: RunState, watcher: FolderWatcher, options: LiveOptions, stop: _StopFlag,
          replay_done, on_turn, view: TerminalView, plot) -> str:
    start = last_activity = time.monotonic()
    known = state.ledger.latest_stat()
    if state.ledger.n_processed():  # a restart: show where the run stands at once
        state.refit(from_scratch=True)
        view.update(state.write_outputs(watcher.pending))
    else:
        state.write_outputs(watcher.pending)
    target = state.pipeline.target_conversion
    while True:
        ready = watcher.ready()
        if ready:
            rows, handled, changed = process_ready(ready, state.ledger, state.pipeline.measure, known)
            for item in handled:
                watcher.mark_taken(item)
            for item in changed:
                watcher.requeue(item.relpath)
            for row in rows:
                if row.status == "quarantined":
                    log.warning("quarantined %s: %s", row.path, row.error)
                else:
                    log.info("%s %s", row.status, row.path)
            if rows:
                last_activity = time.monotonic()
                state.refit()
                status = state.write_outputs(watcher.pending)
                view.update(status)
                if plot is not None and state.table is not None:
                    plot.update(state.table, list(state.pipeline.signals),
                                state.outcome.curve if state.outcome else None)
                if on_turn is not None:
                    on_turn(state)
        now = time.monotonic()
        if stop.event.is_set():
            return stop.reason or "stopped"
        if target_reached(state.outcome, target):
            conversion = state.outcome.conversion
            return (f"target conversion {target:.0%} reached: fitted conversion "
                    f"{conversion['value']:.3f} (95 %: {conversion['ci95'][0]:.3f} – "
                    f"{conversion['ci95'][1]:.3f})")
        if options.max_duration_s is not None and now - start >= options.max_duration_s:
            return f"maximum duration of {options.max_duration_s:g} s reached"
        if options.idle_s is not None and now - last_activity >= options.idle_s:
            idle = (f"{options.idle_s:g} s" if options.idle_s < 120
                    else f"{options.idle_s / 60:g} min")
            return f"idle for {idle}: no new spectrum"
        if replay_done is not None and replay_done() and watcher.pending == 0 and not ready:
            watcher.relist()  # so a file renamed in just before the end is not missed
            if watcher.pending == 0:
                return "replay finished"
        stop.event.wait(options.tick_s)


# ---------------------------------------------------------------- the real refitter
@dataclass(frozen=True)
class RatesRefitter:
    """Fits the series table with :mod:`kinetics.rates.fit`; warm-starts from the last fit.

    Attributes
    ----------
    columns : tuple of str
        Series-table columns fitted (concentrations, mol/L).  One column for a rate law;
        one per observed species for a mechanism.
    model : str
        Rate law name (:data:`kinetics.rates.laws.MODELS`), default ``"first"``.
    observed : str
        ``"reactant"`` or ``"product"``: what a single law column holds.
    target_conversion : float or None
        For the forecast of the time to the target (rate laws only).
    sigma_suffix : str
        ``<column><sigma_suffix>`` holds the standard uncertainties (weights) when present.
    mechanism : str or None
        Reaction text (:mod:`kinetics.rates.mechanism`); replaces ``model`` when given.
    species : tuple of str
        The mechanism species the ``columns`` measure, in the same order.
    initial : tuple of (species, mol/L)
        Known initial concentrations of a mechanism (the others observed are fitted).
    """

    columns: tuple[str, ...]
    model: str = "first"
    observed: str = "reactant"
    target_conversion: float | None = None
    sigma_suffix: str = "_stderr"
    mechanism: str | None = None
    species: tuple[str, ...] = ()
    initial: tuple[tuple[str, float], ...] = ()

    def __post_init__(self) -> None:
        if isinstance(self.columns, str):  # one law column may be given bare
            object.__setattr__(self, "columns", (self.columns,))

    @property
    def column(self) -> str:
        return self.columns[0]

    def _data(self, table: pd.DataFrame):
        import numpy as np

        from kinetics.rates.table import from_arrays

        for column in self.columns:
            if column not in table:
                raise KineticsError(f"the series table has no column {column!r} to fit")
        rows = table[["time_s", *self.columns]].dropna()
        sigma = None
        sigma_columns = [f"{c}{self.sigma_suffix}" for c in self.columns]
        if all(c in table for c in sigma_columns):
            candidate = table.loc[rows.index, sigma_columns].to_numpy(float).T
            sigma = candidate if np.all(np.isfinite(candidate) & (candidate > 0)) else None
        values = rows[list(self.columns)].to_numpy(float).T
        names = list(self.species) if self.mechanism else list(self.columns)
        return rows, from_arrays(rows["time_s"].to_numpy(float), values, sigma=sigma, columns=names)

    def fit_from_scratch(self, data):
        from kinetics.rates.fit import fit_law, fit_mechanism

        if self.mechanism:
            return fit_mechanism(data, self.mechanism, observed=tuple(self.species),
                                 initial=dict(self.initial) or None)
        return fit_law(data, self.model, observed=self.observed)

    def __call__(self, table: pd.DataFrame, previous: FitOutcome | None) -> FitOutcome:
        import numpy as np

        from kinetics.rates.fit import refit

        rows, data = self._data(table)
        if len(rows) < 3:
            return FitOutcome(False, f"{len(rows)} spectra so far: a fit needs at least 3",
                              {"succeeded": False, "n_points": int(len(rows))})
        if previous is not None and previous.state is not None:
            result = refit(previous.state, data)
        else:
            result = self.fit_from_scratch(data)
        fit = result.to_dict()
        k_name = next((name for name in result.varying if name.startswith("k")), None)
        k = None if k_name is None else result.param(k_name).to_dict()
        conversion = forecast = None
        curve_of = (result.model.extra.get("conversion") if result.model is not None else None)
        last_s = float(data.time_s[-1])
        if curve_of is not None:
            conversion = result.derived(
                "conversion", lambda v: float(np.asarray(curve_of(np.array([last_s]), v))[0]), "",
                positive=False).to_dict()
            if self.target_conversion is not None:
                forecast = result.time_to_conversion(self.target_conversion).to_dict()
        grid = np.linspace(float(data.time_s[0]), last_s, 100)
        predicted = np.atleast_2d(np.asarray(result.predict(grid)))
        curve = {"time_s": grid.tolist(), self.column: predicted[0].tolist()}
        return FitOutcome(bool(result.converged), result.message, fit, k=k, conversion=conversion,
                          time_to_target_s=forecast, curve=curve, state=result)


FIT_KEYS = {
    # key: meaning -- the [fit] table of a run config
    "model": "rate-law name (kinetics.rates.laws.MODELS), default \"first\"",
    "observed": "\"reactant\" or \"product\": what the fitted species is, default \"reactant\"",
    "species": "species fitted by a rate law, default [quantify] reactant, else the first species",
    "mechanism": "reaction text, e.g. \"ester -> alcohol\"; replaces model",
    "observed_species": "mechanism species taken from the series table, default all it names that are measured",
    "initial_mol_per_l": "table species -> known initial concentration of a mechanism (mol/L)",
}


def refitter_from_config(config, target_conversion: float | None) -> RatesRefitter:
    """The ``[fit]`` table of a run config as a :class:`RatesRefitter` (validated here)."""
    from kinetics.errors import ConfigError
    from kinetics.rates.laws import MODELS

    fit = dict(config.sections.get("fit", {}) or {})
    unknown = sorted(set(fit) - set(FIT_KEYS))
    if unknown:
        raise ConfigError(f"fit.{unknown[0]}", "unknown key",
                          hint="known keys: " + ", ".join(sorted(FIT_KEYS)), source=config.path)
    measured = list(config.species)
    mechanism = fit.get("mechanism")
    if mechanism is not None:
        from kinetics.rates.mechanism import parse_mechanism

        if not isinstance(mechanism, str) or not mechanism.strip():
            raise ConfigError("fit.mechanism", "expected reaction text such as \"A -> B\"",
                              source=config.path)
        names = parse_mechanism(mechanism).species
        wanted = fit.get("observed_species") or [sp for sp in names if sp in measured]
        if not isinstance(wanted, list) or not wanted:
            raise ConfigError("fit.observed_species", "no species of the mechanism is measured",
                              hint=f"the mechanism names {', '.join(names)}; the signals measure "
                                   f"{', '.join(measured)}", source=config.path)
        for sp in wanted:
            if sp not in measured or sp not in names:
                raise ConfigError("fit.observed_species", f"{sp!r} is not both a measured species "
                                  "and a species of the mechanism", source=config.path)
        initial = fit.get("initial_mol_per_l", {}) or {}
        if not isinstance(initial, dict) or any(
                isinstance(v, bool) or not isinstance(v, (int, float)) or v < 0 for v in initial.values()):
            raise ConfigError("fit.initial_mol_per_l", "expected a table species = concentration >= 0",
                              source=config.path)
        return RatesRefitter(tuple(f"{sp}_concentration" for sp in wanted), mechanism=mechanism,
                             species=tuple(wanted), initial=tuple((str(k), float(v)) for k, v in initial.items()),
                             target_conversion=target_conversion, sigma_suffix="_sigma")
    model = str(fit.get("model", "first"))
    if model not in MODELS:
        raise ConfigError("fit.model", f"unknown rate law {model!r}", hint=f"use one of {', '.join(MODELS)}",
                          source=config.path)
    observed = str(fit.get("observed", "reactant"))
    if observed not in ("reactant", "product"):
        raise ConfigError("fit.observed", f"expected reactant or product, got {observed!r}", source=config.path)
    species = fit.get("species") or config.quantify.reactant or measured[0]
    if species not in measured:
        raise ConfigError("fit.species", f"{species!r} is not a measured species",
                          hint=f"measured: {', '.join(measured)}", source=config.path)
    return RatesRefitter((f"{species}_concentration",), model, observed, target_conversion,
                         sigma_suffix="_sigma")


# ---------------------------------------------------------------- the command
def watch_command(args) -> dict:
    """``kinetics watch``: build the pipeline from the config, run live, return a summary."""
    from kinetics.errors import ConfigError
    from watchers.replay import ReplayThread

    from kinetics.config import load_run_config

    out_dir = args.out or Path(args.config).with_suffix(".live")
    pipeline = build_from_config(args.config, Path(out_dir) / LEDGER_NAME)
    settings = live_settings(load_run_config(args.config))
    if args.target_conversion is not None:
        if not 0.0 < args.target_conversion < 1.0:
            raise ConfigError("--target-conversion", "must be a fraction between 0 and 1")
        pipeline = replace(pipeline, target_conversion=args.target_conversion)
    idle_minutes = args.idle_minutes if args.idle_minutes is not None else settings["idle_minutes"]
    options = LiveOptions(
        out_dir=out_dir, quiet_period_s=args.quiet_period, poll=True if args.poll else None,
        max_duration_s=args.max_duration if args.max_duration is not None else settings["max_duration_s"],
        idle_s=None if idle_minutes is None else 60.0 * idle_minutes,
        refresh_s=settings["refresh_s"], serve_port=args.serve, plot=args.plot)
    replayer = None
    if args.replay is not None:
        folder = Path(pipeline.spec.folder)
        if Path(args.replay).resolve() == folder.resolve():
            raise ConfigError("--replay", "the replay source is the watched folder itself",
                              hint="replay a finished copy into the run's folder")
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as error:
            raise ConfigError("run.folder", f"cannot create the watched folder {folder}: {error.strerror or error}",
                              hint="point [run] folder at a writable place for --replay") from error
        replayer = ReplayThread(args.replay, folder, args.interval, pipeline.spec.include)
        replayer.start()
    try:
        summary = run_live(pipeline, options,
                           replay_done=None if replayer is None else replayer.finished.is_set)
    finally:
        if replayer is not None:
            replayer.stop_event.set()
            replayer.join(timeout=5)
    if replayer is not None and replayer.error is not None:
        log.error("the replay failed: %s", replayer.error)
    outcome = summary.outcome
    return {"stop_reason": summary.stop_reason, "counts": summary.counts,
            "out_dir": str(summary.out_dir),
            "k": None if outcome is None else outcome.k,
            "conversion": None if outcome is None else outcome.conversion,
            "fit": None if outcome is None else outcome.fit}


# ---------------------------------------------------------------- wiring from a config
LIVE_KEYS = {
    # key: (type, default, meaning) -- the [live] table of a run config
    "quiet_period_s": (float, 2.0, "seconds a file must stay unchanged to count as complete"),
    "poll": (bool, False, "list the folder instead of listening to file events"),
    "poll_interval_s": (float, 1.0, "seconds between listings in poll mode"),
    "recursive": (bool, False, "also watch sub-folders"),
    "exclude": (list, [], "glob patterns of files never taken"),
    "target_conversion": (float, None, "stop once the conversion's lower 95 % bound reaches it"),
    "idle_minutes": (float, None, "stop after this many minutes without a new spectrum"),
    "max_duration_s": (float, None, "stop after this many seconds"),
    "refresh_s": (float, 5.0, "seconds between reloads of the HTML page"),
}


def live_settings(config) -> dict:
    """The validated ``[live]`` table of a run config, defaults filled in."""
    from kinetics.errors import ConfigError

    raw = dict(config.sections.get("live", {}) or {})
    unknown = sorted(set(raw) - set(LIVE_KEYS))
    if unknown:
        raise ConfigError(f"live.{unknown[0]}", "unknown key",
                          hint="known keys: " + ", ".join(sorted(LIVE_KEYS)), source=config.path)
    settings = {}
    for key, (kind, default, _meaning) in LIVE_KEYS.items():
        value = raw.get(key, default)
        if value is not None:
            if kind is float and (isinstance(value, bool) or not isinstance(value, (int, float))
                                  or value < 0):
                raise ConfigError(f"live.{key}", f"expected a number >= 0, got {value!r}",
                                  source=config.path)
            if kind is bool and not isinstance(value, bool):
                raise ConfigError(f"live.{key}", f"expected true or false, got {value!r}",
                                  source=config.path)
            if kind is list and not (isinstance(value, list) and all(isinstance(v, str) for v in value)):
                raise ConfigError(f"live.{key}", "expected a list of glob patterns", source=config.path)
            value = float(value) if kind is float else value
        settings[key] = value
    target = settings["target_conversion"]
    if target is not None and not 0.0 < target < 1.0:
        raise ConfigError("live.target_conversion", "must be a fraction between 0 and 1",
                          source=config.path)
    return settings


def _record_of(measurement, folder: Path, reference_path: str) -> dict:
    """A series FileMeasurement as JSON-ready values (paths relative to the folder)."""
    import dataclasses

    def iso(moment):
        return None if moment is None else moment.isoformat()

    return {
        "file": measurement.file, "sha256": measurement.sha256,
        "path": Path(measurement.path).resolve().relative_to(folder).as_posix(),
        "reference": reference_path,
        "start_utc": iso(measurement.start_utc), "mid_utc": iso(measurement.mid_utc),
        "elapsed_mid_s": measurement.elapsed_mid_s, "duration_s": measurement.duration_s,
        "time_source": measurement.time_source,
        "alignment_shift_ppm": measurement.alignment_shift_ppm,
        "noise_sigma": measurement.noise_sigma, "observe_mhz": measurement.observe_mhz,
        "signals": [dataclasses.asdict(item) for item in measurement.signals],
        "fit_windows": [{"group": w.group, "ppm": [float(x) for x in w.ppm],
                         "values": [float(x) for x in w.values]} for w in measurement.fit_windows],
        "notes": list(measurement.notes),
    }


def _measurement_of(record: dict, folder: Path):
    """Inverse of :func:`_record_of` (floats round-trip exactly through JSON)."""
    import numpy as np

    from kinetics import series

    def moment(text):
        return None if text is None else datetime.fromisoformat(text)

    signals = tuple(series.SignalResult(**{**item, "window_ppm": tuple(item["window_ppm"]),
                                           "flags": tuple(item["flags"])})
                    for item in record["signals"])
    windows = tuple(series.FitWindow(w["group"], np.asarray(w["ppm"], float),
                                     np.asarray(w["values"], float)) for w in record["fit_windows"])
    return series.FileMeasurement(
        path=str(folder / record["path"]), file=record["file"], sha256=record["sha256"],
        start_utc=moment(record["start_utc"]), mid_utc=moment(record["mid_utc"]),
        elapsed_mid_s=record["elapsed_mid_s"], duration_s=record["duration_s"],
        time_source=record["time_source"], alignment_shift_ppm=record["alignment_shift_ppm"],
        noise_sigma=record["noise_sigma"], observe_mhz=record["observe_mhz"],
        signals=signals, fit_windows=windows, notes=tuple(record["notes"]))


class SeriesMeasurer:
    """:func:`kinetics.series.measure_file` as a live :class:`Measurer`.

    The first file measured becomes the run's reference spectrum (alignment target), as in
    the batch path; its path is kept in every record, so a restart finds it again.
    Any error measuring a file quarantines that file (the run goes on).
    """

    def __init__(self, config, folder: Path, reference_path: str | None = None):
        self.config = config
        self.folder = Path(folder).resolve()
        self.reference = None
        self.reference_path = reference_path

    def __call__(self, path: Path) -> FileMeasurement:
        from kinetics import series
        from kinetics.store import SignalRow

        path = Path(path).resolve()
        try:
            if self.reference is None:
                first = self.folder / self.reference_path if self.reference_path else path
                self.reference = series.make_reference(first, self.config)
                self.reference_path = first.relative_to(self.folder).as_posix()
            measurement = series.measure_file(path, self.config, self.reference)
        except InputFileError:
            raise
        except (KineticsError, ValueError, ArithmeticError) as error:
            log.debug("measuring %s failed", path, exc_info=True)
            raise InputFileError(path, f"could not be measured: {error}") from error
        rows = tuple(SignalRow(item.name, item.integral, item.sigma, extra={
            "shift_ppm": item.shift_ppm, "flags": list(item.flags), "method": item.method})
            for item in measurement.signals)
        return FileMeasurement(measurement.mid_utc or measurement.start_utc, rows,
                               _record_of(measurement, self.folder, self.reference_path))


def _series_table(config, folder: Path, ledger: Ledger) -> pd.DataFrame:
    from kinetics import series

    records = ledger.records()
    if not records:
        return pd.DataFrame({"time_s": []})
    table = series.table_from_measurements([_measurement_of(r, folder) for _, r in records], config)
    return table


def build_from_config(config_path: Path, ledger_path: Path | None = None) -> Pipeline:
    """The real pipeline of a run config: series measurement, rates refit, ``[live]`` keys.

    The fitted column is ``<species>_concentration`` of ``[fit] species`` (default: the
    ``[quantify] reactant``, else the first species), with the law ``[fit] model``
    (default ``"first"``) observed as ``[fit] observed`` (default ``"reactant"``).
    ``ledger_path``, when it exists, gives a restarted run its reference spectrum.
    """
    from functools import partial

    from kinetics.config import load_run_config

    config_path = Path(config_path)
    config = load_run_config(config_path)
    settings = live_settings(config)
    folder = Path(config.folder)
    spec = WatchSpec(folder, include=(config.pattern,), exclude=tuple(settings["exclude"]),
                     recursive=settings["recursive"], quiet_period_s=settings["quiet_period_s"],
                     poll=settings["poll"], poll_interval_s=settings["poll_interval_s"])
    reference = None
    if ledger_path is not None and Path(ledger_path).exists():
        with Ledger(ledger_path) as ledger:
            records = ledger.records()
        reference = records[0][1].get("reference") if records else None
    resolved = folder.resolve() if folder.exists() else folder
    refitter = refitter_from_config(config, settings["target_conversion"])
    return Pipeline(
        spec=spec, measure=SeriesMeasurer(config, resolved, reference),
        build_table=partial(_series_table, config, resolved), refit=refitter,
        signals=tuple(f"{name}_concentration" for name in config.species),
        config_text=config_path.read_text(encoding="utf-8"),
        target_conversion=settings["target_conversion"], sigma_suffix="_sigma")


__all__ = ["FitOutcome", "LiveOptions", "Measurer", "Pipeline", "Refitter", "RunState",
           "RunSummary", "batch_run", "build_from_config", "process_ready", "run_live",
           "target_reached", "write_atomic"]
