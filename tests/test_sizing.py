"""The public sizing API: result fields, targets, objectives and constraints.

Checks are first principles on the model (the independent evaluation in edopt.timing) unless a
source is named.
"""

import numpy as np
import pandas as pd
import pytest

import edopt
from edopt.generators import random_layered
from edopt.model import compile_model
from edopt.solvers.barrier import BarrierSizer
from edopt.solvers.conic import ConicSizer
from edopt.timing import evaluate


@pytest.fixture(scope="module")
def net():
    return random_layered(40, seed=7)


def test_result_fields_contract(net):
    res = edopt.size(net, target="1.2x")
    assert res.status == "optimal"
    assert isinstance(res.sizes, pd.Series) and list(res.sizes.index) == list(res.model.gate_names)
    cols = {"type", "size", "input_cap_ff", "load_ff", "stage_effort", "delay_ps", "slack_ps",
            "energy_share"}
    assert cols <= set(res.table.columns)
    assert res.table.energy_share.sum() == pytest.approx(1.0)
    assert res.delay_ps <= res.target_ps * (1 + 1e-6)
    assert res.price_fj_per_ps > 0 and res.intensity > 0
    assert res.target_ps == pytest.approx(1.2 * res.min_delay_ps)
    # the worst slack is zero at a binding target (the bound is active at the optimum)
    assert res.table.slack_ps.min() == pytest.approx(0.0, abs=1e-6 * res.target_ps)
    d = res.to_dict()
    assert d["sizes"].keys() == set(res.sizes.index) and "caution" in d


def test_critical_path_runs_input_to_output(net):
    res = edopt.size(net)
    path = res.critical_path
    assert path, "a critical path has at least one gate"
    ev = res.evaluation
    m = res.model
    idx = [m.names.index(g) for g in path]
    # arrivals increase along the path and the last gate drives the critical output
    assert np.all(np.diff(ev.arrival_ps[idx]) > 0)
    assert m.out_node[m.out_names.index(ev.critical_output)] == idx[-1]


@pytest.mark.parametrize("text, expected", [("250ps", 250.0), ("0.25ns", 250.0), (250, 250.0),
                                            ("1.5x", 150.0)])
def test_parse_target(text, expected):
    assert edopt.parse_target(text, 100.0) == pytest.approx(expected)


@pytest.mark.parametrize("text", ["fast", "-3ps", "0.8x", "12 parsecs"])
def test_parse_target_rejects(text):
    with pytest.raises(edopt.EdoptError):
        edopt.parse_target(text, 100.0)


def test_area_objective_and_energy_objective_differ(net):
    e = edopt.size(net, target="1.05x")
    a = edopt.size(net, target="1.05x", objective="area")
    assert a.area <= e.area * (1 + 1e-6)
    assert e.energy_fj <= a.energy_fj * (1 + 1e-6)
    # the bound is active at 1.05x (some gate above its minimum size), so the area has a price
    assert (a.table.at_bound != "min").any()
    assert np.isnan(a.price_fj_per_ps) and a.price > 1e-6


def test_max_effort_limit_is_met(net):
    free = edopt.size(net)
    limit = 0.5 * float(free.evaluation.effort[free.model.gate_slice].max())
    res = edopt.size(net, max_effort=limit)
    assert res.evaluation.effort[res.model.gate_slice].max() <= limit * (1 + 1e-6)
    assert res.delay_ps >= free.min_delay_ps * (1 - 1e-9)


def test_area_budget_is_met(net):
    free = edopt.size(net)
    budget = 0.8 * free.area
    res = edopt.size(net, area_max=budget)
    assert res.area <= budget * (1 + 1e-6)


def test_cycle_time_sets_leakage():
    tech = edopt.technology().with_changes(leak_na=50.0)
    c = random_layered(20, seed=2)
    a = edopt.size(c, tech, target="1.3x")
    b = edopt.size(c, tech, target="1.3x", cycle_ps=10 * a.target_ps)
    assert b.leakage_fj == pytest.approx(10 * a.leakage_fj, rel=0.05)
    # leakage energy: V * I * T * sum(lk x) (common practice: leakage power times cycle time)
    m, x = a.model, a.evaluation.x
    expected = tech.vdd_v * tech.leak_na * 1e-6 * a.target_ps * float(m.leak @ x)
    assert a.leakage_fj == pytest.approx(expected)


def test_fixed_driver_with_fixed_load_times_consistently():
    """A driven input into a gate fixed by an input cap: every term is constant (regression)."""
    c = edopt.Circuit("fixed")
    c.add_input("a", cap=2.0)
    c.add_input("en", drive=2.0, arrival_ps=10.0)
    c.add_gate("u1", "nand2", {"A": "a", "B": "en"}, "n1")
    c.add_gate("u2", "inv", ["n1"], "y")
    c.add_output("y", load=30.0, allowance_ps=5.0)
    res = edopt.size(c, target="1.1x")
    assert res.status == "optimal"
    assert res.solver_delay_ps <= res.target_ps * (1 + 1e-6)


def test_sizer_reuses_one_compiled_problem(net):
    s = edopt.Sizer(net)
    s.cheapest("1.1x")
    prob = s.engine._cheap
    s.cheapest("1.4x")
    assert s.engine._cheap is prob


def test_barrier_solver_agrees_with_conic():
    """Two independent solvers of the same program: edopt's own Newton barrier method and the
    cvxpy/Clarabel reference."""
    m = compile_model(random_layered(30, seed=11), edopt.technology())
    conic, barrier = ConicSizer(m), BarrierSizer(m)
    f1, f2 = conic.fastest(tie=0.0), barrier.fastest()
    assert f2.status == "optimal"
    assert f2.delay_tau == pytest.approx(f1.delay_tau, rel=1e-6)
    w = m.e_lin
    for r in (1.1, 1.5):
        a = conic.cheapest(f1.delay_tau * r, w)
        b = barrier.cheapest(f1.delay_tau * r, w, warm=False)
        assert b.status == "optimal"
        assert b.objective == pytest.approx(a.objective, rel=1e-5)
        # an inactive bound has price 0; interior-point solvers leave a residue near 1e-8
        assert b.price == pytest.approx(a.price, rel=1e-3, abs=1e-7)
        assert evaluate(m, b.x).circuit_delay_ps <= f1.delay_tau * r * m.tech.tau_ps * (1 + 1e-7)


def test_infeasible_input_limits_are_reported():
    c = edopt.Circuit("tight")
    c.add_input("a", cap_max=0.5)   # below the minimum-size input capacitance (1 C_u)
    c.add_gate("u1", "inv", ["a"], "y")
    c.add_output("y", load=4.0)
    with pytest.raises(edopt.InfeasibleTarget):
        edopt.size(c)
