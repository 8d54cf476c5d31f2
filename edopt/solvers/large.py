"""Large-scale engine: smoothed timing, quasi-Newton steps and a certified optimality gap.

For networks far beyond what the interior-point reference handles (10^5-10^6 gates), every
iteration is a few vectorised passes over the timing graph, level by level (no loop over gates):

* **Smoothed timing.** The maximum at each node's inputs is replaced by a log-sum-exp of
  sharpness ``beta`` (1/tau). The smoothed arrival times are convex in the log sizes and never
  below the true ones, and their adjoints (one backward pass) are *flows*: arc weights that
  conserve at every node, exactly the multipliers of a Lagrangian relaxation of the timing
  constraints.
* **Steps.** For a multiplier ``lam`` of the delay bound, ``w @ x + lam * D_smooth`` is minimised
  over the log sizes within their bounds by a projected L-BFGS (``quasi_newton.py``), one
  forward and one backward pass per evaluation. Its recursion starts from each gate's own
  curvature at fixed flows (``_curvature``), not from one common scale.
  ``lam`` is adjusted (bracketed regula falsi in log ``lam``) until the *true* re-timed delay
  meets the bound; the sharpness grows until the gap closes.
* **Certificate.** With the node flows ``mu = lam * adjoint`` the Lagrangian's minimum over the
  sizes is a lower bound on the optimum (weak duality). The inner problem is convex in log sizes,
  so its value at the computed sizes plus the least value of its linearisation over the size box
  bounds that minimum from below, whatever the accuracy of the steps. The relative gap between
  the (feasible) sizing and that bound is the stopping rule.
* **Warm starts.** Each answer keeps its log sizes, multiplier and sharpness, the slope of its
  delay in the multiplier and how its multiplier and sizes moved with the sharpness (about in
  proportion to 1 / sharpness, ``_Solved``). The next bound of a sweep starts from the nearest
  one solved, moved back to its first (smoother) stage, its multiplier predicted by a power law
  in the excess over the minimum delay (``_predict``), and its first multiplier step aimed by the
  known slope; each sharper stage starts from the sizes and multiplier extrapolated in
  1 / sharpness. Before the multiplier is bracketed, a secant through the last two steps sets how
  far the next one goes. Within a search each step starts from the log sizes interpolated in
  ``log lam`` between the two nearest steps solved (``_between``).
* **Budget.** A solve stops after about ``BUDGET`` iterations with its best feasible answer and
  the gap it reached (status inaccurate): within about 1 % of the minimum delay the energy is so
  steep in the delay that the 0.1 % rule can take far longer.

Supported constraints: size bounds, fixed sizes (fixed nodes), input drivers of fixed size,
output loads and time allowances, wire capacitance, activity factors (all inside the Model).
Input-capacitance limits, stage-effort limits and area budgets are not: the reference engine
takes those.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass

import numpy as np
from scipy.optimize import Bounds, minimize

from ..errors import EdoptError
from ..model import Model
from .conic import INACCURATE, INFEASIBLE, OPTIMAL, Options, Solution
from .quasi_newton import minimise_box

GAP = 1e-3              # default stopping rule: relative gap to the certified bound
SHARP_START = 25.0      # first sharpness, in units of levels / delay (beta * T / depth)
SHARP_GROWTH = 4.0      # sharpness grows by this factor while the gap is open
SHARP_STAGES = 5        # at most this many sharpness stages of the minimum-delay solve
SHARP_TOP = 6400.0      # no stage is sharper than this
DELAY_RTOL = 1e-4       # multiplier steps that move the delay less than 1e-3 of this: done
SLACK_SHARE = 0.25      # the unused delay may cost this share of the gap (first order)
SECANT_MAX = 16         # multiplier updates per sharpness stage
STEP_ITERS = 4000       # L-BFGS-B iterations per inner minimisation (at most)
STEP_FTOL = 1e-10       # L-BFGS-B relative decrease that ends an inner minimisation ...
FAST_FTOL = 1e-8        # ... and the minimum-delay one (no multiplier search rides on it)
MEMORY = 10             # L-BFGS-B correction pairs
BOUND_SWEEPS = 30       # closed-form sweeps that tighten the certified bound
TIE = 1e-5              # fastest: weight of the normalised objective beside the delay
CURVE_FLOOR = 1.0       # the diagonal start is floored at this multiple of its mean
BUDGET = 8000           # iterations per solve; beyond them the best answer is returned as is
AIM_FLOOR = 0.03        # least aimed multiplier step (log) before the root is bracketed
PREDICT_RANGE = 30.0    # a predicted multiplier stays within this factor of its neighbour's
LAM_RANGE = 1e12        # multipliers beyond this factor of the first guess: bound unreachable


@dataclass
class _Solved:
    """A bound solved, kept for warm starts: its log sizes and multiplier at the final sharpness,
    the slope of ``log(delay / T)`` in ``log lam``, and the shifts of the multiplier and of the
    log sizes with sharpness (``log lam(sharp) ~ log lam* + bias / sharp``, likewise
    ``y(sharp) ~ y* + y_bias / sharp``; 0 and None until two stages were solved)."""

    T: float
    y: np.ndarray
    lam: float
    sharp: float
    slope: float | None
    bias: float
    y_bias: np.ndarray | None


@dataclass
class LargeSolution(Solution):
    """A Solution with its certificate.

    ``lower``: certified lower bound (objective units of the weights for ``cheapest``, tau for
    ``fastest``); ``gap``: relative gap of the answer above it; ``iterations``: L-BFGS-B
    iterations (each a forward and a backward pass); ``evaluations`` of the smoothed model.
    """

    lower: float = float("nan")
    gap: float = float("nan")
    iterations: int = 0
    evaluations: int = 0


class SmoothTiming:
    """Arrival times of a Model with exact or log-sum-exp maxima, and their adjoints.

    Start times of nodes that also have fan-in become *pseudo nodes* (indices n..N) of constant
    arrival, so that every maximum is over arcs.
    """

    def __init__(self, model: Model) -> None:
        m = self.model = model
        n = m.n
        src, dst = m.edge_src, m.edge_dst
        finite = np.isfinite(m.t0)
        has_in = np.bincount(dst, minlength=n) > 0
        mixed = np.flatnonzero(finite & has_in)
        self.N = n + mixed.size
        self.pseudo_t0 = m.t0[mixed]
        self.roots = ~has_in
        self.start = np.where(finite & ~has_in, m.t0, 0.0)
        src = np.concatenate([src, n + np.arange(mixed.size)])
        dst = np.concatenate([dst, mixed])
        order = np.lexsort((dst, m.level[dst]))
        self.src, self.dst = src[order], dst[order]
        key = m.level[self.dst]
        cuts = np.concatenate([[0], np.flatnonzero(np.diff(key)) + 1, [key.size]])
        self.levels = []
        for s, e in zip(cuts[:-1].tolist(), cuts[1:].tolist()):
            nodes, srcs = self.dst[s:e], self.src[s:e]
            first = np.concatenate([[0], np.flatnonzero(np.diff(nodes)) + 1])
            perm = np.argsort(srcs, kind="stable")
            by_src = srcs[perm]
            heads = np.concatenate([[0], np.flatnonzero(np.diff(by_src)) + 1])
            self.levels.append((s, e, nodes[first], first, perm, by_src[heads], heads))
        self.P = m.pin_load.tocsr()
        self.PT = m.pin_load.T.tocsr()

    def delays(self, x: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Node delays (tau) and loads (C_u)."""
        load = self.P @ x + self.model.fixed_load
        return self.model.p + load / x, load

    def true_delay(self, d: np.ndarray) -> float:
        a = np.empty(self.N)
        a[:self.model.n] = self.start + d
        a[self.model.n:] = self.pseudo_t0
        for s, e, u, first, *_ in self.levels:
            a[u] = np.maximum.reduceat(a[self.src[s:e]], first) + d[u]
        m = self.model
        return float(np.max(a[m.out_node] + m.out_allow))

    def smooth(self, d: np.ndarray, beta: float) -> tuple[float, np.ndarray, np.ndarray]:
        """Smoothed circuit delay, its adjoint per node (``N`` entries: the node flows of a unit
        flow to the outputs) and the share of that flow at each output."""
        m = self.model
        # scaled arrivals b = beta * a: one stable log-sum-exp per level
        b = np.empty(self.N)
        b[:m.n] = beta * (self.start + d)
        b[m.n:] = beta * self.pseudo_t0
        bd = beta * d
        for s, e, u, first, *_ in self.levels:
            b[u] = np.logaddexp.reduceat(b[self.src[s:e]], first) + bd[u]
        # share of each arc in its node's maximum, in one pass over all arcs
        share = np.exp(b[self.src] - (b[self.dst] - bd[self.dst]))
        a = b / beta
        v = a[m.out_node] + m.out_allow
        top = float(v.max())
        z = np.exp(beta * (v - top))
        out_share = z / z.sum()
        flow = np.zeros(self.N)
        np.add.at(flow, m.out_node, out_share)
        for s, e, _u, _first, perm, heads_node, heads in reversed(self.levels):
            part = (flow[self.dst[s:e]] * share[s:e])[perm]
            flow[heads_node] += np.add.reduceat(part, heads)
        return top + math.log(z.sum()) / beta, flow, out_share

    def start_value(self, flow: np.ndarray, out_share: np.ndarray) -> float:
        """Constant part of the Lagrangian per unit flow: start times and output allowances."""
        m = self.model
        return float(flow[:m.n][self.roots] @ self.start[self.roots]
                     + flow[m.n:] @ self.pseudo_t0 + out_share @ m.out_allow)


class LargeSizer:
    """The cheapest and fastest problems of one Model by the large-scale method (module doc).

    ``gap``: relative gap at which a solve stops (default 0.1 %). Answers carry ``lower``,
    ``gap`` and ``iterations``; ``status`` is optimal when the certified gap is within ``gap``.
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
        self.log_lo, self.log_hi = np.log(model.lo), np.log(model.hi)
        self.depth = max(1, int(model.level.max()) if model.n else 1)
        self._y0 = np.log(np.clip(np.ones(model.n), model.lo, model.hi))
        self._x_lo = np.where(self.free, model.lo, np.exp(self._y0))   # the smallest sizing
        self._states: list[_Solved] = []
        self._fast_y: np.ndarray | None = None
        self._fast_delay: float | None = None
        self.warm = True
        self.predict_sizes = True   # a step's start interpolated from the steps around it
        self.method = "own"     # inner steps: "own" (projected L-BFGS) or "scipy" (L-BFGS-B)
        self.diagonal = True    # own steps start from the per-gate curvature (``_curvature``)

    def fast_state(self) -> tuple[np.ndarray, float] | None:
        """Log sizes and true delay of the minimum-delay solve (None before ``fastest``): what
        another copy of this engine needs to start its sweep from (``set_fast_state``)."""
        if self._fast_y is None or self._fast_delay is None:
            return None
        return self._fast_y.copy(), self._fast_delay

    def set_fast_state(self, state: tuple[np.ndarray, float] | None) -> None:
        if state is not None:
            self._fast_y, self._fast_delay = state[0].copy(), float(state[1])

    # ------------------------------------------------------------- pieces
    def _minimise(self, y: np.ndarray, w: np.ndarray, lam: float, beta: float,
                  count: list[int], ftol: float = STEP_FTOL) -> np.ndarray:
        """Minimise ``w @ x + lam * D_smooth`` over the free log sizes from ``y``."""
        t, free = self.timing, self.free
        scaled = self.diagonal and self.method == "own"
        y = y.copy()
        scale = 1.0 / max(float(w @ np.exp(y)) + lam * t.true_delay(t.delays(np.exp(y))[0]),
                          1e-300)

        def value_grad(z: np.ndarray) -> tuple[float, np.ndarray]:
            count[1] += 1
            y[free] = z
            x = np.exp(y)
            d, load = t.delays(x)
            delay, flow, _ = t.smooth(d, beta)
            mu = lam * flow[:self.model.n]
            up = x * (t.PT @ (mu / x))
            grad = w * x + up - mu * load / x
            if scaled:
                return (scale * (float(w @ x) + lam * delay), scale * grad[free],
                        scale * self._curvature(w * x + up + mu * load / x, free))
            return scale * (float(w @ x) + lam * delay), scale * grad[free]

        lo, hi = self.log_lo[free], self.log_hi[free]
        if self.method == "scipy":
            res = minimize(value_grad, y[free], jac=True, method="L-BFGS-B",
                           bounds=Bounds(lo, hi),
                           options={"maxiter": STEP_ITERS, "ftol": ftol, "gtol": 1e-12,
                                    "maxcor": MEMORY})
        else:
            res = minimise_box(value_grad, y[free], lo, hi, STEP_ITERS, ftol, MEMORY)
        count[0] += int(res.nit)
        y[free] = res.x
        return y

    @staticmethod
    def _curvature(h: np.ndarray, free: np.ndarray) -> np.ndarray:
        """Diagonal start of the quasi-Newton recursion, per free gate: the curvature of
        ``w @ x + mu @ d(x)`` in the log sizes at fixed flows ``mu``,
        ``h = w x + x sum_i mu_i P_ij / x_i + mu_j load_j / x_j`` (the Hessian's diagonal; the
        smoothing's own curvature is left out), floored at its mean over the free gates: gates
        far off the critical paths have almost no curvature of their own, and unfloored they
        would take steps that the smoothing turns back (measured: slower, and the minimum-delay
        solve stalls)."""
        hf = h[free]
        return np.maximum(hf, CURVE_FLOOR * float(hf.mean()) + 1e-300)

    def _bound(self, mu: np.ndarray, w: np.ndarray, x: np.ndarray) -> float:
        """Certified lower bound of ``min_x w @ x + mu @ d(x)`` over the size box."""
        t, m, free = self.timing, self.model, self.free
        best = -math.inf
        for sweep in range(BOUND_SWEEPS + 1):
            d, load = t.delays(x)
            grad = w * x + x * (t.PT @ (mu / x)) - mu * load / x
            z = np.log(x)
            corr = np.minimum(grad * (self.log_lo - z), grad * (self.log_hi - z))
            best = max(best, float(w @ x + mu @ d) + float(corr[free].sum()))
            if sweep == BOUND_SWEEPS:
                break
            down = w + t.PT @ (mu / x)
            with np.errstate(divide="ignore", invalid="ignore"):
                new = np.sqrt(mu * load / down)
            new = np.clip(np.nan_to_num(new, nan=0.0, posinf=np.inf), m.lo, m.hi)
            x = np.where(free, np.sqrt(x * new), x)
        return best

    def _beta(self, delay: float, sharp: float) -> float:
        return sharp * self.depth / max(delay, 1e-12)

    # ------------------------------------------------------------- problems
    def fastest(self, weights: np.ndarray | None = None, tie: float = TIE) -> LargeSolution:
        """Least delay; off-critical gates take their cheapest sizes through a small ``tie``
        weight of ``weights @ x``. ``lower`` bounds the minimum delay (tau)."""
        t0 = time.perf_counter()
        m, t = self.model, self.timing
        w = m.e_lin if weights is None else np.asarray(weights, dtype=float)
        count = [0, 0]
        y = self._y0.copy()
        d0 = t.true_delay(t.delays(np.exp(y))[0])
        sharp, lower, gap, ftol = SHARP_START, -math.inf, math.inf, FAST_FTOL
        best_y, best = y, math.inf
        for _ in range(SHARP_STAGES):
            beta = self._beta(d0, sharp)
            e0 = max(float(w @ np.exp(y)), 1e-300)
            y = self._minimise(y, w * (tie * d0 / e0), 1.0, beta, count, ftol)
            x = np.exp(y)
            d, _ = t.delays(x)
            delay = t.true_delay(d)
            if delay < best:
                best_y, best = y.copy(), delay
            _, flow, share = t.smooth(d, beta)
            lower = max(lower, self._bound(flow[:m.n], np.zeros(m.n), x)
                        + t.start_value(flow, share))
            last, gap = gap, (best - lower) / lower
            d0 = delay
            if gap <= self.gap or count[0] > BUDGET:
                break
            if gap > 0.5 * last:      # the gap stalls: the steps, not the smoothing, limit it
                ftol *= 0.1
            sharp *= SHARP_GROWTH
        self._fast_y = best_y.copy()
        self._fast_delay = delay = best
        status = OPTIMAL if gap <= self.gap else INACCURATE
        return LargeSolution(
            np.exp(best_y), delay, delay, 0.0, status, "large", time.perf_counter() - t0,
            [f"large: {count[0]} iterations, certified gap {gap:.2e} ({status})"],
            lower=lower, gap=gap, iterations=count[0], evaluations=count[1])

    def cheapest(self, bound_tau: float, weights: np.ndarray) -> LargeSolution:
        """Least ``weights @ x`` with the true delay <= ``bound_tau``; ``lower`` bounds it."""
        t0 = time.perf_counter()
        m, t = self.model, self.timing
        T = float(bound_tau)
        w = np.asarray(weights, dtype=float)
        count = [0, 0]
        # the cheapest sizing of all (every free gate at its lower bound) may meet the bound
        x_lo = self._x_lo
        d_lo = t.true_delay(t.delays(x_lo)[0])
        if d_lo <= T:
            energy = float(w @ x_lo)
            return LargeSolution(
                x_lo, d_lo, energy, 0.0, OPTIMAL, "large", time.perf_counter() - t0,
                ["large: the bound is slack at the smallest sizes (exact optimum)"],
                lower=energy, gap=0.0, iterations=0, evaluations=1)
        y, lam, sharp, jump, slope, bias, y_bias = self._start(T, w)
        lam_first = lam
        lower, gap, best = -math.inf, math.inf, None
        stages: list[tuple[float, float]] = []    # (sharpness, log lam) of each stage solved
        y_solved: np.ndarray | None = None        # log sizes at the end of the last stage
        notes: list[str] = []
        if self._fast_y is not None and self._fast_delay is not None and self._fast_delay <= T:
            # the minimum-delay sizing meets the bound: the answer is never worse than it
            x_fast = np.exp(self._fast_y)
            best = (x_fast, float(w @ x_fast), self._fast_delay, math.nan)
        while sharp <= SHARP_TOP * (1 + 1e-9):
            beta = self._beta(T, sharp)
            # a cold start brackets by factors of e; a warm one (a sharper stage, a neighbouring
            # bound) starts close to the answer and brackets by 10 % first
            found = self._meet(y, w, lam, beta, T, count, lam_first, jump, slope)
            jump = 0.1
            if found is None:
                # too close to the minimum delay for this sharpness: the smoothing's own excess
                # keeps the bound out of reach; a sharper stage may reach it
                notes.append(f"sharpness {sharp:g}: bound not reached")
                sharp *= SHARP_GROWTH
                continue
            # the certificate at the feasible answer, with the multiplier it was solved for
            x, delay, lam, y, lam_next, slope = found
            stages.append((sharp, math.log(lam)))
            if y_solved is not None:
                (s1, l1), (s2, l2) = stages[-2:]
                bias = (l1 - l2) / (1.0 / s1 - 1.0 / s2)
                y_bias = (y_solved - y) / (1.0 / s1 - 1.0 / s2)
            y_solved = y
            d, _ = t.delays(x)
            _, flow, share = t.smooth(d, beta)
            mu = lam * flow[:m.n]
            low = self._bound(mu, w, x) + lam * (t.start_value(flow, share) - T)
            lower = max(lower, low)
            energy = float(w @ x)
            if best is None or energy < best[1]:
                best = (x, energy, delay, lam)
            gap = (best[1] - lower) / abs(lower) if lower > 0 else math.inf
            notes.append(f"sharpness {sharp:g}: gap {gap:.2e}")
            if gap <= self.gap or count[0] > BUDGET:
                break
            # the multiplier falls as the smoothing sharpens (about bias / sharpness in log); the
            # sizes move likewise (measured on 10^4 gates, 25-point sweep: 16 % fewer
            # iterations than starting each stage where the last one ended)
            shift = 1.0 / (SHARP_GROWTH * sharp) - 1.0 / sharp
            lam = lam_next * math.exp(bias * shift)
            y = self._shifted(y, y_bias, shift)
            sharp *= SHARP_GROWTH
        if best is None:
            return LargeSolution(
                np.exp(y), math.nan, math.nan, math.nan, INFEASIBLE, "large",
                time.perf_counter() - t0,
                [f"large: bound {T:.6g} tau not met at any sharpness; " + ", ".join(notes)],
                iterations=count[0], evaluations=count[1])
        x, energy, delay, lam = best
        if math.isfinite(lam) and y_solved is not None:
            self._states.append(_Solved(T, y_solved.copy(), lam, stages[-1][0], slope, bias,
                                        y_bias))
        status = OPTIMAL if gap <= self.gap else INACCURATE
        return LargeSolution(
            x, delay, energy, lam, status, "large", time.perf_counter() - t0,
            [f"large: {count[0]} iterations, certified gap {gap:.2e} ({status}); "
             + ", ".join(notes)],
            lower=lower, gap=gap, iterations=count[0], evaluations=count[1])

    def _shifted(self, y: np.ndarray, y_bias: np.ndarray | None, shift: float) -> np.ndarray:
        """Log sizes ``y`` moved by ``y_bias * shift`` (a change of 1 / sharpness), in the box."""
        if not self.predict_sizes or y_bias is None:
            return y.copy()
        return np.where(self.free, np.clip(y + shift * y_bias, self.log_lo, self.log_hi), y)

    def _start(self, T: float, w: np.ndarray
               ) -> tuple[np.ndarray, float, float, float, float | None, float,
                          np.ndarray | None]:
        """Warm start from the nearest bound solved, else from the fastest sizing: log sizes,
        multiplier, first sharpness, first multiplier jump, slope, bias and y_bias
        (``_Solved``)."""
        # the smoothing adds about T * log(2) / sharpness to the delay: close to the minimum
        # delay the first stage must be sharp enough for the bound to be reachable at all
        close = SHARP_START
        if self._fast_delay is not None and T > self._fast_delay:
            close = min(SHARP_TOP, max(SHARP_START, 2.0 / (1.0 - self._fast_delay / T)))
        if self.warm and self._states:
            # sizes and multiplier from the nearest bound solved; the sharpness starts afresh
            # (a sharper smoothing than the target needs only slows the steps down)
            near = sorted(self._states, key=lambda s: abs(math.log(s.T / T)))
            first = near[0]
            lam = self._predict(T, near[:2]) * math.exp(first.bias / close)
            # the neighbour's sizes, moved back to this start's (smoother) sharpness
            y = self._shifted(first.y, first.y_bias, 1.0 / close - 1.0 / first.sharp)
            return y, lam, close, 0.1, first.slope, first.bias, first.y_bias
        y = self._fast_y.copy() if self._fast_y is not None else self._y0.copy()
        # a hardware intensity of about one at the cheap end: the smallest sizes' energy / T
        return y, max(float(w @ self._x_lo), 1e-30) / T, close, 1.0, None, 0.0, None

    def _predict(self, T: float, near: list[_Solved]) -> float:
        """Multiplier for bound ``T`` from the nearest solved bounds, without the smoothing's
        shift (``lam* = lam exp(-bias / sharp)``): a power law in the excess over the minimum
        delay (the price rises steeply towards it), fitted through the two nearest, else of
        exponent -1; within a factor PREDICT_RANGE of the nearest."""
        stars = [(s.T, s.lam * math.exp(-s.bias / s.sharp)) for s in near]
        t_near, lam_near = stars[0]
        d0 = self._fast_delay
        if d0 is None or not (T > d0 and t_near > d0):
            return lam_near
        slope = -1.0
        if len(stars) > 1 and stars[1][0] > d0 and abs(stars[1][0] - t_near) > 1e-9 * T:
            slope = (math.log(stars[1][1] / lam_near)
                     / math.log((stars[1][0] - d0) / (t_near - d0)))
            slope = min(0.0, max(-3.0, slope))
        factor = ((T - d0) / (t_near - d0)) ** slope
        return lam_near * min(PREDICT_RANGE, max(1.0 / PREDICT_RANGE, factor))

    def _between(self, solved: list[tuple[float, np.ndarray]], ll: float) -> np.ndarray:
        """Start of the step at log multiplier ``ll``: the log sizes interpolated (or, by at most
        the distance between them, extrapolated) linearly in ``log lam`` from the two solved
        steps nearest to it, within the size box."""
        (la, ya), (lb, yb) = sorted(solved, key=lambda s: abs(s[0] - ll))[:2]
        if abs(lb - la) < 1e-12:
            return ya.copy()
        f = min(2.0, max(-1.0, (ll - la) / (lb - la)))
        y = ya + f * (yb - ya)
        return np.where(self.free, np.clip(y, self.log_lo, self.log_hi), ya)

    def _meet(self, y: np.ndarray, w: np.ndarray, lam: float, beta: float, T: float,
              count: list[int], lam_first: float, jump: float = 1.0,
              slope: float | None = None):
        """Adjust the multiplier until the true delay is just below ``T`` (its unused part worth
        at most SLACK_SHARE of the gap).

        Regula falsi (Illinois) on ``log(delay / T)`` against ``log lam``, after bracketing by
        factors of e, e^2, e^4, ... or, given the ``slope`` of ``log(delay / T)`` in ``log lam``
        (a sharper stage, a neighbouring bound), after secant steps aimed just inside the bound.
        Returns ``(x, delay, lam)`` of the best feasible point, ``(y, lam)`` of the last step
        (where a sharper stage starts) and the last slope seen, or None."""
        t = self.timing
        lo: tuple | None = None       # (log lam, residual > 0: too slow)
        hi: tuple | None = None       # (log lam, residual <= 0: meets the bound)
        feasible = None
        side = 0
        ll = math.log(lam)
        last = math.inf
        prev: tuple[float, float] | None = None    # (log lam, residual) of the step before
        solved: list[tuple[float, np.ndarray]] = []   # (log lam, log sizes) of each step
        aimed = slope is not None and slope < 0
        step_before: tuple[float, float] | None = None
        for _ in range(SECANT_MAX):
            if count[0] > BUDGET and feasible is not None:
                break
            if self.predict_sizes and len(solved) >= 2:
                y = self._between(solved, ll)
            y = self._minimise(y, w, math.exp(ll), beta, count)
            solved.append((ll, y))
            x = np.exp(y)
            delay = t.true_delay(t.delays(x)[0])
            r = math.log(delay / T)
            if step_before is not None and abs(ll - step_before[0]) >= AIM_FLOOR / 3:
                seen = (r - step_before[1]) / (ll - step_before[0])
                if seen < 0:
                    slope = seen
            step_before = (ll, r)
            # unused delay (relative) worth SLACK_SHARE of the gap, to first order
            room = max(SLACK_SHARE * self.gap * float(w @ x) / (math.exp(ll) * T),
                       DELAY_RTOL * 1e-2)
            if r <= 0 and (feasible is None or r > feasible[3]):
                feasible = (y.copy(), math.exp(ll), x, r, delay)
            if abs(r - last) < 1e-3 * DELAY_RTOL or (
                    lo is not None and hi is not None and hi[0] - lo[0] < 1e-9):
                break     # the steps no longer move the delay: the answer is as close as it gets
            last = r
            if r <= 0:
                # close enough when the unused delay is worth a small part of the gap
                # (first order: multiplier x slack) or within DELAY_RTOL
                if -r <= room:
                    break
                hi = (ll, r)
                if side == -1 and lo is not None:
                    lo = (lo[0], lo[1] / 2)
                side = -1
            else:
                lo = (ll, r)
                if side == 1 and hi is not None:
                    hi = (hi[0], hi[1] / 2)
                side = 1
            if (lo is None or hi is None) and aimed and slope is not None:
                # the first step of a warm start, slope known: a secant step aimed at half the
                # room inside, of at least AIM_FLOOR (the inner steps do not resolve smaller
                # moves from one start; once bracketed, the starts are interpolated and they
                # do); later steps bracket as from a cold start (measured: aiming every step
                # fights the inner steps' noise near the minimum delay)
                move = (-0.5 * room - r) / slope
                ll += math.copysign(min(8.0 * jump, max(AIM_FLOOR, abs(move))), move)
                aimed = False
            elif lo is None or hi is None:
                # not bracketed yet: a secant through the last two steps predicts how far the
                # root is; overshoot it a little (to bracket), within 1 to 8 times the jump
                step = jump
                if prev is not None and ll != prev[0]:
                    slope = (r - prev[1]) / (ll - prev[0])
                    if slope < 0:
                        step = min(8.0 * jump, max(jump, 1.25 * abs(r / slope)))
                prev = (ll, r)
                ll += step if lo is not None else -step
                jump = 2.0 * step
                if hi is None and ll - math.log(lam_first) > math.log(LAM_RANGE):
                    return None
            else:
                ll = hi[0] - hi[1] * (lo[0] - hi[0]) / (lo[1] - hi[1])
        if feasible is None:
            return None
        # the feasible answer, and where the next (sharper) stage should start: the last step
        return feasible[2], feasible[4], feasible[1], y, math.exp(ll), slope


__all__ = ["GAP", "LargeSizer", "LargeSolution", "SmoothTiming"]
