"""`kinetics run` end to end on the example configs, over the bundled demo series.

The demo data are invented (kinetics.simulate); these are self-consistency checks: each
recovered rate constant and activation energy must lie within its own 95 % interval of
the value the demo's generator used (kinetics.demo).
"""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from kinetics import demo
from kinetics.cli import main

ROOT = Path(__file__).resolve().parent.parent
CONFIGS = ROOT / "configs"


def _run_json(capsys, *argv) -> tuple[int, dict]:
    code = main(["run", *argv, "--json"])
    out = capsys.readouterr().out
    return code, json.loads(out)  # exactly one JSON object on stdout


def test_single_run_config_batch_report_and_truth(tmp_path, capsys):
    code, job = _run_json(capsys, str(CONFIGS / "demo_run.toml"), "--out", str(tmp_path / "run"))
    assert code == 0 and job["kind"] == "run"
    (run,) = job["runs"]
    assert run["n_spectra"] == demo.SPECTRA_PER_RUN and run["converged"]
    low, high = run["k_per_s"]["ci95"]
    assert low <= demo.k_true(25.0) <= high  # self-consistency with the generator
    assert run["k_per_s"]["unit"] == "s^-1"
    out = tmp_path / "run"
    for name in ("ledger.sqlite", "series.csv", "fit.json", "index.html"):
        assert (out / name).exists(), name
    html = Path(job["report_html"]).read_text(encoding="utf-8")
    assert "Rate laws compared" in html and "Safety first" in html
    assert Path(job["report_pdf"]).read_bytes().startswith(b"%PDF")


def test_mechanism_config_fits_two_species(tmp_path, capsys):
    code, job = _run_json(capsys, str(CONFIGS / "demo_mechanism.toml"), "--out", str(tmp_path / "m"), "--no-report")
    assert code == 0
    (run,) = job["runs"]
    fit = json.loads((tmp_path / "m" / "fit.json").read_text())
    assert set(fit["fit"]["params"]) >= {"k_hyd", "c0_ester", "c0_alcohol"}
    assert fit["fit"]["columns"] == ["ester", "alcohol"]
    low, high = fit["fit"]["params"]["k_hyd"]["ci95"]
    assert low <= demo.k_true(45.0) <= high


def test_study_config_over_raw_spectra(tmp_path, capsys):
    code, job = _run_json(capsys, str(CONFIGS / "demo_study.toml"), "--out", str(tmp_path / "s"), "--no-report")
    assert code == 0 and job["kind"] == "study"
    study = job["study"]
    assert len(study["run_fits"]) == 4 and all(f["success"] for f in study["run_fits"])
    for entry in (study["two_step"]["ea_kj_per_mol"], study["global_fit"]["ea_kj_per_mol"]):
        assert entry["ci95"][0] <= demo.EA_KJ_PER_MOL <= entry["ci95"][1], entry
    assert (tmp_path / "s" / "arrhenius.png").exists()


@pytest.mark.parametrize("content, needle", [
    (None, "not found"),
    ("[run\nfolder = 1", "TOML"),
    ('[run]\nfolder = "nowhere"\n[[signals]]\nname = "a"\nwindow_ppm = [1, 2]\nnuclei = 1\n', "nowhere"),
    ('[run]\nfolder = "."\n[fitt]\nmodel = "first"\n[[signals]]\nname = "a"\nwindow_ppm = [1, 2]\nnuclei = 1\n',
     "fitt"),
])
def test_bad_configs_give_one_clear_line(tmp_path, content, needle):
    path = tmp_path / "run.toml"
    if content is not None:
        path.write_text(content)
    done = subprocess.run([sys.executable, "-m", "kinetics.cli", "run", str(path), "--out", str(tmp_path / "o")],
                          capture_output=True, text=True, timeout=120)
    assert done.returncode == 2
    assert needle in done.stderr and "Traceback" not in done.stderr
    assert len(done.stderr.strip().splitlines()) == 1
