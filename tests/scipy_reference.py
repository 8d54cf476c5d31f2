"""An independent reference for the sizing problems, written with ``scipy.optimize`` only.

This helper is not a test file. It reads the compiled :class:`edopt.model.Model` arrays and states
the problems in a different form from edopt's solvers (source: the formulation of gate sizing as a
nonlinear program in log sizes, solved by a general NLP method, as REFERENCES.md suggests):

- loads come from ``pin_load`` and ``fixed_load`` (the solvers and ``timing.evaluate`` use the
  per-term arrays ``term_owner / term_num / term_coef``);
- there are no arrival-time variables: every input-to-output path is enumerated and each path
  delay must stay within the bound, so the max-path delay is a max over explicit sums;
- SLSQP (or trust-constr) solves in log sizes ``z = log x``, where energy and every path delay
  are convex (posynomials of ``exp(z)``).

Only suitable for small networks (the number of paths grows quickly with depth).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp
from scipy.optimize import BFGS, Bounds, NonlinearConstraint, minimize

from edopt.model import Model

MAX_PATHS = 200_000


@dataclass(frozen=True)
class Paths:
    """All timing paths of a model: node incidence, start time and output allowance (tau)."""

    incidence: sp.csr_matrix      # paths x nodes, 1 where the path passes the node
    offset: np.ndarray            # start time of the path plus the allowance of its output (tau)

    def delays(self, d: np.ndarray) -> np.ndarray:
        """Delay of every path given the stage delays ``d`` (tau)."""
        return self.offset + self.incidence @ d


def enumerate_paths(model: Model) -> Paths:
    """Every path from a timed start (a node with a finite ``t0``) to a primary output driver."""
    succ: dict[int, list[int]] = {}
    for s, d in zip(model.edge_src.tolist(), model.edge_dst.tolist()):
        succ.setdefault(s, []).append(d)
    allow: dict[int, list[float]] = {}
    for node, a in zip(model.out_node.tolist(), model.out_allow.tolist()):
        allow.setdefault(node, []).append(a)
    rows: list[list[int]] = []
    offset: list[float] = []
    starts = np.flatnonzero(np.isfinite(model.t0))
    for s in starts.tolist():
        stack = [(s, [s])]
        while stack:
            node, path = stack.pop()
            for a in allow.get(node, []):
                rows.append(path)
                offset.append(float(model.t0[s]) + a)
            for nxt in succ.get(node, []):
                stack.append((nxt, path + [nxt]))
            if len(rows) > MAX_PATHS:
                raise ValueError(f"more than {MAX_PATHS} paths: too large for the reference")
    r = np.repeat(np.arange(len(rows)), [len(p) for p in rows])
    c = np.concatenate([np.asarray(p) for p in rows])
    inc = sp.csr_matrix((np.ones(len(c)), (r, c)), shape=(len(rows), model.n))
    return Paths(inc, np.asarray(offset))


class Reference:
    """Minimum delay and minimum energy under a delay bound, by enumerated paths and SLSQP."""

    def __init__(self, model: Model, method: str = "SLSQP") -> None:
        self.m = model
        self.method = method
        self.paths = enumerate_paths(model)
        self.free = np.flatnonzero(model.lo < model.hi)
        self.x_fixed = np.where(model.lo < model.hi, 1.0, model.lo)
        self.L = sp.csr_matrix(model.pin_load)
        gates = np.zeros(model.n, dtype=bool)
        gates[model.gate_slice] = True
        self.gates = gates
        self.zlo = np.log(model.lo[self.free])
        self.zhi = np.log(model.hi[self.free])

    # ------------------------------------------------------------------ model in own words
    def x_of(self, z: np.ndarray) -> np.ndarray:
        x = self.x_fixed.copy()
        x[self.free] = np.exp(z)
        return x

    def load(self, x: np.ndarray) -> np.ndarray:
        """C_L per copy of each node: driven pins plus wire and output load (C_u)."""
        return self.L @ x + self.m.fixed_load

    def stage_delay(self, x: np.ndarray) -> np.ndarray:
        """d_i = p_i + C_L(i) / x_i (tau)."""
        return self.m.p + self.load(x) / x

    def delay_jac_z(self, x: np.ndarray) -> sp.csr_matrix:
        """d(stage delays) / d(z_free): L_ij x_j / x_i off the diagonal, -C_L(i) / x_i on it."""
        Lx = sp.diags(1.0 / x) @ self.L @ sp.diags(x)
        J = Lx - sp.diags(self.load(x) / x)
        return sp.csr_matrix(J)[:, self.free]

    def circuit_delay(self, x: np.ndarray) -> float:
        """Largest path delay (tau)."""
        return float(np.max(self.paths.delays(self.stage_delay(x))))

    def energy_fj(self, x: np.ndarray, cycle_ps: float) -> float:
        """Dynamic energy V^2 C_u sum alpha copies (C_L + p x) plus leakage over ``cycle_ps``."""
        m, t = self.m, self.m.tech
        dyn = np.sum((m.copies * m.alpha * (self.load(x) + m.p * x))[self.gates])
        leak = np.sum((m.leak * x)[self.gates])
        return float(dyn * t.cu_ff * t.vdd_v**2 + leak * t.vdd_v * t.leak_na * 1e-6 * cycle_ps)

    def _energy_grad_z(self, x: np.ndarray, cycle_ps: float) -> np.ndarray:
        m, t = self.m, self.m.tech
        w = np.where(self.gates, m.copies * m.alpha, 0.0)
        dyn = (self.L.T @ w + w * m.p) * t.cu_ff * t.vdd_v**2
        leak = np.where(self.gates, m.leak, 0.0) * t.vdd_v * t.leak_na * 1e-6 * cycle_ps
        return ((dyn + leak) * x)[self.free]

    def _cap_constraints(self) -> list:
        m = self.m
        if m.cap_rows.shape[0] == 0:
            return []
        A = sp.csr_matrix(m.cap_rows)

        def fun(u: np.ndarray) -> np.ndarray:
            return m.cap_max - A @ self.x_of(u[: len(self.free)])

        def jac(u: np.ndarray) -> np.ndarray:
            x = self.x_of(u[: len(self.free)])
            J = -(A[:, self.free].toarray() * x[self.free])
            return np.hstack([J, np.zeros((J.shape[0], len(u) - len(self.free)))])

        return [{"type": "ineq", "fun": fun, "jac": jac}]

    # ------------------------------------------------------------------------- problems
    def fastest(self, z0: np.ndarray | None = None) -> tuple[np.ndarray, float]:
        """Minimum of the largest path delay: min D s.t. every path delay <= D. Sizes, D (tau)."""
        nf = len(self.free)
        z0 = np.clip(np.zeros(nf), self.zlo, self.zhi) if z0 is None else z0
        D0 = self.circuit_delay(self.x_of(z0))
        P = self.paths

        def cons(u: np.ndarray) -> np.ndarray:
            return u[-1] - P.delays(self.stage_delay(self.x_of(u[:-1])))

        def cons_jac(u: np.ndarray) -> np.ndarray:
            J = -(P.incidence @ self.delay_jac_z(self.x_of(u[:-1]))).toarray()
            return np.hstack([J, np.ones((J.shape[0], 1))])

        res = minimize(
            lambda u: u[-1] / D0, np.append(z0, D0),
            jac=lambda u: np.append(np.zeros(nf), 1.0 / D0),
            method="SLSQP",
            bounds=list(zip(self.zlo, self.zhi)) + [(0.0, None)],
            constraints=[{"type": "ineq", "fun": cons, "jac": cons_jac}] + self._cap_constraints(),
            options={"ftol": 1e-13, "maxiter": 2000},
        )
        if not res.success:
            raise RuntimeError(f"reference fastest solve failed: {res.message}")
        x = self.x_of(res.x[:-1])
        return x, self.circuit_delay(x)

    def cheapest(self, target_ps: float, cycle_ps: float | None = None,
                 z0: np.ndarray | None = None) -> tuple[np.ndarray, float]:
        """Minimum energy with every path delay <= ``target_ps``. Returns sizes and energy (fJ).

        ``cycle_ps`` (the leakage time) defaults to the target, as in edopt.
        """
        m = self.m
        cycle = target_ps if cycle_ps is None else cycle_ps
        T = target_ps / m.tech.tau_ps
        if z0 is None:
            z0 = np.log(self.fastest()[0][self.free])
        e0 = self.energy_fj(self.x_of(z0), cycle)
        P = self.paths

        def obj(z: np.ndarray) -> float:
            return self.energy_fj(self.x_of(z), cycle) / e0

        def grad(z: np.ndarray) -> np.ndarray:
            return self._energy_grad_z(self.x_of(z), cycle) / e0

        def cons(z: np.ndarray) -> np.ndarray:
            return (T - P.delays(self.stage_delay(self.x_of(z)))) / T

        def cons_jac(z: np.ndarray) -> np.ndarray:
            return -(P.incidence @ self.delay_jac_z(self.x_of(z))).toarray() / T

        if self.method == "SLSQP":
            res = minimize(obj, z0, jac=grad, method="SLSQP", bounds=list(zip(self.zlo, self.zhi)),
                           constraints=[{"type": "ineq", "fun": cons, "jac": cons_jac}]
                           + self._cap_constraints(),
                           options={"ftol": 1e-13, "maxiter": 2000})
        else:
            res = minimize(obj, z0, jac=grad, hess=BFGS(),
                           method="trust-constr", bounds=Bounds(self.zlo, self.zhi),
                           constraints=[NonlinearConstraint(cons, 0.0, np.inf, jac=cons_jac)],
                           options={"gtol": 1e-10, "xtol": 1e-12, "maxiter": 5000})
        if not res.success:
            raise RuntimeError(f"reference cheapest solve failed: {res.message}")
        x = self.x_of(res.x)
        return x, self.energy_fj(x, cycle)
