"""CSV and JSON writers and the short plain-text report of a sizing.

JSON is strict: numpy scalars and arrays become plain numbers and lists, non-finite numbers
become ``null``. Every report ends with the first-order caution.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from pathlib import Path
from typing import Any, TextIO

import numpy as np
import pandas as pd

from ..frontier import Frontier
from ..sizing import CAUTION, Sizing

__all__ = [
    "clean",
    "dumps",
    "report_lines",
    "print_report",
    "write_frontier",
    "write_gates",
    "write_json",
    "write_savings",
]


# ------------------------------------------------------------------------------------ JSON
def _default(obj: Any) -> Any:
    """``json`` fallback for objects ``clean`` leaves alone (paths, pandas, numpy)."""
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, pd.DataFrame):
        return obj.to_dict(orient="records")
    if isinstance(obj, pd.Series):
        return obj.to_dict()
    if isinstance(obj, Path):
        return str(obj)
    if isinstance(obj, (set, frozenset)):
        return sorted(obj)
    raise TypeError(f"cannot write {type(obj).__name__} as JSON")


def clean(obj: Any) -> Any:
    """A copy of ``obj`` with numpy types made plain and non-finite floats made None."""
    if isinstance(obj, Mapping):
        return {str(k): clean(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [clean(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return clean(obj.tolist())
    if isinstance(obj, (pd.DataFrame, pd.Series)):
        return clean(_default(obj))
    if isinstance(obj, np.bool_):
        return bool(obj)
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        value = float(obj)
        return value if math.isfinite(value) else None
    if obj is pd.NA or obj is pd.NaT:
        return None
    return obj


def dumps(obj: Any, indent: int | None = 2) -> str:
    """Strict JSON text of ``obj`` (see `clean`)."""
    return json.dumps(clean(obj), indent=indent, default=_default, allow_nan=False)


def write_json(obj: Any, path: str | Path) -> Path:
    """Write ``obj`` as strict JSON; returns the path."""
    path = Path(path)
    path.write_text(dumps(obj) + "\n", encoding="utf-8")
    return path


# ------------------------------------------------------------------------------------- CSV
def write_gates(sizing: Sizing, path: str | Path) -> Path:
    """The per-gate table of a sizing (`Sizing.table`) as CSV: size, loads, effort, slack, ...
    Units are in the column names (ps, fF, fJ)."""
    path = Path(path)
    sizing.table.to_csv(path, float_format="%.6g")
    return path


def write_frontier(frontier: Frontier, path: str | Path) -> Path:
    """The frontier table (one row per swept delay bound) as CSV."""
    path = Path(path)
    frontier.table.to_csv(path, float_format="%.6g")
    return path


def write_savings(frontier: Frontier, path: str | Path) -> Path:
    """Energy saved at the summary relaxations of the minimum delay, as CSV."""
    path = Path(path)
    frontier.savings().to_csv(path, index=False, float_format="%.6g")
    return path


# ---------------------------------------------------------------------------------- report
def _fmt(value: float | None, unit: str = "", digits: int = 2) -> str:
    if value is None or not np.isfinite(value):
        return "n/a"
    return f"{value:.{digits}f}{' ' + unit if unit else ''}"


_PROBLEM = {
    "fastest": "minimum delay",
    "cheapest": "least {obj} meeting the target",
    "balanced": "least {obj} x delay^n",
    "budget": "fastest within the energy budget",
}


def report_lines(
    sizing: Sizing, case: str | None = None, baseline: Sizing | None = None,
    frontier: Frontier | None = None,
) -> list[str]:
    """The plain-text report of one sizing, a few lines.

    Parameters
    ----------
    sizing : the result to report.
    case : case name for the first line (default: none shown).
    baseline : the minimum-delay sizing, for the energy saved relative to it.
    frontier : if given, its savings sentence (`Frontier.summary_text`) is added.
    """
    s = sizing
    obj = "energy" if s.objective == "energy" else "area"
    head = _PROBLEM.get(s.problem, s.problem).format(obj=obj)
    lines = []
    if case:
        lines.append(f"case         {case}  ({len(s.model.gate_names)} gates, technology "
                     f"{s.model.tech.name})")
    lines.append(f"problem      {head}")
    lines.append(f"min delay    {_fmt(s.min_delay_ps, 'ps')}")
    if s.target_ps is not None:
        rel = s.target_ps / s.min_delay_ps if s.min_delay_ps else float("nan")
        lines.append(f"target       {_fmt(s.target_ps, 'ps')}  ({rel:.3f} x the minimum)")
    lines.append(f"delay        {_fmt(s.delay_ps, 'ps')}  (critical output "
                 f"{s.evaluation.critical_output})")
    lines.append(f"energy       {_fmt(s.energy_fj, 'fJ', 1)}  (dynamic {_fmt(s.dynamic_fj, '', 1)}"
                 f", leakage {_fmt(s.leakage_fj, '', 1)})   area {s.area:.1f} unit inverters")
    if s.target_ps is not None:
        price = s.price if obj == "area" else s.price_fj_per_ps
        unit = "fJ/ps" if obj == "energy" else "area/ps"
        lines.append(f"price        {_fmt(price, unit, 3)}   hardware intensity "
                     f"{_fmt(s.intensity, '', 3)}")
    if baseline is not None and baseline is not s and baseline.energy_fj > 0:
        saved = 1 - s.energy_fj / baseline.energy_fj
        lines.append(f"saving       {saved:.0%} of the energy of the minimum-delay sizing "
                     f"({baseline.energy_fj:.1f} fJ)")
    if frontier is not None:
        lines.append(f"frontier     {frontier.summary_text()}")
    lines.append(f"status       {s.status} ({s.solver}, {s.seconds:.2f} s)")
    if s.engine == "large" and s.gap_pct is not None:
        bound = (f"{s.lower_bound_ps:.2f} ps" if s.lower_bound_ps is not None
                 else f"{s.lower_bound_fj:.2f} fJ")
        lines.append(f"certificate  certified lower bound {bound}, gap {s.gap_pct:.3f} %, "
                     f"{s.iterations} iterations (large engine)")
    lines += [f"note         {n}" for n in s.notes]
    lines.append(f"caution      {CAUTION}")
    return lines


def print_report(sizing: Sizing, file: TextIO | None = None, **kwargs: Any) -> None:
    """Print `report_lines` to ``file`` (default stdout)."""
    import sys

    print("\n".join(report_lines(sizing, **kwargs)), file=file or sys.stdout)
