"""Fit guardrails: checks that stop a fit from giving a confident wrong answer in silence.

Each check is a small pure function that returns :class:`Guardrail` records (a machine
``code``, a plain-language ``message`` saying what to do, a ``severity`` and ``details``)
or nothing.  :func:`kinetics.rates.fit.fit_model` runs the data and residual checks on every
fit and stores them in ``FitResult.guardrails`` (their messages also in
``FitResult.warnings``); the forecast checks run where a forecast is asked for.

Checks and their statistics
---------------------------
* direction (:func:`check_direction`): Kendall's tau of each observed series against time
  (Kendall 1938).  A reactant fitted to a curve that rises with ``p < 0.01`` (or a product
  to one that falls) is refused: the fit would end at ``k -> 0`` with a tight interval.
* time origin (:func:`check_time_origin`): times that look like clock readings (first time
  above 1e8 s, ~3 years: epoch seconds) or that start late compared with their span.
* residual scatter against the fitted value (:func:`check_noise`): the slope of the
  leverage-corrected ``|r_i| / sqrt(1 - h_ii)`` regressed on the fitted value (Glejser
  1969).  Its null distribution is that of the same statistic computed from
  ``(I - H) e`` with ``e`` standard normal and ``H`` the hat matrix of the linearised fit,
  so the p-value is right for small n too (beyond 60 points Student t with n - 2 dof).
  The reference sample of ``e`` is drawn once from a fixed seed: the p-value is a
  deterministic function of the data.
* outliers (:func:`check_outliers`): externally studentized residuals
  ``t_i = r_i / (s_(i) sqrt(1 - h_ii))``, ``s_(i)^2 = (S - r_i^2/(1 - h_ii)) / (dof - 1)``
  (Belsley, Kuh & Welsch 1980), flagged when ``|t_i| > 4`` and the Bonferroni-adjusted
  ``t_{dof-1}`` p-value is below 0.01 (so that short series do not raise false alarms).
* runs (:func:`runs_test_exact`): the exact conditional distribution of the number of
  sign runs given the numbers of positive and negative residuals (Wald & Wolfowitz 1940;
  Swed & Eisenhart 1943), counted within each observed series and convolved over series.
  One-sided: only too FEW runs (positive autocorrelation, a curve the model misses) is a
  warning; many runs is what least-squares residuals of short series look like.
* discrete non-uniqueness (:func:`multistart`): refits from the rate constants permuted
  (A -> B -> C seen only through B is symmetric in k1 and k2).
* forecasts (:func:`forecast_caveat`, :func:`model_averaged_forecast`): a forecast past the
  last observation is flagged; when the rate law is uncertain the laws within delta AICc 4
  are averaged with Akaike weights and the unconditional variance of Burnham & Anderson
  (2002, sec. 4.3.2), on the log scale of the time.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Mapping, Sequence

import numpy as np
from scipy import special, stats

from kinetics.numbers import format_duration

#: Codes that refuse a number (the fit is reported as not converged).
REFUSE = "refuse"
WARNING = "warning"
NOTE = "note"

DIRECTION_P = 0.01      # a trend this sure (two-sided) contradicts the observed role
NOISE_P = 0.01          # p-value below which the scatter is called non-constant
NOISE_EXACT_N = 60      # up to this many points the p-value comes from the simulated null
OUTLIER_T = 4.0         # externally studentized residual flagged above this (common practice)
OUTLIER_FAMILY_P = 0.01  # Bonferroni-adjusted p-value an outlier must also reach
RUNS_P = 0.01           # one-sided exact runs-test level
EPOCH_S = 1e8           # first time beyond ~3 years: a clock reading, not time since the start
OFFSET_FRACTION = 0.5   # first time later than this fraction of the span: late start or clock offset
EXTRAPOLATION_DELTA_AICC = 4.0  # laws averaged in a forecast (Burnham & Anderson 2002)

_NULL_DRAWS = 2000
_NULL_CACHE: dict = {}


@dataclass(frozen=True)
class Guardrail:
    """One finding of a check.

    Attributes
    ----------
    code : str
        Machine code, e.g. ``"direction_contradicts_observed"``.
    message : str
        What was found and what to do, in words a chemist can act on.
    severity : str
        ``"refuse"`` (no number is quoted), ``"warning"`` or ``"note"``.
    details : Mapping
        Numbers behind the message (JSON-ready).
    """

    code: str
    message: str
    severity: str = WARNING
    details: Mapping = field(default_factory=dict)

    def to_dict(self) -> dict:
        return {"code": self.code, "severity": self.severity, "message": self.message,
                "details": dict(self.details)}


def from_messages(messages, code="data") -> list:
    """Plain warning strings (from the table reader, the fitter) as guardrail records."""
    return [Guardrail(code, m) for m in messages if m]


# ---------------------------------------------------------------- direction of the curve
#: Expected direction of each species of the registered laws: -1 falls, +1 rises.
_EXPECTED = {"A": -1, "P": +1}
_EXPECTED_BY_MODEL = {("second-mixed", "B"): -1, ("consecutive", "C"): +1}
_ROLE = {-1: "a reactant (a falling curve)", +1: "a product (a rising curve)"}


def expected_direction(model_name: str, species: str) -> int:
    """-1 (falls), +1 (rises) or 0 (no fixed direction) for ``species`` of a registered law."""
    from kinetics.rates.laws import MODELS

    if model_name not in MODELS:
        return 0
    if (model_name, species) in _EXPECTED_BY_MODEL:
        return _EXPECTED_BY_MODEL[(model_name, species)]
    if model_name in ("reversible-first", "consecutive") and species != "A":
        return 0
    return _EXPECTED.get(species, 0)


def trend(time_s, values) -> tuple[float, float]:
    """Kendall's tau of ``values`` against time and its two-sided p-value."""
    tau, p = stats.kendalltau(np.asarray(time_s, float), np.asarray(values, float))
    return float(tau), float(p) if np.isfinite(p) else 1.0


def check_direction(model_name, species, columns, time_s, values) -> list:
    """Refuse a series whose direction contradicts the role it was fitted in."""
    found = []
    for row, (name, column) in enumerate(zip(species, columns)):
        expected = expected_direction(model_name, name)
        if expected == 0:
            continue
        tau, p = trend(time_s, values[row])
        if tau * expected < 0 and p < DIRECTION_P:
            seen = "rises" if tau > 0 else "falls"
            other = "product" if expected < 0 else "reactant"
            found.append(Guardrail(
                "direction_contradicts_observed",
                f"column {column!r} {seen} over the run (Kendall tau {tau:+.2f}, p = {p:.1g}) but it was "
                f"fitted as {_ROLE[expected]}: no rate constant is quoted. If it measures a {other}, "
                f"fit it with --observed {other}; if it is the internal standard or a solvent line, "
                "fit another column",
                REFUSE, {"column": column, "kendall_tau": tau, "p": p, "expected": _ROLE[expected]}))
    return found


def check_no_change(model_name, species, columns, time_s, values, rate_values, span_s) -> list:
    """Refuse a single-reactant law whose rate constant went to zero on a flat column."""
    found = []
    if len(columns) != 1 or not rate_values:
        return found
    tau, p = trend(time_s, values[0])
    if p > 0.05 and all(abs(v) * span_s < 1e-6 for v in rate_values):
        found.append(Guardrail(
            "no_change",
            f"column {columns[0]!r} shows no significant change over the run (Kendall p = {p:.2g}) and "
            "the rate constant went to zero: no rate can be measured from it. Is it the internal "
            "standard or a spectator signal? Fit the reactant's or the product's column",
            REFUSE, {"column": columns[0], "kendall_tau": tau, "p": p}))
    return found


# ---------------------------------------------------------------- time axis
def check_time_origin(time_s, source: str = "") -> list:
    """Hints for times that are clock readings or start long after the reaction start."""
    t = np.asarray(time_s, dtype=float)
    first, span = float(t[0]), float(t[-1] - t[0])
    found = []
    if first > EPOCH_S:
        found.append(Guardrail(
            "time_epoch_seconds",
            f"the first time is {first:.4g} s (~{first / 3.15576e7:.0f} years): it looks like a clock "
            "reading (seconds since 1970), not seconds from the reaction start. Subtract the time of "
            f"mixing (or the first time, {first:.10g} s) from the time column; c0 and every law refer to t = 0",
            WARNING, {"first_time_s": first, "span_s": span}))
    elif span > 0 and first > OFFSET_FRACTION * span:
        found.append(Guardrail(
            "time_origin_offset",
            f"the first time ({first:.4g} s) is {first / span:.1f}x the span of the data ({span:.4g} s): "
            "if the times are clock readings or were counted from another event, subtract the time of "
            "mixing; the fitted c0 is the value extrapolated back to t = 0",
            WARNING, {"first_time_s": first, "span_s": span}))
    return found


# ---------------------------------------------------------------- runs
def _log_comb(n, k):
    return special.gammaln(n + 1) - special.gammaln(k + 1) - special.gammaln(n - k + 1)


def runs_pmf(n_pos: int, n_neg: int) -> np.ndarray:
    """Exact pmf of the number of runs ``R`` (index = R) given ``n_pos`` and ``n_neg`` signs.

    ``P(R = 2s) = 2 C(n1-1, s-1) C(n2-1, s-1) / C(n, n1)``;
    ``P(R = 2s+1) = (C(n1-1, s) C(n2-1, s-1) + C(n1-1, s-1) C(n2-1, s)) / C(n, n1)``
    (Swed & Eisenhart 1943).  With one sign only, ``R = 1``.
    """
    n = n_pos + n_neg
    pmf = np.zeros(n + 2)
    if n_pos == 0 or n_neg == 0:
        pmf[1 if n else 0] = 1.0
        return pmf
    total = _log_comb(n, n_pos)

    def term(a, b, c, d):
        # C(a, b) C(c, d) / C(n, n1) for arrays b, d; zero where a choice is impossible
        ok = (b >= 0) & (d >= 0) & (b <= a) & (d <= c)
        b, d = np.where(ok, b, 0), np.where(ok, d, 0)
        return np.where(ok, np.exp(_log_comb(a, b) + _log_comb(c, d) - total), 0.0)

    r = np.arange(2, n + 1)
    s = r // 2
    even = 2.0 * term(n_pos - 1, s - 1, n_neg - 1, s - 1)
    odd = term(n_pos - 1, s, n_neg - 1, s - 1) + term(n_pos - 1, s - 1, n_neg - 1, s)
    pmf[2:n + 1] = np.where(r % 2 == 0, even, odd)
    return pmf


def runs_test_exact(residual_rows):
    """Runs test on the signs of each row of residuals, exact and one-sided (too few runs).

    Returns ``(runs, expected_runs, z, p_too_few)``: runs summed over rows, their expected
    number, the normal-approximation z (for reading only) and the exact ``P(R <= runs)``.
    """
    pmf_total = np.array([1.0])
    runs = 0
    for row in np.atleast_2d(np.asarray(residual_rows, dtype=float)):
        signs = np.sign(row[row != 0])
        n_pos, n_neg = int(np.sum(signs > 0)), int(np.sum(signs < 0))
        if signs.size == 0:
            continue
        runs += 1 + int(np.sum(signs[1:] != signs[:-1]))
        pmf_total = np.convolve(pmf_total, runs_pmf(n_pos, n_neg))
    r = np.arange(pmf_total.size)
    mean = float(r @ pmf_total)
    variance = float(((r - mean) ** 2) @ pmf_total)
    if variance <= 0:
        return runs, mean, float("nan"), float("nan")
    z = (runs - mean) / math.sqrt(variance)
    p = float(min(1.0, pmf_total[: runs + 1].sum()))
    return runs, mean, float(z), p


def check_runs(runs, expected, p) -> list:
    if np.isfinite(p) and p < RUNS_P:
        return [Guardrail(
            "residuals_structured",
            f"the residuals change sign too rarely ({runs} runs where {expected:.1f} are expected, exact "
            f"p = {p:.2g}): the curve has a shape the rate law misses. Compare laws (--compare) or "
            "check for a drifting baseline", WARNING, {"runs": runs, "expected_runs": expected, "p": p})]
    return []


# ---------------------------------------------------------------- hat matrix helpers
def _hat_basis(jacobian):
    """Orthonormal basis ``Q`` (n, p) of the column space of the residual Jacobian."""
    j = np.asarray(jacobian, dtype=float)
    norms = np.sqrt(np.sum(j**2, axis=0))
    norms = np.where(norms > 0, norms, 1.0)
    q, _ = np.linalg.qr(j / norms)
    return q


def _null_normals(n: int) -> np.ndarray:
    """A fixed reference sample of standard normals, shape (_NULL_DRAWS, n)."""
    if n not in _NULL_CACHE:
        _NULL_CACHE[n] = np.random.default_rng(20261202 + n).standard_normal((_NULL_DRAWS, n))
    return _NULL_CACHE[n]


def _slope_t(a, x):
    """Student t of the least-squares slope of each row of ``a`` on ``x``."""
    xc = x - x.mean()
    sxx = float(xc @ xc)
    slope = (a @ xc) / sxx
    res = a - a.mean(axis=-1, keepdims=True) - slope[..., None] * xc
    s2 = np.sum(res**2, axis=-1) / max(x.size - 2, 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        return slope / np.sqrt(s2 / sxx)


def noise_trend(residual, fitted, jacobian):
    """Glejser slope t of ``|r|/sqrt(1-h)`` on the fitted value and its calibrated p-value.

    Returns ``(t, p, ratio)`` where ``ratio`` is the scatter predicted at the highest fitted
    value over that at the lowest (from the same regression); NaNs when undefined.
    """
    r = np.asarray(residual, float).ravel()
    f = np.asarray(fitted, float).ravel()
    n = r.size
    if n < 6 or np.ptp(f) <= 0 or jacobian is None:
        return float("nan"), float("nan"), float("nan")
    q = _hat_basis(jacobian)
    leverage = np.clip(np.sum(q**2, axis=1), 0.0, 1.0 - 1e-9)
    scale = 1.0 / np.sqrt(1.0 - leverage)
    a = np.abs(r) * scale
    t_obs = float(_slope_t(a[None, :], f)[0])
    if not np.isfinite(t_obs):
        return float("nan"), float("nan"), float("nan")
    if n > NOISE_EXACT_N:
        # Long series: the residuals' correlation no longer matters, Student t is right.
        p = float(2.0 * stats.t.sf(abs(t_obs), n - 2))
    else:
        e = _null_normals(n)
        null = e - (e @ q) @ q.T
        t_null = _slope_t(np.abs(null) * scale, f)
        p = float((1 + np.sum(np.abs(t_null) >= abs(t_obs))) / (1 + t_null.size))
    slope, intercept = np.polyfit(f, a, 1)
    lo, hi = intercept + slope * f.min(), intercept + slope * f.max()
    ratio = hi / lo if lo > 0 and hi > 0 else float("inf") if hi > 0 else 0.0
    return t_obs, p, float(ratio)


def check_noise(residual, fitted, jacobian, *, weighted: bool, weighting: str = "none") -> list:
    """Warn when the scatter grows (or shrinks) with the concentration."""
    t_obs, p, ratio = noise_trend(residual, fitted, jacobian)
    if not (np.isfinite(p) and p < NOISE_P):
        return []
    grows = t_obs > 0
    how = "grows" if grows else "shrinks"
    size = f" (about {ratio:.2g}x from the lowest to the highest concentration)" if (
        np.isfinite(ratio) and ratio > 0) else ""
    if weighted or weighting != "none":
        advice = ("the uncertainties given do not describe it: check the sigma column or the "
                  "weighting")
    else:
        advice = ("the intervals assume constant noise and are then not trustworthy. Give each point's "
                  "uncertainty (--sigma-column) or, if the noise is a fixed percentage of the "
                  "concentration, refit with --weighting relative")
    return [Guardrail(
        "noise_not_constant",
        f"the scatter of the residuals {how} with the fitted concentration{size}, p = {p:.2g}: {advice}",
        WARNING, {"glejser_t": t_obs, "p": p, "scatter_ratio_high_to_low": ratio})]


def check_outliers(residual, jacobian, dof: int, labels: Sequence[str]) -> list:
    """Flag points whose externally studentized residual exceeds :data:`OUTLIER_T`."""
    r = np.asarray(residual, float).ravel()
    n = r.size
    if jacobian is None or dof < 3:
        return []
    q = _hat_basis(jacobian)
    leverage = np.clip(np.sum(q**2, axis=1), 0.0, 1.0 - 1e-9)
    s_total = float(r @ r)
    deleted = (s_total - r**2 / (1.0 - leverage)) / (dof - 1)
    with np.errstate(divide="ignore", invalid="ignore"):
        t = r / np.sqrt(np.maximum(deleted, 1e-300) * (1.0 - leverage))
    family_p = np.minimum(1.0, n * 2.0 * stats.t.sf(np.abs(t), dof - 1))
    flagged = np.nonzero((np.abs(t) > OUTLIER_T) & (family_p < OUTLIER_FAMILY_P))[0]
    if flagged.size == 0:
        return []
    order = flagged[np.argsort(-np.abs(t[flagged]))]
    named = [f"{labels[i]} (studentized residual {t[i]:+.1f})" for i in order[:5]]
    more = f" and {order.size - 5} more" if order.size > 5 else ""
    return [Guardrail(
        "outlier",
        f"{order.size} point(s) lie far off the curve: {', '.join(named)}{more}. Check that spectrum "
        "or row (a bad shim, a phase error, a typo); if it is faulty, remove it and refit",
        WARNING, {"points": [{"label": labels[i], "index": int(i), "studentized_residual": float(t[i])}
                             for i in order]})]


# ---------------------------------------------------------------- multi-start
def rate_indices(problem, model) -> list:
    """Indices of the varying rate constants (unit with ``s^-1``, not an amplitude)."""
    units = {spec.name: spec.unit for spec in model.params}
    return [i for i, name in enumerate(problem.names)
            if "s^-1" in units.get(name, "") and not problem.linear[i]]


def multistart(problem, theta, stderr, threshold, model) -> tuple[list, np.ndarray | None]:
    """Refit from the rate constants permuted among those with the same unit.

    Returns ``(equivalent, better)``: ``equivalent`` lists ``(theta, ssq)`` of distinct
    optima whose sum of squares is within ``threshold`` (indistinguishable at 95 %);
    ``better`` is a distinctly lower optimum than ``theta`` (the first fit was a local one)
    or None.
    """
    from kinetics.rates.intervals import fit_theta

    idx = rate_indices(problem, model)
    if len(idx) < 2:
        return [], None
    units = {spec.name: spec.unit for spec in model.params}
    s_main = problem.ssq(theta)
    starts = []
    for perm in itertools.permutations(idx):
        if list(perm) == idx or any(units[problem.names[a]] != units[problem.names[b]]
                                    for a, b in zip(idx, perm)):
            continue
        start = np.array(theta, dtype=float)
        start[idx] = np.asarray(theta, float)[list(perm)]
        starts.append(start)
    starts = starts[:6]
    p = len(theta)
    found, better = [], None
    for start in starts:
        alt, _ = fit_theta(problem, start, max_nfev=200 * (p + 1), tol=1e-10)
        if not np.all(np.isfinite(alt)):
            continue
        s_alt = problem.ssq(alt)
        if not np.isfinite(s_alt):
            continue
        distinct = any(abs(alt[i] - theta[i]) > max(3.0 * (stderr[i] if np.isfinite(stderr[i]) else 0.0),
                                                    1e-3 * abs(theta[i])) for i in idx)
        if not distinct:
            continue
        if s_alt < s_main * (1.0 - 1e-6) - 1e-300:
            if better is None or s_alt < problem.ssq(better):
                better = alt
        elif s_alt <= threshold and not any(np.allclose(alt, f[0], rtol=1e-3) for f in found):
            found.append((alt, s_alt))
    return found, better


def multistart_guardrail(problem, theta, alternatives, columns, model) -> list:
    if not alternatives:
        return []
    s_main = problem.ssq(theta)

    def describe(values):
        return ", ".join(f"{name} = {v:.4g}" for name, v in zip(problem.names, values))

    solutions = [describe(theta)] + [describe(a) for a, _ in alternatives]
    mechanism = model.extra.get("mechanism") if model.extra else None
    species_all = tuple(mechanism.species) if mechanism is not None else \
        {"consecutive": ("A", "B", "C")}.get(model.name, ())
    unobserved = [s for s in species_all if s not in model.species]
    amplitude = [n for i, n in enumerate(problem.names) if problem.linear[i]] or \
        [n for n in problem.names if n.startswith("c0_") or n in ("a0", "c0")]
    resolve = []
    if unobserved:
        resolve.append("observe " + " or ".join(unobserved) + " as well (another --column with --species)")
    if amplitude:
        resolve.append(f"fix the known initial concentration (--fix {amplitude[0]}=VALUE)")
    if not resolve:
        resolve.append("observe another species or fix a known initial concentration")
    return [Guardrail(
        "multiple_solutions",
        f"{len(solutions)} different solutions fit these data equally well: "
        + "; or ".join(solutions)
        + f" (sum of squares {s_main:.4g} vs "
        + ", ".join(f"{s:.4g}" for _, s in alternatives)
        + "). The data cannot say which rate constant belongs to which step; the values quoted are "
        "only one of them. To decide: " + ", or ".join(resolve),
        WARNING, {"solutions": [dict(zip(problem.names, map(float, theta)))]
                  + [dict(zip(problem.names, map(float, a))) for a, _ in alternatives],
                  "sum_of_squares": [float(s_main)] + [float(s) for _, s in alternatives]})]


# ---------------------------------------------------------------- forecasts
def forecast_caveat(result, quantity, conversion: float) -> list:
    """Caveat for a forecast time beyond the last observation."""
    if quantity is None or not np.isfinite(quantity.value):
        return []
    t_last = float(result.time_s[-1])
    if quantity.value <= t_last:
        return []
    reached = float("nan")
    curve = result.model.extra.get("conversion") if result.model is not None else None
    if curve is not None:
        with np.errstate(all="ignore"):
            reached = float(np.asarray(curve(np.array([t_last]), result.values))[0])
    seen = f", where the fitted conversion is {reached:.0%}" if np.isfinite(reached) else ""
    return [Guardrail(
        "forecast_extrapolated",
        f"the time to {conversion:.0%} conversion ({format_duration(quantity.value, significant=3)}) lies "
        f"{quantity.value / t_last:.1f}x past the last observation ({format_duration(t_last, significant=3)}{seen}): "
        "it holds only if the rate law holds beyond the data; "
        "its interval does not include that doubt",
        WARNING, {"forecast_s": float(quantity.value), "last_time_s": t_last,
                  "conversion_at_last_time": reached if np.isfinite(reached) else None,
                  "factor": float(quantity.value / t_last)})]


@dataclass(frozen=True)
class AveragedForecast:
    """A forecast averaged over rate laws (Akaike weights), with each law's own forecast."""

    value: float
    ci95: tuple
    laws: tuple  # (name, weight, value, (lo, hi)) per law averaged
    uncertain: bool  # whether another law than the fitted one has support (delta AICc < 4)

    def to_dict(self) -> dict:
        return {"value": self.value, "ci95": list(self.ci95), "unit": "s",
                "method": "Akaike-weighted average over laws within delta AICc 4 (log scale)",
                "laws": [{"model": n, "akaike_weight": w, "value": v, "ci95": list(ci)}
                         for n, w, v, ci in self.laws]}


def model_averaged_forecast(comparison, conversion: float, fitted_name: str) -> AveragedForecast | None:
    """Average the forecasts of the laws within delta AICc 4 of the best (log scale).

    Unconditional standard error ``sum_i w_i sqrt(se_i^2 + (x_i - x_bar)^2)`` with ``x`` the
    log time and ``se_i`` from each law's own 95 % interval (Burnham & Anderson 2002).
    """
    table = comparison.table
    rows = table[table["delta_aicc"] <= EXTRAPOLATION_DELTA_AICC]
    entries = []
    for _, row in rows.iterrows():
        fit = comparison.results.get(row["model"])
        if fit is None or not fit.converged:
            continue
        q = fit.time_to_conversion(conversion)
        if q.ci95 is None or not (np.all(np.isfinite(q.ci95)) and q.value > 0 and q.ci95[0] > 0):
            continue
        entries.append((str(row["model"]), float(row["aicc"]), q.value, tuple(map(float, q.ci95))))
    if not entries:
        return None
    aicc = np.array([e[1] for e in entries])
    w = np.exp(-0.5 * (aicc - aicc.min()))
    w /= w.sum()
    z = float(stats.norm.ppf(0.975))
    x = np.log([e[2] for e in entries])
    se = np.array([(math.log(hi) - math.log(lo)) / (2 * z) for *_, (lo, hi) in entries])
    x_bar = float(w @ x)
    se_bar = float(w @ np.sqrt(se**2 + (x - x_bar) ** 2))
    others = [e[0] for e in entries if e[0] != fitted_name and e[0] != "nth"]
    uncertain = bool(others) or fitted_name not in [e[0] for e in entries]
    return AveragedForecast(math.exp(x_bar), (math.exp(x_bar - z * se_bar), math.exp(x_bar + z * se_bar)),
                            tuple((e[0], float(wi), e[2], e[3]) for e, wi in zip(entries, w)), uncertain)


def averaged_forecast_guardrail(averaged: AveragedForecast, conversion, fitted_name) -> list:
    if averaged is None or not averaged.uncertain:
        return []
    laws = ", ".join(f"{n} {v:.3g} s (weight {w:.2f})" for n, w, v, _ in averaged.laws)
    names = [n for n, *_ in averaged.laws]
    if fitted_name not in names:
        lead = (f"the data favour other laws over {fitted_name} order (delta AICc > "
                f"{EXTRAPOLATION_DELTA_AICC:g}; try --compare), and beyond the data the laws disagree")
    else:
        lead = "the data do not settle the rate law, and beyond the data the laws disagree"
    return [Guardrail(
        "forecast_law_uncertain",
        f"{lead}: time to {conversion:.0%} is {laws}. Averaged over the laws within delta AICc "
        f"{EXTRAPOLATION_DELTA_AICC:g} (Akaike weights): {averaged.value:.4g} s, 95 % interval "
        f"[{averaged.ci95[0]:.4g}, {averaged.ci95[1]:.4g}] s. Follow the reaction further to pin the law down",
        WARNING, averaged.to_dict())]


# ---------------------------------------------------------------- mass balance
def mass_balance_note(flags, labels, deviation_sigma=None, k_sigma: float | None = None) -> list:
    """One summary of the rows whose mass balance was flagged (a ``series.csv`` column)."""
    flags = np.asarray(flags, dtype=bool)
    if not flags.any():
        return []
    named = [labels[i] for i in np.nonzero(flags)[0]]
    shown = ", ".join(named[:5]) + (f" and {len(named) - 5} more" if len(named) > 5 else "")
    worst = ""
    if deviation_sigma is not None:
        d = np.asarray(deviation_sigma, dtype=float)
        if np.any(np.isfinite(d)):
            worst = f" (largest deviation {np.nanmax(np.abs(d)):.1f} sigma)"
    beyond = f" beyond {k_sigma:g} sigma" if k_sigma else ""
    return [Guardrail(
        "mass_balance",
        f"the mass balance drifts{beyond} in {int(flags.sum())} of {flags.size} spectra{worst}: {shown}. "
        "A species is missing from the balance, a signal overlaps, or relaxation is incomplete; the "
        "rate constant may be biased",
        WARNING, {"flagged": int(flags.sum()), "rows": int(flags.size), "labels": named})]
