"""Small linear algebra (kinetics.linalg): the real normal-equation solver of complex least
squares against numpy's SVD-based lstsq (reference library), and the BLAS thread limit."""

from __future__ import annotations

import numpy as np
import pytest

from kinetics.linalg import complex_lstsq, small_linear_algebra


@pytest.mark.parametrize("seed", range(8))
def test_complex_normal_equations_equal_numpy_lstsq(seed):
    rng = np.random.default_rng(seed)
    n, k = int(rng.integers(20, 400)), int(rng.integers(1, 12))
    design = rng.normal(size=(n, k)) + 1j * rng.normal(size=(n, k))
    # columns of very different scale, as in the solvent-tail design (u^-1 .. u^-3, a cubic)
    design *= 10.0 ** rng.uniform(-4, 4, size=k)
    data = rng.normal(size=n) + 1j * rng.normal(size=n)
    ours = complex_lstsq(design, data)
    reference = np.linalg.lstsq(design, data, rcond=None)[0]
    assert np.allclose(ours, reference, rtol=1e-8, atol=0)
    assert np.allclose(design @ ours, design @ reference, rtol=1e-9, atol=1e-9 * np.abs(data).max())


def test_real_design_with_complex_data_and_an_exact_solution():
    rng = np.random.default_rng(11)
    design = rng.normal(size=(50, 4))
    truth = np.array([1 + 2j, -0.5j, 3.0, 0.25 - 1j])
    assert np.allclose(complex_lstsq(design, design @ truth), truth, rtol=1e-12, atol=1e-12)


def test_the_solvent_tail_design_matches_lstsq():
    # the design of processing.phasing._remove_solvent_tails: asymptotic tails of a line at
    # point 1500 of 4096 (width 6 points) and a cubic, on points away from the line
    n, centre, width = 4096, 1500, 6.0
    index = np.arange(n, dtype=float)
    u = (index - centre) / width
    t = 2.0 * index / (n - 1) - 1.0
    far = np.abs(u) > 20
    u, t = u[far], t[far]
    design = np.stack([u ** -1, u ** -2, u ** -3, np.ones(u.size), t, t * t, t ** 3], 1)
    rng = np.random.default_rng(5)
    data = design @ (rng.normal(size=7) + 1j * rng.normal(size=7)) + 0.01 * (rng.normal(size=len(design))
                                                                             + 1j * rng.normal(size=len(design)))
    ours = complex_lstsq(design, data)
    reference = np.linalg.lstsq(design, data, rcond=None)[0]
    assert np.allclose(design @ ours, design @ reference, rtol=0, atol=1e-9 * np.abs(data).max())


def test_bad_shapes_are_refused():
    with pytest.raises(ValueError):
        complex_lstsq(np.ones((3, 5)), np.ones(3))
    with pytest.raises(ValueError):
        complex_lstsq(np.ones((5, 2)), np.ones(4))


def test_blas_is_limited_inside_and_restored_after():
    threadpoolctl = pytest.importorskip("threadpoolctl")
    before = [lib["num_threads"] for lib in threadpoolctl.threadpool_info() if lib["user_api"] == "blas"]
    with small_linear_algebra():
        inside = [lib["num_threads"] for lib in threadpoolctl.threadpool_info() if lib["user_api"] == "blas"]
        with small_linear_algebra():  # nested: still one thread
            nested = [lib["num_threads"] for lib in threadpoolctl.threadpool_info() if lib["user_api"] == "blas"]
    after = [lib["num_threads"] for lib in threadpoolctl.threadpool_info() if lib["user_api"] == "blas"]
    assert all(count == 1 for count in inside + nested)
    assert after == before
