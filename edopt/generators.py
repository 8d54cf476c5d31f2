"""Random layered networks for tests and benchmarks (invented data)."""

from __future__ import annotations

import numpy as np

from .circuit import Circuit

_BY_FANIN = {1: ("inv",), 2: ("nand2", "nor2"), 3: ("nand3", "nor3", "aoi21", "oai21")}
BULK_GATES = 20_000   # above this many gates the random draws are made a level at a time


def random_layered(
    gates: int, seed: int = 0, width: int | None = None, load: float = 8.0,
    name: str | None = None,
) -> Circuit:
    """A random layered network: each gate takes 1-3 inputs from the two previous levels.

    The first level is driven by primary inputs of unit drive; gates that drive nothing become
    outputs with ``load`` C_u. Deterministic for a given ``seed`` (invented data for tests and
    benchmarks). Above ``BULK_GATES`` gates the draws are made a level at a time (the same
    distribution, another random stream), so that a million gates take seconds, not minutes.
    """
    rng = np.random.default_rng(seed)
    width = width or max(4, int(round(np.sqrt(gates))))
    c = Circuit(name or f"random{gates}-s{seed}", size_max=256.0)
    levels: list[list[str]] = []
    inputs = [f"i{k}" for k in range(width)]
    for net in inputs:
        c.add_input(net, drive=1.0)
    if gates > BULK_GATES:
        _bulk_levels(c, rng, gates, width, inputs, levels)
    made = 0 if gates <= BULK_GATES else gates
    while made < gates:
        pool = inputs if not levels else sum(levels[-2:], [])
        level = []
        for _ in range(min(width, gates - made)):
            fanin = int(rng.choice([1, 2, 3], p=[0.25, 0.5, 0.25]))
            fanin = min(fanin, len(pool))
            # draw indices (the same random stream as drawing the nets themselves, without
            # converting the pool to an array for every gate)
            nets = [pool[i] for i in rng.choice(len(pool), size=fanin, replace=False)]
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


def _bulk_levels(c: Circuit, rng: np.random.Generator, gates: int, width: int,
                 inputs: list[str], levels: list[list[str]]) -> None:
    """Draw the gates of ``random_layered`` one level at a time (vectorised draws)."""
    made = 0
    while made < gates:
        pool = inputs if not levels else sum(levels[-2:], [])
        k = min(width, gates - made)
        fanin = np.minimum(rng.choice([1, 2, 3], size=k, p=[0.25, 0.5, 0.25]), len(pool))
        picks = rng.integers(0, len(pool), size=(k, 3))
        used = np.arange(3)[None, :] < fanin[:, None]
        while True:   # redraw the picks of gates that drew one net twice
            a, b, d = picks[:, 0], picks[:, 1], picks[:, 2]
            dup = ((a == b) & used[:, 1]) | (((a == d) | (b == d)) & used[:, 2])
            if not dup.any():
                break
            picks[dup] = rng.integers(0, len(pool), size=(int(dup.sum()), 3))
        kind = rng.integers(0, 12, size=k)   # 12 is a multiple of every type count
        level = []
        for j in range(k):
            f = int(fanin[j])
            types = _BY_FANIN[f]
            out = f"n{made}"
            c.add_gate(f"u{made}", types[kind[j] % len(types)],
                       [pool[i] for i in picks[j, :f]], out)
            level.append(out)
            made += 1
        levels.append(level)
