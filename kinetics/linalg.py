"""Small dense linear algebra: one BLAS thread, and complex least squares by real normal equations.

The per-spectrum fits solve many tiny systems (tens of columns, hundreds to thousands of
rows).  OpenBLAS spreads even these over its threads; on a 2-core machine shared with
other work the hand-over costs far more than the arithmetic (measured: a demo spectrum's
processing and measurement 2.8-3.9 times faster with one thread).  :func:`small_linear_algebra`
limits BLAS to one thread for the duration of a block; large FFTs are not BLAS and keep
their speed.

:func:`complex_lstsq` solves ``min ||A c - y||`` for complex ``A`` (n, k) and ``y`` (n,)
through the real normal equations of the stacked system ``[[Re A, -Im A], [Im A, Re A]]``,
i.e. ``(A^H A) c = A^H y`` written in reals.  For the well-scaled, few-column designs used
here (asymptotic tails, polynomials) this is far cheaper than an SVD-based complex
``lstsq`` and agrees with it to rounding (tests/test_linalg.py checks it against
``numpy.linalg.lstsq``); columns are scaled to unit norm first to keep the normal matrix
well conditioned, and a singular system falls back on ``lstsq``.
"""

from __future__ import annotations

import contextlib
from typing import Iterator

import numpy as np

__all__ = ["small_linear_algebra", "complex_lstsq"]

_CONTROLLER = None


def _controller():
    # inspecting the loaded BLAS libraries takes about a millisecond: done once per process
    global _CONTROLLER
    if _CONTROLLER is None:
        from threadpoolctl import ThreadpoolController

        _CONTROLLER = ThreadpoolController()
    return _CONTROLLER


@contextlib.contextmanager
def small_linear_algebra() -> Iterator[None]:
    """Run the block with BLAS limited to one thread (restored afterwards; nesting is fine)."""
    controller = _controller()
    if not controller.select(user_api="blas").lib_controllers:
        yield
        return
    if all(lib.num_threads == 1 for lib in controller.select(user_api="blas").lib_controllers):
        yield  # already limited (an enclosing block): skip the two library calls
        return
    with controller.limit(limits=1, user_api="blas"):
        yield


def complex_lstsq(design: np.ndarray, data: np.ndarray) -> np.ndarray:
    """Least-squares coefficients of a complex system, shape (k,), via real normal equations.

    Parameters
    ----------
    design : ndarray, shape (n, k)
        Complex or real design matrix, n >= k.
    data : ndarray, shape (n,)
        Complex or real observations.

    Returns
    -------
    ndarray, complex, shape (k,)
        ``argmin_c ||design @ c - data||_2``; equal to ``numpy.linalg.lstsq(design, data)[0]``
        for a full-rank design.
    """
    design = np.asarray(design)
    data = np.asarray(data)
    if design.ndim != 2 or data.ndim != 1 or design.shape[0] != data.shape[0]:
        raise ValueError(f"need design (n, k) and data (n,), got {design.shape} and {data.shape}")
    n, k = design.shape
    if n < k:
        raise ValueError(f"under-determined system: {n} rows for {k} columns")
    norms = np.sqrt(np.einsum("ij,ij->j", design.real, design.real) + np.einsum("ij,ij->j", design.imag, design.imag)
                    if np.iscomplexobj(design) else np.einsum("ij,ij->j", design, design))
    norms[norms == 0] = 1.0
    a_re = design.real / norms
    a_im = design.imag / norms if np.iscomplexobj(design) else np.zeros_like(a_re)
    y_re, y_im = data.real, (data.imag if np.iscomplexobj(data) else np.zeros(n))
    # A^H A = (Re A^T Re A + Im A^T Im A) + i (Re A^T Im A - Im A^T Re A); as a real
    # 2k x 2k system [[P, -Q], [Q, P]] [Re c; Im c] = [Re A^H y; Im A^H y]
    p = a_re.T @ a_re + a_im.T @ a_im
    q = a_re.T @ a_im - a_im.T @ a_re
    normal = np.block([[p, -q], [q, p]])
    rhs = np.concatenate([a_re.T @ y_re + a_im.T @ y_im, a_re.T @ y_im - a_im.T @ y_re])
    try:
        solution = np.linalg.solve(normal, rhs)
    except np.linalg.LinAlgError:
        return np.linalg.lstsq(design, data, rcond=None)[0]
    return (solution[:k] + 1j * solution[k:]) / norms
