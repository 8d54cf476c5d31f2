"""Command line: standard structures and Verilog netlists as cases."""

import json
import shutil
import subprocess
from pathlib import Path

import pytest

from edopt.cli import main

RTL = Path(__file__).resolve().parent / "rtl"


def test_generate_lists_and_writes_a_case(tmp_path, capsys):
    assert main(["generate"]) == 0
    assert "kogge-stone" in capsys.readouterr().out
    out = tmp_path / "bk.toml"
    assert main(["generate", "brent-kung", "--param", "bits=8", "--out", str(out)]) == 0
    assert main(["size", str(out), "--target", "1.2x", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["status"] == "optimal" and doc["delay_ps"] <= doc["target_ps"] * (1 + 1e-6)


@pytest.mark.parametrize("argv, match", [
    (["generate", "nosuch"], "unknown structure"),
    (["generate", "decoder", "--param", "bits"], "name=value"),
])
def test_generate_bad_input(argv, match, capsys):
    assert main(argv) == 2
    err = capsys.readouterr().err
    assert match in err and "Traceback" not in err


def test_size_a_synthesised_netlist(tmp_path, capsys):
    if shutil.which("yosys") is None:
        pytest.skip("yosys is not installed (apt-get install yosys); CI installs it")
    netlist = tmp_path / "adder.v"
    script = (f"read_verilog {RTL / 'adder.v'}; synth -flatten -top adder; "
              "abc -g AND,NAND,OR,NOR,XOR,XNOR,ANDNOT,ORNOT,MUX,AOI3,OAI3,AOI4,OAI4; "
              f"opt_clean; write_verilog -noattr {netlist}")
    subprocess.run(["yosys", "-q", "-p", script], check=True)
    assert main(["size", str(netlist), "--top", "adder", "--target", "1.3x", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["status"] == "optimal" and doc["delay_ps"] <= doc["target_ps"] * (1 + 1e-6)


def test_unknown_cell_in_netlist(tmp_path, capsys):
    bad = tmp_path / "bad.v"
    bad.write_text("module x(input a, output y);\n  FOO u1(.A(a), .Y(y));\nendmodule\n")
    assert main(["size", str(bad)]) == 2
    err = capsys.readouterr().err
    assert f"{bad}:2" in err and "FOO" in err and "Traceback" not in err


def test_size_with_discrete_strengths(capsys):
    case = Path(__file__).resolve().parent.parent / "cases" / "decoder.toml"
    assert main(["size", str(case), "--target", "1.3x", "--strengths", "1,2,4,8,16,32",
                 "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert set(doc["sizes"].values()) <= {1.0, 2.0, 4.0, 8.0, 16.0, 32.0}
    assert doc["delay_ps"] <= doc["target_ps"] * (1 + 1e-9)
    assert doc["energy_fj"] >= doc["bound_fj"] and doc["gap_pct"] >= 0


def test_bad_strengths(capsys):
    case = Path(__file__).resolve().parent.parent / "cases" / "decoder.toml"
    assert main(["size", str(case), "--strengths", "1,two"]) == 2
    assert "sizes must be numbers" in capsys.readouterr().err


def test_case_file_strengths(tmp_path, capsys):
    src = (Path(__file__).resolve().parent.parent / "cases" / "mixed_chain.toml").read_text()
    case = tmp_path / "chain.toml"
    extra = "target = \"1.2x\"\nstrengths = [1, 2, 4, 8, 16, 32, 64]"
    case.write_text(src.replace("target = \"1.2x\"", extra))
    assert main(["size", str(case), "--target", "case", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    free = {k: v for k, v in doc["sizes"].items() if k != "u1"}   # u1 is fixed by its input cap
    assert set(free.values()) <= {1.0, 2.0, 4.0, 8.0, 16.0, 32.0, 64.0}
    assert doc["gap_pct"] is not None and doc["gap_pct"] >= 0
    case.write_text(src.replace('target = "1.2x"', 'target = "1.2x"\nstrengths = [0, 2]'))
    assert main(["size", str(case)]) == 2
    assert "strengths must be" in capsys.readouterr().err
