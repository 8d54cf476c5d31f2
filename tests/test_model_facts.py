"""Delay and energy facts of the trade, checked on the compiled model and the evaluator.

Sources named beside each check:
- "common practice": rules of the trade with no single source (REFERENCES.md, "Delay facts of
  the trade" and "Energy and voltage"): the intrinsic delay of a gate does not depend on its
  size; an inverter stage delay is ``t_p0 (1 + f / gamma)`` with ``t_p0 = gamma tau``; the
  energy drawn from the supply per rising transition is ``C V^2``.
- "SSH99": I. Sutherland, R. Sproull, D. Harris, "Logical Effort: Designing Fast CMOS Circuits",
  Morgan Kaufmann 1999 (from memory): parasitic delays p of static gates (mu = 2, p_inv = 1) and
  the FO4 inverter delay ``(4 + p_inv) tau``.
"""

from __future__ import annotations

import numpy as np
import pytest

from edopt.circuit import Circuit, chain
from edopt.gates import builtin_library
from edopt.model import compile_model
from edopt.technology import Technology
from edopt.timing import evaluate

TECH = Technology()
BUILTIN = sorted(builtin_library())

# SSH99 (from memory): parasitic delay p in tau, mu = 2, p_inv = 1
SSH99_P = {"inv": 1.0, "nand2": 2.0, "nand3": 3.0, "nand4": 4.0, "nor2": 2.0, "nor3": 3.0,
           "nor4": 4.0, "aoi21": 7 / 3, "aoi22": 4.0, "xor2": 4.0, "xnor2": 4.0}


def _single(tname: str, load: float = 0.0, activity: float | None = None) -> Circuit:
    """One gate of type ``tname`` on ideal inputs, its output an output with ``load`` C_u."""
    c = Circuit(f"single-{tname}", size_min=1e-3)
    pins = c.gate_type(tname).pins
    for pin in pins:
        c.add_input(f"in_{pin}")
    c.add_gate("u", tname, {pin: f"in_{pin}" for pin in pins}, "y")
    c.add_output("y", load=load)
    if activity is not None:
        c.set_net("y", activity=activity)
    return c


# ----------------------------------------------------------------------- intrinsic delay


@pytest.mark.parametrize("tname", BUILTIN)
def test_intrinsic_delay_does_not_depend_on_size(tname):
    # common practice: resistance falls as 1/K while the gate's own diffusion capacitance grows
    # as K, so the unloaded delay is the same at every size
    m = compile_model(_single(tname, load=0.0), TECH)
    assert m.n == 1 and m.fixed_load[0] == 0
    delays = [evaluate(m, np.array([s])).delay_ps[0] for s in (1.0, 4.0, 16.0)]
    p = float(m.p[0])
    assert p > 0
    np.testing.assert_allclose(delays, p * TECH.tau_ps, rtol=1e-12)
    if tname in SSH99_P:
        # SSH99 (from memory): the unloaded delay is the tabulated parasitic delay
        assert delays[0] / TECH.tau_ps == pytest.approx(SSH99_P[tname], rel=1e-12)


@pytest.mark.parametrize("tname", ["inv", "nand2", "aoi21", "xor2"])
def test_loaded_delay_falls_with_size(tname):
    # common practice: with a fixed load C the delay is p + C / x in tau, falling with size x
    load = 12.0
    m = compile_model(_single(tname, load=load), TECH)
    for s in (1.0, 4.0, 16.0):
        d = evaluate(m, np.array([s])).delay_ps[0] / TECH.tau_ps
        assert d == pytest.approx(m.p[0] + load / s, rel=1e-12)


# -------------------------------------------------------------------- inverter stages


@pytest.mark.parametrize("p_inv, tau_ps", [(1.0, 3.0), (0.6, 2.2)])
def test_inverter_stage_delay_from_fanout(p_inv, tau_ps):
    # common practice: t_p = t_p0 (1 + f / gamma), t_p0 = gamma tau, gamma = p_inv, f = C_L / C_in
    tech = Technology(tau_ps=tau_ps, p_inv=p_inv)
    fanouts = np.array([1.0, 2.0, 4.0, 8.0])
    sizes = np.cumprod(np.concatenate([[1.0], fanouts[:-1]]))    # each stage f times the last
    c = chain(["inv"] * len(fanouts), cin=1.0, cload=float(sizes[-1] * fanouts[-1]))
    m = compile_model(c, tech)
    ev = evaluate(m, sizes)
    ev_load = ev.load / sizes
    np.testing.assert_allclose(ev_load, fanouts, rtol=1e-12)   # the fan-outs are as built
    gamma = p_inv
    t_p0 = gamma * tau_ps
    np.testing.assert_allclose(ev.delay_ps, t_p0 * (1 + fanouts / gamma), rtol=1e-12)
    # an unloaded inverter's delay is t_p0 itself
    single = compile_model(_single("inv"), tech)
    assert evaluate(single, np.array([3.0])).delay_ps[0] == pytest.approx(t_p0, rel=1e-12)


@pytest.mark.parametrize("p_inv", [1.0, 0.6])
def test_inverter_parasitic_to_gate_capacitance_is_gamma(p_inv):
    # common practice: gamma = C_d / C_g; the inverter's own output capacitance (seen in its
    # energy with no load) over its input capacitance (seen as a load on its driver) is p_inv
    tech = Technology(p_inv=p_inv, leak_na=0.0)
    x = 5.0
    m_own = compile_model(_single("inv", activity=1.0), tech)
    c_d = evaluate(m_own, np.array([x])).dynamic_fj[0] / tech.energy_unit_fj
    m_pair = compile_model(chain(["inv", "inv"], cin=1.0, cload=0.0), tech)
    c_g = evaluate(m_pair, np.array([1.0, x])).load[0]
    assert c_d / c_g == pytest.approx(p_inv, rel=1e-12)


# -------------------------------------------------------------------------------- energy


@pytest.mark.parametrize("load, x, alpha", [(10.0, 1.0, 0.25), (64.0, 8.0, 0.1), (3.0, 2.5, 1.0)])
def test_inverter_dynamic_energy_is_alpha_c_v2(load, x, alpha):
    # common practice: C V^2 drawn from the supply per rising output transition; the switched
    # capacitance is the load plus the inverter's own parasitic p_inv x (in C_u)
    tech = Technology(cu_ff=0.8, vdd_v=1.2, p_inv=1.0)
    m = compile_model(_single("inv", load=load, activity=alpha), tech)
    ev = evaluate(m, np.array([x]))
    c_ff = (load + tech.p_inv * x) * tech.cu_ff
    assert ev.dynamic_fj[0] == pytest.approx(alpha * c_ff * tech.vdd_v**2, rel=1e-12)
    assert ev.dynamic_total_fj == pytest.approx(alpha * c_ff * tech.vdd_v**2, rel=1e-12)


def test_chain_energy_counts_each_driven_gate_input():
    # common practice: each stage charges its load (the next gate's input g x) and its own
    # parasitic; the ideal path input is charged from outside the block and is not counted
    tech = Technology(cu_ff=1.5, vdd_v=0.9, leak_na=0.0)
    c = chain(["nand2", "inv"], cin=4.0 / 3.0, cload=20.0, activity=0.2)
    m = compile_model(c, tech)
    x = np.array([1.0, 6.0])
    ev = evaluate(m, x)
    g_inv, p_nand2, p_inv = 1.0, 2.0, 1.0          # SSH99 (from memory)
    expect = 0.2 * np.array([g_inv * x[1] + p_nand2 * x[0], 20.0 + p_inv * x[1]])
    np.testing.assert_allclose(ev.dynamic_fj, expect * tech.cu_ff * tech.vdd_v**2, rtol=1e-12)
    assert ev.leakage_total_fj == 0.0


# --------------------------------------------------------------------------------- FO4


@pytest.mark.parametrize("p_inv", [1.0, 0.5])
def test_fo4_inverter_delay(p_inv):
    # SSH99 (from memory, REFERENCES.md): FO4 delay = (4 + p_inv) tau = 5 tau for p_inv = 1;
    # a unit inverter driving four real unit inverters
    tech = Technology(p_inv=p_inv)
    c = Circuit("fo4")
    c.add_input("a")
    c.add_gate("drv", "inv", ["a"], "n", size=1.0)
    for k in range(4):
        c.add_gate(f"ld{k}", "inv", ["n"], f"y{k}", size=1.0)
        c.add_output(f"y{k}", load=4.0)
    m = compile_model(c, tech)
    ev = evaluate(m, m.lo.copy())
    d = ev.delay_ps[m.names.index("drv")] / tech.tau_ps
    assert d == pytest.approx(4.0 + p_inv, rel=1e-12)
    if p_inv == 1.0:
        assert d == pytest.approx(5.0, rel=1e-12)
