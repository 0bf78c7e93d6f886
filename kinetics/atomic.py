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
import tempfile
from pathlib import Path

from kinetics.errors import OutputError

__all__ = ["write_atomic", "output_error"]


def output_error(path, error: BaseException) -> OutputError:
    """Turn an OS failure while writing ``path`` into a one-line :class:`OutputError`."""
    code = getattr(error, "errno", None)
    text = getattr(error, "strerror", None) or str(error)
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
    return OutputError(path, f"cannot be written ({text})", "check the output folder")


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
