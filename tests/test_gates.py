"""Tests of gate-type derivation, parsing, explicit types and the built-in library."""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from edopt.errors import GateError
from edopt.gates import (
    Efforts,
    GateType,
    Parallel,
    Pin,
    Series,
    builtin_library,
    explicit,
    from_expression,
    gate_type,
    parse_expression,
)

# Source "SSH99": I. Sutherland, R. Sproull, D. Harris, "Logical Effort: Designing Fast CMOS
# Circuits", Morgan Kaufmann 1999, tables of logical effort and parasitic delay (quoted from
# memory), mu = 2, p_inv = 1.
# Source "derived": worked by hand from the sizing rule in edopt/gates.py (first principles).

SSH99 = [
    # name, g per pin, p
    ("inv", [1.0], 1.0),
    *[(f"nand{n}", [(n + 2) / 3] * n, float(n)) for n in (2, 3, 4)],
    *[(f"nor{n}", [(2 * n + 1) / 3] * n, float(n)) for n in (2, 3, 4)],
    ("aoi21", [2.0, 2.0, 5 / 3], 7 / 3),
    ("aoi22", [2.0] * 4, 4.0),
    ("xor2", [4.0, 4.0], 4.0),  # both polarities in
    ("xnor2", [4.0, 4.0], 4.0),  # both polarities in
]


@pytest.mark.parametrize(("name", "g", "p"), SSH99)
def test_builtin_matches_logical_effort_tables(name: str, g: list[float], p: float) -> None:
    e = gate_type(name).efforts(mu=2.0, p_inv=1.0)  # source: SSH99
    np.testing.assert_allclose(e.g, g, rtol=1e-12)
    assert e.p == pytest.approx(p, rel=1e-12)


def test_oai21_and_oai22_derived() -> None:
    # source: derived. OAI21 (A+B)*C: NMOS 2,2,2; PMOS dual A*B + C: 4,4,2.
    e = gate_type("oai21").efforts()
    np.testing.assert_allclose(e.g, [2.0, 2.0, 4 / 3])
    # touching: NMOS first series child (A+B) -> 2+2; PMOS parallel of A*B (last child B, 4)
    # and C (2) -> (4 + 6) / 3
    assert e.p == pytest.approx(10 / 3)
    # source: derived. OAI22: all NMOS 2, all PMOS 4; touching 2+2 + 4+4 -> 4
    e = gate_type("oai22").efforts()
    np.testing.assert_allclose(e.g, [2.0] * 4)
    assert e.p == pytest.approx(4.0)


def test_mux2_first_principles() -> None:
    # source: derived. NMOS A*S + B*S' all width 2; PMOS (A+S)*(B+S') all width 4.
    # g_A = (2+4)/3 = 2, g_S = (2+2+4+4)/3 = 4; touching NMOS A, B (4) + PMOS B, S' (8) -> p = 4.
    t = gate_type("mux2")
    assert t.pins == ("A", "B", "S")
    e = t.efforts()
    np.testing.assert_allclose(e.g, [2.0, 2.0, 4.0])
    assert e.p == pytest.approx(4.0)


def test_classic_widths() -> None:
    # source: derived (the sizing rule stated in the module docstring).
    nand2 = [(pin, kind, w) for pin, kind, w, _ in gate_type("nand2").widths()]
    assert nand2 == [("A", "n", 2.0), ("B", "n", 2.0), ("A", "p", 2.0), ("B", "p", 2.0)]
    nor2 = [(pin, kind, w) for pin, kind, w, _ in gate_type("nor2").widths()]
    assert nor2 == [("A", "n", 1.0), ("B", "n", 1.0), ("A", "p", 4.0), ("B", "p", 4.0)]
    comp = [c for _, _, _, c in gate_type("xor2").widths()]
    assert comp.count(True) == 4 and comp.count(False) == 4


def test_p_scales_linearly_with_p_inv() -> None:
    # source: derived (p is proportional to p_inv by definition).
    for t in builtin_library().values():
        base = t.efforts(p_inv=1.0)
        for p_inv in (0.0, 0.5, 1.7):
            e = t.efforts(p_inv=p_inv)
            assert e.p == pytest.approx(base.p * p_inv)
            np.testing.assert_array_equal(e.g, base.g)


def test_g_changes_with_mu() -> None:
    # source: derived. NAND2, mu = 3: NMOS 2, PMOS 3 per pin -> g = (2+3)/4.
    np.testing.assert_allclose(gate_type("nand2").efforts(mu=3.0).g, [5 / 4, 5 / 4])
    # NOR2, mu = 3: NMOS 1, PMOS 6 -> g = 7/4; p = (1+1+6)/4 = 2
    e = gate_type("nor2").efforts(mu=3.0)
    np.testing.assert_allclose(e.g, [7 / 4, 7 / 4])
    assert e.p == pytest.approx(2.0)
    # inverter stays at g = 1, p = p_inv for any mu
    for mu in (1.0, 2.5, 4.0):
        e = gate_type("inv").efforts(mu=mu, p_inv=1.3)
        assert e.g[0] == pytest.approx(1.0) and e.p == pytest.approx(1.3)


def test_area_and_leak() -> None:
    # source: derived. NAND2 total width 8 -> area 8/3; leak equals area (first order).
    e = gate_type("nand2").efforts()
    assert e.area == pytest.approx(8 / 3) and e.leak == pytest.approx(e.area)
    assert gate_type("inv").efforts().area == pytest.approx(1.0)


def test_efforts_cached_and_read_only() -> None:
    t = gate_type("aoi21")
    a, b = t.efforts(), t.efforts()
    assert a is b and a == b and hash(a) == hash(b)
    assert isinstance(a, Efforts)
    with pytest.raises(ValueError):
        a.g[0] = 0.0


def test_logic_functions() -> None:
    # source: derived (truth tables of the named functions).
    lib = builtin_library()
    funcs = {
        "inv": lambda v: not v["A"],
        "nand3": lambda v: not (v["A"] and v["B"] and v["C"]),
        "nor2": lambda v: not (v["A"] or v["B"]),
        "aoi21": lambda v: not ((v["A"] and v["B"]) or v["C"]),
        "oai22": lambda v: not ((v["A"] or v["B"]) and (v["C"] or v["D"])),
        "xor2": lambda v: v["A"] != v["B"],
        "xnor2": lambda v: v["A"] == v["B"],
        "mux2": lambda v: not (v["A"] if v["S"] else v["B"]),
    }
    for name, f in funcs.items():
        t = lib[name]
        for bits in itertools.product([False, True], repeat=len(t.pins)):
            v = dict(zip(t.pins, bits))
            assert t.output(v) == f(v), (name, v)


def test_user_expression_type() -> None:
    # source: derived. A*(B*C + D): depths 1 and 2 -> A gets 1/3 (width 3); B, C get 1/3 each
    # (width 3), D gets 2/3 (width 1.5). Dual A + (B+C)*D: A 2; B, C, D share 1/2 -> 4 each.
    t = from_expression("odd", "A*(B*C + D)")
    assert t.pins == ("A", "B", "C", "D")
    e = t.efforts()
    np.testing.assert_allclose(e.g, [(3 + 2) / 3, (3 + 4) / 3, (3 + 4) / 3, (1.5 + 4) / 3])
    # touching: NMOS A (3); PMOS parallel: A (2) and last series child D (4) -> 9/3
    assert e.p == pytest.approx(3.0)
    # explicit pin order reorders g
    r = from_expression("odd_r", "A*(B*C + D)", pins=["D", "C", "B", "A"])
    np.testing.assert_allclose(r.efforts().g, e.g[::-1])
    # every output-to-rail path has unit resistance
    nmos = {pin: w for pin, kind, w, _ in t.widths() if kind == "n"}
    assert 1 / nmos["A"] + 1 / nmos["B"] + 1 / nmos["C"] == pytest.approx(1.0)
    assert 1 / nmos["A"] + 1 / nmos["D"] == pytest.approx(1.0)


def test_nested_series_is_associative() -> None:
    # source: derived. (A*B)*C sizes like A*B*C.
    a = from_expression("x", "(A*B)*C").efforts()
    b = from_expression("y", "A * B * C").efforts()
    assert a == b


def test_parse_tree() -> None:
    tree = parse_expression("A*B' + C")
    assert tree == Parallel((Series((Pin("A"), Pin("B", True))), Pin("C")))
    assert str(tree) == "A*B' + C"


def test_complement_counts_on_same_pin() -> None:
    t = from_expression("sel", "S*A + S'*B")
    assert t.pins == ("S", "A", "B")
    e = t.efforts()
    assert e.g[0] == pytest.approx(4.0)  # source: derived, same as mux2's S


@pytest.mark.parametrize(
    ("text", "fragment"),
    [
        ("A*(B+C", "unbalanced '('"),
        ("A*B)", "unbalanced ')'"),
        ("", "empty"),
        ("   ", "empty"),
        ("A & B", "unexpected character '&'"),
        ("A*", "ends where"),
        ("A B", "expected '*' or '+'"),
        ("(A+B)'", "pin names only"),
        ("A''", "double complement"),
        ("'A", "must follow a pin name"),
        ("A*+B", "found '+'"),
    ],
)
def test_bad_expression(text: str, fragment: str) -> None:
    with pytest.raises(GateError) as info:
        from_expression("mygate", text)
    msg = str(info.value)
    assert fragment in msg and "'mygate'" in msg and "position" in msg


def test_bad_expression_position() -> None:
    with pytest.raises(GateError, match="position 3"):
        parse_expression("A*#")


def test_pin_order_mismatch() -> None:
    with pytest.raises(GateError, match="not in the pin order"):
        from_expression("g", "A*B", pins=["A"])
    with pytest.raises(GateError, match="do not appear"):
        from_expression("g", "A*B", pins=["A", "B", "C"])
    with pytest.raises(GateError, match="duplicate"):
        from_expression("g", "A*B", pins=["A", "B", "A"])


def test_explicit_type() -> None:
    t = explicit("cell", ["X", "Y"], g=[1.5, 2.5], p=3.0)
    e = t.efforts(mu=3.0, p_inv=2.0)
    np.testing.assert_allclose(e.g, [1.5, 2.5])
    assert e.p == 3.0  # not scaled by p_inv
    assert e.area == pytest.approx(4.0) and e.leak == pytest.approx(4.0)
    t2 = explicit("cell2", ["X"], g=[1.0], p=0.5, area=2.0, leak=0.3)
    e2 = t2.efforts()
    assert (e2.area, e2.leak) == (2.0, 0.3)
    assert explicit("cell3", ["X"], g=[1.0], p=0.5, area=2.0).efforts().leak == 2.0
    with pytest.raises(GateError, match="no switch network"):
        t.widths()


@pytest.mark.parametrize(
    ("kwargs", "fragment"),
    [
        ({"pins": ["A", "A"], "g": [1, 1], "p": 1}, "duplicate pin"),
        ({"pins": ["A", "B"], "g": [1], "p": 1}, "one g per pin"),
        ({"pins": ["A"], "g": [0.0], "p": 1}, "> 0"),
        ({"pins": ["A"], "g": [float("inf")], "p": 1}, "finite"),
        ({"pins": ["A"], "g": [1], "p": -1}, ">= 0"),
        ({"pins": ["A"], "g": [1], "p": float("nan")}, "finite"),
        ({"pins": ["1A"], "g": [1], "p": 1}, "invalid"),
        ({"pins": [], "g": [], "p": 1}, "at least one"),
    ],
)
def test_explicit_validation(kwargs: dict, fragment: str) -> None:
    with pytest.raises(GateError, match="'bad'") as info:
        explicit("bad", **kwargs)
    assert fragment in str(info.value)


def test_gate_type_construction_rules() -> None:
    with pytest.raises(GateError, match="either"):
        GateType("both", ("A",), pulldown="A", g_given=(1.0,), p_given=1.0)
    with pytest.raises(GateError, match="either"):
        GateType("neither", ("A",))
    with pytest.raises(GateError, match="mu"):
        gate_type("inv").efforts(mu=0.0)


def test_lookup() -> None:
    assert gate_type("NAND2") is gate_type("nand2")
    lib = builtin_library()
    assert set(lib) == {
        "inv",
        "nand2",
        "nand3",
        "nand4",
        "nor2",
        "nor3",
        "nor4",
        "aoi21",
        "aoi22",
        "oai21",
        "oai22",
        "xor2",
        "xnor2",
        "mux2",
    }
    assert all(name == t.name for name, t in lib.items())
    for name in ("inv", "nand4", "aoi22", "oai21"):
        assert lib[name].pins == ("A", "B", "C", "D")[: len(lib[name].pins)]
    custom = {"MyCell": explicit("MyCell", ["A"], g=[1.0], p=1.0)}
    assert gate_type("mycell", custom).name == "MyCell"


def test_unknown_gate_lists_known_names() -> None:
    with pytest.raises(GateError) as info:
        gate_type("nand9")
    msg = str(info.value)
    assert "'nand9'" in msg
    for name in builtin_library():
        assert name in msg


def test_buffer_hint() -> None:
    with pytest.raises(GateError, match="two 'inv' gates"):
        gate_type("buf")
