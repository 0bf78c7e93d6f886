"""Arrayed series: one file holding a whole reaction series (one trace per time point).

Forms read (by content, never by extension)
-------------------------------------------
* **JCAMP-DX compound (multi-block) files.**  A link block (``##DATA TYPE= LINK``,
  ``##BLOCKS=`` the number of blocks) enclosing one ``NMR SPECTRUM`` or ``NMR FID`` block
  per time point, each with its own ``##BLOCK_ID=`` and ``##END=``, and the link block's
  own ``##END=`` last (the JCAMP-DX 5.01 / 6.0 block rules).  Plain concatenated blocks
  (no link block) are read the same way.  Each block is read exactly as
  :func:`kinetics.spectra.read` reads a single-spectrum file (XYDATA, XYPOINTS or R/I
  NTUPLES pages, AFFN or ASDF, FIDs as complex R/I pages).  Blocks of other types (peak
  tables) are skipped; spectra and FIDs mixed in one series are refused.
* **JCAMP-DX NTUPLES with one page per time point.**  A second independent variable
  (e.g. ``##SYMBOL= T, X, R, I`` with ``##UNITS= SECONDS, HZ, ...``) and pages
  ``##PAGE= T=60``; each trace is an R page, followed by its I page when ``##SYMBOL=``
  declares I.  Pages numbered ``##PAGE= N=3`` (an index, not a time) are read too.
  Labels written after a ``##PAGE=`` line and before its ``##DATA TABLE=`` (``##LONG
  DATE=``, ``##.AVERAGES=``, the acquisition-duration label) belong to that trace.
* **Matrix tables (CSV, TSV, semicolon, whitespace).**  ``# key: value`` metadata lines
  as in :mod:`kinetics.spectra.delimited` (``observe_mhz`` required), then a header row
  holding the times, then rows of ``ppm, intensity at t1, intensity at t2, ...``.  See
  :func:`parse_time_cell` for the time cells accepted.  ``# duration_s:`` and
  ``# n_scans:`` take one value (all traces) or one per column, ``# acquired:`` one ISO
  8601 date per column (a single date would not say which column it dates), separated by
  spaces.  Real intensities only.

Times
-----
``Trace.time_s`` is the elapsed time the file states for the trace: the NTUPLES page
variable (when its ``##UNITS=`` is a time: SECONDS, MINUTES, HOURS, MILLISECONDS), a
matrix header cell, or a link-file block's ``##$KINETICS TIME S=`` (the ``##$`` user
label prefix JCAMP-DX reserves; no standard label states an elapsed time per block).
Otherwise None; ``Trace.acquired_utc`` is the block's (or page's) ``##LONG DATE``.  A file
gives times for all its traces or for none.

Growing files and identity
--------------------------
:func:`read_traces` reads complete traces only: in a file still being written, a trailing
block without its ``##END=`` (or an NTUPLES page not yet followed by the next ``##PAGE=``,
``##END NTUPLES=`` or ``##END=``) is left for a later read, not reported as an error;
the link block's missing ``##END=`` and a ``##BLOCKS=`` count not yet reached are normal
then.  ``Trace.digest`` (also ``record.sha256``) is the SHA-256 of the trace's own text:
its lines (a block's ``##TITLE=`` through ``##END=``; an NTUPLES trace's first
``##PAGE=`` through its last data line) each ended by LF, UTF-8 encoded -- for an ASCII
file with LF line ends, exactly the block's bytes.  A matrix column's digest is the
SHA-256 of its header cell, a LF, and its intensities as little-endian float64.

The writers of the same forms are in :mod:`kinetics.spectra.arrayed_writers`.

Hostile files: one read of the file (:func:`kinetics.spectra.text.load_text`: size caps,
binary refused), one linear pass over the lines, and the points all traces declare
together bounded by :func:`kinetics.spectra.text.point_budget` before any array is
allocated (each trace then keeps its own axis and ordinates, so a read holds at most
about 16-24 bytes per budget point).  Damaged complete blocks are :class:`~kinetics.errors.InputFileError`
naming the file, the block and the line.
"""

from __future__ import annotations

import hashlib
import logging
import math
import re
from array import array
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Sequence

import numpy as np

from kinetics.errors import InputFileError
from kinetics.spectra import delimited, jcampdx
from kinetics.spectra.asdf import decode_table
from kinetics.spectra.spectrum import Fid, Spectrum
from kinetics.spectra.text import MAX_POINTS, LoadedText, detect_format, load_text, parse_guarded, point_budget

log = logging.getLogger(__name__)

#: User label (``##$`` prefix) carrying a link-file block's elapsed time in seconds.
TIME_LABEL = "$KINETICS TIME S"
_TIME_KEY = jcampdx._norm(TIME_LABEL)

_FIX_HINT = "the file is damaged; re-export it, or repair the line shown"


@dataclass(frozen=True)
class Trace:
    """One time point of an arrayed file.

    Attributes
    ----------
    record : Spectrum or Fid
        The trace; ``record.source_path`` is the file and ``record.sha256`` equals ``digest``.
    block : int
        0-based index of the trace in the file (data blocks, NTUPLES page groups or matrix
        columns, in file order; blocks of other types are not counted).
    time_s : float or None
        Elapsed time the file gives for the trace (page variable, header cell, time label).
    acquired_utc : datetime or None
        The trace's ``##LONG DATE`` (or matrix ``# acquired:``), as on the record.
    digest : str
        SHA-256 hex of the trace's own text (see the module docstring): its identity when a
        growing file is followed.
    """

    record: Spectrum | Fid
    block: int
    time_s: float | None
    acquired_utc: datetime | None
    digest: str


# ============================================================ time cells and units
_UNIT_SECONDS = {
    "s": 1.0, "sec": 1.0, "secs": 1.0, "second": 1.0, "seconds": 1.0,
    "ms": 1e-3, "msec": 1e-3, "millisecond": 1e-3, "milliseconds": 1e-3,
    "min": 60.0, "mins": 60.0, "minute": 60.0, "minutes": 60.0,
    "h": 3600.0, "hr": 3600.0, "hrs": 3600.0, "hour": 3600.0, "hours": 3600.0,
}
_UNIT = r"[A-Za-z]{1,12}"
_NUMBER = r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?"


def _unit_spec(name: str) -> str:
    """A unit after a name: ``/s``, ``_min``, `` h``, ``[s]``, ``(min)`` (groups name+a/b/c)."""
    return (rf"(?:\s*[/_ ]\s*(?P<{name}a>{_UNIT})|\s*\[\s*(?P<{name}b>{_UNIT})\s*\]"
            rf"|\s*\(\s*(?P<{name}c>{_UNIT})\s*\))")


_TIME_CELL_RE = re.compile(
    rf"(?:(?:t|time){_unit_spec('pre')}?\s*[=:]?\s*)?(?P<number>{_NUMBER})\s*"
    rf"(?:(?P<posta>{_UNIT})|\[\s*(?P<postb>{_UNIT})\s*\]|\(\s*(?P<postc>{_UNIT})\s*\))?",
    re.IGNORECASE | re.ASCII,
)
_TIME_LABEL_RE = re.compile(rf"(?:t|time)\s*{_unit_spec('row')}", re.IGNORECASE | re.ASCII)
_TIME_UNIT_HINT = 'write times as "60", "60 s", "1.5 min", "t/s=60" or "time_min=1.5"'


def _unit_scale(unit: str | None) -> float | None:
    return None if unit is None else _UNIT_SECONDS.get(unit.lower())


def parse_time_cell(text: str, default_scale: float = 1.0) -> float | None:
    """Elapsed time in seconds written in one matrix header cell, or None if it is not a time.

    Accepted (case-insensitive, spaces optional): a bare number (in the row's unit: seconds,
    or the unit of a first cell such as ``t/min``, or of a ``# time_unit: min`` line), a
    number with a unit (``60 s``, ``60s``, ``1.5 min``, ``2 h``, ``60 [s]``, ``500 (ms)``),
    a name with or without a unit (``t=60``, ``t/s=60``, ``time_min=1.5``, ``t [h] 2``).
    Units: s, ms, min, h and their spelled-out forms.  Two different units in one cell, or
    an unknown unit, make it not a time.
    """
    match = _TIME_CELL_RE.fullmatch(text.strip())
    if match is None:
        return None
    units = {match.group(name) for name in ("prea", "preb", "prec", "posta", "postb", "postc")} - {None}
    if len(units) > 1:
        return None
    if units:
        scale = _unit_scale(units.pop())
        if scale is None:
            return None
    else:
        scale = default_scale
    value = float(match.group("number")) * scale
    return value if math.isfinite(value) else None


def _row_unit(text: str) -> float | None:
    """Scale of a first header cell naming the row's time unit (``t/s``, ``time_min``), else None."""
    match = _TIME_LABEL_RE.fullmatch(text.strip())
    if match is None:
        return None
    return _unit_scale(next(unit for unit in match.groups() if unit))


# ============================================================ shared helpers
def _digest_lines(lines: Sequence[str]) -> str:
    """SHA-256 hex of ``lines``, each ended by LF, UTF-8 encoded."""
    return hashlib.sha256(("\n".join(lines) + "\n").encode("utf-8", "surrogateescape")).hexdigest()


def _label_key(line: str) -> str | None:
    """Normalised key of a ``##LABEL=`` line, or None for any other line."""
    if "##" not in line:
        return None
    stripped = line.split("$$", 1)[0].strip()
    if not stripped.startswith("##"):
        return None
    label, equals, _ = stripped[2:].partition("=")
    return jcampdx._norm(label) if equals else None


def _check_times(path: str, traces: list[tuple[int, float | None, int]]) -> None:
    """All traces carry a time or none do: (index, time, line) of each trace."""
    timed = [entry for entry in traces if entry[1] is not None]
    if timed and len(timed) != len(traces):
        index, _, line = next(entry for entry in traces if entry[1] is None)
        raise InputFileError(path, f"trace {index} (0-based) has no time while others have one", line=line,
                             hint="give every block its time, or none (times then come from the config)")


# ============================================================ JCAMP-DX: complete part of a growing file
@dataclass
class _Cut:
    n_lines: int  # lines kept
    closers: list[str]  # label lines closing what the kept part leaves open
    open: bool  # the file is still being written (something left open)


def _complete_part(lines: list[str]) -> _Cut:
    """Where the complete part of a possibly growing JCAMP-DX text ends (one pass).

    Candidates: after every ``##END=`` (blocks closed) and, in a top-level NTUPLES block
    (whose pages are the traces), after ``##END NTUPLES=`` and before every ``##PAGE=``
    (the pages before it are complete).
    """
    depth = 0
    in_ntuples = False
    cut = (0, 0, False)  # (lines kept, depth there, inside NTUPLES there)
    for number, line in enumerate(lines):
        key = _label_key(line)
        if key is None:
            continue
        if key == "TITLE":
            depth += 1
        elif key == "END":
            depth -= 1
            in_ntuples = False
            if depth < 0:  # an END without its TITLE: the block parser names it
                return _Cut(len(lines), [], False)
            cut = (number + 1, depth, False)
        elif key == "NTUPLES":
            in_ntuples = True
        elif key == "ENDNTUPLES":
            in_ntuples = False
            if depth == 1:
                cut = (number + 1, depth, False)
        elif key == "PAGE" and in_ntuples and depth == 1:
            # Pages of a top-level NTUPLES are traces; inside a link file's block they are
            # the parts of one trace, complete only with the block's ##END=.
            cut = (number, depth, True)
    kept, open_depth, inside = cut
    if depth == 0:
        # After the last block: nothing, or the first characters of a new block's ##TITLE=
        # line still being written (pending); anything else goes to the parser as it is.
        rest = next((line.strip() for line in lines[kept:] if line.strip()), "")
        if rest and "##TITLE=".startswith(rest.upper().replace(" ", "")):
            return _Cut(kept, [], True)
        return _Cut(len(lines), [], False)
    closers = (["##END NTUPLES="] if inside else []) + ["##END="] * open_depth
    return _Cut(kept, closers, True)


def _blocks(loaded: LoadedText) -> tuple[list, list[str], _Cut]:
    """(blocks of the complete part, all lines of the file, where the complete part ends).

    Blocks closed by the added closers end after line ``cut.n_lines``.
    """
    lines = loaded.text.splitlines()
    cut = _complete_part(lines)
    if cut.n_lines == 0:
        return [], lines, cut
    if cut.open:
        pending = sum(1 for line in lines[cut.n_lines:] if line.strip())
        if pending:
            log.debug("%s: %d line(s) after line %d not complete yet; left for a later read",
                      loaded.path, pending, cut.n_lines)
        text = "\n".join(lines[:cut.n_lines] + cut.closers) + "\n"
        part = LoadedText(loaded.path, loaded.sha256, text)
    else:
        part = loaded
    with jcampdx._without_cycle_collection():
        blocks = jcampdx._split_blocks(part)
    return blocks, lines, cut


_DATA_KEYS = ("XYDATA", "XYPOINTS", "NTUPLES")


def _kind(block) -> str:
    record = block.first("DATATYPE")
    return jcampdx._norm(record.value) if record is not None else ""


def _jcampdx_traces(loaded: LoadedText, first_block: int) -> list[Trace]:
    path = loaded.path
    blocks, lines, cut = _blocks(loaded)
    is_open = cut.open
    budget = point_budget(len(loaded.text))
    links, data, others = [], [], []
    for block in blocks:
        kind = _kind(block)
        if kind == "LINK":
            links.append(block)
        elif any(block.first(key) is not None for key in _DATA_KEYS) and (
                not kind or kind in jcampdx._SPECTRUM_TYPES or kind in jcampdx._FID_TYPES):
            data.append(block)
        else:
            others.append(block)
    if others:
        log.info("%s: skipping %d block(s) without NMR spectrum or FID data", path, len(others))
    _check_links(path, links, len(data) + len(others), is_open)
    if not data:
        if is_open or not blocks:
            return []
        # A complete file without data: the single-file reader's message says why.
        jcampdx._select_block(path, blocks)
        return []
    kinds = {_kind(block) in jcampdx._FID_TYPES for block in data}
    if len(kinds) > 1:
        fid = next(block for block in data if _kind(block) in jcampdx._FID_TYPES)
        raise InputFileError(path, "the file mixes spectra and FIDs; an arrayed series holds one kind",
                             line=fid.start_line, hint="export the series as spectra only, or as FIDs only")
    if len(data) == 1 and _is_page_series(data[0], growing=data[0].end_line > cut.n_lines and not links):
        # One NTUPLES whose pages are the traces (closed by the added closers if still growing).
        return _ntuples_traces(path, data[0], lines, budget, first_block, is_open)
    # Other blocks closed only by the added closers are still being written.
    data = [block for block in data if block.end_line <= cut.n_lines]
    return _block_traces(path, data, lines, budget, first_block)


def _is_page_series(block, growing: bool) -> bool:
    """Whether an NTUPLES block holds a series of traces rather than one (R and I) trace.

    Decided by content, so a growing file is read the same way at every stage: a page
    variable declared as a column besides X, R and I (``##PAGE= T=60``), more than one R
    page, or a top-level NTUPLES still being written.
    """
    if block.first("NTUPLES") is None:
        return False
    if growing:
        return True
    symbols_record = block.first("SYMBOL")
    symbols = {symbol.upper() for symbol in jcampdx._columns(symbols_record)} if symbols_record else set()
    for page in block.all("PAGE"):
        variable = page.value.partition("=")[0].strip().upper()
        if variable in symbols and variable not in ("X", "R", "I"):
            return True
    real_pages = 0
    for table in block.all("DATATABLE"):
        match = jcampdx._TABLE_FORM_RE.match(table.value)
        real_pages += match is not None and match.group(1).upper() == "R"
    return real_pages > 1


def _check_links(path: str, links: list, n_blocks: int, is_open: bool) -> None:
    """``##BLOCKS=`` of the link block against the blocks present (complete files: equal)."""
    for link in links[:1]:
        record = link.first("BLOCKS")
        if record is None or not record.value:
            continue
        declared = jcampdx._number(path, record)
        if declared != int(declared) or declared < 1:
            raise InputFileError(path, "##BLOCKS= must be a whole number >= 1", line=record.line, hint=_FIX_HINT)
        if n_blocks > declared or (not is_open and n_blocks != declared):
            raise InputFileError(path, f"##BLOCKS= declares {int(declared)} blocks but the file holds {n_blocks}",
                                 line=record.line, hint=_FIX_HINT)
    if len(links) > 1:
        raise InputFileError(path, f"the file holds {len(links)} link blocks; one is expected",
                             line=links[1].start_line, hint=_FIX_HINT)


def _block_traces(path: str, data: list, lines: list[str], budget: int, first_block: int) -> list[Trace]:
    """One trace per data block (a link file or concatenated blocks)."""
    seen_ids: dict[str, int] = {}
    times: list[tuple[int, float | None, int]] = []
    for index, block in enumerate(data):
        block_id = block.first("BLOCKID")
        if block_id is not None:
            if block_id.value in seen_ids:
                raise InputFileError(path, f"##BLOCK_ID= {block_id.value[:20]} repeats the block of line "
                                     f"{seen_ids[block_id.value]}", line=block_id.line, hint=_FIX_HINT)
            seen_ids[block_id.value] = block.start_line
        time_record = block.first(_TIME_KEY)
        time_s = None if time_record is None or not time_record.value else jcampdx._number(path, time_record)
        times.append((index, time_s, block.start_line))
    _check_times(path, times)
    traces = []
    for (index, time_s, _), block in zip(times, data):
        if index < first_block:
            continue
        digest = _digest_lines(lines[block.start_line - 1:block.end_line])
        try:
            record = jcampdx.record_from_block(path, block, budget, digest)
        except InputFileError as error:
            raise _in_trace(error, index, block.start_line) from None
        budget -= record.n_points * 2 if isinstance(record, Fid) or record.imag is not None else record.n_points
        traces.append(Trace(record, index, time_s, record.acquired_utc, digest))
    return traces


def _in_trace(error: InputFileError, index: int, line: int) -> InputFileError:
    """The same error, naming the trace (block) it was found in."""
    return InputFileError(error.path, f"block {index} (0-based, starting line {line}): {error.problem}",
                          line=error.line, hint=error.hint)


# ============================================================ JCAMP-DX: NTUPLES pages
@dataclass
class _Page:
    page: object  # the ##PAGE= record
    labels: list  # records between ##PAGE= and ##DATA TABLE=
    table: object | None = None  # the ##DATA TABLE= record
    symbol: str = ""


_PAGE_LABEL_KEYS = {"LONGDATE", "DATE", "TIME", ".AVERAGES", "NUMBEROFSCANS", jcampdx._norm(jcampdx.DURATION_LABEL)}


def _pages(path: str, block) -> list[_Page]:
    pages: list[_Page] = []
    current: _Page | None = None
    for record in block.records:
        if record.key == "PAGE":
            if current is not None and current.table is None or record.data:
                bad = current.page if current is not None and current.table is None else record
                raise InputFileError(path, f"##PAGE= {bad.value[:20]} has no ##DATA TABLE= line",
                                     line=bad.line, hint=_FIX_HINT)
            current = _Page(record, [])
            pages.append(current)
        elif record.key == "DATATABLE":
            if current is None or current.table is not None:
                raise InputFileError(path, "##DATA TABLE= without its ##PAGE=", line=record.line, hint=_FIX_HINT)
            current.table = record
        elif current is not None and current.table is None and record.key in _PAGE_LABEL_KEYS:
            current.labels.append(record)
    if current is not None and current.table is None:
        raise InputFileError(path, f"##PAGE= {current.page.value[:20]} has no ##DATA TABLE= line",
                             line=current.page.line, hint=_FIX_HINT)
    return pages


def _ntuples_traces(path: str, block, lines: list[str], budget: int, first_block: int,
                    is_open: bool) -> list[Trace]:
    head = block.first("NTUPLES")
    symbols_record, dims_record = block.first("SYMBOL"), block.first("VARDIM")
    if symbols_record is None or dims_record is None:
        raise InputFileError(path, "##NTUPLES= without ##SYMBOL= and ##VAR_DIM=", line=head.line, hint=_FIX_HINT)
    symbols = [symbol.upper() for symbol in jcampdx._columns(symbols_record)]

    def column(key: str, default: str | None = None) -> list[str]:
        record = block.first(key)
        if record is None:
            if default is None:
                raise InputFileError(path, f"##{key}= is missing from the NTUPLES header", line=head.line,
                                     hint=_FIX_HINT)
            return [default] * len(symbols)
        items = jcampdx._columns(record)
        if len(items) < len(symbols):
            raise InputFileError(path, f"##{record.label}= has {len(items)} columns, ##SYMBOL= has {len(symbols)}",
                                 line=record.line, hint=_FIX_HINT)
        return items

    if "X" not in symbols:
        raise InputFileError(path, "NTUPLES without an X (abscissa) column", line=symbols_record.line, hint=_FIX_HINT)
    if "R" not in symbols:
        raise InputFileError(path, "NTUPLES without a real (R) column", line=symbols_record.line, hint=_FIX_HINT)
    ix = symbols.index("X")
    dims, factors = column("VARDIM"), column("FACTOR", "1")
    units, forms = column("UNITS", ""), column("VARFORM", "")
    firsts, lasts = column("FIRST"), column("LAST")
    first = jcampdx._number(path, block.first("FIRST"), firsts[ix])
    last = jcampdx._number(path, block.first("LAST"), lasts[ix])
    n_points = jcampdx._count(path, dims_record, dims[ix])
    x_factor = jcampdx._factor(path, block.first("FACTOR"), factors[ix])
    axis = jcampdx._Axis(first, last, n_points, units[ix].upper(), x_factor)
    step = jcampdx._step(path, axis, dims_record.line)
    pages = _pages(path, block)
    jcampdx._check_budget(path, dims_record, n_points * max(1, len(pages)), budget)
    has_imag = "I" in symbols
    # Group the pages into traces: a new trace at each R page, its I page after it.
    groups: list[list[_Page]] = []
    page_symbol: str | None = None
    for page in pages:
        match = jcampdx._TABLE_FORM_RE.match(page.table.value)
        if match is None:
            raise InputFileError(path, f"unsupported NTUPLES table form {page.table.value[:30]!r}",
                                 line=page.table.line, hint="pages must be (X++(R..R)) or (X++(I..I)) tables")
        page.symbol = match.group(1).upper()
        if page.symbol not in ("R", "I") or page.symbol not in symbols:
            raise InputFileError(path, f"data table uses symbol {page.symbol} that is not a declared R or I column",
                                 line=page.table.line, hint=_FIX_HINT)
        variable = page.page.value.partition("=")[0].strip().upper()
        if page_symbol is None:
            page_symbol = variable
        elif variable != page_symbol:
            raise InputFileError(path, f"##PAGE= uses {variable or '(nothing)'} where earlier pages use "
                                 f"{page_symbol}", line=page.page.line, hint=_FIX_HINT)
        if page.symbol == "R":
            groups.append([page])
        elif not groups or len(groups[-1]) != 1 or not has_imag:
            raise InputFileError(path, "an I page without the R page before it", line=page.page.line,
                                 hint=_FIX_HINT)
        else:
            groups[-1].append(page)
    if has_imag:
        lacking = next((group for group in groups[:-1] if len(group) == 1), None)
        if lacking is not None:
            raise InputFileError(path, "##SYMBOL= declares an imaginary (I) column but this trace has no I page",
                                 line=lacking[0].page.line, hint=_FIX_HINT)
    if has_imag and groups and len(groups[-1]) == 1:
        if is_open:
            groups.pop()  # its I page is still being written
        else:
            raise InputFileError(path, "##SYMBOL= declares an imaginary (I) column but the last trace has no "
                                 "I page", line=groups[-1][0].page.line, hint=_FIX_HINT)
    scale, variable_index = _page_scale(path, page_symbol, symbols, units)
    entries: list[tuple[int, float | None, int]] = []
    for index, group in enumerate(groups):
        values = [_page_value(path, page, scale) for page in group]
        if scale is not None and len(set(values)) > 1:
            raise InputFileError(path, f"the I page's {page_symbol}= differs from its R page's",
                                 line=group[1].page.line, hint=_FIX_HINT)
        entries.append((index, None if scale is None else values[0], group[0].page.line))
    if variable_index is not None and groups:
        declared = None
        if dims[variable_index]:
            declared = jcampdx._number(path, dims_record, dims[variable_index])
            if declared != int(declared) or declared < 1:
                raise InputFileError(path, f"##VAR_DIM= of {page_symbol} must be a whole number >= 1",
                                     line=dims_record.line, hint=_FIX_HINT)
            declared = int(declared)
        if declared is not None and (len(groups) > declared or (not is_open and len(groups) != declared)):
            raise InputFileError(path, f"##VAR_DIM= declares {declared} values of {page_symbol} but the file holds "
                                 f"{len(groups)} traces", line=dims_record.line, hint=_FIX_HINT)
    # The block's own labels (before its first page), read once: per-trace work stays
    # constant however many pages the block holds.
    first_page = next((number for number, record in enumerate(block.records) if record.key == "PAGE"),
                      len(block.records))
    head_records = block.records[:first_page]
    block_header = jcampdx._header_mapping(jcampdx._Block(head_records, block.start_line, block.end_line))
    block_timing = [record for record in head_records if record.key in _PAGE_LABEL_KEYS]
    traces = []
    for (index, time_s, _), group in zip(entries, groups):
        if index < first_block:
            continue
        last_table = group[-1].table
        end_line = last_table.data[-1][0] if last_table.data else last_table.line
        digest = _digest_lines(lines[group[0].page.line - 1:end_line])
        try:
            decoded = {page.symbol: _decode_page(path, block, page, symbols, dims, forms, factors, n_points,
                                                 first, step, x_factor) for page in group}
            labels = [label for page in group for label in page.labels]
            page_block = jcampdx._Block(labels + block_timing, group[0].page.line, end_line)
            header = {**block_header, **jcampdx._header_mapping(jcampdx._Block(labels, 0, 0))}
            record = jcampdx.build_record(path, block, axis, decoded["R"], decoded.get("I"), group[0].page.line,
                                          digest, page=page_block, header=header)
        except InputFileError as error:
            raise _in_trace(error, index, group[0].page.line) from None
        traces.append(Trace(record, index, time_s, record.acquired_utc, digest))
    return traces


def _page_scale(path: str, variable: str | None, symbols: list[str], units: list[str]):
    """(seconds per unit of the page variable or None for an index, its column or None)."""
    if variable is None or variable not in symbols or variable in ("X", "R", "I"):
        return None, None
    index = symbols.index(variable)
    unit = units[index].strip().upper()
    scale = {"SECONDS": 1.0, "SECOND": 1.0, "SEC": 1.0, "S": 1.0, "MILLISECONDS": 1e-3, "MS": 1e-3,
             "MINUTES": 60.0, "MINUTE": 60.0, "MIN": 60.0, "HOURS": 3600.0, "HOUR": 3600.0, "H": 3600.0}.get(unit)
    return scale, index


def _page_value(path: str, page: _Page, scale: float | None) -> float | None:
    _, equals, text = page.page.value.partition("=")
    if scale is None:
        return None
    if not equals or not text.strip():
        raise InputFileError(path, "##PAGE= without the value of its page variable", line=page.page.line,
                             hint="write e.g. ##PAGE= T=60")
    return jcampdx._number(path, page.page, text) * scale


def _decode_page(path, block, page: _Page, symbols, dims, forms, factors, n_points, first, step, x_factor):
    index = symbols.index(page.symbol)
    dims_record = block.first("VARDIM")
    declared = jcampdx._count(path, dims_record, dims[index])
    if declared != n_points:
        raise InputFileError(path, f"##VAR_DIM= declares {declared} points for {page.symbol} but {n_points} for X",
                             line=dims_record.line, hint=_FIX_HINT)
    form = forms[index].upper() if forms[index].upper() in ("AFFN", "ASDF") else None
    table = decode_table(path, page.table.data, form, limit=declared)
    if table.values.size != declared:
        raise InputFileError(path, f"##VAR_DIM= declares {declared} points but the {page.symbol} page holds "
                             f"{table.values.size}", line=page.table.line, hint=_FIX_HINT)
    jcampdx._check_abscissa(path, table, first, step, x_factor)
    factor = jcampdx._factor(path, block.first("FACTOR"), factors[index])
    return jcampdx._scaled(path, table, factor, page.table.line)


# ============================================================ matrix tables
_LIST_KEYS = ("acquired", "duration_s", "n_scans")


def _matrix_traces(loaded: LoadedText, first_block: int) -> list[Trace]:
    path = loaded.path
    meta: dict[str, tuple[str, int]] = {}
    header: dict[str, str] = {}
    head: tuple[str, int] | None = None
    cells: list[str] = []
    separator: str | None = None
    decimal_comma = False
    values = array("d")
    rows = array("q")
    for number, raw in enumerate(delimited._lines(loaded.text), start=1):
        line = raw.strip()
        if not line:
            continue
        if line.startswith("#"):
            match = delimited._META_RE.match(line)
            if match and head is None:
                key, value = match.group(1).strip(), match.group(2).strip()
                meta.setdefault(key.lower().replace(" ", "_"), (value, number))
                header.setdefault(key, value)
            continue
        if head is None:
            head = (line, number)
            continue
        if not rows:
            separator, decimal_comma = delimited._separator(line)
            if separator is None and not decimal_comma and "," in line:
                separator = ","
            cells = delimited._split(head[0], separator, decimal_comma)
            if len(cells) < 2:
                raise InputFileError(path, "the header row holds no times", line=head[1], hint=_TIME_UNIT_HINT)
        fields = delimited._split(line, separator, decimal_comma)
        if len(fields) != len(cells):
            raise InputFileError(path, f"row has {len(fields)} columns, the header row {len(cells)}", line=number,
                                 hint="every row needs a ppm value and one intensity per time point")
        values.extend(delimited._row_values(path, fields, number))
        rows.append(number)
        if len(values) > MAX_POINTS:
            raise InputFileError(path, f"more than {MAX_POINTS} values in the table", line=number,
                                 hint="split very large data sets")
    if head is None or len(rows) < 2:
        raise InputFileError(path, "a matrix table needs a header row of times and at least 2 data rows",
                             hint="write a row 'ppm, t1, t2, ...' above rows 'shift, intensity, ...'")
    times = _header_times(path, cells, head[1], meta)
    table = np.frombuffer(values, dtype=float).reshape(len(rows), len(cells))
    bad = np.argwhere(~np.isfinite(table))
    if bad.size:
        raise InputFileError(path, "NaN or infinite value", line=rows[int(bad[0, 0])], hint="remove or replace the row")
    ppm = table[:, 0]
    steps = np.diff(ppm)
    direction = np.sign(ppm[-1] - ppm[0])
    wrong = np.flatnonzero(np.sign(steps) != direction) if direction else np.array([0])
    if wrong.size:
        raise InputFileError(path, "ppm column is not strictly monotonic", line=rows[int(wrong[0]) + 1],
                             hint="sort the rows by shift and remove repeated shifts")
    n = len(times)
    observe_mhz = delimited._metadata_float(path, meta, "observe_mhz")
    if observe_mhz is None or observe_mhz <= 0:
        raise InputFileError(path, "no positive observe frequency in the header",
                             line=meta.get("observe_mhz", (None, None))[1],
                             hint="add a line '# observe_mhz: 60.0' (MHz) above the data")
    nucleus = meta.get("nucleus", ("", 0))[0].replace("^", "").strip()
    if not nucleus:
        log.warning("%s: no '# nucleus:' line; assuming 1H", path)
        nucleus = "1H"
    lists = {key: _meta_list(path, meta, key, n) for key in _LIST_KEYS}
    decoupler = meta.get("decoupler", ("", 0))[0].strip() or None
    traces = []
    for index in range(first_block, n):
        intensity = np.ascontiguousarray(table[:, index + 1])
        digest = hashlib.sha256(cells[index + 1].encode("utf-8", "surrogateescape") + b"\n"
                                + intensity.astype("<f8").tobytes()).hexdigest()
        acquired = _iso(path, meta, lists["acquired"][index])
        n_scans = lists["n_scans"][index]
        try:
            record = Spectrum(
                ppm=ppm, real=intensity, nucleus=nucleus, observe_mhz=observe_mhz, acquired_utc=acquired,
                duration_s=None if lists["duration_s"][index] is None else _meta_number(
                    path, meta, "duration_s", lists["duration_s"][index]),
                n_scans=None if n_scans is None else _meta_whole(path, meta, n_scans),
                source_path=path, sha256=digest, header=header, decoupler=decoupler,
            )
        except ValueError as error:
            raise InputFileError(path, f"column {index + 1}: invalid spectrum: {error}", line=head[1],
                                 hint="check the header lines") from None
        traces.append(Trace(record, index, times[index], acquired, digest))
    return traces


def _header_times(path: str, cells: list[str], line: int, meta: dict) -> list[float]:
    first = cells[0].strip().strip('"\'')
    scale = 1.0
    if "time_unit" in meta:
        unit_text, unit_line = meta["time_unit"]
        unit_scale = _unit_scale(unit_text.strip())
        if unit_scale is None:
            raise InputFileError(path, f"'# time_unit: {unit_text[:20]}' is not a time unit", line=unit_line,
                                 hint="write s, min or h")
        scale = unit_scale
    row_scale = _row_unit(first)
    if row_scale is not None:
        scale = row_scale
    elif first and delimited._role(first) != "ppm":
        raise InputFileError(path, f"first header cell {first[:30]!r} names neither the ppm column nor the "
                             "time unit", line=line, hint="write 'ppm' (times in seconds) or e.g. 't/min'")
    times = []
    for cell in cells[1:]:
        value = parse_time_cell(cell.strip().strip('"\''), scale)
        if value is None:
            raise InputFileError(path, f"header cell {cell.strip()[:30]!r} is not a time", line=line,
                                 hint=_TIME_UNIT_HINT)
        times.append(value)
    return times


def _meta_list(path: str, meta: dict, key: str, n: int) -> list[str | None]:
    if key not in meta:
        return [None] * n
    text, line = meta[key]
    items = text.split()
    if len(items) == 1 and (key != "acquired" or n == 1):
        return items * n
    if len(items) != n:
        raise InputFileError(path, f"'# {key}:' gives {len(items)} values for {n} time points", line=line,
                             hint="give one date per column" if key == "acquired" else
                             "give one value for all columns or one per column, separated by spaces")
    return items


def _meta_number(path: str, meta: dict, key: str, text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        value = math.nan
    if not math.isfinite(value):
        raise InputFileError(path, f"'# {key}: {text[:30]}' is not a number", line=meta[key][1],
                             hint=f"write e.g. '# {key}: 60.0'")
    return value


def _meta_whole(path: str, meta: dict, text: str) -> int:
    value = _meta_number(path, meta, "n_scans", text)
    if value != int(value) or value < 1:
        raise InputFileError(path, "'# n_scans' must be whole numbers >= 1", line=meta["n_scans"][1],
                             hint="write e.g. '# n_scans: 16'")
    return int(value)


def _iso(path: str, meta: dict, text: str | None) -> datetime | None:
    if text is None:
        return None
    line = meta["acquired"][1]
    try:
        stamp = datetime.fromisoformat(text)
    except ValueError:
        raise InputFileError(path, f"'# acquired: {text[:40]}' is not an ISO 8601 time", line=line,
                             hint="write e.g. '# acquired: 2026-03-01T10:15:00+00:00'") from None
    if stamp.tzinfo is None:
        log.warning("%s: '# acquired' has no time zone; taken as UTC", path)
        stamp = stamp.replace(tzinfo=timezone.utc)
    try:
        return stamp.astimezone(timezone.utc)
    except (ValueError, OverflowError):
        raise InputFileError(path, f"'# acquired: {text[:40]}' is out of range", line=line) from None


# ============================================================ reading: public
def parse_traces(loaded: LoadedText, first_block: int = 0) -> list[Trace]:
    """The traces of an already loaded file (see :func:`read_traces`), behind the safety net."""
    if first_block < 0:
        raise ValueError(f"first_block must be >= 0, got {first_block}")
    if detect_format(loaded.text) == "jcamp-dx":
        return parse_guarded(loaded, lambda part: _jcampdx_traces(part, first_block))
    try:
        return parse_guarded(loaded, lambda part: _matrix_traces(part, first_block))
    except InputFileError as matrix_error:
        # A plain spectrum table (ppm, real[, imag]) is a series of one trace.
        try:
            record = parse_guarded(loaded, delimited.parse_delimited)
        except InputFileError:
            raise matrix_error from None
        trace = Trace(record, 0, None, record.acquired_utc, loaded.sha256)
        return [trace] if first_block == 0 else []


def read_traces(path: str | Path, first_block: int = 0) -> list[Trace]:
    """Read the complete traces of an arrayed file, from trace ``first_block`` (0-based) on.

    Parameters
    ----------
    path : str or Path
        A JCAMP-DX link (multi-block) file, a JCAMP-DX NTUPLES file with one page group per
        time point, or a matrix table (see the module docstring).  A file holding a single
        spectrum (JCAMP-DX or a ppm, real[, imag] table) gives one trace.
    first_block : int
        Traces before it are not decoded (a growing file is followed by reading it again
        from the first trace not yet taken).

    Returns
    -------
    list of Trace
        In file order.  A trailing trace still being written is not included (and is not
        an error); an empty list when no trace is complete yet.

    Raises
    ------
    InputFileError
        A damaged complete block (naming the file, the block and the line), inconsistent
        times, a count that contradicts ``##BLOCKS=``/``##VAR_DIM=``, any other problem.
    """
    return parse_traces(load_text(path), first_block)


_LABEL_LINE_RE = re.compile(r"^[ \t]*##([^=\r\n]{1,80})=([^\r\n]{0,80})", re.MULTILINE)


def is_arrayed(path: str | Path) -> bool:
    """Whether ``path`` holds an arrayed series (by content; False when unreadable).

    JCAMP-DX: two or more NMR SPECTRUM (or NMR FID) blocks, an NTUPLES with two or more R
    pages or a time page variable, or a link block whose ``##BLOCKS=`` (at least 2) is not
    yet reached while the file is still open.  Delimited text: a header row whose cells
    after the first are all times (see :func:`parse_time_cell`).  Label lines only are
    scanned (no data is decoded).
    """
    try:
        loaded = load_text(path)
    except InputFileError:
        return False
    if detect_format(loaded.text) == "jcamp-dx":
        return _jcampdx_is_arrayed(loaded.text)
    return _matrix_is_arrayed(loaded.text)


def _jcampdx_is_arrayed(text: str) -> bool:
    depth = 0
    counts = {"spectrum": 0, "fid": 0}
    kind = ""
    has_data = False
    declared = 0
    r_pages = 0
    time_pages = False
    for match in _LABEL_LINE_RE.finditer(text):
        key = jcampdx._norm(match.group(1))
        value = match.group(2).strip()
        if key == "TITLE":
            depth += 1
            kind, has_data, r_pages = "", False, 0
        elif key == "END":
            depth -= 1
            if has_data and (not kind or kind in jcampdx._SPECTRUM_TYPES):
                counts["spectrum"] += 1
            elif has_data and kind in jcampdx._FID_TYPES:
                counts["fid"] += 1
            has_data = False
        elif key == "DATATYPE":
            kind = jcampdx._norm(value)
        elif key in _DATA_KEYS:
            has_data = True
        elif key == "BLOCKS":
            try:
                declared = int(float(value))
            except ValueError:
                declared = 0
        elif key == "PAGE":
            variable = value.partition("=")[0].strip().upper()
            time_pages = time_pages or variable not in ("", "N")
        elif key == "DATATABLE" and re.match(r"\(\s*X\s*\+\+\s*\(\s*R\b", value, re.IGNORECASE):
            r_pages += 1
            if r_pages >= 2:
                return True
        if max(counts.values()) >= 2:
            return True
    return time_pages or (depth > 0 and declared >= 2)


def _matrix_is_arrayed(text: str) -> bool:
    head = None
    for raw in delimited._lines(text):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        if head is None:
            head = line
            continue
        separator, decimal_comma = delimited._separator(line)
        if separator is None and not decimal_comma and "," in line:
            separator = ","
        cells = delimited._split(head, separator, decimal_comma)
        if len(cells) < 2:
            return False
        first = cells[0].strip().strip('"\'')
        if first and _row_unit(first) is None and delimited._role(first) != "ppm":
            return False
        return all(parse_time_cell(cell.strip().strip('"\'')) is not None for cell in cells[1:])
    return False


__all__ = ["Trace", "TIME_LABEL", "is_arrayed", "read_traces", "parse_traces", "parse_time_cell"]
