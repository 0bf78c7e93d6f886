"""One read of a spectrum file, shared by every reader: bytes, hash, text, size budget.

A leaf module (it imports no format module), so the format readers (``jcampdx``,
``delimited``) and the dispatcher (``reader``) all import it and not each other.

* :func:`load_text` reads a file once (the hash always belongs to the bytes parsed) and
  refuses empty, huge and binary files;
* :func:`detect_format` tells JCAMP-DX from delimited text by content;
* :func:`point_budget` is the most points a file of a given size may decode to, so a tiny
  hostile file cannot claim gigabytes (checked against every declared size before any
  array is allocated);
* :func:`parse_guarded` runs a format parser behind the safety net that turns any
  unforeseen parser failure into an :class:`~kinetics.errors.InputFileError`.
"""

from __future__ import annotations

import hashlib
import logging
import os
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Callable, TypeVar

from kinetics.errors import InputFileError

log = logging.getLogger(__name__)

T = TypeVar("T")

#: Largest file read at all (bytes).  32k-point JCAMP-DX spectra are ~0.3 MB; a file of
#: 2**24 points in DIF form is ~80 MB, in plain AFFN text ~150 MB.
MAX_FILE_BYTES = 256 * 1024 * 1024

#: Largest number of points a header may declare or a data table may decode to.
MAX_POINTS = 2**24

# Control characters that never occur in a text spectrum (tab, LF, VT, FF, CR allowed).
_CONTROL_RE = re.compile(r"[\x00-\x08\x0e-\x1f\x7f]")
_CONTROL_BYTES = bytes([*range(0x00, 0x09), *range(0x0E, 0x20), 0x7F])
_NOT_CONTROL = bytes(b for b in range(256) if b not in _CONTROL_BYTES)


@dataclass(frozen=True)
class LoadedText:
    """One read of a file: its path, the SHA-256 of its bytes and the decoded text."""

    path: str
    sha256: str
    text: str


def load_text(path: str | Path) -> LoadedText:
    """Read a file once and decode it as text, refusing empty, huge and binary files.

    Raises
    ------
    InputFileError
        The file cannot be opened, is empty, exceeds :data:`MAX_FILE_BYTES`, or holds
        binary data.
    """
    name = str(path)
    try:
        size = os.stat(name).st_size
        if size > MAX_FILE_BYTES:
            raise InputFileError(
                name,
                f"file is {size} bytes, more than the {MAX_FILE_BYTES} bytes a spectrum file may have",
                hint="check that this is a spectrum file",
            )
        with open(name, "rb") as handle:
            # read(n) allocates n bytes up front: ask for the size seen, and more only if
            # the file grew meanwhile (a spectrometer still writing it).
            raw = handle.read(size + 1)
            if len(raw) > size:
                raw += handle.read(MAX_FILE_BYTES + 1 - len(raw))
        if len(raw) > MAX_FILE_BYTES:
            raise InputFileError(name, f"file grew beyond {MAX_FILE_BYTES} bytes while it was read",
                                 hint="check that this is a spectrum file")
    except InputFileError:
        raise
    except OSError as error:
        raise InputFileError(name, f"cannot be opened: {error.strerror or error}",
                             hint="check the path and permissions") from error
    if not raw.strip():
        raise InputFileError(name, "file is empty",
                             hint="wait until the instrument has finished writing it, or re-export it")
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        # JCAMP-DX is ASCII; titles from older software may be Latin-1.
        text = raw.decode("latin-1")
    # bytes.translate deleting every allowed byte leaves only control bytes (fast C scan).
    bad = _CONTROL_RE.search(text) if raw.translate(None, _NOT_CONTROL) else None
    if bad is not None:
        line = text.count("\n", 0, bad.start()) + 1
        raise InputFileError(
            name, "file holds binary data, not text", line=line,
            hint="give a JCAMP-DX (.dx/.jdx) or delimited text (CSV/TSV) spectrum",
        )
    return LoadedText(path=name, sha256=hashlib.sha256(raw).hexdigest(), text=text)


def detect_format(text: str) -> str:
    """``"jcamp-dx"`` when the first non-blank line starts with ``##``, else ``"delimited"``."""
    for line in text.splitlines():
        stripped = line.strip()
        if stripped:
            return "jcamp-dx" if stripped.startswith("##") else "delimited"
    return "delimited"


#: Points any file may hold whatever its size (a 64k-point spectrum in a few bytes of DUP
#: runs is legitimate: flat imaginary parts, zero-filled FIDs).
FREE_POINTS = 2**16

#: Beyond :data:`FREE_POINTS`, points a file may decode to per byte present.  Noisy data
#: cost at least one byte a point in every JCAMP-DX form (AFFN two), so 4 leaves room for
#: flat regions compressed by DUP counts while a tiny file cannot claim gigabytes.
POINTS_PER_BYTE = 4


def point_budget(n_bytes: int) -> int:
    """Most points (summed over all pages) a file of ``n_bytes`` bytes may decode to.

    ``max(FREE_POINTS, POINTS_PER_BYTE * n_bytes)``, never above :data:`MAX_POINTS` per page
    (callers check that separately).  Memory of a read is then bounded by a small multiple
    of the file size plus a constant.
    """
    return max(FREE_POINTS, POINTS_PER_BYTE * int(n_bytes))


def expect_format(loaded: LoadedText, expected_format: str) -> None:
    """Refuse content of another format than ``expected_format`` ("jcamp-dx"/"delimited")."""
    found = detect_format(loaded.text)
    if found != expected_format:
        raise InputFileError(loaded.path, f"content is {found}, not {expected_format}",
                             hint="use kinetics.spectra.read(), which detects the format")


def parse_guarded(loaded: LoadedText, parser: Callable[[LoadedText], T]) -> T:
    """``parser(loaded)`` with every failure an :class:`InputFileError`.

    Safety net: a malformed file must never surface as a bare exception.  The message
    starts with "unexpected" so the fuzz tests can tell a net catch from a deliberate check
    and flag the parser hole.
    """
    try:
        return parser(loaded)
    except InputFileError:
        raise
    except (ValueError, IndexError, KeyError, OverflowError, ArithmeticError, MemoryError) as error:
        log.debug("unexpected parse failure", exc_info=True)
        raise InputFileError(loaded.path, f"unexpected format problem: {error}",
                             hint="check that the file is a complete JCAMP-DX or CSV spectrum") from error


__all__ = ["LoadedText", "MAX_FILE_BYTES", "MAX_POINTS", "FREE_POINTS", "POINTS_PER_BYTE", "load_text",
           "detect_format", "expect_format", "point_budget", "parse_guarded"]
