"""Benchmark: the large-scale engine on generated random layered networks.

Rows (one fresh process per network and problem, so that times and peak memory are that
solve's own):

- build s / compile s: generating the circuit (``random_layered``) and compiling the model;
- fastest s, it, gap %: the minimum-delay solve from scratch and its certified gap;
- target s, it, gap %: from scratch in a new process, the cheapest sizing at an absolute target
  of 1.3 x the minimum delay found (a designer's clock target: no minimum-delay solve first);
- ms/it: milliseconds per quasi-Newton iteration of the target solve (one forward and one
  backward pass, line-search evaluations, bounds and landings included);
- peak MB: the target process's peak resident memory.

    python benchmarks/large_engine.py [gates ...] [--width W]
    python benchmarks/large_engine.py --evaluation [gates ...]
    python benchmarks/large_engine.py --frontier [gates]
    python benchmarks/large_engine.py --reference [gates]

Defaults: 10,000 and 100,000 gates (add 1000000 for a million). ``--width W``: W gates per
logic level instead of the square default (depth = width = sqrt(gates)). ``--evaluation``:
the time of one evaluation (smoothed timing forward and backward, gradient) at 10^4, 10^5 and
10^6 gates, for the growth of the time per iteration. ``--frontier``: a 25-point frontier of
10,000 gates (default workers). ``--reference``: both engines on the same network (default
2,000 gates), the large one at its default gap and at a gap ten times tighter: the minimum
delay, then targets of 1.2 and 1.5 x it in the same Sizer (``target s``), and each target alone
as an absolute target in a fresh Sizer (``alone s``: compiling included).
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


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def _build(gates: int, width: int | None):
    from edopt.generators import random_layered
    from edopt.sizing import Sizer

    t0 = time.perf_counter()
    circuit = random_layered(gates, seed=1, width=width)
    build = time.perf_counter() - t0
    t0 = time.perf_counter()
    sizer = Sizer(circuit, engine="large")
    return sizer, build, time.perf_counter() - t0


def fastest_row(gates: int, width: int | None) -> dict:
    sizer, build, compile_s = _build(gates, width)
    _progress(f"{gates} gates: built in {build:.1f} s, compiled in {compile_s:.1f} s")
    t0 = time.perf_counter()
    fast = sizer.fastest()
    return {"gates": gates, "levels": int(sizer.model.level.max()), "build s": build,
            "compile s": compile_s, "fastest s": time.perf_counter() - t0,
            "fastest it": fast.iterations, "fastest gap %": fast.gap_pct,
            "min delay ps": fast.min_delay_ps}


def target_row(gates: int, width: int | None, target_ps: float) -> dict:
    sizer, build, compile_s = _build(gates, width)
    t0 = time.perf_counter()
    res = sizer.cheapest(f"{target_ps}ps")
    target_s = time.perf_counter() - t0
    return {"target s": target_s, "target it": res.iterations, "target gap %": res.gap_pct,
            "status": res.status, "ms/it": 1000 * target_s / max(res.iterations or 1, 1),
            "retimed/target": res.delay_ps / target_ps, "peak MB": _peak_mb(),
            "total s": build + compile_s + target_s}


def per_iteration(gates: int, repeats: int = 20) -> dict:
    """Seconds of one evaluation (smoothed timing forward and backward, gradient) at a size."""
    import numpy as np

    from edopt.generators import random_layered
    from edopt.sizing import Sizer

    sizer = Sizer(random_layered(gates, seed=1), engine="large")
    eng = sizer.engine
    t, m = eng.timing, sizer.model
    x = np.clip(np.exp(np.random.default_rng(0).uniform(0, 2, m.n)), m.lo, m.hi)
    beta = 100.0 * eng.depth / t.true_delay(t.delays(x)[0])
    t.smooth(t.delays(x)[0], beta)           # the reference arrivals of the triangular solve
    t0 = time.perf_counter()
    for _ in range(repeats):
        d, load = t.delays(x)
        _, flow, _ = t.smooth(d, beta)
        mu = flow[:m.n]
        _ = x * (t.PT @ (mu / x)) - mu * load / x
    each = (time.perf_counter() - t0) / repeats
    return {"gates": gates, "levels": int(m.level.max()), "ms/evaluation": 1000 * each,
            "peak MB": _peak_mb()}


def frontier_row(gates: int = 10_000) -> dict:
    import edopt
    from edopt.generators import random_layered
    from edopt.sizing import Sizer

    sizer = Sizer(random_layered(gates, seed=2), engine="large")
    t0 = time.perf_counter()
    front = edopt.frontier(sizer, points=25, span=2.0)
    total = time.perf_counter() - t0
    table = front.table
    gaps = table["gap_pct"].to_numpy()
    steep = table["relative_delay"] < 1.03
    return {"gates": gates, "points": len(table), "total s": total,
            "optimal": int((table["status"] == "optimal").sum()),
            "largest gap %": float(max(gaps)),
            "largest gap % above 1.03x": float(max(gaps[~steep.to_numpy()]))}


def reference_rows(gates: int) -> list[dict]:
    from edopt.generators import random_layered
    from edopt.sizing import Sizer

    circuit = random_layered(gates, seed=1)
    rows = []
    d_ref = None
    for engine, gap_pct in (("reference", None), ("large", 0.1), ("large", 0.01)):
        options = {} if gap_pct is None else {"gap_pct": gap_pct}
        sizer = Sizer(circuit, engine=engine, **options)
        t0 = time.perf_counter()
        d_min = sizer.min_delay_ps
        fast_s = time.perf_counter() - t0
        d_ref = d_ref or d_min
        for factor in (1.2, 1.5):
            t0 = time.perf_counter()
            res = sizer.cheapest(factor * d_ref)
            target_s = time.perf_counter() - t0
            # a designer's single clock target: a fresh Sizer (compiling included), no
            # minimum-delay solve first
            t0 = time.perf_counter()
            alone = Sizer(circuit, engine=engine, **options).cheapest(f"{factor * d_ref}ps")
            rows.append({"engine": engine, "gap rule %": gap_pct, "gates": gates,
                         "min delay ps": d_min, "fastest s": fast_s, "factor": factor,
                         "target s": target_s, "energy fJ": res.energy_fj,
                         "status": res.status, "gap %": res.gap_pct,
                         "alone s": time.perf_counter() - t0, "alone fJ": alone.energy_fj})
    return rows


def _print(rows: list[dict]) -> None:
    cols = list(rows[0])
    print(" | ".join(cols))
    for r in rows:
        print(" | ".join(f"{r[c]:.4g}" if isinstance(r[c], float) else str(r[c]) for c in cols))


def _child(*args: str) -> dict:
    """Run this script in a fresh process; its result row is its last line of output."""
    out = subprocess.run([sys.executable, __file__, *args], check=True,
                         stdout=subprocess.PIPE, text=True).stdout
    return json.loads(out.strip().splitlines()[-1])


def main(argv: list[str]) -> None:
    width = None
    if "--width" in argv:
        k = argv.index("--width")
        width = int(argv[k + 1])
        argv = argv[:k] + argv[k + 2:]
    if argv[:1] == ["--fastest-one"]:
        print(json.dumps(fastest_row(int(argv[1]), width)))
        return
    if argv[:1] == ["--target-one"]:
        print(json.dumps(target_row(int(argv[1]), width, float(argv[2]))))
        return
    if argv[:1] == ["--evaluation-one"]:
        print(json.dumps(per_iteration(int(argv[1]))))
        return
    if argv[:1] == ["--evaluation"]:
        sizes = [int(a) for a in argv[1:]] or [10_000, 100_000, 1_000_000]
        _print([_child("--evaluation-one", str(g)) for g in sizes])
        return
    if argv[:1] == ["--frontier"]:
        _print([frontier_row(int(argv[1]) if len(argv) > 1 else 10_000)])
        return
    if argv[:1] == ["--reference"]:
        _print(reference_rows(int(argv[1]) if len(argv) > 1 else 2000))
        return
    rows = []
    extra = ["--width", str(width)] if width else []
    for gates in [int(a) for a in argv] or [10_000, 100_000]:
        row = _child("--fastest-one", str(gates), *extra)
        _progress(f"{gates} gates: minimum delay {row['min delay ps']:.1f} ps in "
                  f"{row['fastest s']:.1f} s")
        row.update(_child("--target-one", str(gates), str(FACTOR * row["min delay ps"]),
                          *extra))
        _progress(f"{gates} gates: target solved in {row['target s']:.1f} s")
        rows.append(row)
    _print(rows)


if __name__ == "__main__":
    main(sys.argv[1:])
