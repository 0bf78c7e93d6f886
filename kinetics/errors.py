"""One exception tree for everything the user can get wrong (or the machine refuses).

``KineticsError`` is the root of InputFileError, ConfigError, FitError and OutputError;
the CLI catches it and prints its message without a traceback.  Every message says what
went wrong, where (file, line or key) and what to do.
"""

from __future__ import annotations

from pathlib import Path


class KineticsError(Exception):
    """Root of all errors the kinetics package raises on purpose."""


class InputFileError(KineticsError):
    """A file could not be read: names the file, the line when known, and the remedy.

    Parameters
    ----------
    path : str or Path or None
        The offending file.
    problem : str
        What is wrong, in plain words.
    line : int, optional
        1-based line number where the problem was found.
    hint : str, optional
        What the user can do about it.
    """

    def __init__(self, path, problem: str, line: int | None = None, hint: str | None = None):
        self.path = None if path is None else str(path)
        self.problem = problem
        self.line = line
        self.hint = hint
        where = self.path if self.path is not None else "<input>"
        if line is not None:
            where = f"{where}, line {line}"
        message = f"{where}: {problem}"
        if hint:
            message = f"{message} ({hint})"
        super().__init__(message)


class ConfigError(KineticsError):
    """A configuration value is missing or invalid: names the key and the remedy."""

    def __init__(self, key: str, problem: str, hint: str | None = None, source: str | Path | None = None):
        self.key = key
        self.problem = problem
        self.hint = hint
        self.source = None if source is None else str(source)
        prefix = f"{self.source}: " if self.source else ""
        message = f"{prefix}config key '{key}': {problem}"
        if hint:
            message = f"{message} ({hint})"
        super().__init__(message)


class FitError(KineticsError):
    """A fit could not be set up or run (bad data, no free parameters, ...)."""


class OutputError(KineticsError):
    """An output (ledger, table, page, report) could not be written: names the file and the cause
    (a read-only folder, a full disk)."""

    def __init__(self, path, problem: str, hint: str | None = None):
        self.path = str(path)
        self.problem = problem
        message = f"{self.path}: {problem}"
        if hint:
            message = f"{message} ({hint})"
        super().__init__(message)
