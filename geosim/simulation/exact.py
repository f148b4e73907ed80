"""Exact conditional simulation by one Cholesky factor of the joint covariance (LU simulation).

The joint covariance of the data (first ``n`` rows) and the active nodes is factored
once, ``C = L L^T``, by LAPACK.  With ``a = L11^-1 z`` every realization is

    y = L21 a + L22 w,    w ~ N(0, I),

which is exactly Gaussian with the simple-kriging mean ``C21 C11^-1 z`` and covariance
``C22 - C21 C11^-1 C12`` (Davis 1987, "Production of conditional simulations via the LU
triangular decomposition of the covariance matrix", Mathematical Geology 19(2), 91-98).
For ordinary kriging the realization is an unconditional one, ``u = L w``, corrected by
ordinary kriging of its residuals at the data: ``y = u_nodes + W (z - u_data)`` with the
global ordinary-kriging weights ``W`` (conditioning by kriging, Journel and Huijbregts
1978, Mining Geostatistics, section VII.A, from memory).

With a collocated secondary ``s`` (normal scores at every active node, correlation
``rho`` with the primary) the conditioning set is the data and the secondary at all
active nodes, under the joint Gaussian model of the Markov model (Almeida and Journel
1994, Mathematical Geology 26(5)) in which the secondary is the primary scaled plus
independent noise, ``S = b Y + e``, ``b = rho / sqrt(sill)``, ``Var(e) = 1 - rho^2``:

    C_YS(h) = b C_Y(h),    C_SS(h) = b^2 C_Y(h) + (1 - rho^2) [h = 0],

so the realizations are drawn from the exact conditional distribution given the data
and the whole secondary grid.  The sequential engine's collocated co-simulation uses
the secondary at the node itself only; this engine is its reference.

Memory grows with the square of ``n + N``; the engine refuses systems above
``max_size`` (default 16,000) and suggests the sequential engine.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numba import njit

from ..errors import InputError, NotPositiveDefiniteError
from ..search import Neighbourhood
from .validate import check_inputs, coincident_nodes, collocated_inputs, complement, data_labels


@dataclass(frozen=True)
class ExactPlan:
    """The factor and conditioning vectors of one exact run (picklable)."""

    shape: tuple
    active_flat: np.ndarray   # flat grid index of every active node
    free: np.ndarray          # active positions that are simulated (not on a datum)
    fixed: np.ndarray         # active positions on a datum
    fixed_scores: np.ndarray  # and their scores
    rows: np.ndarray          # L[n:, :] (simple: L[n:, n:]) of the joint factor, a view (no copy)
    data_rows: np.ndarray     # L[:n, :n] (ordinary only, else empty)
    mean: np.ndarray          # simple-kriging mean L21 L11^-1 z at the free nodes (simple only)
    weights: np.ndarray       # (F, n) ordinary-kriging weights (ordinary only, else empty)
    scores: np.ndarray        # the data scores
    ordinary: bool

    @property
    def variance(self) -> np.ndarray:
        """Conditional variance at the free nodes (simple kriging variance)."""
        return np.einsum("ij,ij->i", self.rows, self.rows) if not self.ordinary else None


MAX_SIZE = 16_000


def check_size(size: int, max_size: int = MAX_SIZE, *, file: str | None = None, field: str = "engine") -> None:
    """Refuse a joint covariance of ``size`` rows (data plus simulated nodes) above ``max_size``."""
    if size > max_size:
        raise InputError(f"the exact engine would factor a {size} x {size} covariance matrix "
                         f"({size * size * 8 / 2**30:.1f} GiB); its limit is {max_size}", file=file,
                         field=field, fix="use the sequential engine, a coarser grid or a smaller domain")


class ExactEngine:
    """Conditional simulation from one LAPACK Cholesky factor, for small grids.

    Options: ``max_size`` (largest ``n + N`` accepted, default 16,000), ``sample_ids``
    (labels of the data rows for error messages), ``secondary`` and ``correlation``
    (a collocated secondary in normal scores on ``grid.shape`` and its correlation with
    the primary: the secondary at every active node joins the conditioning set, see the
    module docstring; simple kriging only; ``correlation = 0`` is the primary-only run).  The neighbourhood is ignored: every
    datum conditions every node (so ``hole_ids`` is accepted, as by the sequential
    engine, and has no effect).

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.simulation.exact import ExactEngine
    >>> grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (6, 6))
    >>> model = geosim.Nugget(0.05) + geosim.Exponential(0.95, geosim.Anisotropy.isotropic(60.0))
    >>> plan = ExactEngine().prepare(np.array([[25.0, 35.0]]), np.array([-0.8]), model, grid)
    >>> field = ExactEngine().realize(plan, np.random.default_rng(1))
    >>> field.shape, float(field[2, 2])
    ((6, 6), -0.8)
    """

    name = "exact"

    def prepare(self, data_coords, data_scores, model, grid, *, neighbourhood: Neighbourhood | None = None,
                kriging: str = "simple", max_size: int = MAX_SIZE, sample_ids=None, hole_ids=None,
                secondary=None, correlation: float = 0.0) -> ExactPlan:
        """Factor the joint covariance of data and active nodes once."""
        from scipy.linalg import solve_triangular
        coords3, scores, _, ordinary, model = check_inputs(data_coords, data_scores, model, grid,
                                                           neighbourhood, kriging)
        sec, b, noise = collocated_inputs(secondary, correlation, grid, model, ordinary)
        labels = data_labels(sample_ids, len(scores))
        nodes = grid.coords()
        fixed, fixed_data = coincident_nodes(coords3, grid)
        free = complement(nodes.shape[0], fixed)
        d = grid.ndim
        cond = scores
        if b != 0.0:
            # the secondary at every active node is conditioning data too, after the samples
            cond = np.concatenate([scores, sec[grid.mask]])
            labels = labels + tuple(f"secondary at grid node {i + 1}" for i in range(nodes.shape[0]))
        n = cond.shape[0]
        size = n + free.shape[0]
        check_size(size, max_size)
        points = np.vstack([coords3[:, :d]] + ([nodes] if b != 0.0 else []) + [nodes[free]])
        if ordinary and n == 0:
            raise InputError("ordinary kriging needs at least one datum", field="kriging",
                             fix="use kriging='simple' for an unconditional simulation")
        c = model.cov_matrix(points, chunk=256)  # small chunks: lag temporaries stay ~100 MB
        if b != 0.0:
            _markov_secondary(c, scores.shape[0], nodes.shape[0], b, noise)
        c12 = c[:n, n:].copy() if ordinary else None
        factor = _lapack_cholesky(c, labels, n)
        active_flat = np.flatnonzero(grid.mask.ravel())
        empty = np.zeros((0, 0))
        if ordinary:
            l11 = factor[:n, :n]
            sk = solve_triangular(l11, solve_triangular(l11, c12, lower=True), lower=True, trans="T")
            ones = solve_triangular(l11, solve_triangular(l11, np.ones(n), lower=True), lower=True, trans="T")
            # ordinary kriging weights: simple-kriging weights plus the unbiasedness correction
            mu = (1.0 - sk.sum(axis=0)) / ones.sum()
            weights = (sk + np.outer(ones, mu)).T
            return ExactPlan(grid.shape, active_flat, free, fixed, scores[fixed_data],
                             factor[n:], np.ascontiguousarray(l11), np.zeros(0),
                             np.ascontiguousarray(weights), scores, True)
        a = solve_triangular(factor[:n, :n], cond, lower=True) if n else np.zeros(0)
        mean = factor[n:, :n] @ a
        return ExactPlan(grid.shape, active_flat, free, fixed, scores[fixed_data],
                         factor[n:, n:], empty, mean, empty, scores, False)

    def realize(self, plan: ExactPlan, rng: np.random.Generator) -> np.ndarray:
        """One realization: normal scores of ``grid.shape``, NaN outside the mask."""
        if plan.ordinary:
            n = plan.scores.shape[0]
            w = rng.standard_normal(plan.rows.shape[1])
            residual = plan.scores - matvec(plan.data_rows, w[:n])
            values = matvec(plan.rows, w) + matvec(plan.weights, residual)
        else:
            values = plan.mean + matvec(plan.rows, rng.standard_normal(plan.rows.shape[1]))
        out = np.full(int(np.prod(plan.shape)), np.nan)
        out[plan.active_flat[plan.free]] = values
        out[plan.active_flat[plan.fixed]] = plan.fixed_scores
        return out.reshape(plan.shape)


def _markov_secondary(c: np.ndarray, n: int, m: int, b: float, noise: float) -> None:
    """Turn rows/columns ``n .. n + m`` of the primary covariance ``c`` into the secondary's:
    ``b`` times the primary's against primary rows, ``b^2`` times plus ``noise`` on the
    diagonal among themselves (in place)."""
    s = slice(n, n + m)
    c[s, :] *= b
    c[:, s] *= b
    c[s, s][np.diag_indices(m)] += noise


def matvec(a: np.ndarray, x: np.ndarray) -> np.ndarray:
    """``a @ x`` summed in a fixed order whatever the memory layout, BLAS or machine.

    BLAS may sum in a different order for a strided view than for the contiguous copy a
    worker unpickles, or on another CPU; realizations must be bit-identical everywhere.
    """
    out = np.zeros(a.shape[0])
    _matvec(a, np.ascontiguousarray(x, dtype=np.float64), out, a.strides[0] <= a.strides[1])
    return out


@njit(cache=True, nogil=True)
def _matvec(a, x, out, by_columns):
    # both loop orders add a[i, 0] x[0], a[i, 1] x[1], ... to out[i] in the same sequence
    m, n = a.shape
    if by_columns:
        for j in range(n):
            xj = x[j]
            for i in range(m):
                out[i] += a[i, j] * xj
    else:
        for i in range(m):
            acc = 0.0
            for j in range(n):
                acc += a[i, j] * x[j]
            out[i] = acc


def _lapack_cholesky(c: np.ndarray, labels: tuple, n: int) -> np.ndarray:
    """Lower factor of ``c`` (overwritten), or NotPositiveDefiniteError naming the row."""
    from scipy.linalg.lapack import dpotrf
    # c is symmetric, so its transpose is the same matrix in Fortran order: no copy
    factor, info = dpotrf(c.T, lower=1, clean=1, overwrite_a=1)
    if info > 0:
        k = info - 1
        what = f"sample {labels[k]}" if k < n else f"grid node {k - n + 1} of the simulated nodes"
        raise NotPositiveDefiniteError(k, float(factor[k, k]), [what], "exact engine, joint covariance "
                                       "of data and nodes")
    if info < 0:
        raise ValueError(f"LAPACK dpotrf rejected argument {-info}")
    return factor
