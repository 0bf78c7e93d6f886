"""Which files of a folder a run takes, and the order it takes them in.

A run's files are the regular files of one folder (optionally its sub-folders) matching
the include patterns and none of the exclude patterns; names that instruments and copy
tools use while a file is still being written are never taken (dot-files, ``~`` files,
``*.tmp``, ``*.part``, ``*.partial``, ``*.crdownload``, ``*.swp``, ``*~``, ``#*#``).

Acquisition order, the engine's one rule (it also picks the reference spectrum, the first
file in this order): the file's modification time, ties broken by the name with digits
compared as numbers.  The header's acquisition time, read when the file is measured,
orders the ledger within a group of files taken together (see
:func:`kinetics.run.engine.process_ready`).

Identity is the content.  A file is a new version when its bytes change, whatever its
stat says: a re-export written in place with the same size and modification time is new.
The cheap :func:`stat_signature` (size, modification time, status-change time, inode)
only says when to hash again; the SHA-256 decides.

Duplicate copies (the same bytes under two names) count once, by one rule for batch and
live runs alike (:func:`attribution_key`): the copy with the earliest acquisition time
counts (the header's time, else the modification time), ties by the name with digits
compared as numbers, then by the plain name.  Arrival order never decides.

Symbolic links inside the folder that point outside it, dangle or loop are not followed:
each is skipped with one warning naming the link (:func:`link_problem`).  A link to a
file inside the folder is read like that file; links to folders are never descended.

Listing a finished folder is library work (batch runs, studies); noticing files as they
arrive is the live shell's (``watchers.folder``).
"""

from __future__ import annotations

import fnmatch
import logging
import os
import re
import stat as stat_module
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path

from kinetics.errors import InputFileError

log = logging.getLogger(__name__)

TEMPORARY_PATTERNS = ("*.tmp", "*.part", "*.partial", "*.crdownload", "*.swp", "*~", "~*",
                      "#*#", ".*")


@dataclass(frozen=True)
class WatchSpec:
    """Which files of which folder to take, and when a file counts as complete.

    Attributes
    ----------
    folder : Path
        The folder the instrument writes into.
    include : tuple of str
        Glob patterns (matched against the name and against the path relative to
        ``folder``); a file is taken when it matches any of them.
    exclude : tuple of str
        Glob patterns of files never taken.
    recursive : bool
        Also watch sub-folders.
    quiet_period_s : float
        Seconds a file's size and modification time must stay unchanged.
    poll : bool
        List the folder instead of listening to file events.
    poll_interval_s : float
        Seconds between listings in poll mode.
    rescan_interval_s : float
        Seconds between safety listings in event mode.
    """

    folder: Path
    include: tuple[str, ...] = ("*",)
    exclude: tuple[str, ...] = ()
    recursive: bool = False
    quiet_period_s: float = 2.0
    poll: bool = False
    poll_interval_s: float = 0.25
    rescan_interval_s: float = 10.0


@dataclass(frozen=True)
class ReadyFile:
    """A file that has stayed unchanged for the quiet period.

    ``relpath`` is relative to the watched folder with POSIX separators (the ledger key);
    ``size_bytes``, ``mtime_ns``, ``ctime_ns`` and ``inode`` are the stat it was found
    stable under (``ctime_ns`` and ``inode`` are 0 when unknown: then only size and
    modification time are compared).
    """

    path: Path
    relpath: str
    size_bytes: int
    mtime_ns: int
    first_seen_utc: str
    ctime_ns: int = 0
    inode: int = 0

    @property
    def signature(self) -> tuple[int, int, int, int]:
        """The stat signature the file was found stable under (:func:`stat_signature`)."""
        return (self.size_bytes, self.mtime_ns, self.ctime_ns, self.inode)

    @classmethod
    def from_stat(cls, path: Path, relpath: str, stat: os.stat_result, first_seen_utc: str) -> "ReadyFile":
        return cls(Path(path), relpath, stat.st_size, stat.st_mtime_ns, first_seen_utc,
                   stat.st_ctime_ns, stat.st_ino)


def stat_signature(stat: os.stat_result) -> tuple[int, int, int, int]:
    """``(size, mtime_ns, ctime_ns, inode)``: when any of them changes the file is hashed again.

    The status-change time cannot be set by a program (copying with preserved times still
    moves it), so a rewrite in place with the same size and modification time changes the
    signature; a rename over the file changes the inode.  The signature only says *when*
    to look again: whether the file is a new version is its SHA-256's call.
    """
    return (stat.st_size, stat.st_mtime_ns, stat.st_ctime_ns, stat.st_ino)


def same_file_state(ready: ReadyFile, stat: os.stat_result | None) -> bool:
    """Whether ``stat`` still shows the file as ``ready`` was found (ctime and inode compared
    only when ``ready`` carries them)."""
    if stat is None:
        return False
    now = stat_signature(stat)
    if ready.ctime_ns == 0 and ready.inode == 0:
        return now[:2] == ready.signature[:2]
    return now == ready.signature


def _natural_key(text: str) -> list:
    return [int(part) if part.isdigit() else part for part in re.split(r"(\d+)", text)]


def acquisition_sort_key(ready: ReadyFile) -> tuple:
    """Fallback acquisition order: modification time, then the name (digits as numbers)."""
    return (ready.mtime_ns, _natural_key(ready.relpath), ready.relpath)


_EPOCH = datetime(1970, 1, 1, tzinfo=timezone.utc)
_MICROSECOND = timedelta(microseconds=1)


def _instant_ns(moment: datetime) -> int:
    """Nanoseconds since the epoch, exactly (a naive time is taken as local, as
    :meth:`datetime.astimezone` does)."""
    return ((moment.astimezone(timezone.utc) - _EPOCH) // _MICROSECOND) * 1000


def attribution_key(acquired: datetime | None, mtime_ns: int, key: str) -> tuple:
    """The engine's one order of measured items; it also says which duplicate copy counts.

    Earliest acquisition first: the time the measurer reports (the file header's,
    ``acquired``), else the file's modification time; ties by ``key`` with digits
    compared as numbers, then by ``key`` itself.  ``key`` names the item: a file's path
    relative to the folder (the ledger key), or a path plus a block suffix for an item
    inside a file.  Exact integers (nanoseconds), so a key recomputed from the ledger's
    ISO time compares equal to the one computed from the measurement.

    Ingesting items in this order makes the first copy of any content the one that
    counts (a batch run); a live run that meets a copy later re-attributes the ledger
    when the newcomer's key is smaller (:meth:`kinetics.store.Ledger.ingest`), so both end
    with the same rows.
    """
    instant = _instant_ns(acquired) if acquired is not None else int(mtime_ns)
    return (instant, _natural_key(key), key)


def ledger_attribution_key(acquired_utc: str | None, mtime_ns: int, key: str) -> tuple:
    """:func:`attribution_key` of a ledger row (``acquired_utc`` as ISO 8601 text)."""
    acquired = datetime.fromisoformat(acquired_utc) if acquired_utc else None
    return attribution_key(acquired, mtime_ns, key)


def is_temporary(name: str) -> bool:
    """True for names instruments and copy tools use while a file is being written."""
    return any(fnmatch.fnmatchcase(name, pattern) for pattern in TEMPORARY_PATTERNS)


def wanted(relpath: str, spec: WatchSpec) -> bool:
    """Whether the file at ``relpath`` (POSIX, relative to the folder) is to be taken."""
    parts = relpath.split("/")
    if any(is_temporary(part) for part in parts):
        return False
    if len(parts) > 1 and not spec.recursive:
        return False
    name = parts[-1]

    def matches(patterns) -> bool:
        return any(fnmatch.fnmatch(name, p) or fnmatch.fnmatch(relpath, p) for p in patterns)

    return matches(spec.include) and not matches(spec.exclude)


def check_folder(folder: Path) -> Path:
    """The folder, resolved; a clear error when it is missing or not a folder."""
    folder = Path(folder)
    try:
        exists = folder.exists()
    except OSError as error:  # a path the system refuses (too long, a link loop)
        raise InputFileError(folder, f"the input folder cannot be looked at ({error.strerror or error})",
                             hint="give the folder's real, shorter path") from error
    if not exists:
        raise InputFileError(folder, "the input folder does not exist",
                             hint="create it, or set the spectra folder in the config")
    if not folder.is_dir():
        raise InputFileError(folder, "the input path is not a folder",
                             hint="give the folder the instrument writes into")
    if not os.access(folder, os.R_OK | os.X_OK):
        raise InputFileError(folder, "the input folder cannot be read (permission denied)",
                             hint="give this user read access to the folder")
    return folder.resolve()


def link_problem(folder: Path, path: str | Path) -> str | None:
    """Why the symbolic link at ``path`` is not followed, or None (it resolves inside ``folder``).

    A link that loops, or whose target lies outside the run folder, is never read: a run's
    spectra are the files of its folder.  A link to a missing target inside the folder is
    not a problem here (it is simply not a file yet).
    """
    base = os.path.realpath(folder)
    try:
        target = os.path.realpath(path, strict=True)
    except FileNotFoundError:
        target = os.path.realpath(path)
    except OSError:  # ELOOP: the link points (through others) back at itself
        return "a symbolic link loop; not followed"
    if target != base and os.path.commonpath([base, target]) != base:
        return f"a symbolic link to {target}, outside the run folder; not followed"
    return None


def note_link(relpath: str, problem: str, noted: set[str] | None) -> None:
    """Warn once about a link that is not followed (``noted`` keeps the links warned about)."""
    if noted is not None:
        if relpath in noted:
            return
        noted.add(relpath)
    log.warning("%s: %s", relpath, problem)


def is_link(stat: os.stat_result) -> bool:
    return stat_module.S_ISLNK(stat.st_mode)


def list_wanted(spec: WatchSpec, noted: set[str] | None = None) -> list[tuple[str, os.stat_result]]:
    """``(relpath, stat)`` of every wanted regular file now in the folder.

    Symbolic links that point outside the folder or loop are skipped with one warning each
    (``noted``, when given, keeps the links already warned about across listings); links
    to folders are never descended.
    """
    found = []
    stack = [Path(spec.folder)]
    while stack:
        current = stack.pop()
        try:
            entries = list(os.scandir(current))
        except (FileNotFoundError, NotADirectoryError):
            continue
        for entry in entries:
            try:
                relpath = Path(entry.path).relative_to(spec.folder).as_posix()
                if entry.is_symlink():
                    problem = link_problem(spec.folder, entry.path)
                    if problem is not None:
                        folder_link = spec.recursive and not is_temporary(entry.name) and os.path.isdir(entry.path)
                        if folder_link or wanted(relpath, spec):
                            note_link(relpath, problem, noted)
                        continue
                    if entry.is_dir():  # its files are listed where they are
                        continue
                elif entry.is_dir(follow_symlinks=False):
                    if spec.recursive and not is_temporary(entry.name):
                        stack.append(Path(entry.path))
                    continue
                if not entry.is_file():
                    continue
                if wanted(relpath, spec):
                    found.append((relpath, entry.stat()))
            except FileNotFoundError:  # vanished between listing and stat
                continue
    return found
