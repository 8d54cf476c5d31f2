"""Tests of the structural Verilog reader and writer and of the cell maps.

Sources of expected values:
- "yosys": Debian's yosys (0.23) synthesises the RTL in tests/rtl to its generic gate cells;
  its ``stat`` report gives the cell counts, its own ``read_verilog`` re-reads what we write;
- "yosys simcells.v": the simulation models yosys ships for its generic cells, evaluated by
  yosys's ``eval -table`` (the reference for every pin mapping of the built-in cell map);
- "integer arithmetic": Python's ``int`` operations are the reference for adder and ALU logic;
- "first principles": counted from the netlist text or derived from the documented rules
  (docs/verilog.md); no outside value.

Synthesis runs for real: without yosys the tests are skipped locally, and fail when the
environment variable CI is set (CI installs yosys).
"""

from __future__ import annotations

import csv
import io
import os
import re
import shutil
import subprocess
import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from edopt.errors import CaseError, EdoptError
from edopt.formats.cellmap import (
    REGISTER_DEFAULTS,
    Stage,
    builtin_map,
    cellmap_from_toml_text,
    cellmap_toml,
)
from edopt.formats.verilog import (
    DEFAULT_INPUT_DRIVE,
    DEFAULT_OUTPUT_LOAD,
    SIZE_ATTRIBUTE,
    read_netlist,
    read_verilog,
    write_sizes_csv,
    write_verilog,
)
from edopt.frontier import frontier
from edopt.sizing import POLISH, size

ROOT = Path(__file__).resolve().parent.parent
RTL = Path(__file__).resolve().parent / "rtl"
GENERIC = ("abc -g AND,NAND,OR,NOR,XOR,XNOR,ANDNOT,ORNOT,MUX,AOI3,OAI3,AOI4,OAI4; "
           "opt_clean")
RNG_SEED = 20240611


# ------------------------------------------------------------------------------- yosys runs
@pytest.fixture(scope="module")
def yosys() -> str:
    exe = shutil.which("yosys")
    if exe is None:
        if os.environ.get("CI"):
            pytest.fail("yosys is not installed, but CI must run the real synthesis "
                        "(apt-get install -y yosys)")
        pytest.skip("yosys is not installed (CI installs it: apt-get install -y yosys)")
    return exe


def run_yosys(exe: str, script: str, cwd: Path) -> None:
    done = subprocess.run([exe, "-q", "-p", script], cwd=cwd, capture_output=True, text=True,
                          timeout=120)
    assert done.returncode == 0, f"yosys failed:\n{done.stdout}\n{done.stderr}"


def stat_counts(path: Path, top: str) -> dict[str, int]:
    """Cell counts of module ``top`` in a yosys ``stat`` report."""
    counts: dict[str, int] = {}
    lines = path.read_text().splitlines()
    begin = next(k for k, line in enumerate(lines) if line.strip() == f"=== {top} ===")
    start = next(k for k, line in enumerate(lines) if k > begin and "Number of cells" in line)
    for line in lines[start + 1:]:
        m = re.fullmatch(r"\s+(\S+)\s+(\d+)\s*", line)
        if not m:
            break
        counts[m.group(1).lstrip("\\")] = int(m.group(2))
    return counts


def synthesise(exe: str, tmp: Path, rtl: str, top: str, *, flatten: bool,
               params: dict[str, int] | None = None) -> dict[str, Path]:
    """One yosys run: netlists with expressions (default) and with cell instances (-noexpr),
    and the flattened design's ``stat``."""
    chparam = "".join(f"chparam -set {k} {v} {top}; " for k, v in (params or {}).items())
    script = (f"read_verilog {RTL / rtl}; {chparam}synth -top {top}"
              f"{' -flatten' if flatten else ''}; {GENERIC}; "
              f"write_verilog -noattr {top}_expr.v; write_verilog -noattr -noexpr {top}_cells.v; "
              f"flatten; tee -q -o {top}_stat.txt stat")
    run_yosys(exe, script, tmp)
    return {"expr": tmp / f"{top}_expr.v", "cells": tmp / f"{top}_cells.v",
            "stat": tmp / f"{top}_stat.txt"}


@pytest.fixture(scope="module")
def flat_adder(yosys: str, tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    return synthesise(yosys, tmp_path_factory.mktemp("flat"), "adder.v", "adder_flat",
                      flatten=True, params={"N": 8})


@pytest.fixture(scope="module")
def hier_adder(yosys: str, tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    return synthesise(yosys, tmp_path_factory.mktemp("hier"), "adder.v", "adder",
                      flatten=False, params={"N": 6})


@pytest.fixture(scope="module")
def alu(yosys: str, tmp_path_factory: pytest.TempPathFactory) -> dict[str, Path]:
    return synthesise(yosys, tmp_path_factory.mktemp("alu"), "alu_slice.v", "alu_slice",
                      flatten=True)


# ------------------------------------------------------------------------------ references
def words(bits: int, n: int, seed: int) -> np.ndarray:
    """Random operands plus the carry-chain extremes (all ones, zero)."""
    w = np.random.default_rng(seed).integers(0, 2**bits, size=n)
    w[:3] = [2**bits - 1, 0, 1]
    return w


def bit_values(name: str, word: np.ndarray, bits: int) -> dict[str, np.ndarray]:
    return {f"{name}[{i}]": ((word >> i) & 1).astype(bool) for i in range(bits)}


def word_of(values: dict[str, np.ndarray], names: list[str]) -> np.ndarray:
    return sum(values[n].astype(np.int64) << i for i, n in enumerate(names))


def adder_mismatches(netlist, bits: int, seed: int = RNG_SEED) -> int:
    """Vectors on which the imported adder's sum differs from Python's a + b + ci."""
    n = 400
    a, b = words(bits, n, seed), words(bits, n, seed + 1)[::-1].copy()
    ci = np.random.default_rng(seed + 2).integers(0, 2, size=n)
    values = bit_values("a", a, bits) | bit_values("b", b, bits) | {"ci": ci.astype(bool)}
    out = netlist.simulate(values)
    got = word_of(out, [f"s[{i}]" for i in range(bits)] + ["co"])
    return int(np.sum(got != a + b + ci))     # integer arithmetic


def alu_reference(op: np.ndarray, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """The 5-bit result of tests/rtl/alu_slice.v by Python integer arithmetic."""
    return np.select([op == 0, op == 1, op == 2],
                     [(a + b) & 31, a & b, a ^ b], (a - b) & 31)


def alu_mismatches(netlist, seed: int = RNG_SEED) -> int:
    """Simulate the logic between the two register stages; compare with integer arithmetic.

    The launch registers' D pins are top-level inputs; their Q nets get those values. The
    capture registers' Q pins are the outputs y and c; their D nets must hold the result.
    """
    n = 400
    rng = np.random.default_rng(seed)
    op, a, b = rng.integers(0, 4, n), rng.integers(0, 16, n), rng.integers(0, 16, n)
    top_in = bit_values("op", op, 2) | bit_values("a", a, 4) | bit_values("b", b, 4)
    top_in |= {"rst": np.zeros(n, dtype=bool), "clk": np.zeros(n, dtype=bool)}
    values = {}
    capture_d = {}
    for inst in netlist.instances.values():
        if inst.register:
            if inst.pins["D"] in top_in:
                values[inst.pins["Q"]] = top_in[inst.pins["D"]]
            else:
                capture_d[inst.pins["Q"]] = inst.pins["D"]
    for net in netlist.circuit.inputs:
        if net in top_in:
            values[net] = top_in[net]
    out = netlist.simulate(values)
    result = word_of(out, [capture_d[f"y[{i}]"] for i in range(4)] + [capture_d["c"]])
    return int(np.sum(result != alu_reference(op, a, b)))


# ------------------------------------------------------------------------- synthesis checks
def test_flat_adder_from_expressions(flat_adder: dict[str, Path]) -> None:
    text = flat_adder["expr"].read_text()
    assert re.search(r"assign \S+ = ~\(", text), "yosys wrote no gate expressions"
    assert not re.search(r"\\\$_", text)             # no cell instances: the expression path
    nl = read_netlist(flat_adder["expr"])
    assert adder_mismatches(nl, 8) == 0               # integer arithmetic
    assert nl.cell_counts() == stat_counts(flat_adder["stat"], "adder_flat")   # yosys stat
    # the same netlist written with cell instances gives the same circuit
    same = read_netlist(flat_adder["cells"])
    assert same.cell_counts() == nl.cell_counts()
    assert adder_mismatches(same, 8) == 0


def test_flat_adder_sizes_and_sweeps(flat_adder: dict[str, Path]) -> None:
    c = read_verilog(flat_adder["expr"])
    fast = size(c)
    assert fast.status == "optimal" and fast.delay_ps > 0
    slow = size(c, target="1.5x")
    assert slow.delay_ps <= 1.5 * fast.delay_ps * (1 + 1e-6)
    assert slow.energy_fj < fast.energy_fj          # first principles: slack buys energy
    f = frontier(c, points=4, span=1.6)
    ok = f.table[f.table.status != "failed"]
    assert len(ok) == 4
    assert np.all(np.diff(ok.energy_fj.to_numpy()) <= 1e-9 * ok.energy_fj.max())


def test_hierarchical_adder_is_flattened(hier_adder: dict[str, Path]) -> None:
    text = hier_adder["cells"].read_text()
    assert "module full_adder" in text and "\\bit[0].fa " in text   # hierarchy kept by yosys
    nl = read_netlist(hier_adder["cells"])                           # top found: adder
    assert nl.top == "adder"
    assert adder_mismatches(nl, 6) == 0                               # integer arithmetic
    assert nl.cell_counts() == stat_counts(hier_adder["stat"], "adder")   # yosys stat, flattened
    assert any(name.startswith("bit[5].fa.") for name in nl.instances)
    # each flattened instance of full_adder has the same cells
    per = {}
    for inst in nl.instances.values():
        per.setdefault(inst.name.split(".fa.")[0], []).append(inst.cell)
    assert len(per) == 6 and len({tuple(sorted(v)) for v in per.values()}) == 1
    size(nl.circuit)


def test_alu_slice_between_registers(alu: dict[str, Path]) -> None:
    nl = read_netlist(alu["cells"])
    c = nl.circuit
    assert alu_mismatches(nl) == 0                               # integer arithmetic
    assert nl.cell_counts() == stat_counts(alu["stat"], "alu_slice")   # yosys stat
    regs = [i for i in nl.instances.values() if i.register]
    assert len(regs) == 4 + 4 + 2 + 4 + 1                        # first principles: the RTL
    # every output of the circuit is a capture point: a D pin with the setup allowance
    assert set(c.outputs) == {i.pins["D"] for i in regs if i.pins["D"] not in c.inputs}
    for port in c.outputs.values():
        assert port.allowance_ps == REGISTER_DEFAULTS["allowance_ps"]
        assert port.load == REGISTER_DEFAULTS["load"]
    # launch points: the register outputs, driven like an inverter of the register's drive
    launches = {i.pins["Q"] for i in regs if i.pins["D"] in ("a[0]", "b[3]", "op[1]")}
    for net in launches:
        assert c.inputs[net].drive == REGISTER_DEFAULTS["drive"]
        assert c.inputs[net].arrival_ps == REGISTER_DEFAULTS["arrival_ps"]
    fast = size(c)
    f = frontier(c, points=3)
    assert (f.table.status != "failed").all()
    # first principles: the target covers arrival + allowance, so moving every capture's
    # setup by +30 ps moves the register-to-register delay by exactly +30 ps
    later = read_verilog(alu["cells"], register={"allowance_ps":
                                                 REGISTER_DEFAULTS["allowance_ps"] + 30.0})
    # (within the polish allowance of the minimum-delay sizing, edopt.sizing.POLISH)
    assert size(later).delay_ps == pytest.approx(fast.delay_ps + 30.0,
                                                 abs=2 * POLISH * fast.delay_ps)


def test_register_always_blocks_are_refused_with_a_hint(alu: dict[str, Path]) -> None:
    text = alu["expr"].read_text()
    line = next(k for k, t in enumerate(text.splitlines(), 1) if t.strip().startswith("always"))
    with pytest.raises(CaseError) as err:
        read_verilog(alu["expr"])
    msg = str(err.value)
    assert f"{alu['expr']}:{line}:" in msg and "always" in msg and "-noexpr" in msg


def test_a_wrong_pin_mapping_fails_the_simulation(alu: dict[str, Path],
                                                  flat_adder: dict[str, Path]) -> None:
    """The logic check is sensitive: swapping the data pins of one cell breaks it."""
    for path, mismatches in ((alu["cells"], alu_mismatches),
                             (flat_adder["cells"], lambda nl: adder_mismatches(nl, 8))):
        assert mismatches(read_netlist(path)) == 0
        counts = read_netlist(path).cell_counts()
        asym = [c for c in ("$_MUX_", "$_ANDNOT_", "$_ORNOT_") if c in counts]
        assert asym, counts
        broken = builtin_map()
        cell = broken.cells[asym[0]]
        broken.cells[asym[0]] = replace(cell, stages=tuple(
            Stage(s.type, tuple({"A": "B", "B": "A"}.get(p, p) for p in s.pins))
            for s in cell.stages))
        assert mismatches(read_netlist(path, cell_map=broken)) > 0


def test_builtin_cells_match_the_yosys_models(yosys: str, tmp_path: Path) -> None:
    """Every combinational cell of the built-in map against simcells.v, evaluated by yosys."""
    cmap = builtin_map()
    gates = [c for c in cmap.cells.values() if not c.register]
    lines = []
    for c in gates:
        mod = "t" + re.sub(r"\W", "_", c.name)
        pins = ", ".join(c.ports)
        conn = ", ".join(f".{p}({p})" for p in c.ports)
        lines += [f"module {mod}({pins});", f"  input {', '.join(c.inputs)};",
                  f"  output {c.outputs[0]};", f"  \\{c.name} u ({conn});", "endmodule"]
    (tmp_path / "cells.v").write_text("\n".join(lines) + "\n")
    script = []
    for c in gates:
        mod = "t" + re.sub(r"\W", "_", c.name)
        script.append(f"design -reset; read_verilog cells.v; read_verilog +/simcells.v; "
                      f"hierarchy -top {mod}; proc; flatten; "
                      f"tee -q -o {mod}.txt eval -table {','.join(c.inputs)} {mod}")
    run_yosys(yosys, "; ".join(script), tmp_path)
    for c in gates:
        mod = "t" + re.sub(r"\W", "_", c.name)
        rows = [r for r in (tmp_path / f"{mod}.txt").read_text().splitlines()
                if re.search(r"1'[01].*\|", r)]
        assert len(rows) == 2 ** len(c.inputs), c.name
        table = np.array([[v == "1" for v in re.findall(r"1'([01])", r)] for r in rows])
        nl = read_netlist(tmp_path / "cells.v", top=mod)
        out = nl.simulate({p: table[:, k] for k, p in enumerate(c.inputs)})
        assert np.array_equal(out[c.outputs[0]], table[:, -1]), c.name


# ---------------------------------------------------------------------------------- writing
def test_written_netlist_round_trips(alu: dict[str, Path], tmp_path: Path, yosys: str) -> None:
    nl = read_netlist(alu["cells"])
    sizing = size(nl.circuit, target="1.3x")
    text = write_verilog(nl.circuit, sizing, tmp_path / "sized.v")
    back = read_netlist(tmp_path / "sized.v")
    assert back.circuit.gates == nl.circuit.gates
    assert back.circuit.inputs == nl.circuit.inputs
    assert back.circuit.outputs == nl.circuit.outputs
    # the sizes in the attributes are those of the sizing, stage by stage
    sizes = sizing.sizes
    pattern = re.compile(r'\(\* ' + SIZE_ATTRIBUTE + r' = "([^"]*)".*?\*\) (\S+) +(\S+) ')
    seen = 0
    for m in pattern.finditer(text):
        inst = nl.instances[m.group(3).lstrip("\\")]
        got = [float(x) for x in m.group(1).split()]
        assert got == pytest.approx([sizes[g] for g in inst.gates], rel=1e-5)
        seen += 1
    assert seen == sum(1 for i in nl.instances.values() if i.gates)
    # yosys reads what we wrote and counts the same cells
    run_yosys(yosys, "read_verilog sized.v; hierarchy -top alu_slice; tee -q -o st.txt stat",
              tmp_path)
    assert stat_counts(tmp_path / "st.txt", "alu_slice") == nl.cell_counts()


def test_size_csv_maps_back_to_instances(flat_adder: dict[str, Path]) -> None:
    nl = read_netlist(flat_adder["expr"])
    sizing = size(nl.circuit)
    rows = list(csv.DictReader(io.StringIO(write_sizes_csv(nl.circuit, sizing))))
    assert {r["instance"] for r in rows} == set(nl.instances)
    stages = sum(len(i.gates) for i in nl.instances.values())
    assert len(rows) == stages == len(nl.circuit.gates)         # one row per stage
    for r in rows:
        inst = nl.instances[r["instance"]]
        assert r["gate"] == inst.gates[int(r["stage"]) - 1]
        assert float(r["size"]) == pytest.approx(sizing.sizes[r["gate"]], rel=1e-5)
    with pytest.raises(EdoptError, match="another circuit"):
        write_sizes_csv(nl.circuit, {"x": 1.0})


# ------------------------------------------------------------------------------ hand netlists
FEATURES = r"""`timescale 1ns/1ps
// hand-written netlist: escaped names, buses, positional pins, primitives, constants
/* a block
   comment */
module half(x, y, s, c);
  input x, y; output s, c;
  (* keep = 1 *) \$_XOR_ u_s (.A(x), .B(y), .Y(s));
  \$_AND_ u_c (x, y, c);                     // positional: A, B, Y
endmodule

module top (a, b, en, y, z, k, t);
  input [3:0] a;
  input [0:1] b;                             // ascending range
  input en;
  output [2:0] y;
  output z, k, t;
  wire [1:0] h;
  wire \odd.name ;
  supply1 vdd;
  half h0 (.x(a[0]), .y(b[0]), .s(h[0]), .c(h[1]));
  nand g1 (\odd.name , a[1], a[2], vdd);     // vdd ties the third input high
  nor (y[0], \odd.name , h[0]);              // unnamed primitive
  \$_MUX_ m0 (.A(a[3]), .B(h[1]), .S(en), .Y(y[1]));
  \$_AOI3_ g3 (.A(b[1]), .B(1'b1), .C(h[0]), .Y(y[2]));
  assign z = ~(a[0] ^ b[1]);
  assign {k, t} = {en, 1'b0};                // an input fed through and a tie-off
endmodule

module spare (p, q);
  input p; output q;
  \$_NOT_ i (.A(p), .Y(q));
endmodule
"""


def features_reference(v: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The function of FEATURES by hand (first principles, from the text above)."""
    h0 = v["a[0]"] ^ v["b[0]"]
    h1 = v["a[0]"] & v["b[0]"]
    odd = ~(v["a[1]"] & v["a[2]"])
    return {"y[0]": ~(odd | h0), "y[1]": np.where(v["en"], h1, v["a[3]"]),
            "y[2]": ~((v["b[1]"] & True) | h0), "z": ~(v["a[0]"] ^ v["b[1]"]),
            "k": v["en"], "t": np.zeros_like(v["en"])}


def test_hand_netlist_features(tmp_path: Path) -> None:
    path = tmp_path / "features.v"
    path.write_text(FEATURES)
    with pytest.raises(CaseError, match="top module: candidates spare, top"):
        read_verilog(path)
    nl = read_netlist(path, top="top")
    assert set(nl.instances) >= {"h0.u_s", "h0.u_c", "g1", "m0", "g3", "assign:z"}
    assert nl.cell_counts()["nor"] == 1
    rng = np.random.default_rng(RNG_SEED)
    names = [f"a[{i}]" for i in range(4)] + ["b[0]", "b[1]", "en"]
    v = {n: rng.integers(0, 2, 128).astype(bool) for n in names}
    out = nl.simulate(v)
    for net, want in features_reference(v).items():
        assert np.array_equal(out[net], want), net
    c = nl.circuit
    # tie-offs are ideal inputs (no drive, no cap): off the timing graph
    assert c.inputs["1'b1"].drive is None and c.inputs["1'b1"].cap is None
    assert nl.constants == {"1'b1": True}
    # outputs straight from an input or a constant have no gate to size
    assert "k" not in c.outputs and "t" not in c.outputs
    assert any("k, t" in n for n in nl.notes)
    size(c)
    # the writer keeps those as assignments, and reading back gives the same function
    text = write_verilog(c, None, tmp_path / "again.v")
    assert "assign k = en;" in text and "assign t = 1'b0;" in text
    out2 = read_netlist(tmp_path / "again.v").simulate(v)
    for net in features_reference(v):
        assert np.array_equal(out2[net], out[net]), net


def test_port_defaults_and_overrides(tmp_path: Path) -> None:
    path = tmp_path / "features.v"
    path.write_text(FEATURES)
    c = read_verilog(path, top="top")
    assert {p.drive for n, p in c.inputs.items() if n[0] in "abe"} == {DEFAULT_INPUT_DRIVE}
    assert {p.load for p in c.outputs.values()} == {DEFAULT_OUTPUT_LOAD}
    c2 = read_verilog(path, top="top", input_drive=None, output_load=20.0,
                      input_arrival_ps=5.0, output_allowance_ps=7.0)
    assert all(p.drive is None and p.arrival_ps == 5.0 for p in c2.inputs.values()
               if p.net != "1'b1")
    assert {(p.load, p.allowance_ps) for p in c2.outputs.values()} == {(20.0, 7.0)}


GOOD = """module m (a, b, y);
  input a, b;
  output y;
  wire n1;
  \\$_NAND_ u1 (.A(a), .B(b), .Y(n1));
  \\$_NOT_ u2 (.A(n1), .Y(y));
endmodule
"""


def _edit(old: str, new: str) -> str:
    assert old in GOOD
    return GOOD.replace(old, new)


MALFORMED = {
    # name: (text, the line that is at fault (None: end of file), words the message must name)
    "truncated": (GOOD[: GOOD.index("u2") + 10], None, ["truncated", "module 'm'"]),
    "unknown cell": (_edit("\\$_NOT_ u2", "INVX9 u2"), "INVX9", ["u2", "INVX9", "unknown cell"]),
    "missing module": (_edit("\\$_NOT_ u2 (.A(n1), .Y(y))", "sub u2 (.p(n1), .q(y))"), "sub u2",
                       ["missing module", "'sub'", "u2"]),
    "duplicate instance": (_edit("u2", "u1"), "$_NOT_ u1", ["duplicate instance", "'u1'"]),
    "net driven twice": (_edit(".Y(y)", ".Y(n1)"), "$_NOT_ u2",
                         ["'n1'", "driven twice", "u1", "u2"]),
    "unconnected pin": (_edit(".B(b)", ".B()"), ".B()", ["'B'", "unconnected", "u1"]),
    "undriven net": (_edit(".A(n1)", ".A(n2)"), "n2", ["'n2'", "no driver", "u2"]),
    "syntax error": (_edit("wire n1;", "wire n1;\n  assign y = ;"), "assign y", ["syntax"]),
    "not a gate": (_edit("wire n1;", "wire n1, q;\n  assign q = a & b & n1;"), "assign q",
                   ["not a single gate"]),
    "open comment": (GOOD + "/* trailing", "/* trailing", ["comment", "truncated"]),
    "loop": (_edit(".B(b)", ".B(y)"), "u1", ["combinational loop", "u1", "u2"]),
    "width": (_edit("input a, b;", "input a;\n  input [1:0] b;"), "u1",
              ["'B'", "2 bits", "u1"]),
    "unknown pin": (_edit(".B(b)", ".B(b), .Z(a)"), "u1", ["no pin 'Z'", "u1"]),
}


@pytest.mark.parametrize("case", list(MALFORMED))
def test_malformed_netlists_name_file_line_and_culprit(case: str, tmp_path: Path) -> None:
    text, marker, words_ = MALFORMED[case]
    path = tmp_path / f"{case.replace(' ', '_')}.v"
    path.write_text(text)
    if marker is None:
        line = text.count("\n") + 1            # first principles: the end of the file
    else:
        line = next(k for k, t in enumerate(text.splitlines(), 1) if marker in t)
    with pytest.raises(CaseError) as err:
        read_verilog(path)
    msg = str(err.value)
    assert msg.startswith(f"{path}:{line}: "), msg
    for w in words_:
        assert w in msg, (w, msg)


def test_truncation_anywhere_gives_a_case_error(flat_adder: dict[str, Path],
                                                tmp_path: Path) -> None:
    """Cut a netlist at many places: always a CaseError, never another exception."""
    text = flat_adder["expr"].read_text().rstrip()
    cuts = sorted(set(np.linspace(1, len(text) - 1, 150).astype(int)) | set(range(1, 40)))
    path = tmp_path / "cut.v"
    for k in cuts:
        path.write_text(text[:k])
        with pytest.raises(CaseError):
            read_verilog(path)
    path.write_text(text)
    read_verilog(path)


def test_missing_top_module_is_named(tmp_path: Path) -> None:
    path = tmp_path / "m.v"
    path.write_text(GOOD)
    with pytest.raises(CaseError, match=r"missing module.*'nosuch'.*modules: m"):
        read_verilog(path, top="nosuch")
    with pytest.raises(CaseError, match="cannot read"):
        read_verilog(tmp_path / "absent.v")


# -------------------------------------------------------------------------------- cell maps
LIBRARY = """
[map]
name = "invented demo library"

[[gate_type]]
name = "nmaj3"
pulldown = "A*B + C*(A+B)"
description = "inverted majority"

[[cell]]
name = "ND2X1"
output = "Z"
type = "nand2"
pins = ["I0", "I1"]
ports = ["Z", "I0", "I1"]

[[cell]]
name = "MAJ3X1"
output = "Z"
stages = [{ type = "nmaj3", pins = ["I0", "I1", "I2"] }, { type = "inv", pins = ["#1"] }]

[[cell]]
name = "DFQX1"
register = true
data = ["D"]
clock = ["CK"]
outputs = ["Q"]
drive = 3.0
arrival_ps = 40.0
load = 1.5
allowance_ps = 12.0
"""

LIB_NETLIST = """module lib (ck, a, b, c, y);
  input ck, a, b, c; output y;
  wire qa, qb, qc, m, n;
  DFQX1 ra (.D(a), .CK(ck), .Q(qa));
  DFQX1 rb (.D(b), .CK(ck), .Q(qb));
  DFQX1 rc (.D(c), .CK(ck), .Q(qc));
  MAJ3X1 u1 (.I0(qa), .I1(qb), .I2(qc), .Z(m));
  ND2X1 u2 (n, m, qa);
  DFQX1 ry (.D(n), .CK(ck), .Q(y));
endmodule
"""


def test_toml_cell_map_library(tmp_path: Path) -> None:
    (tmp_path / "lib.toml").write_text(LIBRARY)
    (tmp_path / "lib.v").write_text(LIB_NETLIST)
    nl = read_netlist(tmp_path / "lib.v", cell_map=tmp_path / "lib.toml")
    c = nl.circuit
    assert nl.instances["u1"].gates == ("u1#1", "u1#2")
    assert nl.instances["u1"].types == ("nmaj3", "inv")
    assert c.inputs["qa"].drive == 3.0 and c.inputs["qa"].arrival_ps == 40.0   # from the map
    assert (c.outputs["n"].load, c.outputs["n"].allowance_ps) == (1.5, 12.0)
    v = {q: np.array([x >> k & 1 for x in range(8)], dtype=bool)
         for k, q in enumerate(["qa", "qb", "qc"])}
    out = nl.simulate(v)
    maj = (v["qa"] & v["qb"]) | (v["qc"] & (v["qa"] | v["qb"]))   # majority by hand
    assert np.array_equal(out["n"], ~(maj & v["qa"]))
    size(c)
    # the built-in cells stay available unless the map says builtin = false
    assert "$_AND_" in cellmap_from_toml_text(LIBRARY).cells
    only = cellmap_from_toml_text(LIBRARY.replace('name = "invented demo library"',
                                                  'name = "x"\nbuiltin = false'))
    assert "$_AND_" not in only.cells and "ND2X1" in only.cells


TOML_ERRORS = {
    "unknown type": ('type = "nand2"', 'type = "nand7"', "unknown gate type 'nand7'"),
    "forward stage": ('pins = ["#1"]', 'pins = ["#2"]', "not earlier"),
    "unknown key": ('output = "Z"\ntype', 'output = "Z"\ncolour = "red"\ntype',
                    "unknown key 'colour'"),
    "unused stage": ('{ type = "inv", pins = ["#1"] }', '{ type = "inv", pins = ["I0"] }',
                     "feeds no later stage"),
}


@pytest.mark.parametrize("case", list(TOML_ERRORS))
def test_cell_map_errors_name_the_line(case: str) -> None:
    old, new, words_ = TOML_ERRORS[case]
    assert old in LIBRARY
    text = LIBRARY.replace(old, new, 1)
    head = text.rfind("[[cell]]", 0, text.index(new))
    line = text.count("\n", 0, head) + 1          # the [[cell]] header of the faulty entry
    with pytest.raises(CaseError) as err:
        cellmap_from_toml_text(text, "lib.toml")
    assert str(err.value).startswith(f"lib.toml:{line}: ") and words_ in str(err.value)


def test_builtin_map_round_trips_through_toml() -> None:
    cmap = builtin_map()
    again = cellmap_from_toml_text(cellmap_toml(cmap), "builtin.toml")
    assert again.cells == cmap.cells
    names = set(cmap.cells)
    for cell in ("$_NOT_", "$_NAND_", "$_NOR_", "$_AND_", "$_OR_", "$_XOR_", "$_XNOR_",
                 "$_ANDNOT_", "$_ORNOT_", "$_MUX_", "$_AOI3_", "$_OAI3_", "$_AOI4_", "$_OAI4_",
                 "$_BUF_", "$_DFF_P_", "$_DFF_N_", "$_SDFF_PP0_", "$_DFFE_PP_", "$_DLATCH_P_"):
        assert cell in names, cell                 # the cells the issue lists


def test_benchmark_script_runs_small() -> None:
    """The benchmark generator at a small size: parses, sizes nothing, exits 0."""
    sys.path.insert(0, str(ROOT / "benchmarks"))
    try:
        import verilog_import
    finally:
        sys.path.pop(0)
    assert verilog_import.main(["--instances", "3000"]) == 0
