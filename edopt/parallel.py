"""Solve many delay bounds of one compiled model on several cores.

Each worker process compiles the model's program once (the model arrays are sent once, at
start-up) and then solves the bounds it is given; answers come back as plain Solutions and are
re-timed in the calling process, so the independent evaluation stays where the results are
reported. Used by frontier sweeps of large networks by default (``default_workers``)
and whenever ``workers`` > 1 is asked for.

A large-engine worker (``solvers/large.py``) starts from the caller's minimum-delay solve
(``LargeSizer.fast_state``) and warm-starts each of its bounds from the ones it solved before.
"""

from __future__ import annotations

import multiprocessing
import os
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
    """Compile the worker's engine: the reference one, or (``large``: the LargeSizer's gap,
    its ``fast_state`` and budget) the large one."""
    global _ENGINE
    if large is None:
        _ENGINE = ConicSizer(model, options)
    else:
        engine = LargeSizer(model, options, gap=large["gap"])
        engine.set_fast_state(large["fast"])
        engine.budget = large["budget"]
        _ENGINE = engine


def _solve(k: int, bound_tau: float, weights: np.ndarray) -> tuple[int, Solution]:
    assert _ENGINE is not None
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


def solve_bounds(model: Model, options: Options, jobs: Sequence[tuple[int, float, np.ndarray]],
                 workers: int, large: LargeSizer | None = None
                 ) -> Iterator[tuple[int, Solution | BaseException]]:
    """Yield ``(index, Solution or the exception)`` as each job ``(index, bound, weights)`` ends.

    Jobs are handed out in order so each worker moves along the frontier. ``large``: solve with
    copies of this large engine (its gap and minimum-delay solve) instead of the reference."""
    state = None if large is None else {"gap": large.gap, "fast": large.fast_state(),
                                        "budget": large.budget}
    # a fresh server process forks the workers: no solver threads of this process are copied.
    # It inherits this process's environment when it starts, before any worker imports numpy:
    # one BLAS thread per worker (measured on 2 CPUs: two large-engine solves at once, each
    # with the default two BLAS threads, ran 3-4 times slower than one alone; with one thread
    # each, as fast as one alone)
    saved = {k: os.environ.get(k) for k in _THREAD_VARS}
    for k in _THREAD_VARS:
        os.environ.setdefault(k, "1")
    try:
        ctx = multiprocessing.get_context("forkserver")
        with ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_start,
                                 initargs=(model, options, state)) as pool:
            futures = {pool.submit(_solve, k, b, w): k for k, b, w in jobs}
            for fut in as_completed(futures):
                try:
                    yield fut.result()
                except Exception as exc:  # a failed point keeps the others
                    yield futures[fut], exc
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
