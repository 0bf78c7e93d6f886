"""The run engine: folder -> ledger -> measurements -> series -> fit -> outputs.

One path behind ``kinetics run`` (a finished folder, :func:`batch_run`), ``kinetics watch``
(the live shell ``watchers.live`` feeds the same :class:`RunState` files as they become
complete), studies given as run configs and later campaigns.  A batch run and a live run
over the same files write the same ledger rows and end with the same table and fit, by
construction.

Steps of a turn (:meth:`RunState.take` then :meth:`RunState.refit` and
:meth:`RunState.write_outputs`):

1. :func:`process_ready`: hash each file (a run read from one arrayed file: each complete
   block, with its digest, :mod:`kinetics.run.sources`), skip what the ledger already holds (a restart
   does not reprocess), measure the new ones (a file that does not parse is quarantined
   with the reason, the run goes on), order them by acquisition time and hand them to
   :meth:`kinetics.store.Ledger.ingest`, one transaction per file.  In a batch run the
   files after the first (the reference spectrum) are measured in parallel worker
   processes when there are cores; the ledger is written by this process alone, in order.
2. the series table is extended with the new measurements (kept in memory,
   :class:`kinetics.run.state.SeriesState`; fit groups at the last series-wide fit's line
   shapes, that fit itself redone from its previous optimum at most once per refresh
   interval) and the rate law refitted from the previous fit;
3. the outputs — ``fit.json`` every turn; ``series.csv``, ``series.png`` and
   ``index.html`` at most once per refresh interval (the rate fit's guardrail checks run
   at the same pace) — are written atomically.

The final table and fit of every run are computed from scratch
(:meth:`RunState.final_fit`), then k's processing uncertainty is assessed over the
spectra kept in memory (:mod:`kinetics.run.uncertainty`): the interval a run quotes
combines the statistical and the systematic parts.

The library never watches folders or sleeps: the loop, the stop conditions and the views
are in ``watchers/``.
"""

from __future__ import annotations

import contextlib
import logging
import multiprocessing
import os
import time
from concurrent.futures import ProcessPoolExecutor
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any, Callable, Protocol

import pandas as pd

from kinetics.config import RunConfig, load_run_config
from kinetics import series
from kinetics.errors import ConfigError, FitError, InputFileError, KineticsError
from kinetics.linalg import small_linear_algebra
from kinetics.run.files import (ReadyFile, WatchSpec, acquisition_sort_key, attribution_key, check_folder,
                                 ledger_attribution_key, list_wanted, same_file_state)
from kinetics.run.outputs import (LEDGER_NAME, RunLock, figure_png, prepare_out_dir, remove_stale_temporaries,
                                  run_status, write_page, write_table_and_fit)
from kinetics.run.refit import FitOutcome, RatesRefitter, Refitter, refitter_from_config
from kinetics.run.state import SeriesMeasurer, SeriesState
from kinetics.spectra.spectrum import sha256_of_file
from kinetics.store import FileMeasurement, FileRow, Ledger, utc_now_iso

log = logging.getLogger(__name__)

#: a batch run measures in worker processes from this many new files on
PARALLEL_MIN_FILES = 64

#: A progress callback: ``progress(stage, done, total)``, e.g. ``("spectra", 12, 36)``.  The
#: library reports through it and never prints; the command line draws bars from it.
Progress = Callable[[str, int, int], None]


# ---------------------------------------------------------------- the plan of a run
class Measurer(Protocol):
    """path -> the file's measurement; raises InputFileError when the file is bad."""

    def __call__(self, path: Path) -> FileMeasurement: ...


class TableSource(Protocol):
    """Where a run's series table comes from (see :class:`LedgerTable`, :class:`SeriesState`)."""

    def load(self, ledger: Ledger) -> None: ...

    def take(self, taken: list[tuple[FileRow, FileMeasurement | None]]) -> None: ...

    def table(self, final: bool = False, refresh: bool = True) -> pd.DataFrame: ...


class LedgerTable:
    """A table rebuilt from the ledger by a function, for measurers that keep no state."""

    def __init__(self, build: Callable[[Ledger], pd.DataFrame]):
        self.build = build
        self.ledger: Ledger | None = None

    def load(self, ledger: Ledger) -> None:
        self.ledger = ledger

    def take(self, taken) -> None:
        pass

    def table(self, final: bool = False, refresh: bool = True) -> pd.DataFrame:
        return self.build(self.ledger)


@dataclass(frozen=True)
class RunPlan:
    """The science of one run: what the engine measures, tabulates and fits.

    Attributes
    ----------
    spec : WatchSpec
        Folder, include/exclude patterns, recursion (the live shell also reads its quiet
        period and poll mode).
    measure : Measurer
    build_table : callable (Ledger) -> DataFrame, or None
        For a measurer that keeps no in-memory state: the ledger's counted files -> the
        series table.  None when ``source`` is given.
    refit : Refitter
    signals : tuple of str
        Columns of the series table to plot and show.
    config_text : str
        The config the run is made from (kept in the ledger).
    target_conversion : float or None
        Stop once reached (fraction, 0-1).
    sigma_suffix : str
        ``<signal><sigma_suffix>`` is the column of each signal's standard uncertainty.
    source : callable () -> TableSource, or None
        Makes the run's incremental table state (a series run's :class:`SeriesState`).
    config : RunConfig or None
        The validated run config the plan was made from.
    series : kinetics.run.sources.ArrayedSource or None
        For a run read from one arrayed file: turns the ready file into its traces
        (:mod:`kinetics.run.sources`); None for a folder of files.
    """

    spec: WatchSpec
    measure: Measurer
    build_table: Callable[[Ledger], pd.DataFrame] | None
    refit: Refitter
    signals: tuple[str, ...]
    config_text: str
    target_conversion: float | None = None
    sigma_suffix: str = "_stderr"
    source: Callable[[], TableSource] | None = None
    config: RunConfig | None = field(default=None, repr=False, compare=False)
    series: Any = field(default=None, repr=False, compare=False)

    def table_source(self) -> TableSource:
        return self.source() if self.source is not None else LedgerTable(self.build_table)


def _ledger_exists(path: Path) -> bool:
    """Whether a ledger is there; an output path the system refuses (too long) is an OutputError."""
    try:
        return path.exists()
    except OSError as error:
        from kinetics.atomic import output_error

        raise output_error(path, error) from error


def plan_from_config(config: RunConfig | str | Path, ledger_path: Path | None = None, *,
                     folder: Path | None = None, require_named: bool = True) -> RunPlan:
    """The plan of a run config: series measurement, rates refit, ``[live]`` settings.

    Parameters
    ----------
    config : RunConfig, or the path of a run config
    ledger_path : Path, optional
        When it exists, a restarted run takes its reference spectrum from it.
    folder : Path, optional
        Run the config on this folder instead of its ``[run] folder`` (studies).
    require_named : bool
        Refuse a draft that does not yet name the fitted species and the quantification
        (:meth:`RunConfig.require_named`; ``kinetics run`` and ``kinetics watch``).
    """
    if not isinstance(config, RunConfig):
        config = load_run_config(config)
    if folder is not None:
        config = replace(config, folder=Path(folder),
                         file=None if config.file is None else Path(folder) / config.file.name)
    if require_named:
        config.require_named()
    live = config.live
    folder = Path(config.folder)
    spec = WatchSpec(folder, include=(config.pattern,), exclude=live.exclude, recursive=live.recursive,
                     quiet_period_s=live.quiet_period_s, poll=live.poll, poll_interval_s=live.poll_interval_s)
    reference = None
    if ledger_path is not None and str(ledger_path) != ":memory:" and _ledger_exists(Path(ledger_path)):
        with Ledger(ledger_path) as ledger:
            record = ledger.first_record()
        reference = record.get("reference") if record else None
    resolved = folder.resolve() if folder.exists() else folder
    text = config.text if config.text is not None else (
        config.path.read_text(encoding="utf-8") if config.path is not None else repr(config))
    arrayed = measure = None
    if config.file is not None:  # one arrayed file: its complete blocks are the spectra
        from kinetics.run.sources import ArrayedSource, TraceMeasurer

        arrayed = ArrayedSource(config, resolved)
        measure = TraceMeasurer(config, resolved, arrayed, reference)
        # a block is complete when the reader finds its end, so no quiet period is waited
        spec = replace(spec, quiet_period_s=0.0)
    return RunPlan(
        spec=spec, measure=measure or SeriesMeasurer(config, resolved, reference), build_table=None,
        refit=refitter_from_config(config.fit, live.target_conversion),
        signals=tuple(f"{name}_concentration" for name in config.species),
        config_text=text, target_conversion=live.target_conversion, sigma_suffix="_sigma",
        source=lambda: SeriesState(config, resolved), config=config, series=arrayed)


# ---------------------------------------------------------------- one group of ready files
@dataclass
class _Candidate:
    ready: ReadyFile
    sha256: str | None = None
    measurement: FileMeasurement | None = None
    error: InputFileError | None = None
    sort_key: tuple = field(default_factory=tuple)


def _input(item):
    """What the measurer is given: a file's path, or a trace of an arrayed file itself."""
    return item if getattr(item, "digest", None) is not None else item.path


def _stat_or_none(path: Path) -> os.stat_result | None:
    try:
        return os.stat(path)
    except FileNotFoundError:
        return None


def _measure_safely(measure: Measurer, path: Path):
    """(measurement, None), or (None, InputFileError) for a file that cannot be measured.

    Whatever a parser or measurer raises on a bad file becomes a quarantine reason: a bad
    file never stops a run.
    """
    try:
        with small_linear_algebra():
            return measure(path), None
    except InputFileError as error:
        return None, error
    except ConfigError:  # the config does not fit the run (e.g. a window off the axis): stop
        raise
    except Exception as error:  # noqa: BLE001 - any failure on one file quarantines that file
        log.debug("measuring %s failed", path, exc_info=True)
        return None, InputFileError(path, f"could not be measured: {type(error).__name__}: {error}",
                                    hint="the file is quarantined; the run goes on")


_WORKER_MEASURE: Measurer | None = None  # set in the parent just before the worker processes fork
_WORKER_INPUTS: list = []  # the paths (or traces) to measure, likewise


def _measure_in_worker(index: int):
    measurement, error = _measure_safely(_WORKER_MEASURE, _WORKER_INPUTS[index])
    if error is None:
        return _picklable(measurement), None
    # an exception's own pickling loses its fields: send them and rebuild it
    return None, (error.path, error.problem, error.line, getattr(error, "hint", None))


def _picklable(measurement):
    """A measurement sent back from a worker: its kept spectrum as plain fields (the
    record's header is a read-only mapping, which does not pickle)."""
    import dataclasses

    value = getattr(measurement, "value", None)
    spectrum = getattr(value, "spectrum", None)
    if spectrum is None:
        return measurement, None
    fields = {f.name: getattr(spectrum, f.name) for f in dataclasses.fields(spectrum) if f.init}
    fields["header"] = dict(fields.get("header") or {})
    return replace(measurement, value=replace(value, spectrum=None)), (type(spectrum), fields)


def _unpickled(measurement, spectrum):
    if spectrum is None:
        return measurement
    kind, fields = spectrum
    return replace(measurement, value=replace(measurement.value, spectrum=kind(**fields)))


def _workers(n_files: int, parallel: bool) -> int:
    if not parallel or n_files < PARALLEL_MIN_FILES or "fork" not in multiprocessing.get_all_start_methods():
        return 1
    try:
        cores = len(os.sched_getaffinity(0))
    except AttributeError:  # pragma: no cover - not Linux
        cores = os.cpu_count() or 1
    return max(1, min(cores, n_files // 4))


def _measure_all(measure: Measurer, paths: list[Path], parallel: bool, progress: Progress | None = None,
                 ) -> list[tuple]:
    """Measure ``paths`` in order: the first here (it may become the reference), the rest in
    worker processes when there are cores; results in the order of ``paths``.  ``progress``
    is told ``("spectra", done, total)`` after each file."""
    if not paths:
        return []
    tick = progress or (lambda stage, done, total: None)
    results = [_measure_safely(measure, paths[0])]
    tick("spectra", 1, len(paths))
    workers = _workers(len(paths) - 1, parallel)
    if workers <= 1:
        for path in paths[1:]:
            results.append(_measure_safely(measure, path))
            tick("spectra", len(results), len(paths))
        return results
    global _WORKER_MEASURE, _WORKER_INPUTS
    _WORKER_MEASURE, _WORKER_INPUTS = measure, list(paths)
    try:
        # fork: the workers inherit the measurer (its config and reference spectrum), so
        # only paths go out and measurements come back
        with ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("fork")) as pool:
            chunk = max(1, (len(paths) - 1) // (4 * workers))
            for measurement, error in pool.map(_measure_in_worker, range(1, len(paths)), chunksize=chunk):
                if error is not None:
                    path, problem, line, hint = error
                    error = InputFileError(path, problem, line=line, hint=hint)
                else:
                    measurement = _unpickled(*measurement)
                results.append((measurement, error))
                tick("spectra", len(results), len(paths))
    finally:
        _WORKER_MEASURE, _WORKER_INPUTS = None, []
    return results


def process_ready(ready: list[ReadyFile], ledger: Ledger, measure: Measurer,
                  known: dict[str, tuple[int, int, str]] | None = None, *,
                  taken: list | None = None, parallel: bool = False, progress: Progress | None = None,
                  ) -> tuple[list[FileRow], list[ReadyFile], list[ReadyFile]]:
    """Take a group of complete files into the ledger, in acquisition order.

    Acquisition order is the header's acquisition time when the file has one (the file
    is parsed here anyway), else the modification time, then the name
    (:func:`kinetics.run.files.attribution_key`).  Every file handed over is hashed: its
    content, not its stat, says whether it is new.  A copy of content already counted
    under another name is measured too, and counts instead when the rule puts it first
    (the other row becomes its duplicate and is returned among ``rows``), so a live run
    ends with a batch run's attribution whatever the arrival order.

    Parameters
    ----------
    ready : list of ReadyFile
        In the order the files are to be measured (the first new one may become the
        run's reference spectrum).
    ledger : Ledger
    measure : Measurer
    known : dict, optional
        :meth:`Ledger.latest_stat`, kept up to date; a trace of an arrayed file whose
        digest it already holds is skipped (a plain file is always hashed: a rewrite
        with the same size and modification time is a new version).
    taken : list, optional
        Receives ``(FileRow, FileMeasurement or None)`` of every new row, in ingest order
        (the engine's in-memory state is extended from it).
    parallel : bool
        Measure in worker processes when there are cores (batch runs).
    progress : callable (stage, done, total), optional
        Told ``("spectra", done, total)`` as the new files are measured (see :data:`Progress`).

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
        digest = getattr(item, "digest", None)  # a trace of an arrayed file comes with its digest
        if previous is not None and digest is not None and previous[:2] == (item.size_bytes, item.mtime_ns) \
                and previous[2] == digest:
            handled.append(item)
            continue
        try:
            sha = digest or sha256_of_file(item.path)
        except FileNotFoundError:
            continue  # deleted after it was complete: nothing to take
        except OSError as error:  # no read permission, a disk error: never stop the run
            log.warning("cannot read %s yet (%s); it is looked at again later", item.path, error)
            continue
        action = ledger.decide(item.relpath, sha).action
        if action == "known":
            handled.append(item)
            continue
        candidates.append((_Candidate(item, sha), action))
    # a duplicate copy is measured too: its acquisition time decides which copy counts
    new = [candidate for candidate, action in candidates if action in ("new", "duplicate")]
    for candidate, (measurement, error) in zip(new, _measure_all(measure, [_input(c.ready) for c in new], parallel,
                                                                        progress)):
        candidate.measurement, candidate.error = measurement, error
    ordered = []
    for candidate, _ in candidates:
        item = candidate.ready
        # a trace's bytes were read once and are identified by its digest: the file may grow
        if getattr(item, "digest", None) is None and not same_file_state(item, _stat_or_none(item.path)):
            changed.append(item)
            continue
        acquired = candidate.measurement.acquired_utc if candidate.measurement else None
        candidate.sort_key = attribution_key(acquired, item.mtime_ns, item.relpath)
        ordered.append(candidate)
    ordered.sort(key=lambda c: c.sort_key)
    rows = []
    for candidate in ordered:
        used: list[FileMeasurement] = []

        def measured(candidate=candidate) -> FileMeasurement:
            if candidate.error is not None:
                raise candidate.error
            measurement = candidate.measurement
            if measurement is None:  # a duplicate whose twin has just gone
                measurement, error = _measure_safely(measure, _input(candidate.ready))
                if error is not None:
                    raise error
            used.append(measurement)
            return measurement

        def outranks(twin, key=candidate.sort_key) -> bool:  # the one attribution rule
            return key < ledger_attribution_key(twin.acquired_utc, twin.mtime_ns, twin.path)

        demoted: list[FileRow] = []
        row = ledger.ingest(candidate.ready.relpath, candidate.sha256, candidate.ready.size_bytes,
                            candidate.ready.mtime_ns, measured, candidate.ready.first_seen_utc,
                            source=getattr(candidate.ready, "source", None),
                            block=getattr(candidate.ready, "block", None),
                            outranks=outranks, demoted=demoted)
        handled.append(candidate.ready)
        if row is not None:
            rows.append(row)
            if taken is not None:
                taken.append((row, used[-1] if used and row.status == "processed" else None))
            for lost in demoted:  # a copy counted before, now this one's duplicate
                log.info("%s counts instead of its copy %s (earlier by acquisition, then name)",
                         row.path, lost.path)
                rows.append(lost)
                if taken is not None:
                    taken.append((lost, None))
            known[candidate.ready.relpath] = (candidate.ready.size_bytes,
                                              candidate.ready.mtime_ns, candidate.sha256)
    return rows, handled, changed


# ---------------------------------------------------------------- the state of a run
class RunState:
    """Ledger, in-memory table, fit and outputs of one run (batch and live alike).

    Parameters
    ----------
    plan : RunPlan
    out_dir : Path or None
        Gets ``ledger.sqlite`` and the outputs; None keeps the ledger in memory and
        writes nothing.
    refresh_s : float
        The figure and the page are redrawn at most this often (every final write too).
    clock : callable () -> float
        Monotonic seconds (``time.monotonic``), for the refresh interval.
    """

    def __init__(self, plan: RunPlan, out_dir: Path, refresh_s: float = 5.0,
                 clock: Callable[[], float] = time.monotonic):
        self.plan = plan
        self.refresh_s = refresh_s
        self._clock = clock
        if out_dir is None:  # a run kept in memory (no output files, the ledger in memory)
            self.out_dir = None
            self.ledger = Ledger(":memory:")
        else:
            self.out_dir = prepare_out_dir(out_dir)
            remove_stale_temporaries(self.out_dir)
            self.ledger = Ledger(self.out_dir / LEDGER_NAME)
        self.ledger.save_config(plan.config_text)
        self.source = plan.table_source()
        self.source.load(self.ledger)
        self.outcome: FitOutcome | None = None
        self.table: pd.DataFrame | None = None
        self.started_utc = utc_now_iso()
        self.known = self.ledger.latest_stat()
        self._png: bytes | None = None
        self._drawn_at: float | None = None
        #: measure the processing variants in worker processes (a batch run of at least
        #: PARALLEL_MIN_FILES spectra: below, forking costs more than it saves; a live
        #: run's final pass measures them here)
        self.parallel_assessment = False

    def close(self) -> None:
        self.ledger.close()

    def take(self, ready: list[ReadyFile], parallel: bool = False, progress: Progress | None = None):
        """One group of complete files into the ledger and the in-memory state (an arrayed
        file's complete blocks, each once: :mod:`kinetics.run.sources`)."""
        taken: list = []
        series_source = self.plan.series
        items = ready if series_source is None else series_source.items(ready)
        rows, handled, changed = process_ready(items, self.ledger, self.plan.measure, self.known, taken=taken,
                                               parallel=parallel, progress=progress)
        self.source.take(taken)
        if series_source is not None:
            handled, changed = series_source.files_of(ready, handled, changed)
        return rows, handled, changed

    def refit(self, from_scratch: bool = False) -> FitOutcome | None:
        """The table (extended, or from scratch) and its fit (warm start unless from scratch)."""
        # A table or fit that cannot be made yet (too few points, a numerical failure) is
        # shown as such; it must not end a live run that later spectra may rescue.
        try:
            self.table = self.source.table(final=from_scratch, refresh=self._due(from_scratch))
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
            if previous is not None and isinstance(self.plan.refit, RatesRefitter):
                self.outcome = self.plan.refit(self.table, previous, checks=self._due(False))
            else:
                self.outcome = self.plan.refit(self.table, previous)
        except (KineticsError, ValueError, ArithmeticError) as error:
            self.outcome = FitOutcome(False, str(error), {"succeeded": False, "message": str(error)})
        self.ledger.record_refit(self.outcome.fit, len(self.table))
        return self.outcome

    def final_fit(self, processing_uncertainty: bool = True) -> FitOutcome | None:
        """The run's final table and fit from scratch, then (``processing_uncertainty``)
        the systematic term of k over neighbouring processing choices
        (:mod:`kinetics.run.uncertainty`): the outcome's k then quotes the combined
        interval, its fit dict carries ``processing_uncertainty`` and the warnings."""
        outcome = self.refit(from_scratch=True)
        if not processing_uncertainty or outcome is None or self.plan.config is None:
            return outcome
        if not (isinstance(self.plan.refit, RatesRefitter) and isinstance(self.source, SeriesState)
                and isinstance(self.plan.measure, SeriesMeasurer)):
            return outcome
        from kinetics.run.uncertainty import assess_outcome
        from kinetics.sensitivity import worker_count

        measure = self.plan.measure
        try:
            reference = measure.reference
            reference_path = measure.reference_path or (self.ledger.first_record() or {}).get("reference")
            if reference is None and reference_path is not None:  # a restart that measured nothing new
                if hasattr(measure, "reference_of"):  # a trace of an arrayed file
                    reference = measure.reference_of(reference_path)
                else:
                    reference = series.make_reference(self.source.folder / reference_path, self.plan.config)
            measured = self.source.measurements()
            if self.plan.series is not None:  # a restart: the traces' spectra come from the file
                measured = self.plan.series.restore_spectra(measured, reference)
            many = self.parallel_assessment and len(self.source) >= PARALLEL_MIN_FILES
            workers = worker_count() if many else 1
            with small_linear_algebra():
                k, doc, warnings, text = assess_outcome(
                    self.plan.config, self.plan.refit, measured, reference, self.table,
                    outcome, workers=workers,
                    fits=self.source.final_fits())
        except (KineticsError, ValueError, ArithmeticError) as error:
            log.warning("the processing uncertainty could not be assessed: %s", error)
            k, doc, warnings, text = outcome.k, {"assessed": False, "reason": f"failed: {error}"}, [], None
        fit = dict(outcome.fit)
        if warnings:
            fit["warnings"] = list(fit.get("warnings") or ()) + warnings
        self.outcome = replace(outcome, k=k, fit=fit, processing=doc, report_text=text)
        self.ledger.record_refit({**fit, "processing_uncertainty": doc}, len(self.table))
        return self.outcome

    def status(self, pending: int = 0, stop_reason: str | None = None):
        """What the views show (:class:`kinetics.run.outputs.LiveStatus`)."""
        return run_status(self, pending, stop_reason)

    def _due(self, final: bool) -> bool:
        """Whether this turn redraws (and rechecks): final, first, or a refresh interval on."""
        return final or self._drawn_at is None or self._clock() - self._drawn_at >= self.refresh_s

    def write_outputs(self, pending: int = 0, stop_reason: str | None = None, final: bool = False,
                      figures: bool = True):
        """fit.json every call; series.csv, series.png and index.html when the refresh
        interval has passed (always when ``final``; the figure and page only with
        ``figures``).  Each file atomically."""
        status = self.status(pending, stop_reason)
        table = self.table if self.table is not None else pd.DataFrame({"time_s": []})
        due = self._due(final)
        write_table_and_fit(self, table if due else None, status, stop_reason, final)
        if due and figures:
            self._png = figure_png(self, table)
            write_page(self, status, self._png, final)
            self._drawn_at = self._clock()
        return status


# ---------------------------------------------------------------- batch
@dataclass(frozen=True)
class RunSummary:
    """How a run ended: the reason, the counts, the final fit outcome and table."""

    stop_reason: str
    counts: dict[str, int]
    outcome: FitOutcome | None
    out_dir: Path
    table: pd.DataFrame | None = field(default=None, compare=False, repr=False)


def ready_files(spec: WatchSpec, noted: set[str] | None = None) -> list[ReadyFile]:
    """Every wanted file of a finished folder, in acquisition order (the engine's rule).

    ``noted``: symbolic links already warned about (each link not followed is named once)."""
    now = utc_now_iso()
    ready = [ReadyFile.from_stat(Path(spec.folder) / rel, rel, st, now) for rel, st in list_wanted(spec, noted)]
    ready.sort(key=acquisition_sort_key)
    return ready


def batch_run(plan: RunPlan | RunConfig | str | Path, out_dir: Path | None, *, parallel: bool = True,
              outputs: bool = True, figures: bool = True, processing_uncertainty: bool = True,
              progress: Progress | None = None) -> RunSummary:
    """A finished folder through the engine: ledger, table and fit from scratch, outputs.

    Parameters
    ----------
    plan : RunPlan, or a run config (path or record; see :func:`plan_from_config`)
    out_dir : Path or None
        Gets ``ledger.sqlite``, ``series.csv``, ``fit.json``, ``series.png``, ``index.html``.
        None: the run is kept in memory (ledger in memory, no file written; the Python API).
    parallel : bool
        Measure files in worker processes where there are cores (results are identical
        and in the same order; the ledger is written by this process alone).
    outputs : bool
        Write the output files (the ledger is always written).
    figures : bool
        Also draw ``series.png`` and ``index.html`` (a study's runs leave them out).
    processing_uncertainty : bool
        Assess k's systematic term over neighbouring processing choices
        (:meth:`RunState.final_fit`).
    progress : callable (stage, done, total), optional
        Told ``("spectra", done, total)`` as files are measured (see :data:`Progress`).
    """
    if not isinstance(plan, RunPlan):
        plan = plan_from_config(plan, None if out_dir is None else Path(out_dir) / LEDGER_NAME)
    folder = check_folder(plan.spec.folder)
    plan = replace(plan, spec=replace(plan.spec, folder=folder))
    noted: set[str] = set()  # links not followed, named once
    if not list_wanted(plan.spec, noted) and plan.series is not None:
        raise ConfigError("run.file", f"{plan.series.path} does not exist",
                          hint="check run.file (relative to the config's folder)")
    if not list_wanted(plan.spec, noted):  # a finished folder with nothing to take: a config error
        raise ConfigError("run.pattern", f"no file in {folder} matches {' or '.join(plan.spec.include)!r}",
                          hint="check run.folder and run.pattern (e.g. '*.jdx'; live.exclude also applies)")
    out_dir = None if out_dir is None else prepare_out_dir(out_dir)
    with RunLock(out_dir) if out_dir is not None else contextlib.nullcontext():
        state = RunState(plan, out_dir)
        try:
            state.take(ready_files(plan.spec, noted), parallel=parallel, progress=progress)
            if plan.series is not None and plan.series.error is not None:
                raise plan.series.error  # the run's one file cannot be read: say where and why
            state.parallel_assessment = parallel
            outcome = state.final_fit(processing_uncertainty)
            if outputs and out_dir is not None:
                state.write_outputs(stop_reason="batch run finished", final=True, figures=figures)
            return RunSummary("batch run finished", state.ledger.counts(), outcome, out_dir, state.table)
        finally:
            state.close()


__all__ = ["LedgerTable", "Measurer", "PARALLEL_MIN_FILES", "RunPlan", "RunState", "RunSummary",
           "TableSource", "batch_run", "plan_from_config", "process_ready", "ready_files"]


# ---------------------------------------------------------------- in memory
@dataclass(frozen=True)
class SeriesRun:
    """A batch run: the table and the per-file measurements behind it."""

    table: pd.DataFrame
    measurements: tuple[series.FileMeasurement, ...]
    reference: series.Reference
    config: RunConfig = field(repr=False)


def run_series(config: RunConfig) -> SeriesRun:
    """Batch path without output files: the folder through the run engine, in memory.

    The same engine as ``kinetics run`` (:func:`kinetics.run.engine.batch_run`), with an
    in-memory ledger: the same reference spectrum, the same table.  A file that cannot be
    measured is quarantined (left out of the table) as in any run.
    """
    series.list_files(config)  # a clear error for a missing folder or no matching file
    plan = plan_from_config(config, require_named=False)
    state = RunState(plan, None)
    try:
        state.take(ready_files(plan.spec))
        table = state.source.table(final=True)
        measured = state.source.measurements()
    finally:
        state.close()
    if not measured:
        raise FitError("no file of the run could be measured")
    by_file = {m.file: m for m in measured}
    ordered = tuple(by_file[name] for name in table["file"])
    return SeriesRun(table, ordered, plan.measure.reference, config)


def run_config_to_table(path: str | Path) -> pd.DataFrame:
    """Load a single-run TOML config and return its tidy table."""
    return run_series(load_run_config(path)).table
