"""Reference solver: the sizing problems as convex programs in log sizes, solved through cvxpy.

Sizes enter as ``x = exp(z)``; arrival times stay linear. Each delay term ``c x_k / x_i`` is one
exponential cone ``exp(z_k - z_i + log c)``, built as a single sparse matrix expression, so cvxpy
canonicalises a handful of vector atoms whatever the network size. The delay bound and the
objective weights are cvxpy Parameters: a sweep compiles once and re-solves.

Robustness: Clarabel is tried with a short chain of settings (``_CHAIN``). An answer that
Clarabel reports at reduced accuracy is re-checked by a weak-duality certificate computed by
edopt's own interior-point solver (``barrier.py``) from Clarabel's sizes (re-timed, so exactly
feasible) and duals; it is reported optimal only when that certificate bounds its relative
optimality gap by ``CERTIFIED_RTOL``, else it is polished by that solver from Clarabel's answer,
else the next setting is tried.
"""

from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field

import cvxpy as cp
import numpy as np
import scipy.sparse as sp

from ..errors import SolverError
from ..model import Model

OPTIMAL = "optimal"
INACCURATE = "inaccurate"
INFEASIBLE = "infeasible"
FAILED = "failed"


@dataclass
class Options:
    """Constraints beyond the model's own, in model units (tau, C_u)."""

    max_effort: float | None = None     # C_L / x <= max_effort at every gate (transition limit)
    area_max: float | None = None       # area proxy budget


@dataclass
class Solution:
    """What a solve returns: sizes per node, the dual price, an honest status."""

    x: np.ndarray
    delay_tau: float
    objective: float                    # in model units of the chosen objective
    price: float                        # -d(objective)/dT, objective units per tau (0: fastest)
    status: str
    solver: str
    seconds: float
    attempts: list[str] = field(default_factory=list)


# solver chain: (name, label, options); tried in order until an answer is optimal (Clarabel's
# own test, or the certificate after a polish). qdldl is about twice as fast as faer on these
# programs on two cores; the two linear solvers fail on different instances; the larger static
# regularisation rescues the rare solve that both abort near the minimum delay; the last entry
# asks Clarabel for a relative gap of 1e-7 instead of 1e-8 (its status then says optimal to
# that tolerance, still far inside the 1e-5 agreement that the independent re-timing checks).
_CHAIN: tuple[tuple[str, str, dict], ...] = (
    ("CLARABEL", "", {"direct_solve_method": "qdldl"}),
    ("CLARABEL", "[faer]", {"direct_solve_method": "faer"}),
    ("CLARABEL", "[reg 1e-7]", {"direct_solve_method": "qdldl", "max_iter": 400,
                                "static_regularization_constant": 1e-7}),
    ("CLARABEL", "[tol 1e-7]", {"direct_solve_method": "qdldl", "tol_gap_rel": 1e-7,
                                "tol_gap_abs": 1e-7, "tol_feas": 1e-7}),
)
# the minimum-delay optimum is flat in the sizes (they are accurate to the square root of the
# objective tolerance), so on small networks it is solved to tighter tolerances first
_TIGHT: tuple[tuple[str, str, dict], ...] = (
    ("CLARABEL", "[tight]", {"tol_gap_abs": 1e-11, "tol_gap_rel": 1e-11, "tol_feas": 1e-10,
                             "tol_ktratio": 1e-8}),
)
TIGHT_MAX = 300
# small networks keep Clarabel's default linear solver first (speed does not matter there)
_SMALL: tuple[tuple[str, str, dict], ...] = (_CHAIN[1], _CHAIN[0]) + _CHAIN[2:]
_TIGHT_SMALL: tuple[tuple[str, str, dict], ...] = _TIGHT[:1] + _SMALL
# a reduced-accuracy answer is accepted as optimal when the weak-duality certificate of the
# Newton solver (barrier.Certificate) bounds its relative optimality gap by this
CERTIFIED_RTOL = 1e-7
# warm starts along a sweep (edopt's own interior-point method from the last solution): off by
# default; measured on 1,000-gate networks they need 40-80 iterations (0.5-2 s), no faster than a
# cold conic solve, so a capped attempt that falls back to Clarabel mostly wastes time
WARM_DEFAULT = False
WARM_MAX_ITER = 30
POLISH_MAX_ITER = 25
# a cold start of the Newton solver (the last resort when Clarabel fails) only on small networks
COLD_NEWTON_MAX = 600


class ConicSizer:
    """Compiled convex programs of one model: ``fastest`` and ``cheapest`` (energy or area).

    Every solve goes to Clarabel through cvxpy (the reference); a reduced-accuracy answer is
    certified or polished by edopt's interior-point solver (``newton()``), see the module
    docstring. Every returned "optimal" is backed by Clarabel's own optimality test or by the
    certificate. ``warm = True`` first tries that solver from the nearest earlier solution
    (experimental: on 1,000-gate networks it is not yet faster than a conic solve).
    """

    def __init__(self, model: Model, options: Options | None = None,
                 time_scale: float | None = None) -> None:
        self.model = model
        self.options = options or Options()
        m = model
        free = ~m.fixed
        self.free = np.flatnonzero(free)
        nf = len(self.free)
        y_fixed = np.where(free, 0.0, np.log(m.hi))
        col = np.full(m.n, -1, dtype=np.int64)
        col[self.free] = np.arange(nf)

        # exponents of the delay terms: log c + y[num] - y[owner]
        has_num = m.term_num >= 0
        num = np.maximum(m.term_num, 0)
        b = np.log(m.term_coef) - y_fixed[m.term_owner] + np.where(has_num, y_fixed[num], 0.0)
        # times are scaled by a typical path delay so that arrivals and the bound are order one
        self.ts = time_scale or typical_delay(m)
        b = b - np.log(self.ts)
        rows, cols, vals = [], [], []
        r = np.arange(len(b))
        own_free = col[m.term_owner] >= 0
        rows.append(r[own_free])
        cols.append(col[m.term_owner][own_free])
        vals.append(-np.ones(own_free.sum()))
        num_free = has_num & (col[num] >= 0)
        rows.append(r[num_free])
        cols.append(col[num][num_free])
        vals.append(np.ones(num_free.sum()))
        A = sp.csr_matrix((np.concatenate(vals), (np.concatenate(rows), np.concatenate(cols))),
                          shape=(len(b), nf))
        varying = np.asarray(abs(A).sum(axis=1)).ravel() > 0
        # terms with a fixed owner carry -y_owner in b, so the constant load is load / x there;
        # a term with a free owner always varies
        const_load = np.bincount(m.term_owner[~varying], weights=np.exp(b[~varying]),
                                 minlength=m.n)
        self.z = cp.Variable(nf, name="logsize")
        self.a = cp.Variable(m.n, name="arrival")
        self.D = cp.Variable(name="delay")
        tv = np.flatnonzero(varying)
        S = sp.csr_matrix((np.ones(len(tv)), (m.term_owner[tv], np.arange(len(tv)))),
                          shape=(m.n, len(tv)))
        effort = S @ cp.exp(A[tv] @ self.z + b[tv]) + const_load
        d = m.p / self.ts + effort
        named: dict[str, cp.Constraint] = {}
        named["out"] = self.D >= self.a[m.out_node] + m.out_allow / self.ts
        if len(m.edge_src):
            E = sp.csr_matrix((np.ones(len(m.edge_src)),
                               (np.arange(len(m.edge_src)), m.edge_dst)),
                              shape=(len(m.edge_src), m.n))
            Esrc = sp.csr_matrix((np.ones(len(m.edge_src)),
                                  (np.arange(len(m.edge_src)), m.edge_src)),
                                 shape=(len(m.edge_src), m.n))
            named["edges"] = E @ self.a >= Esrc @ self.a + E @ d
        st = np.flatnonzero(np.isfinite(m.t0))
        named["starts"] = self.a[st] >= m.t0[st] / self.ts + d[st]
        named["lo"] = self.z >= np.log(m.lo[self.free])
        named["hi"] = self.z <= np.log(m.hi[self.free])
        x_free = cp.exp(self.z)
        self._x_free = x_free
        if m.cap_rows.shape[0]:
            fixed_part = m.cap_rows @ np.where(free, 0.0, m.hi)
            named["cap"] = m.cap_rows[:, self.free] @ x_free <= m.cap_max - fixed_part
        if self.options.max_effort is not None:
            gates = np.arange(m.n_sources, m.n)
            named["eff"] = effort[gates] <= self.options.max_effort / self.ts
        if self.options.area_max is not None:
            named["area"] = (m.area[self.free] @ x_free
                             <= self.options.area_max - m.area @ np.where(free, 0.0, m.hi))
        self._named = named
        self._cons = list(named.values())
        self._fixed_x = np.where(free, 0.0, m.hi)
        self._fast: cp.Problem | None = None
        self._fast_tie: float | None = None
        self._cheap: cp.Problem | None = None
        self.T = cp.Parameter(nonneg=True, name="bound")
        self.c = cp.Parameter(nf, nonneg=True, name="weights")
        self._bound = self.D <= self.T
        self._newton = None
        self.warm = WARM_DEFAULT

    # ---------------------------------------------------------------- problems
    def fastest(self, weights: np.ndarray | None = None, tie: float = 1e-7) -> Solution:
        """Minimum delay within the size bounds and limits.

        Gates off the critical path do not change the delay; ``tie`` times the (normalised)
        ``weights @ x`` is added to the objective so that they take their cheapest sizes. Its
        effect on the delay is second order in ``tie``.
        """
        w = self.model.e_lin if weights is None else np.asarray(weights, dtype=float)
        self.c.value = self._normalised(w)[0]
        if self._fast is None or self._fast_tie != tie:
            obj = self.D + tie * (self.c @ self._x_free) if tie else self.D
            self._fast = cp.Problem(cp.Minimize(obj), self._cons)
            self._fast_tie = tie
        t_start = time.perf_counter()
        sol = self._solve(self._fast, lambda: float(self.D.value) * self.ts, None, None, w, tie,
                          chain=_TIGHT_SMALL if len(self.free) <= TIGHT_MAX else _CHAIN)
        if sol.status == FAILED and self._small():
            alt = self.newton().fastest(w, tie=tie)
            alt.attempts = sol.attempts + alt.attempts
            if alt.status == OPTIMAL:
                sol = alt
        sol.seconds = time.perf_counter() - t_start
        return sol

    def _small(self) -> bool:
        return len(self.free) <= COLD_NEWTON_MAX

    def _solve(self, problem: cp.Problem, value, price: float | None, bound_tau: float | None,
               w: np.ndarray, tie: float,
               chain: tuple[tuple[str, str, dict], ...] = _CHAIN) -> Solution:
        """Clarabel with each setting of the chain until an answer is optimal (by Clarabel's
        test or by the certificate, after a polish if needed) or infeasible."""
        attempts: list[str] = []
        sol = best = None
        for entry in chain:
            t0 = time.perf_counter()
            sol = self._run(problem, value, price, chain=(entry,))
            sol.attempts = attempts + sol.attempts
            sol = self._checked(sol, bound_tau, w, tie, t0)
            attempts = sol.attempts
            if sol.status in (OPTIMAL, INFEASIBLE):
                return sol
            if sol.status == INACCURATE:
                best = sol
        if best is not None:
            best.attempts = attempts
            return best
        return sol

    def _normalised(self, w: np.ndarray) -> tuple[np.ndarray, float, float]:
        if np.any(w[self.free] < 0):
            raise SolverError("objective weights must be >= 0")
        const = float(w @ self._fixed_x)
        ref = np.clip(1.0, self.model.lo, self.model.hi)[self.free]  # unit sizes where allowed
        scale = float(w[self.free] @ ref) + const
        scale = scale if scale > 0 else 1.0
        return w[self.free] / scale, scale, const

    def newton(self):
        """edopt's interior-point solver on the same model and time unit (built on first use)."""
        if self._newton is None:
            from .barrier import BarrierSizer

            self._newton = BarrierSizer(self.model, self.options, time_scale=self.ts)
        return self._newton

    def cheapest(self, bound_tau: float, weights: np.ndarray) -> Solution:
        """Minimum ``weights @ x`` (per node, model units) subject to delay <= ``bound_tau``.

        The objective is scaled internally to order one; ``objective`` and ``price`` come back
        in the units of ``weights``.
        """
        w = np.asarray(weights, dtype=float)
        self.c.value, scale, const = self._normalised(w)
        attempts: list[str] = []
        t_start = time.perf_counter()
        if self.warm and self._newton is not None and self._newton.has_start(bound_tau):
            sol = self._newton.cheapest(bound_tau, w, warm=True, max_iter=WARM_MAX_ITER,
                                        cold=False)
            if sol.status == OPTIMAL:
                return sol
            attempts = sol.attempts
        self.T.value = float(bound_tau) / self.ts
        if self._cheap is None:
            self._cheap = cp.Problem(cp.Minimize(self.c @ self._x_free), self._cons + [self._bound])
        sol = self._solve(self._cheap, lambda: float(self.c.value @ np.exp(self.z.value)) * scale
                          + const, scale, bound_tau, w, 0.0,
                          chain=_SMALL if len(self.free) <= TIGHT_MAX else _CHAIN)
        sol.attempts = attempts + sol.attempts
        if sol.status == FAILED and self._small():
            alt = self.newton().cheapest(bound_tau, w, warm=False)
            alt.attempts = sol.attempts + alt.attempts
            if alt.status == OPTIMAL:
                sol = alt
        sol.seconds = time.perf_counter() - t_start
        return sol

    # ------------------------------------------------------------- checking
    def _multipliers(self, u: np.ndarray, bound_tau: float | None) -> np.ndarray:
        """Clarabel's duals of the shared rows, in the layout of the Newton solver."""
        nw = self.newton()
        named = self._named

        def dual(name, n=None):
            c = named.get(name)
            v = None if c is None else c.dual_value
            if v is None:
                return np.zeros(n or 0)
            return np.atleast_1d(np.asarray(v, dtype=float))

        arr = np.concatenate([dual("edges", len(self.model.edge_src)),
                              dual("starts", int(np.isfinite(self.model.t0).sum()))])
        bound = None
        if bound_tau is not None and self._bound.dual_value is not None:
            bound = float(self._bound.dual_value)
        return nw.multipliers(
            u, None if bound_tau is None else float(bound_tau) / self.ts, arr=arr,
            out=dual("out", len(self.model.out_node)), lo=dual("lo", len(self.free)),
            hi=dual("hi", len(self.free)), bound=bound,
            cap=dual("cap") if "cap" in named else None,
            eff=dual("eff") if "eff" in named else None,
            area=float(dual("area")[0]) if "area" in named else None)

    def _checked(self, sol: Solution, bound_tau: float | None, w: np.ndarray, tie: float,
                 t_start: float) -> Solution:
        """Certify a Clarabel answer by weak duality; polish it when it is not accurate enough.

        Returns the (possibly polished) solution; a Clarabel "optimal" stays optimal, a
        reduced-accuracy one becomes optimal only with a certificate (its own or the polish's).
        """
        if sol.status not in (OPTIMAL, INACCURATE) or self.z.value is None:
            return sol
        nw = self.newton()
        u = nw.point(sol.x)
        if u is None:
            return sol
        if bound_tau is not None:
            u = self._repaired(sol, u, bound_tau, w)
        try:
            lam = self._multipliers(u, bound_tau)
        except (ValueError, TypeError):
            lam = None
        cert = None if lam is None else nw.certify(u, lam, bound_tau, w, tie=tie)
        if cert is not None and cert.rel_gap <= CERTIFIED_RTOL:
            sol.attempts.append(f"certified gap {cert.rel_gap:.1e}")
            nw.keep(u, lam, bound_tau)
            if sol.status == INACCURATE:
                sol.status = OPTIMAL
            return sol
        if sol.status == OPTIMAL:
            # Clarabel's own test passed; keep it as a start only if it is strictly usable
            if lam is not None:
                nw.keep(u, lam, bound_tau)
            return sol
        if bound_tau is None:
            pol = nw.fastest(w, tie=tie, start=u, lam=lam, max_iter=POLISH_MAX_ITER)
        else:
            pol = nw.cheapest(bound_tau, w, warm=False, start=u, lam=lam,
                              max_iter=POLISH_MAX_ITER, cold=False)
        pol.attempts = sol.attempts + pol.attempts
        if pol.status == OPTIMAL:
            pol.solver = f"{sol.solver}+newton"
            pol.seconds = time.perf_counter() - t_start
            return pol
        sol.attempts = pol.attempts
        return sol

    def _repaired(self, sol: Solution, u: np.ndarray, bound_tau: float,
                  w: np.ndarray) -> np.ndarray:
        """An answer whose re-timed delay exceeds the bound (by the solver's feasibility
        tolerance) moved towards the minimum-delay sizes until it meets it: the delay is convex
        in the log sizes, so a mix of weight ``theta`` costs at most ``theta`` times the energy
        difference (``theta`` ~ tolerance / relative slack of the bound)."""
        nw = self.newton()
        T = float(bound_tau) / self.ts
        fast = nw._fast
        if u[-1] <= T or fast is None or fast.u[-1] >= T:
            return u
        nf = len(self.free)
        theta = min(1.0, 2.0 * (u[-1] - T) / (u[-1] - fast.u[-1]) + 1e-12)
        x = self._fixed_x.copy()
        x[self.free] = np.exp((1 - theta) * u[:nf] + theta * fast.u[:nf])
        v = nw.point(x)
        if v is None or v[-1] > T:
            return u
        sol.x = x
        sol.delay_tau = float(v[-1]) * self.ts
        sol.objective = float(w @ x)
        sol.attempts.append(f"moved {theta:.1e} towards the minimum-delay sizes to meet the bound")
        return v

    # ----------------------------------------------------------------- running
    def _run(self, problem: cp.Problem, value, price: float | None,
             chain: tuple[tuple[str, str, dict], ...] = _CHAIN) -> Solution:
        attempts: list[str] = []
        t_start = time.perf_counter()
        for name, label, opts in chain:
            if name not in cp.installed_solvers():
                continue
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    problem.solve(solver=name, **opts)
            except cp.error.SolverError as exc:
                attempts.append(f"{name}{label}: error ({str(exc).splitlines()[0][:80]})")
                continue
            status = problem.status
            attempts.append(f"{name}{label}: {status}")
            if status in (cp.INFEASIBLE, cp.INFEASIBLE_INACCURATE):
                return Solution(np.full(self.model.n, np.nan), np.nan, np.nan, np.nan, INFEASIBLE,
                                name, time.perf_counter() - t_start, attempts)
            if status == cp.OPTIMAL:
                return self._solution(value, price, OPTIMAL, name, t_start, attempts)
            if status == cp.OPTIMAL_INACCURATE and self.z.value is not None:
                # one reduced-accuracy answer is enough: the certificate or the polish decides
                return self._solution(value, price, INACCURATE, name, t_start, attempts)
        return Solution(np.full(self.model.n, np.nan), np.nan, np.nan, np.nan, FAILED,
                        "", time.perf_counter() - t_start, attempts)

    def _solution(self, value, price, status, name, t_start, attempts) -> Solution:
        x = self._fixed_x.copy()
        x[self.free] = np.exp(self.z.value)
        lam = 0.0
        if price is not None:
            dual = self._bound.dual_value
            lam = float(dual) * price / self.ts if dual is not None else np.nan
        return Solution(x, float(self.D.value) * self.ts, value(), lam, status, name,
                        time.perf_counter() - t_start, attempts)


def typical_delay(m: Model) -> float:
    """Delay of the network at unit sizes where allowed (tau): the time unit of the program."""
    from ..timing import evaluate

    x = np.clip(1.0, m.lo, m.hi)
    return max(evaluate(m, x).circuit_delay_ps / m.tech.tau_ps, 1.0)
