"""The one atomic writer: readers see the old file or the whole new one, never half of it.

``write_atomic(path, data)`` writes to a temporary file in the same folder (same file
system), flushes it to disk (``fsync``) and moves it over ``path`` with ``os.replace``.
Every failure (full disk, read-only folder, a file where a folder should be, a name too
long) is one :class:`~kinetics.errors.OutputError` naming the path and what to do; no
temporary file is left behind and the previous version of ``path`` is untouched.
"""

from __future__ import annotations

import errno
import os
import shutil
import tempfile
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator

from kinetics.errors import OutputError

__all__ = ["write_atomic", "output_error", "guard_output", "staged_folder", "LOCKED_HINT"]

#: the remedy of a ledger locked by another process (``{path}`` is the ledger)
LOCKED_HINT = "another kinetics process is writing {path}; stop it or choose another --out"


def _sqlite_error(path, text: str) -> OutputError | None:
    """An SQLite failure (its message; SQLite does not keep errno) as an OutputError, or None."""
    lowered = text.lower()
    if "locked" in lowered or "busy" in lowered:
        return OutputError(path, f"the ledger is locked ({text})", LOCKED_HINT.format(path=path))
    if "full" in lowered or "too large" in lowered or "disk i/o" in lowered:
        return OutputError(path, f"disk full or file size limit reached ({text})",
                           "free space on the output disk and run again: the ledger is intact")
    if "readonly" in lowered or "read-only" in lowered or "unable to open" in lowered:
        return OutputError(path, f"output folder is missing or not writable ({text})",
                           "choose a writable --out folder")
    return None


#: a path longer than this is shown by its start and end in a message
SHOWN_PATH_CHARS = 160


def _shown(path) -> str:
    """``path`` for a one-line message: control characters escaped, a very long one shortened."""
    text = str(path).encode("unicode_escape", "backslashreplace").decode("ascii") \
        if any(ord(c) < 32 for c in str(path)) else str(path)
    if len(text) > SHOWN_PATH_CHARS:
        half = SHOWN_PATH_CHARS // 2 - 3
        text = f"{text[:half]}...({len(text)} characters)...{text[-half:]}"
    return text


def output_error(path, error: BaseException) -> OutputError:
    """Turn an OS or SQLite failure while writing ``path`` into a one-line :class:`OutputError`.

    The message names ``path`` (shortened when very long), the cause in plain words (the
    system's text in parentheses) and what to do; it never spans lines.
    """
    path = _shown(path)
    code = getattr(error, "errno", None)
    text = " ".join((getattr(error, "strerror", None) or str(error) or type(error).__name__).split())
    if code is None and not isinstance(error, OSError):
        found = _sqlite_error(path, text)
        if found is not None:
            return found
    if code in (errno.ENOSPC, errno.EFBIG, errno.EDQUOT):
        return OutputError(path, f"disk full or file size limit reached ({text})",
                           "free space on the output disk and run again")
    if code in (errno.EACCES, errno.EPERM, errno.EROFS):
        return OutputError(path, f"output folder is not writable ({text})",
                           "choose a writable output folder")
    if code in (errno.ENOTDIR, errno.EEXIST):
        return OutputError(path, f"a file stands where a folder is needed ({text})",
                           "remove or rename that file, or choose another output folder")
    if code == errno.EISDIR:
        return OutputError(path, f"a folder stands where the file should be written ({text})",
                           "remove or rename that folder, or choose another output folder")
    if code == errno.ENAMETOOLONG:
        return OutputError(path, f"path is too long for the file system ({text})",
                           "choose a shorter output folder or file name")
    if code == errno.ENOENT:
        return OutputError(path, f"a folder on the way is missing ({text})",
                           "create the output folder or choose another one")
    return OutputError(path, f"cannot be written ({text})", "check the output folder")


class guard_output:
    """Context manager: any ``OSError`` inside becomes :func:`output_error` for ``path``.

    For writers that cannot go through :func:`write_atomic` (a folder being created, a
    library writing a file by name); an :class:`OutputError` raised inside passes unchanged.

    >>> with guard_output(folder):            # doctest: +SKIP
    ...     folder.mkdir(parents=True, exist_ok=True)
    """

    def __init__(self, path):
        self.path = path

    def __enter__(self):
        return self

    def __exit__(self, kind, error, traceback) -> bool:
        if isinstance(error, OSError):
            raise output_error(getattr(error, "filename", None) or self.path, error) from error
        return False


def write_atomic(path: str | Path, data: bytes | str, *, encoding: str = "utf-8",
                 mode: int = 0o644) -> Path:
    """Write ``data`` to ``path`` through a temporary file in the same folder and a rename.

    Parameters
    ----------
    path : str or Path
        The target file; missing parent folders are created.
    data : bytes or str
        The content; text is encoded with ``encoding`` (newlines written as given).
    encoding : str
        Encoding of text data ("ascii" refuses non-ASCII text with a ``UnicodeEncodeError``
        before anything is written).
    mode : int
        Permission bits of the new file (``mkstemp`` would leave 0600; outputs are shared).

    Returns
    -------
    Path
        ``path``.

    Raises
    ------
    OutputError
        The file cannot be written; nothing is half-written.
    """
    path = Path(path)
    payload = data.encode(encoding) if isinstance(data, str) else bytes(data)
    folder = path.parent if str(path.parent) else Path(".")
    try:
        folder.mkdir(parents=True, exist_ok=True)
        handle, temporary = tempfile.mkstemp(dir=folder, prefix=f".{path.name[:64]}.", suffix=".tmp")
    except OSError as error:
        raise output_error(path, error) from error
    try:
        with os.fdopen(handle, "wb") as stream:
            stream.write(payload)
            stream.flush()
            os.fsync(stream.fileno())
        os.chmod(temporary, mode)
        os.replace(temporary, path)
    except BaseException as error:
        try:
            os.unlink(temporary)
        except OSError:
            pass
        if isinstance(error, OSError):
            raise output_error(path, error) from error
        raise
    return path


@contextmanager
def staged_folder(folder: str | Path) -> Iterator[Path]:
    """Write a set of files (a report) beside ``folder``, then move them in: all or nothing.

    Yields a staging folder (a hidden sibling of ``folder`` on the same file system).
    When the block ends normally every file written there is moved into ``folder`` by a
    rename (creating sub-folders; other files already in ``folder`` stay); when it raises,
    the staging folder is removed and ``folder`` is untouched.  So a full disk, a read-only
    folder or a crash while rendering leaves the previous report whole, never a mix.

    Raises
    ------
    OutputError
        ``folder`` (or a folder on its way) is a file, or cannot be created or written.
    """
    folder = Path(folder)
    with guard_output(folder):
        if folder.exists() and not folder.is_dir():
            raise FileExistsError(errno.EEXIST, os.strerror(errno.EEXIST), str(folder))
        parent = folder.parent if str(folder.parent) else Path(".")
        parent.mkdir(parents=True, exist_ok=True)
        staging = Path(tempfile.mkdtemp(dir=parent, prefix=f".{folder.name[:64]}.", suffix=".partial"))
    try:
        try:
            yield staging
        except OutputError as error:  # a file of the set failed: name it where it was going
            if str(staging) not in error.path:
                raise
            shown = error.path.replace(str(staging), str(folder))
            raise OutputError(shown, str(error)[len(error.path) + 2:]) from error
        for root, _, names in os.walk(staging):
            for name in sorted(names):
                source = Path(root) / name
                target = folder / source.relative_to(staging)
                try:
                    target.parent.mkdir(parents=True, exist_ok=True)
                    os.replace(source, target)
                except OSError as error:  # named by where the file was going, not the staging copy
                    raise output_error(target, error) from error
    finally:
        shutil.rmtree(staging, ignore_errors=True)


def moved_path(path: Path, staging: Path, folder: Path) -> Path:
    """Where ``path`` (inside ``staging``) is after :func:`staged_folder` moved it to ``folder``."""
    return Path(folder) / Path(path).relative_to(staging)
