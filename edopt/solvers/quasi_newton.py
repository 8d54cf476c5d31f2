"""Projected limited-memory BFGS for smooth convex functions over a box.

Used by the large engine, whose problems have 10^4-10^6 variables: every step is a handful of
vectorised operations on the variable vector (O(memory x n)), against scipy's L-BFGS-B whose
Cauchy-point search costs several times a model evaluation at that size.

Method: variables at a bound whose gradient pushes outward are held (the active set); the
two-loop recursion gives a quasi-Newton direction in the others; a backtracking (Armijo) search
along the projected path keeps every iterate inside the box. When the function also returns a
positive curvature estimate per variable, the recursion starts from that diagonal (scaled by
the latest correction pair) instead of a multiple of the identity.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from . import kernels

ARMIJO = 1e-4        # sufficient decrease along the projected path
BACKTRACKS = 40      # halvings of the step before the search gives up
CURVATURE = 1e-10    # pairs with s.y below this (relative) are skipped


@dataclass
class Result:
    x: np.ndarray
    fun: float
    nit: int
    nfev: int
    stalled: bool


def minimise_box(fun: Callable[[np.ndarray], tuple], x0: np.ndarray,
                 lo: np.ndarray, hi: np.ndarray, maxiter: int = 1000, ftol: float = 1e-10,
                 memory: int = 10) -> Result:
    """Minimise ``fun`` over ``lo <= x <= hi`` from ``x0``.

    ``fun`` returns the value and the gradient, optionally followed by a positive diagonal
    curvature estimate (the start of the two-loop recursion).

    Stops when an iteration decreases the value by less than ``ftol`` relative, when the
    projected gradient vanishes, or after ``maxiter`` iterations.
    """
    x = np.clip(x0, lo, hi)
    f, g, h = _evaluate(fun, x)
    nfev = 1
    pairs = _Pairs(memory, x.size)
    stalled = False
    nit = 0
    while nit < maxiter:
        nit += 1
        p, gf, slope, moving = pairs.direction(x, g, lo, hi, h)
        if not moving:
            break
        if slope >= 0:                     # not a descent direction: restart from the gradient
            pairs.clear()
            p = -gf
            slope = float(g @ p)
        step = 1.0 if pairs else min(1.0, 1.0 / max(float(np.max(np.abs(p))), 1e-300))
        for _ in range(BACKTRACKS):
            xn, change = _trial(x, p, step, lo, hi, g)
            fn, gn, hn = _evaluate(fun, xn)
            nfev += 1
            if fn <= f + ARMIJO * change:
                break
            step *= 0.5
        else:
            stalled = True
            break
        pairs.offer(xn, x, gn, g)
        done = (f - fn) <= ftol * max(abs(f), abs(fn), 1.0)
        x, f, g, h = xn, fn, gn, hn
        if done:
            break
    return Result(x, f, nit, nfev, stalled)


def _trial(x: np.ndarray, p: np.ndarray, step: float, lo: np.ndarray, hi: np.ndarray,
           g: np.ndarray) -> tuple[np.ndarray, float]:
    """The trial point ``clip(x + step p)`` and the first-order change ``g @ (xn - x)``."""
    if kernels.AVAILABLE:
        xn = np.empty_like(x)
        return xn, float(kernels.trial(x, p, step, lo, hi, g, xn))
    xn = np.clip(x + step * p, lo, hi)
    return xn, float(g @ (xn - x))


def _evaluate(fun: Callable[[np.ndarray], tuple], x: np.ndarray
              ) -> tuple[float, np.ndarray, np.ndarray | None]:
    out = fun(x)
    return out[0], out[1], (out[2] if len(out) > 2 else None)


class _Pairs:
    """The newest ``memory`` correction pairs ``(s, y, 1 / s.y)``, as rows of two arrays in a
    ring of ``memory + 1`` rows: the row at ``head`` is always free for the next candidate."""

    def __init__(self, memory: int, n: int) -> None:
        self.memory = memory
        self.S, self.Y = np.empty((memory + 1, n)), np.empty((memory + 1, n))
        self.rho = np.empty(memory + 1)
        self.count = self.head = 0

    def __len__(self) -> int:
        return self.count

    def clear(self) -> None:
        self.count = 0

    def order(self) -> np.ndarray:
        """Row of each stored pair, oldest first."""
        return (self.head - self.count + np.arange(self.count)) % self.rho.size

    def direction(self, x: np.ndarray, g: np.ndarray, lo: np.ndarray, hi: np.ndarray,
                  h: np.ndarray | None) -> tuple[np.ndarray, np.ndarray, float, bool]:
        """The projected direction ``p = -H gf``, ``gf`` the gradient without the variables
        at a bound that it pushes against (held), the slope ``g @ p``, and whether any
        variable is free to move."""
        h = np.ones(g.size) if h is None else h
        if kernels.AVAILABLE:
            p, gf = np.empty_like(g), np.empty_like(g)
            slope, moving = kernels.direction(x, g, lo, hi, self.S, self.Y, self.rho,
                                              self.order(), h, gf, p)
            return p, gf, float(slope), bool(moving)
        held = ((x <= lo) & (g > 0)) | ((x >= hi) & (g < 0))
        gf = np.where(held, 0.0, g)
        if not np.any(gf):
            return gf, gf, 0.0, False
        p = -_two_loop(gf, self.S, self.Y, self.rho, self.order(), h)
        p[held] = 0.0
        return p, gf, float(g @ p), True

    def offer(self, xn: np.ndarray, x: np.ndarray, gn: np.ndarray, g: np.ndarray) -> None:
        """Keep the pair ``(xn - x, gn - g)`` if its curvature is positive enough (it is
        written into the free row at ``head`` either way)."""
        i = self.head
        if kernels.AVAILABLE:
            sy, ns, ny = kernels.pair(xn, x, gn, g, self.S, self.Y, i)
        else:
            self.S[i], self.Y[i] = xn - x, gn - g
            sy = float(self.S[i] @ self.Y[i])
            ns, ny = float(np.linalg.norm(self.S[i])), float(np.linalg.norm(self.Y[i]))
        if sy > CURVATURE * ns * ny:
            self.rho[i] = 1.0 / sy
            self.head = (i + 1) % self.rho.size
            self.count = min(self.count + 1, self.memory)


def _two_loop(g: np.ndarray, S: np.ndarray, Y: np.ndarray, rho: np.ndarray,
              order: np.ndarray, h: np.ndarray) -> np.ndarray:
    """``kernels.two_loop`` in numpy (without numba)."""
    q = g.copy()
    alphas = []
    for i in order[::-1]:
        a = rho[i] * float(S[i] @ q)
        alphas.append(a)
        q -= a * Y[i]
    q /= h
    if order.size:
        i = order[-1]
        q *= 1.0 / (rho[i] * float(Y[i] @ (Y[i] / h)))
    for i, a in zip(order, reversed(alphas)):
        b = rho[i] * float(Y[i] @ q)
        q += (a - b) * S[i]
    return q
