"""The campaign config: ``[campaign]`` (the rate law and how to run) and ``[[runs]]``.

Validated once, here, into frozen records; every problem raises
:class:`~kinetics.errors.ConfigError` naming the key (``campaign.orders.B``,
``runs[2].initial.A``) and refuses NaN and infinities.  Paths resolve against the config
file's folder and are kept absolute, so the runs can be loaded on any worker that sees the
same file system.

Keys
----
``[campaign]``
    ``name`` (default: the file name); ``reactant`` (the reference reactant A, ``r = -d[A]/dt``,
    required); ``catalyst`` (the species whose concentration is each run's catalyst loading);
    ``orders`` (a table ``species = "free"`` or a number; required unless ``mechanism``);
    ``stoichiometry`` (``species = coefficient``: -1 for a reactant consumed 1:1 with A,
    +1 for a product; the reactant is -1 whatever is written); ``inhibitors`` (``species =
    "free"`` or a binding constant in L/mol: the denominator ``1 + sum K_j [j]``);
    ``partner`` (the co-reactant of the same-excess and different-excess analyses; default
    the first species with an order and a negative coefficient); ``mechanism`` (a written
    mechanism, e.g. ``"A + cat -> I : k1; I + B -> P + cat : k2"``, fitted instead of the
    power law); ``temperature_law`` (``"arrhenius"`` or ``"eyring"``, used when the runs
    differ in temperature); ``reference_temperature_kelvin``; ``fit_initial`` (species whose
    initial concentration is fitted in every run); ``observed`` (species fitted; default every
    observed species of the law); ``exclude_flagged_runs`` (default true: the headline fit
    leaves out runs the same-excess check names as slower, the fit of all runs is kept
    beside it); ``scheduler`` (``"local"``: a local Dask cluster sized to the cores, the
    default; ``"none"``: in this process; ``"tcp://host:port"``: an existing Dask
    scheduler); ``workers`` (processes of the local cluster; default the cores).
``[[runs]]``
    ``label`` (default ``run N``); exactly one of ``table`` (a series table: CSV with
    ``time_s`` and ``<species>_concentration`` columns, optional
    ``<species>_concentration_sigma``, as ``kinetics run`` writes in ``series.csv``) and
    ``config`` (a run config, processed by the run engine; ``folder`` applies it to another
    folder of spectra); ``time_column`` (default ``time_s``), ``time_unit`` (s, min, h);
    ``species`` (the species columns to read; default the species of the law);
    ``temperature_c`` or ``temperature_kelvin``; ``catalyst_mol_per_l``; ``initial`` (a table
    ``species = mol/L``); ``factors`` (a table of other named numeric factors).
``[fit]`` (optional)
    ``bootstrap`` (residual-bootstrap refits of the global fit, reported beside the profile
    intervals as a cross-check; default 0: none; run as tasks on the campaign's scheduler);
    ``seed`` (root of the resamples' seeds, default 0: the same config gives the same intervals).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Mapping

from kinetics.config import (TIME_UNITS_S, _bool, _check_keys, _choice, _number, _path_text, _string, _table,
                             read_toml)
from kinetics.errors import ConfigError, InputFileError

SCHEDULER_LOCAL = "local"
SCHEDULER_NONE = "none"
TEMPERATURE_LAWS = ("arrhenius", "eyring")
FREE = "free"

_CAMPAIGN_KEYS = {"name", "reactant", "catalyst", "orders", "stoichiometry", "inhibitors", "partner", "mechanism",
                  "temperature_law", "reference_temperature_kelvin", "fit_initial", "observed",
                  "exclude_flagged_runs", "scheduler", "workers"}
_FIT_KEYS = {"bootstrap", "seed"}
#: More refits than this add nothing to a 95 % percentile interval and take hours.
MAX_BOOTSTRAP = 20000
_RUN_KEYS = {"label", "table", "config", "folder", "time_column", "time_unit", "species", "temperature_c",
             "temperature_kelvin", "catalyst_mol_per_l", "initial", "factors"}


@dataclass(frozen=True)
class CampaignRunConfig:
    """One ``[[runs]]`` table, validated.  Plain values only (it travels to Dask workers).

    ``initial`` and ``factors`` are tuples of ``(name, value)`` pairs (see :meth:`initial_dict`).
    """

    key: str
    label: str
    table: Path | None
    config: Path | None
    folder: Path | None
    time_column: str
    time_unit: str
    species: tuple | None
    temperature_kelvin: float | None
    temperature_warnings: tuple
    catalyst_mol_per_l: float | None
    initial: tuple
    factors: tuple

    @property
    def time_factor_s(self) -> float:
        return TIME_UNITS_S[self.time_unit]

    def initial_dict(self) -> dict:
        return dict(self.initial)

    def factors_dict(self) -> dict:
        return dict(self.factors)

    @property
    def source(self) -> str:
        return str(self.table if self.table is not None else self.config)


@dataclass(frozen=True)
class CampaignConfig:
    """A validated campaign config (keys in the module docstring).

    ``orders`` and ``inhibitors`` are tuples of ``(species, value or None)`` (None: fitted);
    ``stoichiometry`` of ``(species, coefficient)``.  :meth:`power_law` builds the law.
    """

    path: Path
    name: str
    reactant: str
    catalyst: str | None
    orders: tuple
    stoichiometry: tuple
    inhibitors: tuple
    partner: str | None
    mechanism: str | None
    temperature_law: str
    reference_temperature_kelvin: float | None
    fit_initial: tuple
    observed: tuple | None
    exclude_flagged_runs: bool
    scheduler: str
    workers: int | None
    runs: tuple
    bootstrap: int = 0
    seed: int = 0

    def power_law(self):
        """The :class:`~kinetics.campaign.powerlaw.PowerLaw` of the config (None with a mechanism)."""
        from kinetics.campaign.powerlaw import PowerLaw

        if self.mechanism is not None:
            return None
        try:
            return PowerLaw(dict(self.orders), dict(self.stoichiometry), reactant=self.reactant,
                            catalyst=self.catalyst or "cat", inhibitors=dict(self.inhibitors))
        except ConfigError as error:
            key = error.key.replace("coefficients", "stoichiometry", 1)
            raise ConfigError(f"campaign.{key}", error.problem, error.hint) from None

    def model_species(self) -> tuple:
        """Species whose concentration columns a run may carry (the law's or the mechanism's)."""
        if self.mechanism is not None:
            from kinetics.rates.mechanism import parse_mechanism

            return tuple(parse_mechanism(self.mechanism).species)
        names = [self.reactant] + [s for s, _ in self.orders] + [s for s, _ in self.stoichiometry]
        return tuple(dict.fromkeys(n for n in names if n != self.catalyst))


def is_campaign_config(raw: Mapping[str, Any]) -> bool:
    """True when a parsed config is a campaign (it has a top-level ``[campaign]`` table)."""
    return isinstance(raw, Mapping) and isinstance(raw.get("campaign"), Mapping)


def _finite(value, key: str, minimum: float | None = None) -> float:
    if isinstance(value, float) and not math.isfinite(value):
        raise ConfigError(key, f"{value!r} is not a finite number", hint="give a finite number")
    return _number(value, key, minimum)


def _species_name(value, key: str) -> str:
    name = _string(value, key).strip()
    if not all(c.isalnum() or c in "_-" for c in name):
        raise ConfigError(key, f"species name {name!r} has characters other than letters, digits, _ and -",
                          hint="use the name the series tables use before _concentration")
    return name


def _order_table(raw, key: str, allow_free: bool = True) -> tuple:
    out = []
    for name, value in _table(raw, key).items():
        item = f"{key}.{name}"
        _species_name(name, item)
        if value == FREE and allow_free:
            out.append((name, None))
        elif isinstance(value, str):
            raise ConfigError(item, f"{value!r} is neither \"free\" nor a number",
                              hint='write "free" to fit it, or a number to fix it')
        else:
            out.append((name, _finite(value, item)))
    return tuple(out)


def _species_list(raw, key: str) -> tuple:
    if not isinstance(raw, list) or not raw:
        raise ConfigError(key, f"expected a list of species names, got {raw!r}")
    return tuple(_species_name(v, f"{key}[{i}]") for i, v in enumerate(raw))


def _scheduler(value, key: str) -> str:
    text = _string(value, key).strip()
    if text in (SCHEDULER_LOCAL, SCHEDULER_NONE) or "://" in text:
        return text
    raise ConfigError(key, f"unknown scheduler {text!r}",
                      hint='use "local" (a local cluster), "none" (in this process) or an address "tcp://host:8786"')


def _workers(value, key: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < 1:
        raise ConfigError(key, f"expected a whole number of workers >= 1, got {value!r}")
    return int(value)


def _fit_table(raw) -> tuple[int, int]:
    """``[fit] bootstrap`` and ``seed`` (0 and 0 when the table is absent)."""
    section = _table(raw, "fit")
    _check_keys(section, _FIT_KEYS, "fit")
    bootstrap = section.get("bootstrap", 0)
    if isinstance(bootstrap, bool) or not isinstance(bootstrap, int) or not 0 <= bootstrap <= MAX_BOOTSTRAP:
        raise ConfigError("fit.bootstrap", f"expected a whole number of refits from 0 to {MAX_BOOTSTRAP}, "
                          f"got {bootstrap!r}", hint="200 to 1000 is common practice for 95 % percentile intervals")
    seed = section.get("seed", 0)
    if isinstance(seed, bool) or not isinstance(seed, int) or seed < 0:
        raise ConfigError("fit.seed", f"expected a whole number >= 0, got {seed!r}")
    return int(bootstrap), int(seed)


def run_folder_name(label: str) -> str:
    """The folder (under ``<out>/runs/``) of a run's ledger: its label in letters, digits and _."""
    return "".join(c if c.isalnum() else "_" for c in label).strip("_").lower() or "run"


def _campaign_run(raw, index: int, base: Path) -> CampaignRunConfig:
    from kinetics import temperature as temp

    key = f"runs[{index}]"
    if not isinstance(raw, Mapping):
        raise ConfigError(key, "each run must be a table ([[runs]])")
    _check_keys(raw, _RUN_KEYS, key)
    label = _string(raw.get("label", f"run {index + 1}"), f"{key}.label").strip()
    if ("table" in raw) == ("config" in raw):
        raise ConfigError(key, "needs exactly one of 'table' (a series table) and 'config' (a run config)")
    if "folder" in raw and "config" not in raw:
        raise ConfigError(f"{key}.folder", "a folder goes with 'config' (the run config applied to it)")
    table = config = folder = None
    if "table" in raw:
        table = (base / _path_text(raw["table"], f"{key}.table")).resolve()
    else:
        config = (base / _path_text(raw["config"], f"{key}.config")).resolve()
        if not config.is_file():
            raise ConfigError(f"{key}.config", f"run config {config} does not exist")
    if "folder" in raw:
        folder = (base / _path_text(raw["folder"], f"{key}.folder")).resolve()
        if not folder.is_dir():
            raise ConfigError(f"{key}.folder", f"folder {folder} does not exist")
    time_unit = _choice(raw.get("time_unit", "s"), f"{key}.time_unit", tuple(TIME_UNITS_S))
    temperature, warnings = None, ()
    if "temperature_c" in raw and "temperature_kelvin" in raw:
        raise ConfigError(key, "give one of temperature_c (°C) and temperature_kelvin (K), not both")
    for name, unit in (("temperature_c", "c"), ("temperature_kelvin", "k")):
        if name in raw:
            value = _finite(raw[name], f"{key}.{name}")
            try:
                kelvin, found = temp.to_kelvin([value], unit, [label])
            except ConfigError as error:
                raise ConfigError(f"{key}.{name}", error.problem, error.hint) from None
            temperature, warnings = float(kelvin[0]), tuple(found)
    catalyst = None
    if "catalyst_mol_per_l" in raw:
        catalyst = _finite(raw["catalyst_mol_per_l"], f"{key}.catalyst_mol_per_l", 0.0)
    initial = tuple((_species_name(name, f"{key}.initial.{name}"), _finite(value, f"{key}.initial.{name}", 0.0))
                    for name, value in _table(raw.get("initial"), f"{key}.initial").items())
    factors = tuple((_string(name, f"{key}.factors.{name}"), _finite(value, f"{key}.factors.{name}"))
                    for name, value in _table(raw.get("factors"), f"{key}.factors").items())
    species = _species_list(raw["species"], f"{key}.species") if "species" in raw else None
    return CampaignRunConfig(key, label, table, config, folder,
                             _string(raw.get("time_column", "time_s"), f"{key}.time_column"), time_unit, species,
                             temperature, warnings, catalyst, initial, factors)


def campaign_config_from_dict(raw: Mapping[str, Any], path: str | Path) -> CampaignConfig:
    """Validate a parsed campaign TOML document (paths resolve against ``path``'s folder)."""
    path = Path(path).resolve()
    if not is_campaign_config(raw):
        raise ConfigError("campaign", "missing the top-level [campaign] table",
                          hint="a campaign config starts with [campaign]")
    _check_keys(raw, {"campaign", "runs", "fit"}, "")
    bootstrap, seed = _fit_table(raw.get("fit"))
    section = raw["campaign"]
    _check_keys(section, _CAMPAIGN_KEYS, "campaign")
    if "reactant" not in section:
        raise ConfigError("campaign.reactant", "missing: the reference reactant A (rate = -d[A]/dt)")
    reactant = _species_name(section["reactant"], "campaign.reactant")
    catalyst = _species_name(section["catalyst"], "campaign.catalyst") if "catalyst" in section else None
    mechanism = None
    if "mechanism" in section:
        mechanism = _string(section["mechanism"], "campaign.mechanism")
        from kinetics.rates.mechanism import parse_mechanism

        try:
            parsed = parse_mechanism(mechanism)
        except ConfigError as error:
            raise ConfigError("campaign.mechanism", f"{error.problem}", error.hint) from None
        for name, what in ((reactant, "reactant"), (catalyst, "catalyst")):
            if name is not None and name not in parsed.species:
                raise ConfigError(f"campaign.{what}", f"{name!r} is not a species of the mechanism",
                                  hint="species: " + ", ".join(parsed.species))
    orders = _order_table(section.get("orders"), "campaign.orders")
    if mechanism is None and not orders:
        raise ConfigError("campaign.orders", "missing: the species of the rate law and their orders",
                          hint='e.g. orders = { A = "free", B = "free", cat = 1 }')
    stoichiometry = _order_table(section.get("stoichiometry"), "campaign.stoichiometry", allow_free=False)
    inhibitors = _order_table(section.get("inhibitors"), "campaign.inhibitors")
    for name, value in inhibitors:
        if value is not None and value < 0:
            raise ConfigError(f"campaign.inhibitors.{name}", f"binding constant {value:g} L/mol is negative")
    coefficients = dict(stoichiometry)
    partner = None
    if "partner" in section:
        partner = _species_name(section["partner"], "campaign.partner")
    else:
        partner = next((s for s, _ in orders if s not in (reactant, catalyst) and coefficients.get(s, 0) < 0), None)
    law_keys = {"temperature_law": _choice(section.get("temperature_law", "arrhenius"), "campaign.temperature_law",
                                           TEMPERATURE_LAWS)}
    t_ref = section.get("reference_temperature_kelvin")
    scheduler = _scheduler(section.get("scheduler", SCHEDULER_LOCAL), "campaign.scheduler")
    workers = _workers(section["workers"], "campaign.workers") if "workers" in section else None
    runs_raw = raw.get("runs")
    if not isinstance(runs_raw, list) or len(runs_raw) < 2:
        raise ConfigError("runs", f"{len(runs_raw) if isinstance(runs_raw, list) else 0} run(s) listed; a campaign "
                          "needs at least 2 ([[runs]] tables)")
    runs = tuple(_campaign_run(run, i, path.parent) for i, run in enumerate(runs_raw))
    labels = [run.label for run in runs]
    for i, label in enumerate(labels):
        if label in labels[:i]:
            raise ConfigError(f"runs[{i}].label", f"two runs are labelled {label!r}", hint="labels must be unique")
    folders = {}
    for run in runs:
        if run.config is None:
            continue
        slug = run_folder_name(run.label)
        if slug in folders:
            raise ConfigError(f"{run.key}.label", f"runs {folders[slug]!r} and {run.label!r} would share the ledger "
                              f"folder runs/{slug}", hint="give labels that differ in letters or digits")
        folders[slug] = run.label
    if catalyst is not None and any(name == catalyst for name, _ in orders):
        for run in runs:
            if run.catalyst_mol_per_l is None:
                raise ConfigError(f"{run.key}.catalyst_mol_per_l", f"the rate law has an order in the catalyst "
                                  f"{catalyst!r} but this run gives no loading")
    config = CampaignConfig(
        path=path, name=_string(section.get("name", path.stem), "campaign.name"), reactant=reactant,
        catalyst=catalyst, orders=orders, stoichiometry=stoichiometry, inhibitors=inhibitors, partner=partner,
        mechanism=mechanism, temperature_law=law_keys["temperature_law"],
        reference_temperature_kelvin=None if t_ref is None else _finite(t_ref, "campaign.reference_temperature_kelvin",
                                                                        0.0),
        fit_initial=_species_list(section["fit_initial"], "campaign.fit_initial") if "fit_initial" in section else (),
        observed=_species_list(section["observed"], "campaign.observed") if "observed" in section else None,
        exclude_flagged_runs=_bool(section.get("exclude_flagged_runs", True), "campaign.exclude_flagged_runs"),
        scheduler=scheduler, workers=workers, runs=runs, bootstrap=bootstrap, seed=seed)
    config.power_law()  # the law's own checks (a species with an order but no coefficient ...)
    return config


def is_campaign_file(path: str | Path) -> bool:
    """True when the TOML file is a campaign config (a top-level ``[campaign]`` table)."""
    return is_campaign_config(read_toml(path))


def load_campaign_config(path: str | Path) -> CampaignConfig:
    """Read and validate a campaign TOML file (errors name the file)."""
    path = Path(path)
    raw = read_toml(path)
    try:
        return campaign_config_from_dict(raw, path)
    except ConfigError as error:
        if error.source is None:
            raise ConfigError(error.key, error.problem, error.hint, source=path) from None
        raise


__all__ = ["CampaignConfig", "CampaignRunConfig", "campaign_config_from_dict", "is_campaign_config",
           "is_campaign_file", "load_campaign_config"]
