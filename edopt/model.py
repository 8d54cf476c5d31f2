"""Compile a Circuit and a Technology into flat arrays: the only thing solvers and timing see.

Nodes are the gates (in topological order) preceded by one *source* node per primary input that
has a driver of given size. Units inside the model: capacitance in C_u, time in tau, energy in
``C_u V^2``. ``Model`` also keeps the map back to gate names; nothing downstream knows names.

Delay of node i:  d_i = p_i + sum_t coef_t * x[num_t] / x_i   (num_t = -1: coef_t / x_i)
Arrival:          a_j >= a_i + d_j for each edge i -> j;  a_j >= t0_j + d_j
Energy (dynamic): E = e_lin @ x + e_const;  leakage power per cycle-time: leak @ x
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.sparse as sp

from .circuit import Circuit
from .technology import Technology


@dataclass(frozen=True)
class Model:
    """Flat arrays of one circuit in one technology (see the module docstring)."""

    tech: Technology
    names: tuple[str, ...]           # node names (sources are "input:<net>")
    types: tuple[str, ...]           # gate type per node ("source" for drivers of inputs)
    n_sources: int                   # nodes [0, n_sources) are input drivers
    p: np.ndarray                    # parasitic delay, tau
    copies: np.ndarray
    lo: np.ndarray                   # size bounds (lo == hi: fixed)
    hi: np.ndarray
    g_in: np.ndarray                 # total logical effort of each node's pins, times copies
    e_lin: np.ndarray                # dynamic energy per unit size (C_u V^2), copies included
    e_const: float                   # size-independent dynamic energy (wires, output loads)
    area: np.ndarray                 # area proxy per unit size, copies included
    leak: np.ndarray                 # leakage per unit size (unit-inverter units), copies included
    term_owner: np.ndarray           # delay terms: coef * x[num] / x[owner]
    term_num: np.ndarray             # -1 for constant loads
    term_coef: np.ndarray
    edge_src: np.ndarray             # timing edges src -> dst
    edge_dst: np.ndarray
    t0: np.ndarray                   # earliest start from ideal inputs (tau; -inf if none)
    level: np.ndarray                # longest-path level of each node
    out_node: np.ndarray             # driver node of each primary output
    out_names: tuple[str, ...]
    out_allow: np.ndarray            # time after each output within the target, tau
    cap_rows: sp.csr_matrix          # input-capacitance limits: cap_rows @ x <= cap_max
    cap_max: np.ndarray
    cap_names: tuple[str, ...]
    pin_load: sp.csr_matrix          # load of node i from pins of node j (C_u per unit x_j)
    fixed_load: np.ndarray           # wire + output load on each node's net (C_u)
    alpha: np.ndarray                # activity of each node's output net

    @property
    def n(self) -> int:
        return len(self.p)

    @property
    def gate_slice(self) -> slice:
        return slice(self.n_sources, self.n)

    @property
    def gate_names(self) -> tuple[str, ...]:
        return self.names[self.n_sources:]

    @property
    def fixed(self) -> np.ndarray:
        return self.lo == self.hi

    def to_ps(self, t_tau: np.ndarray | float) -> np.ndarray | float:
        return t_tau * self.tech.tau_ps

    def to_tau(self, t_ps: np.ndarray | float) -> np.ndarray | float:
        return t_ps / self.tech.tau_ps


def compile_model(circuit: Circuit, tech: Technology) -> Model:
    """Validate ``circuit`` and build its Model in ``tech`` (one pass over gates, then numpy)."""
    st = circuit.validate()
    tau = tech.tau_ps
    sources = [net for net, port in circuit.inputs.items()
               if port.drive is not None and net in st.fanout]
    names = [f"input:{net}" for net in sources] + list(st.order)
    index = {name: i for i, name in enumerate(names)}
    n_src = len(sources)
    n = len(names)
    net_driver = {net: index[f"input:{net}"] for net in sources}
    net_driver.update({net: index[g] for net, g in st.driver.items()})

    p = np.zeros(n)
    copies = np.ones(n)
    lo = np.empty(n)
    hi = np.empty(n)
    area = np.zeros(n)
    leak = np.zeros(n)
    g_in = np.zeros(n)
    alpha = np.zeros(n)
    fixed_load = np.zeros(n)
    t0 = np.full(n, -np.inf)
    types: list[str] = ["source"] * n_src
    out_net = [None] * n
    pin_node: list[int] = []      # one entry per gate input pin
    pin_net: list[str] = []
    pin_g: list[float] = []

    for k, net in enumerate(sources):
        port = circuit.inputs[net]
        p[k] = tech.p_inv
        lo[k] = hi[k] = port.drive
        t0[k] = port.arrival_ps / tau
        out_net[k] = net

    efforts_cache: dict[str, object] = {}
    per_type: dict[str, tuple] = {}      # gate.type -> what every gate of that type shares
    inputs = circuit.inputs
    for name in st.order:
        i = index[name]
        gate = circuit.gates[name]
        known = per_type.get(gate.type)
        if known is None:
            gtype = circuit.gate_type(gate.type)
            eff = gtype.efforts(tech.mu, tech.p_inv)
            efforts_cache[gtype.name] = eff
            known = per_type[gate.type] = (
                gtype.name, float(eff.p), float(eff.area), float(eff.leak),
                float(np.sum(eff.g)), tuple(gtype.pins), [float(v) for v in eff.g])
        tname, p[i], area[i], leak[i], g_in[i], pins, g_pins = known
        types.append(tname)
        copies[i] = gate.copies
        out_net[i] = gate.output
        if gate.size is not None:
            lo[i] = hi[i] = gate.size
        else:
            lo[i] = gate.size_min if gate.size_min is not None else circuit.size_min
            hi[i] = gate.size_max if gate.size_max is not None else circuit.size_max
        for pin, g_pin in zip(pins, g_pins):
            net = gate.inputs[pin]
            pin_node.append(i)
            pin_net.append(net)
            pin_g.append(g_pin)
            port = inputs.get(net)
            if port is not None and port.drive is None:
                t0[i] = max(t0[i], port.arrival_ps / tau)

    # the given input capacitance of an input net fixes the size of the one gate it drives
    for net, port in circuit.inputs.items():
        if port.cap is not None:
            (gname, pin), = st.fanout[net]
            i = index[gname]
            gtype = circuit.gate_type(circuit.gates[gname].type)
            g_pin = efforts_cache[gtype.name].g[gtype.pins.index(pin)]
            lo[i] = hi[i] = port.cap / (g_pin * copies[i])

    pin_node_a = np.asarray(pin_node, dtype=np.int64)
    pin_g_a = np.asarray(pin_g)
    driver_of_pin = np.array([net_driver.get(net, -1) for net in pin_net], dtype=np.int64)
    driven = driver_of_pin >= 0
    net_alpha = {net: circuit.activity.get(net, circuit.activity_default)
                 for net in set(pin_net) | set(st.driver)}
    for i in range(n_src, n):
        alpha[i] = net_alpha[out_net[i]]
    for i in range(n):
        net = out_net[i]
        out = circuit.outputs.get(net)
        fixed_load[i] = circuit.wire.get(net, 0.0) + (out.load if out is not None else 0.0)

    # delay terms: pins on the net of node i, and the fixed load of that net
    src = driver_of_pin[driven]
    dst = pin_node_a[driven]
    coef = pin_g_a[driven] * copies[dst] / copies[src]
    has_fixed = np.flatnonzero(fixed_load > 0)
    term_owner = np.concatenate([src, has_fixed])
    term_num = np.concatenate([dst, np.full(len(has_fixed), -1, dtype=np.int64)])
    term_coef = np.concatenate([coef, fixed_load[has_fixed]])
    pin_load = sp.csr_matrix((coef, (src, dst)), shape=(n, n))

    # dynamic energy: each pin charged by a gate of the block, plus own parasitics, wires, loads
    gate_mask = np.zeros(n, dtype=bool)
    gate_mask[n_src:] = True
    src_is_gate = gate_mask[src]
    e_lin = copies * alpha * p  # parasitic capacitance p * x (sources: alpha = 0)
    np.add.at(e_lin, dst[src_is_gate], (alpha[src] * pin_g_a[driven] * copies[dst])[src_is_gate])
    e_const = float(np.sum((copies * alpha * fixed_load)[gate_mask]))

    edge_src, edge_dst = _unique_edges(src, dst, n)
    level = _levels(edge_src, edge_dst, n)

    out_names = tuple(circuit.outputs)
    out_node = np.array([net_driver[net] for net in out_names], dtype=np.int64)
    out_allow = np.array([circuit.outputs[net].allowance_ps / tau for net in out_names])

    cap_nets = [net for net, port in circuit.inputs.items() if port.cap_max is not None]
    rows, cols, vals = [], [], []
    pin_net_a = np.asarray(pin_net, dtype=object)
    for r, net in enumerate(cap_nets):
        sel = np.flatnonzero(pin_net_a == net)
        rows.extend([r] * len(sel))
        cols.extend(pin_node_a[sel])
        vals.extend(pin_g_a[sel] * copies[pin_node_a[sel]])
    cap_rows = sp.csr_matrix((vals, (rows, cols)), shape=(len(cap_nets), n))
    cap_max = np.array([circuit.inputs[net].cap_max for net in cap_nets], dtype=float)

    return Model(
        tech=tech, names=tuple(names), types=tuple(types), n_sources=n_src, p=p, copies=copies,
        lo=lo, hi=hi, g_in=g_in * copies, e_lin=e_lin, e_const=e_const, area=area * copies,
        leak=leak * copies, term_owner=term_owner, term_num=term_num, term_coef=term_coef,
        edge_src=edge_src, edge_dst=edge_dst, t0=t0, level=level, out_node=out_node,
        out_names=out_names, out_allow=out_allow, cap_rows=cap_rows, cap_max=cap_max,
        cap_names=tuple(cap_nets), pin_load=pin_load, fixed_load=fixed_load, alpha=alpha,
    )


def _unique_edges(src: np.ndarray, dst: np.ndarray, n: int) -> tuple[np.ndarray, np.ndarray]:
    """Driver -> receiver pairs without duplicates (a gate may use one net on several pins)."""
    key = np.unique(src * n + dst)
    return key // n, key % n


def _levels(src: np.ndarray, dst: np.ndarray, n: int) -> np.ndarray:
    """Longest-path level of each node, one vectorised pass per level."""
    level = np.zeros(n, dtype=np.int64)
    indeg = np.bincount(dst, minlength=n)
    adj = sp.csr_matrix((np.ones(len(src)), (src, dst)), shape=(n, n))
    frontier = np.flatnonzero(indeg == 0)
    depth = 0
    while frontier.size:
        level[frontier] = depth
        rows = adj[frontier]
        indeg = indeg - np.asarray(rows.sum(axis=0)).ravel().astype(np.int64)
        nxt = np.unique(rows.indices)
        frontier = nxt[indeg[nxt] == 0]
        depth += 1
    return level
