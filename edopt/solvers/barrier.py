"""Newton barrier solver for the sizing problems, in log sizes with linear arrival times.

Variables ``u = [z, a, D]``: log sizes of the free gates, arrival time of every node (tau) and
the circuit delay. Every constraint is convex and smooth (``g(u) <= 0``); each Newton step
builds the Jacobian and Hessian as scipy.sparse products over the graph and solves one sparse
linear system, so a step costs a few linear passes over the network. Sweeps over the delay
bound start from the previous solution (it stays strictly feasible when the bound relaxes).

The duality gap of the log barrier is ``m / t`` (m = number of constraints): the solver stops
when it is below ``rtol`` times the objective, so a returned point is certified optimal to that
relative accuracy, and the multiplier of ``D <= T`` (the energy price of delay) comes for free.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ..model import Model
from .conic import FAILED, INFEASIBLE, OPTIMAL, Options, Solution


@dataclass
class _State:
    u: np.ndarray
    t: float


class BarrierSizer:
    """Compiled arrays of one model for repeated barrier solves (fastest and cheapest)."""

    def __init__(self, model: Model, options: Options | None = None, rtol: float = 1e-9) -> None:
        self.model = m = model
        self.options = options or Options()
        self.rtol = rtol
        free = ~m.fixed
        self.free = np.flatnonzero(free)
        nf = len(self.free)
        self.nf, self.nn = nf, m.n
        self.nvar = nf + m.n + 1
        y_fixed = np.where(free, 0.0, np.log(m.hi))
        self.x_fixed = np.where(free, 0.0, m.hi)
        col = np.full(m.n, -1, dtype=np.int64)
        col[self.free] = np.arange(nf)
        has_num = m.term_num >= 0
        num = np.maximum(m.term_num, 0)
        b = np.log(m.term_coef) - y_fixed[m.term_owner] + np.where(has_num, y_fixed[num], 0.0)
        own = col[m.term_owner]
        nmb = np.where(has_num, col[num], -1)
        varying = (own >= 0) | (nmb >= 0)
        self.const_effort = np.bincount(m.term_owner[~varying], weights=np.exp(b[~varying]),
                                        minlength=m.n)
        tv = np.flatnonzero(varying)
        r_own = np.flatnonzero(own[tv] >= 0)
        r_num = np.flatnonzero(nmb[tv] >= 0)
        self.A = sp.csr_matrix(
            (np.concatenate([-np.ones(len(r_own)), np.ones(len(r_num))]),
             (np.concatenate([r_own, r_num]), np.concatenate([own[tv][r_own], nmb[tv][r_num]]))),
            shape=(len(tv), nf))
        self.AT = self.A.T.tocsr()
        self.b = b[tv]
        self.owner = m.term_owner[tv]
        self.S = sp.csr_matrix((np.ones(len(tv)), (self.owner, np.arange(len(tv)))),
                               shape=(m.n, len(tv)))
        # arrival rows: edges (src -> dst) then starts from ideal inputs (t0 -> node)
        starts = np.flatnonzero(np.isfinite(m.t0))
        self.r_dst = np.concatenate([m.edge_dst, starts])
        r_src = np.concatenate([m.edge_src, np.full(len(starts), -1)])
        self.r_t0 = np.concatenate([np.zeros(len(m.edge_src)), m.t0[starts]])
        nr = len(self.r_dst)
        self.P = sp.csr_matrix((np.ones(nr), (np.arange(nr), self.r_dst)), shape=(nr, m.n))
        has_src = r_src >= 0
        self.Q = sp.csr_matrix((np.ones(has_src.sum()), (np.flatnonzero(has_src), r_src[has_src])),
                               shape=(nr, m.n))
        self.QmP = (self.Q - self.P).tocsr()
        no = len(m.out_node)
        self.Jout = sp.hstack([sp.csr_matrix((no, nf)),
                               sp.csr_matrix((np.ones(no), (np.arange(no), m.out_node)),
                                             shape=(no, m.n)),
                               sp.csr_matrix(-np.ones((no, 1)))]).tocsr()
        span = np.log(m.hi[self.free]) - np.log(m.lo[self.free])
        self.zlo = np.log(m.lo[self.free])
        self.zhi = np.log(m.hi[self.free])
        self.has_span = span > 0
        if m.cap_rows.shape[0]:
            self.Cf = m.cap_rows[:, self.free].tocsr()
            self.cap_room = m.cap_max - m.cap_rows @ self.x_fixed
        else:
            self.Cf = None
        self.gates = np.arange(m.n_sources, m.n)
        self._fast_path: list[_State] = []
        self._paths: dict[bytes, list[_State]] = {}

    # ------------------------------------------------------------ evaluation
    def _split(self, u: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
        return u[:self.nf], u[self.nf:self.nf + self.nn], float(u[-1])

    def _terms(self, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        val = np.exp(self.A @ z + self.b)
        effort = np.bincount(self.owner, weights=val, minlength=self.nn) + self.const_effort
        return val, effort

    def _constraints(self, u: np.ndarray, T: float | None) -> dict[str, np.ndarray]:
        z, a, D = self._split(u)
        m = self.model
        val, effort = self._terms(z)
        d = m.p + effort
        g = {
            "arr": self.QmP @ a + self.r_t0 + d[self.r_dst],
            "out": a[m.out_node] + m.out_allow - D,
            "lo": (self.zlo - z)[self.has_span],
            "hi": (z - self.zhi)[self.has_span],
        }
        if T is not None:
            g["T"] = np.array([D - T])
        if self.Cf is not None:
            g["cap"] = self.Cf @ np.exp(z) - self.cap_room
        if self.options.max_effort is not None:
            g["eff"] = effort[self.gates] - self.options.max_effort
        if self.options.area_max is not None:
            g["area"] = np.array([m.area[self.free] @ np.exp(z) + m.area @ self.x_fixed
                                  - self.options.area_max])
        return g

    def _feasible(self, u: np.ndarray, T: float | None) -> bool:
        return all(np.all(v < 0) for v in self._constraints(u, T).values())

    def _barrier_value(self, u: np.ndarray, T: float | None) -> float:
        g = self._constraints(u, T)
        total = 0.0
        for v in g.values():
            if np.any(v >= 0):
                return np.inf
            total -= np.sum(np.log(-v))
        return total

    def _grad_hess(self, u: np.ndarray, T: float | None) -> tuple[np.ndarray, sp.csc_matrix]:
        """Gradient and Hessian of the log barrier (objective excluded)."""
        z, a, D = self._split(u)
        m = self.model
        nf, nn = self.nf, self.nn
        val, effort = self._terms(z)
        g = self._constraints(u, T)
        x = np.exp(z)
        # Jacobian of the effort (node x free z): S diag(val) A
        Dd = (self.S @ sp.diags(val) @ self.A).tocsr()
        inv = {k: 1.0 / (-v) for k, v in g.items()}
        blocks = []
        weights = []
        # arrival rows
        J_arr = sp.hstack([Dd[self.r_dst], self.QmP, sp.csr_matrix((len(self.r_dst), 1))])
        blocks.append(J_arr)
        weights.append(inv["arr"])
        w_node = np.bincount(self.r_dst, weights=inv["arr"], minlength=nn)
        curv_w = w_node[self.owner] * val
        blocks.append(self.Jout)
        weights.append(inv["out"])
        hs = np.flatnonzero(self.has_span)
        Jb = sp.csr_matrix((np.ones(len(hs)), (np.arange(len(hs)), hs)), shape=(len(hs), self.nvar))
        blocks.extend([-Jb, Jb])
        weights.extend([inv["lo"], inv["hi"]])
        diag_z = np.zeros(nf)
        if "T" in g:
            JT = sp.csr_matrix(([1.0], ([0], [self.nvar - 1])), shape=(1, self.nvar))
            blocks.append(JT)
            weights.append(inv["T"])
        if "cap" in g:
            Jc = (self.Cf @ sp.diags(x)).tocsr()
            blocks.append(sp.hstack([Jc, sp.csr_matrix((Jc.shape[0], nn + 1))]))
            weights.append(inv["cap"])
            diag_z += (self.Cf.T @ inv["cap"]) * x
        if "eff" in g:
            Je = Dd[self.gates]
            blocks.append(sp.hstack([Je, sp.csr_matrix((Je.shape[0], nn + 1))]))
            weights.append(inv["eff"])
            w_eff = np.zeros(nn)
            w_eff[self.gates] = inv["eff"]
            curv_w = curv_w + w_eff[self.owner] * val
        if "area" in g:
            ja = m.area[self.free] * x
            blocks.append(sp.hstack([sp.csr_matrix(ja[None, :]), sp.csr_matrix((1, nn + 1))]))
            weights.append(inv["area"])
            diag_z += ja * inv["area"][0]
        J = sp.vstack(blocks).tocsr()
        w = np.concatenate(weights)
        grad = J.T @ w
        Hz = (self.AT @ sp.diags(curv_w) @ self.A) + sp.diags(diag_z)
        H = (J.T @ sp.diags(w * w) @ J).tocsr()
        H = H + sp.block_diag([Hz, sp.csr_matrix((nn + 1, nn + 1))], format="csr")
        return grad, H

    # ---------------------------------------------------------------- solving
    def _start_point(self) -> np.ndarray:
        """A strictly feasible point: sizes near their lower bounds, arrivals with margin."""
        m = self.model
        theta = 0.05
        for _ in range(40):
            z = self.zlo + theta * (self.zhi - self.zlo)
            z = np.minimum(z, self.zlo + np.log(1.5))
            z = np.where(self.has_span, z, self.zlo)
            if self.Cf is None or np.all(self.Cf @ np.exp(z) < self.cap_room):
                break
            theta *= 0.5
        else:
            return None
        _, effort = self._terms(z)
        d = m.p + effort
        from ..timing import _arrivals  # reuse the evaluator's level-by-level propagation
        a = _arrivals(m, d) + (m.level + 1) * 1e-2 * max(1.0, float(np.mean(d)))
        D = float(np.max(a[m.out_node] + m.out_allow)) + 1.0
        return np.concatenate([z, a, [D]])

    def _center(self, u: np.ndarray, t: float, f0, T: float | None,
                max_steps: int = 80) -> tuple[np.ndarray, int, bool]:
        """Newton's method on t f0 + barrier, with a backtracking line search."""
        steps = 0
        for steps in range(1, max_steps + 1):
            fg, fh = f0(u, grad=True)
            bg, bh = self._grad_hess(u, T)
            grad = t * fg + bg
            H = (bh + t * fh).tocsc()
            H = H + sp.diags(1e-14 * (H.diagonal() + 1.0))
            try:
                du = spla.splu(H, permc_spec="MMD_AT_PLUS_A").solve(-grad)
            except RuntimeError:
                return u, steps, False
            dec = -float(grad @ du)
            if not np.isfinite(dec):
                return u, steps, False
            if dec / 2 <= 1e-10 * max(1.0, abs(t * f0(u))):
                return u, steps, True
            F0 = t * f0(u) + self._barrier_value(u, T)
            s = 1.0
            while s > 1e-12:
                un = u + s * du
                Fn = t * f0(un) + self._barrier_value(un, T)
                if np.isfinite(Fn) and Fn <= F0 - 0.25 * s * dec:
                    break
                s *= 0.5
            else:
                return u, steps, dec / 2 < 1e-6
            u = un
            if dec / 2 < 1e-9:
                return u, steps, True
        return u, steps, False

    def _n_constraints(self, T: float | None) -> int:
        return sum(len(v) for v in self._constraints(self._start or np.zeros(self.nvar), T).values())

    def _solve(self, f0, T: float | None, u0: np.ndarray, t0: float, record=None):
        n_con = sum(len(v) for v in self._constraints(u0, T).values())
        u, t = u0, t0
        total = 0
        ok = True
        while True:
            u, steps, ok = self._center(u, t, f0, T)
            total += steps
            if record is not None:
                record.append(_State(u.copy(), t))
            gap = n_con / t
            if not ok or gap <= self.rtol * max(abs(f0(u)), 1e-12):
                break
            t *= 20.0
        return u, t, total, ok

    def fastest(self) -> Solution:
        t_start = time.perf_counter()
        u0 = self._start_point()
        if u0 is None:
            return Solution(np.full(self.nn, np.nan), np.nan, np.nan, np.nan, INFEASIBLE,
                            "newton", time.perf_counter() - t_start, ["input limits below minimum sizes"])

        def f0(u, grad=False):
            if grad:
                gr = np.zeros(self.nvar)
                gr[-1] = 1.0
                return gr, sp.csr_matrix((self.nvar, self.nvar))
            return float(u[-1])

        self._fast_path = []
        u, t, steps, ok = self._solve(f0, None, u0, t0=1.0 / max(u0[-1], 1e-9) * 10,
                                      record=self._fast_path)
        return self._solution(u, t, None, None, ok, steps, t_start)

    def cheapest(self, bound_tau: float, weights: np.ndarray, warm: bool = True) -> Solution:
        t_start = time.perf_counter()
        w = np.asarray(weights, dtype=float)
        const = float(w @ self.x_fixed)
        wf = w[self.free]
        scale = float(wf @ np.clip(1.0, self.model.lo, self.model.hi)[self.free]) + const
        scale = scale if scale > 0 else 1.0
        c = wf / scale
        T = float(bound_tau)

        def f0(u, grad=False):
            x = np.exp(u[:self.nf])
            if grad:
                gr = np.zeros(self.nvar)
                gr[:self.nf] = c * x
                hd = np.zeros(self.nvar)
                hd[:self.nf] = c * x
                return gr, sp.diags(hd)
            return float(c @ x)

        u0, t0 = self._warm_start(T, c, f0) if warm else (None, 0.0)
        if u0 is None:
            u0, t0 = self._cold_start(T)
        if u0 is None:
            return Solution(np.full(self.nn, np.nan), np.nan, np.nan, np.nan, INFEASIBLE,
                            "newton", time.perf_counter() - t_start, ["no start below the bound"])
        path: list[_State] = []
        u, t, steps, ok = self._solve(f0, T, u0, t0, record=path)
        if ok:
            self._paths[c.tobytes()] = path
        sol = self._solution(u, t, T, scale, ok, steps, t_start)
        sol.objective = float(c @ np.exp(u[:self.nf])) * scale + const
        return sol

    def _warm_start(self, T: float, c: np.ndarray, f0) -> tuple[np.ndarray | None, float]:
        """Start from the central path of the last solve with the same objective: its latest
        point that is still well centred (relative gap >= 1e-4) and strictly inside the bound."""
        path = self._paths.get(c.tobytes())
        if not path:
            return None, 0.0
        best = None
        for st in path:
            n_con = sum(len(v) for v in self._constraints(st.u, T).values())
            if st.u[-1] < T and n_con / st.t >= 1e-4 * abs(f0(st.u)):
                best = st
        return (None, 0.0) if best is None else (best.u.copy(), best.t)

    def _cold_start(self, T: float) -> tuple[np.ndarray | None, float]:
        """The fastest solve's central path: its latest point whose delay is below the bound."""
        if not self._fast_path:
            self.fastest()
        best = None
        for st in self._fast_path:
            if st.u[-1] < T:
                best = st
        if best is None:
            return None, 0.0
        u = best.u.copy()
        return u, 1.0

    def _solution(self, u, t, T, scale, ok, steps, t_start) -> Solution:
        x = self.x_fixed.copy()
        x[self.free] = np.exp(u[:self.nf])
        price = 0.0
        if T is not None:
            price = 1.0 / (t * (T - u[-1])) * scale
        status = OPTIMAL if ok else FAILED
        return Solution(x, float(u[-1]), float(u[-1]), price, status, "newton",
                        time.perf_counter() - t_start, [f"newton: {steps} steps"])
