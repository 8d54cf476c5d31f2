"""Large-scale engine: smoothed timing, continuation in sharpness and a certified optimality gap.

For networks far beyond what the interior-point reference handles (10^5-10^6 gates), every
iteration is a few passes over the timing graph (``smooth_timing.py``; compiled loops in
``kernels.py`` when numba is installed, vectorised numpy/scipy otherwise):

* **Smoothed timing.** The maximum at each node's inputs is replaced by a log-sum-exp of
  sharpness ``beta`` (1/tau). The smoothed delay is convex in the log sizes and never below the
  true one, and its adjoint (one backward pass) is a *flow*: arc weights that conserve at every
  node, exactly the multipliers of a Lagrangian relaxation of the timing constraints.
* **Steps.** For a multiplier ``lam`` of the delay bound, ``w @ x + lam * D_smooth`` is minimised
  over the log sizes within their bounds by a projected L-BFGS (``quasi_newton.py``) whose
  recursion starts from each gate's own curvature.
* **Continuation in sharpness.** A solve starts very smooth (``SHARP_FIRST`` levels per delay),
  where the sizes settle in a few dozen steps whatever the depth of the network, and doubles the
  sharpness stage by stage, each stage starting from the last. Starting sharp instead costs
  about one step per logic level (measured: a million gates, 993 levels, 1,148 steps for the
  first stage against 197 for the whole continuation to the same sharpness).
* **Stages.** At each sharpness the multiplier is set by secant steps (each a warm solve) until
  two solves bracket the bound; the answer of the stage is the point between them whose *true*
  re-timed delay meets the bound (true-delay evaluations only). The smoothed solutions of two
  successive stages are also extrapolated in 1 / sharpness (Richardson) and landed on the bound
  the same way; the cheaper feasible point is kept.
* **Certificate.** With the node flows ``mu = lam * adjoint`` the Lagrangian's minimum over the
  sizes is a lower bound on the optimum (weak duality). That inner problem is convex in the log
  sizes and its Hessian is at least ``diag(w_i lo_i + mu_i F_i / hi_i)`` everywhere in the size
  box, so its value at any point plus the least value of the matching quadratic model over the
  box bounds its minimum from below (a few closed-form sweeps first move the point closer). The
  relative gap between the best feasible sizing and the best bound is the stopping rule.
  Flows are only as good as the sizes they are taken at: when the minimum-delay solve's first
  bound misses the rule, that stage is solved again to a tight tolerance and bounded again.
* **Slack recovery.** The minimum-delay answer, and an answer that ends its budget short of
  the gap rule, are shrunk into their exact-timing slack (``downsize.py``), which only lowers
  the energy and keeps the bound.
* **Warm starts.** Each solve keeps its stage answers; a later bound starts from the nearest
  bound solved, a few stages below its last sharpness, the multiplier scaled as the price of
  delay near the minimum delay (``1 / (T - D_min)``). A cold start at a bound close to the
  minimum delay begins at the first sharpness whose minimum-delay solve left room to reach it.
* **Budget.** A solve stops after about ``BUDGET`` iterations with its best feasible answer and
  the gap it reached (status inaccurate): within about 3 % of the minimum delay the energy is so
  steep in the delay that the 0.1 % rule can take far longer.

Supported constraints: size bounds, fixed sizes (fixed nodes), input drivers of fixed size,
output loads and time allowances, wire capacitance, activity factors (all inside the Model).
Input-capacitance limits, stage-effort limits and area budgets are not: the reference engine
takes those.
"""

from __future__ import annotations

import math
import time
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from ..errors import EdoptError
from ..model import Model
from . import kernels
from .conic import INACCURATE, INFEASIBLE, OPTIMAL, Options, Solution
from .downsize import Downsizer
from .quasi_newton import minimise_box
from .smooth_timing import SmoothTiming

GAP = 1e-3              # default stopping rule: relative gap to the certified bound
SHARP_FIRST = 2.0       # first sharpness, in levels per delay (beta * T / depth)
SHARP_GROWTH = 2.0      # sharpness grows by this factor per stage
SHARP_TOP = 8192.0      # the sharpest stage
STEP_FTOL = 1e-9        # an inner minimisation ends when a step gains less than this share of
                        # the energy (of the objective, for the minimum-delay solve) ...
FAST_FTOL = 1e-7        # ... (minimum-delay solve)
FAST_TIGHT_FTOL = 1e-10 # ... and before a second try at its certified bound
STEP_ITERS = 4000       # L-BFGS iterations per inner minimisation (at most)
MEMORY = 10             # L-BFGS correction pairs
BUDGET = 3000           # cheapest: iterations per solve; then the best answer found is returned
SWEEP_BUDGET = 1500     # ... per bound of a frontier sweep (``budget``)
FAST_BUDGET = 8000      # fastest: likewise
BOUND_SWEEPS = 5        # closed-form sweeps before each certified bound (cheapest) ...
FAST_BOUND_SWEEPS = 30  # ... and for the minimum-delay bound (no energy curvature to lean on)
FAST_BOUND_POLISH = 200 # ... then L-BFGS steps on the bound's own function (no timing pass)
FAST_BOUND_FROM = 16.0  # the minimum-delay bound is computed from this sharpness on
TIE = 1e-5              # fastest: weight of the normalised objective beside the delay
EFFORT_START = 4.0      # fastest: fan-out (load / input capacitance) of the starting sizes
CURVE_FLOOR = 1.0       # the diagonal start of L-BFGS is floored at this multiple of its mean
SLACK_SHARE = 0.25      # the unused delay of an answer may cost this share of the gap
PREDICT = 0.5           # the next stage starts this share of the last move further
SOLVES = 5              # multiplier solves per stage (at most)
SLOPE_START = -0.1      # d log(delay) / d log(lam) before any is measured
SLOPE_RANGE = (-1.0, -0.002)
LAM_STEP = (3e-3, 2.0)  # least and largest multiplier step (log) of a secant step
OVERSHOOT = 0.1         # a bracketing step aims this share of the miss past the aim
REACH = 0.5             # cold start: first sharpness whose minimum delay left this share of room
WARM_BACK = 4.0         # warm start: this factor below the neighbour's last sharpness
KEEP = 3                # solved bounds kept for warm starts (each keeps its stage answers)
LAM_RANGE = 1e12        # a multiplier beyond this factor of the first guess: bound out of reach


@dataclass
class _Stage:
    """The answer of one stage of a solve: log sizes on the bound, multiplier, true delay."""

    y: np.ndarray
    lam: float
    delay: float


@dataclass
class _Point:
    """One inner solve of a stage: log multiplier, log(true delay / bound), log sizes, steps."""

    log_lam: float
    r: float
    y: np.ndarray
    steps: int


@dataclass
class LargeSolution(Solution):
    """A Solution with its certificate.

    ``lower``: certified lower bound (objective units of the weights for ``cheapest``, tau for
    ``fastest``); ``gap``: relative gap of the answer above it; ``iterations``: L-BFGS
    iterations (each one forward and one backward pass, plus line-search evaluations);
    ``evaluations`` of the smoothed model; ``sharpness``: the last stage's.
    """

    lower: float = float("nan")
    gap: float = float("nan")
    iterations: int = 0
    evaluations: int = 0
    sharpness: float = float("nan")


@dataclass
class _Count:
    iterations: int = 0
    evaluations: int = 0
    notes: list[str] = field(default_factory=list)


@dataclass
class _Job:
    """The state of one cheapest solve between its stages (``LargeSizer._step``)."""

    T: float
    w: np.ndarray
    count: _Count
    started: float
    y: np.ndarray = field(default_factory=lambda: np.zeros(0))
    lam: float = 0.0
    lam_first: float = 0.0
    sharp: float = SHARP_FIRST
    best: tuple[np.ndarray, float, float, float] | None = None   # x, energy, delay, lam
    lower: float = -math.inf
    gap: float = math.inf
    room: float = 1e-3                  # relative delay an answer may leave unused
    stages: dict[float, _Stage] = field(default_factory=dict)
    history: list[tuple[float, float]] = field(default_factory=list)   # (sharpness, log lam)
    landed_before: np.ndarray | None = None
    done: bool = False


class LargeSizer:
    """The cheapest and fastest problems of one Model by the large-scale method (module doc).

    ``gap``: relative gap at which a solve stops (default 0.1 %). Answers carry ``lower``,
    ``gap`` and ``iterations``; ``status`` is optimal when the certified gap is within ``gap``.
    ``warm``: start each bound from the nearest one solved (default True). ``budget``:
    iterations after which a cheapest solve returns its best answer (``BUDGET``; frontier
    sweeps use ``SWEEP_BUDGET``).
    """

    def __init__(self, model: Model, options: Options | None = None, gap: float = GAP) -> None:
        options = options or Options()
        unsupported = []
        if options.max_effort is not None:
            unsupported.append("a stage-effort limit (max_effort)")
        if options.area_max is not None:
            unsupported.append("an area budget (area_max)")
        if model.cap_max.size:
            unsupported.append(f"input-capacitance limits ({', '.join(model.cap_names)})")
        if unsupported:
            raise EdoptError(
                "the large engine does not take " + " or ".join(unsupported)
                + "; use the reference engine (engine='reference', --engine reference) or drop "
                "the limit")
        if not 0 < gap < 1:
            raise EdoptError(f"the gap must be a fraction between 0 and 1, got {gap!r}")
        self.model = model
        self.gap = float(gap)
        self.timing = SmoothTiming(model)
        self.free = ~model.fixed
        self._free_idx = np.flatnonzero(self.free)
        self.log_lo, self.log_hi = np.log(model.lo), np.log(model.hi)
        self.depth = max(1, int(model.level.max()) if model.n else 1)
        self._y0 = np.log(np.clip(np.ones(model.n), model.lo, model.hi))
        self._x_lo = np.where(self.free, model.lo, np.exp(self._y0))   # the smallest sizing
        self._fast: dict[float, tuple[np.ndarray, float]] = {}  # minimum-delay stage answers
        self._fast_y: np.ndarray | None = None
        self._fast_delay: float | None = None
        self._solved: deque[tuple[float, dict[float, _Stage]]] = deque(maxlen=KEEP)
        self._slope = SLOPE_START
        self._levels_back: Downsizer | None = None
        self.warm = True
        self.budget = BUDGET

    # ------------------------------------------------------------- state for workers
    def fast_state(self) -> dict | None:
        """The minimum-delay solve (its stage answers, best log sizes and delay), or None
        before ``fastest``: what another copy of this engine needs (``set_fast_state``)."""
        if self._fast_y is None or self._fast_delay is None:
            return None
        return {"stages": {s: (y.copy(), d) for s, (y, d) in self._fast.items()},
                "y": self._fast_y.copy(), "delay": self._fast_delay}

    def set_fast_state(self, state: dict | None) -> None:
        if state is not None:
            self._fast = {float(s): (np.array(y), float(d))
                          for s, (y, d) in state["stages"].items()}
            self._fast_y, self._fast_delay = np.array(state["y"]), float(state["delay"])

    def warm_up(self) -> None:
        """Load the compiled loops (from numba's cache: about 0.8 s per process) with one
        evaluation and one quasi-Newton step on this model; a frontier worker does it while
        it waits for its first bound."""
        t = self.timing
        if not t.compiled:
            return
        y = self._y0.copy()
        d, _ = t.delays(np.exp(y))
        delay = t.true_delay(d)
        t.required(d, delay)
        value_grad = self._compiled_value_grad(y, self.model.e_lin, 1.0,
                                               SHARP_FIRST * self.depth / max(delay, 1e-12),
                                               1.0, _Count())
        minimise_box(value_grad, y[self.free], self.log_lo[self.free], self.log_hi[self.free],
                     1, 0.0, MEMORY)

    # ------------------------------------------------------------- pieces
    def _minimise(self, y: np.ndarray, w: np.ndarray, lam: float, beta: float, ftol: float,
                  count: _Count, energy_scale: bool = True) -> np.ndarray:
        """Minimise ``w @ x + lam * D_smooth`` over the free log sizes from ``y``. With
        ``energy_scale`` the stopping rule compares each step's gain with the energy, not with
        the whole objective (near the minimum delay the delay term is most of it)."""
        t, free = self.timing, self.free
        y = y.copy()
        x0 = np.exp(y)
        d0, _ = t.delays(x0)
        f0 = float(w @ x0) + lam * t.smooth(d0, beta)[0]
        if energy_scale:
            ftol *= min(1.0, max(float(w @ x0), 1e-300) / max(abs(f0), 1e-300))
        scale = 1.0 / max(abs(f0), 1e-300)

        value_grad = (self._compiled_value_grad if t.compiled else self._numpy_value_grad)(
            y, w, lam, beta, scale, count)
        res = minimise_box(value_grad, y[free], self.log_lo[free], self.log_hi[free],
                           STEP_ITERS, ftol, MEMORY)
        count.iterations += int(res.nit)
        y[free] = res.x
        return y

    def _numpy_value_grad(self, y: np.ndarray, w: np.ndarray, lam: float, beta: float,
                          scale: float, count: _Count
                          ) -> Callable[[np.ndarray], tuple[float, np.ndarray, np.ndarray]]:
        """The objective of ``_minimise`` at the free log sizes ``z`` (written into ``y``),
        times ``scale``: value, gradient and the diagonal curvature start of L-BFGS."""
        t, free, n = self.timing, self.free, self.model.n

        def value_grad(z: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
            count.evaluations += 1
            y[free] = z
            x = np.exp(y)
            d, load = t.delays(x)
            delay, flow, _ = t.smooth(d, beta)
            mu = lam * flow[:n]
            up = x * (t.PT @ (mu / x))
            grad = w * x + up - mu * load / x
            h = (w * x + up + mu * load / x)[free]
            h = np.maximum(h, CURVE_FLOOR * float(h.mean()) + 1e-300)
            return scale * (float(w @ x) + lam * delay), scale * grad[free], scale * h

        return value_grad

    def _compiled_value_grad(self, y: np.ndarray, w: np.ndarray, lam: float, beta: float,
                             scale: float, count: _Count
                             ) -> Callable[[np.ndarray], tuple[float, np.ndarray, np.ndarray]]:
        """``_numpy_value_grad`` by the compiled loops (``kernels.py``): the same
        quantities, the work arrays reused between evaluations."""
        t, n = self.timing, self.model.n
        free = self._free_idx
        P, PT, m = t.P, t.PT, self.model
        x, d, load, work = np.empty(n), np.empty(n), np.empty(n), np.empty(n)

        def value_grad(z: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
            count.evaluations += 1
            kernels.sizes_delays(z, free, y, x, P.indptr, P.indices, P.data, m.fixed_load,
                                 m.p, d, load)
            delay, flow, _ = t.smooth(d, beta)
            grad, h = np.empty(free.size), np.empty(free.size)
            energy = kernels.gradient(x, w, lam, flow, load, PT.indptr, PT.indices, PT.data,
                                      free, CURVE_FLOOR, scale, work, grad, h)
            return scale * (energy + lam * delay), grad, h

        return value_grad

    def _effort_start(self) -> np.ndarray:
        """Log sizes to start the minimum-delay solve: from the outputs back, each free gate
        sized to drive its load at a fan-out of 4 (the rule of thumb, common practice),
        within its bounds; one vectorised step per logic level."""
        x = np.exp(self._y0)
        for nodes, rows, fixed, _p, lo, hi in self._downsizer.groups:
            x[nodes] = np.clip((rows @ x + fixed) / EFFORT_START, lo, hi)
        return np.log(x)

    def _moved(self, y: np.ndarray, step: np.ndarray) -> np.ndarray:
        """``y + step`` on the free gates, within their size bounds (fixed gates stay)."""
        return np.where(self.free, np.clip(y + step, self.log_lo, self.log_hi), y)

    @property
    def _downsizer(self) -> Downsizer:
        """The backward sizing passes (levels of free gates), built on first use."""
        if self._levels_back is None:
            self._levels_back = Downsizer(self.timing, self.free)
        return self._levels_back

    def _downsized(self, x: np.ndarray, w: np.ndarray, bound: float
                   ) -> tuple[np.ndarray, float, int]:
        """Slack recovery of sizes ``x`` that meet ``bound`` (``downsize.py``)."""
        return self._downsizer(x, w, bound)

    def _true(self, y: np.ndarray) -> float:
        t = self.timing
        return t.true_delay(t.delays(np.exp(y))[0])

    def _bound(self, mu: np.ndarray, w: np.ndarray, y: np.ndarray, sweeps: int,
               polish: int = 0) -> float:
        """Certified lower bound of ``min_x w @ x + mu @ d(x)`` over the size box.

        The function is convex in the log sizes ``z`` with Hessian at least ``diag(m)``,
        ``m = w lo + mu F / hi`` (energy and fixed loads; the pin loads add a PSD part),
        everywhere in the box, so ``f(z) + min_box (g dz + m dz^2 / 2)`` (separable) bounds its
        minimum for any ``z``. Evaluated at ``y``, after each damped closed-form sweep
        ``x_i = sqrt(mu_i C_L,i / (w_i + sum_j mu_j P_ji / x_j))`` and, with ``polish``, after
        that many L-BFGS steps on the function itself (no timing pass); the best is kept."""
        t, m, free = self.timing, self.model, self.free
        curv = (w * m.lo + mu * m.fixed_load / m.hi)[free]
        lo, hi = self.log_lo[free], self.log_hi[free]

        def value_grad(x: np.ndarray) -> tuple[float, np.ndarray, np.ndarray, np.ndarray]:
            d, load = t.delays(x)
            down = w + t.PT @ (mu / x)
            return float(w @ x + mu @ d), (x * down - mu * load / x)[free], load, down

        def certified(x: np.ndarray, f: float, g: np.ndarray) -> float:
            z = np.log(x[free])
            dlo, dhi = lo - z, hi - z
            with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
                dz = np.where(curv > 0, -g / np.where(curv > 0, curv, 1.0),
                              np.where(g > 0, dlo, dhi))
            dz = np.clip(dz, dlo, dhi)
            return f + float(np.sum(g * dz + 0.5 * curv * dz * dz))

        x = np.exp(y)
        best = -math.inf
        for sweep in range(sweeps + 1):
            f, g, load, down = value_grad(x)
            best = max(best, certified(x, f, g))
            if sweep == sweeps:
                break
            with np.errstate(divide="ignore", invalid="ignore"):
                new = np.sqrt(mu * load / down)
            new = np.clip(np.nan_to_num(new, nan=0.0, posinf=np.inf), m.lo, m.hi)
            x = np.where(free, np.sqrt(x * new), x)
        if polish:
            z_all = np.log(x)
            scale = 1.0 / max(abs(best), 1e-300)

            def scaled(z: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
                z_all[free] = z
                xx = np.exp(z_all)
                f, g, load, down = value_grad(xx)
                h = (xx * down + mu * load / xx)[free]
                return scale * f, scale * g, scale * np.maximum(h, 1e-3 * float(h.mean()))

            res = minimise_box(scaled, z_all[free], lo, hi, polish, 1e-13, MEMORY)
            z_all[free] = res.x
            x = np.exp(z_all)
            f, g, _, _ = value_grad(x)
            best = max(best, certified(x, f, g))
        return best

    def _lower(self, y: np.ndarray, w: np.ndarray, lam: float, beta: float, T: float,
               sweeps: int = BOUND_SWEEPS) -> float:
        """Certified lower bound on the least ``w @ x`` with true delay <= ``T``, from the
        flows of the smoothed timing at ``y`` scaled by ``lam`` (weak duality)."""
        t = self.timing
        d, _ = t.delays(np.exp(y))
        _, flow, share = t.smooth(d, beta)
        return (self._bound(lam * flow[:self.model.n], w, y, sweeps)
                + lam * (t.start_value(flow, share) - T))

    def _direction(self, y: np.ndarray, w: np.ndarray, lam: float, beta: float
                   ) -> tuple[np.ndarray, float]:
        """A delay-reducing direction (minus the smoothed delay's gradient over the per-gate
        curvature) and the first-order change of the smoothed delay along it."""
        t, n = self.timing, self.model.n
        x = np.exp(y)
        d, load = t.delays(x)
        _, flow, _ = t.smooth(d, beta)
        up = x * (t.PT @ (flow[:n] / x))
        grad = up - flow[:n] * load / x
        h = w * x + lam * (up + flow[:n] * load / x)
        v = np.where(self.free, -grad / np.maximum(h, 1e-300), 0.0)
        return v, float(grad @ v)

    def _land_along(self, y: np.ndarray, v: np.ndarray, slope: float, T: float, room: float
                    ) -> tuple[np.ndarray, float] | None:
        """The point ``y + t v`` (clipped to the box) whose true delay is within ``room``
        (relative) below ``T``: secant steps on ``t``, true-delay evaluations only."""
        def at(s: float) -> np.ndarray:
            return self._moved(y, s * v)

        aim = -0.5 * room
        d0 = self._true(y)
        fa, ta = math.log(d0 / T) - aim, 0.0
        if -room <= fa + aim <= 0:
            return y, d0
        tb = -(fa * T) / slope if slope < 0 else 1.0
        fb = math.log(self._true(at(tb)) / T) - aim
        for _ in range(12):
            if (fa > 0) != (fb > 0):
                break
            ta, fa, tb = tb, fb, 2.0 * tb
            fb = math.log(self._true(at(tb)) / T) - aim
        else:
            return None
        landed = self._secant(at, ta, fa, tb, fb, T, aim, room)
        return None if landed is None else landed[:2]

    def _secant(self, at: Callable[[float], np.ndarray], ta: float, fa: float, tb: float,
                fb: float, T: float, aim: float, room: float
                ) -> tuple[np.ndarray, float, float] | None:
        """Safeguarded secant on ``log(D(at(t)) / T) - aim`` within a bracket ``ta, tb``:
        the log sizes, their true delay and ``t`` of a point whose true delay is within
        ``room`` (relative) below ``T``, else of the feasible point closest to the bound seen
        (None if none was)."""
        best: tuple[np.ndarray, float, float] | None = None
        for _ in range(40):
            lo, hi = min(ta, tb), max(ta, tb)
            tm = ta - fa * (tb - ta) / (fb - fa)
            tm = min(max(tm, lo + 0.02 * (hi - lo)), hi - 0.02 * (hi - lo))
            y = at(tm)
            dm = self._true(y)
            fm = math.log(dm / T) - aim
            if -room <= fm + aim <= 0:          # on the bound, within the room
                return y, dm, tm
            if dm <= T and (best is None or dm > best[1]):
                best = (y, dm, tm)
            if (fm > 0) == (fa > 0):
                ta, fa = tm, fm
            else:
                tb, fb = tm, fm
            if hi - lo < 1e-12:
                break
        return best

    def _solve_at(self, y: np.ndarray, w: np.ndarray, log_lam: float, beta: float, T: float,
                  count: _Count) -> _Point:
        before = count.iterations
        ys = self._minimise(y, w, math.exp(log_lam), beta, STEP_FTOL, count)
        return _Point(log_lam, math.log(self._true(ys) / T), ys, count.iterations - before)

    def _stage(self, y: np.ndarray, w: np.ndarray, lam: float, beta: float, T: float,
               count: _Count, room: float
               ) -> tuple[np.ndarray | None, float, float, list[_Point]]:
        """One sharpness: secant steps in the multiplier until two solves bracket the bound,
        then the point between them whose true delay is on the bound (within ``room``).
        Returns its log sizes (None if no feasible point was found), true delay, multiplier
        and the solves."""
        aim = -0.25 * room
        points = [self._solve_at(y, w, math.log(lam), beta, T, count)]
        for _ in range(SOLVES - 1):
            p = points[-1]
            if abs(p.r - aim) <= 0.25 * room:
                return p.y, T * math.exp(p.r), math.exp(p.log_lam), points
            above = [q for q in points if q.r > aim]
            below = [q for q in points if q.r <= aim]
            if above and below:
                a = min(above, key=lambda q: q.r)
                b = max(below, key=lambda q: q.r)
                ya, dy = a.y, b.y - a.y
                landed = self._secant(lambda s, ya=ya, dy=dy: ya + s * dy, 0.0, a.r - aim, 1.0,
                                      b.r - aim, T, aim, room)
                if landed is not None:
                    y_l, d_l, s = landed
                    return y_l, d_l, math.exp(a.log_lam + s * (b.log_lam - a.log_lam)), points
                ll = b.log_lam + (aim - b.r) * (a.log_lam - b.log_lam) / (a.r - b.r)
            else:
                # overshoot across the aim a little, so the next solve brackets it
                step = (aim - OVERSHOOT * (p.r - aim) - p.r) / self._slope
                ll = p.log_lam + math.copysign(min(LAM_STEP[1], max(LAM_STEP[0], abs(step))),
                                               step)
            q = self._solve_at(p.y, w, ll, beta, T, count)
            if p.steps >= 3 and q.steps >= 3 and abs(q.log_lam - p.log_lam) > 1e-4:
                seen = (q.r - p.r) / (q.log_lam - p.log_lam)
                if seen < 0:
                    self._slope = min(SLOPE_RANGE[1], max(SLOPE_RANGE[0], seen))
            points.append(q)
            if q.r > 0 and p.r > 0 and q.log_lam > p.log_lam and q.r >= p.r - 1e-4:
                break      # more multiplier no longer shortens the delay: out of reach here
        feasible = [q for q in points if q.r <= 0]
        if feasible:
            q = max(feasible, key=lambda q: q.r)
            return q.y, T * math.exp(q.r), math.exp(q.log_lam), points
        return None, math.nan, math.exp(points[-1].log_lam), points

    # ------------------------------------------------------------- problems
    def fastest(self, weights: np.ndarray | None = None, tie: float = TIE) -> LargeSolution:
        """Least delay; off-critical gates take their cheapest sizes through a small ``tie``
        weight of ``weights @ x``. ``lower`` bounds the minimum delay (tau)."""
        t0 = time.perf_counter()
        m = self.model
        w0 = m.e_lin if weights is None else np.asarray(weights, dtype=float)
        count = _Count()
        y = self._effort_start()
        d0 = self._true(y)
        sharp, lower, gap = SHARP_FIRST, -math.inf, math.inf
        best_y, best = y, d0
        gaps: list[float] = []
        stages: dict[float, tuple[np.ndarray, float]] = {}
        previous: np.ndarray | None = None
        while True:
            beta = sharp * self.depth / max(d0, 1e-12)
            w = w0 * (tie * d0 / max(float(w0 @ np.exp(y)), 1e-300))
            y = self._minimise(y, w, 1.0, beta, FAST_FTOL, count, energy_scale=False)
            delay = self._true(y)
            stages[sharp] = (y.copy(), delay)
            if delay < best:
                best_y, best = y.copy(), delay
            if previous is not None:     # Richardson extrapolation in 1 / sharpness
                ex = self._moved(y, y - previous)
                d_ex = self._true(ex)
                if d_ex < best:
                    best_y, best = ex, d_ex
            # the delays of successive stages close in about as 1 / sharpness: the bound (whose
            # polish costs about as much as a stage) is worth computing once the extrapolated
            # minimum is within the gap of the best delay
            settled = len(stages) >= 2 and (
                best - (2 * delay - stages[sharp / SHARP_GROWTH][1])) <= self.gap * best
            if sharp >= FAST_BOUND_FROM and (settled or sharp >= SHARP_TOP):
                lower = max(lower, self._fast_bound(y, beta))
                if best - lower > self.gap * lower:
                    # the flows of loosely converged sizes bound the minimum delay poorly
                    # (measured on a million gates: 4470 tau, 4476.6 after a tight solve, best
                    # delay 4479.1; sharper stages at the loose tolerance bound worse): solve
                    # this stage tightly and bound again
                    y = self._minimise(y, w, 1.0, beta, FAST_TIGHT_FTOL, count,
                                       energy_scale=False)
                    delay = self._true(y)
                    stages[sharp] = (y.copy(), delay)
                    if delay < best:
                        best_y, best = y.copy(), delay
                    lower = max(lower, self._fast_bound(y, beta))
            previous = y.copy()
            gap = (best - lower) / lower if lower > 0 else math.inf
            gaps.append(gap)
            d0 = delay
            # stalled: two stages that closed less than a quarter of the gap (the bound's
            # flows, not the sizes, limit it; measured on a million gates)
            stalled = len(gaps) >= 3 and math.isfinite(gaps[-3]) and gaps[-1] > 0.75 * gaps[-3]
            if gap <= self.gap or sharp >= SHARP_TOP or count.iterations > FAST_BUDGET \
                    or stalled:
                break
            sharp *= SHARP_GROWTH
        # the off-critical gates had only the tie weight to shrink them: recover their slack
        x_best, best, rounds = self._downsized(np.exp(best_y), w0, best)
        best_y = np.log(x_best)
        gap = (best - lower) / lower if lower > 0 else math.inf
        self._fast, self._fast_y, self._fast_delay = stages, best_y.copy(), best
        status = OPTIMAL if gap <= self.gap else INACCURATE
        return LargeSolution(
            x_best, best, best, 0.0, status, "large", time.perf_counter() - t0,
            [f"large: {count.iterations} iterations to sharpness {sharp:g}, certified gap "
             f"{gap:.2e} ({status}); {rounds} rounds of slack recovery"],
            lower=lower, gap=gap, iterations=count.iterations, evaluations=count.evaluations,
            sharpness=sharp)

    def _fast_bound(self, y: np.ndarray, beta: float) -> float:
        """Certified lower bound on the minimum delay from the flows of the smoothed timing
        at ``y`` (weak duality; no energy term)."""
        t, n = self.timing, self.model.n
        d, _ = t.delays(np.exp(y))
        _, flow, share = t.smooth(d, beta)
        return (self._bound(flow[:n], np.zeros(n), y, FAST_BOUND_SWEEPS, FAST_BOUND_POLISH)
                + t.start_value(flow, share))

    def cheapest(self, bound_tau: float, weights: np.ndarray) -> LargeSolution:
        """Least ``weights @ x`` with the true delay <= ``bound_tau``; ``lower`` bounds it.

        Status infeasible when no sizing meeting the bound was found (the bound may be below
        the minimum delay; ``fastest`` tells)."""
        job = self._open(float(bound_tau), np.asarray(weights, dtype=float))
        while not job.done:
            self._step(job)
        return self._close(job)

    def _open(self, T: float, w: np.ndarray) -> _Job:
        """A solve for bound ``T``, before its first stage (done at once when the smallest
        sizing meets the bound)."""
        job = _Job(T, w, _Count(), time.perf_counter())
        # the cheapest sizing of all (every free gate at its lower bound) may meet the bound
        d_lo = self._true(np.log(self._x_lo))
        if d_lo <= T:
            energy = float(w @ self._x_lo)
            job.best, job.lower, job.gap, job.done = (self._x_lo.copy(), energy, d_lo, 0.0), \
                energy, 0.0, True
            job.count.notes.append("the bound is slack at the smallest sizes (exact optimum)")
            return job
        job.y, job.lam, job.sharp = self._start(T, w)
        job.lam_first = job.lam
        if self._fast_y is not None and self._fast_delay is not None and self._fast_delay <= T:
            x_fast = np.exp(self._fast_y)     # the answer is never worse than the fastest
            job.best = (x_fast, float(w @ x_fast), self._fast_delay, math.nan)
        return job

    def _step(self, job: _Job) -> None:
        """One stage of ``job`` at its sharpness: the stage answer, the bounds of its solves,
        the extrapolated point; then the next stage's start, or done."""
        T, w, count, sharp = job.T, job.w, job.count, job.sharp
        beta = sharp * self.depth / T
        y_s, d_s, lam_s, points = self._stage(job.y, w, job.lam, beta, T, count, job.room)
        for p in points[-2:]:
            job.lower = max(job.lower, self._lower(p.y, w, math.exp(p.log_lam), beta, T))
        if y_s is not None:
            energy = float(w @ np.exp(y_s))
            job.room = SLACK_SHARE * self.gap * energy / max(lam_s * T, 1e-300)
            if job.best is None or energy < job.best[1]:
                job.best = (np.exp(y_s), energy, d_s, lam_s)
            before = job.landed_before
            if before is not None:
                # Richardson extrapolation of the stage answers in 1 / sharpness
                ex = self._moved(y_s, y_s - before)
                v, slope = self._direction(y_s, w, lam_s, beta)
                landed = self._land_along(ex, v, slope, T, job.room)
                if landed is not None:
                    e_ex = float(w @ np.exp(landed[0]))
                    if e_ex < job.best[1]:
                        job.best = (np.exp(landed[0]), e_ex, landed[1], lam_s)
            # the next stage starts where the answers move with the sharpness (about
            # y* + b / sharpness: half the last move again)
            job.y = y_s if before is None else self._moved(y_s, PREDICT * (y_s - before))
            job.landed_before = y_s.copy()
            job.stages[sharp] = _Stage(y_s.copy(), lam_s, d_s)
            job.history.append((sharp, math.log(lam_s)))
            job.lam = lam_s
        else:
            job.y, job.lam = points[-1].y, math.exp(points[-1].log_lam)
            count.notes.append(f"sharpness {sharp:g}: bound not reached")
            if job.lam > LAM_RANGE * job.lam_first and self._fast_y is None:
                job.done = True
        best, lower = job.best, job.lower
        job.gap = (best[1] - lower) / lower if best is not None and lower > 0 else math.inf
        if job.gap <= self.gap or sharp >= SHARP_TOP or (
                count.iterations > self.budget and best is not None):
            job.done = True
        if job.done:
            return
        if len(job.history) >= 2:
            # the multiplier falls with the sharpness, about in proportion to 1 / sharpness
            (s1, l1), (s2, l2) = job.history[-2:]
            shift = (l1 - l2) / (1 / s1 - 1 / s2) * (1 / (SHARP_GROWTH * sharp) - 1 / sharp)
            job.lam *= math.exp(max(-0.5, min(0.5, shift)))
        job.sharp = sharp * SHARP_GROWTH

    def _close(self, job: _Job) -> LargeSolution:
        """The answer of a finished solve (its stages kept for warm starts); an answer short
        of the gap rule (budget spent) first has its slack recovered (``downsize.py``)."""
        count = job.count
        if job.stages:
            self._solved.append((job.T, job.stages))
        if job.best is None:
            return LargeSolution(
                np.exp(job.y), math.nan, math.nan, math.nan, INFEASIBLE, "large",
                time.perf_counter() - job.started,
                [f"large: bound {job.T:.6g} tau not met at any sharpness; "
                 + ", ".join(count.notes[-3:])],
                lower=job.lower, iterations=count.iterations, evaluations=count.evaluations,
                sharpness=job.sharp)
        x, energy, delay, lam = job.best
        recovered = ""
        if job.gap > self.gap:
            x, delay, rounds = self._downsized(x, job.w, job.T)
            energy = float(job.w @ x)
            job.gap = (energy - job.lower) / job.lower if job.lower > 0 else math.inf
            recovered = f"; {rounds} rounds of slack recovery"
        status = OPTIMAL if job.gap <= self.gap else INACCURATE
        if not math.isfinite(lam):
            lam = job.stages[max(job.stages)].lam if job.stages else 0.0
        note = count.notes[-1] if job.gap == 0 and count.notes else (
            f"{count.iterations} iterations to sharpness {job.sharp:g}, certified gap "
            f"{job.gap:.2e} ({status}){recovered}")
        return LargeSolution(
            x, delay, energy, lam, status, "large", time.perf_counter() - job.started,
            [f"large: {note}"], lower=job.lower, gap=job.gap, iterations=count.iterations,
            evaluations=count.evaluations, sharpness=job.sharp)

    def _start(self, T: float, w: np.ndarray) -> tuple[np.ndarray, float, float]:
        """Log sizes, multiplier and first sharpness of a solve for bound ``T``."""
        sharp = SHARP_FIRST
        d_min = self._fast_delay
        if self._fast and d_min is not None:
            # the first sharpness whose minimum-delay solve left room to reach the bound
            room = [s for s, (_, d) in self._fast.items() if d <= T - REACH * (T - d_min)]
            sharp = max(SHARP_FIRST, min(room)) if room else SHARP_GROWTH * max(self._fast)
        if self.warm and self._solved:
            t_near, stages = min(self._solved, key=lambda s: abs(math.log(s[0] / T)))
            want = max(sharp, max(stages) / WARM_BACK)
            s = min(stages, key=lambda k: abs(math.log(k / want)))
            near = stages[s]
            # the price of delay rises about as 1 / (T - D_min) near the minimum delay
            lam = near.lam
            pole = self._fast[s][1] if s in self._fast else d_min
            if pole is not None and T > pole and t_near > pole:
                lam *= (t_near - pole) / (T - pole)
            return near.y.copy(), lam, s
        y = self._fast[sharp][0].copy() if sharp in self._fast else self._y0.copy()
        # a hardware intensity of about one at the cheap end, rising as 1 / (T - D_min)
        lam = max(float(w @ self._x_lo), 1e-30) / T
        if d_min is not None and T > d_min:
            lam *= T / (T - d_min)
        return y, lam, sharp


__all__ = ["GAP", "SWEEP_BUDGET", "LargeSizer", "LargeSolution", "SmoothTiming"]
