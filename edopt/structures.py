"""Standard structures by name: ``generate("kogge-stone", bits=32)`` returns a Circuit.

Every structure is built from single inverting stages of the built-in library, so logical
effort applies to each gate; each can be written as a case file with
`edopt.formats.case.write_case`. Names (case-insensitive; ``_`` or a space may replace ``-``):

============================ ================================================================
``inverter-chain``           ``stages`` inverters from an input of ``cin`` C_u to ``load``
``buffer-chain``             ``buffers`` buffers (two inverters each), ``cin`` to ``load``
``fan-out-tree``             ``levels`` levels of inverters, each driving ``fanout`` more
``decoder``                  ``bits``-to-2^bits row decoder with word-line loads
``mux-tree``                 ``inputs``:1 multiplexer tree of inverting 2:1 multiplexers
``parity-tree``              XOR tree over ``bits`` inputs
``ripple-carry``             ``bits``-wide adder with a serial carry chain
``kogge-stone``              ``bits``-wide Kogge-Stone prefix adder
``brent-kung``               ``bits``-wide Brent-Kung prefix adder
``sklansky``                 ``bits``-wide Sklansky prefix adder
``array-multiplier``         ``bits`` x ``bits_b`` unsigned array (Braun) multiplier
``random-layered``           random layered network of ``gates`` gates with a ``seed``
============================ ================================================================

Loads are in C_u, drives are sizes (x) of the inverter driving each input (None = ideal).
"""

from __future__ import annotations

import inspect
from collections.abc import Callable

from .adders import decoder, prefix_adder
from .circuit import Circuit, chain
from .errors import CircuitError
from .generators import random_layered

__all__ = [
    "STRUCTURES",
    "array_multiplier",
    "buffer_chain",
    "describe",
    "fanout_tree",
    "generate",
    "inverter_chain",
    "mux_tree",
    "parity_tree",
    "structure_names",
]


def _count(value: object, what: str, low: int, high: int | None = None) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or value < low or (
            high is not None and value > high):
        span = f"{low}..{high}" if high is not None else f">= {low}"
        raise CircuitError(f"{what} must be an integer {span}, got {value!r}")
    return value


def inverter_chain(stages: int = 4, cin: float = 1.0, load: float = 64.0,
                   name: str | None = None) -> Circuit:
    """``stages`` inverters in series: input ``in`` of ``cin`` C_u, output ``out`` with ``load``.

    Gates ``g1..gN`` (see `edopt.circuit.chain`).
    """
    _count(stages, "inverter-chain: stages", 1)
    return chain(["inv"] * stages, cin=cin, cload=load, name=name or f"inverter-chain{stages}")


def buffer_chain(buffers: int = 2, cin: float = 1.0, load: float = 64.0,
                 name: str | None = None) -> Circuit:
    """``buffers`` non-inverting buffers in series, each written as two inverters (gates
    ``g1..g(2N)``), so that every stage is sized on its own."""
    _count(buffers, "buffer-chain: buffers", 1)
    return chain(["inv"] * (2 * buffers), cin=cin, cload=load,
                 name=name or f"buffer-chain{buffers}")


def fanout_tree(levels: int = 3, fanout: int = 4, load: float = 4.0, drive: float | None = 1.0,
                name: str | None = None) -> Circuit:
    """A tree of inverters: level 1 is one inverter, each inverter of level k drives
    ``fanout`` inverters of level k+1; the ``fanout**(levels-1)`` leaves drive ``load`` each.

    Input ``in`` (driven by an inverter of size ``drive``), gates ``t<level>_<k>``, outputs
    ``out<k>`` (the outputs of the leaves).
    """
    _count(levels, "fan-out-tree: levels", 1, 12)
    _count(fanout, "fan-out-tree: fanout", 1, 64)
    if fanout ** (levels - 1) > 200_000:
        raise CircuitError("fan-out-tree: more than 200000 leaves; use fewer levels or fan-out")
    c = Circuit(name or f"fan-out-tree{levels}x{fanout}", size_max=1000.0)
    c.add_input("in", drive=drive)
    parents = ["in"]
    for level in range(1, levels + 1):
        last = level == levels
        nets = []
        for k in range(len(parents) * (fanout if level > 1 else 1)):
            src = parents[k // fanout] if level > 1 else parents[0]
            out = f"out{k}" if last else f"t{level}_{k}"
            c.add_gate(f"t{level}_{k}", "inv", [src], out)
            nets.append(out)
        parents = nets
    for net in parents:
        c.add_output(net, load=load)
    return c


def mux_tree(inputs: int = 8, load: float = 8.0, drive: float | None = 4.0,
             name: str | None = None) -> Circuit:
    """An ``inputs``:1 multiplexer (``inputs`` a power of two) as a tree of ``mux2`` stages.

    Data ``d0..d(n-1)``, selects ``s0`` (least significant, first level) to ``s(k-1)``, output
    ``y = d[s]``. ``mux2`` is inverting, NOT(S ? A : B), so the data polarity alternates from
    level to level; an ``inv`` restores it after an odd number of levels.
    """
    _count(inputs, "mux-tree: inputs", 2, 1 << 16)
    k = inputs.bit_length() - 1
    if 1 << k != inputs:
        raise CircuitError(f"mux-tree: inputs must be a power of two, got {inputs}")
    c = Circuit(name or f"mux-tree{inputs}", size_max=1000.0)
    nets = [f"d{i}" for i in range(inputs)]
    for net in nets:
        c.add_input(net, drive=drive)
    for level in range(k):
        c.add_input(f"s{level}", drive=drive)
        last = level == k - 1 and k % 2 == 0
        nxt = []
        for j in range(len(nets) // 2):
            out = "y" if last else f"m{level}_{j}"
            # S = 1 selects the odd (higher) input of the pair
            c.add_gate(f"m{level}_{j}", "mux2", [nets[2 * j + 1], nets[2 * j], f"s{level}"], out)
            nxt.append(out)
        nets = nxt
    if k % 2 == 1:
        c.add_gate("y", "inv", [nets[0]], "y")
    c.add_output("y", load=load)
    return c


def parity_tree(bits: int = 8, load: float = 8.0, drive: float | None = 4.0,
                name: str | None = None) -> Circuit:
    """Parity of ``bits`` inputs ``x0..`` as a balanced tree of ``xor2`` gates; output ``p``."""
    _count(bits, "parity-tree: bits", 2, 1 << 17)
    c = Circuit(name or f"parity-tree{bits}", size_max=1000.0)
    nets = [f"x{i}" for i in range(bits)]
    for net in nets:
        c.add_input(net, drive=drive)
    level = 0
    while len(nets) > 1:
        nxt = []
        for j in range(0, len(nets) - 1, 2):
            out = "p" if len(nets) == 2 else f"x{level}_{j // 2}"
            c.add_gate(out, "xor2", [nets[j], nets[j + 1]], out)
            nxt.append(out)
        if len(nets) % 2:
            nxt.append(nets[-1])
        nets = nxt
        level += 1
    c.add_output("p", load=load)
    return c


def array_multiplier(bits: int = 4, bits_b: int | None = None, load: float = 8.0,
                     drive: float | None = 4.0, name: str | None = None) -> Circuit:
    """Unsigned ``bits`` x ``bits_b`` array (Braun) multiplier.

    Inputs ``a0..``, ``b0..``; outputs ``p0..p(n+m-1)``. Partial products are ``nor2`` of the
    inverted operand bits (one ``inv`` per input bit); rows of carry-save adders accumulate them
    and a ripple adder finishes the top half. A full adder is ``t = xor2(x, y)``,
    ``sum = xor2(t, z)``, ``carry = nand2(nand2(x, y), nand2(t, z))``; a half adder is
    ``xor2`` for the sum and ``nand2`` + ``inv`` for the carry.
    """
    n = _count(bits, "array-multiplier: bits", 2, 64)
    m = n if bits_b is None else _count(bits_b, "array-multiplier: bits_b", 2, 64)
    c = Circuit(name or f"array-multiplier{n}x{m}", size_max=1000.0)
    for x, count in (("a", n), ("b", m)):
        for i in range(count):
            c.add_input(f"{x}{i}", drive=drive)
            c.add_gate(f"{x}{i}_n", "inv", [f"{x}{i}"], f"{x}{i}_n")

    def pp(i: int, j: int) -> str:
        net = f"pp{i}_{j}"
        c.add_gate(net, "nor2", [f"a{i}_n", f"b{j}_n"], net)
        return net

    def add(ins: list[str], tag: str, carry: bool = True) -> tuple[str, str | None]:
        if len(ins) == 1:
            return ins[0], None
        if len(ins) == 2:
            x, y = ins
            c.add_gate(f"{tag}_s", "xor2", [x, y], f"{tag}_s")
            if not carry:
                return f"{tag}_s", None
            c.add_gate(f"{tag}_g", "nand2", [x, y], f"{tag}_g")
            c.add_gate(f"{tag}_c", "inv", [f"{tag}_g"], f"{tag}_c")
            return f"{tag}_s", f"{tag}_c"
        x, y, z = ins
        c.add_gate(f"{tag}_t", "xor2", [x, y], f"{tag}_t")
        c.add_gate(f"{tag}_s", "xor2", [f"{tag}_t", z], f"{tag}_s")
        if not carry:
            return f"{tag}_s", None
        c.add_gate(f"{tag}_g", "nand2", [x, y], f"{tag}_g")
        c.add_gate(f"{tag}_h", "nand2", [f"{tag}_t", z], f"{tag}_h")
        c.add_gate(f"{tag}_c", "nand2", [f"{tag}_g", f"{tag}_h"], f"{tag}_c")
        return f"{tag}_s", f"{tag}_c"

    sums = [pp(i, 0) for i in range(n)]            # weights i + j - 1 after row j - 1
    carries: list[str | None] = [None] * n         # weights i + j
    product: list[str] = []
    for j in range(1, m):
        product.append(sums[0])
        new_s, new_c = [], []
        for i in range(n):
            ins = [pp(i, j)] + ([sums[i + 1]] if i + 1 < n else [])
            ins += [carries[i]] if carries[i] is not None else []
            s, cy = add(ins, f"r{j}_{i}")
            new_s.append(s)
            new_c.append(cy)
        sums, carries = new_s, new_c
    product.append(sums[0])
    ripple: str | None = None
    for k in range(n):
        ins = ([sums[k + 1]] if k + 1 < n else []) + [x for x in (carries[k], ripple) if x]
        s, ripple = add(ins, f"f{k}", carry=k < n - 1)
        product.append(s)
    rename = {net: f"p{k}" for k, net in enumerate(product)}
    for g in c.gates.values():
        g.inputs = {p: rename.get(v, v) for p, v in g.inputs.items()}
        g.output = rename.get(g.output, g.output)
    for k in range(len(product)):
        c.add_output(f"p{k}", load=load)
    return c


def _ripple(bits: int = 8, load: float = 8.0, drive: float | None = 4.0,
            wire_per_bit: float = 0.0, name: str | None = None) -> Circuit:
    """``bits``-wide adder with a serial carry (prefix cells in a chain); inputs ``a0..``,
    ``b0..``, outputs ``s0..`` and ``cout`` (see `edopt.adders.prefix_adder`)."""
    return prefix_adder(bits, "ripple", load, drive, wire_per_bit, name or f"ripple-carry{bits}")


def _prefix(kind: str, label: str) -> Callable[..., Circuit]:
    def build(bits: int = 32, load: float = 8.0, drive: float | None = 4.0,
              wire_per_bit: float = 0.0, name: str | None = None) -> Circuit:
        return prefix_adder(bits, kind, load, drive, wire_per_bit, name or f"{kind}{bits}")

    build.__doc__ = (f"``bits``-wide {label} prefix adder; inputs ``a0..``, ``b0..``, outputs "
                     "``s0..`` and ``cout`` (see `edopt.adders.prefix_adder`).")
    build.__name__ = kind.replace("-", "_")
    return build


def _decoder(bits: int = 4, wordline_load: float = 64.0, wire: float = 8.0,
             drive: float | None = 4.0, name: str | None = None) -> Circuit:
    """``bits``-to-``2**bits`` row decoder; inputs ``a0..``, word lines ``wl0..`` (see
    `edopt.adders.decoder`)."""
    return decoder(bits, wordline_load, wire, drive, name)


def _random(gates: int = 1000, seed: int = 0, width: int | None = None, load: float = 8.0,
            name: str | None = None) -> Circuit:
    """Random layered network (see `edopt.generators.random_layered`): each gate takes 1-3
    inputs from the two previous levels, so fan-outs spread around two per net; deterministic
    for a given ``seed``."""
    _count(gates, "random-layered: gates", 1)
    _count(seed, "random-layered: seed", 0)
    return random_layered(gates, seed=seed, width=width, load=load, name=name)


#: structure name -> builder
STRUCTURES: dict[str, Callable[..., Circuit]] = {
    "inverter-chain": inverter_chain,
    "buffer-chain": buffer_chain,
    "fan-out-tree": fanout_tree,
    "decoder": _decoder,
    "mux-tree": mux_tree,
    "parity-tree": parity_tree,
    "ripple-carry": _ripple,
    "kogge-stone": _prefix("kogge-stone", "Kogge-Stone"),
    "brent-kung": _prefix("brent-kung", "Brent-Kung"),
    "sklansky": _prefix("sklansky", "Sklansky"),
    "array-multiplier": array_multiplier,
    "random-layered": _random,
}
_ALIASES = {"fanout-tree": "fan-out-tree", "ripple": "ripple-carry", "multiplier":
            "array-multiplier", "random": "random-layered"}


def structure_names() -> list[str]:
    """The documented structure names, in the order of the table above."""
    return list(STRUCTURES)


def _key(name: str) -> str:
    if not isinstance(name, str):
        raise CircuitError(f"structure name must be a string, got {name!r}")
    key = "-".join(name.strip().lower().replace("_", " ").replace("-", " ").split())
    key = _ALIASES.get(key, key)
    if key not in STRUCTURES:
        raise CircuitError(f"unknown structure {name!r}; known: {', '.join(STRUCTURES)}")
    return key


def describe(name: str) -> str:
    """One line on a structure and its parameters with their defaults."""
    build = STRUCTURES[_key(name)]
    params = ", ".join(f"{p.name}={p.default!r}" for p in
                       inspect.signature(build).parameters.values())
    doc = " ".join((build.__doc__ or "").split())
    return f"{_key(name)}({params}): {doc}"


def generate(name: str, **params: object) -> Circuit:
    """Build a standard structure by name (see the module docstring for names and parameters).

    Examples
    --------
    >>> c = generate("kogge-stone", bits=8)
    >>> len(c.outputs)
    9
    >>> generate("mux_tree", inputs=4).outputs["y"].load
    8.0
    """
    key = _key(name)
    build = STRUCTURES[key]
    accepted = inspect.signature(build).parameters
    bad = [p for p in params if p not in accepted]
    if bad:
        raise CircuitError(f"{key}: unknown parameter(s) {', '.join(bad)}; accepted: "
                           f"{', '.join(accepted)}")
    return build(**params)
