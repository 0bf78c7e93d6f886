"""Interval machinery shared by the fitter: the least-squares problem, profiles, bootstrap.

Everything works on a :class:`Problem`: the varying parameters as a vector ``theta``, the
weighted residual ``(y - f(theta)) / sigma`` and its sum of squares ``S``.

Profile likelihood (Venzon & Moolgavkar 1988; Bates & Watts 1988, ch. 6): the 95 % interval
of parameter ``j`` is the set where the profiled sum of squares
``S_j(b) = min_{others} S`` stays below ``S_min (1 + t^2_{0.975, dof} / dof)`` (F-based,
sigma estimated from the fit) or ``S_min + chi2_{1, 0.95}`` (sigma known, ``absolute_sigma``).
The edges are found by a bracket-and-``brentq`` root search; the inner minimisation is
closed form when the only other free parameter is a linear amplitude (variable
projection, Golub & Pereyra 1973) and a warm-started ``least_squares`` otherwise.

Residual bootstrap (Efron & Tibshirani 1993, ch. 9): residuals (rescaled by
``sqrt(n/dof)``) are resampled within each observed series, added to the fitted curve and
the model refitted from the optimum; percentile intervals.
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

log = logging.getLogger(__name__)


@dataclass
class Problem:
    """A weighted least-squares problem over the varying parameters of a model.

    Attributes
    ----------
    predict : callable ``(time_s, values dict) -> (m, n)``
    time_s : ndarray (n,)
    y : ndarray (m, n)
    weight : ndarray (m, n)
        ``1/sigma`` (ones when no sigmas are given).
    names : list of str
        Varying parameter names, order of ``theta``.
    fixed : dict
        Values of the non-varying parameters.
    lower, upper : ndarray (p,)
    linear : list of bool
        Which varying parameters are pure amplitudes (``f`` proportional to them).
    """

    predict: object
    time_s: np.ndarray
    y: np.ndarray
    weight: np.ndarray
    names: list
    fixed: dict
    lower: np.ndarray
    upper: np.ndarray
    linear: list
    calls: int = 0  # residual evaluations so far (cost accounting)

    def values(self, theta) -> dict:
        values = dict(self.fixed)
        values.update(zip(self.names, map(float, theta)))
        return values

    def model(self, theta, time_s=None):
        t = self.time_s if time_s is None else time_s
        return np.asarray(self.predict(t, self.values(theta)), dtype=float).reshape(-1, np.size(t))

    def residual(self, theta):
        self.calls += 1
        with np.errstate(all="ignore"):
            r = ((self.y - self.model(theta)) * self.weight).ravel()
        # A non-finite model value would derail MINPACK; a large residual steers it away.
        return np.where(np.isfinite(r), r, 1e150)

    def ssq(self, theta) -> float:
        r = self.residual(theta)
        with np.errstate(over="ignore"):  # the 1e150 stand-ins for non-finite model values
            return float(r @ r)

    def with_y(self, y) -> "Problem":
        return Problem(self.predict, self.time_s, y, self.weight, self.names, self.fixed,
                       self.lower, self.upper, self.linear)


def t_quantile(dof: int, level: float = 0.95) -> float:
    return float(stats.t.ppf(0.5 + level / 2.0, max(dof, 1)))


def interval_quantile(dof: int, absolute_sigma: bool, level: float = 0.95) -> float:
    """Two-sided quantile: Student t with ``dof`` when the noise is estimated from the
    residuals, normal when the sigmas are taken as known (``absolute_sigma``)."""
    if absolute_sigma:
        return float(stats.norm.ppf(0.5 + level / 2.0))
    return t_quantile(dof, level)


def covariance_interval(value, stderr, dof, level=0.95, absolute_sigma=False, lower=-np.inf, upper=np.inf):
    """``value -+ q stderr``, clipped to the parameter's bounds (values outside are impossible)."""
    if stderr is None or not np.isfinite(stderr):
        return None
    half = interval_quantile(dof, absolute_sigma, level) * stderr
    return (float(max(value - half, lower)), float(min(value + half, upper)))


def profile_threshold(s_min, dof, absolute_sigma, level=0.95) -> float:
    if absolute_sigma:
        return s_min + float(stats.chi2.ppf(level, 1))
    return s_min * (1.0 + t_quantile(dof, level) ** 2 / max(dof, 1))


def parameter_scales(theta) -> np.ndarray:
    """Typical magnitudes used to make the optimisers work on ``theta / scale ~ 1``.

    scipy's finite-difference steps are absolute (``~6e-6 max(1, |x|)``) and MINPACK's
    tolerances mix parameters of different size, so a rate constant of 1e-6 s^-1 next to a
    concentration of 1 mol/L would otherwise get a Jacobian (and a covariance) that depends
    on the units chosen.  Zero or non-finite entries get scale 1.
    """
    scale = np.abs(np.asarray(theta, dtype=float))
    return np.where(np.isfinite(scale) & (scale > 1e-300), scale, 1.0)


def fit_theta(problem: Problem, theta0, max_nfev=None, tol=1e-10, jac="2-point", full=False):
    """Minimise ``S`` from ``theta0`` with ``least_squares``; returns (theta, success).

    With ``full`` also the Jacobian of the weighted residual at the solution, (n, p),
    with respect to ``theta``.  The search runs on ``theta / parameter_scales(theta0)``.
    """
    theta0 = np.clip(np.asarray(theta0, dtype=float), problem.lower, problem.upper)
    scale = parameter_scales(theta0)
    lower, upper = problem.lower / scale, problem.upper / scale
    u0 = theta0 / scale

    def residual(u):
        return problem.residual(u * scale)

    def done(solution, success):
        theta = solution.x * scale
        return (theta, success, solution.jac / scale) if full else (theta, success)

    bounded = np.isfinite(lower).any() or np.isfinite(upper).any()
    if bounded and np.all((u0 > lower) & (u0 < upper)):
        # Unconstrained LM is several times cheaper than TRF; keep it when it stays inside.
        try:
            solution = optimize.least_squares(residual, u0, method="lm", x_scale="jac",
                                              xtol=tol, ftol=tol, gtol=tol, max_nfev=max_nfev, jac=jac)
        except (ValueError, FloatingPointError, np.linalg.LinAlgError):
            solution = None
        if (solution is not None and solution.success
                and np.all((solution.x >= lower) & (solution.x <= upper))):
            return done(solution, True)
    try:
        solution = optimize.least_squares(
            residual, u0, bounds=(lower, upper) if bounded else (-np.inf, np.inf),
            method="trf" if bounded else "lm", x_scale="jac", xtol=tol, ftol=tol, gtol=tol,
            max_nfev=max_nfev, jac=jac)
    except (ValueError, FloatingPointError, np.linalg.LinAlgError) as error:
        log.debug("inner fit failed: %s", error)
        return (theta0, False, None) if full else (theta0, False)
    return done(solution, bool(solution.success))


def covariance_from_jacobian(jacobian, scale: float):
    """``scale (J^T J)^-1`` via SVD; None when J is numerically rank deficient.

    The columns are normalised first so that the rank test does not depend on the units
    of the parameters (a column of d/dk with k in s^-1 and time in days is not "small").
    """
    if jacobian is None or not np.all(np.isfinite(jacobian)):
        return None
    jacobian = np.asarray(jacobian, dtype=float)
    norms = np.sqrt(np.sum(jacobian**2, axis=0))
    if norms.size == 0 or np.any(norms <= 0):
        return None
    _, singular, vt = np.linalg.svd(jacobian / norms, full_matrices=False)
    if singular.size == 0 or singular[-1] <= singular[0] * 1e-13:
        return None
    return (vt.T / singular**2) @ vt / np.outer(norms, norms) * scale


def best_amplitude(problem: Problem, theta, j: int) -> float:
    """Least-squares optimum of the linear amplitude ``theta[j]`` with the others held.

    ``f`` is proportional to a linear amplitude, so the optimum is closed form
    (``sum(w^2 g y) / sum(w^2 g^2)`` with ``g`` the model at amplitude 1), clipped to bounds.
    """
    theta = np.array(theta, dtype=float)
    theta[j] = 1.0
    shape = problem.model(theta) * problem.weight
    target = problem.y * problem.weight
    denominator = float(np.sum(shape * shape))
    amplitude = float(np.sum(shape * target)) / denominator if denominator > 0 else 0.0
    return float(np.clip(amplitude, problem.lower[j], problem.upper[j]))


class _Profiler:
    """The profiled sum of squares of one parameter, warm-started along the search."""

    def __init__(self, problem: Problem, theta_hat, index: int, covariance=None):
        self.problem = problem
        # Along the profile the others move by cov[o, i]/cov[i, i] per unit of parameter i
        # (exact for a linear model): the warm start for each inner fit.
        self.slope = None
        if covariance is not None:
            others = [j for j in range(len(theta_hat)) if j != index]
            self.slope = np.asarray(covariance)[others, index] / covariance[index, index]
        self.index = index
        self.theta_hat = np.asarray(theta_hat, dtype=float)
        self.others = [i for i in range(len(theta_hat)) if i != index]
        self.last = self.theta_hat[self.others].copy()
        self.closed_form = len(self.others) == 1 and problem.linear[self.others[0]]
        sub_lower = problem.lower[self.others]
        sub_upper = problem.upper[self.others]
        self.sub = Problem(self._sub_predict, problem.time_s, problem.y, problem.weight,
                           [problem.names[i] for i in self.others], {}, sub_lower, sub_upper,
                           [problem.linear[i] for i in self.others])
        self.current = float(self.theta_hat[index])

    def _full(self, other_values, b):
        theta = self.theta_hat.copy()
        theta[self.index] = b
        theta[self.others] = other_values
        return theta

    def _sub_predict(self, t, values):
        other = np.array([values[self.problem.names[i]] for i in self.others])
        return self.problem.model(self._full(other, self.current), t)

    def __call__(self, b) -> float:
        self.current = float(b)
        if not self.others:
            return self.problem.ssq(np.array([b]))
        if self.closed_form:
            j = self.others[0]
            self.last = np.array([best_amplitude(self.problem, self._full(np.ones(1), b), j)])
            return self.problem.ssq(self._full(self.last, b))
        # S only has to be right to ~1e-6 relative near the threshold: a looser inner tolerance.
        start = self.last
        if self.slope is not None:
            start = self.theta_hat[self.others] + self.slope * (b - self.theta_hat[self.index])
            if self.problem.ssq(self._full(self.last, b)) < self.problem.ssq(self._full(start, b)):
                start = self.last
        theta, _ = fit_theta(self.sub, start, max_nfev=200 * (len(self.others) + 1), tol=1e-8)
        self.last = theta
        return self.problem.ssq(self._full(theta, b))


def _secant_edge(profiler, value, bound, direction, step0, s_min, threshold, tol=1e-4, max_iter=8):
    """Edge by secant steps on the signed root ``z(b) = sqrt(S(b) - S_min)``.

    ``z`` is nearly linear in ``b`` (exactly so for a linear model), so two to four profile
    evaluations usually suffice; None when it does not settle (the caller then brackets).
    """
    target = np.sqrt(threshold - s_min)
    if not np.isfinite(target) or target <= 0:
        return None
    b_prev, z_prev = value, 0.0
    b = value + direction * step0 * 1.96  # covariance estimate of the edge
    for _ in range(max_iter):
        if (b - bound) * direction >= 0:
            return None
        z = np.sqrt(max(profiler(b) - s_min, 0.0))
        if abs(z - target) <= tol * target:
            return float(b)
        slope = (z - z_prev) / (b - b_prev)
        if not np.isfinite(slope) or slope * direction <= 0:
            return None
        b_prev, z_prev = b, z
        step = (target - z) / slope
        b = b + float(np.clip(step, -4 * abs(b - value), 4 * abs(b - value)))
    return None


def profile_interval(problem: Problem, theta_hat, index: int, stderr, threshold, max_expand=40,
                     s_min=None, covariance=None):
    """Profile-likelihood interval ``(lo, hi)`` of parameter ``index``.

    An edge that reaches a bound before crossing the threshold is reported as that bound;
    an edge that cannot be found (the profile flattens out) is ``nan``.
    """
    value = float(theta_hat[index])
    step0 = stderr if stderr is not None and np.isfinite(stderr) and stderr > 0 else 0.1 * max(abs(value), 1e-12)
    if s_min is None:
        s_min = problem.ssq(theta_hat)
    edges = []
    for direction in (-1.0, 1.0):
        profiler = _Profiler(problem, theta_hat, index, covariance)
        bound = problem.lower[index] if direction < 0 else problem.upper[index]
        edge = _secant_edge(profiler, value, bound, direction, step0, s_min, threshold)
        if edge is not None:
            edges.append(edge)
            continue
        profiler = _Profiler(problem, theta_hat, index, covariance)
        bound = problem.lower[index] if direction < 0 else problem.upper[index]
        inner, step = value, 2.0 * step0
        edge = np.nan
        for _ in range(max_expand):
            outer = value + direction * step
            hit_bound = (outer - bound) * direction >= 0
            if hit_bound:
                outer = bound
            s = profiler(outer)
            if s > threshold:
                def excess(b):
                    return profiler(b) - threshold
                try:
                    edge = optimize.brentq(excess, inner, outer, xtol=1e-9 * max(abs(value), step0),
                                           rtol=1e-10)
                except ValueError:
                    edge = outer
                break
            if hit_bound:
                edge = bound
                break
            inner = outer
            step *= 2.0
        edges.append(edge)
    return (float(edges[0]), float(edges[1]))


def bootstrap_samples(problem: Problem, theta_hat, n_samples: int, rng, dof: int, progress=None):
    """Residual-bootstrap refits, shape (n_ok, p), and the number of failed refits.

    ``progress`` (stage, done, total), when given, is told ``("bootstrap", i, n_samples)``."""
    fitted = problem.model(theta_hat)
    weighted = (problem.y - fitted) * problem.weight
    m, n = weighted.shape
    scale = np.sqrt(n * m / max(dof, 1))
    centred = (weighted - weighted.mean(axis=1, keepdims=True)) * scale
    samples, failed = [], 0
    for done in range(n_samples):
        if progress is not None:
            progress("bootstrap", done, n_samples)
        picks = rng.integers(0, n, size=(m, n))
        y_star = fitted + np.take_along_axis(centred, picks, axis=1) / problem.weight
        # Percentiles need ~4 digits: a looser tolerance than the main fit.
        theta, ok = fit_theta(problem.with_y(y_star), theta_hat, max_nfev=100 * (len(theta_hat) + 1), tol=1e-8)
        if ok and np.all(np.isfinite(theta)):
            samples.append(theta)
        else:
            failed += 1
    if progress is not None:
        progress("bootstrap", n_samples, n_samples)
    return np.array(samples).reshape(-1, len(theta_hat)), failed


def numeric_gradient(func, theta, stderr):
    """Central-difference gradient of scalar or vector ``func(theta)``; shape (p, ...)."""
    theta = np.asarray(theta, dtype=float)
    grads = []
    for i in range(theta.size):
        scale = stderr[i] if stderr is not None and np.isfinite(stderr[i]) and stderr[i] > 0 else abs(theta[i])
        h = max(1e-6 * max(abs(theta[i]), 1e-300), 1e-4 * scale)
        up, down = theta.copy(), theta.copy()
        up[i] += h
        down[i] -= h
        grads.append((np.asarray(func(up), dtype=float) - np.asarray(func(down), dtype=float)) / (2 * h))
    return np.array(grads)


def lag1_autocorrelation(residual_rows) -> float:
    """Lag-1 autocorrelation of residuals, pooled over the rows (each row a time series)."""
    numerator, denominator = 0.0, 0.0
    for row in np.atleast_2d(residual_rows):
        centred = row - row.mean()
        numerator += float(centred[1:] @ centred[:-1])
        denominator += float(centred @ centred)
    return numerator / denominator if denominator > 0 else float("nan")
