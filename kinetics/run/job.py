"""The whole job of ``kinetics run``: a run config or a study config, then the report.

* :func:`run_single` - a finished folder through the run engine
  (:func:`kinetics.run.engine.batch_run`: ledger, series table, fit), then the report;
* :func:`run_study_config` - a temperature study (:func:`kinetics.study.run_study`; runs
  given as run configs go through the same engine), then the report.

The report pieces (:func:`run_sections`, :func:`study_sections`, ...) are shared with the
demo (``watchers.workflow``, which follows the demo runs live).  Every function returns a
plain record the CLI prints; none prints itself.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from kinetics import report as rp
from kinetics.numbers import format_estimate, format_interval, format_value, unit_text
from kinetics.errors import InputFileError, KineticsError

log = logging.getLogger(__name__)

#: how many spectra the stacked plot of a run shows
STACKED_TRACES = 12


@dataclass(frozen=True)
class RunOutcome:
    """One run through the pipeline: where it wrote, what it found."""

    label: str
    out_dir: Path
    config_path: Path
    table: pd.DataFrame
    fit: Any  # kinetics.rates.fit.FitResult or None
    counts: dict
    stop_reason: str
    temperature_c: float | None = None
    config: Any = field(default=None, repr=False, compare=False)  # the validated RunConfig
    processing: dict | None = None  # the final fit's processing uncertainty (kinetics.run.uncertainty)
    k_quoted: dict | None = None  # k as the run quotes it: ci95 combined, ci95_statistical the fit's
    warnings: tuple[str, ...] = ()
    processing_text: str | None = None

    def k(self) -> dict | None:
        """The fitted rate constant as a parameter dict, or None.

        ``ci95`` is the interval the run quotes: statistical and processing (systematic)
        parts combined when the latter was assessed, with ``ci95_statistical`` the fit's own.
        """
        if self.fit is None:
            return None
        if self.k_quoted is not None:
            return dict(self.k_quoted)
        name = next((n for n in self.fit.varying if n.startswith("k")), None)
        return None if name is None else self.fit.param(name).to_dict()

    def breakdown(self) -> str | None:
        """One line: the statistical and systematic parts of k's interval, or why not assessed."""
        doc = self.processing
        if not doc:
            return None
        if not doc.get("assessed"):
            return doc.get("reason")
        stat, sys_, value = doc["statistical"], doc["systematic"], doc.get("value")
        unit = doc.get("unit", "")
        lo, hi = stat["ci95"]
        if sys_["stderr"] > 0:
            relative = f" ({format_value(100 * sys_['stderr'] / abs(value), 2)} %)" if value else ""
            shown_unit = unit_text(unit)
            systematic = f"u = {format_value(sys_['stderr'], 2)}{' ' + shown_unit if shown_unit else ''}{relative}"
        else:
            systematic = "none beyond noise (the variants spread no more than noise alone gives)"
        text = (f"statistical 95 % interval {format_interval(lo, hi, unit)}; "
                f"systematic (processing choices) {systematic}")
        largest = (doc.get("breakdown") or [None])[0]
        if largest and largest.get("stderr") and sys_["stderr"] > 0:
            text += f"; most from {largest['choice'].replace('_', ' ')} of {largest['target']}"
        if doc.get("reason"):
            text += f" ({doc['reason']})"
        return text


@dataclass(frozen=True)
class JobOutcome:
    """What ``kinetics run`` or ``kinetics demo`` did, for the CLI to print."""

    kind: str  # "run", "study" or "demo"
    out_dir: Path
    report_html: Path | None
    report_pdf: Path | None
    runs: tuple[RunOutcome, ...] = ()
    study: Any = None  # kinetics.study.StudyResult
    notes: tuple[str, ...] = ()
    truth: dict = field(default_factory=dict)

    def to_dict(self) -> dict:
        out = {
            "kind": self.kind, "out_dir": str(self.out_dir),
            "report_html": None if self.report_html is None else str(self.report_html),
            "report_pdf": None if self.report_pdf is None else str(self.report_pdf),
            "runs": [{"label": r.label, "temperature_c": r.temperature_c, "out_dir": str(r.out_dir),
                      "n_spectra": int(len(r.table)), "counts": r.counts, "stop_reason": r.stop_reason,
                      "k_per_s": r.k(), "converged": None if r.fit is None else bool(r.fit.converged),
                      "message": None if r.fit is None else r.fit.message,
                      "processing_uncertainty": r.processing, "warnings": list(r.warnings)}
                     for r in self.runs],
            "notes": list(self.notes),
        }
        if self.study is not None:
            out["study"] = self.study.to_dict()
        if self.truth:
            out["truth"] = self.truth
        return out


# ---------------------------------------------------------------- report pieces
def _processed_spectra(config, files: list[Path]) -> list:
    """A few of the run's spectra, processed as the run processed them, for the stacked plot."""
    from kinetics.spectra import read

    pipeline = config.pipeline
    picks = np.unique(np.linspace(0, len(files) - 1, min(STACKED_TRACES, len(files))).round().astype(int))
    out = []
    if getattr(config, "file", None) is not None:  # traces of one arrayed file, read once
        from kinetics.run.sources import trace_records

        try:
            records = trace_records(config, [Path(files[i]).name for i in picks])
        except (InputFileError, OSError) as error:
            log.warning("stacked plot skipped: %s", error)
            return []
        return [(int(i), pipeline(record).spectrum) for i, record in zip(picks, records)]
    for index in picks:
        try:
            out.append((int(index), pipeline(read(files[index])).spectrum))
        except InputFileError as error:  # quarantined in the ledger already; skip in the plot
            log.warning("stacked plot skips %s: %s", files[index], error)
    return out


def species_courses(table: pd.DataFrame, fit, config) -> dict:
    """The run's other measured courses on the fit's time points, for the courses figure.

    Every tracked species the fit did not take (products, a co-product), the standard when
    its concentration was measured (not when it defines the scale: then it is constant) and
    the mass balance; each as ``(values, sigma)``.  Rows are matched to the fit by time.
    """
    if fit is None or table is None or not len(table) or "time_s" not in table:
        return {}
    fit_t = np.asarray(fit.time_s, float)
    table_t = table["time_s"].to_numpy(float)
    rows = []
    for t in fit_t:
        hit = np.flatnonzero(np.isclose(table_t, t, rtol=0, atol=1e-6 * max(1.0, abs(t))))
        if not hit.size:
            return {}
        rows.append(int(hit[0]))
    fitted = {str(c).removesuffix("_concentration") for c in fit.columns} | set(getattr(fit, "species", ()) or ())
    out = {}

    def column(name):
        return table[name].to_numpy(float)[rows] if name in table else None

    for name in getattr(config, "species", ()):
        values = column(f"{name}_concentration")
        if name in fitted or values is None or not np.isfinite(values).any():
            continue
        if np.nanmax(values) - np.nanmin(values) <= 1e-12 * max(1.0, abs(np.nanmax(values))):
            continue  # the standard that defines the scale: constant, nothing measured
        out[name] = (values, column(f"{name}_concentration_sigma"))
    total = column("mass_balance_total")
    if total is not None and np.isfinite(total).any():
        out["mass balance"] = (total, column("mass_balance_deviation_sigma"))
    return out


def processing_section(run: RunOutcome):
    """The processing uncertainty of k as a table (choice, what it was applied to, u(k))."""
    doc = run.processing or {}
    heading = f"Processing uncertainty: {run.label}"
    text = run.breakdown() or ""
    rows = doc.get("breakdown") or []
    if not doc.get("assessed") or not rows:
        return rp.Section(heading, (rp.TextBlock("k under neighbouring processing choices", (text,)),))
    unit = doc.get("unit", "")
    value = doc.get("value")
    frame = pd.DataFrame([{"choice": r["choice"], "target": r["target"], "k_stderr": r["stderr"],
                           "relative_percent": 100 * r.get("relative", float("nan"))} for r in rows])
    display = pd.DataFrame({
        "processing choice varied": [r["choice"].replace("_", " ") for r in rows],
        "applied to": [str(r["target"]) for r in rows],
        f"u(k) / {unit_text(unit)}" if unit else "u(k)": [format_value(r["stderr"], 2) if r["stderr"] else "0"
                                                         for r in rows],
        "u(k)/k / %": [format_value(100 * r["stderr"] / abs(value), 2) if value and r["stderr"] else "0"
                         for r in rows]})
    caption = (f"k = {format_estimate({'value': value, 'stderr': (doc.get('statistical') or {}).get('stderr'), 'unit': unit})}"
               f" from the fit; {text}. Each choice was varied to its neighbours (fit baseline order ±1, "
               "windows ×0.7 and ×1.3, grouping of overlapping signals) and the run re-quantified and refitted; "
               "u(k) is the root mean square change of k, combined over choices as a root sum of squares.")
    return rp.Section(heading, (rp.TableBlock("k under neighbouring processing choices", frame,
                                              name=f"processing_{_slug(run.label)}", caption=caption,
                                              display=display),))


def run_sections(run: RunOutcome, config, with_spectra: bool, comparison: bool, compact: bool = False) -> list:
    """A run's report sections: stacked spectra, courses of every species with the fit,
    band and residuals, the rate laws compared, the processing uncertainty.

    ``compact`` (studies) leaves out the fit's plain-text report (its tables say the same)
    and puts the processing uncertainty in the run's own section.
    """
    from kinetics.rates.compare import compare_models

    sections = []
    folder = Path(config.folder)
    files = [folder / name for name in run.table["file"]] if len(run.table) else []
    if with_spectra and files:
        picked = _processed_spectra(config, files)
        if picked:
            windows = [(sig.name, min(sig.window_ppm), max(sig.window_ppm)) for sig in config.signals]
            times = run.table["time_s"].to_numpy(float)
            sections.append(rp.spectra_section([s for _, s in picked], windows=windows,
                                               time_s=[times[i] for i, _ in picked], total=len(files),
                                               heading=f"Spectra through time: {run.label}",
                                               height_in=3.0 if compact else None))
    if run.fit is not None:
        ranking = None
        if comparison and run.fit.data is not None and not config.fit.mechanism:
            try:
                ranking = compare_models(run.fit.data, observed=config.fit.observed)
            except KineticsError as error:  # a comparison that cannot run must not lose the report
                log.warning("model comparison skipped for %s: %s", run.label, error)
        sections.append(rp.fit_section(run.fit, heading=f"Rate law: {run.label}", comparison=ranking,
                                       name=f"fit_{_slug(run.label)}",
                                       species=species_courses(run.table, run.fit, config),
                                       fit_report=not compact, compact=compact))
    if run.processing:
        processing = processing_section(run)
        if compact and sections:
            last = sections[-1]
            sections[-1] = rp.Section(last.heading, last.blocks + processing.blocks, last.intro)
        else:
            sections.append(processing)
    return sections


def _slug(text: str) -> str:
    return "".join(c if c.isalnum() else "_" for c in text).strip("_").lower() or "run"


def inputs_of(runs: list[RunOutcome]) -> pd.DataFrame:
    rows = []
    for run in runs:
        for name, digest in zip(run.table.get("file", []), run.table.get("sha256", [])):
            rows.append({"run": run.label, "file": name, "sha256": digest})
    return pd.DataFrame(rows, columns=["run", "file", "sha256"])


def summary_of(runs: list[RunOutcome], study=None) -> dict[str, str]:
    """The report's key results, value and uncertainty rounded together (:mod:`kinetics.numbers`)."""
    summary = {}
    for run in runs:
        k = run.k()
        if k and k.get("value") is not None and k.get("ci95"):
            summary[f"k, {run.label}"] = format_estimate(k)
            if run.breakdown():
                summary[f"k, {run.label}"] += f"; {run.breakdown()}"
        elif run.fit is not None:
            summary[f"k, {run.label}"] = f"no rate constant quoted: {run.fit.message}"
    if study is not None and study.temperature is not None:
        data = study.temperature.to_dict()
        for key, label in (("ea_kj_per_mol", "Ea"), ("dh_kj_per_mol", "dH‡"), ("ds_j_per_mol_k", "dS‡")):
            entry = data.get(key) or {}
            if entry.get("value") is not None and entry.get("ci95"):
                summary[label] = format_estimate(entry)
    return summary


def study_sections(study) -> list:
    sections = []
    global_result = study.global_result if (study.global_result is not None and study.global_result.success) else None
    if study.temperature is not None:
        sections.append(rp.temperature_section(study.temperature, heading="Temperature dependence (two-step)",
                                               global_result=global_result))
    if study.global_result is not None:
        try:
            sections.append(rp.global_section(study.global_result, list(study.runs)))
        except KineticsError as error:  # a failed global fit must not lose the rest of the report
            log.warning("global-fit section skipped: %s", error)
    return sections


# ---------------------------------------------------------------- single run
def outcome_of(label: str, config_path: Path, out_dir: Path, summary, temperature_c=None,
               config=None) -> RunOutcome:
    """A finished run (its :class:`~kinetics.run.engine.RunSummary`) as a RunOutcome."""
    table = summary.table if summary.table is not None else pd.DataFrame()
    outcome = summary.outcome
    fit = None if outcome is None else outcome.state
    if outcome is None or fit is None:
        return RunOutcome(label, out_dir, config_path, table, fit, dict(summary.counts), summary.stop_reason,
                          temperature_c, config)
    return RunOutcome(label, out_dir, config_path, table, fit, dict(summary.counts), summary.stop_reason,
                      temperature_c, config, processing=outcome.processing,
                      k_quoted=outcome.k if outcome.processing and outcome.processing.get("assessed") else None,
                      warnings=tuple(outcome.warnings), processing_text=outcome.report_text)


def run_single(config_path: str | Path, out_dir: str | Path, report: bool = True, progress=None) -> JobOutcome:
    """A run config over its finished folder: ledger, series, fit (batch = live path), report.

    ``progress`` (stage, done, total) is passed to :func:`kinetics.run.engine.batch_run`."""
    from kinetics.config import load_run_config
    from kinetics.run.engine import batch_run, plan_from_config
    from kinetics.run.files import check_folder

    config_path = Path(config_path)
    out_dir = Path(out_dir)
    config = load_run_config(config_path)
    check_folder(config.folder)  # a missing folder is named before anything else
    summary = batch_run(plan_from_config(config, out_dir / "ledger.sqlite"), out_dir, progress=progress)
    run = outcome_of(config_path.stem, config_path, out_dir, summary, config=config)
    html = pdf = None
    if report:
        files = write_run_report(run, config, out_dir / "report", config_path.read_text(encoding="utf-8"))
        html, pdf = files.html, files.pdf
    return JobOutcome("run", out_dir, html, pdf, runs=(run,))


def write_run_report(run: RunOutcome, config, folder: str | Path, config_text: str):
    """The report of one run (``kinetics run`` and :meth:`kinetics.api.Run.report`)."""
    return rp.write_report(
        Path(folder), *run_sections(run, config, with_spectra=True, comparison=True),
        title=f"Reaction kinetics: {run.label}",
        provenance=rp.Provenance(config_text=config_text, input_files=inputs_of([run])),
        summary=summary_of([run]), warnings=run_warnings([run]))


def run_warnings(runs: list[RunOutcome]) -> list[str]:
    """Every run's warnings (each once), prefixed with the run's label when there are several."""
    out = []
    for run in runs:
        for warning in run.warnings:
            out.append(warning if len(runs) == 1 else f"{run.label}: {warning}")
    return list(dict.fromkeys(out))


# ---------------------------------------------------------------- study
def run_study_config(config_path: str | Path, out_dir: str | Path, report: bool = True,
                     progress=None) -> JobOutcome:
    """A temperature-study config: per-run fits, Arrhenius, Eyring, global fit, report.

    ``progress`` (stage, done, total) is passed to :func:`kinetics.study.run_study`."""
    from kinetics.study import run_study

    config_path = Path(config_path)
    out_dir = Path(out_dir)
    study = run_study(config_path, out_dir, progress=progress)
    runs = study_run_outcomes(study)
    html = pdf = None
    if report:
        files = write_study_report(study, runs, out_dir / "report", _study_config_text(config_path, runs))
        html, pdf = files.html, files.pdf
    return JobOutcome("study", out_dir, html, pdf, runs=tuple(runs), study=study)


def _study_config_text(config_path: Path, runs: list[RunOutcome]) -> str:
    """The study config as written, followed by each run config it names (once each)."""
    text = config_path.read_text(encoding="utf-8")
    for path in dict.fromkeys(Path(run.config_path) for run in runs):
        if path.is_file() and path.resolve() != config_path.resolve():
            text += f"\n\n# ---- run config {path.name} (applied to each run's folder) ----\n"
            text += path.read_text(encoding="utf-8")
    return text


def study_run_outcomes(study) -> list[RunOutcome]:
    """The study's runs that went through the run engine, as RunOutcomes."""
    return [outcome_of(e.label, e.config_path, e.out_dir, e.summary, e.temperature_kelvin - 273.15, e.config)
            for e in study.engine_runs]


def write_study_report(study, runs: list[RunOutcome], folder: str | Path, config_text: str):
    """The report of a study (``kinetics run`` and :meth:`kinetics.api.Study.report`)."""
    return rp.write_report(
        Path(folder), *study_report_sections(study, runs), title=f"Temperature study: {study.name}",
        provenance=rp.Provenance(config_text=config_text, input_files=inputs_of(runs)),
        summary=summary_of(runs, study), warnings=list(study.warnings) + run_warnings(runs))


def study_report_sections(study, runs: list[RunOutcome]) -> list:
    """The study report: Arrhenius and Eyring (two-step and global lines), the global fit,
    then every run: stacked spectra, courses of every species with fit, band and residuals,
    the rate laws compared and the processing uncertainty.

    ``runs`` are the runs that went through the engine (with spectra); runs given as series
    tables get their courses, fit and comparison from the table alone.
    """
    sections = study_sections(study)
    by_label = {run.label: run for run in runs}
    for kinetic in study.runs:
        run = by_label.get(kinetic.label)
        if run is not None and run.config is not None:
            sections += run_sections(run, run.config, with_spectra=True, comparison=True, compact=True)
        else:
            sections += _table_run_sections(kinetic, study)
    return sections


def _table_run_sections(kinetic, study) -> list:
    """A study run given as a series table: its fit (the study's rate law) and the comparison."""
    from kinetics.rates.compare import compare_models
    from kinetics.rates.fit import fit_arrays

    try:
        config = _study_options(study)
        fit = fit_arrays(kinetic.time_s, kinetic.concentration_mol_per_l, config["model"],
                         observed=config["observed"], sigma=kinetic.sigma_mol_per_l)
    except (KineticsError, ValueError) as error:
        log.warning("run %s: no courses figure (%s)", kinetic.label, error)
        return []
    try:
        ranking = compare_models(fit.data, observed=config["observed"])
    except KineticsError as error:
        log.warning("model comparison skipped for %s: %s", kinetic.label, error)
        ranking = None
    return [rp.fit_section(fit, heading=f"Rate law: {kinetic.label}", comparison=ranking,
                           name=f"fit_{_slug(kinetic.label)}", fit_report=False, compact=True)]


def _study_options(study) -> dict:
    """The study's rate law and observed species (from its config file)."""
    from kinetics.config import load_study_config

    config = load_study_config(study.config_path)
    return {"model": config.model, "observed": config.observed}


def is_study_file(config_path: str | Path) -> bool:
    """True when the TOML file is a temperature study (a top-level ``[study]`` table)."""
    from kinetics.config import is_study_config, read_toml

    return is_study_config(read_toml(config_path))


# ---------------------------------------------------------------- campaign
def is_campaign_file(config_path: str | Path) -> bool:
    """True when the TOML file is a campaign (a top-level ``[campaign]`` table)."""
    from kinetics.campaign.config import is_campaign_file as check

    return check(config_path)


def run_campaign_config(config_path: str | Path, out_dir: str | Path, *, scheduler: str | None = None,
                        workers: int | None = None, report: bool = True):
    """A campaign config (:func:`kinetics.campaign.runner.run_campaign`): the runs as tasks, then
    the global fit, VTNA, the same-excess check and initial rates, then (``report``) the report
    in ``<out>/report/`` (:func:`kinetics.campaign.figures.write_campaign_report`); returns a
    CampaignOutcome whose ``files`` include report.html and report.pdf."""
    from dataclasses import replace

    from kinetics.campaign.figures import write_campaign_report
    from kinetics.campaign.runner import run_campaign

    outcome = run_campaign(config_path, out_dir, scheduler=scheduler, workers=workers)
    if report and len(outcome.runs):
        files = write_campaign_report(outcome)
        outcome = replace(outcome, files=tuple(outcome.files) + (files.html, files.pdf))
    return outcome
