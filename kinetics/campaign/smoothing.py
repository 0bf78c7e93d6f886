"""Smooth curves through measured courses: one shared spline through pooled points, and
smoothed derivatives of one course.

* :func:`shared_spline`: a cubic B-spline with uniform interior knots fitted by weighted
  linear least squares (``scipy.interpolate.make_lsq_spline``) through points pooled from
  several runs; its residual sum of squares is the overlay score of the graphical methods.
* :func:`smooth_derivative`: a smoothing spline (``scipy.interpolate.make_smoothing_spline``,
  penalised second derivative) and its derivative (the penalty from the discrepancy
  principle when sigmas are known, else generalised cross-validation); the rate of a
  course without assuming a rate law.
"""

from __future__ import annotations

import numpy as np
from scipy import interpolate, optimize

from kinetics.errors import FitError


def uniform_knots(lo: float, hi: float, n_interior: int, k: int = 3) -> np.ndarray:
    """Clamped knot vector on ``[lo, hi]`` with ``n_interior`` equally spaced interior knots."""
    inner = np.linspace(lo, hi, n_interior + 2)[1:-1]
    return np.concatenate([[lo] * (k + 1), inner, [hi] * (k + 1)])


def shared_spline(x, y, weight=None, n_interior: int = 6):
    """Weighted least-squares cubic spline through pooled points; returns ``(spline, rss, n_coef)``.

    Fewer knots are tried when the points do not support ``n_interior`` (the
    Schoenberg-Whitney conditions); FitError when not even one interval works.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    w = np.ones_like(x) if weight is None else np.asarray(weight, dtype=float)
    order = np.argsort(x, kind="stable")
    x, y, w = x[order], y[order], w[order]
    lo, hi = float(x[0]), float(x[-1])
    if not hi > lo:
        raise FitError("the pooled points all lie at one abscissa: no curve can be drawn through them")
    for n in range(n_interior, -1, -1):
        knots = uniform_knots(lo, hi, n)
        try:
            spline = interpolate.make_lsq_spline(x, y, knots, k=3, w=w)
        except (ValueError, np.linalg.LinAlgError):
            continue
        r = (y - spline(x)) * w
        return spline, float(r @ r), knots.size - 4
    raise FitError("too few distinct points for a smooth curve")


def design_matrix(x, knots) -> np.ndarray:
    """Cubic B-spline basis at ``x`` (dense, shape (n, n_coef)), extrapolating the end pieces."""
    x = np.asarray(x, dtype=float)
    n_coef = knots.size - 4
    basis = np.empty((x.size, n_coef))
    for j in range(n_coef):
        coef = np.zeros(n_coef)
        coef[j] = 1.0
        basis[:, j] = interpolate.BSpline(knots, coef, 3, extrapolate=True)(x)
    return basis


def smooth_derivative(time_s, values, sigma=None):
    """Smoothed course and its time derivative at the measured times: ``(smooth, d/dt)``.

    A penalised cubic smoothing spline (``make_smoothing_spline``).  With sigmas the
    penalty follows the discrepancy principle (Morozov 1966): the largest smoothing whose
    weighted residual sum of squares stays at the number of points, ``sum ((y - s)/sigma)^2
    = n``; without them generalised cross-validation chooses it (Craven & Wahba 1979).
    """
    t = np.asarray(time_s, dtype=float)
    y = np.asarray(values, dtype=float)
    if t.size < 5:
        raise FitError(f"{t.size} points: a smoothed rate needs at least 5")
    if sigma is None:
        spline = interpolate.make_smoothing_spline(t, y)
        return spline(t), spline.derivative()(t)
    w = 1.0 / np.asarray(sigma, dtype=float) ** 2
    scale = float(np.ptp(t)) ** 3  # the penalty scales with time^3: search lam relative to it

    def excess(log_lam):
        spline = interpolate.make_smoothing_spline(t, y, w=w, lam=scale * 10.0**log_lam)
        return float(np.sum(w * (y - spline(t)) ** 2)) - t.size

    lo, hi = -12.0, 2.0
    if excess(hi) <= 0:
        log_lam = hi
    elif excess(lo) >= 0:
        log_lam = lo
    else:
        log_lam = optimize.brentq(excess, lo, hi, xtol=1e-3)
    spline = interpolate.make_smoothing_spline(t, y, w=w, lam=scale * 10.0**log_lam)
    return spline(t), spline.derivative()(t)
