"""The public sizing entry points and their result object.

Data flow: Circuit -> ``compile_model`` -> Model -> solver -> sizes -> ``timing.evaluate``
(independent re-check) -> ``Sizing``. A ``Sizer`` holds one compiled model and its compiled
programs, so that many targets reuse them.
"""

from __future__ import annotations

import copy
import dataclasses
import math
import re
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import scipy.sparse as sp

from .circuit import Circuit
from .errors import EdoptError, InfeasibleTarget, SolverError
from .model import Model, compile_model
from .solvers.conic import FAILED, INACCURATE, INFEASIBLE, OPTIMAL, ConicSizer, Options, Solution
from .solvers.large import GAP, LargeSizer, LargeSolution
from .technology import Technology, technology
from .timing import Evaluation, evaluate

CAUTION = (
    "First-order logical-effort estimate: confirm timing and energy with circuit simulation and "
    "the foundry's own rules before sign-off."
)
AGREEMENT_RTOL = 1e-5   # solver delay / objective versus the independent evaluation
POLISH = 1e-3           # delay allowance of the polished minimum-delay sizing (relative)
LARGE_GATES = 2000      # engine="auto": the large engine above this many free gates
ENGINES = ("auto", "reference", "large")

_TARGET = re.compile(r"^\s*([0-9]*\.?[0-9]+(?:[eE][-+]?[0-9]+)?)\s*(ps|ns|x)?\s*$")


def is_relative(target: str | float | None) -> bool:
    """Whether ``target`` is a multiple of the minimum delay (``"1.2x"``)."""
    return isinstance(target, str) and target.strip().lower().endswith("x")


def parse_target(target: str | float | None, min_delay_ps: float | None = None) -> float | None:
    """A delay target in ps from ``250``, ``"250ps"``, ``"0.25ns"`` or ``"1.2x"`` (times the
    minimum delay, which must then be given)."""
    if target is None:
        return None
    if isinstance(target, (int, float)) and not isinstance(target, bool):
        value, unit = float(target), "ps"
    else:
        m = _TARGET.match(str(target))
        if not m:
            raise EdoptError(
                f"cannot read the delay target {target!r}: write it like 250ps, 0.25ns or 1.2x"
            )
        value, unit = float(m.group(1)), m.group(2) or "ps"
    if not math.isfinite(value) or value <= 0:
        raise EdoptError(f"the delay target must be positive, got {target!r}")
    if unit == "x":
        if value < 1:
            raise InfeasibleTarget(
                f"target {target} is below the minimum delay (relative targets start at 1x)",
                min_delay_ps)
        if min_delay_ps is None:
            raise EdoptError("a relative target needs the minimum delay")
        return value * min_delay_ps
    return value * (1000.0 if unit == "ns" else 1.0)


@dataclass
class Sizing:
    """One sizing with its independently evaluated timing and energy.

    Attributes
    ----------
    problem : "fastest", "cheapest", "balanced" or "budget".
    status : "optimal", "inaccurate" (solver tolerances not fully met), "failed".
    delay_ps, energy_fj, dynamic_fj, leakage_fj, area : from the independent evaluation.
    price_fj_per_ps : marginal energy price of delay, -dE*/dT, from the dual (energy objective).
    intensity : hardware intensity eta = -(T/E) dE*/dT.
    sizes : size per gate (pandas Series by gate name).
    table : one row per gate (type, size, input cap, load, stage effort, delay, slack, ...).
    """

    problem: str
    objective: str
    status: str
    target_ps: float | None
    min_delay_ps: float | None
    price: float
    model: Model
    evaluation: Evaluation
    solver: str
    attempts: list[str]
    seconds: float
    solver_delay_ps: float
    solver_objective: float
    notes: list[str] = field(default_factory=list)
    # dual of the delay bound with the cycle time held fixed (-dE/dT at a fixed clock)
    bound_price: float = float("nan")
    # discrete sizes only (edopt.discrete): continuous lower bound at the same target and the
    # gap of this sizing above it, in percent of the bound
    bound_fj: float | None = None
    gap_pct: float | None = None
    # large engine (edopt.solvers.large): certified lower bound on the continuous optimum
    # (``lower_bound_fj`` for cheapest, ``lower_bound_ps`` on the minimum delay for fastest), the
    # gap above it (``gap_pct``) and the quasi-Newton iterations spent
    engine: str = "reference"
    lower_bound_fj: float | None = None
    lower_bound_ps: float | None = None
    iterations: int | None = None
    # the sized circuit (for netlist export and SPICE verification)
    circuit: Circuit | None = field(default=None, repr=False, compare=False)

    # ----------------------------------------------------------- quantities
    @property
    def delay_ps(self) -> float:
        return self.evaluation.circuit_delay_ps

    @property
    def energy_fj(self) -> float:
        return self.evaluation.energy_fj

    @property
    def dynamic_fj(self) -> float:
        return self.evaluation.dynamic_total_fj

    @property
    def leakage_fj(self) -> float:
        return self.evaluation.leakage_total_fj

    @property
    def area(self) -> float:
        return self.evaluation.area

    @property
    def price_fj_per_ps(self) -> float:
        return self.price if self.objective == "energy" else float("nan")

    @property
    def intensity(self) -> float:
        if self.target_ps is None or not np.isfinite(self.price):
            return float("nan")
        value = self.energy_fj if self.objective == "energy" else self.area
        return self.price * self.target_ps / value if value > 0 else float("nan")

    @property
    def sizes(self) -> pd.Series:
        m = self.model
        return pd.Series(self.evaluation.x[m.gate_slice], index=list(m.gate_names), name="size")

    @property
    def critical_nodes(self) -> list[int]:
        """Model node indices of the critical path, from its start (a source node when the
        path starts at a driven input) to the critical output, following the latest arrivals."""
        m, ev = self.model, self.evaluation
        a = ev.arrival_ps / m.tech.tau_ps
        preds = sp.csr_matrix((np.ones(len(m.edge_src)), (m.edge_dst, m.edge_src)),
                              shape=(m.n, m.n))
        node = int(m.out_node[m.out_names.index(ev.critical_output)])
        path = [node]
        while True:
            ps = preds.indices[preds.indptr[node]:preds.indptr[node + 1]]
            if len(ps) == 0:
                break
            k = int(ps[np.argmax(a[ps])])
            if np.isfinite(m.t0[node]) and m.t0[node] >= a[k]:
                break  # an ideal primary input arrives later than any driver
            node = k
            path.append(node)
        return path[::-1]

    @property
    def critical_path(self) -> list[str]:
        """Gate names from input to the critical output, following the latest arrivals."""
        m = self.model
        return [m.names[k] for k in self.critical_nodes if k >= m.n_sources]

    @property
    def table(self) -> pd.DataFrame:
        m, ev = self.model, self.evaluation
        g = m.gate_slice
        dyn = ev.dynamic_fj[g]
        total = ev.energy_fj
        return pd.DataFrame({
            "type": m.types[g],
            "copies": m.copies[g],
            "size": ev.x[g],
            "input_cap_ff": m.g_in[g] / m.copies[g] * ev.x[g] * m.tech.cu_ff,
            "load_ff": ev.load[g] * m.tech.cu_ff,
            "stage_effort": ev.effort[g],
            "delay_ps": ev.delay_ps[g],
            "arrival_ps": ev.arrival_ps[g],
            "slack_ps": ev.slack_ps[g],
            "energy_fj": dyn + ev.leakage_fj[g],
            "energy_share": (dyn + ev.leakage_fj[g]) / total if total > 0 else 0.0,
            "at_bound": np.where(ev.x[g] <= m.lo[g] * (1 + 1e-6), "min",
                                 np.where(ev.x[g] >= m.hi[g] * (1 - 1e-6), "max", "")),
        }, index=pd.Index(m.gate_names, name="gate"))

    def summary(self) -> dict[str, Any]:
        """Plain numbers for JSON output."""
        return {
            "problem": self.problem, "objective": self.objective, "status": self.status,
            "target_ps": self.target_ps, "min_delay_ps": self.min_delay_ps,
            "delay_ps": self.delay_ps, "energy_fj": self.energy_fj, "dynamic_fj": self.dynamic_fj,
            "leakage_fj": self.leakage_fj, "area": self.area,
            "price_fj_per_ps": _num(self.price_fj_per_ps), "intensity": _num(self.intensity),
            "critical_output": self.evaluation.critical_output, "solver": self.solver,
            "attempts": self.attempts, "seconds": self.seconds, "notes": self.notes,
            "engine": self.engine, "lower_bound_fj": self.lower_bound_fj,
            "lower_bound_ps": self.lower_bound_ps, "gap_pct": self.gap_pct,
            "iterations": self.iterations, "caution": CAUTION,
        }

    def to_dict(self) -> dict[str, Any]:
        out = self.summary()
        out["sizes"] = {k: float(v) for k, v in self.sizes.items()}
        return out


def _num(v: float) -> float | None:
    return float(v) if np.isfinite(v) else None


class Sizer:
    """One circuit compiled in one technology, with its programs kept for repeated solves.

    Parameters
    ----------
    objective : "energy" (dynamic + leakage) or "area".
    cycle_ps : clock period for the leakage energy; ``None`` = the delay target of each solve.
    max_effort : upper limit of each gate's stage effort C_L / x (a transition-time limit).
    area_max : budget of the area proxy.
    engine : "reference" (cvxpy interior point, exact to about 1e-7), "large" (the large-scale
        engine with a certified gap, ``edopt.solvers.large``) or "auto": large above
        ``LARGE_GATES`` free gates when the circuit has no limit only the reference takes
        (input-capacitance limit, ``max_effort``, ``area_max``).
    gap_pct : large engine: stop when the certified gap is within this many percent (0.1).
    """

    def __init__(
        self, circuit: Circuit, tech: Technology | str | None = None, objective: str = "energy",
        cycle_ps: float | None = None, max_effort: float | None = None,
        area_max: float | None = None, engine: str = "auto", gap_pct: float = 100 * GAP,
    ) -> None:
        if objective not in ("energy", "area"):
            raise EdoptError(f"objective must be 'energy' or 'area', got {objective!r}")
        if engine not in ENGINES:
            raise EdoptError(f"engine must be one of {', '.join(ENGINES)}; got {engine!r}")
        self.circuit = circuit
        self.tech = technology(tech)
        self.objective = objective
        self.cycle_ps = cycle_ps
        self.model = compile_model(circuit, self.tech)
        self.options = Options(max_effort=max_effort, area_max=area_max)
        if engine == "auto":
            limited = max_effort is not None or area_max is not None or self.model.cap_max.size
            engine = "large" if int(np.sum(~self.model.fixed)) > LARGE_GATES and not limited \
                else "reference"
        self.engine_name = engine
        self.engine: ConicSizer | LargeSizer = (
            LargeSizer(self.model, self.options, gap=gap_pct / 100) if engine == "large"
            else ConicSizer(self.model, self.options))
        self._fastest: Sizing | None = None
        self._fastest_raw: Sizing | None = None
        self._shared: dict[str, Solution] = {}   # solutions in tau units, shared by at() copies

    def at(self, tech: Technology) -> Sizer:
        """The same circuit in a scaled technology (another supply or threshold), reusing the
        compiled program: in tau units the sizing problem does not depend on the voltage; only
        the delay unit, the energy unit and leakage change."""
        tech = technology(tech)
        if (tech.mu, tech.p_inv) != (self.tech.mu, self.tech.p_inv):
            raise EdoptError("Sizer.at: mu and p_inv must match (they change the logical "
                             "efforts); build a new Sizer instead")
        new = copy.copy(self)
        new.tech = tech
        new.model = dataclasses.replace(self.model, tech=tech)
        new._fastest = None
        new._fastest_raw = None
        return new

    # ------------------------------------------------------------ weights
    def weights(self, cycle_ps: float) -> np.ndarray:
        """Objective weight per unit size of each node (fJ or area units)."""
        m = self.model
        if self.objective == "area":
            return m.area.copy()
        gates = np.zeros(m.n)
        gates[m.gate_slice] = 1.0
        e = m.e_lin * m.tech.energy_unit_fj + m.leak * m.tech.leak_energy_unit_fj_per_ps * cycle_ps
        return e * gates

    def _constant(self) -> float:
        return self.model.e_const * self.model.tech.energy_unit_fj if self.objective == "energy" \
            else 0.0

    # ------------------------------------------------------------ problems
    def fastest(self) -> Sizing:
        """The minimum-delay sizing (cached).

        Gates off the critical path do not change the minimum delay, so the minimum-delay
        solve leaves them at arbitrary sizes. When some gate has slack, the answer is polished:
        the cheapest sizing within ``POLISH`` (relative) of the minimum delay is returned, with
        ``min_delay_ps`` still the true minimum. A network whose gates are all critical (a
        chain) is returned as solved.
        """
        if self._fastest is None:
            m = self.model
            w = self.weights(self.cycle_ps or 1.0)
            sol = self._shared.get("fastest")
            if sol is None and self.engine_name == "large":
                # the large engine's own tie-break sizes the gates off the critical path
                sol = self._shared["fastest"] = self.engine.fastest(w)
            elif sol is None:
                # no tie-break term: the polish below sizes the gates off the critical path
                sol = self._shared["fastest"] = self.engine.fastest(w, tie=0.0)
            limits = "the size bounds and input-capacitance limits"
            if self.options.max_effort is not None:
                limits += f", the stage-effort limit {self.options.max_effort:g}"
            if self.options.area_max is not None:
                limits += f", the area budget {self.options.area_max:g}"
            if sol.status == INFEASIBLE:
                raise InfeasibleTarget(
                    f"circuit {self.circuit.name!r}: no sizing satisfies {limits} together "
                    "(check cap_max against size_min, and loosen the limits)")
            if sol.status == FAILED:
                raise SolverError(
                    f"circuit {self.circuit.name!r}: the minimum-delay solve failed "
                    f"({'; '.join(sol.attempts)}); if {limits} cannot all be met, loosen them")
            d_ps = sol.delay_tau * m.tech.tau_ps
            res = self._result("fastest", sol, None, d_ps, self.cycle_ps)
            d_ps = res.delay_ps
            res.min_delay_ps = d_ps
            self._fastest_raw = res
            if self.engine_name == "reference" and \
                    np.max(res.evaluation.slack_ps[m.gate_slice], initial=0.0) > 1e-6 * d_ps:
                t_ps = d_ps * (1 + POLISH)
                cycle = self.cycle_ps or t_ps
                # shared by at() copies: the polish is solved once, with this technology's
                # weights (other supplies differ only in the small leakage share)
                pol = self._shared.get("polish")
                if pol is None:
                    pol = self._shared["polish"] = self.engine.cheapest(
                        m.to_tau(t_ps), self.weights(cycle))
                if pol.status == OPTIMAL:
                    polished = self._result("fastest", pol, None, d_ps, cycle)
                    if polished.status == OPTIMAL and polished.delay_ps <= t_ps * (1 + 1e-9):
                        polished.attempts = res.attempts + polished.attempts
                        polished.seconds += res.seconds
                        polished.notes.append(
                            f"off-critical gates at their cheapest sizes (delay within "
                            f"{POLISH:.1%} of the minimum)")
                        res = polished
            self._fastest = res
        return self._fastest

    @property
    def min_delay_ps(self) -> float:
        """The minimum achievable delay (of the unpolished minimum-delay solve)."""
        return self.fastest().min_delay_ps

    def cheapest(self, target: str | float) -> Sizing:
        """Minimum energy (or area) sizing with delay <= target (ps, "250ps" or "1.2x")."""
        req = self.request(target)
        if isinstance(req, Sizing):
            return req
        t_ps, cycle, w = req
        return self.finish(self.engine.cheapest(self.model.to_tau(t_ps), w), t_ps, cycle)

    def request(self, target: str | float) -> Sizing | tuple[float, float, np.ndarray]:
        """Check a target and prepare its solve: ``(t_ps, cycle_ps, weights)``, or the answer
        itself when the target is the minimum delay. Raises InfeasibleTarget below it.

        The large engine takes an absolute target without solving the minimum delay first
        (on a million gates that solve costs more than the target's own); the minimum delay
        is then solved only if the target turns out out of reach (``finish``)."""
        if self.engine_name == "large" and self._fastest is None and not is_relative(target):
            t_ps = parse_target(target)
            assert t_ps is not None
            cycle = self.cycle_ps or t_ps
            return t_ps, cycle, self.weights(cycle)
        fast = self.fastest()
        d_min = fast.min_delay_ps
        t_ps = parse_target(target, d_min)
        if t_ps < d_min * (1 - 1e-7) and fast.lower_bound_ps is not None:
            raise InfeasibleTarget(
                f"target {t_ps:.2f} ps is below the minimum delay {d_min:.2f} ps that the large "
                f"engine reaches for {self.circuit.name!r} (no sizing is faster than "
                f"{fast.lower_bound_ps:.2f} ps, certified)", d_min)
        if t_ps < d_min * (1 - 1e-7):
            raise InfeasibleTarget(
                f"target {t_ps:.2f} ps is below the minimum achievable delay {d_min:.2f} ps of "
                f"{self.circuit.name!r}", d_min)
        if t_ps <= d_min * (1 + 1e-6):
            raw = self._fastest_raw
            res = self._result("cheapest", self._as_solution(raw), t_ps, d_min, self.cycle_ps)
            res.notes.append("target at the minimum delay: the minimum-delay sizing is returned")
            res.price = float("inf")
            return res
        cycle = self.cycle_ps or t_ps
        return t_ps, cycle, self.weights(cycle)

    def finish(self, sol: Solution, t_ps: float, cycle: float) -> Sizing:
        """Turn a solver answer for target ``t_ps`` into a re-timed Sizing."""
        if sol.status == INFEASIBLE and self.engine_name == "large" and self._fastest is None:
            # an absolute target the large engine did not reach without the minimum delay:
            # solve that now (raises below it); a reachable target is solved again from it
            self.fastest()
            req = self.request(t_ps)
            if isinstance(req, Sizing):
                return req
            sol = self.engine.cheapest(self.model.to_tau(t_ps), req[2])
        d_min = self._fastest.min_delay_ps if self._fastest is not None else None
        if sol.status == INFEASIBLE:
            d_min = self.fastest().min_delay_ps
            raise InfeasibleTarget(
                f"target {t_ps:.2f} ps cannot be met; the minimum achievable delay is "
                f"{d_min:.2f} ps", d_min)
        res = self._result("cheapest", sol, t_ps, d_min, cycle)
        res.bound_price = res.price
        if self.objective == "energy" and self.cycle_ps is None:
            # leakage energy grows with the cycle time, which follows the target
            res.price = res.price - res.leakage_fj / t_ps
        return res

    def _as_solution(self, s: Sizing) -> Solution:
        return Solution(s.evaluation.x, self.model.to_tau(s.solver_delay_ps), s.solver_objective,
                        float("inf"), s.status, s.solver, 0.0, list(s.attempts))

    def _result(self, problem: str, sol: Solution, t_ps: float | None, d_min: float | None,
                cycle_ps: float | None) -> Sizing:
        m = self.model
        if sol.status == FAILED or not np.all(np.isfinite(sol.x)):
            raise SolverError(f"solver failed ({'; '.join(sol.attempts)})")
        ev = evaluate(m, sol.x, target_ps=t_ps, cycle_ps=cycle_ps)
        price = sol.price / m.tech.tau_ps if t_ps is not None else float("nan")
        res = Sizing(
            problem=problem, objective=self.objective, status=sol.status, target_ps=t_ps,
            min_delay_ps=d_min, price=price, model=m, evaluation=ev, solver=sol.solver,
            attempts=list(sol.attempts), seconds=sol.seconds,
            solver_delay_ps=sol.delay_tau * m.tech.tau_ps, solver_objective=sol.objective,
            circuit=self.circuit, engine=self.engine_name,
        )
        if isinstance(sol, LargeSolution):
            res.iterations = sol.iterations
            res.gap_pct = 100 * sol.gap if np.isfinite(sol.gap) else None
            if problem == "fastest":
                res.lower_bound_ps = float(m.to_ps(sol.lower))
            elif np.isfinite(sol.lower):
                res.lower_bound_fj = sol.lower + self._constant()
        _check_agreement(res, self._constant())
        return res


def _check_agreement(res: Sizing, constant: float) -> None:
    """Compare the solver's own numbers with the independent evaluation; mark disagreement."""
    ev = res.evaluation
    d_err = abs(res.solver_delay_ps - ev.circuit_delay_ps) / max(ev.circuit_delay_ps, 1e-30)
    problems = []
    if res.target_ps is not None and ev.circuit_delay_ps > res.target_ps * (1 + AGREEMENT_RTOL):
        problems.append(f"re-timed delay {ev.circuit_delay_ps:.6g} ps exceeds the target "
                        f"{res.target_ps:.6g} ps")
    if res.problem == "fastest" and d_err > AGREEMENT_RTOL:
        problems.append(f"solver delay {res.solver_delay_ps:.6g} ps vs re-timed "
                        f"{ev.circuit_delay_ps:.6g} ps")
    if res.problem == "cheapest" and np.isfinite(res.solver_objective):
        value = (ev.energy_fj if res.objective == "energy" else ev.area) - constant
        err = abs(res.solver_objective - value) / max(abs(value), 1e-30)
        if err > AGREEMENT_RTOL:
            problems.append(f"solver objective {res.solver_objective:.6g} vs re-evaluated "
                            f"{value:.6g}")
    if problems:
        res.status = "mismatch"
        res.notes.extend(problems)
    elif res.status == INACCURATE:
        res.notes.append("solver stopped at reduced accuracy; the re-timed sizing meets the target")


def size(
    circuit: Circuit, tech: Technology | str | None = None, target: str | float | None = None,
    objective: str = "energy", sizes: Any = None, **options: Any,
) -> Sizing:
    """Size ``circuit``: fastest when ``target`` is None, else the cheapest meeting ``target``.

    Parameters
    ----------
    circuit : the gate network.
    tech : a Technology, a built-in name or a TOML path (default ``generic``).
    target : delay bound: ps as a number, ``"250ps"``, ``"0.25ns"`` or ``"1.2x"`` the minimum.
    objective : "energy" or "area".
    sizes : allowed sizes (discrete drive strengths): one list for every gate, such as
        ``[1, 2, 4, 8, 16]``, or a mapping gate type -> list (``"*"`` for the types not named).
        The continuous problem is solved within the range of the sets, then discretised
        (``edopt.discrete``); every size of the result is from its set (gates of fixed size keep
        theirs), ``bound_fj`` is the continuous lower bound at the same target and ``gap_pct``
        the gap above it. Relative targets are then multiples of the fastest discrete delay.
    options : passed to Sizer (``cycle_ps``, ``max_effort``, ``area_max``, ``engine``,
        ``gap_pct``). ``engine="auto"`` (default) takes the large engine above ``LARGE_GATES``
        free gates: its results also carry ``lower_bound_fj`` (``lower_bound_ps`` for the
        fastest sizing), ``gap_pct`` (certified gap, percent) and ``iterations``.

    Raises
    ------
    InfeasibleTarget : the target is below the minimum delay (carries ``min_delay_ps``; with
        ``sizes``, the fastest discrete delay found).

    Examples
    --------
    >>> from edopt import chain, size
    >>> r = size(chain(["inv"] * 3, cin=1, cload=64))
    >>> round(r.delay_ps / 3.0, 6)   # tau units of the generic technology
    15.0
    """
    if sizes is not None:
        from .discrete import DiscreteSizer

        # the discrete search has its own continuous stage: the reference solver or, for
        # large networks, a Lagrangian relaxation with a certified bound
        engine = options.pop("engine", "auto")
        options.pop("gap_pct", None)
        if engine not in ENGINES:
            raise EdoptError(f"engine must be one of {', '.join(ENGINES)}; got {engine!r}")
        continuous = {"auto": "auto", "reference": "solver", "large": "lagrangian"}[engine]
        return DiscreteSizer(circuit, tech, sizes, objective=objective, continuous=continuous,
                             **options).solve(target)
    sizer = Sizer(circuit, tech, objective=objective, **options)
    return sizer.fastest() if target is None else sizer.cheapest(target)


__all__ = ["CAUTION", "ENGINES", "LARGE_GATES", "Sizer", "Sizing", "parse_target", "size",
           "OPTIMAL", "INACCURATE"]
