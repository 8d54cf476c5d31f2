"""Benchmark: the large-scale engine (issue 7) on generated random layered networks.

Rows (one process per network size, so that the peak memory is that size's own):

- build s / compile s: generating the circuit (``random_layered``) and compiling the model;
- fastest s, fastest it, fastest gap %: the minimum-delay solve and its certified gap;
- target s, target it, target gap %: the cheapest sizing at 1.3 x the minimum delay found;
- ms/it: seconds per L-BFGS-B iteration of the target solve (one forward and one backward pass
  over the graph, plus line-search evaluations); compare it across sizes for linear growth;
- peak MB: the process's peak resident memory.

    python benchmarks/large_engine.py [gates ...] [--frontier] [--reference N]
    python benchmarks/large_engine.py --evaluation [gates ...]

Defaults: 10,000 and 100,000 gates (add 1000000 for a million). ``--frontier``: a 25-point
frontier of 10,000 gates (total seconds and gaps). ``--reference N``: both engines at the same
targets on N gates (default 2,000), time and energy side by side. ``--evaluation``: the time of
one evaluation (forward and backward pass and gradient) at 10^4, 10^5 and 10^6 gates, for the
linear growth of the time per iteration.
"""

from __future__ import annotations

import json
import resource
import subprocess
import sys
import time

FACTOR = 1.3


def _progress(text: str) -> None:
    print(f"# {text}", file=sys.stderr, flush=True)


def one(gates: int) -> dict:
    from edopt.generators import random_layered
    from edopt.sizing import Sizer

    t0 = time.perf_counter()
    circuit = random_layered(gates, seed=1)
    build = time.perf_counter() - t0
    t0 = time.perf_counter()
    sizer = Sizer(circuit, engine="large")
    compile_s = time.perf_counter() - t0
    del circuit
    _progress(f"{gates} gates: built in {build:.1f} s, compiled in {compile_s:.1f} s")
    t0 = time.perf_counter()
    fast = sizer.fastest()
    fast_s = time.perf_counter() - t0
    _progress(f"{gates} gates: minimum delay in {fast_s:.1f} s ({fast.iterations} iterations)")
    t0 = time.perf_counter()
    res = sizer.cheapest(FACTOR * fast.delay_ps)
    target_s = time.perf_counter() - t0
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return {"gates": gates, "build s": build, "compile s": compile_s, "fastest s": fast_s,
            "fastest it": fast.iterations, "fastest gap %": fast.gap_pct,
            "target s": target_s, "target it": res.iterations, "target gap %": res.gap_pct,
            "status": res.status, "ms/it": 1000 * target_s / max(res.iterations or 1, 1),
            "retimed": res.delay_ps / (FACTOR * fast.delay_ps), "peak MB": peak}


def per_iteration(gates: int, repeats: int = 20) -> dict:
    """Seconds of one evaluation (smoothed timing forward and backward, gradient) at a size."""
    import numpy as np

    from edopt.generators import random_layered
    from edopt.sizing import Sizer

    sizer = Sizer(random_layered(gates, seed=1), engine="large")
    eng = sizer.engine
    t, m = eng.timing, sizer.model
    x = np.clip(np.exp(np.random.default_rng(0).uniform(0, 2, m.n)), m.lo, m.hi)
    beta = eng._beta(t.true_delay(t.delays(x)[0]), 100.0)
    t0 = time.perf_counter()
    for _ in range(repeats):
        d, load = t.delays(x)
        _, flow, _ = t.smooth(d, beta)
        mu = flow[:m.n]
        _ = x * (t.PT @ (mu / x)) - mu * load / x
    each = (time.perf_counter() - t0) / repeats
    peak = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return {"gates": gates, "levels": int(m.level.max()), "ms/evaluation": 1000 * each,
            "peak MB": peak}


def frontier_rows(gates: int = 10_000) -> dict:
    import edopt
    from edopt.generators import random_layered
    from edopt.sizing import Sizer

    sizer = Sizer(random_layered(gates, seed=2), engine="large")
    t0 = time.perf_counter()
    front = edopt.frontier(sizer, points=25, span=2.0)
    total = time.perf_counter() - t0
    table = front.table
    gaps = [p.gap_pct for p in front.points if hasattr(p, "gap_pct") and p.gap_pct is not None]
    return {"gates": gates, "points": len(table), "total s": total,
            "optimal": int((table["status"] == "optimal").sum()),
            "largest gap %": max(gaps) if gaps else None}


def reference_rows(gates: int) -> list[dict]:
    from edopt.generators import random_layered
    from edopt.sizing import Sizer

    circuit = random_layered(gates, seed=1)
    rows = []
    for engine in ("reference", "large"):
        sizer = Sizer(circuit, engine=engine)
        t0 = time.perf_counter()
        d_min = sizer.min_delay_ps
        fast_s = time.perf_counter() - t0
        for factor in (1.2, 1.5):
            target = factor * (rows[0]["min delay ps"] if rows else d_min)
            t0 = time.perf_counter()
            res = sizer.cheapest(target)
            rows.append({"engine": engine, "gates": gates, "min delay ps": d_min,
                         "fastest s": fast_s, "factor": factor, "target s":
                         time.perf_counter() - t0, "energy fJ": res.energy_fj,
                         "status": res.status, "gap %": res.gap_pct})
    return rows


def _print(rows: list[dict]) -> None:
    cols = list(rows[0])
    print(" | ".join(cols))
    for r in rows:
        print(" | ".join(f"{r[c]:.4g}" if isinstance(r[c], float) else str(r[c]) for c in cols))


def main(argv: list[str]) -> None:
    if argv[:1] == ["--one"]:
        print(json.dumps(one(int(argv[1]))))
        return
    if argv[:1] == ["--evaluation"]:
        rows = []
        for gates in [int(a) for a in argv[1:]] or [10_000, 100_000, 1_000_000]:
            out = subprocess.run([sys.executable, __file__, "--evaluation-one", str(gates)],
                                 check=True, capture_output=True, text=True).stdout
            rows.append(json.loads(out.strip().splitlines()[-1]))
        _print(rows)
        return
    if argv[:1] == ["--evaluation-one"]:
        print(json.dumps(per_iteration(int(argv[1]))))
        return
    if "--frontier" in argv:
        _print([frontier_rows()])
        return
    if "--reference" in argv:
        k = argv.index("--reference")
        n = int(argv[k + 1]) if len(argv) > k + 1 else 2000
        _print(reference_rows(n))
        return
    sizes = [int(a) for a in argv] or [10_000, 100_000]
    rows = []
    for gates in sizes:
        # the child's progress lines (stderr) pass through; its result row is its last stdout line
        out = subprocess.run([sys.executable, __file__, "--one", str(gates)], check=True,
                             stdout=subprocess.PIPE, text=True).stdout
        rows.append(json.loads(out.strip().splitlines()[-1]))
        print(f"# {gates} gates done", file=sys.stderr)
    _print(rows)


if __name__ == "__main__":
    main(sys.argv[1:])
