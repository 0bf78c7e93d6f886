"""The run engine (kinetics.run): one path behind `kinetics run`, `kinetics watch` and studies.

The spectra are the bundled demo series (invented data made by kinetics.simulate, see
demo_series/README.md): four fit groups deconvolved across the series, an internal
standard, alignment.  These are consistency checks of the engine — the same folder taken
three ways must give the same table to the last bit — and checks of the work it does per
run (each file read once, the pipeline built once, no per-spectrum deconvolution that the
series-wide fit would overwrite).  The science is checked against the generator's truth
in test_workflow.py and test_demo.py.
"""

from __future__ import annotations

import json
from pathlib import Path

import pandas as pd
import pytest

from kinetics import demo
from kinetics.cli import main
from kinetics.config import load_run_config, run_config_from_dict
from kinetics.run import batch_run, engine, plan_from_config
from kinetics.store import Ledger

ROOT = Path(__file__).resolve().parent.parent
SERIES = ROOT / "demo_series"


def _run_config_text(folder: str) -> str:
    # the demo config without its target conversion, so a live run takes every file
    text = demo.run_config_text(folder, 25)
    return "\n".join(line for line in text.splitlines() if not line.startswith("target_conversion")) + "\n"


def test_study_run_and_watch_replay_give_identical_series(tmp_path, capsys):
    source = SERIES / "run_25C"
    # kinetics run
    (tmp_path / "run.toml").write_text(_run_config_text(str(source)))
    assert main(["run", str(tmp_path / "run.toml"), "--out", str(tmp_path / "run"), "--no-report", "--json"]) == 0
    capsys.readouterr()
    # a study whose runs are that run config applied to folders
    (tmp_path / "study.toml").write_text(
        '[study]\nmodel = "first"\n'
        + "".join(f'[[study.runs]]\nlabel = "r{t}"\ntemperature_c = {t}\nconfig = "run.toml"\n'
                  f'folder = "{SERIES / f"run_{t}C"}"\ncolumn = "ester_concentration"\n'
                  f'sigma_column = "ester_concentration_sigma"\n' for t in (25, 35)))
    assert main(["run", str(tmp_path / "study.toml"), "--out", str(tmp_path / "study"), "--no-report",
                 "--json"]) == 0
    capsys.readouterr()
    # kinetics watch, the folder replayed file by file into the watched folder
    (tmp_path / "watch.toml").write_text(_run_config_text("incoming"))
    assert main(["watch", str(tmp_path / "watch.toml"), "--replay", str(source), "--interval", "0.01",
                 "--quiet-period", "0.1", "--poll", "--out", str(tmp_path / "watch"), "--json"]) == 0
    summary = json.loads(capsys.readouterr().out)
    assert summary["stop_reason"] == "replay finished"
    assert summary["counts"]["processed"] == demo.SPECTRA_PER_RUN

    tables = {name: pd.read_csv(tmp_path / name / "series.csv")
              for name in ("run", "watch", "study/runs/r25")}
    assert len(tables["run"]) == demo.SPECTRA_PER_RUN
    assert "global_fit" in tables["run"]["ester_OCH2_flags"].iloc[0]  # the series-wide fit ran
    pd.testing.assert_frame_equal(tables["watch"], tables["run"], check_exact=True)
    pd.testing.assert_frame_equal(tables["study/runs/r25"], tables["run"], check_exact=True)
    with Ledger(tmp_path / "run" / "ledger.sqlite") as run, \
            Ledger(tmp_path / "watch" / "ledger.sqlite") as watch, \
            Ledger(tmp_path / "study" / "runs" / "r25" / "ledger.sqlite") as study:
        assert run.comparable_rows() == watch.comparable_rows() == study.comparable_rows()
    fits = [json.loads((tmp_path / name / "fit.json").read_text())["fit"] for name in ("run", "watch")]
    assert fits[0] == fits[1]


def test_parallel_batch_equals_serial_batch(tmp_path, monkeypatch):
    config = load_run_config(ROOT / "configs" / "demo_run.toml")
    serial = batch_run(plan_from_config(config), tmp_path / "serial", parallel=False, outputs=False)
    monkeypatch.setattr(engine, "_workers", lambda n_files, parallel: 2 if parallel else 1)
    parallel = batch_run(plan_from_config(config), tmp_path / "parallel", parallel=True, outputs=False)
    pd.testing.assert_frame_equal(parallel.table, serial.table, check_exact=True)
    with Ledger(tmp_path / "serial" / "ledger.sqlite") as one, \
            Ledger(tmp_path / "parallel" / "ledger.sqlite") as two:
        assert one.comparable_rows() == two.comparable_rows()
        assert [row.path for row in one.files()] == [row.path for row in two.files()]  # ingest order


def test_each_file_read_once_pipeline_built_once_no_overwritten_fits(tmp_path, monkeypatch):
    from kinetics import signals
    from kinetics.processing import Pipeline
    from kinetics.spectra import reader

    config = load_run_config(ROOT / "configs" / "demo_run.toml")
    reads, builds, fits = [], [], []
    real_read, real_build, real_deconvolve = reader.read, Pipeline.from_config.__func__, signals.deconvolve
    monkeypatch.setattr(reader, "read", lambda path, *a, **k: reads.append(Path(path).name) or real_read(path, *a, **k))
    monkeypatch.setattr(Pipeline, "from_config", classmethod(lambda cls, *a, **k: builds.append(1) or real_build(cls, *a, **k)))
    monkeypatch.setattr(signals, "deconvolve", lambda *a, **k: fits.append(1) or real_deconvolve(*a, **k))
    summary = batch_run(plan_from_config(config), tmp_path / "out", parallel=False, outputs=False)
    assert summary.counts["processed"] == demo.SPECTRA_PER_RUN
    assert sorted(reads) == sorted(set(reads)) and len(reads) == demo.SPECTRA_PER_RUN  # the first one too
    assert builds == []  # built when the config was loaded
    # one series-wide fit per group, none per spectrum: for the run, then for each group a
    # processing variant of the final pass changes (it re-measures the spectra kept in memory:
    # no file read again; a group a variant leaves alone keeps the run's own fit)
    from kinetics import sensitivity, series

    variants = sensitivity.neighbour_variants(config)
    assert len(variants) >= 10
    run_keys = {series.global_fit_key(m, config) for m in config.fit_groups.values()}
    variant_keys = {series.global_fit_key(m, v.config) for v in variants for m in v.config.fit_groups.values()}
    assert len(variant_keys - run_keys) >= len(variants)  # each variant changes at least one group
    assert len(fits) == len(config.fit_groups) + len(variant_keys - run_keys)
    assert summary.outcome.processing["assessed"] and summary.outcome.processing["spectra_read_again"] == 0


def test_live_turns_hold_line_shapes_between_refreshes_and_the_final_pass_is_exact(tmp_path):
    import numpy as np

    from kinetics.run import RunState, ready_files

    config = load_run_config(ROOT / "configs" / "demo_run.toml")
    plan = plan_from_config(config)
    state = RunState(plan, None)  # ledger in memory, no output files
    ready = ready_files(plan.spec)
    state.take(ready[:24])
    state.source.table(refresh=True)  # a series-wide fit (from scratch: no previous one)
    state.take(ready[24:])
    held = state.source.table(refresh=False).copy()  # a live turn between two refreshes
    final = state.source.table(final=True)
    state.close()
    batch = batch_run(plan_from_config(config), tmp_path / "batch", outputs=False).table
    pd.testing.assert_frame_equal(final, batch, check_exact=True)
    assert held["ester_OCH2_flags"].str.contains("shapes_held").all()
    assert final["ester_OCH2_flags"].str.contains("global_fit").all()
    for name in ("ester_OCH2", "alcohol_CH2OH", "ester_acetyl", "acid_acetyl", "standard"):
        # areas at the held shapes agree with the full fit's within its 95 % band (1.96 sigma)
        gap = np.abs(held[f"{name}_integral"] - final[f"{name}_integral"])
        assert np.all(gap <= 1.96 * final[f"{name}_sigma"]), name


def test_restarted_run_measures_only_new_files_and_ends_as_a_fresh_run(tmp_path, monkeypatch):
    import os

    from kinetics.spectra import reader

    folder = tmp_path / "in"
    folder.mkdir()
    files = sorted((SERIES / "run_25C").glob("spectrum_*.jdx"))
    (tmp_path / "run.toml").write_text(_run_config_text("in"))
    for path in files[:20]:
        os.link(path, folder / path.name)
    batch_run(tmp_path / "run.toml", tmp_path / "out")
    for path in files[20:]:
        os.link(path, folder / path.name)
    reads = []
    real_read = reader.read
    monkeypatch.setattr(reader, "read", lambda path, *a, **k: reads.append(Path(path).name) or real_read(path, *a, **k))
    again = batch_run(tmp_path / "run.toml", tmp_path / "out",  # the ledger has the first 20
                      processing_uncertainty=False)
    # the 16 new files, plus the reference spectrum read again for alignment
    assert sorted(reads) == sorted([files[0].name] + [path.name for path in files[20:]])
    fresh = batch_run(tmp_path / "run.toml", tmp_path / "fresh", processing_uncertainty=False)
    pd.testing.assert_frame_equal(again.table, fresh.table, check_exact=True)
    # the processing-uncertainty pass re-measures spectra: those restored from the ledger
    # (not in memory) are read once more, and the document says so; the result is a fresh run's
    reads.clear()
    restarted = batch_run(tmp_path / "run.toml", tmp_path / "out")
    fresh = batch_run(tmp_path / "run.toml", tmp_path / "fresh2")
    assert restarted.outcome.processing["spectra_read_again"] == len(files)
    assert fresh.outcome.processing["spectra_read_again"] == 0
    assert restarted.outcome.k["ci95"] == pytest.approx(fresh.outcome.k["ci95"], rel=1e-9)


def _draft(tmp_path, **sections) -> Path:
    raw = ('[run]\nfolder = "."\n[[signals]]\nname = "A"\nwindow_ppm = [1.0, 1.2]\nnuclei = 3\n'
           '[[signals]]\nname = "S"\nwindow_ppm = [0.0, 0.2]\nnuclei = 9\n')
    for name, text in sections.items():
        raw += f"[{name}]\n{text}\n"
    path = tmp_path / "draft.toml"
    path.write_text(raw)
    return path


@pytest.mark.parametrize("command", ["run", "watch"])
def test_draft_without_fitted_species_or_standard_exits_2_naming_the_keys(tmp_path, capsys, command):
    path = _draft(tmp_path)
    assert main([command, str(path), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and "quantify.reactant" in err[0] and "standard = true" in err[0]
    assert not (tmp_path / "out" / "ledger.sqlite").exists()


def test_named_draft_is_accepted(tmp_path):
    assert load_run_config(_draft(tmp_path, quantify='mode = "relative"\nreactant = "A"')).unnamed == ()
    assert load_run_config(_draft(tmp_path, fit='species = "A"', quantify='mode = "initial"\n'
                                  'initial_species = "A"\ninitial_concentration_mol_per_l = 0.1')).unnamed == ()
    # only one of the two named: the other key is still asked for
    assert load_run_config(_draft(tmp_path, quantify='reactant = "A"')).unnamed[0].startswith("a signal's standard")
    assert load_run_config(_draft(tmp_path, quantify='mode = "relative"')).unnamed[0].startswith("quantify.reactant")


def _run_configs() -> list[str]:
    import tomllib

    def is_run(raw) -> bool:  # studies and campaigns are made of run configs, not run configs themselves
        return "study" not in raw and "campaign" not in raw

    return sorted(p.name for p in (ROOT / "configs").glob("*.toml") if is_run(tomllib.loads(p.read_text())))


@pytest.mark.parametrize("name", _run_configs())
def test_shipped_run_configs_name_what_they_fit(name):
    import tomllib

    raw = tomllib.loads((ROOT / "configs" / name).read_text())
    config = run_config_from_dict(raw, ROOT / "configs" / name)
    assert config.unnamed == ()
    assert config.pipeline is not None


def test_processing_variants_fitted_warm_equal_fits_from_scratch(tmp_path):
    # the final pass fits each processing variant from the run's optimum, value only; a fit
    # from scratch of the same variant table must give the same k (a least-squares optimum
    # does not depend on where the search starts, for a first-order law's single minimum)
    from kinetics import sensitivity as sens
    from kinetics.run import uncertainty
    from kinetics.run.engine import RunState, ready_files

    config = load_run_config(ROOT / "configs" / "demo_run.toml")
    summary = batch_run(plan_from_config(config), tmp_path / "out", parallel=False, outputs=False)
    warm = {(v["choice"], v["target"], v["setting"]): v["k"] for v in summary.outcome.processing["variants"]}
    plan = plan_from_config(config)
    state = RunState(plan, None)
    state.take(ready_files(plan.spec))
    spectra, measurements, reference, reread = uncertainty.run_spectra(
        config, state.source.measurements(), plan.measure.reference)
    assert reread == 0
    quantify = sens.SpectraQuantifier(spectra, measurements, reference)
    variants = sens.neighbour_variants(config)
    assert len(warm) == len(variants)
    for variant in variants:
        scratch = sens.estimate_from_fit(plan.refit.fit_table(quantify(variant.config))).value
        assert warm[(variant.choice, variant.target, variant.setting)] == pytest.approx(scratch, rel=1e-6)
    state.close()


def test_a_config_without_processing_choices_says_the_systematic_term_is_zero(tmp_path, monkeypatch):
    from kinetics import sensitivity

    monkeypatch.setattr(sensitivity, "neighbour_variants", lambda config: [])
    config = load_run_config(ROOT / "configs" / "demo_run.toml")
    summary = batch_run(plan_from_config(config), tmp_path / "out", parallel=False, outputs=False)
    doc = summary.outcome.processing
    assert doc["assessed"] and doc["systematic"]["stderr"] == 0 and "no processing choice applies" in doc["reason"]
    assert summary.outcome.k["ci95"] == summary.outcome.k["ci95_statistical"] == doc["ci95"]
