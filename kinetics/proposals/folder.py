"""Which spectra of a folder ``kinetics init`` reads: the first and the last in acquisition
order, FIDs transformed with default processing, stored spectra re-phased when visibly
mis-phased."""

from __future__ import annotations

import logging
import re
from pathlib import Path

from kinetics.errors import FitError, InputFileError
from kinetics.spectra.spectrum import Fid, Spectrum

log = logging.getLogger(__name__)

#: Suffixes of files considered spectra (content decides the format; this only skips
#: notes, images and configs lying in the same folder).
SPECTRUM_SUFFIXES = (".dx", ".jdx", ".jcamp", ".jcm", ".csv", ".tsv", ".txt", ".dat")


def _natural_key(path: Path):
    return [int(part) if part.isdigit() else part.lower() for part in re.split(r"(\d+)", path.name)]


def spectrum_files(folder: str | Path) -> list[Path]:
    """Spectrum files of a folder, in natural name order.

    Hidden and temporary files are ignored.  When suffixes are mixed, the most common one
    wins (a simulator's ``truth.csv`` or an exported table beside 100 ``.jdx`` files is
    not a spectrum).
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputFileError(folder, "is not a folder", hint="give the folder the spectrometer writes to")
    files = [p for p in folder.iterdir()
             if p.is_file() and not p.name.startswith(".") and p.suffix.lower() in SPECTRUM_SUFFIXES]
    if not files:
        raise InputFileError(folder, "holds no spectrum files",
                             hint=f"expected files ending in {', '.join(SPECTRUM_SUFFIXES)}")
    suffixes = [p.suffix for p in files]
    common = max(sorted(set(suffixes)), key=suffixes.count)
    return sorted((p for p in files if p.suffix == common), key=_natural_key)


def _as_spectrum(record: Spectrum | Fid) -> Spectrum:
    from kinetics.processing import fid_to_spectrum

    return fid_to_spectrum(record) if isinstance(record, Fid) else record


def _read_all(folder: str | Path):
    from kinetics.spectra.reader import read

    files = spectrum_files(folder)
    records: list[tuple[Path, Spectrum | Fid]] = []
    skipped: list[str] = []
    for number, path in enumerate(files):
        try:
            records.append((path, read(path)))
        except InputFileError as error:
            if number == 0:
                raise InputFileError(path, f"first spectrum of the folder cannot be read: {error.problem}",
                                     line=error.line, hint=error.hint or "fix or remove the file") from error
            skipped.append(str(error))
            log.warning("skipping unreadable file: %s", error)
    timed = [(rec.acquired_utc, n) for n, (_, rec) in enumerate(records) if rec.acquired_utc is not None]
    order = [n for _, n in sorted(timed)] if len(timed) == len(records) else list(range(len(records)))
    return [records[n] for n in order], files, skipped


def _transformed(path: Path, record: Spectrum | Fid) -> Spectrum:
    try:
        return _as_spectrum(record)
    except (ValueError, FitError) as error:
        raise InputFileError(path, f"FID could not be transformed: {error}",
                             hint="check that the file is a complete FID") from error


def first_spectrum(folder: str | Path) -> tuple[Spectrum, list[Path], list[str], bool]:
    """The first spectrum of a folder in acquisition order.

    Files are read in name order; the first must be readable (else its InputFileError is
    raised, naming it).  Later unreadable files are skipped with a note.  Among the
    readable files the earliest acquisition time wins; without times, name order.

    Returns
    -------
    spectrum : Spectrum
    files : list of Path
        Every spectrum file found.
    skipped : list of str
        One message per unreadable file.
    from_fid : bool
        True when the file held an FID (transformed with default processing).
    """
    records, files, skipped = _read_all(folder)
    path, record = records[0]
    return _transformed(path, record), files, skipped, isinstance(record, Fid)


def series_ends(folder: str | Path) -> tuple[Spectrum, Spectrum | None, list[Path], list[str], bool]:
    """First and last spectrum of a folder in acquisition order (last None for one file).

    Returns (first, last, files, skipped, from_fid); see :func:`first_spectrum`.
    """
    records, files, skipped = _read_all(folder)
    path, record = records[0]
    last = None
    if len(records) > 1:
        last_path, last_record = records[-1]
        last = _transformed(last_path, last_record)
    return _transformed(path, record), last, files, skipped, isinstance(record, Fid)


# ---------------------------------------------------------------- phase
#: a stored spectrum counts as mis-phased beyond these corrections (degrees)
_PHASE_TOLERANCE_P0_DEG = 5.0
_PHASE_TOLERANCE_P1_DEG = 10.0


def rephase_if_needed(spectrum: Spectrum) -> tuple[Spectrum, str | None]:
    """Auto-phase a stored spectrum that carries imaginary data and is visibly mis-phased.

    Benchtop instruments often write spectra with a residual phase error; peak picking on
    them misses multiplets sitting on a solvent line's dispersive tail.  A spectrum whose
    automatic correction is small is kept as stored (None is returned for the note).
    """
    if spectrum.imag is None:
        return spectrum, None
    from kinetics.processing import auto_phase

    try:
        result = auto_phase(spectrum)
    except (ValueError, FitError) as error:
        log.info("init: automatic phasing of %s failed (%s); using it as stored", spectrum.source_path, error)
        return spectrum, None
    p0 = abs((result.p0_deg + 180.0) % 360.0 - 180.0)
    if p0 <= _PHASE_TOLERANCE_P0_DEG and abs(result.p1_deg) <= _PHASE_TOLERANCE_P1_DEG:
        return spectrum, None
    note = (f"the first spectrum needed p0 {result.p0_deg:.0f} deg, p1 {result.p1_deg:.0f} deg: "
            "every spectrum is re-phased")
    return result.spectrum, note


__all__ = ["SPECTRUM_SUFFIXES", "first_spectrum", "rephase_if_needed", "series_ends", "spectrum_files"]
