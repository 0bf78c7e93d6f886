"""``kinetics reprocess ARCHIVE --config RUN.toml``: one run config over every run folder of an archive.

An archive is a folder of finished run folders (``ARCHIVE/run_*`` by default).  Each run
folder is one task on the campaign's task machinery (:func:`kinetics.campaign.runner.run_tasks`
in this process, on a local Dask cluster or on a scheduler at an address): the run engine
(:func:`kinetics.run.engine.batch_run`, the path of ``kinetics run``) with the config's
processing and fit applied to that folder, its ledger, ``series.csv`` and ``fit.json`` in
``<out>/runs/<folder>/``, written by the one worker that runs the task.  The tasks send back
one small record each (:class:`ArchiveRunResult`); they are gathered into one table,
``<out>/archive.csv`` (run, k, its 95 % interval, status), and ``<out>/summary.json``.

A run that fails (no spectra, a file the engine refuses, a fit that does not converge) is
reported with its reason and the others go on.  A worker lost mid-task has its runs redone
by the scheduler: the redone run reopens its ledger, which recognises by content the files
already counted and counts none twice, and results are gathered once per run.
"""

from __future__ import annotations

import fnmatch
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

from kinetics.campaign.config import SCHEDULER_LOCAL, run_folder_name
from kinetics.errors import ConfigError

STATUS_OK = "ok"
STATUS_NOT_CONVERGED = "fit not converged"
STATUS_FAILED = "failed"
DEFAULT_PATTERN = "run_*"


@dataclass(frozen=True)
class ArchiveRun:
    """One run folder of the archive (what a task is given; plain values)."""

    label: str
    folder: Path
    config: Path


@dataclass(frozen=True)
class ArchiveRunResult:
    """What one run gave: the quoted k (``value``, ``ci95``: statistical and processing parts
    combined when assessed, as ``kinetics run`` quotes it), the file counts and where it wrote."""

    label: str
    folder: str
    status: str
    message: str = ""
    k: dict | None = None
    counts: dict | None = None
    out_dir: str | None = None
    n_spectra: int = 0
    warnings: tuple = ()
    seconds: float = float("nan")

    def row(self) -> dict:
        k = self.k or {}
        lo, hi = (k.get("ci95") or (None, None))
        return {"run": self.label, "k": k.get("value"), "k_ci95_low": lo, "k_ci95_high": hi,
                "k_unit": k.get("unit"), "status": self.status, "n_spectra": self.n_spectra,
                "message": self.message, "folder": self.folder}

    def to_dict(self) -> dict:
        return {"run": self.label, "folder": self.folder, "status": self.status, "message": self.message,
                "k": self.k, "counts": self.counts, "out_dir": self.out_dir, "n_spectra": self.n_spectra,
                "warnings": list(self.warnings), "seconds": self.seconds}


def find_run_folders(archive: str | Path, pattern: str = DEFAULT_PATTERN) -> list[Path]:
    """The run folders of ``archive`` whose names match ``pattern`` (shell wildcards), sorted by name."""
    archive = Path(archive)
    if not archive.is_dir():
        raise ConfigError("archive", f"archive folder {archive} does not exist",
                          hint="give the folder that holds the run folders")
    folders = sorted(p for p in archive.iterdir() if p.is_dir() and fnmatch.fnmatch(p.name, pattern))
    if not folders:
        raise ConfigError("--pattern", f"no folder in {archive} matches {pattern!r}",
                          hint="give the pattern of the run folders' names, e.g. --pattern 'run_*'")
    seen = {}
    for folder in folders:
        slug = run_folder_name(folder.name)
        if slug in seen:
            raise ConfigError("--pattern", f"run folders {seen[slug]!r} and {folder.name!r} would share the output "
                              f"folder runs/{slug}", hint="rename one, or narrow --pattern")
        seen[slug] = folder.name
    return folders


def reprocess_run(run: ArchiveRun, runs_dir: str, _species=None) -> ArchiveRunResult:
    """One task: the run config applied to ``run.folder`` through the run engine (the path of
    ``kinetics run``: same ledger, series, fit and interval), outputs in ``runs_dir/<folder>``.
    Errors the user can fix are raised (the task machinery reports them per run)."""
    from kinetics.config import load_run_config
    from kinetics.run.engine import batch_run, plan_from_config
    from kinetics.run.job import outcome_of

    started = time.perf_counter()
    out = Path(runs_dir) / run_folder_name(run.label)
    plan = plan_from_config(load_run_config(run.config), folder=run.folder, require_named=False)
    summary = batch_run(plan, out, parallel=False, figures=False)
    got = outcome_of(run.label, run.config, out, summary)
    k = got.k()
    if got.fit is None or not got.fit.converged or k is None:
        status = STATUS_NOT_CONVERGED
        message = "no fit" if got.fit is None else str(got.fit.message)
    else:
        status, message = STATUS_OK, ""
    return ArchiveRunResult(run.label, str(run.folder), status, message, k, dict(got.counts), str(out),
                            int(len(got.table)), tuple(got.warnings), time.perf_counter() - started)


@dataclass(frozen=True, eq=False)
class ArchiveOutcome:
    """Every run of the archive, in folder order, and where the tasks ran."""

    archive: Path
    config: Path
    out_dir: Path
    results: tuple
    info: dict = field(default_factory=dict)
    files: tuple = ()

    @property
    def success(self) -> bool:
        return all(r.status == STATUS_OK for r in self.results)

    def to_dict(self) -> dict:
        return {"kind": "archive", "archive": str(self.archive), "config": str(self.config),
                "out_dir": str(self.out_dir), "success": self.success,
                "runs": [r.to_dict() for r in self.results], "execution": dict(self.info),
                "files": [str(p) for p in self.files]}

    def text(self) -> str:
        from kinetics.numbers import format_value

        n_ok = sum(r.status == STATUS_OK for r in self.results)
        lines = [f"archive {self.archive}: {n_ok} of {len(self.results)} run(s) fitted with {self.config.name} "
                 f"({self.info.get('where', '')}, {self.info.get('wall_seconds', float('nan')):.1f} s)", ""]
        width = max(12, *(len(r.label) + 1 for r in self.results))
        lines.append(f"{'run':<{width}} {'spectra':>7}  {'k':>13}  {'95 % interval':<30} {'unit':<8} status")
        for r in self.results:
            k = r.k or {}
            lo, hi = k.get("ci95") or (None, None)
            value = "" if k.get("value") is None else format_value(k["value"], 4)
            interval = "" if None in (lo, hi) else f"{format_value(lo, 4)} .. {format_value(hi, 4)}"
            status = r.status if not r.message else f"{r.status}: {r.message}"
            lines.append(f"{r.label:<{width}} {r.n_spectra:>7}  {value:>13}  {interval:<30} {k.get('unit') or '':<8} "
                         f"{status}")
        lines += ["", f"outputs: {self.out_dir}"]
        return "\n".join(lines)


def write_outputs(outcome: ArchiveOutcome) -> list:
    """``archive.csv`` (one row per run) and ``summary.json`` in the out folder."""
    import pandas as pd

    from kinetics.atomic import write_atomic
    from kinetics.jsonio import dumps

    table = outcome.out_dir / "archive.csv"
    summary = outcome.out_dir / "summary.json"
    write_atomic(table, pd.DataFrame([r.row() for r in outcome.results]).to_csv(index=False))
    document = outcome.to_dict()
    document["files"] = [str(table), str(summary)]
    write_atomic(summary, dumps(document) + "\n")
    return [table, summary]


def reprocess_archive(archive: str | Path, config: str | Path, out_dir: str | Path, *,
                      pattern: str = DEFAULT_PATTERN, scheduler: str | None = None, workers: int | None = None,
                      loader: Callable = reprocess_run, outputs: bool = True) -> ArchiveOutcome:
    """Every run folder of ``archive`` matching ``pattern`` through the run config ``config``, as
    tasks (see the module docstring); ``scheduler`` ``"local"`` (default), ``"none"`` or an
    address, ``workers`` the local cluster's size (1: this process).  ``loader(run, runs_dir,
    species)`` is the task (tests wrap it to inject faults)."""
    from dataclasses import replace

    from kinetics.campaign.runner import resolve_scheduler, run_tasks, task_client
    from kinetics.config import load_run_config
    from kinetics.run.outputs import prepare_out_dir

    config = Path(config).resolve()
    load_run_config(config)  # a config error is named once, here, not once per run
    folders = find_run_folders(archive, pattern)
    runs = [ArchiveRun(folder.name, folder.resolve(), config) for folder in folders]
    out = prepare_out_dir(Path(out_dir))
    chosen = resolve_scheduler(SCHEDULER_LOCAL, scheduler, workers)
    started = time.perf_counter()
    with task_client(chosen, workers, key="--scheduler") as (client, where):
        outcomes = run_tasks(runs, loader, out / "runs", None, client, prefix="archive-run")
    results = []
    for run in runs:
        status, value, seconds = outcomes[run.label]
        if status == "ok":
            results.append(value)
        else:
            results.append(ArchiveRunResult(run.label, str(run.folder), STATUS_FAILED, str(value), seconds=seconds))
    task_s = float(np.nansum([r.seconds for r in results]))
    info = {"where": where, "task_seconds": task_s, "wall_seconds": time.perf_counter() - started}
    outcome = ArchiveOutcome(Path(archive), config, out, tuple(results), info)
    if outputs:
        outcome = replace(outcome, files=tuple(write_outputs(outcome)))
    return outcome


__all__ = ["ArchiveOutcome", "ArchiveRun", "ArchiveRunResult", "find_run_folders", "reprocess_archive",
           "reprocess_run"]
