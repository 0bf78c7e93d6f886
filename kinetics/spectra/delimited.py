"""Delimited-text spectra (CSV, TSV, semicolon or whitespace separated): reader and writer.

Layout
------
::

    # nucleus: 1H
    # observe_mhz: 60.02
    # acquired: 2026-03-01T10:15:00+00:00
    # n_scans: 16
    ppm,real,imag
    10.0,0.0012,-0.0003
    ...

* ``# key: value`` (or ``# key = value``) lines anywhere before the data carry metadata.
  Keys read: ``observe_mhz`` (required: a Spectrum needs its observe frequency),
  ``nucleus`` (default ``1H``, with a warning), ``acquired`` (ISO 8601; no zone means
  UTC, with a warning), ``duration_s``, ``n_scans``, ``title``, ``decoupler`` (e.g. ``1H``).  Every key lands in
  ``Spectrum.header`` as written.  Other ``#`` lines are comments.
* An optional column-name row (``ppm``/``shift_ppm``, ``real``/``intensity``,
  ``imag``/``imaginary``); without one the columns are ppm, real and (optional) imag.
* The separator is taken from the first data row: tab, semicolon, comma, else spaces.
  With tab or semicolon separators (and with spaces when every number has one) a comma
  is a decimal mark (``7,25;1234,5``), as spreadsheets in many locales write it.
* Column names may carry units or words (``Shift [ppm]``, ``Intensity (a.u.)``,
  ``Imaginary part``); unknown names mean ppm, real, imag by position.
* The ppm column must be strictly monotonic (either direction; stored high-to-low).

Time-domain (FID) data are not read from delimited text; use JCAMP-DX for FIDs.
"""

from __future__ import annotations

import logging
import math
import re
from array import array
from datetime import datetime, timezone
from pathlib import Path

import numpy as np

from kinetics.atomic import write_atomic
from kinetics.errors import InputFileError
from kinetics.spectra.spectrum import Spectrum
from kinetics.spectra.text import MAX_POINTS, LoadedText, expect_format, load_text, parse_guarded

log = logging.getLogger(__name__)

# Key words joined by single spaces: the pattern stays linear on hostile long lines.
_META_RE = re.compile(r"^#+\s*([A-Za-z][\w.\-/]*(?: [\w.\-/]+)*)\s*[:=](.*)$")
_ROLE_NAMES = {
    "ppm": "ppm", "shift_ppm": "ppm", "shift": "ppm", "delta_ppm": "ppm", "chemical_shift_ppm": "ppm",
    "real": "real", "intensity": "real", "re": "real", "absorption": "real", "y": "real",
    "imag": "imag", "imaginary": "imag", "im": "imag", "dispersion": "imag",
}
_HINT = "each data row needs ppm, real and optionally imag as numbers"
#: What a user should do with a table holding one intensity column per time point.
MATRIX_HINT = ('a table with one intensity column per time point is an arrayed series (matrix table, header '
               'row "ppm, t1, t2, ..."): name it in the run config as [run] file = "<this file>" '
               '(kinetics.spectra.arrayed.read_traces reads it)')


_DECIMAL_COMMA = re.compile(r"[+-]?\d*,\d+(?:[eE][+-]?\d+)?")


def _separator(line: str) -> tuple[str | None, bool]:
    """(separator, decimal comma) read from the first data row.

    Tab, then semicolon, then comma, else whitespace.  With tab, semicolon or whitespace
    separators, numbers written with a decimal comma (``7,25``, as spreadsheets in many
    locales export them) are read; a comma-separated row cannot carry them.
    """
    if "\t" in line or ";" in line:
        return ("\t" if "\t" in line else ";"), True  # a comma here can only be a decimal mark
    if "," in line:
        by_space = line.split()
        if 2 <= len(by_space) <= 3 and all(_DECIMAL_COMMA.fullmatch(item) or _is_number(item)
                                           for item in by_space):
            return None, True  # "7,25 1234,5": whitespace-separated, decimal commas
        return ",", False
    return None, False


def _split(line: str, separator: str | None, decimal_comma: bool = False) -> list[str]:
    if decimal_comma:
        line = line.replace(",", ".")
    return [item.strip() for item in line.split(separator)] if separator else line.split()


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def _role(name: str) -> str:
    """Role of a column from its name: exact names first, then words such as "Shift [ppm]",
    "Intensity (a.u.)", "Imaginary part" that spreadsheets and instrument exports write."""
    key = name.strip().strip('"\'').lower()
    exact = _ROLE_NAMES.get(key.replace(" ", "_"), "")
    if exact:
        return exact
    words = set(re.findall(r"[a-zδ]+", key))
    if words & {"ppm", "shift", "δ", "delta"}:
        return "ppm"
    if words & {"imag", "imaginary", "dispersion", "im"}:
        return "imag"
    if words & {"real", "intensity", "absorption", "amplitude", "signal", "re", "y"}:
        return "real"
    return ""


def _column_roles(path: str, names: list[str], line: int) -> list[str]:
    roles = [_role(name) for name in names]
    if all(roles) and len(set(roles)) == len(roles) and "ppm" in roles and "real" in roles:
        return roles
    log.info("%s: column names %s not recognised; taking ppm, real[, imag] by position", path, names)
    return ["ppm", "real", "imag"][: len(names)]


def _metadata_float(path: str, meta: dict, key: str) -> float | None:
    if key not in meta:
        return None
    text, line = meta[key]
    try:
        value = float(text)
    except ValueError:
        raise InputFileError(path, f"'# {key}: {text[:30]}' is not a number", line=line,
                             hint=f"write e.g. '# {key}: 60.0'") from None
    if not math.isfinite(value):
        raise InputFileError(path, f"'# {key}' is not finite", line=line, hint=f"write e.g. '# {key}: 60.0'")
    return value


def _acquired(path: str, meta: dict) -> datetime | None:
    if "acquired" not in meta:
        return None
    text, line = meta["acquired"]
    try:
        stamp = datetime.fromisoformat(text.strip())
    except ValueError:
        raise InputFileError(path, f"'# acquired: {text[:40]}' is not an ISO 8601 time", line=line,
                             hint="write e.g. '# acquired: 2026-03-01T10:15:00+00:00'") from None
    if stamp.tzinfo is None:
        log.warning("%s: '# acquired' has no time zone; taken as UTC", path)
        stamp = stamp.replace(tzinfo=timezone.utc)
    return stamp.astimezone(timezone.utc)


def _lines(text: str):
    """The lines of ``text`` one at a time (no list of all lines held at once)."""
    if "\r" in text:
        text = text.replace("\r\n", "\n").replace("\r", "\n")
    start, size = 0, len(text)
    while start < size:
        end = text.find("\n", start)
        if end < 0:
            end = size
        yield text[start:end]
        start = end + 1


def _row_values(path: str, fields: list[str], line: int) -> list[float]:
    try:
        return [float(item) for item in fields]
    except ValueError:
        bad = next(item for item in fields if not _is_number(item))
        raise InputFileError(path, f"non-numeric value {bad[:20]!r}", line=line, hint=_HINT) from None


def parse_delimited(loaded: LoadedText) -> Spectrum:
    """Build a Spectrum from an already loaded delimited text (see module docstring)."""
    path = loaded.path
    meta: dict[str, tuple[str, int]] = {}
    header: dict[str, str] = {}
    # Compact C arrays (8 bytes a value), not lists of strings: a large or hostile table
    # costs a few times its size in memory, not tens of times.
    values = array("d")
    lines = array("q")
    roles: list[str] | None = None
    separator: str | None = None
    decimal_comma = False
    for number, raw in enumerate(_lines(loaded.text), start=1):
        line = raw.strip()
        if not line:
            continue
        if line.startswith("#"):
            match = _META_RE.match(line)
            if match and not lines:
                key = match.group(1).strip()
                value = match.group(2).strip()
                meta.setdefault(key.lower().replace(" ", "_"), (value, number))
                header.setdefault(key, value)
            continue
        if roles is None:
            separator, decimal_comma = _separator(line)
            fields = _split(line, separator, decimal_comma)
            if not all(_is_number(item) for item in fields):
                if len(fields) in (2, 3) and not any(_is_number(item) for item in fields):
                    roles = _column_roles(path, fields, number)
                    separator = None  # taken again from the first data row
                    continue
                matrix = len(fields) >= 2 and all(_is_number(item) for item in fields[1:])
                raise InputFileError(path, f"not a spectrum table: {line[:40]!r}", line=number,
                                     hint=MATRIX_HINT if matrix else _HINT)
            if len(fields) not in (2, 3):
                raise InputFileError(path, f"data rows need 2 or 3 columns, this one has {len(fields)}",
                                     line=number, hint=MATRIX_HINT if len(fields) > 3 else _HINT)
            roles = ["ppm", "real", "imag"][: len(fields)]
        if separator is None and not lines:
            separator, decimal_comma = _separator(line)
        fields = _split(line, separator, decimal_comma)
        if len(fields) != len(roles):
            raise InputFileError(path, f"row has {len(fields)} columns, expected {len(roles)}",
                                 line=number, hint=_HINT)
        values.extend(_row_values(path, fields, number))
        lines.append(number)
        if len(lines) > MAX_POINTS:
            raise InputFileError(path, f"more than {MAX_POINTS} data rows", line=number,
                                 hint="split very large data sets")
    if len(lines) < 2:
        raise InputFileError(path, "fewer than 2 data rows", hint="a spectrum needs ppm and intensity rows")
    table = np.frombuffer(values, dtype=float).reshape(len(lines), len(roles))
    bad = np.argwhere(~np.isfinite(table))
    if bad.size:
        raise InputFileError(path, "NaN or infinite value", line=lines[int(bad[0, 0])],
                             hint="remove or replace the row")
    columns = {role: table[:, index] for index, role in enumerate(roles)}
    ppm = columns["ppm"]
    steps = np.diff(ppm)
    direction = np.sign(ppm[-1] - ppm[0])  # the overall trend; the first step against it is reported
    wrong = np.flatnonzero(np.sign(steps) != direction) if direction else np.array([0])
    if wrong.size:
        raise InputFileError(path, "ppm column is not strictly monotonic", line=lines[int(wrong[0]) + 1],
                             hint="sort the rows by shift and remove repeated shifts")
    observe_mhz = _metadata_float(path, meta, "observe_mhz")
    if observe_mhz is None:
        observe_mhz = _metadata_float(path, meta, "observe_frequency_mhz")
    if observe_mhz is None or observe_mhz <= 0:
        raise InputFileError(path, "no positive observe frequency in the header",
                             line=meta.get("observe_mhz", (None, None))[1],
                             hint="add a line '# observe_mhz: 60.0' (MHz) above the data")
    nucleus = meta.get("nucleus", ("", 0))[0].replace("^", "").strip()
    if not nucleus:
        log.warning("%s: no '# nucleus:' line; assuming 1H", path)
        nucleus = "1H"
    n_scans = _metadata_float(path, meta, "n_scans")
    duration_s = _metadata_float(path, meta, "duration_s")
    try:
        return Spectrum(
            ppm=ppm, real=columns["real"], imag=columns.get("imag"), nucleus=nucleus,
            observe_mhz=observe_mhz, acquired_utc=_acquired(path, meta), duration_s=duration_s,
            n_scans=None if n_scans is None else _whole(path, meta, n_scans),
            source_path=path, sha256=loaded.sha256, header=header,
            decoupler=meta.get("decoupler", ("", 0))[0].strip() or None,
        )
    except ValueError as error:
        raise InputFileError(path, f"invalid spectrum: {error}", hint="check the header lines") from None


def _whole(path: str, meta: dict, value: float) -> int:
    if value != int(value) or value < 1:
        raise InputFileError(path, "'# n_scans' must be a whole number >= 1", line=meta["n_scans"][1],
                             hint="write e.g. '# n_scans: 16'")
    return int(value)


def read_delimited(path: str | Path) -> Spectrum:
    """Read a delimited-text spectrum (refuses JCAMP-DX content; see ``reader.read``)."""
    loaded = load_text(path)
    expect_format(loaded, "delimited")
    return parse_guarded(loaded, parse_delimited)


def csv_text(spectrum: Spectrum) -> str:
    """The text :func:`write_csv` writes."""
    lines = ["# kinetics spectrum, delimited text"]
    title = spectrum.header.get("TITLE") or spectrum.header.get("title")
    if title:
        lines.append(f"# title: {title}")
    lines.append(f"# nucleus: {spectrum.nucleus}")
    lines.append(f"# observe_mhz: {spectrum.observe_mhz!r}")
    if spectrum.acquired_utc is not None:
        lines.append(f"# acquired: {spectrum.acquired_utc.astimezone(timezone.utc).isoformat()}")
    if spectrum.duration_s is not None:
        lines.append(f"# duration_s: {spectrum.duration_s!r}")
    if spectrum.n_scans is not None:
        lines.append(f"# n_scans: {spectrum.n_scans}")
    if spectrum.decoupler:
        lines.append(f"# decoupler: {spectrum.decoupler}")
    columns = [spectrum.ppm, spectrum.real] + ([spectrum.imag] if spectrum.imag is not None else [])
    lines.append(",".join(["ppm", "real", "imag"][: len(columns)]))
    # repr gives the shortest text that reads back to the same float.
    lines += [",".join(map(repr, row)) for row in zip(*(column.tolist() for column in columns))]
    return "\n".join(lines) + "\n"


def write_csv(path: str | Path, spectrum: Spectrum) -> Path:
    """Write a spectrum as CSV with ``# key: value`` metadata, atomically (exact round trip)."""
    write_atomic(path, csv_text(spectrum))
    return Path(path)


__all__ = ["parse_delimited", "read_delimited", "write_csv", "csv_text"]
