"""A run read from one arrayed file: the same engine, ledger and fit as a folder of files.

Checks against the world and against the folder path:

* the same simulated series as a folder of files and as one arrayed file (JCAMP-DX LINK
  blocks, one NTUPLES page group per time point, a matrix CSV) gives identical ledger
  rows (apart from the identity of each trace: its key, digest, source file and block)
  and the identical fit;
* live on a growing arrayed file (blocks appended as an instrument appends them) equals
  batch, each block taken once; a rewritten block is a new version, as a replaced file is;
* ``kill -9`` of the watcher while blocks are appended loses and doubles nothing;
* the bundled 19F demo (one arrayed file, k set by the generator): k inside its quoted
  95 % interval, the internal standard (PhCF3, -63.72 ppm on the CCl3F scale, value from
  memory) lands at its convention;
* 19F and 31P Larmor frequencies at 1.4 T from the IUPAC 2001 frequency ratios (from
  memory, kinetics/nuclei.py) against the ``##.OBSERVE FREQUENCY`` the reader takes from
  each block.

Simulated data (kinetics.simulate) set their own truth here.
"""

from __future__ import annotations

import json
import signal
import sqlite3
import subprocess
import sys
import time
from dataclasses import replace
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from kinetics import demo, nuclei, simulate
from kinetics.config import load_run_config
from kinetics.errors import ConfigError
from kinetics.processing.steps import peak_position
from kinetics.run.engine import batch_run, plan_from_config
from kinetics.spectra.arrayed import read_traces
from kinetics.spectra.arrayed_writers import write_arrayed_jcampdx, write_matrix_table
from kinetics.spectra.delimited import write_csv
from kinetics.spectra.reader import read
from kinetics.spectra.spectrum import Spectrum
from kinetics.store import Ledger
from watchers.live import LiveOptions, run_live
from watchers.replay import ReplayThread, block_chunks

ROOT = Path(__file__).resolve().parent.parent

K_PER_S = 8.0e-4            # truth of the simulated series
MHZ_19F = 56.088            # 19F at 1.4 T (test_nuclei_19f.py)
TIMES_S = 90.0 + 150.0 * np.arange(14)
ACQ = simulate.Acquisition(observe_mhz=MHZ_19F, n_points=2048, spectral_width_ppm=30.0, carrier_ppm=-70.0,
                           nucleus="19F")
SPECIES = [simulate.SpeciesSignals("ester", (simulate.Multiplet(-75.2, 3, width_hz=2.0),)),
           simulate.SpeciesSignals("amide", (simulate.Multiplet(-76.4, 3, width_hz=2.0),)),
           simulate.SpeciesSignals("standard", (simulate.Multiplet(-63.72, 3, width_hz=2.0),))]


def _concentrations(times=TIMES_S):
    decay = np.exp(-K_PER_S * times)
    return {"ester": 0.2 * decay, "amide": 0.2 * (1 - decay), "standard": np.full(times.size, 0.05)}


def _fid_folder(folder: Path, seed: int = 7) -> list[Path]:
    rng = np.random.default_rng(seed)
    simulate.write_series(folder, TIMES_S, _concentrations(), SPECIES, rng, acquisition=ACQ, kind="fid",
                          snr=200.0, phase0_deg=rng.uniform(-30, 30, TIMES_S.size), drift_ppm=0.1,
                          scan_duration_s=20.0, amplitude_per_nucleus=1e4)
    for name in ("truth.json", "truth.csv"):
        (folder / name).unlink()
    return sorted(folder.glob("fid_*.jdx"))


def _config(path: Path, run: str, time_lines: str = 'source = "header"', phase: str = "auto",
            extra: str = "") -> Path:
    path.write_text(f"""[run]
{run}

[time]
{time_lines}

[processing]
phase = "{phase}"
reference = {{ ppm = -63.62, window_ppm = 0.5, target_ppm = -63.72 }}

[integration]
noise_region_ppm = [[-60.0, -57.0]]

[[signals]]
name = "ester_CF3"
species = "ester"
window_ppm = [-75.75, -74.65]
nuclei = 3

[[signals]]
name = "amide_CF3"
species = "amide"
window_ppm = [-76.95, -75.85]
nuclei = 3

[[signals]]
name = "standard"
species = "standard"
window_ppm = [-64.27, -63.17]
nuclei = 3
standard = true
concentration_mol_per_l = 0.05

[quantify]
mode = "standard"
reactant = "ester"
product = "amide"

[fit]
model = "first"
species = "ester"
{extra}""")
    return path


_IDENTITY = ("file", "sha256", "path", "reference")  # what names a trace, not what it measured


def _content(ledger: Ledger) -> tuple[list, pd.DataFrame, dict]:
    """A ledger's measured content without the identity of each trace."""
    records = [{k: v for k, v in record.items() if k not in _IDENTITY} for _, record in ledger.records()]
    measurements = ledger.measurements().drop(columns=["path"]).reset_index(drop=True)
    return records, measurements, ledger.counts()


def _batch(config: Path, out: Path, uncertainty: bool = False):
    summary = batch_run(load_run_config(config), out, parallel=False, figures=False,
                        processing_uncertainty=uncertainty)
    return summary


# ---------------------------------------------------------------- folder == arrayed file
@pytest.mark.parametrize("form", ["link", "ntuples"])
def test_a_folder_and_one_arrayed_jcampdx_file_give_the_same_rows_and_fit(tmp_path, form):
    files = _fid_folder(tmp_path / "folder")
    records = [read(path) for path in files]
    (tmp_path / "arrayed").mkdir()
    arrayed = write_arrayed_jcampdx(tmp_path / "arrayed" / "series.jdx", records, form=form)
    traces = read_traces(arrayed)
    assert [t.block for t in traces] == list(range(len(files)))
    # the file holds the same numbers as the folder (JCAMP-DX round trip of the writer)
    for trace, record in zip(traces, records):
        assert np.array_equal(trace.record.data, record.data) and trace.acquired_utc == record.acquired_utc
    folder_run = _batch(_config(tmp_path / "folder.toml", 'folder = "folder"\npattern = "fid_*.jdx"'),
                        tmp_path / "out_folder")
    arrayed_run = _batch(_config(tmp_path / "arrayed.toml", 'file = "arrayed/series.jdx"'), tmp_path / "out_arrayed")
    with Ledger(tmp_path / "out_folder" / "ledger.sqlite") as a, Ledger(tmp_path / "out_arrayed" / "ledger.sqlite") as b:
        rows_a, measured_a, counts_a = _content(a)
        rows_b, measured_b, counts_b = _content(b)
        assert counts_b == counts_a == {"processed": len(files), "quarantined": 0, "duplicate": 0, "replaced": 0}
        assert rows_b == rows_a
        pd.testing.assert_frame_equal(measured_b, measured_a, check_exact=True)
        # the ledger names each trace's source file and block
        assert b.trace_sources() == [(f"series.jdx#{i:05d}", "series.jdx", i) for i in range(len(files))]
        assert all(source is None and block is None for _, source, block in a.trace_sources())
    assert arrayed_run.outcome.fit == folder_run.outcome.fit
    assert arrayed_run.outcome.k["value"] == folder_run.outcome.k["value"]
    table_a, table_b = folder_run.table, arrayed_run.table
    assert list(table_b["time_s"]) == list(table_a["time_s"])


def test_a_folder_of_csv_files_and_one_matrix_table_give_the_same_rows_and_fit(tmp_path):
    # real spectra on one ppm axis (a matrix table holds real intensities only)
    rng = np.random.default_rng(11)
    spectra = []
    for i, t in enumerate(TIMES_S):
        made = simulate.simulate_spectrum(SPECIES, {k: float(v[i]) for k, v in _concentrations().items()}, rng,
                                          ACQ, noise_sigma=2.0, amplitude_per_nucleus=1e4, drift_ppm=0.1)
        spectra.append(Spectrum(ppm=made.ppm, real=made.real, nucleus="19F", observe_mhz=MHZ_19F))
    (tmp_path / "matrix").mkdir()
    matrix = write_matrix_table(tmp_path / "matrix" / "series.csv", spectra, TIMES_S)
    traces = read_traces(matrix)
    assert [t.time_s for t in traces] == list(TIMES_S)
    folder = tmp_path / "folder"
    folder.mkdir()
    for trace in traces:  # the same numbers, one file each, named by elapsed time
        write_csv(folder / f"t_{trace.time_s:07.0f}s.csv", trace.record)
    folder_run = _batch(_config(tmp_path / "folder.toml", 'folder = "folder"\npattern = "t_*.csv"',
                                'source = "filename"\nfilename_pattern = "t_(?P<elapsed_s>[0-9]+)s"', "none"),
                        tmp_path / "out_folder")
    matrix_run = _batch(_config(tmp_path / "matrix.toml", 'file = "matrix/series.csv"', phase="none"),
                        tmp_path / "out_matrix")
    with Ledger(tmp_path / "out_folder" / "ledger.sqlite") as a, Ledger(tmp_path / "out_matrix" / "ledger.sqlite") as b:
        rows_a, measured_a, counts_a = _content(a)
        rows_b, measured_b, counts_b = _content(b)
        assert counts_a["processed"] == counts_b["processed"] == TIMES_S.size
        for row in rows_a:
            row["time_source"] = "header"  # the one field that names how the time was found
        assert rows_b == rows_a
        pd.testing.assert_frame_equal(measured_b, measured_a, check_exact=True)
    # the fit is the same; its messages name the spectra (files here, traces there)
    names = dict(zip(folder_run.table["file"], matrix_run.table["file"]))

    def renamed(value):
        text = json.dumps(value, sort_keys=True)
        for name, key in names.items():
            text = text.replace(name, key)
        return json.loads(text)

    assert renamed(folder_run.outcome.fit) == matrix_run.outcome.fit
    assert list(matrix_run.table["time_s"]) == list(TIMES_S)


def test_times_from_the_config_interval_equal_the_blocks_own_dates(tmp_path):
    files = _fid_folder(tmp_path / "folder")
    (tmp_path / "a").mkdir()
    write_arrayed_jcampdx(tmp_path / "a" / "series.jdx", [read(path) for path in files])
    header = _batch(_config(tmp_path / "h.toml", 'file = "a/series.jdx"'), tmp_path / "out_h")
    # write_series: trace i starts at 2026-01-01T09:00Z + TIMES_S[i] - 10 s (20 s scans)
    start = datetime(2026, 1, 1, 9, 0, tzinfo=timezone.utc) + timedelta(seconds=TIMES_S[0] - 10.0)
    interval = _batch(_config(tmp_path / "i.toml", 'file = "a/series.jdx"',
                              f'source = "interval"\ninterval_s = 150\nseries_start = "{start.isoformat()}"'),
                      tmp_path / "out_i")
    assert list(interval.table["time_s"]) == list(header.table["time_s"])
    assert interval.outcome.k["value"] == header.outcome.k["value"]
    # without a start: the first trace's midpoint is time.first_spectrum_offset_s, then every interval_s
    relative = _batch(_config(tmp_path / "r.toml", 'file = "a/series.jdx"',
                              'source = "interval"\ninterval_s = 150\nfirst_spectrum_offset_s = 90'),
                      tmp_path / "out_r")
    assert np.allclose(relative.table["time_s"], TIMES_S, atol=1e-9)


def test_config_keys_of_a_run_read_from_one_file_are_checked(tmp_path):
    (tmp_path / "a").mkdir()
    cases = [('file = "a/s.jdx"\nfolder = "a"', 'source = "header"', "run.folder"),
             ('folder = "a"', 'source = "interval"\ninterval_s = 60', "time.source"),
             ('file = "a/s.jdx"', 'source = "interval"', "time.interval_s"),
             ('file = "a/s.jdx"', 'source = "mtime"', "time.source"),
             ('file = "a/s.jdx"', 'source = "header"\ninterval_s = 60', "time.interval_s")]
    for run, time_lines, key in cases:
        with pytest.raises(ConfigError) as caught:
            load_run_config(_config(tmp_path / "c.toml", run, time_lines))
        assert caught.value.key == key, (run, time_lines)
    config = load_run_config(_config(tmp_path / "c.toml", 'file = "a/s.jdx"'))
    assert config.file == tmp_path / "a" / "s.jdx" and config.folder == tmp_path / "a"
    with pytest.raises(ConfigError) as caught:  # the file is missing: named by its key
        batch_run(config, tmp_path / "out", figures=False)
    assert caught.value.key == "run.file"


# ---------------------------------------------------------------- live, rewritten blocks
def test_live_on_a_growing_arrayed_file_equals_batch_block_by_block(tmp_path):
    files = _fid_folder(tmp_path / "folder")
    (tmp_path / "source").mkdir()
    source = write_arrayed_jcampdx(tmp_path / "source" / "series.jdx", [read(path) for path in files])
    (tmp_path / "batch").mkdir()
    (tmp_path / "batch" / "series.jdx").write_bytes(source.read_bytes())
    config = _config(tmp_path / "run.toml", 'file = "incoming/series.jdx"')
    (tmp_path / "incoming").mkdir()
    plan = plan_from_config(load_run_config(config), tmp_path / "live" / "ledger.sqlite")
    assert plan.spec.quiet_period_s == 0.0  # a block is complete when the reader finds its end
    plan = replace(plan, spec=replace(plan.spec, poll_interval_s=0.05))  # look more often than blocks come
    replayer = ReplayThread(source, tmp_path / "incoming", 0.3, plan.spec.include)
    replayer.start()
    summary = run_live(plan, LiveOptions(out_dir=tmp_path / "live", poll=True, view=False, handle_signals=False,
                                         tick_s=0.02), replay_done=replayer.finished.is_set)
    replayer.join(timeout=10)
    assert replayer.error is None and summary.stop_reason == "replay finished"
    assert (tmp_path / "incoming" / "series.jdx").read_bytes() == source.read_bytes()
    batch = batch_run(plan_from_config(load_run_config(config), folder=tmp_path / "batch"), tmp_path / "out_batch",
                      parallel=False, figures=False)
    with Ledger(tmp_path / "live" / "ledger.sqlite") as live, Ledger(tmp_path / "out_batch" / "ledger.sqlite") as done:
        assert live.counts() == {"processed": len(files), "quarantined": 0, "duplicate": 0, "replaced": 0}
        assert [row.path for row in live.files()] == [f"series.jdx#{i:05d}" for i in range(len(files))]
        assert live.comparable_rows() == done.comparable_rows()
        turns = {n for (n,) in live._db.execute("SELECT n_points FROM refits")}
    assert len(turns) >= len(files) // 2, turns  # followed as it grew, not read once at the end
    live_fit = json.loads((tmp_path / "live" / "fit.json").read_text())
    assert live_fit["final"] and live_fit["fit"] == json.loads((tmp_path / "out_batch" / "fit.json").read_text())["fit"]
    assert summary.outcome.k == batch.outcome.k


def test_a_rewritten_block_is_a_new_version_as_a_replaced_file_is(tmp_path):
    files = _fid_folder(tmp_path / "folder")
    records = [read(path) for path in files]
    (tmp_path / "a").mkdir()
    path = write_arrayed_jcampdx(tmp_path / "a" / "series.jdx", records)
    config = _config(tmp_path / "run.toml", 'file = "a/series.jdx"')
    first = _batch(config, tmp_path / "out")
    # the instrument software re-exports the file with block 5 reprocessed (other noise)
    other = read(_fid_folder(tmp_path / "again", seed=99)[5])
    write_arrayed_jcampdx(path, records[:5] + [other] + records[6:])
    second = _batch(config, tmp_path / "out")  # the same run, restarted over the rewritten file
    with Ledger(tmp_path / "out" / "ledger.sqlite") as ledger:
        assert ledger.counts() == {"processed": len(files), "quarantined": 0, "duplicate": 0, "replaced": 1}
        versions = ledger.versions("series.jdx#00005")
        assert [(v.version, v.replaced) for v in versions] == [(1, True), (2, False)]
        assert versions[1].sha256 == read_traces(path)[5].digest
    assert second.table["file"].tolist() == first.table["file"].tolist()
    assert second.table.loc[5, "ester_concentration"] != first.table.loc[5, "ester_concentration"]
    assert second.table.drop(index=5)["ester_concentration"].tolist() == \
        first.table.drop(index=5)["ester_concentration"].tolist()


def test_a_growing_file_is_parsed_from_its_new_blocks_and_a_rewrite_reads_it_whole(tmp_path):
    from kinetics.run.files import ReadyFile
    from kinetics.run.sources import ArrayedSource

    files = _fid_folder(tmp_path / "folder")
    records = [read(path) for path in files[:5]]
    whole = write_arrayed_jcampdx(tmp_path / "whole.jdx", records).read_bytes()
    pieces = block_chunks(whole)
    assert len(pieces) == 5 and b"".join(pieces) == whole
    (tmp_path / "a").mkdir()
    target = tmp_path / "a" / "series.jdx"
    source = ArrayedSource(load_run_config(_config(tmp_path / "c.toml", 'file = "a/series.jdx"')), tmp_path / "a")

    def items():
        return source.items([ReadyFile(target, "series.jdx", target.stat().st_size, target.stat().st_mtime_ns, "")])

    target.write_bytes(b"".join(pieces[:2]) + pieces[2][: len(pieces[2]) // 2])  # block 2 half written
    assert [item.block for item in items()] == [0, 1]
    target.write_bytes(b"".join(pieces[:4]))
    assert [item.block for item in items()] == [2, 3]  # only the new blocks are parsed
    digests = {t.block: t.digest for t in read_traces(tmp_path / "whole.jdx")}
    other = read(_fid_folder(tmp_path / "again", seed=5)[0])
    write_arrayed_jcampdx(target, [other] + records[1:])  # re-exported, block 0 changed
    again = items()
    assert [item.block for item in again] == [0, 1, 2, 3, 4]  # read whole: the change is seen
    assert again[0].digest != digests[0] and [i.digest for i in again[1:]] == [digests[b] for b in range(1, 5)]


def test_a_ledger_from_before_arrayed_files_gets_the_source_and_block_columns(tmp_path):
    old = tmp_path / "ledger.sqlite"
    db = sqlite3.connect(old)
    db.executescript("""CREATE TABLE files (id INTEGER PRIMARY KEY, path TEXT NOT NULL, sha256 TEXT NOT NULL,
        size_bytes INTEGER NOT NULL, mtime_ns INTEGER NOT NULL, status TEXT NOT NULL, error TEXT,
        version INTEGER NOT NULL, replaced INTEGER NOT NULL DEFAULT 0, duplicate_of INTEGER,
        acquired_utc TEXT, first_seen_utc TEXT NOT NULL, record_json TEXT, UNIQUE (path, version));
        INSERT INTO files VALUES (1, 'fid_0001.jdx', 'ab', 10, 1, 'quarantined', 'bad', 1, 0, NULL, NULL,
        '2026-01-01T00:00:00Z', NULL);""")
    db.commit()
    db.close()
    with Ledger(old) as ledger:
        assert ledger.trace_sources() == [("fid_0001.jdx", None, None)]
        from kinetics.errors import InputFileError

        def bad():
            raise InputFileError("x", "unreadable")

        ledger.ingest("s.jdx#00000", "cd", 0, 1, bad, source="s.jdx", block=0)
        assert ledger.trace_sources()[-1] == ("s.jdx#00000", "s.jdx", 0)


# ---------------------------------------------------------------- kill -9 while blocks are appended
def _counted(out: Path) -> int:
    if not (out / "ledger.sqlite").exists():
        return 0
    try:
        db = sqlite3.connect(f"file:{out / 'ledger.sqlite'}?mode=ro", uri=True, timeout=10)
        try:
            return db.execute("SELECT COUNT(*) FROM files WHERE status = 'processed'").fetchone()[0]
        finally:
            db.close()
    except sqlite3.OperationalError:
        return 0


def _wait_for(condition, timeout_s: float = 60.0) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.05)
    return False


def test_kill_minus_9_while_blocks_are_appended_loses_and_doubles_nothing(tmp_path):
    times = 60.0 + 60.0 * np.arange(30)
    rng = np.random.default_rng(40)
    simulate.write_series(tmp_path / "folder", times, _concentrations(times), SPECIES, rng, acquisition=ACQ,
                          kind="fid", snr=200.0, drift_ppm=0.1, scan_duration_s=20.0, amplitude_per_nucleus=1e4)
    (tmp_path / "source").mkdir()
    source = write_arrayed_jcampdx(tmp_path / "source" / "series.jdx",
                                   [read(p) for p in sorted((tmp_path / "folder").glob("fid_*.jdx"))])
    assert len(block_chunks(source.read_bytes())) == times.size
    (tmp_path / "incoming").mkdir()
    config = _config(tmp_path / "run.toml", 'file = "incoming/series.jdx"', extra="[live]\npoll_interval_s = 0.1\n")
    out = tmp_path / "live"
    command = [sys.executable, "-m", "kinetics.cli", "watch", str(config), "--out", str(out), "--poll"]
    replay = subprocess.Popen([sys.executable, "-m", "watchers.replay", str(source), str(tmp_path / "incoming"),
                               "--interval", "0.8"], stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    kills = np.random.default_rng(2026)
    progress = []
    while replay.poll() is None and len(progress) < 5:  # kill while the file grows
        before = _counted(out)
        watcher = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        _wait_for(lambda: _counted(out) > before or _counted(out) == times.size)
        time.sleep(kills.uniform(0.0, 0.3))
        watcher.send_signal(signal.SIGKILL)
        watcher.wait()
        assert watcher.returncode == -signal.SIGKILL
        progress.append(_counted(out))
    assert sum(0 < n < times.size for n in progress) >= 2, progress  # kills landed mid-run
    assert replay.wait(timeout=120) == 0
    final = subprocess.run(command + ["--idle-minutes", "0.02"], capture_output=True, text=True, timeout=300)
    assert final.returncode == 0, final.stderr[-2000:]
    (tmp_path / "done").mkdir()
    (tmp_path / "done" / "series.jdx").write_bytes(source.read_bytes())
    batch_run(plan_from_config(load_run_config(config), folder=tmp_path / "done"), tmp_path / "batch",
              parallel=False, figures=False)
    with Ledger(out / "ledger.sqlite") as live, Ledger(tmp_path / "batch" / "ledger.sqlite") as done:
        paths = [row.path for row in live.files()]
        assert sorted(paths) == [f"series.jdx#{i:05d}" for i in range(times.size)]  # each block exactly once
        assert live.counts() == {"processed": times.size, "quarantined": 0, "duplicate": 0, "replaced": 0}
        assert live.comparable_rows() == done.comparable_rows()
        assert live.integrity_ok()
    live_fit = json.loads((out / "fit.json").read_text())
    assert live_fit["final"] and live_fit["fit"] == json.loads((tmp_path / "batch" / "fit.json").read_text())["fit"]
    print("processed at each kill:", progress)


# ---------------------------------------------------------------- the 19F demo, nuclei at 1.4 T
def test_the_19f_demo_config_is_what_the_generator_writes():
    assert (ROOT / "configs" / "demo_19f.toml").read_text() == demo.f19_config_text(
        "../demo_series/f19_arrayed/series.jdx")


def test_19f_demo_recovers_k_and_puts_the_standard_at_its_convention(tmp_path):
    config = load_run_config(ROOT / "configs" / "demo_19f.toml")
    traces = read_traces(config.file)
    assert len(traces) == demo.F19_TRACES and len({t.digest for t in traces}) == demo.F19_TRACES
    # the reference lands at its convention: PhCF3 at -63.72 ppm on the CCl3F scale (from
    # memory); the files' own axis is off (so the check can fail), the ester's line then
    # sits at the shift the generator gave it
    raw = config.pipeline.__class__.from_config({**dict(config.processing), "reference": None})(traces[0].record)
    assert peak_position(raw.spectrum, -63.5, 0.5) == pytest.approx(demo.F19_STANDARD_PPM + demo.F19_AXIS_OFFSET_PPM,
                                                                    abs=0.02)
    processed = config.pipeline(traces[0].record)
    assert processed.succeeded
    assert peak_position(processed.spectrum, -63.72, 0.2) == pytest.approx(nuclei.INTERNAL_REFERENCES[0].shift_ppm,
                                                                          abs=0.005)
    assert peak_position(processed.spectrum, demo.F19_ESTER_PPM, 0.2) == pytest.approx(demo.F19_ESTER_PPM, abs=0.01)
    summary = batch_run(config, tmp_path / "out", figures=False)
    k = summary.outcome.k
    low, high = k["ci95"]
    print(f"19F demo: k = {k['value']:.5g} s^-1, 95 % {low:.5g} .. {high:.5g}, truth {demo.F19_K_PER_S:g}")
    assert low < demo.F19_K_PER_S < high  # the truth inside the quoted 95 % interval
    assert k["value"] == pytest.approx(demo.F19_K_PER_S, rel=0.05)
    truth = json.loads((ROOT / "demo_series" / "f19_arrayed" / "truth.json").read_text())
    assert truth["scenario"]["k_per_s"] == demo.F19_K_PER_S and truth["nucleus"] == "19F"


@pytest.mark.parametrize("nucleus, stated_mhz", [("19F", 56.088), ("31P", 24.130)])
def test_larmor_at_1p4_tesla_against_each_blocks_observe_frequency(tmp_path, nucleus, stated_mhz):
    # IUPAC 2001 Xi(19F) = 94.094011 %, Xi(31P) = 40.480742 % (from memory) times the CODATA
    # proton ratio (scipy.constants): at 1.4 T 19F resonates at 56.09 MHz and 31P at 24.13 MHz.
    acquisition = simulate.Acquisition(observe_mhz=stated_mhz, n_points=512, spectral_width_ppm=40.0,
                                       carrier_ppm=0.0, nucleus=nucleus)
    species = [simulate.SpeciesSignals("x", (simulate.Multiplet(5.0, 1),))]
    rng = np.random.default_rng(3)
    records = [simulate.simulate_spectrum(species, {"x": 1.0}, rng, acquisition) for _ in range(3)]
    path = write_arrayed_jcampdx(tmp_path / "series.jdx", records)
    assert f"##.OBSERVE FREQUENCY= {stated_mhz:g}" in path.read_text()
    for trace in read_traces(path):
        assert trace.record.nucleus == nucleus and trace.record.observe_mhz == pytest.approx(stated_mhz)
        assert nuclei.larmor_mhz(1.4, nucleus) == pytest.approx(trace.record.observe_mhz, abs=0.01)
    demo_trace = read_traces(ROOT / "demo_series" / "f19_arrayed" / "series.jdx")[0]
    assert nuclei.field_tesla(demo_trace.record.observe_mhz, "19F") == pytest.approx(1.4, abs=2e-4)
