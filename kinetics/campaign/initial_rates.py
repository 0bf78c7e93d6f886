"""Initial rates and the orders they give (the method of initial rates).

Initial rate of a run: a polynomial in time (degree 1, or 2 to absorb the first curvature)
fitted by weighted least squares to the points up to ``max_conversion`` (10 % by default,
common practice) of the reference species; the rate is the slope at ``t = 0``,
``r0 = -c'(0)`` for a reactant and ``+c'(0)`` for a product, with its standard error from
the covariance (scaled by the reduced chi-square unless the sigmas are taken as known).
A straight line through a curving start underestimates ``r0`` by about half the conversion
covered (first order: ~5 % at 10 %); the quadratic removes that bias at the cost of a wider
interval.

Orders: ``ln r0 = ln k + sum_j n_j ln x_j`` over the runs, ``x_j`` the design factors
(initial concentrations, the catalyst loading), fitted by weighted least squares with
weights ``(r0/sigma_r0)^2`` (the variance of ``ln r0`` is ``(sigma/r0)^2`` to first order).
Intervals: Student t with ``n_runs - p`` degrees of freedom on the covariance scaled by the
reduced chi-square (the spread between runs also carries the errors of making up each
solution, which the per-run sigmas do not know).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np

from kinetics.campaign.design import CampaignRun, check_campaign, varied_factors
from kinetics.errors import ConfigError, FitError
from kinetics.rates import intervals as iv
from kinetics.rates.fit import ParameterEstimate

MAX_CONVERSION = 0.10


@dataclass(frozen=True)
class InitialRate:
    """The initial rate of one run (mol L^-1 s^-1), its standard error and the points used."""

    label: str
    rate_mol_per_l_s: float
    stderr: float
    n_points: int
    degree: int
    conversion_covered: float
    intercept_mol_per_l: float


def initial_rate(run: CampaignRun, species: str = "A", *, role: str = "reactant",
                 max_conversion: float = MAX_CONVERSION, degree: int = 1) -> InitialRate:
    """Initial rate of ``run`` from the first ``max_conversion`` of ``species``.

    The conversion is measured against the design initial concentration of the reactant
    (``initial_mol_per_l``), or the first point when none is given; for a product,
    against the reactant's initial concentration given by ``run.initial('A')``.
    """
    if species not in run.observed_mol_per_l:
        raise ConfigError(f"runs.{run.label}", f"initial rates need the course of {species!r}")
    if degree not in (1, 2):
        raise ConfigError("initial_rates.degree", f"{degree!r}: use 1 (straight line) or 2 (quadratic)")
    if role not in ("reactant", "product"):
        raise ConfigError("initial_rates.role", f"{role!r}: use 'reactant' or 'product'")
    t = run.time_s
    y = run.observed_mol_per_l[species]
    sigma = run.sigma(species)
    if role == "reactant":
        c0 = run.initial(species, float(y[0]))
        converted = (c0 - y) / c0 if c0 > 0 else np.zeros_like(y)
    else:
        reference = [v for k, v in run.initial_mol_per_l.items() if v > 0 and k != species]
        c0 = run.initial("A", reference[0] if reference else float(np.max(y)))
        converted = (y - run.initial(species, 0.0)) / c0 if c0 > 0 else np.zeros_like(y)
    # points up to the first one past the limit (noise can push single points above it)
    beyond = np.nonzero(converted > max_conversion)[0]
    last = int(beyond[0]) if beyond.size else t.size
    need = degree + 3
    if last < need:
        raise FitError(f"run {run.label}: only {last} point(s) before {max_conversion:.0%} conversion, "
                       f"{need} needed for a degree-{degree} initial rate; record the start more densely "
                       "or allow a larger conversion (max_conversion)")
    ts, ys = t[:last], y[:last]
    w = np.ones_like(ts) if sigma is None else 1.0 / sigma[:last]
    scale_t = float(ts[-1]) or 1.0
    x = np.vander(ts / scale_t, degree + 1, increasing=True)
    a = x * w[:, None]
    coef, *_ = np.linalg.lstsq(a, ys * w, rcond=None)
    r = (ys - x @ coef) * w
    dof = ts.size - degree - 1
    s2 = float(r @ r) / dof
    cov = np.linalg.inv(a.T @ a) * (s2 if sigma is None else max(s2, 1.0))
    slope = coef[1] / scale_t
    se = math.sqrt(cov[1, 1]) / scale_t
    rate = -slope if role == "reactant" else slope
    return InitialRate(run.label, float(rate), float(se), int(ts.size), degree,
                       float(converted[last - 1]), float(coef[0]))


@dataclass(frozen=True, eq=False)
class InitialRateOrders:
    """Orders from a log-log regression of initial rates on design factors."""

    factors: tuple
    orders: tuple  # ParameterEstimate per factor, named order_<factor>
    ln_k: ParameterEstimate
    dof: int
    reduced_chi_square: float
    rates: tuple  # InitialRate per run used
    design: np.ndarray  # (n_runs, n_factors) factor values

    def order(self, factor: str) -> ParameterEstimate:
        return self.orders[self.factors.index(factor)]

    def to_dict(self) -> dict:
        return {"orders": {f: o.to_dict() for f, o in zip(self.factors, self.orders)},
                "ln_k": self.ln_k.to_dict(), "dof": self.dof, "reduced_chi_square": self.reduced_chi_square,
                "rates": [{"run": r.label, "rate_mol_per_l_s": r.rate_mol_per_l_s, "stderr": r.stderr}
                          for r in self.rates]}


def orders_from_initial_rates(runs: Sequence[CampaignRun], factors: Sequence[str], species: str = "A",
                              rates: Sequence[InitialRate] | None = None, **rate_options) -> InitialRateOrders:
    """Fit ``ln r0 = ln k + sum n_j ln x_j`` (see the module docstring).

    ``factors`` are names understood by :meth:`CampaignRun.factor` (a species' initial
    concentration, ``catalyst``, a named factor); each must vary between the runs.
    """
    runs = check_campaign(runs, min_runs=2)
    factors = tuple(factors)
    varied = varied_factors(runs, factors)
    for name in factors:
        if not varied[name]:
            raise ConfigError(f"initial_rates.factors.{name}", "this factor has the same value in every run, so "
                              "no order can be found for it", hint="vary it between runs or leave it out")
    if rates is None:
        rates = [initial_rate(run, species, **rate_options) for run in runs]
    rates = tuple(rates)
    design = np.array([[run.factor(name) for name in factors] for run in runs], dtype=float)
    for i, run in enumerate(runs):
        for j, name in enumerate(factors):
            if not (design[i, j] > 0):
                raise ConfigError(f"runs.{run.label}.{name}", f"{name} is {design[i, j]!r}: a log-log regression "
                                  "needs a positive value in every run")
    r0 = np.array([r.rate_mol_per_l_s for r in rates])
    se = np.array([r.stderr for r in rates])
    bad = [r for r in rates if not r.rate_mol_per_l_s > 0]
    if bad:
        raise FitError(f"run {bad[0].label}: the initial rate is not positive ({bad[0].rate_mol_per_l_s:.3g}); "
                       "check the species and its role, or the start of that run")
    p = len(factors) + 1
    dof = len(runs) - p
    if dof < 1:
        raise FitError(f"{len(runs)} runs for {p} parameters (ln k and {len(factors)} order(s)): add runs")
    w = r0 / np.where(se > 0, se, np.inf)
    w = np.where(np.isfinite(w) & (w > 0), w, 1.0)
    x = np.hstack([np.ones((len(runs), 1)), np.log(design)])
    y = np.log(r0)
    a = x * w[:, None]
    coef, *_ = np.linalg.lstsq(a, y * w, rcond=None)
    resid = (y - x @ coef) * w
    chi2_red = float(resid @ resid) / dof
    cov = np.linalg.inv(a.T @ a) * chi2_red
    stderr = np.sqrt(np.diag(cov))
    estimates = []
    for j in range(p):
        interval = iv.covariance_interval(coef[j], stderr[j], dof)
        name = "ln_k" if j == 0 else f"order_{factors[j - 1]}"
        estimates.append(ParameterEstimate(name, float(coef[j]), float(stderr[j]), "1", True, interval))
    return InitialRateOrders(factors, tuple(estimates[1:]), estimates[0], dof, chi2_red, rates, design)
