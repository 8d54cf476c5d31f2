"""Independent evaluation of a sizing: delays, arrival and required times, slack, energy, area.

This module recomputes everything from the sizes alone, with no solver in the loop; every solver
answer is passed through ``evaluate`` so that a solver bug shows as a mismatch.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .model import Model


@dataclass(frozen=True)
class Evaluation:
    """Timing and energy of one sizing (times in ps, energies in fJ, capacitance in C_u)."""

    x: np.ndarray               # size per node
    load: np.ndarray            # C_L per copy of each node
    effort: np.ndarray          # stage effort C_L / x
    delay_ps: np.ndarray        # stage delay per node
    arrival_ps: np.ndarray
    required_ps: np.ndarray
    slack_ps: np.ndarray
    circuit_delay_ps: float     # max over outputs of the arrival
    critical_output: str
    dynamic_fj: np.ndarray      # dynamic energy charged by each node's output (copies included)
    leakage_fj: np.ndarray      # leakage energy per node over the cycle time
    cycle_ps: float
    area: float
    input_cap: np.ndarray       # total capacitance on each limited input net (model.cap_names)

    @property
    def energy_fj(self) -> float:
        return float(self.dynamic_fj.sum() + self.leakage_fj.sum())

    @property
    def dynamic_total_fj(self) -> float:
        return float(self.dynamic_fj.sum())

    @property
    def leakage_total_fj(self) -> float:
        return float(self.leakage_fj.sum())


def evaluate(
    model: Model, x: np.ndarray, target_ps: float | None = None, cycle_ps: float | None = None
) -> Evaluation:
    """Time and cost the sizes ``x`` (one per node, sources included).

    Parameters
    ----------
    target_ps : delay target (default: the circuit delay itself, so that the critical path has
        zero slack); each output must arrive its allowance before it.
    cycle_ps : cycle time for leakage energy (default: ``target_ps``, else the circuit delay).
    """
    x = np.asarray(x, dtype=float)
    tau = model.tech.tau_ps
    num = np.where(model.term_num >= 0, x[np.maximum(model.term_num, 0)], 1.0)
    load = np.bincount(model.term_owner, weights=model.term_coef * num, minlength=model.n)
    effort = load / x
    d = model.p + effort
    a = _arrivals(model, d)
    out_arr = a[model.out_node] + model.out_allow
    k = int(np.argmax(out_arr))
    delay = float(out_arr[k])
    target = delay if target_ps is None else target_ps / tau
    req = _required(model, d, target - model.out_allow)
    cycle = (target if target_ps is not None else delay) * tau if cycle_ps is None else cycle_ps
    gates = np.zeros(model.n, dtype=bool)
    gates[model.gate_slice] = True
    e_unit = model.tech.energy_unit_fj
    dyn = np.where(gates, model.copies * model.alpha * (load + model.p * x), 0.0) * e_unit
    leak = np.where(gates, model.leak * x, 0.0) * model.tech.leak_energy_unit_fj_per_ps * cycle
    return Evaluation(
        x=x, load=load, effort=effort, delay_ps=d * tau, arrival_ps=a * tau,
        required_ps=req * tau, slack_ps=(req - a) * tau, circuit_delay_ps=delay * tau,
        critical_output=model.out_names[k], dynamic_fj=dyn, leakage_fj=leak, cycle_ps=float(cycle),
        area=float(np.dot(model.area, x)), input_cap=model.cap_rows @ x,
    )


def _arrivals(model: Model, d: np.ndarray) -> np.ndarray:
    """Arrival times in tau, one vectorised step per level."""
    a = np.where(np.isfinite(model.t0), model.t0, 0.0) + d
    order, bounds = _edge_levels(model)
    src, dst = model.edge_src[order], model.edge_dst[order]
    base = np.where(np.isfinite(model.t0), model.t0, -np.inf)
    for lv in range(1, len(bounds) - 1):
        s, e = bounds[lv], bounds[lv + 1]
        if s == e:
            continue
        nodes = dst[s:e]
        np.maximum.at(base, nodes, a[src[s:e]])
        u = np.unique(nodes)
        a[u] = np.where(np.isfinite(base[u]), base[u], 0.0) + d[u]
    return a


def _required(model: Model, d: np.ndarray, req_out: np.ndarray) -> np.ndarray:
    """Required times in tau, backwards one level at a time."""
    req = np.full(model.n, np.inf)
    np.minimum.at(req, model.out_node, req_out)
    order, bounds = _edge_levels(model)
    src, dst = model.edge_src[order], model.edge_dst[order]
    for lv in range(len(bounds) - 2, 0, -1):
        s, e = bounds[lv], bounds[lv + 1]
        if s < e:
            np.minimum.at(req, src[s:e], req[dst[s:e]] - d[dst[s:e]])
    return req


def _edge_levels(model: Model) -> tuple[np.ndarray, np.ndarray]:
    """Edges sorted by the level of their receiver, with the start index of each level."""
    cached = getattr(model, "_edge_level_cache", None)
    if cached is None:
        lv = model.level[model.edge_dst]
        order = np.argsort(lv, kind="stable")
        bounds = np.searchsorted(lv[order], np.arange(int(model.level.max()) + 2))
        cached = (order, bounds)
        object.__setattr__(model, "_edge_level_cache", cached)
    return cached
