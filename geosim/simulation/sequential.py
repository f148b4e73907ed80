"""Sequential Gaussian simulation on a grid, in normal-score space.

Each realization visits the active nodes along a random path (coarse multi-grid levels
first).  At every node the conditioning set is the original data near it (at their
true locations, found once per run through a static k-d tree) and the previously
simulated nodes found by scanning a template of offsets sorted by anisotropic
distance.  Simple kriging with mean 0 (or ordinary kriging) of that set gives the
mean and variance of the local Gaussian conditional distribution, from which the node
value is drawn.  The whole per-node loop is one compiled numba kernel; the local
covariance matrix, bordered by the right-hand side ``c``, the values ``z`` (and a row
of ones for ordinary kriging), is factored by :func:`geosim.linalg.chol_partial`, and
both the weights and the variance come from that one factor:

* simple kriging: ``y = L^-1 c``, ``v = L^-1 z`` (the bordering rows after the sweep);
  mean ``y.v``, variance ``C(0) - y.y`` (both left in the trailing block);
* ordinary kriging adds, with ``u = L^-1 1``, ``mu = (1 - u.y) / u.u``:
  mean ``y.v + mu u.v``, variance ``C(0) - y.y + (1 - u.y)^2 / u.u``.

The second form is the ordinary kriging system solved by elimination of the Lagrange
multiplier (e.g. Chiles and Delfiner 2012, Geostatistics: Modeling Spatial
Uncertainty, 2nd ed., section 3.4, from memory).

Reference for the algorithm: Chiles and Delfiner 2012, section 7.3 on sequential
simulation (from memory); multi-grid paths are common practice, no source.
"""
from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field, replace

import numpy as np
from numba import njit

from ..errors import InputError, NotPositiveDefiniteError
from ..linalg import backward_t_inplace, chol_partial
from ..search import DataSearch, Neighbourhood, search_ellipsoid
from ..variogram.codes import CUBIC, NUGGET, SPHERICAL, TABULATED
from ..variogram.compiled import ZERO_LAG2, analytic_correlation, cov_lag, cov_matrix_into, tabulated_correlation
from .paths import covariance_table, grid_axes, node_template, offset_lags, path_levels, random_path
from .validate import COINCIDENT_REL_TOL, check_inputs, coincident_nodes, collocated_inputs, complement, data_labels


#: Nodes not yet simulated whose secondary values join each node's system (default).
SECONDARY_NODES = 16


@dataclass(frozen=True)
class SequentialPlan:
    """Everything a sequential realization needs; built once by :meth:`SequentialEngine.prepare`."""

    grid: object
    cm: tuple
    sill: float
    active_flat: np.ndarray      # (N,) int64 flat grid index of each active node
    free: np.ndarray             # (F,) int64 active positions simulated along the path
    levels: np.ndarray           # (F,) int8 multi-grid level of each of them
    fixed_flat: np.ndarray       # flat indices of nodes on a datum: they take its score
    fixed_data: np.ndarray       # the data ids of those nodes
    offsets: np.ndarray          # (T, 3) int64 template offsets (dk, di, dj)
    lags: np.ndarray             # (T, 3) float64 their lag vectors in metres
    table: np.ndarray            # node covariance table, raveled (or empty)
    table_lin: np.ndarray        # (T,) int64 raveled-table step of each template offset
    table_zero: int              # raveled-table index of the zero offset
    use_table: bool
    data_cov: np.ndarray         # (n, n) covariances among the data, or (0, 0) when n is large
    origin: np.ndarray           # first node centre (x, y, z)
    step: np.ndarray             # (dx, -dy, dz)
    shape3: tuple
    data_coords: np.ndarray      # (n, 3)
    data_scores: np.ndarray      # (n,)
    data_neighbours: np.ndarray  # (N, k) int32 data ids per active node, -1 padded
    data_labels: tuple
    max_nodes: int
    ordinary: bool
    tol: float
    nugget_node_data: bool       # whether a simulated node can lie on a datum (tiny cells only)
    secondary: np.ndarray = field(default_factory=lambda: np.zeros(0))  # flat collocated secondary scores, or empty
    secondary_b: float = 0.0     # Markov-model factor b = rho sqrt(1 / sill)
    secondary_noise: float = 1.0  # 1 - rho^2: the secondary's variance not explained by the primary
    secondary_nodes: int = 0     # most not-yet-simulated nodes whose secondary joins a node's system


class SequentialEngine:
    """Sequential Gaussian simulation (the default engine).

    Options accepted by :meth:`prepare` besides the common ones:

    ``multigrid`` : int or None
        Number of coarse levels visited first (None: automatic, up to 3; 0: plain
        random path).
    ``max_template`` : int
        Most template offsets scanned for simulated neighbours (default 20,000).
    ``sample_ids`` : sequence
        Labels of the data rows for error messages (default: row numbers from 1).
    ``hole_ids`` : sequence
        Drillhole of each datum, for ``neighbourhood.max_per_hole``.
    ``pivot_tol`` : float
        A Cholesky pivot ``<= pivot_tol * sill`` counts as failure (default 1e-10).
    ``secondary``, ``correlation``, ``secondary_nodes`` : array of ``grid.shape``, float, int
        Co-simulation with a secondary variable known at every active node (normal
        scores) and its correlation coefficient with the primary (simple kriging only),
        under the Markov model of Almeida and Journel (1994, Mathematical Geology 26(5)):
        the secondary is the primary scaled plus independent noise.  At each node the
        secondary values of up to ``secondary_nodes`` (default 16) nearby nodes not yet
        simulated join the kriging system (their information would otherwise be lost:
        with the collocated value alone, nearby simulated values screen it and the
        realizations' correlation with the secondary falls well below ``correlation``),
        and the result is updated with the collocated value
        (:func:`geosim.kriging.collocated_update`).  ``secondary_nodes = 0`` is plain
        collocated co-simulation.  The secondary at simulated nodes adds nothing: their
        values already carry it.  ``correlation = 0`` gives the primary-only
        realization bit for bit.

    ``neighbourhood.min_samples`` does not apply: simulation draws every node, with or
    without data nearby.  With ``kriging="ordinary"`` a node with no conditioning point
    at all is drawn from N(0, sill), as simple kriging would.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> from geosim.simulation.sequential import SequentialEngine
    >>> grid = geosim.Grid(0.0, 0.0, (10.0, 10.0), (8, 8))
    >>> model = geosim.Spherical(1.0, geosim.Anisotropy.isotropic(40.0)) + geosim.Nugget(0.0)
    >>> engine = SequentialEngine()
    >>> plan = engine.prepare(np.array([[35.0, 45.0]]), np.array([1.2]), model, grid,
    ...                       neighbourhood=geosim.search.Neighbourhood(max_samples=8, max_nodes=12))
    >>> field = engine.realize(plan, np.random.default_rng(0))
    >>> field.shape, round(float(field[3, 3]), 6)
    ((8, 8), 1.2)
    """

    name = "sequential"

    def prepare(self, data_coords, data_scores, model, grid, *, neighbourhood: Neighbourhood | None = None,
                kriging: str = "simple", multigrid: int | None = None, max_template: int = 20_000,
                sample_ids=None, hole_ids=None, pivot_tol: float = 1e-10, secondary=None,
                correlation: float = 0.0, secondary_nodes: int = SECONDARY_NODES) -> SequentialPlan:
        """Build the search template, covariance table and data neighbour lists."""
        coords3, scores, nb, ordinary, model = check_inputs(data_coords, data_scores, model, grid,
                                                            neighbourhood, kriging)
        sec, b, noise = collocated_inputs(secondary, correlation, grid, model, ordinary)
        if nb.ranges is None and not any(s.kind != "nugget" for s in model.structures):
            # a pure nugget has no range: one cell is all an uncorrelated field needs
            nb = replace(nb, ranges=(max(grid.cell),) * 3)
        shape3, origin, step = grid_axes(grid)
        search = search_ellipsoid(nb, model)
        offsets = node_template(grid, search, limit=int(max_template)) if nb.max_nodes > 0 else \
            np.zeros((0, 3), dtype=np.int64)
        cm = model.compiled()
        table, centre = covariance_table(cm, offsets, step)
        use_table = table is not None
        if use_table:
            strides = np.array([table.shape[1] * table.shape[2], table.shape[2], 1], dtype=np.int64)
            table_lin, table_zero, table = offsets @ strides, int(centre @ strides), table.ravel()
        else:
            table_lin, table_zero, table = np.zeros(len(offsets), dtype=np.int64), 0, np.zeros(1)
        data_cov = (_data_covariances(cm, coords3) if 0 < len(scores) <= DATA_COV_LIMIT else np.zeros((0, 0)))
        active_flat = np.flatnonzero(grid.mask.ravel()).astype(np.int64)
        node_xyz = _active_xyz(active_flat, shape3, origin, step)
        neighbours = _data_neighbours(coords3[:, :grid.ndim], node_xyz[:, :grid.ndim], nb, model, hole_ids)
        fixed_pos, fixed_data = coincident_nodes(coords3, grid)
        free = complement(active_flat.shape[0], fixed_pos)
        return SequentialPlan(
            grid=grid, cm=cm, sill=model.sill, active_flat=active_flat, free=free,
            levels=path_levels(grid, offsets, multigrid)[free], fixed_flat=active_flat[fixed_pos],
            fixed_data=fixed_data, offsets=offsets,
            lags=np.ascontiguousarray(offset_lags(offsets, step)),
            table=table, table_lin=table_lin, table_zero=table_zero, use_table=use_table,
            data_cov=data_cov, origin=origin, step=step, shape3=shape3,
            data_coords=coords3, data_scores=scores, data_neighbours=neighbours,
            data_labels=data_labels(sample_ids, len(scores)), max_nodes=int(nb.max_nodes),
            ordinary=ordinary, tol=float(pivot_tol) * model.sill,
            nugget_node_data=(COINCIDENT_REL_TOL * min(grid.cell)) ** 2 <= ZERO_LAG2,
            secondary=sec.ravel() if b != 0.0 else np.zeros(0), secondary_b=b, secondary_noise=noise,
            secondary_nodes=int(secondary_nodes) if b != 0.0 else 0)

    def main_kernel(self, *, kriging: str = "simple", shared_path: bool = False, secondary: bool = False):
        """The numba dispatcher that costs the most to compile (:func:`geosim.simulation.runner.compile_ahead`):
        the kernel of a run with ``kriging``, paths shared by realizations or not, and a collocated
        secondary or not (:func:`sgs_kernel`)."""
        return sgs_kernel(not shared_path, kriging == "ordinary", secondary)

    def warm_up(self, *, kriging: str = "simple", shared_path: bool = False, secondary: bool = False) -> None:
        """Compile the kernels of a run with these options (numba's cache keeps them) through a tiny
        unconditional 3-D run.

        Every kernel sees the argument types a real run gives it (data or none), so the cached
        code is the code a run loads, whatever its data, grid, model or neighbourhood.  Only the
        variant of :meth:`main_kernel` the options name is compiled.  Without data or node
        neighbours the preparation runs neither the data search nor the covariance kernel: a
        first run compiles those in another process after the kriging kernel
        (:func:`geosim.search.warm_up`, :func:`warm_up`), so the main kernel, the slowest to
        compile, starts sooner.
        """
        from ..grid import Grid
        grid = Grid(0.0, 0.0, (1.0, 1.0, 1.0), (2, 3, 3))
        extra = {"secondary": np.zeros(grid.shape), "correlation": 0.5} if secondary else {}
        plan = self.prepare(np.zeros((0, 3)), np.zeros(0), _warm_up_model(), grid, kriging=kriging,
                            neighbourhood=Neighbourhood(max_samples=4, max_nodes=0), **extra)
        if shared_path:
            self.realize_batch(plan, np.random.default_rng(1), [np.random.default_rng(2), np.random.default_rng(3)])
        else:
            self.realize(plan, np.random.default_rng(0))

    def realize(self, plan: SequentialPlan, rng: np.random.Generator) -> np.ndarray:
        """One realization: normal scores of ``grid.shape``, NaN outside the mask."""
        path = plan.free[random_path(plan.levels, rng)]
        return self._run(plan, path, [rng], single=True).reshape(plan.grid.shape)

    def realize_batch(self, plan: SequentialPlan, path_rng: np.random.Generator,
                      rngs: list[np.random.Generator]) -> MemberFields:
        """Realizations that share one random path, one per generator in ``rngs``.

        The path comes from ``path_rng``, each member's normal deviates from its own
        generator.  Along a shared path every node has the same conditioning points in
        every member, so the kriging weights are computed once per node and applied to
        each member's values: the cost of the search and the factor is shared.  Each
        member is a valid sequential realization; members differ in their values only,
        so a member does not depend on which others are computed with it.

        Returns a sequence of the members' fields (:class:`MemberFields`), each copied out
        of the batch's shared array when it is taken.
        """
        path = plan.free[random_path(plan.levels, path_rng)]
        return MemberFields(self._run(plan, path, rngs, single=False), plan.grid.shape)

    def _run(self, plan: SequentialPlan, path: np.ndarray, rngs, single: bool) -> np.ndarray:
        """Simulate along ``path``, member ``b`` drawing its normal deviates from ``rngs[b]``.

        Returns the ``(flat nodes, members)`` array of the fields.  The path is simulated
        :data:`PATH_CHUNK` nodes at a time, each chunk with deviates drawn just before it: a
        generator's stream does not depend on how its draws are split, so the fields are
        those of one draw of the whole path, and the deviates held stay small.
        """
        nodes = int(np.prod(plan.shape3))
        field = np.full((nodes, len(rngs)), np.nan)
        done = np.zeros(nodes, dtype=np.uint8)  # simulated so far: the template scan reads this
        kmax = plan.data_neighbours.shape[1] + plan.max_nodes + plan.secondary_nodes
        ids = np.zeros(max(kmax, 1), dtype=np.int64)
        fail = np.zeros(4, dtype=np.int64)
        a = np.zeros((kmax + 3, kmax + 3))  # the system bordered by up to three rows
        normals = np.empty((min(PATH_CHUNK, path.shape[0]), len(rngs)))
        shape3 = np.array(plan.shape3, dtype=np.int64)
        kernel = sgs_kernel(single, plan.ordinary, plan.secondary.shape[0] > 0)
        for start in range(0, path.shape[0], PATH_CHUNK):
            part = path[start:start + PATH_CHUNK]
            draws = normals[:part.shape[0]]
            for b, rng in enumerate(rngs):
                draws[:, b] = rng.standard_normal(part.shape[0])
            status = kernel(field, done, plan.active_flat, part, draws, shape3,
                            plan.origin, plan.step, plan.offsets, plan.lags, plan.table, plan.table_lin,
                            plan.table_zero, plan.use_table, plan.data_cov,
                            plan.data_coords, plan.data_scores, plan.data_neighbours, plan.cm,
                            plan.max_nodes, plan.tol, plan.nugget_node_data, a, ids,
                            fail, plan.secondary, plan.secondary_b, plan.secondary_noise, plan.secondary_nodes)
            if status >= 0:
                fail[0] += start
                raise _pivot_error(plan, path, a, ids, fail)
        # nodes on a datum stay out of the node search (the datum itself is found) and take its score
        field[plan.fixed_flat] = plan.data_scores[plan.fixed_data][:, None]
        return field


#: Path nodes simulated per kernel call, with their normal deviates drawn just before (at 50
#: members, 26 MB of deviates rather than 8 bytes per node and member for the whole path).
PATH_CHUNK = 1 << 16


class MemberFields(Sequence):
    """The fields of a batch of realizations sharing a path, as a read-only sequence.

    The batch is simulated into one ``(flat nodes, members)`` array (a node's members side
    by side, as the kernel reads them).  Taking member ``b`` copies its column into a
    field of ``shape``; so a caller that takes the members one at a time and lets each go
    holds the batch and one field, not the batch twice.
    """

    def __init__(self, batch: np.ndarray, shape: tuple):
        self._batch = batch
        self._shape = tuple(shape)

    def __len__(self) -> int:
        return self._batch.shape[1]

    def __getitem__(self, b):
        if isinstance(b, slice):
            return [self[i] for i in range(*b.indices(len(self)))]
        return np.ascontiguousarray(self._batch[:, b]).reshape(self._shape)


#: Most data for which the data-to-data covariances are kept as a matrix (32 MiB).
DATA_COV_LIMIT = 2048


def warm_up() -> None:
    """Compile the covariance kernel that prepares every run of the engine, whatever its options
    (the covariance table and data-data matrix; numba's cache keeps it), with a real run's argument
    types: a first run compiles it ahead after the kriging kernel and the data search
    (:func:`geosim.pipeline.run_job`)."""
    coords = np.zeros((2, 3))
    cov_matrix_into(_warm_up_model().compiled(), coords, coords, np.empty((2, 2)))


def _warm_up_model():
    """The model of the warm-up runs: a nugget and a spherical structure, the compiled model's
    argument types of every real one."""
    from ..variogram.anisotropy import Anisotropy
    from ..variogram.structures import Nugget, Spherical
    return Nugget(0.1) + Spherical(0.9, Anisotropy((4.0, 4.0, 4.0)))


def _data_covariances(cm, coords3):
    # the compiled loop every covariance matrix uses: C(a - b) and C(b - a) have the same bits
    # (each lag's terms only change sign), so the matrix is exactly symmetric, and a first run
    # compiles one kernel less
    out = np.empty((coords3.shape[0], coords3.shape[0]))
    cov_matrix_into(cm, np.ascontiguousarray(coords3), np.ascontiguousarray(coords3), out)
    return out


def _active_xyz(active_flat, shape3, origin, step) -> np.ndarray:
    k, i, j = np.unravel_index(active_flat, shape3)
    return np.column_stack([origin[0] + j * step[0], origin[1] + i * step[1], origin[2] + k * step[2]])


def _data_neighbours(coords: np.ndarray, node_coords: np.ndarray, nb: Neighbourhood, model, hole_ids,
                     block: int = 250_000) -> np.ndarray:
    """Data selected for each active node by :class:`geosim.search.DataSearch` (int32, -1 padded).

    The search (ellipsoid, sectors, per-hole limits) is the one kriging uses; it runs once
    per run, before the workers start, in blocks of nodes to bound the memory of the query,
    with every core sharing the tree query.
    """
    if coords.shape[0] == 0:
        return np.full((node_coords.shape[0], 0), -1, dtype=np.int32)
    try:
        search = DataSearch(coords, nb, model, hole_ids)
    except ValueError as err:
        raise InputError(str(err), field="neighbourhood", fix="adjust the neighbourhood or pass hole_ids=") from None
    out = np.empty((node_coords.shape[0], nb.max_samples), dtype=np.int32)
    for start in range(0, node_coords.shape[0], block):
        out[start:start + block] = search.query(node_coords[start:start + block], workers=-1)[0]
    used = int((out >= 0).sum(axis=1).max()) if out.size else 0
    return np.ascontiguousarray(out[:, :used])


@functools.cache
def sgs_kernel(single: bool, ordinary: bool, secondary: bool):
    """The compiled kernel for one member or a batch sharing the path, simple or ordinary kriging,
    with or without a collocated secondary.

    The three are constants of the kernel's closure, so numba drops the code of the options a
    run does not use before typing it: a first run compiles about a fifth less, once per
    variant it uses (numba's cache keeps each variant under its own name).
    """
    def _sgs_kernel(field, done, active_flat, path, normals, shape3, origin, step, offsets, lags, table,
                    table_lin, table_zero, use_table, data_cov, dcoords, dscores, dnbr, cm, max_nodes, tol,
                    nugget_node_data, a, ids, fail, sec, sec_b, sec_noise, sec_max):
        """Simulate every node of ``path`` into ``field`` (flat nodes x members, NaN = not yet simulated).

        The members (columns of ``field`` and ``normals``) share the path.  ``single`` (one
        member) borders the factored system with the values; otherwise the weights are
        solved for once per node and applied to each member, so that a member's bits do
        not depend on how many others are computed with it.

        With a secondary (``secondary``; ``sec`` holds its score at every flat node, NaN outside
        the domain), the secondary values ``s`` of up to ``sec_max`` nodes not yet simulated, met
        while scanning the template, join the system as noisy measurements of the primary,
        ``s / b = y + e / b`` (covariances of the primary, plus ``(1 - rho^2) / b^2`` on their
        own diagonal), and the simple-kriging moments are then updated with the collocated value
        (Markov model, see :func:`geosim.kriging.collocated_update`): gain
        ``g = b v / (b^2 v + 1 - rho^2)``, mean ``(1 - g b) y + g s``, variance ``(1 - g b) v``.

        Returns -1, or the path position where a local covariance matrix failed to factor
        (then ``fail = [position, pivot, n_data, n_total]`` and ``ids`` holds the data ids
        followed by the template indices of the node neighbours).
        """
        nz, ny, nx = shape3[0], shape3[1], shape3[2]
        nt = offsets.shape[0]
        kd = dnbr.shape[1]
        kmax = a.shape[0]
        rhs = np.empty(kmax)
        zv = np.empty(kmax)
        rel = np.empty((kmax, 3))  # conditioning points relative to the node being simulated
        lin = np.empty(kmax, dtype=np.int64)
        use_data_cov = data_cov.shape[0] > 0
        codes, sills, mats, params, tables, steps = cm
        nugget = 0.0
        c0 = 0.0  # cov_lag at lag zero, summed in its order (a tabulated structure's first entry)
        for jj in range(codes.shape[0]):
            c0 += sills[jj] * tables[jj, 0] if codes[jj] == TABULATED else sills[jj]
            if codes[jj] == NUGGET:
                nugget += sills[jj]
        tr = np.empty((kd, 3))  # the data's positions in one structure's reduced coordinates
        nb = field.shape[1]  # realizations sharing this path
        acc = np.empty(nb)
        lin_node = np.empty(kmax, dtype=np.int64)  # flat index of each simulated neighbour
        wts = np.empty(kmax)
        sec_t = np.empty(max(sec_max, 1), dtype=np.int64)
        sec_node = np.empty(max(sec_max, 1), dtype=np.int64)
        for p in range(path.shape[0]):
            pos = path[p]
            flat = active_flat[pos]
            k = flat // (ny * nx)
            rem = flat - k * ny * nx
            i = rem // nx
            j = rem - i * nx
            x = origin[0] + j * step[0]
            y = origin[1] + i * step[1]
            z = origin[2] + k * step[2]
            m = 0
            for q in range(kd):
                d = dnbr[pos, q]
                if d < 0:
                    break
                ids[m] = d
                zv[m] = dscores[d]
                rel[m, 0] = dcoords[d, 0] - x
                rel[m, 1] = dcoords[d, 1] - y
                rel[m, 2] = dcoords[d, 2] - z
                m += 1
            nd = m
            ns = 0  # secondary values of nodes not yet simulated, met on the way
            if max_nodes > 0 or (secondary and sec_max > 0):
                for t in range(nt):
                    kk = k + offsets[t, 0]
                    ii = i + offsets[t, 1]
                    jj = j + offsets[t, 2]
                    if kk < 0 or kk >= nz or ii < 0 or ii >= ny or jj < 0 or jj >= nx:
                        continue
                    node = (kk * ny + ii) * nx + jj
                    if done[node]:
                        if m - nd < max_nodes:
                            ids[m] = t
                            lin_node[m] = node
                            lin[m] = table_lin[t]
                            if single:
                                zv[m] = field[node, 0]
                            rel[m, 0] = lags[t, 0]
                            rel[m, 1] = lags[t, 1]
                            rel[m, 2] = lags[t, 2]
                            m += 1
                            if m - nd == max_nodes:
                                break
                    elif secondary and ns < sec_max and sec[node] == sec[node]:
                        sec_t[ns] = t
                        sec_node[ns] = node
                        ns += 1
                        if max_nodes == 0 and ns == sec_max:
                            break
            ms = m  # rows from ms on are secondary values, as noisy measurements of the primary
            if secondary:
                for q in range(ns):
                    t = sec_t[q]
                    ids[m] = -2 - t
                    lin_node[m] = sec_node[q]
                    lin[m] = table_lin[t]
                    zv[m] = sec[sec_node[q]] / sec_b
                    rel[m, 0] = lags[t, 0]
                    rel[m, 1] = lags[t, 1]
                    rel[m, 2] = lags[t, 2]
                    m += 1
            # node-to-data covariances one structure at a time, so that the choice of formula is
            # made once per structure and node rather than per entry (about 1.6 times faster).
            # Simulated nodes never lie on a datum (such nodes take the datum's score and are not
            # searched), so the nugget adds nothing here unless cells are tinier than 1e-5 m.
            for r in range(nd, m):
                for s in range(nd):
                    a[r, s] = 0.0
                    if nugget_node_data and ((rel[r, 0] - rel[s, 0]) ** 2 + (rel[r, 1] - rel[s, 1]) ** 2
                                             + (rel[r, 2] - rel[s, 2]) ** 2) <= ZERO_LAG2:
                        a[r, s] = nugget
            for jj in range(codes.shape[0]):
                code = codes[jj]
                if code == NUGGET or nd == 0:
                    continue
                sj = sills[jj]
                m00, m01, m02 = mats[jj, 0, 0], mats[jj, 0, 1], mats[jj, 0, 2]
                m10, m11, m12 = mats[jj, 1, 0], mats[jj, 1, 1], mats[jj, 1, 2]
                m20, m21, m22 = mats[jj, 2, 0], mats[jj, 2, 1], mats[jj, 2, 2]
                for s in range(nd):
                    tr[s, 0] = m00 * rel[s, 0] + m01 * rel[s, 1] + m02 * rel[s, 2]
                    tr[s, 1] = m10 * rel[s, 0] + m11 * rel[s, 1] + m12 * rel[s, 2]
                    tr[s, 2] = m20 * rel[s, 0] + m21 * rel[s, 1] + m22 * rel[s, 2]
                # a spherical or cubic structure is exactly 0 from reduced distance 1 on: skip the
                # square root and the polynomial there (adding 0.0 would change no bit)
                bounded = code == SPHERICAL or code == CUBIC
                for r in range(nd, m):
                    u = m00 * rel[r, 0] + m01 * rel[r, 1] + m02 * rel[r, 2]
                    v = m10 * rel[r, 0] + m11 * rel[r, 1] + m12 * rel[r, 2]
                    w = m20 * rel[r, 0] + m21 * rel[r, 1] + m22 * rel[r, 2]
                    for s in range(nd):
                        h2 = (tr[s, 0] - u) ** 2 + (tr[s, 1] - v) ** 2 + (tr[s, 2] - w) ** 2
                        if bounded and h2 >= 1.0:
                            continue
                        h = math.sqrt(h2)
                        if code == TABULATED:
                            a[r, s] += sj * tabulated_correlation(tables, steps, jj, h)
                        else:
                            a[r, s] += sj * analytic_correlation(code, h)
            # data-data entries from the data's matrix, node-node entries from the offsets' table;
            # the formula where these are missing.  One call site of cov_lag for the row and the
            # right-hand side (s = r + 1, the node itself at lag rel[r] - 0.0, the bits of rel[r]):
            # every site is inlined, and each one costs about a second of compiling on a first run.
            for r in range(m):
                node_row = r >= nd
                tab = node_row and use_table
                for s in range(nd if node_row else 0, r + 2):
                    if s > r:
                        if tab:
                            rhs[r] = table[table_zero + lin[r]]
                            continue
                        ox = oy = oz = 0.0
                    elif tab:
                        a[r, s] = table[table_zero + lin[r] - lin[s]]
                        continue
                    elif not node_row and use_data_cov:
                        a[r, s] = data_cov[ids[r], ids[s]]
                        continue
                    else:
                        ox, oy, oz = rel[s, 0], rel[s, 1], rel[s, 2]
                    cv = cov_lag(cm, rel[r, 0] - ox, rel[r, 1] - oy, rel[r, 2] - oz)
                    if s > r:
                        rhs[r] = cv
                    else:
                        a[r, s] = cv
                if secondary and r >= ms:
                    a[r, r] += sec_noise / (sec_b * sec_b)  # the measurement's own noise
            mean = 0.0
            var = c0
            if m > 0:
                # border the system with the right-hand side, the values of a single realization
                # (and a row of ones for ordinary kriging): factoring its first m pivots leaves the
                # variance and the estimate in the trailing block, with no separate triangular
                # solves.  A batch sharing the path borders no values: its weights are solved for
                # once below and applied to every member's values.
                for r in range(m):
                    a[m, r] = rhs[r]
                a[m, m] = c0
                order = m + 1
                if single:
                    for r in range(m):
                        a[order, r] = zv[r]
                    a[order, m] = 0.0
                    a[order, order] = 0.0
                    order += 1
                one = order
                if ordinary:
                    for r in range(m):
                        a[one, r] = 1.0
                    for s in range(m, one + 1):
                        a[one, s] = 0.0
                    order += 1
                bad = chol_partial(a, order, m, tol)
                if bad >= 0:
                    fail[0] = p
                    fail[1] = bad
                    fail[2] = nd
                    fail[3] = m
                    return p
                var = a[m, m]
                mu = 0.0
                if single:
                    mean = -a[m + 1, m]
                if ordinary:
                    uy = -a[one, m]
                    uu = -a[one, one]
                    mu = (1.0 - uy) / uu
                    if single:
                        mean += mu * -a[one, m + 1]
                    var += (1.0 - uy) * (1.0 - uy) / uu
                if not single:
                    # weights L^-T (y + mu u): the rows of y = L^-1 c and u = L^-1 1
                    for r in range(m):
                        wts[r] = a[m, r] + (mu * a[one, r] if ordinary else 0.0)
                    backward_t_inplace(a, m, wts)
                    mean = 0.0
                    for r in range(nd):
                        mean += wts[r] * zv[r]
                    if secondary:
                        for r in range(ms, m):
                            mean += wts[r] * zv[r]
            if var < 0.0:
                var = 0.0
            keep = 1.0
            pull = 0.0
            if secondary:
                gain = sec_b * var / (sec_b * sec_b * var + sec_noise)
                keep = 1.0 - gain * sec_b
                pull = gain * sec[flat]
                var *= keep
            sd = math.sqrt(var)
            if single:
                if secondary:
                    mean = keep * mean + pull
                field[flat, 0] = mean + sd * normals[p, 0]
            else:
                # neighbour by neighbour over the members: each neighbour's row of members is
                # contiguous, and each member still sums its terms in the order of the rows
                for b in range(nb):
                    acc[b] = mean
                for r in range(nd, ms):
                    wr = wts[r]
                    nr = lin_node[r]
                    for b in range(nb):
                        acc[b] += wr * field[nr, b]
                if secondary:
                    for b in range(nb):
                        acc[b] = keep * acc[b] + pull
                for b in range(nb):
                    field[flat, b] = acc[b] + sd * normals[p, b]
            done[flat] = 1
        return -1
    _sgs_kernel.__qualname__ = f"_sgs_kernel_{int(single)}{int(ordinary)}{int(secondary)}"
    return njit(cache=True, nogil=True)(_sgs_kernel)



def _pivot_error(plan: SequentialPlan, path: np.ndarray, a: np.ndarray, ids: np.ndarray,
                 fail: np.ndarray) -> NotPositiveDefiniteError:
    """The error for a local matrix that failed to factor, naming the node and the samples."""
    p, pivot, nd, m = (int(v) for v in fail)
    flat = int(plan.active_flat[path[p]])
    index = np.unravel_index(flat, plan.grid.shape)
    xyz = _active_xyz(np.array([flat]), plan.shape3, plan.origin, plan.step)[0][:plan.grid.ndim]
    labels = []
    for r in range(m):
        if r < nd:
            labels.append(f"sample {plan.data_labels[int(ids[r])]}")
        elif ids[r] < 0:
            off = plan.offsets[-2 - int(ids[r])]
            labels.append(f"secondary value at offset {tuple(int(o) for o in off)}")
        else:
            off = plan.offsets[int(ids[r])]
            labels.append(f"simulated node at offset {tuple(int(o) for o in off)}")
    order = [pivot] + [r for r in range(pivot)]
    where = ", ".join(f"{v:.2f}" for v in xyz)
    return NotPositiveDefiniteError(pivot, float(a[pivot, pivot]), [labels[r] for r in order],
                                    f"sequential engine, local system of grid node {tuple(int(v) for v in index)} "
                                    f"at ({where})")
