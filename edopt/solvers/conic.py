"""Reference solver: the sizing problems as convex programs in log sizes, solved through cvxpy.

Sizes enter as ``x = exp(z)``; arrival times stay linear. Each delay term ``c x_k / x_i`` is one
exponential cone ``exp(z_k - z_i + log c)``, built as a single sparse matrix expression, so cvxpy
canonicalises a handful of vector atoms whatever the network size. The delay bound and the
objective weights are cvxpy Parameters: a sweep compiles once and re-solves.
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
    price: float                        # -d(objective)/dT in objective units per tau (0 for fastest)
    status: str
    solver: str
    seconds: float
    attempts: list[str] = field(default_factory=list)


# solver chain: (name, options); tried in order until one ends optimal
_CHAIN: tuple[tuple[str, dict], ...] = (
    ("CLARABEL", {}),
    ("CLARABEL", {"max_iter": 400, "static_regularization_constant": 1e-7,
                  "presolve_enable": False}),
)
# the minimum-delay optimum is flat in the sizes (they are accurate to the square root of the
# objective tolerance), so it is solved to tighter tolerances first
_TIGHT: tuple[tuple[str, dict], ...] = (
    ("CLARABEL", {"tol_gap_abs": 1e-11, "tol_gap_rel": 1e-11, "tol_feas": 1e-10,
                  "tol_ktratio": 1e-8}),
) + _CHAIN
# after the chain, the problem goes to edopt's own Newton barrier method (solvers/barrier.py),
# on networks small enough for its sparse factorisations to stay quick
BARRIER_FALLBACK_MAX = 600


class ConicSizer:
    """Compiled convex programs of one model: ``fastest`` and ``cheapest`` (energy or area)."""

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
        self.ts = time_scale or _typical_delay(m)
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
        const_load = np.bincount(m.term_owner[~varying], weights=np.exp(b[~varying]),
                                 minlength=m.n)
        self.z = cp.Variable(nf, name="logsize")
        self.a = cp.Variable(m.n, name="arrival")
        self.D = cp.Variable(name="delay")
        tv = np.flatnonzero(varying)
        S = sp.csr_matrix((np.ones(len(tv)), (m.term_owner[tv], np.arange(len(tv)))),
                          shape=(m.n, len(tv)))
        # constant terms have a fixed owner, and b already carries -y_owner: they are C/x
        effort = S @ cp.exp(A[tv] @ self.z + b[tv]) + const_load
        d = m.p / self.ts + effort
        cons = [self.D >= self.a[m.out_node] + m.out_allow / self.ts]
        E = sp.csr_matrix((np.ones(len(m.edge_src)), (np.arange(len(m.edge_src)), m.edge_dst)),
                          shape=(len(m.edge_src), m.n))
        Esrc = sp.csr_matrix((np.ones(len(m.edge_src)), (np.arange(len(m.edge_src)), m.edge_src)),
                             shape=(len(m.edge_src), m.n))
        if len(m.edge_src):
            cons.append(E @ self.a >= Esrc @ self.a + E @ d)
        st = np.flatnonzero(np.isfinite(m.t0))
        cons.append(self.a[st] >= m.t0[st] / self.ts + d[st])
        cons.append(self.z >= np.log(m.lo[self.free]))
        cons.append(self.z <= np.log(m.hi[self.free]))
        x_free = cp.exp(self.z)
        self._x_free = x_free
        if m.cap_rows.shape[0]:
            fixed_part = m.cap_rows @ np.where(free, 0.0, m.hi)
            cons.append(m.cap_rows[:, self.free] @ x_free <= m.cap_max - fixed_part)
        if self.options.max_effort is not None:
            gates = np.arange(m.n_sources, m.n)
            cons.append(effort[gates] <= self.options.max_effort / self.ts)
        if self.options.area_max is not None:
            cons.append(m.area[self.free] @ x_free
                        <= self.options.area_max - m.area @ np.where(free, 0.0, m.hi))
        self._cons = cons
        self._fixed_x = np.where(free, 0.0, m.hi)
        self._fast: cp.Problem | None = None
        self._cheap: cp.Problem | None = None
        self.T = cp.Parameter(nonneg=True, name="bound")
        self.c = cp.Parameter(nf, nonneg=True, name="weights")
        self._bound = self.D <= self.T

    # ---------------------------------------------------------------- problems
    def fastest(self, weights: np.ndarray | None = None, tie: float = 1e-7) -> Solution:
        """Minimum delay within the size bounds and limits.

        Gates off the critical path do not change the delay; ``tie`` times the (normalised)
        ``weights @ x`` is added to the objective so that they take their cheapest sizes. Its
        effect on the delay is second order in ``tie``.
        """
        w = self.model.e_lin if weights is None else np.asarray(weights, dtype=float)
        self.c.value = self._normalised(w)[0]
        if self._fast is None:
            self._fast = cp.Problem(cp.Minimize(self.D + tie * (self.c @ self._x_free)),
                                    self._cons)
        sol = self._run(self._fast, lambda: float(self.D.value) * self.ts, price=None,
                        chain=_TIGHT if len(self.free) <= 300 else _CHAIN)
        if sol.status not in (OPTIMAL, INACCURATE):
            sol = self._fallback().fastest()
        return sol

    def _normalised(self, w: np.ndarray) -> tuple[np.ndarray, float, float]:
        if np.any(w[self.free] < 0):
            raise SolverError("objective weights must be >= 0")
        const = float(w @ self._fixed_x)
        ref = np.clip(1.0, self.model.lo, self.model.hi)[self.free]  # unit sizes where allowed
        scale = float(w[self.free] @ ref) + const
        scale = scale if scale > 0 else 1.0
        return w[self.free] / scale, scale, const

    def _fallback(self):
        from .barrier import BarrierSizer

        if self.model.n > BARRIER_FALLBACK_MAX:
            return _NoFallback()

        if getattr(self, "_barrier", None) is None:
            self._barrier = BarrierSizer(self.model, self.options)
        return self._barrier

    def cheapest(self, bound_tau: float, weights: np.ndarray) -> Solution:
        """Minimum ``weights @ x`` (per node, model units) subject to delay <= ``bound_tau``.

        The objective is scaled internally to order one; ``objective`` and ``price`` come back
        in the units of ``weights``.
        """
        w = np.asarray(weights, dtype=float)
        self.c.value, scale, const = self._normalised(w)
        self.T.value = float(bound_tau) / self.ts
        if self._cheap is None:
            self._cheap = cp.Problem(cp.Minimize(self.c @ self._x_free), self._cons + [self._bound])
        sol = self._run(self._cheap, lambda: float(self.c.value @ np.exp(self.z.value)) * scale
                        + const, price=scale)
        if sol.status not in (OPTIMAL, INFEASIBLE):
            alt = self._fallback().cheapest(bound_tau, w, warm=False)
            alt.attempts = sol.attempts + alt.attempts
            if alt.status == OPTIMAL or sol.status == FAILED:
                sol = alt
        return sol

    # ----------------------------------------------------------------- running
    def _run(self, problem: cp.Problem, value, price: float | None,
             chain: tuple[tuple[str, dict], ...] = _CHAIN) -> Solution:
        attempts: list[str] = []
        t_start = time.perf_counter()
        for name, opts in chain:
            if name not in cp.installed_solvers():
                continue
            try:
                with warnings.catch_warnings():
                    warnings.simplefilter("ignore")
                    problem.solve(solver=name, **opts)
            except cp.error.SolverError as exc:
                attempts.append(f"{name}: error ({str(exc).splitlines()[0][:80]})")
                continue
            status = problem.status
            attempts.append(f"{name}: {status}")
            if status in (cp.INFEASIBLE, cp.INFEASIBLE_INACCURATE):
                return Solution(np.full(self.model.n, np.nan), np.nan, np.nan, np.nan, INFEASIBLE,
                                name, time.perf_counter() - t_start, attempts)
            if status == cp.OPTIMAL:
                return self._solution(value, price, OPTIMAL, name, t_start, attempts)
        if self.z.value is not None and problem.status == cp.OPTIMAL_INACCURATE:
            return self._solution(value, price, INACCURATE, attempts[-1].split(":")[0], t_start,
                                  attempts)
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


def _typical_delay(m: Model) -> float:
    """Delay of the network at unit sizes where allowed (tau): the time unit of the program."""
    from ..timing import evaluate

    x = np.clip(1.0, m.lo, m.hi)
    return max(evaluate(m, x).circuit_delay_ps / m.tech.tau_ps, 1.0)


class _NoFallback:
    """Stands in for the barrier method on networks too large for it: reports failure."""

    def _failed(self) -> Solution:
        return Solution(np.array([np.nan]), np.nan, np.nan, np.nan, FAILED, "", 0.0,
                        ["newton: skipped (network too large)"])

    def fastest(self) -> Solution:
        return self._failed()

    def cheapest(self, bound_tau: float, weights: np.ndarray, warm: bool = False) -> Solution:
        return self._failed()
