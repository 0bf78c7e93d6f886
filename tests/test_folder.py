"""Completeness detection on real files: quiet period, temporary names, renames, order.

A writer thread writes real files while the tracker polls the real clock; quiet periods
are short (0.3-0.4 s) so the suite stays fast.  No timing is asserted, only what was
handed over and in which order.
"""

from __future__ import annotations

import os
import threading
import time
from pathlib import Path

import pytest

from kinetics.errors import InputFileError
from watchers.folder import FolderWatcher, WatchSpec, is_temporary, wanted


def drain(watcher: FolderWatcher, until, timeout_s: float = 10.0, step_s: float = 0.02):
    """Call ``ready()`` until ``until(taken)`` holds; returns every file handed over."""
    taken = []
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        for item in watcher.ready():
            taken.append(item)
            watcher.mark_taken(item)
        if until(taken):
            return taken
        time.sleep(step_s)
    return taken


@pytest.mark.parametrize("name", [".spec_1.dx.part", "spec_1.dx.tmp", "spec_1.dx~", "~lock",
                                  ".hidden", "#spec#", "spec.part"])
def test_temporary_names_are_ignored(name):
    assert is_temporary(name)
    assert not wanted(name, WatchSpec(Path(".")))


def test_patterns_and_recursion():
    spec = WatchSpec(Path("."), include=("*.dx", "*.jdx"), exclude=("blank*",))
    assert wanted("s1.dx", spec) and wanted("s1.jdx", spec)
    assert not wanted("s1.csv", spec) and not wanted("blank_1.dx", spec)
    assert not wanted("sub/s1.dx", spec)  # not recursive
    assert wanted("sub/s1.dx", WatchSpec(Path("."), include=("*.dx",), recursive=True))
    assert not wanted(".sub/s1.dx", WatchSpec(Path("."), recursive=True))


def test_missing_folder_is_a_clear_error(tmp_path):
    watcher = FolderWatcher(WatchSpec(tmp_path / "nope", poll=True))
    with pytest.raises(InputFileError, match="does not exist"):
        watcher.start()


@pytest.mark.parametrize("poll", [True, False], ids=["polling", "watchdog"])
def test_file_written_in_pauses_is_taken_once_and_whole(tmp_path, poll):
    # 10 chunks written in place, pauses (0.12 s) longer than the event / poll latency
    # (0.02 s) but shorter than the quiet period (0.4 s): handed over once, complete.
    data = b"x" * 10_000
    target = tmp_path / "slow.dx"

    def write():
        with open(target, "wb") as handle:
            for offset in range(0, len(data), 1000):
                handle.write(data[offset:offset + 1000])
                handle.flush()
                time.sleep(0.12)

    watcher = FolderWatcher(WatchSpec(tmp_path, quiet_period_s=0.4, poll=poll, poll_interval_s=0.02,
                                      rescan_interval_s=60))
    watcher.start()
    writer = threading.Thread(target=write)
    writer.start()
    seen_sizes = []
    deadline = time.monotonic() + 10
    taken = []
    while time.monotonic() < deadline and not (taken and not writer.is_alive()):
        for item in watcher.ready():
            taken.append(item)
            seen_sizes.append(item.size_bytes)
            watcher.mark_taken(item)
        time.sleep(0.02)
    writer.join()
    taken += drain(watcher, lambda t: False, timeout_s=0.8)  # nothing more may come
    watcher.stop()
    assert [item.relpath for item in taken] == ["slow.dx"]
    assert seen_sizes == [len(data)]


def test_rename_from_temporary_name_and_start_order(tmp_path):
    # files present at start come first, in modification-time order whatever their names
    for index, name in enumerate(["c.dx", "a.dx", "b.dx"]):
        path = tmp_path / name
        path.write_text(name)
        os.utime(path, ns=(1_000_000_000 * (index + 1),) * 2)
    watcher = FolderWatcher(WatchSpec(tmp_path, quiet_period_s=0.3, poll=True, poll_interval_s=0.02))
    watcher.start()
    first = drain(watcher, lambda t: len(t) >= 3)
    assert [item.relpath for item in first] == ["c.dx", "a.dx", "b.dx"]
    partial = tmp_path / ".d.dx.part"
    partial.write_text("half")
    later = drain(watcher, lambda t: False, timeout_s=0.6)
    assert later == []  # the temporary name is never taken
    partial.write_text("whole")
    os.replace(partial, tmp_path / "d.dx")
    later = drain(watcher, lambda t: len(t) >= 1)
    assert [(item.relpath, item.size_bytes) for item in later] == [("d.dx", 5)]


def test_watchdog_observer_sees_created_and_moved_files(tmp_path):
    # event mode with a long safety-listing interval, so the events do the work
    watcher = FolderWatcher(WatchSpec(tmp_path, quiet_period_s=0.3, rescan_interval_s=60))
    watcher.start()
    try:
        (tmp_path / "one.dx").write_text("1")
        partial = tmp_path / ".two.dx.part"
        partial.write_text("22")
        os.replace(partial, tmp_path / "two.dx")
        (tmp_path / "sub").mkdir()
        (tmp_path / "sub" / "three.dx").write_text("3")  # not recursive: ignored
        taken = drain(watcher, lambda t: len(t) >= 2)
        assert sorted(item.relpath for item in taken) == ["one.dx", "two.dx"]
        assert drain(watcher, lambda t: False, timeout_s=0.5) == []
    finally:
        watcher.stop()
