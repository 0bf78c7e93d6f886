"""Hostile concentration tables: clear errors naming file, column and line, or a flagged fit."""

import json

import numpy as np
import pytest

from kinetics import cli
from kinetics.errors import FitError, InputFileError
from kinetics.rates.table import read_concentration_table

GOOD_ROWS = [(0, 1.0), (60, 0.55), (120, 0.30), (180, 0.17), (240, 0.09), (300, 0.05)]


def write(tmp_path, rows, header="time_s,A", name="run.csv"):
    path = tmp_path / name
    path.write_text(header + "\n" + "".join(",".join(str(c) for c in row) + "\n" for row in rows))
    return path


def fit(capsys, path, *extra):
    code = cli.main(["fit", str(path), "--time-column", "time_s", "--column", "A", "--model", "first", *extra])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_good_table_reads_with_comments_and_semicolons(tmp_path):
    path = tmp_path / "semi.csv"
    path.write_text("# run 7, invented\ntime_s;A;A_sd\n" + "".join(f"{t};{c};0.01\n" for t, c in GOOD_ROWS))
    data = read_concentration_table(path, "time_s", ["A"], ["A_sd"])
    assert data.values.shape == (1, 6) and data.sigma.shape == (1, 6)
    assert data.time_s[-1] == 300


@pytest.mark.parametrize("rows, fragment, line", [
    ([(0, 1.0), (60, "nan"), (120, 0.3), (180, 0.2)], "'A' is missing or NaN", 3),
    ([(0, 1.0), (60, ""), (120, 0.3), (180, 0.2)], "'A' is missing or NaN", 3),
    ([(0, 1.0), (60, 0.5), (60, 0.4), (180, 0.2)], "repeats", 4),
    ([(0, 1.0), (120, 0.5), (60, 0.6), (180, 0.2)], "earlier", 4),
    ([(0, 1.0), (60, "0,5"), (120, 0.3)], "cells but the header", 3),
    ([(0, 1.0), (60, "0.5 mM"), (120, 0.3), (180, 0.2)], "'0.5 mM', not a number", 3),
    ([("", 1.0), (60, 0.5), (120, 0.3)], "time is missing", 2),
])
def test_hostile_cells_name_file_line_and_column(capsys, tmp_path, rows, fragment, line):
    path = write(tmp_path, rows)
    with pytest.raises(InputFileError) as error:
        read_concentration_table(path, "time_s", ["A"])
    assert fragment in str(error.value)
    assert error.value.line == line and str(path) in str(error.value)
    code, out, err = fit(capsys, path, "--json")
    assert code == 2 and out == "" and fragment in err and "Traceback" not in err


def test_missing_column_lists_the_real_ones(capsys, tmp_path):
    path = write(tmp_path, GOOD_ROWS)
    code, out, err = cli.main(["fit", str(path), "--time-column", "time_s", "--column", "B", "--model",
                               "first"]), *capsys.readouterr()
    assert code == 2 and "no column named 'B'" in err and "time_s, A" in err


def test_missing_file(capsys, tmp_path):
    code, _, err = fit(capsys, tmp_path / "nothing.csv")
    assert code == 2 and "file not found" in err


@pytest.mark.parametrize("rows, fragment", [
    ([(0, 1.0)], "only 1 time point"),
    ([(0, 1.0), (60, 0.5)], "only 2 time point"),
    ([(0, 0.5), (60, 0.5), (120, 0.5), (180, 0.5)], "constant"),
])
def test_too_little_information_is_a_fit_error(capsys, tmp_path, rows, fragment):
    path = write(tmp_path, rows)
    with pytest.raises(FitError, match=fragment):
        read_concentration_table(path, "time_s", ["A"])
    code, _, err = fit(capsys, path)
    assert code == 2 and fragment in err


def test_negative_concentrations_are_flagged_not_hidden(capsys, tmp_path):
    rows = GOOD_ROWS[:-1] + [(300, -0.02)]
    path = write(tmp_path, rows)
    code, out, err = fit(capsys, path, "--json")
    payload = json.loads(out)
    assert any("negative" in w for w in payload["warnings"])
    assert "negative" in err


def test_three_points_for_three_parameters_is_refused(capsys, tmp_path):
    path = write(tmp_path, GOOD_ROWS[:3])
    code, _, err = cli.main(["fit", str(path), "--time-column", "time_s", "--column", "A",
                             "--model", "nth"]), *capsys.readouterr()
    assert code == 2 and "cannot determine 3 free parameters" in err


def test_bad_start_and_mechanism_text_are_config_errors(capsys, tmp_path):
    path = write(tmp_path, GOOD_ROWS)
    code, _, err = fit(capsys, path, "--start", "k=fast")
    assert code == 2 and "k=fast" in err
    code, _, err = cli.main(["fit", str(path), "--time-column", "time_s", "--column", "A",
                             "--mechanism", "A -> B; A -> B"]), *capsys.readouterr()
    assert code == 2 and "duplicates" in err
    code, _, err = cli.main(["fit", str(path), "--time-column", "time_s", "--column", "A",
                             "--mechanism", "X -> Y"]), *capsys.readouterr()
    assert code == 2 and "'A' does not appear" in err


def test_cli_compare_prints_table_and_json(capsys, tmp_path):
    rng = np.random.default_rng(1)
    t = np.linspace(0, 400, 30)
    c = np.exp(-0.01 * t) + rng.normal(0, 0.01, t.size)
    path = write(tmp_path, list(zip(t, c)))
    code, out, _ = fit(capsys, path, "--compare", "--target-conversion", "0.9")
    assert code == 0
    assert "delta_aicc" in out and "akaike_weight" in out and "best: first" in out and "forecast" in out
    code, out, _ = fit(capsys, path, "--compare", "--json", "--bootstrap", "50", "--seed", "3")
    payload = json.loads(out)
    models = [row["model"] for row in payload["comparison"]["table"]]
    assert models[0] == "first" and set(models) == {"zero", "first", "second", "nth"}
    assert payload["intervals"]["k"]["bootstrap"] is not None
    assert payload["intervals"]["k"]["quoted"] == "profile"
    assert payload["intervals"]["k"]["profile"] == payload["params"]["k"]["ci95"]
    assert all(set(p) == {"value", "stderr", "ci95", "unit"} for p in payload["params"].values())


def test_cli_mechanism_with_two_observed_species(capsys, tmp_path):
    from kinetics.rates.laws import consecutive_first_order

    t = np.linspace(0, 300, 25)
    a, b, _ = consecutive_first_order(t, 1.0, 0.02, 0.008)
    path = tmp_path / "ab.csv"
    noise = np.random.default_rng(6).normal(0, 1e-3, (2, t.size))
    a, b = a + noise[0], b + noise[1]
    path.write_text("time_s,A,B\n" + "".join(f"{x},{p},{q}\n" for x, p, q in zip(t, a, b)))
    code = cli.main(["fit", str(path), "--time-column", "time_s", "--column", "A", "--column", "B",
                     "--mechanism", "A -> B : k1; B -> C : k2", "--fix", "c0_B=0", "--json",
                     "--target-conversion", "0.5"])
    payload = json.loads(capsys.readouterr().out)
    assert code == 0 and payload["converged"]
    assert payload["params"]["k1"]["value"] == pytest.approx(0.02, rel=2e-2)
    assert payload["params"]["k2"]["unit"] == "s^-1"
    assert payload["conservation"] == ["A + B + C = const"]
    assert payload["forecast"]["time_s"]["value"] == pytest.approx(np.log(2) / payload["params"]["k1"]["value"], rel=1e-4)


def test_cli_unidentifiable_fit_exits_1_with_converged_false(capsys, tmp_path):
    from kinetics.rates.laws import reversible_first_order

    t = np.linspace(0, 300, 30)
    b = 1.0 - reversible_first_order(t, 1.0, 0.02, 0.01) + np.random.default_rng(8).normal(0, 0.005, t.size)
    path = write(tmp_path, list(zip(t, b)), header="time_s,B")
    code = cli.main(["fit", str(path), "--time-column", "time_s", "--column", "B", "--model",
                     "reversible-first", "--observed", "product", "--json", "--target-conversion", "0.5"])
    payload = json.loads(capsys.readouterr().out)
    assert code == 1 and payload["converged"] is False
    assert "identifiable" in payload["message"] and payload["forecast"] is None


@pytest.mark.parametrize("content, fragment", [
    (None, "is a folder"),                       # a directory instead of a file
    (b"\x00\x01\x02time\xff\xfe", "cannot read"),  # binary garbage (not UTF-8)
    (b"time_s,A\n0,1\x00\n", "binary"),          # UTF-8 but with NUL bytes
    (b"", "empty"),
    (b"time_s,A\n", "no data rows"),
])
def test_unreadable_inputs_are_input_errors_through_the_cli(capsys, tmp_path, content, fragment):
    path = tmp_path / "table.csv"
    if content is None:
        path.mkdir()
    else:
        path.write_bytes(content)
    code, out, err = fit(capsys, path, "--json")
    assert code == 2 and out == "" and fragment in err and "Traceback" not in err


def test_repeated_column_and_negative_bootstrap_are_refused(capsys, tmp_path):
    path = write(tmp_path, GOOD_ROWS)
    code, _, err = cli.main(["fit", str(path), "--time-column", "time_s", "--column", "A", "--column", "A",
                             "--model", "first"]), *capsys.readouterr()
    assert code == 2 and "more than once" in err
    code, _, err = fit(capsys, path, "--bootstrap", "-5")
    assert code == 2 and "bootstrap" in err


def test_negative_values_give_one_summary_per_table(tmp_path):
    rows = GOOD_ROWS[:-1] + [(300, -0.02), (360, -0.01), (420, -0.03)]
    data = read_concentration_table(write(tmp_path, rows), "time_s", ["A"])
    assert len(data.warnings) == 1
    assert "has 3" in data.warnings[0] and "-0.03" in data.warnings[0] and "line 7" in data.warnings[0]


@pytest.mark.parametrize("extra, fragment", [
    (["--seed", "-1", "--bootstrap", "5"], "--seed"),           # numpy would raise ValueError
    (["--bootstrap", "100000000"], "--bootstrap"),              # would run for days
    (["--start", "c0=nan"], "not a finite number"),
    (["--start", "k=-1"], "within its bounds"),
    (["--fix", "c0=inf"], "not a finite number"),
])
def test_hostile_options_are_clear_errors(capsys, tmp_path, extra, fragment):
    code, out, err = fit(capsys, write(tmp_path, GOOD_ROWS), "--json", *extra)
    assert code == 2 and out == "" and fragment in err and "Traceback" not in err


def test_hostile_mechanism_initial_values(capsys, tmp_path):
    path = write(tmp_path, GOOD_ROWS)
    for initial, fragment in (("A=nan", "not a finite number"), ("A=-1", "initial concentration")):
        code = cli.main(["fit", str(path), "--time-column", "time_s", "--column", "A",
                         "--mechanism", "A -> B", "--initial", initial, "--json"])
        captured = capsys.readouterr()
        assert code == 2 and captured.out == "" and fragment in captured.err


def test_negative_times_are_flagged(tmp_path):
    rows = [(t - 60, c) for t, c in GOOD_ROWS]
    data = read_concentration_table(write(tmp_path, rows), "time_s", ["A"])
    assert any("times before 0" in w for w in data.warnings)
