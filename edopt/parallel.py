"""Solve many delay bounds of one compiled model on several cores.

Each worker process compiles the model's program once (the model arrays are sent once, at
start-up) and then solves the bounds it is given; answers come back as plain Solutions and are
re-timed in the calling process, so the independent evaluation stays where the results are
reported. Used by frontier sweeps of large networks by default (``default_workers``)
and whenever ``workers`` > 1 is asked for.

A large-engine worker (``solvers/large.py``) starts from the caller's minimum-delay solve
(``LargeSizer.fast_state``, sent with each job) and warm-starts each of its bounds from the
ones it solved before. ``Workers`` starts the processes ahead of the jobs, so that they start
up and compile while the caller solves the minimum delay.
"""

from __future__ import annotations

import multiprocessing
import os
import threading
from collections.abc import Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed

import numpy as np

from .model import Model
from .solvers.conic import ConicSizer, Options, Solution
from .solvers.large import LargeSizer

PARALLEL_GATES = 600     # default: two workers from this many free gates ...
PARALLEL_JOBS = 4        # ... and this many solves
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")

_ENGINE: ConicSizer | LargeSizer | None = None


def _start(model: Model, options: Options, large: dict | None = None) -> None:
    """Compile the worker's engine: the reference one, or (``large``: the LargeSizer's gap
    and budget) the large one."""
    global _ENGINE
    if large is None:
        _ENGINE = ConicSizer(model, options)
    else:
        engine = LargeSizer(model, options, gap=large["gap"])
        engine.budget = large["budget"]
        engine.warm_up()
        _ENGINE = engine


def _ready() -> int:
    return os.getpid()


def _solve(k: int, bound_tau: float, weights: np.ndarray, fast: dict | None = None
           ) -> tuple[int, Solution]:
    assert _ENGINE is not None
    if fast is not None and isinstance(_ENGINE, LargeSizer) and _ENGINE.fast_state() is None:
        _ENGINE.set_fast_state(fast)
    return k, _ENGINE.cheapest(bound_tau, weights)


def cores() -> int:
    """CPUs this process may run on."""
    try:
        return len(os.sched_getaffinity(0))
    except AttributeError:      # not on Linux
        return os.cpu_count() or 1


def default_workers(model: Model, jobs: int) -> int:
    """Worker processes for ``jobs`` solves by default.

    Two when the network has at least ``PARALLEL_GATES`` free gates, there are at least
    ``PARALLEL_JOBS`` solves and two CPUs; else one (serial). Measured on 2 cores
    (``benchmarks/frontier_1000.py``, 25-point frontiers): at 1,000 gates two workers took
    0.40-0.63 s per later point against 0.69-1.14 s serial; at 300 gates 0.27 s against 0.19 s
    (each worker compiles its own program, which small networks do not pay back). More workers
    than CPUs are used only when asked for (``workers=``)."""
    free = int(np.sum(~model.fixed))
    if free >= PARALLEL_GATES and jobs >= PARALLEL_JOBS and cores() >= 2:
        return 2
    return 1


class Workers:
    """Worker processes that solve delay bounds of one model (a context manager).

    The processes start at once, from a thread (starting them blocks for as long as a new
    Python process takes to import edopt, 2-3 s), and compile the model's program
    (``large``: copies of this large engine, its gap and budget), while the caller goes on;
    ``solve`` then hands them the jobs."""

    def __init__(self, model: Model, options: Options, workers: int,
                 large: LargeSizer | None = None) -> None:
        settings = None if large is None else {"gap": large.gap, "budget": large.budget}
        # a fresh server process forks the workers: no solver threads of this process are
        # copied. It inherits this process's environment when it starts, before any worker
        # imports numpy: one BLAS thread per worker (measured on 2 CPUs: two large-engine
        # solves at once, each with the default two BLAS threads, ran 3-4 times slower than
        # one alone; with one thread each, as fast as one alone)
        self._saved = {k: os.environ.get(k) for k in _THREAD_VARS}
        for k in _THREAD_VARS:
            os.environ.setdefault(k, "1")
        self._pool: ProcessPoolExecutor | None = None
        self._error: BaseException | None = None
        self._opening = threading.Thread(target=self._open, daemon=True,
                                         args=(model, options, workers, settings))
        self._opening.start()

    def _open(self, model: Model, options: Options, workers: int, settings: dict | None
              ) -> None:
        try:
            ctx = multiprocessing.get_context("forkserver")
            # the server imports edopt once; each worker is a fork of it (a worker that
            # imported edopt itself took 2-3 s to start, and they started one at a time)
            ctx.set_forkserver_preload(["__main__", __name__])
            pool = ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_start,
                                       initargs=(model, options, settings))
            self._pool = pool
            # one empty task per worker: every process starts now (they start on demand)
            for _ in range(workers):
                pool.submit(_ready)
        except BaseException as exc:  # raised again in the caller's thread (``pool``)
            self._error = exc

    @property
    def pool(self) -> ProcessPoolExecutor:
        """The executor, once its processes have started."""
        self._opening.join()
        if self._error is not None:
            raise self._error
        assert self._pool is not None
        return self._pool

    def solve(self, jobs: Sequence[tuple[int, float, np.ndarray]],
              large: LargeSizer | None = None
              ) -> Iterator[tuple[int, Solution | BaseException]]:
        """Yield ``(index, Solution or the exception)`` as each job ``(index, bound,
        weights)`` ends. Jobs are handed out in order so each worker moves along the
        frontier; ``large`` sends its minimum-delay solve with them."""
        fast = None if large is None else large.fast_state()
        futures = {self.pool.submit(_solve, k, b, w, fast): k for k, b, w in jobs}
        for fut in as_completed(futures):
            try:
                yield fut.result()
            except Exception as exc:  # a failed point keeps the others
                yield futures[fut], exc

    def close(self) -> None:
        self._opening.join()
        try:
            if self._pool is not None:
                self._pool.shutdown(wait=True, cancel_futures=True)
        finally:
            self._restore()

    def _restore(self) -> None:
        for k, v in self._saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v

    def __enter__(self) -> Workers:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

