"""The SQLite ledger: idempotent by content, versions, quarantine, one transaction per file.

Real database files in a temporary folder; the crash test kills a real process (SIGKILL)
inside an open transaction.  SQLite's promise checked here (atomic commit: a transaction
is all or nothing across a process crash) is from the SQLite documentation
("Atomic Commit In SQLite", sqlite.org/atomiccommit.html).
"""

from __future__ import annotations

import os
import sqlite3
import subprocess
import sys
import textwrap
from datetime import datetime, timezone

import pytest

from kinetics.errors import ConfigError, InputFileError
from kinetics.store import FileMeasurement, Ledger, OutputError, SignalRow

WHEN = datetime(2026, 1, 1, 12, 0, tzinfo=timezone.utc)


def measured(a: float = 0.4, b: float = 0.1):
    return lambda: FileMeasurement(WHEN, (SignalRow("A", a, 0.02, a, 0.01), SignalRow("B", b, 0.02, b, 0.01)),
                                   {"note": "whole record", "nan": float("nan")})


def bad():
    raise InputFileError("/somewhere/x.dx", "no ##END= label", line=40, hint="re-export the file")


@pytest.fixture()
def ledger(tmp_path):
    with Ledger(tmp_path / "ledger.sqlite") as opened:
        yield opened


def test_new_file_is_processed_with_all_its_signals(ledger):
    row = ledger.ingest("s1.dx", "aa", 10, 1, measured())
    assert (row.status, row.version, row.replaced) == ("processed", 1, False)
    table = ledger.measurements()
    assert list(table["signal"]) == ["A", "B"]
    assert table["concentration_mol_per_l"].tolist() == [0.4, 0.1]
    assert table["acquired_utc"].iloc[0] == WHEN.isoformat()
    [(path, record)] = ledger.records()
    assert path == "s1.dx" and record["note"] == "whole record" and record["nan"] != record["nan"]


def test_same_path_same_content_is_not_taken_twice(ledger):
    calls = []

    def counting():
        calls.append(1)
        return measured()()

    ledger.ingest("s1.dx", "aa", 10, 1, counting)
    assert ledger.ingest("s1.dx", "aa", 10, 2, counting) is None  # touched, same bytes
    assert calls == [1]  # not even measured again
    assert ledger.counts()["processed"] == 1


def test_copy_under_another_name_counts_once(ledger):
    first = ledger.ingest("s1.dx", "aa", 10, 1, measured())
    copy = ledger.ingest("copy of s1.dx", "aa", 10, 1, measured())
    assert copy.status == "duplicate" and copy.duplicate_of == first.id
    assert ledger.counts() == {"processed": 1, "quarantined": 0, "duplicate": 1, "replaced": 0}
    assert len(ledger.measurements()) == 2  # one file's two signals, not four


def test_replaced_in_place_is_a_new_version_and_only_it_counts(ledger):
    ledger.ingest("s1.dx", "aa", 10, 1, measured(0.4))
    second = ledger.ingest("s1.dx", "bb", 11, 2, measured(0.3))
    assert second.version == 2
    versions = ledger.versions("s1.dx")
    assert [v.replaced for v in versions] == [True, False]
    assert ledger.measurements()["integral"].tolist() == [0.3, 0.1]
    assert ledger.counts()["replaced"] == 1


def test_bad_file_is_quarantined_with_its_reason_without_its_path(ledger):
    row = ledger.ingest("s2.dx", "cc", 5, 1, bad)
    assert row.status == "quarantined"
    assert row.error == "line 40: no ##END= label (re-export the file)"
    assert ledger.quarantined() == [("s2.dx", row.error)]
    assert ledger.measurements().empty
    # a fixed file under the same name is taken as its next version
    fixed = ledger.ingest("s2.dx", "dd", 6, 2, measured())
    assert (fixed.status, fixed.version) == ("processed", 2)


def test_failure_inside_the_transaction_leaves_nothing(ledger):
    # two rows for one signal break the measurements primary key after the file row
    # was inserted: the whole file must roll back.
    twice = lambda: FileMeasurement(WHEN, (SignalRow("A", 1.0), SignalRow("A", 2.0)))
    with pytest.raises(OutputError):
        ledger.ingest("s3.dx", "ee", 5, 1, twice)
    assert ledger.files() == [] and ledger.measurements().empty
    assert ledger.ingest("s3.dx", "ee", 5, 1, measured()).status == "processed"


def test_other_exceptions_from_the_measurer_propagate_and_write_nothing(ledger):
    def broken():
        raise RuntimeError("bug")

    with pytest.raises(RuntimeError):
        ledger.ingest("s4.dx", "ff", 5, 1, broken)
    assert ledger.files() == []


def test_wal_mode_and_config_snapshot(tmp_path):
    with Ledger(tmp_path / "l.sqlite") as ledger:
        ledger.save_config("a = 1\n")
        ledger.save_config("a = 1\n")  # same config: a restart is fine
        with pytest.raises(ConfigError, match="different config"):
            ledger.save_config("a = 2\n")
        assert ledger.config_text() == "a = 1\n"
    db = sqlite3.connect(tmp_path / "l.sqlite")
    assert db.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_refits_are_kept(ledger):
    ledger.record_refit({"k": {"value": 1e-3}, "bad": float("nan")}, 12)
    assert ledger.last_refit() == {"k": {"value": 1e-3}, "bad": None}


def test_kill_inside_a_transaction_leaves_no_half_file(tmp_path):
    database = tmp_path / "ledger.sqlite"
    with Ledger(database) as ledger:
        ledger.ingest("kept.dx", "11", 5, 1, measured())
    script = textwrap.dedent(f"""
        import os, signal
        from kinetics.store import Ledger
        ledger = Ledger({str(database)!r})
        def half(db):
            db.execute("INSERT INTO files (path, sha256, size_bytes, mtime_ns, status, version, "
                       "first_seen_utc) VALUES ('half.dx', '22', 5, 1, 'processed', 1, 'now')")
            os.kill(os.getpid(), signal.SIGKILL)  # dies before the measurements and COMMIT
        ledger._write(half)
    """)
    result = subprocess.run([sys.executable, "-c", script], capture_output=True)
    assert result.returncode == -9
    with Ledger(database) as ledger:
        assert [row.path for row in ledger.files()] == ["kept.dx"]
        assert ledger.integrity_ok()


def test_unwritable_location_is_a_clear_error(tmp_path):
    with pytest.raises(OutputError, match="not writable|unable to open"):
        Ledger(tmp_path / "missing" / "deeper" / "ledger.sqlite")
    assert not os.path.exists(tmp_path / "missing")
