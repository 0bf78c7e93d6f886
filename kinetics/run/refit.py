"""The rate-law refit of a run's series table, warm-started from the previous fit.

A :class:`Refitter` turns the series table into a :class:`FitOutcome` (what the live views,
``fit.json`` and the stop conditions need).  :class:`RatesRefitter` is the project's: it
fits :mod:`kinetics.rates.fit` (a rate law or a mechanism) and, during a live run, starts
from the previous turn's parameters; the final fit of every run is from scratch, so a live
run and a batch run over the same files end with the same fit.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, Protocol

import pandas as pd

from kinetics.config import FitConfig
from kinetics.errors import KineticsError


@dataclass(frozen=True)
class FitOutcome:
    """One (re)fit of the series, as the live loop and the views need it.

    Attributes
    ----------
    succeeded : bool
        Whether the fit converged; ``message`` says why not.
    fit : dict
        The fit as JSON (``FitResult.to_dict()``), written to ``fit.json``.
    k : dict or None
        The rate constant as a parameter dict (value, stderr, ci95, unit).
    conversion : dict or None
        Fitted conversion at the latest spectrum, as a parameter dict (unit "").
    time_to_target_s : dict or None
        Forecast time from reaction start to the target conversion.
    curve : dict or None
        ``{"time_s": [...], signal: [...]}`` of the fitted model for the plot.
    state : object
        What a warm start needs (the FitResult); never serialised.
    processing : dict or None
        The final fit's processing uncertainty (:mod:`kinetics.run.uncertainty`): the
        statistical, systematic and combined parts, or why it was not assessed.  None on
        live turns.
    report_text : str or None
        Its text table for the report.
    """

    succeeded: bool
    message: str
    fit: dict
    k: dict | None = None
    conversion: dict | None = None
    time_to_target_s: dict | None = None
    curve: dict | None = None
    state: Any = None
    processing: dict | None = None
    report_text: str | None = None

    @property
    def warnings(self) -> list[str]:
        """The fit's warnings in words (guardrails, table findings, processing choices)."""
        return list(self.fit.get("warnings") or ())


class Refitter(Protocol):
    """(series table, previous outcome or None for a fit from scratch) -> FitOutcome.

    A refitter may take ``checks=False`` (skip costly checks on a live turn between two
    refreshes); the engine passes it only to refitters that accept it.
    """

    def __call__(self, table: pd.DataFrame, previous: FitOutcome | None) -> FitOutcome: ...


@dataclass(frozen=True)
class RatesRefitter:
    """Fits the series table with :mod:`kinetics.rates.fit`; warm-starts from the last fit.

    Attributes
    ----------
    columns : tuple of str
        Series-table columns fitted (concentrations, mol/L).  One column for a rate law;
        one per observed species for a mechanism.
    model : str
        Rate law name (:data:`kinetics.rates.laws.MODELS`), default ``"first"``.
    observed : str
        ``"reactant"`` or ``"product"``: what a single law column holds.
    target_conversion : float or None
        For the forecast of the time to the target (rate laws only).
    sigma_suffix : str
        ``<column><sigma_suffix>`` holds the standard uncertainties (weights) when present.
    mechanism : str or None
        Reaction text (:mod:`kinetics.rates.mechanism`); replaces ``model`` when given.
    species : tuple of str
        The mechanism species the ``columns`` measure, in the same order.
    initial : tuple of (species, mol/L)
        Known initial concentrations of a mechanism (the others observed are fitted).
    """

    columns: tuple[str, ...]
    model: str = "first"
    observed: str = "reactant"
    target_conversion: float | None = None
    sigma_suffix: str = "_stderr"
    mechanism: str | None = None
    species: tuple[str, ...] = ()
    initial: tuple[tuple[str, float], ...] = ()

    def __post_init__(self) -> None:
        if isinstance(self.columns, str):  # one law column may be given bare
            object.__setattr__(self, "columns", (self.columns,))

    @property
    def column(self) -> str:
        return self.columns[0]

    def _data(self, table: pd.DataFrame):
        import numpy as np

        from kinetics.rates.table import from_arrays

        for column in self.columns:
            if column not in table:
                raise KineticsError(f"the series table has no column {column!r} to fit")
        rows = table[["time_s", *self.columns]].dropna()
        sigma = None
        sigma_columns = [f"{c}{self.sigma_suffix}" for c in self.columns]
        if all(c in table for c in sigma_columns):
            candidate = table.loc[rows.index, sigma_columns].to_numpy(float).T
            sigma = candidate if np.all(np.isfinite(candidate) & (candidate > 0)) else None
        values = rows[list(self.columns)].to_numpy(float).T
        names = list(self.species) if self.mechanism else list(self.columns)
        labels = table.loc[rows.index, "file"].astype(str).tolist() if "file" in table else None
        return rows, from_arrays(rows["time_s"].to_numpy(float), values, sigma=sigma, columns=names,
                                 row_labels=labels, notes=table_notes(table, rows.index, labels))

    def fit_table(self, table: pd.DataFrame):
        """The series table's fit from scratch (a FitResult), as the final fit makes it."""
        return self.fit_from_scratch(self._data(table)[1])

    def fit_value(self, previous, table: pd.DataFrame) -> float:
        """The rate constant of ``table``'s fit started at ``previous``'s optimum, value
        only (no interval, no guardrail checks): for re-fits of slightly changed tables
        (the processing variants), whose intervals nobody reads."""
        from kinetics.rates.fit import fit_model

        opts = previous.options
        start = {name: previous.values[name] for name in previous.varying}
        result = fit_model(self._data(table)[1], previous.model, start=start, fixed=opts.fixed, bounds=opts.bounds,
                           profile=False, bootstrap=0, absolute_sigma=opts.absolute_sigma, tol=opts.tol,
                           max_nfev=opts.max_nfev, warm=True, weighting=opts.weighting, guardrails=False)
        if not result.converged:
            raise KineticsError(f"the fit did not converge: {result.message}")
        name = next(n for n in result.varying if n.startswith("k"))
        return float(result.values[name])

    def fit_from_scratch(self, data):
        from kinetics.rates.fit import fit_law, fit_mechanism

        if self.mechanism:
            return fit_mechanism(data, self.mechanism, observed=tuple(self.species),
                                 initial=dict(self.initial) or None)
        return fit_law(data, self.model, observed=self.observed)

    def warm_fit(self, previous, data, checks: bool):
        """A fit from ``previous``'s optimum (its options carried over); the guardrail
        checks run only when ``checks`` (their cost grows with the points)."""
        from kinetics.rates.fit import fit_model

        opts = previous.options
        start = {name: previous.values[name] for name in previous.varying}
        return fit_model(data, previous.model, start=start, fixed=opts.fixed, bounds=opts.bounds,
                         profile=opts.profile, bootstrap=0, absolute_sigma=opts.absolute_sigma, tol=opts.tol,
                         max_nfev=opts.max_nfev, warm=True, weighting=opts.weighting, guardrails=checks)

    def __call__(self, table: pd.DataFrame, previous: FitOutcome | None, checks: bool = True) -> FitOutcome:
        """Fit the table: from ``previous`` when given (a live turn), else from scratch.

        ``checks`` False skips the guardrail checks of a warm fit (a live turn between two
        refreshes); the previous checked fit's findings are carried into the JSON, marked
        with the number of points they were found on.
        """
        import numpy as np

        rows, data = self._data(table)
        if len(rows) < 3:
            return FitOutcome(False, f"{len(rows)} spectra so far: a fit needs at least 3",
                              {"succeeded": False, "n_points": int(len(rows))})
        carried = None
        if previous is not None and previous.state is not None and previous.state.model is not None:
            result = self.warm_fit(previous.state, data, checks)
            if not checks:
                carried = previous.fit.get("guardrails")
                checked_n = previous.fit.get("guardrails_n_points", previous.fit.get("n_points"))
        else:
            result = self.fit_from_scratch(data)
        fit = result.to_dict()
        if carried is not None:
            fit["guardrails"] = carried
            fit["guardrails_n_points"] = checked_n
        k_name = next((name for name in result.varying if name.startswith("k")), None)
        k = None if k_name is None else result.param(k_name).to_dict()
        conversion = forecast = None
        curve_of = (result.model.extra.get("conversion") if result.model is not None else None)
        last_s = float(data.time_s[-1])
        if curve_of is not None:
            conversion = result.derived(
                "conversion", lambda v: float(np.asarray(curve_of(np.array([last_s]), v))[0]), "",
                positive=False).to_dict()
            if self.target_conversion is not None:
                forecast = result.time_to_conversion(self.target_conversion).to_dict()
        grid = np.linspace(float(data.time_s[0]), last_s, 100)
        predicted = np.atleast_2d(np.asarray(result.predict(grid)))
        curve = {"time_s": grid.tolist(), self.column: predicted[0].tolist()}
        return FitOutcome(bool(result.converged), result.message, fit, k=k, conversion=conversion,
                          time_to_target_s=forecast, curve=curve, state=result)


def table_notes(table: pd.DataFrame, index=None, labels=None) -> list:
    """Findings about a series table to carry into its fit's warnings (Guardrails).

    The mass balance (``mass_balance_flag``, :func:`kinetics.rates.diagnostics.mass_balance_note`
    naming the files) and the table's own warnings (``table.attrs['warnings']``: per-spectrum
    findings summarised once per run, saturation, series-wide fit problems).
    """
    import numpy as np

    from kinetics.rates import diagnostics as dg

    index = table.index if index is None else index
    notes = []
    if "mass_balance_flag" in table and len(index):
        flags = table.loc[index, "mass_balance_flag"].to_numpy(bool)
        labels = labels if labels is not None else [str(i) for i in index]
        ratio = None
        if "mass_balance_deviation_sigma" in table:
            with np.errstate(divide="ignore", invalid="ignore"):
                ratio = (table.loc[index, "mass_balance_deviation"].to_numpy(float)
                         / table.loc[index, "mass_balance_deviation_sigma"].to_numpy(float))[flags]
        notes += dg.mass_balance_note(flags, labels, ratio, table.attrs.get("mass_balance_sigmas"))
    notes += dg.from_messages(table.attrs.get("warnings", ()), "spectra")
    return notes


def refitter_from_config(fit: FitConfig, target_conversion: float | None = None) -> RatesRefitter:
    """The validated ``[fit]`` record of a run config as a :class:`RatesRefitter`."""
    if fit.mechanism:
        return RatesRefitter(fit.columns, mechanism=fit.mechanism, species=fit.observed_species,
                             initial=fit.initial_mol_per_l, target_conversion=target_conversion,
                             sigma_suffix="_sigma")
    return RatesRefitter(fit.columns, fit.model, fit.observed, target_conversion, sigma_suffix="_sigma")


__all__ = ["FitOutcome", "RatesRefitter", "Refitter", "refitter_from_config", "table_notes"]
