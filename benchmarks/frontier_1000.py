"""Benchmark: 25-point energy-delay frontiers of generated layered networks.

One row per network: build (model arrays and the vectorised cvxpy program), the first frontier
point (the minimum-delay sizing: cvxpy compilation, the minimum-delay solve and its polish), the
mean wall time of the later points (the default sweep: ``workers`` is the number of worker
processes ``edopt.frontier`` chose, two from 600 gates on a 2-CPU machine) and their ratio,
the same per point in a single process, how many points ended optimal in both runs (solver
status and the independent re-timing, ``Sizing.status == "optimal"``) and the largest re-timed
delay above its bound (relative). Requirement (issue): every point optimal, later points at
most a third of the first.

    python benchmarks/frontier_1000.py [gates] [seed ...]

Defaults: 1,000 gates, seeds 1 2 3, plus a 300-gate row (seed 1).
"""

from __future__ import annotations

import sys
import time

import numpy as np

import edopt
from edopt.generators import random_layered
from edopt.parallel import default_workers

COLUMNS = ("seed", "gates", "build s", "first s", "later s", "ratio", "serial s", "workers",
           "optimal", "max excess")


def run(gates: int, seed: int, points: int = 25, span: float = 2.0) -> dict:
    """Time one frontier; returns the row of the table.

    first s: the frontier's first point, the minimum-delay sizing (compiling the cvxpy program,
    the minimum-delay solve and its polish); later s: wall time of the rest of the sweep per
    point, as ``edopt.frontier`` runs by default; serial s: the same per point in one process.
    """
    circuit = random_layered(gates, seed=seed)
    t0 = time.perf_counter()
    sizer = edopt.Sizer(circuit)
    t1 = time.perf_counter()
    fast = sizer.fastest()
    t2 = time.perf_counter()
    workers = default_workers(sizer.model, points - 1)
    fr = edopt.frontier(sizer, points=points, span=span)
    t3 = time.perf_counter()
    serial_sizer = edopt.Sizer(circuit)
    serial_sizer.fastest()                  # its first point, kept by the sizer for the sweep
    t4 = time.perf_counter()
    serial = edopt.frontier(serial_sizer, points=points, span=span, workers=1)
    t5 = time.perf_counter()
    serial_per = (t5 - t4) / (points - 1)
    solved = [p for p in fr.points[1:] if p is not None]
    ok = sum(p.status == "optimal" for p in fr.points if p is not None)
    ok_serial = sum(p.status == "optimal" for p in serial.points if p is not None)
    excess = max((p.delay_ps / p.target_ps - 1.0 for p in solved), default=np.nan)
    first = t2 - t1
    later = (t3 - t2) / (points - 1)
    return {"seed": seed, "gates": gates, "build s": t1 - t0, "first s": first,
            "later s": later, "ratio": later / first, "serial s": serial_per,
            "workers": workers,
            "optimal": f"{ok}/{len(fr.points)}+{ok_serial}/{len(serial.points)}",
            "max excess": excess, "fastest status": fast.status,
            "statuses": list(fr.table.status) + list(serial.table.status),
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
