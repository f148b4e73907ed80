"""Run many realizations: serially, on a local process pool or on a Dask cluster.

Realization ``i`` of a run with seed ``s`` draws only from
``numpy.random.default_rng(numpy.random.SeedSequence(s, spawn_key=(i,)))``, so a field
is bit-identical whichever way it was computed, and a resumed run can compute just the
missing indices.  When ``realizations_per_path = p > 1``, realizations ``i`` with the same
``i // p`` share one random path drawn from :func:`path_rng` (engines with a
``realize_batch`` method), and still depend on nothing but ``s`` and ``i``.  The engine's prepared state is built once in the calling process and
shipped once per worker (a pool initializer; a Dask broadcast scatter).  Pool workers
start from a fork server (spawn where there is none), never by forking this process.  Each finished
field goes to the sink in the worker, so only the sink's small results travel back.

A pool worker watches the main process: when that is killed, even with SIGKILL, its
workers exit at once instead of finishing and writing their realizations
(:func:`watch_process`); the fork server then ends with its last worker.

A Dask worker is not ours to end, and may share no memory, pid space or host with
the client.  A task there asks its own worker whether the scheduler still wants its
result (:func:`dask_task_wanted`): the scheduler releases every task of a client whose
connection closes (a killed process's socket is closed by its kernel at once; a host
that vanishes is noticed through TCP keep-alive, about 30 s by default) or that
cancels its futures (Ctrl-C), and tells the worker within milliseconds.  A task that is
no longer wanted computes no further realization and writes no further file: the
check runs before each realization, before each is handed to the sink, and inside
every atomic write (:func:`geosim.io.atomic.writes_wanted_while`), up to the rename
that would make a file appear.  A realization inside the compiled kernel runs to its
end first (its result is dropped); tasks not yet started are never started.
"""
from __future__ import annotations

import logging
import os
import select
import threading
import time
from collections.abc import Callable, Iterable, Mapping, Sequence

import numpy as np

from .. import plugins
from ..errors import RunAbandoned
from ..io.atomic import writes_wanted_while

log = logging.getLogger(__name__)

# per-process state of pool workers, set once by the initializer
_WORKER: dict = {}
# memory one realization in flight takes in a worker, per grid node: counted from the arrays
# the sequential engine and the realization writer hold at once (the random path, the float64
# field and the engine's byte of "simulated" flags, the field handed to the sink, its data-unit
# copy and the back-transform's temporaries, the float32 level written), rounded up
REALIZATION_BYTES_PER_NODE = 64
# and for each further member of a group sharing a path: its column of the group's float64
# array.  The normal deviates are drawn a chunk of the path at a time (a few tens of MB at
# most) and each member is copied out of the group's array only when the sink takes it, so
# nothing else grows with the members.
MEMBER_BYTES_PER_NODE = 8
# how often a worker looks for the main process where it cannot wait on a pidfd
PARENT_POLL_SECONDS = 0.2
# how often a step waiting for a kernel being compiled ahead looks into numba's cache
AHEAD_POLL_SECONDS = 0.05


def realization_rng(seed: int, index: int) -> np.random.Generator:
    """The random generator of realization ``index`` of a run with ``seed``.

    Examples
    --------
    >>> import numpy as np
    >>> from geosim.simulation.runner import realization_rng
    >>> a = realization_rng(7, 3).standard_normal(2)
    >>> b = np.random.default_rng(np.random.SeedSequence(7).spawn(4)[3]).standard_normal(2)
    >>> bool((a == b).all())
    True
    """
    return np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(int(index),)))


#: First spawn-key word of the path streams; realization streams have one-word keys.
PATH_STREAM = 0x70617468


def path_rng(seed: int, group: int) -> np.random.Generator:
    """The generator of the random path shared by realization group ``group`` of a run with ``seed``."""
    return np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(PATH_STREAM, int(group))))


#: Active nodes from which ``realizations_per_path="auto"`` lets realizations share paths.
AUTO_SHARED_NODES = 250_000
#: Realizations per path that ``"auto"`` gives such grids (a group size the statistical tests check).
#: Each node's search, covariances and factor (about 8 CPU us with 16 data and 16 nodes) are
#: shared by the group and each member adds under 0.1 us: measured on a 400,000-node block model,
#: about 0.35 CPU us per node and realization in groups of 25 and 0.24 in groups of 50
#: (tests/benchmarks/bench_blockmodel.py runs the whole job).  50 makes 100 realizations two
#: groups, one per worker on 2 workers; a group of 50 on a million nodes holds 400 MB.
AUTO_PER_PATH = 50


def per_path_for(value: int | str, grid, engine) -> int:
    """The realizations per random path that ``value`` (an integer or ``"auto"``) means here.

    ``"auto"`` is :data:`AUTO_PER_PATH` on grids of at least :data:`AUTO_SHARED_NODES`
    active nodes with an engine that has ``realize_batch`` (there solving each node's
    system once per group cuts the simulation time several-fold), and 1 otherwise (a small
    grid simulates quickly with independent paths).

    Examples
    --------
    >>> import geosim
    >>> from geosim.simulation.runner import per_path_for
    >>> per_path_for("auto", geosim.Grid(0.0, 0.0, (1.0, 1.0), (1000, 1000)), "sequential")
    50
    >>> per_path_for("auto", geosim.Grid(0.0, 0.0, (1.0, 1.0), (100, 100)), "sequential")
    1
    """
    if value != "auto":
        return int(value)
    large = grid.n_active >= AUTO_SHARED_NODES
    return AUTO_PER_PATH if large and hasattr(resolve_engine(engine), "realize_batch") else 1


def resolve_engine(engine):
    """An engine instance from a registered name, an engine class or an engine object."""
    if isinstance(engine, str):
        try:
            engine = plugins.get("engines", engine)
        except KeyError as err:
            from ..errors import InputError
            raise InputError(str(err.args[0]), field="engine", fix="pick one of the installed engines") from None
    if isinstance(engine, type):
        engine = engine()
    if not (hasattr(engine, "prepare") and hasattr(engine, "realize")):
        raise TypeError(f"an engine needs prepare() and realize(); got {type(engine).__name__}")
    return engine


def in_numba_cache(dispatcher) -> bool:
    """Whether numba's on-disk cache holds code of ``dispatcher`` that a load would find.

    That is an index for the current source whose entries' data files are all written: numba
    saves a new entry's index before its data, so an index alone may name code not written
    yet, and a process loading in that moment would compile the kernel itself.  Data files
    appear whole (written to a temporary name, then renamed).
    """
    try:
        cache_file = dispatcher._cache._cache_file
        index_path = cache_file._index_path
    except AttributeError:  # no cache, or another numba's layout: nothing to gain from compiling ahead
        return True
    if not os.path.isfile(index_path):
        return False
    try:
        names = list(cache_file._load_index().values())  # {} when it was made from another source
    except Exception:  # unreadable: as good as absent
        return False
    return bool(names) and all(os.path.isfile(cache_file._data_path(name)) for name in names)


def compile_ahead(engine, needs: Mapping[str, object] | Sequence[Mapping[str, object]] | None = None,
                  after: Sequence[tuple[str, object]] = ()):
    """Start compiling an engine's kernels into numba's cache in another process, if they are not there.

    On the first run after an install the sequential engine's kernel takes several seconds to
    compile.  Started once the run's grid is known, the compiling runs beside variogram
    fitting, cross-validation and kriging, and the workers later load the code from the
    cache.  An engine takes part with ``warm_up(**needs)`` (a tiny run through its kernels)
    and ``main_kernel(**needs)`` (the dispatcher whose cache is checked); ``needs`` name the
    options of the run that select the kernel's variant (the sequential engine: ``kriging``,
    ``shared_path``, ``secondary``), and only those an engine's methods accept are passed; a
    sequence of such mappings compiles each variant (a run of several units, some with a
    collocated secondary).  The process exits when this one does (:func:`watch_process`) and
    writes nothing but numba's cache.

    ``after``: ``(module, kernel)`` pairs whose module's ``warm_up()`` runs after the engine's,
    each only when its kernel is not cached (a large run puts the summary kernel here).

    :func:`simulate` waits for the engine's main kernel (:func:`await_compiled` under
    ``"engine"``) before it starts any realization, so that no worker compiles the kernel
    while this process is still compiling it.

    Returns the started ``subprocess.Popen``, or None when there is nothing to compile.
    """
    eng = resolve_engine(engine)
    targets = []
    if hasattr(eng, "warm_up") and hasattr(eng, "main_kernel"):
        for variant in [needs or {}] if needs is None or isinstance(needs, Mapping) else needs:
            variant = _accepted(eng.warm_up, variant)
            if (not in_numba_cache(eng.main_kernel(**_accepted(eng.main_kernel, variant)))
                    and all(variant != t[2] for t in targets)):
                kind = type(eng)
                targets.append((kind.__module__, kind.__qualname__, variant))
    targets += [(module, None, {}) for module, kernel in after if not in_numba_cache(kernel)]
    return _hand_over("engine", targets)


def _accepted(method, keywords: Mapping[str, object]) -> dict:
    """The ``keywords`` that ``method`` takes (an engine of a plugin need not know the run's needs)."""
    import inspect
    params = inspect.signature(method).parameters
    if any(p.kind is p.VAR_KEYWORD for p in params.values()):
        return dict(keywords)
    return {k: v for k, v in keywords.items() if k in params}


#: The compiling processes this process started, by what they compile (:func:`compile_ahead`,
#: :func:`compile_modules_ahead`).
_AHEAD: dict[str, object] = {}


def compile_modules_ahead(key: str, targets: Sequence[tuple[str, object, Mapping[str, object]]], *,
                          more: bool = False) -> object | None:
    """Start compiling kernels into numba's cache in another process, if they are not there.

    ``targets``: ``(module, kernel, keywords)``; the process imports each module whose
    ``kernel`` is not cached and calls its ``warm_up(**keywords)`` (tiny runs through its
    kernels with a real run's argument types), in order.  A first run starts one for the
    variogram pair loop and the kriging kernels (cross-validation and the estimate) when it
    begins, and one for the data-unit moments that goes on with the engine's kernel once the
    grid is known (``more``: the process then waits for what :func:`compile_ahead` hands it
    under the same ``key``).  So they compile beside data preparation and variogram fitting;
    :func:`await_compiled` then lets a step wait for its kernel rather than compile the same
    code again.  Like :func:`compile_ahead` the process ends with this one and writes nothing
    but numba's cache.  Returns the ``subprocess.Popen``, or None when everything is cached
    (nothing is started then, even with ``more``).
    """
    todo = [(module, None, dict(keywords)) for module, kernel, keywords in targets if not in_numba_cache(kernel)]
    return _start_warm_up(key, todo, more) if todo else None


def _start_warm_up(key: str, targets: Sequence[tuple[str, str | None, Mapping[str, object]]], more: bool = False):
    """A silent process that runs :func:`warm_up_engine` on each ``(module, name, keywords)`` in turn,
    registered in :data:`_AHEAD` under ``key`` for :func:`await_compiled`; with ``more`` it then
    reads further targets from its stdin (:func:`_hand_over`) until that is closed.

    Where it is safe (:func:`_may_fork`) the process is a fork of this one, which starts
    compiling at once; a fresh interpreter would first spend about 1.1 s of CPU importing
    numpy, scipy, numba and geosim and setting up numba's compiler, on the 2 cores a first
    run shares with its own steps.
    """
    if _may_fork():
        proc = _ForkedWarmUp(targets, more)
    else:
        import subprocess
        import sys
        pid = os.getpid()
        calls = [f"warm_up_engine({pid}, {m!r}, {n!r}, {dict(k)!r})" for m, n, k in targets]
        calls += [f"warm_up_more({pid})"] if more else []
        proc = subprocess.Popen(
            [sys.executable, "-c", "from geosim.simulation.runner import warm_up_engine, warm_up_more; " + "; ".join(calls)],
            stdin=subprocess.PIPE if more else subprocess.DEVNULL, stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL, text=more or None)
    _AHEAD[key] = proc
    return proc


def set_up_numba() -> None:
    """Set numba's compiler up in this process now (about 0.25 s of CPU; numba does it at the first
    kernel a process loads or compiles), so that the processes forked from it start with it."""
    try:
        from numba.core.registry import cpu_target
        cpu_target.target_context.refresh()
        cpu_target.typing_context.refresh()
    except Exception:  # noqa: BLE001 - another numba's internals: each process sets itself up
        pass


def _may_fork() -> bool:
    """Whether a compiling process may be a fork of this one: on Linux, and only while this
    process runs no Python thread but its main one (a fork copies no other thread, and a lock one
    of them held would stay locked in the child; numpy's BLAS pool is native and fork-aware).
    ``GEOSIM_COMPILE_FORK=0`` asks for a fresh interpreter always."""
    import sys
    return (sys.platform.startswith("linux") and hasattr(os, "fork") and threading.active_count() == 1
            and os.environ.get("GEOSIM_COMPILE_FORK", "1") != "0")


class _ForkedWarmUp:
    """A compiling process forked from this one, with the part of ``subprocess.Popen`` that
    :func:`await_compiled`, :func:`_hand_over` and callers use: ``pid``, ``stdin`` (with
    ``more``; text, one JSON target a line), ``poll()``, ``wait(timeout)`` and ``returncode``."""

    def __init__(self, targets: Sequence[tuple[str, str | None, Mapping[str, object]]], more: bool):
        import warnings
        set_up_numba()  # once here rather than in each child; this process pays it anyway at its first kernel
        main_pid = os.getpid()
        read_end, write_end = os.pipe() if more else (-1, -1)
        with warnings.catch_warnings():
            # Python 3.12+ warns of a fork beside any other thread; the only ones here are the idle
            # workers of numpy's BLAS, which handles a fork itself (see _may_fork)
            warnings.simplefilter("ignore", DeprecationWarning)
            pid = os.fork()
        if pid == 0:
            _forked_child(main_pid, targets, read_end, write_end)
        self.pid = pid
        self.returncode: int | None = None
        self.stdin = None
        if more:
            os.close(read_end)
            self.stdin = os.fdopen(write_end, "w")

    def poll(self) -> int | None:
        if self.returncode is None:
            try:
                pid, status = os.waitpid(self.pid, os.WNOHANG)
            except ChildProcessError:  # reaped elsewhere: its code is lost
                self.returncode = -1
            else:
                if pid:
                    self.returncode = os.waitstatus_to_exitcode(status)
        return self.returncode

    def wait(self, timeout: float | None = None) -> int:
        deadline = None if timeout is None else time.monotonic() + timeout
        while self.poll() is None:
            if deadline is not None and time.monotonic() > deadline:
                import subprocess
                raise subprocess.TimeoutExpired(f"compiling process {self.pid}", timeout)
            time.sleep(AHEAD_POLL_SECONDS)
        return self.returncode


def _forked_child(main_pid: int, targets, read_end: int, write_end: int):
    """The body of a :class:`_ForkedWarmUp` child; never returns.  It writes nothing but numba's
    cache and leaves with ``os._exit``: no handler, buffer or ``finally`` of the parent runs here."""
    code = 1
    try:
        devnull = os.open(os.devnull, os.O_RDWR)
        # this copy of the stdin of the parent's other compiling processes becomes /dev/null, or one
        # that waits for more would wait as long as this process lives; the fd number stays taken,
        # so no file object of the parent's can close another file opened here under it
        for proc in _AHEAD.values():  # a stdin already closed (handed over, or nothing more came) is left be
            if proc.stdin is not None and not proc.stdin.closed:
                os.dup2(devnull, proc.stdin.fileno())
        for fd in (0, 1, 2):
            os.dup2(devnull, fd)
        if write_end >= 0:
            os.close(write_end)
        for module, name, keywords in targets:
            warm_up_engine(main_pid, module, name, keywords)
        if read_end >= 0:
            with os.fdopen(read_end) as lines:
                warm_up_more(main_pid, lines)
        code = 0
    finally:
        os._exit(code)


def _hand_over(key: str, targets: Sequence[tuple[str, str | None, Mapping[str, object]]]):
    """Give ``targets`` to the process under ``key`` that waits for more (and close its stdin, so it
    ends after them), or start one for them.  Returns the process, or None with nothing to compile."""
    import json
    proc = _AHEAD.get(key)
    if proc is not None and proc.stdin is not None and not proc.stdin.closed:
        try:
            for module, name, keywords in targets:
                proc.stdin.write(json.dumps([module, name, dict(keywords)]) + "\n")
            proc.stdin.close()
            return proc
        except OSError:  # it has ended (it failed, or watched a process that is gone): start another
            pass
    return _start_warm_up(key, targets) if targets else None


def end_ahead(key: str) -> None:
    """Tell the process under ``key`` that waits for more (:func:`compile_modules_ahead`) that
    nothing more comes: it ends after what it has."""
    proc = _AHEAD.get(key)
    if proc is not None and proc.stdin is not None and not proc.stdin.closed:
        try:
            proc.stdin.close()
        except OSError:
            pass


def await_compiled(key: str, kernel=None, timeout: float = 300.0) -> None:
    """Wait (at most ``timeout`` s) for the compiling process started under ``key``, if any.

    A step that needs kernels being compiled ahead waits instead of compiling them itself;
    a process that failed or is too slow only means the step compiles what is missing.
    With ``kernel`` (a numba dispatcher) the wait ends as soon as that kernel can be loaded
    from the cache (:func:`in_numba_cache`; numba caches the kernels it calls before it):
    the process may still be compiling kernels that later steps need, so it stays
    registered until it has ended.
    """
    proc = _AHEAD.get(key)
    if proc is None:
        return
    deadline = time.monotonic() + timeout
    while proc.poll() is None:
        if kernel is not None and in_numba_cache(kernel):
            return
        if time.monotonic() > deadline:
            break
        time.sleep(AHEAD_POLL_SECONDS)
    _AHEAD.pop(key, None)


def warm_up_engine(main_pid: int, module: str, name: str | None, keywords: Mapping[str, object] | None = None
                   ) -> None:
    """The body of :func:`compile_ahead`'s process: compile the engine class ``module.name`` (with
    ``name`` None, the module's own ``warm_up()``), passing ``keywords`` to ``warm_up``."""
    import importlib
    watch_process(main_pid)
    target = importlib.import_module(module)
    (target.warm_up if name is None else getattr(target, name)().warm_up)(**(keywords or {}))


def warm_up_more(main_pid: int, lines: Iterable[str] | None = None) -> None:
    """The rest of a compiling process started with ``more``: :func:`warm_up_engine` for each
    ``[module, name, keywords]`` line of ``lines`` (its stdin, or the pipe a forked one reads),
    until that is closed."""
    import json
    import sys
    for line in sys.stdin if lines is None else lines:
        warm_up_engine(main_pid, *json.loads(line))


def watch_process(pid: int, interval: float = PARENT_POLL_SECONDS) -> threading.Thread:
    """Exit this process at once when process ``pid`` (the main process) ends.

    A daemon thread waits on a Linux pidfd of ``pid``, which becomes readable the moment
    that process ends (before it is reaped, and immune to the pid being reused); where
    there is none it checks every ``interval`` seconds that ``pid`` still exists.  The
    parent pid is no guide: a worker's parent is the fork server, which lives as long as
    its workers do.  The exit is ``os._exit``: no cleanup handlers and no further file
    written (a file half-written at that moment is a hidden temporary the next run
    sweeps away).  The compiled kernels release the GIL, so the thread runs while a
    realization is computed.
    """
    try:
        fd = os.pidfd_open(pid)
    except ProcessLookupError:  # gone before the watch began
        os._exit(70)
    except (AttributeError, OSError):
        fd = None

    def watch():
        if fd is not None:
            select.select([fd], [], [])
        else:
            while True:
                try:
                    os.kill(pid, 0)
                except ProcessLookupError:
                    break
                except PermissionError:  # exists, owned by someone else
                    pass
                time.sleep(interval)
        os._exit(70)  # EX_SOFTWARE; nobody is left to read it

    thread = threading.Thread(target=watch, name="geosim-main-watch", daemon=True)
    thread.start()
    return thread


def run_group(engine, prepared, sink, seed: int, indices: list[int], per_path: int,
              wanted: Callable[[], bool] | None = None) -> list[tuple]:
    """``[(index, sink result or field)]`` for realizations of one path group (one index when ``per_path`` is 1).

    With ``wanted``, :class:`~geosim.errors.RunAbandoned` is raised as soon as
    ``wanted()`` is False, checked before each realization is computed and before each
    is handed to the sink.
    """
    def go_on(i: int) -> None:
        if wanted is not None and not wanted():
            raise RunAbandoned(f"the run that asked for realization {i} has ended; it was not written")

    out = []
    if per_path == 1:
        for i in indices:
            go_on(i)
            field = engine.realize(prepared, realization_rng(seed, i))
            go_on(i)
            out.append((i, field if sink is None else sink(i, field)))
        return out
    go_on(indices[0])
    fields = engine.realize_batch(prepared, path_rng(seed, indices[0] // per_path),
                                  [realization_rng(seed, i) for i in indices])
    for k, i in enumerate(indices):
        go_on(i)
        field = fields[k]  # a member's field is copied out when taken: hand each over and let it go
        out.append((i, field if sink is None else sink(i, field)))
        del field
    return out


# a Dask worker's task states in which its result is still wanted by the scheduler
# (a task released by its client is "cancelled"; "resumed" is one wanted again)
_DASK_WANTED_STATES = frozenset({"executing", "long-running", "resumed"})


def dask_task_wanted() -> Callable[[], bool] | None:
    """A check, for the Dask task calling this, that its result is still wanted.

    The check reads what the worker process itself knows (no message is sent): the
    state of this task in the worker, which the scheduler moves to "cancelled" when the
    task's client disconnects or cancels it, and the worker's own status (a worker that
    has lost its scheduler is closing).  None outside a Dask worker.
    """
    try:
        from distributed import get_worker
        worker = get_worker()
    except (ImportError, ValueError):
        return None
    from distributed.core import Status
    key = worker.get_current_task()
    ending = (Status.closing, Status.closed, Status.failed)

    def wanted() -> bool:
        task = worker.state.tasks.get(key)
        return task is not None and task.state in _DASK_WANTED_STATES and worker.status not in ending
    return wanted


def run_dask_group(engine, prepared, sink, seed: int, indices: list[int], per_path: int) -> list[tuple]:
    """:func:`run_group` as a Dask task: it stops, writing nothing further, once its run has ended."""
    wanted = dask_task_wanted()
    if wanted is None:
        return run_group(engine, prepared, sink, seed, indices, per_path)
    with writes_wanted_while(wanted):
        return run_group(engine, prepared, sink, seed, indices, per_path, wanted)


def _groups(todo: list[int], per_path: int) -> list[list[int]]:
    """The requested indices by path group, in index order (singletons when ``per_path`` is 1)."""
    groups: dict[int, list[int]] = {}
    for i in todo:
        groups.setdefault(i // per_path if per_path > 1 else i, []).append(i)
    return list(groups.values())


def _pool_init(main_pid, engine, prepared, sink) -> None:
    watch_process(main_pid)
    _WORKER["state"] = (engine, prepared, sink)


def _pool_task(seed: int, indices: list[int], per_path: int):
    engine, prepared, sink = _WORKER["state"]
    return run_group(engine, prepared, sink, seed, indices, per_path)


def simulate(data_coords, data_scores, model, grid, *, n_realizations: int, seed: int,
             engine="sequential", neighbourhood=None, kriging: str = "simple", workers: int | None = None,
             client=None, sink: Callable | None = None, indices: Iterable[int] | None = None,
             progress: Callable | None = None, realizations_per_path: int | str = 1, **engine_options) -> list:
    """Conditional realizations of a Gaussian field on a grid (normal scores).

    Parameters
    ----------
    data_coords : (n, d) array_like
        Data locations, x, y[, z] in the grid's CRS (metres); ``d`` is the grid's dimension.
    data_scores : (n,) array_like
        Normal scores of the data.
    model : geosim.Model
        Covariance model of the normal scores (sill 1 for a standard normal field).
    grid : geosim.Grid
        Nodes to simulate; nodes outside ``grid.mask`` are NaN in every field.
    n_realizations : int
        Size of the run; realizations are numbered ``0 .. n_realizations - 1``.
    seed : int
        Seed of the run; realization ``i`` depends only on ``(seed, i)``.
    engine : str, engine class or engine object
        A name registered in the ``geosim.engines`` entry-point group
        ("sequential", "exact", or a plugin's), or an engine itself.
    neighbourhood : geosim.search.Neighbourhood, optional
    kriging : {"simple", "ordinary"}
        Simple kriging with mean 0 (the default for normal scores) or ordinary kriging.
    workers : int, optional
        Local processes; None uses ``os.cpu_count()`` when there is more than one
        realization to compute, 1 runs in this process.  Workers are started with
        "forkserver" (or "spawn" where that is missing), so a script that calls this with
        several workers needs the usual ``if __name__ == "__main__":`` guard.
    client : dask.distributed.Client or str, optional
        Run on this Dask cluster (a client or a scheduler address) instead.
    sink : callable, optional
        Picklable ``sink(index, field) -> small result`` run in the worker; None returns
        the fields themselves.
    indices : iterable of int, optional
        Compute only these realizations (e.g. the ones missing from a resumed run).
    progress : callable, optional
        ``progress(done, total, "realizations")`` after each realization (or group).
    realizations_per_path : int or "auto"
        Realizations ``i`` with equal ``i // realizations_per_path`` share one random
        path, so the engine's ``realize_batch`` computes each node's kriging weights once
        for all of them (several times faster per realization).  Each is still a valid
        realization that depends only on ``(seed, i)``; 1 (the default) gives every
        realization its own path; ``"auto"`` is 50 on large grids (:func:`per_path_for`).
        Part of what is computed: changing it changes the fields.
    **engine_options
        Passed to the engine's ``prepare`` (e.g. ``multigrid``, ``max_size``).

    Returns
    -------
    list
        One entry per requested index, in index order: the sink's results, or the fields.

    Examples
    --------
    >>> import numpy as np
    >>> import geosim
    >>> grid = geosim.Grid(0.0, 0.0, (5.0, 5.0), (10, 12))
    >>> model = geosim.Spherical(1.0, geosim.Anisotropy((40.0, 20.0), azimuth=30.0))
    >>> fields = geosim.simulate(np.array([[12.0, 22.0]]), np.array([0.5]), model, grid,
    ...                          n_realizations=2, seed=11, workers=1)
    >>> len(fields), fields[0].shape
    (2, (10, 12))
    """
    n_realizations = int(n_realizations)
    if n_realizations < 1:
        raise ValueError(f"n_realizations must be >= 1, got {n_realizations}")
    todo = list(range(n_realizations)) if indices is None else sorted({int(i) for i in indices})
    outside = [i for i in todo if not 0 <= i < n_realizations]
    if outside:
        raise ValueError(f"realization indices {outside[:5]} are outside 0..{n_realizations - 1}")
    eng = resolve_engine(engine)
    per_path = per_path_for(realizations_per_path, grid, eng)
    if per_path < 1:
        raise ValueError(f"realizations_per_path must be >= 1, got {per_path}")
    if per_path > 1 and not hasattr(eng, "realize_batch"):
        from ..errors import InputError
        raise InputError(f"engine {getattr(eng, 'name', type(eng).__name__)!r} cannot share a path between "
                         "realizations", field="realizations_per_path",
                         fix="use 1, or an engine with realize_batch (the sequential engine)")
    if not todo:
        return []
    groups = _groups(todo, per_path)
    if client is None and (workers is None or int(workers) > 1) and len(groups) > 1:
        # the local pool's server imports what the processes it forks need (the engine, the sink and
        # the libraries the sink names: 1-2 s of CPU) while the engine prepares, rather than when the
        # pool starts; for a first run, also while it waits for the kernels below
        _start_pool_server(_pool_context(eng, sink))
    # what prepares a first run of the sequential engine, compiled ahead after the kriging kernel
    # (geosim.pipeline.run_job): the preparation loads it rather than compiling it again
    from ..search import _select_rows
    from ..variogram.compiled import cov_matrix_into
    for kernel in (_select_rows, cov_matrix_into):
        await_compiled("modules", kernel)
    prepared = eng.prepare(data_coords, data_scores, model, grid, neighbourhood=neighbourhood,
                           kriging=kriging, **engine_options)
    # a first run's kernel may still be compiling in compile_ahead's process: load it, not compile it again
    kernel = None
    if hasattr(eng, "main_kernel"):
        needs = {"kriging": kriging, "shared_path": per_path > 1,
                 "secondary": engine_options.get("secondary") is not None
                 and engine_options.get("correlation", 0.0) != 0.0}
        kernel = eng.main_kernel(**_accepted(eng.main_kernel, needs))
    await_compiled("engine", kernel)
    if client is not None:
        results = _run_dask(client, eng, prepared, sink, seed, groups, per_path, progress)
    else:
        n_workers = (os.cpu_count() or 1) if workers is None else int(workers)
        note = idle_workers_note(len(todo), per_path, len(groups), n_workers)
        if note:
            log.warning("%s", note)
        n_workers = fitting_workers(grid, prepared, max(1, min(n_workers, len(groups))),
                                    members=max(map(len, groups)))
        if n_workers == 1:
            results = {}
            for group in groups:
                results.update(run_group(eng, prepared, sink, seed, group, per_path))
                if progress is not None:
                    progress(len(results), len(todo), "realizations")
        else:
            results = _run_pool(n_workers, eng, prepared, sink, seed, groups, per_path, progress)
    return [results[i] for i in todo]


def idle_workers_note(n_realizations: int, per_path: int, n_groups: int, n_workers: int) -> str | None:
    """The note (None if there is none) for realizations sharing paths in fewer groups than workers.

    A group sharing one random path runs on one worker, so ``n_groups`` groups keep at most that
    many workers busy.  The number of realizations a path serves is the user's choice, not the
    machine's: it decides the realizations (realization ``i`` depends on the seed, ``i`` and
    ``realizations_per_path``), so a run gives the same fields on any number of workers, and the
    note says which setting would use them all.

    Examples
    --------
    >>> from geosim.simulation.runner import idle_workers_note
    >>> print(idle_workers_note(50, 50, 1, 2))  # doctest: +NORMALIZE_WHITESPACE
    50 realizations sharing random paths in groups of 50 make 1 group(s), simulated one a worker:
    1 of 2 workers idle; realizations_per_path = 25 would keep 2 busy (other realizations, equally likely)
    >>> idle_workers_note(100, 50, 2, 2) is None
    True
    """
    busy = min(n_workers, n_realizations)  # at most one realization a worker
    if per_path <= 1 or n_groups >= busy:
        return None
    return (f"{n_realizations} realizations sharing random paths in groups of {per_path} make {n_groups} "
            f"group(s), simulated one a worker: {n_workers - n_groups} of {n_workers} workers idle; "
            f"realizations_per_path = {n_realizations // busy} would keep {busy} busy "
            "(other realizations, equally likely)")


def plan_bytes(prepared) -> int:
    """Bytes of the arrays an engine's prepared plan holds (its own attributes, and those of the plans
    in a tuple attribute, as a plan per geological unit)."""
    total = 0
    for v in getattr(prepared, "__dict__", {}).values():
        if isinstance(v, np.ndarray):
            total += v.nbytes
        elif isinstance(v, tuple):
            total += sum(plan_bytes(p) for p in v if hasattr(p, "__dict__"))
    return total


def fitting_workers(grid, prepared, n_workers: int, available: int | None = None, members: int = 1) -> int:
    """The number of local workers (at most ``n_workers``) whose realizations fit in memory.

    Each worker holds a copy of the plan and one realization in flight
    (:data:`REALIZATION_BYTES_PER_NODE` a node, plus :data:`MEMBER_BYTES_PER_NODE` for each
    further one of ``members`` sharing a path); this process holds the plan too.

    Raises
    ------
    ResourceError
        When not even one realization fits, with the estimate and the fix.

    Notes
    -----
    A note (a warning of the ``geosim`` logger) says when fewer workers than asked are used.
    """
    from ..errors import ResourceError
    from ..resources import available_memory
    available = available_memory() if available is None else available
    if available is None:
        return n_workers
    plan = plan_bytes(prepared)
    per_worker = (grid.size * (REALIZATION_BYTES_PER_NODE + MEMBER_BYTES_PER_NODE * (members - 1))
                  + (plan if n_workers > 1 else 0))
    fit = (available - plan) // per_worker
    if fit < 1:
        raise ResourceError(f"one realization of the {grid.size:,}-node grid needs more memory than this "
                            "machine has available", needed=int(plan + per_worker), available=int(available),
                            fix="use larger cells or a smaller grid.bounds, or run on a machine with more memory")
    if fit < n_workers:
        log.warning("%d workers would need about %.1f GB of memory, %.1f GB are available: using %d worker(s)",
                    n_workers, (plan + n_workers * per_worker) / 1e9, available / 1e9, fit)
        return int(fit)
    return n_workers


def import_ahead(modules: Iterable[str]) -> threading.Thread:
    """Import ``modules`` on a daemon thread of this process, and return the thread.

    While the workers simulate, the main process only waits for their results; what the
    steps after the simulation will import (the cube, raster and figure libraries, a few
    seconds of CPU on a first import) is imported then instead of after the workers end.
    A module that fails to import is skipped: the step that needs it reports the error.
    """
    import importlib

    def run():
        for name in modules:
            try:
                importlib.import_module(name)
            except Exception:  # noqa: BLE001 - the step that needs it says what is missing
                log.debug("importing %s ahead failed", name, exc_info=True)

    thread = threading.Thread(target=run, name="geosim-import-ahead", daemon=True)
    thread.start()
    return thread


def pool_context(*modules, libraries: Sequence[str] = ()):
    """A start method that is safe with threads (BLAS, numba, Dask) in this process.

    "forkserver" where available: workers fork from a clean server process that has
    imported geosim's simulation modules and set numba's compiler up once
    (:mod:`geosim.simulation.pool_server`), so each starts in a fraction of the time a fresh
    interpreter ("spawn", the fallback) needs to import numpy, scipy and numba and to load its
    first kernel.
    ``modules``: the modules of the processes' classes, geosim's only (a class of ``__main__``
    is not importable by name); ``libraries``: further modules, by name, that the processes
    forked import (a realization writer's, its store and cube libraries), imported once there.
    """
    import multiprocessing
    if "forkserver" not in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("spawn")
    ctx = multiprocessing.get_context("forkserver")
    # takes effect when the server first starts; pool_server sets numba up there, once
    preload = ["geosim.simulation.runner", "geosim.simulation.pool_server"]
    preload += [m for m in modules if m and m.startswith("geosim.")]
    ctx.set_forkserver_preload(preload + [m for m in libraries if m not in preload])
    return ctx


def _pool_context(eng, sink):
    """:func:`pool_context` of a local pool running ``eng`` into ``sink``: the sink names further
    modules with ``pool_modules()`` (:meth:`geosim.ensemble.RealizationWriter.pool_modules`)."""
    return pool_context(type(eng).__module__, type(sink).__module__ if sink is not None else None,
                        libraries=list(getattr(sink, "pool_modules", lambda: ())()))


def _start_pool_server(ctx) -> None:
    """Start the server process of a "forkserver" pool context now rather than at the pool's first task."""
    if ctx.get_start_method() == "forkserver":
        from multiprocessing import forkserver
        forkserver.ensure_running()


def _run_pool(n_workers, eng, prepared, sink, seed, groups, per_path, progress) -> dict:
    from concurrent.futures import ProcessPoolExecutor, as_completed
    ctx = _pool_context(eng, sink)
    with ProcessPoolExecutor(n_workers, mp_context=ctx, initializer=_pool_init,
                             initargs=(os.getpid(), eng, prepared, sink)) as pool:
        futures = [pool.submit(_pool_task, seed, g, per_path) for g in groups]
        results = _collect(futures, as_completed, lambda: [fut.cancel() for fut in futures], progress,
                           sum(map(len, groups)))
    return results


def _collect(futures, as_completed, cancel, progress, total: int) -> dict:
    """Results by realization index as the futures (one per group) finish; the rest cancelled on any error."""
    results = {}
    try:
        for fut in as_completed(futures):
            results.update(fut.result())
            if progress is not None:
                progress(len(results), total, "realizations")
    except BaseException:
        cancel()
        raise
    return results


def _run_dask(client, eng, prepared, sink, seed, groups, per_path, progress) -> dict:
    from dask.distributed import Client, as_completed
    own = isinstance(client, str)
    if own:
        client = Client(client)
    try:
        # hash=False: a fresh key per call. A content-hashed key is shared with an earlier
        # call's scatter of the same data, which the scheduler may still be releasing when
        # this call's tasks ask for it ("lost dependencies").
        shared = client.scatter(prepared, broadcast=True, hash=False)
        futures = [client.submit(run_dask_group, eng, shared, sink, seed, g, per_path, pure=False) for g in groups]
        return _collect(futures, as_completed, lambda: client.cancel(futures), progress, sum(map(len, groups)))
    finally:
        if own:
            client.close()
