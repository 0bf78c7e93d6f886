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
    build_table : callable (DataFrame) -> DataFrame
        Ledger measurements (:meth:`Ledger.measurements`, long) -> the series table
        (``time_s`` plus one column per signal).
    refit : Refitter
    signals : list of str
        Columns of the series table to plot and show.
    config_text : str
        The config the run is made from (kept in the ledger).
    target_conversion : float or None
        Stop once reached (fraction, 0-1).
    """

    spec: WatchSpec
    measure: Measurer
    build_table: Callable[[pd.DataFrame], pd.DataFrame]
    refit: Refitter
    signals: tuple[str, ...]
    config_text: str
    target_conversion: float | None = None


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
class FileChangedError(Exception):
    """A file changed while it was read (it is looked at again later)."""


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
        action = ledger.decide(item.relpath, sha).action
        if action == "known":
            handled.append(item)
            continue
        candidate = _Candidate(item, sha)
        if action == "new":
            try:
                candidate.measurement = measure(item.path)
            except InputFileError as error:
                candidate.error = error
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
                return measure(candidate.ready.path)
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
        long = self.ledger.measurements()
        self.table = self.pipeline.build_table(long)
        if self.table is None or len(self.table) == 0:
            self.outcome = None
            return None
        previous = None if from_scratch else self.outcome
        try:
            self.outcome = self.pipeline.refit(self.table, previous)
        except KineticsError as error:
            self.outcome = FitOutcome(False, str(error), {"succeeded": False, "message": str(error)})
        self.ledger.record_refit(self.outcome.fit, len(self.table))
        return self.outcome

    def status(self, pending: int = 0, stop_reason: str | None = None) -> LiveStatus:
        outcome = self.outcome
        latest_path = latest_acquired = latest_time = None
        concentrations: dict[str, tuple[float | None, float | None]] = {}
        if self.table is not None and len(self.table):
            last = self.table.iloc[-1]
            latest_path = str(last.get("path")) if "path" in self.table else None
            latest_acquired = last.get("acquired_utc") if "acquired_utc" in self.table else None
            latest_time = float(last["time_s"])
            for name in self.pipeline.signals:
                if name in self.table:
                    stderr = last.get(f"{name}_stderr")
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
                         self.outcome.curve if self.outcome else None)
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
def batch_run(pipeline: Pipeline, out_dir: Path) -> RunSummary:
    """A finished folder through the live code path: same ledger rows, same final fit.

    Every wanted file is taken by :func:`process_ready` in acquisition order, then one fit
    from scratch on the ledger table is written with the outputs (marked final).
    """
    from watchers.folder import check_folder

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
        Called after each loop turn that took files (the bench uses it).

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
    pipeline = replace(pipeline, spec=watcher.spec)
    out_dir = prepare_out_dir(options.out_dir)
    previous_handlers = []
    if options.handle_signals and threading.current_thread() is threading.main_thread():
        previous_handlers = _install_signal_handlers(stop)
    view = TerminalView(enabled=options.view)
    server = plot = None
    try:
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
    column : str
        Series-table column fitted (a concentration, mol/L).
    model : str
        Rate law name (:data:`kinetics.rates.laws.MODELS`), default ``"first"``.
    observed : str
        ``"reactant"`` or ``"product"``: what ``column`` holds.
    target_conversion : float or None
        For the forecast of the time to the target.
    """

    column: str
    model: str = "first"
    observed: str = "reactant"
    target_conversion: float | None = None

    def __call__(self, table: pd.DataFrame, previous: FitOutcome | None) -> FitOutcome:
        import numpy as np

        from kinetics.rates.fit import fit_law, refit
        from kinetics.rates.table import from_arrays

        if self.column not in table:
            raise KineticsError(f"the series table has no column {self.column!r} to fit")
        rows = table[["time_s", self.column]].dropna()
        sigma_column = f"{self.column}_stderr"
        if len(rows) < 3:
            return FitOutcome(False, f"{len(rows)} spectra so far: a fit needs at least 3",
                              {"succeeded": False, "n_points": int(len(rows))})
        sigma = None
        if sigma_column in table:
            candidate = table.loc[rows.index, sigma_column].to_numpy(float)
            sigma = candidate if np.all(np.isfinite(candidate) & (candidate > 0)) else None
        data = from_arrays(rows["time_s"].to_numpy(float), rows[self.column].to_numpy(float),
                           sigma=sigma, columns=[self.column])
        if previous is not None and previous.state is not None:
            result = refit(previous.state, data)
        else:
            result = fit_law(data, self.model, observed=self.observed)
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
        curve = {"time_s": grid.tolist(), self.column: np.asarray(result.predict(grid))[0].tolist()}
        return FitOutcome(bool(result.converged), result.message, fit, k=k, conversion=conversion,
                          time_to_target_s=forecast, curve=curve, state=result)


# ---------------------------------------------------------------- the command
def watch_command(args) -> dict:
    """``kinetics watch``: build the pipeline from the config, run live, return a summary."""
    from kinetics.errors import ConfigError
    from watchers.replay import ReplayThread

    pipeline = build_from_config(args.config)
    if args.target_conversion is not None:
        if not 0.0 < args.target_conversion < 1.0:
            raise ConfigError("--target-conversion", "must be a fraction between 0 and 1")
        pipeline = replace(pipeline, target_conversion=args.target_conversion)
    out_dir = args.out or Path(args.config).with_suffix(".live")
    options = LiveOptions(
        out_dir=out_dir, quiet_period_s=args.quiet_period, poll=True if args.poll else None,
        max_duration_s=args.max_duration,
        idle_s=None if args.idle_minutes is None else 60.0 * args.idle_minutes,
        serve_port=args.serve, plot=args.plot)
    replayer = None
    if args.replay is not None:
        folder = Path(pipeline.spec.folder)
        if Path(args.replay).resolve() == folder.resolve():
            raise ConfigError("--replay", "the replay source is the watched folder itself",
                              hint="replay a finished copy into the run's folder")
        folder.mkdir(parents=True, exist_ok=True)
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
def build_from_config(config_path: Path) -> Pipeline:
    """The real pipeline of a run config (series measurement + rates refit).

    Imported lazily so the live shell can be tested without the science modules.
    """
    from watchers.wiring import build_pipeline  # pragma: no cover - see the note

    return build_pipeline(Path(config_path))


__all__ = ["FitOutcome", "LiveOptions", "Measurer", "Pipeline", "Refitter", "RunState",
           "RunSummary", "batch_run", "build_from_config", "process_ready", "run_live",
           "target_reached", "write_atomic"]
