"""Command line of the SPICE checks: ``python -m edopt.spice {characterize,verify,netlist}``.

- ``characterize --out FILE``: simulate the gate library and write a technology file (the
  built-in is regenerated with ``--out edopt/technologies/sky130_tt.toml``);
- ``verify CASE.toml``: size a case (by default in ``sky130-tt``) and print model versus SPICE;
- ``netlist CASE.toml``: write the transistor-level deck of a sized case.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

from ..errors import EdoptError
from ..formats.case import load_case
from ..sizing import Sizer
from ..technology import Technology, load_technology, technology
from .setup import packaged_technology_file


def _tech(name: str) -> Technology:
    try:
        return technology(name)
    except EdoptError:
        path = packaged_technology_file(name)
        if path is not None and path.is_file():
            return load_technology(path)
        raise


def _sized(args: argparse.Namespace):
    case = load_case(args.case)
    tech = _tech(args.technology)
    sizer = Sizer(case.circuit, tech)
    target = args.target or case.target
    res = sizer.cheapest(target) if target else sizer.fastest()
    return case, res


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(prog="python -m edopt.spice",
                                 description="transistor-level checks with ngspice")
    sub = ap.add_subparsers(dest="command", required=True)
    ch = sub.add_parser("characterize", help="fit a technology file from simulations")
    ch.add_argument("--out", required=True, help="technology TOML file to write")
    ch.add_argument("--types", help="comma-separated gate types (default: all built-ins)")
    ch.add_argument("--fanouts", default="1,2,4,6,8", help="fan-outs of the fits")
    ch.add_argument("--vdd", type=float, default=1.8, help="supply in V")
    ch.add_argument("--corner", default="tt", help="model corner")
    ch.add_argument("--temp", type=float, default=27.0, help="temperature in C")
    ch.add_argument("--name", default="sky130-tt", help="technology name")
    ch.add_argument("--inputs", default="matched", choices=("matched", "fo4"),
                    help="input condition of the delay benches (default: matched)")
    for p in (ch,):
        p.add_argument("--jobs", type=int, help="parallel simulations (default: cores)")
        p.add_argument("--no-cache", action="store_true", help="simulate even when cached")
    for name, helptext in (("verify", "model versus SPICE for a sized case"),
                           ("netlist", "write the SPICE deck of a sized case")):
        p = sub.add_parser(name, help=helptext)
        p.add_argument("case", help="case TOML file")
        p.add_argument("--technology", default="sky130-tt", help="technology name or file")
        p.add_argument("--target", help='delay target, e.g. "1.3x" or "400ps" (default: the '
                                        "case's, else the minimum delay)")
        p.add_argument("--mode", default="auto", choices=("auto", "path", "full"))
        if name == "verify":
            p.add_argument("--jobs", type=int, help="parallel simulations (default: cores)")
            p.add_argument("--no-cache", action="store_true", help="simulate even when cached")
        else:
            p.add_argument("--out", help="deck file (default: standard output)")
    args = ap.parse_args(argv)
    try:
        if args.command == "characterize":
            from dataclasses import replace

            from .characterize import characterize
            from .setup import SpiceSetup

            setup = replace(SpiceSetup(), corner=args.corner, temp_c=args.temp)
            t0 = time.perf_counter()
            res = characterize(args.out, types=args.types.split(",") if args.types else None,
                               fanouts=[float(f) for f in args.fanouts.split(",")],
                               setup=setup, vdd=args.vdd, name=args.name,
                               inputs=args.inputs, jobs=args.jobs,
                               cache=not args.no_cache)
            t = res.technology
            print(f"wrote {args.out}: tau {t.tau_ps:.3f} ps, p_inv {t.p_inv:.3f}, C_u "
                  f"{t.cu_ff:.3f} fF, FO4 {res.provenance['fo4_ps']:.1f} ps, worst fit R^2 "
                  f"{res.provenance['worst_fit_r2']:.4f} ({time.perf_counter() - t0:.0f} s)")
            for w in res.warnings:
                print(f"warning: {w}", file=sys.stderr)
        elif args.command == "verify":
            from .verify import verify

            case, res = _sized(args)
            table = verify(res, circuit=case.circuit, mode=args.mode, jobs=args.jobs,
                           cache=not args.no_cache)
            print(f"{case.circuit.name} in {res.model.tech.name}, {table.attrs['mode']} mode")
            print(table.to_string(float_format=lambda v: f"{v:.4g}"))
            print()
            print(table.attrs["stages"].to_string(float_format=lambda v: f"{v:.4g}"))
            for w in table.attrs["warnings"] + table.attrs["notes"]:
                print(f"note: {w}", file=sys.stderr)
        else:
            from .export import netlist

            case, res = _sized(args)
            text = netlist(res, circuit=case.circuit, mode=args.mode)
            if args.out:
                Path(args.out).write_text(text, encoding="utf-8")
            else:
                sys.stdout.write(text)
    except EdoptError as exc:
        print(f"error: {exc}", file=sys.stderr)
        return 2
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
