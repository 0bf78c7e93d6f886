"""The single-run TOML config: one folder of spectra, how to process, what to measure.

Loaded with :mod:`tomllib`, validated once here, then trusted: this module is the one
validator of a run config.  Every problem raises :class:`~kinetics.errors.ConfigError`
naming the key, e.g. ``signals[2].window_ppm``.  Each section becomes a small frozen record
(``time``, ``integration``, ``quantify``, ``alignment``, ``fit``, ``live``, the signal
definitions) and functions take the record they need.  ``[processing]`` is validated by
:meth:`kinetics.processing.Pipeline.from_config`, and the pipeline built there is kept in
:attr:`RunConfig.pipeline`, so a run builds it once, not once per file.

:attr:`RunConfig.unnamed` lists what a draft still has to name before a rate can be fitted
(the fitted species; the internal standard or an explicit relative/initial mode):
``kinetics run`` and ``kinetics watch`` refuse such a config with one line naming the keys.

Keys (unit, default) are listed in ``configs/run_example.toml``; the tables below in the
validators are the source of truth.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field, replace
from datetime import datetime, timezone
from pathlib import Path
from types import MappingProxyType
from typing import Any, Mapping

from kinetics.errors import ConfigError
from kinetics.lineshapes import MULTIPLICITY_LINES, PROFILES
from kinetics.signals import BASELINES, LineShape, SignalDefinition, validate_signals

TIME_SOURCES = ("header", "filename", "mtime", "interval")
QUANTIFY_MODES = ("standard", "initial", "relative", "none")
ORDERS = ("name", "time")


# ---------------------------------------------------------------- records
@dataclass(frozen=True)
class TimeConfig:
    """Where each spectrum's time comes from and what t = 0 is.

    Attributes
    ----------
    source : {'header', 'filename', 'mtime', 'interval'}
        Acquisition start from the file header (JCAMP-DX date; for a run read from one
        arrayed file, each trace's date or time variable), from a regex on the file name,
        or the file's modification time (taken as the *end* of acquisition); 'interval'
        (arrayed files only): trace i starts ``i * interval_s`` after ``series_start``
        (without it, trace i's midpoint is ``first_spectrum_offset_s + i * interval_s``).
    filename_pattern : str or None
        Regex with named groups: ``timestamp`` (ISO 8601), or ``year month day hour
        minute second``, or ``elapsed_s`` / ``elapsed_min`` / ``elapsed_h`` (acquisition
        start already relative to the reaction start).
    reaction_start_utc : datetime or None
        t = 0.  When absent, the first spectrum's mid-acquisition time is t =
        ``first_spectrum_offset_s``.
    first_spectrum_offset_s : float
        Time of the first spectrum's midpoint when no reaction start is given (s).
    duration_s : float or None
        Acquisition duration to assume when the header does not give one.
    interval_s : float or None
        Seconds between the starts of successive traces (``source = 'interval'``).
    series_start_utc : datetime or None
        Acquisition start of the first trace (``source = 'interval'``).
    """

    source: str = "header"
    filename_pattern: str | None = None
    reaction_start_utc: datetime | None = None
    first_spectrum_offset_s: float = 0.0
    duration_s: float | None = None
    interval_s: float | None = None
    series_start_utc: datetime | None = None


@dataclass(frozen=True)
class IntegrationConfig:
    """How signals are measured (``[integration]``).

    Attributes
    ----------
    baseline : {'edges', 'processed'}
        Local straight baseline through the window's edge windows, or trust the
        processed baseline.
    edge_fraction : float
        Share of each window used on each side for the edge baseline (default 0.1).
    noise_region_ppm : tuple of (low, high) or None
        Signal-free range(s) for the noise; automatic when None.
    fit_baseline_order : int
        Polynomial baseline under a deconvolution window (default 1).
    global_fit : bool
        Deconvolve ``fit`` groups globally across the series (default true).
    """

    baseline: str = "edges"
    edge_fraction: float = 0.1
    noise_region_ppm: tuple | None = None
    fit_baseline_order: int = 1
    global_fit: bool = True


@dataclass(frozen=True)
class QuantifyConfig:
    """Concentrations (``[quantify]``); see :mod:`kinetics.quantify` for the formulas.

    Attributes
    ----------
    mode : {'standard', 'initial', 'relative', 'none'}
    standard : str or None
        Name of the internal-standard signal (mode 'standard').
    initial_species : str or None
        Species whose initial concentration is known (mode 'initial').
    initial_concentration_mol_per_l, initial_sigma_mol_per_l : float
    t1_s : mapping signal name -> T1 in s
        For the saturation correction.
    flip_angle_deg : float
        Excitation flip angle (default 90).
    repetition_time_s : float or None
        Time between scans; no saturation correction when None.
    reactant, product : str or None
        Species for conversion and yield.
    stoichiometry : mapping species -> float
        Weights of the mass balance (default 1 each tracked species).
    mass_balance_sigmas : float
        Flag when |total - initial total| exceeds this many standard deviations (3).
    """

    mode: str = "relative"
    standard: str | None = None
    initial_species: str | None = None
    initial_concentration_mol_per_l: float | None = None
    initial_sigma_mol_per_l: float = 0.0
    t1_s: Mapping[str, float] = field(default_factory=dict)
    flip_angle_deg: float = 90.0
    repetition_time_s: float | None = None
    reactant: str | None = None
    product: str | None = None
    stoichiometry: Mapping[str, float] = field(default_factory=dict)
    mass_balance_sigmas: float = 3.0


@dataclass(frozen=True)
class AlignmentConfig:
    """Series alignment (``[alignment]``): window [high, low] ppm, limit, reference index."""

    window_ppm: tuple[float, float] | None = None
    max_shift_ppm: float = 0.1
    reference_index: int = 0


@dataclass(frozen=True)
class FitConfig:
    """The rate fit of a run (``[fit]``), resolved against the measured species.

    Attributes
    ----------
    model : str
        Rate-law name (:data:`kinetics.rates.laws.MODELS`), default ``"first"``.
    observed : {'reactant', 'product'}
        What the fitted species is for a rate law.
    species : str
        The species fitted by a rate law: ``[fit] species``, else ``[quantify] reactant``,
        else the first species.
    mechanism : str or None
        Reaction text (``"ester -> alcohol"``); replaces ``model`` when given.
    observed_species : tuple of str
        Mechanism species taken from the series table (default: all it names that are
        measured).
    initial_mol_per_l : tuple of (species, mol/L)
        Known initial concentrations of a mechanism.
    """

    model: str = "first"
    observed: str = "reactant"
    species: str = ""
    mechanism: str | None = None
    observed_species: tuple[str, ...] = ()
    initial_mol_per_l: tuple[tuple[str, float], ...] = ()

    @property
    def columns(self) -> tuple[str, ...]:
        """The series-table columns fitted (``<species>_concentration``)."""
        names = self.observed_species if self.mechanism else (self.species,)
        return tuple(f"{name}_concentration" for name in names)


@dataclass(frozen=True)
class LiveConfig:
    """How a live run follows its folder (``[live]``; times in s, None switches a limit off).

    Attributes
    ----------
    quiet_period_s : float
        Seconds a file must stay unchanged to count as complete (2).
    poll : bool
        List the folder instead of listening to file events (false).
    poll_interval_s : float
        Seconds between listings in poll mode (1).
    recursive : bool
        Also take files of sub-folders (false).
    exclude : tuple of str
        Glob patterns of files never taken.
    target_conversion : float or None
        Stop once the conversion's lower 95 % bound reaches it (fraction, 0-1).
    idle_minutes : float or None
        Stop after this many minutes without a new spectrum.
    max_duration_s : float or None
        Stop after this many seconds.
    refresh_s : float
        Seconds between redraws of the figure and reloads of the HTML page (5).
    """

    quiet_period_s: float = 2.0
    poll: bool = False
    poll_interval_s: float = 1.0
    recursive: bool = False
    exclude: tuple[str, ...] = ()
    target_conversion: float | None = None
    idle_minutes: float | None = None
    max_duration_s: float | None = None
    refresh_s: float = 5.0


@dataclass(frozen=True)
class RunConfig:
    """A validated single-run config.

    Attributes
    ----------
    path : Path or None
        The TOML file (relative paths inside it are relative to its folder).
    folder : Path
        Folder of spectra (for ``[run] file``: the folder holding that file).
    pattern : str
        Glob of the spectrum files (default ``*.jdx`` ... see ``[run]``; for ``[run] file``
        the file's name, escaped).
    order : {'name', 'time'}
        Series order: by file name or by time.
    time, integration, quantify, alignment, fit, live : the section records
    signals : tuple of SignalDefinition
    sections : mapping name -> dict
        The raw sections as written (``processing``, ``fit``, ``live``), for provenance.
    pipeline : kinetics.processing.Pipeline
        The processing pipeline of ``[processing]``, built once at load.
    unnamed : tuple of str
        Keys a draft still has to set before a rate can be fitted (empty when ready).
    text : str or None
        The file's text as read (the ledger keeps it), when loaded from a file.
    """

    path: Path | None
    folder: Path
    pattern: str
    order: str
    time: TimeConfig
    integration: IntegrationConfig
    quantify: QuantifyConfig
    alignment: AlignmentConfig
    signals: tuple[SignalDefinition, ...]
    sections: Mapping[str, Any] = field(default_factory=dict)
    fit: FitConfig = field(default_factory=FitConfig)
    live: LiveConfig = field(default_factory=LiveConfig)
    pipeline: Any = field(default=None, repr=False, compare=False)
    unnamed: tuple[str, ...] = ()
    text: str | None = field(default=None, repr=False, compare=False)
    #: the one arrayed file the run reads (``[run] file``), or None for a folder of files
    file: Path | None = None

    @property
    def processing(self) -> Mapping[str, Any]:
        return self.sections.get("processing", {})

    @property
    def fit_groups(self) -> dict[str, tuple[SignalDefinition, ...]]:
        """Fit group -> its ``method = "fit"`` signals, in config order."""
        groups: dict[str, list[SignalDefinition]] = {}
        for sig in self.signals:
            if sig.method == "fit":
                groups.setdefault(sig.fit_group, []).append(sig)
        return {group: tuple(members) for group, members in groups.items()}

    def require_named(self) -> None:
        """Raise one ConfigError naming every key a draft still has to set (see module doc)."""
        if self.unnamed:
            raise ConfigError(" and ".join(self.unnamed), "not set: the run cannot fit a rate yet",
                              hint="name the fitted species and how concentrations are "
                                   "quantified", source=self.path)

    def signal(self, name: str) -> SignalDefinition:
        for sig in self.signals:
            if sig.name == name:
                return sig
        raise KeyError(name)

    @property
    def species(self) -> tuple[str, ...]:
        """Tracked species in first-appearance order."""
        seen: list[str] = []
        for sig in self.signals:
            if sig.species not in seen:
                seen.append(sig.species)
        return tuple(seen)


# ---------------------------------------------------------------- small validators
def _number(value, key: str, minimum: float | None = None, strict: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise ConfigError(key, f"expected a number, got {value!r}")
    if minimum is not None and (value < minimum or (strict and value == minimum)):
        raise ConfigError(key, f"must be {'>' if strict else '>='} {minimum}, got {value!r}")
    return float(value)


def _string(value, key: str) -> str:
    if not isinstance(value, str) or not value.strip():
        raise ConfigError(key, f"expected a non-empty string, got {value!r}")
    return value


#: Longest path a config may give, and longest part of one (the usual limits of Linux and
#: macOS file systems, PATH_MAX and NAME_MAX; from memory): past them the system refuses it.
MAX_PATH_LENGTH, MAX_PATH_PART_LENGTH = 4096, 255


def _path_text(value, key: str) -> str:
    """A path given in the config: a non-empty string the file system can take."""
    value = _string(value, key)
    longest = max((len(part.encode("utf-8")) for part in re.split(r"[/\\]", value)), default=0)
    if len(value.encode("utf-8")) > MAX_PATH_LENGTH or longest > MAX_PATH_PART_LENGTH or "\0" in value:
        raise ConfigError(key, f"a path of {len(value)} characters (a part of up to {longest} bytes); the file "
                          f"system takes at most {MAX_PATH_LENGTH} and {MAX_PATH_PART_LENGTH} per part",
                          hint="give the folder's real, shorter path")
    return value


#: Longest name (signal, species, standard, group) a config may give, in characters.
MAX_NAME_LENGTH = 200


def _name(value, key: str) -> str:
    """A signal or species name: a non-empty string of at most :data:`MAX_NAME_LENGTH` characters."""
    value = _string(value, key)
    if len(value) > MAX_NAME_LENGTH:
        raise ConfigError(key, f"a name of {len(value)} characters; at most {MAX_NAME_LENGTH}",
                          hint="use a short name (it labels tables, plots and the report)")
    return value


def _pattern(value, key: str = "run.pattern") -> str:
    """A glob relative to the run folder that cannot leave it (no absolute path, no ``..``)."""
    value = _string(value, key)
    if len(value) > 1000 or "\0" in value:
        raise ConfigError(key, "not a usable glob pattern", hint="e.g. '*.jdx'")
    parts = re.split(r"[/\\]", value)
    if (value.startswith(("/", "\\", "~")) or re.match(r"^[A-Za-z]:", value)
            or Path(value).is_absolute()):
        raise ConfigError(key, f"{value!r} is an absolute path; the pattern is relative to run.folder",
                          hint="put the folder in run.folder and a glob such as '*.jdx' here")
    if any(".." in part for part in parts):
        raise ConfigError(key, f"{value!r} could match files outside run.folder ('..')",
                          hint="point run.folder at the spectra and use a glob such as '*.jdx'")
    return value


def _choice(value, key: str, choices) -> str:
    if value not in choices:
        raise ConfigError(key, f"unknown choice {value!r}", hint=f"use one of {', '.join(choices)}")
    return value


def _bool(value, key: str) -> bool:
    if not isinstance(value, bool):
        raise ConfigError(key, f"expected true or false, got {value!r}")
    return value


def _table(value, key: str) -> dict:
    if value is None:
        return {}
    if not isinstance(value, Mapping):
        raise ConfigError(key, f"expected a table, got {value!r}")
    return dict(value)


def _check_keys(table: Mapping, allowed, key: str) -> None:
    for name in table:
        if name not in allowed:
            raise ConfigError(f"{key}.{name}" if key else name, "unknown key",
                              hint=f"allowed: {', '.join(sorted(allowed))}")


def _ppm_range(value, key: str) -> tuple[float, float]:
    """(low, high) from a two-number list in either order."""
    if not isinstance(value, (list, tuple)) or len(value) != 2:
        raise ConfigError(key, f"expected [low, high] in ppm, got {value!r}")
    a, b = (_number(v, key) for v in value)
    if a == b:
        raise ConfigError(key, "the two ends of the window must differ")
    return (min(a, b), max(a, b))


#: Years a reaction start may fall in (a sanity bound: times become float seconds downstream).
_YEARS = (1900, 2999)
_YEAR_HINT = f"give a UTC time between {_YEARS[0]} and {_YEARS[1]}, e.g. 2026-01-01T09:00:00Z"


def parse_utc(value, key: str) -> datetime:
    """A TOML datetime or ISO 8601 string -> timezone-aware UTC datetime (naive = UTC)."""
    if isinstance(value, str):
        text = value.strip().replace("Z", "+00:00")
        try:
            value = datetime.fromisoformat(text)
        except ValueError as error:
            raise ConfigError(key, f"not an ISO 8601 time: {value!r}", hint="e.g. 2026-01-01T09:00:00Z") from error
    if not isinstance(value, datetime):
        raise ConfigError(key, f"expected a date-time, got {value!r}")
    if value.tzinfo is None:
        value = value.replace(tzinfo=timezone.utc)
    try:
        value = value.astimezone(timezone.utc)
    except (OverflowError, ValueError) as error:
        raise ConfigError(key, f"{value.isoformat()} is out of range", hint=_YEAR_HINT) from error
    if not _YEARS[0] <= value.year <= _YEARS[1]:
        raise ConfigError(key, f"year {value.year} is not a plausible reaction time", hint=_YEAR_HINT)
    return value


# ---------------------------------------------------------------- sections
_RUN_KEYS = {"folder", "pattern", "order", "file"}
_TIME_KEYS = {"source", "filename_pattern", "reaction_start", "first_spectrum_offset_s", "duration_s",
              "interval_s", "series_start"}
_INTEGRATION_KEYS = {"baseline", "edge_fraction", "noise_region_ppm", "fit_baseline_order", "global_fit"}
_QUANTIFY_KEYS = {"mode", "standard", "initial_species", "initial_concentration_mol_per_l",
                  "initial_sigma_mol_per_l", "t1_s", "flip_angle_deg", "repetition_time_s",
                  "reactant", "product", "stoichiometry", "mass_balance_sigmas"}
_ALIGN_KEYS = {"window_ppm", "max_shift_ppm", "reference_index"}
_SIGNAL_KEYS = {"name", "species", "window_ppm", "nuclei", "method", "lineshape", "standard",
                "concentration_mol_per_l", "concentration_sigma_mol_per_l", "tolerance_ppm", "group",
                "correct_truncation"}
_LINESHAPE_KEYS = {"multiplicity", "lines", "j_hz", "width_hz", "profile", "gauss_width_hz"}
_FILENAME_GROUPS = {"timestamp", "year", "month", "day", "hour", "minute", "second",
                    "elapsed_s", "elapsed_min", "elapsed_h"}


def _time_section(raw: Mapping) -> TimeConfig:
    _check_keys(raw, _TIME_KEYS, "time")
    source = _choice(raw.get("source", "header"), "time.source", TIME_SOURCES)
    pattern = raw.get("filename_pattern")
    if source == "filename" and pattern is None:
        raise ConfigError("time.filename_pattern", "time.source = 'filename' needs a regex with named groups",
                          hint="e.g. '(?P<timestamp>\\d{8}T\\d{6})' or '_(?P<elapsed_min>[0-9.]+)min'")
    if pattern is not None:
        pattern = _string(pattern, "time.filename_pattern")
        try:
            compiled = re.compile(pattern)
        except re.error as error:
            raise ConfigError("time.filename_pattern", f"not a valid regular expression: {error}") from error
        groups = set(compiled.groupindex)
        if not groups & _FILENAME_GROUPS or groups - _FILENAME_GROUPS:
            raise ConfigError("time.filename_pattern", f"named groups {sorted(groups)} are not usable",
                              hint=f"use only {', '.join(sorted(_FILENAME_GROUPS))}")
        if not ({"timestamp"} <= groups or {"year", "month", "day", "hour", "minute"} <= groups
                or groups & {"elapsed_s", "elapsed_min", "elapsed_h"}):
            raise ConfigError("time.filename_pattern", "needs timestamp, year..minute or an elapsed_* group")
    start = raw.get("reaction_start")
    duration = raw.get("duration_s")
    interval, series_start = raw.get("interval_s"), raw.get("series_start")
    if source == "interval" and interval is None:
        raise ConfigError("time.interval_s", "time.source = 'interval' needs the seconds between traces",
                          hint="e.g. interval_s = 60 (and optionally series_start, the first trace's start)")
    if source != "interval" and (interval is not None or series_start is not None):
        key = "time.interval_s" if interval is not None else "time.series_start"
        raise ConfigError(key, "only used with time.source = 'interval'", hint="remove it, or set source = 'interval'")
    return TimeConfig(
        source=source, filename_pattern=pattern,
        reaction_start_utc=None if start is None else parse_utc(start, "time.reaction_start"),
        first_spectrum_offset_s=_number(raw.get("first_spectrum_offset_s", 0.0), "time.first_spectrum_offset_s"),
        duration_s=None if duration is None else _number(duration, "time.duration_s", 0),
        interval_s=None if interval is None else _number(interval, "time.interval_s", 0, strict=True),
        series_start_utc=None if series_start is None else parse_utc(series_start, "time.series_start"),
    )


def _integration_section(raw: Mapping) -> IntegrationConfig:
    _check_keys(raw, _INTEGRATION_KEYS, "integration")
    baseline = _choice(raw.get("baseline", "edges"), "integration.baseline", BASELINES)
    edge = _number(raw.get("edge_fraction", 0.1), "integration.edge_fraction", 0, strict=True)
    if edge >= 0.5:
        raise ConfigError("integration.edge_fraction", "must be < 0.5 (each side)")
    noise = raw.get("noise_region_ppm")
    if noise is not None:
        if isinstance(noise, (list, tuple)) and noise and isinstance(noise[0], (list, tuple)):
            noise = tuple(_ppm_range(r, f"integration.noise_region_ppm[{i}]") for i, r in enumerate(noise))
        else:
            noise = (_ppm_range(noise, "integration.noise_region_ppm"),)
    order = raw.get("fit_baseline_order", 1)
    if isinstance(order, bool) or not isinstance(order, int) or not 0 <= order <= 3:
        raise ConfigError("integration.fit_baseline_order", f"expected 0, 1, 2 or 3, got {order!r}")
    return IntegrationConfig(baseline=baseline, edge_fraction=edge, noise_region_ppm=noise,
                             fit_baseline_order=order,
                             global_fit=_bool(raw.get("global_fit", True), "integration.global_fit"))


def _lineshape(raw, key: str) -> LineShape:
    raw = _table(raw, key)
    _check_keys(raw, _LINESHAPE_KEYS, key)
    lines = raw.get("lines")
    multiplicity = raw.get("multiplicity", "singlet" if lines is None else None)
    if multiplicity is not None:
        if isinstance(multiplicity, str):
            if multiplicity not in MULTIPLICITY_LINES:
                raise ConfigError(f"{key}.multiplicity", f"unknown multiplicity {multiplicity!r}",
                                  hint=f"use {', '.join(MULTIPLICITY_LINES)} or lines = n + 1")
            count = MULTIPLICITY_LINES[multiplicity]
        else:
            count = multiplicity
        if lines is not None and lines != count:
            raise ConfigError(f"{key}.lines", f"{lines} lines contradicts multiplicity {multiplicity!r}")
        lines = count
    if isinstance(lines, bool) or not isinstance(lines, int) or lines < 1:
        raise ConfigError(f"{key}.lines", f"expected a whole number of lines >= 1, got {lines!r}")
    profile = _choice(raw.get("profile", "lorentzian"), f"{key}.profile", PROFILES)
    j_hz = _number(raw.get("j_hz", 0.0), f"{key}.j_hz", 0)
    if lines > 1 and j_hz <= 0:
        raise ConfigError(f"{key}.j_hz", f"a {lines}-line multiplet needs J > 0 Hz")
    gauss = _number(raw.get("gauss_width_hz", 0.0), f"{key}.gauss_width_hz", 0)
    if profile == "voigt" and gauss <= 0:
        raise ConfigError(f"{key}.gauss_width_hz", "a Voigt profile needs a Gaussian width > 0 Hz")
    return LineShape(n_lines=lines, coupling_hz=j_hz, profile=profile,
                     width_hz=_number(raw.get("width_hz", 1.0), f"{key}.width_hz", 0, strict=True),
                     gauss_width_hz=gauss)


def signal_from_table(raw: Mapping, key: str) -> SignalDefinition:
    """One ``[[signals]]`` table -> SignalDefinition (ConfigError names ``key.field``)."""
    raw = _table(raw, key)
    _check_keys(raw, _SIGNAL_KEYS, key)
    for required in ("name", "window_ppm", "nuclei"):
        if required not in raw:
            raise ConfigError(f"{key}.{required}", "missing")
    name = _name(raw["name"], f"{key}.name")
    nuclei = raw["nuclei"]
    if isinstance(nuclei, bool) or not isinstance(nuclei, int) or nuclei < 1:
        raise ConfigError(f"{key}.nuclei", f"number of nuclei must be a whole number >= 1, got {nuclei!r}")
    method = _choice(raw.get("method", "integral"), f"{key}.method", ("integral", "fit"))
    shape = raw.get("lineshape")
    if method == "fit" and shape is None:
        raise ConfigError(f"{key}.lineshape", "method 'fit' needs a [signals.lineshape] table",
                          hint="e.g. lineshape = {multiplicity = 'triplet', j_hz = 7.0, width_hz = 1.0}")
    standard = _bool(raw.get("standard", False), f"{key}.standard")
    conc = raw.get("concentration_mol_per_l")
    if standard and conc is None:
        raise ConfigError(f"{key}.concentration_mol_per_l", "an internal standard needs its concentration")
    if conc is not None:
        conc = _number(conc, f"{key}.concentration_mol_per_l", 0, strict=True)
    return SignalDefinition(
        name=name, species=_name(raw.get("species", name), f"{key}.species"),
        window_ppm=_ppm_range(raw["window_ppm"], f"{key}.window_ppm"), nuclei=nuclei, method=method,
        lineshape=None if shape is None else _lineshape(shape, f"{key}.lineshape"),
        concentration_mol_per_l=conc,
        concentration_sigma_mol_per_l=_number(raw.get("concentration_sigma_mol_per_l", 0.0),
                                              f"{key}.concentration_sigma_mol_per_l", 0),
        tolerance_ppm=_number(raw.get("tolerance_ppm", 0.0), f"{key}.tolerance_ppm", 0),
        group=_name(str(raw["group"]), f"{key}.group") if raw.get("group", "") != "" else "",
        correct_truncation=_bool(raw.get("correct_truncation", False), f"{key}.correct_truncation"),
    )


def signals_from_list(raw, key: str = "signals") -> tuple[SignalDefinition, ...]:
    """The ``[[signals]]`` array, validated (also the overlap rule)."""
    if not isinstance(raw, list) or not raw:
        raise ConfigError(key, "at least one [[signals]] table is needed")
    signals = tuple(signal_from_table(item, f"{key}[{i}]") for i, item in enumerate(raw))
    validate_signals(signals, key=key)
    return signals


def _quantify_section(raw: Mapping, signals) -> QuantifyConfig:
    _check_keys(raw, _QUANTIFY_KEYS, "quantify")
    standards = [s for s in signals if s.is_standard]
    default_mode = "standard" if standards else "relative"
    mode = _choice(raw.get("mode", default_mode), "quantify.mode", QUANTIFY_MODES)
    names = {s.name: i for i, s in enumerate(signals)}
    species = {s.species for s in signals}
    standard = raw.get("standard")
    if standard is not None:
        standard = _name(standard, "quantify.standard")
    if mode == "standard":
        if standard is None:
            if len(standards) != 1:
                raise ConfigError("quantify.standard", f"mode 'standard' needs one standard signal, found {len(standards)}",
                                  hint="give quantify.standard = NAME and the signal's concentration_mol_per_l")
            standard = standards[0].name
        if standard not in names:
            raise ConfigError("quantify.standard", f"no signal named {standard!r}")
        if not signals[names[standard]].is_standard:
            raise ConfigError(f"signals[{names[standard]}].concentration_mol_per_l",
                              f"signal {standard!r} is the standard but has no concentration")
    initial_species = raw.get("initial_species")
    if initial_species is not None:
        initial_species = _name(initial_species, "quantify.initial_species")
    c0 = raw.get("initial_concentration_mol_per_l")
    if mode == "initial":
        if initial_species not in species:
            raise ConfigError("quantify.initial_species", f"{initial_species!r} is not a tracked species",
                              hint=f"one of {', '.join(sorted(species))}")
        if c0 is None:
            raise ConfigError("quantify.initial_concentration_mol_per_l", "missing for mode 'initial'")
    if c0 is not None:
        c0 = _number(c0, "quantify.initial_concentration_mol_per_l", 0, strict=True)
    t1 = _table(raw.get("t1_s"), "quantify.t1_s")
    for name, value in t1.items():
        if name not in names:
            raise ConfigError(f"quantify.t1_s.{name}", "no signal of that name")
        _number(value, f"quantify.t1_s.{name}", 0, strict=True)
    tr = raw.get("repetition_time_s")
    if tr is not None:
        tr = _number(tr, "quantify.repetition_time_s", 0, strict=True)
    flip = _number(raw.get("flip_angle_deg", 90.0), "quantify.flip_angle_deg", 0, strict=True)
    if flip > 180:
        raise ConfigError("quantify.flip_angle_deg", f"must be in (0, 180], got {flip}")
    for role in ("reactant", "product"):
        if raw.get(role) is not None and _name(raw[role], f"quantify.{role}") not in species:
            raise ConfigError(f"quantify.{role}", f"{raw[role]!r} is not a tracked species",
                              hint=f"one of {', '.join(sorted(species))}")
    if raw.get("reactant") is not None and raw.get("reactant") == raw.get("product"):
        raise ConfigError("quantify.product", f"{raw['product']!r} is also quantify.reactant",
                          hint="the product is the species formed, not the one consumed")
    stoich = _table(raw.get("stoichiometry"), "quantify.stoichiometry")
    for name, value in stoich.items():
        if name not in species:
            raise ConfigError(f"quantify.stoichiometry.{name}", "not a tracked species")
        _number(value, f"quantify.stoichiometry.{name}", 0)
    return QuantifyConfig(
        mode=mode, standard=standard, initial_species=initial_species,
        initial_concentration_mol_per_l=c0,
        initial_sigma_mol_per_l=_number(raw.get("initial_sigma_mol_per_l", 0.0), "quantify.initial_sigma_mol_per_l", 0),
        t1_s=MappingProxyType({k: float(v) for k, v in t1.items()}), flip_angle_deg=flip,
        repetition_time_s=tr, reactant=raw.get("reactant"), product=raw.get("product"),
        stoichiometry=MappingProxyType({k: float(v) for k, v in stoich.items()}),
        mass_balance_sigmas=_number(raw.get("mass_balance_sigmas", 3.0), "quantify.mass_balance_sigmas", 0, strict=True),
    )


def _alignment_section(raw: Mapping) -> AlignmentConfig:
    _check_keys(raw, _ALIGN_KEYS, "alignment")
    window = raw.get("window_ppm")
    if window is not None:
        lo, hi = _ppm_range(window, "alignment.window_ppm")
        window = (hi, lo)
    index = raw.get("reference_index", 0)
    if isinstance(index, bool) or not isinstance(index, int) or index < 0:
        raise ConfigError("alignment.reference_index", f"expected a whole number >= 0, got {index!r}")
    if index != 0:
        raise ConfigError("alignment.reference_index", "only the first spectrum (0) can be the reference",
                          hint="a live run cannot align to a spectrum that has not arrived yet")
    return AlignmentConfig(window_ppm=window,
                           max_shift_ppm=_number(raw.get("max_shift_ppm", 0.1), "alignment.max_shift_ppm", 0, strict=True),
                           reference_index=index)


FIT_KEYS = {
    # key: meaning -- the [fit] table of a run config
    "model": "rate-law name (kinetics.rates.laws.MODELS), default \"first\"",
    "observed": "\"reactant\" or \"product\": what the fitted species is, default \"reactant\"",
    "species": "species fitted by a rate law, default [quantify] reactant, else the first species",
    "mechanism": "reaction text, e.g. \"ester -> alcohol\"; replaces model",
    "observed_species": "mechanism species taken from the series table, default all it names that are measured",
    "initial_mol_per_l": "table species -> known initial concentration of a mechanism (mol/L)",
}


#: Longest ``[fit] mechanism`` text, in characters.
MAX_MECHANISM_LENGTH = 5000


def _species_order(signals) -> list[str]:
    seen: list[str] = []
    for sig in signals:
        if sig.species not in seen:
            seen.append(sig.species)
    return seen


def _fit_section(raw: Mapping, signals, quantify: QuantifyConfig) -> FitConfig:
    _check_keys(raw, FIT_KEYS, "fit")
    measured = _species_order(signals)
    mechanism = raw.get("mechanism")
    if mechanism is not None:
        from kinetics.rates.mechanism import parse_mechanism

        if not isinstance(mechanism, str) or not mechanism.strip():
            raise ConfigError("fit.mechanism", "expected reaction text such as \"A -> B\"")
        if len(mechanism) > MAX_MECHANISM_LENGTH:
            raise ConfigError("fit.mechanism", f"{len(mechanism)} characters; at most {MAX_MECHANISM_LENGTH}",
                              hint="a mechanism of a few steps, e.g. \"A -> B; B -> C\"")
        names = parse_mechanism(mechanism).species
        wanted = raw.get("observed_species") or [sp for sp in names if sp in measured]
        if not isinstance(wanted, list) or not wanted:
            raise ConfigError("fit.observed_species", "no species of the mechanism is measured",
                              hint=f"the mechanism names {', '.join(names)}; the signals measure "
                                   f"{', '.join(measured)}")
        for sp in wanted:
            if sp not in measured or sp not in names:
                raise ConfigError("fit.observed_species", f"{sp!r} is not both a measured species "
                                  "and a species of the mechanism")
        initial = raw.get("initial_mol_per_l", {}) or {}
        if not isinstance(initial, Mapping) or any(
                isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v) or v < 0
                for v in initial.values()):
            raise ConfigError("fit.initial_mol_per_l", "expected a table species = concentration >= 0 "
                              "(finite numbers)")
        return FitConfig(mechanism=mechanism, species=str(wanted[0]),
                         observed_species=tuple(str(sp) for sp in wanted),
                         initial_mol_per_l=tuple((str(k), float(v)) for k, v in initial.items()))
    from kinetics.rates.laws import MODELS

    model = str(raw.get("model", "first"))
    if model not in MODELS:
        raise ConfigError("fit.model", f"unknown rate law {model!r}", hint=f"use one of {', '.join(MODELS)}")
    observed = str(raw.get("observed", "reactant"))
    if observed not in ("reactant", "product"):
        raise ConfigError("fit.observed", f"expected reactant or product, got {observed!r}")
    species = raw.get("species") or quantify.reactant or measured[0]
    if raw.get("species"):
        species = _name(species, "fit.species")
    if species not in measured:
        raise ConfigError("fit.species", f"{species!r} is not a measured species",
                          hint=f"measured: {', '.join(measured)}")
    return FitConfig(model=model, observed=observed, species=str(species))


_LIVE_KEYS = {
    # key: (type, default) -- the [live] table; meanings in LiveConfig
    "quiet_period_s": (float, 2.0), "poll": (bool, False), "poll_interval_s": (float, 1.0),
    "recursive": (bool, False), "exclude": (list, []), "target_conversion": (float, None),
    "idle_minutes": (float, None), "max_duration_s": (float, None), "refresh_s": (float, 5.0),
}


def _live_section(raw: Mapping) -> LiveConfig:
    _check_keys(raw, _LIVE_KEYS, "live")
    values = {}
    for key, (kind, default) in _LIVE_KEYS.items():
        value = raw.get(key, default)
        if value is not None:
            if kind is float:
                value = _number(value, f"live.{key}", 0)
            elif kind is bool:
                value = _bool(value, f"live.{key}")
            elif not (isinstance(value, list) and all(isinstance(v, str) for v in value)):
                raise ConfigError(f"live.{key}", "expected a list of glob patterns")
            else:
                value = tuple(value)
        values[key] = value
    target = values["target_conversion"]
    if target is not None and not 0.0 < target < 1.0:
        raise ConfigError("live.target_conversion", "must be a fraction between 0 and 1")
    return LiveConfig(**values)


def _unnamed(raw: Mapping, signals, quantify: QuantifyConfig) -> tuple[str, ...]:
    """Keys still to set before a rate can be fitted (module doc); empty when ready."""
    keys = []
    fit = raw.get("fit") or {}
    if quantify.reactant is None and not fit.get("species") and not fit.get("mechanism"):
        keys.append("quantify.reactant (or fit.species)")
    explicit = (raw.get("quantify") or {}).get("mode")
    if not any(s.is_standard for s in signals) and explicit not in ("relative", "initial"):
        keys.append("a signal's standard = true with concentration_mol_per_l "
                    "(or quantify.mode = \"relative\" / \"initial\")")
    return tuple(keys)


#: Chemical-shift spans (ppm) that hold the shifts of each supported nucleus, generously
#: widened (values from memory, common practice: 1H about -5 to 20 ppm, 13C about 0 to 230,
#: 19F about -400 to 250, 31P about -500 to 250).  Only a sanity bound on the config.
SHIFT_SPAN_PPM = {"1H": (-10.0, 25.0), "2H": (-10.0, 25.0), "13C": (-50.0, 260.0),
                  "19F": (-450.0, 300.0), "31P": (-550.0, 300.0)}


def _check_reference(reference, signals) -> None:
    """The ``[processing] reference`` shifts and every signal window on one nucleus's scale.

    A reference at 500 ppm beside 1H windows (or on no nucleus's scale at all) is a typo,
    not a spectrum: refused, naming ``processing.reference.ppm`` (or ``.target_ppm``).
    """
    if not reference:
        return
    nuclei = reference.get("nuclei") or tuple(SHIFT_SPAN_PPM)
    lows = [s.window_ppm[0] for s in signals]
    highs = [s.window_ppm[1] for s in signals]
    for name in ("ppm", "target_ppm"):
        shift = reference.get(name)
        if shift is None:
            continue
        fits = [n for n in nuclei if n in SHIFT_SPAN_PPM
                and SHIFT_SPAN_PPM[n][0] <= min([shift, *lows]) and max([shift, *highs]) <= SHIFT_SPAN_PPM[n][1]]
        if not fits:
            raise ConfigError(f"processing.reference.{name}",
                              f"{shift:g} ppm is on no nucleus's shift scale together with the signal "
                              f"windows ({min(lows):g} to {max(highs):g} ppm)",
                              hint="give the reference peak's shift on the spectrum's scale (TMS: 0 ppm)")


def _run_file(run: Mapping, base: Path) -> tuple[Path | None, str | None]:
    """``[run] file`` (one arrayed file, relative to the config) and the pattern naming it.

    Exclusive with ``folder`` and ``pattern``: a run reads a folder of files or one file.
    """
    if "file" not in run:
        return None, None
    for key in ("folder", "pattern"):
        if key in run:
            raise ConfigError(f"run.{key}", "run.file and run.folder/run.pattern exclude each other",
                              hint="a run reads either one arrayed file (file) or a folder of files (folder, pattern)")
    file = Path(_path_text(run["file"], "run.file"))
    if not file.name or file.name in (".", ".."):
        raise ConfigError("run.file", f"{run['file']!r} names no file", hint="e.g. file = 'series/reaction.jdx'")
    import glob

    return (file if file.is_absolute() else base / file), glob.escape(file.name)


_OTHER_SECTIONS = {"processing"}
_OWN_SECTIONS = {"run", "time", "integration", "quantify", "alignment", "signals", "fit", "live"}


def run_config_from_dict(raw: Mapping[str, Any], path: str | Path | None = None) -> RunConfig:
    """Validate a parsed TOML document; relative folders resolve against ``path``'s folder."""
    base = Path(path).parent if path is not None else Path.cwd()
    run = _table(raw.get("run"), "run")
    _check_keys(run, _RUN_KEYS, "run")
    file, pattern = _run_file(run, base)
    if file is not None:
        folder = file.parent
    elif "folder" not in run:
        raise ConfigError("run.folder", "missing: the folder of spectra",
                          hint="or run.file, one arrayed file holding the whole series")
    else:
        folder = Path(_path_text(run["folder"], "run.folder"))
        pattern = _pattern(run.get("pattern", "*.jdx"))
        if not folder.is_absolute():
            folder = base / folder
    time_config = _time_section(_table(raw.get("time"), "time"))
    if (file is None and time_config.source == "interval") or (
            file is not None and time_config.source in ("filename", "mtime")):
        raise ConfigError("time.source", "'interval' is for a run read from one arrayed file ([run] file)"
                          if file is None else f"{time_config.source!r} does not apply to one arrayed file",
                          hint="use 'header' (dates or times in the files)" if file is None else
                          "use 'header' (each trace's date or time in the file) or 'interval' with interval_s")
    signals = signals_from_list(raw.get("signals"))
    sections = {name: value for name, value in raw.items() if name not in _OWN_SECTIONS - {"fit", "live"}}
    unknown = sorted(set(sections) - _OTHER_SECTIONS - {"fit", "live"})
    if unknown:
        raise ConfigError(unknown[0], "unknown section or key at the top level",
                          hint="known: " + ", ".join(sorted(_OWN_SECTIONS | _OTHER_SECTIONS)))
    from kinetics.processing import Pipeline

    pipeline = Pipeline.from_config(_table(sections.get("processing"), "processing"))
    _check_reference(getattr(pipeline, "reference", None), signals)
    quantify = _quantify_section(_table(raw.get("quantify"), "quantify"), signals)
    return RunConfig(
        path=None if path is None else Path(path), folder=folder,
        pattern=pattern, file=None if file is None else folder / file.name,
        order=_choice(run.get("order", "name"), "run.order", ORDERS),
        time=time_config,
        integration=_integration_section(_table(raw.get("integration"), "integration")),
        quantify=quantify,
        alignment=_alignment_section(_table(raw.get("alignment"), "alignment")),
        signals=signals, sections=MappingProxyType(dict(sections)),
        fit=_fit_section(_table(raw.get("fit"), "fit"), signals, quantify),
        live=_live_section(_table(raw.get("live"), "live")),
        pipeline=pipeline, unnamed=_unnamed(raw, signals, quantify),
    )


def load_run_config(path: str | Path) -> RunConfig:
    """Read and validate a single-run TOML config file."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as error:
        raise ConfigError("<file>", f"cannot read {path}: {error.strerror or error}", source=path) from error
    try:
        raw = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise ConfigError("<syntax>", f"not valid TOML: {error}", source=path) from error
    try:
        return replace(run_config_from_dict(raw, path), text=text)
    except ConfigError as error:
        if error.source is None:
            raise ConfigError(error.key, error.problem, error.hint, source=path) from None
        raise


# ---------------------------------------------------------------- study configs
#: seconds per unit of a study table's time column
TIME_UNITS_S = {"s": 1.0, "min": 60.0, "h": 3600.0}
_STUDY_KEYS = {"name", "model", "observed", "reference_temperature_kelvin", "t_ref_kelvin", "global_fit", "profile",
               "interval_basis", "runs"}
_STUDY_RUN_KEYS = {"label", "temperature_c", "temperature_kelvin", "table", "config", "folder", "time_column",
                   "time_unit", "column", "sigma_column"}


@dataclass(frozen=True)
class StudyRunConfig:
    """One ``[[study.runs]]`` table (keys and units in :mod:`kinetics.study`).

    Attributes
    ----------
    key : str
        ``study.runs[i]``, for error messages.
    label : str
    temperature_kelvin : float
    temperature_warnings : tuple of str
        E.g. a Celsius value that looks like kelvin.
    table, config, folder : Path or None
        A CSV series table, or a run config (applied to ``folder`` when given); resolved
        against the study file's folder.
    time_column, time_unit, column, sigma_column : str (sigma_column may be None)
    """

    key: str
    label: str
    temperature_kelvin: float
    temperature_warnings: tuple[str, ...]
    table: Path | None
    config: Path | None
    folder: Path | None
    time_column: str
    time_unit: str
    column: str
    sigma_column: str | None

    @property
    def time_factor_s(self) -> float:
        return TIME_UNITS_S[self.time_unit]


@dataclass(frozen=True)
class StudyConfig:
    """A validated temperature-study config (``[study]``; keys in :mod:`kinetics.study`)."""

    path: Path
    name: str
    model: str
    observed: str
    reference_temperature_kelvin: float
    t_ref_kelvin: float | None
    global_fit: bool
    profile: bool
    interval_basis: str
    runs: tuple[StudyRunConfig, ...]


def is_study_config(config: Mapping[str, Any]) -> bool:
    """True when a parsed config is a temperature study (it has a top-level ``[study]`` table)."""
    return isinstance(config, Mapping) and isinstance(config.get("study"), Mapping)


def _study_run(run, index: int, base: Path) -> StudyRunConfig:
    from kinetics import temperature as temp

    key = f"study.runs[{index}]"
    if not isinstance(run, Mapping):
        raise ConfigError(key, "each run must be a table ([[study.runs]])")
    unknown = set(run) - _STUDY_RUN_KEYS
    if unknown:
        raise ConfigError(f"{key}.{sorted(unknown)[0]}", "unknown key",
                          f"known keys: {', '.join(sorted(_STUDY_RUN_KEYS))}")
    has_c, has_k = "temperature_c" in run, "temperature_kelvin" in run
    if has_c == has_k:
        raise ConfigError(key, "needs exactly one of temperature_c (°C) and temperature_kelvin (K)")
    name = "temperature_c" if has_c else "temperature_kelvin"
    value = run[name]
    if not isinstance(value, (int, float)) or isinstance(value, bool):
        raise ConfigError(f"{key}.{name}", f"{value!r} is not a number")
    kelvin, warnings = temp.to_kelvin([value], "c" if has_c else "k", [key])
    if "column" not in run:
        raise ConfigError(f"{key}.column", "missing: which concentration column (mol/L) to fit")
    time_unit = run.get("time_unit", "s")
    if time_unit not in TIME_UNITS_S:
        raise ConfigError(f"{key}.time_unit", f"unknown unit {time_unit!r}", "use s, min or h")
    if "folder" in run and "config" not in run:
        raise ConfigError(f"{key}.folder", "a folder goes with 'config' (the run config applied to it)")
    if ("table" in run) == ("config" in run):
        raise ConfigError(key, "needs exactly one of 'table' (a CSV series table) and 'config' (a run config)")
    folder = None
    if "folder" in run:
        folder = base / _path_text(run["folder"], f"{key}.folder")
        if not folder.is_dir():
            raise ConfigError(f"{key}.folder", f"folder {folder} does not exist")
    return StudyRunConfig(
        key=key, label=str(run.get("label", f"run {index + 1}")), temperature_kelvin=float(kelvin[0]),
        temperature_warnings=tuple(warnings),
        table=base / _path_text(run["table"], f"{key}.table") if "table" in run else None,
        config=base / _path_text(run["config"], f"{key}.config") if "config" in run else None, folder=folder,
        time_column=str(run.get("time_column", "time_s")), time_unit=time_unit, column=str(run["column"]),
        sigma_column=None if run.get("sigma_column") is None else str(run["sigma_column"]))


def study_config_from_dict(raw: Mapping[str, Any], path: str | Path) -> StudyConfig:
    """Validate a parsed study TOML document (paths resolve against ``path``'s folder)."""
    from kinetics import temperature as temp

    path = Path(path)
    if not is_study_config(raw):
        raise ConfigError("study", "missing the top-level [study] table", "a study config starts with [study]")
    study = raw["study"]
    unknown = set(study) - _STUDY_KEYS
    if unknown:
        raise ConfigError(f"study.{sorted(unknown)[0]}", "unknown key", f"known keys: {', '.join(sorted(_STUDY_KEYS))}")
    model = study.get("model", "first")
    observed = study.get("observed", "reactant")
    basis = study.get("interval_basis", "scatter")
    if basis not in ("scatter", "stated"):
        raise ConfigError("study.interval_basis", f"{basis!r} is not 'scatter' or 'stated'")
    if observed not in ("reactant", "product"):
        raise ConfigError("study.observed", f"{observed!r} is not 'reactant' or 'product'")
    if not isinstance(model, str):
        raise ConfigError("study.model", f"{model!r} is not a rate-law name")
    try:
        temp.resolve_model(model, observed)
    except ConfigError as error:
        raise ConfigError(f"study.{error.key}", error.problem, error.hint) from None
    runs = study.get("runs")
    if not isinstance(runs, list) or len(runs) < 2:
        raise ConfigError("study.runs", f"{0 if not isinstance(runs, list) else len(runs)} run(s) listed; "
                          "a temperature study needs at least 2 ([[study.runs]] tables), 3 or more recommended")
    records = tuple(_study_run(run, i, path.parent) for i, run in enumerate(runs))
    labels = [r.label for r in records]
    if len(set(labels)) != len(labels):
        raise ConfigError("study.runs.label", "two runs share a label", "give every run its own label")
    t_ref = study.get("t_ref_kelvin")
    return StudyConfig(
        path=path, name=str(study.get("name", path.stem)), model=model, observed=observed,
        reference_temperature_kelvin=_number(study.get("reference_temperature_kelvin",
                                                       temp.DEFAULT_REFERENCE_TEMPERATURE_KELVIN),
                                             "study.reference_temperature_kelvin", 0, strict=True),
        t_ref_kelvin=None if t_ref is None else _number(t_ref, "study.t_ref_kelvin", 0, strict=True),
        global_fit=_bool(study.get("global_fit", True), "study.global_fit"),
        profile=_bool(study.get("profile", True), "study.profile"),
        interval_basis=basis, runs=records)


def read_toml(path: str | Path) -> dict:
    """A TOML file as a dict: the one reader of study and campaign configs and of config-kind checks.

    Unreadable or invalid files raise :class:`~kinetics.errors.InputFileError` naming the
    file (and the line of a syntax error) and what to do.
    """
    from kinetics.errors import InputFileError

    path = Path(path)
    try:
        with open(path, "rb") as handle:
            return tomllib.load(handle)
    except FileNotFoundError:
        raise InputFileError(path, "config file not found", hint="check the path") from None
    except IsADirectoryError:
        raise InputFileError(path, "is a folder, not a config file", hint="give the .toml file") from None
    except tomllib.TOMLDecodeError as error:
        raise InputFileError(path, f"not valid TOML: {error}", line=getattr(error, "lineno", None),
                             hint="fix the syntax at the place named") from None
    except UnicodeDecodeError:
        raise InputFileError(path, "not a text file", hint="give the .toml config") from None


def load_study_config(path: str | Path) -> StudyConfig:
    """Read and validate a temperature-study TOML file (errors name the file)."""
    path = Path(path)
    raw = read_toml(path)
    try:
        return study_config_from_dict(raw, path)
    except ConfigError as error:
        if error.source is None:
            raise ConfigError(error.key, error.problem, error.hint, source=path) from None
        raise
