"""Slack recovery: shrink the gates that have slack, never past the delay bound (large engine).

A smoothed-timing answer over-sizes gates on paths just short of critical (the log-sum-exp
still sends them some flow), and the minimum-delay answer sizes its off-critical gates only
through a small tie weight. Each round here gives every gate a delay budget

    b_i = d_i + slack_i * d_i / L_i,

its delay plus a share of its slack in proportion to its delay, where ``L_i = bound - slack_i``
is the longest path through it. Along any path p (delay D_p, so L_i >= D_p and
slack_i <= bound - D_p) the shares add up to at most ``bound - D_p``: with the budgets as
delays every path still meets the bound (start times and output allowances not negative;
the round is re-timed anyway and refused if it does not). One pass from the outputs back, a
vectorised step per logic level, then gives each free gate the least size that meets its
budget with the (already shrunk) load it drives: ``x_i = C_L,i / (b_i - p_i)``, within its
bounds. Sizes only fall, so the energy (non-negative weights) never rises. The slack spread in
proportion to delay is conservative, so the rounds go on until one saves less than ``tol``.
"""

from __future__ import annotations

import numpy as np

from .smooth_timing import SmoothTiming

ROUNDS = 30        # rounds at most
TOL = 1e-5         # ... until a round saves less than this share of the objective
SAFETY = 1e-9      # budgets keep this share of each slack back (rounding)


class Downsizer:
    """Slack recovery over the free gates of a SmoothTiming's model (module doc)."""

    def __init__(self, timing: SmoothTiming, free: np.ndarray) -> None:
        self.timing = timing
        m = timing.model
        order = np.argsort(-m.level, kind="stable")
        order = order[free[order]]
        cuts = np.flatnonzero(np.diff(m.level[order])) + 1
        P = timing.P
        # the free gates level by level from the outputs back, with their rows of the pin
        # loads and their constants: each step of a backward sizing pass
        self.groups = [(nodes, P[nodes], m.fixed_load[nodes], m.p[nodes], m.lo[nodes],
                        m.hi[nodes]) for nodes in np.split(order, cuts) if nodes.size]

    def __call__(self, x: np.ndarray, w: np.ndarray, bound: float, rounds: int = ROUNDS,
                 tol: float = TOL) -> tuple[np.ndarray, float, int]:
        """Sizes no larger than ``x`` (which meets ``bound``), their true delay and the rounds
        kept; ``w``: the objective's weights (non-negative), for the stopping rule."""
        t = self.timing
        n = t.model.n
        x = np.array(x, dtype=float)
        d = t.delays(x)[0]
        a = t.arrivals(d)
        delay = t.circuit_delay(a)
        energy = float(w @ x)
        kept = 0
        for _ in range(rounds):
            slack = t.required(d, bound) - a[:n]
            longest = bound - slack
            with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
                share = np.where(np.isfinite(slack) & (slack > 0) & (longest > 0),
                                 slack * d / longest, 0.0)
            budget = np.where(np.isinf(slack), np.inf, d + (1 - SAFETY) * share)
            new = x.copy()
            with np.errstate(invalid="ignore", divide="ignore"):
                for nodes, rows, fixed, p, lo, _hi in self.groups:
                    # no load (0 / 0): nan, which fmax turns into the lower bound
                    size = np.fmax((rows @ new + fixed) / (budget[nodes] - p), lo)
                    new[nodes] = np.minimum(size, new[nodes])
            new_d = t.delays(new)[0]
            new_a = t.arrivals(new_d)
            new_delay = t.circuit_delay(new_a)
            new_energy = float(w @ new)
            if new_delay > bound or new_energy > energy:
                break
            saved = energy - new_energy
            x, d, a, delay, energy, kept = new, new_d, new_a, new_delay, new_energy, kept + 1
            if saved <= tol * abs(energy):
                break
        return x, delay, kept


__all__ = ["Downsizer"]
