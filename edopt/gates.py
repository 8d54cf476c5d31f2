"""Gate types: logical effort, parasitic delay, area and leakage derived from switch networks.

A gate type is a single static CMOS inverting stage. It is described by its pull-down network, a
series/parallel expression of its input pins; the pull-up network is the dual (series and parallel
swapped, children kept in the same order). Expression syntax:

- ``*`` series, ``+`` parallel (``*`` binds tighter), parentheses for grouping;
- pin names ``[A-Za-z_][A-Za-z0-9_]*``;
- a postfix ``'`` complements a pin (``A'``). A complemented literal belongs to the same pin: the
  pin is a dual-rail bundle whose driver supplies both polarities, so its logical effort counts
  the transistors of both polarities.

Each network is sized so that every path from the output to its rail has the resistance of one
unit transistor (NMOS width 1, PMOS width ``mu``). From those widths follow, in unit-inverter
input capacitances and tau units:

- logical effort of pin ``k``: gate width on ``k`` (both networks) divided by ``1 + mu``;
- parasitic delay: width of the transistors whose diffusion touches the output, divided by
  ``1 + mu``, times ``p_inv``;
- area proxy: total width divided by ``1 + mu`` (the unit inverter has area 1);
- leakage per unit size: taken equal to the area proxy. This is first order only: stacked
  off transistors leak markedly less than a single one, so series-heavy gates are overestimated.

edopt sizes single inverting stages only, so there is no buffer type: a buffer is written as two
``inv`` gates, and each stage gets its own size.
"""

from __future__ import annotations

import functools
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, replace

import numpy as np

from .errors import GateError

__all__ = [
    "Efforts",
    "GateType",
    "Network",
    "Parallel",
    "Pin",
    "Series",
    "builtin_library",
    "explicit",
    "from_expression",
    "gate_type",
    "parse_expression",
]

_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_]*")


# --------------------------------------------------------------------------------------------
# Switch-network trees
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Pin:
    """One transistor, gated by ``name`` (or its complement when ``complemented``)."""

    name: str
    complemented: bool = False

    def __str__(self) -> str:
        return self.name + ("'" if self.complemented else "")


@dataclass(frozen=True)
class Series:
    """Series composition; in a pull-down the first child sits next to the output."""

    children: tuple[Network, ...]

    def __str__(self) -> str:
        return "*".join(_wrap(c, Parallel) for c in self.children)


@dataclass(frozen=True)
class Parallel:
    """Parallel composition."""

    children: tuple[Network, ...]

    def __str__(self) -> str:
        return " + ".join(str(c) for c in self.children)


Network = Pin | Series | Parallel


def _wrap(node: Network, kind: type) -> str:
    return f"({node})" if isinstance(node, kind) else str(node)


def _dual(node: Network) -> Network:
    """Swap series and parallel, keeping child order."""
    if isinstance(node, Pin):
        return node
    kids = tuple(_dual(c) for c in node.children)
    return Parallel(kids) if isinstance(node, Series) else Series(kids)


def _depth(node: Network) -> int:
    """Number of transistors on the longest output-to-rail path."""
    if isinstance(node, Pin):
        return 1
    depths = [_depth(c) for c in node.children]
    return sum(depths) if isinstance(node, Series) else max(depths)


def _pins_in_order(node: Network) -> list[str]:
    seen: dict[str, None] = {}
    for leaf in _leaves(node):
        seen.setdefault(leaf.name, None)
    return list(seen)


def _leaves(node: Network) -> list[Pin]:
    if isinstance(node, Pin):
        return [node]
    return [leaf for c in node.children for leaf in _leaves(c)]


def _size(
    node: Network, share: float, unit: float, touches: bool, output_first: bool
) -> list[tuple[Pin, float, bool]]:
    """Size a network whose every path must have resistance ``share`` (in unit transistors).

    Returns ``(leaf, width, touches_output)`` per transistor in expression order. ``output_first``
    says whether the output node is next to the first (pull-down) or last (pull-up) series child.
    """
    if isinstance(node, Pin):
        return [(node, unit / share, touches)]
    out: list[tuple[Pin, float, bool]] = []
    if isinstance(node, Parallel):
        for child in node.children:
            out += _size(child, share, unit, touches, output_first)
        return out
    depths = [_depth(c) for c in node.children]
    total = sum(depths)
    edge = 0 if output_first else len(node.children) - 1
    for i, (child, d) in enumerate(zip(node.children, depths)):
        out += _size(child, share * d / total, unit, touches and i == edge, output_first)
    return out


# --------------------------------------------------------------------------------------------
# Parser
# --------------------------------------------------------------------------------------------


class _Parser:
    """Recursive-descent parser: expr := term ('+' term)*, term := factor ('*' factor)*."""

    def __init__(self, text: str, gate: str | None) -> None:
        self.text = text
        self.gate = gate
        self.tokens = self._tokenize()
        self.i = 0

    def fail(self, pos: int, what: str) -> GateError:
        who = f"gate type {self.gate!r}: " if self.gate else ""
        return GateError(f"{who}pull-down expression {self.text!r}, position {pos + 1}: {what}")

    def _tokenize(self) -> list[tuple[str, str, int]]:
        tokens: list[tuple[str, str, int]] = []
        pos, text = 0, self.text
        while pos < len(text):
            ch = text[pos]
            if ch.isspace():
                pos += 1
                continue
            m = _IDENT.match(text, pos)
            if m:
                tokens.append(("id", m.group(), pos))
                pos = m.end()
            elif ch in "*+()'":
                tokens.append((ch, ch, pos))
                pos += 1
            else:
                raise self.fail(
                    pos,
                    f"unexpected character {ch!r}; use pin names, '*' (series), '+' (parallel), "
                    "parentheses and a postfix ' (complement)",
                )
        tokens.append(("end", "", len(text)))
        return tokens

    def peek(self) -> tuple[str, str, int]:
        return self.tokens[self.i]

    def take(self) -> tuple[str, str, int]:
        tok = self.tokens[self.i]
        self.i += 1
        return tok

    def parse(self) -> Network:
        if self.peek()[0] == "end":
            raise self.fail(0, "expression is empty; describe the pull-down network, e.g. 'A*B'")
        node = self.expr()
        kind, value, pos = self.peek()
        if kind == ")":
            raise self.fail(pos, "unbalanced ')' with no matching '('; remove it or add a '('")
        if kind != "end":
            raise self.fail(
                pos, f"expected '*' or '+' before {value!r}; join terms with an operator"
            )
        return node

    def expr(self) -> Network:
        terms = [self.term()]
        while self.peek()[0] == "+":
            self.take()
            terms.append(self.term())
        return _flatten(Parallel, terms)

    def term(self) -> Network:
        factors = [self.factor()]
        while self.peek()[0] == "*":
            self.take()
            factors.append(self.factor())
        return _flatten(Series, factors)

    def factor(self) -> Network:
        kind, value, pos = self.take()
        if kind == "id":
            complemented = False
            if self.peek()[0] == "'":
                self.take()
                complemented = True
                if self.peek()[0] == "'":
                    raise self.fail(
                        self.peek()[2], f"double complement on pin {value!r}; use one mark or none"
                    )
            return Pin(value, complemented)
        if kind == "(":
            node = self.expr()
            close = self.peek()
            if close[0] != ")":
                raise self.fail(pos, "unbalanced '(' is never closed; add a matching ')'")
            self.take()
            if self.peek()[0] == "'":
                raise self.fail(
                    self.peek()[2],
                    "complement applies to pin names only; complement each pin instead",
                )
            return node
        if kind == "end":
            raise self.fail(pos, "expression ends where a pin name or '(' was expected")
        if kind == "'":
            raise self.fail(pos, "complement mark ' must follow a pin name, as in A'")
        raise self.fail(pos, f"found {value!r} where a pin name or '(' was expected")


def _flatten(kind: type, parts: list[Network]) -> Network:
    if len(parts) == 1:
        return parts[0]
    kids: list[Network] = []
    for part in parts:
        kids.extend(part.children if isinstance(part, kind) else (part,))
    return kind(tuple(kids))


def parse_expression(text: str, gate: str | None = None) -> Network:
    """Parse a pull-down expression into a tree of `Pin`, `Series` and `Parallel` nodes.

    Parameters
    ----------
    text : expression such as ``"A*B + C"``.
    gate : gate-type name quoted in error messages.

    Raises
    ------
    GateError
        On bad syntax, with the 1-based position and the fix.
    """
    if not isinstance(text, str):
        who = f"gate type {gate!r}: " if gate else ""
        raise GateError(f"{who}pull-down expression must be a string, got {type(text).__name__}")
    return _Parser(text, gate).parse()


# --------------------------------------------------------------------------------------------
# Gate types
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Efforts:
    """Delay, area and leakage coefficients of a gate type.

    Parameters
    ----------
    g : per-pin logical effort, in the order of `GateType.pins` (read-only).
    p : parasitic delay in tau units (already multiplied by ``p_inv`` for derived types).
    area : area proxy per unit size (unit inverter = 1).
    leak : leakage per unit size, relative to the unit inverter.
    """

    g: np.ndarray
    p: float
    area: float
    leak: float

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Efforts):
            return NotImplemented
        return np.array_equal(self.g, other.g) and (self.p, self.area, self.leak) == (
            other.p,
            other.area,
            other.leak,
        )

    def __hash__(self) -> int:
        return hash((tuple(self.g.tolist()), self.p, self.area, self.leak))


def _check_positive(gate: str, what: str, value: float, allow_zero: bool = False) -> float:
    try:
        v = float(value)
    except (TypeError, ValueError):
        raise GateError(f"gate type {gate!r}: {what} must be a number, got {value!r}") from None
    ok = math.isfinite(v) and (v >= 0 if allow_zero else v > 0)
    if not ok:
        bound = ">= 0" if allow_zero else "> 0"
        raise GateError(f"gate type {gate!r}: {what} must be finite and {bound}, got {value!r}")
    return v


@dataclass(frozen=True)
class GateType:
    """A single-stage inverting gate type.

    Either ``pulldown`` is given (coefficients derived from the switch networks) or ``g_given``
    and ``p_given`` are (explicit type). Build instances with `from_expression` or `explicit`.

    Parameters
    ----------
    name : type name.
    pins : input pin names; the order of `Efforts.g`.
    pulldown : pull-down expression; None for explicit types.
    g_given : explicit per-pin logical effort.
    p_given : explicit parasitic delay in tau (not scaled by ``p_inv``).
    area_given : area per unit size; overrides the derived value when set.
    leak_given : leakage per unit size; overrides the default (= area) when set.
    description : free text.
    """

    name: str
    pins: tuple[str, ...]
    pulldown: str | None = None
    g_given: tuple[float, ...] | None = None
    p_given: float | None = None
    area_given: float | None = None
    leak_given: float | None = None
    description: str = ""

    def __post_init__(self) -> None:
        if not isinstance(self.name, str) or not self.name.strip():
            raise GateError(f"gate type name must be a non-empty string, got {self.name!r}")
        name = self.name
        if isinstance(self.pins, str) or not isinstance(self.pins, Sequence):
            raise GateError(f"gate type {name!r}: pins must be a sequence of names, e.g. ('A','B')")
        pins = tuple(self.pins)
        object.__setattr__(self, "pins", pins)
        if not pins:
            raise GateError(f"gate type {name!r}: needs at least one input pin")
        for pin in pins:
            if not isinstance(pin, str) or not _IDENT.fullmatch(pin):
                raise GateError(
                    f"gate type {name!r}: pin name {pin!r} is invalid; use letters, digits and "
                    "'_', not starting with a digit"
                )
        dupes = sorted({p for p in pins if pins.count(p) > 1})
        if dupes:
            raise GateError(f"gate type {name!r}: duplicate pin name(s) {dupes}; make them unique")
        if (self.pulldown is None) == (self.g_given is None):
            raise GateError(
                f"gate type {name!r}: give either a pull-down expression or explicit g and p, "
                "not both and not neither"
            )
        if self.pulldown is not None:
            if self.p_given is not None:
                raise GateError(
                    f"gate type {name!r}: p is derived from the pull-down expression; drop p_given"
                )
            tree = parse_expression(self.pulldown, gate=name)
            used = _pins_in_order(tree)
            missing = [p for p in used if p not in pins]
            unused = [p for p in pins if p not in used]
            if missing:
                raise GateError(
                    f"gate type {name!r}: pin(s) {missing} appear in the expression but not in "
                    f"the pin order {list(pins)}; add them"
                )
            if unused:
                raise GateError(
                    f"gate type {name!r}: pin(s) {unused} do not appear in the expression "
                    f"{self.pulldown!r}; remove them from the pin order"
                )
        else:
            if isinstance(self.g_given, str) or not isinstance(self.g_given, Sequence):
                raise GateError(f"gate type {name!r}: g must be a sequence of numbers, one per pin")
            g = tuple(self.g_given)
            if len(g) != len(pins):
                raise GateError(
                    f"gate type {name!r}: {len(g)} logical effort(s) for {len(pins)} pin(s); "
                    "give one g per pin"
                )
            g = tuple(_check_positive(name, f"g of pin {p!r}", v) for p, v in zip(pins, g))
            object.__setattr__(self, "g_given", g)
            if self.p_given is None:
                raise GateError(f"gate type {name!r}: explicit types need a parasitic delay p")
            object.__setattr__(
                self, "p_given", _check_positive(name, "p", self.p_given, allow_zero=True)
            )
        if self.area_given is not None:
            object.__setattr__(self, "area_given", _check_positive(name, "area", self.area_given))
        if self.leak_given is not None:
            object.__setattr__(
                self, "leak_given", _check_positive(name, "leak", self.leak_given, allow_zero=True)
            )

    @property
    def is_explicit(self) -> bool:
        """True when the coefficients are given rather than derived."""
        return self.pulldown is None

    def efforts(self, mu: float = 2.0, p_inv: float = 1.0) -> Efforts:
        """Logical effort, parasitic delay, area and leakage for PMOS/NMOS ratio ``mu``.

        Parameters
        ----------
        mu : PMOS/NMOS width ratio of equal resistance (derived types only).
        p_inv : parasitic delay of the unit inverter in tau (scales derived ``p`` only).
        """
        mu = _check_positive(self.name, "mu", mu)
        p_inv = _check_positive(self.name, "p_inv", p_inv, allow_zero=True)
        if self.pulldown is None:
            base = _explicit_efforts(self.g_given, self.p_given)
        else:
            base = _derived_efforts(self.pulldown, self.pins, mu, p_inv)
        if self.area_given is None and self.leak_given is None:
            return base
        area = base.area if self.area_given is None else self.area_given
        leak = area if self.leak_given is None else self.leak_given
        return replace(base, area=area, leak=leak)

    def widths(self, mu: float = 2.0) -> list[tuple[str, str, float, bool]]:
        """Transistor widths ``(pin, 'n' | 'p', width, complemented)``: NMOS first, then PMOS.

        Widths are for size 1, in NMOS unit widths. Explicit types have no network and raise.
        """
        if self.pulldown is None:
            raise GateError(
                f"gate type {self.name!r} is explicit and has no switch network; describe it "
                "with a pull-down expression to get transistor widths"
            )
        mu = _check_positive(self.name, "mu", mu)
        n, p = _networks(self.pulldown, mu)
        return [(leaf.name, "n", w, leaf.complemented) for leaf, w, _ in n] + [
            (leaf.name, "p", w, leaf.complemented) for leaf, w, _ in p
        ]

    def output(self, inputs: Mapping[str, bool]) -> bool:
        """Logic value of the output for the given pin values (pull-down conducts -> False)."""
        if self.pulldown is None:
            raise GateError(f"gate type {self.name!r} is explicit and has no logic function")
        missing = [p for p in self.pins if p not in inputs]
        if missing:
            raise GateError(f"gate type {self.name!r}: no value for pin(s) {missing}")
        return not _conducts(_parse_cached(self.pulldown), inputs)


def _conducts(node: Network, inputs: Mapping[str, bool]) -> bool:
    if isinstance(node, Pin):
        return bool(inputs[node.name]) != node.complemented
    hits = (_conducts(c, inputs) for c in node.children)
    return all(hits) if isinstance(node, Series) else any(hits)


@functools.lru_cache(maxsize=4096)
def _parse_cached(pulldown: str) -> Network:
    return parse_expression(pulldown)


@functools.lru_cache(maxsize=4096)
def _networks(
    pulldown: str, mu: float
) -> tuple[tuple[tuple[Pin, float, bool], ...], tuple[tuple[Pin, float, bool], ...]]:
    tree = _parse_cached(pulldown)
    nmos = tuple(_size(tree, 1.0, 1.0, True, output_first=True))
    pmos = tuple(_size(_dual(tree), 1.0, mu, True, output_first=False))
    return nmos, pmos


@functools.lru_cache(maxsize=4096)
def _derived_efforts(pulldown: str, pins: tuple[str, ...], mu: float, p_inv: float) -> Efforts:
    nmos, pmos = _networks(pulldown, mu)
    index = {p: k for k, p in enumerate(pins)}
    g = np.zeros(len(pins))
    touching = 0.0
    for leaf, width, touches in nmos + pmos:
        g[index[leaf.name]] += width
        touching += width if touches else 0.0
    area = float(g.sum()) / (1.0 + mu)
    g /= 1.0 + mu
    g.setflags(write=False)
    return Efforts(g=g, p=touching / (1.0 + mu) * p_inv, area=area, leak=area)


@functools.lru_cache(maxsize=4096)
def _explicit_efforts(g: tuple[float, ...], p: float) -> Efforts:
    arr = np.array(g, dtype=float)
    arr.setflags(write=False)
    area = float(arr.sum())
    return Efforts(g=arr, p=p, area=area, leak=area)


def from_expression(
    name: str, pulldown: str, pins: Sequence[str] | None = None, description: str = ""
) -> GateType:
    """Gate type from a pull-down expression.

    Parameters
    ----------
    name : type name.
    pulldown : pull-down expression, e.g. ``"A*B + C"``.
    pins : pin order; default is order of first appearance in ``pulldown``.
    description : free text.
    """
    if pins is None:
        pins = _pins_in_order(parse_expression(pulldown, gate=name))
    return GateType(name=name, pins=tuple(pins), pulldown=pulldown, description=description)


def explicit(
    name: str,
    pins: Sequence[str],
    g: Sequence[float],
    p: float,
    area: float | None = None,
    leak: float | None = None,
    description: str = "",
) -> GateType:
    """Gate type with given coefficients.

    Parameters
    ----------
    name : type name.
    pins : unique pin names.
    g : logical effort per pin (finite, > 0).
    p : parasitic delay in tau (finite, >= 0); not scaled by ``p_inv``.
    area : area per unit size; default ``sum(g)`` (each pin's g is its share of gate width).
    leak : leakage per unit size; default equal to the area.
    description : free text.
    """
    if isinstance(g, (str, bytes)) or not isinstance(g, Sequence | np.ndarray):
        raise GateError(f"gate type {name!r}: g must be a sequence of numbers, one per pin")
    gt = GateType(name=name, pins=tuple(pins), g_given=tuple(g), p_given=p, description=description)
    area_v = float(sum(gt.g_given)) if area is None else area
    leak_v = area_v if leak is None else leak
    return replace(gt, area_given=area_v, leak_given=leak_v)


@functools.lru_cache(maxsize=1)
def _builtins() -> tuple[GateType, ...]:
    abcd = ("A", "B", "C", "D")
    types = [from_expression("inv", "A", description="inverter")]
    for n in (2, 3, 4):
        pins = abcd[:n]
        types.append(from_expression(f"nand{n}", "*".join(pins), description=f"{n}-input NAND"))
    for n in (2, 3, 4):
        pins = abcd[:n]
        types.append(from_expression(f"nor{n}", "+".join(pins), description=f"{n}-input NOR"))
    types += [
        from_expression("aoi21", "A*B + C", description="AND-OR-invert, NOT(A.B + C)"),
        from_expression("aoi22", "A*B + C*D", description="AND-OR-invert, NOT(A.B + C.D)"),
        from_expression("oai21", "(A+B)*C", description="OR-AND-invert, NOT((A+B).C)"),
        from_expression("oai22", "(A+B)*(C+D)", description="OR-AND-invert, NOT((A+B).(C+D))"),
        # The pull-down conducts when the output is 0: XOR is 0 when the inputs are equal.
        from_expression(
            "xor2", "A*B + A'*B'", description="static XOR, both input polarities required"
        ),
        from_expression(
            "xnor2", "A*B' + A'*B", description="static XNOR, both input polarities required"
        ),
        from_expression(
            "mux2",
            "A*S + B*S'",
            pins=("A", "B", "S"),
            description="inverting 2:1 multiplexer, NOT(S ? A : B); S needs both polarities",
        ),
    ]
    return tuple(types)


def builtin_library() -> dict[str, GateType]:
    """The built-in gate types keyed by lowercase name (a fresh dict on each call)."""
    return {t.name: t for t in _builtins()}


def gate_type(name: str, library: Mapping[str, GateType] | None = None) -> GateType:
    """Look up a gate type by name, ignoring case.

    Parameters
    ----------
    name : type name.
    library : mapping to search; default the built-in library.

    Raises
    ------
    GateError
        If no type matches; the message lists the known names.
    """
    lib = builtin_library() if library is None else library
    if isinstance(name, str):
        if name in lib:
            return lib[name]
        key = name.strip().lower()
        for k, t in lib.items():
            if k.lower() == key:
                return t
    known = ", ".join(sorted(lib, key=str.lower)) or "(none)"
    hint = ""
    if isinstance(name, str) and name.strip().lower().startswith("buf"):
        hint = "; a buffer is written as two 'inv' gates so that each stage is sized"
    raise GateError(f"unknown gate type {name!r}; known types: {known}{hint}")
