"""Builders of datapath networks: prefix-adder carry networks and row decoders.

Every gate is a single inverting stage whose inputs are its real logical predecessors, so the
timing and loading structure is that of the logic. ``simulate`` evaluates a network's logic on
many input vectors at once (a check that a builder computes what it claims).

Run ``python -m edopt.adders DIR`` to write the generated demo cases into DIR.
"""

from __future__ import annotations

import sys
from collections.abc import Mapping
from pathlib import Path

import numpy as np

from .circuit import Circuit
from .errors import CircuitError

__all__ = ["PREFIX_KINDS", "decoder", "prefix_adder", "prefix_cells", "simulate", "write_demos"]

PREFIX_KINDS = ("sklansky", "kogge-stone", "brent-kung", "ripple")


# ------------------------------------------------------------------------------ prefix trees
def prefix_cells(bits: int, kind: str = "sklansky") -> list[list[tuple[int, int]]]:
    """The prefix operators of a carry network, level by level.

    Each cell ``(i, m)`` merges the group ending at column ``i`` (its current span) with the
    group ending at column ``m``, whose span is directly below it; after the last level every
    column ``i`` holds the group ``[i:0]``.

    Parameters
    ----------
    bits : adder width (>= 2).
    kind : ``"sklansky"``, ``"kogge-stone"``, ``"brent-kung"`` or ``"ripple"``.

    Raises
    ------
    CircuitError : unknown kind or width below 2.

    Examples
    --------
    >>> prefix_cells(4, "kogge-stone")
    [[(1, 0), (2, 1), (3, 2)], [(2, 0), (3, 1)]]
    """
    if not isinstance(bits, int) or bits < 2:
        raise CircuitError(f"a prefix adder needs an integer width >= 2, got {bits!r}")
    key = kind.lower().replace("_", "-")
    depth = (bits - 1).bit_length()            # ceil(log2 bits)
    levels: list[list[tuple[int, int]]] = []
    if key == "ripple":
        levels = [[(i, i - 1)] for i in range(1, bits)]
    elif key == "kogge-stone":
        levels = [[(i, i - 2**k) for i in range(2**k, bits)] for k in range(depth)]
    elif key == "sklansky":
        for k in range(depth):
            level = []
            for i in range(bits):
                if i >> k & 1:
                    level.append((i, (i >> k << k) - 1))
            levels.append(level)
    elif key == "brent-kung":
        for k in range(depth):
            span = 2**k
            levels.append([(i, i - span) for i in range(bits) if (i + 1) % (2 * span) == 0])
        for k in range(depth - 2, -1, -1):
            span = 2**k
            levels.append([(i, i - span) for i in range(2 * span, bits)
                           if (i + 1) % (2 * span) == span])
    else:
        raise CircuitError(f"unknown prefix network {kind!r}; known: {', '.join(PREFIX_KINDS)}")
    levels = [lv for lv in levels if lv]
    low = list(range(bits))
    for level in levels:
        new = low[:]
        for i, m in level:
            if m != low[i] - 1:
                raise CircuitError(f"{kind}: cell ({i}, {m}) does not meet the span [{i}:{low[i]}]")
            new[i] = low[m]
        low = new
    if any(low):
        raise CircuitError(f"{kind} network of {bits} bits leaves columns incomplete")
    return levels


class _Net:
    """Both polarities of logical signals, with inverters added on demand."""

    def __init__(self, c: Circuit) -> None:
        self.c = c
        self.nets: dict[str, dict[bool, str]] = {}   # signal -> {positive?: net}
        self.depth: dict[str, int] = {}              # net -> stages from the inputs
        self.column: dict[str, int] = {}             # net -> bit column of its driver
        self.names: dict[tuple[str, bool], str] = {}  # fixed net names of some signals

    def source(self, signal: str, positive: bool, net: str, column: int) -> None:
        self.nets.setdefault(signal, {})[positive] = net
        self.depth[net] = 0
        self.column[net] = column

    def gate(self, signal: str, positive: bool, gtype: str, pins: list[str], column: int,
             net: str | None = None) -> str:
        default = signal if positive else f"{signal}_n"
        net = net or self.names.get((signal, positive), default)
        self.c.add_gate(net, gtype, pins, net)
        self.nets.setdefault(signal, {})[positive] = net
        self.depth[net] = 1 + max(self.depth[p] for p in pins)
        self.column[net] = column
        return net

    def get(self, signal: str, positive: bool) -> str:
        have = self.nets[signal]
        if positive not in have:
            src = have[not positive]
            self.gate(signal, positive, "inv", [src], self.column[src])
        return have[positive]

    def cost(self, signal: str, positive: bool) -> int:
        have = self.nets[signal]
        if positive in have:
            return self.depth[have[positive]]
        return self.depth[have[not positive]] + 1


def prefix_adder(
    bits: int = 32,
    kind: str = "sklansky",
    load: float = 8.0,
    drive: float | None = 4.0,
    wire_per_bit: float = 0.0,
    name: str | None = None,
) -> Circuit:
    """A ``bits``-wide adder (no carry-in) with a parallel-prefix carry network.

    Structure: per bit ``nand2``/``nor2`` give inverted generate and (OR-)propagate, ``xor2``
    the half sum; each prefix cell is an ``aoi21`` + ``nand2`` on true inputs or an
    ``oai21`` + ``nor2`` on inverted ones (the polarity flips at each cell), its propagate
    half omitted where the group reaches bit 0; an ``inv`` is added where a cell's operands
    arrive in different polarities; the sum is ``xor2`` or ``xnor2`` of the half sum and the
    carry in whichever polarity the carry has.

    Parameters
    ----------
    bits : width; inputs ``a0..``, ``b0..``, outputs ``s0..`` and ``cout``.
    kind : prefix network, see `prefix_cells`.
    load : load of each output in C_u.
    drive : size of the inverter that drives each input (None = ideal inputs).
    wire_per_bit : wire capacitance per bit pitch a net spans to its farthest load, in C_u.
    name : circuit name (default ``"<kind><bits>"``).

    Examples
    --------
    >>> c = prefix_adder(8, "ripple")
    >>> sum(g.type in ("aoi21", "oai21") for g in c.gates.values())
    7
    """
    levels = prefix_cells(bits, kind)
    c = Circuit(name or f"{kind.lower()}{bits}", size_max=1000.0)
    s = _Net(c)
    s.names[(f"G{bits - 1}_0", True)] = "cout"
    for i in range(bits):
        for x in "ab":
            c.add_input(f"{x}{i}", drive=drive)
            s.source(f"{x}{i}", True, f"{x}{i}", i)
    for i in range(bits):
        ab = [f"a{i}", f"b{i}"]
        s.gate(f"G{i}_{i}", False, "nand2", ab, i)
        if i > 0:
            s.gate(f"P{i}_{i}", False, "nor2", ab, i)
        s.gate(f"t{i}", True, "xor2", ab, i, net="s0" if i == 0 else None)
    low = list(range(bits))
    for level in levels:
        new = low[:]
        for i, m in level:
            hi, lo, j = f"{i}_{low[i]}", f"{m}_{low[m]}", low[m]
            operands = [f"G{hi}", f"P{hi}", f"G{lo}"] + ([f"P{lo}"] if j > 0 else [])
            positive = min((True, False), key=lambda q: (
                max(s.cost(o, q) for o in operands),
                sum(q not in s.nets[o] for o in operands),
                q != (True in s.nets[f"G{lo}"])))
            gh, ph, gl = (s.get(o, positive) for o in operands[:3])
            out = f"{i}_{j}"
            s.gate(f"G{out}", not positive, "aoi21" if positive else "oai21", [ph, gl, gh], i)
            if j > 0:
                pl = s.get(f"P{lo}", positive)
                s.gate(f"P{out}", not positive, "nand2" if positive else "nor2", [ph, pl], i)
            new[i] = j
        low = new
    for i in range(1, bits):
        carry = f"G{i - 1}_0"
        positive = s.cost(carry, True) <= s.cost(carry, False) and True in s.nets[carry]
        net = s.nets[carry][positive]
        s.gate(f"s{i}", True, "xor2" if positive else "xnor2", [f"t{i}", net], i, net=f"s{i}")
    s.get(f"G{bits - 1}_0", True)
    for i in range(bits):
        c.add_output(f"s{i}", load=load)
    c.add_output("cout", load=load)
    if wire_per_bit:
        _span_wires(c, s.column, wire_per_bit)
    return c


def _span_wires(c: Circuit, column: Mapping[str, int], per_bit: float) -> None:
    """Wire on each net proportional to the bit distance to its farthest load."""
    span: dict[str, int] = {}
    for g in c.gates.values():
        for net in g.inputs.values():
            d = abs(column[g.name] - column[net])
            span[net] = max(span.get(net, 0), d)
    for net, d in span.items():
        if d:
            c.set_net(net, wire=per_bit * d)


# ---------------------------------------------------------------------------------- decoder
def decoder(
    bits: int = 4,
    wordline_load: float = 64.0,
    wire: float = 8.0,
    drive: float | None = 4.0,
    name: str | None = None,
) -> Circuit:
    """A row decoder: ``bits`` address inputs to ``2**bits`` one-hot word lines.

    Address buffers make both polarities (``inv`` to the complement, a second ``inv`` to the
    buffered true rail). For 2-3 bits each row is a ``nand<bits>`` and an ``inv`` driver; for
    4-9 bits the address is split into groups of 2 (one of 3 when odd), each group is
    predecoded (``nand`` + ``inv`` per value) onto lines that run along the array, and each row
    is a ``nand`` of one line per group and an ``inv`` driver.

    Parameters
    ----------
    bits : address width, 2..9.
    wordline_load : load of each word line in C_u (gates of the row plus its wire).
    wire : wire capacitance of each predecode line (and, for 2-3 bits, of each address rail),
        in C_u.
    drive : size of the inverter driving each address input (None = ideal).
    name : circuit name (default ``"decoder<bits>x<rows>"``).

    Examples
    --------
    >>> len(decoder(4).outputs)
    16
    """
    if not isinstance(bits, int) or not 2 <= bits <= 9:
        raise CircuitError(f"decoder: address width must be an integer 2..9, got {bits!r}")
    rows = 2**bits
    c = Circuit(name or f"decoder{bits}x{rows}", size_max=1000.0)
    rail: dict[tuple[int, int], str] = {}
    for i in range(bits):
        c.add_input(f"a{i}", drive=drive)
        c.add_gate(f"ainv{i}", "inv", [f"a{i}"], f"a{i}_n")
        c.add_gate(f"abuf{i}", "inv", [f"a{i}_n"], f"a{i}_t")
        rail[(i, 0)], rail[(i, 1)] = f"a{i}_n", f"a{i}_t"
    if bits <= 3:
        groups = [list(range(bits))]
        lines = {(0, v): [rail[(i, v >> i & 1)] for i in range(bits)] for v in range(rows)}
        for net in rail.values():
            c.set_net(net, wire=wire)
    else:
        sizes = [2] * (bits // 2 - 1) + [bits - 2 * (bits // 2 - 1)]
        groups, start = [], 0
        for n in sizes:
            groups.append(list(range(start, start + n)))
            start += n
        lines = {}
        for gi, group in enumerate(groups):
            for v in range(2 ** len(group)):
                lits = [rail[(bit, v >> k & 1)] for k, bit in enumerate(group)]
                c.add_gate(f"pnand{gi}_{v}", f"nand{len(group)}", lits, f"pd{gi}_{v}_n")
                c.add_gate(f"pdrv{gi}_{v}", "inv", [f"pd{gi}_{v}_n"], f"pd{gi}_{v}")
                c.set_net(f"pd{gi}_{v}", wire=wire)
                lines[(gi, v)] = [f"pd{gi}_{v}"]
    for r in range(rows):
        if len(groups) == 1:
            nets = lines[(0, r)]
        else:
            nets, shift = [], 0
            for gi, group in enumerate(groups):
                nets += lines[(gi, r >> shift & (2 ** len(group) - 1))]
                shift += len(group)
        if len(nets) > 4:
            raise CircuitError(f"decoder: {len(nets)}-input row gate; use at most 4 groups")
        c.add_gate(f"row{r}", f"nand{len(nets)}", nets, f"wl{r}_n")
        c.add_gate(f"wdrv{r}", "inv", [f"wl{r}_n"], f"wl{r}")
        c.add_output(f"wl{r}", load=wordline_load)
    return c


# ------------------------------------------------------------------------------- simulation
def simulate(circuit: Circuit, inputs: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    """Logic values of every net for a batch of input vectors.

    Parameters
    ----------
    circuit : a network of gate types with pull-down expressions.
    inputs : primary input net -> boolean array (one entry per vector, all the same length).

    Returns
    -------
    dict : net -> boolean array, for the inputs and every gate output.

    Each gate type's truth table is built once with `GateType.output`; gates are then evaluated
    in topological order, each on all vectors at once.
    """
    st = circuit.validate()
    missing = [net for net in circuit.inputs if net not in inputs]
    if missing:
        raise CircuitError(f"simulate: no values for input(s) {', '.join(missing)}")
    values = {net: np.asarray(v, dtype=bool) for net, v in inputs.items()}
    tables: dict[str, np.ndarray] = {}
    for gname in st.order:
        g = circuit.gates[gname]
        gtype = circuit.gate_type(g.type)
        if g.type not in tables:
            k = len(gtype.pins)
            tables[g.type] = np.array([
                gtype.output({p: bool(row >> j & 1) for j, p in enumerate(gtype.pins)})
                for row in range(2**k)
            ])
        index = sum(values[g.inputs[p]].astype(np.int64) << j for j, p in enumerate(gtype.pins))
        values[g.output] = tables[g.type][index]
    return values


# ------------------------------------------------------------------------------- demo cases
def write_demos(directory: str | Path) -> list[Path]:
    """Write the generated demo cases (decoder, carry network) into ``directory``."""
    from .formats.case import write_case

    directory = Path(directory)
    demos = [
        ("decoder.toml", decoder(4, wordline_load=64.0, wire=8.0, drive=4.0), "1.3x",
         "4-to-16 row decoder: two 2-to-4 predecoders, 16 word-line drivers (invented loads)",
         "decoder(4, wordline_load=64.0, wire=8.0, drive=4.0)"),
        ("carry_network.toml",
         prefix_adder(32, "sklansky", load=8.0, drive=4.0, wire_per_bit=0.25), "1.2x",
         "32-bit Sklansky prefix adder, single inverting stages (invented loads and wires)",
         'prefix_adder(32, "sklansky", load=8.0, drive=4.0, wire_per_bit=0.25)'),
    ]
    written = []
    for fname, circuit, target, text, call in demos:
        path = directory / fname
        write_case(circuit, None, path, target=target, description=text,
                   header=f"Generated by edopt.adders.{call}.\n"
                   "Do not edit; regenerate with: python -m edopt.adders cases")
        written.append(path)
    return written


if __name__ == "__main__":  # pragma: no cover
    for p in write_demos(sys.argv[1] if len(sys.argv) > 1 else "cases"):
        print(p)
