"""Campaign runs as Dask tasks (kinetics.campaign.runner): the same results in this process
and on a local cluster, and a worker killed mid-campaign loses and doubles nothing.

The campaigns: the demo campaign (series tables, kinetics.campaign.demo sets the truth) and
two runs of the demo spectra (demo_series/run_25C, run_35C) through the run engine, each
with its own SQLite ledger.
"""

from __future__ import annotations

import os
import sqlite3
import sys
from pathlib import Path

import cloudpickle
import numpy as np
import pytest

distributed = pytest.importorskip("distributed")

from kinetics.campaign.config import load_campaign_config  # noqa: E402
from kinetics.campaign.runner import load_run, run_campaign  # noqa: E402

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
    config = load_campaign_config(DEMO_CONFIG)
    here = run_campaign(config, tmp_path / "here", scheduler="none", outputs=False)
    there = run_campaign(config, tmp_path / "there", scheduler=cluster.scheduler_address, outputs=False)
    assert "Dask scheduler" in there.info["where"] and here.info["where"] == "in this process"
    assert _results(here) == _results(there)
    assert there.excluded == ("R7 deactivating",)


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
