"""The Python entry points: a run, a study or a campaign as objects to work with in a notebook.

::

    import kinetics

    run = kinetics.load_run("configs/demo_run.toml")
    run.table                  # the series table (pandas), one row per spectrum
    fit = run.fit()            # the config's [fit]: a kinetics.rates.fit.FitResult
    fit.to_frame()             # parameters: value, stderr, 95 % interval, unit
    print(fit.summary())
    run.compare().table        # candidate rate laws ranked by AICc
    run.plot()                 # courses, fit, band, residuals: a matplotlib Figure
    run.report("report")       # the report folder (HTML, PDF, figures, tables)

    study = kinetics.load_study("configs/demo_study.toml")
    study.arrhenius()          # Ea, ln A, dH‡, dS‡, dG‡ (two-step)
    study.plot("eyring")

Nothing here computes on its own.  A run goes through the one run engine
(:func:`kinetics.run.engine.batch_run`, the path of ``kinetics run``, with the ledger kept
in memory unless ``out_dir`` is given), so the table, the fit and the quoted k are those
``kinetics run`` gives on the same config.  Fits come from :mod:`kinetics.rates`, figures
from :mod:`kinetics.plots`, reports from :mod:`kinetics.report` (through
:mod:`kinetics.run.job`, as the command writes them).  Nothing prints; long steps report
through an optional ``progress(stage, done, total)`` callback.
"""

from __future__ import annotations

import tempfile
from dataclasses import replace
from functools import cached_property
from pathlib import Path
from typing import Any, Callable, Mapping

from kinetics.errors import ConfigError, FitError

__all__ = ["Run", "Study", "load_campaign", "load_run", "load_study"]

Progress = Callable[[str, int, int], None]


# ---------------------------------------------------------------- a run
class Run:
    """One run: its series table, the engine's fit, and what can be asked of them.

    Made by :func:`load_run` (or a :class:`Study`).  Attributes: ``label``, ``config``
    (the validated :class:`~kinetics.config.RunConfig`), ``table``, ``counts`` (files
    processed, duplicate, quarantined), ``outcome`` (the :class:`kinetics.run.job.RunOutcome`
    the command prints from).
    """

    def __init__(self, outcome, config_text: str | None = None):
        self.outcome = outcome
        self._config_text = config_text

    def __repr__(self) -> str:
        k = self.k()
        shown = "no rate constant" if not k or k.get("value") is None else f"k = {k['value']:.4g} {k.get('unit', '')}"
        return f"<kinetics Run {self.label!r}: {len(self.table)} spectra, {shown}>"

    @property
    def label(self) -> str:
        return self.outcome.label

    @property
    def config(self):
        return self.outcome.config

    @property
    def table(self):
        """The series table (pandas DataFrame): time, concentrations with sigmas, per file."""
        return self.outcome.table

    @property
    def counts(self) -> dict:
        return dict(self.outcome.counts)

    @property
    def warnings(self) -> tuple[str, ...]:
        """The run's warnings in words (the fit's guardrails, table findings), each once."""
        return tuple(dict.fromkeys(self.outcome.warnings))

    def k(self) -> dict | None:
        """The rate constant as ``kinetics run`` quotes it: ``{"value", "stderr", "ci95", "unit"}``;
        ``ci95`` combines the fit's statistical interval (``ci95_statistical``) with the
        processing (systematic) term when that was assessed."""
        return self.outcome.k()

    def fit(self, law: str | None = None, *, mechanism: str | None = None, seed: int | None = None,
            **options):
        """A fit of the run's data (:mod:`kinetics.rates`).

        Parameters
        ----------
        law : str, optional
            A registered rate law (``"zero"``, ``"first"``, ``"second"``, ``"nth"`` ...,
            :data:`kinetics.rates.laws.MODELS`) fitted to the config's ``[fit]`` species.
            Default: the config's ``[fit]`` section.
        mechanism : str, optional
            Reaction text instead of a law (``"ester -> alcohol"``), over the same data.
        seed : int, optional
            Seed of the bootstrap generator (``bootstrap=N`` in ``options``).
        options
            Passed to :func:`kinetics.rates.fit.fit_model` (``profile``, ``bootstrap``,
            ``rng``, ``fixed``, ``start``, ``progress`` ...).

        Returns
        -------
        kinetics.rates.fit.FitResult
            Without arguments, the engine's own fit: the one ``kinetics run`` reports.
        """
        base = self.outcome.fit
        if base is None or base.data is None:
            raise FitError(f"run {self.label!r} has no fit to start from: {self.outcome.stop_reason}"
                           f" ({len(self.table)} spectra in the table)")
        if law is None and mechanism is None and seed is None and not options:
            return base
        if seed is not None:
            import numpy as np

            options.setdefault("rng", np.random.default_rng(seed))
        from kinetics.rates.fit import fit_law, fit_mechanism

        settings = self.config.fit
        if mechanism is not None:
            return fit_mechanism(base.data, mechanism, **options)
        if settings.mechanism:
            if law is None:
                return fit_mechanism(base.data, settings.mechanism, observed=tuple(settings.observed_species),
                                     initial=dict(settings.initial_mol_per_l) or None, **options)
            raise ConfigError("fit.mechanism", "this run fits a mechanism to several species; a rate law "
                              "needs one", hint="give mechanism=... or load a config with [fit] model")
        return fit_law(base.data, law or settings.model, observed=settings.observed, **options)

    def compare(self, candidates=None, **options):
        """Candidate rate laws fitted to the run's data and ranked by AICc
        (:func:`kinetics.rates.compare.compare_models`; ``.table``, ``.verdict``, ``.best``)."""
        from kinetics.rates.compare import DEFAULT_CANDIDATES, compare_models

        if self.config.fit.mechanism:
            raise ConfigError("fit.mechanism", "rate laws are compared for one fitted species, not a mechanism")
        return compare_models(self.fit().data, candidates or DEFAULT_CANDIDATES, observed=self.config.fit.observed,
                              **options)

    def courses(self, fit=None) -> dict:
        """The run's other measured courses on the fit's times (products, standard, mass
        balance), ``name -> (values, sigma)``, as the report draws them."""
        from kinetics.run.job import species_courses

        return species_courses(self.table, fit or self.fit(), self.config)

    def plot(self, fit=None, **options):
        """The fit's courses with every measured species, band and residuals: a matplotlib
        Figure (:func:`kinetics.plots.fit_figure`; ``options`` as there, e.g. ``width="single"``)."""
        fit = fit or self.fit()
        options.setdefault("title", self.label)
        return fit.plot(species=self.courses(fit), **options)

    def report(self, path: str | Path):
        """Write the run's report folder (HTML, PDF, figures, CSV tables) to ``path``, as
        ``kinetics run`` writes it; returns :class:`kinetics.report.ReportFiles`."""
        from kinetics.run.job import write_run_report

        return write_run_report(self.outcome, self.config, Path(path), self._config_text or _config_text(self.config))

    @cached_property
    def spectra(self) -> tuple:
        """Every spectrum of the table, processed and aligned as the run measures them (on
        the table's first spectrum), in table order; computed on first access."""
        from kinetics.sensitivity import processed_run

        folder = Path(self.config.folder)
        names = list(self.table["file"])
        if self.config.file is not None:  # the traces of one arrayed file, read once
            from kinetics.run.sources import trace_records

            spectra, _, _ = processed_run(self.config, records=trace_records(self.config, names))
        else:
            spectra, _, _ = processed_run(self.config, paths=[folder / name for name in names])
        return tuple(spectra)


def _config_text(config) -> str:
    if getattr(config, "text", None):
        return config.text
    if config.path is not None and Path(config.path).exists():
        return Path(config.path).read_text(encoding="utf-8")
    return repr(config)


def _run_config(source):
    from kinetics.config import RunConfig, load_run_config, run_config_from_dict

    if isinstance(source, RunConfig):
        return source
    if isinstance(source, Mapping):
        from kinetics.jsonio import dumps

        config = run_config_from_dict(source)
        return replace(config, text=dumps(dict(source)))
    return load_run_config(source)


def load_run(config: str | Path | Mapping[str, Any], *, folder: str | Path | None = None,
             out_dir: str | Path | None = None, processing_uncertainty: bool = True,
             progress: Progress | None = None) -> Run:
    """A finished run through the run engine, as ``kinetics run`` takes it.

    Parameters
    ----------
    config : path of a run config (TOML), its parsed mapping (relative folders are then
        relative to the working folder), or a :class:`~kinetics.config.RunConfig`.
    folder : path, optional
        Run the config on this folder of spectra instead of its ``[run] folder``.
    out_dir : path, optional
        Write the ledger and outputs (``series.csv``, ``fit.json`` ...) there; by default
        the run is kept in memory and nothing is written.
    processing_uncertainty : bool
        Assess k's systematic term over neighbouring processing choices (as the command does).
    progress : callable (stage, done, total), optional
        Told ``("spectra", done, total)`` as the files are measured.
    """
    from kinetics.run.engine import batch_run, plan_from_config
    from kinetics.run.files import check_folder
    from kinetics.run.job import outcome_of
    from kinetics.run.outputs import LEDGER_NAME

    config = _run_config(config)
    out = None if out_dir is None else Path(out_dir)
    plan = plan_from_config(config, None if out is None else out / LEDGER_NAME, folder=folder)
    check_folder(plan.config.folder)  # a missing folder is named before anything else
    summary = batch_run(plan, out, processing_uncertainty=processing_uncertainty, progress=progress)
    label = Path(config.path).stem if config.path is not None else Path(plan.config.folder).name
    outcome = outcome_of(label, config.path, out, summary, config=plan.config)
    return Run(outcome, _config_text(config))


# ---------------------------------------------------------------- a temperature study
class Study:
    """A temperature study: every run, the per-run k, Arrhenius and Eyring, the global fit.

    Made by :func:`load_study`.  ``result`` is the :class:`kinetics.study.StudyResult`;
    ``runs`` the runs given as run configs, each a :class:`Run`.
    """

    def __init__(self, result, config_text: str, workspace=None):
        from kinetics.run.job import study_run_outcomes

        self.result = result
        self._config_text = config_text
        self._workspace = workspace  # a temporary output folder, removed with this object
        self._outcomes = study_run_outcomes(result)
        self.runs = tuple(Run(outcome) for outcome in self._outcomes)

    def __repr__(self) -> str:
        ea = (self.result.temperature.to_dict().get("ea_kj_per_mol") or {}) if self.result.temperature else {}
        shown = f"Ea = {ea['value']:.4g} kJ/mol" if ea.get("value") is not None else self.result.message
        return f"<kinetics Study {self.name!r}: {len(self.result.run_fits)} runs, {shown}>"

    @property
    def name(self) -> str:
        return self.result.name

    @property
    def table(self):
        """Per-run fits (pandas DataFrame): label, temperature / K, k and its standard error."""
        import pandas as pd

        return pd.DataFrame(self.result.to_dict()["run_fits"])

    @property
    def warnings(self) -> tuple[str, ...]:
        return tuple(self.result.warnings)

    def arrhenius(self):
        """The two-step analysis (:class:`kinetics.temperature.TemperatureResult`: Ea, ln A,
        dH‡, dS‡, dG‡ with 95 % intervals; ``.table()``, ``.report()``, ``.to_dict()``)."""
        if self.result.temperature is None:
            raise FitError(f"study {self.name!r}: no temperature analysis: {self.result.message}")
        return self.result.temperature

    def global_fit(self):
        """The global fit of every concentration (:class:`kinetics.temperature.GlobalFitResult`) or None."""
        return self.result.global_result

    def summary(self) -> str:
        """The study in words (per-run k, two-step and global results, files)."""
        return self.result.report()

    def plot(self, kind: str = "arrhenius", **options):
        """A matplotlib Figure from :mod:`kinetics.plots`: ``"arrhenius"`` (with the global
        fit's line when it converged), ``"eyring"`` or ``"global"`` (every run's data with
        the global fit's curves)."""
        from kinetics import plots

        g = self.result.global_result
        g = g if g is not None and g.success else None
        options.setdefault("title", self.name or None)
        if kind in ("arrhenius", "eyring"):
            figure = plots.arrhenius_figure if kind == "arrhenius" else plots.eyring_figure
            return figure(self.arrhenius(), global_result=g, **options)
        if kind == "global":
            if g is None:
                raise FitError(f"study {self.name!r}: no converged global fit to plot")
            from kinetics.config import load_study_config
            from kinetics.temperature import resolve_model

            config = load_study_config(self.result.config_path)
            return plots.global_fit_figure(list(self.result.runs), g, resolve_model(config.model, config.observed),
                                           **options)
        raise ConfigError("kind", f"unknown plot {kind!r}", hint="use arrhenius, eyring or global")

    def report(self, path: str | Path):
        """Write the study's report folder to ``path``, as ``kinetics run`` writes it."""
        from kinetics.run.job import write_study_report

        return write_study_report(self.result, list(self._outcomes), Path(path), self._config_text)


def load_study(path: str | Path, *, out_dir: str | Path | None = None, progress: Progress | None = None) -> Study:
    """A temperature-study config (``[study]`` and ``[[study.runs]]``) run as ``kinetics run`` runs it.

    ``out_dir`` receives the study's files (per-run ledgers, tables, figures, ``study.json``);
    by default a temporary folder, removed with the returned object.  ``progress`` is told
    ``("runs", done, total)`` and, within each run, ``("spectra", done, total)``.
    """
    from kinetics.study import run_study

    path = Path(path)
    workspace = None
    if out_dir is None:
        workspace = tempfile.TemporaryDirectory(prefix="kinetics-study-")
        out_dir = workspace.name
    result = run_study(path, Path(out_dir), progress=progress)
    return Study(result, path.read_text(encoding="utf-8"), workspace)


# ---------------------------------------------------------------- a campaign
def load_campaign(path: str | Path, *, out_dir: str | Path | None = None, scheduler: str | None = None,
                  workers: int | None = None):
    """A campaign config (several runs that differ in design factors), as ``kinetics run``
    runs it: returns the :class:`kinetics.campaign.runner.CampaignOutcome` (``.fit``, the
    global fit; ``.vtna``; ``.text()``; ``.to_dict()``).  Without ``out_dir`` the runs'
    ledgers go to a temporary folder and no output file is written; ``scheduler`` as the
    command's ``--scheduler`` (default: the config's).
    """
    from kinetics.campaign.runner import run_campaign

    if out_dir is not None:
        return run_campaign(path, out_dir, scheduler=scheduler, workers=workers)
    with tempfile.TemporaryDirectory(prefix="kinetics-campaign-") as workspace:
        return run_campaign(path, workspace, scheduler=scheduler, workers=workers, outputs=False)
