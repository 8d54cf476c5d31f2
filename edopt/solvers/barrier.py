"""edopt's own interior-point solver of the sizing problems, with a duality certificate.

Variables ``u = [z, s, a, D]``: log sizes of the free gates, one variable per delay term
(``s >= exp(A z + b)``, written ``A z + b - log s <= 0`` and ``s > 0``, the self-concordant
epigraph of the exponential, so that the arrival rows are linear), arrival time of every node
and the circuit delay, times scaled by a typical path delay (``ts``, tau) so that they are order
one. Every constraint is convex and smooth (``g(u) <= 0``, multipliers ``lam >= 0``). The method is
the primal-dual interior-point method for smooth convex constraints: each iteration is one
Newton step on the perturbed optimality conditions ``grad f + J' lam = 0``,
``-lam * g = 1 / t``, reduced to one sparse symmetric positive definite system in ``u``. The
system is assembled with scipy.sparse products over the graph and solved with a sparse LDL'
factorisation (qdldl, which cvxpy installs; SuperLU otherwise) whose symbolic analysis is kept
from one iteration to the next.

Certificate: for a feasible ``u`` and any ``lam >= 0``, weak duality gives
``f(u) - f* <= -lam' g(u) + sum_i |r_i| * range_i`` where ``r = grad f + J' lam`` is the
residual of the Lagrangian's gradient and ``range_i`` bounds ``|u_i - u*_i|`` (sizes lie in
their box, arrival times between the earliest possible arrival and the delay bound). A solve
ends ``optimal`` only when this bound is below ``rtol`` times the objective; ``certify`` checks
any other solver's answer the same way.

Warm starts: solved points are kept with their multipliers; a new solve starts from the kept
point of largest delay below the new bound (or a point given by the caller, e.g. another
solver's answer to polish), pulled strictly inside by mixing it with a well-centred point.
"""

from __future__ import annotations

import os
import time
from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
import scipy.sparse.linalg as spla

from ..model import Model
from .conic import FAILED, INFEASIBLE, OPTIMAL, Options, Solution, typical_delay

try:  # a dependency of cvxpy; SuperLU is the fallback
    import qdldl as _qdldl
except ImportError:  # pragma: no cover - depends on the installation
    _qdldl = None

_DEBUG = bool(os.environ.get("EDOPT_DEBUG_BARRIER"))
MU = 10.0           # ratio of the duality measure to the barrier target per iteration
MIX = 1e-3          # weight of the centre point in a warm start
TRAIL = (1e-2, 1e-3, 1e-4, 1e-5)   # relative gaps of the iterates kept for warm starts
WARM_LEVEL = 1e-3
MAX_ITER = 400      # iterations of one solve
ACCEPT_RTOL = 1e-7   # certified relative gap of an answer reported optimal


@dataclass
class _Kept:
    u: np.ndarray           # solved point (scaled times)
    lam: np.ndarray         # its multipliers (block order of ``_layout``)
    T: float | None         # bound it was solved for (scaled; None: the fastest problem)
    trail: dict | None = None   # well-centred iterates on the way: relative gap -> (u, lam)


@dataclass
class Certificate:
    """Weak-duality bound of a feasible point: ``objective - gap <= optimum <= objective``."""

    feasible: bool
    objective: float        # scaled objective at the point
    gap: float              # -lam' g + sum |r| * range (scaled objective units)
    complementarity: float  # -lam' g alone

    @property
    def rel_gap(self) -> float:
        return self.gap / max(abs(self.objective), 1e-12) if self.feasible else np.inf


class _Factor:
    """Sparse symmetric solves that keep the symbolic factorisation while the pattern holds."""

    def __init__(self) -> None:
        self._solver = None
        self._pattern: tuple[np.ndarray, np.ndarray] | None = None

    def __call__(self, H: sp.csc_matrix):
        if _qdldl is not None:
            try:
                p = self._pattern
                if (p is not None and p[0].shape == H.indptr.shape
                        and p[1].shape == H.indices.shape
                        and np.array_equal(p[0], H.indptr) and np.array_equal(p[1], H.indices)):
                    self._solver.update(H, upper=False)
                else:
                    self._solver = _qdldl.Solver(H, upper=False)
                    self._pattern = (H.indptr.copy(), H.indices.copy())
                return self._solver.solve
            except (ValueError, RuntimeError):
                self._solver, self._pattern = None, None
        return spla.splu(H, permc_spec="COLAMD").solve


class BarrierSizer:
    """Compiled arrays of one model for repeated interior-point solves (fastest, cheapest).

    Parameters
    ----------
    rtol : certified relative optimality gap at which a solve stops.
    time_scale : time unit of the internal variables (tau); default: the network's delay at
        unit sizes.
    """

    def __init__(self, model: Model, options: Options | None = None, rtol: float = 1e-9,
                 time_scale: float | None = None) -> None:
        self.model = m = model
        self.options = options or Options()
        self.rtol = rtol
        self.accept = max(rtol, ACCEPT_RTOL)
        self.warm_level = WARM_LEVEL
        self._trail: dict = {}
        self.ts = float(time_scale or typical_delay(m))
        ts = self.ts
        free = ~m.fixed
        self.free = np.flatnonzero(free)
        nf = len(self.free)
        y_fixed = np.where(free, 0.0, np.log(m.hi))
        self.x_fixed = np.where(free, 0.0, m.hi)
        col = np.full(m.n, -1, dtype=np.int64)
        col[self.free] = np.arange(nf)
        has_num = m.term_num >= 0
        num = np.maximum(m.term_num, 0)
        b = (np.log(m.term_coef) - y_fixed[m.term_owner] + np.where(has_num, y_fixed[num], 0.0)
             - np.log(ts))
        own = col[m.term_owner]
        nmb = np.where(has_num, col[num], -1)
        varying = (own >= 0) | (nmb >= 0)
        self.const_effort = np.bincount(m.term_owner[~varying], weights=np.exp(b[~varying]),
                                        minlength=m.n)
        tv = np.flatnonzero(varying)
        nt = len(tv)
        r_own = np.flatnonzero(own[tv] >= 0)
        r_num = np.flatnonzero(nmb[tv] >= 0)
        # exponent of each varying term: A @ z + b (log of its share of a stage effort)
        self.A = sp.csr_matrix(
            (np.concatenate([-np.ones(len(r_own)), np.ones(len(r_num))]),
             (np.concatenate([r_own, r_num]), np.concatenate([own[tv][r_own], nmb[tv][r_num]]))),
            shape=(nt, nf))
        self.b = b[tv]
        self.owner = m.term_owner[tv]
        self.nf, self.nt, self.nn = nf, nt, m.n
        self.nvar = nf + nt + m.n + 1
        self.p = m.p / ts
        self.out_allow = m.out_allow / ts
        self.zlo = np.log(m.lo[self.free])
        self.zhi = np.log(m.hi[self.free])
        self.has_span = (self.zhi - self.zlo) > 0
        self.span_idx = np.flatnonzero(self.has_span)
        if m.cap_rows.shape[0]:
            self.Cf = m.cap_rows[:, self.free].tocsr()
            self.cap_room = m.cap_max - m.cap_rows @ self.x_fixed
        else:
            self.Cf = None
        self.max_effort = (None if self.options.max_effort is None
                           else self.options.max_effort / ts)
        self.gates = np.arange(m.n_sources, m.n)
        self.area_f = m.area[self.free]
        self.area_const = float(m.area @ self.x_fixed)
        self._linear_rows(m)
        self._bounds()
        self._factor = _Factor()
        self._kept: list[_Kept] = []
        self._fast: _Kept | None = None
        self._centre_cache: np.ndarray | None = None
        self._fast_path: list[np.ndarray] = []
        self.last_certificate: Certificate | None = None

    def _linear_rows(self, m: Model) -> None:
        """Constant Jacobian rows of the linear constraints, and the term rows' z part."""
        nf, nt, nn, nvar = self.nf, self.nt, self.nn, self.nvar
        # sum of the term variables of each node (its stage effort, less constant loads)
        S = sp.csr_matrix((np.ones(nt), (self.owner, np.arange(nt))), shape=(nn, nt))
        starts = np.flatnonzero(np.isfinite(m.t0))
        self.r_dst = np.concatenate([m.edge_dst, starts])
        r_src = np.concatenate([m.edge_src, np.full(len(starts), -1)])
        nr = len(self.r_dst)
        self.r_const = (np.concatenate([np.zeros(len(m.edge_src)), m.t0[starts] / self.ts])
                        + self.p[self.r_dst] + self.const_effort[self.r_dst])
        P = sp.csr_matrix((np.ones(nr), (np.arange(nr), self.r_dst)), shape=(nr, nn))
        has_src = r_src >= 0
        Q = sp.csr_matrix((np.ones(has_src.sum()), (np.flatnonzero(has_src), r_src[has_src])),
                          shape=(nr, nn))
        no = len(m.out_node)
        hs = self.span_idx
        blocks = {
            "sp": sp.hstack([sp.csr_matrix((nt, nf)), -sp.identity(nt),
                             sp.csr_matrix((nt, nn + 1))]),
            "arr": sp.hstack([sp.csr_matrix((nr, nf)), S[self.r_dst], Q - P,
                              sp.csr_matrix((nr, 1))]),
            "out": sp.hstack([sp.csr_matrix((no, nf + nt)),
                              sp.csr_matrix((np.ones(no), (np.arange(no), m.out_node)),
                                            shape=(no, nn)),
                              sp.csr_matrix(-np.ones((no, 1)))]),
            "lo": sp.csr_matrix((-np.ones(len(hs)), (np.arange(len(hs)), hs)),
                                shape=(len(hs), nvar)),
            "hi": sp.csr_matrix((np.ones(len(hs)), (np.arange(len(hs)), hs)),
                                shape=(len(hs), nvar)),
            "T": sp.csr_matrix(([1.0], ([0], [nvar - 1])), shape=(1, nvar)),
        }
        if self.max_effort is not None:
            blocks["eff"] = sp.hstack([sp.csr_matrix((len(self.gates), nf)), S[self.gates],
                                       sp.csr_matrix((len(self.gates), nn + 1))])
        self._lin = {k: v.tocsr() for k, v in blocks.items()}
        self._S = S
        # rows of the term constraints e - log s <= 0: [A | -diag(1/s) | 0]
        ex = sp.hstack([self.A, sp.identity(nt), sp.csr_matrix((nt, nn + 1))]).tocsr()
        ex.sort_indices()
        self._ex = ex
        # position of each row's s entry (the last in the row: s columns follow z columns)
        self._ex_s_pos = ex.indptr[1:] - 1

    def _bounds(self) -> None:
        """Ranges that an optimum can be chosen in (for the certificate): terms between their
        values at the box corners, arrivals between the earliest possible (parasitic delays
        only) and the latest possible (largest delays); nodes that reach an output also below
        the delay."""
        from ..timing import _arrivals, _edge_levels

        m = self.model
        Apos = self.A.maximum(0)
        Aneg = (-self.A).maximum(0)
        self.s_lo = np.exp(Apos @ self.zlo - Aneg @ self.zhi + self.b)
        self.s_hi = np.exp(Apos @ self.zhi - Aneg @ self.zlo + self.b)
        d_lo = self.p + np.bincount(self.owner, weights=self.s_lo, minlength=self.nn) \
            + self.const_effort
        d_hi = self.p + np.bincount(self.owner, weights=self.s_hi, minlength=self.nn) \
            + self.const_effort
        self.a_lo = _arrivals(m, d_lo)
        self.a_hi_abs = _arrivals(m, d_hi)
        reach = np.zeros(self.nn, dtype=bool)
        reach[m.out_node] = True
        order, bnd = _edge_levels(m)
        src, dst = m.edge_src[order], m.edge_dst[order]
        for lv in range(len(bnd) - 2, 0, -1):
            s, e = bnd[lv], bnd[lv + 1]
            if s < e:
                np.logical_or.at(reach, src[s:e], reach[dst[s:e]])
        self.reach = reach

    # ------------------------------------------------------------ evaluation
    def _parts(self, u: np.ndarray):
        nf, nt, nn = self.nf, self.nt, self.nn
        return u[:nf], u[nf:nf + nt], u[nf + nt:nf + nt + nn], float(u[-1])

    def _blocks(self, T: float | None) -> list[str]:
        names = ["ex", "sp", "arr", "out", "lo", "hi"]
        if T is not None:
            names.append("T")
        if self.Cf is not None:
            names.append("cap")
        if self.max_effort is not None:
            names.append("eff")
        if self.options.area_max is not None:
            names.append("area")
        return names

    def _layout(self, T: float | None) -> dict[str, slice]:
        sizes = {"ex": self.nt, "sp": self.nt, "arr": len(self.r_dst),
                 "out": len(self.model.out_node), "lo": len(self.span_idx),
                 "hi": len(self.span_idx), "T": 1, "cap": 0 if self.Cf is None
                 else self.Cf.shape[0], "eff": len(self.gates), "area": 1}
        out, k = {}, 0
        for name in self._blocks(T):
            out[name] = slice(k, k + sizes[name])
            k += sizes[name]
        return out

    def _g(self, u: np.ndarray, T: float | None) -> np.ndarray:
        """Constraint values (feasible: all < 0), blocks in the order of ``_blocks``."""
        z, s, a, D = self._parts(u)
        m = self.model
        with np.errstate(divide="ignore", invalid="ignore"):
            logs = np.where(s > 0, np.log(np.where(s > 0, s, 1.0)), np.inf)
        parts = [self.A @ z + self.b - logs, -s,
                 self._lin["arr"] @ u + self.r_const,
                 a[m.out_node] + self.out_allow - D,
                 (self.zlo - z)[self.has_span], (z - self.zhi)[self.has_span]]
        if T is not None:
            parts.append(np.array([D - T]))
        if self.Cf is not None:
            parts.append(self.Cf @ np.exp(z) - self.cap_room)
        if self.max_effort is not None:
            parts.append(self._lin["eff"] @ u + self.const_effort[self.gates] - self.max_effort)
        if self.options.area_max is not None:
            parts.append(np.array([self.area_f @ np.exp(z) + self.area_const
                                   - self.options.area_max]))
        return np.concatenate(parts)

    def _feasible(self, u: np.ndarray, T: float | None) -> bool:
        return bool(np.all(self._g(u, T) < 0))

    def _jac(self, u: np.ndarray, T: float | None) -> sp.csr_matrix:
        z, s, _, _ = self._parts(u)
        ex = self._ex.copy()
        ex.data[self._ex_s_pos] = -1.0 / s
        rows = [ex, self._lin["sp"], self._lin["arr"], self._lin["out"], self._lin["lo"],
                self._lin["hi"]]
        if T is not None:
            rows.append(self._lin["T"])
        if self.Cf is not None or self.options.area_max is not None:
            x = np.exp(z)
            pad = sp.csr_matrix((1, self.nvar - self.nf))
            if self.Cf is not None:
                Jc = (self.Cf @ sp.diags(x)).tocsr()
                rows.append(sp.hstack([Jc, sp.csr_matrix((Jc.shape[0], self.nvar - self.nf))]))
            if self.max_effort is not None:
                rows.append(self._lin["eff"])
            if self.options.area_max is not None:
                rows.append(sp.hstack([sp.csr_matrix((self.area_f * x)[None, :]), pad]))
        elif self.max_effort is not None:
            rows.append(self._lin["eff"])
        return sp.vstack(rows).tocsr()

    def _curvature(self, u: np.ndarray, lam: np.ndarray, lay: dict[str, slice]) -> np.ndarray:
        """Diagonal of ``sum lam_i hess g_i`` (every constraint's Hessian is diagonal)."""
        z, s, _, _ = self._parts(u)
        out = np.zeros(self.nvar)
        out[self.nf:self.nf + self.nt] = lam[lay["ex"]] / (s * s)
        if "cap" in lay or "area" in lay:
            x = np.exp(z)
            if "cap" in lay:
                out[:self.nf] += (self.Cf.T @ lam[lay["cap"]]) * x
            if "area" in lay:
                out[:self.nf] += self.area_f * x * lam[lay["area"]][0]
        return out

    # ---------------------------------------------------------- objectives
    def _objective(self, c: np.ndarray, delay_weight: float):
        """``delay_weight * D + c @ exp(z)``: value, gradient and diagonal Hessian."""
        nf, nvar = self.nf, self.nvar

        def f0(u: np.ndarray, grad: bool = False):
            cx = c * np.exp(u[:nf])
            if not grad:
                return float(delay_weight * u[-1] + cx.sum())
            gr = np.zeros(nvar)
            gr[:nf] = cx
            gr[-1] = delay_weight
            hd = np.zeros(nvar)
            hd[:nf] = cx
            return gr, hd

        return f0

    # ------------------------------------------------------------ certificate
    def _ranges(self, u: np.ndarray, T: float | None) -> np.ndarray:
        z, s, a, D = self._parts(u)
        d_ub = D if T is None else T
        a_hi = np.where(self.reach, np.minimum(self.a_hi_abs, d_ub), self.a_hi_abs)
        d_lo = float(np.max(self.a_lo[self.model.out_node] + self.out_allow))
        return np.concatenate([np.maximum(z - self.zlo, self.zhi - z),
                               np.maximum(np.abs(s - self.s_lo), np.abs(self.s_hi - s)),
                               np.maximum(np.abs(a - self.a_lo), np.abs(a_hi - a)),
                               [max(abs(D - d_lo), abs(d_ub - D))]])

    def _certificate(self, u, lam, f0, T) -> Certificate:
        g = self._g(u, T)
        fv = f0(u)
        if not np.all(g <= 0) or not np.all(np.isfinite(u)):
            return Certificate(False, fv, np.inf, np.inf)
        lam = np.maximum(lam, 0.0)
        fg, _ = f0(u, grad=True)
        r = fg + self._jac(u, T).T @ lam
        comp = float(-(lam @ g))
        gap = comp + float(np.abs(r) @ self._ranges(u, T))
        return Certificate(True, fv, gap, comp)

    # ---------------------------------------------------------------- solving
    def _start_point(self) -> np.ndarray | None:
        """A strictly feasible point: sizes near their lower bounds, arrivals with margin."""
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
        if self.options.area_max is not None:
            if self.area_f @ np.exp(z) + self.area_const >= self.options.area_max:
                return None
        u = self._retimed(z, s_factor=1.5, margin=0.05)
        if self.max_effort is not None and not self._feasible(u, None):
            u = self._retimed(z, s_factor=1.01, margin=0.05)
        return u

    def _retimed(self, z: np.ndarray, s_factor: float, margin: float) -> np.ndarray:
        """Sizes ``z``, terms ``s_factor`` above their values, arrivals from the timing
        propagation plus ``margin`` (relative to a mean stage delay) per level, the delay above
        the latest output."""
        from ..timing import _arrivals  # the evaluator's level-by-level propagation

        m = self.model
        s = np.exp(self.A @ z + self.b) * s_factor
        d = self.p + np.bincount(self.owner, weights=s, minlength=self.nn) + self.const_effort
        step = margin * max(float(np.mean(d)), 1e-3)
        a = _arrivals(m, d) + (m.level + 1) * step
        D = float(np.max(a[m.out_node] + self.out_allow)) + step
        return np.concatenate([z, s, a, [D]])

    def _pd(self, f0, T: float | None, u: np.ndarray, lam: np.ndarray,
            record: list | None = None, max_iter: int = MAX_ITER
            ) -> tuple[np.ndarray, np.ndarray, int, Certificate]:
        """Primal-dual interior-point iterations from a strictly feasible ``u``, ``lam > 0``."""
        lay = self._layout(T)
        m_con = len(lam)
        alpha, beta = 0.01, 0.5
        g = self._g(u, T)
        J = self._jac(u, T)
        fg, fh = f0(u, grad=True)
        cert = None
        it = 0
        trail: dict[float, tuple[np.ndarray, np.ndarray]] = {}
        self._trail = trail
        for it in range(1, max_iter + 1):
            eta = float(-(g @ lam))
            rel = eta / max(abs(float(f0(u))), 1e-12)
            for level in TRAIL:
                if rel <= level and level not in trail:
                    trail[level] = (u.copy(), lam.copy())
            t = MU * m_con / eta
            r_dual = fg + J.T @ lam
            inv_g = 1.0 / (-g)
            H = J.T @ sp.diags(lam * inv_g) @ J + sp.diags(self._curvature(u, lam, lay) + fh)
            H = H.tocsc()
            H = (H + sp.diags(1e-13 * (H.diagonal() + 1e-8))).tocsc()
            H.sort_indices()
            try:
                solve = self._factor(H)
                du = solve(-(fg + J.T @ (inv_g / t)))
            except (RuntimeError, ValueError):
                break
            if not np.all(np.isfinite(du)):
                break
            # dlam from the linearised complementarity: -lam J du - g dlam = lam g + 1/t
            dlam = -lam + inv_g / t + lam * (J @ du) * inv_g
            r_cent = -lam * g - 1.0 / t
            res0 = np.sqrt(r_dual @ r_dual + r_cent @ r_cent)
            neg = dlam < 0
            s = min(1.0, 0.99 * float(np.min(-lam[neg] / dlam[neg]))) if np.any(neg) else 1.0
            s_dual = s
            while s > 1e-14:
                gn = self._g(u + s * du, T)
                if np.all(gn < 0):
                    break
                s *= beta
            else:
                break
            s_feas = s
            while s > 1e-14:
                un = u + s * du
                ln = lam + s * dlam
                gn = self._g(un, T)
                if np.all(gn < 0):
                    Jn = self._jac(un, T)
                    fgn, fhn = f0(un, grad=True)
                    rd = fgn + Jn.T @ ln
                    rc = -ln * gn - 1.0 / t
                    if np.sqrt(rd @ rd + rc @ rc) <= (1 - alpha * s) * res0:
                        break
                s *= beta
            else:
                break
            u, lam, g, J, fg, fh = un, ln, gn, Jn, fgn, fhn
            if record is not None:
                record.append(u.copy())
            if s < 1e-8:
                break
            if _DEBUG:
                print(f"  it={it} s={s:.3g} sd={s_dual:.3g} sf={s_feas:.3g} "
                      f"eta={float(-(g @ lam)):.3g} f={f0(u):.12g} rd={np.linalg.norm(rd):.2e}")
            if float(-(g @ lam)) <= 0.1 * self.rtol * max(abs(f0(u)), 1e-12):
                cert = self._certificate(u, lam, f0, T)
                if cert.rel_gap <= self.rtol:
                    return u, lam, it, cert
        if cert is None:
            cert = self._certificate(u, lam, f0, T)
        return u, lam, it, cert

    def _centre(self) -> np.ndarray | None:
        if self._centre_cache is None:
            self._centre_cache = self._start_point()
        return self._centre_cache

    def _below_bound(self, u: np.ndarray, T: float | None) -> np.ndarray:
        """``u`` moved towards the kept fastest point until its delay is below the bound (an
        answer of another solver may exceed the bound by its tolerance)."""
        if T is None or u[-1] < T or self._fast is None or self._fast.u[-1] >= T:
            return u
        f = self._fast.u
        theta = min(1.0, 2.0 * (u[-1] - T) / (u[-1] - f[-1]) + 1e-9)
        return (1 - theta) * u + theta * f

    def _pulled_in(self, u: np.ndarray, T: float | None, theta: float = MIX) -> np.ndarray | None:
        """``u`` (feasible or nearly) mixed with the centre point until strictly feasible."""
        c = self._centre()
        if c is None:
            return None
        slow = T is not None and c[-1] >= T
        if slow:
            # the centre is slower than the bound: mix little enough to keep the delay below it
            if u[-1] >= T:
                return None
            theta = min(theta, 0.5 * (T - u[-1]) / (c[-1] - u[-1]))
        for _ in range(12):
            v = (1 - theta) * u + theta * c
            if self._feasible(v, T):
                return v
            if slow:
                return None
            theta = min(4.0 * theta, 1.0)
        return None

    def _initial_lam(self, u: np.ndarray, T: float | None, f0,
                     lam: np.ndarray | None) -> np.ndarray:
        """Multipliers of a start: given ones (floored), else central ones for a duality measure
        comparable to the objective."""
        g = self._g(u, T)
        if lam is not None and lam.shape == g.shape and np.all(np.isfinite(lam)):
            lam = np.maximum(lam, 0.0)
            floor = 1e-2 * max(float(-(g @ lam)), 1e-12) / len(g)
            return lam + floor / (-g)
        scale = max(abs(f0(u)), 1e-6) / len(g)
        return scale / (-g)

    def has_start(self, bound_tau: float | None) -> bool:
        """Whether a kept solution can start a warm solve for this bound."""
        return bool(self._starts(None if bound_tau is None else float(bound_tau) / self.ts))

    def _starts(self, T: float | None) -> list[_Kept]:
        kept = [k for k in self._kept + ([self._fast] if self._fast else [])
                if T is None or k.u[-1] < T]
        kept.sort(key=lambda k: -k.u[-1])
        return kept

    def _run(self, f0, T, start, lam_start, warm, record=None, max_iter=MAX_ITER, cold=True):
        """Start (warm if possible, else cold) and iterate; returns (u, lam, it, cert, how)."""
        cands: list[tuple[np.ndarray, np.ndarray | None, str]] = []
        if start is not None:
            cands.append((start, lam_start, "polish"))
        if warm:
            for k in self._starts(T)[:1]:
                level = self.warm_level
                if k.trail and level in k.trail and (T is None or k.trail[level][0][-1] < T):
                    cands.append((k.trail[level][0], k.trail[level][1], "warm-trail"))
                cands.append((k.u, k.lam, "warm"))
        last = None
        for u, lam, how in cands:
            if how == "warm-trail" and self._feasible(u, T):
                v = u
            else:
                v = self._pulled_in(self._below_bound(u, T), T)
            if v is None:
                continue
            n_g = len(self._g(v, T))
            lam = self._lam_for(lam, T) if lam is not None else None
            lam0 = self._initial_lam(v, T, f0, lam if lam is not None and len(lam) == n_g
                                     else None)
            u1, l1, it, cert = self._pd(f0, T, v, lam0, record, max_iter)
            last = (u1, l1, it, cert, how)
            if cert.rel_gap <= self.accept:
                return last
        if not cold:
            return last if last is not None else (None, None, 0, None, "no start")
        u0 = self._cold(T)
        if u0 is None:
            return None, None, 0, None, "cold"
        u1, l1, it, cert = self._pd(f0, T, u0, self._initial_lam(u0, T, f0, None), record)
        return u1, l1, it, cert, "cold"

    def _lam_for(self, lam: np.ndarray, T: float | None) -> np.ndarray:
        """Multipliers kept for one problem, laid out for another (the bound's row)."""
        n_other = len(lam)
        lay = self._layout(T)
        n = lay[list(lay)[-1]].stop
        if n_other == n:
            return lam
        if T is not None and n_other == n - 1:     # from the fastest problem: add the bound
            k = lay["T"].start
            return np.concatenate([lam[:k], [0.0], lam[k:]])
        if T is None and n_other == n + 1:         # to the fastest problem: drop it
            k = self._layout(0.0)["T"].start
            return np.concatenate([lam[:k], lam[k + 1:]])
        return lam

    def _cold(self, T: float | None) -> np.ndarray | None:
        u0 = self._centre()
        if u0 is None or T is None or u0[-1] < T:
            return None if u0 is None else u0.copy()
        # the start is slower than the bound: the fastest solve's path has points below it
        if not self._fast_path:
            self.fastest()
        # the first (best centred) iterate half way from the minimum delay to the bound
        if not self._fast_path:
            return None
        level = 0.5 * (T + min(u[-1] for u in self._fast_path))
        for u in self._fast_path:
            if u[-1] < level:
                return self._pulled_in(u.copy(), T, theta=0.5)
        return None

    def _normalised(self, w: np.ndarray) -> tuple[np.ndarray, float, float]:
        const = float(w @ self.x_fixed)
        wf = w[self.free]
        scale = float(wf @ np.clip(1.0, self.model.lo, self.model.hi)[self.free]) + const
        scale = scale if scale > 0 else 1.0
        return wf / scale, scale, const

    def point(self, x: np.ndarray) -> np.ndarray | None:
        """The variables of sizes ``x`` (per node, clipped into their bounds) with exact terms
        and arrivals: feasible whenever the re-timed delay meets the bound."""
        x = np.asarray(x, dtype=float)
        if x.shape != (self.nn,) or not np.all(np.isfinite(x)) or np.any(x <= 0):
            return None
        z = np.clip(np.log(x[self.free]), self.zlo, self.zhi)
        return self._retimed(z, s_factor=1.0, margin=0.0)

    def multipliers(self, u: np.ndarray, T: float | None, arr: np.ndarray, out: np.ndarray,
                    lo: np.ndarray, hi: np.ndarray, bound: float | None = None,
                    cap: np.ndarray | None = None, eff: np.ndarray | None = None,
                    area: float | None = None) -> np.ndarray:
        """Multipliers of this formulation from another solver's duals of the shared rows
        (arrivals, outputs, size box, bound, limits, in scaled units); those of the term rows
        follow from stationarity in the term variables."""
        lay = self._layout(None if T is None else T)
        lam = np.zeros(lay[list(lay)[-1]].stop)
        s = u[self.nf:self.nf + self.nt]
        w_node = np.bincount(self.r_dst, weights=np.maximum(arr, 0), minlength=self.nn)
        if eff is not None and "eff" in lay:
            w_node[self.gates] += np.maximum(eff, 0)
            lam[lay["eff"]] = np.maximum(eff, 0)
        lam[lay["ex"]] = s * w_node[self.owner]
        lam[lay["arr"]] = np.maximum(arr, 0)
        lam[lay["out"]] = np.maximum(out, 0)
        lam[lay["lo"]] = np.maximum(lo, 0)[self.has_span]
        lam[lay["hi"]] = np.maximum(hi, 0)[self.has_span]
        if "T" in lay and bound is not None:
            lam[lay["T"]] = max(bound, 0.0)
        if "cap" in lay and cap is not None:
            lam[lay["cap"]] = np.maximum(cap, 0)
        if "area" in lay and area is not None:
            lam[lay["area"]] = max(area, 0.0)
        return lam

    # ----------------------------------------------------------------- public
    def fastest(self, weights: np.ndarray | None = None, tie: float = 0.0,
                start: np.ndarray | None = None, lam: np.ndarray | None = None,
                max_iter: int = MAX_ITER) -> Solution:
        """Minimum delay; ``tie`` times the normalised ``weights @ x`` breaks ties (sizes off
        the critical path). ``start`` (variables, see ``point``) and ``lam``: a start to polish.
        """
        t_start = time.perf_counter()
        w = self.model.e_lin if weights is None else np.asarray(weights, dtype=float)
        c, _, _ = self._normalised(w)
        f0 = self._objective(tie * c, 1.0)
        path: list[np.ndarray] = []
        u, lam, it, cert, how = self._run(f0, None, start, lam, False, record=path,
                                          max_iter=max_iter, cold=start is None)
        if u is None:
            status = FAILED if how == "no start" else INFEASIBLE
            return Solution(np.full(self.nn, np.nan), np.nan, np.nan, np.nan, status,
                            "newton", time.perf_counter() - t_start,
                            ["newton: no strictly feasible start (limits below minimum sizes)"])
        ok = cert.rel_gap <= self.accept
        if ok:
            self._fast = _Kept(u.copy(), lam.copy(), None, self._trail)
            if not self._fast_path:
                self._fast_path = path
        self.last_certificate = cert
        sol = self._solution(u, lam, None, 1.0, ok, it, t_start, how, cert)
        sol.objective = sol.delay_tau
        return sol

    def cheapest(self, bound_tau: float, weights: np.ndarray, warm: bool = True,
                 start: np.ndarray | None = None, lam: np.ndarray | None = None,
                 max_iter: int = MAX_ITER, cold: bool = True) -> Solution:
        """Minimum ``weights @ x`` subject to delay <= ``bound_tau``.

        ``warm``: start from the kept solution of largest delay below the bound; ``start``
        (variables, see ``point``) and ``lam``: a start to polish (another solver's answer).
        """
        t_start = time.perf_counter()
        w = np.asarray(weights, dtype=float)
        c, scale, const = self._normalised(w)
        T = float(bound_tau) / self.ts
        f0 = self._objective(c, 0.0)
        u, lam, it, cert, how = self._run(f0, T, start, lam, warm, max_iter=max_iter,
                                          cold=cold and start is None)
        if u is None:
            status = FAILED if how == "no start" else INFEASIBLE
            return Solution(np.full(self.nn, np.nan), np.nan, np.nan, np.nan, status,
                            "newton", time.perf_counter() - t_start,
                            ["newton: no strictly feasible start below the bound"])
        ok = cert.rel_gap <= self.accept
        if ok:
            self.keep(u, lam, bound_tau, trail=self._trail)
        self.last_certificate = cert
        sol = self._solution(u, lam, T, scale, ok, it, t_start, how, cert)
        sol.objective = float(c @ np.exp(u[:self.nf])) * scale + const
        return sol

    def certify(self, u: np.ndarray, lam: np.ndarray, bound_tau: float | None,
                weights: np.ndarray | None, tie: float = 0.0) -> Certificate:
        """Weak-duality certificate of another solver's answer (variables ``u``, see
        ``point``; multipliers from ``multipliers``)."""
        w = self.model.e_lin if weights is None else np.asarray(weights, dtype=float)
        if bound_tau is None:
            f0 = self._objective(tie * self._normalised(w)[0], 1.0)
            T = None
        else:
            f0 = self._objective(self._normalised(w)[0], 0.0)
            T = float(bound_tau) / self.ts
        return self._certificate(u, lam, f0, T)

    def keep(self, u: np.ndarray, lam: np.ndarray, bound_tau: float | None,
             trail: dict | None = None) -> None:
        """Keep a solved point (with its multipliers) as a warm start for later solves."""
        if bound_tau is None:
            self._fast = _Kept(u.copy(), lam.copy(), None, trail)
        else:
            self._kept.append(_Kept(u.copy(), lam.copy(), float(bound_tau) / self.ts, trail))
            del self._kept[:-64]

    def _solution(self, u, lam, T, scale, ok, it, t_start, how, cert) -> Solution:
        x = self.x_fixed.copy()
        x[self.free] = np.exp(u[:self.nf])
        price = 0.0
        if T is not None:
            price = float(lam[self._layout(T)["T"]][0]) * scale / self.ts
        status = OPTIMAL if ok else FAILED
        note = f"newton: {how}, {it} iterations, certified gap {cert.rel_gap:.1e}"
        return Solution(x, float(u[-1]) * self.ts, float(u[-1]) * self.ts, price, status,
                        "newton", time.perf_counter() - t_start, [note])
