"""The energy-delay frontier against outside references.

Sources named beside each check:
- "envelope theorem": the derivative of an optimal value with respect to a constraint bound is
  the constraint's Lagrange multiplier, so the dual price of ``D <= T`` equals ``-dE*/dT`` (with
  the leakage that grows with the cycle time T added back; see ``Sizer.cheapest``).
- "ZS02": V. Zyuban, P. Strenski, "Unified methodology for resolving power-performance tradeoffs
  at the microarchitectural and circuit levels", ISLPED 2002: the hardware intensity
  ``eta = -(D/E) dE/dD`` equals n at the minimum of ``E * D^n`` (an exact identity).
- "first principles": relaxing a bound cannot make the optimum worse; dynamic energy grows with
  every size, so no sizing costs less than all sizes at their lower bounds.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from edopt.errors import EdoptError, InfeasibleTarget
from edopt.formats.case import load_case
from edopt.frontier import balanced, fastest_within, frontier, sweep_targets
from edopt.generators import random_layered
from edopt.sizing import Sizer
from edopt.technology import Technology
from edopt.timing import evaluate

CASES = Path(__file__).resolve().parent.parent / "cases"
NO_LEAK = Technology(name="no-leak", leak_na=0.0)


def _mixed_chain() -> Sizer:
    case = load_case(CASES / "mixed_chain.toml")
    return Sizer(case.circuit, case.tech)


def _decoder() -> Sizer:
    case = load_case(CASES / "decoder.toml")
    return Sizer(case.circuit, case.tech)


def _random(tech: Technology | None = None) -> Sizer:
    return Sizer(random_layered(20, 2, load=32.0), tech)


SIZERS = {
    "mixed_chain": _mixed_chain,
    "decoder": _decoder,
    "random20": _random,
    "random20_no_leak": lambda: _random(NO_LEAK),
}


@pytest.fixture(scope="module", params=list(SIZERS))
def sizer(request) -> Sizer:
    return SIZERS[request.param]()


# ------------------------------------------------------------------------ price and eta


def test_dual_price_equals_frontier_slope(sizer):
    # envelope theorem: price = -dE*/dT, against a central difference of the frontier
    d_min = sizer.fastest().min_delay_ps
    binding = 0
    for relax in (1.05, 1.2, 1.5):
        t = relax * d_min
        res = sizer.cheapest(t)
        assert res.status != "mismatch", res.notes
        if res.delay_ps < t * (1 - 1e-5):
            continue                          # bound not active: price 0, nothing to compare
        binding += 1
        h = 2e-3 * t
        slope = (sizer.cheapest(t - h).energy_fj - sizer.cheapest(t + h).energy_fj) / (2 * h)
        assert slope > 0
        assert res.price_fj_per_ps == pytest.approx(slope, rel=0.02)
        # ZS02: the intensity is the price made dimensionless by T / E
        assert res.intensity == pytest.approx(slope * t / res.energy_fj, rel=0.02)
    assert binding >= 2


@pytest.mark.parametrize("n", [1, 2])
def test_intensity_at_balanced_point_equals_exponent(sizer, n):
    # ZS02: eta = n exactly at the minimum of E * D^n
    best = balanced(sizer, exponent=n)
    assert best.status != "mismatch", best.notes
    assert best.intensity == pytest.approx(n, rel=0.02)
    # first principles: it is a minimum of E * D^n along the frontier
    t = best.target_ps
    cost = best.energy_fj * best.delay_ps**n
    for k in (0.97, 1.03):
        other = sizer.cheapest(k * t)
        assert cost <= other.energy_fj * other.delay_ps**n * (1 + 1e-7)


# ------------------------------------------------------------------------- monotonicity


@pytest.mark.parametrize("make", [_mixed_chain, _random], ids=["mixed_chain", "random20"])
def test_energy_never_rises_as_bound_relaxes(make):
    # first principles: a looser bound keeps every earlier sizing feasible. Leakage is off
    # (Technology(leak_na=0)): with leakage, energy per operation grows with the cycle time.
    s = make()
    s = Sizer(s.circuit, NO_LEAK)
    f = frontier(s, points=12, span=2.5)
    tab = f.table
    assert len(tab) == 12
    assert (tab.status != "mismatch").all() and (tab.status != "failed").all()
    assert np.all(tab.leakage_fj == 0)
    e = tab.energy_fj.to_numpy()
    assert np.all(np.diff(e) <= 1e-7 * e[:-1])
    assert np.all(np.diff(tab.dynamic_fj.to_numpy()) <= 1e-7 * e[:-1])
    assert e[-1] < 0.9 * e[0]                       # the frontier does trade energy for delay
    # every point meets its bound (re-timed independently)
    for res in f.points[1:]:
        ev = evaluate(res.model, res.evaluation.x, target_ps=res.target_ps)
        assert ev.circuit_delay_ps <= res.target_ps * (1 + 1e-6)


# --------------------------------------------------------------------- energy budgets


@pytest.fixture(scope="module", params=["mixed_chain", "random20"])
def no_leak_frontier(request):
    base = SIZERS[request.param]()
    s = Sizer(base.circuit, NO_LEAK)
    return s, frontier(s, points=16, span=2.0)


def test_fastest_within_budget_at_frontier_points(no_leak_frontier):
    # first principles: the fastest sizing within E_max is the frontier point with E* = E_max
    s, f = no_leak_frontier
    tab = f.table
    checked = 0
    for k in (3, 8, 12):
        budget = float(tab.energy_fj[k])
        if not budget < float(tab.energy_fj[k - 1]) * (1 - 1e-4):
            continue                           # flat part of the frontier: delay not unique
        checked += 1
        res = fastest_within(s, budget)
        assert res.status != "mismatch", res.notes
        assert res.energy_fj <= budget * (1 + 1e-6)
        assert res.delay_ps == pytest.approx(float(tab.delay_ps[k]), rel=0.01)
    assert checked >= 2


def test_fastest_within_budget_between_frontier_points(no_leak_frontier):
    # first principles: the answer lies on the frontier, here between two swept points
    s, f = no_leak_frontier
    tab = f.table
    e = tab.energy_fj.to_numpy()
    d = tab.delay_ps.to_numpy()
    k = 6
    budget = float(np.sqrt(e[k] * e[k + 1]))
    res = fastest_within(s, budget)
    assert res.energy_fj <= budget * (1 + 1e-6)
    assert d[k] <= res.delay_ps <= d[k + 1]
    expect = np.exp(np.interp(np.log(budget), np.log(e[[k + 1, k]]), np.log(d[[k + 1, k]])))
    assert res.delay_ps == pytest.approx(expect, rel=0.01)


def test_fastest_within_generous_budget_is_fastest(no_leak_frontier):
    s, f = no_leak_frontier
    res = fastest_within(s, 2 * f.fastest.energy_fj)
    assert res.delay_ps == pytest.approx(f.min_delay_ps, rel=2e-3)


def test_budget_below_minimum_energy_is_infeasible(no_leak_frontier):
    # first principles: dynamic energy grows with every size, so no sizing costs less than all
    # free sizes at their lower bounds
    s, f = no_leak_frontier
    m = s.model
    floor = evaluate(m, m.lo.copy()).energy_fj
    assert floor < f.table.energy_fj.min() * (1 + 1e-6)
    with pytest.raises(InfeasibleTarget) as info:
        fastest_within(s, 0.99 * floor)
    assert info.value.min_delay_ps == pytest.approx(f.min_delay_ps, rel=1e-9)


# --------------------------------------------------------------------- failed points


def test_sweep_keeps_rows_when_one_point_fails(monkeypatch):
    s = Sizer(random_layered(12, 1, load=32.0), NO_LEAK)
    d_min = s.fastest().min_delay_ps
    targets = sweep_targets(d_min, 8, 2.0)
    bad = float(targets[3])
    original = Sizer.finish

    def flaky(self, sol, t_ps, cycle):
        if np.isclose(t_ps, bad, rtol=1e-12):
            raise EdoptError("simulated solver failure")
        return original(self, sol, t_ps, cycle)

    monkeypatch.setattr(Sizer, "finish", flaky)
    f = frontier(s, points=8, span=2.0)
    tab = f.table
    assert len(tab) == 8 and len(f.points) == 8
    k = 4                                        # row 0 is the minimum-delay point
    assert tab.target_ps[k] == pytest.approx(bad)
    assert tab.status[k] == "failed"
    assert np.isnan(tab.energy_fj[k])
    assert f.points[k] is None
    assert "simulated solver failure" in f.errors[k]
    assert list(f.errors) == [k]
    others = tab.drop(index=k)
    assert (others.status == "optimal").all()
    assert np.all(np.isfinite(others.energy_fj))
    np.testing.assert_allclose(others.target_ps.to_numpy()[1:], np.delete(targets, 3))


def test_parallel_sweep_equals_serial_sweep():
    """Worker processes compile their own program; their answers, re-timed here, must equal
    the serial sweep's (same program, same solver)."""
    s = Sizer(random_layered(30, 4, load=32.0), NO_LEAK)
    serial = frontier(s, points=6, span=1.6, workers=1).table
    parallel = frontier(s, points=6, span=1.6, workers=2).table
    np.testing.assert_allclose(parallel.energy_fj, serial.energy_fj, rtol=1e-6)
    np.testing.assert_allclose(parallel.delay_ps, serial.delay_ps, rtol=1e-6)
    assert (parallel.status == "optimal").all()


def test_default_workers_by_network_size(monkeypatch):
    """Two workers by default only for large networks on a machine with two CPUs (measured
    faster there, benchmarks/frontier_1000.py); small networks and single CPUs stay serial."""
    from edopt import parallel

    small = Sizer(random_layered(30, 4), NO_LEAK).model
    large = Sizer(random_layered(parallel.PARALLEL_GATES + 50, 4), NO_LEAK).model
    monkeypatch.setattr(parallel, "cores", lambda: 2)
    assert parallel.default_workers(small, 24) == 1
    assert parallel.default_workers(large, 24) == 2
    assert parallel.default_workers(large, parallel.PARALLEL_JOBS - 1) == 1
    monkeypatch.setattr(parallel, "cores", lambda: 1)
    assert parallel.default_workers(large, 24) == 1
