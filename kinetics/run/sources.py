"""Where a run's spectra come from: a folder of files, or one arrayed file.

A *series source* turns what the file layer found complete (:class:`ReadyFile`, from a
finished folder's listing or the live watcher) into the items the engine ingests, one
per trace.  Every item has a key (the ledger's ``path``), a content digest, and for an
arrayed file its record and time:

* :class:`FolderSource` - one spectrum per file (:mod:`kinetics.run.files`); the item is
  the ready file itself, its key the path relative to the folder, its digest the file's
  SHA-256 (computed by the engine), its time read with the file (``[time]``).
* :class:`ArrayedSource` - one file (``[run] file``) holding the whole series: JCAMP-DX
  LINK blocks or NTUPLES pages, or a matrix table (:mod:`kinetics.spectra.arrayed`).
  Each complete block is one :class:`TraceItem`, keyed ``<file>#<block, 5 digits>``
  (e.g. ``series.jdx#00003``), its digest the SHA-256 of the block's bytes.  A growing
  file is read again whenever it changes; the ledger skips the blocks it holds (same
  key, same digest), takes the new ones once, and treats a block whose digest changed
  (a rewritten file) as the folder path treats a replaced file: a new version of the
  key, the old one flagged ``replaced``.  A trailing block still being written is left
  for the next read.

Times of an arrayed file's traces (``[time] source``), with the folder path's
mid-acquisition convention (mid = start + half the acquisition duration: the record's
duration, else ``time.duration_s``, else 0):

* ``"header"``: the trace's own date (per-block ``##LONG DATE``) is its acquisition start,
  as for a file; else its time variable (NTUPLES page variable, matrix header row) is its
  start in seconds from the reaction start, as a file name's ``elapsed_*`` group is
  (:func:`kinetics.series.acquisition_time`);
* ``"interval"``: trace ``i`` (block index) starts ``i * time.interval_s`` after
  ``time.series_start``; without a series start the first trace's midpoint is
  ``time.first_spectrum_offset_s`` (the folder rule when no reaction start is given) and
  trace ``i``'s is ``i * interval_s`` later.

The ledger records each trace's source file and block (``files.source``, ``files.block``).
"""

from __future__ import annotations

import dataclasses
import logging
import sys
from dataclasses import dataclass, field
from datetime import timedelta
from pathlib import Path
from typing import Any

from kinetics import series
from kinetics.config import RunConfig
from kinetics.errors import ConfigError, InputFileError, KineticsError
from kinetics.run.files import ReadyFile
from kinetics.run.state import SeriesMeasurer, record_of
from kinetics.store import FileMeasurement, SignalRow

log = logging.getLogger(__name__)

#: separates a file from its block in a trace's key (``series.jdx#00003``)
BLOCK_SEPARATOR = "#"


def trace_key(relpath: str, block: int) -> str:
    """The ledger key of block ``block`` of the file at ``relpath`` (zero-padded, so keys
    sort in block order)."""
    return f"{relpath}{BLOCK_SEPARATOR}{int(block):05d}"


def split_key(key: str) -> tuple[str, int | None]:
    """``(relpath, block)`` of a ledger key; block None for a one-spectrum file."""
    head, sep, tail = key.rpartition(BLOCK_SEPARATOR)
    if sep and tail.isdigit():
        return head, int(tail)
    return key, None


@dataclass(frozen=True)
class TraceItem:
    """One trace of an arrayed file, as the engine ingests it (shaped like a ReadyFile).

    Attributes
    ----------
    path : Path
        The arrayed file.
    relpath : str
        The ledger key (:func:`trace_key`).
    size_bytes : int
        0 (a block's bytes are identified by ``digest``; the key and digest are invariant
        while the file grows, unlike the file's size).
    mtime_ns : int
        The file's modification time when it was read.
    first_seen_utc : str
    source : str
        The file's path relative to the run folder.
    block : int
    digest : str
        SHA-256 of the block's bytes.
    record : Spectrum or Fid
    times : tuple
        ``(start_utc, mid_utc, elapsed_mid_s, duration_s)`` as
        :func:`kinetics.series.acquisition_time` gives them for a file.
    """

    path: Path
    relpath: str
    size_bytes: int
    mtime_ns: int
    first_seen_utc: str
    source: str
    block: int
    digest: str
    record: Any = field(repr=False, compare=False)
    times: tuple = field(compare=False)


# ---------------------------------------------------------------- times
def trace_times(trace, config: RunConfig, path: str) -> tuple:
    """``(start_utc, mid_utc, elapsed_mid_s, duration_s)`` of one trace (module docstring)."""
    tc = config.time
    record = trace.record
    duration = record.duration_s if getattr(record, "duration_s", None) is not None else tc.duration_s
    half = timedelta(seconds=0.5 * (duration or 0.0))
    where = f"{path} (block {trace.block})"
    if tc.source == "interval":
        offset = timedelta(seconds=trace.block * tc.interval_s)
        if tc.series_start_utc is not None:
            start = tc.series_start_utc + offset
            return start, start + half, None, duration
        return None, None, tc.first_spectrum_offset_s + trace.block * tc.interval_s, duration
    if tc.source != "header":
        raise ConfigError("time.source", f"{tc.source!r} does not apply to one arrayed file",
                          hint="use 'header' or 'interval'")
    if trace.acquired_utc is not None:
        return trace.acquired_utc, trace.acquired_utc + half, None, duration
    if trace.time_s is not None:
        return None, None, float(trace.time_s) + half.total_seconds(), duration
    raise InputFileError(where, "the trace gives no acquisition time (no date, no time variable)",
                         hint="set [time] source = 'interval' with interval_s in the config")


# ---------------------------------------------------------------- measuring one trace
def measure_trace(item: TraceItem, config: RunConfig, reference: series.Reference | None):
    """Process, align and measure one trace: ``(reference, kinetics.series.FileMeasurement)``.

    The same steps as a file (:func:`kinetics.series.measure_record`) on the trace's
    record; with ``reference`` None this trace is the run's reference spectrum.
    """
    processed = series.process_record(item.record, config)
    if reference is None:
        reference = series.reference_from_spectrum(processed.spectrum, item.relpath, config)
    spectrum, shift = series.align(processed.spectrum, reference, config)
    noise, results, windows = series.measure_spectrum(spectrum, config, reference)
    start, mid, elapsed, duration = item.times
    measurement = series.FileMeasurement(
        path=str(item.path), file=item.relpath, sha256=item.digest, start_utc=start, mid_utc=mid,
        elapsed_mid_s=elapsed, duration_s=duration, time_source=config.time.source,
        alignment_shift_ppm=shift, noise_sigma=noise.sigma, observe_mhz=spectrum.observe_mhz,
        signals=results, fit_windows=windows, notes=tuple(processed.notes), spectrum=spectrum)
    return reference, measurement


class TraceMeasurer(SeriesMeasurer):
    """:class:`~kinetics.run.state.SeriesMeasurer` for the traces of an arrayed file.

    The first trace measured is the run's reference spectrum; a restarted run finds it
    again by its key (``reference_path``, e.g. ``series.jdx#00000``).
    """

    def __init__(self, config: RunConfig, folder: Path, source: "ArrayedSource",
                 reference_path: str | None = None):
        super().__init__(config, folder, reference_path)
        self.source = source

    def reference_of(self, key: str) -> series.Reference:
        """The reference spectrum of the trace ``key`` (a restart), read from the file."""
        item = self.source.item(key)
        return measure_trace(item, self.config, None)[0]

    def __call__(self, item) -> FileMeasurement:
        if not isinstance(item, TraceItem):
            return super().__call__(item)
        if self.reference is None and self.reference_path is not None:
            self.reference = self.reference_of(self.reference_path)
        first = self.reference is None
        try:
            reference, measurement = measure_trace(item, self.config, self.reference)
        except InputFileError:
            raise
        except ConfigError:
            if first:  # the config does not fit the run's spectra
                raise
            log.debug("measuring %s failed", item.relpath, exc_info=True)
            raise InputFileError(item.path, f"block {item.block}: could not be measured: {sys.exc_info()[1]}") from None
        except (KineticsError, ValueError, ArithmeticError) as error:
            log.debug("measuring %s failed", item.relpath, exc_info=True)
            raise InputFileError(item.path, f"block {item.block}: could not be measured: {error}") from error
        if first:
            self.reference, self.reference_path = reference, item.relpath
        rows = tuple(SignalRow(r.name, r.integral, r.sigma, extra={
            "shift_ppm": r.shift_ppm, "flags": list(r.flags), "method": r.method}) for r in measurement.signals)
        return FileMeasurement(measurement.mid_utc or measurement.start_utc, rows,
                               record_of(measurement, self.folder.resolve(), self.reference_path),
                               value=measurement)


# ---------------------------------------------------------------- the sources
class FolderSource:
    """A folder of files, one spectrum each: the ready files are the items."""

    def items(self, ready: list[ReadyFile]) -> list:
        return list(ready)

    def files_of(self, ready, handled, changed):
        return handled, changed


class ArrayedSource:
    """One arrayed file (``[run] file``): each complete block is one :class:`TraceItem`.

    Parameters
    ----------
    config : RunConfig
        With ``file`` set; times come from its ``[time]`` section.
    folder : Path
        The run folder (the file's folder, or a ``--folder`` given instead).
    """

    def __init__(self, config: RunConfig, folder: Path):
        self.config = config
        self.folder = Path(folder)
        self.name = Path(config.file).name
        #: the last error reading the file (a batch run raises it; a live run waits for
        #: the file to change)
        self.error: InputFileError | None = None
        #: relpath -> (characters read, SHA-256 of them, complete blocks in them): a file
        #: that only grew is parsed from its first new block on (see :meth:`items`)
        self._read: dict[str, tuple[int, str, int]] = {}

    @property
    def path(self) -> Path:
        return self.folder / self.name

    def read(self, path: Path, relpath: str, mtime_ns: int, first_seen_utc: str,
             incremental: bool = False) -> list[TraceItem]:
        """The complete blocks of the file as items (raises InputFileError).

        ``incremental``: when the file's text begins with the whole text of the last read
        (it only grew), only the blocks after those already read are parsed and returned
        (the earlier ones are unchanged: a block's identity is its own text); otherwise
        every block.  A live run reads a growing file this way, so a turn costs the new
        blocks, not the whole file.
        """
        from kinetics.spectra.arrayed import parse_traces
        from kinetics.spectra.text import load_text

        loaded = load_text(path)
        text = loaded.text
        first = 0
        known = self._read.get(relpath) if incremental else None
        if known is not None and len(text) >= known[0] and _text_digest(text[:known[0]]) == known[1]:
            first = known[2]
        traces = parse_traces(loaded, first)
        items = []
        for trace in traces:
            items.append(TraceItem(
                path=Path(path), relpath=trace_key(relpath, trace.block), size_bytes=0, mtime_ns=mtime_ns,
                first_seen_utc=first_seen_utc, source=relpath, block=trace.block, digest=trace.digest,
                record=trace.record, times=trace_times(trace, self.config, relpath)))
        if incremental:  # only once every new block has become an item
            blocks = max([first] + [trace.block + 1 for trace in traces])
            self._read[relpath] = (len(text), _text_digest(text), blocks)
        return items

    def items(self, ready: list[ReadyFile]) -> list:
        """The traces of the ready arrayed file (other files pass through unchanged).

        A file that cannot be read gives no item: the error is kept in :attr:`error` and
        logged (a live run reads the file again when it changes).
        """
        out = []
        self.error = None
        for file in ready:
            if Path(file.relpath).name != self.name:
                out.append(file)
                continue
            try:
                out.extend(self.read(file.path, file.relpath, file.mtime_ns, file.first_seen_utc, incremental=True))
            except InputFileError as error:
                self.error = error
                log.warning("cannot read the arrayed file yet: %s", error)
        return out

    def files_of(self, ready, handled, changed):
        """The engine's handled/changed items mapped back to the ready files: the arrayed
        file is handled once read (a block is identified by its digest, so the file's later
        changes are new reads, not changes under a read)."""
        keep = [item for item in handled if not isinstance(item, TraceItem)]
        for file in ready:
            if Path(file.relpath).name == self.name and file not in keep:
                keep.append(file)
        return keep, [item for item in changed if not isinstance(item, TraceItem)]

    def item(self, key: str) -> TraceItem:
        """The trace of ``key`` read from the file now (a restart's reference, re-reads)."""
        import os

        relpath, block = split_key(key)
        path = self.folder / relpath
        stat = os.stat(path)
        for item in self.read(path, relpath, stat.st_mtime_ns, ""):
            if item.block == block:
                return item
        raise InputFileError(path, f"block {block} (trace {key}) is no longer in the file",
                             hint="the file was rewritten shorter; start a new run (--out)")

    def restore_spectra(self, measurements: list, reference: series.Reference | None) -> list:
        """Measurements whose processed spectrum is not in memory (a restart) get it back,
        from the file, processed and aligned as the run did (reference: the run's)."""
        missing = [m for m in measurements if m.spectrum is None]
        if not missing or reference is None:
            return measurements
        import os

        items = {}
        by_file: dict[str, list] = {}
        for m in missing:
            by_file.setdefault(split_key(m.file)[0], []).append(m)
        for relpath in by_file:
            path = self.folder / relpath
            for item in self.read(path, relpath, os.stat(path).st_mtime_ns, ""):
                items[item.relpath] = item
        out = []
        for m in measurements:
            item = items.get(m.file) if m.spectrum is None else None
            if item is not None and item.digest == m.sha256:
                spectrum = measure_trace(item, self.config, reference)[1].spectrum
                m = dataclasses.replace(m, spectrum=spectrum)
            out.append(m)
        return out


def _text_digest(text: str) -> str:
    import hashlib

    return hashlib.sha256(text.encode("utf-8", "surrogateescape")).hexdigest()


def source_for(config: RunConfig, folder: Path):
    """The run's series source: :class:`ArrayedSource` for ``[run] file``, else :class:`FolderSource`."""
    return ArrayedSource(config, folder) if config.file is not None else FolderSource()


def trace_records(config: RunConfig, keys: list[str]) -> list:
    """The records of the traces ``keys`` of the run's arrayed file, in that order (a
    report's stacked plot); keys no longer in the file are left out."""
    source = ArrayedSource(config, Path(config.folder))
    import os

    wanted = set(keys)
    found = {}
    for relpath in {split_key(key)[0] for key in keys}:
        path = source.folder / relpath
        for item in source.read(path, relpath, os.stat(path).st_mtime_ns, ""):
            if item.relpath in wanted:
                found[item.relpath] = item.record
    return [found[key] for key in keys if key in found]


def is_trace(item) -> bool:
    return isinstance(item, TraceItem)


__all__ = ["ArrayedSource", "BLOCK_SEPARATOR", "FolderSource", "TraceItem", "TraceMeasurer", "is_trace",
           "measure_trace", "source_for", "split_key", "trace_key", "trace_records", "trace_times"]

