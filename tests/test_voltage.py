"""Supply and threshold exploration (sources beside each check, see REFERENCES.md)."""

import numpy as np
import pytest

import edopt
from edopt.generators import random_layered
from edopt.voltage import (
    energy_versus_supply,
    operating_point,
    parse_supply_range,
    voltage_frontier,
)


@pytest.fixture(scope="module")
def net():
    return random_layered(40, seed=5)


@pytest.mark.parametrize("alpha", [1.0, 1.3, 2.0])
def test_tau_follows_alpha_power_law(alpha):
    """t_d ~ V / (V - V_t)^alpha (T. Sakurai, A. R. Newton, IEEE JSSC 25(2), 1990)."""
    tech = edopt.Technology(alpha=alpha)
    for v in (0.6, 0.8, 1.2):
        expected = tech.tau_ps * (v / (v - tech.vt_v) ** alpha) / (1.0 / (1.0 - tech.vt_v) ** alpha)
        assert tech.at(v).tau_ps == pytest.approx(expected, rel=1e-12)
    # the law's logarithmic slope in (V - V_t) is -alpha far above threshold (V >> V_t)
    t = edopt.Technology(alpha=alpha, vt_v=0.01, vdd_v=1.0)
    slope = np.log(t.at(4.0).tau_ps / t.at(2.0).tau_ps) / np.log((4.0 - 0.01) / (2.0 - 0.01))
    assert slope == pytest.approx(1 - alpha, abs=0.01)


def test_leakage_follows_swing_and_dibl():
    """Subthreshold leakage: a decade per swing of threshold (common practice)."""
    tech = edopt.Technology()
    high = tech.at(flavour="high")
    assert high.leak_na == pytest.approx(tech.leak_na * 10 ** (-70 / tech.swing_mv))
    lower = tech.at(0.8)
    assert lower.leak_na == pytest.approx(tech.leak_na * 10 ** (tech.dibl * -0.2 * 1000 / 90))


def test_envelope_is_never_above_any_frontier(net):
    table = voltage_frontier(net, supplies=[0.7, 0.85, 1.0, 1.15], points=5, span=1.8)
    ok = table[table.energy_fj.notna()]
    env = ok[ok.envelope]
    assert len(env) == ok.target_ps.nunique()
    for t, group in ok.groupby("target_ps"):
        e = env[env.target_ps == t].energy_fj.iloc[0]
        assert e == pytest.approx(group.energy_fj.min())
        assert (group.energy_fj >= e * (1 - 1e-12)).all()
    # a too-slow combination is marked, not dropped
    assert set(table.status) >= {"optimal"}
    assert len(table) == 4 * 3 * 5


def test_sizing_and_supply_sensitivities_agree_at_joint_optimum(net):
    """At a joint energy-delay optimum the sensitivities of all tuning knobs are equal
    (D. Markovic et al., IEEE JSSC 39(8), 2004); edopt refines the supply continuously."""
    op = operating_point(net, target="1.2x", flavours=["standard"],
                         supplies=np.linspace(0.6, 1.2, 7))
    s = op.sensitivities
    assert s["sizing"] > 0
    assert s["supply"] == pytest.approx(s["sizing"], rel=0.05)
    assert op.delay_ps <= op.sizing.target_ps * (1 + 1e-6)
    assert op.energy_fj == pytest.approx(op.dynamic_fj + op.leakage_fj)


def test_joint_choice_beats_every_candidate(net):
    op = operating_point(net, target="1.3x", supplies=[0.7, 0.8, 0.9, 1.0, 1.1], refine=False)
    feasible = op.table[op.table.energy_fj.notna()]
    assert op.energy_fj == pytest.approx(feasible.energy_fj.min())


def test_minimum_energy_point_is_interior_with_leakage():
    """With leakage, energy per operation against supply (clock following the delay) has an
    interior minimum; without leakage it falls as the supply drops (common practice)."""
    c = random_layered(30, seed=2)
    supplies = np.linspace(0.33, 1.0, 30)
    leaky = edopt.Technology(leak_na=3000.0)
    table = energy_versus_supply(c, leaky, supplies=supplies, flavour="standard")
    k = int(np.argmin(table.energy_fj.to_numpy()))
    assert 0 < k < len(table) - 1
    op = operating_point(c, leaky, supplies=supplies, flavours=["standard"])
    assert op.mode == "minimum-energy" and op.supply_v == pytest.approx(table.supply_v[k])
    dry = energy_versus_supply(c, edopt.Technology(leak_na=0.0), supplies=supplies,
                               flavour="standard")
    assert np.all(np.diff(dry.energy_fj.to_numpy()) > 0)


def test_fixed_throughput_sets_the_cycle(net):
    fast = edopt.size(net)
    thr = 1e12 / (1.5 * fast.delay_ps)   # operations per second
    op = operating_point(net, throughput=thr, supplies=[0.8, 0.9, 1.0], flavours=["standard"])
    assert op.cycle_ps == pytest.approx(1.5 * fast.delay_ps)
    assert op.delay_ps <= op.cycle_ps * (1 + 1e-6)


@pytest.mark.parametrize("kwargs, match", [
    ({"supplies": [0.25, 0.8]}, "below the threshold"),
    ({"supplies": []}, "empty"),
    ({"flavours": ["ultra"]}, "no threshold flavour 'ultra'"),
    ({"flavours": []}, "empty"),
    ({"throughput": -5.0}, "throughput"),
])
def test_bad_ranges_give_clear_errors(net, kwargs, match):
    kwargs.setdefault("target", "1.2x")
    with pytest.raises(edopt.EdoptError, match=match):
        operating_point(net, **kwargs)


def test_parse_supply_range():
    assert parse_supply_range("0.6:1.0:0.1") == pytest.approx([0.6, 0.7, 0.8, 0.9, 1.0])
    assert parse_supply_range("0.7, 0.9") == [0.7, 0.9]
    for bad in ("1.0:0.6:0.1", "a:b:c", "0.6:1.0:0"):
        with pytest.raises(edopt.EdoptError):
            parse_supply_range(bad)


def test_unreachable_target_names_the_fastest(net):
    fast = edopt.size(net)
    with pytest.raises(edopt.InfeasibleTarget, match="fastest") as err:
        operating_point(net, target=0.3 * fast.delay_ps, supplies=[0.8, 1.0])
    assert err.value.min_delay_ps > 0.3 * fast.delay_ps
