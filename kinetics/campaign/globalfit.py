"""Global fits across the runs of a campaign: one rate law, shared constants, every run at once.

Two kinds of model:

* a power rate law ``r = k [A]^a [B]^b [cat]^c`` (:class:`~kinetics.campaign.powerlaw.PowerLaw`,
  orders free or fixed, stoichiometric coefficients for how B is consumed with A, the catalyst
  constant), integrated as in :mod:`kinetics.campaign.powerlaw`;
* a written mechanism (:func:`kinetics.rates.mechanism.parse_mechanism`, e.g.
  ``"A + cat -> I : k1; I + B -> P + cat : k2"``), integrated by
  :meth:`~kinetics.rates.mechanism.Mechanism.simulate` (``solve_ivp``).

Shared parameters: the rate constant(s) and the orders.  Per run: the initial concentrations,
known (the run's design factors) or fitted (``fit_initial``; named ``c0_<species>@<run>``).
When the runs differ in temperature every rate constant follows Arrhenius in the
reference-temperature form ``k(T) = k_ref exp(-(Ea/R)(1/T - 1/T_ref))`` (R from
``scipy.constants``; ``T_ref`` defaults to the harmonic mean of the runs' temperatures, which
nearly decorrelates ``k_ref`` and ``Ea``), or, for the power law on request, Eyring:
``k(T) = (k_B T/h) exp(dS/R) exp(-dH/(R T))`` (transmission coefficient 1, standard state
1 mol L^-1 for a k of overall order n != 1; k_B, h from ``scipy.constants``).

Statistics: weighted least squares over the pooled courses (``(y - f)/sigma``, sigma from
the runs when every course used has one, else equal weights with the noise estimated from
the fit).  Intervals are profile-likelihood 95 % intervals (:mod:`kinetics.rates.intervals`:
the F-based threshold ``S_min (1 + t^2/dof)``, or ``S_min + chi2_1`` with ``absolute_sigma``).
A residual bootstrap (:func:`resample_runs`, :func:`percentile_intervals`; the refits run as
tasks in :mod:`kinetics.campaign.runner`) gives percentile intervals beside them as a cross-check.
Model choice by AICc with Akaike weights (as :mod:`kinetics.rates.compare`), and the single-run
guardrails of :mod:`kinetics.rates.diagnostics` on the pooled residuals, plus a per-run
runs test that names a run the shared law does not describe.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field
from typing import Callable, Mapping, Sequence

import numpy as np
import pandas as pd
from scipy import constants

from kinetics.campaign.design import CampaignRun, check_campaign, varied_factors
from kinetics.campaign.powerlaw import PowerLaw, course
from kinetics.errors import ConfigError, FitError, KineticsError
from kinetics.rates import diagnostics as dg
from kinetics.rates import intervals as iv
from kinetics.rates.fit import ParameterEstimate
from kinetics.rates.laws import CONC_UNIT

log = logging.getLogger(__name__)

GAS_CONSTANT = constants.R  # J mol^-1 K^-1
_KB_OVER_H = constants.k / constants.h  # s^-1 K^-1
ORDER_BOUNDS = (-2.0, 5.0)
_SAME_TEMPERATURE_KELVIN = 0.05


@dataclass(frozen=True)
class _Param:
    name: str
    start: float
    lower: float
    upper: float
    unit: str
    profile: bool = True


@dataclass(frozen=True, eq=False)
class GlobalFitResult:
    """A model fitted to every run at once.

    Attributes
    ----------
    description : str
        The model in words (``rate = k [A]^1 [B]^n_B ...`` or the mechanism text).
    parameters : tuple of ParameterEstimate
        Shared constants, orders and per-run initial concentrations (``c0_<species>@<run>``).
    chi_square, dof, n_points, aicc
        Pooled weighted sum of squares, degrees of freedom, points, AICc.
    converged : bool
    message : str
    blocks : tuple of (run label, species)
        The courses fitted, in the order of ``fitted`` and ``residual``.
    fitted, residual : Mapping (label, species) -> ndarray
        Model values and weighted residuals ``(y - f)/sigma`` of each course.
    guardrails : tuple of Guardrail
    curve : callable ``(label, time_s) -> {species: ndarray}``
        The fitted model of one run on any time grid (for figures).
    temperature_reference_kelvin : float or None
        ``T_ref`` when the runs differ in temperature.
    """

    description: str
    parameters: tuple
    chi_square: float
    dof: int
    n_points: int
    aicc: float
    converged: bool
    message: str
    blocks: tuple
    fitted: Mapping
    residual: Mapping
    guardrails: tuple
    curve: Callable = field(repr=False)
    temperature_reference_kelvin: float | None = None
    weighted: bool = False

    def param(self, name: str) -> ParameterEstimate:
        for estimate in self.parameters:
            if estimate.name == name:
                return estimate
        raise KeyError(f"no parameter {name!r}; have " + ", ".join(p.name for p in self.parameters))

    @property
    def values(self) -> dict:
        return {p.name: p.value for p in self.parameters}

    @property
    def warnings(self) -> tuple:
        return tuple(g.message for g in self.guardrails)

    def to_dict(self) -> dict:
        return {"model": self.description, "converged": self.converged, "message": self.message,
                "parameters": {p.name: p.to_dict() for p in self.parameters},
                "chi_square": self.chi_square, "dof": self.dof, "n_points": self.n_points,
                "aicc": self.aicc, "weighted": self.weighted,
                "temperature_reference_kelvin": self.temperature_reference_kelvin,
                "guardrails": [g.to_dict() for g in self.guardrails]}


# ---------------------------------------------------------------- shared machinery
def _temperatures(runs, reference):
    """(per-run temperatures or None, T_ref or None): None when the runs share one temperature."""
    temps = [run.temperature_kelvin for run in runs]
    known = [t for t in temps if t is not None]
    if len(known) < 2 or max(known) - min(known) <= _SAME_TEMPERATURE_KELVIN:
        return None, None
    missing = [run.label for run, t in zip(runs, temps) if t is None]
    if missing:
        raise ConfigError(f"runs.{missing[0]}.temperature_kelvin", "the runs differ in temperature but this "
                          "run gives none", hint="give every run its temperature (an Arrhenius law is fitted)")
    t_ref = float(reference) if reference is not None else float(1.0 / np.mean(1.0 / np.array(known)))
    return np.array(known), t_ref


def _arrhenius_factor(ea, t, t_ref):
    return math.exp(-(ea / GAS_CONSTANT) * (1.0 / t - 1.0 / t_ref))


def eyring_k(dh_j_per_mol, ds_j_per_mol_k, temperature_kelvin):
    """``k = (k_B T/h) exp(dS/R) exp(-dH/(R T))`` (transmission coefficient 1)."""
    return (_KB_OVER_H * temperature_kelvin * math.exp(ds_j_per_mol_k / GAS_CONSTANT)
            * math.exp(-dh_j_per_mol / (GAS_CONSTANT * temperature_kelvin)))


def _data_blocks(runs, species_for_run):
    blocks, ys, sigmas = [], [], []
    for run in runs:
        for name in species_for_run(run):
            blocks.append((run.label, name))
            ys.append(run.observed_mol_per_l[name])
            sigmas.append(run.sigma(name))
    if not blocks:
        raise FitError("no observed course matches a species of the model: nothing to fit")
    weighted = all(s is not None for s in sigmas)
    if not weighted and any(s is not None for s in sigmas):
        log.info("some courses have no sigma: every course weighted equally")
    weights = [1.0 / s if weighted else np.ones_like(y) for y, s in zip(ys, sigmas)]
    return blocks, ys, weights, weighted


def _fit_pooled(description, runs, params: Sequence[_Param], predict_run, species_for_run, *,
                absolute_sigma=False, profile=True, extra_guardrails=(), t_ref=None) -> GlobalFitResult:
    """Fit ``predict_run(run, values) -> {species: array}`` to every run's courses at once."""
    blocks, ys, weights, weighted = _data_blocks(runs, species_for_run)
    by_label = {run.label: run for run in runs}
    sizes = [y.size for y in ys]
    y_all = np.concatenate(ys)[None, :]
    w_all = np.concatenate(weights)[None, :]
    n = y_all.size
    absolute_sigma = bool(absolute_sigma and weighted)

    def predict(_t, values):
        parts = []
        for run in runs:
            names = species_for_run(run)
            if not names:
                continue
            try:
                predicted = predict_run(run, values)
                parts.extend(np.asarray(predicted[name], dtype=float) for name in names)
            except (KineticsError, FloatingPointError, ValueError, ZeroDivisionError):
                parts.extend(np.full(run.n_points, np.nan) for _ in names)
        return np.concatenate(parts)[None, :]

    problem = iv.Problem(predict, np.arange(n, dtype=float), y_all, w_all, [p.name for p in params], {},
                         np.array([p.lower for p in params]), np.array([p.upper for p in params]),
                         [False] * len(params))
    theta0 = np.array([p.start for p in params])
    theta, success, jacobian = iv.fit_theta(problem, theta0, full=True)
    s_min = problem.ssq(theta)
    # A second start from the optimum guards against an early stop of the first search.
    theta2, success2, jacobian2 = iv.fit_theta(problem, theta, full=True)
    if problem.ssq(theta2) < s_min:
        theta, success, jacobian, s_min = theta2, success2, jacobian2, problem.ssq(theta2)
    p = len(params)
    dof = n - p
    converged = bool(success and np.isfinite(s_min) and s_min < 1e100 and dof > 0)
    message = "converged" if converged else (
        "the fit did not converge" if dof > 0 else f"{n} points for {p} parameters: too few points")
    scale = 1.0 if absolute_sigma else (s_min / dof if dof > 0 else math.nan)
    covariance = iv.covariance_from_jacobian(jacobian, scale) if converged else None
    stderr = np.sqrt(np.diag(covariance)) if covariance is not None else np.full(p, np.nan)
    threshold = iv.profile_threshold(s_min, dof, absolute_sigma)
    estimates, found = [], list(extra_guardrails)
    for i, spec in enumerate(params):
        se = float(stderr[i]) if np.isfinite(stderr[i]) else None
        ci_cov = (iv.covariance_interval(theta[i], se, dof, absolute_sigma=absolute_sigma,
                                         lower=spec.lower, upper=spec.upper) if se is not None else None)
        ci_profile = None
        if converged and profile and spec.profile:
            ci_profile = iv.profile_interval(problem, theta, i, se, threshold, s_min=s_min, covariance=covariance)
        span = spec.upper - spec.lower
        at_bound = bool(np.isfinite(span) and (abs(theta[i] - spec.lower) < 1e-6 * span
                                               or abs(theta[i] - spec.upper) < 1e-6 * span))
        if at_bound and spec.name.startswith("order_"):
            found.append(dg.Guardrail(
                "order_at_bound", f"{spec.name} ran to its bound ({theta[i]:.3g}): the law does not describe "
                "these data, or the order is not determined by them; fix it or vary that component more",
                dg.WARNING, {"parameter": spec.name, "value": float(theta[i])}))
        estimates.append(ParameterEstimate(spec.name, float(theta[i]), se, spec.unit, True, ci_cov,
                                           ci_profile, None, at_bound))
    values = problem.values(theta)
    fitted_all = problem.model(theta)[0]
    residual_all = ((y_all - fitted_all) * w_all)[0]
    edges = np.cumsum([0] + sizes)
    fitted = {b: fitted_all[edges[j]:edges[j + 1]] for j, b in enumerate(blocks)}
    residual = {b: residual_all[edges[j]:edges[j + 1]] for j, b in enumerate(blocks)}
    if converged:
        found.extend(_pooled_guardrails(blocks, residual, fitted, jacobian, dof, weighted, by_label))
    k_params = p + 1
    log_term = n * math.log(s_min / n) if s_min > 0 else -math.inf
    aicc = log_term + 2 * k_params + (2 * k_params * (k_params + 1) / (n - k_params - 1)
                                      if n - k_params - 1 > 0 else math.inf)

    def curve(label, time_s):
        run = by_label[label]
        return predict_run(_retimed(run, time_s), values)

    return GlobalFitResult(description, tuple(estimates), float(s_min), int(dof), int(n), float(aicc),
                           converged, message, tuple(blocks), fitted, residual, tuple(found), curve,
                           t_ref, weighted)


def _retimed(run: CampaignRun, time_s):
    """A stand-in with the run's design factors on another time grid (for drawing curves)."""
    from types import SimpleNamespace

    time_s = np.asarray(time_s, dtype=float)
    return SimpleNamespace(label=run.label, time_s=time_s, n_points=time_s.size,
                           initial_mol_per_l=run.initial_mol_per_l, catalyst_mol_per_l=run.catalyst_mol_per_l,
                           temperature_kelvin=run.temperature_kelvin, initial=run.initial)


def _pooled_guardrails(blocks, residual, fitted, jacobian, dof, weighted, by_label) -> list:
    rows = [residual[b] for b in blocks]
    longest = max(r.size for r in rows)
    # runs_test_exact skips zeros: padding ragged courses with 0 leaves each sign sequence intact.
    padded = np.array([np.pad(r, (0, longest - r.size)) for r in rows])
    runs, expected, _, p = dg.runs_test_exact(padded)
    found = dg.check_runs(runs, expected, p)
    r_all = np.concatenate(rows)
    f_all = np.concatenate([fitted[b] for b in blocks])
    found += dg.check_noise(r_all, f_all, jacobian, weighted=weighted)
    labels = [f"run {label} {species} at {t:.4g} s" for (label, species) in blocks
              for t in by_label[label].time_s]
    found += dg.check_outliers(r_all, jacobian, dof, labels)
    found += _run_consistency(blocks, residual, dof)
    return found


RUN_MISFIT_P = 0.01   # family-wise level of the per-run checks (Bonferroni over runs)
RUN_MISFIT_RATIO = 3.0  # a run flagged must also have 3x the mean square of the others (chosen here)


def _run_consistency(blocks, residual, dof) -> list:
    """Name the runs the shared law does not describe.

    Two per-run checks on the weighted residuals, each at ``RUN_MISFIT_P`` over all runs
    (Bonferroni): the run's mean square against the other runs' (F test,
    ``F = (S_run/n_run) / (S_rest/(N - n_run - p))``, flagged only when also
    ``RUN_MISFIT_RATIO`` times larger), and the exact runs test of its residual signs
    (too few sign changes).
    """
    from scipy import stats

    labels = list(dict.fromkeys(b[0] for b in blocks))
    if len(labels) < 2:
        return []
    total = sum(float(r @ r) for r in residual.values())
    n_total = sum(r.size for r in residual.values())
    n_params = n_total - dof
    level = RUN_MISFIT_P / len(labels)
    found = []
    for label in labels:
        own = [residual[b] for b in blocks if b[0] == label]
        s_run = sum(float(r @ r) for r in own)
        n_run = sum(r.size for r in own)
        rest_dof = n_total - n_run - n_params
        if rest_dof < 1 or total - s_run <= 0:
            continue
        ratio = (s_run / n_run) / ((total - s_run) / rest_dof)
        p_ms = float(stats.f.sf(ratio, n_run, rest_dof))
        longest = max(r.size for r in own)
        runs, expected, _, p_runs = dg.runs_test_exact(np.array([np.pad(r, (0, longest - r.size)) for r in own]))
        reasons = []
        if p_ms < level and ratio > RUN_MISFIT_RATIO:
            reasons.append(f"its residuals have {ratio:.1f}x the mean square of the other runs' "
                           f"(F test p = {p_ms:.2g})")
        if np.isfinite(p_runs) and p_runs < level:
            reasons.append(f"they change sign too rarely ({runs} runs where {expected:.1f} are expected, "
                           f"p = {p_runs:.2g})")
        if reasons:
            found.append(dg.Guardrail(
                "run_not_described",
                f"run {label}: " + " and ".join(reasons) + ": the shared law does not describe this run. Look at "
                "its same-excess overlay: a deactivating catalyst, another batch of a reagent, a wrong design "
                "value or a temperature excursion. Refit without it to see how much it moves the constants",
                dg.WARNING, {"run": label, "mean_square_ratio": ratio, "p_mean_square": p_ms, "runs": runs,
                             "expected_runs": expected, "p_runs": p_runs}))
    return found


def _k_start(runs, rate_of_run, k_unit_value):
    """Order-of-magnitude start for a rate constant: ``[A]0 / (span f0)`` (median over runs)."""
    guesses = []
    for run in runs:
        f0, c_scale = rate_of_run(run)
        span = float(run.time_s[-1] - run.time_s[0]) or float(run.time_s[-1]) or 1.0
        if f0 > 0 and np.isfinite(f0):
            guesses.append(c_scale / (span * f0))
    return float(np.median(guesses)) if guesses else k_unit_value


def _scan_start(params, start_index, evaluate):
    """Scan one start value over three decades either side; keep the best."""
    best_theta, best_s = None, math.inf
    base = params[start_index].start
    for factor in np.logspace(-3, 3, 25):
        theta = np.array([p.start for p in params])
        theta[start_index] = base * factor
        s = evaluate(theta)
        if s < best_s:
            best_theta, best_s = theta, s
    if best_theta is None:
        return params
    return [_Param(p.name, float(best_theta[i]), p.lower, p.upper, p.unit, p.profile) for i, p in enumerate(params)]


def _ssq_function(runs, params, predict_run, species_for_run):
    blocks, ys, weights, _ = _data_blocks(runs, species_for_run)
    y = np.concatenate(ys)
    w = np.concatenate(weights)
    names = [p.name for p in params]

    def evaluate(theta):
        values = dict(zip(names, theta))
        parts = []
        try:
            for run in runs:
                got = predict_run(run, values)
                parts.extend(got[name] for name in species_for_run(run))
        except (KineticsError, FloatingPointError, ValueError, ZeroDivisionError):
            return math.inf
        r = (y - np.concatenate(parts)) * w
        s = float(r @ r)
        return s if np.isfinite(s) else math.inf

    return evaluate


# ---------------------------------------------------------------- power rate law
def fit_power_law(runs: Sequence[CampaignRun], law: PowerLaw | None = None, *, species=None,
                  fit_initial=(), temperature_reference_kelvin=None, absolute_sigma=False, profile=True,
                  order_bounds=ORDER_BOUNDS, start_orders=None, temperature_law="arrhenius",
                  warm_start=None) -> GlobalFitResult:
    """Fit ``rate = k prod [i]^{n_i}`` to every run at once with shared ``k`` and orders.

    Parameters
    ----------
    runs : sequence of CampaignRun
    law : PowerLaw
        Orders (None = fitted) and stoichiometry; default ``A + B -> P`` with a catalyst,
        orders in A, B and cat free.
    species : sequence of str, optional
        Observed species to fit (default: every observed species with a coefficient).
    fit_initial : sequence of str
        Species whose initial concentration is fitted in every run (the design value, when
        given, is only the start).  A species observed but without a design value is fitted
        anyway; a product without one starts at 0.
    temperature_reference_kelvin : float, optional
        ``T_ref`` of the Arrhenius form (used only when the runs differ in temperature).
    absolute_sigma : bool
        Take the runs' sigmas as known (chi-square threshold) rather than relative.
    profile : bool
        Profile intervals for the rate constant(s) and the orders.
    temperature_law : "arrhenius" or "eyring"
        How k depends on temperature when the runs differ in it: ``k_ref`` and
        ``ea_j_per_mol``, or ``dh_j_per_mol`` and ``ds_j_per_mol_k`` (started from the
        Arrhenius fit: ``dH = Ea - R T_ref``).
    warm_start : Mapping name -> value, optional
        Start every parameter named here at that value and skip the start scan (a refit
        near a known optimum: the bootstrap's resamples).
    """
    runs = check_campaign(runs)
    law = law if law is not None else PowerLaw()
    if temperature_law not in ("arrhenius", "eyring"):
        raise ConfigError("temperature_law", f"{temperature_law!r}: use 'arrhenius' or 'eyring'")
    temperatures, t_ref = _temperatures(runs, temperature_reference_kelvin)
    eyring_start = None
    if temperatures is not None and temperature_law == "eyring" and warm_start is not None:
        eyring_start = dict(warm_start)
    elif temperatures is not None and temperature_law == "eyring":
        first = fit_power_law(runs, law, species=species, fit_initial=fit_initial,
                              temperature_reference_kelvin=temperature_reference_kelvin,
                              absolute_sigma=absolute_sigma, profile=False, order_bounds=order_bounds,
                              start_orders=start_orders)
        values = first.values
        dh = values["ea_j_per_mol"] - GAS_CONSTANT * t_ref
        ds = GAS_CONSTANT * (math.log(values["k_ref"] / (_KB_OVER_H * t_ref)) + dh / (GAS_CONSTANT * t_ref))
        eyring_start = dict(values, dh_j_per_mol=dh, ds_j_per_mol_k=ds)
    changing = [name for name, nu in law.coefficients.items() if nu != 0]
    wanted = tuple(species) if species is not None else None
    fit_initial = tuple(fit_initial)

    def species_for_run(run):
        names = [s for s in run.observed_mol_per_l if s in changing]
        return [s for s in names if wanted is None or s in wanted]

    # per-run initial concentrations: known or fitted
    fitted_c0 = []
    for run in runs:
        needs_catalyst = law.catalyst in law.orders and law.orders[law.catalyst] != 0
        if needs_catalyst and run.catalyst_mol_per_l is None:
            raise ConfigError(f"runs.{run.label}.catalyst_mol_per_l", "the rate law has an order in the catalyst "
                              "but this run gives no catalyst loading", hint="give the loading as mol/L")
        for name in changing + [s for s in law.orders if s not in changing and s != law.catalyst]:
            known = run.initial(name)
            observed = name in run.observed_mol_per_l
            if name in fit_initial or (known is None and observed and law.coefficients.get(name, 0) < 0):
                start = known if known is not None else max(float(run.observed_mol_per_l[name][0]), 1e-12)
                fitted_c0.append(_Param(f"c0_{name}@{run.label}", float(start), 0.0, math.inf, CONC_UNIT, False))
            elif known is None and law.coefficients.get(name, 0) < 0:
                raise ConfigError(f"runs.{run.label}.initial.{name}", f"the initial concentration of {name!r} is "
                                  "needed (it is consumed in the rate law) but is neither given nor observed",
                                  hint=f"give it, or observe {name}")
    c0_names = {p.name for p in fitted_c0}
    order_params = []
    starts = dict(start_orders or {})
    for name in law.free:
        order_params.append(_Param(f"order_{name}", float(starts.get(name, 1.0)), order_bounds[0],
                                   order_bounds[1], "1"))
    for name in law.free_binding:
        scale = float(np.median([max(run.initial_mol_per_l.values(), default=1.0) or 1.0 for run in runs]))
        order_params.append(_Param(f"K_{name}", 1.0 / scale, 0.0, math.inf, "L mol^-1"))
    if temperatures is None:
        rate_params = [_Param("k", 1.0, 0.0, math.inf, law.k_unit({f"order_{s}": 1.0 for s in law.free}))]
    elif eyring_start is None:
        rate_params = [_Param("k_ref", 1.0, 0.0, math.inf, law.k_unit({f"order_{s}": 1.0 for s in law.free})),
                       _Param("ea_j_per_mol", 50e3, -100e3, 500e3, "J mol^-1")]
    else:
        rate_params = [_Param("dh_j_per_mol", 50e3, -100e3, 500e3, "J mol^-1"),
                       _Param("ds_j_per_mol_k", -50.0, -1000.0, 1000.0, "J mol^-1 K^-1")]

    def initial_of(run, values):
        initial = {}
        for name in set(changing) | set(law.orders):
            key = f"c0_{name}@{run.label}"
            if key in c0_names:
                initial[name] = values[key]
            else:
                initial[name] = run.initial(name, 0.0)
        return initial

    def predict_run(run, values):
        orders = {name: values[f"order_{name}"] for name in law.free}
        if temperatures is None:
            k = values["k"]
        elif eyring_start is not None:
            k = eyring_k(values["dh_j_per_mol"], values["ds_j_per_mol_k"], run.temperature_kelvin)
        else:
            k = values["k_ref"] * _arrhenius_factor(values["ea_j_per_mol"], run.temperature_kelvin, t_ref)
        binding = {name: values[f"K_{name}"] for name in law.free_binding}
        return course(law, run.time_s, k, orders, initial_of(run, values), run.catalyst_mol_per_l, binding)

    params = rate_params + order_params + fitted_c0
    start_values = {p.name: p.start for p in params}

    def initial_rate_factor(run):
        initial = initial_of(run, start_values)
        orders = {name: (o if o is not None else start_values[f"order_{name}"]) for name, o in law.orders.items()}
        f0 = 1.0
        for name, order in orders.items():
            c = run.catalyst_mol_per_l if name == law.catalyst else initial.get(name, 0.0)
            f0 *= (c or 0.0) ** order
        return f0, initial.get(law.reactant, 1.0) or 1.0

    if warm_start is not None:
        params = _started(params, warm_start)
    elif eyring_start is None:
        k0 = _k_start(runs, initial_rate_factor, 1.0)
        params[0] = _Param(params[0].name, k0, 0.0, math.inf, params[0].unit)
        params = _scan_start(params, 0, _ssq_function(runs, params, predict_run, species_for_run))
    else:
        params = [_Param(p.name, float(eyring_start[p.name]), p.lower, p.upper, p.unit, p.profile) for p in params]
    guards = _design_guardrails(runs, law)
    result = _fit_pooled(law.describe(), runs, params, predict_run, species_for_run,
                         absolute_sigma=absolute_sigma, profile=profile, extra_guardrails=guards, t_ref=t_ref)
    unit = law.k_unit(result.values)
    fixed_units = tuple(
        ParameterEstimate(p.name, p.value, p.stderr, unit, p.vary, p.ci_covariance, p.ci_profile, p.ci_bootstrap,
                          p.at_bound) if p.name in ("k", "k_ref") else p for p in result.parameters)
    described = law.describe(result.values)
    return _replace(result, parameters=fixed_units, description=described)


def _started(params, warm_start) -> list:
    """The parameters with their start values taken from ``warm_start`` where it names them."""
    return [_Param(p.name, float(warm_start.get(p.name, p.start)), p.lower, p.upper, p.unit, p.profile)
            for p in params]


def _replace(result, **changes):
    from dataclasses import replace

    return replace(result, **changes)


def _design_guardrails(runs, law: PowerLaw) -> list:
    """Orders the design cannot determine (a factor never varied)."""
    found = []
    for name in law.free:
        factor = "catalyst" if name == law.catalyst else name
        if varied_factors(runs, [factor])[factor]:
            continue
        if name == law.catalyst:
            raise FitError(f"the catalyst loading is the same in every run, so the order in the catalyst "
                           f"cannot be told apart from k: fix it (orders {{'{name}': 1}}) or add runs at "
                           "another loading")
        found.append(dg.Guardrail(
            "factor_not_varied",
            f"the initial concentration of {name} is the same in every run: its order rests only on the shape "
            f"of each course, which is weak when the species fall together. Add runs with another [{name}]0 "
            "(a different excess)", dg.NOTE, {"species": name}))
    return found


# ---------------------------------------------------------------- model choice
def compare_power_laws(runs, candidates: Mapping[str, PowerLaw], **options) -> tuple[pd.DataFrame, str, dict]:
    """Fit each candidate law to all runs and rank by AICc (Akaike weights).

    Returns ``(table, verdict, results)``; the verdict uses the rules of thumb of Burnham &
    Anderson (2002): delta AICc < 2 substantial support, 4-7 considerably less, > 10 none.
    """
    options.setdefault("profile", False)
    results, rows = {}, []
    for name, law in candidates.items():
        try:
            fit = fit_power_law(runs, law, **options)
        except KineticsError as error:
            results[name] = None
            rows.append({"model": name, "n_params": np.nan, "chi_square": np.nan, "aicc": np.nan,
                         "converged": False, "note": str(error)})
            continue
        results[name] = fit
        rows.append({"model": name, "n_params": len(fit.parameters), "chi_square": fit.chi_square,
                     "aicc": fit.aicc if fit.converged else np.nan, "converged": fit.converged, "note": ""})
    table = pd.DataFrame(rows)
    if table["aicc"].notna().sum() == 0:
        raise FitError("no candidate law could be fitted to the campaign")
    table["delta_aicc"] = table["aicc"] - table["aicc"].min()
    weights = np.exp(-0.5 * table["delta_aicc"].to_numpy(dtype=float))
    weights = np.where(np.isfinite(weights), weights, 0.0)
    table["akaike_weight"] = weights / weights.sum()
    table = table.sort_values("delta_aicc", na_position="last").reset_index(drop=True)
    ranked = table[table["aicc"].notna()]
    lead = ranked.iloc[0]
    verdict = f"best: {lead['model']} (Akaike weight {lead['akaike_weight']:.2f})"
    if len(ranked) > 1:
        runner = ranked.iloc[1]
        d = float(runner["delta_aicc"])
        if d < 2:
            verdict += (f"; {runner['model']} is practically as good (delta AICc {d:.1f} < 2): the campaign cannot "
                        "tell these laws apart; add runs that vary the components whose orders differ")
        elif d <= 10:
            verdict += f"; {runner['model']} has less support (delta AICc {d:.1f})"
        else:
            verdict += f"; the others have essentially no support (next: {runner['model']}, delta AICc {d:.1f})"
    return table, verdict, results


# ---------------------------------------------------------------- written mechanisms
def fit_mechanism_campaign(runs: Sequence[CampaignRun], text, *, catalyst_species=None, fit_initial=(),
                           temperature_reference_kelvin=None, absolute_sigma=False, profile=True,
                           method="LSODA", warm_start=None) -> GlobalFitResult:
    """Fit a written mechanism to every run with shared rate constants.

    Observed courses whose name is a species of the mechanism are fitted.  Initial
    concentrations come from each run's design (``initial_mol_per_l``; the catalyst loading
    for ``catalyst_species``); species not given start at 0 unless observed (then fitted)
    or listed in ``fit_initial``.  Runs at different temperatures give every rate constant
    ``k_i`` an Arrhenius form (``k_i`` at ``T_ref`` and ``ea_<k_i>_j_per_mol``).  ``warm_start``
    (name -> value) starts the named parameters there and skips the scan of the rate constants.
    """
    from kinetics.rates.mechanism import parse_mechanism

    runs = check_campaign(runs)
    mechanism = parse_mechanism(text) if isinstance(text, str) else text
    temperatures, t_ref = _temperatures(runs, temperature_reference_kelvin)
    fit_initial = tuple(fit_initial)
    mechanism.check_species(fit_initial, "fit_initial")
    if catalyst_species is not None:
        mechanism.check_species([catalyst_species], "catalyst_species")

    def species_for_run(run):
        return [s for s in run.observed_mol_per_l if s in mechanism.species]

    fitted_c0 = []
    for run in runs:
        if catalyst_species is not None and run.catalyst_mol_per_l is None:
            raise ConfigError(f"runs.{run.label}.catalyst_mol_per_l", "the mechanism has a catalyst but this run "
                              "gives no loading")
        for name in mechanism.species:
            known = run.catalyst_mol_per_l if name == catalyst_species else run.initial(name)
            if name in fit_initial or (known is None and name in run.observed_mol_per_l):
                start = known if known is not None else max(float(run.observed_mol_per_l[name][0]), 0.0)
                fitted_c0.append(_Param(f"c0_{name}@{run.label}", float(start), 0.0, math.inf, CONC_UNIT, False))
    c0_names = {p.name for p in fitted_c0}
    spans = [float(run.time_s[-1]) or 1.0 for run in runs]
    scale_c = float(np.median([max([v for v in run.initial_mol_per_l.values() if v > 0] or [1.0]) for run in runs]))
    rate_params = []
    for name in mechanism.rate_names:
        j = mechanism.rate_names.index(name)
        order = int(mechanism.reactant_orders[:, j].sum())
        start = 1.0 / float(np.median(spans)) / scale_c ** max(order - 1, 0)
        rate_params.append(_Param(name if temperatures is None else f"{name}_ref", start, 0.0, math.inf,
                                  mechanism.rate_unit(name)))
    if temperatures is not None:
        rate_params += [_Param(f"ea_{name}_j_per_mol", 50e3, -100e3, 500e3, "J mol^-1")
                        for name in mechanism.rate_names]

    def predict_run(run, values):
        if temperatures is None:
            k = np.array([values[name] for name in mechanism.rate_names])
        else:
            k = np.array([values[f"{name}_ref"] * _arrhenius_factor(values[f"ea_{name}_j_per_mol"],
                                                                     run.temperature_kelvin, t_ref)
                          for name in mechanism.rate_names])
        c0 = []
        for name in mechanism.species:
            key = f"c0_{name}@{run.label}"
            if key in c0_names:
                c0.append(values[key])
            elif name == catalyst_species:
                c0.append(run.catalyst_mol_per_l)
            else:
                c0.append(run.initial(name, 0.0))
        t = np.asarray(run.time_s, dtype=float)
        grid = np.concatenate([[0.0], t]) if t[0] > 0 else t
        c = mechanism.simulate(grid, np.array(c0, dtype=float), k, method=method)
        if t[0] > 0:
            c = c[:, 1:]
        return {name: c[i] for i, name in enumerate(mechanism.species)}

    params = rate_params + fitted_c0
    evaluate = _ssq_function(runs, params, predict_run, species_for_run)
    # one common factor on every rate constant, scanned
    best, best_s = None, math.inf
    n_rates = len(mechanism.rate_names)
    for factor in (np.logspace(-3, 3, 13) if warm_start is None else ()):
        theta = np.array([p.start for p in params])
        theta[:n_rates] *= factor
        s = evaluate(theta)
        if s < best_s:
            best, best_s = theta, s
    if best is not None:
        params = [_Param(p.name, float(best[i]), p.lower, p.upper, p.unit, p.profile) for i, p in enumerate(params)]
    if warm_start is not None:
        params = _started(params, warm_start)
    description = " ; ".join(step.text for step in mechanism.steps)
    return _fit_pooled(description, runs, params, predict_run, species_for_run, absolute_sigma=absolute_sigma,
                       profile=profile, t_ref=t_ref)


# ---------------------------------------------------------------- residual bootstrap (a cross-check)
#: The bootstrap interval of a shared parameter this many times wider (or narrower) than its
#: profile interval earns a note (chosen here: well beyond the percentile noise of ~200 refits).
BOOTSTRAP_WIDTH_RATIO = 1.5


@dataclass(frozen=True)
class BootstrapIntervals:
    """Residual-bootstrap percentile intervals of a global fit (the cross-check of the profiles).

    Attributes
    ----------
    n_resamples, n_failed : int
        Resamples asked for; refits that failed or did not converge (left out of the percentiles).
    seed : int
        Root of the ``numpy.random.SeedSequence`` whose ``spawn(n_resamples)`` children seed
        the resamples, one each: the intervals do not depend on how resamples are grouped
        into tasks, nor on the workers that run them.
    intervals : Mapping name -> (lo, hi)
        2.5th and 97.5th percentiles of each parameter over the converged refits.
    where, seconds
        Where the refits ran and the wall time they took.
    """

    n_resamples: int
    n_failed: int
    seed: int
    intervals: Mapping
    where: str = ""
    seconds: float = math.nan

    def to_dict(self) -> dict:
        return {"method": "residual bootstrap, percentile", "n_resamples": self.n_resamples,
                "n_failed": self.n_failed, "seed": self.seed, "where": self.where, "seconds": self.seconds,
                "ci95": {name: [float(lo), float(hi)] for name, (lo, hi) in self.intervals.items()}}


def resample_runs(runs: Sequence[CampaignRun], blocks, fitted: Mapping, residual: Mapping, dof: int,
                  weighted: bool, rng: np.random.Generator) -> list:
    """One residual-bootstrap copy of the runs of a global fit.

    Residual bootstrap (Efron & Tibshirani 1993, ch. 9): the weighted residuals
    ``r = (y - f)/sigma`` of each fitted course, rescaled by ``sqrt(N/dof)`` (a fit's residuals
    are smaller than its noise) and centred within the course, are drawn with replacement
    within the course and put back on its fitted curve: ``y* = f + sigma r*`` (``sigma = 1``
    when the fit was unweighted).  Assumes the model is right and a course's residuals are
    exchangeable (independent, one noise level per course after weighting); it keeps each
    course's noise level and every run's design.  Courses not fitted are kept as measured.
    ``blocks`` fixes the order of the draws (``GlobalFitResult.blocks``).
    """
    n_points = sum(np.size(residual[b]) for b in blocks)
    scale = math.sqrt(n_points / max(int(dof), 1))
    drawn = {}
    for block in blocks:
        r = np.asarray(residual[block], dtype=float)
        centred = (r - r.mean()) * scale
        drawn[block] = centred[rng.integers(0, r.size, size=r.size)]
    out = []
    for run in runs:
        observed = dict(run.observed_mol_per_l)
        for name in observed:
            block = (run.label, name)
            if block not in drawn:
                continue
            sigma = run.sigma(name) if weighted else None
            observed[name] = np.asarray(fitted[block], dtype=float) + (drawn[block] if sigma is None
                                                                       else drawn[block] * sigma)
        out.append(CampaignRun(run.label, run.time_s, observed, dict(run.sigma_mol_per_l),
                               dict(run.initial_mol_per_l), run.catalyst_mol_per_l, run.temperature_kelvin,
                               dict(run.factors), run.source))
    return out


def percentile_intervals(names: Sequence[str], samples, level: float = 0.95) -> dict:
    """``{name: (lo, hi)}``: the ``(1 -+ level)/2`` percentiles of each column of ``samples`` (n, p)."""
    samples = np.asarray(samples, dtype=float).reshape(-1, len(names))
    if samples.shape[0] < 2:
        return {}
    tail = 50.0 * (1.0 - level)
    lo, hi = np.percentile(samples, [tail, 100.0 - tail], axis=0)
    return {name: (float(lo[j]), float(hi[j])) for j, name in enumerate(names)}


def with_bootstrap(fit: GlobalFitResult, found: BootstrapIntervals) -> GlobalFitResult:
    """The fit with each parameter's ``ci_bootstrap`` filled in (the quoted ``ci95`` stays the profile)."""
    from dataclasses import replace

    parameters = tuple(replace(p, ci_bootstrap=found.intervals.get(p.name, p.ci_bootstrap)) for p in fit.parameters)
    return _replace(fit, parameters=parameters)


def bootstrap_notes(fit: GlobalFitResult, found: BootstrapIntervals) -> list:
    """Notes where the bootstrap and the profile interval of a shared parameter disagree in width
    by more than :data:`BOOTSTRAP_WIDTH_RATIO`, or the refits often failed."""
    notes = []
    if found.n_resamples and found.n_failed > 0.1 * found.n_resamples:
        notes.append(f"{found.n_failed} of {found.n_resamples} bootstrap refits failed: the bootstrap "
                     "intervals rest on the others and may be too narrow")
    for p in fit.parameters:
        if "@" in p.name or p.ci_profile is None or p.name not in found.intervals:
            continue
        lo, hi = found.intervals[p.name]
        width_p = p.ci_profile[1] - p.ci_profile[0]
        width_b = hi - lo
        if not (np.isfinite(width_p) and width_p > 0 and width_b > 0):
            continue
        ratio = width_b / width_p
        if ratio > BOOTSTRAP_WIDTH_RATIO or ratio < 1.0 / BOOTSTRAP_WIDTH_RATIO:
            notes.append(f"{p.name}: the bootstrap interval ({lo:.4g} .. {hi:.4g}) is {ratio:.2g} times as wide "
                         f"as the profile interval ({p.ci_profile[0]:.4g} .. {p.ci_profile[1]:.4g}): the "
                         "profile's assumptions (the model right, independent noise of the size the fit "
                         "estimates) may not hold; quote the wider one")
    return notes
