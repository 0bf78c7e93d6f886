"""Fits of rate laws and mechanisms with lmfit, and what a chemist asks of them.

Entry points (all return a :class:`FitResult`):

* :func:`fit_model` - any :class:`~kinetics.rates.laws.RateModel` to
  :class:`~kinetics.rates.table.ConcentrationData` (one or several observed series at once);
* :func:`fit_law` - a registered law by plain name (``"first"``, ``"second"``, ...);
* :func:`fit_mechanism` - reaction text;
* :func:`fit_function` - any ``f(x, **params)`` to ``(x, y)`` (NIST tests, Arrhenius);
* :func:`refit` - warm start from a previous result on new data (live use).

The main minimisation is lmfit's ``leastsq`` (MINPACK Levenberg-Marquardt); covariance is
scaled by the reduced chi-square unless ``absolute_sigma``.  Information criteria use
``K = n_varying + 1`` (the noise variance counts): ``AIC = n ln(S/n) + 2K``,
``AICc = AIC + 2K(K+1)/(n-K-1)`` (Hurvich & Tsai 1989), ``BIC = n ln(S/n) + K ln n``.
"""

from __future__ import annotations

import logging
import math
import re
from dataclasses import dataclass, field, replace
from typing import Callable, Mapping

import lmfit
import numpy as np

from kinetics.errors import FitError
from kinetics.jsonio import parameter_dict
from kinetics.rates import diagnostics as dg
from kinetics.rates import intervals as iv
from kinetics.rates.laws import MODELS, ParamSpec, RateModel, get_model
from kinetics.rates.table import ConcentrationData, from_arrays

log = logging.getLogger(__name__)


# ---------------------------------------------------------------- records
@dataclass(frozen=True)
class ParameterEstimate:
    """One parameter of a fit.  Intervals are ``(lo, hi)`` or None when not computed."""

    name: str
    value: float
    stderr: float | None
    unit: str
    vary: bool
    ci_covariance: tuple | None = None
    ci_profile: tuple | None = None
    ci_bootstrap: tuple | None = None
    at_bound: bool = False

    @property
    def ci95(self):
        """The interval to quote: profile if computed, else bootstrap, else covariance.

        A profile that does not close on one side is quoted as it is, that side NaN
        (``null`` in JSON: the data do not bound the parameter there); falling back to a
        symmetric covariance interval would pretend a bound the data do not give.
        """
        for interval in (self.ci_profile, self.ci_bootstrap, self.ci_covariance):
            if interval is not None:
                return interval
        return None

    @property
    def ci95_method(self) -> str | None:
        """Which interval :attr:`ci95` is: ``"profile"``, ``"bootstrap"``, ``"covariance"``."""
        chosen = self.ci95
        for method, interval in (("profile", self.ci_profile), ("bootstrap", self.ci_bootstrap),
                                 ("covariance", self.ci_covariance)):
            if chosen is not None and interval is chosen:
                return method
        return None

    def to_dict(self) -> dict:
        """Exactly ``{"value", "stderr", "ci95", "unit"}`` (the project's parameter shape)."""
        return parameter_dict(self.value, self.stderr, self.ci95, self.unit)

    def intervals_dict(self) -> dict:
        """Every 95 % interval computed, and which one ``ci95`` quotes."""
        def listed(interval):
            return None if interval is None else [float(v) for v in interval]

        return {"quoted": self.ci95_method, "covariance": listed(self.ci_covariance),
                "profile": listed(self.ci_profile), "bootstrap": listed(self.ci_bootstrap)}


@dataclass(frozen=True)
class DerivedQuantity:
    """A quantity computed from the parameters, with its 95 % interval and how it was got."""

    name: str
    value: float
    stderr: float | None
    ci95: tuple | None
    unit: str
    method: str
    note: str = ""

    def to_dict(self) -> dict:
        out = parameter_dict(self.value, self.stderr, self.ci95, self.unit)
        out["method"] = self.method
        if self.note:
            out["note"] = self.note
        return out


@dataclass(frozen=True)
class ResidualDiagnostics:
    """Runs test and lag-1 autocorrelation of the weighted residuals.

    ``runs_p`` is the exact one-sided probability of so few runs or fewer
    (:func:`kinetics.rates.diagnostics.runs_test_exact`); ``runs_z`` is for reading only.
    The lag-1 autocorrelation is reported, not tested: least-squares residuals of short
    series are negatively correlated by construction.
    """

    runs: int
    expected_runs: float
    runs_z: float
    runs_p: float
    lag1_autocorrelation: float

    @property
    def systematic(self) -> bool:
        """True when the residuals change sign too rarely (exact runs test, p < 0.01)."""
        return bool(np.isfinite(self.runs_p) and self.runs_p < dg.RUNS_P)


@dataclass(frozen=True)
class FitOptions:
    """What a fit was asked to do, so :func:`refit` can repeat it."""

    start: Mapping = field(default_factory=dict)
    fixed: Mapping = field(default_factory=dict)
    bounds: Mapping = field(default_factory=dict)
    profile: bool = True
    bootstrap: int = 0
    absolute_sigma: bool = False
    tol: float = 1e-10
    max_nfev: int | None = None
    warm: bool = False
    weighting: str = "none"
    guardrails: bool = True
    #: told ``("bootstrap", done, total)`` during the bootstrap refits; not repeated by refit()
    progress: Callable | None = field(default=None, repr=False, compare=False)


@dataclass(frozen=True)
class FitResult:
    """The outcome of one fit; explains itself with :meth:`report` and :meth:`to_dict`.

    Arrays: ``time_s`` (n,), ``observed``/``fitted``/``residual`` (m, n) with ``m`` observed
    series, ``residual`` weighted (``(y - f)/sigma``).  ``covariance``/``correlation`` are
    (p, p) over the varying parameters ``varying`` (None when they could not be estimated).
    """

    model_name: str
    description: str
    params: tuple
    varying: tuple
    covariance: np.ndarray | None
    correlation: np.ndarray | None
    chi_square: float
    reduced_chi_square: float
    aic: float
    aicc: float
    bic: float
    n_points: int
    dof: int
    converged: bool
    message: str
    diagnostics: ResidualDiagnostics
    time_s: np.ndarray
    observed: np.ndarray
    fitted: np.ndarray
    residual: np.ndarray
    species: tuple
    columns: tuple
    source: str
    n_evaluations: int  # residual evaluations of minimiser + polish (Jacobians included)
    warnings: tuple = ()  # plain-language messages: every guardrail's plus the fitter's own
    bootstrap_failed: int = 0
    model: RateModel | None = field(default=None, repr=False, compare=False)
    data: ConcentrationData | None = field(default=None, repr=False, compare=False)
    options: FitOptions = field(default_factory=FitOptions, repr=False, compare=False)
    guardrails: tuple = ()  # kinetics.rates.diagnostics.Guardrail records (code, message, details)

    # ------------------------------------------------------------ access
    @property
    def values(self) -> dict:
        return {p.name: p.value for p in self.params}

    def param(self, name: str) -> ParameterEstimate:
        for p in self.params:
            if p.name == name:
                return p
        raise KeyError(name)

    def _quantile(self, level: float = 0.95) -> float:
        """Student t with ``dof`` when sigma is estimated from the fit; normal when sigmas are absolute."""
        return iv.interval_quantile(self.dof, self.options.absolute_sigma, level)

    def _theta(self):
        return np.array([self.values[name] for name in self.varying])

    def _stderr(self):
        return np.array([self.param(n).stderr if self.param(n).stderr is not None else np.nan
                         for n in self.varying])

    def _values_at(self, theta) -> dict:
        values = self.values
        values.update(zip(self.varying, map(float, theta)))
        return values

    def predict(self, time_s) -> np.ndarray:
        """Model curves at ``time_s`` (k,), shape (m, k)."""
        t = np.asarray(time_s, dtype=float)
        return np.asarray(self.model.predict(t, self.values), dtype=float).reshape(-1, t.size)

    def band(self, time_s, level: float = 0.95):
        """Predicted curves with a pointwise confidence band (delta method, t quantile).

        Returns ``(curve, lower, upper)``, each shape (m, k).  Without a covariance the
        band is NaN (the fit cannot say how sure it is).
        """
        t = np.asarray(time_s, dtype=float)
        curve = self.predict(t)
        if self.covariance is None or not self.converged:
            nan = np.full_like(curve, np.nan)
            return curve, nan, nan
        grad = iv.numeric_gradient(
            lambda th: np.asarray(self.model.predict(t, self._values_at(th)), dtype=float).reshape(-1, t.size),
            self._theta(), self._stderr())  # (p, m, k)
        variance = np.einsum("imk,ij,jmk->mk", grad, self.covariance, grad)
        half = self._quantile(level) * np.sqrt(np.maximum(variance, 0.0))
        return curve, curve - half, curve + half

    # ------------------------------------------------------------ derived quantities
    def derived(self, name: str, func: Callable[[dict], float], unit: str, positive=True,
                method="auto") -> DerivedQuantity:
        """``func(values)`` with a 95 % interval.

        When ``func`` depends on a single varying parameter whose profile interval is
        known, the interval is that profile mapped through ``func`` (profile likelihood is
        invariant under reparametrisation).  Otherwise the delta method, on the log scale
        for positive quantities (keeps the interval positive and asymmetric).
        ``method="delta"`` forces the delta method.
        """
        value = _safe(func, self.values)
        if not np.isfinite(value):
            return DerivedQuantity(name, value, None, None, unit, "none", "not defined for these parameters")
        if self.covariance is None or not self.converged:
            return DerivedQuantity(name, value, None, None, unit, "none", "no interval: the fit did not converge")
        theta = self._theta()
        grad = iv.numeric_gradient(lambda th: _safe(func, self._values_at(th)), theta, self._stderr())
        stderr = float(np.sqrt(max(grad @ self.covariance @ grad, 0.0)))
        sensitive = np.abs(grad * np.sqrt(np.diag(self.covariance))) > 1e-9 * max(stderr, 1e-300)
        if sensitive.sum() == 1 and method == "auto":
            param = self.param(self.varying[int(np.argmax(sensitive))])
            if param.ci_profile is not None and all(np.isfinite(param.ci_profile)):
                ends = sorted(_safe(func, {**self.values, param.name: b}) for b in param.ci_profile)
                if all(np.isfinite(ends)):
                    return DerivedQuantity(name, value, stderr, tuple(ends), unit, "profile")
        q = self._quantile()
        if positive and value > 0:
            spread = min(q * stderr / value, 700.0)  # beyond that the interval is (0, inf) anyway
            return DerivedQuantity(name, value, stderr, (value * math.exp(-spread), value * math.exp(spread)),
                                   unit, "delta (log scale)")
        return DerivedQuantity(name, value, stderr, (value - q * stderr, value + q * stderr), unit, "delta")

    def half_life(self) -> DerivedQuantity | None:
        """Half-life of the reactant (or of the approach to equilibrium), where defined."""
        if self.model is None or self.model.half_life is None:
            return None
        return self.derived("half_life_s", self.model.half_life, "s")

    def time_to_conversion(self, conversion: float, method="auto") -> DerivedQuantity:
        """Forecast: time at which the reactant conversion reaches ``conversion`` (0..1).

        The interval is propagated from the parameter uncertainty (see :meth:`derived`):
        the mapped profile interval when the time depends on one parameter (first order:
        ``ln(1/(1-X))/k``), otherwise the delta method on the log scale.
        """
        if not 0.0 < conversion < 1.0:
            raise FitError(f"target conversion must lie between 0 and 1, got {conversion}")
        curve = _conversion_function(self.model)
        if curve is None:
            return DerivedQuantity("time_to_conversion_s", float("nan"), None, None, "s", "none",
                                   "this model does not define a conversion")
        span = float(self.time_s[-1] - self.time_s[0]) or 1.0
        quantity = self.derived("time_to_conversion_s",
                                lambda v: _time_to_reach(curve, v, conversion, span), "s", method=method)
        if not np.isfinite(quantity.value):
            return replace(quantity, note=f"conversion {conversion:g} is not reached by the fitted model")
        caveat = dg.forecast_caveat(self, quantity, conversion)
        if caveat:
            return replace(quantity, note=caveat[0].message)
        return quantity

    def forecast_guardrails(self, conversion: float) -> list:
        """Guardrails of the forecast to ``conversion``: beyond the data or not."""
        return dg.forecast_caveat(self, self.time_to_conversion(conversion), conversion) if self.converged else []

    @property
    def warning_codes(self) -> tuple:
        """Machine codes of :attr:`guardrails`, in order (e.g. ``"outlier"``)."""
        return tuple(g.code for g in self.guardrails)

    def extra_quantities(self) -> list[DerivedQuantity]:
        """Model-specific derived constants (``K`` of A <=> B, ``k2`` of pseudo-first order)."""
        out = []
        if self.model is None:
            return out
        if "derived_K" in self.model.extra:
            out.append(self.derived("K", self.model.extra["derived_K"], ""))
        if "derived_k2" in self.model.extra and self.values.get("b0", np.nan) > 0:
            out.append(self.derived("k2", self.model.extra["derived_k2"], "L mol^-1 s^-1"))
        return out

    # ------------------------------------------------------------ presentation
    def to_dict(self) -> dict:
        """JSON-ready summary (see kinetics.jsonio for the parameter shape)."""
        out = {
            "model": self.model_name,
            "description": self.description,
            "source": self.source,
            "columns": list(self.columns),
            "species": list(self.species),
            "params": {p.name: p.to_dict() for p in self.params},
            "fixed": [p.name for p in self.params if not p.vary],
            "intervals": {p.name: p.intervals_dict() for p in self.params if p.vary},
            "chi_square": self.chi_square,
            "reduced_chi_square": self.reduced_chi_square,
            "aic": self.aic,
            "aicc": self.aicc,
            "bic": self.bic,
            "n_points": self.n_points,
            "dof": self.dof,
            "converged": self.converged,
            "message": self.message,
            "warnings": list(self.warnings),
            "warning_codes": list(self.warning_codes),
            "guardrails": [g.to_dict() for g in self.guardrails],
            "weighting": self.options.weighting,
            "residuals": {
                "runs": self.diagnostics.runs,
                "expected_runs": self.diagnostics.expected_runs,
                "runs_test_p": self.diagnostics.runs_p,
                "lag1_autocorrelation": self.diagnostics.lag1_autocorrelation,
                "systematic": self.diagnostics.systematic,
            },
            "correlation": None if self.correlation is None else {
                "names": list(self.varying), "matrix": self.correlation.tolist()},
        }
        half = self.half_life() if self.converged else None
        if half is not None and np.isfinite(half.value):
            out["half_life_s"] = half.to_dict()
        for quantity in (self.extra_quantities() if self.converged else []):
            out[quantity.name] = quantity.to_dict()
        return out

    def summary(self) -> str:
        """The fit in words: :meth:`report` (status, parameters with value ± u and 95 %
        interval, statistics, residual diagnostics, half-life, warnings)."""
        return self.report()

    def to_frame(self):
        """The parameters as a pandas DataFrame, one row per parameter (index ``parameter``).

        Columns: ``value``, ``stderr`` (standard error), ``ci95_low``/``ci95_high`` (the
        95 % interval :attr:`ParameterEstimate.ci95` quotes), ``interval`` (how it was got:
        profile, bootstrap or covariance), ``unit``, ``fixed``.  A parameter held fixed has
        no standard error or interval (NaN).
        """
        import pandas as pd

        rows = []
        for p in self.params:
            ci = p.ci95 if p.vary else None
            rows.append({"parameter": p.name, "value": p.value,
                         "stderr": np.nan if p.stderr is None or not p.vary else p.stderr,
                         "ci95_low": np.nan if ci is None else ci[0], "ci95_high": np.nan if ci is None else ci[1],
                         "interval": p.ci95_method if p.vary else None, "unit": p.unit, "fixed": not p.vary})
        return pd.DataFrame(rows).set_index("parameter")

    def plot(self, species=None, **options):
        """Measured and fitted courses with the 95 % band and residuals, a matplotlib Figure
        (:func:`kinetics.plots.fit_figure`; ``species`` and ``options`` as there)."""
        from kinetics import plots

        return plots.fit_figure(self, species=species, **options)

    def report(self) -> str:
        """Plain-text report: status, parameters with intervals, statistics, diagnostics."""
        from kinetics import numbers

        where = "" if str(self.source).startswith("<") else f"{self.source}  "  # "<arrays>" says nothing
        lines = [f"model       {self.model_name}: {self.description}",
                 f"data        {where}({', '.join(self.columns)}; {self.n_points} points)",
                 f"status      {'converged' if self.converged else 'NOT CONVERGED'}: {self.message}"]
        # value ± standard uncertainty rounded together (GUM 7.2.6), interval to the same place
        lines.append(f"{'parameter':<12}{'value ± u':<30}{'95 % interval':<32}{'unit'}")
        for p in self.params:
            unit = numbers.unit_text(p.unit)
            if not p.vary:
                lines.append(f"{p.name:<12}{numbers.format_value(p.value, 6) + ' (fixed)':<30}{'':<32}{unit}")
                continue
            ci = p.ci95
            if ci is None:
                ci_text = "-"
            elif all(np.isfinite(ci)):
                ci_text = numbers.format_interval(ci[0], ci[1])
            else:
                ci_text = " to ".join(numbers.format_value(end) if np.isfinite(end) else "unbounded" for end in ci)
            value = numbers.format_uncertain(p.value, p.stderr)
            lines.append(f"{p.name:<12}{value:<30}{ci_text:<32}{unit}" + ("  (at bound)" if p.at_bound else ""))
        lines.append(f"chi-square  {self.chi_square:.6g}   reduced {self.reduced_chi_square:.4g}   "
                     f"AICc {self.aicc:.4g}   BIC {self.bic:.4g}   dof {self.dof}")
        d = self.diagnostics
        lines.append(f"residuals   runs {d.runs} (expected {d.expected_runs:.1f}, P(fewer or equal) = {d.runs_p:.3g}), "
                     f"lag-1 autocorrelation {d.lag1_autocorrelation:.2f}"
                     + ("  -> systematic misfit?" if d.systematic else ""))
        if self.correlation is not None and len(self.varying) > 1:
            worst = np.abs(self.correlation - np.eye(len(self.varying))).max()
            lines.append(f"correlation largest |r| between parameters = {worst:.3f}")
        if self.converged:
            half = self.half_life()
            if half is not None and half.ci95 is not None and np.isfinite(half.value):
                unit, scale = numbers.duration_unit(half.value)
                lines.append(f"half-life   {numbers.format_duration(half.value, half.stderr)}  95 %: "
                             f"{numbers.format_interval(half.ci95[0] / scale, half.ci95[1] / scale, unit)} "
                             f"({half.method})")
            for q in self.extra_quantities():
                if q.ci95 is not None:
                    lines.append(f"{q.name:<12}{q.value:.5g}  [{q.ci95[0]:.5g}, {q.ci95[1]:.5g}] ({q.method})")
        coded = {g.message: g for g in self.guardrails}
        for warning in self.warnings:
            g = coded.get(warning)
            label = {dg.REFUSE: "REFUSED", dg.NOTE: "note"}.get(g.severity, "warning") if g else "warning"
            lines.append(f"{label:<11} {warning}" + (f"  [{g.code}]" if g else ""))
        return "\n".join(lines)


def _safe(func, values) -> float:
    try:
        with np.errstate(all="ignore"):
            value = float(func(values))
    except (ZeroDivisionError, ValueError, OverflowError, KeyError):
        return float("nan")
    return value


def _conversion_function(model: RateModel | None):
    """``f(t (k,), values) -> conversion of the reactant (k,)``, or None."""
    if model is None:
        return None
    if "conversion" in model.extra:
        return model.extra["conversion"]
    return None


def _time_to_reach(curve, values, target, span) -> float:
    """First time where ``curve`` reaches ``target``: grid bracket, then brentq."""
    from scipy.optimize import brentq

    horizon = span
    for _ in range(12):  # up to ~4000 times the observed span
        grid = np.linspace(0.0, horizon, 257)
        with np.errstate(all="ignore"):
            x = np.asarray(curve(grid, values), dtype=float)
        above = np.nonzero(x >= target)[0]
        if above.size:
            i = above[0]
            if i == 0:
                return 0.0
            return float(brentq(lambda t: float(np.asarray(curve(np.array([t]), values))[0]) - target,
                                grid[i - 1], grid[i], xtol=1e-12 * horizon, rtol=1e-12))
        horizon *= 2.0
    return float("nan")


# ---------------------------------------------------------------- the fit
def _build_problem(model: RateModel, data: ConcentrationData, options: FitOptions):
    start = dict(model.guess(data.time_s, data.values))
    unknown = [k for k in (*options.start, *options.fixed, *options.bounds) if k not in model.param_names]
    if unknown:
        raise FitError(f"model {model.name!r} has no parameter {unknown[0]!r}; parameters: "
                       + ", ".join(model.param_names))
    start.update({k: float(v) for k, v in options.start.items()})
    start.update({k: float(v) for k, v in options.fixed.items()})
    specs = {spec.name: spec for spec in model.params}
    for name, value in {**options.start, **options.fixed}.items():
        lo, hi = options.bounds.get(name, (specs[name].lower, specs[name].upper))
        if not (np.isfinite(float(value)) and lo <= float(value) <= hi):
            kind = "fixed" if name in options.fixed else "start"
            raise FitError(f"{kind} value {name} = {value} is not a finite number within its bounds "
                           f"[{lo:g}, {hi:g}]")
    names, lower, upper, linear, fixed = [], [], [], [], {}
    for spec in model.params:
        lo, hi = options.bounds.get(spec.name, (spec.lower, spec.upper))
        # A start value frees a parameter the model holds by default (a hidden species'
        # initial concentration); a fixed value always holds it.
        vary = (spec.vary or spec.name in options.start) and spec.name not in options.fixed
        if vary:
            names.append(spec.name)
            lower.append(lo)
            upper.append(hi)
            linear.append(spec.linear)
        else:
            fixed[spec.name] = float(start.get(spec.name, np.nan))
    if not names:
        raise FitError("no free parameters: every parameter is fixed")
    weight = np.ones_like(data.values) if data.sigma is None else 1.0 / data.sigma
    problem = iv.Problem(model.predict, data.time_s, data.values, weight, names, fixed,
                         np.array(lower, dtype=float), np.array(upper, dtype=float), linear)
    theta0 = np.array([start[n] for n in names], dtype=float)
    theta0 = np.clip(theta0, problem.lower, problem.upper)
    amplitudes = [i for i, is_linear in enumerate(linear) if is_linear]
    if len(amplitudes) == 1 and np.all(np.isfinite(theta0)):
        # Variable projection at the start: the amplitude's best value given the other
        # starting values, so a poor amplitude start (NIST BoxBOD start 1) cannot strand
        # the minimiser on the plateau where exp(-k t) ~ 0.
        theta0[amplitudes[0]] = iv.best_amplitude(problem, theta0, amplitudes[0])
    return problem, theta0


def _lmfit_minimise(problem: iv.Problem, theta0, options: FitOptions):
    """lmfit ``leastsq`` on ``theta / scale`` (see :func:`intervals.parameter_scales`).

    Returns ``(theta, success, message, nfev)``.
    """
    scale = iv.parameter_scales(theta0)
    params = lmfit.Parameters()
    for name, value, lo, hi, s in zip(problem.names, theta0, problem.lower, problem.upper, scale):
        params.add(name, value=float(value / s), min=float(lo / s), max=float(hi / s))

    def residual(p):
        return problem.residual(np.array([p[n].value for n in problem.names]) * scale)

    minimizer = lmfit.Minimizer(residual, params, scale_covar=not options.absolute_sigma)
    max_nfev = options.max_nfev or 2000 * (len(problem.names) + 1)
    outcome = minimizer.minimize(method="leastsq", xtol=options.tol, ftol=options.tol, max_nfev=max_nfev)
    theta = np.array([outcome.params[name].value for name in problem.names]) * scale
    # lmfit's own error-bar remark is about its covariance, which is not the one used here.
    message = re.sub(r"\s*Could not estimate error-bars\.?", "", str(outcome.message)).strip().rstrip(".")
    return theta, bool(outcome.success), message, outcome.nfev


def fit_model(data: ConcentrationData, model: RateModel, *, start=None, fixed=None, bounds=None,
              profile=True, bootstrap=0, rng=None, absolute_sigma=False, tol=1e-10,
              max_nfev=None, warm=False, weighting="none", guardrails=True, progress=None) -> FitResult:
    """Fit ``model`` to all observed series of ``data`` at once (a global fit).

    Parameters
    ----------
    data : ConcentrationData
        ``values`` shape (m, n) with ``m == len(model.species)``; rows match species order.
    model : RateModel
    start : dict, optional
        Starting values (default: the model's guesses from the data).  Giving one for a
        parameter the model holds fixed by default frees it.
    fixed : dict, optional
        Parameters held at the given values.
    bounds : dict name -> (lo, hi), optional
        Overrides the model's bounds.
    profile : bool or sequence of str
        Compute profile-likelihood intervals for all varying parameters (True, default),
        none (False) or the named ones.
    bootstrap : int
        Number of residual-bootstrap refits (0: none); needs ``rng``.
    rng : numpy.random.Generator, optional
    absolute_sigma : bool
        Treat the data sigmas as absolute (covariance not rescaled; chi-square profile).
    tol : float
        xtol/ftol of the minimiser.
    warm : bool
        ``start`` is a previous optimum (see :func:`refit`): go straight to the final
        central-difference least-squares stage, falling back to the full lmfit path if
        that does not converge.
    weighting : {"none", "relative"}
        ``"relative"``: the noise is taken as proportional to the concentration; each point
        is weighted by ``1/max(|f|, 0.01 max|f|)`` with ``f`` the fitted curve, iterated to a
        fixed point (iteratively reweighted least squares; the 1 % floor keeps points near
        zero from taking infinite weight).  Not with sigmas in ``data``.
    guardrails : bool
        Run the checks of :mod:`kinetics.rates.diagnostics` (default True).
    progress : callable (stage, done, total), optional
        Told ``("bootstrap", done, total)`` after each bootstrap refit.

    Returns
    -------
    FitResult
        ``converged`` False (with ``message``) when the minimiser failed, the covariance
        could not be estimated or a guardrail refused the fit; the intervals are then absent.
    """
    if data.values.shape[0] != len(model.species):
        raise FitError(f"model {model.name!r} predicts {len(model.species)} series "
                       f"({', '.join(model.species)}) but the data have {data.values.shape[0]} "
                       f"({', '.join(data.columns)})")
    if int(bootstrap) < 0:
        raise FitError(f"the number of bootstrap refits must be 0 or more, got {bootstrap}")
    if bootstrap and rng is None:
        raise FitError("a bootstrap needs rng=numpy.random.default_rng(seed)")
    if weighting not in ("none", "relative"):
        raise FitError(f"unknown weighting {weighting!r}: use 'none' or 'relative'")
    if not isinstance(profile, bool):
        profile = tuple(profile)
        unknown = [name for name in profile if name not in model.param_names]
        if unknown:
            raise FitError(f"cannot profile {unknown[0]!r}: not a parameter of {model.name!r}")
    options = FitOptions(dict(start or {}), dict(fixed or {}), dict(bounds or {}), profile,
                         int(bootstrap), bool(absolute_sigma), float(tol), max_nfev, bool(warm),
                         weighting, bool(guardrails), progress=progress)
    problem, theta0 = _build_problem(model, data, options)
    n = data.n_points
    p = len(problem.names)
    if n <= p:
        raise FitError(f"{data.source}: {n} points cannot determine {p} free parameters "
                       f"({', '.join(problem.names)})")
    if weighting == "relative":
        weighted, theta0, note = _relative_weights(model, data, problem, theta0, options)
        problem, _ = _build_problem(model, weighted, options)
        result = _finish(model, weighted, problem, theta0, options, rng, [note])
        # The weights are the fit's, not the user's: the record keeps the data as given, so
        # that refit(result, result.data.appended(...)) reweights again.
        return replace(result, data=data)
    return _finish(model, data, problem, theta0, options, rng)


def _relative_weights(model, data, problem, theta0, options):
    """Iteratively reweighted fit for noise proportional to the concentration.

    Returns ``(data with sigma = s_rel max(|f|, 0.01 max|f|), theta, note)``; ``s_rel`` is
    the relative scatter estimated from the last iteration, so that the sigmas are
    concentrations and the reduced chi-square is ~1.
    """
    if data.sigma is not None:
        raise FitError("give either uncertainties (a sigma column) or relative weighting, not both")
    if options.absolute_sigma:
        raise FitError("relative weighting estimates the noise level from the fit: it cannot be absolute")
    theta, _, _, _ = _lmfit_minimise(problem, theta0, options)
    dof = max(data.n_points - len(problem.names), 1)
    for _ in range(8):
        f = problem.model(theta)
        size = np.maximum(np.abs(f), 0.01 * np.max(np.abs(f), axis=1, keepdims=True))
        size = np.where(size > 0, size, 1.0)
        relative = float(np.sqrt(np.sum(((data.values - f) / size) ** 2) / dof)) or 1.0
        problem.weight = 1.0 / (size * relative)
        new, ok = iv.fit_theta(problem, theta, max_nfev=200 * (len(theta) + 1), tol=1e-12)
        if not ok or not np.all(np.isfinite(new)):
            break
        change = np.max(np.abs(new - theta) / np.maximum(np.abs(theta), 1e-300))
        theta = new
        if change < 1e-7:
            break
    f = problem.model(theta)
    size = np.maximum(np.abs(f), 0.01 * np.max(np.abs(f), axis=1, keepdims=True))
    size = np.where(size > 0, size, 1.0)
    relative = float(np.sqrt(np.sum(((data.values - f) / size) ** 2) / dof)) or 1.0
    weighted = replace(data, sigma=size * relative)
    note = dg.Guardrail("weighting_relative", f"weighted for noise proportional to the concentration: "
                        f"relative scatter {100 * relative:.2g} % of the fitted value", dg.NOTE,
                        {"relative_scatter": relative})
    return weighted, theta, note


def _finish(model, data, problem, theta0, options, rng, notes=(), depth=0) -> FitResult:
    n, p = data.n_points, len(problem.names)
    dof = n - p
    messages = []
    found = list(notes) + dg.from_messages(data.warnings, "data") + list(data.notes)
    is_rate_model = model.name in MODELS or model.name == "mechanism"
    if options.guardrails and is_rate_model:
        found += dg.check_direction(model.name, model.species, data.columns, data.time_s, data.values)
        found += dg.check_time_origin(data.time_s, data.source)
    warm = None
    if options.warm:
        # From a nearby optimum 1e-12 already lands within ~1e-9 relative of the cold fit;
        # 1e-15 would spend more evaluations than the cold fit itself.
        warm = iv.fit_theta(problem, theta0, max_nfev=100 * (p + 1), tol=1e-12, jac="3-point", full=True)
        if not warm[1]:
            warm = None
    jacobian = None
    if warm is not None:
        theta, _, jacobian = warm
        converged = True
        messages.append("warm start from the previous optimum: converged")
    else:
        theta, success, lm_message, nfev = _lmfit_minimise(problem, theta0, options)
        converged = success and np.all(np.isfinite(theta))
        messages.append("minimiser: " + lm_message)
        budget = options.max_nfev or 2000 * (p + 1)
        if not success and nfev >= budget:
            messages.append(f"stopped after using its budget of {budget} model evaluations "
                            "(better --start values may help)")
    residual = problem.residual(theta).reshape(data.values.shape)
    chi_square = float(np.sum(residual**2))
    converged = converged and np.isfinite(chi_square)
    covariance = None
    if converged and warm is not None:
        scale = 1.0 if options.absolute_sigma else (chi_square / dof if dof > 0 else np.nan)
        covariance = iv.covariance_from_jacobian(jacobian, scale)
    elif converged:
        # Polish with central differences: MINPACK's forward-difference Jacobian leaves the
        # optimum uncertain at ~1e-6 relative when residuals are large (NIST BoxBOD).
        polished, ok, jacobian = iv.fit_theta(problem, theta, max_nfev=100 * (p + 1), tol=1e-15,
                                              jac="3-point", full=True)
        if ok and problem.ssq(polished) <= problem.ssq(theta):
            theta = polished
        else:
            jacobian = iv.fit_theta(problem, theta, max_nfev=1, jac="3-point", full=True)[2]
        residual = problem.residual(theta).reshape(data.values.shape)
        chi_square = float(np.sum(residual**2))
        scale = 1.0 if options.absolute_sigma else (chi_square / dof if dof > 0 else np.nan)
        covariance = iv.covariance_from_jacobian(jacobian, scale)
    if covariance is not None:
        if not np.all(np.isfinite(covariance)) or np.any(np.diag(covariance) <= 0):
            covariance = None
    n_evaluations = problem.calls  # minimiser + polish, before any interval work
    at_bound = [bool(np.isclose(v, lo, rtol=1e-9, atol=1e-300) or np.isclose(v, hi, rtol=1e-9))
                for v, lo, hi in zip(theta, problem.lower, problem.upper)]
    if options.guardrails and is_rate_model:
        rates = [theta[i] for i in dg.rate_indices(problem, model)]
        span = float(data.time_s[-1] - data.time_s[0])
        found += dg.check_no_change(model.name, model.species, data.columns, data.time_s, data.values,
                                    rates, span)
    refusals = [g for g in found if g.severity == dg.REFUSE]
    if refusals and converged:
        converged = False
        covariance = None
        messages.append("refused: " + refusals[0].message.split(":")[0])
    if covariance is None and converged:
        converged = False
        stuck = [name for name, b in zip(problem.names, at_bound) if b]
        if chi_square == 0.0:
            messages.append("the model passes exactly through the data: no scatter to estimate "
                            "uncertainties from")
        else:
            messages.append("the covariance could not be estimated"
                            + (f" ({', '.join(stuck)} at a bound)" if stuck else
                               " (parameters not identifiable from these data?)"))
    elif any(at_bound) and not refusals:
        found.append(dg.Guardrail(
            "at_bound", "at a bound: " + ", ".join(n_ for n_, b in zip(problem.names, at_bound) if b)
            + "; its interval is one-sided or meaningless"))
    stderr = np.sqrt(np.diag(covariance)) if covariance is not None else np.full(p, np.nan)
    correlation = None
    if covariance is not None:
        correlation = covariance / np.outer(stderr, stderr)
        eigenvalues, eigenvectors = np.linalg.eigh(correlation)
        if eigenvalues[0] < 1e-10:
            # A (numerically) singular correlation matrix: some combination of parameters
            # leaves the curve unchanged, so their values and stderrs mean nothing.
            involved = [name for name, w in zip(problem.names, eigenvectors[:, 0]) if abs(w) > 0.1]
            converged = False
            messages.append(f"parameters {', '.join(involved)} are not separately identifiable from "
                            "these data (correlation matrix singular); fix one of them or observe more species")
    threshold = iv.profile_threshold(chi_square, dof, options.absolute_sigma) if dof > 0 else np.inf
    if converged and options.guardrails and is_rate_model:
        equivalent, better = dg.multistart(problem, theta, stderr, threshold, model)
        if better is not None and depth < 3:
            log.info("multi-start found a lower sum of squares; refitting from there")
            return _finish(model, data, problem, better, replace(options, warm=False), rng, notes, depth + 1)
        found += dg.multistart_guardrail(problem, theta, equivalent, data.columns, model)
    profiles = [None] * p
    if converged and options.profile and chi_square > 0:
        wanted = problem.names if options.profile is True else list(options.profile)
        for i in (i for i, name in enumerate(problem.names) if name in wanted):
            profiles[i] = iv.profile_interval(problem, theta, i, stderr[i], threshold, s_min=chi_square,
                                              covariance=covariance)
            if not all(np.isfinite(profiles[i])):
                found.append(dg.Guardrail(
                    "profile_open", f"profile of {problem.names[i]} does not close on one side: "
                    "the data do not bound it", dg.WARNING, {"parameter": problem.names[i]}))
    boots = [None] * p
    failed = 0
    if converged and options.bootstrap:
        samples, failed = iv.bootstrap_samples(problem, theta, options.bootstrap, rng, dof,
                                               progress=options.progress)
        if len(samples) >= 20:
            lo, hi = np.percentile(samples, [2.5, 97.5], axis=0)
            boots = [(float(a), float(b)) for a, b in zip(lo, hi)]
        if failed:
            found.append(dg.Guardrail("bootstrap_failed",
                                      f"{failed} of {options.bootstrap} bootstrap refits failed"))
    estimates = []
    specs = {s.name: s for s in model.params}
    for spec in model.params:
        if spec.name in problem.names:
            i = problem.names.index(spec.name)
            se = float(stderr[i]) if np.isfinite(stderr[i]) else None
            estimates.append(ParameterEstimate(
                spec.name, float(theta[i]), se, spec.unit, True,
                iv.covariance_interval(theta[i], se, dof, absolute_sigma=options.absolute_sigma,
                                       lower=problem.lower[i], upper=problem.upper[i])
                if se is not None and converged else None,
                profiles[i], boots[i], at_bound[i]))
        else:
            estimates.append(ParameterEstimate(spec.name, problem.fixed[spec.name], None,
                                               specs[spec.name].unit, False))
    k_params = p + 1
    log_term = n * math.log(chi_square / n) if chi_square > 0 else -math.inf
    aic = log_term + 2 * k_params
    aicc = aic + (2 * k_params * (k_params + 1) / (n - k_params - 1) if n - k_params - 1 > 0 else math.inf)
    bic = log_term + k_params * math.log(n)
    runs, expected, z, runs_p = dg.runs_test_exact(residual)
    diagnostics = ResidualDiagnostics(runs, expected, z, runs_p, iv.lag1_autocorrelation(residual))
    fitted = problem.model(theta)
    if converged and options.guardrails:
        found += dg.check_runs(runs, expected, runs_p)
        found += dg.check_noise(residual, fitted, jacobian, weighted=data.sigma is not None and not notes,
                                weighting=options.weighting)
        found += dg.check_outliers(residual, jacobian, dof, data.point_labels())
    message = "; ".join(m for m in messages if m)
    if not converged:
        log.warning("fit of %s did not converge: %s", model.name, message)
    found = list({(g.code, g.message): g for g in found}.values())
    return FitResult(
        model.name, model.description, tuple(estimates), tuple(problem.names), covariance, correlation,
        chi_square, chi_square / dof if dof > 0 else math.nan, aic, aicc, bic, n, dof, bool(converged),
        message, diagnostics, data.time_s, data.values, fitted, residual, model.species,
        data.columns, data.source, n_evaluations, tuple(g.message for g in found), failed, model, data,
        options, tuple(found))


# ---------------------------------------------------------------- convenience entry points
def fit_law(data: ConcentrationData, name: str, observed="reactant", **options) -> FitResult:
    """Fit the registered law ``name`` (see :data:`kinetics.rates.laws.MODELS`).

    ``observed`` as in :func:`kinetics.rates.laws.get_model`; ``options`` as in
    :func:`fit_model`.
    """
    return fit_model(data, get_model(name, observed), **options)


def fit_mechanism(data: ConcentrationData, text, observed=None, initial=None, fit_initial=(),
                  method="LSODA", rtol=1e-8, **options) -> FitResult:
    """Fit a written mechanism; ``observed`` defaults to the data's column names.

    Parameters are the rate names of the mechanism and ``c0_<species>``; see
    :func:`kinetics.rates.mechanism.mechanism_model` for which are fitted by default.
    """
    from kinetics.rates.mechanism import mechanism_model

    model = mechanism_model(text, observed or data.columns, initial, fit_initial, method, rtol)
    return fit_model(data, model, **options)


def fit_function(x, y, func: Callable, start: Mapping, *, sigma=None, units=None, bounds=None,
                 fixed=None, profile=True, bootstrap=0, rng=None, absolute_sigma=False, tol=1e-10,
                 name="function") -> FitResult:
    """Fit any ``func(x, **params) -> y`` by least squares with the same machinery.

    ``x`` need not be time (Arrhenius: 1/T); it is not checked for order.  ``start`` gives
    every parameter (its keys define the parameters); ``units`` an optional name -> unit map.
    """
    x = np.asarray(x, dtype=float).ravel()
    y = np.asarray(y, dtype=float).ravel()
    if x.shape != y.shape or x.size == 0:
        raise FitError(f"x and y must have the same non-zero length, got {x.size} and {y.size}")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise FitError("x and y must be finite numbers")
    s = None if sigma is None else np.asarray(sigma, dtype=float).reshape(1, -1)
    if s is not None and (s.shape[1] != x.size or np.any(~(s > 0))):
        raise FitError("sigma must be positive, one per point")
    names = list(start)
    units = dict(units or {})
    specs = tuple(ParamSpec(n, units.get(n, "")) for n in names)
    model = RateModel(name, specs, ("y",), lambda t, v: np.asarray(func(t, **{k: v[k] for k in names}))[None, :],
                      lambda t, yy: dict(start), description=f"user function {name}")
    data = ConcentrationData(x, y[None, :], s, ("y",), "<arrays>")
    if data.n_points <= len(names) - len(fixed or {}):
        raise FitError(f"{data.n_points} points cannot determine {len(names)} parameters")
    return fit_model(data, model, start=start, fixed=fixed, bounds=bounds, profile=profile,
                     bootstrap=bootstrap, rng=rng, absolute_sigma=absolute_sigma, tol=tol)


def refit(previous: FitResult, data: ConcentrationData, *, profile=None) -> FitResult:
    """Refit ``previous``'s model to ``data`` (e.g. more points) starting from its optimum.

    Fixed values and bounds carry over; ``profile`` defaults to the previous choice; no
    bootstrap (call :func:`fit_model` for that).
    """
    if previous.model is None:
        raise FitError("the previous result carries no model to refit")
    start = {name: previous.values[name] for name in previous.varying}
    opts = previous.options
    return fit_model(data, previous.model, start=start, fixed=opts.fixed, bounds=opts.bounds,
                     profile=opts.profile if profile is None else profile, bootstrap=0,
                     absolute_sigma=opts.absolute_sigma, tol=opts.tol, max_nfev=opts.max_nfev, warm=True,
                     weighting=opts.weighting, guardrails=opts.guardrails)


def fit_arrays(time_s, values, model: RateModel | str, observed="reactant", sigma=None, **options) -> FitResult:
    """Shortcut: validate arrays (:func:`kinetics.rates.table.from_arrays`) and fit."""
    data = from_arrays(time_s, values, sigma)
    if isinstance(model, str):
        model = get_model(model, observed)
    return fit_model(data, model, **options)
