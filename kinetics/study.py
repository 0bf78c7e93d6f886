"""Temperature studies from a TOML config: per-run fits, Arrhenius/Eyring, global fit, files.

A study config has a top-level ``[study]`` table (that is how :func:`is_study_config`
tells it from a single-run config) and one ``[[study.runs]]`` table per run.  It is
validated by :func:`kinetics.config.load_study_config` into a frozen
:class:`~kinetics.config.StudyConfig`.  Every key, its unit and its default:

``[study]``
    ``name`` (str, default: the config file name without extension) — title of plots/report.
    ``model`` (str, default ``"first"``) — rate law (``kinetics.rates`` registry name) for
    the per-run fits and the global fit: ``zero``, ``first``, ``second``, ``second-mixed`` or
    ``pseudo-first`` (laws with one rate constant; ``nth``, ``reversible-first`` and
    ``consecutive`` are refused, see :func:`kinetics.temperature.rates_model`).
    ``observed`` (``"reactant"`` or ``"product"``, default ``"reactant"``) — which species
    the concentration column holds.
    ``reference_temperature_kelvin`` (K, default 298.15) — where dG‡ is evaluated.
    ``t_ref_kelvin`` (K, default: harmonic mean of the run temperatures) — reference
    temperature of the global fit.
    ``global_fit`` (bool, default true) — also fit all raw data at once.
    ``profile`` (bool, default true) — profile-likelihood interval for Ea in the global fit.
    ``interval_basis`` (``"scatter"`` or ``"stated"``, default ``"scatter"``) — which
    two-step intervals are the headline ones (see :mod:`kinetics.temperature`).

``[[study.runs]]`` (at least two; three or more for intervals from the scatter)
    ``label`` (str, default ``"run N"``).
    ``temperature_c`` (°C) or ``temperature_kelvin`` (K) — exactly one.
    ``table`` (path, relative to the config file) — a CSV series table with a time column
    and concentration column(s); or ``config`` (path) — a single-run config, taken through
    the run engine (:func:`kinetics.run.engine.batch_run`; its ledger, ``series.csv`` and
    ``fit.json`` go to ``runs/<label>/`` in the output folder).  Exactly one of the two.
    ``folder`` (path, with ``config`` only) — run that config on this folder instead of its
    own ``[run] folder``, so one run config serves every temperature.
    ``time_column`` (str, default ``"time_s"``) and ``time_unit`` (``"s"``, ``"min"`` or
    ``"h"``, default ``"s"``).
    ``column`` (str, required) — the concentration column, mol/L.
    ``sigma_column`` (str, optional) — per-point standard deviations of ``column``, mol/L.

Outputs written to the output folder: ``runs.csv`` (per-run fits), ``arrhenius.csv``
(per-run Arrhenius/Eyring table), ``comparison.csv`` (two-step vs global),
``study.json`` (everything), ``arrhenius``, ``eyring`` and ``global_fit`` figures (SVG and 300-dpi PNG).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from kinetics import plots
from kinetics import temperature as temp
from kinetics.config import StudyConfig, StudyRunConfig, is_study_config, load_study_config  # noqa: F401
from kinetics.errors import ConfigError, InputFileError, KineticsError
from kinetics.atomic import guard_output, write_atomic
from kinetics.jsonio import dumps

log = logging.getLogger(__name__)

__all__ = ["EngineRun", "StudyResult", "is_study_config", "load_study_config", "run_from_table", "run_study", "study_from_runs"]


@dataclass(frozen=True)
class StudyResult:
    """Everything a study produced.

    Attributes
    ----------
    name : str
    config_path, out_dir : Path
    runs : tuple of KineticRun
    run_fits : tuple of RunFit
    temperature : TemperatureResult or None
        None when fewer than two runs gave a rate constant (``message`` says why).
    global_result : GlobalFitResult or None
    files : tuple of Path
        Every file written.
    warnings : tuple of str
    message : str
    engine_runs : tuple of EngineRun
        The runs given as run configs, as the run engine left them (fit, table, the
        validated config): what the report draws each run's spectra and courses from.
    """

    name: str
    config_path: Path
    out_dir: Path
    runs: tuple
    run_fits: tuple
    temperature: temp.TemperatureResult | None
    global_result: temp.GlobalFitResult | None
    files: tuple[Path, ...]
    warnings: tuple[str, ...]
    message: str = "ok"
    engine_runs: tuple = ()

    @property
    def success(self) -> bool:
        return self.temperature is not None and (self.global_result is None or self.global_result.success)

    def to_dict(self) -> dict[str, Any]:
        return {
            "name": self.name,
            "config": str(self.config_path),
            "success": self.success,
            "message": self.message,
            "run_fits": [
                {"label": f.label, "temperature_kelvin": f.temperature_kelvin, "k": f.k, "k_stderr": f.k_stderr,
                 "n_points": f.n_points, "success": f.success, "message": f.message, **dict(f.params)}
                for f in self.run_fits
            ],
            "two_step": None if self.temperature is None else self.temperature.to_dict(),
            "global_fit": None if self.global_result is None else self.global_result.to_dict(),
            "files": [str(p) for p in self.files],
            "warnings": list(self.warnings),
        }

    def report(self) -> str:
        lines = [f"Temperature study '{self.name}': {len(self.runs)} runs", "  per-run fits:"]
        for f in self.run_fits:
            state = "" if f.success else f"  ({f.message})"
            lines.append(f"    {f.label:<16} {f.temperature_kelvin:8.2f} K  k = {f.k:.5g} ± {f.k_stderr:.2g}{state}")
        if self.temperature is not None:
            lines.append(self.temperature.report())
        if self.global_result is not None:
            lines.append(self.global_result.report())
        if self.temperature is None:
            lines.append(f"  no temperature analysis: {self.message}")
        lines.append(f"  files: {', '.join(p.name for p in self.files)}")
        return "\n".join(lines)


@dataclass(frozen=True)
class EngineRun:
    """A study run that went through the run engine: its config (folder applied), the
    engine's :class:`~kinetics.run.engine.RunSummary` and the folder it wrote."""

    label: str
    temperature_kelvin: float
    config_path: Path
    config: Any
    summary: Any
    out_dir: Path


# ---------------------------------------------------------------- config reading
def _read_series_table(run: StudyRunConfig, runs_dir: Path | None = None, engine: list | None = None,
                       progress=None):
    """A run's series table: the CSV named, or its run config through the run engine."""
    if run.config is not None:
        # a run config goes through the run engine, as `kinetics run` would take it, with
        # its own ledger under the study's output folder
        from kinetics.config import load_run_config
        from kinetics.run.engine import batch_run, plan_from_config

        plan = plan_from_config(load_run_config(run.config), folder=run.folder, require_named=False)
        out = (runs_dir or run.config.parent) / _slug(run.label)
        summary = batch_run(plan, out, figures=False, progress=progress)
        if engine is not None:
            engine.append(EngineRun(run.label, run.temperature_kelvin, run.config, plan.config, summary, out))
        return summary.table, run.config
    path = run.table
    if not path.exists():
        raise InputFileError(path, "series table not found", hint=f"named by {run.key}.table")
    from kinetics.rates.table import read_rows

    header, rows, lines, header_line = read_rows(path)
    for row, line in zip(rows, lines):
        if len(row) != len(header):
            raise InputFileError(path, f"{len(row)} cells but the header has {len(header)}", line=line)
    return _SeriesTable(header, rows, lines, header_line), path


@dataclass(frozen=True)
class _SeriesTable:
    """A delimited table's cells with their file line numbers (for error messages)."""

    header: list
    rows: list
    lines: list
    header_line: int

    def __contains__(self, name) -> bool:
        return name in self.header

    @property
    def columns(self) -> list:
        return self.header


def _column(frame, name: str, path: Path, key: str) -> np.ndarray:
    """A numeric column; empty or ``nan`` cells become NaN (the point is skipped), text is an error."""
    if name not in frame:
        raise InputFileError(path, f"no column '{name}' (asked for by {key})", line=getattr(frame, "header_line", 1),
                             hint=f"columns are: {', '.join(map(str, frame.columns))}")
    if not isinstance(frame, _SeriesTable):  # a DataFrame from the run engine
        import pandas as pd

        values = pd.to_numeric(frame[name], errors="coerce").to_numpy(float)
        bad = np.flatnonzero(~np.isfinite(values) & frame[name].notna().to_numpy())
        if bad.size:
            raise InputFileError(path, f"column '{name}' value {frame[name].iloc[int(bad[0])]!r} is not a number")
        return values
    j = frame.header.index(name)
    values = []
    for row, line in zip(frame.rows, frame.lines):
        text = row[j].strip()
        if text == "" or text.lower() in ("nan", "na", "n/a"):
            values.append(np.nan)
            continue
        try:
            values.append(float(text))
        except ValueError:
            raise InputFileError(path, f"column '{name}' holds {text!r}, not a number", line=line,
                                 hint="use a dot as decimal separator and no units in cells") from None
    return np.array(values, dtype=float)


def _slug(text: str) -> str:
    return "".join(c if c.isalnum() else "_" for c in text).strip("_").lower() or "run"


def _load_run(run: StudyRunConfig, runs_dir: Path | None = None,
              engine: list | None = None, progress=None) -> tuple[temp.KineticRun, list[str]]:
    frame, path = _read_series_table(run, runs_dir, engine, progress)
    return run_from_table(run, frame, path)


def run_from_table(run: StudyRunConfig, frame, path: Path) -> tuple[temp.KineticRun, list[str]]:
    """A study run from its series table (a DataFrame, or the cells of a CSV file at
    ``path``): the columns the run names, as a ``temperature.KineticRun``, plus warnings."""
    key, label = run.key, run.label
    warnings = list(run.temperature_warnings)
    time_s = _column(frame, run.time_column, path, f"{key}.time_column") * run.time_factor_s
    conc = _column(frame, run.column, path, f"{key}.column")
    sigma = _column(frame, run.sigma_column, path, f"{key}.sigma_column") if run.sigma_column else None
    missing = ~np.isfinite(time_s) | ~np.isfinite(conc)
    if sigma is not None:
        missing |= ~np.isfinite(sigma)
    if missing.any():
        warnings.append(f"{label}: {int(missing.sum())} row(s) of {path.name} with empty cells skipped")
    if np.any(time_s[np.isfinite(time_s)] < 0):
        warnings.append(f"{label}: negative times in {path.name}; times are seconds from reaction start")
    return temp.KineticRun(label, run.temperature_kelvin, time_s, conc, sigma), warnings


# ---------------------------------------------------------------- running
def run_study(config_path: str | Path, out_dir: str | Path, progress=None) -> StudyResult:
    """Run a temperature study config and write its tables, JSON and plots.

    Parameters
    ----------
    config_path : path to the study TOML (module docstring lists its keys).
    out_dir : folder for the outputs (created if missing).
    progress : callable (stage, done, total), optional
        Told ``("runs", done, total)`` as the runs are taken, and passed on to the run
        engine (``("spectra", done, total)``, :func:`kinetics.run.engine.batch_run`).

    Returns
    -------
    StudyResult

    Raises
    ------
    ConfigError, InputFileError
        Bad config keys, unreadable tables, bad temperatures.
    """
    config = load_study_config(config_path)
    out = Path(out_dir)
    with guard_output(out):
        out.mkdir(parents=True, exist_ok=True)
    runs, warnings, engine = [], [], []
    for number, run in enumerate(config.runs):
        if progress is not None:
            progress("runs", number, len(config.runs))
        loaded, run_warnings = _load_run(run, out / "runs", engine, progress)
        runs.append(loaded)
        warnings += run_warnings
    if progress is not None:
        progress("runs", len(config.runs), len(config.runs))
    return study_from_runs(config, runs, out, warnings, engine_runs=engine)


def study_from_runs(config: StudyConfig, runs: list, out_dir: str | Path, warnings=(),
                    engine_runs=()) -> StudyResult:
    """The study over runs already in memory (``temperature.KineticRun``): per-run fits,
    Arrhenius, Eyring, the global fit; tables, JSON and plots written to ``out_dir``.

    ``config`` gives the options (its ``runs`` are not read again: the demo passes the
    runs it has just followed live).
    """
    out = Path(out_dir)
    with guard_output(out):
        out.mkdir(parents=True, exist_ok=True)
    warnings = list(warnings)
    source = config.path
    options = {"name": config.name, "model": config.model, "observed": config.observed,
               "reference_temperature_kelvin": config.reference_temperature_kelvin,
               "t_ref_kelvin": config.t_ref_kelvin, "global_fit": config.global_fit,
               "profile": config.profile, "interval_basis": config.interval_basis}
    model = temp.resolve_model(options["model"], options["observed"])
    run_fits = [_fit_one(run, model) for run in runs]
    warnings += [f"{f.label}: {f.message}" for f in run_fits if not f.success]
    negative = [f.label for f in run_fits if any("negative" in w for w in f.data_warnings)]
    if negative:
        # One line for the whole study: late points of every run scatter around zero.
        message = (f"{len(negative)} of {len(run_fits)} runs have negative concentrations "
                   f"({', '.join(negative)}): fine if noise around zero, otherwise check the baselines")
        warnings.append(message)  # logged once, with the others, by analyse_temperatures
    good = [f for f in run_fits if f.success]
    temperature_result, message = None, "ok"
    try:
        temperature_result = temp.analyse_temperatures(
            [f.temperature_kelvin for f in good], [f.k for f in good], [f.k_stderr for f in good],
            labels=[f.label for f in good], reference_temperature_kelvin=options["reference_temperature_kelvin"],
            basis=options["interval_basis"], k_unit=model.k_unit, extra_warnings=warnings)
    except ConfigError as error:
        message = f"two-step analysis not possible: {error}"
        warnings.append(message)  # logged once, with the others, by analyse_temperatures
    global_result = None
    if options["global_fit"]:
        global_result = temp.global_fit(runs, model, t_ref_kelvin=options["t_ref_kelvin"], run_fits=run_fits,
                                        profile=options["profile"],
                                        reference_temperature_kelvin=options["reference_temperature_kelvin"])
        if not global_result.success:
            warnings.append(f"global fit: {global_result.message}")
    all_warnings = tuple(dict.fromkeys(list(temperature_result.warnings if temperature_result else ()) + warnings))
    partial = StudyResult(options["name"], source, out, tuple(runs), tuple(run_fits), temperature_result,
                          global_result, (), all_warnings, message)
    files = _write_outputs(partial, model)
    return StudyResult(options["name"], source, out, tuple(runs), tuple(run_fits), temperature_result,
                       global_result, tuple(files), all_warnings, message, tuple(engine_runs))


def _fit_one(run: temp.KineticRun, model: temp.GlobalModel) -> temp.RunFit:
    try:
        return temp.fit_run_rates(run, model)
    except (KineticsError, ValueError, FloatingPointError) as error:
        return temp.RunFit(run.label, run.temperature_kelvin, float("nan"), float("nan"), {}, len(run.time_s),
                           False, f"fit failed: {error}")


def _write_outputs(result: StudyResult, model: temp.GlobalModel) -> list[Path]:
    import pandas as pd

    out = result.out_dir
    files = []
    runs_csv = out / "runs.csv"
    write_atomic(runs_csv, pd.DataFrame(result.to_dict()["run_fits"]).to_csv(index=False))
    files.append(runs_csv)
    if result.temperature is not None:
        path = out / "arrhenius.csv"
        write_atomic(path, result.temperature.table().to_csv(index=False))
        files.append(path)
    if result.global_result is not None and result.global_result.comparison():
        path = out / "comparison.csv"
        write_atomic(path, pd.DataFrame(result.global_result.comparison()).to_csv(index=False))
        files.append(path)
    if result.temperature is not None:
        g = result.global_result if (result.global_result is not None and result.global_result.success) else None
        files += plots.save_figure(plots.arrhenius_figure(result.temperature, global_result=g, title=result.name or None),
                                   out / "arrhenius").values()
        files += plots.save_figure(plots.eyring_figure(result.temperature, global_result=g, title=result.name or None),
                                   out / "eyring").values()
    if result.global_result is not None and result.global_result.success:
        files += plots.save_figure(plots.global_fit_figure(list(result.runs), result.global_result, model,
                                                           title=result.name or None), out / "global_fit").values()
    json_path = out / "study.json"
    files.append(json_path)
    payload = result.to_dict()
    payload["files"] = [str(p) for p in files]
    write_atomic(json_path, dumps(payload) + "\n")
    return files
