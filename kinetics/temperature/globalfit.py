"""The global fit over temperature: one rate law fitted to every run's data at once.

``k(T) = k_ref * exp(-(Ea/R) * (1/T - 1/T_ref))``, the reference-temperature form that
nearly decorrelates ``Ea`` and ``k_ref`` (Schwaab & Pinto 2007), with per-run nuisance
parameters (initial or final concentration).  Rate laws come from
:mod:`kinetics.rates.laws`; per-run fits (the starting values and the two-step comparison)
from :mod:`kinetics.rates` through :func:`fit_run`.  The covariance is scaled by the
reduced chi-square and intervals use t with ``N - p`` degrees of freedom; the profile
interval of Ea is the likelihood-ratio one.
"""

from __future__ import annotations

import inspect
import logging
import math
from dataclasses import dataclass, field
from typing import Any, Callable, Mapping, Sequence

import numpy as np
from scipy import optimize, stats

from kinetics.errors import ConfigError
from kinetics.rates import laws
from kinetics.temperature.two_step import (
    _DUPLICATE_TOLERANCE_KELVIN,
    DEFAULT_REFERENCE_TEMPERATURE_KELVIN,
    GAS_CONSTANT_J_PER_MOL_K,
    Estimate,
    TemperatureResult,
    analyse_temperatures,
)

log = logging.getLogger(__name__)

# Finite-difference steps relative to each parameter (scipy's default step is absolute
# below |x| = 1, too coarse for concentrations of 1e-4 mol/L).
_RELATIVE_STEP = float(np.sqrt(np.finfo(float).eps))


# ---------------------------------------------------------------- runs and models
@dataclass(frozen=True, eq=False)
class KineticRun:
    """One run's concentration data and its temperature.

    Attributes
    ----------
    label : str
    temperature_kelvin : float
    time_s : ndarray, shape (m,)
    concentration_mol_per_l : ndarray, shape (m,)
    sigma_mol_per_l : ndarray, shape (m,), or None
        Per-point standard deviations; None for equal weights.
    """

    label: str
    temperature_kelvin: float
    time_s: np.ndarray
    concentration_mol_per_l: np.ndarray
    sigma_mol_per_l: np.ndarray | None = None

    def __post_init__(self):
        t = np.asarray(self.time_s, float)
        c = np.asarray(self.concentration_mol_per_l, float)
        if t.shape != c.shape or t.ndim != 1:
            raise ConfigError(f"{self.label}.time_s", f"time ({t.shape}) and concentration ({c.shape}) shapes differ")
        finite = np.isfinite(t) & np.isfinite(c)
        if finite.sum() < 3:
            raise ConfigError(f"{self.label}", "fewer than 3 finite (time, concentration) points")
        if not self.temperature_kelvin > 0:
            raise ConfigError(f"{self.label}.temperature_kelvin", f"{self.temperature_kelvin} K is not above absolute zero")
        s = None
        if self.sigma_mol_per_l is not None:
            s = np.asarray(self.sigma_mol_per_l, float)
            if s.shape != c.shape:
                raise ConfigError(f"{self.label}.sigma", "sigma and concentration shapes differ")
            finite &= np.isfinite(s)
            if np.any(s[finite] <= 0):
                raise ConfigError(f"{self.label}.sigma", "a sigma is not positive")
            s = s[finite]
        object.__setattr__(self, "time_s", t[finite])
        object.__setattr__(self, "concentration_mol_per_l", c[finite])
        object.__setattr__(self, "sigma_mol_per_l", s)
        for name in ("time_s", "concentration_mol_per_l", "sigma_mol_per_l"):
            value = getattr(self, name)
            if value is not None:
                value.setflags(write=False)


@dataclass(frozen=True)
class GlobalModel:
    """A rate law ``function(t, k, **nuisance)`` usable in the global fit.

    Attributes
    ----------
    name : str
    function : callable
        ``function(time_s, k, **params) -> concentration``, shapes (m,) -> (m,).
    nuisance : tuple of str
        Per-run parameters (``c0``, ``c_final``, ...), fitted separately for every run.
    guess : callable
        ``guess(time_s, concentration) -> dict`` of starting nuisance values (and,
        optionally, ``"k"``, a start for the rate constant).
    jacobian : callable or None
        ``jacobian(time_s, k, **params) -> dict`` of partial derivatives with keys
        ``"k"`` and every nuisance name; None for finite differences.
    k_unit : str
    """

    name: str
    function: Callable[..., np.ndarray]
    nuisance: tuple[str, ...]
    guess: Callable[[np.ndarray, np.ndarray], dict]
    jacobian: Callable[..., dict] | None = None
    k_unit: str = "s^-1"
    rate_constant: str = "k"
    observed: str = "reactant"
    law: str | None = None  # the kinetics.rates registry name, when there is one


# The global fit calls ``function(t, k, **nuisance)``; the laws themselves are those of
# kinetics.rates.laws (formulas and assumptions in their docstrings).
def _first(t, k, c0):
    return laws.first_order(t, c0, k)


def _first_product(t, k, c_final):
    return laws.first_order_formation(t, c_final, k)


def _second(t, k, c0):
    return laws.second_order(t, c0, k)


# Analytic partial derivatives of those three laws (d/dk and d/d nuisance).
def _first_jac(t, k, c0):
    e = np.exp(-k * t)
    return {"k": -t * c0 * e, "c0": e}


def _first_product_jac(t, k, c_final):
    e = np.exp(-k * t)
    return {"k": c_final * t * e, "c_final": -np.expm1(-k * t)}


def _second_jac(t, k, c0):
    d = 1.0 + k * c0 * t
    return {"k": -(c0**2) * t / d**2, "c0": 1.0 / d**2}


# The three commonest laws carry analytic Jacobians (fast enough for calibration loops).
# Every other registry law goes through :func:`rates_model` with finite differences.
BUILTIN_MODELS: dict[str, GlobalModel] = {
    "first": GlobalModel("first", _first, ("c0",), lambda t, c: {"c0": float(c[np.argmin(t)])}, _first_jac,
                          law="first"),
    "first-product": GlobalModel(
        "first-product", _first_product, ("c_final",), lambda t, c: {"c_final": float(c[np.argmax(t)])},
        _first_product_jac, observed="product", law="first",
    ),
    "second": GlobalModel(
        "second", _second, ("c0",), lambda t, c: {"c0": float(c[np.argmin(t)])}, _second_jac, k_unit="L mol^-1 s^-1",
        law="second"
    ),
}


def model_from_function(function: Callable, name: str | None = None, guess=None, k_unit: str = "s^-1") -> GlobalModel:
    """Wrap any ``f(t, k, **params)`` (e.g. a rate law from ``kinetics.rates``) as a GlobalModel.

    The nuisance names are ``f``'s parameters after ``t`` and ``k``.  Without ``guess``,
    names starting ``c0``/``a0`` start at the first concentration and all others at the last.
    """
    params = list(inspect.signature(function).parameters)
    if len(params) < 2:
        raise ConfigError("model", f"{function!r} must take (t, k, ...)")
    nuisance = tuple(params[2:])

    def default_guess(t, c):
        first, last = float(c[np.argmin(t)]), float(c[np.argmax(t)])
        return {p: (first if p.lower().startswith(("c0", "a0")) else last) for p in nuisance}

    return GlobalModel(name or getattr(function, "__name__", "model"), function, nuisance, guess or default_guess, None, k_unit)


_FAST_PATH = {("first", "reactant"): "first", ("first", "product"): "first-product", ("second", "reactant"): "second"}
_RATE_CONSTANT_NAMES = ("k", "k_obs")


def rates_model(name: str, observed: str = "reactant") -> GlobalModel:
    """A law from the ``kinetics.rates`` registry as a GlobalModel.

    Usable when the law has one rate constant (``k`` or ``k_obs``) and its other free
    parameters are concentrations (per-run nuisance): zero, first, second, second-mixed,
    pseudo-first (``k_obs`` then follows Arrhenius only if the excess reagent's
    concentration is the same in every run).  ``nth`` (a shared order), ``reversible-first``
    and ``consecutive`` (two rate constants, each with its own Ea) are refused.
    """
    if (name, observed) in _FAST_PATH:
        return BUILTIN_MODELS[_FAST_PATH[(name, observed)]]
    law = laws.get_model(name, observed)
    if len(law.species) != 1:
        raise ConfigError("observed", f"the global temperature fit takes one observed series, not {law.species}")
    rate = [p for p in law.params if p.vary and p.name in _RATE_CONSTANT_NAMES]
    others = [p for p in law.params if p.vary and p.name not in _RATE_CONSTANT_NAMES]
    if len(rate) != 1 or any(p.unit != laws.CONC_UNIT for p in others):
        shared = ", ".join(p.name for p in law.params if p.vary)
        raise ConfigError("model", f"{name!r} ({shared}) does not have a single rate constant with per-run "
                          "concentrations, which the global Arrhenius fit needs",
                          "fit the runs one by one and use the two-step analysis")
    rate_name = rate[0].name
    nuisance = tuple(p.name for p in others)
    fixed = tuple(p.name for p in law.params if not p.vary)

    def function(t, k, **params):
        values = {p: float("nan") for p in fixed}
        values.update(params)
        values[rate_name] = k
        return law.predict(np.asarray(t, float), values)[0]

    def guess(t, c):
        start = law.guess(np.asarray(t, float), np.asarray(c, float)[None, :])
        out = {p: float(start[p]) for p in nuisance}
        out["k"] = float(start[rate_name])  # the registry's own start for the rate constant
        return out

    return GlobalModel(f"{name} ({observed})", function, nuisance, guess, None, rate[0].unit, rate_name, observed,
                       name)


def resolve_model(model: str | GlobalModel | Callable, observed: str = "reactant") -> GlobalModel:
    """A GlobalModel from a name, a GlobalModel, or a plain ``f(t, k, **params)``.

    Names: the built-ins (``first``, ``first-product``, ``second``) and every
    ``kinetics.rates`` registry law that :func:`rates_model` accepts, with ``observed``.
    """
    if isinstance(model, GlobalModel):
        return model
    if isinstance(model, str):
        if model in BUILTIN_MODELS and observed == "reactant":
            return BUILTIN_MODELS[model]
        try:
            return rates_model(model, observed)
        except ConfigError as error:
            if error.key == "model" and "unknown model" in error.problem:
                raise ConfigError("model", f"unknown rate law {model!r} for the temperature fits",
                                  error.hint) from None
            raise
    if callable(model):
        return model_from_function(model)
    raise ConfigError("model", f"cannot use {model!r} as a rate law")


@dataclass(frozen=True)
class RunFit:
    """A single run's rate constant from fitting the model to its data alone."""

    label: str
    temperature_kelvin: float
    k: float
    k_stderr: float
    params: Mapping[str, float]
    n_points: int
    success: bool
    message: str
    fit: Any = field(default=None, repr=False, compare=False)
    data_warnings: tuple[str, ...] = ()  # from reading the run's data (e.g. negative values)


def fit_run(run: KineticRun, model: str | GlobalModel | Callable = "first", observed: str = "reactant",
            profile: bool = False) -> RunFit:
    """Fit one run alone with :mod:`kinetics.rates` (the project's one per-run fitter).

    A registry law goes through ``kinetics.rates.fit.fit_law``; any other model (a plain
    ``f(t, k, **params)``) through ``kinetics.rates.fit.fit_function`` with ``ln k`` free
    (k stays positive; its stderr is the delta-method ``k * se(ln k)``).  Covariances are
    scaled by the reduced chi-square.  The RunFit keeps the rates ``FitResult`` in ``fit``.
    """
    from kinetics.rates.fit import fit_function, fit_law
    from kinetics.rates.table import from_arrays

    global_model = resolve_model(model, observed)
    if global_model.law is not None:
        data = from_arrays(run.time_s, run.concentration_mol_per_l, run.sigma_mol_per_l, columns=[run.label],
                           source=run.label)
        result = fit_law(data, global_model.law, observed=global_model.observed, profile=profile)
        rate = result.param(global_model.rate_constant)
        k = float(rate.value)
        stderr = float("nan") if rate.stderr is None else float(rate.stderr)
        warnings = tuple(data.warnings)
    else:
        t, c = run.time_s, run.concentration_mol_per_l
        start = dict(global_model.guess(t, c))
        k0 = start.pop("k", None)
        k0 = k0 if k0 is not None and k0 > 0 else _rough_k(t, c, global_model)
        start = {"ln_k": math.log(k0), **{p: start[p] for p in global_model.nuisance}}

        def function(time_s, ln_k, **params):
            return global_model.function(time_s, math.exp(ln_k), **params)

        result = fit_function(t, c, function, start, sigma=run.sigma_mol_per_l, profile=profile,
                              name=global_model.name)
        ln_k = result.param("ln_k")
        k = math.exp(float(ln_k.value))
        stderr = float("nan") if ln_k.stderr is None else k * float(ln_k.stderr)
        warnings = ()
    params = {p: float(result.values[p]) for p in global_model.nuisance}
    ok = bool(result.converged) and np.isfinite(stderr) and stderr > 0
    message = result.message if ok else f"fit failed: {result.message}"
    return RunFit(run.label, run.temperature_kelvin, k, stderr, params, int(result.n_points), ok, message, result,
                  warnings)


#: The former name of :func:`fit_run` (there is one per-run fitter).
fit_run_rates = fit_run


def _rough_k(t, c, model: GlobalModel) -> float:
    # A start for k from the time the signal takes to cover ~63 % of its change; the
    # fit only needs the right order of magnitude.
    order = np.argsort(t)
    t, c = t[order], c[order]
    change = np.abs(c - c[0])
    total = np.max(change)
    if total <= 0 or t[-1] <= t[0]:
        return 1.0 / max(t[-1] - t[0], 1.0)
    i = int(np.argmax(change >= 0.63 * total))
    tau = max(t[i] - t[0], (t[-1] - t[0]) / len(t))
    k = 1.0 / tau
    if model.k_unit != "s^-1":
        scale = max(abs(c[0]), abs(c[-1]), 1e-12)
        k /= scale
    return k


@dataclass(frozen=True)
class GlobalFitResult:
    """Ea and k_ref fitted to every run's raw data at once.

    Attributes
    ----------
    model_name : str
    t_ref_kelvin : float
        Reference temperature (default harmonic mean of the run temperatures).
    ea : Estimate
        kJ/mol, covariance interval (t with ``dof`` degrees of freedom).
    ea_profile_ci95 : tuple of float or None
        Profile-likelihood 95 % interval of Ea (None if not computed or not found).
    k_ref, ln_a : Estimate
    correlation_ea_ln_k_ref : float
    nuisance : tuple of dict
        Per-run fitted nuisance values (same order as the runs).
    chi2, dof, reduced_chi2 : float, int, float
    success : bool
    message : str
    two_step : TemperatureResult or None
        The per-run route on the same data, for the comparison.
    """

    model_name: str
    k_unit: str
    t_ref_kelvin: float
    ea: Estimate
    ea_profile_ci95: tuple[float, float] | None
    k_ref: Estimate
    ln_a: Estimate
    correlation_ea_ln_k_ref: float
    run_labels: tuple[str, ...]
    run_temperatures_kelvin: tuple[float, ...]
    nuisance: tuple[Mapping[str, float], ...]
    n_points: int
    chi2: float
    dof: int
    success: bool
    message: str
    run_fits: tuple[RunFit, ...] = ()
    two_step: TemperatureResult | None = None
    warnings: tuple[str, ...] = ()
    weighted: bool = False
    interval_method: str = ("covariance from the Jacobian, scaled by the reduced chi-square, "
                            "Student t; profile interval by refitting with Ea fixed (F-test threshold)")

    @property
    def reduced_chi2(self) -> float:
        return self.chi2 / self.dof if self.dof > 0 else float("nan")

    def model(self) -> "GlobalModel":
        """The rate law this result names (:func:`resolve_model` of ``model_name``)."""
        return resolve_model(self.model_name)

    def k_at(self, temperature_kelvin) -> np.ndarray:
        """k(T) from the fitted Ea and k_ref, shape like ``temperature_kelvin``."""
        t = np.asarray(temperature_kelvin, float)
        return self.k_ref.value * np.exp(-(self.ea.value * 1e3 / GAS_CONSTANT_J_PER_MOL_K) * (1 / t - 1 / self.t_ref_kelvin))

    def comparison(self) -> list[dict[str, Any]]:
        """Two-step versus global: value, stderr, 95 % interval and interval width per quantity."""
        if self.two_step is None:
            return []
        two = self.two_step
        pairs = [
            ("Ea", two.ea(), self.ea, "kJ/mol"),
            (f"k({self.t_ref_kelvin:.2f} K)", two.predict_k(self.t_ref_kelvin), self.k_ref, self.k_unit),
            ("ln A", two.ln_a(), self.ln_a, f"ln({self.k_unit})"),
        ]
        rows = []
        for name, a, b, unit in pairs:
            rows.append({
                "quantity": name, "unit": unit,
                "two_step_value": a.value, "two_step_stderr": a.stderr,
                "two_step_ci95_low": a.ci95[0], "two_step_ci95_high": a.ci95[1],
                "global_value": b.value, "global_stderr": b.stderr,
                "global_ci95_low": b.ci95[0], "global_ci95_high": b.ci95[1],
                "width_ratio_two_step_over_global": (a.ci95[1] - a.ci95[0]) / (b.ci95[1] - b.ci95[0]),
            })
        return rows

    def report(self) -> str:
        status = "converged" if self.success else f"FAILED: {self.message}"
        lines = [
            f"Global fit ({self.model_name}) over {len(self.run_labels)} runs, {self.n_points} points: {status}",
            f"  k(T) = k_ref exp(-(Ea/R)(1/T - 1/T_ref)), T_ref = {self.t_ref_kelvin:.2f} K",
            f"  intervals: {self.interval_method}, {self.dof} dof",
            f"  Ea        {self.ea}",
        ]
        if self.ea_profile_ci95 is not None:
            lines.append(f"  Ea profile 95 % interval [{self.ea_profile_ci95[0]:.6g}, {self.ea_profile_ci95[1]:.6g}] kJ/mol")
        lines += [
            f"  k_ref     {self.k_ref}",
            f"  ln A      {self.ln_a}",
            f"  corr(Ea, ln k_ref) = {self.correlation_ea_ln_k_ref:.3f}; "
            + (f"reduced chi-square {self.reduced_chi2:.3g}" if self.weighted
               else f"residual standard deviation {math.sqrt(self.reduced_chi2):.3g} mol/L (no sigma given)"),
        ]
        rows = self.comparison()
        if rows:
            lines.append("  two-step vs global:")
            lines.append(f"    {'quantity':<18} {'two-step':>12} {'95 % interval':>27} {'global':>12} {'95 % interval':>27} {'width ratio':>11}")
            for r in rows:
                lines.append(
                    f"    {r['quantity']:<18} {r['two_step_value']:12.5g} [{r['two_step_ci95_low']:11.5g}, {r['two_step_ci95_high']:11.5g}]"
                    f" {r['global_value']:12.5g} [{r['global_ci95_low']:11.5g}, {r['global_ci95_high']:11.5g}]"
                    f" {r['width_ratio_two_step_over_global']:11.2f}"
                )
        for warning in self.warnings:
            lines.append(f"  warning: {warning}")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        return {
            "model": self.model_name,
            "success": self.success,
            "message": self.message,
            "t_ref_kelvin": self.t_ref_kelvin,
            "ea_kj_per_mol": self.ea.to_dict(),
            "ea_profile_ci95_kj_per_mol": None if self.ea_profile_ci95 is None else list(self.ea_profile_ci95),
            "k_ref": self.k_ref.to_dict(),
            "ln_a": self.ln_a.to_dict(),
            "correlation_ea_ln_k_ref": self.correlation_ea_ln_k_ref,
            "n_points": self.n_points,
            "dof": self.dof,
            "reduced_chi2": self.reduced_chi2,
            "weighted": self.weighted,
            "interval_method": self.interval_method,
            "runs": [
                {"label": label, "temperature_kelvin": t, "k_global": float(self.k_at(t)), **dict(p)}
                for label, t, p in zip(self.run_labels, self.run_temperatures_kelvin, self.nuisance)
            ],
            "comparison": self.comparison(),
            "warnings": list(self.warnings),
        }


class _GlobalProblem:
    """Residuals and Jacobian of the global fit; parameters [ln k_ref, Ea (kJ/mol), nuisance...]."""

    def __init__(self, runs: Sequence[KineticRun], model: GlobalModel, t_ref_kelvin: float):
        self.runs = runs
        self.model = model
        self.n_nuisance = len(model.nuisance)
        self.theta = [(-1e3 / GAS_CONSTANT_J_PER_MOL_K) * (1 / r.temperature_kelvin - 1 / t_ref_kelvin) for r in runs]
        self.sigma = [r.sigma_mol_per_l if r.sigma_mol_per_l is not None else np.ones_like(r.time_s) for r in runs]
        self.sizes = [len(r.time_s) for r in runs]
        self.n_params = 2 + self.n_nuisance * len(runs)

    def _run_params(self, x, i):
        start = 2 + i * self.n_nuisance
        return dict(zip(self.model.nuisance, x[start:start + self.n_nuisance]))

    def residual(self, x):
        out = []
        for i, run in enumerate(self.runs):
            k = math.exp(x[0] + x[1] * self.theta[i])
            model = self.model.function(run.time_s, k, **self._run_params(x, i))
            out.append((model - run.concentration_mol_per_l) / self.sigma[i])
        return np.concatenate(out)

    def jacobian(self, x):
        jac = np.zeros((sum(self.sizes), self.n_params))
        row = 0
        for i, run in enumerate(self.runs):
            k = math.exp(x[0] + x[1] * self.theta[i])
            d = self.model.jacobian(run.time_s, k, **self._run_params(x, i))
            rows = slice(row, row + self.sizes[i])
            dk = d["k"] * k / self.sigma[i]
            jac[rows, 0] = dk
            jac[rows, 1] = dk * self.theta[i]
            for j, p in enumerate(self.model.nuisance):
                jac[rows, 2 + i * self.n_nuisance + j] = d[p] / self.sigma[i]
            row += self.sizes[i]
        return jac

    def solve(self, x0, fixed_ea: float | None = None):
        jac = self.jacobian if self.model.jacobian is not None else "2-point"
        if fixed_ea is None:
            return optimize.least_squares(self.residual, x0, jac=jac, method="lm", x_scale="jac",
                                          diff_step=_RELATIVE_STEP)
        free = np.r_[0, np.arange(2, self.n_params)]

        def full(z):
            x = np.empty(self.n_params)
            x[free] = z
            x[1] = fixed_ea
            return x

        res = (lambda z: self.residual(full(z)))
        sub_jac = (lambda z: self.jacobian(full(z))[:, free]) if callable(jac) else "2-point"
        return optimize.least_squares(res, np.asarray(x0)[free], jac=sub_jac, method="lm", x_scale="jac",
                                      diff_step=_RELATIVE_STEP)


def harmonic_mean_temperature(temperature_kelvin) -> float:
    """``1 / mean(1/T)``: the default reference temperature (centre of the runs in 1/T)."""
    return float(1.0 / np.mean(1.0 / np.asarray(temperature_kelvin, float)))


def _exp_or_inf(x: float) -> float:
    """exp(x), but +inf instead of an OverflowError (a hopeless interval stays reportable)."""
    return math.exp(x) if x < 700.0 else float("inf")


def global_fit(
    runs: Sequence[KineticRun],
    model: str | GlobalModel | Callable = "first",
    *,
    t_ref_kelvin: float | None = None,
    run_fits: Sequence[RunFit] | None = None,
    profile: bool = True,
    reference_temperature_kelvin: float = DEFAULT_REFERENCE_TEMPERATURE_KELVIN,
) -> GlobalFitResult:
    """Fit the rate law to all runs at once with Arrhenius temperature dependence.

    ``k(T) = k_ref * exp(-(Ea/R) * (1/T - 1/T_ref))``; free parameters are ln k_ref, Ea and
    the model's nuisance parameters for every run.  Starting values come from per-run fits
    (``run_fits`` if given, else :func:`fit_run`) through the
    two-step line, which is also kept in the result for the comparison.

    Parameters
    ----------
    runs : sequence of KineticRun, length >= 2
    model : str, GlobalModel or callable
        A name in ``BUILTIN_MODELS``, a GlobalModel, or ``f(t, k, **params)``.
    t_ref_kelvin : float, optional
        Reference temperature; default the harmonic mean of the run temperatures.
    run_fits : sequence of RunFit, optional
        Per-run results to start from (and to compare with).
    profile : bool
        Also compute the profile-likelihood interval of Ea (a few dozen refits).

    Returns
    -------
    GlobalFitResult
        ``success`` False with the reason when the optimiser did not converge or the
        covariance is singular; the numbers are then not to be trusted.
    """
    model = resolve_model(model)
    runs = list(runs)
    if len(runs) < 2:
        raise ConfigError("runs", f"{len(runs)} run(s); a global temperature fit needs at least 2")
    temps = np.array([r.temperature_kelvin for r in runs])
    if np.ptp(temps) < _DUPLICATE_TOLERANCE_KELVIN:
        raise ConfigError("runs", "all runs are at one temperature; Ea cannot be fitted")
    t_ref = harmonic_mean_temperature(temps) if t_ref_kelvin is None else float(t_ref_kelvin)
    if run_fits is None:
        run_fits = [fit_run(r, model) for r in runs]
    run_fits = list(run_fits)
    warnings = [f"{f.label}: per-run fit {f.message}" for f in run_fits if not f.success]
    good = [f for f in run_fits if f.success and f.k > 0 and f.k_stderr > 0]
    two_step = None
    if len({round(f.temperature_kelvin, 2) for f in good}) >= 2:
        try:
            two_step = analyse_temperatures([f.temperature_kelvin for f in good], [f.k for f in good],
                                            [f.k_stderr for f in good], labels=[f.label for f in good],
                                            reference_temperature_kelvin=reference_temperature_kelvin,
                                            k_unit=model.k_unit)
        except ConfigError as error:
            warnings.append(f"two-step analysis not possible: {error}")
    if two_step is not None:
        ea0 = two_step.ea().value
        ln_k0 = float(two_step.arrhenius.predict(1 / t_ref, "scatter")[0])
    else:
        ea0 = 50.0
        ln_k0 = float(np.log(np.median([f.k for f in run_fits if f.k > 0] or [1e-3])))
    x0 = [ln_k0, ea0]
    by_label = {f.label: f for f in run_fits}
    for run in runs:
        fit = by_label.get(run.label)
        start = dict(fit.params) if fit is not None and fit.success else model.guess(run.time_s, run.concentration_mol_per_l)
        x0 += [start[p] for p in model.nuisance]
    problem = _GlobalProblem(runs, model, t_ref)
    sol = problem.solve(np.asarray(x0, float))
    n_points = sum(problem.sizes)
    dof = n_points - problem.n_params
    chi2 = float(2 * sol.cost)
    success, message = bool(sol.success), str(sol.message)
    q = float(stats.t.ppf(0.975, dof)) if dof > 0 else float("nan")
    try:
        from kinetics.rates.intervals import covariance_from_jacobian

        # Column-normalised SVD: the rank test must not depend on the units of the nuisance
        # concentrations (mol/L or micromol/L) next to ln k and Ea in kJ/mol.
        cov = covariance_from_jacobian(sol.jac, chi2 / dof) if dof > 0 else None
        if cov is None:
            raise np.linalg.LinAlgError("Jacobian rank deficient" if dof > 0 else "no degrees of freedom")
        if not np.all(np.isfinite(np.diag(cov))) or np.any(np.diag(cov) < 0):
            raise np.linalg.LinAlgError("non-finite covariance")
    except (np.linalg.LinAlgError, ZeroDivisionError) as error:
        cov = np.full((problem.n_params,) * 2, np.nan)
        success, message = False, f"singular covariance ({error}); parameters are not identifiable from these data"
    ln_k_ref, ea_value = float(sol.x[0]), float(sol.x[1])
    se_ln_k, se_ea = math.sqrt(cov[0, 0]) if success else float("nan"), math.sqrt(cov[1, 1]) if success else float("nan")
    ea = Estimate(ea_value, se_ea, (ea_value - q * se_ea, ea_value + q * se_ea), "kJ/mol")
    k_ref_value = math.exp(ln_k_ref)
    k_ref = Estimate(k_ref_value, k_ref_value * se_ln_k,
                     (_exp_or_inf(ln_k_ref - q * se_ln_k), _exp_or_inf(ln_k_ref + q * se_ln_k)) if success
                     else (float("nan"),) * 2,
                     model.k_unit)
    # ln A = ln k_ref + Ea/(R T_ref): linear in the fitted pair, so its variance is exact.
    g = np.array([1.0, 1e3 / (GAS_CONSTANT_J_PER_MOL_K * t_ref)])
    ln_a_value = float(g @ sol.x[:2])
    se_ln_a = math.sqrt(float(g @ cov[:2, :2] @ g)) if success else float("nan")
    ln_a = Estimate(ln_a_value, se_ln_a, (ln_a_value - q * se_ln_a, ln_a_value + q * se_ln_a), f"ln({model.k_unit})")
    corr = float(cov[0, 1] / math.sqrt(cov[0, 0] * cov[1, 1])) if success else float("nan")
    profile_ci = None
    if profile and success:
        profile_ci = _profile_ea(problem, sol.x, chi2, dof, se_ea, q)
        if profile_ci is None:
            warnings.append("profile interval of Ea not found within 10 stderrs of the estimate")
    nuisance = tuple(problem._run_params(sol.x, i) for i in range(len(runs)))
    nuisance = tuple({p: float(v) for p, v in d.items()} for d in nuisance)
    for warning in warnings:
        log.warning(warning)
    return GlobalFitResult(
        model_name=model.name, k_unit=model.k_unit, t_ref_kelvin=t_ref, ea=ea, ea_profile_ci95=profile_ci,
        k_ref=k_ref, ln_a=ln_a, correlation_ea_ln_k_ref=corr, run_labels=tuple(r.label for r in runs),
        run_temperatures_kelvin=tuple(float(t) for t in temps), nuisance=nuisance, n_points=n_points,
        chi2=chi2, dof=dof, success=success, message=message, run_fits=tuple(run_fits), two_step=two_step,
        warnings=tuple(warnings), weighted=all(r.sigma_mol_per_l is not None for r in runs),
    )


def _profile_ea(problem: _GlobalProblem, x_best, chi2_min, dof, se_ea, q) -> tuple[float, float] | None:
    # Profile (likelihood-ratio) interval with the noise estimated from the fit: the set of
    # Ea whose best chi-square is below chi2_min * (1 + t^2/dof), the F(1, dof) threshold
    # that reduces to the covariance interval for a linear model (Bates & Watts 1988).
    threshold = chi2_min * (1.0 + q**2 / dof)
    start = np.array(x_best, float)

    def excess(ea):
        sol = problem.solve(start, fixed_ea=ea)
        return 2 * sol.cost - threshold

    bounds = []
    for direction in (-1.0, 1.0):
        inner = x_best[1]
        found = None
        for factor in (1.5, 3.0, 6.0, 10.0):
            outer = x_best[1] + direction * factor * q * se_ea
            if excess(outer) > 0:
                found = optimize.brentq(excess, inner, outer, xtol=1e-4 * se_ea) if direction > 0 else \
                    optimize.brentq(excess, outer, inner, xtol=1e-4 * se_ea)
                break
            inner = outer
        if found is None:
            return None
        bounds.append(float(found))
    return bounds[0], bounds[1]
