"""Transistor-level netlists of sized circuits, with stimulus and measurements.

Two modes:

- ``"path"``: the critical path alone. Its gates run from the measured supply; the side pins of
  each path gate are tied to values that let the path pin switch the output; every other pin on
  a path net is a real gate (of its own size, on the auxiliary supply) whose output carries its
  own load; wires are capacitors, output loads are gate loads.
- ``"full"``: every gate of the circuit on the measured supply; the input that starts the
  critical path toggles, the other inputs hold a vector (found by exhaustive or sampled logic
  simulation) under which every net of the critical path toggles.

In both, the path input toggles up then down once per operation (a rising and a falling edge),
each through two shaping stages of fan-out 4; an input with a ``drive`` is a real inverter of
that size. Delays are measured 50 %-50 % from the start of the path (the input net, or the
input of its driving inverter) to each path net; the energy is the charge of the measured
supply over the operation times the supply, less its quiet (leakage) current.

``copies`` (symmetric branching) is simulated as one copy of each gate plus, on the net of its
driver, a load gate sized for the other copies.
"""

from __future__ import annotations

import itertools
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from ..circuit import Circuit
from ..errors import CircuitError, EdoptError
from ..gates import GateType, builtin_library
from ..sizing import Sizing
from .deck import Deck, Timing, cell_ports, eval_tree, sensitize
from .setup import SpiceSetup, spice_setup

__all__ = ["Bench", "build_bench", "critical_nodes", "netlist", "resolve_circuit"]

FULL_MODE_MAX_GATES = 60       # "auto" simulates the whole circuit up to this many gates
EXHAUSTIVE_INPUTS = 14         # side-input vectors searched exhaustively up to this many inputs
SAMPLED_VECTORS = 8192


@dataclass
class Bench:
    """A sized circuit placed in a deck, with its measurement names and model numbers."""

    prefix: str
    mode: str
    stage_names: list[str]           # model node names along the path (sources included)
    stage_types: list[str]
    stage_sizes: list[float]
    model_arrival_ps: list[float]    # arrival of each path net after the path start (model)
    model_delay_ps: float
    model_energy_fj: float           # one rise of each toggling net (activity 1), per copy
    model_leak_na: float
    toggled: list[str]
    vdd: float
    measured_supply: str = ""
    notes: list[str] = field(default_factory=list)


def resolve_circuit(result: Sizing, circuit: Circuit | None) -> Circuit:
    """The circuit of a sizing: the ``circuit`` argument, else ``result.circuit``."""
    c = circuit if circuit is not None else getattr(result, "circuit", None)
    if c is None:
        raise EdoptError("this sizing does not carry its circuit: pass circuit=<the Circuit that "
                         "was sized> (e.g. Sizer.circuit or load_case(...).circuit)")
    names = result.model.gate_names
    if set(names) != set(c.gates):
        raise EdoptError(f"circuit {c.name!r} does not match the sizing (gate names differ); "
                         "pass the circuit that was sized")
    return c


def critical_nodes(result: Sizing) -> list[int]:
    """Model node indices of the critical path from its start (a source node when the path
    starts at a driven input) to the critical output."""
    return result.critical_nodes


def network_type(gtype: GateType) -> GateType:
    """A gate type with a switch network: itself, or the built-in of the same name and pins
    for explicit (characterised) types."""
    if gtype.pulldown is not None:
        return gtype
    base = builtin_library().get(gtype.name.lower())
    if base is not None and base.pins == gtype.pins:
        return base
    raise EdoptError(f"gate type {gtype.name!r} has explicit g and p and no transistor network; "
                     "give it a pull-down expression (or name it after a built-in type with the "
                     "same pins) to simulate it")


class _Placer:
    """Places one sized circuit into a deck."""

    def __init__(self, deck: Deck, result: Sizing, circuit: Circuit, prefix: str) -> None:
        self.d = deck
        self.r = result
        self.c = circuit
        self.m = result.model
        self.x = result.evaluation.x
        self.p = prefix
        self.st = circuit.validate()
        self.index = {name: i for i, name in enumerate(self.m.names)}
        self.nodes: dict[str, str] = {}
        self.comp: dict[str, str] = {}
        self.vdut = deck.supply(f"{prefix}vdd")
        self.notes: list[str] = []

    # naming
    def node(self, net: str) -> str:
        if net not in self.nodes:
            self.nodes[net] = self.d.fresh(f"{self.p}n_{net}")
        return self.nodes[net]

    def gtype(self, gate: str) -> GateType:
        return network_type(self.c.gate_type(self.c.gates[gate].type))

    def size(self, gate: str) -> float:
        return float(self.x[self.index[gate]])

    def copies(self, gate: str) -> float:
        return float(self.m.copies[self.index[gate]])

    def driver_copies(self, net: str) -> float:
        g = self.st.driver.get(net)
        return self.copies(g) if g is not None else 1.0

    def pin_cap(self, gate: str, pins: Sequence[str], complemented: bool | None = None) -> float:
        """Derived input capacitance (C_u) of ``pins`` of one copy of ``gate``."""
        gt = self.gtype(gate)
        total = 0.0
        for pin, _kind, w, comp in gt.widths(self.m.tech.mu):
            if pin in pins and (complemented is None or comp == complemented):
                total += w / (1 + self.m.tech.mu)
        return total * self.size(gate)

    def complement(self, net: str, cap_cu: float, start: bool) -> str:
        """Node carrying the complement of ``net`` (a second shaping chain for the start net,
        else an inverter from the net)."""
        if net not in self.comp:
            node = self.d.fresh(f"{self.p}nb_{net}")
            if start:
                self.d.drive(node, cap_cu, rising_first=False)
            else:
                self.d.inverter(self.node(net), node, max(cap_cu / 4.0, 1.0))
                self.notes.append(f"complement of net {net!r} made by an inverter (the model "
                                    "assumes its driver supplies both polarities)")
            self.comp[net] = node
        return self.comp[net]

    def place(self, inst: str, gate: str, size: float, conn: Mapping[str, str], out: str,
              vdd: str, load: bool = False) -> None:
        """Instantiate ``gate`` at ``size``; a load gate narrower than the models allow is
        widened to the narrowest size that simulates (with a note)."""
        gt = self.gtype(gate)
        if load:
            smallest = min_size(gt, self.m.tech.mu, self.d.setup)
            if size < smallest:
                self.notes.append(f"load copies of {gate!r} widened from size {size:.3g} to "
                                  f"{smallest:.3g} (narrowest transistor the models accept)")
                size = smallest
        self.d.gate(inst, gt, size, conn, out, vdd)

    def terminate(self, node: str, load_cu: float) -> None:
        if load_cu >= 1.0:
            self.d.load(node, load_cu)

    def net_extras(self, net: str) -> None:
        """Wire capacitance and output load of a net."""
        node = self.node(net)
        wire = self.c.wire.get(net, 0.0)
        if wire > 0:
            self.d.cap(node, wire * self.m.tech.cu_ff)
        out = self.c.outputs.get(net)
        if out is not None and out.load > 0:
            self.d.load(node, out.load)


def min_size(gtype: GateType, mu: float, setup: SpiceSetup) -> float:
    """Smallest size of ``gtype`` whose narrowest transistor is as wide as the models allow."""
    need = 0.0
    for _pin, kind, w, _c in gtype.widths(mu):
        unit = setup.wn_um if kind == "n" else setup.wp_um / mu
        need = max(need, setup.w_min_um / (w * unit))
    return need


def build_bench(deck: Deck, result: Sizing, circuit: Circuit, mode: str = "auto",
                prefix: str = "b0_") -> Bench:
    """Place ``result`` into ``deck`` with its stimulus and measurements."""
    pl = _Placer(deck, result, circuit, prefix)
    m, ev = result.model, result.evaluation
    path = critical_nodes(result)
    names = [m.names[k] for k in path]
    src = names[0] if path[0] < m.n_sources else None
    gates_on_path = [n for n in names if n in circuit.gates]
    net_of = {n: (n.split(":", 1)[1] if n.startswith("input:") else circuit.gates[n].output)
              for n in names}

    # the net that starts the path
    first = gates_on_path[0]
    if src is not None:
        start_net = net_of[src]
    else:
        ideal = [(circuit.inputs[net].arrival_ps, pin, net)
                 for pin, net in circuit.gates[first].inputs.items()
                 if net in circuit.inputs and circuit.inputs[net].drive is None]
        if not ideal:
            raise CircuitError(f"critical path of {circuit.name!r} starts at gate {first!r} "
                               "without a primary input; cannot place the stimulus")
        start_net = max(ideal)[2]

    if mode == "auto":
        mode = "full" if len(circuit.gates) <= FULL_MODE_MAX_GATES else "path"
        vector = _vector(circuit, pl, start_net, [net_of[n] for n in gates_on_path]) \
            if mode == "full" else None
        if vector is None:
            mode = "path"
    elif mode == "full":
        vector = _vector(circuit, pl, start_net, [net_of[n] for n in gates_on_path])
        if vector is None:
            raise EdoptError(f"no input vector of {circuit.name!r} lets every net of the "
                             "critical path switch; verify with mode='path'")
    elif mode == "path":
        vector = None
    else:
        raise EdoptError(f"mode must be 'auto', 'path' or 'full', got {mode!r}")

    vdd = deck.vdd
    if mode == "path":
        toggled, rises, trig = _place_path(pl, names, src, start_net, gates_on_path, net_of)
    else:
        toggled, rises, trig = _place_full(pl, names, src, start_net, vector, net_of)

    # measurements: arrival of every path net at both edges, supply charge, quiet current
    t = deck.timing
    for k, n in enumerate(names):
        node = pl.node(net_of[n])
        deck.delay(f"{prefix}a{k}", trig, True, node, rises[n])
        deck.delay(f"{prefix}b{k}", trig, False, node, not rises[n], second=True)
    deck.charge(f"{prefix}e", f"v{pl.vdut}", t.start, t.stop)
    (q0, q1), (q2, q3) = t.quiet
    deck.average(f"{prefix}la", f"v{pl.vdut}", q0, q1)
    deck.average(f"{prefix}lb", f"v{pl.vdut}", q2, q3)

    a = ev.arrival_ps
    i0 = path[0]
    t_start = a[i0] - ev.delay_ps[i0]
    e_unit = m.tech.energy_unit_fj
    idx = np.array([pl.index[n] for n in toggled], dtype=np.int64)
    e_model = float(np.sum(ev.load[idx] + m.p[idx] * pl.x[idx]) * e_unit)
    dut = np.array([pl.index[n] for n in (gates_on_path if mode == "path" else circuit.gates)],
                   dtype=np.int64)
    leak = float(np.sum(m.leak[dut] / m.copies[dut] * pl.x[dut])) * m.tech.leak_na
    return Bench(
        prefix=prefix, mode=mode, stage_names=names, stage_types=[m.types[k] for k in path],
        stage_sizes=[float(pl.x[k]) for k in path],
        model_arrival_ps=[float(a[k] - t_start) for k in path],
        model_delay_ps=float(a[path[-1]] - t_start), model_energy_fj=e_model,
        model_leak_na=leak, toggled=list(toggled), vdd=vdd, measured_supply=f"v{pl.vdut}",
        notes=sorted(set(pl.notes)),
    )


def _place_path(pl: _Placer, names: list[str], src: str | None, start_net: str,
                gates_on_path: list[str], net_of: dict[str, str]
                ) -> tuple[list[str], dict[str, bool], str]:
    d, c = pl.d, pl.c
    rises: dict[str, bool] = {}
    placed_pins: dict[str, set[tuple[str, str]]] = {}   # net -> (gate, pin) already connected
    # start of the path
    if src is not None:
        pre = d.fresh(f"{pl.p}src")
        d.drive(pre, c.inputs[start_net].drive, rising_first=True)
        d.inverter(pre, pl.node(start_net), c.inputs[start_net].drive)
        trig, level = pre, False          # the net falls at the first edge
        rises[src] = False
    else:
        trig, level = pl.node(start_net), True
    prev_net = start_net
    chain_nets = [start_net]
    for g in gates_on_path:
        gt = pl.gtype(g)
        gate = c.gates[g]
        path_pins = [p for p, net in gate.inputs.items() if net == prev_net]
        sens = sensitize(gt, path_pins)
        if sens is None:
            raise EdoptError(f"gate {g!r} ({gt.name}): no values of its other pins let pin(s) "
                             f"{path_pins} switch its output; verify with mode='full'")
        side, inverting = sens
        ports = cell_ports(gt)
        conn: dict[str, str] = {}
        for p in gt.pins:
            if p in path_pins:
                conn[p] = pl.node(prev_net)
                if f"{p}_b" in ports:
                    cap = pl.pin_cap(g, [p], complemented=True)
                    conn[f"{p}_b"] = pl.complement(prev_net, cap, prev_net == start_net
                                                   and src is None)
            else:
                conn[p] = d.tie(side[p])
                if f"{p}_b" in ports:
                    conn[f"{p}_b"] = d.tie(not side[p])
        pl.place(f"{pl.p}{g}", g, pl.size(g), conn, pl.node(gate.output), pl.vdut)
        placed_pins.setdefault(prev_net, set()).update((g, p) for p in path_pins)
        ratio = pl.copies(g) / pl.driver_copies(prev_net)
        if ratio > 1 + 1e-9:
            out = d.fresh(f"{pl.p}cpy")
            pl.place(d.fresh(f"{pl.p}cp_{g}"), g, pl.size(g) * (ratio - 1), conn, out, d.aux,
                     load=True)
            pl.terminate(out, float(pl.r.evaluation.load[pl.index[g]]) * (ratio - 1))
        level = (not level) if inverting else level
        rises[g] = level
        prev_net = gate.output
        chain_nets.append(prev_net)

    # loads on every path net that are not the path itself
    start_load = 0.0
    for net in chain_nets:
        users = pl.st.fanout.get(net, [])
        by_gate: dict[str, list[str]] = {}
        for g, p in users:
            if (g, p) not in placed_pins.get(net, set()):
                by_gate.setdefault(g, []).append(p)
        for g, pins in by_gate.items():
            gt = pl.gtype(g)
            ratio = pl.copies(g) / pl.driver_copies(net)
            size = pl.size(g) * ratio
            sens = sensitize(gt, pins)
            side = sens[0] if sens else {p: False for p in gt.pins if p not in pins}
            ports = cell_ports(gt)
            conn = {}
            for p in gt.pins:
                conn[p] = pl.node(net) if p in pins else d.tie(side[p])
                if f"{p}_b" in ports:
                    conn[f"{p}_b"] = (pl.complement(net, pl.pin_cap(g, [p], True) * ratio,
                                                    net == start_net and src is None)
                                      if p in pins else d.tie(not side[p]))
            out = d.fresh(f"{pl.p}off")
            pl.place(d.fresh(f"{pl.p}off_{g}"), g, size, conn, out, d.aux, load=True)
            pl.terminate(out, float(pl.r.evaluation.load[pl.index[g]]) * ratio)
            if net == start_net:
                start_load += pl.pin_cap(g, pins, complemented=False) * ratio
        pl.net_extras(net)
    if src is None:
        first = gates_on_path[0]
        gate = c.gates[first]
        pins = [p for p, n in gate.inputs.items() if n == start_net]
        start_load += pl.pin_cap(first, pins, complemented=False) * pl.copies(first)
        start_load += c.wire.get(start_net, 0.0)
        d.drive(pl.node(start_net), start_load, rising_first=True)
    return list(gates_on_path), rises, trig


_Vector = tuple[dict[str, bool], dict[str, bool], dict[str, bool]]


def _vector(circuit: Circuit, pl: _Placer, start_net: str, path_nets: list[str]
            ) -> _Vector | None:
    """Values of the other inputs under which every path net toggles with the start input:
    ``(static inputs, net values with the start input low, with it high)``."""
    others = [n for n in circuit.inputs if n != start_net]
    k = len(others)
    if k <= EXHAUSTIVE_INPUTS:
        combos = np.array(list(itertools.product([False, True], repeat=k)),
                          dtype=bool).reshape(2 ** k, k)
    else:
        rng = np.random.default_rng(0)
        combos = rng.random((SAMPLED_VECTORS, k)) < 0.5
    vals = []
    for level in (False, True):
        v = {net: combos[:, j] for j, net in enumerate(others)}
        v[start_net] = np.full(len(combos), level)
        for g in pl.st.order:
            gate = circuit.gates[g]
            gt = pl.gtype(g)
            v[gate.output] = eval_tree(gt.pulldown, {p: v[net] for p, net in gate.inputs.items()})
        vals.append(v)
    ok = np.ones(len(combos), dtype=bool)
    for net in path_nets:
        ok &= vals[0][net] != vals[1][net]
    hits = np.flatnonzero(ok)
    if len(hits) == 0:
        return None
    j = int(hits[0])
    static = {net: bool(combos[j, i]) for i, net in enumerate(others)}
    return (static, {n: bool(a[j]) for n, a in vals[0].items()},
            {n: bool(a[j]) for n, a in vals[1].items()})


def _place_full(pl: _Placer, names: list[str], src: str | None, start_net: str,
                vector: _Vector, net_of: dict[str, str]
                ) -> tuple[list[str], dict[str, bool], str]:
    d, c = pl.d, pl.c
    static, low, high = vector
    # the trigger rises at the first edge: an ideal start input rises with it, a driven one
    # (behind its inverter) falls
    before, after = (low, high) if c.inputs[start_net].drive is None else (high, low)
    # primary inputs
    trig = ""
    for net, port in c.inputs.items():
        if net == start_net:
            if port.drive is not None:
                pre = d.fresh(f"{pl.p}src")
                d.drive(pre, port.drive, rising_first=True)
                d.inverter(pre, pl.node(net), port.drive)
                trig = pre
            else:
                trig = pl.node(net)
        else:
            pl.nodes[net] = d.tie(static[net])
            pl.comp[net] = d.tie(not static[net])
    # gates
    start_load = 0.0
    for g in pl.st.order:
        gate = c.gates[g]
        gt = pl.gtype(g)
        ports = cell_ports(gt)
        conn: dict[str, str] = {}
        for p in gt.pins:
            net = gate.inputs[p]
            conn[p] = pl.node(net)
            if f"{p}_b" in ports:
                is_start = net == start_net and c.inputs[net].drive is None
                conn[f"{p}_b"] = pl.complement(net, pl.pin_cap(g, [p], True), is_start)
        pl.place(f"{pl.p}{g}", g, pl.size(g), conn, pl.node(gate.output), pl.vdut)
        # other copies of this gate load the nets of its inputs
        by_net: dict[str, list[str]] = {}
        for p in gt.pins:
            by_net.setdefault(gate.inputs[p], []).append(p)
        for net, pins in by_net.items():
            ratio = pl.copies(g) / pl.driver_copies(net)
            if net == start_net:
                start_load += pl.pin_cap(g, pins, complemented=False) * ratio
            if ratio > 1 + 1e-9 and net not in static:
                out = d.fresh(f"{pl.p}cpy")
                pl.place(d.fresh(f"{pl.p}cp_{g}"), g, pl.size(g) * (ratio - 1), conn, out,
                         d.aux, load=True)
                pl.terminate(out, float(pl.r.evaluation.load[pl.index[g]]) * (ratio - 1))
    for net in set(pl.st.driver) | {start_net}:
        pl.net_extras(net)
    if c.inputs[start_net].drive is None:
        d.drive(pl.node(start_net), start_load + c.wire.get(start_net, 0.0), rising_first=True)
    rises = {n: (not before[net_of[n]]) and after[net_of[n]] for n in names}
    toggled = [g for g in pl.st.order if low[c.gates[g].output] != high[c.gates[g].output]]
    return toggled, rises, trig


def netlist(result: Sizing, *, circuit: Circuit | None = None, mode: str = "auto",
            setup: SpiceSetup | str | None = None, timing: Timing | None = None) -> str:
    """Transistor-level SPICE netlist of a sized circuit, ready for ngspice.

    Parameters
    ----------
    result : a sizing (its model gives the sizes and the technology).
    circuit : the circuit that was sized (default ``result.circuit``).
    mode : ``"path"`` (critical path with its real loads), ``"full"`` (every gate, the other
        inputs at a vector that sensitises the critical path) or ``"auto"`` (full when the
        circuit is small and such a vector exists).
    setup : transistor conventions (default: the technology's ``[spice]`` table, else SKY130).
    timing : stimulus times (default: from the model delay).

    Returns
    -------
    str : the deck: one subcircuit per gate type and size, supplies, stimulus, ``.tran`` and
        ``.meas`` statements (``b0_a<k>`` / ``b0_b<k>``: delay from the path start to path net
        ``k`` at the rising / falling input; ``b0_e``: supply charge; ``b0_la`` / ``b0_lb``:
        quiet supply current).

    Examples
    --------
    >>> from edopt import chain, size, technology
    >>> c = chain(["inv", "inv"], cin=1, cload=16, size_min=1)
    >>> r = size(c, "generic")
    >>> text = netlist(r, circuit=c)
    >>> ".subckt inv_x1 a y vdd vss" in text
    True
    """
    deck, _ = deck_for([result], [resolve_circuit(result, circuit)], mode=mode, setup=setup,
                       timing=timing)
    return deck.text()


def deck_for(results: Sequence[Sizing], circuits: Sequence[Circuit], mode: str = "auto",
             setup: SpiceSetup | str | None = None, timing: Timing | None = None,
             title: str | None = None) -> tuple[Deck, list[Bench]]:
    """One deck holding a bench per sizing (all results must share a supply)."""
    if not results:
        raise EdoptError("nothing to simulate: give at least one sizing")
    tech = results[0].model.tech
    if any(r.model.tech.vdd_v != tech.vdd_v for r in results):
        raise EdoptError("sizings at different supplies need separate decks")
    s = spice_setup(setup if setup is not None else tech)
    if timing is None:
        longest = max(r.evaluation.circuit_delay_ps for r in results)
        half = max(1000.0, 3.0 * longest + 500.0)
        timing = Timing(start=200.0, half=float(np.ceil(half / 100.0) * 100.0))
    names = ", ".join(sorted({c.name for c in circuits}))
    deck = Deck(s, tech.vdd_v, mu=tech.mu, timing=timing,
                title=title or f"edopt: {names} sized in {tech.name}")
    benches = [build_bench(deck, r, c, mode=mode, prefix=f"b{k}_")
               for k, (r, c) in enumerate(zip(results, circuits))]
    for b in benches:
        deck.notes.extend(f"bench {b.prefix}: {n}" for n in b.notes)
        deck.notes.append(f"bench {b.prefix}: mode {b.mode}, path "
                          + " -> ".join(b.stage_names))
    return deck, benches
