"""``kinetics demo``: the demo series replayed into watched folders and followed live.

One run per temperature, each followed by the live loop (:mod:`watchers.live`) exactly as
a run on the instrument would be; then the temperature study over the live runs' tables
and one report over everything.  The job of ``kinetics run`` (a run or a study config) is
library code: :mod:`kinetics.run.job` (re-exported here).
"""

from __future__ import annotations

import logging
import shutil
import tomllib
from datetime import datetime, timezone
from pathlib import Path

from kinetics import report as rp
from kinetics.atomic import guard_output, write_atomic
from kinetics.errors import InputFileError
from kinetics.run.job import (STACKED_TRACES, JobOutcome, RunOutcome, inputs_of,  # noqa: F401
                              is_study_file, outcome_of, run_sections, run_single,
                              run_study_config, run_warnings, study_sections, summary_of)

log = logging.getLogger(__name__)


# ---------------------------------------------------------------- the demo
def _demo_data(data_dir: Path | None, out_dir: Path) -> tuple[Path, str]:
    """The demo series: the folder given, ./demo_series when present, else regenerated."""
    from kinetics import demo

    candidates = [data_dir] if data_dir is not None else [Path("demo_series"),
                                                          Path(__file__).resolve().parent.parent / "demo_series"]
    for folder in candidates:
        if folder is not None and all((folder / run.folder).is_dir() for run in demo.demo_runs()):
            return folder, f"demo series read from {folder}"
    if data_dir is not None:
        raise InputFileError(data_dir, "does not hold the demo runs",
                             hint=f"expected sub-folders {', '.join(r.folder for r in demo.demo_runs())}")
    folder = out_dir / "demo_series"
    demo.make_demo_data(folder)
    return folder, f"demo series regenerated into {folder} (seed {demo.SEED})"


def _live_run(source: Path, run_dir: Path, config_text: str, label: str, interval_s: float,
              temperature_c: float) -> RunOutcome:
    """Replay ``source`` into ``run_dir/incoming`` and follow it with the live loop."""
    from kinetics.run.engine import plan_from_config
    from watchers.live import LiveOptions, run_live
    from watchers.replay import ReplayThread

    incoming = run_dir / "incoming"
    if incoming.exists():
        shutil.rmtree(incoming)
    with guard_output(incoming):
        incoming.mkdir(parents=True)
    config_path = write_atomic(run_dir / "run.toml", config_text)
    live_dir = run_dir / "live"
    if live_dir.exists():  # a demo starts afresh; a real run would resume from its ledger
        shutil.rmtree(live_dir)
    plan = plan_from_config(config_path, live_dir / "ledger.sqlite")
    replayer = ReplayThread(source, incoming, interval_s, plan.spec.include)
    replayer.start()
    try:
        summary = run_live(plan, LiveOptions(out_dir=live_dir, quiet_period_s=0.15, poll=True, view=False,
                                                 handle_signals=False, tick_s=0.05),
                           replay_done=replayer.finished.is_set)
    finally:
        replayer.stop_event.set()
        replayer.join(timeout=10)
    if replayer.error is not None:
        raise InputFileError(source, f"the replay failed: {replayer.error}")
    return outcome_of(label, config_path, live_dir, summary, temperature_c, plan.config)


def run_demo(out_dir: str | Path, data_dir: str | Path | None = None, interval_s: float = 0.02,
             progress=None) -> JobOutcome:
    """The whole job on the bundled demo: live runs, temperature study, one report.

    ``progress`` (stage, done, total), when given, is told ``("runs", done, total)``."""
    from kinetics import demo

    out_dir = Path(out_dir)
    with guard_output(out_dir):
        out_dir.mkdir(parents=True, exist_ok=True)
    data, where = _demo_data(None if data_dir is None else Path(data_dir), out_dir)
    notes = [where]
    runs = []
    specs = demo.demo_runs()
    for number, spec in enumerate(specs):
        if progress is not None:
            progress("runs", number, len(specs))
        label = f"{spec.temperature_c:g} °C"
        run_dir = out_dir / "runs" / spec.folder
        text = demo.run_config_text("incoming", spec.temperature_c)
        runs.append(_live_run((data / spec.folder).resolve(), run_dir, text, label, interval_s, spec.temperature_c))
    if progress is not None:
        progress("runs", len(specs), len(specs))
    tables = [(r.label, r.temperature_c, str((r.out_dir / "series.csv").relative_to(out_dir))) for r in runs]
    # the study over the live runs' tables in memory; its config text is kept for the record
    study_text = demo.study_config_text(tables)
    from kinetics.config import study_config_from_dict
    from kinetics.study import run_from_table, study_from_runs

    study_config = study_config_from_dict(tomllib.loads(study_text), out_dir / "study.toml")
    kinetic_runs, warnings = [], []
    for spec, run in zip(study_config.runs, runs):
        kinetic, found = run_from_table(spec, run.table, run.out_dir / "series.csv")
        kinetic_runs.append(kinetic)
        warnings += found
    study = study_from_runs(study_config, kinetic_runs, out_dir / "study", warnings)
    sections = []
    first = runs[0]
    for run in runs:  # every run: its spectra, courses of every species, rate laws compared
        sections += run_sections(run, run.config, with_spectra=True, comparison=True, compact=True)
    sections = study_sections(study) + sections
    truth = {"ea_kj_per_mol": demo.EA_KJ_PER_MOL, "k_ref_per_s": demo.K_REF_PER_S,
             "t_ref_kelvin": demo.T_REF_KELVIN,
             "k_per_s": {f"{r.temperature_c:g}": r.k_per_s for r in demo.demo_runs()}}
    intro = rp.TextBlock("The scenario", (
        "Invented data: the hydrolysis of the fictitious ester tessyl ethanoate (pseudo-first order, water in "
        "excess) followed on an invented 60 MHz benchtop magnet at four temperatures, with an internal standard "
        "and a large water line. The spectra were made by the project's simulator with noise, phase errors, "
        "field drift, a baseline roll and overlapping signals; the generator's values are listed below so the "
        "recovered ones can be checked against them.",
        f"Generator: Ea = {demo.EA_KJ_PER_MOL} kJ/mol, k = {demo.K_REF_PER_S} s^-1 at {demo.T_REF_KELVIN} K; "
        + "; ".join(f"k({r.temperature_c:g} °C) = {r.k_per_s:.4g} s^-1" for r in demo.demo_runs()) + ".",
        "Each run was replayed file by file into a watched folder and followed by the live path "
        "(kinetics watch), exactly as a run on the instrument would be."))
    sections = [rp.Section("The demo", (intro,))] + sections
    files = rp.write_report(
        out_dir / "report", *sections, title="Demo: tessyl ethanoate hydrolysis at four temperatures",
        provenance=rp.Provenance(config_text=study_text + "\n\n# run config\n"
                                 + first.config_path.read_text(encoding="utf-8"),
                                 input_files=inputs_of(runs), run_utc=datetime.now(timezone.utc),
                                 extra={"demo data": where}),
        summary=summary_of(runs, study), warnings=run_warnings(runs))
    return JobOutcome("demo", out_dir, files.html, files.pdf, runs=tuple(runs), study=study,
                      notes=tuple(notes), truth=truth)

