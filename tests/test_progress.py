"""Progress and messages: the library reports progress through a callback and never prints;
the command draws bars only on a terminal, says each warning once, keeps ``--quiet`` to
errors and the result, and shows the safety caution in ``--help`` (and every report), not
after every command.

Data: the bundled demo run (invented spectra, ``demo_series/README.md``) and simulated
series whose truth each test sets.
"""

import io
import logging
import shutil
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from scipy import constants

from kinetics import cli
from kinetics.rates.fit import fit_arrays

ROOT = Path(__file__).resolve().parents[1]
DEMO_RUN = ROOT / "configs" / "demo_run.toml"


def _recorder():
    calls = []
    return calls, lambda stage, done, total: calls.append((stage, done, total))


def _check_counts(calls, stage, total):
    done = [d for s, d, t in calls if s == stage]
    assert done and all(t == total for s, _, t in calls if s == stage)
    assert done == sorted(done) and done[-1] == total and done[0] <= 1


def test_engine_reports_each_spectrum_and_prints_nothing(capsys):
    from kinetics.run.engine import batch_run

    calls, progress = _recorder()
    summary = batch_run(DEMO_RUN, None, processing_uncertainty=False, progress=progress)
    n = summary.counts["processed"]
    assert n == len(summary.table) == 36  # the demo run's 36 spectra (demo_series/README.md)
    _check_counts(calls, "spectra", n)
    assert {s for s, _, _ in calls} == {"spectra"}
    assert summary.out_dir is None  # kept in memory
    out = capsys.readouterr()
    assert out.out == "" and out.err == ""  # the library never prints


def test_bootstrap_reports_each_refit():
    # simulated first-order decay, truth set here: k = 1e-3 s^-1, c0 = 0.2 mol/L, noise 0.5 %
    rng = np.random.default_rng(11)
    t = np.linspace(0, 3000, 25)
    y = 0.2 * np.exp(-1e-3 * t) + rng.normal(0, 1e-3, t.size)
    calls, progress = _recorder()
    fit = fit_arrays(t, y, "first", bootstrap=30, rng=np.random.default_rng(5), profile=False, progress=progress)
    _check_counts(calls, "bootstrap", 30)
    assert fit.param("k").ci_bootstrap is not None
    # the callback is not carried into refits (a live run's warm starts)
    from kinetics.rates.fit import refit

    calls.clear()
    refit(fit, fit.data)
    assert calls == []


def test_study_reports_runs(tmp_path):
    from kinetics.study import run_study

    # two invented first-order runs (truth set here: Ea 60 kJ/mol, k(298.15 K) = 1e-3 s^-1)
    lines = ['[study]', 'name = "two runs"']
    for celsius in (20, 40):
        k = 1e-3 * np.exp(-(60e3 / constants.R) * (1 / (celsius + constants.zero_Celsius) - 1 / 298.15))
        time_s = np.linspace(0, 3 / k, 20)
        conc = 0.1 * np.exp(-k * time_s) + np.random.default_rng(celsius).normal(0, 1e-3, time_s.size)
        pd.DataFrame({"time_s": time_s, "a": conc}).to_csv(tmp_path / f"r{celsius}.csv", index=False)
        lines += ["[[study.runs]]", f"temperature_c = {celsius}", f'table = "r{celsius}.csv"', 'column = "a"']
    (tmp_path / "study.toml").write_text("\n".join(lines) + "\n")
    calls, progress = _recorder()
    run_study(tmp_path / "study.toml", tmp_path / "out", progress=progress)
    assert [c for c in calls if c[0] == "runs"] == [("runs", 0, 2), ("runs", 1, 2), ("runs", 2, 2)]


def test_bars_draw_on_a_terminal_and_vanish():
    from rich.console import Console

    buffer = io.StringIO()
    console = Console(file=buffer, force_terminal=True, width=100)
    with cli._ProgressBars(console) as bars:
        for done in range(5):
            bars("spectra", done + 1, 5)
        bars.bars.refresh()  # rich redraws on its own clock; draw now
        bars("spectra", 1, 3)  # the next run's spectra restart the bar
        bars.bars.refresh()
    text = buffer.getvalue()
    assert "spectra measured" in text and "5/5" in text and "1/3" in text
    assert text.rstrip().endswith("\x1b[2K")  # transient: the bars are erased at the end


@pytest.mark.parametrize("argv, tty, shown", [
    (["run", "c.toml"], True, True),
    (["run", "c.toml"], False, False),      # stderr to a file or pipe: no bars
    (["run", "c.toml", "--quiet"], True, False),
    (["run", "c.toml", "--json"], True, False),
    (["fit", "t.csv", "--time-column", "t", "--column", "a", "--model", "first", "-q"], True, False),
])
def test_bars_only_on_a_terminal_without_quiet_or_json(monkeypatch, argv, tty, shown):
    args = cli.build_parser().parse_args(argv)
    monkeypatch.setattr(cli.sys.stderr, "isatty", lambda: tty, raising=False)
    with cli._progress(args) as progress:
        assert (progress is not None) == shown


def _zero_order_csv(path: Path) -> Path:
    # zero-order data (truth set here: 0.1 mol/L - 8e-5 mol/L/s t) fitted with a first-order
    # law: the residuals change sign too rarely, a warning the fit must give
    t = np.linspace(0, 1000, 25)
    y = 0.1 - 8e-5 * t + np.random.default_rng(1).normal(0, 2e-4, t.size)
    pd.DataFrame({"time_s": t, "a": y}).to_csv(path, index=False)
    return path


def test_quiet_fit_prints_the_result_and_no_messages(tmp_path, capsys):
    table = _zero_order_csv(tmp_path / "zero.csv")
    argv = ["fit", str(table), "--time-column", "time_s", "--column", "a", "--model", "first", "--no-profile"]
    assert cli.main(argv) == 0
    loud = capsys.readouterr()
    assert "warning: the residuals change sign too rarely" in loud.err
    assert cli.main(argv + ["--quiet"]) == 0
    quiet = capsys.readouterr()
    assert quiet.err == ""
    assert quiet.out == loud.out  # the result itself (with its warning lines) is unchanged


def test_safety_caution_in_help_not_after_commands(tmp_path, capsys):
    for argv in ([], ["run"], ["watch"]):
        with pytest.raises(SystemExit):
            cli.main(argv + ["--help"])
        assert "Safety" in capsys.readouterr().out
    table = _zero_order_csv(tmp_path / "zero.csv")
    cli.main(["fit", str(table), "--time-column", "time_s", "--column", "a", "--model", "first", "--no-profile"])
    out = capsys.readouterr()
    assert "Safety" not in out.out and "Safety" not in out.err


def test_quiet_run_and_warnings_once_per_command(tmp_path, capsys):
    copy = tmp_path / "spectra"
    shutil.copytree(ROOT / "demo_series" / "run_25C", copy)
    config = tmp_path / "run.toml"
    config.write_text(DEMO_RUN.read_text().replace('"../demo_series/run_25C"', f'"{copy}"'))
    (copy / "spectrum_0099.jdx").write_text("##TITLE= cut off\n##JCAMP-DX= 5.01\n")  # a bad file: quarantined
    assert cli.main(["run", str(config), "--out", str(tmp_path / "out"), "--no-report", "--quiet"]) == 0
    out = capsys.readouterr()
    assert out.err == ""
    assert "k with 95 % interval" in out.out and "quarantined 1" in out.out
    assert "Safety" not in out.out


def test_job_text_groups_a_warning_shared_by_runs():
    def run(label, warnings):
        return SimpleNamespace(label=label, warnings=tuple(warnings), fit=None, table=[], counts={},
                               k=lambda: None, breakdown=lambda: None)

    job = SimpleNamespace(notes=("demo series read from somewhere",), study=None, truth={}, out_dir="out",
                          report_html=None, report_pdf=None,
                          runs=(run("25 °C", ["baseline drifts", "one file quarantined"]),
                                run("35 °C", ["baseline drifts"])))
    text = cli._job_text(job)
    assert text.count("baseline drifts") == 1
    assert "warning (every run): baseline drifts" in text
    assert "warning (25 °C): one file quarantined" in text
    assert "demo series read from" in text and "demo series read from" not in cli._job_text(job, quiet=True)


def test_a_logged_warning_shows_once_per_command():
    once = cli._OnceFilter()
    stream = io.StringIO()
    handler = logging.StreamHandler(stream)
    handler.addFilter(once)
    logger = logging.getLogger("kinetics.test_progress")
    logger.addHandler(handler)
    logger.propagate = False
    try:
        for _ in range(3):
            logger.warning("the same words from every spectrum")
        logger.warning("something else")
        logger.info("info is not filtered")
        logger.setLevel(logging.INFO)
        logger.info("info is not filtered")
        logger.info("info is not filtered")
    finally:
        logger.removeHandler(handler)
    lines = stream.getvalue().splitlines()
    assert lines == ["the same words from every spectrum", "something else",
                     "info is not filtered", "info is not filtered"]
