"""Tests of the ``edopt`` command line, run in-process through ``main`` (and once as a process).

Sources named beside each check:
- "SSH99": I. Sutherland, R. Sproull, D. Harris, "Logical Effort: Designing Fast CMOS Circuits",
  Morgan Kaufmann 1999 (from memory): path effort F = G B H, D = N F^(1/N) + P at equal stage
  effort; an inverter has g = 1, p = p_inv.
- "evaluator": `edopt.timing.evaluate` on a freshly compiled Model, from the sizes in the JSON
  alone (no solver in the loop).
- "tomllib": the standard-library TOML reader, counting the tables of a case file directly.
- "first principles": properties of the optimisation itself (a looser bound cannot cost more, an
  extra constraint cannot cost less, E*D is least where d ln E / d ln D = -1, ...).
"""

from __future__ import annotations

import csv
import json
import math
import os
import subprocess
import sys
import tomllib
import xml.etree.ElementTree as ET
from pathlib import Path

import numpy as np
import pytest

from edopt import cli
from edopt.circuit import chain
from edopt.formats.case import load_case, write_case
from edopt.model import compile_model
from edopt.report.tables import dumps
from edopt.sizing import CAUTION
from edopt.technology import technology
from edopt.timing import evaluate

REPO = Path(__file__).resolve().parent.parent
CASES = sorted((REPO / "cases").glob("*.toml"))
MIXED = REPO / "cases" / "mixed_chain.toml"
DECODER = REPO / "cases" / "decoder.toml"
FIGURES = ("pareto", "price", "size_profile")


def run(capsys, *argv: str) -> tuple[int, str, str]:
    code = cli.main([str(a) for a in argv])
    out, err = capsys.readouterr()
    assert "Traceback" not in err
    return code, out, err


def run_json(capsys, *argv: str) -> dict:
    code, out, err = run(capsys, *argv, "--json")
    assert code == 0, err
    return json.loads(out)          # the whole of stdout is one JSON document


def retime(case_path: Path, sizes: dict[str, float], target_ps: float | None = None,
           cycle_ps: float | None = None, tech=None):
    """evaluator: time and cost the JSON sizes on a freshly loaded and compiled case."""
    case = load_case(case_path)
    model = compile_model(case.circuit, tech or case.tech)
    assert set(sizes) == set(model.gate_names)
    x = np.where(model.fixed, model.lo, np.nan)
    index = {name: i for i, name in enumerate(model.names)}
    for gate, value in sizes.items():
        x[index[gate]] = value
    assert np.all(np.isfinite(x))
    return evaluate(model, x, target_ps=target_ps, cycle_ps=cycle_ps)


@pytest.fixture(scope="module")
def inv3(tmp_path_factory) -> Path:
    """Three inverters from 1 C_u into 64 C_u, as a case file."""
    path = tmp_path_factory.mktemp("chain") / "inv3.toml"
    write_case(chain(["inv"] * 3, cin=1.0, cload=64.0, name="inv3"), None, path)
    return path


def test_cases_exist():
    assert {p.name for p in CASES} >= {"decoder.toml", "carry_network.toml", "mixed_chain.toml"}


# ------------------------------------------------------------------------------------ check
@pytest.mark.parametrize("path", CASES, ids=[p.stem for p in CASES])
def test_check_counts_match_the_file(capsys, path):
    raw = tomllib.loads(path.read_text(encoding="utf-8"))
    data = run_json(capsys, "check", path)
    # tomllib: one [[gate]] / [[input]] / [[output]] table per entry
    assert data["gates"] == len(raw["gate"])
    assert data["inputs"] == len(raw["input"])
    assert data["outputs"] == len(raw["output"])
    assert sum(data["types"].values()) == len(raw["gate"])
    assert data["caution"] == CAUTION
    code, out, _ = run(capsys, "check", path)
    assert code == 0
    assert f"gates        {len(raw['gate'])}" in out
    assert CAUTION in out


def test_check_pure_chain_closed_form(capsys, inv3):
    data = run_json(capsys, "check", inv3)
    ch = data["chain"]
    # SSH99 (from memory): F = G B H = 1 * 1 * 64, f = 64^(1/3) = 4, D = 3 f + 3 p_inv = 15 tau
    tau = technology("generic").tau_ps
    assert ch["path_effort"] == pytest.approx(64.0, rel=1e-12)
    assert ch["stage_effort"] == pytest.approx(4.0, rel=1e-12)
    assert ch["min_delay_ps"] == pytest.approx(15.0 * tau, rel=1e-12)
    # first principles: D(N) = N (F^(1/N) + p_inv) when N - 3 inverters are added
    n = np.arange(3, 30)
    assert ch["advice"]["best_stages"] == int(n[np.argmin(n * (64.0 ** (1 / n) + 1.0))])
    code, out, _ = run(capsys, "check", inv3)
    assert code == 0 and "path effort F 64" in out


def test_check_general_network_says_why_not_chain(capsys):
    data = run_json(capsys, "check", MIXED)
    assert data["chain"] is None and "use the general solver" in data["chain_note"]


# ------------------------------------------------------------------------------------- size
def test_size_fastest_json_retimes(capsys):
    d = run_json(capsys, "size", DECODER)
    assert d["problem"] == "fastest" and d["status"] == "optimal"
    ev = retime(DECODER, d["sizes"])
    assert ev.circuit_delay_ps == pytest.approx(d["delay_ps"], rel=1e-9)     # evaluator
    assert d["min_delay_ps"] == pytest.approx(d["delay_ps"], rel=1e-9)


def test_size_fastest_chain_is_the_closed_form(capsys, inv3):
    d = run_json(capsys, "size", inv3)
    # SSH99 (from memory): 15 tau for three inverters into H = 64
    assert d["delay_ps"] == pytest.approx(15.0 * technology("generic").tau_ps, rel=1e-6)
    assert retime(inv3, d["sizes"]).circuit_delay_ps == pytest.approx(d["delay_ps"], rel=1e-9)


@pytest.mark.parametrize("path", [DECODER, MIXED], ids=["decoder", "mixed_chain"])
def test_size_relative_target_json_meets_target(capsys, path):
    fast = run_json(capsys, "size", path)
    d = run_json(capsys, "size", path, "--target", "1.2x")
    target = 1.2 * fast["delay_ps"]                  # definition of a relative target
    assert d["target_ps"] == pytest.approx(target, rel=1e-9)
    ev = retime(path, d["sizes"], target_ps=d["target_ps"], cycle_ps=d["target_ps"])
    assert ev.circuit_delay_ps <= target * (1 + 1e-6)                          # evaluator
    assert ev.energy_fj == pytest.approx(d["energy_fj"], rel=1e-6)
    # first principles: the looser bound cannot need more energy than the minimum-delay sizing
    assert d["energy_fj"] < fast["energy_fj"]
    assert d["fastest_energy_fj"] == pytest.approx(fast["energy_fj"], rel=1e-9)


def test_size_absolute_target_and_text_report(capsys):
    fast = run_json(capsys, "size", MIXED)
    t = round(fast["delay_ps"] * 1.3, 1)
    code, out, err = run(capsys, "size", MIXED, "--target", f"{t}ps")
    assert code == 0, err
    assert f"target       {t:.2f} ps" in out
    assert "saving" in out and CAUTION in out


def test_size_case_target(capsys):
    raw = tomllib.loads(MIXED.read_text(encoding="utf-8"))
    rel = float(raw["case"]["target"].rstrip("x"))
    fast = run_json(capsys, "size", MIXED)
    d = run_json(capsys, "size", MIXED, "--target", "case")
    assert d["target_ps"] == pytest.approx(rel * fast["delay_ps"], rel=1e-9)


def test_size_max_effort_is_respected(capsys):
    free = run_json(capsys, "size", MIXED, "--target", "1.5x")
    d = run_json(capsys, "size", MIXED, "--target", "1.5x", "--max-effort", "4")
    ev = retime(MIXED, d["sizes"], target_ps=d["target_ps"])
    names = list(compile_model(load_case(MIXED).circuit, load_case(MIXED).tech).names)
    efforts = ev.effort[[names.index(g) for g in d["sizes"]]]
    assert efforts.max() <= 4 * (1 + 1e-6)                                     # evaluator
    assert ev.circuit_delay_ps <= d["target_ps"] * (1 + 1e-6)
    # first principles: the unlimited sizing breaks the limit here, so the limit costs energy
    ev_free = retime(MIXED, free["sizes"], target_ps=free["target_ps"])
    assert ev_free.effort.max() > 4
    assert d["energy_fj"] >= free["energy_fj"] * (1 - 1e-6)


def test_size_cycle_time_reaches_the_leakage(capsys):
    d = run_json(capsys, "size", MIXED, "--target", "1.2x", "--cycle-ps", "1000")
    ev = retime(MIXED, d["sizes"], target_ps=d["target_ps"], cycle_ps=1000.0)
    assert ev.leakage_total_fj == pytest.approx(d["leakage_fj"], rel=1e-6)     # evaluator
    ev_t = retime(MIXED, d["sizes"], target_ps=d["target_ps"])                 # cycle = target
    # first principles: leakage energy of fixed sizes is proportional to the cycle time
    assert d["leakage_fj"] == pytest.approx(ev_t.leakage_total_fj * 1000.0 / d["target_ps"],
                                            rel=1e-6)


def test_size_area_objective(capsys):
    e = run_json(capsys, "size", MIXED, "--target", "1.2x")
    a = run_json(capsys, "size", MIXED, "--target", "1.2x", "--objective", "area")
    assert a["objective"] == "area"
    # first principles: the area-minimising sizing has no more area than the energy-minimising
    # one at the same bound, and no less energy
    assert a["area"] <= e["area"] * (1 + 1e-6)
    assert a["energy_fj"] >= e["energy_fj"] * (1 - 1e-6)


def test_size_budget(capsys):
    fast = run_json(capsys, "size", MIXED)
    slow = run_json(capsys, "size", MIXED, "--target", "1.5x")
    budget = 0.5 * (fast["energy_fj"] + slow["energy_fj"])
    d = run_json(capsys, "size", MIXED, "--budget-fj", f"{budget}")
    ev = retime(MIXED, d["sizes"], target_ps=d["target_ps"], cycle_ps=d["target_ps"])
    assert ev.energy_fj <= budget * (1 + 1e-6)                                 # evaluator
    # first principles: E*(D) falls with D, so the answer lies between the two bounds
    assert fast["delay_ps"] < d["delay_ps"] < slow["target_ps"]
    assert d["energy_fj"] == pytest.approx(budget, rel=1e-4)


@pytest.mark.parametrize("n", [1, 2])
def test_size_balance_intensity(capsys, n):
    d = run_json(capsys, "size", DECODER, "--balance", str(n))
    # first principles: at the least E * D^n, -(D/E) dE/dD = n (the dual's intensity)
    assert d["problem"] == "balanced"
    assert d["intensity"] == pytest.approx(float(n), rel=1e-2)


def test_size_gates_csv(capsys, tmp_path):
    out = tmp_path / "gates.csv"
    code, _, err = run(capsys, "size", MIXED, "--target", "1.2x", "--gates-csv", out)
    assert code == 0, err
    rows = list(csv.DictReader(out.open()))
    raw = tomllib.loads(MIXED.read_text(encoding="utf-8"))
    assert [r["gate"] for r in rows] == [g["name"] for g in raw["gate"]]       # tomllib
    assert all(float(r["size"]) > 0 for r in rows)


def test_tech_override_scales_delay(capsys, inv3, tmp_path):
    slow = tmp_path / "slow.toml"
    slow.write_text('[technology]\nname = "slow"\ntau_ps = 6.0\n', encoding="utf-8")
    base = run_json(capsys, "size", inv3)
    d = run_json(capsys, "size", inv3, "--tech", slow)
    assert d["technology"] == "slow"
    # first principles: every stage delay is (p + f) tau, so doubling tau doubles the delay
    assert d["delay_ps"] == pytest.approx(2.0 * base["delay_ps"], rel=1e-6)


# ------------------------------------------------------------------------------------ sweep
def _assert_figures(folder: Path) -> None:
    for stem in FIGURES:
        png, svg = folder / f"{stem}.png", folder / f"{stem}.svg"
        assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
        assert ET.parse(svg).getroot().tag.endswith("svg")


def test_sweep_writes_figures_and_csv(capsys, tmp_path):
    code, out, err = run(capsys, "sweep", MIXED, "--points", "6", "--out", tmp_path)
    assert code == 0, err
    _assert_figures(tmp_path)
    rows = list(csv.DictReader((tmp_path / "frontier.csv").open()))
    assert len(rows) == 6
    delay = np.array([float(r["delay_ps"]) for r in rows])
    energy = np.array([float(r["energy_fj"]) for r in rows])
    order = np.argsort(delay)
    # first principles: a looser delay bound never needs more energy
    assert np.all(np.diff(energy[order]) <= 1e-6 * energy.max())
    progress = [line for line in err.splitlines() if line.startswith("point ")]
    assert [line.split()[1] for line in progress] == [f"{k}/6" for k in range(1, 7)]
    assert "summary" not in out and CAUTION in out
    for name in ("savings.csv", "gates_fastest.csv", "gates_chosen.csv", "frontier.json"):
        assert (tmp_path / name).stat().st_size > 0
    doc = json.loads((tmp_path / "frontier.json").read_text())
    assert doc["case"] == "mixed_chain" and len(doc["points"]) == 6


def test_sweep_json_only_on_stdout(capsys, tmp_path):
    d = run_json(capsys, "sweep", MIXED, "--points", "5", "--span", "1.5", "--target", "1.1x",
                 "--out", tmp_path, "--quiet", "--balanced")
    assert len(d["points"]) == 5
    assert d["chosen"]["target_ps"] == pytest.approx(1.1 * d["min_delay_ps"], rel=1e-9)
    assert max(p["target_ps"] for p in d["points"]) == pytest.approx(1.5 * d["min_delay_ps"])
    assert set(d["balanced"]) == {"E·D", "E·D²"}
    assert all(Path(f).exists() for f in d["files"])


def test_sweep_default_out_folder(capsys, tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    code, _, err = run(capsys, "sweep", MIXED, "--points", "3", "--quiet")
    assert code == 0, err
    _assert_figures(tmp_path / "edopt-out" / "mixed_chain")


# ------------------------------------------------------------------------------------- demo
def test_demo_end_to_end(capsys, tmp_path):
    code, out, err = run(capsys, "demo", "--out", tmp_path)
    assert code == 0, err
    _assert_figures(tmp_path)
    assert (tmp_path / "frontier.csv").exists() and (tmp_path / "gates_chosen.csv").exists()
    progress = [line for line in err.splitlines() if line.startswith("point ")]
    assert len(progress) == 25
    for head in ("== case ==", "== fastest ==", "== frontier", "== balanced points =="):
        assert head in out
    assert "decoder4x16" in out and CAUTION in out


def test_demo_generates_its_case_when_missing(capsys, tmp_path, monkeypatch):
    code, shipped, err = run(capsys, "demo", "--out", tmp_path / "a", "--points", "3", "--quiet")
    assert code == 0, err
    monkeypatch.setattr(cli, "CASES_DIR", tmp_path / "no-cases")
    code, generated, err = run(capsys, "demo", "--out", tmp_path / "b", "--points", "3",
                               "--quiet")
    assert code == 0, err

    def pick(text: str) -> list[str]:
        return [ln for ln in text.splitlines() if ln.startswith(("min delay", "energy"))]

    # the generator (edopt.adders.write_demos) and the shipped case file are the same network
    assert pick(generated) == pick(shipped) and pick(shipped)


# ------------------------------------------------------------------------------- bad inputs
def _one_error_line(err: str) -> str:
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("edopt: error: "), err
    return lines[0]


def test_missing_file(capsys, tmp_path):
    missing = tmp_path / "nowhere.toml"
    for cmd in ("check", "size", "sweep"):
        code, out, err = run(capsys, cmd, missing)
        assert code == 2 and out == ""
        assert str(missing) in _one_error_line(err)


def test_malformed_toml_names_file_and_line(capsys, tmp_path):
    bad = tmp_path / "bad.toml"
    bad.write_text('[case]\nname = "x"\nsize_min = = 1\n', encoding="utf-8")
    code, _, err = run(capsys, "check", bad)
    assert code == 2
    assert f"{bad}:3:" in _one_error_line(err)        # tomllib reports the bad value on line 3


def test_target_below_minimum(capsys, tmp_path):
    fast = run_json(capsys, "size", MIXED)
    shown = f"{fast['delay_ps']:.2f}"
    for argv in (("size", MIXED, "--target", f"{0.5 * fast['delay_ps']:.1f}ps"),
                 ("size", MIXED, "--target", "0.9x"),
                 ("sweep", MIXED, "--target", "10ps", "--out", tmp_path, "--quiet")):
        code, out, err = run(capsys, *argv)
        line = _one_error_line(err)
        assert code == 3 and out == ""
        assert "minimum" in line and shown in line


def test_budget_below_least_energy(capsys):
    code, _, err = run(capsys, "size", MIXED, "--budget-fj", "1")
    assert code == 3 and "minimum" in _one_error_line(err)


@pytest.mark.parametrize("target", ["fast", "-3ps", "1.2y", "0ps"])
def test_bad_target_string(capsys, target):
    code, out, err = run(capsys, "size", MIXED, f"--target={target}")
    assert code == 2 and out == ""
    _one_error_line(err)


@pytest.mark.parametrize("argv", [
    ("size", str(MIXED), "--tech", "no-such-technology"),
    ("size", str(MIXED), "--balance", "2", "--objective", "area"),
    ("sweep", str(MIXED), "--points", "1", "--quiet"),
    ("sweep", str(MIXED), "--span", "0.5", "--quiet"),
])
def test_bad_options_are_one_line_errors(capsys, argv):
    code, out, err = run(capsys, *argv)
    assert code == 2 and out == ""
    _one_error_line(err)


@pytest.mark.parametrize("argv", [
    (), ("frobnicate",), ("size",), ("size", "x.toml", "--max-effort", "-1"),
    ("size", "x.toml", "--target", "1.2x", "--balance", "1"),
])
def test_usage_errors_exit_2(capsys, argv):
    code, _, err = run(capsys, *argv)
    assert code == 2 and "edopt: error:" in err


def test_help_exits_0(capsys):
    code, out, _ = run(capsys, "--help")
    assert code == 0 and "sweep" in out


def test_subprocess_module_entry_point():
    env = dict(os.environ, PYTHONPATH=str(REPO) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.run([sys.executable, "-m", "edopt", "size", str(MIXED), "--target", "20ps"],
                          capture_output=True, text=True, cwd=REPO, env=env, timeout=120)
    assert proc.returncode == 3
    assert proc.stdout == ""
    assert "Traceback" not in proc.stderr
    assert "minimum" in _one_error_line(proc.stderr)


# ------------------------------------------------------------------------------------- JSON
def test_dumps_is_strict_json():
    text = dumps({"a": np.float64("nan"), "b": np.int64(3), "c": np.arange(2), "d": math.inf,
                  "e": [np.float32(0.5), np.bool_(True)], "f": Path("x/y")})
    assert json.loads(text) == {"a": None, "b": 3, "c": [0, 1], "d": None, "e": [0.5, True],
                                "f": "x/y"}


def test_size_with_the_large_engine(capsys):
    """--engine large: the JSON carries the certified bound and gap; the text says so too."""
    ref = run_json(capsys, "size", DECODER, "--target", "1.3x", "--engine", "reference")
    d = run_json(capsys, "size", DECODER, "--target", "1.3x", "--engine", "large")
    assert d["engine"] == "large" and ref["engine"] == "reference"
    assert d["lower_bound_fj"] <= ref["energy_fj"] * (1 + 1e-6)      # reference solver
    assert d["gap_pct"] <= 0.1 and d["iterations"] >= 0
    ev = retime(DECODER, d["sizes"], target_ps=d["target_ps"], cycle_ps=d["target_ps"])
    assert ev.circuit_delay_ps <= d["target_ps"] * (1 + 1e-9)             # evaluator
    code, out, err = run(capsys, "size", DECODER, "--target", "1.3x", "--engine", "large")
    assert code == 0, err
    assert "certified lower bound" in out


def test_size_large_engine_rejects_an_effort_limit(capsys):
    code, out, err = run(capsys, "size", DECODER, "--engine", "large", "--max-effort", "6")
    assert code == 2 and "--engine reference" in err
