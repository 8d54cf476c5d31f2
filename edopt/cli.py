"""The ``edopt`` command line: ``check``, ``size``, ``sweep``, ``supply`` and ``demo``.

Exit codes: 0 success, 2 bad input (any `EdoptError`, an unreadable file, bad options), 3 the
delay target or energy budget cannot be met (the message names the minimum achievable delay).
Errors are one line ``edopt: error: <message>`` on stderr. With ``--json`` the only thing on
stdout is the JSON document; progress and warnings go to stderr.
"""

from __future__ import annotations

import argparse
import re
import sys
import tempfile
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from .errors import EdoptError, InfeasibleTarget
from .formats.case import Case, load_case
from .sizing import CAUTION, ENGINES, LARGE_GATES, Sizer, Sizing, parse_target
from .technology import technology

__all__ = ["build_parser", "main"]

CASES_DIR = Path(__file__).resolve().parent.parent / "cases"
DEMO_CASES = {"decoder": "decoder.toml", "carry": "carry_network.toml"}
EXIT_OK, EXIT_INPUT, EXIT_INFEASIBLE = 0, 2, 3


# ------------------------------------------------------------------------------- helpers
def _positive(text: str) -> float:
    try:
        value = float(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a number, got {text!r}") from None
    if not value > 0 or value == float("inf"):
        raise argparse.ArgumentTypeError(f"expected a positive number, got {text!r}")
    return value


def _err(message: str) -> None:
    print(f"edopt: error: {message}", file=sys.stderr)


def _warn(message: str) -> None:
    print(f"edopt: warning: {message}", file=sys.stderr)


def _safe(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("._") or "case"


def _load(args: argparse.Namespace) -> Case:
    """A TOML case, or a structural Verilog netlist (``.v``, with ``--top``)."""
    path = Path(args.case)
    if path.suffix.lower() in (".v", ".vg", ".verilog"):
        from .formats.verilog import read_verilog

        circuit = read_verilog(path, top=getattr(args, "top", None),
                               cell_map=getattr(args, "cell_map", None))
        case = Case(circuit, technology(None), None, path, "structural Verilog netlist")
    else:
        case = load_case(path)
    if getattr(args, "tech", None):
        case.tech = technology(args.tech)
    return case


def _check_target_syntax(target: str | None) -> None:
    """Fail before any solve on a target that cannot be read (relative ones are resolved
    later against the minimum delay)."""
    if target is None:
        return
    try:
        parse_target(target, 1.0)
    except InfeasibleTarget:
        pass


def _resolve_target(value: str | None, case: Case, default_to_case: bool) -> str | None:
    if value == "case" or (value is None and default_to_case):
        if case.target is None and value == "case":
            raise EdoptError(f"case {case.circuit.name!r} has no [case] target; give --target")
        value = case.target
    _check_target_syntax(value)
    return value


def _sizer(case: Case, args: argparse.Namespace, objective: str = "energy") -> Sizer:
    return Sizer(case.circuit, case.tech, objective=objective,
                 cycle_ps=getattr(args, "cycle_ps", None),
                 max_effort=getattr(args, "max_effort", None),
                 engine=getattr(args, "engine", "auto"), gap_pct=getattr(args, "gap_pct", 0.1))


def _status_warning(s: Sizing, what: str) -> None:
    if s.status != "optimal":
        extra = f": {'; '.join(s.notes)}" if s.notes else ""
        _warn(f"{what}: solver status {s.status}{extra}")


def _json_out(obj: Any) -> None:
    from .report.tables import dumps

    sys.stdout.write(dumps(obj) + "\n")


def _listing(names: Sequence[str], limit: int = 8) -> str:
    names = list(names)
    if len(names) <= limit:
        return ", ".join(names)
    return ", ".join(names[:limit]) + f", ... ({len(names)} in all)"


class _Progress:
    """One stderr line per frontier point."""

    def __init__(self, quiet: bool, targets: Sequence[float] = ()) -> None:
        self.quiet = quiet
        self.targets = list(targets)
        self.failed = 0

    def __call__(self, done: int, total: int, s: Sizing | None) -> None:
        if s is None:
            self.failed += 1
        if self.quiet:
            return
        head = f"point {done}/{total}"
        if s is None:
            t = self.targets[done - 2] if 0 <= done - 2 < len(self.targets) else float("nan")
            line = f"{head}  target {t:.1f} ps  failed"
        elif s.target_ps is None:
            line = (f"{head}  minimum delay {s.delay_ps:.1f} ps  energy {s.energy_fj:.1f} fJ  "
                    f"{s.status}")
        else:
            line = f"{head}  target {s.target_ps:.1f} ps  energy {s.energy_fj:.1f} fJ  {s.status}"
        print(line, file=sys.stderr, flush=True)


# ---------------------------------------------------------------------------------- check
def _check_data(case: Case) -> dict[str, Any]:
    from .solvers.chain import advise_chain, solve_chain

    c = case.circuit
    data: dict[str, Any] = dict(c.summary())
    data.update({
        "file": str(case.path) if case.path else None,
        "description": case.description,
        "technology": case.tech.name,
        "tau_ps": case.tech.tau_ps,
        "target": case.target,
        "input_nets": list(c.inputs),
        "output_nets": list(c.outputs),
    })
    try:
        sol = solve_chain(c, case.tech)
        adv = advise_chain(c, case.tech)
    except EdoptError as exc:
        data["chain"] = None
        data["chain_note"] = str(exc)
    else:
        data["chain"] = {
            "stages": sol.n_stages, "G": sol.G, "B": sol.B, "H": sol.H,
            "path_effort": sol.path_effort, "stage_effort": sol.stage_effort, "P_tau": sol.P,
            "min_delay_ps": sol.delay_ps,
            "sizes": dict(zip(sol.gates, sol.sizes.tolist())),
            "advice": {
                "best_stages": adv.best_stages, "inverters_to_add": adv.inverters_to_add,
                "best_delay_ps": adv.best_delay_ps, "stage_effort": adv.stage_effort,
                "same_polarity_stages": adv.same_polarity_stages,
                "same_polarity_delay_ps": adv.same_polarity_delay_ps,
                "at_limit": adv.at_limit,
            },
        }
    data["caution"] = CAUTION
    return data


def _check_lines(d: dict[str, Any]) -> list[str]:
    types = ", ".join(f"{k} {v}" for k, v in d["types"].items())
    lines = [
        f"case         {d['name']}" + (f"  ({d['file']})" if d["file"] else ""),
    ]
    if d["description"]:
        lines.append(f"description  {d['description']}")
    lines += [
        f"technology   {d['technology']}  (tau {d['tau_ps']:g} ps)",
        f"gates        {d['gates']}  ({types}); fixed sizes {d['fixed_sizes']}; nets {d['nets']}",
        f"inputs       {d['inputs']}: {_listing(d['input_nets'])}",
        f"outputs      {d['outputs']}: {_listing(d['output_nets'])}",
        f"target       {d['target'] or 'none given'}",
    ]
    ch = d["chain"]
    if ch is None:
        lines.append(f"closed form  not a pure chain ({d['chain_note']})")
    else:
        a = ch["advice"]
        lines += [
            f"closed form  {ch['stages']} stages: G {ch['G']:.4g}, B {ch['B']:.4g}, "
            f"H {ch['H']:.4g}, path effort F {ch['path_effort']:.4g}, stage effort "
            f"{ch['stage_effort']:.3f}, P {ch['P_tau']:.3g} tau",
            f"min delay    {ch['min_delay_ps']:.2f} ps  (N F^(1/N) + P)",
            f"stage count  best {a['best_stages']} stages (add {a['inverters_to_add']} "
            f"inverters): {a['best_delay_ps']:.2f} ps; keeping the polarity "
            f"{a['same_polarity_stages']} stages: {a['same_polarity_delay_ps']:.2f} ps"
            + ("  (at the search limit)" if a["at_limit"] else ""),
        ]
    lines.append(f"caution      {CAUTION}")
    return lines


def cmd_check(args: argparse.Namespace) -> int:
    data = _check_data(_load(args))
    if args.json:
        _json_out(data)
    else:
        print("\n".join(_check_lines(data)))
    return EXIT_OK


# ----------------------------------------------------------------------------------- size
def cmd_size(args: argparse.Namespace) -> int:
    from .frontier import balanced, fastest_within
    from .report.tables import report_lines, write_gates

    case = _load(args)
    target = _resolve_target(args.target, case, default_to_case=False)
    if args.objective == "area" and (args.budget_fj is not None or args.balance is not None):
        raise EdoptError("--budget-fj and --balance work on energy; drop --objective area")
    if args.strengths or case.strengths:
        return _size_discrete(case, args, target)
    sizer = _sizer(case, args, args.objective)
    fast = sizer.fastest()
    if args.budget_fj is not None:
        res = fastest_within(sizer, args.budget_fj)
    elif args.balance is not None:
        res = balanced(sizer, exponent=float(args.balance))
    elif target is not None:
        res = sizer.cheapest(target)
    else:
        res = fast
    _status_warning(res, "sizing")
    if args.gates_csv:
        write_gates(res, args.gates_csv)
    if args.json:
        out = {"case": case.circuit.name, "technology": case.tech.name, **res.to_dict()}
        out["fastest_energy_fj"] = fast.energy_fj
        _json_out(out)
    else:
        print("\n".join(report_lines(res, case=case.circuit.name, baseline=fast)))
        if args.gates_csv:
            print(f"per-gate table written to {args.gates_csv}")
    return EXIT_OK


def _parse_strengths(text: str) -> list[float] | dict[str, list[float]]:
    """``"1,2,4,8"`` for every gate, or ``"inv=1,2,4,8;nand2=1,2,4;*=1,2"`` per gate type."""
    def numbers(part: str) -> list[float]:
        try:
            values = [float(v) for v in part.split(",") if v.strip()]
        except ValueError:
            raise EdoptError(f"--strengths {text!r}: sizes must be numbers, e.g. 1,2,4,8") from None
        if not values:
            raise EdoptError(f"--strengths {text!r}: give at least one size")
        return values
    if "=" not in text:
        return numbers(text)
    sets: dict[str, list[float]] = {}
    for item in text.split(";"):
        name, sep, part = item.partition("=")
        if not sep or not name.strip():
            raise EdoptError(f"--strengths {text!r}: write type=1,2,4;type=... ")
        sets[name.strip()] = numbers(part)
    return sets


def _size_discrete(case: Case, args: argparse.Namespace, target: str | None) -> int:
    from .report.tables import report_lines, write_gates
    from .sizing import size

    if args.budget_fj is not None or args.balance is not None or args.objective == "area":
        raise EdoptError("--strengths works with --target (or the fastest sizing) on energy")
    sets = _parse_strengths(args.strengths) if args.strengths else case.strengths
    res = size(case.circuit, case.tech, target=target, sizes=sets,
               cycle_ps=args.cycle_ps, max_effort=args.max_effort)
    if res.status not in ("optimal", "feasible"):   # discrete sizings are "feasible"
        _status_warning(res, "discrete sizing")
    if args.gates_csv:
        write_gates(res, args.gates_csv)
    if args.json:
        _json_out({"case": case.circuit.name, "technology": case.tech.name, **res.to_dict(),
                   "bound_fj": res.bound_fj, "gap_pct": res.gap_pct})
        return EXIT_OK
    print("\n".join(report_lines(res, case=case.circuit.name)))
    if res.bound_fj is not None:
        print(f"discrete     continuous lower bound {res.bound_fj:.2f} fJ, gap "
              f"{res.gap_pct:.2f} %")
    return EXIT_OK


# ---------------------------------------------------------------------------------- sweep
def _profile_set(fr: Any, chosen: Sizing | None) -> tuple[list[Sizing], list[str]]:
    """The fastest sizing, the chosen one (else the point nearest 1.2x) and the widest point."""
    import numpy as np

    d_min = fr.min_delay_ps
    ok = [(k, s) for k, s in enumerate(fr.points) if s is not None and k > 0]
    picks: list[tuple[Sizing, str]] = [(fr.fastest, f"minimum delay ({d_min:.1f} ps)")]
    if chosen is not None:
        picks.append((chosen, f"chosen: {chosen.delay_ps / d_min:.2f}x ({chosen.delay_ps:.1f} ps)"))
    elif ok:
        _, s = min(ok, key=lambda ks: abs(np.log(ks[1].delay_ps / d_min / 1.2)))
        picks.append((s, f"{s.delay_ps / d_min:.2f}x ({s.delay_ps:.1f} ps)"))
    if ok:
        s = ok[-1][1]
        if all(abs(s.delay_ps - p.delay_ps) > 1e-6 * d_min for p, _ in picks):
            picks.append((s, f"{s.delay_ps / d_min:.2f}x ({s.delay_ps:.1f} ps)"))
    return [p for p, _ in picks], [lab for _, lab in picks]


def _write_outputs(case: Case, fr: Any, chosen: Sizing | None, out: Path,
                   balanced_points: Sequence[tuple[str, Sizing]] = ()) -> list[Path]:
    from .report import figures, tables

    out.mkdir(parents=True, exist_ok=True)
    name = case.circuit.name
    files: list[Path] = []
    files += figures.pareto(fr, chosen, out / "pareto", balanced=balanced_points)
    files += figures.price(fr, out / "price")
    sizings, labels = _profile_set(fr, chosen)
    files += figures.size_profile(sizings, labels, out / "size_profile", case=name)
    files.append(tables.write_frontier(fr, out / "frontier.csv"))
    files.append(tables.write_savings(fr, out / "savings.csv"))
    files.append(tables.write_gates(fr.fastest, out / "gates_fastest.csv"))
    doc = {"case": name, "technology": case.tech.name, **fr.to_dict()}
    if chosen is not None:
        files.append(tables.write_gates(chosen, out / "gates_chosen.csv"))
        doc["chosen"] = chosen.to_dict()
    if balanced_points:
        doc["balanced"] = {label: s.summary() for label, s in balanced_points}
    files.append(tables.write_json(doc, out / "frontier.json"))
    return files


def _sweep(case: Case, sizer: Sizer, points: int, span: float, quiet: bool) -> Any:
    from .frontier import frontier, sweep_targets

    fast = sizer.fastest()
    progress = _Progress(quiet, sweep_targets(fast.min_delay_ps, points, span))
    fr = frontier(sizer, points=points, span=span, progress=progress)
    if progress.failed:
        _warn(f"{progress.failed} frontier point(s) failed and are left out of the figures")
    bad = [s for s in fr.points if s is not None and s.status not in ("optimal",)]
    if bad:
        _warn(f"{len(bad)} frontier point(s) have solver status "
              f"{', '.join(sorted({s.status for s in bad}))}")
    return fr


def cmd_sweep(args: argparse.Namespace) -> int:
    from .frontier import balanced, sweep_targets

    case = _load(args)
    target = _resolve_target(args.target, case, default_to_case=True)
    sweep_targets(1.0, args.points, args.span)          # option errors before any solve
    sizer = _sizer(case, args)
    sizer.fastest()
    chosen = sizer.cheapest(target) if target is not None else None
    fr = _sweep(case, sizer, args.points, args.span, args.quiet)
    pts: list[tuple[str, Sizing]] = []
    if args.balanced:
        pts = [("E·D", balanced(sizer, exponent=1.0)), ("E·D²", balanced(sizer, exponent=2.0))]
    out = Path(args.out) if args.out else Path("edopt-out") / _safe(case.circuit.name)
    files = _write_outputs(case, fr, chosen, out, pts)
    if args.json:
        doc = {"case": case.circuit.name, "technology": case.tech.name, **fr.to_dict(),
               "files": [str(f) for f in files]}
        if chosen is not None:
            doc["chosen"] = chosen.to_dict()
        if pts:
            doc["balanced"] = {label: s.summary() for label, s in pts}
        _json_out(doc)
        return EXIT_OK
    print(f"case         {case.circuit.name}")
    print(f"min delay    {fr.min_delay_ps:.2f} ps, energy {fr.fastest.energy_fj:.1f} fJ")
    if chosen is not None:
        print(f"chosen       {chosen.delay_ps:.2f} ps ({chosen.delay_ps / fr.min_delay_ps:.3f}x), "
              f"energy {chosen.energy_fj:.1f} fJ, price {chosen.price_fj_per_ps:.3g} fJ/ps")
    for label, s in pts:
        print(f"least {label:<6} {s.delay_ps:.2f} ps, energy {s.energy_fj:.1f} fJ, "
              f"intensity {s.intensity:.3f}")
    print(f"frontier     {fr.summary_text()}")
    print(f"written      {len(files)} files into {out}")
    print(f"caution      {CAUTION}")
    return EXIT_OK


# ------------------------------------------------------------------------------- generate
def cmd_generate(args: argparse.Namespace) -> int:
    from .formats.case import write_case
    from .structures import describe, generate, structure_names

    if args.structure is None:
        for name in structure_names():
            print(f"{name:<18}{describe(name)}")
        return EXIT_OK
    params: dict[str, Any] = {}
    for item in args.param:
        key, sep, value = item.partition("=")
        if not sep or not key:
            raise EdoptError(f"--param {item!r}: write it as name=value, e.g. bits=32")
        try:
            params[key.replace("-", "_")] = int(value)
        except ValueError:
            try:
                params[key.replace("-", "_")] = float(value)
            except ValueError:
                params[key.replace("-", "_")] = value
    circuit = generate(args.structure, **params)
    text = write_case(circuit, None, args.out, description=f"generated {args.structure}")
    if args.out is None:
        sys.stdout.write(text)
    else:
        print(f"wrote {args.out}: {len(circuit.gates)} gates", file=sys.stderr)
    return EXIT_OK


# --------------------------------------------------------------------------------- supply
def cmd_supply(args: argparse.Namespace) -> int:
    from .report import voltage_figures as vfig
    from .report.tables import clean
    from .voltage import (
        energy_versus_supply,
        operating_point,
        parse_supply_range,
        voltage_frontier,
    )

    case = _load(args)
    supplies = parse_supply_range(args.supplies) if args.supplies else None
    flavours = [f.strip() for f in args.flavours.split(",")] if args.flavours else None
    target = _resolve_target(args.target, case, default_to_case=args.throughput is None)
    sizer = Sizer(case.circuit, case.tech)

    def progress(done: int, total: int, label: str) -> None:
        if not args.quiet:
            print(f"supply {done}/{total}  {label}", file=sys.stderr, flush=True)

    op = operating_point(sizer, target=target, supplies=supplies, flavours=flavours,
                         throughput=args.throughput)
    frontier_table = voltage_frontier(sizer, supplies=supplies, flavours=flavours,
                                      throughput=args.throughput, points=args.points,
                                      progress=progress)
    per_supply = energy_versus_supply(sizer, supplies=supplies, flavour=op.flavour,
                                      throughput=args.throughput)
    out = Path(args.out) if args.out else Path("edopt-out") / (_safe(case.circuit.name) + "-supply")
    out.mkdir(parents=True, exist_ok=True)
    files = [*vfig.envelope(frontier_table, out / "envelope", case.circuit.name),
             *vfig.energy_split(frontier_table, out / "energy_split", case.circuit.name),
             *vfig.energy_vs_supply(per_supply, out / "energy_vs_supply", case.circuit.name)]
    for name, table in (("voltage_frontier.csv", frontier_table),
                        ("candidates.csv", op.table), ("energy_vs_supply.csv", per_supply)):
        table.to_csv(out / name, index=False)
        files.append(out / name)
    if args.json:
        _json_out(clean({"case": case.circuit.name, **op.to_dict(),
                         "files": [str(f) for f in files]}))
        return EXIT_OK
    print(f"case         {case.circuit.name}  ({op.mode})")
    print(f"supply       {op.supply_v:.3f} V, threshold flavour {op.flavour}")
    print(f"delay        {op.delay_ps:.2f} ps (cycle {op.cycle_ps:.2f} ps)")
    print(f"energy       {op.energy_fj:.2f} fJ (dynamic {op.dynamic_fj:.2f}, leakage "
          f"{op.leakage_fj:.2f})")
    print("price of delay by knob (fJ/ps, fixed cycle):  " + "  ".join(
        f"{k} {v:.4g}" for k, v in op.sensitivities.items()))
    for note in op.notes:
        print(f"note         {note}")
    print(f"written      {len(files)} files into {out}")
    print(f"caution      {CAUTION}")
    return EXIT_OK


# ----------------------------------------------------------------------------------- demo
def _demo_case(which: str) -> Case:
    path = CASES_DIR / DEMO_CASES[which]
    if path.exists():
        return load_case(path)
    from .adders import write_demos

    with tempfile.TemporaryDirectory() as tmp:
        written = {p.name: p for p in write_demos(tmp)}
        case = load_case(written[DEMO_CASES[which]])
    case.path = None
    return case


def cmd_demo(args: argparse.Namespace) -> int:
    from .frontier import balanced
    from .report.tables import report_lines

    start = time.perf_counter()
    case = _demo_case(args.case)
    out = Path(args.out)
    print("== case ==")
    print("\n".join(line for line in _check_lines(_check_data(case))
                    if not line.startswith("caution")))
    sizer = Sizer(case.circuit, case.tech)
    fast = sizer.fastest()
    print("\n== fastest ==")
    print("\n".join(report_lines(fast)[:-1]))
    chosen = sizer.cheapest("1.2x")
    print("\n== target 1.2x the minimum delay ==")
    print("\n".join(report_lines(chosen, baseline=fast)[:-1]))
    for s, what in ((fast, "fastest"), (chosen, "target 1.2x")):
        _status_warning(s, what)
    print(f"\n== frontier ({args.points} points up to {args.span:g}x) ==", flush=True)
    fr = _sweep(case, sizer, args.points, args.span, args.quiet)
    print(fr.summary_text())
    pts = [("E·D", balanced(sizer, exponent=1.0)), ("E·D²", balanced(sizer, exponent=2.0))]
    print("\n== balanced points ==")
    for label, s in pts:
        print(f"least {label:<6} {s.delay_ps:.2f} ps ({s.delay_ps / fr.min_delay_ps:.3f}x), "
              f"energy {s.energy_fj:.1f} fJ, hardware intensity {s.intensity:.3f}")
    files = _write_outputs(case, fr, chosen, out, pts)
    print(f"\n== files ({out}) ==")
    for f in files:
        print(f"  {f}")
    print(f"\ndone in {time.perf_counter() - start:.1f} s")
    print(f"caution: {CAUTION}")
    return EXIT_OK


# --------------------------------------------------------------------------------- parser
class _Parser(argparse.ArgumentParser):
    """Usage errors end with the same ``edopt: error:`` line as every other error."""

    def error(self, message: str):  # type: ignore[override]
        self.print_usage(sys.stderr)
        self.exit(EXIT_INPUT, f"edopt: error: {message}\n")


def build_parser() -> argparse.ArgumentParser:
    p = _Parser(
        prog="edopt",
        description="Energy-delay trade-off of CMOS gate sizes (first-order logical effort).",
        epilog="Exit codes: 0 done, 2 bad input, 3 target or budget cannot be met.",
    )
    sub = p.add_subparsers(dest="command", metavar="COMMAND", required=True)

    def case_args(q: argparse.ArgumentParser) -> None:
        q.add_argument("case", help="TOML case file, or a structural Verilog netlist (.v)")
        q.add_argument("--tech", metavar="NAME|FILE",
                       help="technology instead of the case's own (built-in name or TOML file)")
        q.add_argument("--top", metavar="MODULE", help="top module of a Verilog netlist")
        q.add_argument("--cell-map", metavar="FILE",
                       help="TOML cell map for a Verilog netlist (default: yosys generic cells)")

    def solve_args(q: argparse.ArgumentParser) -> None:
        q.add_argument("--max-effort", type=_positive, metavar="F",
                       help="upper limit of every stage effort C_L/x (a slope limit)")
        q.add_argument("--cycle-ps", type=_positive, metavar="PS",
                       help="clock period for the leakage energy (default: the delay target)")
        q.add_argument("--engine", choices=ENGINES, default="auto",
                       help="reference (interior point), large (certified gap, for 10^4-10^6 "
                            f"gates) or auto: large above {LARGE_GATES} gates (default)")
        q.add_argument("--gap-pct", type=_positive, default=0.1, metavar="PCT",
                       help="large engine: stop at this certified gap in percent (default 0.1)")

    q = sub.add_parser("check", help="validate a case and summarise it",
                       description="Validate a case and summarise it; for a pure chain also "
                                   "give the closed-form path effort and stage-count advice.")
    case_args(q)
    q.add_argument("--json", action="store_true", help="print JSON only")
    q.set_defaults(func=cmd_check)

    q = sub.add_parser("size", help="size a case: fastest, cheapest under a target, ...",
                       description="Size a case for minimum delay (default), for least energy "
                                   "under --target, within --budget-fj, or for least E*D^n.")
    case_args(q)
    goal = q.add_mutually_exclusive_group()
    goal.add_argument("--target", metavar="T",
                      help='delay bound: "250ps", "0.25ns", "1.2x" the minimum, or "case" for '
                           "the case's own target")
    goal.add_argument("--budget-fj", type=_positive, metavar="E",
                      help="the fastest sizing whose energy is at most E fJ")
    goal.add_argument("--balance", type=int, choices=(1, 2), metavar="N",
                      help="the sizing of least energy x delay^N (1 or 2)")
    q.add_argument("--objective", choices=("energy", "area"), default="energy",
                   help="what --target minimises (default energy)")
    solve_args(q)
    q.add_argument("--strengths", metavar="LIST",
                   help='discrete drive strengths: "1,2,4,8,16" for every gate, or '
                        '"inv=1,2,4,8;nand2=1,2,4;*=1,2" per type; reports the continuous '
                        "lower bound and the gap")
    q.add_argument("--gates-csv", metavar="FILE", help="write the per-gate table as CSV")
    q.add_argument("--json", action="store_true", help="print JSON only")
    q.set_defaults(func=cmd_size)

    q = sub.add_parser("sweep", help="sweep the energy-delay frontier; figures and tables",
                       description="Sweep the delay bound from the minimum delay to --span "
                                   "times it; write figures (PNG, SVG), CSV and JSON to --out.")
    case_args(q)
    q.add_argument("--points", type=int, default=25, help="frontier points (default 25)")
    q.add_argument("--span", type=float, default=2.0,
                   help="largest bound as a multiple of the minimum delay (default 2)")
    q.add_argument("--target", metavar="T",
                   help="delay bound of the chosen point (default: the case's target, if any)")
    q.add_argument("--balanced", action="store_true",
                   help="also find the least E*D and E*D^2 points")
    solve_args(q)
    q.add_argument("--out", metavar="DIR", help="output folder (default edopt-out/<case>)")
    q.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    q.add_argument("--json", action="store_true", help="print JSON only")
    q.set_defaults(func=cmd_sweep)

    q = sub.add_parser("generate", help="write a standard structure as a case file",
                       description="Build a standard structure (adders, decoders, trees, ...) "
                                   "and write it as a TOML case; without a name, list them.")
    q.add_argument("structure", nargs="?", help="structure name (omit to list them)")
    q.add_argument("--param", action="append", default=[], metavar="NAME=VALUE",
                   help="structure parameter, e.g. --param bits=32 (repeatable)")
    q.add_argument("--out", metavar="FILE", help="case file to write (default: stdout)")
    q.set_defaults(func=cmd_generate)

    q = sub.add_parser("supply", help="choose supply and threshold flavour with the sizes",
                       description="Search supplies and threshold flavours for the least energy "
                                   "per operation at a delay target or a throughput (neither: "
                                   "the minimum-energy point with the clock following the "
                                   "delay); write the envelope figures and tables to --out.")
    case_args(q)
    goal = q.add_mutually_exclusive_group()
    goal.add_argument("--target", metavar="T",
                      help='delay bound: "250ps" or "1.2x" the nominal minimum (default: the '
                           "case's target)")
    goal.add_argument("--throughput", type=_positive, metavar="OPS",
                      help="operations per second (the cycle time is 1/OPS)")
    q.add_argument("--supplies", metavar="V0:V1:STEP",
                   help="supply range in volts, or a comma list (default 13 values, 0.5x-1.2x)")
    q.add_argument("--flavours", metavar="A,B",
                   help="threshold flavours to try (default: all of the technology)")
    q.add_argument("--points", type=int, default=8,
                   help="delay targets of the voltage frontier (default 8)")
    q.add_argument("--out", metavar="DIR", help="output folder (default edopt-out/<case>-supply)")
    q.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    q.add_argument("--json", action="store_true", help="print JSON only")
    q.set_defaults(func=cmd_supply)

    q = sub.add_parser("demo", help="run a built-in case end to end",
                       description="Run a built-in case end to end: summary, fastest, 1.2x the "
                                   "minimum delay, frontier, balanced points, figures, tables.")
    q.add_argument("--case", choices=tuple(DEMO_CASES), default="decoder",
                   help="which built-in case (default decoder)")
    q.add_argument("--points", type=int, default=25, help="frontier points (default 25)")
    q.add_argument("--span", type=float, default=2.0, help="frontier span (default 2)")
    q.add_argument("--out", default=str(Path("edopt-out") / "demo"), metavar="DIR",
                   help="output folder (default edopt-out/demo)")
    q.add_argument("--quiet", action="store_true", help="no progress lines on stderr")
    q.set_defaults(func=cmd_demo)
    return p


def main(argv: Sequence[str] | None = None) -> int:
    """Run the command line; returns the exit code (0 done, 2 bad input, 3 infeasible)."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:               # argparse: --help (0) or a usage error (2)
        return int(exc.code) if isinstance(exc.code, int) else EXIT_INPUT
    try:
        return int(args.func(args))
    except InfeasibleTarget as exc:
        msg = str(exc)
        d = exc.min_delay_ps
        if d is not None and f"{d:.2f}" not in msg:
            msg += f" (minimum achievable delay {d:.2f} ps)"
        _err(msg)
        return EXIT_INFEASIBLE
    except EdoptError as exc:
        _err(str(exc))
        return EXIT_INPUT
    except OSError as exc:
        where = f"{exc.filename}: " if exc.filename else ""
        _err(f"{where}{exc.strerror or exc}")
        return EXIT_INPUT
    except KeyboardInterrupt:
        _err("interrupted")
        return 130
