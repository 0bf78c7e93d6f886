"""``kinetics run CAMPAIGN.toml``: load every run (as Dask tasks or here), then analyse them together.

Stages
------
1. **Runs** (:func:`load_run`, one task per run): a series table is read; a run config goes
   through the run engine (:func:`kinetics.run.engine.batch_run`) with its own ledger in
   ``<out>/runs/<slug>/``, written by the one worker that runs the task.  The task returns
   plain arrays (:class:`LoadedRun`); the :class:`~kinetics.campaign.design.CampaignRun`
   records are built here, after gathering.
2. **Analysis** (here, on the gathered runs): the same-excess check (RPKA), the global fit
   (power law or written mechanism) -- without the runs the same-excess check names as
   slower when ``exclude_flagged_runs`` (the fit of every run is kept beside it) -- VTNA on
   the runs that share the modal ``[reactant]0`` and initial rates.
   With ``[fit] bootstrap = N`` the headline fit is refitted on N residual-bootstrap
   resamples (:func:`bootstrap_global_fit`), as tasks on the same cluster as the runs, each
   resample seeded by its own ``SeedSequence`` child; the percentile intervals are reported
   beside the profile ones.
3. **Outputs**: CSV tables, PNG and SVG figures and ``summary.json`` in the out folder.

Scale-out
---------
``scheduler = "none"`` runs the tasks in this process; ``"local"`` starts a
``distributed.LocalCluster`` (worker processes, one thread each, bound to 127.0.0.1, no
dashboard, as many workers as cores unless ``workers`` says otherwise); an address
(``tcp://host:8786``) uses an existing cluster, whose workers must see the same paths.
The client (and a local cluster) lives only inside :func:`run_campaign` (context managers):
the library keeps no global state.  A run whose task fails is reported (which run, why) and
the others go on.  A worker lost mid-task has its tasks redone by the scheduler; a redone
run opens its own ledger folder again, where the ledger (keyed by file content) recognises
the files already counted and does not count them twice, and results are gathered by run
label, once each.  :func:`task_client` and :func:`run_tasks` are the one task machinery; the
re-processing of an archive (:mod:`kinetics.campaign.archive`) uses them too.
"""

from __future__ import annotations

import logging
import math
import os
import time
from contextlib import ExitStack, contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from kinetics.campaign.config import (SCHEDULER_LOCAL, SCHEDULER_NONE, CampaignConfig, CampaignRunConfig,
                                      run_folder_name)
from kinetics.campaign.design import CampaignRun
from kinetics.errors import ConfigError, InputFileError, KineticsError
from kinetics.atomic import write_atomic

log = logging.getLogger(__name__)

#: initial rates over the first 15 % of conversion (a straight line; its bias, ~7 % at
#: first order, is stated in kinetics.campaign.initial_rates)
INITIAL_RATE_MAX_CONVERSION = 0.15
_SAME_START_REL = 0.05


@dataclass(frozen=True)
class LoadedRun:
    """A run's measured courses as plain values (what a task sends back)."""

    label: str
    time_s: np.ndarray
    observed: dict
    sigma: dict
    source: str
    counts: dict | None = None
    ledger: str | None = None
    warnings: tuple = ()


@dataclass(frozen=True)
class RunFailure:
    label: str
    source: str
    reason: str


_slug = run_folder_name


# ---------------------------------------------------------------- stage 1: one run (a task)
def _series_frame(run: CampaignRunConfig, runs_dir: Path) -> tuple[pd.DataFrame, str, dict | None, str | None]:
    if run.config is not None:
        from kinetics.config import load_run_config
        from kinetics.run.engine import batch_run, plan_from_config

        plan = plan_from_config(load_run_config(run.config), folder=run.folder, require_named=False)
        out = Path(runs_dir) / _slug(run.label)
        summary = batch_run(plan, out, parallel=False, figures=False, processing_uncertainty=False)
        table = summary.table if summary.table is not None else pd.DataFrame()
        return table, str(run.folder or run.config), dict(summary.counts), str(out / "ledger.sqlite")
    from kinetics.rates.table import read_rows

    path = run.table
    if not path.is_file():
        raise InputFileError(path, "series table not found", hint=f"named by {run.key}.table")
    header, rows, lines, header_line = read_rows(path)
    cells = {}
    for j, name in enumerate(header):
        values = []
        for row, line in zip(rows, lines):
            if len(row) != len(header):
                raise InputFileError(path, f"{len(row)} cells but the header has {len(header)}", line=line)
            text = row[j].strip()
            if text == "" or text.lower() in ("nan", "na", "n/a"):
                values.append(math.nan)
                continue
            try:
                values.append(float(text))
            except ValueError:
                values.append(text)  # text is an error only in a column the campaign reads
        cells[name] = values
    frame = pd.DataFrame(cells)
    frame.attrs["lines"] = list(lines)
    return frame, str(path), None, None


def _numeric(frame: pd.DataFrame, name: str, source: str) -> np.ndarray:
    column = frame[name]
    lines = frame.attrs.get("lines")
    values = pd.to_numeric(column, errors="coerce").to_numpy(float)
    bad = np.flatnonzero(np.isnan(values) & column.notna().to_numpy() & (column.astype(str) != "nan").to_numpy())
    if bad.size:
        i = int(bad[0])
        raise InputFileError(source, f"column '{name}' holds {column.iloc[i]!r}, not a number",
                             line=None if lines is None else lines[i],
                             hint="use a dot as decimal separator and no units in cells")
    return values


def load_run(run: CampaignRunConfig, runs_dir: str, species: tuple) -> LoadedRun:
    """One run's courses: its series table read, or its run config through the run engine.

    ``species`` are the names whose ``<species>_concentration`` columns are read when
    present (the run's own ``species`` list, when given, must all be present).  Rows with an
    empty cell in a column read are dropped, with a warning.
    """
    frame, source, counts, ledger = _series_frame(run, Path(runs_dir))
    if run.time_column not in frame:
        raise InputFileError(source, f"no column '{run.time_column}' (asked for by {run.key}.time_column)",
                             hint="columns are: " + ", ".join(map(str, frame.columns)))
    wanted = run.species if run.species is not None else species
    names = [s for s in wanted if f"{s}_concentration" in frame]
    missing = [s for s in (run.species or ()) if s not in names]
    if missing or not names:
        raise InputFileError(source, f"no column '{(missing or list(wanted) or ['?'])[0]}_concentration' for run "
                             f"{run.label!r}", hint="columns are: " + ", ".join(map(str, frame.columns)))
    time_s = _numeric(frame, run.time_column, source) * run.time_factor_s
    observed = {s: _numeric(frame, f"{s}_concentration", source) for s in names}
    sigma = {s: _numeric(frame, f"{s}_concentration_sigma", source) for s in names
             if f"{s}_concentration_sigma" in frame}
    keep = np.isfinite(time_s)
    for values in list(observed.values()) + list(sigma.values()):
        keep &= np.isfinite(values)
    warnings = list(run.temperature_warnings)
    if not keep.all():
        warnings.append(f"run {run.label}: {int((~keep).sum())} row(s) with an empty cell skipped ({source})")
    return LoadedRun(run.label, time_s[keep], {s: v[keep] for s, v in observed.items()},
                     {s: v[keep] for s, v in sigma.items()}, source, counts, ledger, tuple(warnings))


def _task(loader, run, runs_dir, species):
    """What a worker runs: errors the user can fix come back as a message (they are
    reported per run and do not stop the others)."""
    started = time.perf_counter()
    try:
        return "ok", loader(run, runs_dir, species), time.perf_counter() - started
    except KineticsError as error:
        return "error", str(error), time.perf_counter() - started


# ---------------------------------------------------------------- executing the tasks
def _workers_for(workers: int | None, default: int | None = None) -> int:
    n = workers or default or os.cpu_count() or 1
    return max(1, int(n))


def resolve_scheduler(default: str, scheduler: str | None = None, workers: int | None = None) -> str:
    """The scheduler to use: ``scheduler`` (a ``--scheduler`` flag, validated) over ``default``
    (the config's); the local cluster with ``workers = 1`` is this process."""
    if scheduler is not None:
        from kinetics.campaign.config import _scheduler

        scheduler = _scheduler(scheduler, "--scheduler")
    scheduler = scheduler or default
    if scheduler == SCHEDULER_LOCAL and workers == 1:
        scheduler = SCHEDULER_NONE
    return scheduler


@contextmanager
def task_client(scheduler: str, workers: int | None = None, key: str = "campaign.scheduler"):
    """``(client, where)`` for the tasks: None for ``"none"`` (this process), else a Dask
    client of a local cluster (``"local"``, ``workers`` processes, one thread each, bound to
    127.0.0.1, no dashboard) or of the scheduler at an address.  Both close on exit: the
    library keeps no cluster between calls."""
    if scheduler == SCHEDULER_NONE:
        yield None, "in this process"
        return
    try:
        from distributed import Client, LocalCluster
    except ImportError:  # pragma: no cover - a declared dependency
        raise ConfigError(key, "dask.distributed is not installed",
                          hint='install it (pip install distributed) or use scheduler = "none"') from None
    with ExitStack() as stack:
        if scheduler == SCHEDULER_LOCAL:
            n = _workers_for(workers)
            cluster = stack.enter_context(LocalCluster(n_workers=n, threads_per_worker=1, processes=True,
                                                       host="127.0.0.1", dashboard_address=None,
                                                       silence_logs=logging.WARNING))
            client = stack.enter_context(Client(cluster))
            where = f"local Dask cluster of {n} worker process(es)"
        else:
            try:
                client = stack.enter_context(Client(scheduler, timeout="20s"))
            except (OSError, TimeoutError, ValueError) as error:
                raise ConfigError(key, f"no Dask scheduler answers at {scheduler} ({error})",
                                  hint="start one (dask scheduler) or use \"local\"") from None
            where = f"Dask scheduler {scheduler}"
        yield client, where


def run_tasks(items, loader: Callable, runs_dir, species, client=None, prefix: str = "campaign-run") -> dict:
    """``{label: (status, value, seconds)}``: ``loader(item, runs_dir, species)`` for every item
    (anything with a unique ``label``), here (``client`` None) or as Dask tasks.  A task that
    raises is reported as ``("error", reason, seconds)``; the others go on.  A task lost with
    its worker is redone by the scheduler; its result is gathered once, by label."""
    outcomes = {}
    if client is None:
        for item in items:
            try:
                outcomes[item.label] = _task(loader, item, str(runs_dir), species)
            except Exception as error:  # noqa: BLE001 - a run that breaks is reported, the others go on
                outcomes[item.label] = ("error", f"{type(error).__name__}: {error}", 0.0)
        return outcomes
    from distributed import as_completed

    futures = {}
    for i, item in enumerate(items):
        future = client.submit(_task, loader, item, str(runs_dir), species, pure=False,
                               key=f"{prefix}-{i}-{_slug(item.label)}-{os.getpid()}-{time.time_ns()}")
        futures[future] = item.label
    for future in as_completed(list(futures)):
        label = futures[future]
        try:
            outcomes[label] = future.result()
        except Exception as error:  # noqa: BLE001 - e.g. KilledWorker: reported per run
            outcomes[label] = ("error", f"{type(error).__name__}: {error}", 0.0)
    return outcomes


def execute(config: CampaignConfig, runs_dir: Path, *, scheduler: str | None = None, workers: int | None = None,
            loader: Callable = load_run, client=None, where: str | None = None) -> tuple[dict, list, dict]:
    """Run every run's task; returns ``({label: LoadedRun}, [RunFailure], info)``.

    ``scheduler`` overrides ``[campaign] scheduler``; ``workers`` the local cluster's size
    (``workers = 1`` with the default scheduler runs in this process).  A ``client`` given
    (with ``where`` it runs) is used as it is.  ``info`` says where the tasks ran and the
    seconds spent in tasks and in all.
    """
    species = config.model_species()
    started = time.perf_counter()
    with ExitStack() as stack:
        if client is None and where is None:
            chosen = resolve_scheduler(config.scheduler, scheduler, workers)
            client, where = stack.enter_context(task_client(chosen, workers or config.workers))
        outcomes = run_tasks(config.runs, loader, runs_dir, species, client)
    loaded, failures, task_s = {}, [], 0.0
    for run in config.runs:
        status, value, seconds = outcomes[run.label]
        task_s += seconds
        if status == "ok":
            loaded[run.label] = value
        else:
            failures.append(RunFailure(run.label, run.source, value))
    info = {"where": where or "in this process", "task_seconds": task_s,
            "wall_seconds": time.perf_counter() - started}
    return loaded, failures, info


# ---------------------------------------------------------------- stage 2: analysis
@dataclass(frozen=True, eq=False)
class CampaignOutcome:
    """Everything ``kinetics run CAMPAIGN.toml`` found (the CLI prints it, ``--json`` dumps it)."""

    config: CampaignConfig
    out_dir: Path
    runs: tuple  # CampaignRun, in config order, the runs that loaded
    loaded: dict = field(repr=False)
    failures: tuple = ()
    fit: object = None  # GlobalFitResult (headline)
    fit_all: object = None  # GlobalFitResult of every run, when runs were left out
    excluded: tuple = ()
    same_excess: tuple = ()
    vtna: object = None
    initial_rates: object = None
    warnings: tuple = ()
    notes: tuple = ()
    info: dict = field(default_factory=dict)
    files: tuple = ()
    bootstrap: object = None  # BootstrapIntervals of the headline fit ([fit] bootstrap = N)

    @property
    def success(self) -> bool:
        return self.fit is not None and bool(self.fit.converged) and not self.failures

    def to_dict(self) -> dict:
        runs = []
        for run in self.config.runs:
            entry = {"label": run.label, "source": run.source, "loaded": run.label in self.loaded,
                     "excluded_from_fit": run.label in self.excluded,
                     "temperature_kelvin": run.temperature_kelvin, "catalyst_mol_per_l": run.catalyst_mol_per_l,
                     "initial_mol_per_l": run.initial_dict(), "factors": run.factors_dict()}
            got = self.loaded.get(run.label)
            if got is not None:
                entry.update(n_points=int(got.time_s.size), observed=sorted(got.observed), counts=got.counts,
                             ledger=got.ledger)
            runs.append(entry)
        return {
            "kind": "campaign", "name": self.config.name, "out_dir": str(self.out_dir), "success": self.success,
            "runs": runs, "failures": [{"run": f.label, "source": f.source, "reason": f.reason}
                                       for f in self.failures],
            "excluded_runs": list(self.excluded),
            "global_fit": None if self.fit is None else self.fit.to_dict(),
            "global_fit_all_runs": None if self.fit_all is None else self.fit_all.to_dict(),
            "bootstrap": None if self.bootstrap is None else self.bootstrap.to_dict(),
            "same_excess": [r.to_dict() for r in self.same_excess],
            "vtna": None if self.vtna is None else self.vtna.to_dict(),
            "initial_rates": None if self.initial_rates is None else self.initial_rates.to_dict(),
            "warnings": list(self.warnings), "notes": list(self.notes), "execution": dict(self.info),
            "files": [str(p) for p in self.files],
        }

    def text(self) -> str:
        """The terminal summary: orders and constants with 95 % intervals, warnings in words."""
        lines = [f"campaign '{self.config.name}': {len(self.runs)} of {len(self.config.runs)} run(s) loaded "
                 f"({self.info.get('where', '')})"]
        for failure in self.failures:
            lines.append(f"  run {failure.label} FAILED ({failure.source}): {failure.reason}")
        if self.fit is not None:
            left = f", without {', '.join(self.excluded)}" if self.excluded else ""
            lines.append("")
            lines.append(f"global fit{left}: {self.fit.description}"
                         + ("" if self.fit.converged else f"  (NOT converged: {self.fit.message})"))
            lines.extend(_parameter_lines(self.fit))
            if self.bootstrap is not None:
                boot = self.bootstrap
                lines.append(f"residual bootstrap, {boot.n_resamples - boot.n_failed} of {boot.n_resamples} refits "
                             f"(seed {boot.seed}; {boot.where}, {boot.seconds:.1f} s), 95 % percentile intervals "
                             "beside the profile ones:")
                for p in self.fit.parameters:
                    if "@" not in p.name and p.name in boot.intervals:
                        lo, hi = boot.intervals[p.name]
                        lines.append(f"  {p.name:<22} {lo:.4g} .. {hi:.4g}")
        if self.fit_all is not None:
            lines.append(f"global fit of every run (for comparison): {self.fit_all.description}")
            lines.extend(_parameter_lines(self.fit_all))
        if self.same_excess:
            lines.append("")
            lines.append("same-excess check (RPKA):")
            for r in self.same_excess:
                state = "DO NOT overlay" if r.flagged else "overlay"
                lines.append(f"  {r.early} / {r.late}: {state} (rate ratio {r.rate_ratio:.3g}, p = {r.p:.2g})")
        if self.vtna is not None:
            lines.append("")
            lines.append(f"VTNA on runs {', '.join(self.vtna.labels)}:")
            for name, order in self.vtna.orders.items():
                lo, hi = self.vtna.intervals.get(name, (math.nan, math.nan))
                lines.append(f"  order in {name:<12} {order:.3g}  (95 %: {lo:.3g} .. {hi:.3g})")
        if self.initial_rates is not None:
            lines.append("")
            lines.append("initial rates (log-log):")
            for estimate in self.initial_rates.orders:
                lines.append(f"  {estimate.name:<22} {_value_ci(estimate)}")
        for note in self.notes:
            lines.append(f"note: {note}")
        for warning in self.warnings:
            lines.append(f"warning: {warning}")
        lines.append("")
        lines.append(f"outputs: {self.out_dir}")
        return "\n".join(lines)


def _value_ci(estimate) -> str:
    data = estimate.to_dict()
    ci = data.get("ci95") or (None, None)
    interval = "" if None in ci else f"  (95 %: {ci[0]:.4g} .. {ci[1]:.4g})"
    unit = "" if data.get("unit") in (None, "1") else f" {data['unit']}"
    return f"{data['value']:.4g}{unit}{interval}"


def _parameter_lines(fit) -> list:
    return [f"  {p.name:<22} {_value_ci(p)}" for p in fit.parameters if "@" not in p.name]


def _campaign_run(run: CampaignRunConfig, got: LoadedRun) -> CampaignRun:
    return CampaignRun(run.label, got.time_s, got.observed, got.sigma, run.initial_dict(), run.catalyst_mol_per_l,
                       run.temperature_kelvin, run.factors_dict(), got.source)


def _global_fit(config: CampaignConfig, runs, **options):
    """The config's global fit of ``runs`` (``options``: ``warm_start``, ``profile`` of the fitters)."""
    from kinetics.campaign.globalfit import fit_mechanism_campaign, fit_power_law

    if config.mechanism is not None:
        return fit_mechanism_campaign(runs, config.mechanism, catalyst_species=config.catalyst,
                                      fit_initial=config.fit_initial,
                                      temperature_reference_kelvin=config.reference_temperature_kelvin, **options)
    return fit_power_law(runs, config.power_law(), species=config.observed, fit_initial=config.fit_initial,
                         temperature_reference_kelvin=config.reference_temperature_kelvin,
                         temperature_law=config.temperature_law, **options)


# ---------------------------------------------------------------- bootstrap resamples (tasks)
#: Resamples per task: enough that the scheduling (a few ms per task) is small beside the
#: refits (~0.05-0.2 s each), few enough to spread over the workers.  The intervals do not
#: depend on it (each resample has its own seed).
BOOTSTRAP_CHUNK = 8


@dataclass(frozen=True)
class _BootstrapPayload:
    """What a bootstrap task needs, as plain values (it travels to the workers)."""

    config: CampaignConfig
    runs: tuple  # (CampaignRunConfig, LoadedRun) of the runs fitted, in the fit's order
    blocks: tuple
    fitted: dict
    residual: dict
    dof: int
    weighted: bool
    start: dict
    names: tuple


def _bootstrap_refits(payload: _BootstrapPayload, seeds) -> list:
    """One task: a refit per seed (a ``SeedSequence`` child) -> parameter values, or None when
    the refit failed.  One BLAS thread, here and on every worker, so the arithmetic and the
    results are the same wherever the task runs."""
    from kinetics.campaign.globalfit import resample_runs
    from kinetics.linalg import small_linear_algebra

    runs = [_campaign_run(run, got) for run, got in payload.runs]
    out = []
    with small_linear_algebra():
        for seed in seeds:
            resampled = resample_runs(runs, payload.blocks, payload.fitted, payload.residual, payload.dof,
                                      payload.weighted, np.random.default_rng(seed))
            try:
                fit = _global_fit(payload.config, resampled, warm_start=payload.start, profile=False)
            except KineticsError:
                out.append(None)
                continue
            values = fit.values
            ok = fit.converged and all(np.isfinite(values.get(name, math.nan)) for name in payload.names)
            out.append([float(values[name]) for name in payload.names] if ok else None)
    return out


def bootstrap_global_fit(config: CampaignConfig, fit, fit_runs, loaded: dict, client=None,
                         where: str = "in this process"):
    """``config.bootstrap`` residual-bootstrap refits of ``fit`` (over ``fit_runs``, the
    CampaignRun records it was fitted to), as tasks of :data:`BOOTSTRAP_CHUNK` resamples on
    ``client`` (None: here); returns :class:`~kinetics.campaign.globalfit.BootstrapIntervals`.

    Resample ``i`` is seeded by child ``i`` of ``numpy.random.SeedSequence(config.seed)``, so
    the intervals are the same in this process and on any number of workers.  A task that
    fails (its worker lost beyond the scheduler's retries) counts its resamples as failed.
    """
    from kinetics.campaign.globalfit import BootstrapIntervals, percentile_intervals

    by_label = {run.label: run for run in config.runs}
    names = tuple(p.name for p in fit.parameters)
    payload = _BootstrapPayload(config, tuple((by_label[run.label], loaded[run.label]) for run in fit_runs),
                                tuple(fit.blocks), dict(fit.fitted), dict(fit.residual), int(fit.dof),
                                bool(fit.weighted), dict(fit.values), names)
    n = int(config.bootstrap)
    seeds = np.random.SeedSequence(config.seed).spawn(n)
    chunks = [seeds[i:i + BOOTSTRAP_CHUNK] for i in range(0, n, BOOTSTRAP_CHUNK)]
    started = time.perf_counter()
    if client is None:
        results = [_bootstrap_refits(payload, chunk) for chunk in chunks]
    else:
        stamp = f"{os.getpid()}-{time.time_ns()}"
        futures = [client.submit(_bootstrap_refits, payload, chunk, pure=False, key=f"campaign-bootstrap-{i}-{stamp}")
                   for i, chunk in enumerate(chunks)]
        results = []
        for future, chunk in zip(futures, chunks):
            try:
                results.append(future.result())
            except Exception as error:  # noqa: BLE001 - e.g. KilledWorker: its resamples count as failed
                log.warning("bootstrap task lost (%s: %s): %d resamples counted as failed",
                            type(error).__name__, error, len(chunk))
                results.append([None] * len(chunk))
    samples = [values for chunk in results for values in chunk if values is not None]
    failed = n - len(samples)
    return BootstrapIntervals(n, failed, int(config.seed), percentile_intervals(names, samples), where,
                              time.perf_counter() - started)


def _vtna_runs(config, runs):
    """The largest group of runs that share ``[reactant]0`` (within 5 %) and a temperature."""
    groups = []
    for run in runs:
        a0 = run.initial(config.reactant)
        if a0 is None or config.reactant not in run.observed_mol_per_l:
            continue
        for group in groups:
            ref = group[0]
            if (abs(ref.initial(config.reactant) - a0) <= _SAME_START_REL * max(a0, 1e-12)
                    and ref.temperature_kelvin == run.temperature_kelvin):
                group.append(run)
                break
        else:
            groups.append([run])
    return max(groups, key=len) if groups else []


def analyse(config: CampaignConfig, runs: list) -> dict:
    """The campaign methods on the loaded runs; problems become warnings, not a crash."""
    from kinetics.campaign.design import varied_factors
    from kinetics.campaign.initial_rates import orders_from_initial_rates
    from kinetics.campaign.rpka import same_excess_pairs
    from kinetics.campaign.vtna import vtna

    found = {"warnings": [], "notes": [], "same_excess": (), "excluded": (), "fit": None, "fit_all": None,
             "vtna": None, "initial_rates": None}
    warnings, notes = found["warnings"], found["notes"]
    if len(runs) < 2:
        warnings.append(f"only {len(runs)} run(s) could be loaded: no campaign analysis")
        return found
    reactant, partner = config.reactant, config.partner
    if partner is not None:
        # same-excess pairs are compared at one temperature only
        by_temperature = {}
        for run in runs:
            key = None if run.temperature_kelvin is None else round(run.temperature_kelvin / 0.05)
            by_temperature.setdefault(key, []).append(run)
        pairs = []
        for group in by_temperature.values():
            if len(group) < 2:
                continue
            try:
                pairs.extend(same_excess_pairs(group, reactant, partner))
            except KineticsError as error:
                notes.append(f"same-excess check skipped: {error}")
        found["same_excess"] = tuple(pairs)
    slower = tuple(dict.fromkeys(r.slower for r in found["same_excess"] if r.flagged and r.slower))
    for r in found["same_excess"]:
        if r.flagged:
            warnings.append(f"runs {r.early} and {r.late} have the same excess but do not overlay: {r.message}")
    fit_runs = runs
    if slower and config.exclude_flagged_runs and len(runs) - len(slower) >= 2:
        fit_runs = [run for run in runs if run.label not in slower]
        found["excluded"] = slower
        warnings.append(f"the global fit leaves out {', '.join(slower)} (slower than its same-excess partner at the "
                        "same composition); the fit of every run is reported beside it")
    try:
        found["fit"] = _global_fit(config, fit_runs)
        warnings.extend(found["fit"].warnings)
    except KineticsError as error:
        warnings.append(f"the global fit failed: {error}")
    if found["excluded"]:
        try:
            found["fit_all"] = _global_fit(config, runs)
        except KineticsError as error:
            notes.append(f"the fit of every run failed: {error}")
    clean = [run for run in runs if run.label not in found["excluded"]]
    law_species = [s for s, _ in config.orders if s != reactant]
    group = _vtna_runs(config, clean)
    if len(group) >= 2:
        names = []
        for name in law_species:
            factor = "catalyst" if name == config.catalyst else name
            if varied_factors(group, [factor])[factor]:
                names.append(name)
        if names:
            try:
                found["vtna"] = vtna(group, names[:3], reactant, catalyst=config.catalyst or "cat",
                                     stoichiometry=dict(config.stoichiometry))
            except KineticsError as error:
                notes.append(f"VTNA skipped: {error}")
    if found["vtna"] is not None and found["fit"] is not None:
        found["warnings"] += _methods_disagree(found["vtna"], found["fit"])
    factors = []
    for name in [reactant] + law_species:
        factor = "catalyst" if name == config.catalyst else name
        if varied_factors(clean, [factor])[factor]:
            factors.append(factor)
    if factors and len(clean) > len(factors) + 1:
        try:
            found["initial_rates"] = orders_from_initial_rates(clean, factors, reactant,
                                                               max_conversion=INITIAL_RATE_MAX_CONVERSION)
        except KineticsError as error:
            notes.append(f"initial rates skipped: {error}")
    return found


def _methods_disagree(vtna_result, fit) -> list[str]:
    """A warning for each order on which VTNA and the global fit exclude each other.

    Both are estimates of the same order from the same runs; when their 95 % intervals do
    not overlap, at least one of the models behind them (the power law of the fit, the
    overlay of VTNA) does not describe the data, and neither number should be quoted alone.
    """
    messages = []
    for name, order in vtna_result.orders.items():
        lo_v, hi_v = vtna_result.intervals.get(name, (math.nan, math.nan))
        try:
            estimate = fit.param(f"order_{name}")
        except KeyError:
            continue
        interval = estimate.ci_profile or estimate.ci_covariance
        if interval is None or not all(math.isfinite(x) for x in (lo_v, hi_v, *interval)):
            continue
        if hi_v < interval[0] or lo_v > interval[1]:
            messages.append(
                f"the order in {name} from VTNA ({order:.3g}, 95 %: {lo_v:.3g} .. {hi_v:.3g}) and from the "
                f"global fit ({estimate.value:.3g}, 95 %: {interval[0]:.3g} .. {interval[1]:.3g}) exclude each "
                f"other: the rate law or the overlay does not describe every run; look at the per-run residuals "
                f"and the VTNA overlay before quoting either")
    return messages


# ---------------------------------------------------------------- stage 3: outputs
def _save(figure, out_dir: Path, name: str) -> list:
    from kinetics import plots

    paths = []
    for suffix in ("png", "svg"):
        path = out_dir / f"{name}.{suffix}"
        data = plots.png_bytes(figure, dpi=120) if suffix == "png" else plots.svg_bytes(figure)
        paths.append(write_atomic(path, data))
    return paths


def write_outputs(outcome: CampaignOutcome) -> list:
    """Tables (CSV), figures (PNG, SVG) and ``summary.json`` into the out folder."""
    from kinetics.campaign import figures as fg
    from kinetics.jsonio import dumps

    out, files = outcome.out_dir, []
    config = outcome.config
    design = pd.DataFrame([{"run": r["label"], "loaded": r["loaded"], "excluded_from_fit": r["excluded_from_fit"],
                            "temperature_kelvin": r["temperature_kelvin"],
                            "catalyst_mol_per_l": r["catalyst_mol_per_l"],
                            **{f"initial_{k}_mol_per_l": v for k, v in r["initial_mol_per_l"].items()},
                            **r["factors"], "n_points": r.get("n_points"), "source": r["source"]}
                           for r in outcome.to_dict()["runs"]])
    files.append(out / "runs.csv")
    write_atomic(files[-1], design.to_csv(index=False))
    by_label = {run.label: run for run in outcome.runs}
    for name, fit in (("global_fit", outcome.fit), ("global_fit_all_runs", outcome.fit_all)):
        if fit is None:
            continue
        rows = [{"parameter": p.name, **{k: v for k, v in p.to_dict().items() if k != "ci95"},
                 "ci95_low": (p.to_dict().get("ci95") or (None, None))[0],
                 "ci95_high": (p.to_dict().get("ci95") or (None, None))[1],
                 "ci95_bootstrap_low": (p.ci_bootstrap or (None, None))[0],
                 "ci95_bootstrap_high": (p.ci_bootstrap or (None, None))[1]} for p in fit.parameters]
        files.append(out / f"{name}.csv")
        write_atomic(files[-1], pd.DataFrame(rows).to_csv(index=False))
        used = [by_label[label] for label in dict.fromkeys(b[0] for b in fit.blocks)]
        try:
            files += _save(fg.global_fit_figure(fit, used, config.reactant), out, name)
        except (KineticsError, KeyError, ValueError) as error:
            log.warning("figure %s skipped: %s", name, error)
    if outcome.same_excess:
        files.append(out / "same_excess.csv")
        write_atomic(files[-1], pd.DataFrame([{k: v for k, v in r.to_dict().items() if k != "rate_ratio_ci95"}
                      | {"rate_ratio_ci95_low": r.rate_ratio_ci95[0], "rate_ratio_ci95_high": r.rate_ratio_ci95[1]}
                      for r in outcome.same_excess]).to_csv(index=False))
        for i, r in enumerate(outcome.same_excess, start=1):
            files += _save(fg.same_excess_figure(r, by_label[r.early], by_label[r.late], config.reactant), out,
                           f"same_excess_{i}")
    if outcome.vtna is not None:
        files.append(out / "vtna.csv")
        write_atomic(files[-1], pd.DataFrame([{"species": name, "order": order, "ci95_low": outcome.vtna.intervals.get(name, (None,))[0],
                       "ci95_high": outcome.vtna.intervals.get(name, (None, None))[1]}
                      for name, order in outcome.vtna.orders.items()]).to_csv(index=False))
        files += _save(fg.vtna_figure(outcome.vtna, [by_label[label] for label in outcome.vtna.labels]), out, "vtna")
    if outcome.initial_rates is not None:
        files.append(out / "initial_rates.csv")
        write_atomic(files[-1], pd.DataFrame([{"run": r.label, "rate_mol_per_l_s": r.rate_mol_per_l_s, "stderr": r.stderr,
                       "n_points": r.n_points} for r in outcome.initial_rates.rates]).to_csv(index=False))
        files += _save(fg.initial_rates_figure(outcome.initial_rates), out, "initial_rates")
    files.append(out / "summary.json")
    document = outcome.to_dict()
    document["files"] = [str(p) for p in files]
    write_atomic(files[-1], dumps(document) + "\n")
    return files


# ---------------------------------------------------------------- the whole job
def run_campaign(config: CampaignConfig | str | Path, out_dir: str | Path, *, scheduler: str | None = None,
                 workers: int | None = None, loader: Callable = load_run, outputs: bool = True) -> CampaignOutcome:
    """Load every run (tasks), analyse them together, write the outputs (see the module docstring).

    ``loader(run, runs_dir, species) -> LoadedRun`` is the task (tests wrap it to inject faults).
    """
    from dataclasses import replace

    from kinetics.campaign.config import load_campaign_config
    from kinetics.run.outputs import prepare_out_dir

    if not isinstance(config, CampaignConfig):
        config = load_campaign_config(config)
    out = prepare_out_dir(Path(out_dir))
    runs_dir = out / "runs"
    with ExitStack() as stack:
        # one cluster for the runs and the bootstrap resamples; closed at once when no bootstrap
        chosen = resolve_scheduler(config.scheduler, scheduler, workers)
        client, where = stack.enter_context(task_client(chosen, workers or config.workers))
        loaded, failures, info = execute(config, runs_dir, loader=loader, client=client, where=where)
        if not config.bootstrap:
            stack.close()
        outcome = _analyse_loaded(config, out, loaded, failures, info, client, where)
    if outputs:
        outcome = replace(outcome, files=tuple(write_outputs(outcome)))
    return outcome


def _analyse_loaded(config, out, loaded, failures, info, client, where) -> CampaignOutcome:
    """Stage 2 on the gathered runs (and the bootstrap resamples as tasks on ``client``)."""
    from kinetics.campaign.globalfit import bootstrap_notes, with_bootstrap

    runs, warnings = [], []
    for run in config.runs:
        got = loaded.get(run.label)
        if got is None:
            continue
        try:
            runs.append(_campaign_run(run, got))
        except KineticsError as error:
            failures.append(RunFailure(run.label, run.source, str(error)))
            loaded.pop(run.label)
            continue
        warnings.extend(got.warnings)
    for failure in failures:
        warnings.insert(0, f"run {failure.label} could not be used ({failure.source}): {failure.reason}")
    started = time.perf_counter()
    found = analyse(config, runs)
    info["analysis_seconds"] = time.perf_counter() - started
    boot = None
    if config.bootstrap and found["fit"] is not None and found["fit"].converged:
        fit_runs = [run for run in runs if run.label not in found["excluded"]]
        try:
            boot = bootstrap_global_fit(config, found["fit"], fit_runs, loaded, client, where)
        except KineticsError as error:
            found["notes"].append(f"the bootstrap was skipped: {error}")
        else:
            found["fit"] = with_bootstrap(found["fit"], boot)
            found["notes"].extend(bootstrap_notes(found["fit"], boot))
            info["bootstrap_seconds"] = boot.seconds
    outcome = CampaignOutcome(config, out, tuple(runs), loaded, tuple(failures), found["fit"], found["fit_all"],
                              found["excluded"], found["same_excess"], found["vtna"], found["initial_rates"],
                              tuple(dict.fromkeys(warnings + found["warnings"])), tuple(found["notes"]), info,
                              bootstrap=boot)
    return outcome


__all__ = ["CampaignOutcome", "LoadedRun", "RunFailure", "analyse", "bootstrap_global_fit", "execute", "load_run",
           "resolve_scheduler", "run_campaign", "run_tasks", "task_client",
           "write_outputs"]
