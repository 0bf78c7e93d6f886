"""Every output failure of `kinetics run` is exit 2 with one line naming the path and the
remedy, and nothing is half-written.

The run is a small simulated folder (kinetics.simulate; truth set here, see
test_preflight.py for the spin system).  Failures of the operating system are produced
for real where a test can (a file where a folder should be, a name too long for the file
system, a folder without write permission when not running as root, a second SQLite
connection holding the ledger's lock) and injected where it cannot (a full disk:
``os.replace`` or ``os.fsync`` made to fail with ENOSPC, the error a full file system
reports; a read-only file system: EROFS).
"""

from __future__ import annotations

import errno
import os
import sqlite3
import stat
from pathlib import Path

import numpy as np
import pytest

from kinetics import simulate, store
from kinetics.atomic import output_error
from kinetics.cli import main
from kinetics.errors import OutputError
from kinetics.store import Ledger

from test_preflight import ACID, ESTER, SOLVENT, TMS, _text


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    folder = tmp_path_factory.mktemp("outputs") / "spectra"
    times = np.arange(4) * 300.0
    conc = {"ester": 0.5 * np.exp(-1e-3 * times), "acid": 0.5 * (1 - np.exp(-1e-3 * times)),
            "tms": np.full(times.size, 0.01)}
    simulate.write_series(folder, times, conc, [ESTER, ACID, TMS], np.random.default_rng(5), snr=150.0,
                          solvent=SOLVENT, acquisition=simulate.Acquisition(observe_mhz=60.0, n_points=4096))
    return folder


def _run(folder, tmp_path, capsys, out, *extra):
    config = tmp_path / "run.toml"
    config.write_text(_text(folder))
    code = main(["run", str(config), "--out", str(out), *extra])
    err = capsys.readouterr().err
    lines = [line for line in err.splitlines() if line.strip() and not line.startswith("WARNING")]
    return code, err, lines


def _one_line_exit_2(code, err, lines):
    assert code == 2, err
    assert "Traceback" not in err
    assert len(lines) == 1, err
    return lines[0]


def _temporaries(root):
    return [os.path.join(d, n) for d, _, names in os.walk(root) for n in names if n.endswith(".tmp")]


def _fail_replace_of(monkeypatch, name, code):
    real = os.replace

    def replace(source, target, *args, **kwargs):
        if os.path.basename(str(target)) == name:
            raise OSError(code, os.strerror(code))
        return real(source, target, *args, **kwargs)

    monkeypatch.setattr(os, "replace", replace)


@pytest.mark.parametrize("name", ["series.csv", "fit.json", "series.png", "index.html", "report.html",
                                  "report.pdf", "provenance.json"])
def test_full_disk_while_writing_an_output(folder, tmp_path, capsys, monkeypatch, name):
    _fail_replace_of(monkeypatch, name, errno.ENOSPC)
    out = tmp_path / "out"
    line = _one_line_exit_2(*_run(folder, tmp_path, capsys, out))
    assert name in line and "disk full" in line and "free space" in line
    assert ".partial" not in line  # named where the file was going, not by its staging copy
    assert not any(path.name == name for path in out.rglob("*"))  # never half a file
    assert _temporaries(out) == []


def test_full_disk_on_a_report_figure(folder, tmp_path, capsys, monkeypatch):
    real = os.fsync
    calls = {"n": 0}

    def fsync(fd):  # every file write of the report's figures fails as on a full disk
        target = os.readlink(f"/proc/self/fd/{fd}") if os.path.exists(f"/proc/self/fd/{fd}") else ""
        if "figures" in target:
            calls["n"] += 1
            raise OSError(errno.ENOSPC, os.strerror(errno.ENOSPC))
        return real(fd)

    monkeypatch.setattr(os, "fsync", fsync)
    out = tmp_path / "out"
    line = _one_line_exit_2(*_run(folder, tmp_path, capsys, out))
    assert calls["n"] >= 1 and "figures" in line and "disk full" in line
    assert _temporaries(out) == []
    assert not (out / "report" / "report.html").exists()


def test_a_failed_report_leaves_the_previous_report_whole(folder, tmp_path, capsys, monkeypatch):
    out = tmp_path / "out"
    assert _run(folder, tmp_path, capsys, out)[0] == 0
    report = out / "report"
    before = {path.relative_to(report): path.read_bytes() for path in report.rglob("*") if path.is_file()}
    (report / "notes.txt").write_text("the user's own file")
    _fail_replace_of(monkeypatch, "report.pdf", errno.ENOSPC)  # the last file the report writes
    line = _one_line_exit_2(*_run(folder, tmp_path, capsys, out))
    assert "report.pdf" in line and "disk full" in line
    after = {path.relative_to(report): path.read_bytes() for path in report.rglob("*") if path.is_file()}
    assert after.pop(Path("notes.txt")) == b"the user's own file"
    assert after == before  # not one file of the new report moved in
    assert [p.name for p in out.iterdir() if p.name.endswith(".partial")] == []


def test_read_only_file_system(folder, tmp_path, capsys, monkeypatch):
    _fail_replace_of(monkeypatch, "fit.json", errno.EROFS)
    line = _one_line_exit_2(*_run(folder, tmp_path, capsys, tmp_path / "out"))
    assert "fit.json" in line and "not writable" in line and "writable output folder" in line


@pytest.mark.skipif(hasattr(os, "geteuid") and os.geteuid() == 0,
                    reason="root ignores permission bits (the EROFS test above injects the error)")
def test_output_folder_without_write_permission(folder, tmp_path, capsys):
    out = tmp_path / "locked"
    out.mkdir()
    out.chmod(stat.S_IRUSR | stat.S_IXUSR)
    try:
        line = _one_line_exit_2(*_run(folder, tmp_path, capsys, out))
    finally:
        out.chmod(stat.S_IRWXU)
    assert str(out) in line and "not writable" in line


def test_a_file_where_the_report_folder_should_be(folder, tmp_path, capsys):
    out = tmp_path / "out"
    out.mkdir()
    (out / "report").write_text("a file, not a folder")
    line = _one_line_exit_2(*_run(folder, tmp_path, capsys, out))
    assert str(out / "report") in line and "a file stands where a folder is needed" in line
    assert (out / "report").read_text() == "a file, not a folder"
    assert _temporaries(out) == []


def test_a_file_given_as_the_output_folder(folder, tmp_path, capsys):
    out = tmp_path / "out"
    out.write_text("a file")
    line = _one_line_exit_2(*_run(folder, tmp_path, capsys, out, "--no-report"))
    assert str(out) in line and "folder" in line
    assert out.read_text() == "a file"


def test_an_output_path_too_long_for_the_file_system(folder, tmp_path, capsys):
    out = tmp_path / ("x" * 10_000)
    line = _one_line_exit_2(*_run(folder, tmp_path, capsys, out, "--no-report"))
    assert "too long" in line and "shorter" in line
    assert len(line) < 600  # the path is shortened in the message, not printed 10,000 characters long


def test_a_ledger_locked_by_another_process(folder, tmp_path, capsys, monkeypatch):
    out = tmp_path / "out"
    out.mkdir()
    Ledger(out / "ledger.sqlite").close()
    other = sqlite3.connect(out / "ledger.sqlite", isolation_level=None)
    other.execute("BEGIN EXCLUSIVE")  # another program holds the write lock
    monkeypatch.setattr(store, "LOCK_TIMEOUT_S", 0.3)  # SQLite's busy handler retries until then
    try:
        line = _one_line_exit_2(*_run(folder, tmp_path, capsys, out, "--no-report"))
    finally:
        other.execute("ROLLBACK")
        other.close()
    ledger = str(out / "ledger.sqlite")
    assert f"another kinetics process is writing {ledger}; stop it or choose another --out" in line
    assert "locked for 0.3 s" in line
    with Ledger(ledger) as opened:  # nothing was taken while locked
        assert opened.files() == []


@pytest.mark.parametrize("message,words", [
    ("database or disk is full", "disk full"),
    ("attempt to write a readonly database", "not writable"),
    ("unable to open database file", "not writable"),
    ("database is locked", "another kinetics process is writing"),
])
def test_sqlite_failures_are_one_clear_line(message, words):
    # SQLite reports no errno: its message (sqlite3.c's error strings) is what there is
    error = output_error("/x/ledger.sqlite", sqlite3.OperationalError(message))
    assert isinstance(error, OutputError) and words in str(error) and "\n" not in str(error)


def test_the_table_writer_of_the_series_module_is_atomic(tmp_path, monkeypatch):
    import pandas as pd

    from kinetics.series import write_table

    target = tmp_path / "series.csv"
    write_table(pd.DataFrame({"a": [1]}), target)
    _fail_replace_of(monkeypatch, "series.csv", errno.ENOSPC)
    with pytest.raises(OutputError, match="disk full"):
        write_table(pd.DataFrame({"a": [2]}), target)
    assert target.read_text() == "a\n1\n" and _temporaries(tmp_path) == []
