"""The Python API (``import kinetics``): the same numbers as the command, through the same engine.

Sources of truth: the command's own output on the same config (``kinetics run``), the demo
generator's k (``demo_series/run_25C/truth.json``, written by the simulator that made the
spectra), and simulated first-order series whose k and Ea this file sets.
"""

import json
import shutil
import subprocess
import sys
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from matplotlib.figure import Figure
from scipy import constants

import kinetics
from kinetics import cli
from kinetics.errors import ConfigError
from kinetics.rates.fit import fit_arrays

ROOT = Path(__file__).resolve().parents[1]
DEMO_RUN = ROOT / "configs" / "demo_run.toml"
STUDY_EXAMPLE = ROOT / "configs" / "study_example.toml"


@pytest.fixture(scope="module")
def demo_run():
    return kinetics.load_run(DEMO_RUN)


@pytest.fixture(scope="module")
def command_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("cli") / "run"
    done = subprocess.run([sys.executable, "-m", "kinetics.cli", "run", str(DEMO_RUN), "--out", str(out),
                           "--no-report", "--json"], capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout), out


def test_import_kinetics_stays_light():
    """``import kinetics`` loads no numerical stack; the entry points load on first use."""
    code = ("import sys, kinetics\n"
            "print([m for m in ('numpy', 'pandas', 'matplotlib', 'scipy') if m in sys.modules])\n"
            "print(callable(kinetics.load_run), callable(kinetics.load_study), 'pandas' in sys.modules)\n")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert done.stdout.splitlines() == ["[]", "True True False"]
    assert {"load_run", "load_study", "load_campaign", "Run", "Study"} <= set(dir(kinetics))
    with pytest.raises(AttributeError):
        kinetics.no_such_entry_point  # noqa: B018


def test_load_run_gives_what_kinetics_run_gives(demo_run, command_run):
    """Same engine, same config: k (value, intervals, systematic term) to the last digit, same table."""
    payload, out = command_run
    assert demo_run.k() == payload["runs"][0]["k_per_s"]
    assert demo_run.counts == payload["runs"][0]["counts"]
    series = pd.read_csv(out / "series.csv")
    assert list(demo_run.table["file"]) == list(series["file"])
    for column in ("time_s", "ester_concentration", "ester_concentration_sigma", "alcohol_concentration"):
        np.testing.assert_allclose(demo_run.table[column].to_numpy(float), series[column].to_numpy(float),
                                   rtol=1e-12, atol=0)
    fit_json = json.loads((out / "fit.json").read_text())
    assert fit_json["fit"]["params"]["k"] == demo_run.fit().param("k").to_dict()


def test_demo_run_recovers_the_generator_k(demo_run):
    """The demo's truth file holds the k its simulator used; the quoted 95 % interval holds it."""
    truth = json.loads((ROOT / "demo_series" / "run_25C" / "truth.json").read_text())["scenario"]["k_per_s"]
    low, high = demo_run.k()["ci95"]
    assert low <= truth <= high
    assert "demo_run" in repr(demo_run) and "36 spectra" in repr(demo_run)


def test_fit_default_is_the_engine_fit_and_laws_refit_the_same_data(demo_run):
    fit = demo_run.fit()
    assert fit is demo_run.outcome.fit
    again = demo_run.fit("first")  # the config's law fitted again from scratch: the same numbers
    assert again is not fit and again.values == fit.values
    second = demo_run.fit("second")
    assert second.model_name == "second" and second.n_points == fit.n_points
    assert second.aicc > fit.aicc  # first-order data: the second-order law fits worse
    # the run's quoted k keeps the fit's own interval beside the combined one
    assert demo_run.k()["ci95_statistical"] == list(fit.param("k").ci95)


def test_bootstrap_through_the_api_is_seeded(demo_run):
    one = demo_run.fit(bootstrap=40, seed=7, profile=False)
    two = demo_run.fit(bootstrap=40, seed=7, profile=False)
    assert one.param("k").ci_bootstrap == two.param("k").ci_bootstrap
    low, high = one.param("k").ci_bootstrap
    assert low < one.values["k"] < high


def test_compare_ranks_laws_on_the_engine_data(demo_run):
    ranking = demo_run.compare()
    assert set(ranking.table["model"]) == {"zero", "first", "second", "nth"}
    assert ranking.table["akaike_weight"].sum() == pytest.approx(1.0)
    # the demo reaction is first order: zero and second order have essentially no support
    weights = dict(zip(ranking.table["model"], ranking.table["akaike_weight"]))
    assert weights["zero"] < 1e-6 and weights["second"] < 1e-6
    assert "first" in ranking.verdict


def test_to_frame_and_summary(demo_run):
    fit = demo_run.fit()
    frame = fit.to_frame()
    assert list(frame.index) == [p.name for p in fit.params]
    assert {"value", "stderr", "ci95_low", "ci95_high", "interval", "unit", "fixed"} <= set(frame.columns)
    k = fit.param("k")
    assert frame.loc["k", "value"] == k.value and frame.loc["k", "stderr"] == k.stderr
    assert (frame.loc["k", "ci95_low"], frame.loc["k", "ci95_high"]) == tuple(k.ci95)
    assert frame.loc["k", "unit"] == "s^-1" and frame.loc["k", "interval"] == k.ci95_method
    assert fit.summary() == fit.report()


def test_to_frame_of_a_fixed_parameter_has_no_interval():
    # simulated first-order decay, truth set here: k = 2e-3 s^-1, c0 = 0.1 mol/L, noise 1 %
    rng = np.random.default_rng(3)
    t = np.linspace(0, 2000, 30)
    y = 0.1 * np.exp(-2e-3 * t) + rng.normal(0, 1e-3, t.size)
    fit = fit_arrays(t, y, "first", fixed={"c0": 0.1})
    frame = fit.to_frame()
    assert bool(frame.loc["c0", "fixed"]) and np.isnan(frame.loc["c0", "stderr"])
    assert np.isnan(frame.loc["c0", "ci95_low"])
    assert frame.loc["k", "ci95_low"] < 2e-3 < frame.loc["k", "ci95_high"]
    figure = fit.plot()
    assert isinstance(figure, Figure) and len(figure.axes) == 2  # courses and residuals


def test_run_plot_draws_every_species(demo_run):
    figure = demo_run.plot()
    assert isinstance(figure, Figure) and len(figure.axes) == 2
    labels = " ".join(figure.axes[0].get_legend_handles_labels()[1])
    for name in ("ester", "alcohol", "mass balance"):
        assert name in labels


def test_load_run_from_a_mapping_and_another_folder(tmp_path, demo_run):
    raw = tomllib.loads(DEMO_RUN.read_text())
    raw["run"]["folder"] = "somewhere/that/does/not/exist"
    copy = tmp_path / "spectra"
    shutil.copytree(ROOT / "demo_series" / "run_25C", copy)
    run = kinetics.load_run(raw, folder=copy, processing_uncertainty=False)
    assert run.fit().values == demo_run.fit().values
    assert run.k()["value"] == demo_run.k()["value"]
    assert "ci95_statistical" not in run.k()  # not assessed: the fit's own interval
    assert list(tmp_path.iterdir()) == [copy]  # kept in memory: nothing written


def _write_series(folder: Path) -> float:
    # Invented first-order runs for the example study (truth set here: Ea 75 kJ/mol,
    # k(298.15 K) = 1e-3 s^-1, noise 2 % of c0), as tests/test_study.py writes them.
    rng = np.random.default_rng(42)
    for celsius in (15, 25, 35, 45):
        t_kelvin = celsius + constants.zero_Celsius
        k = 1e-3 * np.exp(-(75e3 / constants.R) * (1 / t_kelvin - 1 / 298.15))
        time_s = np.linspace(0.0, 4.0 / k, 40)
        conc = 0.1 * np.exp(-k * time_s) + rng.normal(0.0, 0.002, time_s.size)
        pd.DataFrame({"time_s": time_s, "ester": conc, "sigma_ester": 0.002}).to_csv(
            folder / f"series_{celsius}c.csv", index=False)
    return 75.0


def test_load_study_gives_what_kinetics_run_gives(tmp_path, capsys):
    shutil.copy(STUDY_EXAMPLE, tmp_path / "study.toml")
    truth_ea = _write_series(tmp_path)
    assert cli.main(["run", str(tmp_path / "study.toml"), "--out", str(tmp_path / "out"), "--no-report",
                     "--json"]) == 0
    command = json.loads(capsys.readouterr().out)["study"]
    study = kinetics.load_study(tmp_path / "study.toml")
    assert study.arrhenius().to_dict() == command["two_step"]
    assert study.global_fit().to_dict() == command["global_fit"]
    low, high = study.arrhenius().to_dict()["ea_kj_per_mol"]["ci95"]
    assert low <= truth_ea <= high
    assert list(study.table["label"]) == ["15 C", "25 C", "35 C", "45 C"]
    assert study.runs == ()  # the runs are series tables, not run configs
    for kind in ("arrhenius", "eyring", "global"):
        assert isinstance(study.plot(kind), Figure)
    with pytest.raises(ConfigError):
        study.plot("nonsense")
    assert "invented ester hydrolysis" in study.summary()
    workspace = Path(study._workspace.name)
    assert (workspace / "study.json").exists()
    del study
    import gc

    gc.collect()
    assert not workspace.exists()  # the temporary output folder goes with the object


def test_spectra_are_the_runs_processed_spectra(demo_run):
    spectra = demo_run.spectra
    assert len(spectra) == len(demo_run.table)
    # the config references the standard's singlet to 6.20 ppm ([processing] reference) and
    # aligns every spectrum on it: its top lies there in each spectrum, within 0.01 ppm
    for spectrum in spectra[::7]:
        ppm, real = np.asarray(spectrum.ppm), np.asarray(spectrum.real)
        window = (ppm > 6.0) & (ppm < 6.4)
        assert abs(ppm[window][np.argmax(real[window])] - 6.20) < 0.01


def test_load_campaign_in_this_process_writes_nothing(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    outcome = kinetics.load_campaign(ROOT / "configs" / "demo_campaign.toml", scheduler="none")
    assert outcome.success and outcome.fit.converged
    assert outcome.files == () and list(tmp_path.iterdir()) == []


def test_an_arrayed_run_through_the_api():
    # the 19F demo is one arrayed JCAMP-DX file (demo_series/f19_arrayed, generator truth in
    # its truth.json): the API reads its traces from that file, not as files of a folder,
    # and the k interval holds the generator's k
    import json

    root = Path(__file__).resolve().parent.parent
    truth = json.loads((root / "demo_series" / "f19_arrayed" / "truth.json").read_text())
    run = kinetics.load_run(root / "configs" / "demo_19f.toml", processing_uncertainty=False)
    k = run.k()
    assert k["ci95"][0] < truth["scenario"]["k_per_s"] < k["ci95"][1]
    spectra = run.spectra
    assert len(spectra) == len(run.table) == len(truth["files"])
    # every trace is referenced to the standard's tabulated shift (PhCF3, -63.72 ppm)
    for spectrum in spectra[::9]:
        ppm, real = np.asarray(spectrum.ppm), np.asarray(spectrum.real)
        window = (ppm > -64.2) & (ppm < -63.2)
        assert spectrum.nucleus == "19F"
        assert abs(ppm[window][np.argmax(real[window])] - truth["scenario"]["standard_ppm"]) < 0.01
