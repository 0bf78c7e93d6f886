"""The README tour works as printed: every command of its "Then try the pieces" block runs.

The commands are read from README.md itself (the fenced block after "Then try the pieces
on the same data"), so the test follows the README: a command changed there is the
command tested here. Each runs through ``kinetics.cli.main`` with the repository root as
the working directory (the commands name ``configs/`` and ``demo_series/`` relative to a
clone's root); the only change is that paths under ``out/`` go to a temporary folder, so
the clone stays clean. Exit code 0 is required of each, and each must leave the outputs it
promises (source of truth: the README's own block and the command's documented outputs).
"""

from __future__ import annotations

import json
import re
import shlex
from pathlib import Path

import pytest

from kinetics.cli import main

ROOT = Path(__file__).resolve().parents[1]
README = ROOT / "README.md"
MARKER = "Then try the pieces on the same data"


def fenced_block(text: str, marker: str) -> str:
    """The first fenced block after the line holding ``marker``."""
    start = text.index(marker)
    match = re.search(r"^```[^\n]*\n(.*?)^```", text[start:], flags=re.S | re.M)
    assert match is not None, f"no fenced block after {marker!r}"
    return match.group(1)


def tour_commands(text: str, marker: str = MARKER) -> list[list[str]]:
    """The commands of the tour block: continuations joined, ``# comments`` dropped."""
    joined = re.sub(r"\\\n", " ", fenced_block(text, marker))
    commands = []
    for line in joined.splitlines():
        words = shlex.split(line, comments=True)
        if words:
            commands.append(words)
    return commands


def _to_tmp(words: list[str], tmp: Path) -> list[str]:
    """Paths under ``out/`` (outputs, and inputs a previous command wrote) go to ``tmp``."""
    return [str(tmp / word) if word == "out" or word.startswith("out/") else word for word in words]


def test_tour_block_is_parsed():
    commands = tour_commands(README.read_text(encoding="utf-8"))
    assert all(words[0] == "kinetics" for words in commands)
    assert [words[1] for words in commands] == [
        "inspect", "integrate", "run", "fit", "run", "run", "run", "run", "watch"]
    assert not any("#" in word for words in commands for word in words)
    watch = commands[-1]
    assert "--replay" in watch and "--folder" in watch


def test_readme_tour_runs_as_printed(tmp_path, monkeypatch, capsys):
    if not (ROOT / "demo_series" / "run_25C").is_dir():
        pytest.skip("demo_series/ is not in this checkout")
    monkeypatch.chdir(ROOT)
    for words in tour_commands(README.read_text(encoding="utf-8")):
        argv = _to_tmp(words[1:], tmp_path)
        code = main(argv)
        captured = capsys.readouterr()
        assert code == 0, f"`{shlex.join(words)}` exited {code}:\n{captured.err[-2000:]}"
        assert captured.out.strip(), f"`{shlex.join(words)}` printed nothing"
        if "--out" in argv:
            out = Path(argv[argv.index("--out") + 1])
            assert out.is_dir() and any(out.iterdir()), f"`{shlex.join(words)}` wrote nothing to {out}"
    # the live run took every replayed spectrum, counted once, and ended with a final fit
    fit = json.loads((tmp_path / "out" / "live" / "fit.json").read_text())
    assert fit["final"] is True
    spectra = sorted((ROOT / "demo_series" / "run_25C").glob("spectrum_*.jdx"))
    assert fit["counts"]["processed"] == len(spectra)
    assert fit["counts"]["duplicate"] == fit["counts"]["quarantined"] == 0
    assert sorted(p.name for p in (tmp_path / "out" / "incoming").glob("spectrum_*.jdx")) == \
        [p.name for p in spectra]
    assert (tmp_path / "out" / "live" / "series.csv").read_text().count("\n") == len(spectra) + 1


def _run_all(commands, tmp_path, capsys):
    for words in commands:
        argv = _to_tmp(words[1:], tmp_path)
        code = main(argv)
        captured = capsys.readouterr()
        assert code == 0, f"`{shlex.join(words)}` exited {code}:\n{captured.err[-2000:]}"


def test_readme_19f_arrayed_commands_run_as_printed(tmp_path, monkeypatch, capsys):
    # the README's 19F section: one arrayed file, batch and live (the file grows block by
    # block); both end with the generator's k (demo_series/f19_arrayed/truth.json) inside
    # the quoted interval, and live takes every block once
    if not (ROOT / "demo_series" / "f19_arrayed").is_dir():
        pytest.skip("demo_series/ is not in this checkout")
    monkeypatch.chdir(ROOT)
    commands = tour_commands(README.read_text(encoding="utf-8"), "The 30 time points are ONE file")
    assert [words[1] for words in commands] == ["run", "watch"]
    _run_all(commands, tmp_path, capsys)
    truth = json.loads((ROOT / "demo_series" / "f19_arrayed" / "truth.json").read_text())
    for out in ("f19", "f19_live"):
        fit = json.loads((tmp_path / "out" / out / "fit.json").read_text())
        k = fit["k"]
        assert k["ci95"][0] < truth["scenario"]["k_per_s"] < k["ci95"][1], (out, k)
    live = json.loads((tmp_path / "out" / "f19_live" / "fit.json").read_text())
    assert live["counts"]["processed"] == len(truth["files"]) and live["counts"]["duplicate"] == 0


def test_readme_python_block_runs_as_printed(tmp_path, monkeypatch):
    # the README's "Use it from Python" block, executed as printed from the repository
    # root (outputs it writes go to a temporary working copy of the paths it names)
    if not (ROOT / "demo_series" / "run_25C").is_dir():
        pytest.skip("demo_series/ is not in this checkout")
    import matplotlib

    matplotlib.use("Agg")
    code = fenced_block(README.read_text(encoding="utf-8"), "## Use it from Python")
    assert "kinetics.load_run" in code and "kinetics.load_study" in code
    work = tmp_path / "work"
    work.mkdir()
    (work / "configs").symlink_to(ROOT / "configs")
    (work / "demo_series").symlink_to(ROOT / "demo_series")
    monkeypatch.chdir(work)
    namespace: dict = {}
    exec(compile(code, "README.md (Use it from Python)", "exec"), namespace)  # noqa: S102 - our own README
    assert (work / "run.svg").is_file() and (work / "run-report" / "report.html").is_file()
    assert namespace["fit"].summary()
