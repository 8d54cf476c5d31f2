"""Solve many delay bounds of one compiled model on several cores.

Each worker process compiles the model's program once (the model arrays are sent once, at
start-up) and then solves the bounds it is given; answers come back as plain Solutions and are
re-timed in the calling process, so the independent evaluation stays where the results are
reported. Used by frontier sweeps of large networks by default (``default_workers``)
and whenever ``workers`` > 1 is asked for.
"""

from __future__ import annotations

import multiprocessing
import os
from collections.abc import Iterator, Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed

import numpy as np

from .model import Model
from .solvers.conic import ConicSizer, Options, Solution

PARALLEL_GATES = 600     # default: two workers from this many free gates ...
PARALLEL_JOBS = 4        # ... and this many solves

_ENGINE: ConicSizer | None = None


def _start(model: Model, options: Options) -> None:
    global _ENGINE
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    _ENGINE = ConicSizer(model, options)


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
                 workers: int) -> Iterator[tuple[int, Solution | BaseException]]:
    """Yield ``(index, Solution or the exception)`` as each job ``(index, bound, weights)`` ends.

    Jobs are handed out in order so each worker moves along the frontier."""
    # a fresh server process forks the workers: no solver threads of this process are copied
    ctx = multiprocessing.get_context("forkserver")
    with ProcessPoolExecutor(max_workers=workers, mp_context=ctx, initializer=_start,
                             initargs=(model, options)) as pool:
        futures = {pool.submit(_solve, k, b, w): k for k, b, w in jobs}
        for fut in as_completed(futures):
            try:
                yield fut.result()
            except Exception as exc:  # a failed point keeps the others
                yield futures[fut], exc
