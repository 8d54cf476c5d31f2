"""The gate network: gates with named pins, nets, primary inputs and outputs.

A Circuit is plain data plus validation. Capacitances are in unit-inverter input capacitances
(C_u), times in ps, sizes in unit-inverter drive strengths. The model compiler (``model.py``)
turns a validated Circuit and a Technology into flat arrays; nothing downstream sees names.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field

from .errors import CircuitError, GateError
from .gates import GateType, builtin_library

DEFAULT_SIZE_MIN = 1.0
DEFAULT_SIZE_MAX = 10_000.0
DEFAULT_ACTIVITY = 0.25  # random data: a net rises in one operation out of four (common practice)


@dataclass
class Gate:
    """One gate instance.

    ``inputs`` maps each pin of the type to a net; ``size`` fixes the size; ``size_min`` /
    ``size_max`` override the circuit's bounds; ``copies`` says the instance stands for that many
    identical gates, each driving an identical copy of everything downstream of it (symmetric
    branching, as in a decoder), so one path is sized for all of them.
    """

    name: str
    type: str
    inputs: dict[str, str]
    output: str
    size: float | None = None
    size_min: float | None = None
    size_max: float | None = None
    copies: float = 1.0


@dataclass
class InputPort:
    """A primary input net.

    ``arrival_ps``: when the signal arrives. ``drive``: size of the inverter that drives the net
    from outside (its delay is counted; ``None`` = ideal source). ``cap``: the total input
    capacitance of the net is given (C_u); this fixes the size of the single gate it drives.
    ``cap_max``: an upper limit on the total input capacitance (C_u).
    """

    net: str
    arrival_ps: float = 0.0
    drive: float | None = None
    cap: float | None = None
    cap_max: float | None = None


@dataclass
class OutputPort:
    """A primary output net with a fixed load (C_u, per copy of its driver).

    ``allowance_ps`` is time that must follow the output's arrival within the delay target (a
    setup time, logic outside the block); the target is checked against arrival + allowance.
    """

    net: str
    load: float
    allowance_ps: float = 0.0


@dataclass
class Structure:
    """Connectivity derived by validation: who drives each net and which pins it feeds."""

    driver: dict[str, str]                       # net -> gate name
    fanout: dict[str, list[tuple[str, str]]]     # net -> [(gate name, pin)]
    order: list[str]                             # gate names in topological order


@dataclass
class Circuit:
    """A gate network with its boundary conditions.

    Examples
    --------
    >>> c = Circuit("demo")
    >>> c.add_input("a", cap=1.0)
    >>> c.add_gate("u1", "nand2", {"A": "a", "B": "b"}, "n1")
    >>> c.add_input("b")
    >>> c.add_gate("u2", "inv", ["n1"], "y")
    >>> c.add_output("y", load=20.0)
    >>> c.validate().order
    ['u1', 'u2']
    """

    name: str = "circuit"
    size_min: float = DEFAULT_SIZE_MIN
    size_max: float = DEFAULT_SIZE_MAX
    activity_default: float = DEFAULT_ACTIVITY
    gates: dict[str, Gate] = field(default_factory=dict)
    inputs: dict[str, InputPort] = field(default_factory=dict)
    outputs: dict[str, OutputPort] = field(default_factory=dict)
    wire: dict[str, float] = field(default_factory=dict)
    activity: dict[str, float] = field(default_factory=dict)
    types: dict[str, GateType] = field(default_factory=builtin_library)
    source: str | None = None

    # ---------------------------------------------------------------- building
    def add_type(self, gate_type: GateType) -> None:
        """Make a user gate type available to ``add_gate`` (replaces one of the same name)."""
        self.types[gate_type.name.lower()] = gate_type

    def add_gate(
        self,
        name: str,
        type: str,
        inputs: Mapping[str, str] | Sequence[str],
        output: str,
        size: float | None = None,
        size_min: float | None = None,
        size_max: float | None = None,
        copies: float = 1.0,
    ) -> Gate:
        """Add a gate; ``inputs`` is a pin -> net mapping or a list of nets in pin order."""
        if name in self.gates:
            raise CircuitError(f"gate {name!r} is defined twice")
        gtype = self.gate_type(type, gate=name)
        if isinstance(inputs, str):
            raise CircuitError(
                f"gate {name!r}: inputs must be a pin -> net mapping or a list of nets, "
                f"not the string {inputs!r}")
        if isinstance(inputs, Mapping):
            bad = [k for k, v in inputs.items() if not isinstance(v, str) or not v]
            if bad:
                raise CircuitError(f"gate {name!r}: pin {bad[0]!r} needs a net name")
            conn = {str(k): v for k, v in inputs.items()}
        else:
            nets = list(inputs)
            if len(nets) != len(gtype.pins):
                raise CircuitError(
                    f"gate {name!r}: type {gtype.name} has {len(gtype.pins)} pins "
                    f"({', '.join(gtype.pins)}), got {len(nets)} nets"
                )
            conn = dict(zip(gtype.pins, map(str, nets)))
        unknown = [p for p in conn if p not in gtype.pins]
        if unknown:
            raise CircuitError(
                f"gate {name!r}: type {gtype.name} has no pin {unknown[0]!r} "
                f"(pins: {', '.join(gtype.pins)})"
            )
        missing = [p for p in gtype.pins if p not in conn]
        if missing:
            raise CircuitError(
                f"gate {name!r}: pin {missing[0]!r} of {gtype.name} is not connected")
        for key, value in (("size", size), ("size_min", size_min), ("size_max", size_max)):
            if value is not None:
                _positive(value, f"gate {name!r}: {key}")
        _finite(copies, f"gate {name!r}: copies")
        if copies < 1:
            raise CircuitError(f"gate {name!r}: copies must be >= 1, got {copies!r}")
        gate = Gate(name, gtype.name, conn, str(output), _opt_float(size), _opt_float(size_min),
                    _opt_float(size_max), float(copies))
        self.gates[name] = gate
        return gate

    def add_input(
        self,
        net: str,
        arrival_ps: float = 0.0,
        drive: float | None = None,
        cap: float | None = None,
        cap_max: float | None = None,
    ) -> None:
        """Declare a primary input net (see InputPort)."""
        _finite(arrival_ps, f"input {net!r}: arrival_ps")
        if drive is not None:
            _positive(drive, f"input {net!r}: drive")
        if cap is not None:
            _positive(cap, f"input {net!r}: cap")
        if cap_max is not None:
            _positive(cap_max, f"input {net!r}: cap_max")
        if cap is not None and cap_max is not None:
            raise CircuitError(f"input {net!r}: give either cap or cap_max, not both")
        if net in self.inputs:
            raise CircuitError(f"input {net!r} is declared twice")
        self.inputs[net] = InputPort(net, float(arrival_ps), _opt_float(drive), _opt_float(cap),
                                     _opt_float(cap_max))

    def add_output(self, net: str, load: float, allowance_ps: float = 0.0) -> None:
        """Declare a primary output net with its fixed load in C_u (see OutputPort)."""
        _nonnegative(load, f"output {net!r}: load")
        _finite(allowance_ps, f"output {net!r}: allowance_ps")
        if net in self.outputs:
            raise CircuitError(f"output {net!r} is declared twice")
        self.outputs[net] = OutputPort(net, float(load), float(allowance_ps))

    def set_net(self, net: str, wire: float | None = None, activity: float | None = None) -> None:
        """Give a net fixed extra capacitance (wire plus side loads, C_u) or an activity factor."""
        if wire is not None:
            _nonnegative(wire, f"net {net!r}: wire")
            self.wire[net] = float(wire)
        if activity is not None:
            _nonnegative(activity, f"net {net!r}: activity")
            if activity > 1:
                raise CircuitError(
                    f"net {net!r}: activity {activity} is a probability per operation; use 0..1"
                )
            self.activity[net] = float(activity)

    def gate_type(self, type_name: str, gate: str | None = None) -> GateType:
        try:
            return self.types[type_name.lower()]
        except KeyError:
            who = f"gate {gate!r}: " if gate else ""
            raise GateError(
                f"{who}unknown gate type {type_name!r}; known: {', '.join(sorted(self.types))}"
            ) from None

    # -------------------------------------------------------------- validation
    def validate(self) -> Structure:
        """Check the network and return its connectivity; raises CircuitError naming what to fix."""
        if not self.gates:
            raise CircuitError(f"circuit {self.name!r} has no gates")
        _positive(self.size_min, "size_min")
        _positive(self.size_max, "size_max")
        if self.size_min > self.size_max:
            raise CircuitError(f"size_min {self.size_min} is above size_max {self.size_max}")
        _nonnegative(self.activity_default, "activity")
        if self.activity_default > 1:
            raise CircuitError(
                f"activity {self.activity_default} is a probability per operation; use 0..1")
        driver: dict[str, str] = {}
        fanout: dict[str, list[tuple[str, str]]] = {}
        for g in self.gates.values():
            if g.output in self.inputs:
                raise CircuitError(
                    f"net {g.output!r} is a primary input but gate {g.name!r} drives it"
                )
            if g.output in driver:
                raise CircuitError(
                    f"net {g.output!r} has two drivers: gates {driver[g.output]!r} and {g.name!r}"
                )
            driver[g.output] = g.name
            lo = g.size_min if g.size_min is not None else self.size_min
            hi = g.size_max if g.size_max is not None else self.size_max
            if lo > hi:
                raise CircuitError(f"gate {g.name!r}: size_min {lo} is above size_max {hi}")
            for pin, net in g.inputs.items():
                fanout.setdefault(net, []).append((g.name, pin))
        for net, users in fanout.items():
            if net not in driver and net not in self.inputs:
                gname, pin = users[0]
                raise CircuitError(
                    f"net {net!r} (pin {pin} of gate {gname!r}) has no driver: "
                    "declare it as an input or connect a gate output to it"
                )
        for net in self.outputs:
            if net not in driver:
                raise CircuitError(f"output {net!r} is not driven by any gate")
        for net, gname in driver.items():
            if net not in fanout and net not in self.outputs:
                raise CircuitError(
                    f"gate {gname!r} drives net {net!r}, which has no load: connect it or "
                    "declare it an output with a load"
                )
        for net, port in self.inputs.items():
            users = fanout.get(net, [])
            if port.cap is not None and len(users) != 1:
                raise CircuitError(
                    f"input {net!r}: cap fixes the size of the one gate it drives, but it drives "
                    f"{len(users)} pins; use cap_max to limit the total instead"
                )
            if port.cap is not None and self.gates[users[0][0]].size is not None:
                raise CircuitError(
                    f"input {net!r}: cap fixes the size of gate {users[0][0]!r}, which also has "
                    "a size; give one of the two")
        for net in list(self.wire) + list(self.activity):
            if net not in driver and net not in self.inputs and net not in fanout:
                raise CircuitError(f"net {net!r} has settings but is not used by any gate")
        order = self._topological_order(driver)
        return Structure(driver, fanout, order)

    def _topological_order(self, driver: Mapping[str, str]) -> list[str]:
        indeg = {name: 0 for name in self.gates}
        succ: dict[str, list[str]] = {name: [] for name in self.gates}
        for g in self.gates.values():
            for net in g.inputs.values():
                src = driver.get(net)
                if src is not None:
                    succ[src].append(g.name)
                    indeg[g.name] += 1
        # level by level (each gate after all its drivers, in rounds): gates of one logic
        # level sit together, which keeps the solvers' sparse passes local in memory
        ready = [n for n, d in indeg.items() if d == 0]
        order: list[str] = []
        while ready:
            order.extend(ready)
            after: list[str] = []
            for n in ready:
                for m in succ[n]:
                    indeg[m] -= 1
                    if indeg[m] == 0:
                        after.append(m)
            ready = after
        if len(order) < len(self.gates):
            raise CircuitError("combinational loop through gates " + " -> ".join(
                repr(g) for g in self._find_cycle(driver, {n for n, d in indeg.items() if d > 0})))
        return order

    def _find_cycle(self, driver: Mapping[str, str], left: set[str]) -> list[str]:
        """Walk back through drivers inside the unsorted remainder until a gate repeats."""
        start = min(left)
        seen: dict[str, int] = {}
        path: list[str] = []
        node = start
        while node not in seen:
            seen[node] = len(path)
            path.append(node)
            preds = [driver[n] for n in self.gates[node].inputs.values() if driver.get(n) in left]
            node = min(preds)
        cycle = path[seen[node]:]
        cycle.reverse()
        return cycle + [cycle[0]]

    def summary(self) -> dict[str, object]:
        """Counts of the network for a quick look (validates first)."""
        s = self.validate()
        types: dict[str, int] = {}
        for g in self.gates.values():
            types[g.type] = types.get(g.type, 0) + 1
        return {
            "name": self.name,
            "gates": len(self.gates),
            "inputs": len(self.inputs),
            "outputs": len(self.outputs),
            "nets": len(set(s.driver) | set(s.fanout)),
            "types": dict(sorted(types.items())),
            "fixed_sizes": sum(g.size is not None for g in self.gates.values()),
        }


def chain(
    types: Sequence[str],
    cin: float = 1.0,
    cload: float = 64.0,
    branch: Sequence[float] | None = None,
    side: Sequence[float] | None = None,
    size_min: float | None = None,
    size_max: float = DEFAULT_SIZE_MAX,
    activity: float = DEFAULT_ACTIVITY,
    name: str = "chain",
) -> Circuit:
    """A path of gates, each driving the next gate's first pin; other pins are tied to inputs.

    Parameters
    ----------
    types : gate type names from input to output.
    cin : input capacitance of the path in C_u; it fixes the size of the first gate (even below
        ``size_min``).
    cload : load on the last gate's output in C_u.
    branch : per stage, how many identical copies of the next stage (and of everything after
        it) this stage drives; the classic branching effort b. ``None`` = no branching.
    side : per stage, fixed extra capacitance on its output (wire, side loads) in C_u.
    size_min : lower size bound of the other gates (default: no practical bound, 1e-3, so that
        the chain sizes as the classic method does).

    The gates are ``g1..gN``, the nets ``in``, ``n1..n(N-1)``, ``out``; side pins of multi-input
    gates are separate ideal inputs ``g<i>_<pin>`` (they are off the path and not timed as late).
    """
    types = list(types)
    if not types:
        raise CircuitError("a chain needs at least one gate type")
    n = len(types)
    for label, seq in (("branch", branch), ("side", side)):
        if seq is not None and len(seq) != n:
            raise CircuitError(f"chain: {label} needs one value per stage ({n}), got {len(seq)}")
    c = Circuit(name, size_min=1e-3 if size_min is None else size_min, size_max=size_max,
                activity_default=activity)
    nets = ["in"] + [f"n{i}" for i in range(1, n)] + ["out"]
    c.add_input("in", cap=cin)
    copies = 1.0
    for i, tname in enumerate(types):
        gtype = c.gate_type(tname)
        conn = {gtype.pins[0]: nets[i]}
        for pin in gtype.pins[1:]:
            side_net = f"g{i + 1}_{pin}"
            c.add_input(side_net)
            conn[pin] = side_net
        c.add_gate(f"g{i + 1}", tname, conn, nets[i + 1], copies=copies)
        if branch is not None:
            if not (branch[i] >= 1):
                raise CircuitError(f"chain: branch of stage {i + 1} must be >= 1, got {branch[i]}")
            copies *= float(branch[i])
        if side is not None and side[i]:
            c.set_net(nets[i + 1], wire=side[i])
    if branch is not None and branch[-1] != 1:
        raise CircuitError("chain: the last stage drives the output load; its branch must be 1")
    c.add_output("out", load=cload)
    return c


def _finite(value: float, what: str) -> None:
    if isinstance(value, bool) or not isinstance(value, numbers.Real) or not math.isfinite(value):
        raise CircuitError(f"{what} must be a finite number, got {value!r}")


def _opt_float(value: float | None) -> float | None:
    return None if value is None else float(value)


def _nonnegative(value: float, what: str) -> None:
    _finite(value, what)
    if value < 0:
        raise CircuitError(f"{what} must be >= 0, got {value!r}")


def _positive(value: float, what: str) -> None:
    _finite(value, what)
    if value <= 0:
        raise CircuitError(f"{what} must be > 0, got {value!r}")
