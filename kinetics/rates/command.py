"""The work behind ``kinetics fit``: table -> fit(s) -> one JSON-ready dict and a text report.

Kept out of :mod:`kinetics.cli` so the command stays a thin parser/printer and the same
call is usable from scripts and tests.
"""

from __future__ import annotations

import numpy as np

from kinetics.errors import ConfigError, KineticsError
from kinetics.rates import diagnostics as dg
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
                absolute_sigma=False, weighting="none", time_unit=None, concentration_unit=None,
                progress=None):
    """Run ``kinetics fit``; returns ``(payload, text)``.

    ``payload`` is the JSON object (params keyed by name, aicc, bic, n_points, converged,
    message, half_life_s / forecast where defined, comparison with ``compare``).  Its
    ``warnings`` (plain language) and ``guardrails`` (``code``, ``severity``, ``message``,
    ``details``) hold every guardrail of :mod:`kinetics.rates.diagnostics`, the forecast's
    included.  Times are converted to s and concentrations to mol/L on reading
    (``time_unit``, ``concentration_unit``), so every unit in the output is SI.
    """
    if (model is None) == (mechanism is None):
        raise ConfigError("--model/--mechanism", "give exactly one of them")
    if not 0 <= int(bootstrap) <= MAX_BOOTSTRAP:
        raise ConfigError("--bootstrap", f"{bootstrap} refits asked for", hint=f"give 0 to {MAX_BOOTSTRAP}; "
                          "1000-2000 is plenty for 95 % percentile intervals (Efron & Tibshirani 1993)")
    if seed is not None and int(seed) < 0:
        raise ConfigError("--seed", f"{seed} is negative", hint="give a seed of 0 or more")
    if weighting not in ("none", "relative"):
        raise ConfigError("--weighting", f"unknown weighting {weighting!r}", hint="use none or relative")
    if weighting == "relative" and sigma_columns:
        raise ConfigError("--weighting", "relative weighting and --sigma-column both set the weights",
                          hint="give one of them")
    data = read_concentration_table(table, time_column, columns, sigma_columns, time_unit=time_unit,
                                    concentration_unit=concentration_unit)
    rng = np.random.default_rng(seed) if bootstrap else None
    options = dict(start=start or {}, fixed=fixed or {}, profile=profile, bootstrap=bootstrap,
                   rng=rng, absolute_sigma=absolute_sigma, weighting=weighting, progress=progress)
    if mechanism is not None:
        parsed = parse_mechanism(mechanism)
        observed_species = tuple(species) if species else tuple(columns)
        rate_model = mechanism_model(parsed, observed_species, initial=initial or {})
    else:
        rate_model = get_model(model, _species_for(model, columns, observed, species))
    result = fit_model(data, rate_model, **options)
    payload = result.to_dict()
    payload["input_units"] = {"time": time_unit or "s", "concentration": concentration_unit or "mol/L",
                              "converted_to": {"time": "s", "concentration": "mol L^-1"}}
    text = [result.report()]
    if time_unit not in (None, "s") or concentration_unit not in (None, "mol/L"):
        text.append(f"units       read as {time_unit or 's'} and {concentration_unit or 'mol/L'}; "
                    "every value above is in s and mol/L")
    extra = []  # guardrails found after the fit (forecast)
    comparison = None
    if mechanism is not None:
        payload["conservation"] = parsed.conservation_relations()
        text.append("conserved   " + "; ".join(payload["conservation"]))
    if target_conversion is not None:
        if not result.converged:
            payload["forecast"] = None
        else:
            target = float(target_conversion)
            forecast = result.time_to_conversion(target)
            payload["forecast"] = {"target_conversion": target, "time_s": forecast.to_dict()}
            if forecast.ci95 is not None:
                text.append(f"forecast    {target:.0%} conversion at {forecast.value:.5g} s "
                            f"[{forecast.ci95[0]:.5g}, {forecast.ci95[1]:.5g}] ({forecast.method})")
            else:
                text.append(f"forecast    {forecast.note or 'not available'}")
            caveat = dg.forecast_caveat(result, forecast, target)
            extra += caveat
            if caveat and mechanism is None and model in DEFAULT_CANDIDATES and len(columns) == 1:
                try:
                    comparison = _comparison(data, model, columns, observed, species, absolute_sigma, weighting)
                except KineticsError:
                    comparison = None  # no candidate could be fitted: the caveat stands alone
                averaged = None if comparison is None else dg.model_averaged_forecast(comparison, target, model)
                if averaged is not None:
                    payload["forecast"]["model_averaged_time_s"] = averaged.to_dict()
                    if averaged.uncertain:
                        text.append(f"            averaged over laws within delta AICc 4: {averaged.value:.5g} s "
                                    f"[{averaged.ci95[0]:.5g}, {averaged.ci95[1]:.5g}]")
                extra += dg.averaged_forecast_guardrail(averaged, target, model)
    if compare:
        if mechanism is not None:
            raise ConfigError("--compare", "compares rate laws; use it with --model")
        if comparison is None:
            comparison = _comparison(data, model, columns, observed, species, absolute_sigma, weighting)
        payload["comparison"] = comparison.to_dict()
        text.append("")
        text.append(comparison.table.to_string(index=False, float_format=lambda v: f"{v:.4g}"))
        text.append(comparison.verdict)
    for g in extra:
        payload["warnings"].append(g.message)
        payload["warning_codes"].append(g.code)
        payload["guardrails"].append(g.to_dict())
        text.append(f"warning     {g.message}  [{g.code}]")
    return payload, "\n".join(text)


def _comparison(data, model, columns, observed, species, absolute_sigma, weighting):
    candidates = list(DEFAULT_CANDIDATES)
    if model not in candidates:
        candidates.append(model)
    return compare_models(data, candidates, _species_for(model, columns, observed, species),
                          start={}, fixed={}, absolute_sigma=absolute_sigma, weighting=weighting)
