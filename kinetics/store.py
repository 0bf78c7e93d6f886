"""The SQLite ledger of one run: every file seen, its hash, its measurements, its errors.

The ledger is the source of truth of a run.  Every run of the engine
(:mod:`kinetics.run`) has one: a live run and a batch run over the same folder write the
same rows, because both hand each file to :meth:`Ledger.ingest` in the same order.  One database per run, in WAL mode (readers —
the HTML page, a second terminal — never block the writer).

Tables
------
files
    One row per *content* seen under a path: ``path`` (relative to the watched folder,
    POSIX separators), ``sha256``, ``size_bytes``, ``mtime_ns``, ``status``
    (``processed`` / ``quarantined`` / ``duplicate``), ``error`` (why a file was
    quarantined), ``version`` (1 for the first content seen under that path, 2 for the
    next ...), ``replaced`` (1 once a later version of the same path exists: only the
    latest version counts), ``duplicate_of`` (the row whose identical content was counted),
    ``acquired_utc`` (ISO 8601, from the file header when it has one), ``first_seen_utc``;
    ``source`` and ``block`` for a trace of an arrayed file (the file, relative to the run
    folder, and the block index; ``path`` is then the trace's key, e.g.
    ``series.jdx#00003``: :mod:`kinetics.run.sources`), NULL for a one-spectrum file.
    Ledgers written before these two columns existed get them on opening (NULL).
measurements
    One row per file and signal: integral and its standard uncertainty, concentration and
    its standard uncertainty (mol/L) when known per file, plus ``extra_json`` for anything
    else the measurer reports.  ``files.record_json`` keeps the whole per-file record the
    series table is rebuilt from.
refits
    Each refit: time, number of points and the fit as JSON.
config
    The config snapshot the run was started with (a restart with a different config is
    refused, so one ledger never mixes two analyses).

Idempotent by content: a file whose bytes equal a counted file under another name is
recorded as ``duplicate`` and counts once (which copy counts is the engine's one rule,
earliest acquisition then name, never arrival order: a copy that outranks the counted one
takes its place, see :meth:`Ledger.ingest`); the same path with the same bytes is
recognised as already done (a restart does not reprocess); the same path with new bytes is
a new version, and the older version is flagged ``replaced``.

Each file goes in inside one transaction (``BEGIN IMMEDIATE`` ... ``COMMIT``), so a crash
leaves either the whole file (row + all its measurements) or nothing of it.

The library never watches or sleeps: the live loop lives in ``watchers/``.
"""

from __future__ import annotations

import hashlib
import json
import logging
import sqlite3
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any, Mapping

import pandas as pd

from kinetics.errors import ConfigError, InputFileError, KineticsError, OutputError

log = logging.getLogger(__name__)

SCHEMA_VERSION = 1

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (
    key TEXT PRIMARY KEY,
    value TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS files (
    id INTEGER PRIMARY KEY,
    path TEXT NOT NULL,
    sha256 TEXT NOT NULL,
    size_bytes INTEGER NOT NULL,
    mtime_ns INTEGER NOT NULL,
    status TEXT NOT NULL CHECK (status IN ('processed', 'quarantined', 'duplicate')),
    error TEXT,
    version INTEGER NOT NULL,
    replaced INTEGER NOT NULL DEFAULT 0,
    duplicate_of INTEGER REFERENCES files(id),
    acquired_utc TEXT,
    first_seen_utc TEXT NOT NULL,
    record_json TEXT,
    source TEXT,
    block INTEGER,
    UNIQUE (path, version)
);
CREATE INDEX IF NOT EXISTS files_sha ON files (sha256);
CREATE TABLE IF NOT EXISTS measurements (
    file_id INTEGER NOT NULL REFERENCES files(id),
    signal TEXT NOT NULL,
    integral REAL,
    integral_sigma REAL,
    concentration_mol_per_l REAL,
    concentration_stderr_mol_per_l REAL,
    extra_json TEXT,
    PRIMARY KEY (file_id, signal)
);
CREATE TABLE IF NOT EXISTS refits (
    id INTEGER PRIMARY KEY,
    time_utc TEXT NOT NULL,
    n_points INTEGER NOT NULL,
    fit_json TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS config (
    id INTEGER PRIMARY KEY CHECK (id = 1),
    text TEXT NOT NULL,
    sha256 TEXT NOT NULL,
    saved_utc TEXT NOT NULL
);
"""


# OutputError lives in kinetics.errors with the rest of the tree; re-exported here.
def output_error(path, error: BaseException) -> OutputError:
    """Turn an OS or SQLite failure while writing ``path`` into an :class:`OutputError`
    (:func:`kinetics.atomic.output_error`, the one translation)."""
    from kinetics.atomic import output_error as translate

    return translate(path, error)


#: how long a ledger write waits for another process's lock before it gives up (seconds);
#: SQLite's busy handler retries meanwhile with a growing back-off (1 ms up to 100 ms)
LOCK_TIMEOUT_S = 30.0


class _LedgerConnection(sqlite3.Connection):
    """A connection whose every statement failure is one OutputError naming the ledger."""

    ledger_path: Path | None = None

    def execute(self, *args):
        try:
            return super().execute(*args)
        except sqlite3.Error as error:
            raise _ledger_error(self.ledger_path, error) from error

    def executescript(self, script):
        try:
            return super().executescript(script)
        except sqlite3.Error as error:
            raise _ledger_error(self.ledger_path, error) from error


def _ledger_error(path, error: sqlite3.Error) -> OutputError:
    from kinetics.atomic import LOCKED_HINT

    if "locked" in str(error).lower() or "busy" in str(error).lower():
        return OutputError(path, f"the ledger stayed locked for {LOCK_TIMEOUT_S:g} s ({error})",
                           LOCKED_HINT.format(path=path))
    return output_error(path, error)


@dataclass(frozen=True)
class SignalRow:
    """One signal measured in one file.

    Attributes
    ----------
    signal : str
        Signal (region) name from the config.
    integral : float
        Integral in the spectrum's intensity units.
    integral_sigma : float or None
        Its standard uncertainty.
    concentration_mol_per_l : float or None
        Concentration, when the run is quantified.
    concentration_stderr_mol_per_l : float or None
        Its standard uncertainty.
    extra : Mapping[str, Any]
        Anything else the measurer reports for this signal (JSON-serialisable).
    """

    signal: str
    integral: float
    integral_sigma: float | None = None
    concentration_mol_per_l: float | None = None
    concentration_stderr_mol_per_l: float | None = None
    extra: Mapping[str, Any] | None = None


@dataclass(frozen=True)
class FileMeasurement:
    """What the ledger keeps of one measured file.

    Attributes
    ----------
    acquired_utc : datetime or None
        Acquisition time (orders the series; from the file header when it has one).
    signals : tuple of SignalRow
    record : Mapping or None
        The measurer's whole per-file record as JSON-ready values (kept in
        ``files.record_json``; NaN allowed), from which a restarted run rebuilds its
        in-memory state.
    value : object or None
        The measurer's in-memory result (never stored): what the run engine keeps so a
        live turn never reads the ledger back.
    """

    acquired_utc: datetime | None
    signals: tuple[SignalRow, ...]
    record: Mapping[str, Any] | None = None
    value: Any = field(default=None, compare=False, repr=False)


@dataclass(frozen=True)
class FileRow:
    """A row of the ``files`` table."""

    id: int
    path: str
    sha256: str
    size_bytes: int
    mtime_ns: int
    status: str
    error: str | None
    version: int
    replaced: bool
    duplicate_of: int | None
    acquired_utc: str | None
    first_seen_utc: str


@dataclass(frozen=True)
class Decision:
    """What the ledger would do with a file of this path and content.

    ``action`` is ``"known"`` (this exact content is already the latest version of this
    path: skip), ``"duplicate"`` (the content is counted under another path;
    ``duplicate_of`` names that row) or ``"new"`` (measure it; ``version`` is the version
    number it will get and ``replaces`` the row it supersedes, if any).
    """

    action: str
    version: int = 1
    replaces: int | None = None
    duplicate_of: int | None = None


def utc_now_iso() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds")


def _finite(value) -> float | None:
    if value is None:
        return None
    value = float(value)
    return value if value == value and abs(value) != float("inf") else None


_FILE_COLUMNS = ("id, path, sha256, size_bytes, mtime_ns, status, error, version, replaced, "
                 "duplicate_of, acquired_utc, first_seen_utc")


def _file_row(row) -> FileRow:
    return FileRow(row[0], row[1], row[2], row[3], row[4], row[5], row[6], row[7],
                   bool(row[8]), row[9], row[10], row[11])


class Ledger:
    """The SQLite ledger of one run (a thin class over one connection).

    Parameters
    ----------
    path : str or Path
        Database file; created with its tables when missing.

    Raises
    ------
    OutputError
        When the database cannot be created or opened for writing.
    """

    def __init__(self, path: str | Path):
        self.path = Path(path)
        try:
            self._db = sqlite3.connect(self.path, isolation_level=None, timeout=LOCK_TIMEOUT_S,
                                       factory=_LedgerConnection)
            self._db.ledger_path = self.path
            self._db.execute("PRAGMA journal_mode=WAL")
            # NORMAL in WAL mode keeps every committed transaction across a process crash
            # (only a power loss can drop the last ones); FULL is not needed for kill -9.
            self._db.execute("PRAGMA synchronous=NORMAL")
            self._db.execute("PRAGMA foreign_keys=ON")
            self._db.executescript(_SCHEMA)
            self._add_trace_columns()
            self._db.execute("INSERT OR IGNORE INTO meta VALUES ('schema_version', ?)",
                             (str(SCHEMA_VERSION),))
        except (sqlite3.Error, OSError) as error:
            raise output_error(self.path, error) from error

    def _add_trace_columns(self) -> None:
        """A ledger from before arrayed files: add ``source`` and ``block`` (NULL: files)."""
        columns = {row[1] for row in self._db.execute("PRAGMA table_info(files)")}
        for name, kind in (("source", "TEXT"), ("block", "INTEGER")):
            if name not in columns:
                self._db.execute(f"ALTER TABLE files ADD COLUMN {name} {kind}")

    # ------------------------------------------------------------ lifecycle
    def close(self) -> None:
        self._db.close()

    def __enter__(self) -> "Ledger":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def _write(self, statements) -> Any:
        """Run ``statements(db)`` inside one IMMEDIATE transaction; roll back on failure."""
        try:
            self._db.execute("BEGIN IMMEDIATE")
            try:
                result = statements(self._db)
                self._db.execute("COMMIT")
                return result
            except BaseException:
                if self._db.in_transaction:
                    self._db.execute("ROLLBACK")
                raise
        except (sqlite3.Error, OSError) as error:
            raise output_error(self.path, error) from error

    # ------------------------------------------------------------ config snapshot
    def save_config(self, text: str) -> None:
        """Keep the config the run was started with; refuse a different one later.

        Raises
        ------
        ConfigError
            When the ledger already holds a different config.
        """
        digest = hashlib.sha256(text.encode("utf-8")).hexdigest()
        row = self._db.execute("SELECT sha256 FROM config WHERE id = 1").fetchone()
        if row is None:
            self._write(lambda db: db.execute(
                "INSERT INTO config VALUES (1, ?, ?, ?)", (text, digest, utc_now_iso())))
        elif row[0] != digest:
            raise ConfigError(
                "(whole file)", f"the run in {self.path.parent} was started with a different config",
                hint="use a new --out folder for a new analysis, or restore the old config",
            )

    def config_text(self) -> str | None:
        row = self._db.execute("SELECT text FROM config WHERE id = 1").fetchone()
        return None if row is None else row[0]

    # ------------------------------------------------------------ queries
    def versions(self, path: str) -> list[FileRow]:
        """Every version recorded under ``path``, oldest first."""
        rows = self._db.execute(
            f"SELECT {_FILE_COLUMNS} FROM files WHERE path = ? ORDER BY version", (path,))
        return [_file_row(row) for row in rows]

    def row(self, file_id: int, db: sqlite3.Connection | None = None) -> FileRow:
        """The ``files`` row with this id."""
        return _file_row((db or self._db).execute(
            f"SELECT {_FILE_COLUMNS} FROM files WHERE id = ?", (file_id,)).fetchone())

    def latest_stat(self) -> dict[str, tuple[int, int, str]]:
        """``path -> (size_bytes, mtime_ns, sha256)`` of the latest version of every path.

        Lets a restart skip files it has already taken without hashing them again.
        """
        rows = self._db.execute(
            "SELECT path, size_bytes, mtime_ns, sha256 FROM files WHERE replaced = 0")
        return {path: (size, mtime, sha) for path, size, mtime, sha in rows}

    def decide(self, path: str, sha256: str, db: sqlite3.Connection | None = None) -> Decision:
        """What :meth:`ingest` will do with this path and content (see :class:`Decision`)."""
        db = db or self._db
        latest = db.execute(
            "SELECT id, sha256, version FROM files WHERE path = ? AND replaced = 0",
            (path,)).fetchone()
        if latest is not None and latest[1] == sha256:
            return Decision("known", version=latest[2])
        twin = db.execute(
            "SELECT id FROM files WHERE sha256 = ? AND path != ? AND replaced = 0 "
            "AND status != 'duplicate' ORDER BY id LIMIT 1", (sha256, path)).fetchone()
        version = 1 if latest is None else latest[2] + 1
        replaces = None if latest is None else latest[0]
        if twin is not None:
            return Decision("duplicate", version=version, replaces=replaces, duplicate_of=twin[0])
        return Decision("new", version=version, replaces=replaces)

    def counts(self) -> dict[str, int]:
        """Number of current (not replaced) files per status, plus ``replaced`` versions."""
        counts = {"processed": 0, "quarantined": 0, "duplicate": 0}
        for status, n in self._db.execute(
                "SELECT status, COUNT(*) FROM files WHERE replaced = 0 GROUP BY status"):
            counts[status] = n
        counts["replaced"] = self._db.execute(
            "SELECT COUNT(*) FROM files WHERE replaced = 1").fetchone()[0]
        return counts

    def files(self, current_only: bool = False) -> list[FileRow]:
        """All file rows in ingest order."""
        where = "WHERE replaced = 0" if current_only else ""
        rows = self._db.execute(f"SELECT {_FILE_COLUMNS} FROM files {where} ORDER BY id")
        return [_file_row(row) for row in rows]

    def quarantined(self) -> list[tuple[str, str]]:
        """``(path, reason)`` of every current quarantined file."""
        return list(self._db.execute(
            "SELECT path, error FROM files WHERE status = 'quarantined' AND replaced = 0 "
            "ORDER BY id"))

    def measurements(self) -> pd.DataFrame:
        """The counted measurements as a long table, one row per file and signal.

        Only current processed files count (not duplicates, not replaced versions), in
        acquisition order (then path).  Columns: ``path``, ``acquired_utc`` (ISO text),
        ``signal``, ``integral``, ``integral_sigma``, ``concentration_mol_per_l``,
        ``concentration_stderr_mol_per_l``, ``extra_json``.
        """
        query = (
            "SELECT f.path, f.acquired_utc, m.signal, m.integral, m.integral_sigma, "
            "m.concentration_mol_per_l, m.concentration_stderr_mol_per_l, m.extra_json "
            "FROM files f "
            "JOIN measurements m ON m.file_id = f.id "
            "WHERE f.status = 'processed' AND f.replaced = 0 "
            "ORDER BY f.acquired_utc, f.path, m.signal")
        columns = ["path", "acquired_utc", "signal", "integral", "integral_sigma",
                   "concentration_mol_per_l", "concentration_stderr_mol_per_l", "extra_json"]
        return pd.DataFrame(self._db.execute(query).fetchall(), columns=columns)

    def records(self) -> list[tuple[str, dict]]:
        """``(path, record)`` of every counted file, in acquisition order (then path)."""
        rows = self._db.execute(
            "SELECT path, record_json FROM files WHERE status = 'processed' AND replaced = 0 "
            "ORDER BY acquired_utc, path")
        return [(path, json.loads(text) if text else {}) for path, text in rows]

    def first_record(self) -> dict | None:
        """The record of the first counted file (acquisition order), or None."""
        row = self._db.execute(
            "SELECT record_json FROM files WHERE status = 'processed' AND replaced = 0 "
            "ORDER BY acquired_utc, path LIMIT 1").fetchone()
        return json.loads(row[0]) if row and row[0] else None

    def trace_sources(self) -> list[tuple[str, str | None, int | None]]:
        """``(path, source file, block)`` of every row in ingest order (source and block
        None for a one-spectrum file)."""
        return [tuple(row) for row in self._db.execute("SELECT path, source, block FROM files ORDER BY id")]

    def n_processed(self) -> int:
        return self._db.execute(
            "SELECT COUNT(*) FROM files WHERE status = 'processed' AND replaced = 0").fetchone()[0]

    def last_refit(self) -> dict | None:
        row = self._db.execute(
            "SELECT fit_json FROM refits ORDER BY id DESC LIMIT 1").fetchone()
        return None if row is None else json.loads(row[0])

    def integrity_ok(self) -> bool:
        return self._db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"

    # ------------------------------------------------------------ writes
    def ingest(
        self,
        path: str,
        sha256: str,
        size_bytes: int,
        mtime_ns: int,
        measure,
        first_seen_utc: str | None = None,
        *,
        source: str | None = None,
        block: int | None = None,
        outranks=None,
        demoted: list | None = None,
    ) -> FileRow | None:
        """Record one file, all of it in one transaction.

        Parameters
        ----------
        path : str
            Path relative to the watched folder (POSIX separators).
        sha256, size_bytes, mtime_ns
            The file's content hash and the stat it was hashed under.
        measure : callable () -> FileMeasurement
            Called only when the content is new; raising
            :class:`~kinetics.errors.InputFileError` quarantines the file with the
            error's text.  It runs *before* the transaction opens, so a slow parse never
            holds the database lock.
        first_seen_utc : str, optional
            When the watcher first saw the file (ISO 8601); now when omitted.
        source, block : str and int, optional
            For a trace of an arrayed file: the file (relative to the run folder) and the
            block index (``path`` is then the trace's key).
        outranks : callable (FileRow) -> bool, optional
            For content already counted under another path (a duplicate copy): whether
            this copy comes first by the engine's attribution rule
            (:func:`kinetics.run.files.attribution_key`).  When it does, this copy is
            measured and counted and the other row becomes its duplicate (its
            measurements removed), in the same transaction: the ledger ends as if the
            copies had arrived in rule order.
        demoted : list, optional
            Receives the rows that stopped counting because this copy outranked them.

        Returns
        -------
        FileRow or None
            The new row, or None when this content is already the latest version of the
            path (nothing written).
        """
        for _ in range(3):
            decision = self.decide(path, sha256)
            if decision.action == "known":
                return None
            takeover = None
            if decision.action == "duplicate" and outranks is not None:
                twin = self.row(decision.duplicate_of)
                takeover = twin.id if outranks(twin) else None
            measurement, error_text = None, None
            if decision.action == "new" or takeover is not None:
                try:
                    measurement = measure()
                except InputFileError as error:
                    error_text = quarantine_reason(error)
            lost: list = []
            row = self._write(lambda db: self._insert(
                db, path, sha256, size_bytes, mtime_ns, decision, measurement, error_text,
                first_seen_utc or utc_now_iso(), source, block, takeover, lost))
            if row is not False:
                if demoted is not None:
                    demoted.extend(lost)
                break
        else:  # pragma: no cover - needs another writer racing on the same ledger
            raise OutputError(self.path, f"{path}: the ledger kept changing under this run",
                              "run one watcher per output folder")
        if row is not None:
            log.info("%s: %s (version %d)", path, row.status, row.version)
        return row

    def _insert(self, db, path, sha256, size_bytes, mtime_ns, decision, measurement,
                error_text, first_seen, source=None, block=None, takeover=None,
                lost=None) -> FileRow | None | bool:
        """Insert one file inside the open transaction; False when the decision went stale.

        ``takeover``: the id of the counted twin this copy replaces as the counted one
        (its row becomes a duplicate of the new row and is appended to ``lost``)."""
        final = self.decide(path, sha256, db)
        if final != decision:
            return False
        if final.action == "known":
            return None
        if takeover is not None:
            status = "processed" if error_text is None else "quarantined"
            final = Decision("new", version=final.version, replaces=final.replaces)
        elif final.action == "duplicate":
            status = "duplicate"
        else:
            status = "processed" if error_text is None else "quarantined"
        acquired = None
        if measurement is not None and measurement.acquired_utc is not None:
            acquired = measurement.acquired_utc.astimezone(timezone.utc).isoformat()
        record = None
        if status == "processed" and measurement.record is not None:
            record = json.dumps(dict(measurement.record), sort_keys=True)
        if final.replaces is not None:
            db.execute("UPDATE files SET replaced = 1 WHERE id = ?", (final.replaces,))
        cursor = db.execute(
            "INSERT INTO files (path, sha256, size_bytes, mtime_ns, status, error, version, "
            "replaced, duplicate_of, acquired_utc, first_seen_utc, record_json, source, block) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, 0, ?, ?, ?, ?, ?, ?)",
            (path, sha256, int(size_bytes), int(mtime_ns), status, error_text,
             final.version, final.duplicate_of, acquired, first_seen, record, source,
             None if block is None else int(block)))
        file_id = cursor.lastrowid
        if status == "processed":
            db.executemany(
                "INSERT INTO measurements VALUES (?, ?, ?, ?, ?, ?, ?)",
                [(file_id, row.signal, _finite(row.integral), _finite(row.integral_sigma),
                  _finite(row.concentration_mol_per_l),
                  _finite(row.concentration_stderr_mol_per_l),
                  None if not row.extra else json.dumps(dict(row.extra), sort_keys=True))
                 for row in measurement.signals])
        if takeover is not None:
            # the twin now stands as a batch run would have recorded it: a duplicate of
            # this row, without a measurement of its own; its duplicates follow the new row
            db.execute("DELETE FROM measurements WHERE file_id = ?", (takeover,))
            db.execute("UPDATE files SET status = 'duplicate', error = NULL, acquired_utc = NULL, "
                       "record_json = NULL, duplicate_of = ? WHERE id = ?", (file_id, takeover))
            db.execute("UPDATE files SET duplicate_of = ? WHERE duplicate_of = ? AND replaced = 0",
                       (file_id, takeover))
            if lost is not None:
                lost.append(self.row(takeover, db))
        return _file_row(db.execute(
            f"SELECT {_FILE_COLUMNS} FROM files WHERE id = ?", (file_id,)).fetchone())

    def record_refit(self, fit: Mapping[str, Any], n_points: int) -> None:
        """Keep one refit's result (``fit`` must be JSON-serialisable)."""
        from kinetics.jsonio import dumps

        text = dumps(fit, indent=None)
        self._write(lambda db: db.execute(
            "INSERT INTO refits (time_utc, n_points, fit_json) VALUES (?, ?, ?)",
            (utc_now_iso(), int(n_points), text)))

    def comparable_rows(self) -> list[tuple]:
        """The ledger's content without run-specific fields (ids, times, mtimes).

        Two runs over the same files — a live run and a batch run — must give equal lists.
        """
        rows = self._db.execute(
            "SELECT f.path, f.sha256, f.size_bytes, f.status, f.error, f.version, f.replaced, "
            "d.path, f.acquired_utc FROM files f LEFT JOIN files d ON d.id = f.duplicate_of "
            "ORDER BY f.path, f.version").fetchall()
        measured = self._db.execute(
            "SELECT f.path, f.version, m.signal, m.integral, m.integral_sigma, "
            "m.concentration_mol_per_l, m.concentration_stderr_mol_per_l, m.extra_json, "
            "f.record_json FROM measurements m "
            "JOIN files f ON f.id = m.file_id ORDER BY f.path, f.version, m.signal").fetchall()
        return [tuple(row) for row in rows] + [tuple(row) for row in measured]


def quarantine_reason(error: BaseException) -> str:
    """The reason kept in the ledger for a file that could not be read.

    The file's own path is left out (it is in the row already, and a batch run over a
    copy of the folder must keep the same text).
    """
    problem = getattr(error, "problem", None)
    if problem is None:
        return str(error)
    text = problem if getattr(error, "line", None) is None else f"line {error.line}: {problem}"
    hint = getattr(error, "hint", None)
    return f"{text} ({hint})" if hint else text

