"""Operating point of a block: supply and threshold voltage together with the sizes.

Supply and threshold are not posynomial knobs, so they are searched outside the sizing problem.
In tau units the sizing problem does not depend on the voltage, so one compiled program serves
every supply and flavour (``Sizer.at``): only the delay unit, the energy unit and leakage change.

- ``voltage_frontier``: per (supply, flavour) frontiers at common delay targets and their lower
  envelope, the true energy-delay frontier with voltage scaling.
- ``operating_point``: the supply and flavour of least energy per operation for a target (or a
  throughput), refined over a continuous supply, with the knob sensitivities side by side; with
  neither a target nor a throughput, the minimum-energy point with the clock following the delay.
- ``sensitivities``: energy price of delay through sizing (the dual of the delay bound), through
  supply and through threshold (central finite differences at fixed sizes), all at a fixed cycle
  time. At a joint optimum they are equal (Markovic et al., IEEE JSSC 39(8), 2004).
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.optimize import minimize_scalar

from .circuit import Circuit
from .errors import EdoptError, InfeasibleTarget
from .sizing import CAUTION, Sizer, Sizing, parse_target
from .solvers.conic import OPTIMAL, Solution
from .technology import Technology, technology
from .timing import evaluate

FD_STEP_V = 1e-4        # finite-difference step for supply and threshold sensitivities
DEFAULT_SUPPLIES = 13   # default number of supplies between 0.5 x and 1.2 x nominal


def supply_grid(tech: Technology, supplies: Sequence[float] | None = None,
                flavours: Sequence[str] | None = None) -> np.ndarray:
    """Validated supply values (V): the given list, or 13 values from 0.5x to 1.2x nominal
    (kept 0.1 V above the highest threshold)."""
    vts = [tech.flavour_vt(f) for f in _flavour_list(tech, flavours)]
    if supplies is None:
        lo = max(0.5 * tech.vdd_v, max(vts) + 0.1)
        grid = np.linspace(lo, 1.2 * tech.vdd_v, DEFAULT_SUPPLIES)
    else:
        grid = np.asarray(list(supplies), dtype=float)
    if grid.size == 0:
        raise EdoptError("the supply range is empty: give at least one supply voltage")
    if not np.all(np.isfinite(grid)):
        raise EdoptError("supply voltages must be finite numbers")
    if grid.min() <= max(vts):
        raise EdoptError(f"supply {grid.min():g} V is at or below the threshold "
                         f"{max(vts):g} V of a chosen flavour: raise the lower end of the range")
    return np.unique(grid)


def parse_supply_range(text: str) -> list[float]:
    """``"0.6:1.2:0.05"`` (start:stop:step, inclusive) or ``"0.7,0.8,1.0"`` into volts."""
    text = text.strip()
    try:
        if ":" in text:
            start, stop, step = (float(p) for p in text.split(":"))
            if step <= 0:
                raise EdoptError(f"supply range {text!r}: the step must be positive")
            if stop < start:
                raise EdoptError(f"supply range {text!r} is empty (stop below start)")
            n = int(np.floor((stop - start) / step + 1e-9)) + 1
            return [start + k * step for k in range(n)]
        return [float(p) for p in text.split(",") if p.strip()]
    except ValueError:
        raise EdoptError(f"cannot read the supply range {text!r}: write start:stop:step "
                         "(volts) or a comma-separated list") from None


def _flavour_list(tech: Technology, flavours: Sequence[str] | None) -> list[str | None]:
    if flavours is None:
        names = [n for n, _ in tech.flavours]
        return names or [None]
    out = list(flavours)
    if not out:
        raise EdoptError("the list of threshold flavours is empty")
    for f in out:
        tech.flavour_vt(f)   # raises with the known names
    return out


@dataclass
class OperatingPoint:
    """The chosen supply, flavour and sizing, with the candidates it was chosen from."""

    mode: str                      # "target", "throughput" or "minimum-energy"
    supply_v: float
    flavour: str | None
    sizing: Sizing
    cycle_ps: float
    sensitivities: dict[str, float]
    table: pd.DataFrame            # one row per (supply, flavour) candidate
    notes: list[str] = field(default_factory=list)

    @property
    def energy_fj(self) -> float:
        return self.sizing.energy_fj

    @property
    def dynamic_fj(self) -> float:
        return self.sizing.dynamic_fj

    @property
    def leakage_fj(self) -> float:
        return self.sizing.leakage_fj

    @property
    def delay_ps(self) -> float:
        return self.sizing.delay_ps

    def to_dict(self) -> dict:
        return {
            "mode": self.mode, "supply_v": self.supply_v, "flavour": self.flavour,
            "energy_fj": self.energy_fj, "dynamic_fj": self.dynamic_fj,
            "leakage_fj": self.leakage_fj, "delay_ps": self.delay_ps, "cycle_ps": self.cycle_ps,
            "sensitivities_fj_per_ps": {k: (None if not np.isfinite(v) else float(v))
                                        for k, v in self.sensitivities.items()},
            "sizing": self.sizing.summary(),
            "candidates": self.table.replace({np.nan: None}).to_dict(orient="records"),
            "notes": self.notes, "caution": CAUTION,
        }


def sensitivities(res: Sizing, base: Technology, vt: float, cycle_ps: float) -> dict[str, float]:
    """Energy price of delay (fJ/ps) of each knob at the sizing ``res``, cycle time held fixed.

    ``sizing``: the dual of the delay bound; ``supply`` and ``threshold``: ``-dE/dD`` by central
    finite differences of the independent evaluation at fixed sizes.
    """
    x = res.evaluation.x
    v0 = res.model.tech.vdd_v

    def point(v: float, t: float) -> tuple[float, float]:
        m = dataclasses.replace(res.model, tech=base.at(v, vt=t))
        ev = evaluate(m, x, cycle_ps=cycle_ps)
        return ev.circuit_delay_ps, ev.energy_fj

    def slope(a: tuple[float, float], b: tuple[float, float]) -> float:
        dd = b[0] - a[0]
        return -(b[1] - a[1]) / dd if dd != 0 else float("nan")

    h = FD_STEP_V
    return {
        "sizing": res.bound_price,
        "supply": slope(point(v0 - h, vt), point(v0 + h, vt)),
        "threshold": slope(point(v0, vt - h), point(v0, vt + h)),
    }


def _base_sizer(circuit: Circuit | Sizer, tech: Technology | str | None,
                cycle_ps: float | None) -> Sizer:
    if isinstance(circuit, Sizer):
        return circuit if cycle_ps is None else _with_cycle(circuit, cycle_ps)
    return Sizer(circuit, tech, "energy", cycle_ps=cycle_ps)


def _with_cycle(sizer: Sizer, cycle_ps: float) -> Sizer:
    new = sizer.at(sizer.tech)
    new.cycle_ps = cycle_ps
    return new


def voltage_frontier(
    circuit: Circuit | Sizer, tech: Technology | str | None = None,
    targets: Sequence[float | str] | None = None, supplies: Sequence[float] | None = None,
    flavours: Sequence[str] | None = None, throughput: float | None = None, points: int = 8,
    span: float = 2.0, progress: Callable[[int, int, str], None] | None = None,
) -> pd.DataFrame:
    """Cheapest sizing at common delay targets for every (supply, flavour), with the envelope.

    Parameters
    ----------
    targets : delay targets (ps, "250ps" or "1.2x" of the nominal minimum delay); default
        ``points`` targets from 0.8x to ``span`` x the nominal minimum delay.
    throughput : operations per second; the leakage cycle time is then ``1/throughput``,
        otherwise it follows each target.

    Returns
    -------
    DataFrame with one row per (supply_v, flavour, target_ps): status ("optimal", "too slow",
    or the failure), delay_ps, energy_fj, dynamic_fj, leakage_fj, price_fj_per_ps, min_delay_ps,
    and ``envelope`` True on the least-energy row of each target.
    """
    cycle = None if throughput is None else _cycle_from_throughput(throughput)
    base = _base_sizer(circuit, tech, cycle)
    nominal = base.tech
    flist = _flavour_list(nominal, flavours)
    grid = supply_grid(nominal, supplies, flavours)
    d_nom = base.min_delay_ps
    if targets is None:
        tlist = list(d_nom * np.geomspace(0.8, span, points))
    else:
        tlist = [float(parse_target(t, d_nom)) for t in targets]
    rows = []
    total = len(grid) * len(flist)
    done = 0
    for fl in flist:
        for v in grid:
            sv = base.at(nominal.at(float(v), fl))
            d_min = sv.min_delay_ps
            for t in tlist:
                row = {"supply_v": float(v), "flavour": fl, "target_ps": t, "min_delay_ps": d_min}
                if t < d_min * (1 - 1e-9):
                    row["status"] = "too slow"
                else:
                    try:
                        res = sv.cheapest(t)
                        row.update(status=res.status, delay_ps=res.delay_ps,
                                   energy_fj=res.energy_fj, dynamic_fj=res.dynamic_fj,
                                   leakage_fj=res.leakage_fj, price_fj_per_ps=res.price)
                    except EdoptError as exc:
                        row["status"] = f"failed: {exc}"
                rows.append(row)
            done += 1
            if progress:
                progress(done, total, f"{v:.3g} V {fl or ''}")
    table = pd.DataFrame(rows, columns=["supply_v", "flavour", "target_ps", "status",
                                        "delay_ps", "energy_fj", "dynamic_fj", "leakage_fj",
                                        "price_fj_per_ps", "min_delay_ps"])
    ok = table.status.isin([OPTIMAL, "inaccurate"]) & table.energy_fj.notna()
    table["envelope"] = False
    if ok.any():
        best = table[ok].groupby("target_ps").energy_fj.idxmin()
        table.loc[best.values, "envelope"] = True
    return table


def _cycle_from_throughput(throughput: float) -> float:
    if not (isinstance(throughput, (int, float)) and np.isfinite(throughput) and throughput > 0):
        raise EdoptError(f"throughput must be a positive number of operations per second, "
                         f"got {throughput!r}")
    return 1e12 / float(throughput)


def operating_point(
    circuit: Circuit | Sizer, tech: Technology | str | None = None,
    target: float | str | None = None, supplies: Sequence[float] | None = None,
    flavours: Sequence[str] | None = None, throughput: float | None = None, refine: bool = True,
) -> OperatingPoint:
    """Supply, threshold flavour and sizes of least energy per operation.

    - ``target`` (ps, "250ps", "1.2x" of the nominal minimum delay): the delay bound; the cycle
      time for leakage is ``1/throughput`` when given, else the target.
    - ``throughput`` alone: the target is the cycle time ``1/throughput``.
    - neither: the minimum-energy point with the clock following the delay; each supply uses
      the minimum-energy sizing (every gate at its lower bound), its leakage energy is leakage
      power times that sizing's own delay.

    With a target, the best grid supply is refined over a continuous supply between its grid
    neighbours (Brent's method), so the sensitivities are those of a joint optimum.
    """
    cycle = None if throughput is None else _cycle_from_throughput(throughput)
    base = _base_sizer(circuit, tech, cycle)
    nominal = base.tech
    flist = _flavour_list(nominal, flavours)
    grid = supply_grid(nominal, supplies, flavours)
    if target is None and cycle is None:
        return _minimum_energy_point(base, nominal, flist, grid)
    mode = "target" if target is not None else "throughput"
    t_ps = float(parse_target(target, base.min_delay_ps)) if target is not None else cycle
    rows = []
    best: tuple[float, float, str | None, Sizing] | None = None
    fastest_seen = np.inf
    for fl in flist:
        for v in grid:
            res, d_min = _cheapest_at(base, nominal, float(v), fl, t_ps)
            fastest_seen = min(fastest_seen, d_min)
            rows.append(_candidate_row(float(v), fl, d_min, res))
            if res is not None and (best is None or res.energy_fj < best[0]):
                best = (res.energy_fj, float(v), fl, res)
    table = pd.DataFrame(rows)
    if best is None:
        raise InfeasibleTarget(
            f"no supply in {grid.min():g}..{grid.max():g} V and flavour meets {t_ps:.2f} ps; "
            f"the fastest is {fastest_seen:.2f} ps", fastest_seen)
    _, v_best, fl_best, res_best = best
    notes = []
    if refine and len(grid) > 1:
        k = int(np.searchsorted(grid, v_best))
        lo, hi = grid[max(k - 1, 0)], grid[min(k + 1, len(grid) - 1)]

        def energy(v: float) -> float:
            r, _ = _cheapest_at(base, nominal, v, fl_best, t_ps)
            return r.energy_fj if r is not None else np.inf

        found = minimize_scalar(energy, bounds=(lo, hi), method="bounded",
                                options={"xatol": 1e-5})
        r, _ = _cheapest_at(base, nominal, float(found.x), fl_best, t_ps)
        if r is not None and r.energy_fj <= res_best.energy_fj:
            v_best, res_best = float(found.x), r
            notes.append(f"supply refined between {lo:.3g} and {hi:.3g} V")
        if v_best in (grid[0], grid[-1]):
            notes.append("the best supply is at the end of the range: widen it")
    cyc = cycle if cycle is not None else t_ps
    sens = sensitivities(res_best, nominal, nominal.flavour_vt(fl_best), cyc)
    return OperatingPoint(mode, v_best, fl_best, res_best, cyc, sens, table, notes)


def _cheapest_at(base: Sizer, nominal: Technology, v: float, fl: str | None,
                 t_ps: float) -> tuple[Sizing | None, float]:
    sv = base.at(nominal.at(v, fl))
    d_min = sv.min_delay_ps
    if t_ps < d_min * (1 - 1e-9):
        return None, d_min
    try:
        return sv.cheapest(t_ps), d_min
    except EdoptError:
        return None, d_min


def _candidate_row(v: float, fl: str | None, d_min: float, res: Sizing | None) -> dict:
    row = {"supply_v": v, "flavour": fl, "min_delay_ps": d_min}
    if res is None:
        row["status"] = "too slow"
        return row
    row.update(status=res.status, delay_ps=res.delay_ps, energy_fj=res.energy_fj,
               dynamic_fj=res.dynamic_fj, leakage_fj=res.leakage_fj,
               price_fj_per_ps=res.price)
    return row


def _minimum_energy_point(base: Sizer, nominal: Technology, flist: list[str | None],
                          grid: np.ndarray) -> OperatingPoint:
    m0 = base.model
    x = np.where(m0.fixed, m0.hi, m0.lo)
    rows = []
    best = None
    for fl in flist:
        for v in grid:
            sv = base.at(nominal.at(float(v), fl))
            ev = evaluate(sv.model, x)   # cycle time = the sizing's own delay
            rows.append({"supply_v": float(v), "flavour": fl, "status": OPTIMAL,
                         "delay_ps": ev.circuit_delay_ps, "energy_fj": ev.energy_fj,
                         "dynamic_fj": ev.dynamic_total_fj, "leakage_fj": ev.leakage_total_fj})
            if best is None or ev.energy_fj < best[0]:
                best = (ev.energy_fj, float(v), fl, sv, ev)
    _, v, fl, sv, ev = best
    sol = Solution(x, ev.circuit_delay_ps / sv.tech.tau_ps, np.nan, 0.0, OPTIMAL,
                   "minimum sizes", 0.0, ["every gate at its lower size bound"])
    res = sv._result("minimum-energy", sol, None, None, ev.circuit_delay_ps)
    notes = ["clock follows the delay: every gate at its lower size bound at each supply"]
    if v in (grid[0], grid[-1]):
        notes.append("the minimum-energy supply is at the end of the range: widen it")
    sens = sensitivities(res, nominal, nominal.flavour_vt(fl), ev.circuit_delay_ps)
    return OperatingPoint("minimum-energy", v, fl, res, ev.circuit_delay_ps, sens,
                          pd.DataFrame(rows), notes)


def energy_versus_supply(
    circuit: Circuit | Sizer, tech: Technology | str | None = None,
    supplies: Sequence[float] | None = None, flavour: str | None = None,
    throughput: float | None = None,
) -> pd.DataFrame:
    """Energy per operation against the supply for one flavour: at a fixed throughput (cheapest
    sizing meeting the cycle time) or, without throughput, with the clock following the delay
    (minimum-energy sizing)."""
    nominal = technology(tech) if not isinstance(circuit, Sizer) else circuit.tech
    flist = [flavour] if flavour is not None else [_flavour_list(nominal, None)[0]]
    if throughput is None:
        base = _base_sizer(circuit, tech, None)
        op = _minimum_energy_point(base, nominal, flist, supply_grid(nominal, supplies, flist))
        return op.table
    op = operating_point(circuit, tech, None, supplies, flist, throughput, refine=False)
    return op.table
