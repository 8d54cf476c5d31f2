"""Cell maps: how the cells of a gate-level netlist become edopt gates.

A cell map says, for each cell name of a netlist, either

- a **gate cell**: an ordered list of single inverting *stages* (edopt gate types). Each stage
  names, for every pin of its gate type, the cell input pin or the earlier stage (``"#k"``, the
  output of stage ``k``, counted from 1) that feeds it; the last stage drives the cell's output
  pin. A cell that is one inverting stage (NAND, NOR, AOI, ...) has one stage; a non-inverting
  cell (AND, OR, buffer, multiplexer) is expanded into two or more, each sized on its own.
- a **register cell** (flip-flop, latch): it cuts the timing graph. Each output pin becomes a
  launch point (a primary input driven by an inverter of size ``drive`` whose input switches at
  ``arrival_ps``, the clock-to-output time before that last stage); each data pin (every input
  that is not a clock pin: D, enables, set/reset) becomes a capture point (a primary output with
  ``load`` C_u and ``allowance_ps``, the setup time, that must fit within the delay target).
  Clock pins are off the timing graph.

`builtin_map` covers the generic cells that yosys writes after technology-independent mapping
(``$_NOT_``, ``$_AND_``, ..., ``$_MUX_``, ``$_AOI3_``, ..., and its flip-flop and latch
families). The functions are those of yosys's ``simcells.v``; the tests check every expansion
against that file's models evaluated by yosys itself. A TOML map (schema in ``docs/verilog.md``)
adds cells and gate types to the built-in map or replaces it.
"""

from __future__ import annotations

import itertools
import math
import re
import tomllib
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from ..errors import CaseError, EdoptError
from ..gates import GateType, builtin_library, explicit, from_expression

__all__ = [
    "REGISTER_DEFAULTS",
    "CellDef",
    "CellMap",
    "Stage",
    "builtin_map",
    "cellmap_toml",
    "load_cellmap",
    "cellmap_from_toml_text",
    "with_register_values",
]

#: Invented round defaults of every register cell (generic technology, no real library):
#: output stage size (x), clock-to-output time before that stage (ps), load of each data pin
#: (C_u) and setup allowance (ps). Override per cell in a map or for all with ``register=``.
REGISTER_DEFAULTS: dict[str, float] = {
    "drive": 2.0, "arrival_ps": 25.0, "load": 2.0, "allowance_ps": 20.0,
}

_STAGE_REF = re.compile(r"#([1-9][0-9]*)")


@dataclass(frozen=True)
class Stage:
    """One inverting stage of a gate cell: a gate type and the source of each of its pins.

    ``pins[k]`` feeds pin ``k`` of the type (in the type's pin order): a cell input pin name or
    ``"#j"``, the output of stage ``j`` (1-based, earlier than this stage).
    """

    type: str
    pins: tuple[str, ...]


@dataclass(frozen=True)
class CellDef:
    """What one netlist cell is in edopt terms (see the module docstring).

    Parameters
    ----------
    name : cell name as written in the netlist (case-sensitive, without an escape backslash).
    inputs : input pins.
    outputs : output pins (gate cells have exactly one).
    ports : pin order of positional connections (empty: positional connections are refused).
    stages : the inverting stages of a gate cell; empty for registers.
    register : True for flip-flops and latches.
    clock : register pins that are off the timing graph.
    drive, arrival_ps, load, allowance_ps : register boundary values (`REGISTER_DEFAULTS`).
    description : free text.
    """

    name: str
    inputs: tuple[str, ...]
    outputs: tuple[str, ...]
    ports: tuple[str, ...] = ()
    stages: tuple[Stage, ...] = ()
    register: bool = False
    clock: tuple[str, ...] = ()
    drive: float = REGISTER_DEFAULTS["drive"]
    arrival_ps: float = REGISTER_DEFAULTS["arrival_ps"]
    load: float = REGISTER_DEFAULTS["load"]
    allowance_ps: float = REGISTER_DEFAULTS["allowance_ps"]
    description: str = ""

    @property
    def pins(self) -> tuple[str, ...]:
        """All pins: inputs then outputs."""
        return self.inputs + self.outputs

    @property
    def data(self) -> tuple[str, ...]:
        """Register inputs that are capture points (every input but the clock pins)."""
        return tuple(p for p in self.inputs if p not in self.clock)

    def check(self, types: Mapping[str, GateType]) -> None:
        """Raise EdoptError naming the problem if the definition is inconsistent."""
        who = f"cell {self.name!r}"
        pins = self.inputs + self.outputs
        dupes = sorted({p for p in pins if pins.count(p) > 1})
        if dupes:
            raise EdoptError(f"{who}: pin(s) {dupes} listed twice; name each pin once")
        if self.ports and sorted(self.ports) != sorted(pins):
            raise EdoptError(f"{who}: ports {list(self.ports)} must list each pin once "
                             f"(pins: {list(pins)})")
        if self.register:
            if self.stages:
                raise EdoptError(f"{who}: a register has no stages; remove them")
            if not self.outputs:
                raise EdoptError(f"{who}: a register needs at least one output pin")
            bad = [p for p in self.clock if p not in self.inputs]
            if bad:
                raise EdoptError(f"{who}: clock pin(s) {bad} are not among its inputs")
            for key in ("drive", "load"):
                if not _positive(getattr(self, key)):
                    raise EdoptError(f"{who}: {key} must be a positive number")
            for key in ("arrival_ps", "allowance_ps"):
                if not math.isfinite(getattr(self, key)):
                    raise EdoptError(f"{who}: {key} must be a finite number")
            return
        if len(self.outputs) != 1:
            raise EdoptError(f"{who}: a gate cell has exactly one output pin, got "
                             f"{list(self.outputs)}; map multi-output cells as separate cells")
        if not self.stages:
            raise EdoptError(f"{who}: give its stages (or type and pins for a one-stage cell)")
        used: set[str] = set()
        for k, st in enumerate(self.stages, start=1):
            gtype = types.get(st.type.lower())
            if gtype is None:
                raise EdoptError(f"{who}, stage {k}: unknown gate type {st.type!r}; known: "
                                 f"{', '.join(sorted(types))}")
            if len(st.pins) != len(gtype.pins):
                raise EdoptError(
                    f"{who}, stage {k}: type {gtype.name} has {len(gtype.pins)} pins "
                    f"({', '.join(gtype.pins)}), got {len(st.pins)} sources")
            for src in st.pins:
                m = _STAGE_REF.fullmatch(src)
                if m:
                    j = int(m.group(1))
                    if j >= k:
                        raise EdoptError(f"{who}, stage {k}: {src!r} refers to a stage that is "
                                         "not earlier; stages are numbered from 1 in order")
                    used.add(src)
                elif src not in self.inputs:
                    raise EdoptError(f"{who}, stage {k}: {src!r} is neither an input pin "
                                     f"({', '.join(self.inputs)}) nor an earlier stage '#j'")
                else:
                    used.add(src)
        for k in range(1, len(self.stages)):
            if f"#{k}" not in used:
                raise EdoptError(f"{who}: the output of stage {k} feeds no later stage")
        unused = [p for p in self.inputs if p not in used]
        if unused:
            raise EdoptError(f"{who}: input pin(s) {unused} feed no stage")


@dataclass
class CellMap:
    """Cell definitions by cell name, plus gate types the stages may use beyond the built-ins."""

    cells: dict[str, CellDef] = field(default_factory=dict)
    types: dict[str, GateType] = field(default_factory=dict)
    name: str = "cell map"
    source: str | None = None

    def get(self, cell: str) -> CellDef | None:
        return self.cells.get(cell)

    def library(self) -> dict[str, GateType]:
        """Gate types available to stages: the built-in library plus the map's own."""
        lib = builtin_library()
        lib.update(self.types)
        return lib

    def merged(self, other: CellMap) -> CellMap:
        """A new map with the cells and types of ``other`` added (replacing same names)."""
        return CellMap({**self.cells, **other.cells}, {**self.types, **other.types},
                       other.name, other.source)


# ------------------------------------------------------------------------------- built-in map
def _gate(name: str, ports: str, stages: Sequence[tuple[str, str]], text: str) -> CellDef:
    pins = ports.split()
    return CellDef(name=name, inputs=tuple(pins[:-1]), outputs=(pins[-1],), ports=tuple(pins),
                   stages=tuple(Stage(t, tuple(src.split())) for t, src in stages),
                   description=text)


def _registers() -> list[CellDef]:
    """The flip-flop and latch families of yosys's simcells.v (pin order as declared there)."""
    out: list[CellDef] = []

    def add(name: str, ports: str, clock: str, text: str) -> None:
        pins = ports.split()
        out.append(CellDef(name=name, inputs=tuple(pins[:-1]), outputs=(pins[-1],),
                           ports=tuple(pins), register=True, clock=tuple(clock.split()),
                           description=text))

    pn = "NP"
    add("$_FF_", "D Q", "", "flip-flop on the global clock")
    add("$_SR_NN_", "S R Q", "", "set-reset latch")
    for a, b in itertools.product(pn, pn):
        add(f"$_SR_{a}{b}_", "S R Q", "", "set-reset latch")
    for c in pn:
        add(f"$_DFF_{c}_", "D C Q", "C", "D flip-flop")
        add(f"$_DLATCH_{c}_", "E D Q", "E", "D latch (timed as edge-triggered)")
        for e in pn:
            add(f"$_DFFE_{c}{e}_", "D C E Q", "C", "D flip-flop with enable")
            add(f"$_ALDFF_{c}{e}_", "D C L AD Q", "C", "flip-flop with async load")
            for v in "01":
                add(f"$_DFF_{c}{e}{v}_", "D C R Q", "C", "D flip-flop with async reset")
                add(f"$_SDFF_{c}{e}{v}_", "D C R Q", "C", "D flip-flop with sync reset")
                add(f"$_DLATCH_{c}{e}{v}_", "E R D Q", "E", "D latch with reset")
                for f in pn:
                    add(f"$_DFFE_{c}{e}{v}{f}_", "D C R E Q", "C", "flip-flop, reset, enable")
                    add(f"$_SDFFE_{c}{e}{v}{f}_", "D C R E Q", "C", "flip-flop, sync reset")
                    add(f"$_SDFFCE_{c}{e}{v}{f}_", "D C R E Q", "C", "flip-flop, sync reset")
            for f in pn:
                add(f"$_ALDFFE_{c}{e}{f}_", "D C L AD E Q", "C", "flip-flop, async load")
                add(f"$_DFFSR_{c}{e}{f}_", "C S R D Q", "C", "flip-flop, set and reset")
                add(f"$_DLATCHSR_{c}{e}{f}_", "E S R D Q", "E", "latch, set and reset")
                for g in pn:
                    add(f"$_DFFSRE_{c}{e}{f}{g}_", "C S R E D Q", "C", "flip-flop, set/reset")
    return out


def _builtin_cells() -> dict[str, CellDef]:
    gates = [
        _gate("$_BUF_", "A Y", [("inv", "A"), ("inv", "#1")], "buffer: Y = A"),
        _gate("$_NOT_", "A Y", [("inv", "A")], "inverter: Y = ~A"),
        _gate("$_AND_", "A B Y", [("nand2", "A B"), ("inv", "#1")], "Y = A & B"),
        _gate("$_NAND_", "A B Y", [("nand2", "A B")], "Y = ~(A & B)"),
        _gate("$_OR_", "A B Y", [("nor2", "A B"), ("inv", "#1")], "Y = A | B"),
        _gate("$_NOR_", "A B Y", [("nor2", "A B")], "Y = ~(A | B)"),
        _gate("$_XOR_", "A B Y", [("xor2", "A B")], "Y = A ^ B"),
        _gate("$_XNOR_", "A B Y", [("xnor2", "A B")], "Y = ~(A ^ B)"),
        # A & ~B = ~(~A | B)
        _gate("$_ANDNOT_", "A B Y", [("inv", "A"), ("nor2", "#1 B")], "Y = A & ~B"),
        # A | ~B = ~(~A & B)
        _gate("$_ORNOT_", "A B Y", [("inv", "A"), ("nand2", "#1 B")], "Y = A | ~B"),
        # edopt's mux2 is NOT(S ? A : B): the cell's B is the S=1 input
        _gate("$_MUX_", "A B S Y", [("mux2", "B A S"), ("inv", "#1")], "Y = S ? B : A"),
        _gate("$_NMUX_", "A B S Y", [("mux2", "B A S")], "Y = S ? ~B : ~A"),
        _gate("$_AOI3_", "A B C Y", [("aoi21", "A B C")], "Y = ~((A & B) | C)"),
        _gate("$_OAI3_", "A B C Y", [("oai21", "A B C")], "Y = ~((A | B) & C)"),
        _gate("$_AOI4_", "A B C D Y", [("aoi22", "A B C D")], "Y = ~((A & B) | (C & D))"),
        _gate("$_OAI4_", "A B C D Y", [("oai22", "A B C D")], "Y = ~((A | B) & (C | D))"),
    ]
    cells = {c.name: c for c in gates + _registers()}
    return cells


_BUILTIN: CellMap | None = None


def builtin_map() -> CellMap:
    """The built-in map of yosys's generic gate, flip-flop and latch cells (a fresh copy)."""
    global _BUILTIN
    if _BUILTIN is None:
        _BUILTIN = CellMap(_builtin_cells(), {}, "yosys generic cells", None)
    return CellMap(dict(_BUILTIN.cells), {}, _BUILTIN.name, None)


def with_register_values(cmap: CellMap, values: Mapping[str, float] | None) -> CellMap:
    """A copy of ``cmap`` whose register cells all take the given boundary values."""
    if not values:
        return cmap
    bad = [k for k in values if k not in REGISTER_DEFAULTS]
    if bad:
        raise EdoptError(f"register: unknown key(s) {bad}; known: {', '.join(REGISTER_DEFAULTS)}")
    for k, v in values.items():
        kind = "positive" if k in ("drive", "load") else "finite"
        if not (_positive(v) if kind == "positive" else _finite(v)):
            raise EdoptError(f"register: {k} must be a {kind} number, got {v!r}")
    cells = {n: replace(c, **{k: float(v) for k, v in values.items()}) if c.register else c
             for n, c in cmap.cells.items()}
    return CellMap(cells, dict(cmap.types), cmap.name, cmap.source)


# ------------------------------------------------------------------------------------- TOML
_CELL_KEYS = {
    "name": "cell name as written in the netlist",
    "output": "output pin of a gate cell",
    "type": "gate type of a one-stage cell (with pins)",
    "pins": "sources of the type's pins, in the type's pin order (with type)",
    "stages": "array of {type, pins} tables, first stage first",
    "ports": "pin order of positional connections",
    "register": "true for a flip-flop or latch",
    "data": "register inputs that are capture points",
    "clock": "register inputs off the timing graph",
    "outputs": "register outputs (launch points)",
    "drive": "register: size of the output stage (x)",
    "arrival_ps": "register: clock-to-output time before the output stage (ps)",
    "load": "register: load of each data pin (C_u)",
    "allowance_ps": "register: setup time (ps)",
    "description": "free text",
}
_TYPE_KEYS = ("name", "pulldown", "pins", "g", "p", "area", "leak", "description")
_MAP_KEYS = ("name", "builtin")


class _Lines:
    """Line numbers of the ``[[cell]]`` / ``[[gate_type]]`` headers of a TOML text."""

    def __init__(self, text: str) -> None:
        self.heads: dict[str, list[int]] = {"cell": [], "gate_type": []}
        self.map_line: int | None = None
        for n, line in enumerate(text.splitlines(), start=1):
            m = re.match(r"\s*\[\[\s*(cell|gate_type)\s*\]\]", line)
            if m:
                self.heads[m.group(1)].append(n)
            elif re.match(r"\s*\[\s*map\s*\]", line):
                self.map_line = n

    def of(self, section: str, index: int) -> int | None:
        heads = self.heads.get(section, [])
        return heads[index] if index < len(heads) else None


def cellmap_from_toml_text(text: str, source: str = "<text>") -> CellMap:
    """Read a cell map from TOML text (schema in ``docs/verilog.md``); errors name the line."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        m = re.search(r"line (\d+)", str(exc))
        raise CaseError(f"not valid TOML: {exc}", source, int(m.group(1)) if m else None) from None
    lines = _Lines(text)
    unknown = [k for k in data if k not in ("map", "cell", "gate_type")]
    if unknown:
        raise CaseError(f"unknown table {unknown[0]!r}; a cell map has [map], [[gate_type]] and "
                        "[[cell]]", source)
    head = data.get("map", {})
    if not isinstance(head, dict):
        raise CaseError("[map] must be a table", source, lines.map_line)
    bad = [k for k in head if k not in _MAP_KEYS]
    if bad:
        raise CaseError(f"[map]: unknown key {bad[0]!r}; known: {', '.join(_MAP_KEYS)}",
                        source, lines.map_line)
    use_builtin = head.get("builtin", True)
    if not isinstance(use_builtin, bool):
        raise CaseError("[map] builtin must be true or false", source, lines.map_line)
    types: dict[str, GateType] = {}
    for k, entry in enumerate(_array(data, "gate_type", source)):
        line = lines.of("gate_type", k)
        types_entry = _type_from(entry, source, line)
        types[types_entry.name.lower()] = types_entry
    lib = builtin_library()
    lib.update(types)
    cells: dict[str, CellDef] = {}
    for k, entry in enumerate(_array(data, "cell", source)):
        line = lines.of("cell", k)
        cell = _cell_from(entry, source, line)
        if cell.name in cells:
            raise CaseError(f"cell {cell.name!r} is defined twice", source, line)
        try:
            cell.check(lib)
        except EdoptError as exc:
            raise CaseError(f"{exc}", source, line) from None
        cells[cell.name] = cell
    own = CellMap(cells, types, str(head.get("name", Path(source).stem)), source)
    return builtin_map().merged(own) if use_builtin else own


def load_cellmap(path: str | Path) -> CellMap:
    """Read a TOML cell map file (added to the built-in map unless ``[map] builtin = false``)."""
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise CaseError(f"cannot read the cell map: {exc.strerror}", str(path)) from None
    return cellmap_from_toml_text(text, str(path))


def _array(data: dict[str, Any], key: str, source: str) -> list[dict[str, Any]]:
    value = data.get(key, [])
    if not isinstance(value, list) or not all(isinstance(v, dict) for v in value):
        raise CaseError(f"{key} must be written as [[{key}]] tables", source)
    return value


def _type_from(e: dict[str, Any], source: str, line: int | None) -> GateType:
    bad = [k for k in e if k not in _TYPE_KEYS]
    if bad:
        raise CaseError(f"[[gate_type]]: unknown key {bad[0]!r}; known: {', '.join(_TYPE_KEYS)}",
                        source, line)
    name = e.get("name")
    if not isinstance(name, str) or not name:
        raise CaseError("[[gate_type]] needs a name", source, line)
    try:
        if "pulldown" in e:
            t = from_expression(name, e["pulldown"], e.get("pins"), e.get("description", ""))
            return replace(t, area_given=e.get("area"), leak_given=e.get("leak"))
        return explicit(name, e.get("pins", ()), e.get("g", ()), e.get("p", 0.0),
                        e.get("area"), e.get("leak"), e.get("description", ""))
    except EdoptError as exc:
        raise CaseError(str(exc), source, line) from None


def _strings(e: dict[str, Any], key: str, who: str, source: str, line: int | None
             ) -> tuple[str, ...]:
    value = e.get(key, [])
    if not isinstance(value, list) or not all(isinstance(v, str) and v for v in value):
        raise CaseError(f"{who}: {key} must be an array of pin names", source, line)
    return tuple(value)


def _cell_from(e: dict[str, Any], source: str, line: int | None) -> CellDef:
    bad = [k for k in e if k not in _CELL_KEYS]
    if bad:
        raise CaseError(f"[[cell]]: unknown key {bad[0]!r}; known: {', '.join(_CELL_KEYS)}",
                        source, line)
    name = e.get("name")
    if not isinstance(name, str) or not name:
        raise CaseError("[[cell]] needs a name", source, line)
    who = f"cell {name!r}"
    ports = _strings(e, "ports", who, source, line)
    text = e.get("description", "")
    if e.get("register", False) is True:
        misplaced = [k for k in ("output", "type", "pins", "stages") if k in e]
        if misplaced:
            raise CaseError(f"{who}: {misplaced[0]!r} is for gate cells; a register takes data, "
                            "clock and outputs", source, line)
        data_pins = _strings(e, "data", who, source, line)
        clock = _strings(e, "clock", who, source, line)
        outputs = _strings(e, "outputs", who, source, line)
        values = {}
        for key in REGISTER_DEFAULTS:
            v = e.get(key, REGISTER_DEFAULTS[key])
            if isinstance(v, bool) or not isinstance(v, (int, float)):
                raise CaseError(f"{who}: {key} must be a number", source, line)
            values[key] = float(v)
        inputs = data_pins + clock
        if ports:
            inputs = tuple(p for p in ports if p in inputs) + tuple(
                p for p in inputs if p not in ports)
        return CellDef(name, inputs, outputs, ports, (), True, clock,
                       description=text, **values)
    if "register" in e and e["register"] is not False:
        raise CaseError(f"{who}: register must be true or false", source, line)
    misplaced = [k for k in ("data", "clock", "outputs", *REGISTER_DEFAULTS) if k in e]
    if misplaced:
        raise CaseError(f"{who}: {misplaced[0]!r} is for register cells (register = true)",
                        source, line)
    output = e.get("output")
    if not isinstance(output, str) or not output:
        raise CaseError(f"{who}: give the output pin (output = \"Y\")", source, line)
    if ("type" in e) == ("stages" in e):
        raise CaseError(f"{who}: give either type and pins (one stage) or stages", source, line)
    raw = [{"type": e["type"], "pins": e.get("pins")}] if "type" in e else e["stages"]
    if not isinstance(raw, list) or not raw:
        raise CaseError(f"{who}: stages must be a non-empty array of {{type, pins}} tables",
                        source, line)
    stages = []
    for k, st in enumerate(raw, start=1):
        if (not isinstance(st, dict) or sorted(st) != ["pins", "type"]
                or not isinstance(st["type"], str) or not isinstance(st["pins"], list)
                or not all(isinstance(p, str) for p in st["pins"])):
            raise CaseError(
                f"{who}, stage {k}: write {{ type = \"nand2\", pins = [\"A\", \"B\"] }}",
                source, line)
        stages.append(Stage(st["type"].lower(), tuple(st["pins"])))
    inputs: dict[str, None] = {}
    for st in stages:
        for p in st.pins:
            if not _STAGE_REF.fullmatch(p):
                inputs.setdefault(p, None)
    if ports:
        order = [p for p in ports if p in inputs]
        inputs = dict.fromkeys(order + [p for p in inputs if p not in order])
    return CellDef(name, tuple(inputs), (output,), ports, tuple(stages), description=text)


def cellmap_toml(cmap: CellMap, header: str | None = None) -> str:
    """The TOML text of a cell map (``cellmap_from_toml_text`` reads it back)."""
    out: list[str] = []
    if header:
        out += [f"# {line}".rstrip() for line in header.splitlines()] + [""]
    out += ["[map]", f"name = {_q(cmap.name)}", "builtin = false"]
    for t in cmap.types.values():
        out += ["", "[[gate_type]]", f"name = {_q(t.name)}"]
        if t.pulldown is not None:
            out.append(f"pulldown = {_q(t.pulldown)}")
        else:
            out += [f"g = [{', '.join(repr(v) for v in t.g_given)}]", f"p = {t.p_given!r}"]
        out.append(f"pins = [{', '.join(_q(p) for p in t.pins)}]")
    for c in cmap.cells.values():
        out += ["", "[[cell]]", f"name = {_q(c.name)}"]
        if c.description:
            out.append(f"description = {_q(c.description)}")
        if c.register:
            out += ["register = true",
                    f"data = [{', '.join(_q(p) for p in c.data)}]",
                    f"clock = [{', '.join(_q(p) for p in c.clock)}]",
                    f"outputs = [{', '.join(_q(p) for p in c.outputs)}]"]
            out += [f"{k} = {getattr(c, k)!r}" for k in REGISTER_DEFAULTS]
        else:
            stages = ", ".join(
                f"{{ type = {_q(s.type)}, pins = [{', '.join(_q(p) for p in s.pins)}] }}"
                for s in c.stages)
            out += [f"output = {_q(c.outputs[0])}", f"stages = [{stages}]"]
        if c.ports:
            out.append(f"ports = [{', '.join(_q(p) for p in c.ports)}]")
    return "\n".join(out) + "\n"


def _q(text: str) -> str:
    return '"' + text.replace("\\", "\\\\").replace('"', '\\"') + '"'


def _positive(v: Any) -> bool:
    return _finite(v) and v > 0


def _finite(v: Any) -> bool:
    return (not isinstance(v, bool) and isinstance(v, (int, float)) and math.isfinite(v))
