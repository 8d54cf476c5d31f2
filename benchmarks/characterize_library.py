"""Characterise the whole built-in gate library with ngspice and the SKY130 models, and time it.

Every built-in type, every pin, fan-outs 1, 2, 4, 6, 8 (plus the leakage, supply and device
benches), in one deck per core. Target: under 5 minutes on 2 cores. The result cache is
bypassed so that the time is a real simulation time.

    python benchmarks/characterize_library.py [--out FILE] [--jobs N] [--inputs matched|fo4]
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

import pandas as pd

from edopt.gates import builtin_library
from edopt.spice import SpiceUnavailable, characterize

TARGET_S = 300.0


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--out", help="technology file to write (default: a temporary file)")
    ap.add_argument("--jobs", type=int, default=None, help="parallel ngspice runs (cores)")
    ap.add_argument("--inputs", default="matched", choices=("matched", "fo4"))
    args = ap.parse_args()
    out = Path(args.out) if args.out else Path(tempfile.mkdtemp()) / "sky130_tt.toml"
    types = list(builtin_library())
    jobs = args.jobs or os.cpu_count() or 1
    t0 = time.perf_counter()
    try:
        res = characterize(out, types=types, fanouts=(1, 2, 4, 6, 8), inputs=args.inputs,
                           jobs=jobs, cache=False)
    except SpiceUnavailable as exc:
        print(f"skipped: {exc}", file=sys.stderr)
        return 1
    seconds = time.perf_counter() - t0
    t = res.technology
    pd.set_option("display.width", 160)
    cols = ["type", "pin", "g", "g_derived", "p", "r2", "max_residual_pct", "cin_ff_per_size"]
    print(res.pins[cols].to_string(index=False, float_format=lambda v: f"{v:.4g}"))
    print()
    print(f"types {len(types)}, pins {len(res.pins)}, fan-outs 5, "
          f"{len(res.points)} delay benches, inputs {args.inputs}")
    print(f"tau {t.tau_ps:.3f} ps, p_inv {t.p_inv:.3f}, C_u {t.cu_ff:.3f} fF, FO4 "
          f"{res.provenance['fo4_ps']:.1f} ps, V_t {t.vt_v:.3f} V, alpha {t.alpha:.3f}, "
          f"leakage {t.leak_na:.4g} nA per unit size, swing {t.swing_mv:.1f} mV/dec, "
          f"DIBL {t.dibl:.3f}")
    print(f"worst fit R^2 {res.pins.r2.min():.5f}; wrote {out}")
    verdict = "within" if seconds < TARGET_S else "OVER"
    print(f"characterisation time: {seconds:.1f} s on {jobs} core(s) ({verdict} the "
          f"{TARGET_S:.0f} s target)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
