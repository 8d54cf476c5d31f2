"""Tests of the closed-form chain solver and the stage-count advisor.

Sources named beside each check:
- "SSH99": I. Sutherland, R. Sproull, D. Harris, "Logical Effort: Designing Fast CMOS Circuits",
  Morgan Kaufmann 1999 (values quoted from memory): path effort F = G B H, D = N F^(1/N) + P at
  equal stage effort, sizes backwards C_in = g b C_out / f, best stage effort rho from
  rho (1 - ln rho) + p_inv = 0, the 64-load inverter example, FO4 = (4 + p_inv) tau, and the
  table of g and p of static gates (mu = 2, p_inv = 1).
- "first principles": worked here from the delay model d = p + C_load / x.
- "evaluator": `edopt.timing.evaluate` on the compiled Model, independent of this solver.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.optimize import minimize, minimize_scalar

from edopt.circuit import Circuit, chain
from edopt.errors import CircuitError
from edopt.model import compile_model
from edopt.solvers.chain import (
    advise_chain,
    advise_stages,
    best_stage_effort,
    solve_chain,
)
from edopt.technology import Technology
from edopt.timing import evaluate

TECH = Technology()

# SSH99 table (from memory), mu = 2, p_inv = 1: g of one input and p
SSH99_G = {"inv": 1.0, "nand2": 4 / 3, "nand3": 5 / 3, "nor2": 5 / 3}
SSH99_P = {"inv": 1.0, "nand2": 2.0, "nand3": 3.0, "nor2": 2.0}


def _evaluated(circuit: Circuit, sol, tech: Technology = TECH):
    model = compile_model(circuit, tech)
    # a chain without drivers has no source nodes: model nodes are the gates in path order
    assert model.gate_names == sol.gates
    return model, evaluate(model, sol.sizes)


# ------------------------------------------------------------------------------ best effort


def test_best_stage_effort_p_inv_one_is_about_3_59():
    # SSH99 (from memory): rho ~ 3.59 for p_inv = 1
    assert best_stage_effort(1.0) == pytest.approx(3.59, abs=0.01)


def test_best_stage_effort_without_parasitics_is_e():
    # SSH99 (from memory): rho = e for p_inv = 0
    assert best_stage_effort(0.0) == pytest.approx(math.e, abs=1e-9)


def test_best_stage_effort_minimises_delay_per_stage():
    # first principles: rho minimises the delay per unit of log effort, (rho + p_inv) / ln rho
    for p_inv in (0.5, 1.0, 2.0):
        res = minimize_scalar(lambda r, p=p_inv: (r + p) / math.log(r), bounds=(1.1, 20),
                              method="bounded", options={"xatol": 1e-10})
        assert best_stage_effort(p_inv) == pytest.approx(res.x, rel=1e-5)


def test_best_stage_effort_rejects_negative():
    with pytest.raises(CircuitError, match="p_inv"):
        best_stage_effort(-0.1)


# ------------------------------------------------------------------------ 64-load inverter


def test_inverter_driving_64_needs_three_stages():
    # SSH99 (from memory): a unit inverter driving 64 unit loads: 3 stages of effort 4, 15 tau;
    # 2 stages give 2*8 + 2 = 18 tau, 4 stages 4*64^(1/4) + 4 tau: both slower
    adv = advise_stages(64.0, p_logic=1.0, n_logic=1, p_inv=1.0)
    assert adv.best_stages == 3
    assert adv.inverters_to_add == 2
    assert adv.stage_effort == pytest.approx(4.0, rel=1e-12)
    assert adv.best_delay_tau == pytest.approx(15.0, rel=1e-12)
    assert adv.current_delay_tau == pytest.approx(65.0, rel=1e-12)
    row = adv.table.set_index("stages")["delay_tau"]
    assert row[2] == pytest.approx(18.0, rel=1e-12)
    assert row[4] == pytest.approx(4 * 64 ** 0.25 + 4, rel=1e-12)
    assert row[2] > adv.best_delay_tau and row[4] > adv.best_delay_tau
    # two inverters added: the polarity is kept
    assert adv.same_polarity_stages == 3
    assert adv.same_polarity_delay_tau == adv.best_delay_tau
    assert not adv.at_limit


def test_advise_chain_reads_the_circuit():
    # SSH99 (from memory): same example, the effort and parasitic taken from the circuit
    adv = advise_chain(chain(["inv"], cin=1.0, cload=64.0), TECH)
    assert (adv.path_effort, adv.p_logic, adv.n_logic) == pytest.approx((64.0, 1.0, 1))
    assert adv.best_stages == 3
    assert adv.best_delay_ps == pytest.approx(15.0 * TECH.tau_ps)


def test_three_inverter_chain_sizes_1_4_16():
    # SSH99 (from memory): the three-stage solution has stage effort 4, sizes 1, 4, 16, 15 tau
    c = chain(["inv"] * 3, cin=1.0, cload=64.0)
    sol = solve_chain(c, TECH)
    assert sol.stage_effort == pytest.approx(4.0, rel=1e-12)
    np.testing.assert_allclose(sol.sizes, [1.0, 4.0, 16.0], rtol=1e-12)
    assert sol.delay_tau == pytest.approx(15.0, rel=1e-12)
    assert sol.delay_ps == pytest.approx(15.0 * TECH.tau_ps, rel=1e-12)
    # evaluator: the same sizes time to the same delay
    _, ev = _evaluated(c, sol)
    assert ev.circuit_delay_ps == pytest.approx(sol.delay_ps, rel=1e-12)


def test_fo4_inverter_is_five_tau():
    # SSH99 (from memory): FO4 inverter delay (4 + p_inv) tau = 5 tau for p_inv = 1
    sol = solve_chain(chain(["inv"], cin=1.0, cload=4.0), TECH)
    assert sol.delay_tau == pytest.approx(5.0, rel=1e-12)
    assert sol.stages["h"].iloc[0] == pytest.approx(4.0)
    # same rule for another p_inv
    tech = Technology(p_inv=0.5)
    assert solve_chain(chain(["inv"], cin=1.0, cload=4.0), tech).delay_tau == pytest.approx(4.5)


# ----------------------------------------------------------------------------- mixed chain

MIXED = ["nand2", "nor2", "inv", "nand3"]


def test_mixed_chain_efforts_and_backward_sizes():
    c = chain(MIXED, cin=1.0, cload=50.0)
    sol = solve_chain(c, TECH)
    # SSH99 (from memory): G is the product of the table's g, P the sum of the table's p
    g = np.array([SSH99_G[t] for t in MIXED])
    p = np.array([SSH99_P[t] for t in MIXED])
    G = float(np.prod(g))
    assert sol.G == pytest.approx(G, rel=1e-12)
    assert sol.B == 1.0
    assert sol.H == pytest.approx(50.0)
    assert sol.P == pytest.approx(p.sum())
    F = G * 50.0
    f = F ** 0.25
    assert sol.path_effort == pytest.approx(F, rel=1e-12)
    assert sol.stage_effort == pytest.approx(f, rel=1e-12)
    assert sol.delay_tau == pytest.approx(4 * f + p.sum(), rel=1e-12)
    # SSH99 backward rule C_in = g C_out / f, walked one stage at a time from the load
    c_out = 50.0
    expect = []
    for gi in g[::-1]:
        c_in = gi * c_out / f
        expect.append(c_in / gi)
        c_out = c_in
    np.testing.assert_allclose(sol.sizes, expect[::-1], rtol=1e-12)
    assert sol.sizes[0] == pytest.approx(1.0 / SSH99_G["nand2"])  # x_1 = cin / g_1
    np.testing.assert_allclose(sol.stages["f"], f, rtol=1e-12)
    np.testing.assert_allclose(sol.stages["delay_tau"], f + p, rtol=1e-12)
    assert list(sol.stages["gate"]) == ["g1", "g2", "g3", "g4"]


def test_mixed_chain_evaluator_sees_equal_stage_efforts():
    # evaluator: each stage effort C_load / x equals F^(1/N); the circuit delay equals D
    c = chain(MIXED, cin=1.0, cload=50.0)
    sol = solve_chain(c, TECH)
    model, ev = _evaluated(c, sol)
    np.testing.assert_allclose(ev.effort, sol.stage_effort, rtol=1e-12)
    assert ev.circuit_delay_ps == pytest.approx(sol.delay_ps, rel=1e-12)
    np.testing.assert_allclose(sol.model_sizes(model), sol.sizes)


def test_mixed_chain_no_sizing_is_faster():
    # first principles + evaluator: a numerical search over the free sizes finds no faster point
    c = chain(MIXED, cin=1.0, cload=50.0)
    sol = solve_chain(c, TECH)
    model = compile_model(c, TECH)
    x1 = sol.sizes[0]

    def delay(z: np.ndarray) -> float:
        return evaluate(model, np.concatenate([[x1], np.exp(z)])).circuit_delay_ps

    res = minimize(delay, np.zeros(len(MIXED) - 1), method="Nelder-Mead",
                   options={"xatol": 1e-10, "fatol": 1e-12, "maxiter": 20000})
    assert res.fun >= sol.delay_ps * (1 - 1e-9)
    assert res.fun == pytest.approx(sol.delay_ps, rel=1e-6)
    np.testing.assert_allclose(np.exp(res.x), sol.sizes[1:], rtol=1e-3)


def test_p_inv_zero_three_inverters():
    # SSH99 rule D = N F^(1/N) + P with P = 0 when p_inv = 0: 3 * 4 = 12 tau
    tech = Technology(p_inv=0.0)
    sol = solve_chain(chain(["inv"] * 3, cin=1.0, cload=64.0), tech)
    assert sol.delay_tau == pytest.approx(12.0, rel=1e-12)
    assert sol.P == 0.0


# -------------------------------------------------------------------------------- branching


def _explicit_tree(types: list[str], cin: float, cload: float, fan: int) -> Circuit:
    """g1 -> g2 -> `fan` separate copies of g3 -> g4, each with its own output load."""
    c = Circuit("tree", size_min=1e-3)
    c.add_input("in", cap=cin)

    def add(name: str, tname: str, net_in: str, net_out: str) -> None:
        gtype = c.gate_type(tname)
        conn = {gtype.pins[0]: net_in}
        for pin in gtype.pins[1:]:
            c.add_input(f"{name}_{pin}")
            conn[pin] = f"{name}_{pin}"
        c.add_gate(name, tname, conn, net_out)

    add("g1", types[0], "in", "n1")
    add("g2", types[1], "n1", "n2")
    for k in range(fan):
        add(f"g3_{k}", types[2], "n2", f"n3_{k}")
        add(f"g4_{k}", types[3], f"n3_{k}", f"out_{k}")
        c.add_output(f"out_{k}", load=cload)
    return c


def test_branching_effort_and_explicit_tree():
    types = ["nand2", "inv", "nor2", "inv"]
    c = chain(types, cin=1.0, cload=20.0, branch=[1, 3, 1, 1])
    sol = solve_chain(c, TECH)
    # SSH99: B is the product of the branching efforts; F = G B H
    assert sol.B == pytest.approx(3.0)
    np.testing.assert_allclose(sol.stages["b"], [1, 3, 1, 1])
    G = float(np.prod([SSH99_G[t] for t in types]))
    assert sol.path_effort == pytest.approx(G * 3.0 * 20.0, rel=1e-12)
    f = sol.path_effort ** 0.25
    assert sol.delay_tau == pytest.approx(4 * f + sum(SSH99_P[t] for t in types), rel=1e-12)
    # evaluator on the chain with copies
    _, ev = _evaluated(c, sol)
    assert ev.circuit_delay_ps == pytest.approx(sol.delay_ps, rel=1e-12)
    # evaluator on an explicit tree of 3 branches, each branch sized like one copy
    tree = _explicit_tree(types, 1.0, 20.0, 3)
    model = compile_model(tree, TECH)
    size = {"g1": sol.sizes[0], "g2": sol.sizes[1]}
    for k in range(3):
        size[f"g3_{k}"], size[f"g4_{k}"] = sol.sizes[2], sol.sizes[3]
    x = np.array([size[name] for name in model.gate_names])
    assert evaluate(model, x).circuit_delay_ps == pytest.approx(sol.delay_ps, rel=1e-12)


# --------------------------------------------------------------------------- stage advisor


def _textbook_delay(F: float, P: float, n: int, p_inv: float, N: int) -> float:
    # SSH99 (from memory): N F^(1/N) + P plus the parasitic of each added inverter
    return N * F ** (1.0 / N) + P + (N - n) * p_inv


def test_same_polarity_when_best_adds_an_odd_number():
    F, P, n, p_inv = 256.0, 1.0, 1, 1.0
    delays = {N: _textbook_delay(F, P, n, p_inv, N) for N in range(n, 41)}
    best = min(delays, key=delays.get)
    same = min((N for N in delays if (N - n) % 2 == 0), key=delays.get)
    adv = advise_stages(F, P, n, p_inv)
    assert adv.best_stages == best
    assert adv.same_polarity_stages == same
    assert (adv.best_stages - n) % 2 == 1  # this case needs the polarity answer
    assert adv.same_polarity_delay_tau == pytest.approx(delays[same])
    assert adv.same_polarity_delay_tau > adv.best_delay_tau
    assert adv.current_delay_tau == pytest.approx(delays[n])
    for N, d in zip(adv.table["stages"], adv.table["delay_tau"]):
        assert d == pytest.approx(delays[int(N)])
    assert set(adv.table["stages"]) == set(range(best - 3, best + 4)) & set(delays)


def test_n_hat_is_the_continuous_optimum():
    # first principles: d/dN [N F^(1/N) + N p_inv] = 0 at N = ln F / ln rho
    for F, p_inv in ((64.0, 1.0), (1000.0, 0.5), (5e4, 2.0)):
        adv = advise_stages(F, 0.0, 1, p_inv)
        res = minimize_scalar(lambda N, F=F, p=p_inv: N * F ** (1 / N) + N * p,
                              bounds=(1.0, 40.0), method="bounded", options={"xatol": 1e-10})
        assert adv.n_hat == pytest.approx(res.x, rel=1e-5)
        assert abs(adv.best_stages - adv.n_hat) < 1.0
        # the stage effort at the best N is near the best stage effort rho (SSH99, from memory)
        assert adv.rho == pytest.approx(best_stage_effort(p_inv))


def test_small_effort_keeps_the_logic_as_is():
    # first principles: with F <= 1 an added inverter only adds delay
    adv = advise_stages(0.8, 3.0, 2, 1.0)
    assert adv.best_stages == 2 and adv.inverters_to_add == 0
    assert adv.best_delay_tau == adv.current_delay_tau


def test_at_limit_flag():
    # first principles: F = 1e30 wants ~ 54 stages at p_inv = 1; capped at 10
    adv = advise_stages(1e30, 0.0, 1, 1.0, max_stages=10)
    assert adv.best_stages == 10 and adv.at_limit


@pytest.mark.parametrize("kwargs, word", [
    ({"path_effort": 0.0}, "path_effort"),
    ({"n_logic": 0}, "n_logic"),
    ({"max_stages": 1, "n_logic": 3}, "max_stages"),
    ({"p_inv": -1.0}, "p_inv"),
])
def test_advise_rejects_bad_numbers(kwargs, word):
    args = {"path_effort": 64.0, "p_logic": 1.0, "n_logic": 1, "p_inv": 1.0} | kwargs
    with pytest.raises(CircuitError, match=word):
        advise_stages(**args)


# ------------------------------------------------------------------------------ non-chains


def _fanout_two() -> Circuit:
    c = chain(["inv", "inv"], cin=1.0, cload=10.0)
    c.add_gate("extra", "inv", ["n1"], "y2")
    c.add_output("y2", load=3.0)
    return c


def _two_outputs_on_path() -> Circuit:
    c = chain(["inv", "inv"], cin=1.0, cload=10.0)
    c.add_output("n1", load=2.0)
    return c


def _with_drive() -> Circuit:
    c = chain(["nand2", "inv"], cin=1.0, cload=10.0)
    c.inputs["g1_B"].drive = 2.0
    return c


def _cap_max() -> Circuit:
    c = chain(["inv", "inv"], cin=1.0, cload=10.0)
    c.inputs["in"].cap, c.inputs["in"].cap_max = None, 3.0
    return c


def _fixed_size() -> Circuit:
    c = chain(["inv", "inv", "inv"], cin=1.0, cload=10.0)
    c.gates["g2"].size = 3.0
    return c


def _late_side() -> Circuit:
    c = chain(["inv", "nand2"], cin=1.0, cload=10.0)
    c.inputs["g2_B"].arrival_ps = 50.0
    return c


def _side_pin_on_path_net() -> Circuit:
    c = Circuit("c", size_min=1e-3)
    c.add_input("in", cap=1.0)
    c.add_gate("g1", "inv", ["in"], "n1")
    c.add_gate("g2", "nand2", ["n1", "n1"], "out")
    c.add_output("out", load=5.0)
    return c


def _off_path_gate() -> Circuit:
    c = chain(["nand2", "inv"], cin=1.0, cload=10.0)
    c.add_input("s")
    c.add_gate("helper", "inv", ["s"], "g1_B_drv")
    c.gates["g1"].inputs["B"] = "g1_B_drv"
    del c.inputs["g1_B"]
    return c


@pytest.mark.parametrize("build, message", [
    (lambda: chain(["inv"] * 3, cin=1.0, cload=10.0, side=[0, 2.0, 0]),
     "net 'n2' has a fixed side load"),
    (lambda: chain(["inv"] * 2, cin=1.0, cload=10.0, side=[0, 2.0]),
     "net 'out' has a fixed side load"),
    (_fanout_two, "net 'n1' drives 2 pins"),
    (_two_outputs_on_path, "output net 'n1' also drives"),
    (_with_drive, "input 'g1_B' has a driver"),
    (_cap_max, "cap_max"),
    (_fixed_size, "gate 'g2' has a fixed size"),
    (_late_side, "side input 'g2_B'"),
    (_side_pin_on_path_net, "net 'n1' drives 2 pins"),
    (_off_path_gate, "not an ideal input"),
    (lambda: chain(["inv"] * 3, cin=1.0, cload=10.0, size_max=2.0), "size_max"),
])
def test_non_chains_raise_with_reason(build, message):
    c = build()
    with pytest.raises(CircuitError, match=message) as err:
        solve_chain(c, TECH)
    text = str(err.value)
    assert "general solver" in text or "relax" in text


def test_advise_chain_also_rejects_non_chains():
    with pytest.raises(CircuitError, match="fixed side load"):
        advise_chain(chain(["inv"] * 2, cin=1.0, cload=10.0, side=[1.0, 0]), TECH)


def test_no_fixed_cap_input_is_rejected():
    c = chain(["inv", "inv"], cin=1.0, cload=10.0)
    c.inputs["in"].cap = None
    with pytest.raises(CircuitError, match="no input has a fixed cap"):
        solve_chain(c, TECH)


def test_copies_on_first_gate_count_in_the_input():
    # evaluator: the input cap is shared by the copies of g1 (H per copy = C_load c_1 / C_in)
    c = chain(["nand2", "inv", "inv"], cin=2.0, cload=30.0)
    for gate in c.gates.values():
        gate.copies = 4.0
    sol = solve_chain(c, TECH)
    assert sol.H == pytest.approx(30.0 * 4.0 / 2.0)
    assert sol.sizes[0] == pytest.approx(2.0 / (SSH99_G["nand2"] * 4.0))  # SSH99 g (from memory)
    _, ev = _evaluated(c, sol)
    assert ev.circuit_delay_ps == pytest.approx(sol.delay_ps, rel=1e-12)
    np.testing.assert_allclose(ev.effort, sol.stage_effort, rtol=1e-12)
