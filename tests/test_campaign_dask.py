"""Campaign runs, bootstrap resamples and archive re-processing as Dask tasks
(kinetics.campaign.runner, kinetics.campaign.archive): the same results in this process and
on local clusters, and a worker killed mid-campaign (or mid-archive) loses and doubles nothing.

The campaigns: the demo campaign (series tables, kinetics.campaign.demo sets the truth) and
two runs of the demo spectra (demo_series/run_25C, run_35C) through the run engine, each
with its own SQLite ledger.  The archive: demo_series/run_25C and run_35C (linked into a
temporary folder) and one run folder without spectra.
"""

from __future__ import annotations

import dataclasses
import json
import os
import sqlite3
import sys
from pathlib import Path

import cloudpickle
import numpy as np
import pytest

distributed = pytest.importorskip("distributed")

from kinetics.campaign.archive import STATUS_FAILED, STATUS_OK, reprocess_archive, reprocess_run  # noqa: E402
from kinetics.campaign.config import load_campaign_config  # noqa: E402
from kinetics.campaign.runner import bootstrap_global_fit, load_run, run_campaign, task_client  # noqa: E402

ROOT = Path(__file__).resolve().parents[1]
DEMO_CONFIG = ROOT / "configs" / "demo_campaign.toml"
N_SPECTRA = 36  # spectrum_*.jdx files per demo run folder

# the worker processes cannot import this test module: send its functions by value
cloudpickle.register_pickle_by_value(sys.modules[__name__])


def _engine_campaign(tmp_path) -> Path:
    text = f"""
[campaign]
name = "ester hydrolysis from spectra"
reactant = "ester"
orders = {{ ester = 1 }}
stoichiometry = {{ ester = -1, alcohol = 1 }}
scheduler = "none"

[[runs]]
label = "25 C"
config = "{ROOT / 'configs' / 'demo_run.toml'}"
folder = "{ROOT / 'demo_series' / 'run_25C'}"
temperature_c = 25
initial = {{ ester = 0.40 }}

[[runs]]
label = "35 C"
config = "{ROOT / 'configs' / 'demo_run.toml'}"
folder = "{ROOT / 'demo_series' / 'run_35C'}"
temperature_c = 35
initial = {{ ester = 0.40 }}
"""
    path = tmp_path / "engine_campaign.toml"
    path.write_text(text, encoding="utf-8")
    return path


def _results(outcome) -> dict:
    """What must not depend on where the tasks ran."""
    return {
        "runs": {label: (got.time_s.tolist(), {s: v.tolist() for s, v in got.observed.items()},
                         {s: v.tolist() for s, v in got.sigma.items()}, got.counts)
                 for label, got in outcome.loaded.items()},
        "fit": outcome.fit.to_dict(),
        "fit_all": None if outcome.fit_all is None else outcome.fit_all.to_dict(),
        "same_excess": [r.to_dict() for r in outcome.same_excess],
        "vtna": None if outcome.vtna is None else outcome.vtna.to_dict(),
        "failures": outcome.failures,
        "bootstrap": None if outcome.bootstrap is None else (outcome.bootstrap.intervals, outcome.bootstrap.n_failed),
    }


@pytest.fixture(scope="module")
def cluster():
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                                  dashboard_address=None) as local:
        yield local


def _counted_load(run, runs_dir, species):
    """The real task, noting each call (one line per call in calls-<label>.txt)."""
    with open(Path(runs_dir).parent / f"calls-{run.label.replace(' ', '_')}.txt", "a") as handle:
        handle.write(f"{os.getpid()}\n")
    return load_run(run, runs_dir, species)


def _load_then_die_once(run, runs_dir, species):
    """The real task; for run '25 C' the first time, after its ledger is written, the worker
    process dies (os._exit, as a kill -9 would) before it can return the result."""
    got = _counted_load(run, runs_dir, species)
    marker = Path(runs_dir).parent / "killed-once"
    if run.label == "25 C" and not marker.exists():
        marker.write_text("killed\n")
        os._exit(1)
    return got


def test_in_process_and_local_cluster_give_identical_results(cluster, tmp_path):
    # with 16 bootstrap resamples of the global fit (2 tasks of 8) on the same cluster
    config = dataclasses.replace(load_campaign_config(DEMO_CONFIG), bootstrap=16, seed=5)
    here = run_campaign(config, tmp_path / "here", scheduler="none", outputs=False)
    there = run_campaign(config, tmp_path / "there", scheduler=cluster.scheduler_address, outputs=False)
    assert "Dask scheduler" in there.info["where"] and here.info["where"] == "in this process"
    assert _results(here) == _results(there)
    assert there.excluded == ("R7 deactivating",)
    boot = there.bootstrap
    assert boot.n_resamples == 16 and boot.n_failed == 0 and boot.where == there.info["where"]
    assert there.fit.param("order_velamine").ci_bootstrap == boot.intervals["order_velamine"]
    assert there.fit.param("order_velamine").ci95_method == "profile"  # the bootstrap is reported beside it
    # the embedded default, 2 worker processes: the same intervals (one seed per resample)
    fit_runs = [run for run in here.runs if run.label not in here.excluded]
    with task_client("local", 2) as (client, where):
        two = bootstrap_global_fit(config, here.fit, fit_runs, here.loaded, client, where)
    assert where.startswith("local Dask cluster of 2") and two.intervals == here.bootstrap.intervals
    # and grouping resamples into other tasks changes nothing either
    import kinetics.campaign.runner as runner

    chunk = runner.BOOTSTRAP_CHUNK
    try:
        runner.BOOTSTRAP_CHUNK = 3
        regrouped = bootstrap_global_fit(config, here.fit, fit_runs, here.loaded)
    finally:
        runner.BOOTSTRAP_CHUNK = chunk
    assert regrouped.intervals == here.bootstrap.intervals


def test_a_worker_killed_mid_campaign_loses_and_doubles_nothing(cluster, tmp_path):
    config = load_campaign_config(_engine_campaign(tmp_path))
    reference = run_campaign(config, tmp_path / "reference", scheduler="none", outputs=False)
    assert reference.fit is not None and reference.fit.converged and not reference.failures
    out = tmp_path / "killed"
    outcome = run_campaign(config, out, scheduler=cluster.scheduler_address, loader=_load_then_die_once,
                           outputs=False)
    assert (out / "killed-once").is_file()
    assert len((out / "calls-25_C.txt").read_text().split()) >= 2  # the lost task was redone
    assert not outcome.failures
    assert _results(outcome) == _results(reference)
    for label in ("25_c", "35_c"):
        with sqlite3.connect(out / "runs" / label / "ledger.sqlite") as db:
            rows = db.execute("SELECT COUNT(*), COUNT(DISTINCT sha256) FROM files").fetchone()
            measured = db.execute("SELECT COUNT(DISTINCT file_id) FROM measurements").fetchone()[0]
        assert rows == (N_SPECTRA, N_SPECTRA) and measured == N_SPECTRA, (label, rows, measured)
        assert outcome.loaded[label.replace("_c", " C")].counts["processed"] == N_SPECTRA
    assert np.ptp(outcome.loaded["25 C"].time_s) > 0


def test_a_run_that_fails_on_the_cluster_is_named(cluster, tmp_path):
    config = load_campaign_config(_engine_campaign(tmp_path))
    broken = config.runs[1].__class__(**{**config.runs[1].__dict__, "folder": tmp_path / "no such folder"})
    config = config.__class__(**{**config.__dict__, "runs": (config.runs[0], broken)})
    outcome = run_campaign(config, tmp_path / "out", scheduler=cluster.scheduler_address, outputs=False)
    assert [f.label for f in outcome.failures] == ["35 C"] and "no such folder" in outcome.failures[0].reason
    assert list(outcome.loaded) == ["25 C"]


# ---------------------------------------------------------------- archive re-processing
ARCHIVE_CONFIG = ROOT / "configs" / "demo_run.toml"  # its own folder is run_25C


@pytest.fixture(scope="module")
def archive_here(tmp_path_factory):
    """The archive and its re-processing in this process (the reference of the cluster tests)."""
    tmp_path = tmp_path_factory.mktemp("archive")
    archive = _archive(tmp_path)
    return archive, reprocess_archive(archive, ARCHIVE_CONFIG, tmp_path / "here", scheduler="none")


def _archive(tmp_path) -> Path:
    archive = tmp_path / "archive"
    archive.mkdir()
    for name in ("run_25C", "run_35C"):
        (archive / name).symlink_to(ROOT / "demo_series" / name, target_is_directory=True)
    (archive / "run_empty").mkdir()  # a run folder without spectra: reported, the others go on
    (archive / "notes").mkdir()  # not a run folder (pattern run_*)
    return archive


def _archive_results(outcome) -> dict:
    return {r.label: (r.status, r.k, r.counts, r.n_spectra) for r in outcome.results}


def _reprocess_then_die_once(run, runs_dir, species):
    """The real archive task; for run_25C the first time, after its ledger is written, the
    worker process dies (os._exit, as a kill -9 would) before it can return the result."""
    with open(Path(runs_dir).parent / f"calls-{run.label}.txt", "a") as handle:
        handle.write(f"{os.getpid()}\n")
    got = reprocess_run(run, runs_dir, species)
    marker = Path(runs_dir).parent / "killed-once"
    if run.label == "run_25C" and not marker.exists():
        marker.write_text("killed\n")
        os._exit(1)
    return got


def test_archive_on_a_cluster_matches_this_process_and_kinetics_run(cluster, archive_here, tmp_path):
    from kinetics.run.job import run_single

    archive, here = archive_here
    config = ARCHIVE_CONFIG
    assert [r.label for r in here.results] == ["run_25C", "run_35C", "run_empty"]
    assert [r.status for r in here.results] == [STATUS_OK, STATUS_OK, STATUS_FAILED] and not here.success
    assert "run_empty" in here.results[2].folder and "matches" in here.results[2].message
    single = run_single(config, tmp_path / "single", report=False).runs[0]
    assert here.results[0].k == single.k()  # the same engine path and interval as `kinetics run`
    there = reprocess_archive(archive, config, tmp_path / "there", scheduler=cluster.scheduler_address)
    assert _archive_results(there) == _archive_results(here)
    assert "Dask scheduler" in there.info["where"]
    table = (tmp_path / "there" / "archive.csv").read_text().splitlines()
    assert table[0].startswith("run,k,k_ci95_low,k_ci95_high,k_unit,status") and len(table) == 4


def test_a_worker_killed_mid_archive_loses_and_doubles_nothing(cluster, archive_here, tmp_path):
    archive, reference = archive_here
    out = tmp_path / "killed"
    outcome = reprocess_archive(archive, ARCHIVE_CONFIG, out, scheduler=cluster.scheduler_address,
                                loader=_reprocess_then_die_once, outputs=False)
    assert (out / "killed-once").is_file()
    assert len((out / "calls-run_25C.txt").read_text().split()) >= 2  # the lost task was redone
    assert _archive_results(outcome) == _archive_results(reference)  # run_empty fails in both
    for label in ("run_25c", "run_35c"):
        with sqlite3.connect(out / "runs" / label / "ledger.sqlite") as db:
            rows = db.execute("SELECT COUNT(*), COUNT(DISTINCT sha256) FROM files").fetchone()
            measured = db.execute("SELECT COUNT(DISTINCT file_id) FROM measurements").fetchone()[0]
        assert rows == (N_SPECTRA, N_SPECTRA) and measured == N_SPECTRA, (label, rows, measured)


def test_reprocess_command(tmp_path, capsys):
    from kinetics.cli import main

    archive = tmp_path / "archive"
    archive.mkdir()
    (archive / "run_35C").symlink_to(ROOT / "demo_series" / "run_35C", target_is_directory=True)
    assert main(["reprocess", str(archive), "--config", str(ARCHIVE_CONFIG), "--pattern", "batch_*"]) == 2
    assert "--pattern" in capsys.readouterr().err  # the error names what to change
    code = main(["reprocess", str(archive), "--config", str(ARCHIVE_CONFIG), "--scheduler", "none",
                 "--out", str(tmp_path / "out"), "--json"])
    document = json.loads(capsys.readouterr().out)  # exactly one JSON object on stdout
    assert code == 0 and document["kind"] == "archive" and document["success"]
    (run,) = document["runs"]
    assert run["run"] == "run_35C" and run["status"] == STATUS_OK and run["k"]["unit"] == "s^-1"
    # the generator's k of the demo run at 35 degC (its truth.json) lies inside the quoted interval
    truth = json.loads((ROOT / "demo_series" / "run_35C" / "truth.json").read_text())["scenario"]["k_per_s"]
    lo, hi = run["k"]["ci95"]
    assert lo < truth < hi and (tmp_path / "out" / "runs" / "run_35c" / "ledger.sqlite").is_file()
