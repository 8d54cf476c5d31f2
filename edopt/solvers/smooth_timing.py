"""Arrival times of a Model with exact or log-sum-exp maxima, and their adjoints (large engine).

The smoothed arrival ``b_u = beta d_u + log sum_i exp(b_i)`` (scaled by the sharpness ``beta``)
is computed in one of three ways, with the same result to rounding:

* **Compiled** (when numba is installed, the default): one loop over the nodes in topological
  order each way (``kernels.py``). The two routes below are the fallback without numba.
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
from . import kernels

LOG_RANGE = 300.0   # |log z| beyond this at any node: the reference is too far, pass by levels

try:   # SuperLU's triangular solve itself: spsolve_triangular's checks and copies cost 2-3 x
    from scipy.sparse.linalg._dsolve._superlu import gstrs as _gstrs
except ImportError:     # pragma: no cover - another scipy layout: the public wrapper
    _gstrs = None


class SmoothTiming:
    """Arrival times of a Model with exact or log-sum-exp maxima, and their adjoints.

    Start times of nodes that also have fan-in become *pseudo nodes* (indices n..N) of constant
    arrival, so that every maximum is over arcs. ``compiled`` (default: when numba is installed)
    runs every pass as one compiled loop over the nodes (``kernels.py``); otherwise
    ``linear`` chooses the triangular solve when the reference allows it (module doc);
    ``solves`` / ``passes`` count the evaluations of those two numpy/scipy routes.
    """

    def __init__(self, model: Model, compiled: bool | None = None) -> None:
        m = self.model = model
        n = m.n
        src, dst = m.edge_src, m.edge_dst
        finite = np.isfinite(m.t0)
        has_in = np.bincount(dst, minlength=n) > 0
        mixed = np.flatnonzero(finite & has_in)
        self.N = n + mixed.size
        self._mixed = mixed
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
        self.compiled = kernels.AVAILABLE if compiled is None else bool(compiled)
        if self.compiled and not (kernels.AVAILABLE and self.linear):
            self.compiled = False
        # fan-in of every real node, by sink in node order (the compiled passes)
        by_sink = np.argsort(self.dst, kind="stable")
        self._in_src = self.src[by_sink].astype(np.int64)
        self._in_ptr = np.concatenate(
            [[0], np.cumsum(np.bincount(self.dst, minlength=n))]).astype(np.int64)
        self._share = np.empty(self._in_src.size)      # each arc's share of its sink's sum

    def _triangle(self) -> None:
        """Structure of ``I - M`` over the real nodes in the model's own order, which is
        topological (every arc goes to a later node): CSC, the diagonal first in each column,
        one entry per distinct arc (parallel arcs weigh by their number). Arcs from the pseudo
        nodes (start times of nodes that also have fan-in) go to the right-hand side."""
        n = self.model.n
        real = self.src < n
        if not np.all(self.src[real] < self.dst[real]):     # pragma: no cover - compile order
            self.linear = False
            return
        key = self.src[real] * n + self.dst[real]            # column-major: (source, sink)
        keys, count = np.unique(key, return_counts=True)
        col, row = keys // n, keys % n
        per_col = np.bincount(col, minlength=n) + 1          # the diagonal and the arcs
        indptr = np.concatenate([[0], np.cumsum(per_col)])
        off = indptr[col] + 1 + (np.arange(keys.size) - np.searchsorted(col, col))
        indices = np.empty(indptr[-1], dtype=np.intc)
        indices[indptr[:-1]] = np.arange(n)
        indices[off] = row
        self._arc_src, self._arc_dst = col, row
        self._arc_log = np.log(count.astype(float))
        self._parallel = bool(np.any(count > 1))
        self._off = off
        self._indices, self._indptr = indices, indptr.astype(np.intc)
        self._data = np.ones(indptr[-1])
        self._arc = np.empty(keys.size)
        self._empty = (np.zeros(0), np.zeros(0, dtype=np.intc), np.zeros(n + 1, dtype=np.intc))
        self._root_nodes = np.flatnonzero(self.roots)

    def delays(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Node delays (tau) and loads (C_u)."""
        load = self.P @ x + self.model.fixed_load
        return self.model.p + load / x, load

    def arrivals(self, d: np.ndarray) -> np.ndarray:
        """Exact arrival times (tau) at every node's output (``N`` entries, pseudo nodes last)."""
        a = np.empty(self.N)
        a[:self.model.n] = self.start + d
        a[self.model.n:] = self.pseudo_t0
        if self.compiled:
            kernels.max_forward(a, d, self._in_ptr, self._in_src)
            return a
        for s, e, u, first, *_ in self.levels:
            a[u] = np.maximum.reduceat(a[self.src[s:e]], first) + d[u]
        return a

    def true_delay(self, d: np.ndarray) -> float:
        return self.circuit_delay(self.arrivals(d))

    def circuit_delay(self, a: np.ndarray) -> float:
        """The latest output (tau), from the arrival times."""
        m = self.model
        return float(np.max(a[m.out_node] + m.out_allow))

    def required(self, d: np.ndarray, bound: float) -> np.ndarray:
        """Latest arrival (tau) at each real node's output for every output to meet ``bound``
        (``inf`` where no output is reached)."""
        m = self.model
        q = np.full(self.N, np.inf)
        np.minimum.at(q, m.out_node, bound - m.out_allow)
        if self.compiled:
            kernels.min_backward(q, d, self._in_ptr, self._in_src)
            return q[:m.n]
        for s, e, _u, _first, perm, heads_node, heads in reversed(self.levels):
            dst = self.dst[s:e]
            later = np.minimum.reduceat((q[dst] - d[dst])[perm], heads)
            q[heads_node] = np.minimum(q[heads_node], later)
        return q[:m.n]

    def smooth(self, d: np.ndarray, beta: float) -> tuple[float, np.ndarray, np.ndarray]:
        """Smoothed circuit delay, its adjoint per node (``N`` entries: the node flows of a unit
        flow to the outputs) and the share of that flow at each output."""
        m = self.model
        if self.compiled:
            return self._smooth_compiled(d, beta)
        found = self._by_solve(d, beta) if self.linear and self._ref is not None else None
        if found is None:
            self.passes += 1
            b, share = self._forward(d, beta)
        else:
            self.solves += 1
            b, z, r = found
        a = b / beta
        self._ref = a
        v = a[m.out_node] + m.out_allow
        top = float(v.max())
        zo = np.exp(beta * (v - top))
        out_share = zo / zo.sum()
        seed = np.zeros(self.N)
        np.add.at(seed, m.out_node, out_share)
        flow = self._backward(seed, share) if found is None else self._adjoint(seed, z, r)
        return top + math.log(zo.sum()) / beta, flow, out_share

    def _smooth_compiled(self, d: np.ndarray, beta: float
                         ) -> tuple[float, np.ndarray, np.ndarray]:
        """``smooth`` by the compiled passes: forward in scaled arrivals, then the flows back."""
        m = self.model
        flow, out_share = np.zeros(self.N), np.empty(m.out_node.size)
        value = kernels.smooth(d, float(beta), self.start, self.pseudo_t0, self._in_ptr,
                               self._in_src, self._share, m.out_node, m.out_allow,
                               np.empty(self.N), flow, out_share)
        return float(value), flow, out_share

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
    def _by_solve(self, d: np.ndarray, beta: float
                  ) -> tuple[np.ndarray, np.ndarray, np.ndarray] | None:
        """Scaled arrivals, ``z = exp(b - l)`` and the start terms ``r`` by one triangular
        solve, or None when the reference ``l`` is too far from them (module doc)."""
        n = self.model.n
        ref = beta * self._ref[:n]
        bd = beta * d
        q = bd - ref
        arc = self._arc
        with np.errstate(over="ignore", under="ignore"):
            np.take(q, self._arc_dst, out=arc)
            arc += ref[self._arc_src]
            if self._parallel:
                arc += self._arc_log
            np.exp(arc, out=arc)
            np.negative(arc, out=arc)
            self._data[self._off] = arc
            r = np.zeros(n)
            roots, mixed = self._root_nodes, self._mixed
            r[roots] = np.exp(beta * self.start[roots] + q[roots])
            r[mixed] = np.exp(beta * self.pseudo_t0 + q[mixed])
        z = self._solve(r, "N")
        with np.errstate(divide="ignore", invalid="ignore"):
            logz = np.log(z)
        if not np.all(np.abs(logz) <= LOG_RANGE):
            return None
        b = np.empty(self.N)
        b[:n] = ref + logz
        b[n:] = beta * self.pseudo_t0
        return b, z, r

    def _adjoint(self, seed: np.ndarray, z: np.ndarray, r: np.ndarray) -> np.ndarray:
        """Node flows from the transposed solve; a pseudo node takes its node's flow times
        the share of the start term in that node's sum."""
        n = self.model.n
        flow = np.empty(self.N)
        flow[:n] = z * self._solve(seed[:n] / z, "T")
        mixed = self._mixed
        flow[n:] = flow[mixed] * r[mixed] / z[mixed]
        return flow

    def _solve(self, rhs: np.ndarray, trans: str) -> np.ndarray:
        """``(I - M) y = rhs`` (trans "N") or its transpose (trans "T"), in topological order."""
        n = self.model.n
        if _gstrs is not None:
            e_data, e_ind, e_ptr = self._empty
            y, info = _gstrs(trans, n, self._data.size, self._data, self._indices, self._indptr,
                             n, 0, e_data, e_ind, e_ptr, rhs)
            if info == 0:
                return y
        if trans == "T":
            upper = sp.csr_array((self._data, self._indices, self._indptr), shape=(n, n))
            return spsolve_triangular(upper, rhs, lower=False, unit_diagonal=True)
        lower = sp.csc_array((self._data, self._indices, self._indptr), shape=(n, n))
        return spsolve_triangular(lower, rhs, lower=True, unit_diagonal=True)

    def start_value(self, flow: np.ndarray, out_share: np.ndarray) -> float:
        """Constant part of the Lagrangian per unit flow: start times and output allowances."""
        m = self.model
        return float(flow[:m.n][self.roots] @ self.start[self.roots]
                     + flow[m.n:] @ self.pseudo_t0 + out_share @ m.out_allow)


__all__ = ["LOG_RANGE", "SmoothTiming"]
