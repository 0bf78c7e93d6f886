"""Reaction Progress Kinetic Analysis (Blackmond, Angew. Chem. Int. Ed. 2005, 44, 4302).

Rates come from the concentration courses themselves (a smoothed derivative,
:func:`kinetics.campaign.smoothing.smooth_derivative`), so a whole run gives rate against
composition without assuming a rate law.

Same excess
-----------
Two runs with the same excess ``e = [B]0 - [A]0`` (for ``A + B -> P``) pass through the same
``([A], [B])`` compositions; the later-started run (smaller ``[A]0``) begins where the first
run is after it has consumed ``[A]0,1 - [A]0,2``.  Without catalyst deactivation or product
inhibition both runs have the same rate at the same ``[A]``: shifted in time, the later run
lies on the earlier one.  The quantitative test (defined here): a shared curve ``g`` (cubic
spline with uniform knots) through the earlier run, ``[A]_1(t) = g(t)``, and the later run
mapped onto it as ``[A]_2(t) = g(delta + f t)``.  ``f`` is the later run's rate relative to the
earlier one at the same composition (1 when they overlay).  The extra-sum-of-squares F test
of ``f = 1`` (shift only) against ``f`` free gives ``p``; the pair is flagged when
``p < P_FLAG`` and ``|f - 1| > MIN_EFFECT`` (a difference too small to matter is not
reported).  The run that is slower at the same composition is named: the earlier run when
its catalyst lost activity or the product it made inhibits; the later run when its
catalyst or a reagent batch differs.  A run of the same design as the later one but with
product added (``[P]0 = [A]0,1 - [A]0,2``) separates the two causes: it overlays under
product inhibition and does not under deactivation (:func:`diagnose`).

Different excess
----------------
Runs with different excess at the same ``[A]`` differ only in ``[B]``: at fixed ``[A]``,
``ln rate = const + b ln [B]``; :func:`different_excess_order` pools that regression over
a grid of ``[A]`` values inside every run's range (one intercept per grid value).  The
interval is Student-t from the pooled regression; the smoothed rates at nearby ``[A]`` are
correlated, so it is indicative (the global fit gives the calibrated one).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
from scipy import optimize, stats

from kinetics.campaign.design import CampaignRun, check_campaign
from kinetics.campaign.smoothing import design_matrix, smooth_derivative, uniform_knots
from kinetics.errors import ConfigError, FitError
from kinetics.rates import intervals as iv

P_FLAG = 0.01          # F-test level at which a pair is said not to overlay
MIN_EFFECT = 0.10      # smallest relative rate difference worth reporting (chosen here)
EXCESS_REL_TOL = 0.05  # excesses within 5 % of the larger count as "same"


@dataclass(frozen=True, eq=False)
class RateCourse:
    """Rate against composition for one run: ``rate = -d[A]/dt`` from the smoothed course."""

    label: str
    time_s: np.ndarray
    concentration_mol_per_l: np.ndarray  # smoothed [A]
    rate_mol_per_l_s: np.ndarray
    partner_mol_per_l: np.ndarray | None  # [B] at the same times (design excess + [A])


def rate_course(run: CampaignRun, species: str = "A", partner: str | None = "B") -> RateCourse:
    """Smoothed ``[species]`` and ``-d[species]/dt``; ``[partner] = [species] + excess`` when
    both initial concentrations are known (a 1:1 consumption)."""
    if species not in run.observed_mol_per_l:
        raise ConfigError(f"runs.{run.label}", f"RPKA needs the course of {species!r}")
    smooth, derivative = smooth_derivative(run.time_s, run.observed_mol_per_l[species], run.sigma(species))
    b = None
    if partner is not None:
        excess = _excess(run, species, partner)
        if excess is not None:
            b = smooth + excess
    return RateCourse(run.label, run.time_s, smooth, -derivative, b)


def _excess(run, species, partner):
    a0, b0 = run.initial(species), run.initial(partner)
    return None if a0 is None or b0 is None else b0 - a0


@dataclass(frozen=True)
class SameExcessResult:
    """The same-excess comparison of two runs.

    ``rate_ratio`` is the later run's rate over the earlier run's at the same composition
    (``f``), ``time_shift_s`` the time at which the earlier run reaches the later run's start
    (shift-only fit), ``p`` the F-test p-value of ``f = 1``.
    """

    early: str
    late: str
    time_shift_s: float
    rate_ratio: float
    rate_ratio_ci95: tuple
    p: float
    flagged: bool
    slower: str | None
    message: str

    def to_dict(self) -> dict:
        return {"early": self.early, "late": self.late, "time_shift_s": self.time_shift_s,
                "rate_ratio": self.rate_ratio, "rate_ratio_ci95": list(self.rate_ratio_ci95), "p": self.p,
                "flagged": self.flagged, "slower_run": self.slower, "message": self.message}


class _Overlay:
    """Residuals of ``[A]_1 = g(t)``, ``[A]_2 = g(delta + f t)`` with ``g`` solved linearly."""

    def __init__(self, early: CampaignRun, late: CampaignRun, species, n_interior):
        self.t1 = early.time_s
        self.y1 = early.observed_mol_per_l[species]
        s1, s2 = early.sigma(species), late.sigma(species)
        weighted = s1 is not None and s2 is not None
        self.w1 = 1.0 / s1 if weighted else np.ones_like(self.y1)
        y2 = late.observed_mol_per_l[species]
        # The later run's points inside the composition range the earlier run covers.
        low = float(np.min(self.y1))
        keep = y2 >= low
        self.t2, self.y2 = late.time_s[keep], y2[keep]
        self.w2 = (1.0 / s2)[keep] if weighted else np.ones_like(self.y2)
        if self.t2.size < 4:
            raise FitError(f"run {late.label!r} has fewer than 4 points inside the range of run "
                           f"{early.label!r}: follow {early.label!r} further to compare them")
        self.knots = uniform_knots(0.0, float(self.t1[-1]), min(n_interior, max(self.t1.size // 4, 1)))
        self.basis1 = design_matrix(self.t1, self.knots)

    def residual(self, delta, f):
        basis2 = design_matrix(delta + f * self.t2, self.knots)
        a = np.vstack([self.basis1 * self.w1[:, None], basis2 * self.w2[:, None]])
        b = np.concatenate([self.y1 * self.w1, self.y2 * self.w2])
        coef, *_ = np.linalg.lstsq(a, b, rcond=None)
        return b - a @ coef

    def ssq(self, delta, f):
        r = self.residual(delta, f)
        return float(r @ r)

    @property
    def n(self):
        return self.t1.size + self.t2.size

    @property
    def n_coef(self):
        return self.knots.size - 4


def same_excess(early: CampaignRun, late: CampaignRun, species: str = "A", partner: str | None = "B", *,
                n_interior: int = 6, check_excess: bool = True) -> SameExcessResult:
    """Test whether the later-started run ``late`` overlays the earlier run ``early``."""
    if check_excess and partner is not None:
        e1, e2 = _excess(early, species, partner), _excess(late, species, partner)
        if e1 is None or e2 is None:
            raise ConfigError(f"runs.{early.label if e1 is None else late.label}.initial",
                              f"the same-excess test needs the initial [{species}] and [{partner}] of both runs")
        if abs(e1 - e2) > EXCESS_REL_TOL * max(abs(e1), abs(e2), 1e-12):
            raise ConfigError(f"runs.{late.label}.initial", f"excess [{partner}]0 - [{species}]0 is {e2:.4g} mol/L "
                              f"here but {e1:.4g} mol/L in run {early.label!r}: not a same-excess pair")
    a1 = early.initial(species, float(early.observed_mol_per_l[species][0]))
    a2 = late.initial(species, float(late.observed_mol_per_l[species][0]))
    if not a2 < a1:
        raise ConfigError(f"runs.{late.label}.initial.{species}", f"the later-started run must begin at a lower "
                          f"[{species}]0 than run {early.label!r} ({a2:.4g} vs {a1:.4g} mol/L)")
    overlay = _Overlay(early, late, species, n_interior)
    # start: the time at which the earlier run (its points) reaches the later run's start
    y1 = early.observed_mol_per_l[species]
    delta0 = float(np.interp(a2, y1[::-1], early.time_s[::-1], left=early.time_s[-1], right=0.0))

    def shift_only(d):
        return overlay.residual(d[0], 1.0)

    def both(v):
        return overlay.residual(v[0], v[1])

    bound = float(early.time_s[-1])
    null = optimize.least_squares(shift_only, [delta0], bounds=([-bound], [2 * bound]))
    s0 = float(null.fun @ null.fun)
    best = None
    for f0 in (1.0, 0.7, 1.4):
        trial = optimize.least_squares(both, [null.x[0], f0], bounds=([-bound, 0.05], [2 * bound, 20.0]))
        if best is None or trial.cost < best.cost:
            best = trial
    s1 = float(best.fun @ best.fun)
    dof = overlay.n - overlay.n_coef - 2
    f = float(best.x[1])
    statistic = max(s0 - s1, 0.0) / (s1 / dof) if s1 > 0 else math.inf
    p = float(stats.f.sf(statistic, 1, dof))
    threshold = iv.profile_threshold(s1, dof, absolute_sigma=False)
    interval = _ratio_interval(overlay, best.x, threshold, bound)
    flagged = bool(p < P_FLAG and abs(f - 1.0) > MIN_EFFECT)
    slower = (early.label if f > 1 else late.label) if flagged else None
    consumed = a1 - a2
    if not flagged:
        message = (f"run {late.label} overlays run {early.label} (rate ratio {f:.2f}, p = {p:.2g}): no sign of "
                   "catalyst deactivation or product inhibition over this range")
    elif f > 1:
        message = (f"run {late.label} (started later on the course) reacts {f:.2f}x as fast as run {early.label} "
                   f"at the same composition (95 % interval {interval[0]:.2f} to {interval[1]:.2f}, p = {p:.2g}): "
                   f"in run {early.label} the catalyst loses activity during the run, or the product it has formed "
                   f"inhibits. To tell which, repeat run {late.label} with {consumed:.3g} mol/L of product added: if "
                   f"it then overlays run {early.label}, the product inhibits; if it still runs faster, the catalyst "
                   "deactivates")
    else:
        message = (f"run {late.label} reacts only {f:.2f}x as fast as run {early.label} at the same composition "
                   f"(95 % interval {interval[0]:.2f} to {interval[1]:.2f}, p = {p:.2g}): run {late.label} is the "
                   "slower one although it started fresh. Check its catalyst batch, loading and reagents (an "
                   "impurity, a weighing error) before using it for orders")
    return SameExcessResult(early.label, late.label, float(null.x[0]), f, interval, p, flagged, slower, message)


def _ratio_interval(overlay, best, threshold, bound):
    """Profile 95 % interval of the rate ratio ``f`` (``delta`` re-optimised)."""
    def profiled(f):
        fit = optimize.least_squares(lambda d: overlay.residual(d[0], f), [best[0]],
                                     bounds=([-bound], [2 * bound]))
        return float(fit.fun @ fit.fun) - threshold

    edges = []
    for direction in (-1, 1):
        inner, step, edge = best[1], 0.05 * best[1], math.nan
        for _ in range(12):
            outer = inner + direction * step
            if outer <= 0.05:
                break
            if profiled(outer) > 0:
                try:
                    edge = optimize.brentq(profiled, inner, outer, xtol=1e-4)
                except ValueError:
                    edge = outer
                break
            inner, step = outer, step * 2
        edges.append(float(edge))
    return tuple(edges)


def same_excess_pairs(runs: Sequence[CampaignRun], species="A", partner="B", **options) -> list:
    """Every same-excess comparison in a campaign: within each group of runs with the same
    excess (and the same catalyst loading), the run with the highest ``[A]0`` against each
    run started lower.  Runs spiked with product (``initial`` of a product above 0) are left
    to :func:`diagnose`."""
    runs = check_campaign(runs)
    usable = [r for r in runs if _excess(r, species, partner) is not None
              and not any(v > 0 for k, v in r.initial_mol_per_l.items() if k not in (species, partner))]
    results, used = [], set()
    for run in sorted(usable, key=lambda r: -r.initial(species)):
        if run.label in used:
            continue
        group = [r for r in usable if r.label not in used and _same(r, run, species, partner)]
        used.update(r.label for r in group)
        for other in group:
            if other is run or not other.initial(species) < run.initial(species):
                continue
            results.append(same_excess(run, other, species, partner, **options))
    return results


def _same(a, b, species, partner):
    ea, eb = _excess(a, species, partner), _excess(b, species, partner)
    same_excess_ = abs(ea - eb) <= EXCESS_REL_TOL * max(abs(ea), abs(eb), 1e-12)
    ca, cb = a.catalyst_mol_per_l, b.catalyst_mol_per_l
    same_cat = (ca is None and cb is None) or (ca is not None and cb is not None
                                               and abs(ca - cb) <= EXCESS_REL_TOL * max(ca, cb, 1e-12))
    return same_excess_ and same_cat


@dataclass(frozen=True)
class Diagnosis:
    """Catalyst deactivation or product inhibition, from a same-excess trio."""

    cause: str  # "none", "product inhibition", "catalyst deactivation", "undecided"
    plain: SameExcessResult
    spiked: SameExcessResult
    message: str

    def to_dict(self) -> dict:
        return {"cause": self.cause, "message": self.message, "same_excess": self.plain.to_dict(),
                "same_excess_with_product": self.spiked.to_dict()}


def diagnose(early: CampaignRun, late: CampaignRun, spiked: CampaignRun, species="A", partner="B") -> Diagnosis:
    """Same-excess trio: ``late`` without product, ``spiked`` with the product ``early`` had made.

    ``early`` vs ``late`` not overlaying, ``early`` vs ``spiked`` overlaying: product inhibition;
    both not overlaying (the spiked run also faster): catalyst deactivation.
    """
    plain = same_excess(early, late, species, partner)
    with_product = same_excess(early, spiked, species, partner)
    if not plain.flagged:
        cause = "none"
        message = plain.message
    elif not with_product.flagged:
        cause = "product inhibition"
        message = (f"run {late.label} runs faster than run {early.label} at the same composition, but run "
                   f"{spiked.label}, with product added, overlays it: the product inhibits the reaction "
                   "(product inhibition). Rate laws fitted without a product term will drift with conversion")
    elif with_product.rate_ratio > 1:
        cause = "catalyst deactivation"
        message = (f"run {late.label} and run {spiked.label} (with product added) both run faster than run "
                   f"{early.label} at the same composition: the catalyst loses activity during the run "
                   "(deactivation), added product does not explain it. Orders from the early part of the runs "
                   "are the safer ones")
    else:
        cause = "undecided"
        message = (f"run {spiked.label} (product added) runs slower than run {early.label}: the product inhibits "
                   "more than in the plain course, or the runs differ otherwise; repeat the trio")
    return Diagnosis(cause, plain, with_product, message)


@dataclass(frozen=True)
class DifferentExcessResult:
    """Order in the partner from runs of different excess (pooled log-log regression)."""

    partner: str
    order: float
    stderr: float
    ci95: tuple
    dof: int
    courses: tuple  # RateCourse per run


def different_excess_order(runs: Sequence[CampaignRun], species="A", partner="B", n_grid: int = 6,
                           trim: float = 0.1) -> DifferentExcessResult:
    """Order in ``partner`` from different-excess runs (see the module docstring)."""
    runs = check_campaign(runs, min_runs=2)
    courses = [rate_course(run, species, partner) for run in runs]
    if any(c.partner_mol_per_l is None for c in courses):
        raise ConfigError("runs.initial", f"different-excess plots need the initial [{species}] and [{partner}] "
                          "of every run")
    lows = [float(np.min(c.concentration_mol_per_l)) for c in courses]
    highs = [float(np.max(c.concentration_mol_per_l)) for c in courses]
    lo, hi = max(lows), min(highs)
    if not hi > lo:
        raise FitError("the runs share no range of [A]: follow them further or start them closer")
    span = hi - lo
    grid = np.linspace(lo + trim * span, hi - trim * span, n_grid)
    rows, ys = [], []
    for c in courses:
        order = np.argsort(c.concentration_mol_per_l)
        rate = np.interp(grid, c.concentration_mol_per_l[order], c.rate_mol_per_l_s[order])
        b = np.interp(grid, c.concentration_mol_per_l[order], c.partner_mol_per_l[order])
        ok = (rate > 0) & (b > 0)
        for g in np.nonzero(ok)[0]:
            row = np.zeros(n_grid + 1)
            row[g] = 1.0
            row[-1] = math.log(b[g])
            rows.append(row)
            ys.append(math.log(rate[g]))
    x, y = np.array(rows), np.array(ys)
    used = np.any(x[:, :-1] != 0, axis=0)
    x = np.hstack([x[:, :-1][:, used], x[:, -1:]])
    dof = x.shape[0] - x.shape[1]
    if dof < 1:
        raise FitError("too few positive rates for a different-excess regression")
    coef, *_ = np.linalg.lstsq(x, y, rcond=None)
    r = y - x @ coef
    cov = np.linalg.pinv(x.T @ x) * float(r @ r) / dof
    se = float(math.sqrt(cov[-1, -1]))
    q = iv.t_quantile(dof)
    b_order = float(coef[-1])
    return DifferentExcessResult(partner, b_order, se, (b_order - q * se, b_order + q * se), dof, tuple(courses))
