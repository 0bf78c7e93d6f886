"""The live loop: file events -> the run engine -> views; stop conditions; signals.

Steps per loop turn (``tick_s`` apart):

1. ask the :class:`~watchers.folder.FolderWatcher` which files became complete;
2. hand them to the engine (:meth:`kinetics.run.engine.RunState.take`): hashed, skipped
   when the ledger already holds them, measured, ingested in acquisition order; only new
   spectra are measured and the series table is extended in memory;
3. when something was counted: refit from the previous fit and write the outputs
   (``series.csv``, ``fit.json`` every turn; ``series.png`` and ``index.html`` at most once
   per refresh interval), each atomically;
4. check the stop conditions: target conversion reached (the lower end of its 95 %
   interval at or above the target), idle for N minutes, maximum duration, a replay that
   has finished and been taken in, Ctrl-C or SIGTERM.  Each ends with the final report:
   the table and fit from scratch (identical to the batch run's), ``fit.json`` marked
   final with the stop reason, and the final page.

The engine (measuring, ledger, table, refit, outputs) is library code in
:mod:`kinetics.run`; this module only feeds it files as they arrive.
"""

from __future__ import annotations

import logging
import signal
import threading
import time
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Callable

from kinetics.run.engine import RunPlan, RunState, RunSummary, plan_from_config
from kinetics.run.outputs import LEDGER_NAME, RunLock, prepare_out_dir
from kinetics.run.refit import FitOutcome
from watchers.folder import FolderWatcher
from watchers.views import TerminalView

log = logging.getLogger(__name__)


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


def target_reached(outcome: FitOutcome | None, target: float | None) -> bool:
    """True when the lower end of the fitted conversion's 95 % interval is >= target."""
    if outcome is None or target is None or not outcome.succeeded or not outcome.conversion:
        return False
    interval = outcome.conversion.get("ci95")
    low = interval[0] if interval else None
    return low is not None and low >= target


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


def run_live(plan: RunPlan, options: LiveOptions, stop: _StopFlag | None = None,
             replay_done: Callable[[], bool] | None = None,
             on_turn: Callable[[RunState], None] | None = None) -> RunSummary:
    """Follow the folder until a stop condition; end with the final report.

    Parameters
    ----------
    plan : RunPlan
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
    spec = plan.spec
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
        plan = replace(plan, spec=watcher.spec)
        out_dir = prepare_out_dir(options.out_dir)
        if options.handle_signals and threading.current_thread() is threading.main_thread():
            previous_handlers = _install_signal_handlers(stop)
        with RunLock(out_dir):
            state = RunState(plan, out_dir, options.refresh_s)
            try:
                if options.serve_port is not None:
                    from watchers.views import PageServer

                    server = PageServer(out_dir, options.serve_port).start()
                    log.warning("serving the run page at %s", server.url)
                if options.plot:
                    from watchers.views import LivePlot

                    plot = LivePlot()
                reason = _loop(state, watcher, options, stop, replay_done, on_turn, view, plot)
                state.final_fit()  # from scratch, with the processing uncertainty
                status = state.write_outputs(watcher.pending, reason, final=True)
                view.close(status)
                return RunSummary(reason, status.counts, state.outcome, out_dir, state.table)
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
    if state.ledger.n_processed():  # a restart: show where the run stands at once
        state.refit(from_scratch=True)
        view.update(state.write_outputs(watcher.pending))
    else:
        state.write_outputs(watcher.pending)
    target = state.plan.target_conversion
    while True:
        ready = watcher.ready()
        if ready:
            rows, handled, changed = state.take(ready)
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
                    plot.update(state.table, list(state.plan.signals),
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


# ---------------------------------------------------------------- the command
def _make_watched_folder(folder: Path, key: str) -> None:
    """Create the folder a ``--replay`` writes into; a ConfigError naming ``key`` if impossible."""
    from kinetics.errors import ConfigError

    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as error:
        raise ConfigError(key, f"cannot create the watched folder {folder}: {error.strerror or error}",
                          hint="give --folder DIR, a writable place for --replay") from error


def watch_command(args) -> dict:
    """``kinetics watch``: build the run plan from the config, run live, return a summary."""
    from kinetics.config import load_run_config
    from kinetics.errors import ConfigError
    from watchers.replay import ReplayThread

    out_dir = args.out or Path(args.config).with_suffix(".live")
    config = load_run_config(args.config)
    folder_override = getattr(args, "folder", None)
    if folder_override is not None and args.replay is not None:
        _make_watched_folder(Path(folder_override), "--folder")  # before the plan resolves it
    plan = plan_from_config(config, Path(out_dir) / LEDGER_NAME, folder=folder_override)
    settings = config.live
    if args.target_conversion is not None:
        if not 0.0 < args.target_conversion < 1.0:
            raise ConfigError("--target-conversion", "must be a fraction between 0 and 1")
        plan = replace(plan, target_conversion=args.target_conversion)
    idle_minutes = args.idle_minutes if args.idle_minutes is not None else settings.idle_minutes
    options = LiveOptions(
        out_dir=out_dir, quiet_period_s=args.quiet_period, poll=True if args.poll else None,
        max_duration_s=args.max_duration if args.max_duration is not None else settings.max_duration_s,
        idle_s=None if idle_minutes is None else 60.0 * idle_minutes,
        refresh_s=settings.refresh_s, serve_port=args.serve, plot=args.plot,
        view=not getattr(args, "quiet", False))  # --quiet: no terminal panel, the final result only
    replayer = None
    if args.replay is not None:
        folder = Path(plan.spec.folder)
        if Path(args.replay).resolve() == folder.resolve():
            raise ConfigError("--replay", "the replay source is the watched folder itself",
                              hint="give --folder DIR, an empty folder for the replay to write into")
        _make_watched_folder(folder, "--folder" if folder_override is not None else "run.folder")
        replayer = ReplayThread(args.replay, folder, args.interval, plan.spec.include)
        replayer.start()
    try:
        summary = run_live(plan, options,
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
            "fit": None if outcome is None else outcome.fit,
            "processing_uncertainty": None if outcome is None else outcome.processing,
            "warnings": [] if outcome is None else outcome.warnings}


__all__ = ["LiveOptions", "run_live", "target_reached", "watch_command"]
