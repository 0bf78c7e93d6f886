"""The file boundary: load a file once, tell its format from its content, hand it on.

``read(path)`` returns a :class:`~kinetics.spectra.spectrum.Spectrum` or a
:class:`~kinetics.spectra.spectrum.Fid`, whatever the file holds.  The format is
decided by content, never by extension: a text file whose first non-blank line starts
with ``##`` is JCAMP-DX, any other text is delimited text (CSV, TSV, whitespace).

Every problem is an :class:`~kinetics.errors.InputFileError` naming the file, the line
when known and what to do.  Files above :data:`MAX_FILE_BYTES` are refused before they
are read, so a stray disk image dropped into a watched folder cannot fill memory.

This module also holds the two helpers both formats share: :func:`load_text` (bytes,
hash and decoded text of one read, so the hash always belongs to the bytes parsed) and
:func:`atomic_write_text` (temporary file in the same folder, then ``os.replace``).
"""

from __future__ import annotations

import hashlib
import logging
import os
import re
import tempfile
from dataclasses import dataclass
from pathlib import Path

from kinetics.errors import InputFileError
from kinetics.spectra.spectrum import Fid, Spectrum

log = logging.getLogger(__name__)

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


def parse_loaded(loaded: LoadedText, expected_format: str | None = None) -> Spectrum | Fid:
    """Parse text already loaded by :func:`load_text` (format detected from content).

    ``expected_format`` ("jcamp-dx" or "delimited"), when given, refuses other content.
    """
    # Imported here: both format modules import this module's helpers.
    from kinetics.spectra import delimited, jcampdx

    found = detect_format(loaded.text)
    if expected_format is not None and found != expected_format:
        raise InputFileError(loaded.path, f"content is {found}, not {expected_format}",
                             hint="use kinetics.spectra.read(), which detects the format")
    try:
        if found == "jcamp-dx":
            return jcampdx.parse_jcampdx(loaded)
        return delimited.parse_delimited(loaded)
    except InputFileError:
        raise
    except (ValueError, IndexError, KeyError, OverflowError, ArithmeticError, MemoryError) as error:
        # Safety net: a malformed file must never surface as a bare exception.  The
        # message starts with "unexpected" so the fuzz tests can tell a net catch from a
        # deliberate check and flag the parser hole.
        log.debug("unexpected parse failure", exc_info=True)
        raise InputFileError(loaded.path, f"unexpected format problem: {error}",
                             hint="check that the file is a complete JCAMP-DX or CSV spectrum") from error


def read(path: str | Path) -> Spectrum | Fid:
    """Read a JCAMP-DX or delimited-text file into a Spectrum or an Fid.

    Parameters
    ----------
    path : str or Path
        The file.  Its format is detected from its content.

    Returns
    -------
    Spectrum or Fid
        ``source_path`` and ``sha256`` (of the bytes parsed) are set.

    Raises
    ------
    InputFileError
        For every problem with the file (never another exception).
    """
    return parse_loaded(load_text(path))


def read_spectrum(path: str | Path) -> Spectrum:
    """Read a file that must hold a frequency-domain spectrum.

    An FID is refused with an InputFileError rather than transformed here: turning an
    FID into a spectrum is processing (``kinetics.processing.fid_to_spectrum``), and the
    data flow runs reader -> processing, never back.
    """
    record = read(path)
    if isinstance(record, Fid):
        raise InputFileError(
            path, "file holds an FID (time-domain data), not a spectrum",
            hint="read it with kinetics.spectra.read() and transform it with "
            "kinetics.processing.fid_to_spectrum()",
        )
    return record


def read_fid(path: str | Path) -> Fid:
    """Read a file that must hold an FID; a spectrum is refused with an InputFileError."""
    record = read(path)
    if not isinstance(record, Fid):
        raise InputFileError(path, "file holds a spectrum, not an FID",
                             hint="use kinetics.spectra.read_spectrum() for spectra")
    return record


def atomic_write_text(path: str | Path, text: str, encoding: str = "ascii") -> None:
    """Write ``text`` to ``path`` so that readers see the old file or the whole new one.

    The text goes to a temporary file in the same folder (same file system), is flushed
    to disk and then moved over ``path`` with ``os.replace``; a folder watcher never
    sees a half-written spectrum.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    handle = tempfile.NamedTemporaryFile(
        "w", encoding=encoding, newline="\n", dir=folder, prefix=f".{target.name}.", suffix=".tmp",
        delete=False,
    )
    try:
        with handle:
            handle.write(text)
            handle.flush()
            os.fsync(handle.fileno())
        os.replace(handle.name, target)
    except BaseException:
        try:
            os.unlink(handle.name)
        except OSError:
            pass
        raise
