"""Random layered networks for tests and benchmarks (invented data)."""

from __future__ import annotations

import numpy as np

from .circuit import Circuit

_BY_FANIN = {1: ("inv",), 2: ("nand2", "nor2"), 3: ("nand3", "nor3", "aoi21", "oai21")}


def random_layered(
    gates: int, seed: int = 0, width: int | None = None, load: float = 8.0,
    name: str | None = None,
) -> Circuit:
    """A random layered network: each gate takes 1-3 inputs from the two previous levels.

    The first level is driven by primary inputs of unit drive; gates that drive nothing become
    outputs with ``load`` C_u. Deterministic for a given ``seed`` (invented data for tests and
    benchmarks).
    """
    rng = np.random.default_rng(seed)
    width = width or max(4, int(round(np.sqrt(gates))))
    c = Circuit(name or f"random{gates}-s{seed}", size_max=256.0)
    levels: list[list[str]] = []
    inputs = [f"i{k}" for k in range(width)]
    for net in inputs:
        c.add_input(net, drive=1.0)
    made = 0
    while made < gates:
        pool = inputs if not levels else sum(levels[-2:], [])
        level = []
        for _ in range(min(width, gates - made)):
            fanin = int(rng.choice([1, 2, 3], p=[0.25, 0.5, 0.25]))
            fanin = min(fanin, len(pool))
            nets = list(rng.choice(pool, size=fanin, replace=False))
            gtype = str(rng.choice(_BY_FANIN[fanin]))
            out = f"n{made}"
            c.add_gate(f"u{made}", gtype, nets, out)
            level.append(out)
            made += 1
        levels.append(level)
    used = {net for g in c.gates.values() for net in g.inputs.values()}
    for net in inputs:
        if net not in used:
            del c.inputs[net]
    for g in c.gates.values():
        if g.output not in used:
            c.add_output(g.output, load=load)
    return c
