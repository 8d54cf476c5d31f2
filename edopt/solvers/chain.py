"""Closed-form sizing of a pure path by logical effort, and the stage-count advisor.

A *pure chain* is what `edopt.circuit.chain` builds without side loads: gates ``g1..gN``, each
driving one pin of the next, other pins tied to ideal inputs, one input whose ``cap`` fixes the
first gate and one output with a fixed load on the last gate. Gate ``copies`` ratios between
consecutive stages are the branching efforts. For such a path the minimum delay has the classic
closed form (path effort ``F = G B H``, ``D = N F^(1/N) + P`` at equal stage effort); anything
else (wires, side loads, input limits, drivers, active size bounds) goes to the general solvers.

The solver works from the Circuit and the Technology only (``GateType.efforts``), not from the
compiled Model, so that `edopt.timing.evaluate` on the compiled Model is an independent check.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy.optimize import brentq

from ..circuit import Circuit
from ..errors import CircuitError, SolverError
from ..model import Model
from ..technology import Technology

__all__ = [
    "ChainSolution",
    "StageAdvice",
    "advise_chain",
    "advise_stages",
    "best_stage_effort",
    "solve_chain",
]

_REL_TOL = 1e-9


def best_stage_effort(p_inv: float) -> float:
    """Stage effort ``rho`` that minimises delay when stages can be added freely.

    Solves ``rho (1 - ln rho) + p_inv = 0`` for ``rho > 1`` (``rho = e`` for ``p_inv = 0``).

    Parameters
    ----------
    p_inv : parasitic delay of an inverter in tau (>= 0).
    """
    if isinstance(p_inv, bool) or not isinstance(p_inv, (int, float)) or not (
        math.isfinite(p_inv) and p_inv >= 0
    ):
        raise CircuitError(f"best_stage_effort: p_inv must be a finite number >= 0, got {p_inv!r}")

    def resid(rho: float) -> float:
        return rho * (1.0 - math.log(rho)) + p_inv

    hi = 4.0
    while resid(hi) > 0:  # resid falls monotonically for rho > 1 (slope -ln rho)
        hi *= 2.0
    return float(brentq(resid, 1.0, hi, xtol=1e-14, rtol=4 * np.finfo(float).eps))


# --------------------------------------------------------------------------------------------
# Recognising a pure chain
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Path:
    gates: tuple[str, ...]
    types: tuple[str, ...]
    g: np.ndarray          # logical effort of the on-path pin
    p: np.ndarray          # parasitic delay, tau
    copies: np.ndarray
    cin: float             # total input capacitance of the path input (C_u)
    cload: float           # output load per copy of the last gate (C_u)
    lo: np.ndarray         # size bounds of each gate
    hi: np.ndarray


def _path(circuit: Circuit, tech: Technology) -> _Path:
    """Walk the circuit from its fixed-cap input to its output; raise if it is not a pure chain."""
    st = circuit.validate()
    general = "use the general solver"
    for net, port in circuit.inputs.items():
        if port.drive is not None:
            raise CircuitError(
                f"input {net!r} has a driver (drive={port.drive}): its delay and load are not "
                f"part of a pure chain; {general}"
            )
        if port.cap_max is not None:
            raise CircuitError(
                f"input {net!r} has a cap_max limit: a pure chain fixes its input with cap; "
                f"{general}"
            )
    starts = [net for net, port in circuit.inputs.items() if port.cap is not None]
    if len(starts) != 1:
        what = "no input has" if not starts else f"{len(starts)} inputs ({', '.join(starts)}) have"
        raise CircuitError(
            f"{what} a fixed cap: a pure chain has exactly one path input with cap set; {general}"
        )
    start = starts[0]
    arrival = circuit.inputs[start].arrival_ps
    gates: list[str] = []
    pins: list[str] = []
    net = start
    while True:
        users = st.fanout.get(net, [])
        if net in circuit.outputs:
            if users:
                raise CircuitError(
                    f"output net {net!r} also drives pin {users[0][1]} of gate "
                    f"{users[0][0]!r}: the output load is a fixed side load; {general}"
                )
            break
        if len(users) != 1:
            raise CircuitError(
                f"net {net!r} drives {len(users)} pins "
                f"({', '.join(f'{g}.{p}' for g, p in users)}): a pure chain drives exactly one "
                f"pin per net (model branching with copies); {general}"
            )
        gname, pin = users[0]
        if gates and circuit.wire.get(net, 0.0) > 0:
            raise CircuitError(
                f"net {net!r} has a fixed side load (wire {circuit.wire[net]} C_u): {general}"
            )
        gates.append(gname)
        pins.append(pin)
        net = circuit.gates[gname].output
    out_net = net
    if not gates:
        raise CircuitError(f"path input {start!r} is itself an output: there is no gate to size")
    if len(circuit.outputs) != 1:
        raise CircuitError(
            f"a pure chain has one output, this circuit has {len(circuit.outputs)}; {general}"
        )
    out_port = circuit.outputs[out_net]
    if out_port.load <= 0:
        raise CircuitError(f"output {out_net!r} has no load: a chain needs a load > 0 to size for")
    if circuit.wire.get(out_net, 0.0) > 0:
        raise CircuitError(
            f"net {out_net!r} has a fixed side load (wire {circuit.wire[out_net]} C_u) besides "
            f"the output load: {general}"
        )
    n = len(gates)
    g = np.empty(n)
    p = np.empty(n)
    copies = np.empty(n)
    lo = np.empty(n)
    hi = np.empty(n)
    types: list[str] = []
    for i, (gname, pin) in enumerate(zip(gates, pins)):
        gate = circuit.gates[gname]
        gtype = circuit.gate_type(gate.type, gate=gname)
        eff = gtype.efforts(tech.mu, tech.p_inv)
        types.append(gtype.name)
        g[i] = eff.g[gtype.pins.index(pin)]
        p[i] = eff.p
        copies[i] = gate.copies
        lo[i] = gate.size_min if gate.size_min is not None else circuit.size_min
        hi[i] = gate.size_max if gate.size_max is not None else circuit.size_max
        if gate.size is not None:
            raise CircuitError(
                f"gate {gname!r} has a fixed size ({gate.size}): in a pure chain only the input "
                f"cap fixes the first gate; remove the size or {general}"
            )
        for other, side_net in gate.inputs.items():
            if other == pin:
                continue
            side = circuit.inputs.get(side_net)
            if side is None:
                raise CircuitError(
                    f"pin {other} of gate {gname!r} is on net {side_net!r}, which is not an ideal "
                    f"input: a pure chain ties side pins to inputs; {general}"
                )
            if side.arrival_ps > arrival:
                raise CircuitError(
                    f"side input {side_net!r} of gate {gname!r} arrives at {side.arrival_ps} ps, "
                    f"after the path input {start!r} ({arrival} ps): it may be the critical "
                    f"path; {general}"
                )
    on_path = set(gates)
    off = [name for name in circuit.gates if name not in on_path]
    if off:
        raise CircuitError(
            f"gate {off[0]!r} is not on the path from input {start!r} to output {out_net!r}: "
            f"a pure chain has no side gates; {general}"
        )
    return _Path(tuple(gates), tuple(types), g, p, copies, float(circuit.inputs[start].cap),
                 float(out_port.load), lo, hi)


# --------------------------------------------------------------------------------------------
# Closed-form sizing
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class ChainSolution:
    """Minimum-delay sizing of a pure chain.

    Parameters
    ----------
    gates, types : gate names and type names from input to output.
    sizes : size per copy of each gate (unit-inverter drive strengths), in path order.
    copies : copies of each gate.
    c_in : input capacitance of the on-path pin per copy (C_u), ``g * size``.
    n_stages : number of stages N.
    G, B, H : path logical, branching and electrical effort (``H = C_load / C_in`` per copy of
        the first gate).
    path_effort : ``F = G B H``.
    stage_effort : ``f = F^(1/N)``, equal for every stage.
    P : path parasitic delay (tau).
    delay_tau, delay_ps : path delay ``N f + P`` (input arrival and output allowance excluded).
    stages : one row per stage: gate, type, copies, g, b, h (= C_out / C_in, branches included,
        so ``f = g h``), f, p, delay_tau, delay_ps, c_in, size.
    tech : the technology used.
    """

    gates: tuple[str, ...]
    types: tuple[str, ...]
    sizes: np.ndarray
    copies: np.ndarray
    c_in: np.ndarray
    n_stages: int
    G: float
    B: float
    H: float
    path_effort: float
    stage_effort: float
    P: float
    delay_tau: float
    delay_ps: float
    stages: pd.DataFrame
    tech: Technology

    def model_sizes(self, model: Model) -> np.ndarray:
        """The sizes as a Model node vector (matched by gate name; sources keep their drive)."""
        index = {name: i for i, name in enumerate(model.names)}
        missing = [g for g in self.gates if g not in index]
        if missing:
            raise CircuitError(f"gate {missing[0]!r} of the chain is not a node of this model")
        x = np.where(model.fixed, model.lo, np.nan)
        x[[index[g] for g in self.gates]] = self.sizes
        return x


def solve_chain(circuit: Circuit, tech: Technology) -> ChainSolution:
    """Size a pure chain for minimum delay in closed form.

    Raises
    ------
    CircuitError : the circuit is not a pure chain (the message says why), or a closed-form size
        falls outside its gate's size bounds (the bound would be active).
    """
    path = _path(circuit, tech)
    n = len(path.gates)
    b = np.append(path.copies[1:] / path.copies[:-1], 1.0)
    cin_copy = path.cin / path.copies[0]
    G = float(np.prod(path.g))
    B = float(np.prod(b))
    H = path.cload / cin_copy
    F = G * B * H
    f = F ** (1.0 / n)
    P = float(np.sum(path.p))
    D = n * f + P

    # backwards: C_in(i) = g_i b_i C_in(i+1) / f, C_in(N+1) = C_load
    gb_tail = np.cumprod((path.g * b)[::-1])[::-1]          # prod_{k>=i} g_k b_k
    c_in = path.cload * gb_tail / f ** np.arange(n, 0, -1)
    sizes = c_in / path.g
    x1_model = path.cin / (path.g[0] * path.copies[0])       # what compile_model fixes
    if not math.isclose(sizes[0], x1_model, rel_tol=1e-9):
        raise SolverError(
            f"chain sizing is inconsistent: gate {path.gates[0]!r} gets size {sizes[0]:.6g} "
            f"backwards from the load but {x1_model:.6g} from the input cap"
        )
    sizes[0] = x1_model
    c_in[0] = cin_copy
    below = sizes < path.lo * (1 - _REL_TOL)
    above = sizes > path.hi * (1 + _REL_TOL)
    bad = np.flatnonzero((below | above)[1:]) + 1    # the input cap fixes g1 whatever its bounds
    if bad.size:
        i = int(bad[0])
        side, bound = ("size_min", path.lo[i]) if below[i] else ("size_max", path.hi[i])
        raise CircuitError(
            f"gate {path.gates[i]!r}: the closed-form size {sizes[i]:.6g} is beyond its "
            f"{side} {bound:g}, so the bound is active; relax it or use the general solver"
        )
    c_out = np.append(b[:-1] * c_in[1:], path.cload)
    h = c_out / c_in
    stage_delay = path.p + f
    stages = pd.DataFrame({
        "gate": list(path.gates),
        "type": list(path.types),
        "copies": path.copies,
        "g": path.g,
        "b": b,
        "h": h,
        "f": path.g * h,
        "p": path.p,
        "delay_tau": stage_delay,
        "delay_ps": stage_delay * tech.tau_ps,
        "c_in": c_in,
        "size": sizes,
    })
    return ChainSolution(
        gates=path.gates, types=path.types, sizes=sizes, copies=path.copies.copy(), c_in=c_in,
        n_stages=n, G=G, B=B, H=H, path_effort=F, stage_effort=f, P=P, delay_tau=D,
        delay_ps=D * tech.tau_ps, stages=stages, tech=tech,
    )


# --------------------------------------------------------------------------------------------
# Stage-count advice
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class StageAdvice:
    """How many stages a path should have when inverters may be added.

    Parameters
    ----------
    path_effort, p_logic, n_logic, p_inv : the inputs (F, logic parasitic P, logic stages, p_inv).
    rho : best stage effort for ``p_inv`` (`best_stage_effort`).
    n_hat : continuous estimate ``ln F / ln rho``.
    best_stages : delay-optimal integer N (>= n_logic, <= max_stages).
    inverters_to_add : ``best_stages - n_logic``.
    best_delay_tau, stage_effort : delay and stage effort ``F^(1/N)`` at ``best_stages``.
    current_delay_tau : delay with the n_logic stages as they are.
    same_polarity_stages, same_polarity_delay_tau : the best N with an even number of added
        inverters (output polarity kept) and its delay.
    at_limit : the best N is ``max_stages``; more stages might be faster still.
    table : D(N) around the best: stages, added, stage_effort, delay_tau, same_polarity.
    tau_ps : the delay unit in ps when known (``advise_chain``), else None.
    """

    path_effort: float
    p_logic: float
    n_logic: int
    p_inv: float
    rho: float
    n_hat: float
    best_stages: int
    inverters_to_add: int
    best_delay_tau: float
    stage_effort: float
    current_delay_tau: float
    same_polarity_stages: int
    same_polarity_delay_tau: float
    at_limit: bool
    table: pd.DataFrame
    tau_ps: float | None = None

    @property
    def best_delay_ps(self) -> float | None:
        return None if self.tau_ps is None else self.best_delay_tau * self.tau_ps

    @property
    def current_delay_ps(self) -> float | None:
        return None if self.tau_ps is None else self.current_delay_tau * self.tau_ps

    @property
    def same_polarity_delay_ps(self) -> float | None:
        return None if self.tau_ps is None else self.same_polarity_delay_tau * self.tau_ps


def advise_stages(
    path_effort: float,
    p_logic: float,
    n_logic: int,
    p_inv: float,
    max_stages: int = 40,
    window: int = 3,
    tau_ps: float | None = None,
) -> StageAdvice:
    """Delay-optimal stage count of a path when inverters (parasitic ``p_inv`` each) are added.

    ``D(N) = N F^(1/N) + P + (N - n_logic) p_inv`` for ``n_logic <= N <= max_stages``.

    Parameters
    ----------
    path_effort : path effort F = G B H of the logic (> 0).
    p_logic : parasitic delay of the logic stages (tau, >= 0).
    n_logic : number of logic stages (>= 1).
    p_inv : parasitic delay of an added inverter (tau, >= 0).
    max_stages : largest N considered (>= n_logic).
    window : the table shows N within ``window`` of the best.
    tau_ps : delay unit in ps, for the ``*_ps`` properties.
    """
    for what, value, ok in (
        ("path_effort", path_effort, lambda v: v > 0),
        ("p_logic", p_logic, lambda v: v >= 0),
        ("p_inv", p_inv, lambda v: v >= 0),
    ):
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not (
            math.isfinite(value) and ok(value)
        ):
            raise CircuitError(f"advise_stages: {what} must be a finite number "
                               f"{'> 0' if what == 'path_effort' else '>= 0'}, got {value!r}")
    for what, value, low in (("n_logic", n_logic, 1), ("max_stages", max_stages, n_logic),
                             ("window", window, 0)):
        if isinstance(value, bool) or int(value) != value or value < low:
            raise CircuitError(f"advise_stages: {what} must be an integer >= {low}, got {value!r}")
    n_logic, max_stages, window = int(n_logic), int(max_stages), int(window)

    N = np.arange(n_logic, max_stages + 1)
    f = float(path_effort) ** (1.0 / N)
    D = N * f + p_logic + (N - n_logic) * p_inv
    k = int(np.argmin(D))
    same = (N - n_logic) % 2 == 0
    ks = int(np.flatnonzero(same)[np.argmin(D[same])])
    rho = best_stage_effort(p_inv)
    sel = np.abs(N - N[k]) <= window
    table = pd.DataFrame({
        "stages": N[sel],
        "added": N[sel] - n_logic,
        "stage_effort": f[sel],
        "delay_tau": D[sel],
        "same_polarity": same[sel],
    }).reset_index(drop=True)
    return StageAdvice(
        path_effort=float(path_effort), p_logic=float(p_logic), n_logic=n_logic,
        p_inv=float(p_inv), rho=rho, n_hat=math.log(path_effort) / math.log(rho),
        best_stages=int(N[k]), inverters_to_add=int(N[k] - n_logic), best_delay_tau=float(D[k]),
        stage_effort=float(f[k]), current_delay_tau=float(D[0]),
        same_polarity_stages=int(N[ks]), same_polarity_delay_tau=float(D[ks]),
        at_limit=bool(N[k] == max_stages and max_stages > n_logic), table=table, tau_ps=tau_ps,
    )


def advise_chain(circuit: Circuit, tech: Technology, max_stages: int = 40) -> StageAdvice:
    """`advise_stages` for a pure chain: F, P and the stage count taken from the circuit."""
    path = _path(circuit, tech)
    b = path.copies[1:] / path.copies[:-1]
    F = float(np.prod(path.g) * np.prod(b) * path.cload * path.copies[0] / path.cin)
    n = len(path.gates)
    return advise_stages(F, float(np.sum(path.p)), n, tech.p_inv, max_stages=max(max_stages, n),
                         tau_ps=tech.tau_ps)
