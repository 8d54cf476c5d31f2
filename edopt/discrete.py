"""Discrete drive strengths: from the continuous optimum to sizes that exist, with a certified gap.

Real cells come in a handful of drive strengths. ``DiscreteSizer`` solves the continuous problem
with every gate bounded by the smallest and largest size of its set, a relaxation of the
discrete problem: its optimum is a lower bound on the energy of any discrete sizing at the same
target (the reference solver of ``Sizer``, or on large networks the certified dual bound of
``Lagrangian``). Then it discretises:

1. **snap** each gate to a size of its set (nearest in log; small networks also try roundings
   that lean up or down, and starts halfway to the fastest discrete sizing);
2. **repair** while the target is missed: upsize violating gates, ranked by delay gained per
   energy spent, and downsize gates that load a violating driver (gains delay, saves energy).
   Gains are exact at the gate (its own delay and the extra load it puts on its drivers) less
   the harm to its drivers' other paths; no move may worsen the worst path it touches. A round
   takes every move that better moves on its paths do not already cover, and keeps the batch
   only if the re-timed delay (else the total negative slack) improves, halving it otherwise;
   when the estimates find nothing, single moves (small networks: pairs) are timed in full;
3. **recover** energy: downsize where slack allows. A downsize slows only the paths through its
   own gate and speeds up its drivers, so whether it alone keeps the target is known exactly
   without re-timing. Downsizes that fit on all their paths together with every other candidate
   are taken at once (as deep as they fit); the rest are ranked by energy saved per ps of slack
   used and taken in the largest leading group that still meets the target when re-timed;
4. **local search**: move one gate a size up or down, hold it, repair and recover the others,
   keep what saves energy (small networks also try every pair of one-size moves);
5. if no start can be repaired, the fastest discrete sizing (repair towards delays below the
   best found, alternated with recovery at it) is recovered instead, when it meets the target;
   otherwise ``InfeasibleTarget`` reports the fastest discrete delay found.

Rounds cost a few vectorised passes over the levels of the network; nothing loops over gates.
Every returned sizing is re-timed by ``timing.evaluate`` (through ``Sizer._result``): a sizing
that misses its target is never returned.

Units: sizes in unit-inverter drive strengths, times in ps at the API (tau inside), energy in fJ.
"""

from __future__ import annotations

import copy
import math
import time
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from .circuit import Circuit
from .errors import EdoptError, GateError, InfeasibleTarget, SolverError
from .model import Model
from .sizing import CAUTION, OPTIMAL, Sizer, Sizing, is_relative, parse_target
from .solvers.conic import Solution
from .technology import Technology

SizeSets = Sequence[float] | Mapping[str, Sequence[float]]

ANY_TYPE = "*"          # key of a mapping that gives the sizes of every type not named
FEASIBLE = "feasible"   # status of a discrete sizing: meets the target, optimality not claimed
REL_TOL = 1e-9          # relative timing tolerance of the search (the re-timing allows 1e-5)
FAST_STEP = 1e-3        # smallest relative delay step of the minimum-delay search ...
FAST_FIRST_STEP = 0.02  # ... which starts with this one
FAST_ROUNDS = 200       # at most this many improvements in the minimum-delay search
FAST_ROUNDS_LARGE = 10  # ... on large networks
ROUNDINGS = (0.5, 0.3, 0.7)   # starts: nearest in log, leaning up, leaning down
FAST_ROUNDINGS = (0.5, 0.3, 0.7, 0.1, 0.9)   # starts of the minimum-delay search
EXACT_MOVES_MAX = 256   # networks up to this many free gates also try every single size change
KICK_ALL_MAX = 64       # local search tries every gate up to this many free gates ...
KICK_PASSES = 3         # ... for this many passes over the gates
KICK_TRIALS = 24        # ... else this many trials in all
KICK_TRIALS_LARGE = 8   # ... and on large networks this many
BETWEEN = (0.25,)       # large networks, fallback: a start this far to the fastest sizing
TIGHTER_STARTS = 3      # continuous starts at tighter targets when no start can be repaired
MAPPED_MIN = 1e-3       # relative distance of the mapped target that makes it a second start
PAIR_MOVES_MAX = 40     # networks up to this many free gates also try all pairs of moves
LARGE_NETWORK = 500     # free gates above which one start and a short local search are used
REPAIR_ROUNDS_LARGE = 80    # rounds of one repair on large networks
FAST_RECOVERY_LARGE = 60    # rounds of recovery at the minimum delay on large networks
GROUP_TRIES = 2         # timed tries (halving) of a group of downsizes per round of recovery
PRIORITY_CLASSES = 7    # moves of one round are ranked in this many classes (see _tops)
PRIORITY_CLASSES_LARGE = 4   # ... on large networks
TIMED_MOVES = 64        # single moves timed in full when the local estimates find none
TIMED_MOVES_LARGE = 16  # ... on large networks
LR_ITERS = 600          # Lagrangian relaxation: at most this many multiplier updates
LR_GAMMA = 1.0          # exponent of the first multiplier updates ...
LR_DECAY = 1e9          # ... decaying as 1 / sqrt(1 + iteration / LR_DECAY)
LR_SWEEPS = 3           # inner closed-form sweeps per update
LR_SCALE_STEPS = 40     # bisection steps for the initial multiplier scale
LR_CHECK = 25           # the certified bound is computed every this many updates
LR_RTOL = 1e-4          # stop when the delay and the energy are this close to bound and target
BOUND_SWEEPS = 30       # inner sweeps before the bound is taken
SOLVER_MARGIN = 1e-6    # taken off the reference solver's optimum to make it a lower bound
AUTO_SOLVER_MAX = 2000  # continuous="auto": the reference solver up to this many free gates

__all__ = ["ANY_TYPE", "FEASIBLE", "DiscreteSizer", "Lagrangian", "Relaxed", "SizeSets",
           "allowed_sizes", "bounded_circuit", "discrete_frontier", "discrete_staircase",
           "normalise_sets"]


# ------------------------------------------------------------------------------ size sets


def _one_set(values: Any, where: str) -> np.ndarray:
    if isinstance(values, (str, bytes)) or not isinstance(values, (Sequence, np.ndarray)):
        raise EdoptError(f"{where}: give a list of sizes such as [1, 2, 4, 8, 16], "
                         f"got {values!r}")
    try:
        arr = np.asarray(list(values), dtype=float)
    except (TypeError, ValueError):
        raise EdoptError(f"{where}: sizes must be numbers, got {list(values)!r}") from None
    if arr.size == 0:
        raise EdoptError(f"{where}: the list of sizes is empty; give at least one size")
    bad = arr[~np.isfinite(arr) | (arr <= 0)]
    if bad.size:
        raise EdoptError(f"{where}: sizes must be positive and finite, got {bad[0]!r}")
    return np.unique(arr)


def normalise_sets(sizes: SizeSets) -> dict[str, np.ndarray]:
    """Check the allowed sizes and return them as ``{type (lower case) or "*": sorted array}``.

    ``sizes`` is one list for every gate, or a mapping gate type -> list, where the key ``"*"``
    gives the sizes of the types not named.

    Raises
    ------
    EdoptError : an empty list, or a size that is not a positive finite number.
    """
    if isinstance(sizes, Mapping):
        if not sizes:
            raise EdoptError("sizes: the mapping of gate types to sizes is empty")
        out = {}
        for key, values in sizes.items():
            name = str(key).strip().lower()
            if name in out:
                raise EdoptError(f"sizes: gate type {key!r} is given twice")
            out[name] = _one_set(values, f"sizes of gate type {key!r}")
        return out
    return {ANY_TYPE: _one_set(sizes, "sizes")}


def _set_of(sets: dict[str, np.ndarray], type_name: str, gate: str) -> np.ndarray:
    found = sets.get(type_name.lower(), sets.get(ANY_TYPE))
    if found is None:
        named = ", ".join(sorted(sets))
        raise GateError(
            f"gate {gate!r}: no allowed sizes for its type {type_name!r} (sizes are given for "
            f"{named}); add {type_name!r} to the mapping or give {ANY_TYPE!r} for all others")
    return found


def _check_types(circuit: Circuit, sets: dict[str, np.ndarray]) -> None:
    known = {name.lower() for name in circuit.types}
    unknown = sorted(k for k in sets if k != ANY_TYPE and k not in known)
    if unknown:
        raise GateError(f"sizes: no gate type {unknown[0]!r} in the library of "
                        f"{circuit.name!r} (known: {', '.join(sorted(known))})")


def _within(values: np.ndarray, lo: float, hi: float) -> np.ndarray:
    return values[(values >= lo * (1 - 1e-12)) & (values <= hi * (1 + 1e-12))]


def bounded_circuit(circuit: Circuit, sizes: SizeSets) -> Circuit:
    """A copy of ``circuit`` whose free gates are bounded by the smallest and largest size of
    their set (within their own bounds): its continuous optimum bounds every discrete sizing.

    Gates of fixed size are unchanged. One pass over the gates (no solver work).

    Raises
    ------
    GateError : a gate type without sizes, or a gate whose bounds exclude its whole set.
    """
    sets = normalise_sets(sizes) if not _is_normalised(sizes) else sizes
    _check_types(circuit, sets)
    out = copy.copy(circuit)
    out.gates = {}
    for name, gate in circuit.gates.items():
        if gate.size is not None:
            out.gates[name] = gate
            continue
        lo = gate.size_min if gate.size_min is not None else circuit.size_min
        hi = gate.size_max if gate.size_max is not None else circuit.size_max
        ok = _within(_set_of(sets, circuit.gate_type(gate.type).name, name), lo, hi)
        if ok.size == 0:
            # may still be fixed by a given input capacitance; allowed_sizes checks after compile
            out.gates[name] = gate
            continue
        out.gates[name] = replace(gate, size_min=float(ok[0]), size_max=float(ok[-1]))
    return out


def _is_normalised(sizes: Any) -> bool:
    return isinstance(sizes, dict) and all(isinstance(v, np.ndarray) for v in sizes.values()) \
        and all(isinstance(k, str) and k == k.lower() for k in sizes)


def allowed_sizes(model: Model, sizes: SizeSets) -> tuple[np.ndarray, np.ndarray]:
    """The allowed sizes of every node as a table ``(levels, counts)``.

    ``levels[i, :counts[i]]`` are the sizes node ``i`` may take, ascending (padded with inf);
    fixed nodes (input drivers, gates of given size) have their one size.

    Raises
    ------
    GateError : a free gate none of whose allowed sizes lies within its own bounds.
    """
    sets = sizes if _is_normalised(sizes) else normalise_sets(sizes)
    types = np.asarray(model.types, dtype=object)
    free = ~model.fixed
    width = max(len(v) for v in sets.values())
    levels = np.full((model.n, width), np.inf)
    levels[:, 0] = np.where(free, np.inf, model.hi)
    lower = np.array([t.lower() for t in model.types], dtype=object)
    for name in np.unique(lower[free]):
        rows = np.flatnonzero(free & (lower == name))
        values = _set_of(sets, str(types[rows[0]]), model.names[rows[0]])
        ok = (values[None, :] >= model.lo[rows, None] * (1 - 1e-12)) & \
             (values[None, :] <= model.hi[rows, None] * (1 + 1e-12))
        table = np.sort(np.where(ok, values[None, :], np.inf), axis=1)
        levels[rows, :table.shape[1]] = table
    counts = np.where(free, np.sum(np.isfinite(levels), axis=1), 1)
    empty = np.flatnonzero(counts == 0)
    if empty.size:
        i = int(empty[0])
        raise GateError(
            f"gate {model.names[i]!r}: none of the allowed sizes of its type {model.types[i]!r} "
            f"lies within its bounds [{model.lo[i]:g}, {model.hi[i]:g}]; widen the bounds or "
            "add a size")
    return levels, counts.astype(np.int64)


# ------------------------------------------------------------------------------ timing


@dataclass
class _State:
    """Timing of one sizing at one target (tau): the search's own view, not the result."""

    k: np.ndarray
    x: np.ndarray
    load: np.ndarray
    d: np.ndarray
    a: np.ndarray
    r: np.ndarray
    delay: float

    @property
    def slack(self) -> np.ndarray:
        return self.r - self.a


class _Graph:
    """Level-by-level passes over the timing graph of a model (forward and backward)."""

    def __init__(self, model: Model) -> None:
        m = model
        self.model = m
        src, dst, lv = m.edge_src, m.edge_dst, m.level
        self.base = np.where(np.isfinite(m.t0), m.t0, -np.inf)
        self.start = np.where(np.isfinite(m.t0), m.t0, 0.0)
        # forward: edges grouped by receiver, receivers grouped by level
        order = np.lexsort((dst, lv[dst]))
        self.f_src, self.f_dst = src[order], dst[order]
        self.fwd = self._segments(lv[self.f_dst], self.f_dst, ascending=True)
        # backward: edges grouped by driver, drivers grouped by level, deepest first
        order = np.lexsort((src, -lv[src]))
        self.b_src, self.b_dst = src[order], dst[order]
        self.bwd = self._segments(-lv[self.b_src], self.b_src, ascending=True)
        cut = np.concatenate([[True], self.b_src[1:] != self.b_src[:-1]]) if src.size else \
            np.zeros(0, dtype=bool)
        self.b_starts = np.flatnonzero(cut)           # first edge of each driver
        self.b_heads = self.b_src[self.b_starts]     # that driver
        self.b_group = np.cumsum(cut) - 1            # group of each edge
        # drivers of each node (column view of pin_load): entry e is P[rows[e], cols[e]]
        pc = m.pin_load.tocsc()
        pc.sort_indices()
        self.p_rows = pc.indices.astype(np.int64)
        self.p_cols = np.repeat(np.arange(m.n), np.diff(pc.indptr))
        self.p_val = pc.data
        nonempty = np.flatnonzero(np.diff(pc.indptr) > 0)
        self.p_has = nonempty
        self.p_starts = pc.indptr[nonempty]
        self.is_out = np.zeros(m.n, dtype=bool)
        self.is_out[m.out_node] = True
        self.gates = np.zeros(m.n, dtype=bool)
        self.gates[m.gate_slice] = True

    @staticmethod
    def _segments(key: np.ndarray, node: np.ndarray, ascending: bool) -> list:
        segs = []
        if key.size == 0:
            return segs
        cuts = np.flatnonzero(np.diff(key)) + 1
        bounds = np.concatenate([[0], cuts, [key.size]])
        for s, e in zip(bounds[:-1], bounds[1:]):
            nodes = node[s:e]
            first = np.concatenate([[0], np.flatnonzero(np.diff(nodes)) + 1])
            segs.append((int(s), int(e), nodes[first], first))
        return segs

    # ------------------------------------------------------------- timing passes
    def loads(self, x: np.ndarray) -> np.ndarray:
        m = self.model
        return m.pin_load @ x + m.fixed_load

    def arrivals(self, d: np.ndarray) -> np.ndarray:
        a = self.start + d
        for s, e, u, first in self.fwd:
            m = np.maximum.reduceat(a[self.f_src[s:e]], first)
            a[u] = np.maximum(m, self.base[u]) + d[u]
        return a

    def required(self, d: np.ndarray, bound: float) -> np.ndarray:
        m = self.model
        r = np.full(m.n, np.inf)
        np.minimum.at(r, m.out_node, bound - m.out_allow)
        for s, e, u, first in self.bwd:
            dst = self.b_dst[s:e]
            v = np.minimum.reduceat(r[dst] - d[dst], first)
            r[u] = np.minimum(r[u], v)
        return r

    def delay(self, a: np.ndarray) -> float:
        m = self.model
        return float(np.max(a[m.out_node] + m.out_allow))

    # ------------------------------------------------------------- DAG sweeps
    def reach_max(self, v: np.ndarray) -> np.ndarray:
        """Largest ``v`` over all nodes that share a path with each node (itself included)."""
        f = v.copy()
        for s, e, u, first in self.fwd:
            f[u] = np.maximum(f[u], np.maximum.reduceat(f[self.f_src[s:e]], first))
        b = v.copy()
        for s, e, u, first in self.bwd:
            b[u] = np.maximum(b[u], np.maximum.reduceat(b[self.b_dst[s:e]], first))
        return np.maximum(f, b)

    def path_sum(self, c: np.ndarray) -> np.ndarray:
        """Largest sum of ``c >= 0`` along any path through each node."""
        f = c.copy()
        for s, e, u, first in self.fwd:
            f[u] = c[u] + np.maximum.reduceat(f[self.f_src[s:e]], first)
        b = c.copy()
        for s, e, u, first in self.bwd:
            b[u] = c[u] + np.maximum.reduceat(b[self.b_dst[s:e]], first)
        return f + b - c

    # ------------------------------------------------------------- local effects
    def driver_max(self, vals: np.ndarray, fill: np.ndarray) -> np.ndarray:
        """Per node, the largest of ``vals`` over its driver entries (``fill`` where none)."""
        out = fill.copy()
        if self.p_has.size:
            out[self.p_has] = np.maximum.reduceat(vals, self.p_starts)
        return out


class _Search:
    """The discretisation moves on one model with one table of allowed sizes."""

    def __init__(self, model: Model, levels: np.ndarray, counts: np.ndarray,
                 max_effort: float | None = None, area_max: float | None = None) -> None:
        self.model = model
        self.g = _Graph(model)
        self.levels = levels
        self.counts = counts
        self.free = ~model.fixed
        self.rows = np.arange(model.n)
        self.log_levels = np.log(levels)
        self.max_effort = max_effort
        self.area_max = area_max
        self._limited = bool(model.cap_rows.shape[0]) or area_max is not None \
            or max_effort is not None
        # large networks: one start and a short local search (each round costs a few passes
        # over the whole network; small ones afford several starts)
        self.large = int(np.sum(self.free)) > LARGE_NETWORK
        # recovery at the minimum delay (no slack on the critical paths) proceeds nearly one
        # move at a time; on large networks it is cut short
        self._fast_recovery = FAST_RECOVERY_LARGE if self.large else None
        self._repair_rounds = REPAIR_ROUNDS_LARGE if self.large else None
        self.rounds = 0
        self.last_miss = math.inf

    # ------------------------------------------------------------- basics
    def sizes(self, k: np.ndarray) -> np.ndarray:
        return self.levels[self.rows, k]

    def snap(self, x: np.ndarray, up_from: float = 0.5) -> np.ndarray:
        """Index of an allowed size for each of ``x``: the next size up when ``x`` lies more
        than ``up_from`` of the way (in log) from the size below to the size above, else the
        size below (0.5: nearest in log)."""
        lx = np.log(np.maximum(x, 1e-300))
        below = np.sum(self.log_levels <= lx[:, None] * (1 + 1e-12) + 1e-12, axis=1) - 1
        below = np.clip(below, 0, self.counts - 1)
        above = np.minimum(below + 1, self.counts - 1)
        lo = self.log_levels[self.rows, below]
        hi = self.log_levels[self.rows, above]
        span = np.where(above > below, hi - lo, 1.0)
        frac = np.where(above > below, (lx - lo) / span, 0.0)
        k = np.where((above > below) & (frac > up_from), above, below)
        return np.where(lx < self.log_levels[:, 0], 0, k).astype(np.int64)

    def energy(self, k: np.ndarray, w: np.ndarray) -> float:
        return float(w @ self.sizes(k))

    def delays_many(self, ks: np.ndarray) -> np.ndarray:
        """Circuit delay (tau) of each row of ``ks`` (many sizings at once)."""
        return self.timing_many(ks, None)[0]

    def timing_many(self, ks: np.ndarray, bound: float | None
                    ) -> tuple[np.ndarray, np.ndarray | None]:
        """Circuit delay (tau) of each row of ``ks``, and with a ``bound`` the total negative
        slack over the nodes (many sizings at once)."""
        g, m = self.g, self.model
        x = self.levels[self.rows[None, :], ks]
        load = (m.pin_load @ x.T).T + m.fixed_load
        d = m.p + load / x
        a = g.start + d
        for s, e, u, first in g.fwd:
            red = np.maximum.reduceat(a[:, g.f_src[s:e]], first, axis=1)
            a[:, u] = np.maximum(red, g.base[u]) + d[:, u]
        delay = np.max(a[:, m.out_node] + m.out_allow, axis=1)
        if bound is None:
            return delay, None
        r = np.full(a.shape, np.inf)
        r[:, m.out_node] = np.minimum(r[:, m.out_node], bound - m.out_allow)
        for s, e, u, first in g.bwd:
            dst = g.b_dst[s:e]
            red = np.minimum.reduceat(r[:, dst] - d[:, dst], first, axis=1)
            r[:, u] = np.minimum(r[:, u], red)
        neg = np.minimum(r - a, 0.0)
        return delay, -np.sum(np.where(np.isfinite(neg), neg, 0.0), axis=1)

    def state(self, k: np.ndarray, bound: float) -> _State:
        m = self.model
        x = self.sizes(k)
        load = self.g.loads(x)
        d = m.p + load / x
        a = self.g.arrivals(d)
        r = self.g.required(d, bound)
        self.rounds += 1
        return _State(k, x, load, d, a, r, self.g.delay(a))

    def delay_of(self, k: np.ndarray) -> float:
        x = self.sizes(k)
        return self.g.delay(self.g.arrivals(self.model.p + self.g.loads(x) / x))

    def limits_ok(self, x: np.ndarray) -> bool:
        """The side constraints of the model and the options (input caps, effort, area)."""
        m = self.model
        if m.cap_rows.shape[0] and np.any(m.cap_rows @ x > m.cap_max * (1 + 1e-9)):
            return False
        if self.area_max is not None and float(m.area @ x) > self.area_max * (1 + 1e-9):
            return False
        if self.max_effort is not None:
            eff = (self.g.loads(x) / x)[self.g.gates]
            if np.any(eff > self.max_effort * (1 + 1e-9)):
                return False
        return True

    def _local(self, st: _State, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Arrival at each node if it alone took size ``y`` (its drivers see the new load), and
        the extra delay of each driver entry."""
        g = self.g
        dx = (y - st.x)[g.p_cols]
        extra = g.p_val * dx / st.x[g.p_rows]
        old_in = st.a - st.d
        new_in = g.driver_max(st.a[g.p_rows] + extra, old_in)
        new_in = np.maximum(new_in, g.base)
        new_a = new_in + self.model.p + st.load / y
        return new_a, extra

    def _effort_ok_up(self, st: _State, extra_load: np.ndarray) -> np.ndarray:
        """Per node: can it upsize without pushing a driver gate over the effort limit?"""
        if self.max_effort is None:
            return np.ones(self.model.n, dtype=bool)
        g = self.g
        eff = (st.load[g.p_rows] + extra_load) / st.x[g.p_rows]
        bad = np.where(g.gates[g.p_rows], eff - self.max_effort * (1 + 1e-9), -1.0)
        return g.driver_max(bad, np.full(self.model.n, -1.0)) <= 0

    def _rank(self, ok: np.ndarray, priority: np.ndarray,
              tier: np.ndarray | None = None) -> np.ndarray:
        """Rank of each candidate, 0 for the best (by ``tier``, then ``priority``); others get
        the number of nodes."""
        idx = np.flatnonzero(ok)
        keys = (-priority[idx],) if tier is None else (-priority[idx], -tier[idx])
        rank = np.full(self.model.n, self.model.n, dtype=np.int64)
        rank[idx[np.lexsort(keys)]] = np.arange(idx.size)
        return rank

    def _tops(self, count: int) -> list[int]:
        """Rank bounds of the priority classes of one round: the best 1/64, 1/32, ... 1/2,
        all (classes double in size; fewer classes on large networks)."""
        classes = PRIORITY_CLASSES_LARGE if self.large else PRIORITY_CLASSES
        return sorted({max(1, math.ceil(count / 2 ** j)) for j in range(classes)})

    def _effort_ok_down(self, st: _State, y: np.ndarray) -> np.ndarray:
        """Per node: does its own stage effort stay within the limit at size ``y``?"""
        if self.max_effort is None:
            return np.ones(self.model.n, dtype=bool)
        return ~self.g.gates | (st.load / y <= self.max_effort * (1 + 1e-9))

    def _antichain(self, ok: np.ndarray, priority: np.ndarray,
                   tier: np.ndarray | None = None) -> np.ndarray:
        """The candidates that rank first (by ``tier``, then ``priority``) among all candidates
        sharing a path with them: no two chosen gates lie on one path."""
        idx = np.flatnonzero(ok)
        keys = (priority[idx],) if tier is None else (priority[idx], tier[idx])
        rank = np.full(self.model.n, -1.0)
        rank[idx[np.lexsort(keys)]] = np.arange(idx.size)
        return ok & (rank >= self.g.reach_max(rank))

    def _side_slack(self, st: _State, bound: float) -> np.ndarray:
        """Per driver entry (j -> i): the least slack of j's paths that avoid i."""
        g, m = self.g, self.model
        src, dst = g.b_src, g.b_dst                 # edges grouped by driver
        es = st.r[dst] - st.d[dst] - st.a[src]
        min1 = np.full(m.n, np.inf)
        min2 = np.full(m.n, np.inf)
        arg1 = np.full(m.n, -1)
        if es.size:
            group = g.b_group
            low = np.minimum.reduceat(es, g.b_starts)
            at_min = np.flatnonzero(es <= low[group])
            first = at_min[np.concatenate([[True], group[at_min[1:]] != group[at_min[:-1]]])]
            rest = es.copy()
            rest[first] = np.inf
            min1[g.b_heads] = low
            min2[g.b_heads] = np.minimum.reduceat(rest, g.b_starts)
            arg1[g.b_heads] = dst[first]
        # a primary output is one more path of its driver
        out_slack = np.full(m.n, np.inf)
        np.minimum.at(out_slack, m.out_node, bound - m.out_allow - st.a[m.out_node])
        below = out_slack < min1
        min2 = np.where(below, min1, np.minimum(min2, out_slack))
        arg1 = np.where(below, -1, arg1)
        min1 = np.minimum(min1, out_slack)
        j, i = g.p_rows, g.p_cols
        return np.where(arg1[j] == i, min2[j], min1[j])

    # ------------------------------------------------------------- repair
    def repair(self, k: np.ndarray, bound: float, w: np.ndarray | None,
               max_rounds: int | None = None, frozen: np.ndarray | None = None,
               ) -> tuple[np.ndarray, bool, np.ndarray, float]:
        """Move sizes until the delay is within ``bound`` (tau).

        Two kinds of move, on every violating path at once (one gate per path and round):
        upsizing a violating gate, ranked by delay gained per energy spent, and downsizing a
        gate that loads a violating driver, which gains delay and saves energy (ranked first).
        Within one call a gate moves in one direction only, so the repair ends.

        ``w`` are the objective weights (None: rank by delay gain alone). Returns the sizing
        reached, whether it meets the bound, and the fastest sizing seen with its delay.
        ``frozen`` gates keep their size.
        """
        g = self.g
        movable = self.free if frozen is None else self.free & ~frozen
        tol = REL_TOL * bound
        best_k, best_d = k, math.inf
        went_up = np.zeros(self.model.n, dtype=bool)
        went_down = np.zeros(self.model.n, dtype=bool)
        rounds = max_rounds or self._repair_rounds or int(np.sum(self.counts - 1)) + 1
        st = self.state(k, bound)
        for _ in range(rounds):
            if st.delay < best_d:
                best_k, best_d = k, st.delay
            if st.delay <= bound + tol:
                return k, True, best_k, best_d
            s = st.slack
            side = self._side_slack(st, bound)
            # upsizing a violating gate
            can_up = movable & (s < -tol) & (k + 1 < self.counts) & ~went_down
            up = np.where(can_up, k + 1, k)
            y = self.sizes(up)
            new_a, extra = self._local(st, y)
            harm = g.driver_max(np.maximum(0.0, extra - np.maximum(side, 0.0)),
                                np.zeros(self.model.n))
            gain_up = np.minimum(st.a - new_a, -s) - harm
            # no move may leave the worst path it touches worse than before
            inf = np.full(self.model.n, np.inf)
            side_worst = -g.driver_max(-side, -inf)
            worst = np.minimum(s, side_worst) - tol
            ok_up = can_up & (gain_up > tol) & (-g.driver_max(-(side - extra), -inf) >= worst) \
                & self._effort_ok_up(st, g.p_val * (y - st.x)[g.p_cols])
            # downsizing a gate to unload a violating driver (its other paths gain)
            can_dn = movable & (k > 0) & ~went_up
            dn = np.where(can_dn, k - 1, k)
            y_dn = self.sizes(dn)
            new_a_dn, extra_dn = self._local(st, y_dn)
            relief = g.driver_max(np.where(side < 0, np.minimum(-extra_dn, -side), 0.0),
                                  np.zeros(self.model.n))
            own = np.where(s < -tol, np.minimum(st.a - new_a_dn, -s),
                           -np.maximum(0.0, new_a_dn - st.r))
            gain_dn = relief + own
            ok_dn = can_dn & (gain_dn > tol) & (st.r - new_a_dn >= worst)
            if self.max_effort is not None:
                ok_dn &= ~g.gates | (st.load / y_dn <= self.max_effort * (1 + 1e-9))
            if not (ok_up.any() or ok_dn.any()):
                move = self._timed_repair_move(k, st, w, bound, can_up, can_dn)
                if move is None:
                    break
                k = _apply_moves(k, move, went_up, went_down)
                st = self.state(k, bound)
                continue
            take_dn = ok_dn & (~ok_up | (gain_dn >= 0))
            ok = ok_up | take_dn
            if w is None:
                value = np.where(take_dn, gain_dn, gain_up)
                tier = np.zeros(self.model.n)
            else:
                value = np.where(take_dn, gain_dn * w * (st.x - y_dn),
                                 gain_up / np.maximum(w * (y - st.x), 1e-300))
                tier = take_dn.astype(float)
            need = np.where(take_dn, g.driver_max(np.maximum(-side, 0.0), np.zeros(self.model.n)),
                            -s)
            gain = np.where(take_dn, gain_dn, gain_up)
            rank = self._rank(ok, value, tier)
            sel = np.zeros(self.model.n, dtype=bool)
            prev = 0
            for top in self._tops(int(ok.sum())):
                # a move is taken unless better moves on its paths already cover the need
                better = np.where(ok & (rank < prev), gain, 0.0)
                covered = g.path_sum(better) if prev else better
                sel |= ok & (rank >= prev) & (rank < top) & (covered < need - tol)
                prev = top
            if not sel.any():
                sel = self._antichain(ok, value, tier)
            # take the batch if it helps (delay, else total negative slack); else its better
            # half, and so on down to the best move alone
            chosen = np.flatnonzero(sel)
            chosen = chosen[np.argsort(rank[chosen], kind="stable")]
            taken = None
            size = chosen.size
            while size >= 1:
                sub = chosen[:size]
                trial = k.copy()
                trial[sub] = np.where(take_dn[sub], dn[sub], up[sub])
                if self.limits_ok(self.sizes(trial)) if self._limited else True:
                    st2 = self.state(trial, bound)
                    if self._better(st2, st, bound):
                        taken = sub
                        break
                size = size // 2 if size > 1 else 0
            if taken is None:
                move = self._timed_repair_move(k, st, w, bound, can_up & ~went_down,
                                               movable & ~went_up)
                if move is None:
                    break
                k = _apply_moves(k, move, went_up, went_down)
                st = self.state(k, bound)
                continue
            went_up[taken[~take_dn[taken]]] = True
            went_down[taken[take_dn[taken]]] = True
            k, st = trial, st2
        return k, False, best_k, best_d

    # ------------------------------------------------------------- recovery
    def recover(self, k: np.ndarray, bound: float, w: np.ndarray,
                frozen: np.ndarray | None = None, max_rounds: int | None = None) -> np.ndarray:
        """Downsize while every path stays within ``bound`` (tau); the input must meet it.

        Each round: the deepest downsizes that fit on all their paths together with every
        other candidate are taken at once (no move competes for their slack). Otherwise the
        downsizes that are safe one at a time (exact local test) are ranked by energy saved
        per ps of slack used, and the largest leading group that still meets the bound when
        timed is taken (the group halves until it does; the best move alone always does).
        ``frozen`` gates keep their size; ``max_rounds`` caps the rounds.
        """
        tol = REL_TOL * bound
        movable = self.free if frozen is None else self.free & ~frozen
        st = self.state(k, bound)
        group = self.model.n
        for _ in range(max_rounds or int(np.sum(self.counts - 1)) + 1):
            cand = movable & (k > 0)
            if not cand.any():
                break
            deep = k.copy()
            deep_used = np.zeros(self.model.n)
            for step in range(1, int(np.max(k[cand])) + 1):
                down = np.where(cand, np.maximum(k - step, 0), k)
                y = self.sizes(down)
                new_a, _ = self._local(st, y)
                fit = cand & (k - step >= 0) & (new_a <= st.r + tol) & self._effort_ok_down(st, y)
                deep = np.where(fit, down, deep)
                deep_used = np.where(fit, np.maximum(new_a - st.a, 0.0), deep_used)
            moved = deep < k
            if moved.any():
                alone = moved & (self.g.path_sum(np.where(moved, deep_used, 0.0))
                                 <= st.slack + tol)
                if alone.any():
                    k = np.where(alone, deep, k)
                    st = self.state(k, bound)
                    continue
            down = np.where(cand, k - 1, k)
            y = self.sizes(down)
            new_a, _ = self._local(st, y)
            ok = cand & (new_a <= st.r + tol) & self._effort_ok_down(st, y)
            if not ok.any():
                i = self._timed_recovery_move(k, bound, w, cand, st.x - y)
                if i is None:
                    break
                k = k.copy()
                k[i] -= 1
                st = self.state(k, bound)
                continue
            used = np.maximum(new_a - st.a, 0.0)
            priority = w * (st.x - y) / np.maximum(used, tol)
            order = np.flatnonzero(ok)
            order = order[np.argsort(-priority[order], kind="stable")]
            sub = order[:min(order.size, 2 * group)]
            taken = None
            for _ in range(GROUP_TRIES):
                if sub.size <= 1:
                    break
                trial = k.copy()
                trial[sub] -= 1
                if not self._limited or self.limits_ok(self.sizes(trial)):
                    st2 = self.state(trial, bound)
                    if st2.delay <= bound + tol:
                        taken = sub
                        break
                sub = sub[:sub.size // 2]
            if taken is None:
                # safe without timing: the moves that fit with all candidates on all their
                # paths, and the best move of every set of candidates sharing paths
                used_ok = np.where(ok, used, 0.0)
                safe = (ok & (self.g.path_sum(used_ok) <= st.slack + tol)) | \
                    self._antichain(ok, priority)
                taken = np.flatnonzero(safe)
                trial = k.copy()
                trial[taken] -= 1
                st2 = self.state(trial, bound)
            group = max(1, taken.size)
            k, st = trial, st2
        return k

    # ------------------------------------------------------------- timed moves
    def _single_moves(self, k: np.ndarray, nodes: np.ndarray, step: int) -> np.ndarray:
        ks = np.tile(k, (nodes.size, 1))
        ks[np.arange(nodes.size), nodes] += step
        return ks

    def _timed_recovery_move(self, k: np.ndarray, bound: float, w: np.ndarray,
                             cand: np.ndarray, dx: np.ndarray) -> int | None:
        """When no downsize is safe by the local test (which ignores arrivals that improve
        through reconvergent paths), time the candidates fully; the feasible one that saves
        most, or None."""
        nodes = np.flatnonzero(cand)
        if nodes.size == 0:
            return None
        saving = w[nodes] * dx[nodes]
        limit = TIMED_MOVES_LARGE if self.large else TIMED_MOVES
        nodes = nodes[np.argsort(-saving, kind="stable")][:limit]
        ks = self._single_moves(k, nodes, -1)
        ok = self.delays_many(ks) <= bound * (1 + REL_TOL)
        for j in np.flatnonzero(ok):
            x = self.sizes(ks[j])
            if self.max_effort is None or self.limits_ok(x):
                return int(nodes[j])
        return None

    def _timed_repair_move(self, k: np.ndarray, st: _State, w: np.ndarray | None, bound: float,
                           can_up: np.ndarray, can_dn: np.ndarray
                           ) -> list[tuple[int, int]] | None:
        """When no move helps by the local estimates, time single moves fully: the downsize
        that helps most (delay, else total negative slack), else the upsize that helps most per
        energy; on small networks then pairs of moves. Returns the moves (gate, step), or None
        if none helps."""
        up = np.flatnonzero(can_up & (k + 1 < self.counts))
        dn = np.flatnonzero(can_dn & (k > 0))
        s = st.slack
        limit = TIMED_MOVES_LARGE if self.large else TIMED_MOVES
        up = up[np.argsort(s[up], kind="stable")][:limit]
        dn = dn[np.argsort(s[dn], kind="stable")][:limit]
        tns0 = self._tns(st.slack)
        tol = REL_TOL * bound
        for nodes, step in ((dn, -1), (up, 1)):
            if nodes.size == 0:
                continue
            ks = self._single_moves(k, nodes, step)
            delay, tns = self.timing_many(ks, bound)
            helps = (delay < st.delay - tol) | ((delay <= st.delay + tol) & (tns < tns0 - tol))
            good = np.flatnonzero(helps)
            if good.size == 0:
                continue
            # rank by delay gained, then negative slack removed (scaled below any delay gain)
            value = (st.delay - delay[good]) + 1e-6 * (tns0 - tns[good]) / max(tns0, 1e-300) * tol
            if step > 0 and w is not None:
                cost = w[nodes[good]] * (self.levels[nodes[good], k[nodes[good]] + 1]
                                         - st.x[nodes[good]])
                value = value / np.maximum(cost, 1e-300)
            for j in good[np.argsort(-value, kind="stable")]:
                if self.limits_ok(self.sizes(ks[j])):
                    return [(int(nodes[j]), step)]
        if int(np.sum(self.free)) > PAIR_MOVES_MAX:
            return None
        # small networks: two moves at once (a shared driver can make each alone useless)
        moves = [(int(i), 1) for i in up] + [(int(i), -1) for i in dn]
        a, b = np.triu_indices(len(moves), k=1)
        if a.size == 0:
            return None
        node = np.array([mv[0] for mv in moves])
        step = np.array([mv[1] for mv in moves])
        keep = node[a] != node[b]
        a, b = a[keep], b[keep]
        ks = np.tile(k, (a.size, 1))
        rows = np.arange(a.size)
        ks[rows, node[a]] += step[a]
        ks[rows, node[b]] += step[b]
        delay, tns = self.timing_many(ks, bound)
        helps = (delay < st.delay - tol) | ((delay <= st.delay + tol) & (tns < tns0 - tol))
        good = np.flatnonzero(helps)
        if good.size == 0:
            return None
        value = (st.delay - delay[good]) + 1e-6 * (tns0 - tns[good]) / max(tns0, 1e-300) * tol
        if w is not None:
            x = st.x
            cost = (w[node[a[good]]] * (self.levels[node[a[good]], k[node[a[good]]]
                                                     + step[a[good]]] - x[node[a[good]]])
                    + w[node[b[good]]] * (self.levels[node[b[good]], k[node[b[good]]]
                                                       + step[b[good]]] - x[node[b[good]]]))
            value = np.where(cost > 0, value / np.maximum(cost, 1e-300), value * 1e300)
        for j in good[np.argsort(-value, kind="stable")]:
            if self.limits_ok(self.sizes(ks[j])):
                return [(int(node[a[j]]), int(step[a[j]])), (int(node[b[j]]), int(step[b[j]]))]
        return None

    @staticmethod
    def _tns(slack: np.ndarray) -> float:
        neg = np.minimum(slack, 0.0)
        return float(-np.sum(neg[np.isfinite(neg)]))

    def _better(self, new: _State, old: _State, bound: float) -> bool:
        tol = REL_TOL * bound
        if new.delay < old.delay - tol:
            return True
        if new.delay > old.delay + tol:
            return False
        return self._tns(new.slack) < self._tns(old.slack) - tol

    # ------------------------------------------------------------- minimum delay
    def fastest(self, k: np.ndarray, w: np.ndarray) -> tuple[np.ndarray, float]:
        """The fastest discrete sizing found from ``k``: repair towards a delay just below the
        best so far, alternated with recovery at the best delay (which unloads critical gates);
        on small networks, then every single size change is timed and the best one taken."""
        best_k, best_d = k, self.delay_of(k)
        step = FAST_FIRST_STEP
        for _ in range(FAST_ROUNDS_LARGE if self.large else FAST_ROUNDS):
            bound = best_d * (1 - step)
            _, met, fk, fd = self.repair(best_k, bound, None)
            if fd < best_d * (1 - REL_TOL):
                best_k, best_d = fk, fd
                step = min(2 * step, FAST_FIRST_STEP) if met else max(step / 2, FAST_STEP)
                continue
            if step > FAST_STEP:
                step = max(step / 4, FAST_STEP)
                continue
            bound = best_d * (1 - step)
            unloaded = self.recover(best_k, best_d, w, max_rounds=self._fast_recovery)
            _, _, fk, fd = self.repair(unloaded, bound, None)
            if fd < best_d * (1 - REL_TOL):
                best_k, best_d = fk, fd
                continue
            if np.sum(self.free) <= EXACT_MOVES_MAX:
                fk, fd = self._best_single_move(best_k)
                if fd < best_d * (1 - REL_TOL):
                    best_k, best_d = fk, fd
                    continue
            break
        return best_k, best_d

    def _best_single_move(self, k: np.ndarray) -> tuple[np.ndarray, float]:
        """The fastest of all sizings one size change away from ``k`` (exact re-timing)."""
        width = self.levels.shape[1]
        node, lev = np.nonzero(np.arange(width)[None, :] < self.counts[:, None])
        keep = self.free[node] & (lev != k[node])
        node, lev = node[keep], lev[keep]
        if node.size == 0:
            return k, self.delay_of(k)
        best_k, best_d = k, math.inf
        chunk = max(1, int(4e6 // self.model.n))
        for c0 in range(0, node.size, chunk):
            ks = np.tile(k, (min(chunk, node.size - c0), 1))
            sl = slice(c0, c0 + chunk)
            ks[np.arange(ks.shape[0]), node[sl]] = lev[sl]
            dl = self.delays_many(ks)
            j = int(np.argmin(dl))
            if dl[j] < best_d:
                best_k, best_d = ks[j].copy(), float(dl[j])
        return best_k, best_d

    # ------------------------------------------------------------- least energy
    def cheapest(self, starts: Sequence[np.ndarray], bound: float, w: np.ndarray,
                 fast_k: np.ndarray | None = None) -> np.ndarray | None:
        """The least-energy sizing found within ``bound`` (tau) from continuous sizings
        ``starts`` (several roundings of each, repaired and recovered; and the discrete
        minimum-delay sizing ``fast_k``, recovered, when it meets the bound), improved by
        ``improve``. None when no start could be brought within the bound."""
        found = []
        seen: list[np.ndarray] = []
        self.last_miss = math.inf        # least delay / bound that a failed repair reached
        starts = list(starts)
        if fast_k is not None and not self.large:
            # halfway (in log) to the fastest discrete sizing: repairs where the continuous
            # optimum is far from any discrete sizing near the bound
            x_fast = self.sizes(fast_k)
            starts += [np.exp(0.5 * (np.log(x) + np.log(x_fast))) for x in starts]
        roundings = ROUNDINGS[:1] if self.large else ROUNDINGS
        for x_cont, up_from in [(x, u) for x in starts for u in roundings]:
            k0 = self.snap(x_cont, up_from)
            if any(np.array_equal(k0, o) for o in seen):
                continue
            seen.append(k0)
            if not self.limits_ok(self.sizes(k0)):
                continue
            k, met, _, reached = self.repair(k0, bound, w)
            if met:
                found.append(self.recover(k, bound, w))
            else:
                self.last_miss = min(self.last_miss, reached / bound)
        if fast_k is not None and self.delay_of(fast_k) <= bound * (1 + REL_TOL) \
                and not (found and self.large):
            found.append(self.recover(fast_k, bound, w))
        if not found:
            return None
        k = min(found, key=lambda kk: self.energy(kk, w))
        return self.improve(k, bound, w)

    def improve(self, k: np.ndarray, bound: float, w: np.ndarray) -> np.ndarray:
        """Local search from a sizing within ``bound``: single-gate kicks (``_kicks``) and, on
        small networks, every change of one or two gates by one size (timed in full), until
        neither finds less energy."""
        small = int(np.sum(self.free)) <= PAIR_MOVES_MAX
        while True:
            k = self._kicks(k, bound, w)
            if not small:
                return k
            k2 = self._pair_moves(k, bound, w)
            if k2 is None:
                return k
            k = k2

    def _pair_moves(self, k: np.ndarray, bound: float, w: np.ndarray) -> np.ndarray | None:
        """The least-energy sizing within ``bound`` among those that change one or two gates
        of ``k`` by one size each, if it saves energy (else None)."""
        free = np.flatnonzero(self.free)
        moves = [(int(i), st) for i in free for st in (-1, 1)
                 if 0 <= k[i] + st < self.counts[i]]
        if not moves:
            return None
        node = np.array([m[0] for m in moves])
        step = np.array([m[1] for m in moves])
        a, b = np.triu_indices(len(moves), k=0)
        keep = (a == b) | (node[a] != node[b])
        a, b = a[keep], b[keep]
        x = self.sizes(k)
        dx = self.levels[node, k[node] + step] - x[node]
        de = w[node] * dx
        delta = de[a] + np.where(a == b, 0.0, de[b])
        order = np.argsort(delta, kind="stable")
        order = order[delta[order] < -1e-12 * max(abs(self.energy(k, w)), 1e-300)]
        chunk = max(1, int(2e6 // self.model.n))
        for c0 in range(0, order.size, chunk):
            sel = order[c0:c0 + chunk]
            ks = np.tile(k, (sel.size, 1))
            rows = np.arange(sel.size)
            ks[rows, node[a[sel]]] += step[a[sel]]
            two = a[sel] != b[sel]
            ks[rows[two], node[b[sel]][two]] += step[b[sel]][two]
            ok = np.flatnonzero(self.delays_many(ks) <= bound * (1 + REL_TOL))
            for j in ok:          # ordered by saving: the first that meets the limits
                if self.limits_ok(self.sizes(ks[j])):
                    return ks[j].copy()
        return None

    def _kicks(self, k: np.ndarray, bound: float, w: np.ndarray) -> np.ndarray:
        """Local search from a sizing within ``bound``: move one gate a size up or down, hold
        it there, repair (if the move broke the bound) and recover the others; keep any result
        of less energy. Gates are tried
        most critical first (upsizing) and largest saving first (downsizing), within a budget
        of trials."""
        n_free = int(np.sum(self.free))
        budget = KICK_TRIALS if n_free > KICK_ALL_MAX else 2 * n_free * KICK_PASSES
        if self.large:
            budget = KICK_TRIALS_LARGE
        e_best = self.energy(k, w)
        tried: set[tuple[int, int]] = set()
        while budget > 0:
            st = self.state(k, bound)
            s = st.slack
            up_c = np.flatnonzero(self.free & (k + 1 < self.counts))
            dn_c = np.flatnonzero(self.free & (k > 0))
            up_c = up_c[np.argsort(s[up_c], kind="stable")]
            dn_c = dn_c[np.argsort(-w[dn_c] * (st.x - self.sizes(np.maximum(k - 1, 0)))[dn_c],
                                   kind="stable")]
            if n_free > KICK_ALL_MAX:
                half = max(1, budget // 2)
                up_c, dn_c = up_c[:half], dn_c[:half]
            moves = [(int(i), 1) for i in up_c] + [(int(i), -1) for i in dn_c]
            improved = False
            for i, step in moves:
                if budget <= 0:
                    break
                if (i, step) in tried:
                    continue
                tried.add((i, step))
                budget -= 1
                trial = k.copy()
                trial[i] += step
                if not self.limits_ok(self.sizes(trial)):
                    continue
                frozen = np.zeros(self.model.n, dtype=bool)
                frozen[i] = True
                trial, met, _, _ = self.repair(trial, bound, w, frozen=frozen)
                if not met:
                    continue
                trial = self.recover(trial, bound, w, frozen)
                e = self.energy(trial, w)
                if e < e_best * (1 - 1e-12) and self.delay_of(trial) <= bound * (1 + REL_TOL):
                    k, e_best, improved = trial, e, True
                    tried.clear()
                    break
            if not improved:
                break
        return k


# ------------------------------------------------------------------------------ continuous


@dataclass
class Relaxed:
    """A continuous sizing from ``Lagrangian`` with its certified lower bound.

    ``x``: sizes per node (the last inner minimiser; it may miss the bound slightly);
    ``lower``: lower bound on the continuous optimum (objective units without the constant
    part for ``cheapest``, tau for ``fastest``); ``iterations`` and ``seconds`` spent.
    """

    x: np.ndarray
    lower: float
    iterations: int
    seconds: float


def _lr_step(iteration: int) -> float:
    """Exponent of the criticality in the multiplier update: shrinks so the updates settle."""
    return LR_GAMMA / math.sqrt(1.0 + iteration / LR_DECAY)


class Lagrangian:
    """Continuous sizing by Lagrangian relaxation of the timing constraints, for networks too
    large for the reference solver.

    Each timing arc gets a multiplier; projected onto flow conservation (what enters a node
    leaves it) the arrival times drop out of the Lagrangian, leaving
    ``sum w x + sum_j mu_j d_j(x)`` minus constants, minimised gate by gate in closed form
    (``x_i = sqrt(mu_i C_L,i / (w_i + sum_j mu_j P_ji / x_j))``, clipped to the bounds).
    Multipliers are scaled by each arc's criticality (arrival through the arc over its required
    time) after every inner minimisation.

    Certificate: for any multipliers that conserve flow, the Lagrangian's minimum over the sizes
    is a lower bound on the continuous optimum (weak duality). The inner problem is convex in
    log sizes, so its value at the computed point plus the least value of its linearisation
    over the size box bounds that minimum from below; ``lower`` is that bound.
    """

    def __init__(self, model: Model) -> None:
        m = self.model = model
        self.g = _Graph(model)
        self.free = ~m.fixed
        self.P = m.pin_load.tocsr()
        self.PT = m.pin_load.T.tocsr()
        self.log_lo, self.log_hi = np.log(m.lo), np.log(m.hi)
        self.roots = np.bincount(m.edge_dst, minlength=m.n) == 0
        self.start = np.where(np.isfinite(m.t0), m.t0, 0.0)

    # ------------------------------------------------------------- pieces
    def _project(self, lam: np.ndarray, lam_o: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Scale the arc multipliers so that flow is conserved; returns them and the node
        flows ``mu`` (what leaves each node, to its fan-out and to its output)."""
        g = self.g
        mu = np.zeros(self.model.n)
        np.add.at(mu, self.model.out_node, lam_o)
        lam = lam.copy()
        for s, e, u, first in reversed(g.fwd):
            total = np.add.reduceat(lam[s:e], first)
            count = np.diff(np.append(first, e - s))
            scale = np.where(total > 0, mu[u] / np.where(total > 0, total, 1.0), 0.0)
            lam[s:e] *= np.repeat(scale, count)
            np.add.at(mu, g.f_src[s:e], lam[s:e])
        return lam, mu

    def _inner(self, mu: np.ndarray, w: np.ndarray, x: np.ndarray, sweeps: int) -> np.ndarray:
        m = self.model
        for _ in range(sweeps):
            load = self.P @ x + m.fixed_load
            down = w + self.PT @ (mu / x)
            with np.errstate(divide="ignore"):
                new = np.sqrt(np.maximum(mu * load, 0.0) / np.maximum(down, 0.0))
            new = np.clip(np.nan_to_num(new, nan=1.0, posinf=np.inf), m.lo, m.hi)
            x = np.where(self.free, np.sqrt(x * new), x)     # damped in log
        return x

    def _timing(self, x: np.ndarray, bound: float | None):
        m = self.model
        d = m.p + (self.P @ x + m.fixed_load) / x
        a = self.g.arrivals(d)
        delay = self.g.delay(a)
        r = self.g.required(d, delay if bound is None else bound)
        return d, a, r, delay

    def _lower(self, mu: np.ndarray, lam_o: np.ndarray, w: np.ndarray, x: np.ndarray,
               bound: float) -> tuple[float, np.ndarray]:
        """Certified lower bound of the Lagrangian's minimum at these multipliers."""
        m = self.model
        x = self._inner(mu, w, x, BOUND_SWEEPS)
        load = self.P @ x + m.fixed_load
        value = float(w @ x + mu @ (m.p + load / x))
        grad = w * x + x * (self.PT @ (mu / x)) - mu * load / x
        z = np.log(x)
        corr = np.minimum(grad * (self.log_lo - z), grad * (self.log_hi - z))
        value += float(np.sum(np.where(self.free, corr, 0.0)))
        value += float(np.sum(np.where(self.roots, mu * self.start, 0.0)))
        value += float(lam_o @ (m.out_allow - bound))
        return value, x

    # ------------------------------------------------------------- problems
    def cheapest(self, bound: float, w: np.ndarray, iters: int = LR_ITERS,
                 x0: np.ndarray | None = None) -> Relaxed:
        """Least ``w @ x`` with delay <= ``bound`` (tau)."""
        t0 = time.perf_counter()
        m, g = self.model, self.g
        x = np.clip(1.0, m.lo, m.hi) if x0 is None else np.asarray(x0, dtype=float).copy()
        lam, mu = self._project(np.ones(m.edge_src.size), np.ones(m.out_node.size))
        lam_o = np.ones(m.out_node.size)
        # one scale of all multipliers that brings the delay to the bound
        lo_s, hi_s = 1e-9, 1e9
        for _ in range(LR_SCALE_STEPS):
            s = math.sqrt(lo_s * hi_s)
            xs = self._inner(mu * s, w, x, LR_SWEEPS * 2)
            if self._timing(xs, bound)[3] > bound:
                lo_s = s
            else:
                hi_s = s
        lam, lam_o, mu = lam * hi_s, lam_o * hi_s, mu * hi_s
        best = -math.inf
        done = 0
        for it in range(iters):
            x = self._inner(mu, w, x, LR_SWEEPS)
            d, a, r, delay = self._timing(x, bound)
            done = it + 1
            if done % LR_CHECK == 0 or done == iters:
                low, _ = self._lower(mu, lam_o, w, x, bound)
                best = max(best, low)
                energy = float(w @ x)
                if abs(delay - bound) <= LR_RTOL * bound and energy - best <= LR_RTOL * abs(best):
                    break
            crit = (a[g.f_src] + d[g.f_dst]) / np.maximum(r[g.f_dst], 1e-12 * bound)
            crit_o = (a[m.out_node] + m.out_allow) / bound
            step = _lr_step(it)
            lam = lam * np.clip(crit, 0.5, 2.0) ** step
            lam_o = lam_o * np.clip(crit_o, 0.5, 2.0) ** step
            lam, mu = self._project(lam, lam_o)
        return Relaxed(x, best, done, time.perf_counter() - t0)

    def fastest(self, iters: int = LR_ITERS, x0: np.ndarray | None = None) -> Relaxed:
        """Least delay; ``lower`` is a certified lower bound on the continuous minimum (tau)."""
        t0 = time.perf_counter()
        m, g = self.model, self.g
        x = np.clip(1.0, m.lo, m.hi) if x0 is None else np.asarray(x0, dtype=float).copy()
        zero = np.zeros(m.n)
        lam_o = np.full(m.out_node.size, 1.0 / m.out_node.size)
        lam, mu = self._project(np.ones(m.edge_src.size), lam_o)
        best, best_x, best_d = -math.inf, x, math.inf
        done = 0
        for it in range(iters):
            x = self._inner(mu, zero, x, LR_SWEEPS)
            d, a, r, delay = self._timing(x, None)
            if delay < best_d:
                best_x, best_d = x, delay
            done = it + 1
            if done % LR_CHECK == 0 or done == iters:
                low, _ = self._lower(mu, lam_o, zero, x, 0.0)
                best = max(best, low)
                if best_d - best <= LR_RTOL * best_d:
                    break
            crit = (a[g.f_src] + d[g.f_dst]) / np.maximum(r[g.f_dst], 1e-12 * delay)
            crit_o = (a[m.out_node] + m.out_allow) / delay
            step = _lr_step(it)
            lam = lam * np.clip(crit, 0.5, 2.0) ** step
            lam_o = lam_o * np.clip(crit_o, 0.5, 2.0) ** step
            lam_o = lam_o / lam_o.sum()
            lam, mu = self._project(lam, lam_o)
        return Relaxed(best_x, best, done, time.perf_counter() - t0)


# ------------------------------------------------------------------------------ the sizer


class DiscreteSizer:
    """Discrete sizing of one circuit with allowed sizes per gate type.

    Parameters
    ----------
    circuit : the gate network.
    tech : a Technology, a built-in name or a TOML path.
    sizes : allowed sizes of every gate (a list), or a mapping gate type -> list (the key
        ``"*"`` covers the types not named). Gates of fixed size keep their size.
    objective, cycle_ps, max_effort, area_max : as for ``Sizer``.
    continuous : the continuous problem (start and lower bound), within the range of the sets:
        ``"solver"``: the Sizer's reference programs; the bound is their optimum;
        ``"lagrangian"``: ``Lagrangian`` relaxation, for large networks; the bound is its
        certified dual bound (``max_effort``, ``area_max`` and input-capacitance limits are
        not part of the relaxation, so this mode refuses them);
        ``"auto"`` (default): the solver up to ``AUTO_SOLVER_MAX`` free gates, else Lagrangian.

    Relative targets (``"1.2x"``) are multiples of the fastest discrete delay found.
    """

    def __init__(self, circuit: Circuit, tech: Technology | str | None = None,
                 sizes: SizeSets = (1, 2, 4, 8, 16), objective: str = "energy",
                 cycle_ps: float | None = None, max_effort: float | None = None,
                 area_max: float | None = None, continuous: str = "auto") -> None:
        if continuous not in ("auto", "solver", "lagrangian"):
            raise EdoptError(f"continuous must be 'auto', 'solver' or 'lagrangian', "
                             f"got {continuous!r}")
        self.sets = normalise_sets(sizes)
        self.circuit = circuit
        self.sizer = Sizer(bounded_circuit(circuit, self.sets), tech, objective=objective,
                           cycle_ps=cycle_ps, max_effort=max_effort, area_max=area_max,
                           engine="reference")
        self.model = m = self.sizer.model
        limited = max_effort is not None or area_max is not None or m.cap_rows.shape[0] > 0
        if continuous == "auto":
            continuous = "solver" if limited or int(np.sum(~m.fixed)) <= AUTO_SOLVER_MAX \
                else "lagrangian"
        if continuous == "lagrangian" and limited:
            raise EdoptError("continuous='lagrangian' handles no effort, area or input-"
                             "capacitance limits; use continuous='solver'")
        self.continuous = continuous
        self.lagrangian = Lagrangian(m) if continuous == "lagrangian" else None
        self.levels, self.counts = allowed_sizes(m, self.sets)
        self.search = _Search(m, self.levels, self.counts, max_effort, area_max)
        self.cycle_ps = cycle_ps
        self._fast: tuple[np.ndarray, float, float] | None = None   # k, delay tau, seconds
        self._fast_result: Sizing | None = None
        self._cont_fast: tuple[np.ndarray, float, float] | None = None   # x, min delay ps, s
        self.continuous_seconds = 0.0

    @property
    def tech(self) -> Technology:
        return self.sizer.tech

    # ------------------------------------------------------------- continuous problem
    def _continuous_fastest(self) -> tuple[np.ndarray, float]:
        """Start of the minimum-delay search and a lower bound on the delay of any discrete
        sizing (ps)."""
        if self._cont_fast is None:
            t0 = time.perf_counter()
            if self.lagrangian is None:
                fast = self.sizer.fastest()
                self._cont_fast = (fast.evaluation.x, self.sizer.min_delay_ps, 0.0)
            else:
                rel = self.lagrangian.fastest()
                self._cont_fast = (rel.x, float(self.model.to_ps(rel.lower)), 0.0)
            self.continuous_seconds += time.perf_counter() - t0
        return self._cont_fast[0], self._cont_fast[1]

    def _continuous(self, t_ps: float) -> tuple[np.ndarray, float, list[str]] | None:
        """Start and lower bound (objective units, constant included) at ``t_ps``; None when
        the continuous problem has no solution there."""
        t0 = time.perf_counter()
        try:
            if self.lagrangian is None:
                try:
                    cont = self.sizer.cheapest(t_ps)
                except InfeasibleTarget:
                    return None
                value = cont.energy_fj if cont.objective == "energy" else cont.area
                # the optimum to the solver's tolerance (a relative gap of 1e-7 at worst) is a
                # lower bound once that margin is taken off; an uncertified answer bounds nothing
                lower = float(value) * (1 - SOLVER_MARGIN) if cont.status == OPTIMAL \
                    else float("nan")
                return cont.evaluation.x, lower, list(cont.attempts) + [
                    f"continuous: {cont.status}"]
            w = self.sizer.weights(self.cycle_ps or t_ps)
            rel = self.lagrangian.cheapest(float(self.model.to_tau(t_ps)), w)
            return rel.x, rel.lower + self.sizer._constant(), [
                f"lagrangian: {rel.iterations} multiplier updates"]
        finally:
            self.continuous_seconds += time.perf_counter() - t0

    # ------------------------------------------------------------- minimum delay
    def _fastest_k(self) -> tuple[np.ndarray, float]:
        if self._fast is None:
            x_fast, d_low = self._continuous_fastest()
            t0 = time.perf_counter()
            w = self.sizer.weights(self.cycle_ps or d_low)
            best: tuple[np.ndarray, float] | None = None
            seen: list[np.ndarray] = []
            for up_from in FAST_ROUNDINGS[:1] if self.search.large else FAST_ROUNDINGS:
                k0 = self.search.snap(x_fast, up_from)
                if any(np.array_equal(k0, o) for o in seen):
                    continue
                seen.append(k0)
                if not self.search.limits_ok(self.search.sizes(k0)):
                    continue
                k, d = self.search.fastest(k0, w)
                if best is None or d < best[1]:
                    best = (k, d)
            if best is None:
                raise InfeasibleTarget(
                    f"circuit {self.circuit.name!r}: every rounding of the continuous "
                    "minimum-delay sizing to the allowed sizes breaks an input-capacitance, "
                    "effort or area limit; add sizes or relax the limit", None)
            k, d = best
            w = self.sizer.weights(self.cycle_ps or float(self.model.to_ps(d)))
            k = self.search.recover(k, d, w, max_rounds=self.search._fast_recovery)
            d = self.search.delay_of(k)
            self._fast = (k, d, time.perf_counter() - t0)
        return self._fast[0], self._fast[1]

    def _found_faster(self, k: np.ndarray) -> None:
        """A sizing found for a target beats the fastest found so far: it becomes the fastest."""
        d = self.search.delay_of(k)
        if self._fast is not None and d < self._fast[1] * (1 - REL_TOL):
            self._fast = (k, d, self._fast[2])
            self._fast_result = None

    @property
    def fastest_seconds(self) -> float | None:
        """Seconds the discrete minimum-delay search took (its continuous start excluded), or
        None while it has not run (large networks run it only when they need it)."""
        return None if self._fast is None else self._fast[2]

    @property
    def min_delay_ps(self) -> float:
        """The fastest discrete delay found (ps)."""
        return float(self.model.to_ps(self._fastest_k()[1]))

    @property
    def continuous_min_delay_ps(self) -> float:
        """No discrete sizing is faster than this (ps): the continuous minimum delay within the
        range of the sets (reference solver), or its certified lower bound (Lagrangian)."""
        return self._continuous_fastest()[1]

    def fastest(self) -> Sizing:
        """The fastest discrete sizing found, at its least energy found, certified against the
        continuous optimum at its own delay."""
        if self._fast_result is None:
            k, d = self._fastest_k()
            t_ps = float(self.model.to_ps(d))
            self._fast_result = self._certified(k, t_ps, "fastest", self._fast[2], None)
        return self._fast_result

    # ------------------------------------------------------------- targets
    def cheapest(self, target: str | float) -> Sizing:
        """The least-energy discrete sizing found with delay <= ``target``.

        Raises
        ------
        InfeasibleTarget : no discrete sizing found meets the target; ``min_delay_ps`` is the
            fastest discrete delay found, and the message says whether the target is proven
            unreachable (below the continuous minimum within the range of the sets).
        """
        m = self.model
        t_ps = parse_target(target, self.min_delay_ps if is_relative(target) else None)
        # large networks search for the fastest discrete sizing only when they need it
        lazy = self.search.large and self._fast is None
        fast_k = None if lazy else self._fastest_k()[0]
        if not lazy:
            self._check_reachable(t_ps)
        spent = self.continuous_seconds
        t0 = time.perf_counter()
        bound = float(m.to_tau(t_ps))
        w = self.sizer.weights(self.cycle_ps or t_ps)
        cont = self._continuous(t_ps)
        starts = [cont[0]] if cont is not None else []
        if not lazy and cont is not None and not self.search.large:
            # near the fastest discrete delay, the discrete optimum resembles the continuous one
            # at the same relative position above the continuous minimum: a second start
            d_cont = self.continuous_min_delay_ps
            t_map = d_cont * t_ps / self.min_delay_ps
            if t_map < t_ps * (1 - MAPPED_MIN):
                mapped = self._continuous(max(t_map, d_cont * (1 + MAPPED_MIN)))
                if mapped is not None:
                    starts.append(mapped[0])
        k = self.search.cheapest(starts, bound, w, fast_k)
        tight = t_ps
        for _ in range(TIGHTER_STARTS if cont is not None and not lazy else 0):
            if k is not None or not np.isfinite(self.search.last_miss):
                break
            # no start could be repaired: start from the continuous optimum at a tighter
            # target, by what the best repair missed (its sizes are larger all along the paths)
            tight = tight / self.search.last_miss ** 2
            tighter = self._continuous(tight)
            if tighter is None:
                break
            k = self.search.cheapest([tighter[0]], bound, w, None)
        if k is None and lazy:
            fast_k = self._fastest_k()[0]
            self._check_reachable(t_ps)
            # starts between the continuous optimum and the fastest discrete sizing (in log)
            x_fast = np.log(self.search.sizes(fast_k))
            mixed = [np.exp((1 - f) * np.log(x) + f * x_fast) for x in starts[:1]
                     for f in BETWEEN]
            k = self.search.cheapest(mixed, bound, w, fast_k)
        if k is None:
            fast_ps = self.min_delay_ps
            raise InfeasibleTarget(
                f"target {t_ps:.2f} ps: no sizing from the allowed sizes was found that meets it; "
                f"the fastest discrete sizing found takes {fast_ps:.2f} ps (continuous sizes "
                f"within the range of the sets need at least {self.continuous_min_delay_ps:.2f} "
                "ps, so the target is not proven unreachable)", fast_ps)
        self._found_faster(k)
        seconds = time.perf_counter() - t0 - (self.continuous_seconds - spent)
        return self._certified(k, t_ps, "cheapest", seconds, cont)

    def _check_reachable(self, t_ps: float) -> None:
        d_cont = self.continuous_min_delay_ps
        if t_ps < d_cont * (1 - 1e-7):
            fast_ps = self.min_delay_ps
            raise InfeasibleTarget(
                f"target {t_ps:.2f} ps cannot be met with the allowed sizes: even continuous "
                f"sizes within their range need at least {d_cont:.2f} ps; the fastest discrete "
                f"sizing found takes {fast_ps:.2f} ps", fast_ps)

    def solve(self, target: str | float | None = None) -> Sizing:
        """``fastest()`` when ``target`` is None, else ``cheapest(target)``."""
        return self.fastest() if target is None else self.cheapest(target)

    # ------------------------------------------------------------- results
    def _certified(self, k: np.ndarray, t_ps: float, problem: str, seconds: float,
                   cont: tuple[np.ndarray, float, list[str]] | None) -> Sizing:
        x = self.search.sizes(k)
        d_tau = self.search.delay_of(k)
        cycle = self.cycle_ps or t_ps
        w = self.sizer.weights(cycle)
        if cont is None:
            cont = self._continuous(t_ps)
        attempts = (list(cont[2]) if cont is not None else []) + [
            "discrete: snap, repair, recover, local search"]
        sol = Solution(x, d_tau, float(w @ x), float("nan"), FEASIBLE, "discrete", seconds,
                       attempts)
        known = self._fast is not None
        res = self.sizer._result(problem, sol, t_ps if problem == "cheapest" else None,
                                 self.min_delay_ps if known else None, cycle)
        if problem == "fastest":
            res.min_delay_ps = res.delay_ps
        elif res.delay_ps > t_ps * (1 + 1e-9):
            raise SolverError(
                f"discrete sizing of {self.circuit.name!r}: re-timed delay {res.delay_ps:.6g} ps "
                f"misses the target {t_ps:.6g} ps (the search's own timing disagrees with "
                "timing.evaluate); please report this case")
        if not self.search.limits_ok(x):
            res.status = "mismatch"
            res.notes.append("the discrete sizing breaks an input-capacitance, effort or area "
                             "limit")
        value = res.energy_fj if res.objective == "energy" else res.area
        unit = "fJ" if res.objective == "energy" else "(area units)"
        how = ("continuous optimum, reference solver" if self.lagrangian is None
               else "Lagrangian dual bound")
        if cont is not None and not np.isfinite(cont[1]):
            res.notes.append("no certified lower bound: the continuous solve did not end "
                             "optimal")
        elif cont is not None:
            # every weight is >= 0, so the smallest allowed sizes bound the objective too
            bound = max(cont[1], float(w @ np.where(self.model.fixed, self.model.hi,
                                                    self.levels[:, 0]))
                        + self.sizer._constant())
            res.gap_pct = float(100.0 * (value - bound) / bound) if bound > 0 else float("nan")
            if res.objective == "energy":
                res.bound_fj = float(bound)
            res.notes.append(
                f"discrete sizes: {value:.6g} {unit}; lower bound at {t_ps:.2f} ps with sizes "
                f"anywhere in the range of the sets ({how}): {bound:.6g} {unit}; gap "
                f"{res.gap_pct:.2f} %")
        if known:
            res.notes.append(f"no discrete sizing is faster than "
                             f"{self.continuous_min_delay_ps:.2f} ps; fastest discrete delay "
                             f"found: {self.min_delay_ps:.2f} ps")
        return res


# ------------------------------------------------------------------------------ frontier

STAIRCASE_COLUMNS = ["target_ps", "relative_target", "delay_ps", "energy_fj", "bound_fj",
                     "gap_pct", "staircase_fj", "status", "seconds"]


def discrete_frontier(
    circuit: Circuit | DiscreteSizer, tech: Technology | str | None = None,
    sets: SizeSets = (1, 2, 4, 8, 16), points: int = 12, span: float = 2.0, **options: Any,
) -> pd.DataFrame:
    """Discrete energy-delay points from the fastest discrete delay to ``span`` times it.

    Returns
    -------
    DataFrame with one row per target: ``target_ps``, ``relative_target`` (to the fastest
    discrete delay found), ``delay_ps`` and ``energy_fj`` of the discrete sizing, ``bound_fj``
    (continuous lower bound at the target), ``gap_pct``, ``staircase_fj`` (least discrete energy
    found with delay <= target, over all rows: the staircase to draw), ``status``, ``seconds``.
    A target that fails keeps its row with status ``failed``.
    """
    from .frontier import sweep_targets

    ds = circuit if isinstance(circuit, DiscreteSizer) else DiscreteSizer(
        circuit, tech, sets, **options)
    fast = ds.fastest()
    d0 = fast.delay_ps
    rows = [_stair_row(fast, d0, d0)]
    for t in sweep_targets(d0, points, span):
        try:
            rows.append(_stair_row(ds.cheapest(float(t)), float(t), d0))
        except EdoptError:
            rows.append({"target_ps": float(t), "relative_target": float(t) / d0,
                         "status": "failed"})
    table = pd.DataFrame(rows, columns=STAIRCASE_COLUMNS)
    ok = table.status != "failed"
    delay = table.delay_ps.where(ok, np.inf).to_numpy(dtype=float)
    energy = table.energy_fj.where(ok, np.inf).to_numpy(dtype=float)
    reach = delay[None, :] <= table.target_ps.to_numpy()[:, None] * (1 + 1e-9)
    stair = np.min(np.where(reach, energy[None, :], np.inf), axis=1)
    table["staircase_fj"] = np.where(np.isfinite(stair), stair, np.nan)
    table.index.name = "point"
    return table


def _stair_row(res: Sizing, t_ps: float, d0: float) -> dict:
    return {"target_ps": t_ps, "relative_target": t_ps / d0, "delay_ps": res.delay_ps,
            "energy_fj": res.energy_fj, "bound_fj": res.bound_fj, "gap_pct": res.gap_pct,
            "status": res.status, "seconds": res.seconds}


def discrete_staircase(continuous_frontier: Any, discrete_table: pd.DataFrame,
                       path: str | Path) -> list[Path]:
    """Draw the discrete staircase over the continuous energy-delay curve.

    Parameters
    ----------
    continuous_frontier : a ``Frontier`` or its table (columns ``delay_ps``, ``energy_fj``).
    discrete_table : from ``discrete_frontier``.
    path : output path; ``<stem>.png`` and ``<stem>.svg`` are written.

    Returns
    -------
    The two paths written.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    cont = getattr(continuous_frontier, "table", continuous_frontier)
    if not {"delay_ps", "energy_fj"} <= set(cont.columns):
        raise EdoptError("discrete_staircase: the continuous frontier needs columns delay_ps "
                         "and energy_fj (pass a Frontier or its table)")
    cont = cont[np.isfinite(cont.delay_ps.astype(float)) & np.isfinite(
        cont.energy_fj.astype(float))].sort_values("delay_ps")
    disc = discrete_table[discrete_table.status != "failed"]
    disc = disc[np.isfinite(disc.delay_ps.astype(float))]
    with plt.rc_context({"svg.fonttype": "none"}):      # SVG text stays searchable text
        return _draw_staircase(plt, cont, disc, discrete_table, Path(path))


def _draw_staircase(plt: Any, cont: pd.DataFrame, disc: pd.DataFrame,
                    discrete_table: pd.DataFrame, path: Path) -> list[Path]:
    fig, ax = plt.subplots(figsize=(6.4, 4.4), layout="constrained")
    ax.plot(cont.delay_ps, cont.energy_fj, "-", color="C0", lw=1.8,
            label="continuous sizes (Pareto curve)")
    if disc.bound_fj.notna().any():
        ax.plot(disc.target_ps, disc.bound_fj, ":", color="C2", lw=1.2,
                label="continuous bound within the sets' range")
    if len(disc):
        targets = discrete_table.target_ps.to_numpy(dtype=float)
        stair = discrete_table.staircase_fj.to_numpy(dtype=float)
        keep = np.isfinite(stair)
        ax.step(targets[keep], stair[keep], where="post", color="C3", lw=1.5,
                label="discrete sizes: least energy within the delay")
        ax.plot(disc.delay_ps, disc.energy_fj, "o", color="C3", ms=4,
                label="discrete sizings found")
    ax.set_xlabel("delay (ps)")
    ax.set_ylabel("energy per operation (fJ)")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8)
    ax.set_title("Discrete drive strengths over the continuous trade-off", fontsize=10)
    fig.text(0.01, 0.005, CAUTION.split(":")[0] + ".", fontsize=6, color="0.4")
    stem = path.with_suffix("") if path.suffix.lower() in (".png", ".svg") else path
    stem.parent.mkdir(parents=True, exist_ok=True)
    out = []
    for ext in ("png", "svg"):
        target = stem.with_name(f"{stem.name}.{ext}")
        fig.savefig(target, dpi=150 if ext == "png" else None)
        out.append(target)
    plt.close(fig)
    return out


def _apply_moves(k: np.ndarray, moves, went_up: np.ndarray, went_down: np.ndarray) -> np.ndarray:
    """A copy of the size indices ``k`` with the few timed ``(gate, step)`` moves applied,
    marking each moved gate as upsized or downsized."""
    k = k.copy()
    for i, step in moves:
        k[i] += step
        (went_up if step > 0 else went_down)[i] = True
    return k
