"""The reference (conic) solver against outside references.

Sources named beside each check:
- "SSH99": I. Sutherland, R. Sproull, D. Harris, "Logical Effort: Designing Fast CMOS Circuits",
  Morgan Kaufmann 1999 (from memory): the closed-form minimum delay of a path, implemented
  independently of the general solver in `edopt.solvers.chain.solve_chain`.
- "scipy NLP": `tests/scipy_reference.py`, the same nonlinear program stated with enumerated
  paths instead of arrival times and solved by `scipy.optimize` SLSQP in log sizes
  (REFERENCES.md, "Independent references available as libraries or tools").
- "first principles": a copy-count (branching effort b) equals that many real copies of the
  downstream gates, each with its own load.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy_reference import Reference

from edopt.circuit import Circuit, chain
from edopt.errors import InfeasibleTarget
from edopt.generators import random_layered
from edopt.sizing import Sizer, Sizing, size
from edopt.solvers.chain import solve_chain
from edopt.technology import Technology
from edopt.timing import evaluate

TECH = Technology()
OK = ("optimal", "inaccurate")   # anything but "mismatch" / "failed"

CHAINS = {
    "inv3_64": dict(types=["inv"] * 3, cin=1.0, cload=64.0),
    "nand2_nor2_inv_nand3": dict(types=["nand2", "nor2", "inv", "nand3"], cin=2.0, cload=100.0),
    "aoi21_oai22_xor2_mux2": dict(types=["aoi21", "oai22", "xor2", "mux2"], cin=2.0,
                                  cload=120.0),
    "branched_inv_nand2_nor2": dict(types=["inv", "nand2", "inv", "nor2", "inv"], cin=1.0,
                                    cload=30.0, branch=[2, 3, 1, 4, 1]),
    "branched_mux2_aoi21": dict(types=["mux2", "aoi21", "inv"], cin=4.0, cload=80.0,
                                branch=[3, 2, 1]),
}


def _agrees(res: Sizing) -> None:
    """The solver's own numbers agree with the independent re-timing (sizing._check_agreement)."""
    assert res.status in OK, res.notes
    assert res.status != "mismatch"


# ------------------------------------------------------------------------------ chains


@pytest.mark.parametrize("name", list(CHAINS))
def test_raw_engine_equals_closed_form_chain(name):
    # SSH99 (from memory): D = N F^(1/N) + P, sizes backwards at equal stage effort
    c = chain(**CHAINS[name])
    sizer = Sizer(c, TECH)
    ref = solve_chain(c, TECH)
    sol = sizer.engine.fastest()                  # raw, unpolished minimum-delay solve
    assert sol.status == "optimal", sol.attempts
    assert sol.delay_tau == pytest.approx(ref.delay_tau, rel=1e-6)
    np.testing.assert_allclose(sol.x, ref.model_sizes(sizer.model), rtol=1e-4)


@pytest.mark.parametrize("name", list(CHAINS))
def test_size_equals_closed_form_chain(name):
    # SSH99 (from memory); chains are not polished (every gate is critical)
    c = chain(**CHAINS[name])
    ref = solve_chain(c, TECH)
    res = size(c, TECH)
    _agrees(res)
    assert res.delay_ps == pytest.approx(ref.delay_ps, rel=1e-6)
    assert res.min_delay_ps == pytest.approx(ref.delay_ps, rel=1e-6)
    np.testing.assert_allclose(res.sizes.loc[list(ref.gates)].to_numpy(), ref.sizes, rtol=1e-4)
    # the independent evaluator on the closed-form sizes gives the closed-form delay
    ev = evaluate(res.model, ref.model_sizes(res.model))
    assert ev.circuit_delay_ps == pytest.approx(ref.delay_ps, rel=1e-9)


def test_inverter_chain_64_is_15_tau():
    # SSH99 (from memory): three inverters of stage effort 4 into 64 loads: 15 tau
    res = size(chain(["inv"] * 3, cin=1.0, cload=64.0), TECH)
    assert res.delay_ps / TECH.tau_ps == pytest.approx(15.0, rel=1e-6)
    np.testing.assert_allclose(res.sizes.to_numpy(), [1.0, 4.0, 16.0], rtol=1e-4)


@pytest.mark.parametrize("spec, size_rtol", [
    pytest.param(dict(types=["xor2", "mux2", "aoi21", "inv", "oai22"], cin=4.0, cload=300.0),
                 1e-4, id="xor2_mux2_aoi21_inv_oai22_300"),
    # the optimum is flat in the sizes (accurate to the square root of the solver tolerance):
    # at a path effort of 4000 a size tolerance of 1e-3 is what the solver can promise
    pytest.param(dict(types=["inv"] * 6, cin=1.0, cload=4000.0), 1e-3, id="inv6_4000"),
])
def test_high_effort_chain_equals_closed_form(spec, size_rtol):
    # SSH99 (from memory)
    c = chain(**spec)
    ref = solve_chain(c, TECH)
    res = size(c, TECH)
    _agrees(res)
    assert res.delay_ps == pytest.approx(ref.delay_ps, rel=1e-6)
    np.testing.assert_allclose(res.sizes.to_numpy(), ref.sizes, rtol=size_rtol)


def _explicit_tree(types: list[str], cin: float, cload: float, branch: list[int]) -> Circuit:
    """The branched chain with real copies: each gate of stage i drives branch[i] real gates."""
    c = Circuit("tree", size_min=1e-3, size_max=1e4)
    c.add_input("in", cap=cin)
    feeds = [("in", "")]                        # (net into the gate, name suffix)
    for i, tname in enumerate(types):
        outs = []
        for net, suf in feeds:
            gname = f"g{i + 1}{suf}"
            pins = c.gate_type(tname).pins
            conn = {pins[0]: net}
            for pin in pins[1:]:
                c.add_input(f"{gname}_{pin}")
                conn[pin] = f"{gname}_{pin}"
            out = f"n{i + 1}{suf}"
            c.add_gate(gname, tname, conn, out)
            outs.append((out, suf))
        if i < len(types) - 1:
            feeds = [(out, f"{suf}_{k}") for out, suf in outs for k in range(branch[i])]
        else:
            for out, _ in outs:
                c.add_output(out, load=cload)
    return c


@pytest.mark.parametrize("name", ["branched_inv_nand2_nor2", "branched_mux2_aoi21"])
def test_branch_copies_equal_explicit_tree(name):
    # first principles: copies stand for real identical copies of everything downstream
    spec = CHAINS[name]
    tree = _explicit_tree(spec["types"], spec["cin"], spec["cload"], spec["branch"])
    n_real = sum(int(np.prod(spec["branch"][:i])) for i in range(len(spec["types"])))
    assert len(tree.gates) == n_real
    copies = size(chain(**spec), TECH)
    explicit = size(tree, TECH)
    _agrees(copies)
    _agrees(explicit)
    assert explicit.min_delay_ps == pytest.approx(copies.min_delay_ps, rel=1e-6)
    raw = Sizer(tree, TECH).engine.fastest()
    assert raw.delay_tau * TECH.tau_ps == pytest.approx(copies.min_delay_ps, rel=1e-6)
    # SSH99 (from memory): and both equal the closed form with branching effort B
    assert copies.min_delay_ps == pytest.approx(solve_chain(chain(**spec), TECH).delay_ps,
                                                rel=1e-6)


# --------------------------------------------------------------------- random networks

NETWORKS = [(12, 1), (20, 2), (30, 3)]


@pytest.fixture(scope="module", params=NETWORKS, ids=[f"n{n}-s{s}" for n, s in NETWORKS])
def network(request):
    n, seed = request.param
    c = random_layered(n, seed, load=32.0)
    fast = size(c, TECH)
    ref = Reference(fast.model)
    x_ref, d_ref = ref.fastest()
    return c, fast, ref, x_ref, d_ref


def test_min_delay_equals_scipy(network):
    # scipy NLP: min over sizes of the largest enumerated path delay
    c, fast, ref, x_ref, d_ref = network
    _agrees(fast)
    assert 10 <= len(c.gates) <= 30
    assert fast.min_delay_ps == pytest.approx(d_ref * TECH.tau_ps, rel=1e-6)
    # the evaluator's arrival-time recursion equals the largest enumerated path delay
    for x in (x_ref, fast.evaluation.x):
        assert evaluate(fast.model, x).circuit_delay_ps == pytest.approx(
            ref.circuit_delay(x) * TECH.tau_ps, rel=1e-12)


@pytest.mark.parametrize("relax", [1.1, 1.3])
def test_cheapest_energy_equals_scipy(network, relax):
    # scipy NLP: minimum energy with every enumerated path within the bound
    c, fast, ref, x_ref, d_ref = network
    target = relax * fast.min_delay_ps
    res = size(c, TECH, target=target)
    _agrees(res)
    x_sp, e_sp = ref.cheapest(target, z0=np.log(x_ref[ref.free]))
    assert res.energy_fj == pytest.approx(e_sp, rel=1e-3)
    # the independent energy formula of the reference agrees with edopt's evaluator
    assert ref.energy_fj(res.evaluation.x, target) == pytest.approx(res.energy_fj, rel=1e-12)
    for x in (res.evaluation.x, x_sp):
        ev = evaluate(res.model, x, target_ps=target)
        assert ev.circuit_delay_ps <= target * (1 + 1e-6)
    # the bound is active (the trade-off is exercised, not only the size floor)
    assert res.delay_ps == pytest.approx(target, rel=1e-4)
    assert res.energy_fj < fast.energy_fj


# ------------------------------------------------------------------ infeasible targets


def test_infeasible_target_on_chain_carries_minimum():
    # SSH99 (from memory): the minimum delay is the closed form
    c = chain(["nand2", "nor2", "inv", "nand3"], cin=2.0, cload=100.0)
    d_min = solve_chain(c, TECH).delay_ps
    with pytest.raises(InfeasibleTarget, match="minimum") as info:
        size(c, TECH, target=0.9 * d_min)
    assert info.value.min_delay_ps == pytest.approx(d_min, rel=1e-6)


def test_infeasible_target_on_network_raises(network):
    c, fast, ref, x_ref, d_ref = network
    with pytest.raises(InfeasibleTarget, match="minimum") as info:
        size(c, TECH, target=0.9 * d_ref * TECH.tau_ps)
    assert info.value.min_delay_ps is not None
    assert info.value.min_delay_ps >= d_ref * TECH.tau_ps * (1 - 1e-6)


def test_infeasible_target_on_network_carries_true_minimum():
    # scipy NLP: the true minimum delay
    c = random_layered(12, 1, load=8.0)
    fast = size(c, TECH)
    d_ref = Reference(fast.model).fastest()[1] * TECH.tau_ps
    assert fast.delay_ps > d_ref * (1 + 1e-4)        # this network is polished
    with pytest.raises(InfeasibleTarget) as info:
        size(c, TECH, target=0.9 * d_ref)
    assert info.value.min_delay_ps == pytest.approx(d_ref, rel=1e-6)
    middle = 0.5 * (d_ref + fast.delay_ps)             # achievable: above the true minimum
    assert size(c, TECH, target=middle).delay_ps <= middle * (1 + 1e-6)


def test_scipy_reference_methods_agree():
    # scipy NLP: SLSQP and trust-constr on the same enumerated-path program (a check of the
    # reference itself, so that a wrong answer of one method is not taken as the truth)
    c = random_layered(12, 1, load=32.0)
    fast = size(c, TECH)
    target = 1.1 * fast.min_delay_ps
    e_slsqp = Reference(fast.model).cheapest(target)[1]
    e_trust = Reference(fast.model, method="trust-constr").cheapest(target)[1]
    assert e_trust == pytest.approx(e_slsqp, rel=1e-3)
