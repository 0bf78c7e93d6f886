"""The live loop in-process on real files: bad files, bursts, stop conditions, views.

The science is the small real pipeline of ``test_live_support`` (invented first-order
series A -> B with k = 2e-3 1/s, truth set there).  Runs end through the loop's own stop
conditions or through its stop flag, set from ``on_turn`` once the ledger holds what the
test waits for; a generous ``max_duration_s`` keeps a broken loop from hanging the suite.
"""

from __future__ import annotations

import json
import os
import sys
import threading
import time
import urllib.request
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).parent))
import test_live_support as support  # noqa: E402

from kinetics.store import Ledger  # noqa: E402
from kinetics.run import batch_run  # noqa: E402
from watchers.live import LiveOptions, _StopFlag, run_live, target_reached  # noqa: E402
from watchers.replay import ReplayThread  # noqa: E402
from watchers.views import LiveStatus, PageServer, render_html  # noqa: E402


def options(out: Path, **changes) -> LiveOptions:
    base = dict(out_dir=out, view=False, tick_s=0.02, max_duration_s=60.0, handle_signals=False)
    base.update(changes)
    return LiveOptions(**base)


def stop_when(flag: _StopFlag, condition):
    def on_turn(state):
        if condition(state.ledger):
            flag.set("test condition met")
    return on_turn


def test_bad_files_are_quarantined_and_nothing_is_lost_or_counted_twice(tmp_path):
    folder, out = tmp_path / "in", tmp_path / "out"
    rng = np.random.default_rng(7)
    folder.mkdir()
    # out-of-order names: the name runs against acquisition time
    texts = [support.spectrum_text(60.0 * i, rng) for i in range(8)]
    for i, text in enumerate(texts):
        (folder / f"z{8 - i}.csv").write_text(text)
    (folder / "truncated.csv").write_text(texts[3][: len(texts[3]) // 2])
    (folder / "garbage.csv").write_bytes(os.urandom(3000))
    (folder / "empty.csv").write_bytes(b"")
    (folder / "copy of z8.csv").write_text(texts[0])
    replacement = support.spectrum_text(600.0, rng)
    flag = _StopFlag()
    phase = {"replaced": False}

    def on_turn(state):
        ledger = state.ledger
        if not phase["replaced"] and ledger.counts()["processed"] == 8:
            (folder / "z1.csv").write_text(replacement)  # replaced in place, new content
            phase["replaced"] = True
        elif phase["replaced"] and ledger.counts()["replaced"] == 1:
            flag.set("done")

    summary = run_live(support.pipeline(folder), options(out), stop=flag, on_turn=on_turn)
    assert summary.stop_reason == "done"
    with Ledger(out / "ledger.sqlite") as ledger:
        rows = {(row.path, row.version): row for row in ledger.files()}
        status = {key: row.status for key, row in rows.items()}
        assert status.pop(("truncated.csv", 1)) == "quarantined"
        assert status.pop(("garbage.csv", 1)) == "quarantined"
        assert status.pop(("empty.csv", 1)) == "quarantined"
        # same bytes, same header time: the name decides which one counts, the other is
        # its duplicate
        assert status.pop(("copy of z8.csv", 1)) == "processed"
        assert status.pop(("z8.csv", 1)) == "duplicate"
        assert status.pop(("z1.csv", 2)) == "processed"
        assert set(status.values()) == {"processed"} and len(status) == 7
        assert rows[("z1.csv", 1)].replaced and not rows[("z1.csv", 2)].replaced
        assert "truncated" in rows[("truncated.csv", 1)].error
        # ingest order follows the header time, not the names
        first_eight = [row.path for row in ledger.files()
                       if row.status != "quarantined" and row.version == 1]
        assert first_eight == ["copy of z8.csv"] + [f"z{8 - i}.csv" for i in range(8)]
        assert ledger.counts() == {"processed": 8, "quarantined": 3, "duplicate": 1, "replaced": 1}
        assert len(ledger.measurements()) == 16  # 8 spectra x 2 signals
    page = (out / "index.html").read_text()
    assert "truncated.csv" in page and "no &#x27;# end&#x27; line" in page
    # a batch run over the folder as it is now gives the same fit
    batch = batch_run(support.pipeline(folder), tmp_path / "batch")
    assert batch.outcome.fit == summary.outcome.fit


def test_burst_of_500_files_is_taken_completely_and_in_order(tmp_path):
    folder, out, staging = tmp_path / "in", tmp_path / "out", tmp_path / "staging"
    folder.mkdir()
    paths = support.write_series(staging, 500, seed=3, interval_s=5.0, prefix="burst")

    def drop():  # renamed in one after the other, while the loop is running
        time.sleep(0.3)
        for path in paths:
            os.replace(path, folder / path.name)

    dropper = threading.Thread(target=drop)
    dropper.start()
    flag = _StopFlag()
    summary = run_live(support.pipeline(folder), options(out), stop=flag,
                       on_turn=stop_when(flag, lambda ledger: ledger.n_processed() >= 500))
    dropper.join()
    assert summary.counts["processed"] == 500
    expected = [f"burst_{i:04d}.csv" for i in range(1, 501)]
    with Ledger(out / "ledger.sqlite") as ledger:
        taken = [row.path for row in ledger.files()]
        in_acquisition_order = [path for path, _ in ledger.records()]
    # every file exactly once, and the run's table and fit see them in acquisition order.
    # The order in which files are *taken* follows when each was seen complete: a folder
    # listing is no snapshot while renames land in it (an entry added during the listing
    # may be missed until the next one), so two files renamed microseconds apart can be
    # taken one turn apart on a loaded machine; within a turn they are sorted.
    assert sorted(taken) == expected and len(set(taken)) == 500
    assert in_acquisition_order == expected
    k = summary.outcome.k
    assert k["ci95"][0] <= support.TRUE_K_PER_S <= k["ci95"][1]


def test_target_conversion_stops_the_run_with_the_interval(tmp_path):
    source, folder, out = tmp_path / "src", tmp_path / "in", tmp_path / "out"
    support.write_series(source, 30, seed=5)  # 60 s apart: 50 % at ~347 s (6th spectrum)
    replayer = ReplayThread(source, folder, 0.05, ("*.csv",))
    folder.mkdir()
    replayer.start()
    summary = run_live(support.pipeline(folder, target_conversion=0.5), options(out),
                       replay_done=replayer.finished.is_set)
    replayer.stop_event.set()
    replayer.join()
    assert summary.stop_reason.startswith("target conversion 50% reached")
    assert target_reached(summary.outcome, 0.5)
    assert summary.outcome.conversion["ci95"][0] >= 0.5
    assert summary.counts["processed"] < 30
    report = json.loads((out / "fit.json").read_text())
    assert report["final"] is True and report["stop_reason"] == summary.stop_reason
    assert 'http-equiv="refresh"' not in (out / "index.html").read_text()


def test_replayed_run_equals_batch_run_and_restart_does_not_reprocess(tmp_path):
    source, folder = tmp_path / "src", tmp_path / "in"
    support.write_series(source, 40, seed=11)
    folder.mkdir()
    replayer = ReplayThread(source, folder, 0.01, ("*.csv",))
    replayer.start()
    live = run_live(support.pipeline(folder), options(tmp_path / "live"),
                    replay_done=replayer.finished.is_set)
    replayer.join()
    assert live.stop_reason == "replay finished"
    batch = batch_run(support.pipeline(source), tmp_path / "batch")
    with Ledger(tmp_path / "live" / "ledger.sqlite") as a, Ledger(tmp_path / "batch" / "ledger.sqlite") as b:
        assert a.comparable_rows() == b.comparable_rows()
    assert live.outcome.fit == batch.outcome.fit
    # restart on the same output: nothing is measured again
    calls = []
    pipeline = support.pipeline(folder)

    def counting(path):
        calls.append(path)
        return support.measure(path)

    from dataclasses import replace

    again = run_live(replace(pipeline, measure=counting), options(tmp_path / "live", idle_s=0.8))
    assert calls == [] and again.counts == live.counts
    assert again.outcome.fit == batch.outcome.fit


def test_max_duration_on_an_empty_folder_ends_with_a_report(tmp_path):
    (tmp_path / "in").mkdir()
    summary = run_live(support.pipeline(tmp_path / "in"), options(tmp_path / "out", max_duration_s=0.3))
    assert summary.stop_reason == "maximum duration of 0.3 s reached"
    report = json.loads((tmp_path / "out" / "fit.json").read_text())
    assert report["final"] and report["fit"] is None and report["n_points"] == 0
    leftovers = [p.name for p in (tmp_path / "out").iterdir() if p.name.endswith(".tmp")]
    assert leftovers == []


def test_page_refreshes_itself_and_server_binds_loopback(tmp_path):
    status = LiveStatus(folder="/data", started_utc="t0", updated_utc="t1",
                        counts={"processed": 3, "quarantined": 1, "duplicate": 0, "replaced": 0},
                        k={"value": 2e-3, "stderr": 1e-5, "ci95": [1.98e-3, 2.02e-3], "unit": "1/s"},
                        quarantined=(("bad.dx", "line 3: not a number"),))
    page = render_html(status, b"\x89PNG fake", refresh_s=5)
    assert '<meta http-equiv="refresh" content="5">' in page
    assert "data:image/png;base64,iVBORyBmYWtl" in page
    assert "bad.dx: line 3: not a number" in page and "0.002" in page
    (tmp_path / "index.html").write_text(page)
    server = PageServer(tmp_path).start()
    try:
        assert server.server.server_address[0] == "127.0.0.1"
        with urllib.request.urlopen(server.url, timeout=5) as response:
            assert response.read().decode() == page
    finally:
        server.stop()


def test_terminal_panel_shows_k_forecast_and_counts():
    import io

    from rich.console import Console

    from watchers.views import TerminalView

    status = LiveStatus(folder="/data", started_utc="t0", updated_utc="t1",
                        counts={"processed": 12, "quarantined": 2, "duplicate": 1, "replaced": 0},
                        latest_path="s12.dx", latest_acquired_utc="2026-01-01T10:00:00Z",
                        concentrations={"A_concentration": (0.21, 0.004)},
                        k={"value": 1.5e-3, "stderr": 1e-5, "ci95": [1.48e-3, 1.52e-3], "unit": "s^-1"},
                        target_conversion=0.9,
                        time_to_target_s={"value": 1535.0, "stderr": 9.0, "ci95": [1517.0, 1553.0],
                                          "unit": "s"})
    console = Console(file=io.StringIO(), width=120)
    console.print(TerminalView(enabled=False)._panel(status))
    text = console.file.getvalue()
    # value and uncertainty rounded together (GUM, JCGM 100:2008, 7.2.6): one significant
    # digit of 0.004, two of an uncertainty starting with 1 (common practice); the forecast
    # of 1535 ± 9 s in minutes, as a person reads it
    assert "s12.dx" in text and "0.210 ± 0.004 mol L⁻¹" in text
    assert "0.001500 ± 0.000010 s⁻¹ (95 %: 0.001480 to 0.001520 s⁻¹)" in text
    assert "time to 90%" in text and "25.58 ± 0.15 min" in text
    assert "12 processed, 1 duplicate, 2 quarantined" in text


def test_a_measurer_crash_quarantines_that_file_and_the_run_goes_on(tmp_path):
    # whatever a parser raises on one bad file (here an IndexError) must become a
    # quarantine reason, never an exception that stops the live loop
    from kinetics.store import Ledger
    from watchers.folder import ReadyFile
    from kinetics.run import process_ready
    import test_live_support as support

    folder = tmp_path / "in"
    support.write_series(folder, 2)
    bad = folder / "zz_bad.txt"
    bad.write_text("not a spectrum")

    def measure(path):
        if path.name == bad.name:
            raise IndexError("list index out of range")
        return support.measure(path)

    ready = []
    for path in sorted(folder.iterdir()):
        st = path.stat()
        ready.append(ReadyFile(path, path.name, st.st_size, st.st_mtime_ns, "2026-01-01T00:00:00Z"))
    with Ledger(tmp_path / "ledger.sqlite") as ledger:
        rows, handled, changed = process_ready(ready, ledger, measure)
        counts = ledger.counts()
    assert counts["processed"] == 2 and counts["quarantined"] == 1
    (quarantined,) = [r for r in rows if r.status == "quarantined"]
    assert "IndexError" in quarantined.error and len(handled) == 3 and not changed
