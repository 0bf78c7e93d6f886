"""Concentration tables: read a delimited file once, validate it, hand back arrays.

A table has a header line and one row per time point; ``#`` lines are comments.  The
delimiter (comma, tab, semicolon) is detected from the header.  Validation happens here
(the boundary) so the fitter can trust :class:`ConcentrationData`.
"""

from __future__ import annotations

import csv
import logging
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from kinetics.errors import FitError, InputFileError

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class ConcentrationData:
    """Validated concentration-time data.

    Attributes
    ----------
    time_s : ndarray, shape (n,)
        Strictly increasing times, s.
    values : ndarray, shape (m, n)
        Concentrations of ``m`` observed series, mol L^-1.
    sigma : ndarray, shape (m, n), or None
        Standard uncertainties of ``values`` (same unit), all > 0.
    columns : tuple of str
        Column names the rows came from.
    source : str
        File name or ``"<arrays>"``.
    warnings : tuple of str
        Things worth knowing that do not stop a fit (e.g. negative concentrations).
    row_labels : tuple of str
        How messages name each time point (``"line 7"``, a spectrum's file name); empty:
        ``"point i"`` (0-based).
    notes : tuple of kinetics.rates.diagnostics.Guardrail
        Coded findings about the table itself (mass balance, unit hints).
    """

    time_s: np.ndarray
    values: np.ndarray
    sigma: np.ndarray | None
    columns: tuple
    source: str = "<arrays>"
    warnings: tuple = field(default_factory=tuple)
    row_labels: tuple = field(default_factory=tuple)
    notes: tuple = field(default_factory=tuple)

    @property
    def n_points(self) -> int:
        return int(self.values.size)

    def label(self, index: int) -> str:
        """Name of time point ``index`` in messages, with its time."""
        t = f"t = {self.time_s[index]:.4g} s"
        if len(self.row_labels) == self.time_s.size:
            return f"{self.row_labels[index]} ({t})"
        return f"point {index} ({t})"

    def point_labels(self) -> list:
        """One label per value of ``values.ravel()`` (series name added when several)."""
        labels = [self.label(i) for i in range(self.time_s.size)]
        if len(self.columns) == 1:
            return labels
        return [f"{column!r} at {label}" for column in self.columns for label in labels]

    def appended(self, time_s, values, sigma=None) -> "ConcentrationData":
        """A new record with later points added (for live refits)."""
        t = np.concatenate([self.time_s, np.atleast_1d(np.asarray(time_s, dtype=float))])
        v = np.hstack([self.values, np.asarray(values, dtype=float).reshape(len(self.columns), -1)])
        s = None
        if self.sigma is not None:
            s = np.hstack([self.sigma, np.asarray(sigma, dtype=float).reshape(len(self.columns), -1)])
        labels = None
        if self.row_labels and len(self.row_labels) == self.time_s.size:
            labels = tuple(self.row_labels) + tuple(
                f"point {i}" for i in range(self.time_s.size, t.size))
        return from_arrays(t, v, s, self.columns, self.source, row_labels=labels)


def _validate(time_s, values, sigma, columns, source, lines=None):
    """Shared checks; ``lines`` maps point index -> 1-based file line for messages."""
    path = None if source == "<arrays>" else source

    def line_of(i):
        return None if lines is None else lines[i]

    def where(i):
        return "" if lines is not None else f" (point {i})"

    n = time_s.size
    if n == 0:
        raise InputFileError(path, "no data rows", hint="the table needs a header and at least 3 rows")
    bad_t = np.nonzero(~np.isfinite(time_s))[0]
    if bad_t.size:
        raise InputFileError(path, f"time is missing or not finite{where(bad_t[0])}", line=line_of(bad_t[0]),
                             hint="every row needs a time")
    for r, name in enumerate(columns):
        bad = np.nonzero(~np.isfinite(values[r]))[0]
        if bad.size:
            raise InputFileError(path, f"column {name!r} is missing or NaN{where(bad[0])}",
                                 line=line_of(bad[0]), hint="fill the cell or delete the row")
        if sigma is not None:
            bad = np.nonzero(~np.isfinite(sigma[r]) | (sigma[r] <= 0))[0]
            if bad.size:
                raise InputFileError(path, f"uncertainty for {name!r} must be a positive number"
                                     f"{where(bad[0])}", line=line_of(bad[0]))
    steps = np.diff(time_s)
    bad = np.nonzero(steps <= 0)[0]
    if bad.size:
        i = bad[0] + 1
        kind = "repeats" if steps[bad[0]] == 0 else "is earlier than"
        raise InputFileError(path, f"time {time_s[i]:g}{where(i)} {kind} the previous row's "
                             f"{time_s[i - 1]:g}", line=line_of(i),
                             hint="times must increase strictly; sort the rows or average replicates")
    if n < 3:
        raise FitError(f"{source}: only {n} time point(s); a rate fit needs at least 3")
    parts = []
    for r, name in enumerate(columns):
        if np.ptp(values[r]) == 0:
            raise FitError(f"{source}: column {name!r} is constant ({values[r][0]:g}); it carries no "
                           "kinetic information")
        negative = np.nonzero(values[r] < 0)[0]
        if negative.size:
            first = "" if lines is None else f", first on line {lines[negative[0]]}"
            parts.append(f"column {name!r} has {negative.size} (lowest {values[r].min():.3g}{first})")
    early = "" if time_s[0] >= 0 else (
        f"times before 0 (earliest {time_s[0]:g} s): times are seconds from the reaction start, where "
        "c0 of the laws refers")
    if not parts:
        return (early,) if early else ()
    # One summary per table, not one line per value: noise around zero is common in the
    # late points of every run, and a study reads many runs.
    message = ("negative concentrations: " + "; ".join(parts)
               + ": fine if noise around zero, otherwise check the baseline")
    log.info("%s: %s", source, message)
    return (message, early) if early else (message,)


def from_arrays(time_s, values, sigma=None, columns=None, source="<arrays>", *,
                row_labels=None, notes=()) -> ConcentrationData:
    """Validate arrays into :class:`ConcentrationData`.

    Parameters
    ----------
    time_s : array, shape (n,)
    values : array, shape (n,) or (m, n)
    sigma : array like ``values``, optional
    columns : sequence of str, optional
        Names of the rows (default ``c0, c1, ...``).
    row_labels : sequence of str, optional
        How messages name each time point (e.g. the spectrum's file name).
    notes : sequence of kinetics.rates.diagnostics.Guardrail, optional
        Findings about the series to carry into the fit's warnings, e.g.
        ``diagnostics.mass_balance_note(flags, files)`` from a run's table.
    """
    t = np.asarray(time_s, dtype=float).ravel()
    v = np.atleast_2d(np.asarray(values, dtype=float))
    if v.shape[1] != t.size:
        raise FitError(f"{source}: values have {v.shape[1]} points but time has {t.size}")
    s = None
    if sigma is not None:
        s = np.atleast_2d(np.asarray(sigma, dtype=float))
        if s.shape != v.shape:
            raise FitError(f"{source}: sigma shape {s.shape} differs from values {v.shape}")
    columns = tuple(columns) if columns is not None else tuple(f"series{i}" for i in range(v.shape[0]))
    warnings = _validate(t, v, s, columns, source)
    labels = tuple(str(x) for x in row_labels) if row_labels is not None else ()
    if labels and len(labels) != t.size:
        raise FitError(f"{source}: {len(labels)} row labels for {t.size} time points")
    return ConcentrationData(t, v, s, columns, source, warnings, labels, tuple(notes))


def read_rows(path) -> tuple[list, list, list, int]:
    """A delimited text table as ``(header, rows, file_lines, header_line)``.

    Comment (``#``) and blank lines are skipped; ``file_lines[i]`` is the 1-based line of
    ``rows[i]`` in the file, for error messages.  The delimiter (comma, tab or semicolon)
    is the one the header uses most.  Unreadable files (missing, a directory, not UTF-8
    text) raise :class:`~kinetics.errors.InputFileError`.
    """
    return _read_rows(Path(path))


def _read_rows(path: Path):
    if path.is_dir():
        raise InputFileError(path, "is a folder, not a table", hint="give the path of a CSV file")
    try:
        text = path.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputFileError(path, "file not found") from None
    except (OSError, UnicodeDecodeError) as error:
        raise InputFileError(path, f"cannot read the file: {error}") from None
    if "\x00" in text:
        raise InputFileError(path, "holds binary data, not a text table", hint="export the table as CSV")
    numbered = [(i, line) for i, line in enumerate(text.splitlines(), start=1)
                if line.strip() and not line.lstrip().startswith("#")]
    if not numbered:
        raise InputFileError(path, "the file is empty", hint="expected a header line and data rows")
    header = numbered[0][1]
    delimiter = max([",", "\t", ";"], key=header.count)
    if header.count(delimiter) == 0:
        delimiter = ","
    reader = csv.reader([line for _, line in numbered], delimiter=delimiter)
    rows = list(reader)
    return [name.strip() for name in rows[0]], rows[1:], [i for i, _ in numbered[1:]], numbered[0][0]


def _number(cell, path, line, column):
    text = cell.strip()
    if text == "" or text.lower() in ("nan", "na", "n/a"):
        return math.nan
    try:
        return float(text)
    except ValueError:
        raise InputFileError(path, f"column {column!r} holds {text!r}, not a number", line=line,
                             hint="use a dot as decimal separator and no units in cells") from None


#: ``--time-unit`` choices and their length in seconds.
TIME_UNITS = {"s": 1.0, "min": 60.0, "h": 3600.0}
#: ``--concentration-unit`` choices and their size in mol/L.
CONCENTRATION_UNITS = {"mol/L": 1.0, "mmol/L": 1e-3, "umol/L": 1e-6}

_TIME_NAME_HINTS = (("min", ("min", "minute")), ("h", ("hour", "_h", "(h)", "[h]", " h")))
_CONC_NAME_HINTS = (("mmol/L", ("mmol", "mm)", "_mm", "[mm]", "(mm)")), ("umol/L", ("umol", "µmol", "_um")))


def _unit_hint(name: str, given, table, kind):
    """A note when a column name suggests another unit than the one in force."""
    lowered = name.lower()
    for unit, marks in table:
        if any(lowered.endswith(m) or m in lowered for m in marks):
            if given is None:
                from kinetics.rates.diagnostics import Guardrail

                option = "--time-unit" if kind == "time" else "--concentration-unit"
                default = "s" if kind == "time" else "mol/L"
                return Guardrail(
                    "unit_hint", f"column {name!r} looks like {unit}, but it was read as {default}: "
                    f"if so, pass {option} {unit} (rate constants are otherwise off by a constant factor)",
                    "warning", {"column": name, "suggested_unit": unit})
    return None


def read_concentration_table(path, time_column, columns, sigma_columns=None, *, time_unit=None,
                             concentration_unit=None) -> ConcentrationData:
    """Read and validate a delimited concentration table.

    Parameters
    ----------
    path : str or Path
    time_column : str
        Column with times from the reaction start (seconds unless ``time_unit``).
    columns : sequence of str
        Concentration columns (mol L^-1 unless ``concentration_unit``), one per observed series.
    sigma_columns : sequence of str, optional
        Uncertainty columns, one per entry of ``columns`` (same order, same unit).
    time_unit : {"s", "min", "h"}, optional
        Unit of the time column; converted to seconds.
    concentration_unit : {"mol/L", "mmol/L", "umol/L"}, optional
        Unit of the concentration and sigma columns; converted to mol/L.

    A ``file`` column (as in a run's ``series.csv``) names the rows in messages; a
    ``mass_balance_flag`` column is summarised into a ``mass_balance`` note.

    Raises
    ------
    InputFileError
        Missing file or column, non-numeric cell, missing value, non-increasing time
        (names the file, line and column).
    FitError
        Fewer than 3 points or a constant column.
    """
    path = Path(path)
    if time_unit is not None and time_unit not in TIME_UNITS:
        raise InputFileError(path, f"unknown time unit {time_unit!r}", hint="use " + ", ".join(TIME_UNITS))
    if concentration_unit is not None and concentration_unit not in CONCENTRATION_UNITS:
        raise InputFileError(path, f"unknown concentration unit {concentration_unit!r}",
                             hint="use " + ", ".join(CONCENTRATION_UNITS))
    header, rows, lines, header_line = _read_rows(path)
    columns = list(columns)
    sigma_columns = list(sigma_columns or [])
    if sigma_columns and len(sigma_columns) != len(columns):
        raise InputFileError(path, f"{len(sigma_columns)} sigma column(s) for {len(columns)} "
                             "concentration column(s)", hint="give one --sigma-column per --column")
    repeated = sorted({name for name in [time_column, *columns, *sigma_columns]
                       if [time_column, *columns, *sigma_columns].count(name) > 1})
    if repeated:
        raise InputFileError(path, f"column {repeated[0]!r} is asked for more than once",
                             hint="each of --time-column, --column, --sigma-column names a different column")
    for name in [time_column, *columns, *sigma_columns]:
        if name not in header:
            raise InputFileError(path, f"no column named {name!r}", line=header_line,
                                 hint="columns are: " + ", ".join(header))
    index = {name: header.index(name) for name in header}
    for row, line in zip(rows, lines):
        if len(row) != len(header):
            raise InputFileError(path, f"{len(row)} cells but the header has {len(header)}", line=line)

    def column(name):
        return np.array([_number(row[index[name]], path, line, name) for row, line in zip(rows, lines)])

    t_factor = TIME_UNITS[time_unit or "s"]
    c_factor = CONCENTRATION_UNITS[concentration_unit or "mol/L"]
    t = column(time_column) * t_factor
    v = np.vstack([column(name) for name in columns]) * c_factor if columns else np.empty((0, len(rows)))
    s = np.vstack([column(name) for name in sigma_columns]) * c_factor if sigma_columns else None
    if not columns:
        raise InputFileError(path, "no concentration column given", hint="pass --column NAME")
    warnings = _validate(t, v, s, tuple(columns), str(path), lines)
    if "file" in index:
        labels = tuple(f"{row[index['file']].strip()} (line {line})" for row, line in zip(rows, lines))
    else:
        labels = tuple(f"line {line}" for line in lines)
    notes = [_unit_hint(time_column, time_unit, _TIME_NAME_HINTS, "time")]
    notes += [_unit_hint(name, concentration_unit, _CONC_NAME_HINTS, "concentration") for name in columns]
    if "mass_balance_flag" in index:
        from kinetics.rates.diagnostics import mass_balance_note

        flags = [row[index["mass_balance_flag"]].strip().lower() in ("true", "1", "yes") for row in rows]
        deviation = column("mass_balance_deviation_sigma") if "mass_balance_deviation_sigma" in index else None
        names = [row[index["file"]].strip() for row in rows] if "file" in index else [f"line {x}" for x in lines]
        notes += mass_balance_note(flags, names, deviation)
    return ConcentrationData(t, v, s, tuple(columns), str(path), warnings, labels,
                             tuple(n for n in notes if n is not None))
