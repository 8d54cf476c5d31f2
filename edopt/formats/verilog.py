"""Gate-level structural Verilog in and out.

``read_verilog`` turns a netlist (IEEE 1364, structural subset) into an edopt `Circuit`;
``write_verilog`` writes the sized netlist back with each instance's sizes as an attribute and
``write_sizes_csv`` lists instance -> size by the original instance names. The supported
subset, the cell maps and the defaults are documented in ``docs/verilog.md``.

Reading is one pass of a regular-expression tokenizer, one recursive-descent parse, one link
pass per module (cells and modules resolved, expressions turned into bit lists) and one
elaboration that flattens the hierarchy into nets joined with a union-find. Units: sizes in
unit-inverter drive strengths, capacitance in C_u, times in ps.
"""

from __future__ import annotations

import bisect
import csv
import gc
import io
import re
from collections import Counter
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from ..circuit import Circuit, Gate
from ..errors import CaseError, EdoptError
from .cellmap import (
    CellDef,
    CellMap,
    Stage,
    builtin_map,
    load_cellmap,
    with_register_values,
)

__all__ = [
    "DEFAULT_INPUT_DRIVE",
    "DEFAULT_OUTPUT_LOAD",
    "SIZE_ATTRIBUTE",
    "Instance",
    "Netlist",
    "netlist_of",
    "read_netlist",
    "read_verilog",
    "write_sizes_csv",
    "write_verilog",
]

DEFAULT_INPUT_DRIVE = 4.0   # x: each top-level input is driven by an inverter of this size
DEFAULT_OUTPUT_LOAD = 8.0   # C_u on each top-level output bit
SIZE_ATTRIBUTE = "edopt_size"
STAGES_ATTRIBUTE = "edopt_stages"

# ------------------------------------------------------------------------------- tokenizer
# One match = skipped text (white space, comments, attributes; possessive, so never given back)
# followed by one token. Tokens are plain strings; their kind is told by the first character.
_SKIP = r"(?:[ \t\r\n\f\v]+|//[^\n]*|/\*.*?\*/|\(\*(?!\)).*?\*\))*+"
_TOKEN = re.compile(
    _SKIP + r"(\\\S+"                                                    # escaped identifier
    r"|[A-Za-z_][A-Za-z0-9_$]*"                                          # identifier
    r"|(?:[0-9][0-9_]*[ \t]*)?'[sS]?[bBoOdDhH][ \t]*[0-9a-fA-FxXzZ?_]+"  # sized number
    r"|[0-9][0-9_]*"                                                     # decimal number
    r"|\"(?:[^\"\\\n]|\\.)*\""                                           # string
    r"|`[A-Za-z_][A-Za-z0-9_]*[^\n]*"                                    # compiler directive
    r"|~&|~\||~\^|\^~|&&|\|\||/\*|\(\*"                                  # two-character tokens
    r"|.)",                                                              # anything else
    re.S,
)
_OPS = set("()[]{},;:.=~&|^?#@!+-*/<>%") | {"~&", "~|", "~^", "^~", "&&", "||"}
_SKIPPED_DIRECTIVES = {"timescale", "celldefine", "endcelldefine", "default_nettype",
                       "resetall", "nounconnected_drive", "unconnected_drive"}

_UNSUPPORTED = {
    "always": "behavioural 'always' blocks", "initial": "'initial' blocks",
    "generate": "generate blocks", "function": "functions", "task": "tasks",
    "specify": "specify blocks", "defparam": "defparam", "parameter": "parameters",
    "localparam": "parameters", "genvar": "generate variables", "integer": "integer variables",
    "real": "real variables", "time": "time variables", "event": "events",
    "primitive": "user-defined primitives", "module": "nested modules",
}
_NET_KEYWORDS = {"wire", "reg", "tri", "wand", "wor", "tri0", "tri1", "uwire", "supply0",
                 "supply1", "logic"}
_DIRECTIONS = {"input", "output", "inout"}
_PRIMITIVES = {"and", "nand", "or", "nor", "xor", "xnor", "not", "buf"}
_KEYWORDS = (_DIRECTIONS | _NET_KEYWORDS | _PRIMITIVES | set(_UNSUPPORTED)
             | {"assign", "endmodule", "macromodule", "signed", "begin", "end", "if", "else",
                "case", "endcase", "posedge", "negedge", "default", "for", "while"})
_CONST = {"1'b0": 0, "1'b1": 1, "1'bx": 0}
_NAME_START = set("abcdefghijklmnopqrstuvwxyzABCDEFGHIJKLMNOPQRSTUVWXYZ_\\")


class _Source:
    """One file's text and tokens; positions (token indexes) become lines only for messages."""

    def __init__(self, path: str, text: str) -> None:
        self.path = path
        self.text = text
        self._nl: list[int] | None = None
        self._starts: list[int] | None = None

    def tokens(self) -> list[str]:
        toks = _TOKEN.findall(self.text)
        if "`" in self.text:
            for k, t in enumerate(toks):
                if t[0] == "`":
                    word = re.match(r"`(\w+)", t).group(1)  # type: ignore[union-attr]
                    if word not in _SKIPPED_DIRECTIVES:
                        raise self.error(f"compiler directive `{word} is not supported; "
                                         "preprocess the netlist first", k)
            toks = [t for t in toks if t[0] != "`"]
            self._starts = [m.start(1) for m in _TOKEN.finditer(self.text)
                            if m.group(1)[0] != "`"]
        toks += [""] * 8      # end of file (padded: the parser looks a few tokens ahead)
        return toks

    def offset(self, tok: int) -> int:
        if self._starts is None:
            self._starts = [m.start(1) for m in _TOKEN.finditer(self.text)]
        return self._starts[tok] if tok < len(self._starts) else len(self.text)

    def line(self, tok: int) -> int:
        """1-based line of the token with index ``tok``."""
        if self._nl is None:
            self._nl = [m.start() for m in re.finditer("\n", self.text)]
        return bisect.bisect_left(self._nl, self.offset(tok)) + 1

    def error(self, message: str, tok: int) -> CaseError:
        return CaseError(message, self.path, self.line(tok))


# ---------------------------------------------------------------------------------- parser
# Expressions are tuples, positions are token indexes: ("id", name, pos) ("bit", name, i, pos)
# ("part", name, m, l, pos) ("const", bits_msb_first, pos, sized) ("cat", [e], pos)
# ("rep", n, e, pos) ("~", e) ("&" | "|" | "^", a, b) ("?", s, t, f)
_PLAIN = {"id", "bit", "part", "const", "cat", "rep"}


@dataclass
class _Inst:
    cell: str
    name: str
    conns: dict[str, Any] | list[Any]   # pin -> expr (None = open) or positional exprs
    pos: int
    primitive: bool = False


@dataclass
class _Module:
    name: str
    src: _Source
    pos: int
    ports: list[str] = field(default_factory=list)
    dirs: dict[str, str] = field(default_factory=dict)
    ranges: dict[str, tuple[int, int] | None] = field(default_factory=dict)
    decl_pos: dict[str, int] = field(default_factory=dict)
    insts: list[_Inst] = field(default_factory=list)
    assigns: list[tuple[Any, Any, int]] = field(default_factory=list)
    supplies: list[tuple[str, str, int]] = field(default_factory=list)
    inst_pos: dict[str, int] = field(default_factory=dict)


def _is_name(t: str) -> bool:
    return bool(t) and t[0] in _NAME_START and t not in _KEYWORDS


def _bare(t: str) -> str:
    return t[1:] if t[0] == "\\" else t


class _Parser:
    def __init__(self, src: _Source) -> None:
        self.src = src
        self.t = src.tokens()
        self.i = 0
        self.module: _Module | None = None

    # -- token helpers
    def fail(self, message: str, i: int | None = None) -> CaseError:
        i = self.i if i is None else i
        tok = self.t[i]
        if tok == "":
            where = ""
            if self.module is not None:
                where = (f" inside module {self.module.name!r} (begun at line "
                         f"{self.src.line(self.module.pos)})")
            return self.src.error(f"the file ends{where}: it looks truncated ({message})", i)
        if tok == "/*":
            return self.src.error("a /* comment is never closed: the file looks truncated", i)
        if tok == "(*":
            return self.src.error("an (* attribute *) is never closed: the file looks "
                                  "truncated", i)
        if tok == '"':
            return self.src.error("a string is never closed on its line", i)
        return self.src.error(f"syntax error at {tok!r}: {message}", i)

    def expect(self, value: str, what: str = "") -> None:
        if self.t[self.i] != value:
            raise self.fail(f"expected {value!r}{what}")
        self.i += 1

    def accept(self, value: str) -> bool:
        if self.t[self.i] == value:
            self.i += 1
            return True
        return False

    def ident(self, what: str) -> str:
        tok = self.t[self.i]
        if _is_name(tok):
            self.i += 1
            return _bare(tok)
        raise self.fail(f"expected {what}")

    def integer(self, what: str) -> int:
        tok = self.t[self.i]
        if not tok or not tok[0].isdigit() or "'" in tok:
            raise self.fail(f"expected {what} (a decimal number; parameters are not supported)")
        self.i += 1
        return int(tok.replace("_", ""))

    # -- file level
    def parse(self) -> list[_Module]:
        modules = []
        while self.t[self.i] != "":
            if self.t[self.i] in ("module", "macromodule"):
                modules.append(self.parse_module())
            else:
                raise self.fail("expected 'module'")
        return modules

    def parse_module(self) -> _Module:
        pos = self.i
        self.i += 1
        name = self.ident("a module name")
        mod = _Module(name, self.src, pos)
        self.module = mod
        if self.t[self.i] == "#":
            raise self.fail("parameters are not supported in a structural netlist; give "
                            "ranges as numbers")
        if self.accept("("):
            if not self.accept(")"):
                self.port_list(mod)
        self.expect(";", " after the module header")
        t = self.t
        while True:
            v = t[self.i]
            if v == "":
                raise self.fail("expected 'endmodule'")
            if v == "endmodule":
                self.i += 1
                break
            self.item(mod)
        for p in mod.ports:
            if p not in mod.dirs:
                raise self.src.error(f"module {name!r}: port {p!r} has no input/output "
                                     "declaration", mod.decl_pos.get(p, mod.pos))
        self.module = None
        return mod

    def port_list(self, mod: _Module) -> None:
        direction = None
        rng: tuple[int, int] | None = None
        while True:
            if self.t[self.i] in _DIRECTIONS:
                direction = self.t[self.i]
                self.i += 1
                if self.t[self.i] in _NET_KEYWORDS:
                    self.i += 1
                self.accept("signed")
                rng = self.range_opt()
                name_pos = self.i
                name = self.ident("a port name")
                self.declare(mod, name, rng, name_pos, direction)
            elif direction is not None:
                name_pos = self.i
                name = self.ident("a port name")
                self.declare(mod, name, rng, name_pos, direction)
            else:
                if self.t[self.i] == ".":
                    raise self.fail("named port expressions in a module header are not "
                                    "supported")
                name_pos = self.i
                name = self.ident("a port name")
                mod.decl_pos.setdefault(name, name_pos)
            mod.ports.append(name)
            if self.accept(")"):
                return
            self.expect(",", " or ')' in the port list")

    def range_opt(self) -> tuple[int, int] | None:
        if not self.accept("["):
            return None
        msb = self.integer("a range bound")
        self.expect(":", " in the range")
        lsb = self.integer("a range bound")
        self.expect("]", " closing the range")
        return (msb, lsb)

    def declare(self, mod: _Module, name: str, rng: tuple[int, int] | None, pos: int,
                direction: str | None) -> None:
        if name in mod.ranges and mod.ranges[name] != rng:
            raise self.src.error(f"{name!r} is declared again with another range "
                                 f"({_show_range(mod.ranges[name])} then {_show_range(rng)})", pos)
        mod.ranges[name] = rng
        mod.decl_pos.setdefault(name, pos)
        if direction is not None:
            if name in mod.dirs and mod.dirs[name] != direction:
                raise self.src.error(f"port {name!r} is declared both {mod.dirs[name]} and "
                                     f"{direction}", pos)
            mod.dirs[name] = direction

    # -- module items
    def item(self, mod: _Module) -> None:
        v, start = self.t[self.i], self.i
        if v in _DIRECTIONS:
            self.i += 1
            if self.t[self.i] in _NET_KEYWORDS:
                self.i += 1
            self.accept("signed")
            rng = self.range_opt()
            while True:
                pos = self.i
                name = self.ident("a port name")
                if name not in mod.ports:
                    raise self.src.error(f"{v} {name!r} is not in the port list of module "
                                         f"{mod.name!r}", pos)
                self.declare(mod, name, rng, pos, v)
                if not self.accept(","):
                    break
            self.expect(";", " after the declaration")
            return
        if v in _NET_KEYWORDS:
            self.i += 1
            self.accept("signed")
            rng = self.range_opt()
            while True:
                pos = self.i
                name = self.ident("a net name")
                if self.t[self.i] == "[":
                    raise self.fail("arrays of nets are not supported")
                self.declare(mod, name, rng, pos, None)
                if v in ("supply0", "supply1"):
                    mod.supplies.append((name, "1'b0" if v == "supply0" else "1'b1", pos))
                if self.accept("="):
                    mod.assigns.append((("id", name, pos), self.expr(), pos))
                if not self.accept(","):
                    break
            self.expect(";", " after the declaration")
            return
        if v == "assign":
            self.i += 1
            if self.t[self.i] == "#":
                raise self.fail("delays are not supported")
            while True:
                pos = self.i
                lhs = self.expr()
                self.expect("=", " in the assignment")
                mod.assigns.append((lhs, self.expr(), pos))
                if not self.accept(","):
                    break
            self.expect(";", " after the assignment")
            return
        if v in _PRIMITIVES:
            self.primitive(mod)
            return
        if v in _UNSUPPORTED:
            raise self.src.error(
                f"{_UNSUPPORTED[v]} are not part of the structural subset read here"
                + ("; write the netlist with yosys 'write_verilog -noexpr' so that "
                   "registers are cell instances" if v == "always" else ""), start)
        if v in _KEYWORDS:
            raise self.fail("not supported in a structural netlist")
        if _is_name(v):
            self.instances(mod)
            return
        raise self.fail("expected a declaration, 'assign', a cell instance or 'endmodule'")

    def instances(self, mod: _Module) -> None:
        cell = _bare(self.t[self.i])
        self.i += 1
        if self.t[self.i] == "#":
            raise self.fail("parameter overrides on instances are not supported")
        t = self.t
        while True:
            pos = self.i
            name = self.ident(f"an instance name after the cell name {cell!r}")
            if t[self.i] == "[":
                raise self.fail("arrays of instances are not supported")
            self.expect("(", f" opening the connections of instance {name!r}")
            conns: dict[str, Any] | list[Any]
            if t[self.i] == ".":
                conns = {}
                while True:
                    i = self.i
                    if t[i] != ".":
                        raise self.fail("expected '.' before a pin name")
                    pin = t[i + 1]
                    if not _is_name(pin):
                        raise self.fail("expected a pin name", i + 1)
                    pin = _bare(pin)
                    if pin in conns:
                        raise self.fail(f"pin {pin!r} of instance {name!r} is connected twice",
                                        i + 1)
                    if t[i + 2] != "(":
                        raise self.fail(f"expected '(' after .{pin}", i + 2)
                    v = t[i + 3]
                    # fast paths: .A(net) and .A(bus[3])
                    if t[i + 4] == ")" and _is_name(v):
                        conns[pin] = ("id", _bare(v), i + 3)
                        self.i = i + 5
                    elif (t[i + 4] == "[" and t[i + 6] == "]" and t[i + 7] == ")"
                          and _is_name(v) and t[i + 5].isdigit()):
                        conns[pin] = ("bit", _bare(v), int(t[i + 5]), i + 3)
                        self.i = i + 8
                    elif v == ")":
                        conns[pin] = None
                        self.i = i + 4
                    else:
                        self.i = i + 3
                        conns[pin] = self.expr()
                        self.expect(")", f" closing .{pin}(...)")
                    if t[self.i] != ",":
                        break
                    self.i += 1
            else:
                conns = []
                if t[self.i] != ")":
                    while True:
                        conns.append(None if t[self.i] in (",", ")") else self.expr())
                        if not self.accept(","):
                            break
            self.expect(")", f" closing the connections of instance {name!r}")
            self.add_inst(mod, _Inst(cell, name, conns, pos))
            if not self.accept(","):
                break
        self.expect(";", " after the instance")

    def primitive(self, mod: _Module) -> None:
        kind = self.t[self.i]
        self.i += 1
        if self.t[self.i] == "#":
            raise self.fail("delays are not supported")
        while True:
            pos = self.i
            if _is_name(self.t[self.i]) and self.t[self.i + 1] in ("(", "["):
                name = self.ident("an instance name")
            else:
                name = f"{kind}@{self.src.line(pos)}.{len(mod.insts)}"
            if self.t[self.i] == "[":
                raise self.fail("arrays of instances are not supported")
            self.expect("(", f" opening the terminals of the {kind} gate")
            terms = [self.expr()]
            while self.accept(","):
                terms.append(self.expr())
            self.expect(")", f" closing the terminals of the {kind} gate")
            self.add_inst(mod, _Inst(kind, name, terms, pos, primitive=True))
            if not self.accept(","):
                break
        self.expect(";", f" after the {kind} gate")

    def add_inst(self, mod: _Module, inst: _Inst) -> None:
        if inst.name in mod.inst_pos:
            raise self.src.error(
                f"duplicate instance {inst.name!r} in module {mod.name!r} (first at line "
                f"{self.src.line(mod.inst_pos[inst.name])}); give each instance its own name",
                inst.pos)
        mod.inst_pos[inst.name] = inst.pos
        mod.insts.append(inst)

    # -- expressions
    def expr(self) -> Any:
        cond = self.or_expr()
        if self.accept("?"):
            t = self.expr()
            self.expect(":", " in the ?: expression")
            f = self.expr()
            return ("?", cond, t, f)
        return cond

    def or_expr(self) -> Any:
        e = self.xor_expr()
        while self.t[self.i] == "|":
            self.i += 1
            e = ("|", e, self.xor_expr())
        return e

    def xor_expr(self) -> Any:
        e = self.and_expr()
        while self.t[self.i] in ("^", "~^", "^~"):
            op = self.t[self.i]
            self.i += 1
            rhs = self.and_expr()
            e = ("^", e, rhs) if op == "^" else ("~", ("^", e, rhs))
        return e

    def and_expr(self) -> Any:
        e = self.unary()
        while self.t[self.i] == "&":
            self.i += 1
            e = ("&", e, self.unary())
        return e

    def unary(self) -> Any:
        v = self.t[self.i]
        if v in ("~", "!"):
            self.i += 1
            return ("~", self.unary())
        if v in ("&", "|", "^", "~&", "~|", "~^", "^~"):
            raise self.fail("reduction operators are not supported; write one gate per bit")
        return self.primary()

    def primary(self) -> Any:
        pos = self.i
        v = self.t[pos]
        if v == "(":
            self.i += 1
            e = self.expr()
            self.expect(")", " closing the parenthesis")
            return e
        if v == "{":
            self.i += 1
            nxt = self.t[self.i]
            if nxt and nxt[0].isdigit() and "'" not in nxt and self.t[self.i + 1] == "{":
                n = self.integer("a replication count")
                self.i += 1
                inner = self.concat_items(pos)
                self.expect("}", " closing the replication")
                self.expect("}", " closing the replication")
                return ("rep", n, inner, pos)
            e = self.concat_items(pos)
            self.expect("}", " closing the concatenation")
            return e
        if v and (v[0].isdigit() or v[0] == "'"):
            self.i += 1
            bits, sized = _const_bits(v)
            if bits is None:
                raise self.src.error(f"cannot read the number {v!r}", pos)
            return ("const", bits, pos, sized)
        if _is_name(v):
            self.i += 1
            name = _bare(v)
            if self.t[self.i] == "[":
                self.i += 1
                a = self.integer("a bit index")
                if self.accept(":"):
                    b = self.integer("a bit index")
                    self.expect("]", " closing the part select")
                    return ("part", name, a, b, pos)
                if self.t[self.i] in ("+", "-"):
                    raise self.fail("indexed part selects are not supported")
                self.expect("]", " closing the bit select")
                return ("bit", name, a, pos)
            return ("id", name, pos)
        raise self.fail("expected a net, a constant, '(' or '{'")

    def concat_items(self, pos: int) -> Any:
        items = [self.expr()]
        while self.accept(","):
            items.append(self.expr())
        return ("cat", items, pos)


def _const_bits(text: str) -> tuple[str | None, bool]:
    """Bits (MSB first, chars 0/1/x) of a Verilog number and whether it was sized."""
    t = text.replace("_", "").replace(" ", "").replace("\t", "")
    if "'" not in t:
        return format(int(t), "032b")[-32:], False
    size_s, rest = t.split("'", 1)
    rest = rest.lstrip("sS")
    base, digits = rest[0].lower(), rest[1:].lower().replace("?", "z")
    width = int(size_s) if size_s else 32
    if width < 1:
        return None, True
    if base == "d":
        if not digits.isdigit():
            return ("x" * width) if set(digits) <= {"x", "z"} else None, bool(size_s)
        bits = format(int(digits), "b")
    else:
        per = {"b": 1, "o": 3, "h": 4}[base]
        out = []
        for ch in digits:
            if ch in "xz":
                out.append("x" * per)
            else:
                try:
                    out.append(format(int(ch, 16 if per == 4 else 8 if per == 3 else 2),
                                      f"0{per}b"))
                except ValueError:
                    return None, True
                if per < 4 and int(ch, 16) >= 2**per:
                    return None, True
        bits = "".join(out)
    if len(bits) < width:
        bits = ("x" if bits[0] == "x" else "0") * (width - len(bits)) + bits
    return bits[-width:], bool(size_s)


def _show_range(rng: tuple[int, int] | None) -> str:
    return "scalar" if rng is None else f"[{rng[0]}:{rng[1]}]"


# ----------------------------------------------------------------------- expression gates
_TEMPLATE_TEXT = [
    ("$_NOT_", "~A"),
    ("$_AND_", "A & B"), ("$_NAND_", "~(A & B)"), ("$_NAND_", "~A | ~B"),
    ("$_OR_", "A | B"), ("$_NOR_", "~(A | B)"), ("$_NOR_", "~A & ~B"),
    ("$_XOR_", "A ^ B"), ("$_XNOR_", "~(A ^ B)"), ("$_XNOR_", "~A ^ B"),
    ("$_ANDNOT_", "A & ~B"), ("$_ORNOT_", "A | ~B"),
    ("$_MUX_", "S ? B : A"), ("$_NMUX_", "~(S ? B : A)"), ("$_NMUX_", "S ? ~B : ~A"),
    ("$_AOI3_", "~((A & B) | C)"), ("$_OAI3_", "~((A | B) & C)"),
    ("$_AOI4_", "~((A & B) | (C & D))"), ("$_OAI4_", "~((A | B) & (C | D))"),
]
_TEMPLATES: list[tuple[str, Any]] | None = None
_FORMS = ("~a, a & b, a | b, a ^ b and their negations, a & ~b, a | ~b, s ? b : a, "
          "~((a & b) | c), ~((a | b) & c), ~((a & b) | (c & d)), ~((a | b) & (c | d))")


def _templates() -> list[tuple[str, Any]]:
    global _TEMPLATES
    if _TEMPLATES is None:
        out = []
        for cell, text in _TEMPLATE_TEXT:
            p = _Parser(_Source("<template>", text))
            out.append((cell, _normal(p.expr())))
        _TEMPLATES = out
    return _TEMPLATES


def _normal(e: Any) -> Any:
    """Drop double negations; turn ``~s ? a : b`` into ``s ? b : a``."""
    op = e[0]
    if op in _PLAIN:
        return e
    if op == "~":
        inner = _normal(e[1])
        return inner[1] if inner[0] == "~" else ("~", inner)
    if op == "?":
        s, t, f = _normal(e[1]), _normal(e[2]), _normal(e[3])
        if s[0] == "~":
            return ("?", s[1], f, t)
        return ("?", s, t, f)
    return (op, _normal(e[1]), _normal(e[2]))


def _match(pat: Any, e: Any, bind: dict[str, Any]) -> bool:
    op = pat[0]
    if op == "id":
        if e[0] not in _PLAIN:
            return False
        bind[pat[1]] = e
        return True
    if e[0] != op:
        return False
    if op == "~":
        return _match(pat[1], e[1], bind)
    if op == "?":
        return all(_match(p, x, bind) for p, x in zip(pat[1:], e[1:]))
    trial = dict(bind)
    if _match(pat[1], e[1], trial) and _match(pat[2], e[2], trial):
        bind.update(trial)
        return True
    trial = dict(bind)
    if _match(pat[1], e[2], trial) and _match(pat[2], e[1], trial):
        bind.update(trial)
        return True
    return False


def _match_gate(tree: Any) -> tuple[str, dict[str, Any]] | None:
    """The yosys cell whose function the expression tree is, with its pin operands."""
    for cell, pat in _templates():
        bind: dict[str, Any] = {}
        if _match(pat, tree, bind):
            return cell, bind
    return None


# --------------------------------------------------------------------------------- linking
@dataclass
class _Linked:
    """A module with every instance resolved and every expression turned into bit keys."""

    mod: _Module
    cells: list[tuple[str, CellDef, str, dict[str, str | None], int]]
    subs: list[tuple[str, _Linked | None, str, list[tuple[str, str]], int]]
    aliases: list[tuple[str, str, int]]


def _primitive_cell(kind: str, n_in: int, src: _Source, pos: int) -> CellDef:
    pins = ["A", "B", "C", "D"][:n_in]
    if kind in ("not", "buf"):
        if n_in != 1:
            raise src.error(f"'{kind}' gates with several outputs are not supported; write one "
                            "gate per output", pos)
        stages = [Stage("inv", ("A",))] + ([Stage("inv", ("#1",))] if kind == "buf" else [])
    elif kind in ("xor", "xnor"):
        if n_in != 2:
            raise src.error(f"'{kind}' gates take two inputs here, got {n_in}", pos)
        stages = [Stage(f"{kind}2", ("A", "B"))]
    else:
        if not 2 <= n_in <= 4:
            raise src.error(f"'{kind}' gates take 2 to 4 inputs here, got {n_in}", pos)
        base = "nand" if kind in ("and", "nand") else "nor"
        stages = [Stage(f"{base}{n_in}", tuple(pins))]
        if kind in ("and", "or"):
            stages.append(Stage("inv", ("#1",)))
    return CellDef(kind, tuple(pins), ("Y",), ("Y", *pins), tuple(stages),
                   description=f"Verilog gate primitive '{kind}'")


class _Linker:
    def __init__(self, modules: dict[str, _Module], cmap: CellMap) -> None:
        self.modules = modules
        self.cmap = cmap
        self.builtin = builtin_map()
        self.done: dict[str, _Linked] = {}
        self.stack: list[str] = []

    def link(self, name: str) -> _Linked:
        if name in self.done:
            return self.done[name]
        mod = self.modules[name]
        if name in self.stack:
            raise mod.src.error(f"module {name!r} instantiates itself (through "
                                f"{' -> '.join(self.stack)}); hierarchy must be a tree", mod.pos)
        self.stack.append(name)
        out = _Linked(mod, [], [], [])
        for net, const, pos in mod.supplies:
            out.aliases.append((net, const, pos))
        for inst in mod.insts:
            self.link_inst(mod, inst, out)
        for lhs, rhs, pos in mod.assigns:
            self.link_assign(mod, lhs, rhs, pos, out)
        self.stack.pop()
        self.done[name] = out
        return out

    def bits(self, mod: _Module, e: Any, width: int | None = None, lhs: bool = False
             ) -> list[str]:
        """Bit keys of a plain expression, MSB first; a lone constant adapts to ``width``."""
        op = e[0]
        if op == "const":
            if lhs:
                raise mod.src.error("a constant cannot be assigned to", e[2])
            bits = e[1]
            if width is not None and len(bits) != width:
                bits = bits[-width:] if len(bits) > width else "0" * (width - len(bits)) + bits
            return [f"1'b{b}" for b in bits]
        if op == "id":
            name = e[1]
            if name not in mod.ranges:
                mod.ranges[name] = None     # an implicit scalar net
                mod.decl_pos[name] = e[2]
            rng = mod.ranges[name]
            if rng is None:
                return [name]
            m, lo = rng
            step = -1 if m >= lo else 1
            return [f"{name}[{i}]" for i in range(m, lo + step, step)]
        if op == "bit" or op == "part":
            name = e[1]
            rng = mod.ranges.get(name)
            if rng is None:
                what = "is not declared" if name not in mod.ranges else "is a scalar"
                raise mod.src.error(f"net {name!r} {what}; it has no bit {e[2]}", e[-1])
            m, lo = rng
            a, b = (e[2], e[2]) if op == "bit" else (e[2], e[3])
            for x in (a, b):
                if not min(m, lo) <= x <= max(m, lo):
                    raise mod.src.error(f"bit {x} of {name!r} is outside its range "
                                        f"{_show_range(rng)}", e[-1])
            if a != b and (a > b) != (m > lo):
                raise mod.src.error(f"part select [{a}:{b}] of {name!r} runs against its "
                                    f"declared range {_show_range(rng)}", e[-1])
            step = -1 if a >= b else 1
            return [f"{name}[{i}]" for i in range(a, b + step, step)]
        if op == "cat":
            return [k for item in e[1] for k in self.bits(mod, item, lhs=lhs)]
        if op == "rep":
            if lhs:
                raise mod.src.error("a replication cannot be assigned to", e[3])
            return self.bits(mod, e[2]) * e[1]
        raise mod.src.error(
            f"only nets, bit and part selects, constants and concatenations can be connected "
            f"here, not a {op!r} expression", _pos_of(e))

    def cell_of(self, mod: _Module, inst: _Inst) -> CellDef | _Module:
        if inst.primitive:
            n_in = len(inst.conns) - 1
            if n_in < 1:
                raise mod.src.error(f"the {inst.cell} gate needs an output and inputs", inst.pos)
            return _primitive_cell(inst.cell, n_in, mod.src, inst.pos)
        cdef = self.cmap.get(inst.cell)
        if cdef is not None:
            return cdef
        if inst.cell in self.modules:
            return self.modules[inst.cell]
        hint = ""
        if inst.cell.startswith("$"):
            hint = " (a yosys internal cell the built-in map does not cover)"
        raise mod.src.error(
            f"instance {inst.name!r}: unknown cell or missing module {inst.cell!r}{hint}; "
            "define the module in the netlist or map the cell in a cell map", inst.pos)

    def link_inst(self, mod: _Module, inst: _Inst, out: _Linked) -> None:
        target = self.cell_of(mod, inst)
        if isinstance(target, _Module):
            self.link_sub(mod, inst, target, out)
            return
        cdef = target
        conns = inst.conns
        if isinstance(conns, list):
            if not cdef.ports:
                raise mod.src.error(
                    f"instance {inst.name!r}: cell {cdef.name!r} has no pin order for positional "
                    "connections; connect by name (.A(net)) or give ports in the cell map",
                    inst.pos)
            if len(conns) > len(cdef.ports):
                raise mod.src.error(
                    f"instance {inst.name!r}: {len(conns)} connections for the "
                    f"{len(cdef.ports)} pins of {cdef.name!r} ({', '.join(cdef.ports)})",
                    inst.pos)
            conns = dict(zip(cdef.ports, conns))
        pins: dict[str, str | None] = {}
        for pin, e in conns.items():
            if pin not in cdef.inputs and pin not in cdef.outputs:
                raise mod.src.error(
                    f"instance {inst.name!r}: cell {cdef.name!r} has no pin {pin!r} (pins: "
                    f"{', '.join(cdef.pins)})", inst.pos)
            if e is None:
                pins[pin] = None
                continue
            op = e[0]
            if op == "id" and e[1] in mod.ranges and mod.ranges[e[1]] is None:
                pins[pin] = e[1]        # fast path: a declared scalar net
                continue
            if op == "bit":
                rng = mod.ranges.get(e[1])
                if rng is not None and min(rng) <= e[2] <= max(rng):
                    pins[pin] = f"{e[1]}[{e[2]}]"
                    continue
            keys = self.bits(mod, e, width=1, lhs=pin in cdef.outputs)
            if len(keys) != 1:
                raise mod.src.error(
                    f"instance {inst.name!r}: pin {pin!r} is one bit but is connected to "
                    f"{len(keys)} bits", inst.pos)
            pins[pin] = keys[0]
        for pin in cdef.inputs:
            if pins.get(pin) is None:
                raise mod.src.error(
                    f"instance {inst.name!r}: input pin {pin!r} of cell {cdef.name!r} is "
                    "unconnected; connect it (tie unused inputs to 1'b0 or 1'b1)", inst.pos)
        origin = "primitive" if inst.primitive else "instance"
        out.cells.append((inst.name, cdef, origin, pins, inst.pos))

    def link_sub(self, mod: _Module, inst: _Inst, child: _Module, out: _Linked) -> None:
        conns = inst.conns
        if isinstance(conns, list):
            if len(conns) > len(child.ports):
                raise mod.src.error(
                    f"instance {inst.name!r}: {len(conns)} connections for the "
                    f"{len(child.ports)} ports of module {child.name!r}", inst.pos)
            conns = dict(zip(child.ports, conns))
        pairs: list[tuple[str, str]] = []
        for port, e in conns.items():
            if port not in child.dirs:
                raise mod.src.error(
                    f"instance {inst.name!r}: module {child.name!r} has no port {port!r} "
                    f"(ports: {', '.join(child.ports)})", inst.pos)
            if e is None:
                continue
            inner = self.bits(child, ("id", port, child.pos))
            outer = self.bits(mod, e, width=len(inner), lhs=child.dirs[port] == "output")
            if len(inner) != len(outer):
                raise mod.src.error(
                    f"instance {inst.name!r}: port {port!r} of module {child.name!r} has "
                    f"{len(inner)} bits but is connected to {len(outer)}", inst.pos)
            pairs += zip(inner, outer)
        linked = self.link(child.name)
        out.subs.append((inst.name, linked, child.name, pairs, inst.pos))

    def link_assign(self, mod: _Module, lhs: Any, rhs: Any, pos: int, out: _Linked) -> None:
        lk = self.bits(mod, lhs, lhs=True)
        if rhs[0] in _PLAIN:
            rk = self.bits(mod, rhs, width=len(lk))
            if len(rk) != len(lk):
                raise mod.src.error(f"assignment of {len(rk)} bits to {len(lk)} bits", pos)
            out.aliases += [(a, b, pos) for a, b in zip(lk, rk)]
            return
        tree = _normal(rhs)
        if tree[0] in _PLAIN:           # e.g. ~~a: an alias after all
            self.link_assign(mod, lhs, tree, pos, out)
            return
        found = _match_gate(tree)
        if found is None:
            raise mod.src.error(
                "the expression is not a single gate; supported forms: " + _FORMS, pos)
        cell, bind = found
        cdef = self.builtin.cells[cell]
        leaf_bits = {}
        for var, leaf in bind.items():
            bits = self.bits(mod, leaf, width=len(lk))
            if len(bits) != len(lk):
                raise mod.src.error(f"operand of {len(bits)} bits in an assignment to "
                                    f"{len(lk)} bits", pos)
            leaf_bits[var] = bits
        for i, key in enumerate(lk):
            pins: dict[str, str | None] = {var: bits[i] for var, bits in leaf_bits.items()}
            pins["Y"] = key
            out.cells.append((f"assign:{key}", cdef, "assign", pins, pos))


def _pos_of(e: Any) -> int:
    for x in e[1:]:
        if isinstance(x, int) and not isinstance(x, bool):
            return x
        if isinstance(x, tuple):
            p = _pos_of(x)
            if p >= 0:
                return p
    return -1


# ---------------------------------------------------------------------------- elaboration
_C0, _C1 = 0, 1
_PRIO_CONST, _PRIO_IN, _PRIO_OUT, _PRIO_WIRE = 100, 3, 2, 1


class _Flat:
    """Flattened nets (union-find with name priority) and cell instances."""

    def __init__(self) -> None:
        self.names: list[str] = ["1'b0", "1'b1"]
        self.parent: list[int] = [0, 1]
        self.prio: list[int] = [_PRIO_CONST, _PRIO_CONST]
        # name, cell, origin, pins(pin -> gid | None), source, pos
        self.cells: list[tuple[str, CellDef, str, dict[str, int | None], _Source, int]] = []
        self.cell_names: dict[str, int] = {}

    def new(self, name: str, prio: int) -> int:
        g = len(self.names)
        self.names.append(name)
        self.parent.append(g)
        self.prio.append(prio)
        return g

    def find(self, g: int) -> int:
        parent = self.parent
        while parent[g] != g:
            parent[g] = parent[parent[g]]
            g = parent[g]
        return g

    def union(self, a: int, b: int, src: _Source, pos: int) -> None:
        ra, rb = self.find(a), self.find(b)
        if ra == rb:
            return
        if {ra, rb} == {_C0, _C1}:
            raise src.error("this connection ties 1'b0 to 1'b1", pos)
        if (self.prio[rb], -rb) > (self.prio[ra], -ra):
            ra, rb = rb, ra
        self.parent[rb] = ra

    def elaborate(self, linked: _Linked, prefix: str, env: dict[str, int], depth: int) -> None:
        names_prio = _PRIO_WIRE if depth == 0 else -depth
        new = self.new

        def gid(key: str) -> int:
            g = env.get(key)
            if g is None:
                c = _CONST.get(key)
                if c is not None:
                    return c
                g = env[key] = new(prefix + key, names_prio)
            return g

        src = linked.mod.src
        for a, b, pos in linked.aliases:
            self.union(gid(a), gid(b), src, pos)
        cells, cell_names = self.cells, self.cell_names
        for name, cdef, origin, pins, pos in linked.cells:
            full = prefix + name
            if full in cell_names:
                first = self.cells[cell_names[full]]
                raise src.error(f"duplicate instance {full!r} (first at "
                                f"{first[4].path}:{first[4].line(first[5])})", pos)
            cell_names[full] = len(cells)
            cells.append((full, cdef, origin,
                          {p: (None if k is None else gid(k)) for p, k in pins.items()},
                          src, pos))
        for name, child, _cname, pairs, _pos in linked.subs:
            child_env = {inner: gid(outer) for inner, outer in pairs}
            assert child is not None
            self.elaborate(child, f"{prefix}{name}.", child_env, depth + 1)


# ------------------------------------------------------------------------------ results
class Instance:
    """One cell of the flattened netlist and the edopt gates it became.

    Attributes
    ----------
    name : flattened instance name (``sub.inst`` inside hierarchy; ``assign:<net>`` for a gate
        written as a continuous assignment; ``<gate>@<line>.<k>`` for an unnamed primitive).
    cell : cell name (``$_AND_``, a library cell, or a primitive keyword such as ``nand``).
    origin : ``"instance"``, ``"primitive"`` or ``"assign"``.
    register : True for flip-flops and latches (not sized; they cut the timing graph).
    pins : cell pin -> net name (``1'b0`` / ``1'b1`` for tie-offs, None when open).
    gates : edopt gate names of its stages, first stage first (``name`` for a single stage,
        ``name#1``, ``name#2``, ... for an expanded cell); empty when not sized.
    types : gate type of each stage.
    file, line : where the instance is written.
    note : why the instance is not sized, if it is not.
    """

    __slots__ = ("name", "cell", "origin", "register", "pins", "gates", "types", "note",
                 "_src", "_tok")

    def __init__(self, name: str, cell: str, origin: str, register: bool,
                 pins: dict[str, str | None], gates: tuple[str, ...], types: tuple[str, ...],
                 src: _Source, tok: int, note: str = "") -> None:
        self.name, self.cell, self.origin, self.register = name, cell, origin, register
        self.pins, self.gates, self.types, self.note = pins, gates, types, note
        self._src, self._tok = src, tok

    @property
    def file(self) -> str:
        return self._src.path

    @property
    def line(self) -> int:
        return self._src.line(self._tok)

    def __repr__(self) -> str:
        return (f"Instance({self.name!r}, cell={self.cell!r}, gates={self.gates!r}, "
                f"note={self.note!r})")


@dataclass
class Port:
    """A port of the top module: name, direction and range (None = scalar)."""

    name: str
    direction: str
    range: tuple[int, int] | None

    @property
    def bits(self) -> list[str]:
        if self.range is None:
            return [self.name]
        m, lo = self.range
        step = -1 if m >= lo else 1
        return [f"{self.name}[{i}]" for i in range(m, lo + step, step)]


@dataclass
class Netlist:
    """A netlist read into edopt: the Circuit plus what maps results back to the netlist.

    Attributes
    ----------
    top : name of the top module.
    circuit : the edopt Circuit (also ``netlist.circuit.netlist is netlist``).
    instances : flattened instances by name, in netlist order.
    ports : ports of the top module.
    wires : non-port nets declared in the top module, with their ranges.
    nets : every bit of a top-module port or wire -> the circuit net it is joined to
        (``1'b0``/``1'b1`` when tied to a constant).
    constants : tie-off nets of the circuit -> logic value.
    launch : launch-point nets (register outputs) -> register instance.
    capture : capture-point nets (register data pins) -> register instances.
    notes : what was dropped or assumed (unused logic, constant outputs, ...).
    files : the files read.
    """

    top: str
    circuit: Circuit
    instances: dict[str, Instance]
    ports: list[Port]
    wires: dict[str, tuple[int, int] | None]
    nets: dict[str, str]
    constants: dict[str, bool]
    launch: dict[str, str]
    capture: dict[str, list[str]]
    notes: list[str]
    files: list[str]

    def cell_counts(self) -> dict[str, int]:
        """Number of instances per cell name (registers and unused cells included)."""
        return dict(sorted(Counter(i.cell for i in self.instances.values()).items()))

    def net_of(self, name: str) -> str:
        """The circuit net of a top-level port or wire bit (or of a circuit net name)."""
        if name in self.nets:
            return self.nets[name]
        if name in self.circuit.inputs or name in self.circuit.outputs:
            return name
        raise EdoptError(f"{name!r} is neither a port or wire bit of module {self.top!r} nor "
                         "a net of the circuit")

    def simulate(self, values: Mapping[str, Any]) -> dict[str, np.ndarray]:
        """Logic values of every net for a batch of vectors.

        ``values`` gives a boolean array per top-level input bit (``"a[3]"``) and per launch
        net (register output); constants are filled in. The result has every circuit net and
        every top-level port and wire bit.
        """
        from ..adders import simulate as simulate_circuit

        given = {self.net_of(k): np.asarray(v, dtype=bool) for k, v in values.items()}
        if not given:
            raise EdoptError("simulate: give at least one input vector")
        n = len(next(iter(given.values())))
        read = {net for g in self.circuit.gates.values() for net in g.inputs.values()}
        inputs = {}
        for net in self.circuit.inputs:
            if net in self.constants:
                inputs[net] = np.full(n, self.constants[net])
            elif net in given:
                inputs[net] = given[net]
            elif net not in read:
                inputs[net] = np.zeros(n, dtype=bool)   # feeds no gate (a clock, say)
        missing = [net for net in self.circuit.inputs if net not in inputs]
        if missing:
            raise EdoptError(f"simulate: no values for input(s) {', '.join(missing[:8])}")
        out = simulate_circuit(self.circuit, inputs)
        for key, net in self.nets.items():
            if net in out:
                out[key] = out[net]
            elif net in self.constants or net in _CONST:
                out[key] = np.full(n, bool(_CONST.get(net, self.constants.get(net, 0))))
            elif net in given:
                out[key] = given[net]
        return out


def netlist_of(circuit: Circuit | Netlist) -> Netlist:
    """The Netlist behind a Circuit returned by `read_verilog` (or the Netlist itself)."""
    if isinstance(circuit, Netlist):
        return circuit
    net = getattr(circuit, "netlist", None)
    if not isinstance(net, Netlist):
        raise EdoptError(f"circuit {circuit.name!r} was not read from Verilog; only circuits "
                         "returned by read_verilog can be written back as a netlist")
    return net


# ------------------------------------------------------------------------------- reading
def _as_cellmap(cell_map: CellMap | str | Path | None) -> CellMap:
    if cell_map is None:
        return builtin_map()
    if isinstance(cell_map, CellMap):
        return cell_map
    return load_cellmap(cell_map)


def read_netlist(
    path: str | Path | Sequence[str | Path],
    top: str | None = None,
    cell_map: CellMap | str | Path | None = None,
    *,
    input_drive: float | None = DEFAULT_INPUT_DRIVE,
    input_arrival_ps: float = 0.0,
    output_load: float = DEFAULT_OUTPUT_LOAD,
    output_allowance_ps: float = 0.0,
    register: Mapping[str, float] | None = None,
) -> Netlist:
    """Read structural Verilog into a `Netlist` (its ``circuit`` is what `read_verilog` returns).

    Parameters are those of `read_verilog`.
    """
    # the reader allocates millions of small containers that live until it returns; cyclic
    # garbage collection would only rescan them (a third of the time on large netlists)
    enabled = gc.isenabled()
    gc.disable()
    try:
        return _read(path, top, cell_map, input_drive, input_arrival_ps, output_load,
                     output_allowance_ps, register)
    finally:
        if enabled:
            gc.enable()


def _read(path: str | Path | Sequence[str | Path], top: str | None,
          cell_map: CellMap | str | Path | None, input_drive: float | None,
          input_arrival_ps: float, output_load: float, output_allowance_ps: float,
          register: Mapping[str, float] | None) -> Netlist:
    paths = [path] if isinstance(path, (str, Path)) else list(path)
    if not paths:
        raise CaseError("no Verilog file given")
    cmap = with_register_values(_as_cellmap(cell_map), register)
    modules: dict[str, _Module] = {}
    sources: list[_Source] = []
    for p in paths:
        try:
            text = Path(p).read_text(encoding="utf-8")
        except OSError as exc:
            raise CaseError(f"cannot read the netlist: {exc.strerror}", str(p)) from None
        except UnicodeDecodeError as exc:
            raise CaseError(f"not a UTF-8 text file (byte {exc.start})", str(p)) from None
        src = _Source(str(p), text)
        sources.append(src)
        for mod in _Parser(src).parse():
            if mod.name in modules:
                first = modules[mod.name]
                raise src.error(f"module {mod.name!r} is defined twice (first at "
                                f"{first.src.path}:{first.src.line(first.pos)})", mod.pos)
            modules[mod.name] = mod
    if not modules:
        raise CaseError("no module found in the netlist", sources[0].path)
    top_mod = _choose_top(modules, top, cmap, sources)
    linked = _Linker(modules, cmap).link(top_mod.name)
    return _build(linked, top_mod, cmap, [s.path for s in sources], input_drive,
                  input_arrival_ps, output_load, output_allowance_ps)


def read_verilog(
    path: str | Path | Sequence[str | Path],
    top: str | None = None,
    cell_map: CellMap | str | Path | None = None,
    *,
    input_drive: float | None = DEFAULT_INPUT_DRIVE,
    input_arrival_ps: float = 0.0,
    output_load: float = DEFAULT_OUTPUT_LOAD,
    output_allowance_ps: float = 0.0,
    register: Mapping[str, float] | None = None,
) -> Circuit:
    """Read a gate-level structural Verilog netlist as a Circuit for `size` and `frontier`.

    Parameters
    ----------
    path : the netlist file (or several files read together).
    top : the top module; default the one module no other module instantiates.
    cell_map : a `CellMap`, a TOML cell-map path, or None for the built-in map of yosys's
        generic cells (``$_AND_``, ``$_MUX_``, ``$_DFF_P_``, ...).
    input_drive : size of the inverter driving each top-level input bit (None = ideal).
    input_arrival_ps : arrival time of the top-level inputs.
    output_load : load of each top-level output bit in C_u.
    output_allowance_ps : time that must follow each top-level output within the target.
    register : boundary values for every register cell, overriding the cell map: any of
        ``drive``, ``arrival_ps``, ``load``, ``allowance_ps`` (see `REGISTER_DEFAULTS`).

    Returns
    -------
    Circuit : gates named after the instances (``inst`` or ``inst#1``, ``inst#2``, ... for
        expanded cells); its ``netlist`` attribute is the `Netlist` that maps results back.

    Raises
    ------
    CaseError : with the file, the line and the name of what is wrong.
    """
    return read_netlist(path, top, cell_map, input_drive=input_drive,
                        input_arrival_ps=input_arrival_ps, output_load=output_load,
                        output_allowance_ps=output_allowance_ps, register=register).circuit


def _check_loops(circuit: Circuit, instances: Mapping[str, Instance]) -> None:
    """Raise CaseError naming the gates of a combinational loop, if there is one.

    Strongly connected components of the gate graph (scipy, compiled): a component of more than
    one gate, or a gate feeding itself, is a loop.
    """
    gates = list(circuit.gates.values())
    drv = {g.output: i for i, g in enumerate(gates)}
    src: list[int] = []
    dst: list[int] = []
    for i, g in enumerate(gates):
        for net in g.inputs.values():
            j = drv.get(net)
            if j is not None:
                src.append(j)
                dst.append(i)
    n = len(gates)
    s_a, d_a = np.asarray(src, dtype=np.int64), np.asarray(dst, dtype=np.int64)
    graph = sp.csr_matrix((np.ones(len(s_a)), (s_a, d_a)), shape=(n, n))
    count, labels = connected_components(graph, directed=True, connection="strong")
    selfloop = s_a[s_a == d_a]
    if count == n and not len(selfloop):
        return
    sizes = np.bincount(labels, minlength=count)
    bad = np.flatnonzero(sizes[labels] > 1) if count < n else selfloop[:1]
    members = [gates[k].name for k in bad[:6]]
    inst = instances.get(members[0].split("#")[0])
    message = (f"combinational loop through gates {', '.join(members)}"
               f"{' ...' if len(bad) > 6 else ''}; cut it with a register")
    if inst is None:
        raise CaseError(message, circuit.source)
    raise CaseError(f"instance {inst.name!r}: {message}", inst.file, inst.line)


def _plan(cdef: CellDef, circuit: Circuit) -> list[tuple[str, tuple[str, ...], tuple[str, ...]]]:
    """Per stage: canonical type name, the type's pins and the source of each pin."""
    plan = []
    for st in cdef.stages:
        gtype = circuit.gate_type(st.type)
        plan.append((gtype.name, gtype.pins, st.pins))
    return plan


def _choose_top(modules: dict[str, _Module], top: str | None, cmap: CellMap,
                sources: list[_Source]) -> _Module:
    if top is not None:
        if top not in modules:
            raise CaseError(f"missing module: the top module {top!r} is not in the netlist; "
                            f"modules: {', '.join(sorted(modules))}", sources[0].path)
        return modules[top]
    used = {i.cell for m in modules.values() for i in m.insts if i.cell in modules}
    roots = [m for name, m in modules.items() if name not in used]
    if len(roots) == 1:
        return roots[0]
    names = ", ".join(sorted(m.name for m in (roots or modules.values())))
    raise CaseError(f"cannot tell the top module: candidates {names}; choose one with top=",
                    sources[0].path)


def _build(linked: _Linked, top: _Module, cmap: CellMap, files: list[str],
           input_drive: float | None, input_arrival_ps: float, output_load: float,
           output_allowance_ps: float) -> Netlist:
    flat = _Flat()
    src = top.src
    env: dict[str, int] = {}
    ports = [Port(p, top.dirs[p], top.ranges[p]) for p in top.ports]
    port_bits: dict[str, str] = {}
    for port in ports:
        if port.direction == "inout":
            raise src.error(f"top module {top.name!r}: inout port {port.name!r} is not "
                            "supported; a timing graph needs a direction",
                            top.decl_pos.get(port.name, top.pos))
        prio = _PRIO_IN if port.direction == "input" else _PRIO_OUT
        for key in port.bits:
            env[key] = flat.new(key, prio)
            port_bits[key] = port.direction
    flat.elaborate(linked, "", env, 0)
    parent = np.asarray(flat.parent, dtype=np.int64)
    while True:                         # full path compression, vectorised
        nxt = parent[parent]
        if np.array_equal(nxt, parent):
            break
        parent = nxt
    names = flat.names
    if len(set(names)) != len(names):
        seen: set[str] = set()
        dup = next(n for n in names if n in seen or seen.add(n))  # type: ignore[func-returns-value]
        raise CaseError(f"the name {dup!r} stands for two different nets after flattening "
                        "(an escaped name clashes with a hierarchical or bus-bit name); "
                        "rename one", src.path)

    # --- drivers: input ports, gate outputs, register outputs, constants
    root = parent.tolist()
    cells = flat.cells
    owner: dict[int, int | str] = {_C0: "constant 1'b0", _C1: "constant 1'b1"}
    driver_cell: dict[int, int] = {}

    def who(o: int | str) -> str:
        if isinstance(o, str):
            return o
        name, cdef, _origin, _pins, csrc, pos = cells[o]
        where = f"line {csrc.line(pos)}" if len(files) == 1 else csrc.path + f":{csrc.line(pos)}"
        return f"instance {name!r} ({cdef.name}) at {where}"

    for key, direction in port_bits.items():
        if direction == "input":
            r = root[env[key]]
            if r in owner:
                raise src.error(f"input port bit {key!r} is joined to {who(owner[r])}: two "
                                "drivers of one net", top.decl_pos.get(key.split("[")[0], top.pos))
            owner[r] = f"input port bit {key}"
    # per cell: input roots, output root (gate cells; None when open)
    cell_in: list[list[int]] = []
    cell_out: list[int | None] = []
    for ci, (name, cdef, _origin, pins, csrc, pos) in enumerate(cells):
        for pin in cdef.outputs:
            g = pins.get(pin)
            if g is None:
                continue
            r = root[g]
            if r in owner:
                raise csrc.error(
                    f"net {names[r]!r} is driven twice: by instance {name!r} ({cdef.name}, pin "
                    f"{pin}) and by {who(owner[r])}; keep one driver", pos)
            owner[r] = ci
        cell_in.append([root[pins[p]] for p in cdef.inputs])  # type: ignore[index]
        if cdef.register:
            cell_out.append(None)
        else:
            g = pins.get(cdef.outputs[0])
            cell_out.append(None if g is None else root[g])
            if g is not None:
                driver_cell[root[g]] = ci
    for ci, ins in enumerate(cell_in):
        for r in ins:
            if r not in owner:
                name, cdef, _origin, pins, csrc, pos = cells[ci]
                pin = next(p for p in cdef.inputs if root[pins[p]] == r)  # type: ignore[index]
                raise csrc.error(
                    f"net {names[r]!r} has no driver: it feeds pin {pin!r} of instance "
                    f"{name!r} ({cdef.name}); drive it or make it an input port", pos)
    for key, direction in port_bits.items():
        if direction == "output" and root[env[key]] not in owner:
            raise src.error(f"output port bit {key!r} of module {top.name!r} is not driven",
                            top.decl_pos.get(key.split("[")[0], top.pos))

    # --- sinks: top outputs and register inputs
    notes: list[str] = []
    sink_load: dict[int, float] = {}
    sink_allow: dict[int, float] = {}
    capture: dict[str, list[str]] = {}
    launch: dict[str, str] = {}
    launch_roots: list[int] = []

    def sink(r: int, load: float, allowance: float) -> None:
        sink_load[r] = sink_load.get(r, 0.0) + load
        sink_allow[r] = max(sink_allow.get(r, allowance), allowance)

    for key, direction in port_bits.items():
        if direction == "output":
            sink(root[env[key]], output_load, output_allowance_ps)
    for ci, (name, cdef, _origin, pins, _csrc, _pos) in enumerate(cells):
        if cdef.register:
            for pin, r in zip(cdef.inputs, cell_in[ci]):
                clock = pin in cdef.clock
                sink(r, cdef.load, 0.0 if clock else cdef.allowance_ps)
                if not clock:
                    capture.setdefault(names[r], []).append(name)
            for pin in cdef.outputs:
                if pins.get(pin) is not None:
                    launch[names[root[pins[pin]]]] = name  # type: ignore[index]
                    launch_roots.append(root[pins[pin]])  # type: ignore[index]

    # --- readers and unused logic
    readers: dict[int, int] = {}
    alive = [out is not None for out in cell_out]
    for ci, ins in enumerate(cell_in):
        if alive[ci]:
            for r in ins:
                readers[r] = readers.get(r, 0) + 1
    queue = [ci for ci, out in enumerate(cell_out)
             if out is not None and out not in sink_load and out not in readers]
    while queue:
        ci = queue.pop()
        if not alive[ci]:
            continue
        alive[ci] = False
        for r in cell_in[ci]:
            readers[r] -= 1
            if readers[r] == 0 and r not in sink_load and r in driver_cell:
                queue.append(driver_cell[r])
    dead = sum(1 for ci, c in enumerate(cells) if not c[1].register and not alive[ci])
    if dead:
        notes.append(f"{dead} cell(s) drive nothing that reaches an output or register and are "
                     "not sized")

    # --- the circuit
    circuit = Circuit(top.name, size_max=1000.0)
    circuit.source = files[0] if len(files) == 1 else ", ".join(files)
    for t in cmap.types.values():
        circuit.add_type(t)
    read_roots: set[int] = set()
    for ci, ins in enumerate(cell_in):
        if alive[ci]:
            read_roots.update(ins)
    const_used = read_roots & {_C0, _C1}
    for port in ports:
        if port.direction == "input":
            for key in port.bits:
                circuit.add_input(key, arrival_ps=input_arrival_ps, drive=input_drive)
    for (net, reg), r in zip(launch.items(), launch_roots):
        if r in read_roots:     # a register output that feeds logic
            cdef = cells[flat.cell_names[reg]][1]
            circuit.add_input(net, arrival_ps=cdef.arrival_ps, drive=cdef.drive)
    constants = {}
    for r in sorted(const_used):
        circuit.add_input(names[r])
        constants[names[r]] = bool(r)
    taken = set(names)
    instances: dict[str, Instance] = {}
    plans: dict[int, tuple[CellDef, list[tuple[str, tuple[str, ...], tuple[str, ...]]]]] = {}
    cgates = circuit.gates
    rnames = [names[r] for r in root]
    for ci, (name, cdef, origin, pins, csrc, pos) in enumerate(cells):
        pin_nets = {p: (None if g is None else rnames[g]) for p, g in pins.items()}
        gates: tuple[str, ...] = ()
        types: tuple[str, ...] = ()
        note = ""
        if cdef.register:
            note = "register: not sized (a launch and capture point)"
        elif not alive[ci]:
            note = "drives nothing that reaches an output or register: not sized"
        else:
            got = plans.get(id(cdef))
            if got is None:
                got = plans[id(cdef)] = (cdef, _plan(cdef, circuit))
            plan = got[1]
            n = len(plan)
            if n == 1:
                gates = (name,)
                tname, tpins, srcs = plan[0]
                types = (tname,)
                if name in cgates:
                    raise csrc.error(f"instance {name!r}: its gate name {name!r} is already "
                                     "used by another instance; rename one", pos)
                cgates[name] = Gate(name, tname, {tp: pin_nets[s] for tp, s in zip(tpins, srcs)},
                                    pin_nets[cdef.outputs[0]])  # type: ignore[arg-type]
            else:
                gates = tuple(f"{name}#{k}" for k in range(1, n + 1))
                types = tuple(p[0] for p in plan)
                for k, (gname, (tname, tpins, srcs)) in enumerate(zip(gates, plan), start=1):
                    if gname in cgates or (k < n and gname in taken):
                        raise csrc.error(f"instance {name!r}: the name {gname!r} of its stage "
                                         f"{k} is already used by a net or gate; rename that",
                                         pos)
                    conn = {tp: (pin_nets[s] if s[0] != "#" else gates[int(s[1:]) - 1])
                            for tp, s in zip(tpins, srcs)}
                    out = pin_nets[cdef.outputs[0]] if k == n else gname
                    cgates[gname] = Gate(gname, tname, conn, out)  # type: ignore[arg-type]
        instances[name] = Instance(name, cdef.name, origin, cdef.register, pin_nets, gates,
                                   types, csrc, pos, note)
    for r, load in sink_load.items():
        if r in driver_cell and alive[driver_cell[r]]:
            circuit.add_output(names[r], load=load, allowance_ps=sink_allow[r])
    fixed = [key for key, d in port_bits.items()
             if d == "output" and not (root[env[key]] in driver_cell
                                       and alive[driver_cell[root[env[key]]]])]
    if fixed:
        notes.append(f"output bit(s) {', '.join(fixed[:6])}{' ...' if len(fixed) > 6 else ''} "
                     "come straight from an input, a register or a constant: no gate to size")
    if not circuit.gates:
        raise CaseError(f"module {top.name!r} has no logic gates to size (only registers, "
                        "wires or constants)", src.path)
    _check_loops(circuit, instances)

    top_nets: dict[str, str] = {}
    wires = {n: r for n, r in top.ranges.items() if n not in top.dirs}
    for name, rng in list(top.ranges.items()):
        for key in Port(name, "", rng).bits:
            g = env.get(key)
            if g is not None:
                top_nets[key] = rnames[g]
    netlist = Netlist(top.name, circuit, instances, ports, wires, top_nets, constants, launch,
                      capture, notes, files)
    circuit.netlist = netlist  # type: ignore[attr-defined]
    return netlist


# ------------------------------------------------------------------------------- writing
_SIMPLE = re.compile(r"[A-Za-z_][A-Za-z0-9_$]*")
_BUS_BIT = re.compile(r"(.+)\[(-?[0-9]+)\]")


def _sizes_of(sizes: Any) -> dict[str, float]:
    if sizes is None:
        return {}
    if hasattr(sizes, "sizes") and hasattr(sizes, "evaluation"):
        sizes = sizes.sizes
    if hasattr(sizes, "items"):
        return {str(k): float(v) for k, v in sizes.items()}
    raise EdoptError("sizes must be a Sizing, a pandas Series or a mapping gate -> size")


def _ident(name: str) -> str:
    return name if _SIMPLE.fullmatch(name) and name not in _KEYWORDS else f"\\{name} "


def _format_size(x: float) -> str:
    return f"{x:.6g}"


def write_verilog(circuit: Circuit | Netlist, sizes: Any = None,
                  path: str | Path | None = None) -> str:
    """Write the flattened netlist with each instance's sizes as an attribute.

    Parameters
    ----------
    circuit : a Circuit returned by `read_verilog` (or its `Netlist`).
    sizes : a `Sizing`, or a mapping / Series gate name -> size; None writes no sizes.
    path : where to write the text; None only returns it.

    Each sized instance carries ``(* edopt_size = "..." *)``: the sizes of its stages in
    unit-inverter drive strengths, first stage first, separated by spaces; cells expanded into
    several stages also carry ``edopt_stages`` with the stage gate types. Gates written as
    continuous assignments come back as instances of the equivalent yosys cell named
    ``assign:<net>``. Registers and unused cells are written without sizes.
    """
    nl = netlist_of(circuit)
    given = _sizes_of(sizes)
    bus_names = {n for n, r in list(nl.wires.items()) + [(p.name, p.range) for p in nl.ports]
                 if r is not None}

    def ref(net: str | None) -> str:
        if net is None:
            return ""
        if net in _CONST:
            return net
        m = _BUS_BIT.fullmatch(net)
        if m and m.group(1) in bus_names:
            return f"{_ident(m.group(1))}[{m.group(2)}]"
        return _ident(net)

    port_nets = {b for p in nl.ports for b in p.bits}
    lines = [f"// Sized by edopt from {', '.join(nl.files)} (flattened top module {nl.top}).",
             f"// Attribute {SIZE_ATTRIBUTE}: sizes of the instance's stages in unit-inverter "
             "drive strengths.",
             f"module {_ident(nl.top)}({', '.join(_ident(p.name) for p in nl.ports)});"]
    for p in nl.ports:
        rng = "" if p.range is None else f" [{p.range[0]}:{p.range[1]}]"
        lines.append(f"  {p.direction}{rng} {_ident(p.name)};")
    for name, rng in nl.wires.items():
        r = "" if rng is None else f" [{rng[0]}:{rng[1]}]"
        lines.append(f"  wire{r} {_ident(name)};")
    declared = set(port_nets) | {b for n, r in nl.wires.items() for b in Port(n, "", r).bits}
    extra = []
    for inst in nl.instances.values():
        for net in inst.pins.values():
            if net is not None and net not in declared and net not in _CONST:
                declared.add(net)
                extra.append(net)
    lines += [f"  wire {_ident(net)};" for net in extra]
    for key in (b for p in nl.ports if p.direction == "output" for b in p.bits):
        root = nl.nets.get(key, key)
        if root != key:
            lines.append(f"  assign {ref(key)} = {ref(root)};")
    missing = []
    for inst in nl.instances.values():
        attrs = ""
        if inst.gates:
            values = [given.get(g) for g in inst.gates]
            if given and any(v is None for v in values):
                missing.append(inst.name)
            if given and not any(v is None for v in values):
                attrs = f'(* {SIZE_ATTRIBUTE} = "{" ".join(map(_format_size, values))}"'
                if len(inst.gates) > 1:
                    attrs += f', {STAGES_ATTRIBUTE} = "{" ".join(inst.types)}"'
                attrs += " *) "
        if inst.origin == "primitive":
            conns = ", ".join(ref(inst.pins.get(p)) for p in ("Y", "A", "B", "C", "D")
                              if p in inst.pins)
            name = "" if "@" in inst.name else _ident(inst.name) + " "
            lines.append(f"  {attrs}{inst.cell} {name}({conns});")
        else:
            conns = ", ".join(f".{p}({ref(n)})" for p, n in inst.pins.items())
            lines.append(f"  {attrs}{_ident(inst.cell)} {_ident(inst.name)} ({conns});")
    if missing:
        raise EdoptError(f"no size for instance(s) {', '.join(missing[:5])}: the sizes belong "
                         "to another circuit")
    lines.append("endmodule")
    text = "\n".join(lines) + "\n"
    if path is not None:
        Path(path).write_text(text, encoding="utf-8")
    return text


CSV_COLUMNS = ("instance", "cell", "stage", "gate_type", "size", "gate", "note")


def write_sizes_csv(circuit: Circuit | Netlist, sizes: Any, path: str | Path | None = None
                    ) -> str:
    """A CSV of instance -> size by original instance name, one row per stage.

    Columns: ``instance``, ``cell``, ``stage`` (1 = first stage from the inputs), ``gate_type``,
    ``size`` (unit-inverter drive strengths; empty when not sized), ``gate`` (the edopt gate
    name) and ``note`` (why an instance is not sized).
    """
    nl = netlist_of(circuit)
    given = _sizes_of(sizes)
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(CSV_COLUMNS)
    for inst in nl.instances.values():
        if not inst.gates:
            w.writerow([inst.name, inst.cell, "", "", "", "", inst.note])
            continue
        for k, (gate, gtype) in enumerate(zip(inst.gates, inst.types), start=1):
            if gate not in given:
                raise EdoptError(f"no size for gate {gate!r} of instance {inst.name!r}: the "
                                 "sizes belong to another circuit")
            w.writerow([inst.name, inst.cell, k, gtype, _format_size(given[gate]), gate, ""])
    text = buf.getvalue()
    if path is not None:
        Path(path).write_text(text, encoding="utf-8")
    return text
