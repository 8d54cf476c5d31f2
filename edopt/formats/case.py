"""The TOML case file: a gate network with its boundary conditions and technology.

The schema is documented in ``docs/case-format.md``; ``SCHEMA`` below is the single source of the
keys, their kinds and units. Reading checks every key and value and reports problems as
`CaseError` with the file and the line of the offending entry; the network itself is checked by
`Circuit.validate`, whose messages are prefixed with the line of the gate or port they name.

Units: sizes in unit-inverter drive strengths, capacitance in unit-inverter input capacitances
(C_u), times in ps, activity as a probability per operation.
"""

from __future__ import annotations

import json
import math
import re
import tomllib
from dataclasses import dataclass, replace
from pathlib import Path
from typing import Any

from ..circuit import DEFAULT_ACTIVITY, DEFAULT_SIZE_MAX, DEFAULT_SIZE_MIN, Circuit
from ..errors import CaseError, EdoptError
from ..gates import GateType, builtin_library, explicit, from_expression
from ..technology import (
    BUILTIN,
    Technology,
    load_technology,
    technology_from_table,
    technology_toml,
)

__all__ = [
    "SCHEMA",
    "Case",
    "case_from_toml_text",
    "circuit_from_toml_text",
    "load_case",
    "parse_target",
    "write_case",
]

# section -> key -> (kind, unit, meaning). Kinds: str, num, str_list, num_list, inputs, tech.
SCHEMA: dict[str, dict[str, tuple[str, str, str]]] = {
    "case": {
        "name": ("str", "-", "label of the circuit (default: the file name without .toml)"),
        "description": ("str", "-", "free text"),
        "technology": ("str", "-", '"generic" or a TOML technology file, relative to the case'),
        "size_min": ("num", "x", f"default lower size bound (default {DEFAULT_SIZE_MIN})"),
        "size_max": ("num", "x", f"default upper size bound (default {DEFAULT_SIZE_MAX:g})"),
        "activity": ("num", "1/op", f"default rising-output probability ({DEFAULT_ACTIVITY})"),
        "target": ("str", "ps or x", 'default delay target, "250ps" or "1.2x" the minimum'),
        "strengths": ("num_list", "x", "discrete drive strengths of every gate (default: "
                      "continuous sizes); edopt size then discretises"),
    },
    "gate_type": {
        "name": ("str", "-", "type name used by [[gate]] type (case-insensitive)"),
        "pulldown": ("str", "-", "pull-down expression: * series, + parallel, A' complement"),
        "pins": ("str_list", "-", "pin order (default: order of appearance in pulldown)"),
        "g": ("num_list", "-", "explicit logical effort per pin (with p, instead of pulldown)"),
        "p": ("num", "tau", "explicit parasitic delay (not scaled by p_inv)"),
        "area": ("num", "unit inv", "area per unit size (default: derived, or sum of g)"),
        "leak": ("num", "unit inv", "leakage per unit size (default: equal to area)"),
        "description": ("str", "-", "free text"),
    },
    "input": {
        "net": ("str", "-", "primary input net"),
        "arrival_ps": ("num", "ps", "arrival time of the signal (default 0)"),
        "drive": ("num", "x", "size of the outside inverter driving the net (default: ideal)"),
        "cap": ("num", "C_u", "given input capacitance; fixes the size of the one gate driven"),
        "cap_max": ("num", "C_u", "upper limit on the total input capacitance of the net"),
    },
    "output": {
        "net": ("str", "-", "primary output net"),
        "load": ("num", "C_u", "fixed load on the net, per copy of its driver"),
        "allowance_ps": ("num", "ps", "time after the output that must fit in the target (0)"),
    },
    "gate": {
        "name": ("str", "-", "instance name, unique"),
        "type": ("str", "-", "gate type: built-in or a [[gate_type]] name"),
        "inputs": ("inputs", "-", "pin -> net table, or array of nets in pin order"),
        "output": ("str", "-", "net driven by the gate"),
        "size": ("num", "x", "fixed size (the gate is not sized)"),
        "size_min": ("num", "x", "lower size bound of this gate (default [case] size_min)"),
        "size_max": ("num", "x", "upper size bound of this gate (default [case] size_max)"),
        "copies": ("num", "-", "identical copies, each driving a copy of its fan-out (1)"),
    },
    "net": {
        "name": ("str", "-", "net name"),
        "wire": ("num", "C_u", "fixed extra capacitance: wire and side loads (default 0)"),
        "activity": ("num", "1/op", "rising-transition probability of the net (0..1)"),
    },
}
_REQUIRED = {
    "case": (), "gate_type": ("name",), "input": ("net",), "output": ("net", "load"),
    "gate": ("name", "type", "inputs", "output"), "net": ("name",),
}
_ARRAYS = ("gate_type", "input", "output", "gate", "net")
_TOP = ("case", "technology", *_ARRAYS)
_KIND_TEXT = {
    "str": "a string", "num": "a number", "str_list": "an array of strings",
    "num_list": "an array of numbers", "inputs": "a table of pin = net or an array of nets",
}
_TARGET = re.compile(r"\s*((?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*(ps|x)\s*", re.IGNORECASE)


@dataclass
class Case:
    """A loaded case: the circuit, its technology and the default delay target.

    Parameters
    ----------
    circuit : the validated gate network.
    tech : technology of the case (built-in, file or inline table).
    target : delay target as written (``"250ps"`` or ``"1.2x"``), or None.
    path : the case file, or None for text.
    description : free text of ``[case] description``.
    """

    circuit: Circuit
    tech: Technology
    target: str | None = None
    path: Path | None = None
    description: str = ""
    strengths: list[float] | None = None


def parse_target(text: str) -> tuple[float, str]:
    """Split a delay target into ``(value, unit)`` with unit ``"ps"`` or ``"x"``.

    Raises
    ------
    ValueError : the text is not a positive number followed by ``ps`` or ``x``.

    Examples
    --------
    >>> parse_target("1.2x")
    (1.2, 'x')
    """
    m = _TARGET.fullmatch(text) if isinstance(text, str) else None
    if m is None or float(m.group(1)) <= 0:
        raise ValueError(
            f"delay target {text!r} must be a positive number followed by ps (absolute) or x "
            '(times the minimum delay), e.g. "250ps" or "1.2x"'
        )
    return float(m.group(1)), m.group(2).lower()


# ------------------------------------------------------------------------------------ lines
class _Lines:
    """Where each table entry and key starts in the raw text (one scan, best effort)."""

    _ARRAY_HEADER = re.compile(r"\[\[\s*([^\[\]]+?)\s*\]\]")
    _HEADER = re.compile(r"\[\s*([^\[\]]+?)\s*\]")
    _KEY = re.compile(r'([A-Za-z0-9_-]+|"[^"]*"|\'[^\']*\')\s*(?:\.[^=]*)?=')
    _NAMED = re.compile(r'\b(?:name|net)\s*=\s*"((?:[^"\\]|\\.)*)"')

    def __init__(self, text: str) -> None:
        self.header: dict[tuple[str, int], int] = {}
        self.keys: dict[tuple[str, int, str], int] = {}
        self.named: dict[str, int] = {}
        count: dict[str, int] = {}
        current: tuple[str, int] | None = None
        sub: str | None = None
        in_string: str | None = None
        for lineno, raw in enumerate(text.splitlines(), start=1):
            line = raw.strip()
            if in_string is not None:
                if line.count(in_string) % 2 == 1:
                    in_string = None
                continue
            for quote in ('"""', "'''"):
                if line.count(quote) % 2 == 1:
                    in_string = quote
            m = self._ARRAY_HEADER.match(line)
            if m:
                name = m.group(1).strip().strip('"')
                idx = count.get(name, 0)
                count[name] = idx + 1
                current, sub = (name, idx), None
                self.header.setdefault(current, lineno)
                continue
            m = self._HEADER.match(line)
            if m:
                name = m.group(1).strip()
                head, _, rest = name.partition(".")
                if rest and head in count:          # [gate.inputs] under the last [[gate]]
                    current, sub = (head, count[head] - 1), rest.split(".")[0].strip()
                    self.keys.setdefault((*current, sub), lineno)
                else:
                    current, sub = (head, 0), None
                    self.header.setdefault(current, lineno)
                continue
            m = self._KEY.match(line)
            if m and current is not None and sub is None:
                key = m.group(1).strip("\"'")
                self.keys.setdefault((*current, key), lineno)
            for n in self._NAMED.finditer(line):
                self.named.setdefault(n.group(1), lineno)

    def of(self, section: str, index: int, key: str | None = None, name: str | None = None
           ) -> int | None:
        """Line of ``key`` in entry ``index`` of ``section``, else of the entry, else of name."""
        if key is not None and (section, index, key) in self.keys:
            return self.keys[(section, index, key)]
        if (section, index) in self.header:
            return self.header[(section, index)]
        if name is not None:
            return self.named.get(name)
        return None


# ---------------------------------------------------------------------------------- reading
class _Reader:
    """One pass over the parsed TOML, building the Circuit with line-aware messages."""

    def __init__(self, text: str, source: str, base_dir: Path | None) -> None:
        self.text = text
        self.source = source
        self.base_dir = base_dir
        self.lines: _Lines | None = None
        self.entry_of: dict[tuple[str, str], int] = {}     # (section, name) -> index

    def lines_(self) -> _Lines:
        if self.lines is None:
            self.lines = _Lines(self.text)
        return self.lines

    def fail(self, message: str, section: str | None = None, index: int = 0,
             key: str | None = None, name: str | None = None) -> CaseError:
        line = None
        if section is not None:
            line = self.lines_().of(section, index, key, name)
        return CaseError(message, self.source, line)

    # -------------------------------------------------------------- values
    def label(self, section: str, index: int, entry: dict[str, Any]) -> str:
        if section in ("case", "technology"):
            return f"[{section}]"
        ident = entry.get("name", entry.get("net"))
        who = f" {ident!r}" if isinstance(ident, str) else ""
        return f"[[{section}]] entry {index + 1}{who}"

    def check_entry(self, section: str, index: int, entry: Any) -> dict[str, Any]:
        if not isinstance(entry, dict):
            raise self.fail(
                f"[[{section}]] entry {index + 1} must be a table of keys, got "
                f"{type(entry).__name__}", section, index)
        keys = SCHEMA[section]
        label = self.label(section, index, entry)
        for key in entry:
            if key not in keys:
                raise self.fail(
                    f"{label}: unknown key {key!r}; known keys: {', '.join(sorted(keys))}",
                    section, index, key)
        for key in _REQUIRED[section]:
            if key not in entry:
                what = keys[key][2]
                raise self.fail(f"{label}: missing required key {key!r}: {what}", section, index)
        for key, value in entry.items():
            kind, unit, _ = keys[key]
            self.check_value(section, index, label, key, value, kind, unit)
        return entry

    def check_value(self, section: str, index: int, label: str, key: str, value: Any,
                    kind: str, unit: str) -> None:
        def bad(extra: str = "") -> CaseError:
            units = f" ({unit})" if unit != "-" else ""
            return self.fail(
                f"{label}: {key} must be {_KIND_TEXT[kind]}{units}, got {_show(value)}{extra}",
                section, index, key)

        if kind == "str":
            if not isinstance(value, str):
                raise bad()
            if key in ("name", "net", "type", "output") and not value.strip():
                raise self.fail(f"{label}: {key} must not be empty", section, index, key)
        elif kind == "num":
            self.check_number(section, index, label, key, value, unit, bad)
        elif kind == "str_list":
            if not isinstance(value, list) or not all(isinstance(v, str) for v in value):
                raise bad()
        elif kind == "num_list":
            if not isinstance(value, list):
                raise bad()
            for v in value:
                self.check_number(section, index, label, key, v, unit, bad)
        elif kind == "inputs":
            if isinstance(value, dict):
                bad_nets = [p for p, v in value.items() if not isinstance(v, str)]
                if bad_nets:
                    raise self.fail(
                        f"{label}: inputs pin {bad_nets[0]!r} must name a net (a string), got "
                        f"{_show(value[bad_nets[0]])}", section, index, key)
            elif not isinstance(value, list) or not all(isinstance(v, str) for v in value):
                raise bad()

    def check_number(self, section: str, index: int, label: str, key: str, value: Any,
                     unit: str, bad: Any) -> None:
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            raise bad()
        if isinstance(value, float) and math.isnan(value):
            raise self.fail(
                f"{label}: {key} is nan (not a number); give a finite value"
                + (f" in {unit}" if unit != "-" else ""), section, index, key)
        if isinstance(value, float) and math.isinf(value):
            raise self.fail(f"{label}: {key} is {value}; give a finite value", section, index, key)

    # --------------------------------------------------------------- parse
    def read(self) -> Case:
        try:
            data = tomllib.loads(self.text)
        except tomllib.TOMLDecodeError as exc:
            raise CaseError(f"malformed TOML: {exc}", self.source, _toml_line(exc)) from None
        for key, value in data.items():
            if key not in _TOP:
                line = self.lines_().header.get((key, 0)) or _top_key_line(self.text, key)
                raise CaseError(
                    f"unknown top-level key or table {key!r}; known: "
                    + ", ".join(f"[{k}]" if k in ("case", "technology") else f"[[{k}]]"
                                for k in _TOP),
                    self.source, line)
            if key in ("case", "technology") and not isinstance(value, dict):
                raise CaseError(f"{key} must be a table, written [{key}]", self.source,
                                _top_key_line(self.text, key))
            if key in _ARRAYS and not (isinstance(value, list)):
                raise CaseError(f"{key} must be an array of tables, each written [[{key}]]",
                                self.source, self.lines_().header.get((key, 0))
                                or _top_key_line(self.text, key))

        case = self.check_entry("case", 0, data.get("case", {}))
        tech = self.read_technology(case, data.get("technology"))
        target = case.get("target")
        if target is not None:
            try:
                parse_target(target)
            except ValueError as exc:
                raise self.fail(f"[case]: {exc}", "case", 0, "target") from None
        stem = Path(self.source).stem
        name = case.get("name") or (stem if stem and not stem.startswith("<") else "circuit")
        circuit = Circuit(
            name,
            size_min=float(case.get("size_min", DEFAULT_SIZE_MIN)),
            size_max=float(case.get("size_max", DEFAULT_SIZE_MAX)),
            activity_default=float(case.get("activity", DEFAULT_ACTIVITY)),
            source=self.source,
        )
        for key in ("size_min", "size_max"):
            if circuit.__dict__[key] <= 0:
                raise self.fail(f"[case]: {key} must be > 0, got {case[key]!r}", "case", 0, key)
        if circuit.size_min > circuit.size_max:
            raise self.fail(
                f"[case]: size_min {circuit.size_min} is above size_max {circuit.size_max}",
                "case", 0, "size_min")
        if not 0 <= circuit.activity_default <= 1:
            raise self.fail(
                f"[case]: activity {circuit.activity_default} is a probability per operation; "
                "use 0..1", "case", 0, "activity")

        if not data.get("gate"):
            raise CaseError(
                "the case has no [[gate]] entries; describe the network with [[gate]] tables "
                "(name, type, inputs, output), see docs/case-format.md", self.source)
        for section in _ARRAYS:
            for index, entry in enumerate(data.get(section, [])):
                entry = self.check_entry(section, index, entry)
                getattr(self, f"add_{section}")(circuit, index, entry)
        self.validate(circuit)
        strengths = case.get("strengths")
        if strengths is not None and (not strengths or min(strengths) <= 0):
            raise self.fail("[case]: strengths must be a non-empty list of sizes > 0",
                            "case", 0, "strengths")
        return Case(circuit, tech, target, None, case.get("description", ""),
                    None if strengths is None else [float(v) for v in strengths])

    def read_technology(self, case: dict[str, Any], table: Any) -> Technology:
        ref = case.get("technology")
        if table is not None:
            if ref is not None:
                raise self.fail(
                    "give the technology either as [case] technology or as an inline "
                    "[technology] table, not both", "case", 0, "technology")
            try:
                return technology_from_table(table, source=self.source)
            except CaseError as exc:
                raise CaseError(_strip_where(str(exc), self.source), self.source,
                                self.lines_().of("technology", 0)) from None
        if ref is None or ref in BUILTIN:
            return BUILTIN["generic" if ref is None else ref]
        path = Path(ref)
        if not path.is_absolute() and self.base_dir is not None:
            path = self.base_dir / path
        if not path.exists():
            raise self.fail(
                f"[case]: technology {ref!r} is neither a built-in ({', '.join(BUILTIN)}) nor "
                f"a file (looked for {path})", "case", 0, "technology")
        return load_technology(path)

    def once(self, section: str, index: int, name: str, what: str) -> None:
        first = self.entry_of.setdefault((section, name), index)
        if first != index:
            raise self.fail(
                f"[[{section}]] entry {index + 1}: {what} {name!r} is already defined in entry "
                f"{first + 1} (line {self.lines_().of(section, first)}); keep one",
                section, index)

    def wrap(self, exc: EdoptError, section: str, index: int, entry: dict[str, Any]) -> CaseError:
        """Attribute a builder error to the key it names, else to the entry."""
        msg = str(exc)
        key = None
        if "unknown gate type" in msg:
            key = "type"
        elif " pin" in msg:
            key = "inputs"
        else:
            for k in entry:
                if f": {k} " in msg:
                    key = k
                    break
        return self.fail(msg, section, index, key, entry.get("name", entry.get("net")))

    def add_gate_type(self, circuit: Circuit, index: int, e: dict[str, Any]) -> None:
        name = e["name"]
        self.once("gate_type", index, name.lower(), "gate type")
        try:
            if "pulldown" in e:
                for key in ("g", "p"):
                    if key in e:
                        raise self.fail(
                            f"[[gate_type]] {name!r}: give either pulldown or g and p, not both "
                            f"(drop {key})", "gate_type", index, key)
                gt = from_expression(name, e["pulldown"], e.get("pins"), e.get("description", ""))
                if "area" in e or "leak" in e:
                    gt = replace(gt, area_given=e.get("area"), leak_given=e.get("leak"))
            else:
                missing = [k for k in ("pins", "g", "p") if k not in e]
                if missing:
                    raise self.fail(
                        f"[[gate_type]] {name!r}: give a pulldown expression, or pins, g and p "
                        f"(missing {', '.join(missing)})", "gate_type", index)
                gt = explicit(name, e["pins"], e["g"], e["p"], e.get("area"), e.get("leak"),
                              e.get("description", ""))
        except CaseError:
            raise
        except EdoptError as exc:
            key = "pulldown" if "expression" in str(exc) else None
            if key is None:
                key = next((k for k in ("pins", "g", "area", "leak", "p")
                            if k in e and f" {k} " in str(exc) + " "), None)
            raise self.fail(str(exc), "gate_type", index, key) from None
        circuit.add_type(gt)

    def add_input(self, circuit: Circuit, index: int, e: dict[str, Any]) -> None:
        self.once("input", index, e["net"], "input net")
        try:
            circuit.add_input(e["net"], float(e.get("arrival_ps", 0.0)), _opt(e, "drive"),
                              _opt(e, "cap"), _opt(e, "cap_max"))
        except EdoptError as exc:
            raise self.wrap(exc, "input", index, e) from None

    def add_output(self, circuit: Circuit, index: int, e: dict[str, Any]) -> None:
        self.once("output", index, e["net"], "output net")
        try:
            circuit.add_output(e["net"], float(e["load"]), float(e.get("allowance_ps", 0.0)))
        except EdoptError as exc:
            raise self.wrap(exc, "output", index, e) from None

    def add_gate(self, circuit: Circuit, index: int, e: dict[str, Any]) -> None:
        self.once("gate", index, e["name"], "gate")
        try:
            circuit.add_gate(e["name"], e["type"], e["inputs"], e["output"], _opt(e, "size"),
                             _opt(e, "size_min"), _opt(e, "size_max"),
                             float(e.get("copies", 1.0)))
        except EdoptError as exc:
            raise self.wrap(exc, "gate", index, e) from None

    def add_net(self, circuit: Circuit, index: int, e: dict[str, Any]) -> None:
        self.once("net", index, e["name"], "net")
        try:
            circuit.set_net(e["name"], _opt(e, "wire"), _opt(e, "activity"))
        except EdoptError as exc:
            raise self.wrap(exc, "net", index, e) from None

    def validate(self, circuit: Circuit) -> None:
        try:
            circuit.validate()
        except EdoptError as exc:
            msg = str(exc)
            raise CaseError(msg, self.source, self.line_of_message(circuit, msg)) from None

    def line_of_message(self, circuit: Circuit, msg: str) -> int | None:
        """The line of the gate (else port or net entry) a validation message names."""
        gates: list[str] = []
        m = re.search(r"through gates (.+)$", msg)
        if m:
            gates = [g.strip() for g in m.group(1).split(" -> ")]
        refs = re.findall(r"\b(gate|net|input|output)s?\s+'([^']*)'(?:\s+and\s+'([^']*)')?", msg)
        for kind, first, second in refs:
            if kind == "gate":
                gates += [first] + ([second] if second else [])
        gates = [g for g in gates if ("gate", g) in self.entry_of]
        if gates:
            gate = gates[-1] if "two drivers" in msg else gates[0]
            key = None
            if "has no driver" in msg:
                key = "inputs"
            elif any(s in msg for s in ("two drivers", "drives net", "is a primary input but")):
                key = "output"
            return self.lines_().of("gate", self.entry_of[("gate", gate)], key, gate)
        for kind, name, _ in refs:
            section = kind if kind != "net" else None
            for sec in ([section] if section else ["net", "input", "output"]):
                if (sec, name) in self.entry_of:
                    return self.lines_().of(sec, self.entry_of[(sec, name)], name=name)
        for key in ("size_min", "size_max", "activity"):
            if msg.startswith(key):
                return self.lines_().of("case", 0, key)
        return None


def _opt(entry: dict[str, Any], key: str) -> float | None:
    value = entry.get(key)
    return None if value is None else float(value)


def _show(value: Any) -> str:
    kind = {str: "string", bool: "boolean", int: "integer", float: "float", list: "array",
            dict: "table"}.get(type(value), type(value).__name__)
    text = repr(value)
    return f"{kind} {text if len(text) <= 40 else text[:37] + '...'}"


def _toml_line(exc: tomllib.TOMLDecodeError) -> int | None:
    line = getattr(exc, "lineno", None)
    if line is None:
        m = re.search(r"at line (\d+)", str(exc))
        line = int(m.group(1)) if m else None
    return line


def _top_key_line(text: str, key: str) -> int | None:
    pattern = re.compile(rf'\s*(?:\[+\s*)?(?:{re.escape(key)}|"{re.escape(key)}")\b')
    for lineno, line in enumerate(text.splitlines(), start=1):
        if pattern.match(line):
            return lineno
    return None


def _strip_where(message: str, source: str) -> str:
    return message.removeprefix(f"{source}: ")


def case_from_toml_text(text: str, source: str = "<text>", base_dir: str | Path | None = None
                        ) -> Case:
    """Read a case from TOML text.

    Parameters
    ----------
    text : the case file contents.
    source : file name used in messages.
    base_dir : directory against which a relative ``[case] technology`` path is resolved
        (default: the current directory).

    Raises
    ------
    CaseError : malformed TOML, unknown key, wrong type or value, or an invalid network; the
        message starts with ``source:line:``.
    """
    return _Reader(text, source, None if base_dir is None else Path(base_dir)).read()


def circuit_from_toml_text(text: str, source: str = "<text>",
                           base_dir: str | Path | None = None) -> Circuit:
    """The validated Circuit of a case given as TOML text (see `case_from_toml_text`).

    Examples
    --------
    >>> text = '''
    ... [[input]]
    ... net = "a"
    ... [[output]]
    ... net = "y"
    ... load = 4.0
    ... [[gate]]
    ... name = "u1"
    ... type = "inv"
    ... inputs = ["a"]
    ... output = "y"
    ... '''
    >>> circuit_from_toml_text(text).gates["u1"].inputs
    {'A': 'a'}
    """
    return case_from_toml_text(text, source, base_dir).circuit


def load_case(path: str | Path) -> Case:
    """Read a TOML case file (schema in ``docs/case-format.md``).

    Raises
    ------
    CaseError : the file cannot be read or is invalid; the message names file and line.
    """
    path = Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except OSError as exc:
        raise CaseError(f"cannot read case file: {exc.strerror}", str(path)) from None
    except UnicodeDecodeError as exc:
        raise CaseError(f"case file is not UTF-8 text ({exc.reason})", str(path)) from None
    case = _Reader(text, str(path), path.parent).read()
    case.path = path
    return case


# ---------------------------------------------------------------------------------- writing
_BARE = re.compile(r"[A-Za-z0-9_-]+")


def _s(text: str) -> str:
    return json.dumps(text, ensure_ascii=False)


def _k(key: str) -> str:
    return key if _BARE.fullmatch(key) else _s(key)


def _n(value: float) -> str:
    if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
        raise CaseError(f"cannot write the non-finite or non-numeric value {value!r}")
    return str(value) if isinstance(value, int) else repr(float(value))


def _type_lines(t: GateType) -> list[str]:
    out = ["[[gate_type]]", f"name = {_s(t.name)}"]
    if t.pulldown is not None:
        out.append(f"pulldown = {_s(t.pulldown)}")
    out.append("pins = [" + ", ".join(_s(p) for p in t.pins) + "]")
    if t.pulldown is None:
        out.append("g = [" + ", ".join(_n(v) for v in t.g_given) + "]")
        out.append(f"p = {_n(t.p_given)}    # tau")
    if t.area_given is not None:
        out.append(f"area = {_n(t.area_given)}")
    if t.leak_given is not None:
        out.append(f"leak = {_n(t.leak_given)}")
    if t.description:
        out.append(f"description = {_s(t.description)}")
    return out


def write_case(
    circuit: Circuit,
    tech: Technology | None = None,
    path: str | Path | None = None,
    *,
    target: str | None = None,
    description: str = "",
    header: str | None = None,
    strengths: list[float] | None = None,
) -> str:
    """Serialise a circuit and its technology as a case file; ``load_case`` reads it back.

    Parameters
    ----------
    circuit : the network (validated before writing).
    tech : technology; the built-in one is written by name, any other as an inline table.
    path : where to write the text; None only returns it.
    target : default delay target such as ``"1.2x"`` (checked with `parse_target`).
    description : ``[case] description``.
    header : comment lines put at the top of the file.
    strengths : ``[case] strengths``, the discrete drive strengths (sizes > 0).

    Returns
    -------
    str : the TOML text.
    """
    circuit.validate()
    tech = BUILTIN["generic"] if tech is None else tech
    if target is not None:
        try:
            parse_target(target)
        except ValueError as exc:
            raise CaseError(str(exc)) from None
    if strengths is not None and (len(strengths) == 0 or min(strengths) <= 0):
        raise CaseError("strengths must be a non-empty list of sizes > 0")
    out: list[str] = []
    if header:
        out += [f"# {line}".rstrip() for line in header.splitlines()] + [""]
    out += ["[case]", f"name = {_s(circuit.name)}"]
    if description:
        out.append(f"description = {_s(description)}")
    builtin = BUILTIN.get(tech.name) == tech
    if builtin:
        out.append(f"technology = {_s(tech.name)}")
    out += [
        f"size_min = {_n(circuit.size_min)}    # x (unit-inverter sizes)",
        f"size_max = {_n(circuit.size_max)}    # x",
        f"activity = {_n(circuit.activity_default)}    # rising transitions per operation",
    ]
    if target is not None:
        out.append(f"target = {_s(target)}")
    if strengths is not None:
        out.append(f"strengths = [{', '.join(_n(float(v)) for v in strengths)}]    # x")
    if not builtin:
        out += ["", technology_toml(tech).rstrip("\n")]
    lib = builtin_library()
    for key, t in circuit.types.items():
        if lib.get(key) != t:
            out += [""] + _type_lines(t)
    for port in circuit.inputs.values():
        out += ["", "[[input]]", f"net = {_s(port.net)}"]
        if port.arrival_ps:
            out.append(f"arrival_ps = {_n(port.arrival_ps)}")
        for key in ("drive", "cap", "cap_max"):
            value = getattr(port, key)
            if value is not None:
                out.append(f"{key} = {_n(value)}" + ("" if key == "drive" else "    # C_u"))
    for port in circuit.outputs.values():
        out += ["", "[[output]]", f"net = {_s(port.net)}", f"load = {_n(port.load)}    # C_u"]
        if port.allowance_ps:
            out.append(f"allowance_ps = {_n(port.allowance_ps)}")
    for g in circuit.gates.values():
        pins = ", ".join(f"{_k(p)} = {_s(n)}" for p, n in g.inputs.items())
        out += ["", "[[gate]]", f"name = {_s(g.name)}", f"type = {_s(g.type)}",
                f"inputs = {{ {pins} }}", f"output = {_s(g.output)}"]
        for key in ("size", "size_min", "size_max"):
            value = getattr(g, key)
            if value is not None:
                out.append(f"{key} = {_n(value)}")
        if g.copies != 1:
            out.append(f"copies = {_n(g.copies)}")
    for net in dict.fromkeys(list(circuit.wire) + list(circuit.activity)):
        out += ["", "[[net]]", f"name = {_s(net)}"]
        if net in circuit.wire:
            out.append(f"wire = {_n(circuit.wire[net])}    # C_u")
        if net in circuit.activity:
            out.append(f"activity = {_n(circuit.activity[net])}")
    text = "\n".join(out) + "\n"
    if path is not None:
        Path(path).write_text(text, encoding="utf-8")
    return text
