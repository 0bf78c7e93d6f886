"""Notice files in a folder and hand each one over only once it is complete.

A file counts as *complete* once its stat signature (size, modification time,
status-change time, inode: :func:`kinetics.run.files.stat_signature`) has stayed unchanged
for the quiet period (the live loop then checks that it parses; a parse failure after the
quiet period quarantines it, while a file that is still growing is never looked at).

A file already taken is looked at again when its signature changes in any way (a listing
compares all four, so a re-export written in place with the same size and modification
time is seen: its status-change time moved) or when a file event names it again (which
also covers a file system whose times cannot tell).  Looking again means hashing it: the
engine decides by the SHA-256 whether it is a new version, exactly as a batch run reading
the folder would.  Only changed or named files are hashed, never the whole folder.

Events come from a watchdog observer (inotify / FSEvents / ReadDirectoryChanges); with
``poll=True`` the folder is listed every ``poll_interval_s`` instead, for network shares
where file events do not arrive.  Event mode also lists the folder every
``rescan_interval_s``, so an event the operating system dropped (a queue overflow during a
burst) cannot lose a file.

Symbolic links that point outside the folder or loop are skipped with one warning each
(:func:`kinetics.run.files.link_problem`), in listings and for file events alike.

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
import stat as stat_module
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Callable

from watchdog.events import FileSystemEventHandler

from kinetics.errors import InputFileError
from kinetics.run.files import (TEMPORARY_PATTERNS, ReadyFile, WatchSpec, _natural_key,  # noqa: F401
                                 acquisition_sort_key, check_folder, is_link, is_temporary, link_problem,
                                 list_wanted, note_link, stat_signature, wanted)
from kinetics.store import utc_now_iso

log = logging.getLogger(__name__)


@dataclass
class _Pending:
    signature: tuple[int, int, int, int]
    stable_since: float
    first_seen_utc: str


def _inside(target: str, base: str) -> bool:
    return target == base or os.path.commonpath([base, target]) == base


class CompletenessTracker:
    """Keeps the files not yet complete and says which have become so.

    Parameters
    ----------
    folder : Path
        Folder the relative paths are under.
    quiet_period_s : float
        Seconds of unchanged stat signature that make a file complete.
    clock : callable, optional
        Monotonic clock in seconds (``time.monotonic``).
    noted : set of str, optional
        Links already warned about (shared with the folder listings).
    """

    def __init__(self, folder: Path, quiet_period_s: float, clock: Callable[[], float] = time.monotonic,
                 noted: set[str] | None = None):
        self.folder = Path(folder)
        self.quiet_period_s = float(quiet_period_s)
        self._clock = clock
        self._pending: dict[str, _Pending] = {}
        self._taken: dict[str, tuple[int, int, int, int]] = {}
        self.noted = noted if noted is not None else set()

    def __len__(self) -> int:
        return len(self._pending)

    def mark_taken(self, relpath: str, signature: tuple[int, ...], mtime_ns: int | None = None) -> None:
        """Remember a file as handled at this stat signature (so a listing skips it).

        ``signature`` is :attr:`ReadyFile.signature`; the old form ``(relpath, size_bytes,
        mtime_ns)`` is still accepted (then any later listing looks at the file again).
        """
        if mtime_ns is not None:
            signature = (int(signature), int(mtime_ns), 0, 0)
        self._taken[relpath] = tuple(signature)

    def _stat(self, relpath: str) -> os.stat_result | None:
        """The file's stat, or None when it is gone, not a regular file, or a link not followed."""
        path = self.folder / relpath
        if "/" in relpath and not _inside(os.path.realpath(path.parent), os.path.realpath(self.folder)):
            return None  # under a linked folder (never descended; the listing names the link)
        try:
            stat = os.lstat(path)
            if is_link(stat):
                problem = link_problem(self.folder, path)
                if problem is not None:
                    note_link(relpath, problem, self.noted)
                    return None
                stat = os.stat(path)
        except OSError:  # gone, or a link that became a loop: nothing to take now
            return None
        return stat if stat_module.S_ISREG(stat.st_mode) else None

    def touch(self, relpath: str, stat: os.stat_result | None = None, event: bool = False) -> None:
        """Note that ``relpath`` may have changed (a listing found it with ``stat``, or a file
        event named it: ``event`` makes even a taken file with an unchanged signature
        pending again, to be hashed once it is quiet)."""
        if stat is None:
            stat = self._stat(relpath)
            if stat is None:
                self._pending.pop(relpath, None)
                return
        signature = stat_signature(stat)
        pending = self._pending.get(relpath)
        if pending is None:
            if not event and self._taken.get(relpath) == signature:
                return
            self._pending[relpath] = _Pending(signature, self._clock(), utc_now_iso())
        elif pending.signature != signature:
            pending.signature = signature
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
            except OSError:  # gone (a listing finds it again if it comes back)
                del self._pending[relpath]
                continue
            signature = stat_signature(stat)
            if signature != pending.signature:
                pending.signature = signature
                pending.stable_since = now
                continue
            if now - pending.stable_since >= self.quiet_period_s:
                del self._pending[relpath]
                if self._stat(relpath) is None:  # retargeted out of the folder meanwhile
                    continue
                done.append(ReadyFile.from_stat(self.folder / relpath, relpath, stat, pending.first_seen_utc))
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
        self.noted: set[str] = set()  # links not followed, warned about once

    def start(self) -> None:
        """Check the folder, start listening, and note every file already present.

        Raises
        ------
        InputFileError
            When the folder is missing or not a folder.
        """
        folder = check_folder(self.spec.folder)
        self.spec = dataclasses.replace(self.spec, folder=folder)
        self.tracker = CompletenessTracker(folder, self.spec.quiet_period_s, self._clock, self.noted)
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
        for relpath, stat in list_wanted(self.spec, self.noted):
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
                self.tracker.touch(relpath, event=True)
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
        """``ready`` is handled at the signature it was found complete under."""
        signature = getattr(ready, "signature", None) or (ready.size_bytes, ready.mtime_ns, 0, 0)
        self.tracker.mark_taken(ready.relpath, signature)

    def requeue(self, relpath: str) -> None:
        """Look at ``relpath`` again (it changed while it was being read)."""
        self.tracker.touch(relpath, event=True)

    def stop(self) -> None:
        if self._observer is not None:
            self._observer.stop()
            self._observer.join(timeout=5)
            self._observer = None
