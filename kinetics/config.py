"""The single-run TOML config: one folder of spectra, how to process, what to measure.

Loaded with :mod:`tomllib`, validated once here, then trusted.  Every problem raises
:class:`~kinetics.errors.ConfigError` naming the key, e.g. ``signals[2].window_ppm``.
Sections other modules own (``[processing]`` -> :meth:`kinetics.processing.Pipeline.from_config`,
``[fit]`` and anything else) are kept as plain dicts in :attr:`RunConfig.sections`.

Keys (unit, default) are listed in ``configs/run_example.toml``; the tables below in the
validators are the source of truth.
"""

from __future__ import annotations

import math
import re
import tomllib
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from types import MappingProxyType
from typing import Any, Mapping

from kinetics.errors import ConfigError
from kinetics.lineshapes import MULTIPLICITY_LINES, PROFILES
from kinetics.signals import BASELINES, LineShape, SignalDefinition, validate_signals

TIME_SOURCES = ("header", "filename", "mtime")
QUANTIFY_MODES = ("standard", "initial", "relative", "none")
ORDERS = ("name", "time")


# ---------------------------------------------------------------- records
@dataclass(frozen=True)
class TimeConfig:
    """Where each spectrum's time comes from and what t = 0 is.

    Attributes
    ----------
    source : {'header', 'filename', 'mtime'}
        Acquisition start from the file header (JCAMP-DX date), from a regex on the file
        name, or the file's modification time (taken as the *end* of acquisition).
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
    """

    source: str = "header"
    filename_pattern: str | None = None
    reaction_start_utc: datetime | None = None
    first_spectrum_offset_s: float = 0.0
    duration_s: float | None = None


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
class RunConfig:
    """A validated single-run config.

    Attributes
    ----------
    path : Path or None
        The TOML file (relative paths inside it are relative to its folder).
    folder : Path
        Folder of spectra.
    pattern : str
        Glob of the spectrum files (default ``*.jdx`` ... see ``[run]``).
    order : {'name', 'time'}
        Series order: by file name or by time.
    time, integration, quantify, alignment : the section records
    signals : tuple of SignalDefinition
    sections : mapping name -> dict
        The raw sections owned by other modules (``processing``, ``fit``, ...).
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

    @property
    def processing(self) -> Mapping[str, Any]:
        return self.sections.get("processing", {})

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
    return value.astimezone(timezone.utc)


# ---------------------------------------------------------------- sections
_RUN_KEYS = {"folder", "pattern", "order"}
_TIME_KEYS = {"source", "filename_pattern", "reaction_start", "first_spectrum_offset_s", "duration_s"}
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
    return TimeConfig(
        source=source, filename_pattern=pattern,
        reaction_start_utc=None if start is None else parse_utc(start, "time.reaction_start"),
        first_spectrum_offset_s=_number(raw.get("first_spectrum_offset_s", 0.0), "time.first_spectrum_offset_s"),
        duration_s=None if duration is None else _number(duration, "time.duration_s", 0),
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
    name = _string(raw["name"], f"{key}.name")
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
        name=name, species=_string(raw.get("species", name), f"{key}.species"),
        window_ppm=_ppm_range(raw["window_ppm"], f"{key}.window_ppm"), nuclei=nuclei, method=method,
        lineshape=None if shape is None else _lineshape(shape, f"{key}.lineshape"),
        concentration_mol_per_l=conc,
        concentration_sigma_mol_per_l=_number(raw.get("concentration_sigma_mol_per_l", 0.0),
                                              f"{key}.concentration_sigma_mol_per_l", 0),
        tolerance_ppm=_number(raw.get("tolerance_ppm", 0.0), f"{key}.tolerance_ppm", 0),
        group=str(raw.get("group", "")),
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
        if raw.get(role) is not None and raw[role] not in species:
            raise ConfigError(f"quantify.{role}", f"{raw[role]!r} is not a tracked species")
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


#: sections other modules validate: processing (kinetics.processing), fit and live (watchers.live)
_OTHER_SECTIONS = {"processing", "fit", "live"}
_OWN_SECTIONS = {"run", "time", "integration", "quantify", "alignment", "signals"}


def run_config_from_dict(raw: Mapping[str, Any], path: str | Path | None = None) -> RunConfig:
    """Validate a parsed TOML document; relative folders resolve against ``path``'s folder."""
    base = Path(path).parent if path is not None else Path.cwd()
    run = _table(raw.get("run"), "run")
    _check_keys(run, _RUN_KEYS, "run")
    if "folder" not in run:
        raise ConfigError("run.folder", "missing: the folder of spectra")
    folder = Path(_string(run["folder"], "run.folder"))
    if not folder.is_absolute():
        folder = base / folder
    signals = signals_from_list(raw.get("signals"))
    sections = {name: value for name, value in raw.items() if name not in _OWN_SECTIONS}
    unknown = sorted(set(sections) - _OTHER_SECTIONS)
    if unknown:
        raise ConfigError(unknown[0], "unknown section or key at the top level",
                          hint="known: " + ", ".join(sorted(_OWN_SECTIONS | _OTHER_SECTIONS)))
    if "processing" in sections:
        from kinetics.processing import Pipeline

        Pipeline.from_config(_table(sections["processing"], "processing"))  # validate now
    return RunConfig(
        path=None if path is None else Path(path), folder=folder,
        pattern=_string(run.get("pattern", "*.jdx"), "run.pattern"),
        order=_choice(run.get("order", "name"), "run.order", ORDERS),
        time=_time_section(_table(raw.get("time"), "time")),
        integration=_integration_section(_table(raw.get("integration"), "integration")),
        quantify=_quantify_section(_table(raw.get("quantify"), "quantify"), signals),
        alignment=_alignment_section(_table(raw.get("alignment"), "alignment")),
        signals=signals, sections=MappingProxyType(dict(sections)),
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
        return run_config_from_dict(raw, path)
    except ConfigError as error:
        if error.source is None:
            raise ConfigError(error.key, error.problem, error.hint, source=path) from None
        raise
