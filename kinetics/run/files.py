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

Listing a finished folder is library work (batch runs, studies); noticing files as they
arrive is the live shell's (``watchers.folder``).
"""

from __future__ import annotations

import fnmatch
import os
import re
from dataclasses import dataclass
from pathlib import Path

from kinetics.errors import InputFileError

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
    ``size_bytes`` and ``mtime_ns`` are the stat it was found stable under.
    """

    path: Path
    relpath: str
    size_bytes: int
    mtime_ns: int
    first_seen_utc: str


def _natural_key(text: str) -> list:
    return [int(part) if part.isdigit() else part for part in re.split(r"(\d+)", text)]


def acquisition_sort_key(ready: ReadyFile) -> tuple:
    """Fallback acquisition order: modification time, then the name (digits as numbers)."""
    return (ready.mtime_ns, _natural_key(ready.relpath))


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
    if not folder.exists():
        raise InputFileError(folder, "the input folder does not exist",
                             hint="create it, or set the spectra folder in the config")
    if not folder.is_dir():
        raise InputFileError(folder, "the input path is not a folder",
                             hint="give the folder the instrument writes into")
    if not os.access(folder, os.R_OK | os.X_OK):
        raise InputFileError(folder, "the input folder cannot be read (permission denied)",
                             hint="give this user read access to the folder")
    return folder.resolve()


def list_wanted(spec: WatchSpec) -> list[tuple[str, os.stat_result]]:
    """``(relpath, stat)`` of every wanted regular file now in the folder."""
    found = []
    stack = [Path(spec.folder)]
    while stack:
        current = stack.pop()
        try:
            entries = list(os.scandir(current))
        except FileNotFoundError:
            continue
        for entry in entries:
            try:
                if entry.is_dir(follow_symlinks=False):
                    if spec.recursive and not is_temporary(entry.name):
                        stack.append(Path(entry.path))
                    continue
                if not entry.is_file():
                    continue
                relpath = Path(entry.path).relative_to(spec.folder).as_posix()
                if wanted(relpath, spec):
                    found.append((relpath, entry.stat()))
            except FileNotFoundError:  # vanished between listing and stat
                continue
    return found
