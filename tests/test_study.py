"""Study configs (TOML -> per-run fits, Arrhenius/Eyring, global fit, files) and the CLI."""

import json
import shutil
import sys
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy import constants

from kinetics import cli, study
from kinetics.errors import ConfigError, InputFileError

R = constants.R
EXAMPLE = Path(__file__).resolve().parents[1] / "configs" / "study_example.toml"
TRUE_EA_KJ = 75.0


def _write_series(folder: Path, rng) -> None:
    # Invented first-order runs for the example config (truth set here: Ea 75 kJ/mol,
    # k(298.15 K) = 1e-3 s^-1, noise 2 % of c0).
    for celsius in (15, 25, 35, 45):
        t_kelvin = celsius + constants.zero_Celsius
        k = 1e-3 * np.exp(-(TRUE_EA_KJ * 1e3 / R) * (1 / t_kelvin - 1 / 298.15))
        time_s = np.linspace(0.0, 4.0 / k, 40)
        conc = 0.1 * np.exp(-k * time_s) + rng.normal(0.0, 0.002, time_s.size)
        pd.DataFrame({"time_s": time_s, "ester": conc, "sigma_ester": 0.002}).to_csv(
            folder / f"series_{celsius}c.csv", index=False)


@pytest.fixture
def example(tmp_path):
    shutil.copy(EXAMPLE, tmp_path / "study.toml")
    _write_series(tmp_path, np.random.default_rng(42))
    return tmp_path / "study.toml"


def _edit(config_path: Path, text_old: str, text_new: str) -> Path:
    text = config_path.read_text()
    assert text_old in text
    config_path.write_text(text.replace(text_old, text_new, 1))
    return config_path


def test_example_study_runs_and_writes_everything(example, tmp_path):
    out = tmp_path / "out"
    result = study.run_study(example, out)
    assert result.success, result.message
    names = {p.name for p in result.files}
    assert names == {"runs.csv", "arrhenius.csv", "comparison.csv", "study.json",
                     "arrhenius.png", "eyring.png", "global_fit.png",
                     "arrhenius.svg", "eyring.svg", "global_fit.svg"}
    for path in result.files:
        assert path.exists() and path.stat().st_size > 0
    data = json.loads((out / "study.json").read_text())
    ea_two, ea_global = data["two_step"]["ea_kj_per_mol"], data["global_fit"]["ea_kj_per_mol"]
    for ea in (ea_two, ea_global):
        assert ea["ci95"][0] < TRUE_EA_KJ < ea["ci95"][1]
    assert len(data["run_fits"]) == 4 and all(f["success"] for f in data["run_fits"])
    # Per-run fits come from the rates package (its FitResult is kept on each RunFit).
    assert all(type(f.fit).__name__ == "FitResult" for f in result.run_fits)
    table = pd.read_csv(out / "arrhenius.csv")
    assert table["temperature_kelvin"].tolist() == pytest.approx([288.15, 298.15, 308.15, 318.15])
    assert "two-step vs global" in result.report()


def test_is_study_config(example):
    with open(example, "rb") as handle:
        assert study.is_study_config(tomllib.load(handle))
    assert not study.is_study_config({"series": {"folder": "x"}})
    assert not study.is_study_config({"study": "not a table"})


@pytest.mark.parametrize("old, new, error, match", [
    ('model = "first"  ', 'model = "third"  ', ConfigError, "study.model"),
    ("temperature_c = 15.0 ", "temperature_c = 15.0\ntemperature_kelvin = 288.15 ", ConfigError, "exactly one"),
    ("temperature_c = 15.0 ", "temperature_c = -300.0 ", ConfigError, "absolute zero"),
    ('series_15c.csv', 'missing.csv', InputFileError, "not found"),
    ('column = "ester"    ', 'column = "esters"    ', InputFileError, "no column 'esters'"),
    ('time_unit = "s"', 'time_unit = "fortnight"', ConfigError, "time_unit"),
    ('label = "15 C"', 'label = "15 C"\ncolour = "red"', ConfigError, "unknown key"),
    ('interval_basis = "scatter"', 'interval_basis = "median"', ConfigError, "interval_basis"),
])
def test_bad_study_configs_give_clear_errors(example, tmp_path, old, new, error, match):
    _edit(example, old, new)
    with pytest.raises(error, match=match):
        study.run_study(example, tmp_path / "out")


def test_bad_cell_in_series_table_names_the_line(example, tmp_path):
    table = tmp_path / "series_25c.csv"
    lines = table.read_text().splitlines()
    lines[3] = lines[3].split(",")[0] + ",oops,0.002"
    table.write_text("\n".join(lines) + "\n")
    with pytest.raises(InputFileError, match="line 4"):
        study.run_study(example, tmp_path / "out")


def test_celsius_that_looks_like_kelvin_warns(example, tmp_path):
    _edit(example, "temperature_c = 15.0 ", "temperature_c = 288.15 ")
    result = study.run_study(example, tmp_path / "out")
    assert any("looks like a kelvin value" in w for w in result.warnings)


def test_config_without_study_table_is_an_error(tmp_path):
    config = tmp_path / "single.toml"
    config.write_text('[series]\nfolder = "spectra"\n')
    with pytest.raises(ConfigError, match=r"\[study\]"):
        study.run_study(config, tmp_path / "out")
    config.write_text('[study\nname = "x"\n')
    with pytest.raises(InputFileError, match="not valid TOML"):
        study.run_study(config, tmp_path / "out")


def test_only_one_run_is_an_error(tmp_path):
    config = tmp_path / "one.toml"
    config.write_text('[study]\n[[study.runs]]\ntemperature_c = 25\ntable = "a.csv"\ncolumn = "c"\n')
    with pytest.raises(ConfigError, match="at least 2"):
        study.run_study(config, tmp_path / "out")


# ---------------------------------------------------------------- CLI: kinetics arrhenius
def _runs_table(path: Path, rows: str) -> Path:
    path.write_text("label,temperature_c,k,k_stderr\n" + rows)
    return path


def test_cli_arrhenius_json(tmp_path, capsys):
    # N2O5 decomposition, Daniels & Johnston 1921 (values from memory; see test_temperature).
    rows = "".join(f"r{i},{t - 273.15:.2f},{k},{0.03 * k}\n" for i, (t, k) in enumerate(zip(
        [273.0, 298.0, 308.0, 318.0, 328.0, 338.0], [7.87e-7, 3.46e-5, 1.35e-4, 4.98e-4, 1.50e-3, 4.87e-3])))
    table = _runs_table(tmp_path / "n2o5.csv", rows)
    assert cli.main(["arrhenius", str(table), "--json", "--reference-temperature-kelvin", "300"]) == 0
    captured = capsys.readouterr()
    data = json.loads(captured.out)
    for key in ("ea_kj_per_mol", "ln_a", "dh_kj_per_mol", "ds_j_per_mol_k", "dg_kj_per_mol", "a_per_s"):
        assert set(data[key]) == {"value", "stderr", "ci95", "unit"}
    assert data["n_runs"] == 6 and data["t_ref_kelvin"] == 300.0
    assert data["ea_kj_per_mol"]["value"] == pytest.approx(24.7 * constants.calorie, abs=1.0)
    assert data["a_per_s"]["unit"] == "s^-1"
    assert isinstance(data["warnings"], list)
    assert cli.main(["arrhenius", str(table)]) == 0
    assert "dG‡" in capsys.readouterr().out


@pytest.mark.parametrize("rows, match", [
    ("a,25,1e-3,1e-5\nb,35,abc,1e-5\nc,45,3e-3,1e-5\n", "line 3"),
    ("a,25,1e-3,1e-5\nb,35,-2e-3,1e-5\nc,45,3e-3,1e-5\n", "not positive"),
    ("a,25,1e-3,1e-5\nb,-290,2e-3,1e-5\nc,45,3e-3,1e-5\n", "absolute zero"),
    ("a,25,1e-3,1e-5\n", "at least 2"),
])
def test_cli_arrhenius_bad_tables(tmp_path, capsys, rows, match):
    table = _runs_table(tmp_path / "bad.csv", rows)
    assert cli.main(["arrhenius", str(table), "--json"]) == 2
    captured = capsys.readouterr()
    assert captured.out == "" and match in captured.err


def test_cli_arrhenius_missing_column(tmp_path, capsys):
    table = tmp_path / "t.csv"
    table.write_text("temperature_c,k\n25,1e-3\n35,2e-3\n45,3e-3\n")
    assert cli.main(["arrhenius", str(table)]) == 2
    assert "k_stderr" in capsys.readouterr().err


def test_cli_arrhenius_kelvin_as_celsius_warns(tmp_path, capsys):
    table = _runs_table(tmp_path / "k.csv", "a,298.15,1e-3,2e-5\nb,308.15,2.6e-3,5e-5\nc,318.15,6.3e-3,1e-4\n")
    assert cli.main(["arrhenius", str(table), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert any("looks like a kelvin value" in w for w in data["warnings"])


@pytest.mark.parametrize("content, match", [
    (None, "is a folder"),
    (b"\x89PNG\r\n\x1a\n\x00\x00\xff", "cannot read"),
    (b"", "empty"),
    (b"label,temperature_c,k,k_stderr\n", "no data rows"),
    (b"label,temperature_c,k,k_stderr\na,25,1e-3,1e-5,9\nb,35,2e-3,2e-5\nc,45,4e-3,4e-5\n", "5 cells"),
    # comment and blank lines before the bad cell: the message names the file's own line
    (b"# runs\n\nlabel,temperature_c,k,k_stderr\na,25,1e-3,1e-5\n# note\nb,35,,2e-5\nc,45,4e-3,4e-5\n", "line 6"),
    (b"label,temperature_c,k,k_stderr\na,25,1e-3,1e-5\nb,35,nan,2e-5\nc,45,4e-3,4e-5\n", "'nan'"),
])
def test_cli_arrhenius_hostile_files(tmp_path, capsys, content, match):
    path = tmp_path / "runs.csv"
    if content is None:
        path.mkdir()
    else:
        path.write_bytes(content)
    assert cli.main(["arrhenius", str(path), "--json"]) == 2
    captured = capsys.readouterr()
    assert captured.out == "" and match in captured.err and "Traceback" not in captured.err


def test_cli_arrhenius_reads_tab_separated_tables(tmp_path, capsys):
    # N2O5, Daniels & Johnston 1921 (values from memory; see test_temperature), tab-separated.
    path = tmp_path / "runs.tsv"
    rows = zip([0.0, 25.0, 35.0, 45.0, 55.0, 65.0], [7.87e-7, 3.46e-5, 1.35e-4, 4.98e-4, 1.50e-3, 4.87e-3])
    path.write_text("temperature_c\tk\tk_stderr\n" + "".join(f"{t - 0.15}\t{k}\t{0.03 * k}\n" for t, k in rows))
    assert cli.main(["arrhenius", str(path), "--json"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["ea_kj_per_mol"]["value"] == pytest.approx(24.7 * constants.calorie, abs=1.0)


def test_study_summarises_negative_values_and_skipped_rows(example, tmp_path, caplog):
    # Late points scattering below zero in every run: one study-level warning, not one per value.
    for path in tmp_path.glob("series_*.csv"):
        frame = pd.read_csv(path)
        frame.loc[frame.index[-3:], "ester"] = [-0.001, -0.002, -0.0015]
        frame.loc[frame.index[5], "ester"] = np.nan
        frame.to_csv(path, index=False)
    with caplog.at_level("WARNING"):
        result = study.run_study(example, tmp_path / "out")
    assert result.success
    negative = [w for w in result.warnings if "negative" in w]
    assert len(negative) == 1 and "4 of 4 runs" in negative[0]
    assert sum("negative" in r.getMessage() for r in caplog.records) == 1
    assert sum("empty cells skipped" in w for w in result.warnings) == 4
