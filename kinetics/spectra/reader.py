"""The file boundary: load a file once, tell its format from its content, hand it on.

``read(path)`` returns a :class:`~kinetics.spectra.spectrum.Spectrum` or a
:class:`~kinetics.spectra.spectrum.Fid`, whatever the file holds.  The format is
decided by content, never by extension: a text file whose first non-blank line starts
with ``##`` is JCAMP-DX, any other text is delimited text (CSV, TSV, whitespace).

A file holding a whole series (several spectra, NTUPLES pages per time point, a matrix
table) is refused here with a message naming ``[run] file``; such files are read trace by
trace by :func:`kinetics.spectra.arrayed.read_traces`.

Every problem is an :class:`~kinetics.errors.InputFileError` naming the file, the line
when known and what to do.  Files above :data:`MAX_FILE_BYTES` are refused before they
are read, so a stray disk image dropped into a watched folder cannot fill memory, and no
file decodes to more points than :func:`~kinetics.spectra.text.point_budget` allows for
its size.  The shared pieces (one read of a file, the size caps, the safety net) live in
:mod:`kinetics.spectra.text`.
"""

from __future__ import annotations

from pathlib import Path

from kinetics.errors import InputFileError
from kinetics.spectra import delimited, jcampdx
from kinetics.spectra.spectrum import Fid, Spectrum
from kinetics.spectra.text import (  # noqa: F401  (re-exported: the file boundary's names)
    MAX_FILE_BYTES,
    MAX_POINTS,
    LoadedText,
    detect_format,
    expect_format,
    load_text,
    parse_guarded,
)


def parse_loaded(loaded: LoadedText, expected_format: str | None = None) -> Spectrum | Fid:
    """Parse text already loaded by :func:`load_text` (format detected from content).

    ``expected_format`` ("jcamp-dx" or "delimited"), when given, refuses other content.
    """
    if expected_format is not None:
        expect_format(loaded, expected_format)
    if detect_format(loaded.text) == "jcamp-dx":
        return parse_guarded(loaded, jcampdx.parse_jcampdx)
    return parse_guarded(loaded, delimited.parse_delimited)


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


__all__ = ["read", "read_spectrum", "read_fid", "parse_loaded", "load_text", "detect_format", "LoadedText",
           "MAX_FILE_BYTES", "MAX_POINTS"]
