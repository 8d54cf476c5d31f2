"""Energy-delay frontier: sweeps of the delay bound, balanced points, fastest within a budget.

A sweep reuses one compiled program (only the bound and the objective weights change between
points). Points are spread geometrically in the relative delay above the minimum, so the steep
end near the minimum delay is well resolved. A point that fails keeps its row, marked with its
status; the other points are kept.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from scipy.optimize import brentq, minimize_scalar

from .circuit import Circuit
from .errors import EdoptError, InfeasibleTarget
from .parallel import Workers, default_workers
from .sizing import CAUTION, Sizer, Sizing, parse_target
from .solvers.large import SWEEP_BUDGET, LargeSizer
from .technology import Technology

SUMMARY_STEPS = (0.05, 0.10, 0.20)   # relaxations reported in the plain summary
FIRST_STEP = 2e-3                    # first sweep point: 0.2 % above the minimum delay

COLUMNS = ["target_ps", "relative_delay", "delay_ps", "energy_fj", "dynamic_fj", "leakage_fj",
           "area", "price_fj_per_ps", "intensity", "status", "solver", "seconds", "gap_pct"]


@dataclass
class Frontier:
    """A swept energy-delay frontier.

    ``table`` has one row per point (the first is the minimum-delay point); ``points`` holds the
    Sizing of each row that solved (None where it failed); ``fastest`` is the minimum-delay
    sizing; ``errors`` maps row index to the reason of a failed point.
    """

    table: pd.DataFrame
    points: list[Sizing | None]
    fastest: Sizing
    sizer: Sizer
    errors: dict[int, str] = field(default_factory=dict)

    @property
    def min_delay_ps(self) -> float:
        return self.fastest.min_delay_ps

    def savings(self, steps: Sequence[float] = SUMMARY_STEPS) -> pd.DataFrame:
        """Energy saved, relative to the minimum-delay point, at delays ``(1 + step) * D_min``
        (points of the sweep where they exist, else solved now)."""
        rows = []
        e0 = self.fastest.energy_fj
        for step in steps:
            t = self.min_delay_ps * (1 + step)
            hit = self.table.index[np.isclose(self.table.target_ps, t, rtol=1e-9)]
            if len(hit):
                e = float(self.table.loc[hit[0], "energy_fj"])
            else:
                try:
                    e = self.sizer.cheapest(t).energy_fj
                except EdoptError:
                    e = float("nan")
            rows.append({"relax": step, "target_ps": t, "energy_fj": e,
                         "saving": 1 - e / e0 if e0 > 0 else float("nan")})
        return pd.DataFrame(rows)

    def summary_text(self) -> str:
        """A plain sentence such as 'relaxing the delay 5 % / 10 % / 20 % ... saves ...'."""
        s = self.savings()
        ok = s.dropna()
        if ok.empty:
            return "no relaxed point solved"
        pct = " / ".join(f"{r * 100:.0f} %" for r in ok.relax)
        sav = " / ".join(f"{v * 100:.0f} %" for v in ok.saving)
        return (f"relaxing the delay {pct} above the minimum ({self.min_delay_ps:.1f} ps) saves "
                f"{sav} of the energy ({self.fastest.energy_fj:.1f} fJ at the minimum delay)")

    def to_dict(self) -> dict:
        return {
            "min_delay_ps": self.min_delay_ps,
            "fastest": self.fastest.summary(),
            "points": self.table.replace({np.nan: None}).to_dict(orient="records"),
            "savings": self.savings().to_dict(orient="records"),
            "summary": self.summary_text(),
            "caution": CAUTION,
        }


def sweep_targets(d_min: float, points: int, span: float) -> np.ndarray:
    """Delay bounds of a sweep: ``points - 1`` bounds above ``d_min`` up to ``span * d_min``,
    geometric in the relative excess so the steep end is dense; the summary relaxations that
    fall in the range replace their nearest neighbours, so they are solved exactly."""
    if points < 2:
        raise EdoptError("a frontier needs at least 2 points")
    if not span > 1:
        raise EdoptError(f"span must be above 1 (a multiple of the minimum delay), got {span}")
    first = min(FIRST_STEP, (span - 1) / 10)
    rel = np.geomspace(first, span - 1, points - 1)
    for step in SUMMARY_STEPS:
        if first < step < span - 1:
            k = int(np.argmin(np.abs(np.log(rel) - np.log(step))))
            if not np.any(np.isclose(rel, step)):
                rel[k] = step
    rel = np.unique(rel)
    return d_min * (1 + rel)


def _row(res: Sizing, d_min: float) -> dict:
    return {
        "target_ps": res.target_ps if res.target_ps is not None else d_min,
        "relative_delay": res.delay_ps / d_min,
        "delay_ps": res.delay_ps, "energy_fj": res.energy_fj, "dynamic_fj": res.dynamic_fj,
        "leakage_fj": res.leakage_fj, "area": res.area,
        "price_fj_per_ps": res.price_fj_per_ps if res.problem != "fastest" else np.nan,
        "intensity": res.intensity if res.problem != "fastest" else np.nan,
        "status": res.status, "solver": res.solver, "seconds": res.seconds,
        # certified gap of the large engine (percent; empty for the reference engine)
        "gap_pct": res.gap_pct if res.gap_pct is not None else np.nan,
    }


def frontier(
    circuit: Circuit | Sizer, tech: Technology | str | None = None, points: int = 25,
    span: float = 2.0, objective: str = "energy",
    progress: Callable[[int, int, Sizing | None], None] | None = None,
    workers: int | None = None, **options,
) -> Frontier:
    """Sweep the delay bound from the minimum delay to ``span`` times it.

    Parameters
    ----------
    circuit : the network, or a Sizer to reuse its compiled programs.
    points : number of rows including the minimum-delay point.
    span : largest bound as a multiple of the minimum delay.
    progress : called as ``progress(done, total, sizing_or_None)`` after each point (points
        may finish out of order when several workers run).
    workers : processes for the sweep (each compiles the program once); ``None`` = two for
        networks of 600 free gates or more on a machine with two CPUs (measured faster there),
        else serial (``parallel.default_workers``), for either engine.

    Returns
    -------
    Frontier with ``table`` columns target_ps, relative_delay, delay_ps, energy_fj, dynamic_fj,
    leakage_fj, area, price_fj_per_ps, intensity, status, solver, seconds.
    """
    sizer = circuit if isinstance(circuit, Sizer) else Sizer(circuit, tech, objective, **options)
    large = sizer.engine if isinstance(sizer.engine, LargeSizer) else None
    budget = None
    if large is not None:
        # Each bound gets the sweep's budget: points within about 3 % of the minimum delay
        # end inaccurate with their certified gap rather than hold up the whole sweep.
        budget, large.budget = large.budget, min(large.budget, SWEEP_BUDGET)
    n_workers = default_workers(sizer.model, points - 1) if workers is None else workers
    # the worker processes start up and compile while this one solves the minimum delay
    pool = Workers(sizer.model, sizer.options, n_workers, large) \
        if n_workers > 1 and points > 2 else None
    try:
        fast = sizer.fastest()
        d_min = fast.min_delay_ps
        targets = sweep_targets(d_min, points, span)
        total = len(targets) + 1
        results: dict[int, Sizing | EdoptError] = {0: fast}
        count = 1
        if progress:
            progress(1, total, fast)
        jobs, pending = [], {}
        for k, t in enumerate(targets, start=1):
            try:
                req = sizer.request(float(t))
            except EdoptError as exc:
                results[k] = exc
                continue
            if isinstance(req, Sizing):
                results[k] = req
            else:
                pending[k] = req
                jobs.append((k, sizer.model.to_tau(req[0]), req[2]))
        if large is not None:
            # the large engine warm-starts each bound from its neighbour, in order: from the
            # relaxed end down (measured on 10^4 gates, 25 points: 22 % less time than
            # upwards, and more points within the gap; the steep end starts from neighbours
            # that are solved well). Two workers take alternate bounds, each warm-starting
            # from its own previous one.
            jobs.reverse()
        if pool is not None and len(jobs) > 1:
            answers = pool.solve(jobs, large)
        else:
            answers = ((k, sizer.engine.cheapest(b, w)) for k, b, w in jobs)
        for k, sol in answers:
            t_ps, cycle, _ = pending[k]
            try:
                if isinstance(sol, BaseException):
                    raise EdoptError(f"solve at {t_ps:.2f} ps failed: {sol}")
                results[k] = sizer.finish(sol, t_ps, cycle)
            except EdoptError as exc:
                results[k] = exc
            count += 1
            if progress:
                got = results[k]
                progress(count, total, got if isinstance(got, Sizing) else None)
    finally:
        if pool is not None:
            pool.close()
        if large is not None and budget is not None:
            large.budget = budget
    rows = []
    done: list[Sizing | None] = []
    errors: dict[int, str] = {}
    for k in range(total):
        got = results.get(k)
        if isinstance(got, Sizing):
            rows.append(_row(got, d_min))
            done.append(got)
        else:
            errors[k] = str(got)
            rows.append({"target_ps": float(targets[k - 1]), "relative_delay": np.nan,
                         "status": "failed"})
            done.append(None)
    table = pd.DataFrame(rows, columns=COLUMNS)
    table.index.name = "point"
    return Frontier(table, done, fast, sizer, errors)


def balanced(
    circuit: Circuit | Sizer, tech: Technology | str | None = None, exponent: float = 1.0,
    span: float = 3.0, **options,
) -> Sizing:
    """The sizing that minimises ``E * D^exponent`` (1: energy-delay product, 2: E D^2).

    A one-dimensional search over the delay bound T of ``log E*(T) + n log T``, which is convex
    in ``log T`` for this problem class; each evaluation is a cheapest-under-a-bound solve of the
    same compiled program. The dual is not used, so the hardware intensity of the answer is an
    independent check (it equals ``exponent`` at the optimum).
    """
    sizer = circuit if isinstance(circuit, Sizer) else Sizer(circuit, tech, "energy", **options)
    d_min = sizer.fastest().min_delay_ps
    cache: dict[float, Sizing] = {}

    def cost(log_t: float) -> float:
        res = sizer.cheapest(float(np.exp(log_t)))
        cache[log_t] = res
        return float(np.log(res.energy_fj) + exponent * log_t)

    lo, hi = np.log(d_min * (1 + FIRST_STEP)), np.log(d_min * span)
    found = minimize_scalar(cost, bounds=(lo, hi), method="bounded",
                            options={"xatol": 1e-6})
    best = cache.get(found.x) or sizer.cheapest(float(np.exp(found.x)))
    best.problem = "balanced"
    best.notes.append(f"minimum of E * D^{exponent:g} over the delay bound")
    if found.x > hi - 1e-3:
        best.notes.append(f"the search reached its upper end ({span:g} x the minimum delay)")
    if found.x < lo + 1e-3:
        best.notes.append("the optimum is at the minimum-delay end")
    return best


def fastest_within(
    circuit: Circuit | Sizer, energy_max_fj: float, tech: Technology | str | None = None,
    span: float = 10.0, **options,
) -> Sizing:
    """The fastest sizing whose energy is at most ``energy_max_fj``.

    E*(T) falls as the bound T relaxes, so the answer is the root of ``E*(T) = E_max``
    (bracketed between the minimum delay and ``span`` times it, found with Brent's method).
    """
    sizer = circuit if isinstance(circuit, Sizer) else Sizer(circuit, tech, "energy", **options)
    fast = sizer.fastest()
    if fast.energy_fj <= energy_max_fj:
        return fast
    d_min = fast.min_delay_ps
    t_hi = d_min * span
    e_hi = sizer.cheapest(t_hi).energy_fj
    if e_hi > energy_max_fj:
        raise InfeasibleTarget(
            f"energy budget {energy_max_fj:.4g} fJ is below the least energy found up to "
            f"{span:g} x the minimum delay ({e_hi:.4g} fJ at {t_hi:.1f} ps)", d_min)

    def excess(t: float) -> float:
        return sizer.cheapest(t).energy_fj - energy_max_fj

    t_lo = d_min * (1 + FIRST_STEP)
    if excess(t_lo) <= 0:
        t = t_lo
    else:
        t = brentq(excess, t_lo, t_hi, xtol=1e-9 * d_min, rtol=1e-10)
    res = sizer.cheapest(t)
    res.problem = "budget"
    res.notes.append(f"fastest sizing within {energy_max_fj:.4g} fJ")
    return res


def target_ps(sizer: Sizer, target: str | float) -> float:
    """Resolve a target string against the sizer's minimum delay."""
    return float(parse_target(target, sizer.min_delay_ps))
