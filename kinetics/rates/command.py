"""The work behind ``kinetics fit``: table -> fit(s) -> one JSON-ready dict and a text report.

Kept out of :mod:`kinetics.cli` so the command stays a thin parser/printer and the same
call is usable from scripts and tests.
"""

from __future__ import annotations

import numpy as np

from kinetics.errors import ConfigError
from kinetics.rates.compare import DEFAULT_CANDIDATES, compare_models
from kinetics.rates.fit import fit_model
from kinetics.rates.laws import SPECIES, get_model
from kinetics.rates.mechanism import mechanism_model, parse_mechanism
from kinetics.rates.table import read_concentration_table


#: Upper limit of ``--bootstrap``: beyond it a run takes hours and adds nothing to a 95 % interval.
MAX_BOOTSTRAP = 20000


def parse_assignments(items, option: str) -> dict:
    """``["k=0.5,c_final=100", "n=1"]`` -> ``{"k": 0.5, "c_final": 100.0, "n": 1.0}``."""
    out = {}
    for item in items or []:
        for piece in str(item).split(","):
            piece = piece.strip()
            if not piece:
                continue
            name, sep, text = piece.partition("=")
            try:
                if not sep or not name.strip():
                    raise ValueError
                value = float(text)
            except ValueError:
                raise ConfigError(option, f"cannot read {piece!r}", hint="write NAME=NUMBER, e.g. k=0.5") from None
            if not np.isfinite(value):
                raise ConfigError(option, f"{piece!r} is not a finite number", hint="write NAME=NUMBER, e.g. k=0.5")
            out[name.strip()] = value
    return out


def _species_for(model_name, columns, observed, species):
    if species:
        if len(species) != len(columns):
            raise ConfigError("--species", f"{len(species)} species for {len(columns)} columns",
                              hint="give one --species per --column")
        return tuple(species)
    if len(columns) == 1:
        return observed
    return SPECIES[model_name][: len(columns)]


def fit_command(table, time_column, columns, *, model=None, mechanism=None, observed="reactant",
                species=None, sigma_columns=None, compare=False, target_conversion=None,
                bootstrap=0, seed=None, start=None, fixed=None, initial=None, profile=True,
                absolute_sigma=False):
    """Run ``kinetics fit``; returns ``(payload, text)``.

    ``payload`` is the JSON object (params keyed by name, aicc, bic, n_points, converged,
    message, half_life_s / forecast where defined, comparison with ``compare``).
    """
    if (model is None) == (mechanism is None):
        raise ConfigError("--model/--mechanism", "give exactly one of them")
    if not 0 <= int(bootstrap) <= MAX_BOOTSTRAP:
        raise ConfigError("--bootstrap", f"{bootstrap} refits asked for", hint=f"give 0 to {MAX_BOOTSTRAP}; "
                          "1000-2000 is plenty for 95 % percentile intervals (Efron & Tibshirani 1993)")
    if seed is not None and int(seed) < 0:
        raise ConfigError("--seed", f"{seed} is negative", hint="give a seed of 0 or more")
    data = read_concentration_table(table, time_column, columns, sigma_columns)
    rng = np.random.default_rng(seed) if bootstrap else None
    options = dict(start=start or {}, fixed=fixed or {}, profile=profile, bootstrap=bootstrap,
                   rng=rng, absolute_sigma=absolute_sigma)
    if mechanism is not None:
        parsed = parse_mechanism(mechanism)
        observed_species = tuple(species) if species else tuple(columns)
        rate_model = mechanism_model(parsed, observed_species, initial=initial or {})
    else:
        rate_model = get_model(model, _species_for(model, columns, observed, species))
    result = fit_model(data, rate_model, **options)
    payload = result.to_dict()
    text = [result.report()]
    if mechanism is not None:
        payload["conservation"] = parsed.conservation_relations()
        text.append("conserved   " + "; ".join(payload["conservation"]))
    if target_conversion is not None:
        if not result.converged:
            payload["forecast"] = None
        else:
            forecast = result.time_to_conversion(float(target_conversion))
            payload["forecast"] = {"target_conversion": float(target_conversion),
                                   "time_s": forecast.to_dict()}
            if forecast.ci95 is not None:
                text.append(f"forecast    {float(target_conversion):.0%} conversion at {forecast.value:.5g} s "
                            f"[{forecast.ci95[0]:.5g}, {forecast.ci95[1]:.5g}] ({forecast.method})")
            else:
                text.append(f"forecast    {forecast.note or 'not available'}")
    if compare:
        if mechanism is not None:
            raise ConfigError("--compare", "compares rate laws; use it with --model")
        candidates = list(DEFAULT_CANDIDATES)
        if model not in candidates:
            candidates.append(model)
        comparison = compare_models(data, candidates, _species_for(model, columns, observed, species),
                                    start={}, fixed={}, absolute_sigma=absolute_sigma)
        payload["comparison"] = comparison.to_dict()
        text.append("")
        text.append(comparison.table.to_string(index=False, float_format=lambda v: f"{v:.4g}"))
        text.append(comparison.verdict)
    return payload, "\n".join(text)
