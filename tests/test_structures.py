"""Tests of the standard-structure generators (edopt.structures.generate).

Sources of expected values:
- "integer arithmetic": Python's ``int`` operations are the reference for adders, the
  multiplier, the multiplexer, the parity tree and the decoder;
- "logical effort (from memory)": the minimum delay of an inverter chain of N stages with path
  effort F is N (F^(1/N) + p_inv) tau (Sutherland, Sproull and Harris, *Logical Effort*, 1999);
- "first principles": gate and output counts derived from each structure's construction.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from edopt.adders import simulate
from edopt.errors import CircuitError
from edopt.formats.case import load_case, write_case
from edopt.sizing import size
from edopt.structures import STRUCTURES, describe, generate, structure_names
from edopt.technology import technology

DOCS = Path(__file__).resolve().parent.parent / "docs" / "verilog.md"
SEED = 7


def bits_of(name: str, word: np.ndarray, n: int) -> dict[str, np.ndarray]:
    return {f"{name}{i}": ((word >> i) & 1).astype(bool) for i in range(n)}


def word(values: dict[str, np.ndarray], names: list[str]) -> np.ndarray:
    return sum(values[n].astype(np.int64) << i for i, n in enumerate(names))


def operands(bits: int, n: int, seed: int) -> np.ndarray:
    w = np.random.default_rng(seed).integers(0, 2**bits, size=n, dtype=np.int64)
    w[:3] = [2**bits - 1, 0, 1]        # carry-chain extremes
    return w


@pytest.mark.parametrize("name", ["ripple-carry", "kogge-stone", "brent-kung", "sklansky"])
@pytest.mark.parametrize("bits", [2, 5, 12, 32])
def test_adders_add(name: str, bits: int) -> None:
    c = generate(name, bits=bits)
    a, b = operands(bits, 300, SEED), operands(bits, 300, SEED + 1)[::-1].copy()
    out = simulate(c, bits_of("a", a, bits) | bits_of("b", b, bits))
    got = word(out, [f"s{i}" for i in range(bits)] + ["cout"])
    assert np.array_equal(got, a + b)                 # integer arithmetic


@pytest.mark.parametrize("n, m", [(2, 2), (3, 5), (4, 4), (6, 3), (8, 8)])
def test_array_multiplier_multiplies(n: int, m: int) -> None:
    c = generate("array-multiplier", bits=n, bits_b=m)
    if n * m <= 16:   # exhaustive
        a, b = (x.ravel() for x in np.meshgrid(np.arange(2**n), np.arange(2**m)))
    else:
        a, b = operands(n, 500, SEED), operands(m, 500, SEED + 2)
    out = simulate(c, bits_of("a", a, n) | bits_of("b", b, m))
    got = word(out, [f"p{k}" for k in range(n + m)])
    assert np.array_equal(got, a * b)                 # integer arithmetic
    assert len(c.outputs) == n + m


@pytest.mark.parametrize("inputs", [2, 4, 8, 32])
def test_mux_tree_selects(inputs: int) -> None:
    c = generate("mux-tree", inputs=inputs)
    k = inputs.bit_length() - 1
    rng = np.random.default_rng(SEED)
    data = rng.integers(0, 2, size=(inputs, 400)).astype(bool)
    sel = rng.integers(0, inputs, size=400)
    values = {f"d{i}": data[i] for i in range(inputs)} | bits_of("s", sel, k)
    out = simulate(c, values)
    assert np.array_equal(out["y"], data[sel, np.arange(400)])     # y = d[s]
    assert sum(g.type == "mux2" for g in c.gates.values()) == inputs - 1  # first principles


@pytest.mark.parametrize("bits", [2, 3, 8, 13])
def test_parity_tree(bits: int) -> None:
    c = generate("parity-tree", bits=bits)
    x = operands(bits, 300, SEED)
    out = simulate(c, bits_of("x", x, bits))
    want = np.array([bin(int(v)).count("1") % 2 for v in x], dtype=bool)   # integer arithmetic
    assert np.array_equal(out["p"], want)
    assert len(c.gates) == bits - 1                    # first principles: a binary tree


def test_decoder_is_one_hot() -> None:
    c = generate("decoder", bits=4)
    addr = np.arange(16)
    out = simulate(c, bits_of("a", addr, 4))
    lines = np.array([out[f"wl{r}"] for r in range(16)])
    assert np.array_equal(lines, np.eye(16, dtype=bool))          # word line r <=> address r


def test_fan_out_tree_and_chains() -> None:
    t = generate("fan-out-tree", levels=3, fanout=4)
    assert len(t.gates) == 1 + 4 + 16 and len(t.outputs) == 16   # first principles
    out = simulate(t, {"in": np.array([False, True])})
    for net in t.outputs:                                          # three inversions
        assert np.array_equal(out[net], [True, False])
    inv = generate("inverter-chain", stages=3)
    buf = generate("buffer-chain", buffers=2)
    assert len(buf.gates) == 4
    assert np.array_equal(simulate(inv, {"in": np.array([False, True])})["out"], [True, False])
    assert np.array_equal(simulate(buf, {"in": np.array([False, True])})["out"], [False, True])


def test_inverter_chain_minimum_delay() -> None:
    """Logical effort (from memory): D = N (F^(1/N) + p_inv) tau for a chain of inverters."""
    tech = technology("generic")
    stages, cin, load = 3, 1.0, 64.0
    r = size(generate("inverter-chain", stages=stages, cin=cin, load=load), tech)
    want = stages * ((load / cin) ** (1 / stages) + tech.p_inv) * tech.tau_ps
    assert r.delay_ps == pytest.approx(want, rel=1e-3)


def test_random_layered_is_seeded() -> None:
    a = generate("random-layered", gates=300, seed=3)
    b = generate("random-layered", gates=300, seed=3)
    c = generate("random-layered", gates=300, seed=4)
    assert a.gates == b.gates and a.gates != c.gates
    assert len(a.gates) == 300
    a.validate()


@pytest.mark.parametrize("name", structure_names())
def test_every_structure_is_a_valid_case(name: str, tmp_path: Path) -> None:
    small = {"kogge-stone": {"bits": 8}, "brent-kung": {"bits": 8}, "sklansky": {"bits": 8},
             "random-layered": {"gates": 200}}
    c = generate(name, **small.get(name, {}))
    c.validate()
    path = tmp_path / "case.toml"
    write_case(c, None, path, description=f"generated {name}")
    back = load_case(path).circuit
    assert back.gates == c.gates and back.inputs == c.inputs and back.outputs == c.outputs


def test_names_are_documented_and_normalised() -> None:
    docs = DOCS.read_text()
    for name in structure_names():
        assert f"`{name}`" in docs, name
        assert name in describe(name)
    assert generate("Kogge_Stone", bits=4).gates == generate("kogge-stone", bits=4).gates
    assert generate("fanout tree").gates == generate("fan-out-tree").gates
    assert set(STRUCTURES) == set(structure_names())


@pytest.mark.parametrize("name, params, words", [
    ("kogge-stoned", {}, "unknown structure"),
    ("kogge-stone", {"width": 8}, "unknown parameter(s) width"),
    ("mux-tree", {"inputs": 6}, "power of two"),
    ("array-multiplier", {"bits": 1}, "bits must be an integer"),
    ("inverter-chain", {"stages": 0}, "stages must be an integer"),
    ("fan-out-tree", {"levels": 2.5}, "levels must be an integer"),
])
def test_bad_requests_say_what_to_fix(name: str, params: dict, words: str) -> None:
    with pytest.raises(CircuitError, match=words.replace("(", r"\(").replace(")", r"\)")):
        generate(name, **params)
