"""Compiled loops (numba) of the large engine, used when numba is installed.

**Timing passes** (``SmoothTiming``).
Each pass visits the nodes once in topological order (the model's own order: every arc goes
to a later node) and each node's fan-in arcs from a CSR index by sink (``in_ptr``, ``in_src``).
One compiled loop over 10^4-10^6 nodes replaces the level-by-level numpy passes (a few numpy
calls per level) and the sparse triangular solves, whose call overheads dominate at these sizes.

**The value and gradient of the large engine's objective** around the timing passes (sizes
from the free log sizes, delays and loads; then the gradient and the diagonal curvature from
the node flows): one loop each instead of some thirty numpy calls.

**The projected L-BFGS step** (``quasi_newton.py``): the direction (variables held at their
bounds, the two-loop recursion over correction pairs stored as rows of two arrays), the trial
point and the new pair, each one loop instead of a few numpy calls per variable vector.

Without numba, ``AVAILABLE`` is False and the callers keep their numpy/scipy code (the same
numbers to rounding; the tests compare the two).
"""

from __future__ import annotations

import math

import numpy as np

try:
    import numba
except ImportError:     # pragma: no cover - numba is a dependency; this keeps edopt usable
    numba = None

AVAILABLE = numba is not None
CUT = 40.0      # log-sum-exp terms this far below the largest are left out (exp(-40) = 4e-18)


def _lse_forward(b: np.ndarray, bd: np.ndarray, in_ptr: np.ndarray, in_src: np.ndarray,
                 share: np.ndarray) -> None:
    """Scaled smoothed arrivals in place: ``b[u] = bd[u] + log sum_i exp(b[i])`` over the
    fan-in of every node with fan-in (the others keep their preset start values), and each
    arc's share of its node's sum. Terms more than ``CUT`` below the largest are left out
    (each under 1e-17 of the sum)."""
    n = in_ptr.size - 1
    for u in range(n):
        s, e = in_ptr[u], in_ptr[u + 1]
        if s == e:
            continue
        if e - s == 1:
            b[u] = b[in_src[s]] + bd[u]
            share[s] = 1.0
            continue
        top, at = -math.inf, s
        for k in range(s, e):
            if b[in_src[k]] > top:
                top, at = b[in_src[k]], k
        acc = 0.0
        for k in range(s, e):
            v = b[in_src[k]] - top
            z = 1.0 if k == at else (math.exp(v) if v > -CUT else 0.0)
            share[k] = z
            acc += z
        if acc == 1.0:          # one term left: no division, no logarithm
            b[u] = top + bd[u]
            continue
        for k in range(s, e):
            share[k] /= acc
        b[u] = top + bd[u] + math.log(acc)


def _lse_backward(flow: np.ndarray, in_ptr: np.ndarray, in_src: np.ndarray,
                  share: np.ndarray) -> None:
    """The adjoint of ``_lse_forward`` in place: each node's flow goes back to its fan-in in
    proportion to each arc's share of the node's sum."""
    n = in_ptr.size - 1
    for u in range(n - 1, -1, -1):
        f = flow[u]
        if f == 0.0:
            continue
        for k in range(in_ptr[u], in_ptr[u + 1]):
            flow[in_src[k]] += f * share[k]


def _smooth(d: np.ndarray, beta: float, start: np.ndarray, pseudo_t0: np.ndarray,
            in_ptr: np.ndarray, in_src: np.ndarray, share: np.ndarray, out_node: np.ndarray,
            out_allow: np.ndarray, b: np.ndarray, flow: np.ndarray, out_share: np.ndarray
            ) -> float:
    """The smoothed circuit delay: scaled arrivals ``b`` (start values, then
    ``_lse_forward``), the log-sum-exp over the outputs and each output's share of it, and the
    node flows back from the outputs (``flow``, all zeros on entry; ``_lse_backward``)."""
    n = d.size
    bd = np.empty(n)
    for i in range(n):
        bd[i] = beta * d[i]
        b[i] = beta * start[i] + bd[i]
    for k in range(pseudo_t0.size):
        b[n + k] = beta * pseudo_t0[k]
    lse_forward(b, bd, in_ptr, in_src, share)
    top = -math.inf
    for k in range(out_node.size):
        top = max(top, b[out_node[k]] + beta * out_allow[k])
    total = 0.0
    for k in range(out_node.size):
        out_share[k] = math.exp(b[out_node[k]] + beta * out_allow[k] - top)
        total += out_share[k]
    for k in range(out_node.size):
        out_share[k] /= total
        flow[out_node[k]] += out_share[k]
    lse_backward(flow, in_ptr, in_src, share)
    return (top + math.log(total)) / beta


def _max_forward(a: np.ndarray, d: np.ndarray, in_ptr: np.ndarray, in_src: np.ndarray
                 ) -> None:
    """Exact arrivals in place: ``a[u] = d[u] + max_i a[i]`` over the fan-in."""
    n = in_ptr.size - 1
    for u in range(n):
        s, e = in_ptr[u], in_ptr[u + 1]
        if s == e:
            continue
        top = -math.inf
        for k in range(s, e):
            top = max(top, a[in_src[k]])
        a[u] = top + d[u]


def _min_backward(q: np.ndarray, d: np.ndarray, in_ptr: np.ndarray, in_src: np.ndarray
                  ) -> None:
    """Required times in place: ``q[i] = min(q[i], q[u] - d[u])`` over every arc ``i -> u``,
    sinks before their sources."""
    n = in_ptr.size - 1
    for u in range(n - 1, -1, -1):
        r = q[u] - d[u]
        for k in range(in_ptr[u], in_ptr[u + 1]):
            i = in_src[k]
            if r < q[i]:
                q[i] = r


def _sizes_delays(z: np.ndarray, free: np.ndarray, y: np.ndarray, x: np.ndarray,
                  p_ptr: np.ndarray, p_idx: np.ndarray, p_val: np.ndarray,
                  fixed_load: np.ndarray, parasitic: np.ndarray, d: np.ndarray,
                  load: np.ndarray) -> None:
    """``y[free] = z``, ``x = exp(y)``, ``load = P x + fixed_load``, ``d = p + load / x``."""
    for k in range(free.size):
        y[free[k]] = z[k]
    n = y.size
    for i in range(n):
        x[i] = math.exp(y[i])
    for i in range(n):
        acc = fixed_load[i]
        for k in range(p_ptr[i], p_ptr[i + 1]):
            acc += p_val[k] * x[p_idx[k]]
        load[i] = acc
        d[i] = parasitic[i] + acc / x[i]


def _gradient(x: np.ndarray, w: np.ndarray, lam: float, flow: np.ndarray, load: np.ndarray,
              pt_ptr: np.ndarray, pt_idx: np.ndarray, pt_val: np.ndarray, free: np.ndarray,
              floor: float, scale: float, work: np.ndarray, grad: np.ndarray,
              h: np.ndarray) -> float:
    """Gradient of ``w @ x + lam * D`` in the free log sizes from the node flows of ``D``,
    and the diagonal curvature start of L-BFGS (floored at ``floor`` times its mean), both
    times ``scale``; returns ``w @ x``."""
    n = x.size
    energy = 0.0
    for i in range(n):
        work[i] = lam * flow[i] / x[i]
        energy += w[i] * x[i]
    total = 0.0
    for k in range(free.size):
        i = free[k]
        acc = 0.0
        for m in range(pt_ptr[i], pt_ptr[i + 1]):
            acc += pt_val[m] * work[pt_idx[m]]
        up = x[i] * acc
        wx = w[i] * x[i]
        own = work[i] * load[i]
        grad[k] = scale * (wx + up - own)
        h[k] = wx + up + own
        total += h[k]
    least = floor * total / max(free.size, 1) + 1e-300
    for k in range(free.size):
        h[k] = scale * max(h[k], least)
    return energy


def _two_loop(g: np.ndarray, S: np.ndarray, Y: np.ndarray, rho: np.ndarray,
              order: np.ndarray, h: np.ndarray, q: np.ndarray) -> None:
    """``q = H g`` of L-BFGS: pairs ``S[i], Y[i], rho[i]`` for ``i`` in ``order`` (oldest
    first), the recursion started from the inverse of the diagonal ``h`` (all ones: the
    identity) scaled by the newest pair."""
    n, k = g.size, order.size
    alpha = np.empty(k)
    for j in range(n):
        q[j] = g[j]
    for m in range(k - 1, -1, -1):
        i = order[m]
        a = 0.0
        for j in range(n):
            a += S[i, j] * q[j]
        a *= rho[i]
        alpha[m] = a
        for j in range(n):
            q[j] -= a * Y[i, j]
    scale = 1.0
    if k > 0:
        i = order[k - 1]
        yy = 0.0
        for j in range(n):
            yy += Y[i, j] * Y[i, j] / h[j]
        scale = 1.0 / (rho[i] * yy)
    for j in range(n):
        q[j] *= scale / h[j]
    for m in range(k):
        i = order[m]
        b = 0.0
        for j in range(n):
            b += Y[i, j] * q[j]
        c = alpha[m] - rho[i] * b
        for j in range(n):
            q[j] += c * S[i, j]


def _direction(x: np.ndarray, g: np.ndarray, lo: np.ndarray, hi: np.ndarray,
               S: np.ndarray, Y: np.ndarray, rho: np.ndarray, order: np.ndarray,
               h: np.ndarray, gf: np.ndarray, p: np.ndarray) -> tuple[float, bool]:
    """The projected L-BFGS direction ``p = -H gf`` (``gf``: the gradient without the
    variables held at a bound it pushes against, which stay put) and the slope ``g @ p``;
    False when no variable is free to move."""
    n = x.size
    moving = False
    for j in range(n):
        held = (x[j] <= lo[j] and g[j] > 0.0) or (x[j] >= hi[j] and g[j] < 0.0)
        gf[j] = 0.0 if held else g[j]
        moving = moving or gf[j] != 0.0
    if not moving:
        return 0.0, False
    two_loop(gf, S, Y, rho, order, h, p)
    slope = 0.0
    for j in range(n):
        if gf[j] == 0.0 and g[j] != 0.0:      # held
            p[j] = 0.0
        else:
            p[j] = -p[j]
        slope += g[j] * p[j]
    return slope, True


def _trial(x: np.ndarray, p: np.ndarray, step: float, lo: np.ndarray, hi: np.ndarray,
           g: np.ndarray, xn: np.ndarray) -> float:
    """``xn = clip(x + step p, lo, hi)``; returns ``g @ (xn - x)``."""
    change = 0.0
    for j in range(x.size):
        v = min(max(x[j] + step * p[j], lo[j]), hi[j])
        xn[j] = v
        change += g[j] * (v - x[j])
    return change


def _pair(xn: np.ndarray, x: np.ndarray, gn: np.ndarray, g: np.ndarray, S: np.ndarray,
          Y: np.ndarray, i: int) -> tuple[float, float, float]:
    """Row ``i`` of ``S`` and ``Y`` = ``xn - x`` and ``gn - g``; returns ``s.y``, ``|s|``,
    ``|y|``."""
    sy = ss = yy = 0.0
    for j in range(x.size):
        a, b = xn[j] - x[j], gn[j] - g[j]
        S[i, j], Y[i, j] = a, b
        sy += a * b
        ss += a * a
        yy += b * b
    return sy, math.sqrt(ss), math.sqrt(yy)


if numba is not None:
    _jit = numba.njit(cache=True, nogil=True, error_model="numpy")
    lse_forward = _jit(_lse_forward)
    lse_backward = _jit(_lse_backward)
    smooth = _jit(_smooth)
    max_forward = _jit(_max_forward)
    min_backward = _jit(_min_backward)
    # reassociated (vectorised) sums: the dot products are otherwise bound by the add latency
    sizes_delays = _jit(_sizes_delays)
    gradient = _jit(_gradient)
    two_loop = numba.njit(cache=True, nogil=True, fastmath={"reassoc", "contract"})(_two_loop)
    direction = _jit(_direction)
    trial = _jit(_trial)
    pair = _jit(_pair)
else:     # pragma: no cover - the plain functions are far too slow to be used in their place
    lse_forward = lse_backward = smooth = max_forward = min_backward = None
    sizes_delays = gradient = two_loop = direction = trial = pair = None


__all__ = ["AVAILABLE", "direction", "gradient", "lse_backward", "lse_forward",
           "max_forward", "min_backward", "pair", "sizes_delays", "smooth", "trial",
           "two_loop"]
