"""A file is its content: re-exports in place, duplicate copies and links, batch = live.

Real files in ``tmp_path`` throughout.  The science is either the small pipeline of
``test_live_support`` (invented first-order A -> B, truth set there) or the project's own
JCAMP-DX series measured by the run engine (spectra from :mod:`kinetics.simulate`, truth
set here), so line shapes are shared across the series and one changed file moves every
row.  Every live run is compared with a batch run over the folder as it is at the end:
the ledger rows that count, the measurements, the fit.

Content identity is checked against the world: the ledger's SHA-256 of a file must equal
:mod:`hashlib`'s over the bytes on disk.
"""

from __future__ import annotations

import hashlib
import logging
import os
import shutil
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

sys.path.insert(0, str(Path(__file__).parent))
import test_live_support as support  # noqa: E402
from test_live_real import CONFIG as SERIES_CONFIG  # noqa: E402  (the simulated A -> B run, standard S)

from kinetics.run import batch_run, plan_from_config  # noqa: E402
from kinetics.run.engine import process_ready, ready_files  # noqa: E402
from kinetics.run.files import WatchSpec, attribution_key, list_wanted, stat_signature  # noqa: E402
from kinetics.store import Ledger  # noqa: E402
from watchers.folder import CompletenessTracker, FolderWatcher  # noqa: E402
from watchers.live import LiveOptions, _StopFlag, run_live  # noqa: E402


def options(out: Path, **changes) -> LiveOptions:
    base = dict(out_dir=out, view=False, tick_s=0.02, max_duration_s=60.0, handle_signals=False)
    base.update(changes)
    return LiveOptions(**base)


def sha256(path: Path) -> str:
    return hashlib.sha256(Path(path).read_bytes()).hexdigest()


def current_view(ledger: Ledger) -> tuple:
    """What counts in a ledger, without version numbers, ids or times: the current rows
    (path, content, status, error, the counted twin, acquisition time), the counted
    measurements and the per-file records."""
    every = {row.id: row.path for row in ledger.files()}
    rows = sorted((row.path, row.sha256, row.size_bytes, row.status, row.error,
                   every.get(row.duplicate_of), row.acquired_utc)
                  for row in ledger.files(current_only=True))
    return rows, ledger.measurements(), ledger.records()


def assert_same_counting(live_ledger: Path, batch_ledger: Path) -> None:
    with Ledger(live_ledger) as live, Ledger(batch_ledger) as batch:
        live_rows, live_measured, live_records = current_view(live)
        batch_rows, batch_measured, batch_records = current_view(batch)
        assert live_rows == batch_rows
        pd.testing.assert_frame_equal(live_measured, batch_measured, check_exact=True)
        assert live_records == batch_records


def rewrite_in_place(path: Path, new: bytes) -> None:
    """Write ``new`` over ``path`` (same inode, same size), then put the modification time
    back as it was: a re-export that only the content (and the status-change time) tells."""
    before = os.stat(path)
    assert len(new) == before.st_size
    with open(path, "r+b") as handle:
        handle.write(new)
    os.utime(path, ns=(before.st_atime_ns, before.st_mtime_ns))
    after = os.stat(path)
    assert (after.st_size, after.st_mtime_ns, after.st_ino) == (before.st_size, before.st_mtime_ns, before.st_ino)


def same_size_csv(original: str, new: str) -> tuple[str, str]:
    """Pad the shorter test-format text with trailing zeros on its ppm values (the numbers
    keep their value) until both have the same size."""
    texts = [original, new]
    short = 0 if len(original) < len(new) else 1
    lines = texts[short].split("\n")
    missing = abs(len(original) - len(new))
    for index in range(4, len(lines)):
        if missing == 0:
            break
        if "," in lines[index]:
            ppm, value = lines[index].split(",")
            lines[index] = f"{ppm}0,{value}"
            missing -= 1
    texts[short] = "\n".join(lines)
    assert len(texts[0]) == len(texts[1]) and texts[0] != texts[1]
    return texts[0], texts[1]


# ---------------------------------------------------------------- the watcher's trigger
def test_a_rewrite_with_the_same_size_and_mtime_makes_a_taken_file_pending_again(tmp_path):
    now = [0.0]
    tracker = CompletenessTracker(tmp_path, quiet_period_s=1.0, clock=lambda: now[0])
    path = tmp_path / "s.csv"
    path.write_bytes(b"first version")
    tracker.touch("s.csv", os.stat(path))
    now[0] = 2.0
    (ready,) = tracker.ready()
    assert ready.signature == stat_signature(os.stat(path))
    tracker.mark_taken(ready.relpath, ready.signature)
    tracker.touch("s.csv", os.stat(path))  # a listing: nothing changed, nothing to do
    assert len(tracker) == 0
    rewrite_in_place(path, b"other version")
    tracker.touch("s.csv", os.stat(path))  # a listing sees the status-change time move
    assert len(tracker) == 1
    now[0] = 4.0
    (again,) = tracker.ready()
    assert (again.size_bytes, again.mtime_ns) == (ready.size_bytes, ready.mtime_ns)
    tracker.mark_taken(again.relpath, again.signature)
    # a file event names it again with an unchanged signature (times that cannot tell):
    # it is looked at (hashed) again all the same
    tracker.touch("s.csv", event=True)
    assert len(tracker) == 1


def test_the_engine_hashes_a_file_it_is_handed_even_when_size_and_mtime_are_known(tmp_path):
    path = tmp_path / "spec_0001.csv"
    first, second = same_size_csv(support.spectrum_text(0.0, np.random.default_rng(1)),
                                  support.spectrum_text(0.0, np.random.default_rng(2)))
    path.write_text(first)
    ledger = Ledger(":memory:")
    known = ledger.latest_stat()
    process_ready(ready_files(WatchSpec(tmp_path, include=("*.csv",))), ledger, support.measure, known)
    rewrite_in_place(path, second.encode())
    rows, _, _ = process_ready(ready_files(WatchSpec(tmp_path, include=("*.csv",))), ledger,
                               support.measure, known)
    assert [(row.path, row.version, row.status) for row in rows] == [("spec_0001.csv", 2, "processed")]
    assert [row.sha256 for row in ledger.files(current_only=True)] == [sha256(path)]
    ledger.close()


# ---------------------------------------------------------------- re-exports, live = batch
@pytest.mark.parametrize("poll", [True, False], ids=["listing", "file events"])
def test_live_run_sees_a_same_size_same_mtime_rewrite_as_batch_does(tmp_path, poll):
    folder = tmp_path / "in"
    support.write_series(folder, 6, seed=4)
    target = folder / "spec_0003.csv"
    # the re-export: the same acquisition (same header time), other numbers
    original, export = same_size_csv(target.read_text(),
                                     support.spectrum_text(120.0, np.random.default_rng(99)))
    target.write_text(original)
    flag = _StopFlag()
    state_of = {"rewritten": False}

    def on_turn(state):
        counts = state.ledger.counts()
        if not state_of["rewritten"] and counts["processed"] == 6:
            rewrite_in_place(target, export.encode())
            state_of["rewritten"] = True
        elif state_of["rewritten"] and counts["replaced"] == 1:
            flag.set("re-export taken")

    plan = support.pipeline(folder, poll=poll)
    # with file events, no safety listing during the run: the event alone must do it
    plan = replace(plan, spec=replace(plan.spec, rescan_interval_s=600.0))
    live = run_live(plan, options(tmp_path / "live", max_duration_s=30.0), stop=flag, on_turn=on_turn)
    assert live.stop_reason == "re-export taken"
    batch = batch_run(support.pipeline(folder), tmp_path / "batch")
    assert_same_counting(tmp_path / "live" / "ledger.sqlite", tmp_path / "batch" / "ledger.sqlite")
    with Ledger(tmp_path / "live" / "ledger.sqlite") as ledger:
        old, new = ledger.versions("spec_0003.csv")
        assert old.replaced and not new.replaced and new.sha256 == sha256(target) != old.sha256
    assert live.outcome.fit == batch.outcome.fit


def simulate_series(folder: Path, seed: int, n: int = 8) -> None:
    """Invented first-order A -> B (k = 1.5e-3 1/s, 0.4 mol/L, standard S at 0.05 mol/L)."""
    from kinetics import simulate

    a = simulate.SpeciesSignals("A", (simulate.Multiplet(2.0, 3.0, width_hz=1.5),))
    b = simulate.SpeciesSignals("B", (simulate.Multiplet(3.5, 3.0, width_hz=1.5),))
    s = simulate.SpeciesSignals("S", (simulate.Multiplet(0.0, 12.0, width_hz=1.5),))
    times = np.arange(n) * 150.0
    truth = {"A": 0.4 * np.exp(-1.5e-3 * times), "B": 0.4 * (1 - np.exp(-1.5e-3 * times)),
             "S": np.full(n, 0.05)}
    simulate.write_series(folder, times, truth, [a, b, s], np.random.default_rng(seed), snr=120.0,
                          acquisition=simulate.Acquisition(observe_mhz=60.0, n_points=2048))


def same_size_jcamp(original: bytes, new: bytes) -> tuple[bytes, bytes]:
    """Pad the shorter file's ``##TITLE`` line (its first line) with dots to equal sizes."""
    texts = [original, new]
    short = 0 if len(original) < len(new) else 1
    head, rest = texts[short].split(b"\n", 1)
    texts[short] = head + b"." * abs(len(original) - len(new)) + b"\n" + rest
    assert len(texts[0]) == len(texts[1]) and texts[0] != texts[1]
    return texts[0], texts[1]


def test_live_series_run_with_a_re_exported_spectrum_ends_with_the_batch_rows_and_k(tmp_path):
    folder, scratch = tmp_path / "incoming", tmp_path / "scratch"
    simulate_series(folder, seed=3)
    simulate_series(scratch, seed=77)  # the same acquisitions with other noise: a re-export
    target = folder / "spectrum_0005.jdx"
    original, export = same_size_jcamp(target.read_bytes(), (scratch / target.name).read_bytes())
    target.write_bytes(original)
    for path in sorted(folder.glob("*.jdx")):  # written in acquisition order, a second apart
        index = int(path.stem.split("_")[1])
        os.utime(path, ns=(1_767_258_000_000_000_000 + index * 10**9,) * 2)
    (tmp_path / "run.toml").write_text(SERIES_CONFIG.format(folder="incoming"))
    flag = _StopFlag()
    state_of = {"rewritten": False}

    def on_turn(state):
        counts = state.ledger.counts()
        if not state_of["rewritten"] and counts["processed"] == 8:
            rewrite_in_place(target, export)
            state_of["rewritten"] = True
        elif state_of["rewritten"] and counts["replaced"] == 1:
            flag.set("re-export taken")

    plan = plan_from_config(tmp_path / "run.toml")
    live = run_live(plan, options(tmp_path / "live", max_duration_s=60.0), stop=flag, on_turn=on_turn)
    assert live.stop_reason == "re-export taken"
    batch = batch_run(tmp_path / "run.toml", tmp_path / "batch", parallel=False)
    assert_same_counting(tmp_path / "live" / "ledger.sqlite", tmp_path / "batch" / "ledger.sqlite")
    pd.testing.assert_frame_equal(live.table, batch.table, check_exact=True)
    assert live.outcome.k == batch.outcome.k
    with Ledger(tmp_path / "live" / "ledger.sqlite") as ledger:
        old, new = ledger.versions("spectrum_0005.jdx")
        assert new.sha256 == sha256(target) != old.sha256 and old.replaced
        # the re-export was measured anew: its integrals are not the first version's
        measured = [row for row in ledger.comparable_rows() if row[0] == "spectrum_0005.jdx" and isinstance(row[1], int)]
        integrals = {version: {} for version in (1, 2)}
        for path, version, signal, integral, *_ in measured:
            integrals[version][signal] = integral
        assert integrals[1].keys() == integrals[2].keys() == {"A", "B", "S"}
        assert integrals[1] != integrals[2]


# ---------------------------------------------------------------- duplicate copies
def _copy(source: Path, target: Path, mtime_ns: int | None = None) -> None:
    shutil.copyfile(source, target)
    if mtime_ns is not None:
        os.utime(target, ns=(mtime_ns, mtime_ns))


@pytest.mark.parametrize("arrival", ["winner first", "winner last"])
def test_duplicate_copies_are_attributed_by_acquisition_then_name_not_arrival(tmp_path, arrival):
    # spec_0004.csv and two copies of its bytes: "copy_a.csv" and "zz_copy.csv".  Same
    # header time, so the name decides (digits as numbers): copy_a < spec_0004 < zz_copy.
    folder, staging = tmp_path / "in", tmp_path / "staging"
    support.write_series(staging, 6, seed=8)
    folder.mkdir()
    for path in staging.glob("spec_*.csv"):
        shutil.copy2(path, folder / path.name)
    _copy(staging / "spec_0004.csv", folder / "zz_copy.csv")
    if arrival == "winner last":  # copy_a arrives after the others were counted
        late = "copy_a.csv"
    else:  # copy_a is there from the start, spec_0004 arrives later
        late = "spec_0004.csv"
        (folder / "spec_0004.csv").unlink()
        _copy(staging / "spec_0004.csv", folder / "copy_a.csv")
    flag = _StopFlag()
    state_of = {"dropped": False}

    def on_turn(state):
        if not state_of["dropped"] and state.ledger.counts()["processed"] == 6:
            _copy(staging / "spec_0004.csv", folder / (late + ".part"))
            os.replace(folder / (late + ".part"), folder / late)  # arrives whole, by rename
            state_of["dropped"] = True
        elif state_of["dropped"] and state.ledger.versions(late):
            flag.set("copy taken")

    live = run_live(support.pipeline(folder), options(tmp_path / "live", max_duration_s=30.0), stop=flag,
                    on_turn=on_turn)
    assert live.stop_reason == "copy taken"
    batch = batch_run(support.pipeline(folder), tmp_path / "batch")
    with Ledger(tmp_path / "live" / "ledger.sqlite") as a, Ledger(tmp_path / "batch" / "ledger.sqlite") as b:
        assert a.comparable_rows() == b.comparable_rows()
        status = {row.path: (row.status, row.duplicate_of and b.row(row.duplicate_of).path) for row in b.files()}
    assert status["copy_a.csv"] == ("processed", None)
    assert status["spec_0004.csv"] == ("duplicate", "copy_a.csv")
    assert status["zz_copy.csv"] == ("duplicate", "copy_a.csv")
    assert live.counts == batch.counts == {"processed": 6, "quarantined": 0, "duplicate": 2, "replaced": 0}
    assert live.outcome.fit == batch.outcome.fit
    # the table counts the content once, under the copy the rule chose
    assert live.table["path"].tolist().count("copy_a.csv") == 1 and "spec_0004.csv" not in live.table["path"].tolist()


def _measure_without_header_time(path):
    return replace(support.measure(path), acquired_utc=None)


@pytest.mark.parametrize("order", [("a.csv", "b.csv"), ("b.csv", "a.csv")])
def test_without_a_header_time_the_earliest_modification_time_counts_whatever_arrives_first(tmp_path, order):
    text = support.spectrum_text(0.0, np.random.default_rng(5))
    (tmp_path / "a.csv").write_text(text)
    (tmp_path / "b.csv").write_text(text)
    os.utime(tmp_path / "a.csv", ns=(2_000_000_000_000_000_000,) * 2)
    os.utime(tmp_path / "b.csv", ns=(1_000_000_000_000_000_000,) * 2)  # b was written first
    spec = WatchSpec(tmp_path, include=("*.csv",))
    by_name = {item.relpath: item for item in ready_files(spec)}
    batch = Ledger(":memory:")
    process_ready(ready_files(spec), batch, _measure_without_header_time)
    live = Ledger(":memory:")
    taken: list = []
    for name in order:  # one file per turn, in arrival order
        process_ready([by_name[name]], live, _measure_without_header_time, taken=taken)
    assert live.comparable_rows() == batch.comparable_rows()
    counted = [row.path for row in batch.files() if row.status == "processed"]
    assert counted == ["b.csv"]
    # what the in-memory state was told, last word per path: b counts, a does not
    last = {row.path: row.status for row, _ in taken}
    assert last == {"a.csv": "duplicate", "b.csv": "processed"}
    batch.close()
    live.close()


def test_attribution_key_orders_by_time_then_natural_name():
    from datetime import datetime, timezone

    moment = datetime(2026, 1, 1, tzinfo=timezone.utc)
    assert attribution_key(moment, 0, "s10.csv") > attribution_key(moment, 0, "s9.csv")  # digits as numbers
    assert attribution_key(None, 1, "z.csv") < attribution_key(None, 2, "a.csv")  # time before name
    # a key recomputed from the ledger's ISO text compares equal (exact integers)
    from kinetics.run.files import ledger_attribution_key

    later = datetime(2026, 1, 1, 0, 0, 0, 123456, tzinfo=timezone.utc)
    assert ledger_attribution_key(later.isoformat(), 0, "x") == attribution_key(later, 0, "x")


# ---------------------------------------------------------------- symbolic links
def _linked_folder(tmp_path: Path) -> tuple[Path, Path]:
    folder, outside = tmp_path / "in", tmp_path / "elsewhere"
    support.write_series(folder, 5, seed=12)
    support.write_series(outside, 2, seed=13, prefix="foreign")
    os.symlink(outside / "foreign_0001.csv", folder / "outside.csv")
    os.symlink(folder / "loop_b.csv", folder / "loop_a.csv")
    os.symlink(folder / "loop_a.csv", folder / "loop_b.csv")
    os.symlink(outside, folder / "sub_elsewhere")
    return folder, outside


LINKS = ("outside.csv", "loop_a.csv", "loop_b.csv", "sub_elsewhere")


def _notes(caplog) -> list[str]:
    return [record.getMessage() for record in caplog.records if record.levelno == logging.WARNING]


def test_links_out_of_the_folder_or_looping_are_skipped_with_one_note_each_in_batch(tmp_path, caplog):
    folder, _ = _linked_folder(tmp_path)
    plan = support.pipeline(folder)
    plan = replace(plan, spec=replace(plan.spec, recursive=True))
    with caplog.at_level(logging.WARNING):
        summary = batch_run(plan, tmp_path / "batch")
    notes = _notes(caplog)
    for link in LINKS:
        assert sum(note.startswith(f"{link}:") for note in notes) == 1, (link, notes)
    assert "outside the run folder" in next(n for n in notes if n.startswith("outside.csv:"))
    assert "loop" in next(n for n in notes if n.startswith("loop_a.csv:"))
    with Ledger(tmp_path / "batch" / "ledger.sqlite") as ledger:
        assert sorted(row.path for row in ledger.files()) == [f"spec_{i:04d}.csv" for i in range(1, 6)]
    assert summary.counts["processed"] == 5


def test_links_out_of_the_folder_are_skipped_live_as_in_batch_and_named_once(tmp_path, caplog):
    folder, outside = _linked_folder(tmp_path)
    flag = _StopFlag()
    state_of = {"linked": False}

    def on_turn(state):
        if not state_of["linked"]:
            # a link made while the run is live: a file event and the listings see it
            os.symlink(outside / "foreign_0002.csv", folder / "late_outside.csv")
            support.write_series(tmp_path / "later", 6, seed=12)
            os.replace(tmp_path / "later" / "spec_0006.csv", folder / "spec_0006.csv")
            state_of["linked"] = True
        elif state.ledger.n_processed() == 6:
            flag.set("all taken")

    plan = support.pipeline(folder, poll=False)
    plan = replace(plan, spec=replace(plan.spec, recursive=True, rescan_interval_s=0.05))
    with caplog.at_level(logging.WARNING):
        live = run_live(plan, options(tmp_path / "live", max_duration_s=30.0), stop=flag, on_turn=on_turn)
    assert live.stop_reason == "all taken"
    notes = _notes(caplog)
    for link in LINKS + ("late_outside.csv",):
        assert sum(note.startswith(f"{link}:") for note in notes) == 1, (link, notes)
    batch_plan = replace(plan, spec=replace(plan.spec, poll=True))
    batch_run(batch_plan, tmp_path / "batch")
    with Ledger(tmp_path / "live" / "ledger.sqlite") as a, Ledger(tmp_path / "batch" / "ledger.sqlite") as b:
        assert a.comparable_rows() == b.comparable_rows()
        assert sorted(row.path for row in a.files()) == [f"spec_{i:04d}.csv" for i in range(1, 7)]


def test_a_link_to_a_file_inside_the_folder_is_read_like_that_file(tmp_path):
    support.write_series(tmp_path, 2, seed=2)
    os.symlink(tmp_path / "spec_0002.csv", tmp_path / "again.csv")
    os.symlink("spec_0001.csv", tmp_path / "relative.csv")
    listed = dict(list_wanted(WatchSpec(tmp_path, include=("*.csv",))))
    assert sorted(listed) == ["again.csv", "relative.csv", "spec_0001.csv", "spec_0002.csv"]
    assert listed["again.csv"].st_ino == os.stat(tmp_path / "spec_0002.csv").st_ino
    watcher = FolderWatcher(WatchSpec(tmp_path, include=("*.csv",), poll=True, quiet_period_s=0.0))
    watcher.start()
    try:
        assert sorted(item.relpath for item in watcher.ready()) == sorted(listed)
    finally:
        watcher.stop()


def test_a_later_copy_that_comes_first_takes_over_in_the_in_memory_series_table(tmp_path):
    # the project's own series state (line shapes shared across the run): the copy that
    # arrives in a later turn but comes first by name replaces the counted one in memory
    # too, so the table equals a batch run's over the final folder
    from kinetics.run import RunState

    folder = tmp_path / "incoming"
    simulate_series(folder, seed=5, n=6)
    (tmp_path / "run.toml").write_text(SERIES_CONFIG.format(folder="incoming"))
    state = RunState(plan_from_config(tmp_path / "run.toml"), None)
    try:
        state.take(ready_files(state.plan.spec))
        shutil.copy2(folder / "spectrum_0003.jdx", folder / "early_0003.jdx")  # 'e' < 's'
        late = [item for item in ready_files(state.plan.spec) if item.relpath == "early_0003.jdx"]
        rows, _, _ = state.take(late)
        assert [(row.path, row.status) for row in rows] == [("early_0003.jdx", "processed"),
                                                            ("spectrum_0003.jdx", "duplicate")]
        live_table = state.source.table(final=True)
    finally:
        state.close()
    batch = batch_run(tmp_path / "run.toml", tmp_path / "batch", parallel=False, outputs=False,
                      processing_uncertainty=False)
    assert batch.counts == {"processed": 6, "quarantined": 0, "duplicate": 1, "replaced": 0}
    pd.testing.assert_frame_equal(live_table, batch.table, check_exact=True)
    assert "early_0003.jdx" in set(live_table["file"]) and "spectrum_0003.jdx" not in set(live_table["file"])
