"""A simulated folder -> the tidy table; live (file by file) = batch; time sources; CLI."""

from __future__ import annotations

import json
import os
import shutil
from datetime import datetime, timezone
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from kinetics import simulate as sim
from kinetics.cli import main
from kinetics.config import run_config_from_dict
from kinetics.errors import ConfigError
from kinetics.run import run_config_to_table, run_series
from kinetics.series import (list_files, make_reference, measure_file,
                             table_from_measurements, write_table)
from kinetics.spectra.spectrum import sha256_of_file

DATA = Path(__file__).parent / "data"
START = datetime(2026, 1, 1, 9, 0, 0, tzinfo=timezone.utc)
TIMES = np.array([20.0, 320.0, 620.0, 920.0, 1220.0, 1520.0])
DRIFT = np.array([0.0, 0.004, 0.008, 0.012, 0.016, 0.020])


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    """Invented A -> B at 60 MHz: A singlet 2.0 ppm (3H), B singlet 4.0 ppm (2H), standard
    0.0 ppm (9H, 0.1 mol/L); field drift up to 0.02 ppm; truth set here."""
    path = tmp_path_factory.mktemp("series")
    c_a = 0.4 * np.exp(-TIMES / 800.0)
    systems = [sim.SpeciesSignals("A", (sim.Multiplet(2.0, 3, width_hz=1.0),)),
               sim.SpeciesSignals("B", (sim.Multiplet(4.0, 2, width_hz=1.0),)),
               sim.SpeciesSignals("S", (sim.Multiplet(0.0, 9, width_hz=1.0),))]
    acq = sim.Acquisition(observe_mhz=60.0, n_points=16384, spectral_width_ppm=12.0, carrier_ppm=5.0)
    sim.write_series(path, TIMES, {"A": c_a, "B": 0.4 - c_a, "S": np.full(TIMES.size, 0.1)}, systems,
                     np.random.default_rng(42), acquisition=acq, snr=300.0, drift_ppm=DRIFT, start_utc=START)
    return path, c_a


def _raw(folder, **time):
    return {
        "run": {"folder": str(folder), "pattern": "*.jdx"},
        "time": {"source": "header", "reaction_start": "2026-01-01T09:00:00Z", **time},
        "processing": {"phase": "none"},
        "integration": {"noise_region_ppm": [[8.0, 10.5]]},
        "signals": [
            {"name": "A_s", "species": "A", "window_ppm": [1.8, 2.2], "nuclei": 3, "tolerance_ppm": 0.05},
            {"name": "B_s", "species": "B", "window_ppm": [3.8, 4.2], "nuclei": 2, "tolerance_ppm": 0.05},
            {"name": "std", "species": "S", "window_ppm": [-0.2, 0.2], "nuclei": 9, "standard": True,
             "concentration_mol_per_l": 0.1, "tolerance_ppm": 0.05},
        ],
        "quantify": {"reactant": "A", "product": "B"},
    }


def test_folder_becomes_tidy_table(folder, tmp_path):
    path, c_a = folder
    df = run_series(run_config_from_dict(_raw(path))).table
    for column in ("index", "file", "sha256", "time_s", "time_source", "A_s_integral", "A_s_sigma",
                   "A_s_shift_ppm", "A_s_concentration", "A_s_concentration_sigma", "A_s_flags",
                   "A_concentration", "conversion", "yield", "mass_balance_flag"):
        assert column in df.columns
    assert df["index"].tolist() == list(range(6))
    assert df["sha256"][0] == sha256_of_file(path / df["file"][0])
    assert np.allclose(df["time_s"], TIMES)  # header start + 30 s / 2 (write_series' convention)
    assert set(df["time_source"]) == {"header"}
    # drift tracking: the window follows the field drift and says how far
    assert np.allclose(df["A_s_shift_ppm"], DRIFT, atol=0.002)
    # concentrations with sigma: truth within 3 sigma + the shared truncation of the windows
    err = df["A_s_concentration"] - c_a
    assert np.all(np.abs(err) < 3 * df["A_s_concentration_sigma"] + 0.01 * c_a)
    assert np.all(df["A_s_concentration_sigma"] > 0)
    assert np.all(np.abs(df["conversion"] - (1 - c_a / c_a[0])) < 3 * df["conversion_sigma"] + 0.005)
    assert not df["mass_balance_flag"].any()
    written = write_table(df, tmp_path / "series.csv")
    back = pd.read_csv(written[0])
    assert np.allclose(back["A_s_concentration"], df["A_s_concentration"])


def test_live_file_by_file_equals_batch(folder):
    path, _ = folder
    config = run_config_from_dict(_raw(path))
    batch = run_series(config).table
    files = list_files(config)
    reference = make_reference(files[0], config)
    measured = []
    for file in files:  # as a watcher would: one file at a time, table after each
        measured.append(measure_file(file, config, reference))
        live = table_from_measurements(measured, config)
    pd.testing.assert_frame_equal(live, batch)
    assert len(table_from_measurements(measured[:2], config)) == 2


def test_signal_beyond_tolerance_is_flagged(folder):
    path, _ = folder
    raw = _raw(path)
    raw["signals"][0]["tolerance_ppm"] = 0.005
    df = run_series(run_config_from_dict(raw)).table
    assert "left_window" in df["A_s_flags"].iloc[-1]
    assert "left_window" not in df["A_s_flags"].iloc[0]
    assert np.isfinite(df["A_s_integral"]).all()  # flagged, not lost


def test_filename_and_mtime_time_sources(folder, tmp_path):
    path, _ = folder
    renamed = tmp_path / "renamed"
    renamed.mkdir()
    for i, file in enumerate(sorted(path.glob("*.jdx"))):
        target = renamed / f"run_{TIMES[i] - 15.0:06.1f}s.jdx"
        shutil.copy(file, target)
        end = START.timestamp() + TIMES[i] + 15.0  # written when the 30 s scan ended
        os.utime(target, (end, end))
    df = run_series(run_config_from_dict(_raw(renamed, source="filename",
                                              filename_pattern=r"run_(?P<elapsed_s>[0-9.]+)s"))).table
    assert np.allclose(df["time_s"], TIMES, atol=1e-6) and set(df["time_source"]) == {"filename"}
    df = run_series(run_config_from_dict(_raw(renamed, source="mtime"))).table
    assert np.allclose(df["time_s"], TIMES, atol=1e-3) and set(df["time_source"]) == {"mtime"}
    raw = _raw(renamed, source="mtime")
    del raw["time"]["reaction_start"]
    raw["time"]["first_spectrum_offset_s"] = 20.0
    df = run_series(run_config_from_dict(raw)).table
    assert np.allclose(df["time_s"], TIMES, atol=1e-3)


def test_window_outside_axis_and_saturation_warning(folder, tmp_path):
    path, _ = folder
    raw = _raw(path)
    raw["signals"][1]["window_ppm"] = [11.5, 12.5]  # the axis ends at 11 ppm
    with pytest.raises(ConfigError) as info:
        run_series(run_config_from_dict(raw))
    assert info.value.key == "signals[1].window_ppm"
    raw = _raw(path)
    raw["quantify"].update(repetition_time_s=5.0, t1_s={"A_s": 2.0})
    config_path = tmp_path / "run.toml"
    config_path.write_text(_toml(raw))
    df = run_config_to_table(config_path)
    assert any("below 5 T1" in text for text in df.attrs["warnings"])


def _toml(raw) -> str:
    lines = []
    for section in ("run", "time", "processing", "integration", "quantify"):
        lines.append(f"[{section}]")
        for key, value in raw[section].items():
            lines.append(f"{key} = {_value(value)}")
    for signal in raw["signals"]:
        lines.append("[[signals]]")
        lines.extend(f"{key} = {_value(value)}" for key, value in signal.items())
    return "\n".join(lines) + "\n"


def _value(value) -> str:
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {_value(v)}" for k, v in value.items()) + " }"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)
    return json.dumps(value)


@pytest.mark.parametrize("name", ["ethyl-crotonate.1h.dx", "butyl-acrylate.1h.dx", "ethyl-crotonate.1h.fid.dx"])
def test_cli_integrate_json_on_every_real_file(name, capsys):
    # Real spectra (cheminfo nmr-dataset1); the FID is processed with the default pipeline.
    code = main(["integrate", str(DATA / name), "--region", "OCH2=4.0:4.2:2", "--region", "CH3=1.13:1.27:3",
                 "--json"])
    out = capsys.readouterr().out
    assert code == 0
    info = json.loads(out)
    regions = info["regions"]
    assert [r["name"] for r in regions] == ["OCH2", "CH3"]
    for region in regions:
        assert set(region) >= {"name", "ppm", "integral", "per_nucleus", "sigma"}
        assert region["sigma"] > 0 and region["integral"] > 0
    assert regions[0]["per_nucleus"] == pytest.approx(regions[0]["integral"] / 2)
    assert regions[0]["ppm"] == [4.0, 4.2]


def test_cli_integrate_bad_region(capsys):
    code = main(["integrate", str(DATA / "butyl-acrylate.1h.dx"), "--region", "x=1.0:1.0"])
    assert code == 2
    assert "--region" in capsys.readouterr().err
