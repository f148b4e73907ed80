"""Compiled Cholesky and triangular solves against scipy (reference library)."""
import numpy as np
import pytest
import scipy.linalg

import geosim.linalg as gl
from geosim.errors import NotPositiveDefiniteError


def _spd(n, seed, cond_shift=1e-3):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=(n, n))
    return x @ x.T / n + cond_shift * np.eye(n)


@pytest.mark.parametrize("n", [1, 2, 7, gl.LAPACK_ORDER - 1, gl.LAPACK_ORDER + 5, 100])
def test_cholesky_matches_scipy(n):
    # reference: scipy.linalg.cholesky (LAPACK dpotrf); 1e-12 relative as the issue asks,
    # for the compiled kernel at every size and for the public wrapper (either branch)
    a = _spd(n, seed=n)
    ref = scipy.linalg.cholesky(a, lower=True)
    buf = a.copy()
    assert gl.chol_inplace(buf, n, 0.0) == -1
    for ours in (np.tril(buf), gl.cholesky(a)):
        assert np.allclose(ours, ref, rtol=1e-12, atol=1e-12 * np.abs(ref).max())
        assert np.array_equal(np.triu(ours, 1), np.zeros((n, n)))


def test_chol_inplace_on_larger_buffer_leaves_rest_alone():
    a = _spd(6, seed=3)
    buf = np.full((9, 9), 7.0)
    buf[:6, :6] = a
    k = gl.chol_inplace(buf, 6, 0.0)
    assert k == -1
    assert np.allclose(np.tril(buf[:6, :6]), scipy.linalg.cholesky(a, lower=True), rtol=1e-12)
    assert np.all(buf[6:, :] == 7.0) and np.all(buf[:, 6:] == 7.0)
    # the strict upper triangle is documented as untouched
    iu = np.triu_indices(6, 1)
    assert np.array_equal(buf[:6, :6][iu], a[iu])


def test_triangular_solves_match_scipy():
    a = _spd(12, seed=5)
    b = np.random.default_rng(1).normal(size=12)
    l = gl.cholesky(a)
    y = b.copy()
    gl.forward_inplace(l, 12, y)
    assert np.allclose(y, scipy.linalg.solve_triangular(l, b, lower=True), rtol=1e-10)
    x = gl.solve_spd(l, b)
    assert np.allclose(x, scipy.linalg.cho_solve((l, True), b), rtol=1e-10)
    assert np.allclose(a @ x, b, rtol=1e-10, atol=1e-12)


@pytest.mark.parametrize("n", [5, 9, gl.LAPACK_ORDER + 3])
def test_indefinite_matrix_raises_with_pivot_and_id(n):
    # eigenvalues (3, -1) on the block [[1, 2], [2, 1]]: indefinite, fails at pivot 4, which
    # n = 5 reaches one pivot at a time after a tile and n = 9 inside its second tile
    a = np.eye(n)
    a[3:5, 3:5] = [[1.0, 2.0], [2.0, 1.0]]
    ids = [f"S{i}" for i in range(n)]
    with pytest.raises(NotPositiveDefiniteError) as err:
        gl.cholesky(a, ids=ids, context="unit test")
    assert err.value.pivot == 4
    assert err.value.value == pytest.approx(1.0 - 4.0)
    assert "S4" in str(err.value) and "unit test" in str(err.value)
    assert gl.chol_inplace(a.copy(), n, 0.0) == 4


def test_singular_and_nan_are_failures():
    ones = np.ones((3, 3))  # rank one: pivot 1 is exactly zero
    with pytest.raises(NotPositiveDefiniteError) as err:
        gl.cholesky(ones)
    assert err.value.pivot == 1
    bad = np.eye(3)
    bad[2, 2] = np.nan
    assert gl.chol_inplace(bad, 3, 0.0) == 2


def test_tolerance_rejects_tiny_pivots():
    a = np.array([[1.0, 1.0 - 1e-14], [1.0 - 1e-14, 1.0]])
    assert gl.chol_inplace(a.copy(), 2, 0.0) == -1
    assert gl.chol_inplace(a.copy(), 2, 1e-10) == 1


@pytest.mark.parametrize("n", [5, gl.LAPACK_ORDER + 8])
def test_public_cholesky_applies_tolerance_in_both_branches(n):
    a = np.eye(n)
    a[2:4, 2:4] = [[1.0, 1.0 - 1e-14], [1.0 - 1e-14, 1.0]]  # nearly duplicated rows
    gl.cholesky(a)  # strictly positive pivots: factors
    with pytest.raises(NotPositiveDefiniteError) as err:
        gl.cholesky(a, tol=1e-10)
    assert err.value.pivot == 3 and 0.0 < err.value.value < 1e-10


@pytest.mark.parametrize("n", [1, 3, 4, 5, 8, 9, 16, 31])
def test_tile_edges_match_scipy(n):
    # orders around the four-pivot tiles (0 to 3 pivots left after the last tile), against scipy
    a = _spd(n, seed=100 + n)
    buf = a.copy()
    assert gl.chol_inplace(buf, n, 0.0) == -1
    ref = scipy.linalg.cholesky(a, lower=True)
    assert np.allclose(np.tril(buf), ref, rtol=1e-12, atol=1e-12 * np.abs(ref).max())


@pytest.mark.parametrize("n", [1, 4, 7, 16])
def test_partial_factor_of_a_bordered_system_gives_kriging_mean_and_variance(n):
    # simple kriging of value z at a target with covariance vector c and variance c0:
    # mean c^T C^-1 z, variance c0 - c^T C^-1 c (reference: scipy.linalg.solve)
    rng = np.random.default_rng(n)
    full = _spd(n + 1, seed=200 + n)
    cmat, c, c0 = full[:n, :n], full[n, :n], full[n, n]
    z = rng.normal(size=n)
    a = np.zeros((n + 2, n + 2))
    a[:n, :n] = cmat
    a[n, :n], a[n, n] = c, c0
    a[n + 1, :n] = z
    assert gl.chol_partial(a, n + 2, n, 0.0) == -1
    weights = scipy.linalg.solve(cmat, c, assume_a="pos")
    assert a[n, n] == pytest.approx(c0 - c @ weights, rel=1e-10, abs=1e-12)
    assert -a[n + 1, n] == pytest.approx(weights @ z, rel=1e-10, abs=1e-12)
    assert np.allclose(np.tril(a[:n, :n]), scipy.linalg.cholesky(cmat, lower=True), rtol=1e-12)
