"""Check sizings against transistor-level simulation: model versus SPICE delay and energy.

What is compared (per sizing):

- **delay**: the model's delay along the critical path, from the path's start (the input net,
  or the input of its driving inverter) to the critical output, without input arrival times or
  output allowances; SPICE measures the same 50 %-50 % for a rising and a falling input and
  takes the mean (the model's delay is the mean of the two edges).
- **energy per operation**: one operation is the path input rising and falling once, so every
  net that switches rises once. The model counts ``(C_load + C_par) V^2`` for each of those
  nets (activity 1, per simulated copy); SPICE integrates the measured supply's charge over the
  operation and removes the quiet (leakage) current.
- **leakage**: the model's state-averaged leakage of the simulated gates against the measured
  quiet current of the initial state (one input state only), for information.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..circuit import Circuit
from ..errors import EdoptError
from ..sizing import Sizing
from .export import Bench, deck_for, resolve_circuit
from .runner import RunResult, run_decks
from .setup import SpiceSetup, has_spice_table, spice_setup

__all__ = ["verify", "verify_frontier"]

COLUMNS = ["model", "spice", "error", "unit"]


def _check_tech(results: Sequence[Sizing], setup: SpiceSetup | str | None) -> None:
    if setup is not None:
        return
    for r in results:
        if not has_spice_table(r.model.tech):
            raise EdoptError(
                f"technology {r.model.tech.name!r} was not characterised for SPICE, so its "
                "model numbers cannot be compared with the device models: size with "
                "technology('sky130-tt') (or a file written by edopt.spice.characterize), or "
                "pass setup= to simulate anyway")


def _tables(bench: Bench, run: RunResult) -> tuple[pd.DataFrame, pd.DataFrame]:
    p = bench.prefix
    meas = run.measures
    n = len(bench.stage_names)
    first = np.array([meas.get(f"{p}a{k}", np.nan) for k in range(n)]) * 1e12
    second = np.array([meas.get(f"{p}b{k}", np.nan) for k in range(n)]) * 1e12
    mean = (first + second) / 2
    stages = pd.DataFrame({
        "type": bench.stage_types, "size": bench.stage_sizes,
        "model_arrival_ps": bench.model_arrival_ps, "spice_arrival_ps": mean,
        "spice_rising_input_ps": first, "spice_falling_input_ps": second,
    }, index=pd.Index(bench.stage_names, name="node"))
    stages["error"] = stages.spice_arrival_ps / stages.model_arrival_ps - 1
    # quiet current of the initial (DC) state: the state after the first edge may still be
    # settling through leakage when the second edge comes
    i_quiet = -meas.get(f"{p}la", np.nan)
    charge = meas.get(f"{p}e", np.nan)
    window_s = bench_window_s(run)
    e_spice = (-charge * bench.vdd - i_quiet * bench.vdd * window_s) * 1e15
    rows = {
        "delay_ps": (bench.model_delay_ps, mean[-1], "ps"),
        "delay_rising_input_ps": (bench.model_delay_ps, first[-1], "ps"),
        "delay_falling_input_ps": (bench.model_delay_ps, second[-1], "ps"),
        "energy_fj": (bench.model_energy_fj, e_spice, "fJ"),
        "leakage_na": (bench.model_leak_na, i_quiet * 1e9, "nA"),   # model: state average
    }
    table = pd.DataFrame(
        [(m, s, s / m - 1 if m else np.nan, u) for m, s, u in rows.values()],
        columns=COLUMNS, index=pd.Index(list(rows), name="quantity"))
    return table, stages


def bench_window_s(run: RunResult) -> float:
    """Length of the energy window of the deck that produced ``run`` (from its ``.meas``)."""
    return float(run.measures.get("__window__", np.nan))


def _simulate(results: Sequence[Sizing], circuits: Sequence[Circuit], mode: str,
              setup: SpiceSetup | str | None, jobs: int | None, cache: bool, progress: bool,
              per_deck: int | None = None) -> list[tuple[pd.DataFrame, pd.DataFrame, Bench,
                                                         list[str], str]]:
    _check_tech(results, setup)
    groups = _split(len(results), jobs, per_deck)
    decks, benches = [], []
    for idx in groups:
        deck, b = deck_for([results[i] for i in idx], [circuits[i] for i in idx], mode=mode,
                           setup=setup)
        decks.append(deck)
        benches.append(b)
    s = spice_setup(setup if setup is not None else results[0].model.tech)
    texts = [d.text() for d in decks]
    runs = run_decks(texts, s, jobs=jobs, cache=cache, progress=progress, label="verify")
    out = []
    for deck, text, run, bs in zip(decks, texts, runs, benches):
        run.measures["__window__"] = (deck.timing.stop - deck.timing.start) * 1e-12
        for b in bs:
            table, stages = _tables(b, run)
            out.append((table, stages, b, run.warnings, text))
    order = [i for idx in groups for i in idx]
    ranked: list = [None] * len(results)
    for k, i in enumerate(order):
        ranked[i] = out[k]
    return ranked


def _split(n: int, jobs: int | None, per_deck: int | None) -> list[list[int]]:
    """Indices of the sizings in each deck: one deck per core, or ``per_deck`` per deck."""
    import os

    if per_deck is None:
        k = max(1, min(n, jobs or os.cpu_count() or 1))
    else:
        k = max(1, -(-n // per_deck))
    return [list(range(i, n, k)) for i in range(k) if i < n]


def verify(result: Sizing, *, circuit: Circuit | None = None, mode: str = "auto",
           setup: SpiceSetup | str | None = None, jobs: int | None = None, cache: bool = True,
           progress: bool = True) -> pd.DataFrame:
    """Simulate a sizing and compare the model with SPICE.

    Parameters
    ----------
    result : the sizing; its technology must be characterised for SPICE (e.g. ``sky130-tt``)
        unless ``setup`` is given.
    circuit : the circuit that was sized (default ``result.circuit``).
    mode : ``"auto"``, ``"path"`` or ``"full"`` (see `edopt.spice.export`).
    setup : transistor conventions (default: the technology's ``[spice]`` table).
    jobs, cache, progress : see `edopt.spice.runner.run_decks`.

    Returns
    -------
    DataFrame indexed by quantity (``delay_ps``, ``delay_rising_input_ps``,
    ``delay_falling_input_ps``, ``energy_fj``, ``leakage_na``) with columns ``model``,
    ``spice``, ``error`` (spice / model - 1) and ``unit``. ``attrs`` holds ``stages`` (arrival
    of every path net, model and SPICE), ``mode``, ``warnings`` and ``netlist``.

    Raises
    ------
    SpiceUnavailable : ngspice or the models are missing (with the install command).
    EdoptError : the technology is not characterised, or the circuit cannot be simulated.
    """
    c = resolve_circuit(result, circuit)
    table, stages, bench, warnings, text = _simulate([result], [c], mode, setup, jobs, cache,
                                                     progress)[0]
    table.attrs.update(stages=stages, mode=bench.mode, warnings=list(warnings),
                       notes=list(bench.notes), netlist=text)
    return table


def verify_frontier(points: Sequence[Sizing] | object, *, circuit: Circuit | None = None,
                    count: int = 3, mode: str = "auto", setup: SpiceSetup | str | None = None,
                    jobs: int | None = None, cache: bool = True,
                    progress: bool = True) -> pd.DataFrame:
    """Verify several sizings of one circuit (a frontier) and check their ordering.

    Parameters
    ----------
    points : a `edopt.frontier.Frontier` (``count`` of its solved points are taken, spread from
        the fastest to the slowest) or a sequence of sizings (all are taken).
    circuit : the circuit (default: the frontier's, or each sizing's ``circuit``).

    Returns
    -------
    DataFrame, one row per point in order of model delay: ``target_ps``, ``model_delay_ps``,
    ``spice_delay_ps``, ``delay_error``, ``model_energy_fj``, ``spice_energy_fj``,
    ``energy_error``. ``attrs["ordered"]`` is True when SPICE ranks the points as the model
    does (delay increasing and energy decreasing); ``attrs["tables"]`` holds each point's
    `verify` table.
    """
    if hasattr(points, "points") and hasattr(points, "sizer"):
        solved = [p for p in points.points if p is not None]
        circuit = circuit or points.sizer.circuit
        if count < 2:
            raise EdoptError("verify_frontier: count must be at least 2 to check an ordering")
        if len(solved) > count:
            pick = np.unique(np.round(np.linspace(0, len(solved) - 1, count)).astype(int))
            solved = [solved[i] for i in pick]
    else:
        solved = list(points)  # type: ignore[arg-type]
    if len(solved) < 1:
        raise EdoptError("verify_frontier: no solved points to verify")
    solved.sort(key=lambda r: r.delay_ps)
    circuits = [resolve_circuit(r, circuit) for r in solved]
    done = _simulate(solved, circuits, mode, setup, jobs, cache, progress)
    rows = []
    for r, (table, _stages, _bench, _w, _t) in zip(solved, done):
        rows.append({
            "target_ps": r.target_ps if r.target_ps is not None else r.delay_ps,
            "model_delay_ps": table.loc["delay_ps", "model"],
            "spice_delay_ps": table.loc["delay_ps", "spice"],
            "delay_error": table.loc["delay_ps", "error"],
            "model_energy_fj": table.loc["energy_fj", "model"],
            "spice_energy_fj": table.loc["energy_fj", "spice"],
            "energy_error": table.loc["energy_fj", "error"],
        })
    df = pd.DataFrame(rows)
    d, e = df.spice_delay_ps.to_numpy(), df.spice_energy_fj.to_numpy()
    md, me = df.model_delay_ps.to_numpy(), df.model_energy_fj.to_numpy()
    # strict model steps must keep their direction in simulation
    step_d = np.diff(md) > 1e-9 * md[:-1]
    step_e = np.diff(me) < -1e-9 * me[:-1]
    ordered = bool(np.all(np.diff(d)[step_d] > 0) and np.all(np.diff(e)[step_e] < 0))
    df.attrs.update(ordered=ordered, tables=[t for t, *_ in done],
                    warnings=sorted({w for *_, ws, _ in done for w in ws}))
    return df
