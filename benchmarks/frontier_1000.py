"""Benchmark: 25-point energy-delay frontiers of generated layered networks.

One row per network: build (circuit, model and compiled programs), the minimum-delay solve with
its polish (``Sizer.fastest``: cheapest sizing within 0.1 % of the minimum delay), the first
frontier point, the mean of the later points, their ratio, how many points ended optimal (the
solver's status and the independent re-timing, ``Sizing.status == "optimal"``) and the largest
re-timed delay above its bound (relative). Requirement (issue): every point optimal, later
points at most a third of the first.

    python benchmarks/frontier_1000.py [gates] [seed ...]

Defaults: 1,000 gates, seeds 1 2 3, plus a 300-gate row (seed 1).
"""

from __future__ import annotations

import sys
import time

import numpy as np

import edopt
from edopt.generators import random_layered

COLUMNS = ("seed", "gates", "build s", "fastest s", "first s", "later s", "ratio", "optimal",
           "max excess")


def run(gates: int, seed: int, points: int = 25, span: float = 2.0) -> dict:
    """Time one frontier; returns the row of the table."""
    t0 = time.perf_counter()
    sizer = edopt.Sizer(random_layered(gates, seed=seed))
    t1 = time.perf_counter()
    fast = sizer.fastest()
    t2 = time.perf_counter()
    stamps: list[float] = []
    fr = edopt.frontier(sizer, points=points, span=span,
                        progress=lambda done, total, res: stamps.append(time.perf_counter()))
    # progress is called once for the (cached) fastest row, then after each bound
    per_point = np.diff(np.array(stamps))
    solved = [p for p in fr.points[1:] if p is not None]
    ok = sum(p.status == "optimal" for p in fr.points[1:] if p is not None)
    ok += fast.status == "optimal" and fast.evaluation is not None
    excess = max((p.delay_ps / p.target_ps - 1.0 for p in solved), default=np.nan)
    first = float(per_point[0])
    later = float(np.mean(per_point[1:]))
    return {"seed": seed, "gates": gates, "build s": t1 - t0, "fastest s": t2 - t1,
            "first s": first, "later s": later, "ratio": later / first,
            "optimal": f"{ok}/{len(fr.points)}", "max excess": excess,
            "fastest status": fast.status, "statuses": list(fr.table.status),
            "solvers": list(fr.table.solver)}


def _fmt(row: dict) -> str:
    cells = []
    for k in COLUMNS:
        v = row[k]
        if isinstance(v, float):
            cells.append(f"{v:.2e}" if k == "max excess" else f"{v:.2f}")
        else:
            cells.append(str(v))
    return "".join(f"{c:>12}" for c in cells)


def main(argv: list[str]) -> None:
    gates = int(argv[0]) if argv else 1000
    seeds = [int(s) for s in argv[1:]] or [1, 2, 3]
    cases = [(gates, s) for s in seeds] + ([(300, 1)] if not argv else [])
    print("".join(f"{c:>12}" for c in COLUMNS))
    rows = []
    for g, s in cases:
        row = run(g, s)
        rows.append(row)
        print(_fmt(row), flush=True)
    for row in rows:
        odd = [f"{k}:{st}" for k, st in enumerate(row["statuses"]) if st != "optimal"]
        if odd or row["fastest status"] != "optimal":
            print(f"seed {row['seed']} ({row['gates']} gates): fastest {row['fastest status']}, "
                  f"points not optimal: {', '.join(odd) or 'none'}")
    print("solvers of the frontier points (count):")
    for row in rows:
        names, counts = np.unique(row["solvers"], return_counts=True)
        print(f"  seed {row['seed']} ({row['gates']} gates): "
              + ", ".join(f"{n} {c}" for n, c in zip(names, counts)))


if __name__ == "__main__":
    main(sys.argv[1:])
