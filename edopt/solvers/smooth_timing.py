"""Arrival times of a Model with exact or log-sum-exp maxima, and their adjoints (large engine).

The smoothed arrival ``b_u = beta d_u + log sum_i exp(b_i)`` (scaled by the sharpness ``beta``)
is computed in one of two ways, with the same result to rounding:

* **Level by level**: one ``logaddexp.reduceat`` per level forward, one ``add.reduceat`` per
  level backward. Exact at any scale, but a few numpy calls per level: on deep graphs (hundreds
  of levels of a few hundred gates) their overhead is most of the time.
* **One triangular solve**: relative to reference arrivals ``l`` (the last evaluation's),
  ``z_u = exp(b_u - l_u)`` satisfies the *linear* system ``z = M z + r`` with
  ``M_ui = exp(beta d_u + l_i - l_u)`` per arc ``i -> u`` and ``r`` the start terms. In
  topological order ``I - M`` is unit lower triangular, so a sparse triangular solve (SuperLU's,
  compiled) gives every arrival at once; the adjoint (the node flows) is the transposed solve,
  ``flow = z * phi`` with ``(I - M)^T phi = seed / z``. Every term is positive (no cancellation).
  The solve is used only while ``|log z| <= LOG_RANGE`` at every node (the reference close
  enough for no exponent to leave the floating-point range); otherwise that evaluation falls
  back to the level-by-level pass, which becomes the next reference.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.sparse as sp
from scipy.sparse.linalg import spsolve_triangular

from ..model import Model

LOG_RANGE = 300.0   # |log z| beyond this at any node: the reference is too far, pass by levels

try:   # SuperLU's triangular solve itself: spsolve_triangular's checks and copies cost 2-3 x
    from scipy.sparse.linalg._dsolve._superlu import gstrs as _gstrs
except ImportError:     # pragma: no cover - another scipy layout: the public wrapper
    _gstrs = None


class SmoothTiming:
    """Arrival times of a Model with exact or log-sum-exp maxima, and their adjoints.

    Start times of nodes that also have fan-in become *pseudo nodes* (indices n..N) of constant
    arrival, so that every maximum is over arcs. ``linear`` chooses the triangular solve when
    the reference allows it (module doc); ``solves`` / ``passes`` count the evaluations each way.
    """

    def __init__(self, model: Model) -> None:
        m = self.model = model
        n = m.n
        src, dst = m.edge_src, m.edge_dst
        finite = np.isfinite(m.t0)
        has_in = np.bincount(dst, minlength=n) > 0
        mixed = np.flatnonzero(finite & has_in)
        self.N = n + mixed.size
        self.pseudo_t0 = m.t0[mixed]
        self.roots = ~has_in
        self.start = np.where(finite & ~has_in, m.t0, 0.0)
        src = np.concatenate([src, n + np.arange(mixed.size)])
        dst = np.concatenate([dst, mixed])
        order = np.lexsort((dst, m.level[dst]))
        self.src, self.dst = src[order], dst[order]
        key = m.level[self.dst]
        cuts = np.concatenate([[0], np.flatnonzero(np.diff(key)) + 1, [key.size]])
        self.levels = []
        for s, e in zip(cuts[:-1].tolist(), cuts[1:].tolist()):
            nodes, srcs = self.dst[s:e], self.src[s:e]
            first = np.concatenate([[0], np.flatnonzero(np.diff(nodes)) + 1])
            perm = np.argsort(srcs, kind="stable")
            by_src = srcs[perm]
            heads = np.concatenate([[0], np.flatnonzero(np.diff(by_src)) + 1])
            self.levels.append((s, e, nodes[first], first, perm, by_src[heads], heads))
        self.P = m.pin_load.tocsr()
        self.PT = m.pin_load.T.tocsr()
        self.linear = True
        self.solves = self.passes = 0
        self._ref: np.ndarray | None = None     # arrival times (tau) of the last evaluation
        self._triangle()

    def _triangle(self) -> None:
        """Structure of ``I - M`` in topological order (CSC, diagonal first in each column):
        one entry per distinct arc (parallel arcs weigh by their number)."""
        n, N = self.model.n, self.N
        rank = np.concatenate([self.model.level, np.full(N - n, -1)])
        order = np.argsort(rank, kind="stable")          # position -> node
        pos = np.empty(N, dtype=np.int64)
        pos[order] = np.arange(N)                        # node -> position
        key = pos[self.src] * N + pos[self.dst]          # column-major: (source, sink)
        keys, first, count = np.unique(key, return_index=True, return_counts=True)
        col, row = keys // N, keys % N
        per_col = np.bincount(col, minlength=N) + 1      # the diagonal and the arcs
        indptr = np.concatenate([[0], np.cumsum(per_col)])
        off = indptr[col] + 1 + (np.arange(keys.size) - np.searchsorted(keys, col * N))
        indices = np.empty(indptr[-1], dtype=np.intc)
        indices[indptr[:-1]] = np.arange(N)
        indices[off] = row
        self._order, self._pos = order, pos
        self._arc_src, self._arc_dst = self.src[first], self.dst[first]
        self._arc_log = np.log(count.astype(float))
        self._off = off
        self._indices, self._indptr = indices, indptr.astype(np.intc)
        self._data = np.ones(indptr[-1])
        self._empty = (np.zeros(0), np.zeros(0, dtype=np.intc), np.zeros(N + 1, dtype=np.intc))
        self._start_nodes = np.concatenate([np.flatnonzero(self.roots), np.arange(n, N)])

    def delays(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Node delays (tau) and loads (C_u)."""
        load = self.P @ x + self.model.fixed_load
        return self.model.p + load / x, load

    def true_delay(self, d: np.ndarray) -> float:
        a = np.empty(self.N)
        a[:self.model.n] = self.start + d
        a[self.model.n:] = self.pseudo_t0
        for s, e, u, first, *_ in self.levels:
            a[u] = np.maximum.reduceat(a[self.src[s:e]], first) + d[u]
        m = self.model
        return float(np.max(a[m.out_node] + m.out_allow))

    def smooth(self, d: np.ndarray, beta: float) -> tuple[float, np.ndarray, np.ndarray]:
        """Smoothed circuit delay, its adjoint per node (``N`` entries: the node flows of a unit
        flow to the outputs) and the share of that flow at each output."""
        m = self.model
        found = self._by_solve(d, beta) if self.linear and self._ref is not None else None
        if found is None:
            self.passes += 1
            b, share = self._forward(d, beta)
        else:
            self.solves += 1
            b, z = found
        a = b / beta
        self._ref = a
        v = a[m.out_node] + m.out_allow
        top = float(v.max())
        zo = np.exp(beta * (v - top))
        out_share = zo / zo.sum()
        seed = np.zeros(self.N)
        np.add.at(seed, m.out_node, out_share)
        flow = self._backward(seed, share) if found is None else self._adjoint(seed, z)
        return top + math.log(zo.sum()) / beta, flow, out_share

    # ------------------------------------------------------------- level by level
    def _forward(self, d: np.ndarray, beta: float) -> tuple[np.ndarray, np.ndarray]:
        """Scaled arrivals ``b`` (one stable log-sum-exp per level) and each arc's share of
        its node's maximum."""
        m = self.model
        b = np.empty(self.N)
        b[:m.n] = beta * (self.start + d)
        b[m.n:] = beta * self.pseudo_t0
        bd = beta * d
        for s, e, u, first, *_ in self.levels:
            b[u] = np.logaddexp.reduceat(b[self.src[s:e]], first) + bd[u]
        return b, np.exp(b[self.src] - (b[self.dst] - bd[self.dst]))

    def _backward(self, flow: np.ndarray, share: np.ndarray) -> np.ndarray:
        for s, e, _u, _first, perm, heads_node, heads in reversed(self.levels):
            part = (flow[self.dst[s:e]] * share[s:e])[perm]
            flow[heads_node] += np.add.reduceat(part, heads)
        return flow

    # ------------------------------------------------------------- one triangular solve
    def _by_solve(self, d: np.ndarray, beta: float) -> tuple[np.ndarray, np.ndarray] | None:
        """Scaled arrivals and ``z = exp(b - l)`` by one triangular solve, or None when the
        reference ``l`` is too far from them (module doc)."""
        ref = beta * self._ref
        bd = beta * d
        with np.errstate(over="ignore", under="ignore"):
            self._data[self._off] = -np.exp(bd[self._arc_dst] + ref[self._arc_src]
                                            - ref[self._arc_dst] + self._arc_log)
            r = np.zeros(self.N)
            s = self._start_nodes
            b0 = np.concatenate([beta * (self.start + d), beta * self.pseudo_t0])
            r[s] = np.exp(b0[s] - ref[s])
        z = self._solve(r[self._order], "N")[self._pos]
        with np.errstate(divide="ignore", invalid="ignore"):
            logz = np.log(z)
        if not np.all(np.abs(logz) <= LOG_RANGE):
            return None
        return ref + logz, z

    def _adjoint(self, seed: np.ndarray, z: np.ndarray) -> np.ndarray:
        phi = self._solve((seed / z)[self._order], "T")[self._pos]
        return z * phi

    def _solve(self, rhs: np.ndarray, trans: str) -> np.ndarray:
        """``(I - M) y = rhs`` (trans "N") or its transpose (trans "T"), in topological order."""
        N = self.N
        if _gstrs is not None:
            e_data, e_ind, e_ptr = self._empty
            y, info = _gstrs(trans, N, self._data.size, self._data, self._indices, self._indptr,
                             N, 0, e_data, e_ind, e_ptr, rhs)
            if info == 0:
                return y
        L = sp.csc_array((self._data, self._indices, self._indptr), shape=(N, N))
        if trans == "T":
            L = sp.csr_array((self._data, self._indices, self._indptr), shape=(N, N))
            return spsolve_triangular(L, rhs, lower=False, unit_diagonal=True)
        return spsolve_triangular(L, rhs, lower=True, unit_diagonal=True)

    def start_value(self, flow: np.ndarray, out_share: np.ndarray) -> float:
        """Constant part of the Lagrangian per unit flow: start times and output allowances."""
        m = self.model
        return float(flow[:m.n][self.roots] @ self.start[self.roots]
                     + flow[m.n:] @ self.pseudo_t0 + out_share @ m.out_allow)


__all__ = ["LOG_RANGE", "SmoothTiming"]
