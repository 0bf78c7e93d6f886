"""Variable Time Normalization Analysis (Burés, Angew. Chem. Int. Ed. 2016, 55, 16084; for the
order in the catalyst, Angew. Chem. Int. Ed. 2016, 55, 2028).

Idea: if ``-d[A]/dt = k [A]^a [B]^b [cat]^c``, then against the normalised time
``tau = int_0^t [B]^b [cat]^c dt'`` every run's ``[A]`` follows the same curve ``dA/dtau =
-k [A]^a``, whatever its ``[B]0`` or loading, when (and only when) ``b`` and ``c`` are right.
The integral is the trapezoid rule over the measured ``[B]`` (starting from the design
``[B]0`` at ``t = 0``), or, when ``[B]`` is not measured, over its course by mass balance
from ``[A]`` and the stoichiometry; a species that is not measured (the catalyst) enters as its constant
concentration, ``[cat]^c t``.

Overlay score (defined here): the weighted residual sum of squares of ONE cubic spline
(:func:`kinetics.campaign.smoothing.shared_spline`, uniform knots on ``tau / tau_max``) fitted
through all runs' ``([A], tau)`` points; the orders minimise it.  Automatic search: a grid
over each order's range (the best grid point) then bounded 1-D refinement of each order in
turn (Brent, ``scipy.optimize.minimize_scalar``) until the orders settle.

Uncertainty: the overlay is a regression ``[A]_ij = g(tau_ij(orders)) + e``, so the 95 %
interval of an order is where its profiled score stays below ``S_min (1 + t^2_{0.975,dof}/dof)``
(the threshold of :func:`kinetics.rates.intervals.profile_threshold`), the other orders
re-optimised.  It assumes independent noise on ``[A]`` and neglects the noise of the measured
``[B]`` inside ``tau``; :func:`bootstrap_orders` (resampling whole points within each run with
a ``numpy.random.Generator``) is the check that does not rely on that.

Requirement: the runs compared share ``[A]0`` (different-excess runs), as in the published
method; a note is returned when they do not.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
from scipy import integrate, optimize

from kinetics.campaign.design import CampaignRun, check_campaign
from kinetics.campaign.smoothing import shared_spline
from kinetics.errors import ConfigError, FitError
from kinetics.rates import intervals as iv

DEFAULT_RANGE = (-1.0, 3.0)
GRID_POINTS = 17


@dataclass(frozen=True, eq=False)
class VtnaResult:
    """Orders found by VTNA.

    Attributes
    ----------
    observed : str
        The species plotted (``[A]``).
    orders : Mapping species -> float
    intervals : Mapping species -> (lo, hi)
        95 % profile intervals (NaN edge: the score does not rise enough there).
    score : float
        Overlay score at the orders (weighted RSS of the shared curve).
    dof : int
    grid : Mapping species -> (orders array, profiled score array)
        The score along each order (for the figure).
    normalised_time : Mapping label -> ndarray
        ``tau`` of each run at the orders.
    notes : tuple of str
    """

    observed: str
    orders: Mapping
    intervals: Mapping
    score: float
    dof: int
    grid: Mapping
    normalised_time: Mapping
    labels: tuple
    notes: tuple = ()
    catalyst: str = "cat"
    curve: object = field(default=None, repr=False)

    def to_dict(self) -> dict:
        return {"observed": self.observed, "orders": dict(self.orders),
                "ci95": {k: list(v) for k, v in self.intervals.items()},
                "score": self.score, "dof": self.dof, "notes": list(self.notes)}


def derived_course(run: CampaignRun, species: str, observed: str, stoichiometry: Mapping):
    """Course of an unmeasured ``species`` from the measured ``[observed]`` by mass balance.

    ``[X](t) = [X]0 + (nu_X / nu_A) ([A](t) - [A]0)`` with ``nu`` the stoichiometric
    coefficients (``nu_A`` defaults to -1, the reactant).  Assumes one reaction, no
    intermediate holding material, and the design ``[X]0``/``[A]0`` (``[A]0`` the first
    measured value when not given).  None when ``species`` has no coefficient, no ``[X]0``
    or ``[observed]`` is not measured.
    """
    nu_x = stoichiometry.get(species)
    x0 = run.initial(species)
    if not nu_x or x0 is None or observed not in run.observed_mol_per_l:
        return None
    a = np.asarray(run.observed_mol_per_l[observed], dtype=float)
    a0 = float(run.initial(observed, float(a[0])))
    nu_a = float(stoichiometry.get(observed) or -1.0)
    return float(x0) + (float(nu_x) / nu_a) * (a - a0)


def normalised_time(run: CampaignRun, orders: Mapping, catalyst: str = "cat", *, observed: str | None = None,
                    stoichiometry: Mapping | None = None) -> np.ndarray:
    """``tau(t) = int_0^t prod_X [X]^{n_X} dt'`` at the run's times (trapezoid rule).

    A species measured in the run uses its measured course, starting at its design initial
    concentration at ``t = 0`` (or, without one, the first measured value).  A species not
    measured but consumed with ``observed`` (a coefficient in ``stoichiometry``) uses its
    course by mass balance (:func:`derived_course`) -- a co-reactant is used up during
    the run, and taking it as constant ``[X]0`` biases its order.  The catalyst
    (``catalyst``) and other species not measured use their constant concentration.
    """
    t = np.concatenate([[0.0], run.time_s]) if run.time_s[0] > 0 else np.asarray(run.time_s)
    integrand = np.ones_like(t)
    for species, order in orders.items():
        if species == catalyst:
            if run.catalyst_mol_per_l is None:
                raise ConfigError(f"runs.{run.label}.catalyst_mol_per_l", "VTNA in the catalyst needs the loading")
            integrand = integrand * float(run.catalyst_mol_per_l) ** order
        elif species in run.observed_mol_per_l or (
                observed is not None and stoichiometry
                and derived_course(run, species, observed, stoichiometry) is not None):
            course = run.observed_mol_per_l.get(species)
            if course is None:
                course = derived_course(run, species, observed, stoichiometry)
            measured = np.maximum(course, 0.0)
            if t.size > run.time_s.size:
                start = run.initial(species, float(measured[0]))
                measured = np.concatenate([[start], measured])
            with np.errstate(divide="ignore"):
                # a species used up (measured 0) contributes nothing more for a positive order
                integrand = integrand * np.where(measured > 0, measured ** order, 0.0 if order > 0 else np.inf)
        else:
            value = run.initial(species)
            if value is None:
                raise ConfigError(f"runs.{run.label}.initial.{species}", f"VTNA in {species!r} needs its measured "
                                  "course or its (constant) concentration")
            integrand = integrand * float(value) ** order
    tau = integrate.cumulative_trapezoid(integrand, t, initial=0.0)
    return tau[1:] if t.size > run.time_s.size else tau


class _Score:
    def __init__(self, runs, observed, species, catalyst, n_interior, stoichiometry=None):
        self.runs, self.observed, self.species, self.catalyst = runs, observed, tuple(species), catalyst
        self.stoichiometry = dict(stoichiometry or {})
        self.n_interior = n_interior
        self.y = np.concatenate([run.observed_mol_per_l[observed] for run in runs])
        sigmas = [run.sigma(observed) for run in runs]
        self.weighted = all(s is not None for s in sigmas)
        self.w = np.concatenate([1.0 / s for s in sigmas]) if self.weighted else np.ones_like(self.y)
        self.n_coef = n_interior + 4

    def taus(self, values):
        orders = dict(zip(self.species, values))
        return [normalised_time(run, orders, self.catalyst, observed=self.observed, stoichiometry=self.stoichiometry)
                for run in self.runs]

    def __call__(self, values):
        try:
            taus = self.taus(values)
            x = np.concatenate(taus)
            if not np.all(np.isfinite(x)):
                return math.inf
            x = x / x.max()
            spline, rss, self.n_coef = shared_spline(x, self.y, self.w, self.n_interior)
        except (FitError, FloatingPointError, ValueError, ZeroDivisionError):
            return math.inf
        return rss


def _minimise(score, start, bounds, free, tol=1e-4, rounds=6):
    """Coordinate-wise bounded Brent over the ``free`` indices from ``start``."""
    values = np.array(start, dtype=float)
    best = score(values)
    for _ in range(rounds):
        previous = values.copy()
        for i in free:
            def along(v, i=i):
                trial = values.copy()
                trial[i] = v
                return score(trial)
            lo, hi = bounds
            step = (hi - lo) / (GRID_POINTS - 1)  # one grid step either side of the current value
            a, b = max(lo, values[i] - step), min(hi, values[i] + step)
            found = optimize.minimize_scalar(along, bounds=(a, b), method="bounded", options={"xatol": tol})
            if found.fun < best:
                values[i], best = float(found.x), float(found.fun)
        if np.max(np.abs(values - previous)) < tol:
            break
    return values, best


def vtna(runs: Sequence[CampaignRun], species: Sequence[str], observed: str = "A", *,
         order_range=DEFAULT_RANGE, catalyst: str = "cat", n_interior: int = 6, intervals: bool = True,
         stoichiometry: Mapping | None = None) -> VtnaResult:
    """Automatic VTNA search for the orders in ``species`` (see the module docstring).

    Parameters
    ----------
    runs : at least two runs that differ in the species analysed and share ``[observed]0``
    species : the components whose orders are sought (a measured co-reactant, the catalyst)
    observed : the species whose course is overlaid (every run must measure it)
    order_range : (lo, hi) searched for each order
    stoichiometry : species -> coefficient (-1 consumed 1:1 with ``observed``); a co-reactant
        that is not measured follows ``observed`` by mass balance (see :func:`normalised_time`)
    """
    runs = check_campaign(runs, min_runs=2)
    species = tuple(species)
    if not species:
        raise ConfigError("vtna.species", "name at least one component whose order is sought")
    for run in runs:
        if observed not in run.observed_mol_per_l:
            raise ConfigError(f"runs.{run.label}", f"VTNA overlays [{observed}] but this run does not measure it",
                              hint="observed: " + ", ".join(run.observed_mol_per_l))
    notes = []
    starts = [run.initial(observed, float(run.observed_mol_per_l[observed][0])) for run in runs]
    if max(starts) > 1.05 * min(starts):
        notes.append(f"the runs start at different [{observed}]0 ({min(starts):.3g} to {max(starts):.3g} mol/L): "
                     "VTNA overlays runs that share it; compare like runs (different excess) for a clean answer")
    stoichiometry = dict(stoichiometry or {})
    for name in species:
        if name == catalyst or any(name in run.observed_mol_per_l for run in runs):
            continue
        if any(derived_course(run, name, observed, stoichiometry) is None for run in runs):
            notes.append(f"[{name}] is not measured and has no stoichiometric coefficient: it enters tau as its "
                         f"constant initial concentration, which biases its order if it is consumed")
    score = _Score(runs, observed, species, catalyst, n_interior, stoichiometry)
    grid_axis = np.linspace(order_range[0], order_range[1], GRID_POINTS)
    mesh = np.array(np.meshgrid(*[grid_axis] * len(species), indexing="ij")).reshape(len(species), -1).T
    if mesh.shape[0] > 2000:
        raise ConfigError("vtna.species", f"{len(species)} orders at once is too many for the grid search",
                          hint="search at most three orders together")
    scores = np.array([score(point) for point in mesh])
    if not np.any(np.isfinite(scores)):
        raise FitError("no order on the grid gives an overlay score: check the runs' data")
    start = mesh[int(np.argmin(scores))]
    free = list(range(len(species)))
    best, s_min = _minimise(score, start, order_range, free)
    n = score.y.size
    dof = max(n - score.n_coef - len(species), 1)
    threshold = iv.profile_threshold(s_min, dof, absolute_sigma=False)

    def profiled(i, value):
        values = best.copy()
        values[i] = value
        others = [j for j in free if j != i]
        if not others:
            return score(values)
        return _minimise(score, values, order_range, others, tol=1e-3, rounds=3)[1]

    found_intervals, grids = {}, {}
    for i, name in enumerate(species):
        along = np.linspace(order_range[0], order_range[1], 33)
        curve = np.array([profiled(i, v) for v in along]) if intervals else np.array([])
        grids[name] = (along, curve)
        if not intervals:
            continue
        edges = []
        for direction in (-1, 1):
            inner, edge = best[i], math.nan
            outer_points = along[along < best[i]][::-1] if direction < 0 else along[along > best[i]]
            outer_scores = curve[along < best[i]][::-1] if direction < 0 else curve[along > best[i]]
            for value, s in zip(outer_points, outer_scores):
                if s > threshold:
                    try:
                        edge = optimize.brentq(lambda v: profiled(i, v) - threshold, inner, value, xtol=1e-4)
                    except ValueError:
                        edge = value
                    break
                inner = value
            edges.append(float(edge))
        found_intervals[name] = tuple(edges)
    orders = dict(zip(species, map(float, best)))
    taus = {run.label: tau for run, tau in zip(runs, score.taus(best))}
    x = np.concatenate(list(taus.values()))
    spline, _, _ = shared_spline(x / x.max(), score.y, score.w, n_interior)
    return VtnaResult(observed, orders, found_intervals, float(s_min), int(dof), grids, taus,
                      tuple(run.label for run in runs), tuple(notes), catalyst,
                      (float(x.max()), spline))


def bootstrap_orders(runs, species, observed="A", *, rng: np.random.Generator, n_samples: int = 50,
                     order_range=DEFAULT_RANGE, catalyst="cat", stoichiometry=None) -> np.ndarray:
    """Orders refound on ``n_samples`` resamples (points drawn with replacement within each run,
    kept in time order); shape ``(n_ok, len(species))``.  Percentiles give an interval that
    does not assume independent Gaussian noise."""
    runs = check_campaign(runs, min_runs=2)
    samples = []
    for _ in range(n_samples):
        resampled = []
        for run in runs:
            picks = np.unique(rng.integers(0, run.n_points, size=run.n_points))
            if picks.size < 4:
                picks = np.arange(run.n_points)
            resampled.append(CampaignRun(
                run.label, run.time_s[picks], {k: v[picks] for k, v in run.observed_mol_per_l.items()},
                {k: v[picks] for k, v in run.sigma_mol_per_l.items()}, dict(run.initial_mol_per_l),
                run.catalyst_mol_per_l, run.temperature_kelvin, dict(run.factors), run.source))
        try:
            found = vtna(resampled, species, observed, order_range=order_range, catalyst=catalyst, intervals=False,
                         stoichiometry=stoichiometry)
        except FitError:
            continue
        samples.append([found.orders[s] for s in species])
    return np.array(samples).reshape(-1, len(tuple(species)))
