"""JCAMP-DX 4.24 / 5.01 / 6.0 NMR spectra and FIDs: reader and writer.

Formats
-------
JCAMP-DX is the open IUPAC exchange format for spectra (McDonald & Wilks 1988, Appl.
Spectrosc. 42, 151; NMR extensions: Davies & Lampen 1993, Appl. Spectrosc. 47, 1093;
version 6.0 for NMR pages: Woollam et al.).  Supported here:

* ``##XYDATA= (X++(Y..Y))`` (one real spectrum) and ``##XYDATA=``/``##XYPOINTS= (XY..XY)``;
* ``##NTUPLES=`` with ``##DATA TABLE= (X++(R..R))`` / ``(X++(I..I))`` pages (real and
  imaginary spectrum, or the real and imaginary halves of an FID);
* ordinates in AFFN (plain numbers) or ASDF (SQZ, DIF and DUP pseudo-digits), decoded
  by :mod:`kinetics.spectra.asdf` with a strict token grammar.  Every DIF y-check (the
  last ordinate of a line repeated at the start of the next) is verified, and so is each
  line's abscissa against the axis;
* abscissa units HZ, PPM or SECONDS.  The ppm axis of a Hz spectrum comes from
  ``##.SHIFT REFERENCE= (kind, compound, point number, shift)``, else from
  ``##.OBSERVE FREQUENCY`` (ppm = Hz / MHz);
* ``##.OBSERVE NUCLEUS`` -> ``nucleus`` (``^19F`` -> ``19F``); ``##.DECOUPLER`` (the
  heteronuclear decoupling, as written) -> ``decoupler``, None when the label is absent;
* ``##LONG DATE`` (or the old ``##DATE``/``##TIME`` pair) -> ``acquired_utc``;
  ``##.AVERAGES`` / ``##NUMBER OF SCANS`` -> ``n_scans``;
* compound files (a ``##DATA TYPE= LINK`` block around others): the one spectrum (or
  FID) among them is read; two spectra or two FIDs are refused as ambiguous (a series in
  one file is read by :mod:`kinetics.spectra.arrayed`, which the message names), and a
  file holding only a ``##PEAK TABLE=`` is told so.

No standard label states a digital-filter group delay or an acquisition duration; this
writer stores them as user-defined labels (the ``##$`` prefix JCAMP-DX reserves for
them) ``##$KINETICS GROUP DELAY POINTS=`` and ``##$KINETICS ACQUISITION DURATION S=``,
which the reader reads back; other files leave them at 0 / None.

Hostile files: reading is linear in the file size (one pass over the lines, blocks chosen
without searches, error messages naming a few lines and counting the rest); every
declared size (##NPOINTS=, ##VAR_DIM= times the pages) is checked against the bytes the
file holds before anything is allocated (:func:`kinetics.spectra.text.point_budget`); a
##PAGE= without its ##DATA TABLE= line, or a declared I column without its page, is an
error, never a silently dropped imaginary part; a date that cannot be (month 13, year 1
or 9999, an offset that overflows) is an error naming its line.

Decoding is our own (line numbers in every error message, verified y-checks, size caps
against hostile headers); the tests compare it point for point with
``nmrglue.fileio.jcampdx`` on real files and on this module's own output.
"""

from __future__ import annotations

import gc
import logging
import math
import re
import sys
from array import array
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timedelta, timezone
from pathlib import Path

import numpy as np

from kinetics.atomic import write_atomic
from kinetics.errors import InputFileError
from kinetics.spectra.asdf import Table, affn_tokens, decode_table, encode_table
from kinetics.spectra.spectrum import Fid, Spectrum
from kinetics.spectra.text import MAX_POINTS, LoadedText, expect_format, load_text, parse_guarded, point_budget

log = logging.getLogger(__name__)

DURATION_LABEL = "$KINETICS ACQUISITION DURATION S"
GROUP_DELAY_LABEL = "$KINETICS GROUP DELAY POINTS"

_FIX_HINT = "re-export the file from the instrument software, or repair the line shown"

#: What a user should do with a file holding a whole series (one spectrum per time point).
ARRAYED_HINT = ('a file holding one spectrum per time point is an arrayed series: name it in the run '
                'config as [run] file = "<this file>" (kinetics.spectra.arrayed.read_traces reads it), '
                'or export one spectrum per file')


# ============================================================ label records
_NOT_IN_KEY = re.compile(r"[\s\-/_]")


def _norm(label: str) -> str:
    """Label as compared: upper case without spaces, dashes, slashes, underscores (spec)."""
    return _NOT_IN_KEY.sub("", label.upper())


@dataclass(eq=False, slots=True)
class _Record:
    label: str  # as written, stripped and upper-cased (kept for the header)
    key: str  # normalised
    value: str  # first line's value, stripped
    line: int  # 1-based line of the ##label
    data: list[tuple[int, str]] | tuple = ()  # continuation lines (a list once there are any)


# eq=False: blocks and records are compared by identity, never field by field (a search
# by equality over thousands of blocks was quadratic).
@dataclass(eq=False, slots=True)
class _Block:
    records: list[_Record]
    start_line: int
    end_line: int
    _index: dict[str, list[_Record]] | None = None

    def _by_key(self) -> dict[str, list[_Record]]:
        if self._index is None:
            index: dict[str, list[_Record]] = {}
            for record in self.records:
                index.setdefault(record.key, []).append(record)
            self._index = index
        return self._index

    def first(self, key: str) -> _Record | None:
        found = self._by_key().get(key)
        return found[0] if found else None

    def all(self, key: str) -> list[_Record]:
        return list(self._by_key().get(key, ()))


#: Line numbers listed in one error message at most; the rest are counted.
_LISTED = 5


def _lines_listed(numbers: list[int]) -> str:
    """``"3, 7, 11, 15, 19 and 3995 more"``: an error names a few places, never thousands."""
    shown = ", ".join(str(number) for number in numbers[:_LISTED])
    return shown if len(numbers) <= _LISTED else f"{shown} and {len(numbers) - _LISTED} more"


def _split_blocks(loaded: LoadedText) -> list[_Block]:
    """Cut the text into ``##TITLE= ... ##END=`` blocks of label records (one pass)."""
    path = loaded.path
    stack: list[list[_Record]] = []
    starts: list[int] = []
    blocks: list[_Block] = []
    current: _Record | None = None
    seen_label = False
    number = 0
    intern = sys.intern  # thousands of repeated labels share one string each
    labels: dict[str, tuple[str, str]] = {}  # label as written -> (key, name)
    for number, line in enumerate(loaded.text.splitlines(), start=1):
        if "$$" in line:
            line = line.split("$$", 1)[0]
        stripped = line.strip()
        if not stripped:
            continue
        if stripped[0] == "#" and stripped.startswith("##"):
            label, equals, value = stripped[2:].partition("=")
            if not equals or not label.strip():
                raise InputFileError(path, f"malformed label line {stripped[:40]!r} (expected ##LABEL= value)",
                                     line=number, hint=_FIX_HINT)
            known = labels.get(label)
            if known is None:
                if len(labels) < 10_000:  # a hostile file of distinct labels must not grow it
                    known = labels[label] = (intern(_norm(label)), intern(label.strip().upper()))
                else:
                    known = (_norm(label), label.strip().upper())
            key, name = known
            if not seen_label and key != "TITLE":
                raise InputFileError(path, "JCAMP-DX file must start with ##TITLE=", line=number, hint=_FIX_HINT)
            seen_label = True
            if key == "TITLE":
                stack.append([])
                starts.append(number)
            if not stack:
                raise InputFileError(path, f"label ##{label.strip()[:40]}= after the final ##END=",
                                     line=number, hint=_FIX_HINT)
            current = _Record(name, key, value.strip(), number)
            if key == "END":
                blocks.append(_Block(stack.pop(), starts.pop(), number))
                current = None
                continue
            stack[-1].append(current)
        elif current is not None:
            if current.data:
                current.data.append((number, stripped))
            else:
                current.data = [(number, stripped)]
        elif stack:
            raise InputFileError(path, "data line outside any labelled record", line=number, hint=_FIX_HINT)
    if not seen_label:
        raise InputFileError(path, "no JCAMP-DX labels found", hint="give a JCAMP-DX or CSV spectrum")
    if stack:
        raise InputFileError(
            path, "file ends without ##END= (truncated)", line=number,
            hint="wait until the instrument has finished writing the file, or re-export it",
        )
    return blocks


# ============================================================ header values
def _number(path: str, record: _Record, text: str | None = None) -> float:
    text = record.value if text is None else text
    try:
        value = float(text.strip().strip("()"))
    except ValueError:
        raise InputFileError(path, f"##{record.label}= {text.strip()[:30]!r} is not a number",
                             line=record.line, hint=_FIX_HINT) from None
    if not math.isfinite(value):
        raise InputFileError(path, f"##{record.label}= is not finite ({text.strip()})",
                             line=record.line, hint=_FIX_HINT)
    return value


def _count(path: str, record: _Record, text: str | None = None) -> int:
    value = _number(path, record, text)
    if value != int(value) or value < 2:
        raise InputFileError(path, f"##{record.label}= must be a whole number of at least 2 points",
                             line=record.line, hint=_FIX_HINT)
    if value > MAX_POINTS:
        raise InputFileError(path, f"##{record.label}= declares {int(value)} points, more than the "
                             f"{MAX_POINTS} this reader accepts", line=record.line,
                             hint="check the header; split very large data sets")
    return int(value)


def _check_budget(path: str, record: _Record, declared: int, budget: int) -> None:
    """A declared point count (all pages together) must fit the bytes the file holds.

    Checked before any array is allocated: a few bytes of header and one DUP count must not
    claim gigabytes (see :func:`kinetics.spectra.text.point_budget`).
    """
    if declared > budget:
        raise InputFileError(path, f"##{record.label}= declares {declared} points in all, more than a file "
                             f"of this size can hold (at most {budget})", line=record.line,
                             hint="the header or the file is damaged; re-export it")


def _factor(path: str, record: _Record | None, text: str | None = None) -> float:
    """A FACTOR label's value (1 when absent); zero would silently erase the data."""
    if record is None:
        return 1.0
    value = _number(path, record, text)
    if value == 0.0:
        raise InputFileError(path, f"##{record.label}= is zero", line=record.line, hint=_FIX_HINT)
    return value


def _columns(record: _Record) -> list[str]:
    return [item.strip() for item in record.value.split(",")]


def _header_mapping(block: _Block) -> dict[str, str]:
    skip = {"XYDATA", "XYPOINTS", "DATATABLE", "PEAKTABLE", "PAGE", "ENDNTUPLES"}
    header: dict[str, str] = {}
    for record in block.records:
        if record.key in skip or record.label in header:
            continue
        value = " ".join([record.value] + [text for _, text in record.data]).strip()
        header[record.label] = value
    return header


# JCAMP-DX 5.01: YYYY/MM/DD [HH:MM:SS[.SSSS] [+-UUUU]].  Also read, as exporters write
# them: "-" for "/", a "T" or ", " before the time, zones as +01, +01:00, Z, UTC, GMT,
# UTC+01:00.  Day-first dates (25/01/2005) are refused: DD/MM and MM/DD cannot be told apart.
# Applied to the value with its whitespace runs collapsed, so it runs in linear time.
_LONG_DATE_RE = re.compile(
    r"(\d{4})[/\-](\d{1,2})[/\-](\d{1,2})"
    r"(?:(?:T|,? )(\d{1,2}):(\d{2})(?::(\d{2})(?:\.(\d+))?)?)?"
    r" ?(?:(?:UTC|GMT)? ?(?P<sign>[+-])(?P<zh>\d{1,2})(?::?(?P<zm>\d{2}))?|(?P<utc>Z|UTC|GMT))?",
    re.IGNORECASE | re.ASCII,
)


def _parse_long_date(path: str, record: _Record) -> datetime:
    value = " ".join(record.value.split())
    match = _LONG_DATE_RE.fullmatch(value) if len(value) <= 80 else None
    hint = "write it as YYYY/MM/DD HH:MM:SS+0000"
    if match is None:
        raise InputFileError(path, f"##{record.label}= {record.value[:40]!r} is not a date",
                             line=record.line, hint=hint)
    year, month, day, hour, minute, second, fraction = match.groups()[:7]
    micro = int((fraction or "0")[:6].ljust(6, "0"))
    if match.group("sign"):
        offset = timedelta(hours=int(match.group("zh")), minutes=int(match.group("zm") or 0))
        if offset > timedelta(hours=14):  # the widest zone offset in use is +14:00
            raise InputFileError(path, f"##{record.label}= time zone offset {value[-6:]!r} is out of range",
                                 line=record.line, hint=hint)
        zone = timezone(offset if match.group("sign") == "+" else -offset)
    else:
        if not match.group("utc"):
            log.warning("%s: ##%s= has no time zone; taken as UTC", path, record.label)
        zone = timezone.utc
    try:
        stamp = datetime(int(year), int(month), int(day), int(hour or 0), int(minute or 0),
                         int(second or 0), micro, tzinfo=zone).astimezone(timezone.utc)
    except (ValueError, OverflowError) as error:
        raise InputFileError(path, f"##{record.label}= {value[:40]!r} is not a valid date ({error})",
                             line=record.line, hint=hint) from None
    return _plausible(path, record, stamp, hint)


#: Acquisition dates outside these years are a wrong clock or damage: NMR spectroscopy
#: began in 1946, and a far-future year would make every later time difference nonsense.
_FIRST_YEAR, _LAST_YEAR = 1946, 2200


def _plausible(path: str, record: _Record, stamp: datetime, hint: str) -> datetime:
    if not _FIRST_YEAR <= stamp.year <= _LAST_YEAR:
        raise InputFileError(path, f"##{record.label}= {record.value[:40]!r} lies outside the years "
                             f"{_FIRST_YEAR}-{_LAST_YEAR}", line=record.line,
                             hint="check the instrument clock; " + hint)
    return stamp


def _parse_old_date(path: str, date: _Record, time: _Record | None) -> datetime:
    match = re.match(r"^\s*(\d{2,4})/(\d{1,2})/(\d{1,2})\s*$", date.value, re.ASCII)
    if match is None:
        raise InputFileError(path, f"##DATE= {date.value[:30]!r} is not YY/MM/DD",
                             line=date.line, hint="write ##LONG DATE= YYYY/MM/DD HH:MM:SS+0000")
    year = int(match.group(1))
    if year < 100:  # 4.24 two-digit years: 1950-2049 (common practice)
        year += 1900 if year >= 50 else 2000
    hms = (0, 0, 0)
    if time is not None:
        timed = re.match(r"^\s*(\d{1,2}):(\d{2})(?::(\d{2}))?\s*$", time.value, re.ASCII)
        if timed is None:
            raise InputFileError(path, f"##TIME= {time.value[:30]!r} is not HH:MM:SS",
                                 line=time.line, hint="write ##LONG DATE= YYYY/MM/DD HH:MM:SS+0000")
        hms = (int(timed.group(1)), int(timed.group(2)), int(timed.group(3) or 0))
    log.warning("%s: ##DATE=/##TIME= have no time zone; taken as UTC", path)
    hint = "write ##LONG DATE= YYYY/MM/DD HH:MM:SS+0000"
    try:
        stamp = datetime(year, int(match.group(2)), int(match.group(3)), *hms, tzinfo=timezone.utc)
    except (ValueError, OverflowError) as error:
        raise InputFileError(path, f"##DATE= {date.value[:30]!r} is not a valid date ({error})", line=date.line,
                             hint=hint) from None
    return _plausible(path, date, stamp, hint)


def _acquired(path: str, block: _Block) -> datetime | None:
    long_date = block.first("LONGDATE")
    if long_date is not None and long_date.value:
        return _parse_long_date(path, long_date)
    date = block.first("DATE")
    if date is not None and date.value:
        return _parse_old_date(path, date, block.first("TIME"))
    return None


def _n_scans(path: str, block: _Block) -> int | None:
    for key in (".AVERAGES", "NUMBEROFSCANS"):
        record = block.first(key)
        if record is not None and record.value:
            value = _number(path, record)
            if value != int(value) or value < 1:
                raise InputFileError(path, f"##{record.label}= must be a whole number >= 1",
                                     line=record.line, hint=_FIX_HINT)
            return int(value)
    return None


def _optional_number(path: str, block: _Block, key: str) -> float | None:
    record = block.first(key)
    if record is None or not record.value:
        return None
    return _number(path, record)


def _nucleus(path: str, block: _Block) -> str:
    record = block.first(".OBSERVENUCLEUS")
    if record is None or not record.value.replace("^", "").strip():
        log.warning("%s: no ##.OBSERVE NUCLEUS=; assuming 1H", path)
        return "1H"
    return record.value.replace("^", "").replace(" ", "").strip()


def _decoupler(block: _Block) -> str | None:
    """The file's ``##.DECOUPLER=`` as written (e.g. ``^1H``, ``1H``), or None when absent."""
    record = block.first(".DECOUPLER")
    value = "" if record is None else record.value.strip()
    return value or None


def _observe_mhz(path: str, block: _Block) -> float | None:
    value = _optional_number(path, block, ".OBSERVEFREQUENCY")
    if value is not None and value <= 0:
        record = block.first(".OBSERVEFREQUENCY")
        raise InputFileError(path, "##.OBSERVE FREQUENCY= must be positive (MHz)",
                             line=record.line, hint=_FIX_HINT)
    return value


def _shift_reference(path: str, block: _Block) -> tuple[int, float] | None:
    """(1-based data-point number, shift in ppm) from ##.SHIFT REFERENCE=, if present."""
    record = block.first(".SHIFTREFERENCE")
    if record is None or not record.value:
        return None
    fields = [item.strip() for item in record.value.strip("() ").split(",")]
    if len(fields) < 2:
        raise InputFileError(path, "##.SHIFT REFERENCE= needs (kind, compound, point number, shift)",
                             line=record.line, hint="e.g. ##.SHIFT REFERENCE= INTERNAL, TMS, 1, 0.0")
    point = _number(path, record, fields[-2])
    shift = _number(path, record, fields[-1])
    if point != int(point) or point < 1:
        raise InputFileError(path, "##.SHIFT REFERENCE= point number must be a whole number >= 1",
                             line=record.line, hint="e.g. ##.SHIFT REFERENCE= INTERNAL, TMS, 1, 0.0")
    return int(point), shift


def _check_abscissa(path: str, table: Table, first: float, step: float, x_factor: float) -> None:
    """Each line's X (times its factor) must sit on the axis at that line's first point.

    Allowed slack: one point spacing plus the rounding of X as written.
    """
    if not table.line_x:
        return
    numbers, x_written, index, decimals = (np.asarray(column) for column in zip(*table.line_x))
    expected = first + index * step
    slack = abs(step) * 1.01 + 0.5 * 10.0 ** (-decimals.astype(float)) * abs(x_factor) + 1e-9 * np.abs(expected)
    bad = np.flatnonzero(~(np.abs(x_written * x_factor - expected) <= slack))
    if bad.size:
        k = int(bad[0])
        raise InputFileError(
            path, f"abscissa check failed: line starts at X={x_written[k]:g} but point {index[k] + 1} "
            f"lies at {expected[k] / x_factor:g}", line=int(numbers[k]),
            hint="the file is damaged (a line missing or repeated); re-export it",
        )


# ============================================================ data tables
_TABLE_FORM_RE = re.compile(r"^\(\s*X\s*\+\+\s*\(\s*([A-Z]+)\s*\.\.\s*\1\s*\)\s*\)", re.IGNORECASE)
_PAIR_FORM_RE = re.compile(r"^\(\s*XY\s*\.\.\s*XY\s*\)", re.IGNORECASE)


@dataclass
class _Axis:
    first: float
    last: float
    n_points: int
    units: str
    x_factor: float
    values: np.ndarray | None = None  # explicit abscissae of an (XY..XY) table

    def grid(self) -> np.ndarray:
        if self.values is not None:
            return self.values
        return np.linspace(self.first, self.last, self.n_points)


def _scaled(path: str, table: Table, factor: float, line: int) -> np.ndarray:
    with np.errstate(over="ignore", invalid="ignore"):
        values = table.values * factor
    bad = np.flatnonzero(~np.isfinite(values))
    if bad.size:
        starts = [index for _, _, index, _ in table.line_x]
        position = int(np.searchsorted(starts, bad[0], side="right")) - 1
        if 0 <= position < len(table.line_x):
            line = table.line_x[position][0]
        raise InputFileError(path, f"ordinate {bad[0] + 1} is NaN or infinite", line=line, hint=_FIX_HINT)
    return values


def _xydata(path: str, block: _Block, budget: int) -> tuple[_Axis, np.ndarray, None, int]:
    record = block.first("XYDATA") or block.first("XYPOINTS")
    if record is None:
        raise InputFileError(path, "no ##XYDATA=, ##XYPOINTS= or ##NTUPLES= data in the file", hint=_FIX_HINT)
    x_factor = _factor(path, block.first("XFACTOR"))
    y_factor = _factor(path, block.first("YFACTOR"))
    units = (block.first("XUNITS").value if block.first("XUNITS") else "").upper().strip()
    npoints = block.first("NPOINTS")
    if _PAIR_FORM_RE.match(record.value):
        if not record.data:
            raise InputFileError(path, "data table has no data lines", line=record.line, hint=_FIX_HINT)
        flat = _pairs_from_affn(path, record)
        x, y = flat[:, 0] * x_factor, flat[:, 1] * y_factor
        if npoints is not None and _count(path, npoints) != x.size:
            raise InputFileError(path, f"##NPOINTS= declares {_count(path, npoints)} points but the table "
                                 f"holds {x.size}", line=npoints.line, hint=_FIX_HINT)
        if x.size < 2 or not np.all(np.isfinite(x)) or not np.all(np.isfinite(y)):
            raise InputFileError(path, "data table holds NaN/inf or fewer than 2 points",
                                 line=record.line, hint=_FIX_HINT)
        axis = _Axis(float(x[0]), float(x[-1]), x.size, units, x_factor, values=x)
        return axis, y, None, record.line
    if _TABLE_FORM_RE.match(record.value) is None:
        raise InputFileError(path, f"unsupported data table form {record.value[:30]!r}",
                             line=record.line, hint="this reader takes (X++(Y..Y)) and (XY..XY) tables")
    for key in ("FIRSTX", "LASTX", "NPOINTS"):
        if block.first(key) is None:
            raise InputFileError(path, f"##{key}= is missing; the axis cannot be formed",
                                 line=record.line, hint=_FIX_HINT)
    first = _number(path, block.first("FIRSTX"))
    last = _number(path, block.first("LASTX"))
    n_points = _count(path, npoints)
    _check_budget(path, npoints, n_points, budget)
    table = decode_table(path, record.data, None, limit=n_points)
    if table.values.size != n_points:
        raise InputFileError(path, f"##NPOINTS= declares {n_points} points but the data table holds "
                             f"{table.values.size}", line=npoints.line,
                             hint="the file is truncated or damaged; re-export it")
    axis = _Axis(first, last, n_points, units, x_factor)
    _check_abscissa(path, table, first, _step(path, axis, record.line), x_factor)
    return axis, _scaled(path, table, y_factor, record.line), None, record.line


def _pairs_from_affn(path: str, record: _Record) -> np.ndarray:
    values = array("d")  # 8 bytes a value, not a list of float objects
    for number, text in record.data:
        values.extend(affn_tokens(path, number, text))
        if len(values) > 2 * MAX_POINTS:
            raise InputFileError(path, f"data table holds more than {MAX_POINTS} points", line=number,
                                 hint="check the file; split very large data sets")
    if len(values) % 2:
        raise InputFileError(path, "(XY..XY) table has an odd number of values", line=record.line, hint=_FIX_HINT)
    return np.frombuffer(values, dtype=float).reshape(-1, 2).copy()


def _step(path: str, axis: _Axis, line: int) -> float:
    step = (axis.last - axis.first) / (axis.n_points - 1)
    if not (math.isfinite(step) and step != 0):
        raise InputFileError(path, "axis is not monotonic (first and last abscissa are equal)",
                             line=line, hint=_FIX_HINT)
    return step


def _ntuples(path: str, block: _Block, budget: int) -> tuple[_Axis, np.ndarray | None, np.ndarray | None, int]:
    head = block.first("NTUPLES")
    symbols_record = block.first("SYMBOL")
    dims_record = block.first("VARDIM")
    if symbols_record is None or dims_record is None:
        raise InputFileError(path, "##NTUPLES= without ##SYMBOL= and ##VAR_DIM=", line=head.line, hint=_FIX_HINT)
    symbols = [symbol.upper() for symbol in _columns(symbols_record)]
    n_columns = len(symbols)

    def column(key: str, default: str | None = None) -> list[str]:
        record = block.first(key)
        if record is None:
            if default is None:
                raise InputFileError(path, f"##{key}= is missing from the NTUPLES header",
                                     line=head.line, hint=_FIX_HINT)
            return [default] * n_columns
        items = _columns(record)
        if len(items) < n_columns:
            raise InputFileError(path, f"##{record.label}= has {len(items)} columns, ##SYMBOL= has {n_columns}",
                                 line=record.line, hint=_FIX_HINT)
        return items

    if "X" not in symbols:
        raise InputFileError(path, "NTUPLES without an X (abscissa) column", line=symbols_record.line, hint=_FIX_HINT)
    ix = symbols.index("X")
    dims, factors = column("VARDIM"), column("FACTOR", "1")
    units, forms = column("UNITS", ""), column("VARFORM", "")
    firsts, lasts = column("FIRST"), column("LAST")
    first = _number(path, block.first("FIRST"), firsts[ix])
    last = _number(path, block.first("LAST"), lasts[ix])
    n_points = _count(path, dims_record, dims[ix])
    x_factor = _factor(path, block.first("FACTOR"), factors[ix])
    axis = _Axis(first, last, n_points, units[ix].upper(), x_factor)
    step = _step(path, axis, dims_record.line)
    tables = _page_tables(path, block)
    _check_budget(path, dims_record, n_points * max(1, len(tables)), budget)
    pages: dict[str, np.ndarray] = {}
    for record in tables:
        match = _TABLE_FORM_RE.match(record.value)
        if match is None:
            raise InputFileError(path, f"unsupported NTUPLES table form {record.value[:30]!r}",
                                 line=record.line, hint="this reader takes (X++(R..R)) and (X++(I..I)) pages")
        symbol = match.group(1).upper()
        if symbol not in symbols:
            raise InputFileError(path, f"data table uses symbol {symbol} that ##SYMBOL= does not declare",
                                 line=record.line, hint=_FIX_HINT)
        if symbol in pages:
            raise InputFileError(path, f"more than one {symbol} page (a series of pages is an arrayed file)",
                                 line=record.line, hint=ARRAYED_HINT)
        index = symbols.index(symbol)
        form = forms[index].upper() if forms[index].upper() in ("AFFN", "ASDF") else None
        declared = _count(path, dims_record, dims[index])
        if declared != n_points:
            raise InputFileError(path, f"##VAR_DIM= declares {declared} points for {symbol} but {n_points} "
                                 "for X", line=dims_record.line, hint=_FIX_HINT)
        table = decode_table(path, record.data, form, limit=declared)
        if table.values.size != declared:
            raise InputFileError(path, f"##VAR_DIM= declares {declared} points but the {symbol} page holds "
                                 f"{table.values.size}", line=record.line,
                                 hint="the file is truncated or damaged; re-export it")
        _check_abscissa(path, table, first, step, x_factor)
        factor = _factor(path, block.first("FACTOR"), factors[index])
        pages[symbol] = _scaled(path, table, factor, record.line)
    if "R" not in pages:
        raise InputFileError(path, "NTUPLES without a real (R) page", line=head.line, hint=_FIX_HINT)
    if "I" in symbols and "I" not in pages:
        # Declared but absent: a lost ##DATA TABLE= line must not silently drop the imaginary part.
        raise InputFileError(path, "##SYMBOL= declares an imaginary (I) column but the file has no I page",
                             line=symbols_record.line, hint="the file is damaged; re-export it")
    return axis, pages["R"], pages.get("I"), head.line


def _page_tables(path: str, block: _Block) -> list[_Record]:
    """The ``##DATA TABLE=`` records, checking that every ``##PAGE=`` has one.

    A page whose ``##DATA TABLE=`` line is missing leaves its data lines hanging under
    ``##PAGE=``; that is damage, not a file with one page fewer.
    """
    open_page: _Record | None = None
    for record in block.records:
        if record.key == "PAGE":
            if open_page is not None or record.data:
                bad = open_page if open_page is not None else record
                raise InputFileError(path, f"##PAGE= {bad.value[:20]} has no ##DATA TABLE= line",
                                     line=bad.line, hint="the file is damaged; re-export it")
            open_page = record
        elif record.key == "DATATABLE":
            open_page = None
    if open_page is not None:
        raise InputFileError(path, f"##PAGE= {open_page.value[:20]} has no ##DATA TABLE= line",
                             line=open_page.line, hint="the file is damaged; re-export it")
    return block.all("DATATABLE")


# ============================================================ records
_SPECTRUM_TYPES = {"NMRSPECTRUM"}
_FID_TYPES = {"NMRFID"}


def _select_block(path: str, blocks: list[_Block]) -> _Block:
    """The one NMR spectrum (or FID) block of the file, in one pass over the blocks."""
    spectra: list[_Block] = []
    fids: list[_Block] = []
    skipped: list[str] = []
    any_data = False
    for block in blocks:
        kind = block.first("DATATYPE")
        kind_key = _norm(kind.value) if kind is not None else ""
        if not any(block.first(key) for key in ("XYDATA", "XYPOINTS", "NTUPLES")):
            continue
        any_data = True
        if kind_key in _FID_TYPES:
            fids.append(block)
        elif kind is None or kind_key in _SPECTRUM_TYPES:
            spectra.append(block)
        else:
            skipped.append(kind.value[:40])
    if skipped:
        log.info("%s: skipping %d block(s) with ##DATA TYPE= %s", path, len(skipped),
                 ", ".join(sorted(set(skipped))[:_LISTED]))
    if not spectra and not fids:
        first_line = blocks[0].start_line if blocks else None
        if not any_data:
            peak_table = next((r for b in blocks for key in ("PEAKTABLE", "PEAKASSIGNMENTS")
                               for r in (b.first(key),) if r is not None), None)
            if peak_table is not None:
                raise InputFileError(path, f"the file holds only a peak list (##{peak_table.label}=), not the "
                                     "spectrum itself", line=peak_table.line,
                                     hint="export the full spectrum (XYDATA or NTUPLES), not the peak list")
            raise InputFileError(path, "no ##XYDATA=, ##XYPOINTS= or ##NTUPLES= data in the file",
                                 line=first_line, hint=_FIX_HINT)
        kinds = sorted(set(skipped))
        listed = ", ".join(kinds[:_LISTED]) + (f" and {len(kinds) - _LISTED} more" if len(kinds) > _LISTED else "")
        raise InputFileError(path, f"unsupported ##DATA TYPE= {listed}", line=first_line,
                             hint="this reader takes NMR SPECTRUM and NMR FID data")
    # A compound (LINK) file may carry a spectrum beside its FID or peak list; two spectra
    # (or two FIDs) would make the choice arbitrary, so they are refused.
    for same in (spectra, fids):
        if len(same) > 1:
            raise InputFileError(path, f"the file holds {len(same)} data blocks of one kind (lines "
                                 f"{_lines_listed([b.start_line for b in same])}); which one to read is unclear",
                                 line=same[1].start_line, hint=ARRAYED_HINT)
    if spectra and fids:
        log.info("%s: file holds a spectrum and an FID; reading the spectrum", path)
    return (spectra or fids)[0]


def _ppm_axis(path: str, block: _Block, axis: _Axis, observe_mhz: float | None, line: int) -> np.ndarray:
    x = axis.grid()
    reference = _shift_reference(path, block)
    if observe_mhz is None:
        raise InputFileError(path, "no ##.OBSERVE FREQUENCY=; the ppm axis cannot be formed",
                             line=line, hint="add ##.OBSERVE FREQUENCY= <MHz> to the header")
    if axis.units == "HZ":
        ppm = x / observe_mhz
    elif axis.units == "PPM":
        ppm = x.copy()
    else:
        raise InputFileError(path, f"unsupported abscissa units {axis.units or '(none)'} for a spectrum",
                             line=line, hint="this reader takes HZ or PPM for spectra, SECONDS for FIDs")
    if reference is not None:
        point, shift = reference
        if point > ppm.size:
            record = block.first(".SHIFTREFERENCE")
            raise InputFileError(path, f"##.SHIFT REFERENCE= names point {point} of {ppm.size}",
                                 line=record.line, hint=_FIX_HINT)
        ppm = ppm + (shift - ppm[point - 1])
    return ppm


def _carrier_ppm(path: str, block: _Block, dwell_s: float, n_points: int, observe_mhz: float) -> float:
    """Shift at the spectrum centre: point 1 sits at +SW/2 from the centre."""
    reference = _shift_reference(path, block)
    width_hz = 1.0 / dwell_s
    if reference is None:
        log.warning("%s: FID without ##.SHIFT REFERENCE=; carrier taken as 0 ppm", path)
        return 0.0
    point, shift = reference
    # The point number refers to the transformed spectrum, taken to have as many
    # points as the FID (spacing SW/n).
    shift_of_point1 = shift + (point - 1) * width_hz / n_points / observe_mhz
    return shift_of_point1 - width_hz / 2.0 / observe_mhz


def _time_scale(path: str, units: str, line: int) -> float:
    scale = {"SECONDS": 1.0, "SECOND": 1.0, "S": 1.0, "SEC": 1.0,
             "MILLISECONDS": 1e-3, "MS": 1e-3, "MICROSECONDS": 1e-6, "US": 1e-6}.get(units)
    if scale is None:
        raise InputFileError(path, f"unsupported abscissa units {units or '(none)'} for an FID",
                             line=line, hint="FID pages need a time axis in SECONDS")
    return scale


@contextmanager
def _without_cycle_collection():
    """Pause Python's cyclic garbage collector while the label records are built.

    Parsing creates no reference cycles, but a file of thousands of blocks creates
    hundreds of thousands of small records, and the collector's full passes over them
    made the reading time grow faster than the file (measured: 0.05 -> 0.11 s/MB from
    0.5 to 8.6 MB, flat at 0.04 s/MB without).  Reference counting still frees everything.
    """
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        yield
    finally:
        if was_enabled:
            gc.enable()


def parse_jcampdx(loaded: LoadedText) -> Spectrum | Fid:
    """Build a Spectrum or Fid from an already loaded JCAMP-DX text (see :func:`read_jcampdx`)."""
    path = loaded.path
    with _without_cycle_collection():
        blocks = _split_blocks(loaded)
        block = _select_block(path, blocks)
        del blocks  # the other blocks' records are freed now, the chosen one is kept
    return record_from_block(path, block, point_budget(len(loaded.text)), loaded.sha256)


def record_from_block(path: str, block: _Block, budget: int, sha256: str | None) -> Spectrum | Fid:
    """The Spectrum or Fid of one data block (``##XYDATA``/``##XYPOINTS`` or one-page-per-part
    ``##NTUPLES``); ``budget`` bounds the points the block may declare, ``sha256`` is stored
    on the record.  Shared with :mod:`kinetics.spectra.arrayed` (one block per trace)."""
    if block.first("NTUPLES") is not None:
        axis, real, imag, line = _ntuples(path, block, budget)
    else:
        axis, real, imag, line = _xydata(path, block, budget)
    return build_record(path, block, axis, real, imag, line, sha256)


def build_record(path: str, block: _Block, axis: _Axis, real: np.ndarray, imag: np.ndarray | None,
                 line: int, sha256: str | None, page: _Block | None = None,
                 header: dict[str, str] | None = None) -> Spectrum | Fid:
    """A Spectrum or Fid from decoded ordinates and the header labels of ``block``.

    ``page`` (labels written after an arrayed file's ``##PAGE=``) is read instead of the
    block for ``##LONG DATE``, ``##.AVERAGES`` and acquisition duration of that page's
    trace; ``header``, when given, is the record's header (else the block's labels).
    """
    kind_record = block.first("DATATYPE")
    kind = _norm(kind_record.value) if kind_record is not None else ""
    is_fid = kind in _FID_TYPES or (not kind and axis.units in ("SECONDS", "SECOND", "S", "SEC"))
    observe_mhz = _observe_mhz(path, block)
    timed = block if page is None else page
    common = dict(
        nucleus=_nucleus(path, block),
        acquired_utc=_acquired(path, timed),
        duration_s=_optional_number(path, timed, _norm(DURATION_LABEL)),
        n_scans=_n_scans(path, timed),
        source_path=path,
        sha256=sha256,
        header=_header_mapping(block) if header is None else header,
        decoupler=_decoupler(block),
    )
    try:
        if is_fid:
            if imag is None:
                raise InputFileError(path, "FID without an imaginary (I) page", line=line,
                                     hint="this reader takes quadrature (complex) FIDs")
            if observe_mhz is None:
                raise InputFileError(path, "no ##.OBSERVE FREQUENCY= for the FID", line=line,
                                     hint="add ##.OBSERVE FREQUENCY= <MHz> to the header")
            if axis.values is not None:
                raise InputFileError(path, "FID pages need an evenly spaced (X++) time axis", line=line)
            dwell_s = abs(_step(path, axis, line)) * _time_scale(path, axis.units, line)
            return Fid(
                data=real + 1j * imag,
                dwell_s=dwell_s,
                observe_mhz=observe_mhz,
                carrier_ppm=_carrier_ppm(path, block, dwell_s, real.size, observe_mhz),
                group_delay_points=_optional_number(path, block, _norm(GROUP_DELAY_LABEL)) or 0.0,
                **common,
            )
        ppm = _ppm_axis(path, block, axis, observe_mhz, line)
        steps = np.diff(ppm)
        if not (np.all(steps > 0) or np.all(steps < 0)):
            raise InputFileError(path, "abscissa is not strictly monotonic", line=line, hint=_FIX_HINT)
        return Spectrum(ppm=ppm, real=real, imag=imag, observe_mhz=observe_mhz, **common)
    except ValueError as error:  # the record's own validation (NaN, negative duration, ...)
        raise InputFileError(path, f"invalid data: {error}", line=line, hint=_FIX_HINT) from None


def read_jcampdx(path: str | Path) -> Spectrum | Fid:
    """Read a JCAMP-DX NMR file.

    Parameters
    ----------
    path : str or Path
        A JCAMP-DX 4.24, 5.01 or 6.0 file with one 1D NMR spectrum or FID.

    Returns
    -------
    Spectrum or Fid
        A spectrum (ppm strictly decreasing; imaginary part when the file has an I page)
        or a complex FID.

    Raises
    ------
    InputFileError
        Truncated file, malformed label, non-numeric data, point count different from
        ##NPOINTS/##VAR_DIM, failed DIF y-check or abscissa check, missing observe
        frequency, NaN/inf, unsupported data type or table form.
    """
    # The shared boundary: size/binary checks and the safety net.
    loaded = load_text(path)
    expect_format(loaded, "jcamp-dx")
    return parse_guarded(loaded, parse_jcampdx)


# ============================================================ writing
def _f(value) -> str:
    """Shortest text that reads back to the same float (numpy scalars included)."""
    return repr(float(value))


def _scale_factor(values: np.ndarray) -> float:
    """FACTOR so that the largest |ordinate| becomes ~1e8 (8 significant digits)."""
    peak = float(np.max(np.abs(values))) if values.size else 0.0
    if peak == 0.0:
        return 1.0
    exponent = math.floor(math.log10(peak)) - 7
    return 10.0 ** exponent


def _check_compression(compression: str) -> str:
    key = str(compression).lower()
    if key not in ("affn", "dif"):
        raise ValueError(f"compression must be 'affn' or 'dif', got {compression!r}")
    return key


def _long_date(stamp: datetime) -> str:
    utc = stamp.astimezone(timezone.utc)
    text = utc.strftime("%Y/%m/%d %H:%M:%S")
    if utc.microsecond:
        text += f".{utc.microsecond:06d}"
    return text + "+0000"


def _common_header(record, data_type: str, data_class: str, shift_reference: str) -> list[str]:
    title = str(record.header.get("TITLE") or record.header.get("title") or "").strip() or (
        Path(record.source_path).stem if record.source_path else "kinetics spectrum")
    lines = [
        f"##TITLE= {title}",
        "##JCAMP-DX= 5.01",
        f"##DATA TYPE= {data_type}",
        f"##DATA CLASS= {data_class}",
        "##ORIGIN= kinetics",
        "##OWNER= unknown",
    ]
    if record.acquired_utc is not None:
        lines.append(f"##LONG DATE= {_long_date(record.acquired_utc)}")
    lines += [
        f"##.OBSERVE FREQUENCY= {_f(record.observe_mhz)}",
        f"##.OBSERVE NUCLEUS= ^{record.nucleus}",
    ]
    if record.decoupler:
        lines.append(f"##.DECOUPLER= {record.decoupler}")
    solvent = record.header.get(".SOLVENT NAME")
    if solvent:
        lines.append(f"##.SOLVENT NAME= {solvent}")
    lines.append(f"##.SHIFT REFERENCE= {shift_reference}")
    if record.n_scans is not None:
        lines.append(f"##.AVERAGES= {record.n_scans}")
    if record.duration_s is not None:
        lines.append(f"##{DURATION_LABEL}= {_f(record.duration_s)}")
    return lines


def _ntuples_lines(name: str, var_names: tuple[str, str, str], x_units: str, x_values: np.ndarray,
                   x_factor: float, real: np.ndarray, imag: np.ndarray, compression: str) -> list[str]:
    factor = _scale_factor(np.concatenate([real, imag]))
    pages = []
    for values in (real, imag):
        integers = np.rint(values / factor).astype(np.int64)
        pages.append(integers)
    form = "ASDF" if compression == "dif" else "AFFN"
    n = x_values.size
    lines = [
        f"##NTUPLES= {name}",
        f"##VAR_NAME= {', '.join(var_names)}",
        "##SYMBOL= X, R, I",
        "##VAR_TYPE= INDEPENDENT, DEPENDENT, DEPENDENT",
        f"##VAR_FORM= AFFN, {form}, {form}",
        f"##VAR_DIM= {n}, {n}, {n}",
        f"##UNITS= {x_units}, ARBITRARY UNITS, ARBITRARY UNITS",
        f"##FACTOR= {_f(x_factor)}, {_f(factor)}, {_f(factor)}",
        f"##FIRST= {_f(x_values[0])}, {_f(pages[0][0] * factor)}, {_f(pages[1][0] * factor)}",
        f"##LAST= {_f(x_values[-1])}, {_f(pages[0][-1] * factor)}, {_f(pages[1][-1] * factor)}",
        f"##MIN= {_f(x_values.min())}, {_f(pages[0].min() * factor)}, {_f(pages[1].min() * factor)}",
        f"##MAX= {_f(x_values.max())}, {_f(pages[0].max() * factor)}, {_f(pages[1].max() * factor)}",
    ]
    for number, (symbol, integers) in enumerate(zip("RI", pages), start=1):
        lines.append(f"##PAGE= N={number}")
        lines.append(f"##DATA TABLE= (X++({symbol}..{symbol})), XYDATA")
        lines += encode_table(x_values / x_factor, integers, compression)
    lines.append(f"##END NTUPLES= {name}")
    return lines


def _even_axis_hz(spectrum: Spectrum) -> np.ndarray:
    hz = spectrum.ppm * spectrum.observe_mhz
    grid = np.linspace(hz[0], hz[-1], hz.size)
    if np.max(np.abs(hz - grid)) > 1e-6 * abs(hz[1] - hz[0]):
        raise ValueError("JCAMP-DX (X++(Y..Y)) tables need an evenly spaced ppm axis; "
                         "this spectrum's axis is not (resample it first)")
    return grid


def spectrum_text(spectrum: Spectrum, compression: str = "dif") -> str:
    """The JCAMP-DX 5.01 text :func:`write_spectrum` writes (see there)."""
    compression = _check_compression(compression)
    hz = _even_axis_hz(spectrum)
    x_factor = abs(hz[1] - hz[0])
    reference = f"INTERNAL, {spectrum.header.get('.SOLVENT NAME') or 'UNKNOWN'}, 1, {_f(spectrum.ppm[0])}"
    if spectrum.imag is None:
        lines = _common_header(spectrum, "NMR SPECTRUM", "XYDATA", reference)
        factor = _scale_factor(spectrum.real)
        integers = np.rint(spectrum.real / factor).astype(np.int64)
        lines += [
            "##XUNITS= HZ",
            "##YUNITS= ARBITRARY UNITS",
            f"##XFACTOR= {_f(x_factor)}",
            f"##YFACTOR= {_f(factor)}",
            f"##FIRSTX= {_f(hz[0])}",
            f"##LASTX= {_f(hz[-1])}",
            f"##DELTAX= {_f((hz[-1] - hz[0]) / (hz.size - 1))}",
            f"##MAXY= {_f(integers.max() * factor)}",
            f"##MINY= {_f(integers.min() * factor)}",
            f"##NPOINTS= {hz.size}",
            f"##FIRSTY= {_f(integers[0] * factor)}",
            "##XYDATA= (X++(Y..Y))",
        ]
        lines += encode_table(hz / x_factor, integers, compression)
    else:
        lines = _common_header(spectrum, "NMR SPECTRUM", "NTUPLES", reference)
        lines += _ntuples_lines("NMR SPECTRUM", ("FREQUENCY", "SPECTRUM/REAL", "SPECTRUM/IMAG"), "HZ", hz,
                                x_factor, spectrum.real, spectrum.imag, compression)
    lines.append("##END=")
    return "\n".join(lines) + "\n"


def fid_text(fid: Fid, compression: str = "dif") -> str:
    """The JCAMP-DX 5.01 text :func:`write_fid` writes (see there)."""
    compression = _check_compression(compression)
    width_hz = 1.0 / fid.dwell_s
    shift_of_point1 = fid.carrier_ppm + width_hz / 2.0 / fid.observe_mhz
    lines = _common_header(fid, "NMR FID", "NTUPLES", f"INTERNAL, UNKNOWN, 1, {_f(shift_of_point1)}")
    if fid.group_delay_points:
        lines.append(f"##{GROUP_DELAY_LABEL}= {_f(fid.group_delay_points)}")
    time_s = np.arange(fid.n_points) * fid.dwell_s
    lines += _ntuples_lines("NMR FID", ("TIME", "FID/REAL", "FID/IMAG"), "SECONDS", time_s, fid.dwell_s,
                            fid.data.real, fid.data.imag, compression)
    lines.append("##END=")
    return "\n".join(lines) + "\n"


def write_spectrum(path: str | Path, spectrum: Spectrum, compression: str = "dif") -> Path:
    """Write a spectrum as JCAMP-DX 5.01, atomically.

    Parameters
    ----------
    path : str or Path
        Destination; written through a temporary file in the same folder.
    spectrum : Spectrum
        Needs an evenly spaced ppm axis.  Without ``imag``: ``##XYDATA= (X++(Y..Y))``;
        with ``imag``: ``##NTUPLES`` with an R and an I page.
    compression : {"dif", "affn"}
        ``"dif"``: ASDF with SQZ line starts, DIF differences, DUP runs and a y-check
        at each line start; ``"affn"``: plain integers.

    Notes
    -----
    The abscissa is in Hz relative to 0 ppm with ``##.SHIFT REFERENCE`` naming the ppm of
    point 1; ordinates are integers times a FACTOR that keeps 8 significant digits of
    the largest value, so values read back within FACTOR/2.  Acquisition duration goes
    to the user label ``##$KINETICS ACQUISITION DURATION S=``.
    """
    write_atomic(path, spectrum_text(spectrum, compression), encoding="ascii")
    return Path(path)


def write_fid(path: str | Path, fid: Fid, compression: str = "dif") -> Path:
    """Write an FID as a JCAMP-DX 5.01 ``NMR FID`` NTUPLES file (R and I pages), atomically.

    The time axis is in SECONDS (FACTOR = dwell time); ``##.SHIFT REFERENCE`` gives the
    shift of spectrum point 1, ``carrier_ppm + SW/2/observe_mhz``, so a reader recovers
    the carrier.  A nonzero group delay goes to ``##$KINETICS GROUP DELAY POINTS=``.
    """
    write_atomic(path, fid_text(fid, compression), encoding="ascii")
    return Path(path)


__all__ = ["read_jcampdx", "parse_jcampdx", "record_from_block", "build_record", "ARRAYED_HINT",
           "write_spectrum", "write_fid", "spectrum_text", "fid_text"]
