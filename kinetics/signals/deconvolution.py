"""Deconvolution of overlapped multiplets over one or many spectra (variable projection).

Shared line-shape parameters (centres, widths, J) across the spectra, per-spectrum areas
and baselines; see :func:`deconvolve`.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass, field

import numpy as np

from kinetics import lineshapes
from kinetics.errors import FitError
from kinetics.linalg import small_linear_algebra
from kinetics.signals.definitions import LineShape
from kinetics.signals.integrals import window_indices
from kinetics.spectra.spectrum import Spectrum

log = logging.getLogger(__name__)


# ---------------------------------------------------------------- deconvolution
@dataclass(frozen=True)
class Component:
    """One multiplet of a deconvolution: starting values and limits.

    Attributes
    ----------
    name : str
    center_ppm : float
        Starting centre.
    lineshape : LineShape
        Number of lines, starting J and widths, profile.
    tolerance_ppm : float
        The centre may move this far from its start.
    """

    name: str
    center_ppm: float
    lineshape: LineShape
    tolerance_ppm: float = 0.05


@dataclass(frozen=True)
class DeconvolutionResult:
    """A (global) deconvolution: shared line-shape parameters, per-spectrum areas.

    Attributes
    ----------
    names : tuple of str, shape (k,)
    areas : ndarray, shape (n_spectra, k)
        Multiplet areas (ppm x intensity).
    area_stderr : ndarray, shape (n_spectra, k)
        From the full covariance (shared and per-spectrum parameters together).
    center_ppm, width_hz, coupling_hz : dict name -> (value, stderr)
    residual_sigma : float
        Pooled residual standard deviation.
    success : bool
    message : str
    n_function_evals : int
    """

    names: tuple
    areas: np.ndarray
    area_stderr: np.ndarray
    center_ppm: dict
    width_hz: dict
    coupling_hz: dict
    residual_sigma: float
    success: bool
    message: str
    n_function_evals: int = 0
    gauss_width_hz: dict = field(default_factory=dict)

    def report(self) -> str:
        """Plain-text summary of the shared parameters and the first spectrum's areas."""
        lines = [f"deconvolution: {'converged' if self.success else 'FAILED'} ({self.message}); "
                 f"{self.areas.shape[0]} spectra, residual sigma {self.residual_sigma:.4g}"]
        for k, name in enumerate(self.names):
            c, cs = self.center_ppm[name]
            w, ws = self.width_hz[name]
            line = f"  {name}: centre {c:.5f} +/- {cs:.1e} ppm, FWHM {w:.3f} +/- {ws:.1e} Hz"
            if name in self.coupling_hz:
                j, js = self.coupling_hz[name]
                line += f", J {j:.3f} +/- {js:.1e} Hz"
            line += f", area[0] {self.areas[0, k]:.5g} +/- {self.area_stderr[0, k]:.2g}"
            lines.append(line)
        return "\n".join(lines)


@dataclass
class _Bounded:
    """A shared nonlinear parameter of the fit and its limits."""

    value: float
    min: float
    max: float


def _nonlinear_params(components, observe_mhz: float) -> dict[str, _Bounded]:
    params = {}
    for k, comp in enumerate(components):
        shape = comp.lineshape
        tol_hz = max(comp.tolerance_ppm * observe_mhz, 1e-6)
        params[f"c{k}_offset_hz"] = _Bounded(0.0, -tol_hz, tol_hz)
        params[f"c{k}_width_hz"] = _Bounded(shape.width_hz, 0.05 * shape.width_hz, 20.0 * shape.width_hz)
        if shape.n_lines > 1:
            params[f"c{k}_j_hz"] = _Bounded(shape.coupling_hz, 0.5 * shape.coupling_hz, 1.5 * shape.coupling_hz)
        if shape.profile == "voigt":
            params[f"c{k}_gauss_hz"] = _Bounded(shape.gauss_width_hz, 0.05 * shape.gauss_width_hz,
                                                20.0 * shape.gauss_width_hz)
    return params


#: MINPACK's messages for its exit codes, as lmfit words them.
_LM_MESSAGES = {0: "Invalid Input Parameters.", 1: "Fit succeeded.", 2: "Fit succeeded.", 3: "Fit succeeded.",
                4: "One or more variable did not affect the fit.",
                5: "Too many function evaluations."}


def _levenberg_marquardt(residual, params: dict[str, _Bounded]) -> tuple[dict[str, float], bool, str, int]:
    """Minimise ``sum(residual(values)^2)`` over bounded ``params``: (values, success, message, evaluations).

    MINPACK's Levenberg-Marquardt (``scipy.optimize.leastsq``, forward differences) on the
    internal variables u of the bound transformation ``v = min + (sin u + 1)(max - min) / 2``,
    with lmfit's settings (ftol = xtol = 1.5e-8, epsfcn = 1e-10): what lmfit's "leastsq"
    method does, called directly, because on a small window lmfit's per-fit set-up
    (parameter copies, expression interpreters) cost more than the fit itself (measured
    on the demo's fit groups: about a third of the time).
    """
    from scipy.optimize import leastsq

    names = list(params)
    low = np.array([params[n].min for n in names])
    high = np.array([params[n].max for n in names])
    start = np.array([params[n].value for n in names])
    internal = np.arcsin(np.clip(2.0 * (start - low) / (high - low) - 1.0, -1.0, 1.0))
    internal[np.abs(internal) < 1e-15] = 0.0

    def external(u):
        return low + (np.sin(u) + 1.0) * (high - low) / 2.0

    def objective(u):
        return residual(dict(zip(names, external(u).tolist())))

    with np.errstate(all="ignore"):
        best, _, info, _, ier = leastsq(objective, internal, full_output=True, ftol=1.5e-8, xtol=1.5e-8, gtol=0.0,
                                        maxfev=4000 * (len(names) + 1), epsfcn=1e-10, factor=100)
    message = _LM_MESSAGES.get(ier, "Tolerance seems to be too small.")
    return dict(zip(names, external(best).tolist())), ier in (1, 2, 3, 4), message, int(info["nfev"])


def _basis(ppm: np.ndarray, values: dict, components, observe_mhz: float, baseline_order: int,
           tails=None) -> np.ndarray:
    """Design matrix, shape (..., n, k + baseline_order + 1 [+ t]): unit-area multiplets, baseline
    [, solvent tails (fixed columns, see :func:`solvent_tails`)]."""
    columns = []
    for k, comp in enumerate(components):
        shape = comp.lineshape
        centre = comp.center_ppm + values[f"c{k}_offset_hz"] / observe_mhz
        columns.append(lineshapes.multiplet(
            ppm, 1.0, centre, shape.n_lines, values.get(f"c{k}_j_hz", 0.0) / observe_mhz, shape.profile,
            values[f"c{k}_width_hz"] / observe_mhz, values.get(f"c{k}_gauss_hz", 0.0) / observe_mhz))
    x = (ppm - ppm.mean(axis=-1, keepdims=True)) / max(np.ptp(ppm) / 2.0, 1e-12)
    for order in range(baseline_order + 1):
        columns.append(x ** order)
    design = np.stack(columns, axis=-1)
    if tails is None or tails.shape[-1] == 0:
        return design
    return np.concatenate([design, np.broadcast_to(tails, design.shape[:-1] + tails.shape[-1:])], axis=-1)


def solvent_tails(ppm: np.ndarray, solvent_ppm, baseline_order: int) -> np.ndarray:
    """Columns for the far tails of large solvent lines outside a fit window, shape (..., n, t).

    A Lorentzian line of HWHM g at x_s is g/pi / ((x - x_s)^2 + g^2), which far from x_s
    (|x - x_s| >> g) is proportional to 1/(x - x_s)^2: one column per solvent line, its
    amplitude fitted per spectrum like the baseline.  This models the tail's curvature,
    which a low-order local baseline cannot follow and which otherwise leaks into the
    areas.  A line inside the window (or within 0.02 ppm of it) gets no column (its
    tail model would be wrong there), nor does one whose tail the polynomial baseline
    already follows to 0.1 % (a far line: the column would only make the fit singular).
    """
    axis = ppm if ppm.ndim == 1 else ppm.mean(axis=0)
    x = (axis - axis.mean()) / max(np.ptp(axis) / 2.0, 1e-12)
    poly = np.stack([x ** order for order in range(baseline_order + 1)], axis=-1)
    columns = []
    for centre in solvent_ppm:
        if np.min(axis) - 0.02 <= centre <= np.max(axis) + 0.02:
            continue
        column = 1.0 / (ppm - centre) ** 2
        column = column / np.max(np.abs(column))
        flat = column if column.ndim == 1 else column.mean(axis=0)
        rest = flat - poly @ np.linalg.lstsq(poly, flat, rcond=None)[0]
        if np.linalg.norm(rest) > 1e-3 * np.linalg.norm(flat):
            columns.append(column)
    if not columns:
        return np.zeros(ppm.shape + (0,))
    return np.stack(columns, axis=-1)


def _solve_linear(design: np.ndarray, data: np.ndarray) -> np.ndarray:
    """Least-squares amplitudes, shape (S, m), for design (n, m) or (S, n, m) and data (S, n)."""
    # normal equations: a handful of well-scaled columns, and far faster than an SVD per call
    if design.ndim == 2:
        normal, rhs = design.T @ design, design.T @ data.T
        try:
            return np.linalg.solve(normal, rhs).T
        except np.linalg.LinAlgError:
            return np.linalg.lstsq(design, data.T, rcond=None)[0].T
    normal = np.einsum("sni,snj->sij", design, design)
    rhs = np.einsum("sni,sn->si", design, data)
    ridge = 1e-12 * np.max(np.abs(np.diagonal(normal, axis1=1, axis2=2)), axis=1)
    normal = normal + ridge[:, None, None] * np.eye(normal.shape[-1])
    return np.linalg.solve(normal, rhs[..., None])[..., 0]


def _predict(design: np.ndarray, coef: np.ndarray) -> np.ndarray:
    if design.ndim == 2:
        return coef @ design.T
    return np.einsum("snm,sm->sn", design, coef)


def deconvolve(ppm: np.ndarray, data: np.ndarray, components, observe_mhz: float,
               baseline_order: int = 1, solvent_ppm=()) -> DeconvolutionResult:
    """Fit multiplets to one or many spectra sharing positions, widths and J.

    Variable projection (Golub and Pereyra 1973): the nonlinear parameters (centre offsets,
    widths, J, shared by all spectra) are fitted by bounded Levenberg-Marquardt (lmfit's
    "leastsq" method, called directly: :func:`_levenberg_marquardt`) on the residual left after the per-spectrum amplitudes (multiplet areas and a polynomial
    baseline of ``baseline_order``) have been solved by linear least squares.  Area
    standard errors come from the full Jacobian of all parameters (shared and
    per-spectrum) at the optimum, sigma^2 (J^T J)^-1 with the pooled residual variance,
    evaluated blockwise (Schur complement) so the cost grows linearly with the spectra.

    Parameters
    ----------
    ppm : ndarray, shape (n,) or (S, n)
        Axis of the fit window (one shared axis, or one per spectrum).
    data : ndarray, shape (S, n) or (n,)
        Intensities of the window in each spectrum.
    components : sequence of Component, length k
    observe_mhz : float
        Converts Hz (widths, J) to ppm.
    baseline_order : int
        Polynomial baseline per spectrum (0 constant, 1 straight line, ...).
    solvent_ppm : sequence of float
        Large solvent lines outside the window whose tails reach it: each adds a tail
        column (:func:`solvent_tails`) beside the baseline, fitted per spectrum.
    """
    with small_linear_algebra():
        return _deconvolve(ppm, data, components, observe_mhz, baseline_order, tuple(solvent_ppm))


def _deconvolve(ppm, data, components, observe_mhz: float, baseline_order: int,
                solvent_ppm=()) -> DeconvolutionResult:
    data = np.atleast_2d(np.asarray(data, dtype=float))
    ppm = np.asarray(ppm, dtype=float)
    if ppm.shape[-1] != data.shape[-1]:
        raise FitError(f"axis has {ppm.shape[-1]} points but the data {data.shape[-1]}")
    n_spectra, n_points = data.shape
    k = len(components)
    tails = solvent_tails(ppm, solvent_ppm, baseline_order) if solvent_ppm else None
    n_linear = k + baseline_order + 1 + (0 if tails is None else tails.shape[-1])
    if n_points <= n_linear + 4:
        raise FitError(f"fit window of {n_points} points is too small for {k} multiplets")
    if not (np.all(np.isfinite(data)) and np.all(np.isfinite(ppm))):
        raise FitError("the fit window holds non-finite values (NaN or infinity)")
    params = _nonlinear_params(components, observe_mhz)

    def residual(values):
        design = _basis(ppm, values, components, observe_mhz, baseline_order, tails)
        coef = _solve_linear(design, data)
        return (data - _predict(design, coef)).ravel()

    _coarse_start(params, ppm, data, components, observe_mhz, baseline_order, tails)
    values, converged, message, evaluations = _levenberg_marquardt(residual, params)
    design = _basis(ppm, values, components, observe_mhz, baseline_order, tails)
    coef = _solve_linear(design, data)
    resid = data - _predict(design, coef)
    free = list(values)
    dof = data.size - len(free) - n_spectra * n_linear
    if dof <= 0:
        raise FitError("more parameters than data points in the deconvolution")
    sigma2 = float(np.sum(resid ** 2) / dof)
    at_bound = [name for name in free if _at_bound(values[name], params[name])]
    cov_theta, cov_coef = _full_covariance(ppm, values, free, components, observe_mhz, baseline_order,
                                           design, coef, sigma2, tails)
    theta_err = dict(zip(free, np.sqrt(np.clip(np.diag(cov_theta), 0, None))))
    area_err = np.sqrt(np.clip(np.diagonal(cov_coef, axis1=1, axis2=2)[:, :k], 0, None))
    success = converged and not at_bound
    message = message if not at_bound else f"parameters at their limits: {', '.join(at_bound)}"
    centres, widths, couplings, gauss = {}, {}, {}, {}
    for i, comp in enumerate(components):
        centres[comp.name] = (comp.center_ppm + values[f"c{i}_offset_hz"] / observe_mhz,
                              theta_err.get(f"c{i}_offset_hz", np.nan) / observe_mhz)
        widths[comp.name] = (values[f"c{i}_width_hz"], theta_err.get(f"c{i}_width_hz", np.nan))
        if f"c{i}_j_hz" in values:
            couplings[comp.name] = (values[f"c{i}_j_hz"], theta_err.get(f"c{i}_j_hz", np.nan))
        if f"c{i}_gauss_hz" in values:
            gauss[comp.name] = (values[f"c{i}_gauss_hz"], theta_err.get(f"c{i}_gauss_hz", np.nan))
    if not success:
        # the caller reports it once per run in words naming the signals (DeconvolutionResult.message)
        log.debug("deconvolution did not converge cleanly: %s", message)
    return DeconvolutionResult(
        names=tuple(c.name for c in components), areas=coef[:, :k].copy(), area_stderr=area_err,
        center_ppm=centres, width_hz=widths, coupling_hz=couplings, residual_sigma=math.sqrt(sigma2),
        success=success, message=str(message), n_function_evals=evaluations, gauss_width_hz=gauss)


def _coarse_start(params: dict[str, _Bounded], ppm: np.ndarray, data: np.ndarray, components,
                  observe_mhz: float, baseline_order: int, tails=None) -> None:
    """Move the starting centres to the best point of a grid search (in place).

    Narrow overlapped multiplets give a least-squares surface with local minima about a
    line width apart in the centres, so Levenberg-Marquardt needs a start within roughly
    half a width.  Each centre offset is gridded over its tolerance in steps of 0.35 line
    widths (starting J and widths), and the residual sum of squares after the linear
    solve is evaluated for every grid point at once from Gram matrices: jointly for up
    to two components, coordinate-wise (two passes) for more.  Spectra with different
    axes are searched on their mean axis (the grid only picks the start).
    """
    axis = ppm if ppm.ndim == 1 else ppm.mean(axis=0)
    names = [f"c{k}_offset_hz" for k in range(len(components))]
    grids, columns = [], []
    for k, comp in enumerate(components):
        shape = comp.lineshape
        par = params[names[k]]
        grid = _grid(par.min, par.max, 0.35 * shape.width_hz)
        centres = comp.center_ppm + grid / observe_mhz
        columns.append(lineshapes.multiplet(
            axis[None, :], 1.0, centres, shape.n_lines, shape.coupling_hz / observe_mhz,
            shape.profile, shape.width_hz / observe_mhz, shape.gauss_width_hz / observe_mhz))
        grids.append(grid)
    x = (axis - axis.mean()) / max(np.ptp(axis) / 2.0, 1e-12)
    baseline = np.array([x ** order for order in range(baseline_order + 1)])
    if tails is not None and tails.shape[-1]:
        flat = tails if tails.ndim == 2 else tails.mean(axis=0)
        baseline = np.vstack([baseline, flat.T])
    best = [int(np.argmin(np.abs(g))) for g in grids]
    if len(components) <= 2:
        rss = _rss_grid(columns, baseline, data)
        best = list(np.unravel_index(int(np.argmin(rss)), rss.shape))
    else:
        for _ in range(2):
            for k in range(len(components)):
                others = [columns[j][best[j]] for j in range(len(components)) if j != k]
                rss = _rss_grid([columns[k]], np.vstack(others + [baseline]), data)
                best[k] = int(np.argmin(rss))
    for name, grid, index in zip(names, grids, best):
        params[name].value = float(grid[index])


def _grid(low: float, high: float, step: float, limit: int = 81) -> np.ndarray:
    count = min(limit, int(math.floor((high - low) / step)) + 1)
    return np.union1d(np.linspace(low, high, max(count, 2)), [0.0] if low <= 0 <= high else [])


def _rss_grid(varying, fixed: np.ndarray, data: np.ndarray) -> np.ndarray:
    """Residual sum of squares of data (S, n) on [varying columns..., fixed (f, n)].

    ``varying`` holds one or two candidate sets (G_i, n); the result has shape (G_1,) or
    (G_1, G_2): RSS = sum_s (y_s.y_s - r_s^T M^-1 r_s) with the normal matrix M and
    right-hand sides r of each combination, solved in one batched call.
    """
    yy = float(np.sum(data ** 2))
    ff, fy = fixed @ fixed.T, fixed @ data.T
    f = fixed.shape[0]
    if len(varying) == 1:
        c = varying[0]
        g = c.shape[0]
        normal = np.zeros((g, f + 1, f + 1))
        normal[:, 0, 0] = np.einsum("gn,gn->g", c, c)
        normal[:, 0, 1:] = normal[:, 1:, 0] = c @ fixed.T
        normal[:, 1:, 1:] = ff
        rhs = np.concatenate([(c @ data.T)[:, None, :], np.broadcast_to(fy, (g,) + fy.shape)], axis=1)
        shape = (g,)
    else:
        a, b = varying
        ga, gb = a.shape[0], b.shape[0]
        normal = np.zeros((ga, gb, f + 2, f + 2))
        normal[..., 0, 0] = np.einsum("gn,gn->g", a, a)[:, None]
        normal[..., 1, 1] = np.einsum("gn,gn->g", b, b)[None, :]
        normal[..., 0, 1] = normal[..., 1, 0] = a @ b.T
        normal[..., 0, 2:] = normal[..., 2:, 0] = (a @ fixed.T)[:, None, :]
        normal[..., 1, 2:] = normal[..., 2:, 1] = (b @ fixed.T)[None, :, :]
        normal[..., 2:, 2:] = ff
        rhs = np.zeros((ga, gb, f + 2, data.shape[0]))
        rhs[..., 0, :] = (a @ data.T)[:, None, :]
        rhs[..., 1, :] = (b @ data.T)[None, :, :]
        rhs[..., 2:, :] = fy
        shape = (ga, gb)
        normal = normal.reshape((-1,) + normal.shape[2:])
        rhs = rhs.reshape((-1,) + rhs.shape[2:])
    ridge = 1e-12 * np.max(np.abs(np.diagonal(normal, axis1=1, axis2=2)), axis=1)
    normal = normal + ridge[:, None, None] * np.eye(normal.shape[-1])
    solution = np.linalg.solve(normal, rhs)
    return (yy - np.einsum("gms,gms->g", rhs, solution)).reshape(shape)


def _at_bound(value: float, par: _Bounded) -> bool:
    span = par.max - par.min
    return bool(np.isfinite(span) and min(value - par.min, par.max - value) < 1e-6 * span)


def _full_covariance(ppm, values, free, components, observe_mhz, baseline_order, design, coef, sigma2,
                     tails=None):
    """Covariance of the shared parameters and of each spectrum's amplitudes (blockwise).

    With G_s = dA/dtheta c_s (n x p), the normal matrix of all parameters is
    [[sum_s G_s^T G_s, G_s^T A_s], [A_s^T G_s, A_s^T A_s]]; the Schur complement
    S = sum_s G_s^T G_s - sum_s G_s^T A_s H_s A_s^T G_s (H_s = (A_s^T A_s)^-1) gives
    cov(theta) = sigma^2 S^-1 and cov(c_s) = sigma^2 (H_s + H_s A_s^T G_s S^-1 G_s^T A_s H_s).
    """
    n_spectra = coef.shape[0]
    design_s = np.broadcast_to(design, (n_spectra,) + design.shape[-2:]) if design.ndim == 2 else design
    grads = []
    for name in free:
        step = 1e-4 * max(abs(values[name]), 1e-2)
        up, down = dict(values), dict(values)
        up[name] += step
        down[name] -= step
        d_design = (_basis(ppm, up, components, observe_mhz, baseline_order, tails)
                    - _basis(ppm, down, components, observe_mhz, baseline_order, tails)) / (2 * step)
        d_design = np.broadcast_to(d_design, design_s.shape)
        grads.append(np.einsum("snm,sm->sn", d_design, coef))
    gram = np.einsum("sni,snj->sij", design_s, design_s)
    hinv = np.linalg.inv(gram)
    if not grads:
        return np.zeros((0, 0)), sigma2 * hinv
    g = np.stack(grads, axis=-1)                                # (S, n, p)
    cross = np.einsum("snp,snm->spm", g, design_s)              # G^T A, (S, p, m)
    schur = np.einsum("snp,snq->pq", g, g) - np.einsum("spm,smk,sqk->pq", cross, hinv, cross)
    schur_inv = np.linalg.pinv(schur)
    hq = np.einsum("smk,spk->smp", hinv, cross)                 # H A^T G, (S, m, p)
    cov_coef = hinv + np.einsum("smp,pq,snq->smn", hq, schur_inv, hq)
    return sigma2 * schur_inv, sigma2 * cov_coef


def window_data(spectrum: Spectrum, window_ppm, n_points: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Axis and intensities of a window; with ``n_points`` a fixed count from the high edge."""
    idx = window_indices(spectrum.ppm, window_ppm)
    if n_points is not None:
        start = idx[0] if idx.size else spectrum.index_of(window_ppm[1])
        idx = np.arange(start, min(start + n_points, spectrum.n_points))
    return spectrum.ppm[idx], spectrum.real[idx]


def fit_window(signals) -> tuple[float, float]:
    """Union of the windows of a group of fit signals."""
    return (min(s.window_ppm[0] for s in signals), max(s.window_ppm[1] for s in signals))


def components_for(signals) -> list[Component]:
    """Deconvolution components of a group of fit signals (start at the window centres).

    A centre may move by the signal's ``tolerance_ppm`` when one is given, else by a
    quarter of its window: an explicit tolerance is how a user keeps two close lines of
    one group from trading places.
    """
    return [Component(name=s.name, center_ppm=s.center_ppm, lineshape=s.lineshape,
                      tolerance_ppm=s.tolerance_ppm if s.tolerance_ppm > 0
                      else 0.25 * (s.window_ppm[1] - s.window_ppm[0]))
            for s in signals]

