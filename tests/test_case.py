"""Tests of the TOML case format, the demo cases and the datapath builders.

Sources of expected values:
- "first principles": counted from the construction or derived by hand from the rules stated in
  edopt/gates.py and docs/case-format.md (no outside value);
- "integer addition": Python's own ``int`` arithmetic is the reference for the adder logic.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from edopt.adders import PREFIX_KINDS, decoder, prefix_adder, prefix_cells, simulate, write_demos
from edopt.circuit import Circuit
from edopt.errors import CaseError
from edopt.formats.case import (
    SCHEMA,
    case_from_toml_text,
    circuit_from_toml_text,
    load_case,
    parse_target,
    write_case,
)
from edopt.gates import builtin_library, explicit, from_expression
from edopt.technology import BUILTIN, Technology

CASES = Path(__file__).resolve().parent.parent / "cases"
DOCS = Path(__file__).resolve().parent.parent / "docs" / "case-format.md"


def same_network(a: Circuit, b: Circuit) -> None:
    assert a.name == b.name
    assert a.gates == b.gates
    assert a.inputs == b.inputs
    assert a.outputs == b.outputs
    assert a.wire == b.wire
    assert a.activity == b.activity
    assert a.types == b.types
    assert (a.size_min, a.size_max, a.activity_default) == (b.size_min, b.size_max,
                                                            b.activity_default)


def adder_vectors(bits: int, n: int, seed: int) -> tuple[list[int], list[int], dict]:
    rng = np.random.default_rng(seed)
    words = rng.integers(0, 2, size=(2, n, bits)).astype(bool)
    # include the carry-chain extremes: all ones + 1, all ones + all ones, zero + zero
    words[:, 0] = [True] * bits, [True] + [False] * (bits - 1)
    words[:, 1] = True
    words[:, 2] = False
    a = [sum(int(v) << i for i, v in enumerate(row)) for row in words[0]]
    b = [sum(int(v) << i for i, v in enumerate(row)) for row in words[1]]
    inputs = {f"a{i}": words[0, :, i] for i in range(bits)}
    inputs |= {f"b{i}": words[1, :, i] for i in range(bits)}
    return a, b, inputs


def adder_result(values: dict, bits: int, n: int) -> list[int]:
    out = [int(values["cout"][k]) << bits for k in range(n)]
    for i in range(bits):
        for k in range(n):
            out[k] += int(values[f"s{i}"][k]) << i
    return out


# ------------------------------------------------------------------------------ demo cases


@pytest.mark.parametrize("name", ["mixed_chain", "decoder", "carry_network"])
def test_demo_case_loads_and_validates(name):
    case = load_case(CASES / f"{name}.toml")
    assert case.path == CASES / f"{name}.toml"
    assert case.circuit.source == str(CASES / f"{name}.toml")
    assert case.target is not None
    parse_target(case.target)
    case.circuit.validate()
    assert all(port.load > 0 for port in case.circuit.outputs.values())
    used = {net for g in case.circuit.gates.values() for net in g.inputs.values()}
    for port in case.circuit.inputs.values():
        if port.net in used:
            assert port.drive is not None or port.cap is not None or port.cap_max is not None


def test_mixed_chain_is_the_path_it_describes():
    # first principles: follow the first pin of each gate from the input to the output
    c = load_case(CASES / "mixed_chain.toml").circuit
    st = c.validate()
    net, types = "a", []
    while net != "y":
        (gname, _), = [u for u in st.fanout[net] if u[1] == "A"]
        types.append(c.gates[gname].type)
        net = c.gates[gname].output
    assert types == ["nand2", "nor2", "inv", "nand3", "inv", "inv"]
    assert c.inputs["a"].cap is not None
    assert c.outputs["y"].load >= 100


def test_generated_cases_are_current(tmp_path):
    # the committed files are exactly what the builders write today
    for path in write_demos(tmp_path):
        assert (CASES / path.name).read_text(encoding="utf-8") == path.read_text(encoding="utf-8")


def test_decoder_case_is_one_hot():
    # first principles: a row decoder raises exactly word line k for address k
    c = load_case(CASES / "decoder.toml").circuit
    bits = len(c.inputs)
    rows = 2**bits
    addr = np.arange(rows)
    values = simulate(c, {f"a{i}": (addr >> i & 1).astype(bool) for i in range(bits)})
    lines = np.array([values[f"wl{r}"] for r in range(rows)])
    assert np.array_equal(lines, np.eye(rows, dtype=bool))


@pytest.mark.parametrize("bits", [2, 3, 4, 5, 6, 7, 9])
def test_decoder_builder_counts_and_logic(bits):
    c = decoder(bits, wordline_load=32.0, wire=3.0)
    rows = 2**bits
    # first principles: 2 address buffers per bit, nand+inv per predecode line, nand+inv per row
    if bits <= 3:
        groups: list[int] = []
    else:
        groups = [2] * (bits // 2 - 1) + [bits - 2 * (bits // 2 - 1)]
    assert sum(groups) in (0, bits)
    assert len(c.gates) == 2 * bits + 2 * sum(2**g for g in groups) + 2 * rows
    st = c.validate()
    for gi, g in enumerate(groups):
        for v in range(2**g):
            assert len(st.fanout[f"pd{gi}_{v}"]) == rows // 2**g
            assert c.wire[f"pd{gi}_{v}"] == 3.0
    addr = np.arange(rows)
    values = simulate(c, {f"a{i}": (addr >> i & 1).astype(bool) for i in range(bits)})
    assert np.array_equal(np.array([values[f"wl{r}"] for r in range(rows)]),
                          np.eye(rows, dtype=bool))


def test_carry_network_case_adds():
    # reference: Python integer addition on random vectors, read back from the case file
    c = load_case(CASES / "carry_network.toml").circuit
    bits = sum(net.startswith("a") for net in c.inputs)
    assert 200 <= len(c.gates) <= 600
    n = 200
    a, b, inputs = adder_vectors(bits, n, seed=7)
    assert adder_result(simulate(c, inputs), bits, n) == [x + y for x, y in zip(a, b)]
    assert any(w > 0 for w in c.wire.values())


# ---------------------------------------------------------------------------- prefix adders


def cells_formula(kind: str, n: int) -> int:
    """Prefix operators of an n-bit network, n a power of two (first principles)."""
    k = int(math.log2(n))
    return {
        "kogge-stone": n * k - n + 1,       # level j has n - 2**j cells
        "sklansky": n // 2 * k,             # every level has n/2 cells
        "brent-kung": 2 * n - 2 - k,        # up-sweep n - 1 cells, down-sweep n - 1 - log2 n
        "ripple": n - 1,
    }[kind]


def levels_formula(kind: str, n: int) -> int:
    k = int(math.log2(n))
    return {"kogge-stone": k, "sklansky": k, "brent-kung": 2 * k - 1, "ripple": n - 1}[kind]


@pytest.mark.parametrize("kind", PREFIX_KINDS)
@pytest.mark.parametrize("bits", [4, 8, 16, 32, 64])
def test_prefix_cell_counts(kind, bits):
    levels = prefix_cells(bits, kind)
    assert sum(map(len, levels)) == cells_formula(kind, bits)
    assert len(levels) == levels_formula(kind, bits)
    c = prefix_adder(bits, kind)
    # each prefix cell has exactly one carry-merge gate (aoi21 or oai21)
    merges = sum(g.type in ("aoi21", "oai21") for g in c.gates.values())
    assert merges == cells_formula(kind, bits)


def test_prefix_ordering_at_32_bits():
    count = {kind: sum(map(len, prefix_cells(32, kind))) for kind in PREFIX_KINDS}
    assert count["kogge-stone"] > count["sklansky"] > count["brent-kung"] > count["ripple"]
    gates = {kind: len(prefix_adder(32, kind).gates) for kind in PREFIX_KINDS}
    assert gates["kogge-stone"] > gates["sklansky"] > gates["brent-kung"] > gates["ripple"]
    assert 200 <= gates["sklansky"] <= 600 and 200 <= gates["kogge-stone"] <= 600


def test_prefix_fanout_shapes():
    # first principles: Kogge-Stone keeps fan-out bounded; Sklansky's last level fans one
    # group out to n/2 cells
    def max_fanout(c: Circuit) -> int:
        return max(len(u) for u in c.validate().fanout.values())

    assert max_fanout(prefix_adder(32, "sklansky")) >= 16
    assert max_fanout(prefix_adder(32, "kogge-stone")) <= 6


@pytest.mark.parametrize("kind", PREFIX_KINDS)
@pytest.mark.parametrize("bits", [2, 5, 8, 13, 32])
def test_prefix_adder_adds(kind, bits):
    # reference: Python integer addition
    c = prefix_adder(bits, kind, wire_per_bit=0.5)
    n = 128
    a, b, inputs = adder_vectors(bits, n, seed=bits)
    assert adder_result(simulate(c, inputs), bits, n) == [x + y for x, y in zip(a, b)]


def test_prefix_adder_single_stages_only():
    lib = builtin_library()
    c = prefix_adder(16, "kogge-stone")
    assert {g.type for g in c.gates.values()} <= set(lib)
    assert all(lib[g.type].pulldown is not None for g in c.gates.values())


def test_prefix_bad_arguments():
    from edopt.errors import CircuitError

    with pytest.raises(CircuitError, match="unknown prefix network 'han-carlson'"):
        prefix_cells(8, "han-carlson")
    with pytest.raises(CircuitError, match="width >= 2"):
        prefix_adder(1)
    with pytest.raises(CircuitError, match="address width must be an integer 2..9"):
        decoder(10)


# ------------------------------------------------------------------------- round trip


def rich_circuit() -> Circuit:
    c = Circuit("rich \"one\"", size_min=0.5, size_max=300.0, activity_default=0.1)
    c.add_type(from_expression("aoi211", "A*B + C + D", description="AND-OR-invert 2-1-1"))
    c.add_type(explicit("cellx", ["IN", "EN"], [1.25, 1.5], 2.5, area=3.0, leak=0.5))
    c.add_input("a", arrival_ps=12.5, drive=2.0)
    c.add_input("b", cap=3.0)
    c.add_input("c d", cap_max=8.0)
    c.add_input("ü")
    c.add_gate("g1", "aoi211", {"A": "a", "B": "c d", "C": "ü", "D": "a"}, "n1", size_min=2.0)
    c.add_gate("g2", "cellx", ["n1", "b"], "n2", size_max=40.0)
    c.add_gate("g3", "inv", ["n2"], "y", copies=4, size=4.0)
    c.add_output("y", load=12.0, allowance_ps=7.5)
    c.set_net("n1", wire=1.5)
    c.set_net("n2", activity=0.05)
    return c


@pytest.mark.parametrize(
    "build",
    [rich_circuit, lambda: decoder(4), lambda: prefix_adder(16, "brent-kung", wire_per_bit=0.3)],
)
def test_write_load_round_trip(build, tmp_path):
    c = build()
    path = tmp_path / "rt.toml"
    text = write_case(c, None, path, target="1.5x", description="round trip")
    assert path.read_text(encoding="utf-8") == text
    case = load_case(path)
    same_network(case.circuit, c)
    assert case.target == "1.5x" and case.description == "round trip"
    assert case.tech == BUILTIN["generic"]
    # writing the loaded case gives the same text again
    assert write_case(case.circuit, case.tech, None, target="1.5x",
                      description="round trip") == text


def test_write_load_round_trip_keeps_strengths(tmp_path):
    with_set, plain = tmp_path / "set.toml", tmp_path / "plain.toml"
    write_case(decoder(2), None, with_set, strengths=[1, 2, 4.5])
    write_case(decoder(2), None, plain)
    assert load_case(with_set).strengths == [1.0, 2.0, 4.5]
    assert load_case(plain).strengths is None
    with pytest.raises(CaseError, match="strengths"):
        write_case(decoder(2), strengths=[2, -1])


def test_write_without_path_only_returns(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    text = write_case(decoder(2))
    assert list(tmp_path.iterdir()) == []
    assert "[[gate]]" in text


def test_write_refuses_bad_target():
    with pytest.raises(CaseError, match="delay target"):
        write_case(decoder(2), target="soon")


# --------------------------------------------------------------------------- technology


def test_inline_technology_table():
    text = (CASES / "mixed_chain.toml").read_text(encoding="utf-8").replace(
        'technology = "generic"', "") + "\n[technology]\nname = \"slow\"\ntau_ps = 5.0\nmu = 2.5\n"
    case = case_from_toml_text(text, "inline.toml")
    assert case.tech.name == "slow"
    assert (case.tech.tau_ps, case.tech.mu) == (5.0, 2.5)
    assert case.tech.p_inv == Technology().p_inv          # unspecified fields keep defaults


def test_non_builtin_technology_is_written_inline(tmp_path):
    tech = Technology(name="lowv", tau_ps=7.5, vdd_v=0.7, vt_v=0.25, description="invented")
    text = write_case(rich_circuit(), tech, tmp_path / "t.toml")
    assert "[technology]" in text and "technology =" not in text.split("[technology]")[0]
    assert load_case(tmp_path / "t.toml").tech == tech


def test_relative_technology_path(tmp_path, monkeypatch):
    (tmp_path / "tech").mkdir()
    (tmp_path / "tech" / "slow.toml").write_text(
        "[technology]\nname = \"slowproc\"\ntau_ps = 6.0\n", encoding="utf-8")
    (tmp_path / "cases").mkdir()
    text = write_case(decoder(2)).replace('technology = "generic"',
                                          'technology = "../tech/slow.toml"')
    (tmp_path / "cases" / "d.toml").write_text(text, encoding="utf-8")
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)                 # resolved against the case file, not the cwd
    case = load_case(tmp_path / "cases" / "d.toml")
    assert (case.tech.name, case.tech.tau_ps) == ("slowproc", 6.0)


# ------------------------------------------------------------------------- targets, types


@pytest.mark.parametrize("target, value", [("250ps", (250.0, "ps")), ("1.2x", (1.2, "x")),
                                           (" 3e2 PS ", (300.0, "ps")), (".5x", (0.5, "x"))])
def test_target_string_is_kept(target, value):
    text = write_case(decoder(2)).replace("[case]\n", f'[case]\ntarget = "{target}"\n')
    case = case_from_toml_text(text, "t.toml")
    assert case.target == target
    assert parse_target(case.target) == value


@pytest.mark.parametrize("bad", ["0ps", "-1x", "250", "fast", "1.2 y", ""])
def test_target_rejects(bad):
    with pytest.raises(ValueError, match="positive number followed by ps"):
        parse_target(bad)


def test_case_without_target_has_none():
    assert case_from_toml_text(write_case(decoder(2)), "t.toml").target is None


USER_TYPES = """
[[gate_type]]
name = "aoi211"
pulldown = "A*B + C + D"

[[gate_type]]
name = "nand2r"
pulldown = "B*A"
pins = ["A", "B"]
area = 2.5

[[gate_type]]
name = "Spicecell"
pins = ["X", "Y"]
g = [1.1, 1.7]
p = 2.2
leak = 0.4

[[input]]
net = "a"
[[input]]
net = "b"
[[input]]
net = "c"

[[output]]
net = "y"
load = 10.0

[[gate]]
name = "u1"
type = "aoi211"
inputs = ["a", "b", "c", "a"]
output = "n1"

[[gate]]
name = "u2"
type = "NAND2R"
inputs = { B = "n1", A = "c" }
output = "n2"

[[gate]]
name = "u3"
type = "spicecell"
inputs = ["n2", "b"]
output = "y"
"""


def test_user_gate_type_by_expression():
    c = circuit_from_toml_text(USER_TYPES, "types.toml")
    t = c.gate_type("aoi211")
    assert t.pins == ("A", "B", "C", "D")
    eff = t.efforts(mu=2.0, p_inv=1.0)
    # first principles (sizing rule of edopt/gates.py, mu = 2): pull-down A,B in series width 2,
    # C and D width 1; pull-up (A+B)*C*D is three series groups of width 3*mu = 6.
    assert np.allclose(eff.g, [(2 + 6) / 3, (2 + 6) / 3, (1 + 6) / 3, (1 + 6) / 3])
    # output node: NMOS 2 (A) + 1 (C) + 1 (D); PMOS: the group next to the output (D), 6
    assert math.isclose(eff.p, (2 + 1 + 1 + 6) / 3)
    r = c.gate_type("nand2r")
    assert r.pins == ("A", "B") and r.efforts().area == 2.5
    assert c.gates["u2"].type == "nand2r" and c.gates["u2"].inputs == {"A": "c", "B": "n1"}


def test_user_gate_type_explicit():
    c = circuit_from_toml_text(USER_TYPES, "types.toml")
    t = c.gate_type("spicecell")
    eff = t.efforts(mu=3.0, p_inv=2.0)               # explicit values ignore mu and p_inv
    assert eff.g.tolist() == [1.1, 1.7] and eff.p == 2.2
    assert math.isclose(eff.area, 1.1 + 1.7) and eff.leak == 0.4
    assert c.gates["u3"].inputs == {"X": "n2", "Y": "b"}


def test_user_types_round_trip(tmp_path):
    c = circuit_from_toml_text(USER_TYPES, "types.toml")
    text = write_case(c, None, tmp_path / "u.toml")
    assert text.count("[[gate_type]]") == 3
    same_network(load_case(tmp_path / "u.toml").circuit, c)


# ------------------------------------------------------------------------------- the docs


def test_docs_list_every_key():
    text = DOCS.read_text(encoding="utf-8")
    for section, keys in SCHEMA.items():
        assert f"[{section}]" in text
        for key in keys:
            assert f"`{key}`" in text, (section, key)


def test_docs_example_loads(tmp_path):
    # the complete example of docs/case-format.md is a valid case
    text = DOCS.read_text(encoding="utf-8")
    start = text.index("```toml\n# complete example") + len("```toml\n")
    example = text[start:text.index("```", start)]
    (tmp_path / "example.toml").write_text(example, encoding="utf-8")
    case = load_case(tmp_path / "example.toml")
    case.circuit.validate()
    for section in ("gate_type", "input", "output", "gate", "net"):
        assert f"[[{section}]]" in example
