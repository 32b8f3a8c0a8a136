"""The transient solver's small dense solve against numpy.linalg.solve (LAPACK gesv), the
reference library."""

from __future__ import annotations

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from lapbalance.transient_kernels import solve_small


@settings(max_examples=200, deadline=None)
@given(st.integers(1, 6), st.integers(0, 2**32 - 1), st.floats(-6, 6))
def test_agrees_with_numpy_on_well_conditioned_systems(n, seed, log_scale):
    rng = np.random.default_rng(seed)
    # rows of very different size (as a Jacobian in rad, N and N·m has): pivoting matters
    A = rng.normal(size=(n, n)) * 10.0 ** rng.uniform(-3, 3, size=(n, 1))
    A *= 10.0 ** log_scale
    if np.linalg.cond(A) > 1e8:
        A += np.eye(n) * np.abs(A).max()
    b = rng.normal(size=n)
    ref = np.linalg.solve(A, b)
    x = b.copy()
    assert solve_small(A.copy(), x)
    np.testing.assert_allclose(A @ x, b, rtol=0, atol=1e-9 * (np.abs(A) @ np.abs(x)).max())
    np.testing.assert_allclose(x, ref, rtol=1e-6, atol=1e-12 * np.abs(ref).max())


def test_needs_pivoting():
    A = np.array([[0.0, 1.0], [1.0, 0.0]])
    b = np.array([2.0, 3.0])
    assert solve_small(A, b)
    np.testing.assert_array_equal(b, [3.0, 2.0])


def test_singular_and_non_finite_matrices_are_refused():
    assert not solve_small(np.array([[1.0, 2.0], [2.0, 4.0]]), np.array([1.0, 1.0]))
    assert not solve_small(np.zeros((3, 3)), np.ones(3))
    assert not solve_small(np.array([[np.nan, 0.0], [0.0, 1.0]]), np.ones(2))
