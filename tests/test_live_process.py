"""The watcher as a real process: kill -9 and restart, SIGTERM, unwritable and full disks.

The watcher runs as ``python tests/test_live_support.py watch ...`` (the small real
pipeline of that module) and the replay as ``python -m watchers.replay``; both are real
processes on real files.  A full disk is a per-process file-size limit (RLIMIT_FSIZE,
POSIX setrlimit): writes beyond it fail with EFBIG exactly as on a full file system.
"""

from __future__ import annotations

import json
import os
import resource
import signal
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import test_live_support as support  # noqa: E402

from kinetics.store import Ledger  # noqa: E402

HELPER = str(Path(__file__).with_name("test_live_support.py"))


def start_watcher(folder: Path, out: Path, *extra: str, **popen) -> subprocess.Popen:
    command = [sys.executable, HELPER, "watch", "--folder", str(folder), "--out", str(out),
               "--quiet-period", "0.2", *extra]
    return subprocess.Popen(command, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
                            **popen)


def wait_for(condition, timeout_s: float = 30.0) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if condition():
            return True
        time.sleep(0.05)
    return False


def processed_in(out: Path) -> int:
    try:
        return json.loads((out / "fit.json").read_text())["counts"]["processed"]
    except (OSError, ValueError, KeyError):
        return -1


def counted(out: Path) -> int:
    """Processed files in the ledger, read through a read-only connection (0 if none yet)."""
    import sqlite3

    if not (out / "ledger.sqlite").exists():
        return 0
    try:
        db = sqlite3.connect(f"file:{out / 'ledger.sqlite'}?mode=ro", uri=True, timeout=10)
        try:
            return db.execute("SELECT COUNT(*) FROM files WHERE status = 'processed'").fetchone()[0]
        finally:
            db.close()
    except sqlite3.OperationalError:  # tables not created yet
        return 0


def test_kill_minus_9_during_a_replay_five_times_loses_and_doubles_nothing(tmp_path):
    source, folder, out = tmp_path / "src", tmp_path / "in", tmp_path / "out"
    support.write_series(source, 200, seed=21)
    folder.mkdir()
    replay = subprocess.Popen([sys.executable, "-m", "watchers.replay", str(source), str(folder),
                               "--interval", "0.08", "--chunks", "4"],
                              stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    rng = np.random.default_rng(2026)
    progress = []
    for _ in range(5):
        before = counted(out)
        watcher = start_watcher(folder, out)
        # kill while it works: once it has taken new files, after a random extra moment
        wait_for(lambda: counted(out) > before or counted(out) == 200)
        time.sleep(rng.uniform(0.0, 0.4))
        watcher.kill()
        watcher.wait()
        assert watcher.returncode == -signal.SIGKILL
        progress.append(counted(out))
    print("processed at each kill:", progress)
    assert sum(0 < n < 200 for n in progress) >= 3, progress  # kills landed mid-run
    assert replay.wait(timeout=60) == 0
    final = start_watcher(folder, out, "--idle", "1.0")
    stdout, stderr = final.communicate(timeout=90)
    assert final.returncode == 0, stderr
    batch = subprocess.run([sys.executable, HELPER, "batch", "--folder", str(source),
                            "--out", str(tmp_path / "batch")], capture_output=True, text=True)
    assert batch.returncode == 0, batch.stderr
    with Ledger(out / "ledger.sqlite") as live, Ledger(tmp_path / "batch" / "ledger.sqlite") as done:
        paths = [row.path for row in live.files()]
        assert sorted(paths) == sorted(p.name for p in source.iterdir())  # each exactly once
        assert live.counts()["processed"] == 200
        assert live.comparable_rows() == done.comparable_rows()
        assert live.integrity_ok()
    live_fit = json.loads((out / "fit.json").read_text())
    batch_fit = json.loads((tmp_path / "batch" / "fit.json").read_text())
    assert live_fit["final"] and live_fit["fit"] == batch_fit["fit"]
    assert [p.name for p in out.iterdir() if p.name.endswith(".tmp")] == []


def test_sigterm_ends_the_run_cleanly_with_a_final_report(tmp_path):
    folder, out = tmp_path / "in", tmp_path / "out"
    support.write_series(folder, 20, seed=4)
    watcher = start_watcher(folder, out)
    assert wait_for(lambda: processed_in(out) == 20)
    watcher.send_signal(signal.SIGTERM)
    stdout, stderr = watcher.communicate(timeout=30)
    assert watcher.returncode == 0, stderr
    report = json.loads((out / "fit.json").read_text())
    assert report["final"] is True and report["stop_reason"] == "SIGTERM received"
    assert report["fit"]["converged"] and report["n_points"] == 20
    page = (out / "index.html").read_text()
    assert "SIGTERM received" in page and 'http-equiv="refresh"' not in page


def test_missing_input_folder_is_a_clear_error(tmp_path):
    result = start_watcher(tmp_path / "nowhere", tmp_path / "out")
    stdout, stderr = result.communicate(timeout=30)
    assert result.returncode == 2, stderr
    assert "nowhere: the input folder does not exist" in stderr


def test_read_only_output_folder_is_a_clear_error_and_nothing_is_written(tmp_path):
    folder, out = tmp_path / "in", tmp_path / "out"
    support.write_series(folder, 3, seed=2)
    out.mkdir()
    mounted = False
    if os.geteuid() == 0:
        # root ignores permission bits: a read-only tmpfs is a read-only folder for root too
        mounted = subprocess.run(["mount", "-t", "tmpfs", "-o", "ro,size=64k", "tmpfs", str(out)],
                                 capture_output=True).returncode == 0
        if not mounted:
            pytest.skip("running as root without permission to mount a read-only tmpfs")
    else:
        os.chmod(out, 0o555)
    try:
        watcher = start_watcher(folder, out)
        stdout, stderr = watcher.communicate(timeout=30)
        assert watcher.returncode == 2, stderr
        assert "output folder is not writable" in stderr
        assert list(out.iterdir()) == []
    finally:
        if mounted:
            subprocess.run(["umount", str(out)], check=True)
        else:
            os.chmod(out, 0o755)


def test_full_disk_stops_with_a_clear_error_and_the_ledger_intact(tmp_path):
    folder, out = tmp_path / "in", tmp_path / "out"
    support.write_series(folder, 60, seed=9)
    limit = 160 * 1024  # bytes per file: the ledger's write-ahead log reaches it first

    def cap():
        resource.setrlimit(resource.RLIMIT_FSIZE, (limit, limit))

    watcher = start_watcher(folder, out, preexec_fn=cap)
    stdout, stderr = watcher.communicate(timeout=60)
    assert watcher.returncode == 2, stderr
    assert "disk full or file size limit reached" in stderr
    with Ledger(out / "ledger.sqlite") as ledger:
        assert ledger.integrity_ok()
        taken = ledger.n_processed()
        assert 0 < taken < 60
        per_file = ledger.measurements().groupby("path").size()
        assert set(per_file) == {2}  # never half a file
    for name in ("fit.json",):
        if (out / name).exists():
            json.loads((out / name).read_text())  # whole, or the previous whole version
    assert [p.name for p in out.iterdir() if p.name.endswith(".tmp")] == []
    # with room again the run resumes and completes
    again = start_watcher(folder, out, "--idle", "0.8")
    stdout, stderr = again.communicate(timeout=60)
    assert again.returncode == 0, stderr
    assert processed_in(out) == 60


def test_watchdog_mode_process_follows_a_replay(tmp_path):
    source, folder, out = tmp_path / "src", tmp_path / "in", tmp_path / "out"
    support.write_series(source, 25, seed=8)
    folder.mkdir()
    watcher = start_watcher(folder, out, "--events")
    assert wait_for(lambda: processed_in(out) == 0)  # the loop is up (first page written)
    replay = subprocess.run([sys.executable, "-m", "watchers.replay", str(source), str(folder),
                             "--interval", "0.03", "--chunks", "10", "--chunk-pause", "0.01"],
                            capture_output=True, text=True)
    assert replay.returncode == 0, replay.stderr
    assert wait_for(lambda: processed_in(out) == 25)
    watcher.send_signal(signal.SIGTERM)
    stdout, stderr = watcher.communicate(timeout=30)
    assert watcher.returncode == 0, stderr
    with Ledger(out / "ledger.sqlite") as ledger:
        assert [row.path for row in ledger.files()] == [f"spec_{i:04d}.csv" for i in range(1, 26)]
