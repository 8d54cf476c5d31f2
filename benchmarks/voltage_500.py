"""Benchmark: a 13-supply x 3-flavour exploration of a 500-gate network.

Prints one table row per phase. Target (issue): the whole exploration in under 60 s on a
2-core machine, reusing one compiled program across supplies and flavours.

    python benchmarks/voltage_500.py [gates] [seed]
"""

from __future__ import annotations

import sys
import time

import edopt
from edopt.generators import random_layered
from edopt.voltage import operating_point, voltage_frontier


def main(gates: int = 500, seed: int = 1) -> None:
    circuit = random_layered(gates, seed=seed)
    t0 = time.perf_counter()
    sizer = edopt.Sizer(circuit)
    d_min = sizer.min_delay_ps
    t1 = time.perf_counter()
    table = voltage_frontier(sizer, targets=["1.1x", "1.3x", "1.6x"])
    t2 = time.perf_counter()
    op = operating_point(sizer, target="1.3x")
    t3 = time.perf_counter()
    solved = int(table.energy_fj.notna().sum())
    ok = int((table.status == "optimal").sum())
    print(f"{'phase':<34}{'seconds':>9}  notes")
    print(f"{'compile + minimum delay':<34}{t1 - t0:9.2f}  {gates} gates, D_min {d_min:.1f} ps")
    print(f"{'13 supplies x 3 flavours x 3 targets':<34}{t2 - t1:9.2f}  "
          f"{len(table)} rows, {solved} solved, {ok} optimal")
    print(f"{'operating point at 1.3x':<34}{t3 - t2:9.2f}  {op.supply_v:.3f} V {op.flavour}, "
          f"{op.energy_fj:.1f} fJ")
    print(f"{'total':<34}{t3 - t0:9.2f}  target < 60 s")


if __name__ == "__main__":
    main(*(int(a) for a in sys.argv[1:3]))
