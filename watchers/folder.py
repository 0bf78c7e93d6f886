"""Notice files in a folder and hand each one over only once it is complete.

A file counts as *complete* once its size and modification time have stayed unchanged
for the quiet period (the live loop then checks that it parses; a parse failure after the
quiet period quarantines it, while a file that is still growing is never looked at).

Events come from a watchdog observer (inotify / FSEvents / ReadDirectoryChanges); with
``poll=True`` the folder is listed every ``poll_interval_s`` instead, for network shares
where file events do not arrive.  Event mode also lists the folder every
``rescan_interval_s``, so an event the operating system dropped (a queue overflow during a
burst) cannot lose a file.

Names ignored whatever the patterns say: dot-files and dot-folders, ``~`` files and
editor/transfer temporaries (``*.tmp``, ``*.part``, ``*.partial``, ``*.crdownload``,
``*.swp``, ``*~``, ``#*#``).  Instruments and :mod:`watchers.replay` write under such a
name and rename when done; the rename (a *moved* event) is what makes the file appear.

Order: files ready at the same moment (all files present at start, a burst) are handed
over sorted by modification time, then by name with digits compared as numbers.  The live
loop refines that to the acquisition time in the file header, which it reads anyway to
check the file parses (see :func:`kinetics.run.engine.process_ready`).
The file selection (:class:`WatchSpec`, :func:`wanted`, :func:`list_wanted`) is library
code in :mod:`kinetics.run.files`, re-exported here.
"""

from __future__ import annotations

import dataclasses
import logging
import os
import queue
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from watchdog.events import FileSystemEventHandler

from kinetics.errors import InputFileError
from kinetics.run.files import (TEMPORARY_PATTERNS, ReadyFile, WatchSpec, _natural_key,  # noqa: F401
                                 acquisition_sort_key, check_folder, is_temporary, list_wanted, wanted)
from kinetics.store import utc_now_iso

log = logging.getLogger(__name__)


@dataclass
class _Pending:
    size_bytes: int
    mtime_ns: int
    stable_since: float
    first_seen_utc: str


class CompletenessTracker:
    """Keeps the files not yet complete and says which have become so.

    Parameters
    ----------
    folder : Path
        Folder the relative paths are under.
    quiet_period_s : float
        Seconds of unchanged size and modification time that make a file complete.
    clock : callable, optional
        Monotonic clock in seconds (``time.monotonic``).
    """

    def __init__(self, folder: Path, quiet_period_s: float, clock: Callable[[], float] = time.monotonic):
        self.folder = Path(folder)
        self.quiet_period_s = float(quiet_period_s)
        self._clock = clock
        self._pending: dict[str, _Pending] = {}
        self._taken: dict[str, tuple[int, int]] = {}

    def __len__(self) -> int:
        return len(self._pending)

    def mark_taken(self, relpath: str, size_bytes: int, mtime_ns: int) -> None:
        """Remember a file as already handled at this stat (so a listing skips it)."""
        self._taken[relpath] = (size_bytes, mtime_ns)

    def touch(self, relpath: str, stat: os.stat_result | None = None) -> None:
        """Note that ``relpath`` may have changed (an event, or a listing found it)."""
        if stat is None:
            try:
                stat = os.stat(self.folder / relpath)
            except FileNotFoundError:
                self._pending.pop(relpath, None)
                return
        key = (stat.st_size, stat.st_mtime_ns)
        pending = self._pending.get(relpath)
        if pending is None:
            if self._taken.get(relpath) == key:
                return
            self._pending[relpath] = _Pending(key[0], key[1], self._clock(), utc_now_iso())
        elif (pending.size_bytes, pending.mtime_ns) != key:
            pending.size_bytes, pending.mtime_ns = key
            pending.stable_since = self._clock()

    def forget(self, relpath: str) -> None:
        self._pending.pop(relpath, None)

    def ready(self) -> list[ReadyFile]:
        """Files unchanged for the quiet period, in fallback acquisition order."""
        now = self._clock()
        done = []
        for relpath in list(self._pending):
            pending = self._pending[relpath]
            try:
                stat = os.stat(self.folder / relpath)
            except FileNotFoundError:
                del self._pending[relpath]
                continue
            key = (stat.st_size, stat.st_mtime_ns)
            if key != (pending.size_bytes, pending.mtime_ns):
                pending.size_bytes, pending.mtime_ns = key
                pending.stable_since = now
                continue
            if now - pending.stable_since >= self.quiet_period_s:
                del self._pending[relpath]
                done.append(ReadyFile(self.folder / relpath, relpath, key[0], key[1],
                                      pending.first_seen_utc))
        done.sort(key=acquisition_sort_key)
        return done


class _EventHandler(FileSystemEventHandler):
    """Puts the relative path of every created / modified / moved-to file on a queue."""

    def __init__(self, folder: Path, spec: WatchSpec, sink: "queue.SimpleQueue[str]"):
        super().__init__()
        self.folder, self.spec, self.sink = folder, spec, sink

    def _put(self, raw) -> None:
        path = Path(os.fsdecode(raw))
        try:
            relpath = path.relative_to(self.folder).as_posix()
        except ValueError:
            return
        if wanted(relpath, self.spec):
            self.sink.put(relpath)

    def dispatch(self, event) -> None:
        if event.is_directory:
            if event.event_type in ("created", "moved"):
                self.sink.put("")  # a folder appeared (moved in whole): list again
            return
        if event.event_type == "moved":
            self._put(event.dest_path)
        elif event.event_type in ("created", "modified", "closed", "deleted"):
            self._put(event.src_path)


class FolderWatcher:
    """Watches a folder and yields complete files (see the module docstring).

    Use ``start()``, then call ``ready()`` from the loop as often as wanted (it never
    blocks), and ``stop()`` at the end.
    """

    def __init__(self, spec: WatchSpec, clock: Callable[[], float] = time.monotonic):
        self.spec = spec
        self._clock = clock
        self.tracker: CompletenessTracker | None = None
        self._observer = None
        self._events: "queue.SimpleQueue[str]" = queue.SimpleQueue()
        self._last_listing = -float("inf")

    def start(self) -> None:
        """Check the folder, start listening, and note every file already present.

        Raises
        ------
        InputFileError
            When the folder is missing or not a folder.
        """
        folder = check_folder(self.spec.folder)
        self.spec = dataclasses.replace(self.spec, folder=folder)
        self.tracker = CompletenessTracker(folder, self.spec.quiet_period_s, self._clock)
        if not self.spec.poll:
            from watchdog.observers import Observer

            try:
                self._observer = Observer()
                self._observer.schedule(_EventHandler(folder, self.spec, self._events), str(folder),
                                        recursive=self.spec.recursive)
                self._observer.daemon = True
                self._observer.start()
            except OSError as error:
                # e.g. the system's limit of file watches is reached: listing still works
                log.warning("file events unavailable for %s (%s); polling the folder instead", folder, error)
                self._observer = None
                self.spec = dataclasses.replace(self.spec, poll=True)
        self._list()

    def relist(self) -> None:
        """List the folder now (new or changed files become pending)."""
        self._list()

    def _list(self) -> None:
        self._last_listing = self._clock()
        for relpath, stat in list_wanted(self.spec):
            self.tracker.touch(relpath, stat)

    def ready(self) -> list[ReadyFile]:
        """Files that have become complete since the last call (never blocks)."""
        interval = self.spec.poll_interval_s if self.spec.poll else self.spec.rescan_interval_s
        relist = self._clock() - self._last_listing >= interval
        while True:
            try:
                relpath = self._events.get_nowait()
            except queue.Empty:
                break
            if relpath:
                self.tracker.touch(relpath)
            else:
                relist = True
        if relist:
            if not self.spec.folder.is_dir():
                raise InputFileError(self.spec.folder, "the input folder has disappeared",
                                     hint="restore it; the ledger keeps what was taken")
            self._list()
        return self.tracker.ready()

    @property
    def pending(self) -> int:
        """Files seen but not yet complete."""
        return 0 if self.tracker is None else len(self.tracker)

    def mark_taken(self, ready: ReadyFile) -> None:
        self.tracker.mark_taken(ready.relpath, ready.size_bytes, ready.mtime_ns)

    def requeue(self, relpath: str) -> None:
        """Look at ``relpath`` again (it changed while it was being read)."""
        self.tracker.touch(relpath)

    def stop(self) -> None:
        if self._observer is not None:
            self._observer.stop()
            self._observer.join(timeout=5)
            self._observer = None
