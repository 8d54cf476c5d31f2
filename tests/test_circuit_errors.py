"""Messages of bad input: each class through the Circuit builder and through case-file text.

The expected behaviour is first principles (what the user must be told to fix a given mistake);
expected line numbers are found in the test text itself, never typed in.
"""

from __future__ import annotations

import math
import re

import pytest

from edopt.circuit import Circuit
from edopt.errors import CaseError, CircuitError, EdoptError, GateError
from edopt.formats.case import case_from_toml_text, circuit_from_toml_text, load_case

# --------------------------------------------------------------------------- builder side


def two_inverters() -> Circuit:
    c = Circuit("t")
    c.add_input("a")
    c.add_gate("u1", "inv", ["a"], "n1")
    c.add_gate("u2", "inv", ["n1"], "y")
    c.add_output("y", load=4.0)
    return c


def test_builder_reference_is_valid():
    assert two_inverters().validate().order == ["u1", "u2"]


def test_builder_unknown_gate_type():
    c = Circuit()
    with pytest.raises(GateError, match=r"gate 'u1': unknown gate type 'nand5'; known: .*nand4"):
        c.add_gate("u1", "nand5", ["a"] * 5, "y")


def test_builder_unknown_pin():
    c = Circuit()
    with pytest.raises(CircuitError, match=r"gate 'u1': type nand2 has no pin 'Z' \(pins: A, B\)"):
        c.add_gate("u1", "nand2", {"A": "a", "Z": "b"}, "y")


def test_builder_wrong_pin_count_and_unconnected_pin():
    c = Circuit()
    with pytest.raises(CircuitError, match=r"type nand3 has 3 pins \(A, B, C\), got 2 nets"):
        c.add_gate("u1", "nand3", ["a", "b"], "y")
    with pytest.raises(CircuitError, match=r"pin 'B' of nand2 is not connected"):
        c.add_gate("u1", "nand2", {"A": "a"}, "y")


def test_builder_undriven_net():
    c = two_inverters()
    c.gates["u2"].inputs["A"] = "floating"
    c.add_gate("u3", "inv", ["a"], "n1b")
    c.add_output("n1b", load=1.0)
    c.add_output("n1", load=1.0)
    with pytest.raises(CircuitError, match=r"net 'floating' \(pin A of gate 'u2'\) has no driver"):
        c.validate()


def test_builder_two_drivers():
    c = two_inverters()
    c.add_gate("u3", "inv", ["a"], "n1")
    with pytest.raises(CircuitError, match=r"net 'n1' has two drivers: gates 'u1' and 'u3'"):
        c.validate()


def test_builder_combinational_loop_names_its_gates():
    c = Circuit()
    c.add_input("a")
    c.add_gate("u1", "nand2", ["a", "n3"], "n1")
    c.add_gate("u2", "inv", ["n1"], "n2")
    c.add_gate("u3", "inv", ["n2"], "n3")
    c.add_gate("u4", "inv", ["n2"], "y")      # downstream of the loop, not on it
    c.add_output("y", load=1.0)
    with pytest.raises(CircuitError, match="combinational loop through gates") as info:
        c.validate()
    names = re.findall(r"u\d", str(info.value))
    assert set(names) == {"u1", "u2", "u3"}
    # the loop is closed: it starts and ends at the same gate, in signal order
    assert names[0] == names[-1] and len(names) == 4
    ring = "u1 u2 u3 u1 u2 u3"
    assert " ".join(names[:3]) in ring


def test_builder_missing_load():
    c = two_inverters()
    c.add_gate("u3", "inv", ["a"], "dangling")
    with pytest.raises(CircuitError, match=r"gate 'u3' drives net 'dangling', which has no load"):
        c.validate()


@pytest.mark.parametrize(
    "call, match",
    [
        (lambda c: c.add_gate("u9", "inv", ["a"], "z", size=-1.0), r"gate 'u9': size must be > 0"),
        (lambda c: c.add_gate("u9", "inv", ["a"], "z", copies=0), r"copies must be >= 1"),
        (lambda c: c.add_output("z", load=-2.0), r"output 'z': load must be >= 0, got -2.0"),
        (lambda c: c.add_input("b", drive=-1.0), r"input 'b': drive must be > 0"),
        (lambda c: c.set_net("n1", wire=-0.5), r"net 'n1': wire must be >= 0"),
        (lambda c: c.set_net("n1", activity=1.5), r"activity 1.5 is a probability"),
    ],
)
def test_builder_negative_values(call, match):
    with pytest.raises(CircuitError, match=match):
        call(two_inverters())


@pytest.mark.parametrize(
    "call, what",
    [
        (lambda c: c.add_gate("u9", "inv", ["a"], "z", size=math.nan), "gate 'u9': size"),
        (lambda c: c.add_output("z", load=math.nan), "output 'z': load"),
        (lambda c: c.add_input("b", arrival_ps=math.nan), "input 'b': arrival_ps"),
        (lambda c: c.set_net("n1", wire=math.inf), "net 'n1': wire"),
    ],
)
def test_builder_nan_values(call, what):
    with pytest.raises(CircuitError, match=re.escape(what) + " must be a finite number"):
        call(two_inverters())


# ------------------------------------------------------------------------------ TOML side

BASE = """\
[case]
name = "t"

[[input]]
net = "a"

[[output]]
net = "y"
load = 4.0

[[gate]]
name = "u1"
type = "inv"
inputs = ["a"]
output = "n1"

[[gate]]
name = "u2"
type = "inv"
inputs = { A = "n1" }
output = "y"
"""


def line_of(text: str, needle: str, after: str | None = None) -> int:
    """1-based line of the first line containing ``needle`` (after the line with ``after``)."""
    lines = text.splitlines()
    start = 0 if after is None else next(i for i, s in enumerate(lines) if after in s) + 1
    return next(i for i in range(start, len(lines)) if needle in lines[i]) + 1


def fails(text: str, match: str, line: int | None) -> CaseError:
    with pytest.raises(CaseError, match=match) as info:
        circuit_from_toml_text(text, "case.toml")
    err = info.value
    assert err.path == "case.toml" and err.line == line
    assert str(err).startswith(f"case.toml:{line}: " if line else "case.toml: ")
    return err


def test_toml_reference_is_valid():
    assert list(circuit_from_toml_text(BASE, "case.toml").gates) == ["u1", "u2"]


def test_toml_malformed_names_file_and_line():
    text = BASE.replace("load = 4.0", "load = = 4.0")
    err = fails(text, r"malformed TOML", line_of(text, "load = ="))
    assert "case.toml" in str(err)


def test_toml_malformed_file_on_disk(tmp_path):
    path = tmp_path / "broken.toml"
    path.write_text(BASE.replace('name = "u2"', 'name = "u2'), encoding="utf-8")
    with pytest.raises(CaseError, match=r"broken\.toml:\d+: malformed TOML") as info:
        load_case(path)
    assert info.value.line == line_of(path.read_text(), 'name = "u2')


def test_toml_missing_file(tmp_path):
    with pytest.raises(CaseError, match=r"nothere\.toml: cannot read case file"):
        load_case(tmp_path / "nothere.toml")


def test_toml_unknown_gate_type():
    text = BASE.replace('type = "inv"\ninputs = { A', 'type = "inverter"\ninputs = { A')
    fails(text, r"gate 'u2': unknown gate type 'inverter'; known: .*\binv\b",
          line_of(text, "inverter"))


def test_toml_unknown_pin():
    text = BASE.replace('{ A = "n1" }', '{ Z = "n1" }')
    fails(text, r"gate 'u2': type inv has no pin 'Z' \(pins: A\)", line_of(text, "Z = "))


def test_toml_unknown_pin_in_sub_table():
    text = BASE.replace('inputs = { A = "n1" }\noutput = "y"',
                        'output = "y"\n[gate.inputs]\nQ = "n1"')
    fails(text, r"has no pin 'Q'", line_of(text, "[gate.inputs]"))


def test_toml_undriven_net():
    text = BASE.replace('{ A = "n1" }', '{ A = "n9" }').replace(
        'output = "n1"', 'output = "n1"\n\n[[output]]\nnet = "n1"\nload = 1.0')
    fails(text, r"net 'n9' \(pin A of gate 'u2'\) has no driver: declare it as an input",
          line_of(text, 'A = "n9"'))


def test_toml_two_drivers_points_at_second():
    text = BASE.replace('output = "y"\n', 'output = "n1"\n')
    fails(text, r"net 'n1' has two drivers: gates 'u1' and 'u2'",
          line_of(text, 'output = "n1"', after='name = "u2"'))


def test_toml_loop():
    text = BASE.replace('inputs = ["a"]', 'inputs = ["y"]')
    with pytest.raises(CaseError, match=r"combinational loop through gates") as info:
        circuit_from_toml_text(text, "case.toml")
    names = re.findall(r"u\d", str(info.value))
    assert set(names) == {"u1", "u2"}
    # the line is the [[gate]] header of the first gate the message names
    assert info.value.line == line_of(text, f'name = "{names[0]}"') - 1


def test_toml_missing_load():
    text = BASE + '\n[[gate]]\nname = "u3"\ntype = "inv"\ninputs = ["a"]\noutput = "dangling"\n'
    fails(text, r"gate 'u3' drives net 'dangling', which has no load",
          line_of(text, 'output = "dangling"'))


def test_toml_output_load_is_required():
    text = BASE.replace("load = 4.0\n", "")
    fails(text, r"\[\[output\]\] entry 1 'y': missing required key 'load'",
          line_of(text, "[[output]]"))


@pytest.mark.parametrize(
    "old, new, needle, match",
    [
        ("load = 4.0", "load = -4.0", "load =", r"output 'y': load must be >= 0, got -4.0"),
        ('output = "n1"', 'output = "n1"\nsize = -2', "size =", r"gate 'u1': size must be > 0"),
        ('net = "a"', 'net = "a"\ncap = 0.0', "cap =", r"input 'a': cap must be > 0"),
        ('output = "y"\n', 'output = "y"\ncopies = -3\n', "copies =", r"copies must be >= 1"),
    ],
)
def test_toml_negative_values(old, new, needle, match):
    text = BASE.replace(old, new)
    fails(text, match, line_of(text, needle))


@pytest.mark.parametrize("literal", ["nan", "+nan", "-nan"])
def test_toml_nan_literal(literal):
    text = BASE.replace("load = 4.0", f"load = {literal}")
    fails(text, r"\[\[output\]\] entry 1 'y': load is nan \(not a number\); give a finite value",
          line_of(text, "load ="))


def test_toml_nan_in_gate_and_inf():
    text = BASE.replace('output = "n1"', 'output = "n1"\nsize_max = nan')
    fails(text, r"\[\[gate\]\] entry 1 'u1': size_max is nan", line_of(text, "size_max"))
    text = BASE.replace('output = "n1"', 'output = "n1"\nsize_max = inf')
    fails(text, r"size_max is inf; give a finite value", line_of(text, "size_max"))


def test_toml_unknown_key_in_gate_lists_known():
    text = BASE.replace('output = "y"\n', 'output = "y"\nsise = 3\n')
    fails(text, r"\[\[gate\]\] entry 2 'u2': unknown key 'sise'; known keys: copies, inputs, "
                r"name, output, size, size_max, size_min, type", line_of(text, "sise"))


@pytest.mark.parametrize(
    "text, needle, match",
    [
        (BASE.replace('name = "t"', 'name = "t"\ncolour = 1'), "colour",
         r"\[case\]: unknown key 'colour'; known keys: activity, description"),
        (BASE.replace('net = "a"', 'net = "a"\ndelay = 1'), "delay",
         r"\[\[input\]\] entry 1 'a': unknown key 'delay'; known keys: arrival_ps, cap"),
        (BASE + "\n[extra]\nx = 1\n", "[extra]",
         r"unknown top-level key or table 'extra'; known: \[case\], \[technology\]"),
        ("gates = 1\n" + BASE, "gates = 1", r"unknown top-level key or table 'gates'"),
        (BASE + "\n[technology]\ntau_ps = 5.0\nbogus = 1\n", "[technology]",
         r"unknown technology key\(s\) bogus; known: alpha"),
    ],
)
def test_toml_unknown_keys_everywhere(text, needle, match):
    fails(text, match, line_of(text, needle))


@pytest.mark.parametrize(
    "old, new, needle, match",
    [
        ("load = 4.0", 'load = "4"', "load =", r"load must be a number \(C_u\), got string '4'"),
        ('inputs = ["a"]', 'inputs = "a"', "inputs =",
         r"inputs must be a table of pin = net or an array"),
        ('inputs = ["a"]', "inputs = [1]", "inputs =",
         r"inputs must be a table of pin = net or an array"),
        ('{ A = "n1" }', "{ A = 2 }", "{ A = 2", r"inputs pin 'A' must name a net \(a string\)"),
        ('type = "inv"\ninputs = ["a"]', 'type = 3\ninputs = ["a"]', "type =",
         r"type must be a string"),
        ('net = "a"', 'net = "a"\ndrive = true', "drive =",
         r"drive must be a number \(x\), got boolean"),
    ],
)
def test_toml_wrong_types(old, new, needle, match):
    text = BASE.replace(old, new)
    fails(text, match, line_of(text, needle))


def test_toml_duplicate_gate_points_at_second():
    text = BASE + '\n[[gate]]\nname = "u1"\ntype = "inv"\ninputs = ["a"]\noutput = "z"\n'
    err = fails(text, r"\[\[gate\]\] entry 3: gate 'u1' is already defined in entry 1",
                line_of(text, "[[gate]]", after='output = "y"'))
    assert f"(line {line_of(text, '[[gate]]')})" in str(err)


def test_toml_bad_target_and_technology_reference():
    text = BASE.replace('name = "t"', 'name = "t"\ntarget = "fast"')
    fails(text, r'delay target .fast. must be a positive number followed by ps .* "1.2x"',
          line_of(text, "target"))
    text = BASE.replace('name = "t"', 'name = "t"\ntechnology = "nope.toml"')
    fails(text, r"technology 'nope.toml' is neither a built-in \(generic, [^)]*\) nor a file",
          line_of(text, "technology"))
    text = BASE.replace('name = "t"', 'name = "t"\ntechnology = "generic"') + (
        "\n[technology]\ntau_ps = 4.0\n")
    fails(text, r"either as \[case\] technology or as an inline \[technology\] table",
          line_of(text, "technology ="))


def test_toml_bad_gate_type_definitions():
    text = BASE + '\n[[gate_type]]\nname = "x"\npulldown = "A*(B"\n'
    fails(text, r"gate type 'x': pull-down expression 'A\*\(B', position 3: unbalanced '\('",
          line_of(text, "pulldown"))
    text = BASE + '\n[[gate_type]]\nname = "x"\npins = ["A"]\ng = [1.0, 2.0]\np = 1\n'
    fails(text, r"gate type 'x': 2 logical effort\(s\) for 1 pin\(s\)", line_of(text, "g = "))
    text = BASE + '\n[[gate_type]]\nname = "x"\npins = ["A"]\ng = [1.0]\n'
    fails(text, r"give a pulldown expression, or pins, g and p \(missing p\)",
          line_of(text, "[[gate_type]]"))
    text = BASE + '\n[[gate_type]]\nname = "x"\npulldown = "A"\np = 1.0\n'
    fails(text, r"give either pulldown or g and p, not both \(drop p\)", line_of(text, "p = 1"))


def test_toml_unused_net_settings_and_activity():
    text = BASE + '\n[[net]]\nname = "zz"\nwire = 1.0\n'
    fails(text, r"net 'zz' has settings but is not used by any gate", line_of(text, "[[net]]"))
    text = BASE + '\n[[net]]\nname = "n1"\nactivity = 1.5\n'
    fails(text, r"net 'n1': activity 1.5 is a probability per operation; use 0..1",
          line_of(text, "activity"))
    text = BASE.replace('name = "t"', 'name = "t"\nactivity = -0.1')
    fails(text, r"\[case\]: activity -0.1 is a probability", line_of(text, "activity"))


def test_toml_case_size_bounds():
    text = BASE.replace('name = "t"', 'name = "t"\nsize_min = 8.0\nsize_max = 4.0')
    fails(text, r"\[case\]: size_min 8.0 is above size_max 4.0", line_of(text, "size_min"))
    text = BASE.replace('name = "t"', 'name = "t"\nsize_max = 0')
    fails(text, r"\[case\]: size_max must be > 0", line_of(text, "size_max"))


def test_toml_errors_are_edopt_errors():
    # one family: a caller can catch every bad-input class at once
    with pytest.raises(EdoptError):
        case_from_toml_text("[[gate]]\nname = 1\n", "x.toml")


@pytest.mark.parametrize("text", ["", '[case]\nname = "empty"\n'])
def test_toml_without_gates(text):
    fails(text, r"the case has no \[\[gate\]\] entries; describe the network", None)


def test_toml_inline_array_of_gates_still_gets_a_line():
    text = (
        'input = [ { net = "a" } ]\n'
        'output = [ { net = "y", load = 2.0 } ]\n'
        "gate = [\n"
        '  { name = "u1", type = "inv", inputs = ["a"], output = "n1" },\n'
        '  { name = "u2", type = "inv", inputs = ["n9"], output = "y" },\n'
        "]\n"
    )
    fails(text, r"net 'n9' \(pin A of gate 'u2'\) has no driver", line_of(text, '"u2"'))
