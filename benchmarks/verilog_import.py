"""Import time of a 100,000-instance gate-level netlist (requirement: under 10 s).

The netlist is generated here: a random layered network of yosys generic cells
(``$_NAND_``, ``$_AND_``, ``$_MUX_``, ``$_AOI3_``, ...) written one pin per line as yosys's
``write_verilog -noexpr`` does, with bus inputs, escaped instance names, attributes and
comments. Invented data, deterministic for a seed.

Run: ``python benchmarks/verilog_import.py [--instances N] [--seed S] [--keep FILE]``.
Prints the file size, the parse-and-build time of ``edopt.formats.verilog.read_netlist`` and
the time of ``Circuit.validate``; exits with status 1 when the import takes 10 s or more.
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

from edopt.formats.verilog import read_netlist

LIMIT_S = 10.0
CELLS = [  # (cell, input pins)
    ("$_NOT_", "A"), ("$_NAND_", "AB"), ("$_NOR_", "AB"), ("$_AND_", "AB"), ("$_OR_", "AB"),
    ("$_XOR_", "AB"), ("$_XNOR_", "AB"), ("$_ANDNOT_", "AB"), ("$_ORNOT_", "AB"),
    ("$_MUX_", "ABS"), ("$_AOI3_", "ABC"), ("$_OAI3_", "ABC"), ("$_AOI4_", "ABCD"),
    ("$_OAI4_", "ABCD"),
]


def netlist_text(instances: int, seed: int = 0, width: int = 400) -> str:
    """Verilog text of a random layered network with ``instances`` cells."""
    rng = np.random.default_rng(seed)
    n_in = width
    lines = [f"/* generated benchmark netlist, {instances} instances, seed {seed} */",
             "module bench(a, y);", f"  input [{n_in - 1}:0] a;"]
    body: list[str] = []
    prev2: list[str] = []
    prev1 = [f"a[{i}]" for i in range(n_in)]
    used: dict[str, bool] = {}
    wires: list[str] = []
    made = 0
    kinds = rng.integers(0, len(CELLS), size=instances)
    while made < instances:
        pool = prev1 + prev2
        level = []
        for _ in range(min(width, instances - made)):
            cell, pins = CELLS[kinds[made]]
            picks = rng.choice(len(pool), size=len(pins), replace=False)
            net = f"_{made}_"
            wires.append(net)
            body.append(f'  (* src = "bench.v:{made}" *)')
            body.append(f"  \\{cell}  \\u{made}.x  /* cell {made} */ (")
            for pin, k in zip(pins, picks):
                body.append(f"    .{pin}({pool[k]}),")
                used[pool[k]] = True
            body.append(f"    .Y({net})")
            body.append("  );")
            level.append(net)
            made += 1
        prev2, prev1 = prev1, level
    outs = [w for w in wires if w not in used]
    lines.append(f"  output [{len(outs) - 1}:0] y;")
    lines += [f"  wire {w};" for w in wires]
    lines += body
    lines += [f"  assign y[{k}] = {w};" for k, w in enumerate(outs)]
    lines.append("endmodule")
    return "\n".join(lines) + "\n"


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--instances", type=int, default=100_000)
    ap.add_argument("--seed", type=int, default=0)
    ap.add_argument("--keep", help="also write the generated netlist to this file")
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    text = netlist_text(args.instances, args.seed)
    t_gen = time.perf_counter() - t0
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(args.keep) if args.keep else Path(tmp) / "bench.v"
        path.write_text(text, encoding="utf-8")
        t0 = time.perf_counter()
        nl = read_netlist(path)
        t_read = time.perf_counter() - t0
        t0 = time.perf_counter()
        nl.circuit.validate()
        t_val = time.perf_counter() - t0
    c = nl.circuit
    print(f"netlist: {args.instances} instances, {len(text) / 1e6:.1f} MB "
          f"(generated in {t_gen:.1f} s)")
    print(f"read_verilog: {t_read:.2f} s -> {len(c.gates)} gates, {len(c.inputs)} inputs, "
          f"{len(c.outputs)} outputs (limit {LIMIT_S:.0f} s)")
    print(f"validate again: {t_val:.2f} s")
    return 0 if t_read < LIMIT_S else 1


if __name__ == "__main__":
    sys.exit(main())
