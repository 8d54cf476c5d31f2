"""Technology parameters: generic defaults, TOML files, errors and look-up.

Sources named beside each check:
- "DESIGN": /work/shared/DESIGN.md, section 1 (the model's units: C_u, tau, fJ).
- "SSH99": I. Sutherland, R. Sproull, D. Harris, "Logical Effort: Designing Fast CMOS Circuits",
  Morgan Kaufmann 1999 (from memory): the tables of g and p assume mu = 2 and p_inv = 1.
- "common practice": energy per transition C V^2; leakage power V I.
- "TOML 1.0": the TOML specification (parsed with the standard library's ``tomllib``).
"""

from __future__ import annotations

import dataclasses
import re
import tomllib
from pathlib import Path

import pytest

from edopt.errors import CaseError, EdoptError
from edopt.technology import (
    BUILTIN,
    Technology,
    load_technology,
    technology,
    technology_from_table,
    technology_toml,
)

# --------------------------------------------------------------------------- defaults


def test_generic_defaults():
    t = Technology()
    # SSH99 (from memory): the effort tables of the built-in gates assume mu = 2, p_inv = 1
    assert t.mu == 2.0
    assert t.p_inv == 1.0
    assert t.name == "generic"
    assert 1.0 <= t.alpha <= 2.0                 # Sakurai & Newton 1990: alpha between 1 and 2
    assert 0 < t.vt_v < t.vdd_v
    assert technology() is BUILTIN["generic"]
    assert technology("generic") == t


def test_generic_description_states_its_numbers():
    # the description is the provenance of the numbers: each value it quotes is the field's value
    t = Technology()
    text = t.description
    assert "not any real process" in text
    quoted = {
        "tau_ps": r"tau ([0-9.]+) ps", "p_inv": r"p_inv ([0-9.]+)", "mu": r"mu ([0-9.]+)",
        "cu_ff": r"C_u ([0-9.]+) fF", "vdd_v": r"([0-9.]+) V,", "vt_v": r"V_t ([0-9.]+) V",
        "alpha": r"alpha ([0-9.]+)", "leak_na": r"([0-9.]+) nA",
    }
    for key, pattern in quoted.items():
        m = re.search(pattern, text)
        assert m, f"{key} not quoted in the description"
        assert float(m.group(1)) == getattr(t, key), key


def test_energy_units():
    # common practice: C V^2 per charge of C_u to the supply; leakage power V I (nA * V = 1e-6
    # fJ/ps); DESIGN: energies in fJ
    t = Technology(cu_ff=0.7, vdd_v=1.1, vt_v=0.35, leak_na=20.0)
    assert t.energy_unit_fj == pytest.approx(0.7 * 1.1**2, rel=1e-15)
    assert t.leak_energy_unit_fj_per_ps == pytest.approx(1.1 * 20.0e-9 * 1e-12 / 1e-15,
                                                         rel=1e-12)


@pytest.mark.parametrize("changes, word", [
    ({"tau_ps": 0.0}, "tau_ps"), ({"tau_ps": -1.0}, "tau_ps"), ({"mu": float("nan")}, "mu"),
    ({"p_inv": -0.1}, "p_inv"), ({"leak_na": -1.0}, "leak_na"), ({"vt_v": 1.5}, "vt_v"),
    ({"cu_ff": float("inf")}, "cu_ff"),
])
def test_bad_values_rejected(changes, word):
    with pytest.raises(EdoptError, match=word):
        Technology(**changes)
    with pytest.raises(EdoptError, match=word):
        Technology().with_changes(**changes)


def test_with_changes_keeps_others():
    t = Technology().with_changes(tau_ps=2.0, vdd_v=0.8)
    assert t.tau_ps == 2.0 and t.vdd_v == 0.8
    assert t.mu == Technology().mu and t.p_inv == Technology().p_inv


# ------------------------------------------------------------------------------- TOML


def _write(tmp_path: Path, text: str, name: str = "node.toml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_load_toml_table(tmp_path):
    path = _write(tmp_path, """
[technology]
tau_ps = 4.5
p_inv = 0.8
vdd_v = 0.9
vt_v = 0.25
leak_na = 12
""")
    t = load_technology(path)
    assert (t.tau_ps, t.p_inv, t.vdd_v, t.vt_v, t.leak_na) == (4.5, 0.8, 0.9, 0.25, 12)
    assert t.mu == Technology().mu                     # keys not given keep the generic value
    assert t.name == "node"                            # name defaults to the file stem
    assert str(path) in t.description
    assert technology(path) == t
    assert technology(str(path)) == t


def test_load_toml_top_level_keys(tmp_path):
    path = _write(tmp_path, 'name = "flat"\ntau_ps = 2.0\ndescription = "invented"\n')
    t = technology(path)
    assert (t.name, t.tau_ps, t.description) == ("flat", 2.0, "invented")


@pytest.mark.parametrize("text, words", [
    ("[technology]\ntau_ps = 3.0\nvoltage = 1.0\n", ["unknown", "voltage"]),
    ("[technology]\ntau_ps = \"fast\"\n", ["tau_ps", "number"]),
    ("[technology]\ntau_ps = true\n", ["tau_ps", "number"]),
    ("[technology]\ntau_ps = -2.0\n", ["tau_ps", "positive"]),
    ("[technology]\nvt_v = 1.2\n", ["vt_v", "below"]),
    ("[technology]\nname = 7\n", ["name", "string"]),
    ("technology = 3\n", ["table"]),
])
def test_bad_file_names_the_file(tmp_path, text, words):
    path = _write(tmp_path, text, "bad_node.toml")
    with pytest.raises(CaseError) as info:
        technology(path)
    msg = str(info.value)
    assert str(path) in msg
    assert info.value.path == str(path)
    for w in words:
        assert w in msg


def test_malformed_toml_names_file_and_line(tmp_path):
    path = _write(tmp_path, "[technology]\ntau_ps = 3.0\nmu = = 2\n", "broken.toml")
    with pytest.raises(CaseError) as info:
        load_technology(path)
    assert info.value.path == str(path)
    msg = str(info.value)
    assert msg.startswith(str(path))
    assert "line 3" in msg                             # TOML 1.0: the bad line
    # (CaseError.line stays None here: tomllib gives TOMLDecodeError.lineno only from 3.14)


def test_missing_file_or_unknown_name(tmp_path):
    with pytest.raises(CaseError, match="generic"):
        technology("no_such_node")
    with pytest.raises(CaseError, match="cannot read"):
        load_technology(tmp_path / "absent.toml")


def test_table_errors_name_the_source():
    with pytest.raises(CaseError, match="case.toml.*unknown"):
        technology_from_table({"tau": 3.0}, source="case.toml")


def test_toml_round_trip(tmp_path):
    # TOML 1.0: the text parses back, including quotes and backslashes in strings
    t = Technology(name="odd \"node\"", tau_ps=2.75, p_inv=0.7, mu=2.4, cu_ff=0.9, vdd_v=0.85,
                   vt_v=0.31, alpha=1.45, leak_na=3.5, description="C:\\models and \"notes\"")
    text = technology_toml(t)
    assert tomllib.loads(text)["technology"]["tau_ps"] == 2.75
    back = load_technology(_write(tmp_path, text))
    assert back == t
    assert dataclasses.asdict(back) == t.to_dict()
    assert technology_toml(back) == text


def test_default_round_trip(tmp_path):
    t = Technology()
    assert load_technology(_write(tmp_path, technology_toml(t))) == t


# -------------------------------------------------------------------------- look-up


def test_technology_lookup_by_name_path_and_instance(tmp_path):
    inst = Technology(name="mine", tau_ps=1.5)
    assert technology(inst) is inst
    assert technology(None) is BUILTIN["generic"]
    assert technology("generic") is BUILTIN["generic"]
    path = _write(tmp_path, technology_toml(inst), "mine.toml")
    assert technology(path) == inst
    assert technology(str(path)) == inst
