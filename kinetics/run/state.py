"""The in-memory state of a series run: measurements kept, only new spectra measured.

:class:`SeriesMeasurer` measures one file of a run config (:mod:`kinetics.series`); the
first file it measures becomes the run's reference spectrum (alignment target, tracking
centroids), read once.  Which file is first is the engine's one rule (earliest
acquisition as the file system records it, ties by name: :mod:`kinetics.run.files`); the
reference's path is kept in every ledger record, so a restarted run finds it again.

:class:`SeriesState` keeps every counted file's measurement in memory, keyed by its path
in the ledger.  A live turn adds the new files' measurements and rebuilds the table from
memory (never from the ledger's JSON); the global deconvolution of fit groups starts from
the previous turn's shared parameters.  The final table of every run is computed from
scratch, so a live run ends with exactly the batch run's table.  Only a restart reads the
ledger's records (once, through :func:`measurement_of`).
"""

from __future__ import annotations

import dataclasses
import logging
import sys
from datetime import datetime
from pathlib import Path

import numpy as np
import pandas as pd

from kinetics import series
from kinetics.config import RunConfig
from kinetics.errors import ConfigError, InputFileError, KineticsError
from kinetics.run.preflight import check_first_spectrum
from kinetics.store import FileMeasurement, FileRow, Ledger, SignalRow

log = logging.getLogger(__name__)

#: processed spectra kept in memory for the final processing-uncertainty pass, up to this
#: many bytes; past it they are dropped and that pass reads the files again (a long live
#: run's memory stays flat)
KEEP_SPECTRA_BYTES = 256 * 2 ** 20


def _spectrum_bytes(spectrum) -> int:
    if spectrum is None:
        return 0
    return sum(a.nbytes for a in (spectrum.ppm, spectrum.real, spectrum.imag) if a is not None)


# ---------------------------------------------------------------- JSON adapters
def record_of(measurement: series.FileMeasurement, folder: Path, reference_path: str) -> dict:
    """A series FileMeasurement as JSON-ready values (paths relative to the folder)."""

    def iso(moment):
        return None if moment is None else moment.isoformat()

    return {
        "file": measurement.file, "sha256": measurement.sha256,
        "path": Path(measurement.path).resolve().relative_to(folder).as_posix(),
        "reference": reference_path,
        "start_utc": iso(measurement.start_utc), "mid_utc": iso(measurement.mid_utc),
        "elapsed_mid_s": measurement.elapsed_mid_s, "duration_s": measurement.duration_s,
        "time_source": measurement.time_source,
        "alignment_shift_ppm": measurement.alignment_shift_ppm,
        "noise_sigma": measurement.noise_sigma, "observe_mhz": measurement.observe_mhz,
        "signals": [dataclasses.asdict(item) for item in measurement.signals],
        "fit_windows": [{"group": w.group, "ppm": [float(x) for x in w.ppm],
                         "values": [float(x) for x in w.values]} for w in measurement.fit_windows],
        "notes": list(measurement.notes),
    }


def measurement_of(record: dict, folder: Path) -> series.FileMeasurement:
    """Inverse of :func:`record_of` (floats round-trip exactly through JSON)."""

    def moment(text):
        return None if text is None else datetime.fromisoformat(text)

    signals = tuple(series.SignalResult(**{**item, "window_ppm": tuple(item["window_ppm"]),
                                           "flags": tuple(item["flags"])})
                    for item in record["signals"])
    windows = tuple(series.FitWindow(w["group"], np.asarray(w["ppm"], float),
                                     np.asarray(w["values"], float)) for w in record["fit_windows"])
    return series.FileMeasurement(
        path=str(folder / record["path"]), file=record["file"], sha256=record["sha256"],
        start_utc=moment(record["start_utc"]), mid_utc=moment(record["mid_utc"]),
        elapsed_mid_s=record["elapsed_mid_s"], duration_s=record["duration_s"],
        time_source=record["time_source"], alignment_shift_ppm=record["alignment_shift_ppm"],
        noise_sigma=record["noise_sigma"], observe_mhz=record["observe_mhz"],
        signals=signals, fit_windows=windows, notes=tuple(record["notes"]))


# ---------------------------------------------------------------- measuring
class SeriesMeasurer:
    """:func:`kinetics.series.measure_file` as the engine's measurer.

    The first file measured becomes the run's reference spectrum (it is read and processed
    once); with ``reference_path`` (a restart) that file is the reference.  Any error
    measuring a file quarantines that file (the run goes on).
    """

    def __init__(self, config: RunConfig, folder: Path, reference_path: str | None = None):
        self.config = config
        self.folder = Path(folder)  # resolved at each file: a watched folder may appear later
        self.reference: series.Reference | None = None
        self.reference_path = reference_path

    def __call__(self, path: Path) -> FileMeasurement:
        path = Path(path).resolve()
        folder = self.folder.resolve()
        first = self.reference is None
        try:
            if self.reference is None and self.reference_path is None:
                # the run's first spectrum: read and processed once, the config checked
                # against it (kinetics.run.preflight), then it becomes the reference
                record, processed = series._read_processed(path, self.config)
                check_first_spectrum(self.config, processed.spectrum, processed.reference_shift_ppm)
                self.reference = series.reference_from_spectrum(processed.spectrum, path, self.config)
                measurement = series.measure_record(path, record, processed, self.config, self.reference)
                self.reference_path = path.relative_to(folder).as_posix()
            else:
                if self.reference is None:
                    self.reference = series.make_reference(folder / self.reference_path, self.config)
                measurement = series.measure_file(path, self.config, self.reference)
        except InputFileError:
            raise
        except ConfigError:
            if first:  # the config does not fit the run's spectra: no file can be measured
                raise
            log.debug("measuring %s failed", path, exc_info=True)
            raise InputFileError(path, f"could not be measured: {sys.exc_info()[1]}") from None
        except (KineticsError, ValueError, ArithmeticError) as error:
            log.debug("measuring %s failed", path, exc_info=True)
            raise InputFileError(path, f"could not be measured: {error}") from error
        rows = tuple(SignalRow(item.name, item.integral, item.sigma, extra={
            "shift_ppm": item.shift_ppm, "flags": list(item.flags), "method": item.method})
            for item in measurement.signals)
        return FileMeasurement(measurement.mid_utc or measurement.start_utc, rows,
                               record_of(measurement, folder, self.reference_path),
                               value=measurement)


# ---------------------------------------------------------------- the incremental table
class SeriesState:
    """Counted measurements of a run, in memory, and the series table made from them.

    Parameters
    ----------
    config : RunConfig
    folder : Path
        The run's folder (ledger paths are relative to it).
    """

    def __init__(self, config: RunConfig, folder: Path):
        self.config = config
        self.folder = Path(folder)
        self._measurements: dict[str, series.FileMeasurement] = {}
        self._fits: dict = {}
        self._table: pd.DataFrame | None = None
        self._changed = True
        self._held = False  # the table's fit groups are at held line shapes
        self._spectra_bytes = 0
        self._final_fits: dict = {}
        self.keep_spectra = True  # False once past KEEP_SPECTRA_BYTES

    def __len__(self) -> int:
        return len(self._measurements)

    def measurements(self) -> list[series.FileMeasurement]:
        """The counted files' measurements (ledger paths in the order they were taken)."""
        return list(self._measurements.values())

    def load(self, ledger: Ledger) -> None:
        """A restart: the counted files' measurements from the ledger's records (once)."""
        self._measurements = {path: measurement_of(record, self.folder) for path, record in ledger.records()}
        self._changed = True

    def take(self, taken: list[tuple[FileRow, FileMeasurement | None]]) -> None:
        """New ledger rows of one turn: processed files count, a superseded path stops counting."""
        for row, measurement in taken:
            if row.status == "processed" and measurement is not None:
                value = measurement.value
                if value is None:  # a measurer that keeps only the record
                    value = measurement_of(dict(measurement.record), self.folder)
                value = self._keep(value)
                self._measurements[row.path] = value
            else:
                self._measurements.pop(row.path, None)
            self._changed = True

    def final_fits(self) -> dict:
        """Group -> series-wide fit from scratch of the last final table ({} otherwise)."""
        return dict(self._final_fits)

    def _keep(self, value: series.FileMeasurement) -> series.FileMeasurement:
        """Keep the measurement's spectrum while within :data:`KEEP_SPECTRA_BYTES`."""
        if value.spectrum is None:
            return value
        if self.keep_spectra:
            self._spectra_bytes += _spectrum_bytes(value.spectrum)
            if self._spectra_bytes <= KEEP_SPECTRA_BYTES:
                return value
            self.keep_spectra = False
            log.info("past %d MB of spectra in memory: the final pass reads the files again",
                     KEEP_SPECTRA_BYTES // 2 ** 20)
            self._measurements = {path: dataclasses.replace(m, spectrum=None)
                                  for path, m in self._measurements.items()}
        return dataclasses.replace(value, spectrum=None)

    def table(self, final: bool = False, refresh: bool = True) -> pd.DataFrame:
        """The series table from memory.

        ``final``: from scratch (the batch run's table).  Otherwise the fit groups'
        series-wide deconvolution starts from the previous turn's shapes when ``refresh``
        (at most once per refresh interval), and between refreshes keeps those shapes and
        solves only the areas.  Between two turns without new files the previous table is
        returned as it is.
        """
        if not self._measurements:
            return pd.DataFrame({"time_s": []})
        if self._changed or final or (refresh and self._held):
            start = None if final else self._fits
            hold = not final and not refresh
            self._table, fits = series.series_table(list(self._measurements.values()), self.config, start, hold)
            self._fits = fits if fits else self._fits
            self._final_fits = dict(fits) if final else {}
            self._held = hold and bool(self._fits)
            self._changed = False
        return self._table


__all__ = ["SeriesMeasurer", "SeriesState", "measurement_of", "record_of"]
