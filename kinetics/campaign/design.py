"""One run of a campaign: its measured courses and its design factors, validated once.

A campaign is several runs of the same reaction that differ in their design factors: the
initial concentration of each species, the catalyst loading, the temperature, or any named
factor (a stirring rate, a water content).  :class:`CampaignRun` holds one run;
:func:`check_campaign` checks a set of them together (unique labels, shared species).

Validation happens here, where data enter; the analysis modules trust the records.
Problems the user can fix raise :class:`~kinetics.errors.ConfigError` (a design factor,
named ``runs.<label>.<factor>``) or :class:`~kinetics.errors.InputFileError` (the measured
arrays, naming the run and its source).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from types import MappingProxyType
from typing import Mapping, Sequence

import numpy as np

from kinetics.errors import ConfigError, InputFileError

#: Temperatures below this are almost surely degrees Celsius typed as kelvin.
_COLDEST_PLAUSIBLE_KELVIN = 150.0
_HOTTEST_PLAUSIBLE_KELVIN = 1000.0


def _frozen_array(values) -> np.ndarray:
    array = np.array(values, dtype=float)
    array.setflags(write=False)
    return array


@dataclass(frozen=True, eq=False)
class CampaignRun:
    """One run of a campaign.

    Attributes
    ----------
    label : str
        Unique name of the run in its campaign.
    time_s : ndarray (n,)
        Seconds from the start of the reaction (mixing), strictly increasing.
    observed_mol_per_l : Mapping species -> ndarray (n,)
        Measured concentrations of each observed species, mol L^-1.
    sigma_mol_per_l : Mapping species -> ndarray (n,)
        Standard deviations of the observed concentrations; a species missing here is
        weighted equally (its noise is estimated from the fit).
    initial_mol_per_l : Mapping species -> float
        Initial concentration of each species (design factor), mol L^-1.  A species not
        listed here but observed has its initial concentration fitted.
    catalyst_mol_per_l : float or None
        Catalyst loading as a concentration, mol L^-1 (constant through the run unless the
        catalyst deactivates, which the methods test for).
    temperature_kelvin : float or None
        Temperature of the run, K.
    factors : Mapping name -> float
        Any other named design factor (numbers only).
    source : str or None
        Where the data came from (a folder, a table), for messages.
    """

    label: str
    time_s: np.ndarray
    observed_mol_per_l: Mapping
    sigma_mol_per_l: Mapping = field(default_factory=dict)
    initial_mol_per_l: Mapping = field(default_factory=dict)
    catalyst_mol_per_l: float | None = None
    temperature_kelvin: float | None = None
    factors: Mapping = field(default_factory=dict)
    source: str | None = None

    def __post_init__(self):
        label = self.label
        if not isinstance(label, str) or not label.strip():
            raise ConfigError("runs.label", f"a run has the label {label!r}",
                              hint="give every run a non-empty name")
        where = self.source
        time = _frozen_array(self.time_s)
        if time.ndim != 1 or time.size < 3:
            raise InputFileError(where, f"run {label!r}: needs at least 3 time points, got {time.size}",
                                 hint="a run needs a concentration course, not a single point")
        if not np.all(np.isfinite(time)):
            raise InputFileError(where, f"run {label!r}: the time column has a missing or non-finite value "
                                 f"at row {int(np.flatnonzero(~np.isfinite(time))[0]) + 1}",
                                 hint="remove the row or fill in its time")
        steps = np.diff(time)
        if np.any(steps <= 0):
            row = int(np.flatnonzero(steps <= 0)[0]) + 2
            raise InputFileError(where, f"run {label!r}: times must increase strictly; row {row} "
                                 f"({time[row - 1]:.6g} s) does not come after row {row - 1}",
                                 hint="sort the rows by time and merge duplicates")
        if time[0] < 0:
            raise InputFileError(where, f"run {label!r}: the first time is {time[0]:.6g} s, before the start",
                                 hint="count time from mixing (t = 0 at the start of the reaction)")
        object.__setattr__(self, "time_s", time)
        if not self.observed_mol_per_l:
            raise InputFileError(where, f"run {label!r}: no observed species",
                                 hint="give at least one concentration course")
        observed = {}
        for species, values in self.observed_mol_per_l.items():
            array = _frozen_array(values)
            if array.shape != time.shape:
                raise InputFileError(where, f"run {label!r}: species {species!r} has {array.size} values for "
                                     f"{time.size} times", hint="give one concentration per time")
            if not np.all(np.isfinite(array)):
                row = int(np.flatnonzero(~np.isfinite(array))[0]) + 1
                raise InputFileError(where, f"run {label!r}: species {species!r} has a missing or non-finite "
                                     f"concentration at row {row}", hint="remove the row or fill it in")
            observed[str(species)] = array
        object.__setattr__(self, "observed_mol_per_l", MappingProxyType(observed))
        sigmas = {}
        for species, values in (self.sigma_mol_per_l or {}).items():
            if species not in observed:
                raise InputFileError(where, f"run {label!r}: sigma given for {species!r}, which is not observed",
                                     hint="observed: " + ", ".join(observed))
            array = _frozen_array(np.broadcast_to(np.asarray(values, dtype=float), time.shape))
            if not np.all(np.isfinite(array) & (array > 0)):
                raise InputFileError(where, f"run {label!r}: the sigma of {species!r} must be finite and above 0",
                                     hint="leave the sigma out to weight the points equally")
            sigmas[str(species)] = array
        object.__setattr__(self, "sigma_mol_per_l", MappingProxyType(sigmas))
        initial = {}
        for species, value in (self.initial_mol_per_l or {}).items():
            initial[str(species)] = _concentration(value, f"runs.{label}.initial.{species}")
        object.__setattr__(self, "initial_mol_per_l", MappingProxyType(initial))
        if self.catalyst_mol_per_l is not None:
            catalyst = _concentration(self.catalyst_mol_per_l, f"runs.{label}.catalyst_mol_per_l")
            object.__setattr__(self, "catalyst_mol_per_l", catalyst)
        if self.temperature_kelvin is not None:
            key = f"runs.{label}.temperature_kelvin"
            temperature = _number(self.temperature_kelvin, key)
            if not (_COLDEST_PLAUSIBLE_KELVIN <= temperature <= _HOTTEST_PLAUSIBLE_KELVIN):
                hint = (f"did you mean {temperature + 273.15:.2f} K ({temperature:g} degC)?"
                        if -100 < temperature < _COLDEST_PLAUSIBLE_KELVIN else "give the temperature in kelvin")
                raise ConfigError(key, f"{temperature:g} K is not a plausible reaction temperature", hint=hint)
            object.__setattr__(self, "temperature_kelvin", temperature)
        factors = {}
        for name, value in (self.factors or {}).items():
            factors[str(name)] = _number(value, f"runs.{label}.factors.{name}")
        object.__setattr__(self, "factors", MappingProxyType(factors))

    # ------------------------------------------------------------ reading
    @property
    def n_points(self) -> int:
        return int(self.time_s.size)

    def sigma(self, species: str):
        """Standard deviations of ``species`` or None (equal weights)."""
        return self.sigma_mol_per_l.get(species)

    def initial(self, species: str, default=None):
        """Design initial concentration of ``species`` (``default`` when not given)."""
        return self.initial_mol_per_l.get(species, default)

    def factor(self, name: str) -> float | None:
        """Any design factor by name: a species' initial concentration, ``catalyst``,
        ``temperature_kelvin`` or a named factor."""
        if name in ("catalyst", "catalyst_mol_per_l"):
            return self.catalyst_mol_per_l
        if name == "temperature_kelvin":
            return self.temperature_kelvin
        if name in self.initial_mol_per_l:
            return self.initial_mol_per_l[name]
        return self.factors.get(name)


def _number(value, key) -> float:
    try:
        number = float(value)
    except (TypeError, ValueError):
        raise ConfigError(key, f"{value!r} is not a number") from None
    if not math.isfinite(number):
        raise ConfigError(key, f"{value!r} is not a finite number")
    return number


def _concentration(value, key) -> float:
    number = _number(value, key)
    if number < 0:
        raise ConfigError(key, f"a concentration of {number:g} mol/L is negative",
                          hint="give 0 mol/L or more")
    return number


def check_campaign(runs: Sequence[CampaignRun], min_runs: int = 1) -> tuple:
    """Check runs meant to be analysed together; returns them as a tuple.

    Labels must be unique; at least ``min_runs`` runs.
    """
    runs = tuple(runs)
    if len(runs) < min_runs:
        raise ConfigError("runs", f"{len(runs)} run(s) given, this analysis needs at least {min_runs}")
    seen = set()
    for run in runs:
        if not isinstance(run, CampaignRun):
            raise ConfigError("runs", f"expected CampaignRun records, got {type(run).__name__}")
        if run.label in seen:
            raise ConfigError(f"runs.{run.label}", "two runs have this label", hint="labels must be unique")
        seen.add(run.label)
    return runs


def varied_factors(runs: Sequence[CampaignRun], names: Sequence[str], rel_tol: float = 1e-6) -> dict:
    """For each factor name, whether it differs between runs (``{name: bool}``)."""
    varied = {}
    for name in names:
        values = [run.factor(name) for run in runs]
        values = [v for v in values if v is not None]
        if len(values) < 2:
            varied[name] = False
            continue
        top = max(abs(v) for v in values) or 1.0
        varied[name] = (max(values) - min(values)) > rel_tol * top
    return varied
