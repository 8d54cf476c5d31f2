"""Figures of the energy-delay trade-off (matplotlib, Agg backend; PNG and SVG).

Every function takes an output ``path`` (with or without a suffix) and writes ``<stem>.png`` and
``<stem>.svg`` next to each other, returning both paths. Failed points (status ``failed`` or
non-finite values) are left out, never drawn as zero.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib.figure import Figure  # noqa: E402
from matplotlib.ticker import FuncFormatter, LogLocator, NullFormatter  # noqa: E402

from ..errors import EdoptError  # noqa: E402
from ..frontier import Frontier  # noqa: E402
from ..sizing import Sizing  # noqa: E402

__all__ = ["CAPTION", "pareto", "pareto_figure", "price", "price_figure", "size_profile",
           "size_profile_figure"]

CAPTION = "First-order logical-effort estimate; confirm with circuit simulation before sign-off."
FORMATS = ("png", "svg")
_COLORS = plt.rcParams["axes.prop_cycle"].by_key()["color"]


def _save(fig: Figure, path: str | Path) -> list[Path]:
    path = Path(path)
    stem = path.with_suffix("") if path.suffix.lower() in (".png", ".svg") else path
    stem.parent.mkdir(parents=True, exist_ok=True)
    out = []
    for ext in FORMATS:
        target = stem.with_name(f"{stem.name}.{ext}")
        fig.savefig(target, dpi=150)
        out.append(target)
    plt.close(fig)
    return out


def _plain_log(axis: matplotlib.axis.Axis) -> None:
    """Log axis labelled 1, 2, 5, 10, ... in plain numbers."""
    axis.set_major_locator(LogLocator(base=10, subs=(1.0, 2.0, 5.0)))
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())


def _caption(fig: Figure) -> None:
    fig.text(0.01, 0.01, CAPTION, fontsize=7, color="0.35", ha="left", va="bottom")


def _ok(frontier: Frontier) -> np.ndarray:
    """Mask of frontier rows with a finite delay and energy that did not fail."""
    t = frontier.table
    return (np.isfinite(t.delay_ps.to_numpy(float)) & np.isfinite(t.energy_fj.to_numpy(float))
            & (t.status.to_numpy() != "failed"))


def _usable(s: Sizing | None) -> bool:
    return s is not None and np.isfinite(s.delay_ps) and np.isfinite(s.energy_fj)


def _name(frontier: Frontier) -> str:
    return frontier.sizer.circuit.name


def pareto(
    frontier: Frontier,
    chosen: Sizing | None = None,
    path: str | Path = "pareto",
    balanced: Sequence[tuple[str, Sizing]] = (),
    title: str | None = None,
) -> list[Path]:
    """Energy (fJ) against delay (ps) along the frontier, saved as PNG and SVG.

    Parameters
    ----------
    frontier : the swept frontier.
    chosen : a sizing to mark, e.g. the cheapest one at the target.
    path : output stem; ``.png`` and ``.svg`` are written.
    balanced : ``(label, sizing)`` pairs to mark, e.g. ``[("E·D", s1), ("E·D²", s2)]``.
    title : default ``"<case>: energy-delay frontier"``.
    """
    return _save(pareto_figure(frontier, chosen, balanced, title), path)


def pareto_figure(
    frontier: Frontier,
    chosen: Sizing | None = None,
    balanced: Sequence[tuple[str, Sizing]] = (),
    title: str | None = None,
) -> Figure:
    """The figure of `pareto`, not saved (the first line of its axes is the frontier)."""
    t = frontier.table[_ok(frontier)].sort_values("delay_ps")
    d_min = frontier.min_delay_ps
    fig, ax = plt.subplots(figsize=(7.0, 4.8), layout="constrained")
    ax.plot(t.delay_ps, t.energy_fj, "-o", ms=3.5, lw=1.5, color=_COLORS[0],
            label="least energy at each delay bound")
    fast = frontier.fastest
    ax.plot([fast.delay_ps], [fast.energy_fj], "s", ms=8, color=_COLORS[3], zorder=5,
            label=f"minimum delay {fast.delay_ps:.1f} ps, {fast.energy_fj:.0f} fJ")
    ax.annotate("minimum delay", (fast.delay_ps, fast.energy_fj), xytext=(10, 0),
                textcoords="offset points", va="center", fontsize=9, color=_COLORS[3])
    markers = ["D", "^", "v", "P"]
    for k, (label, s) in enumerate(balanced):
        if not _usable(s):
            continue
        ax.plot([s.delay_ps], [s.energy_fj], markers[k % len(markers)], ms=7, zorder=5,
                color=_COLORS[(4 + k) % len(_COLORS)],
                label=f"min {label}: {s.delay_ps:.1f} ps, {s.energy_fj:.0f} fJ")
    if _usable(chosen):
        rel = chosen.delay_ps / d_min
        what = (f"target {chosen.target_ps:.1f} ps" if chosen.target_ps is not None
                else chosen.problem)
        ax.plot([chosen.delay_ps], [chosen.energy_fj], "*", ms=14, color=_COLORS[2], zorder=6,
                label=f"chosen ({what}): {chosen.energy_fj:.0f} fJ")
        ax.annotate(f"chosen, {rel:.2f}x", (chosen.delay_ps, chosen.energy_fj), xytext=(8, 8),
                    textcoords="offset points", fontsize=9, color=_COLORS[2])
    ax.set_xlabel("delay (ps)")
    ax.set_ylabel("energy per operation (fJ)")
    top = ax.secondary_xaxis("top", functions=(lambda d: d / d_min, lambda r: r * d_min))
    top.set_xlabel("delay / minimum delay")
    ax.grid(True, alpha=0.3)
    ax.legend(fontsize=8, loc="upper right")
    ax.set_title(title or f"{_name(frontier)}: energy-delay frontier", fontsize=11)
    _caption(fig)
    fig.get_layout_engine().set(rect=(0, 0.03, 1, 0.97))
    return fig


def price(frontier: Frontier, path: str | Path = "price", title: str | None = None
          ) -> list[Path]:
    """`price_figure` saved as PNG and SVG."""
    return _save(price_figure(frontier, title), path)


def price_figure(frontier: Frontier, title: str | None = None) -> Figure:
    """Marginal energy price of delay -dE/dD (fJ/ps, log) and hardware intensity against delay.

    The price comes from the solver's dual (line); the markers are finite differences of
    neighbouring frontier points, an independent check of it. Hardware intensity
    ``eta = -(D/E) dE/dD`` is on the right axis, with the levels 1 and 2 where the E·D and
    E·D² products are least.
    """
    t = frontier.table[_ok(frontier)].sort_values("delay_ps")
    d = t.delay_ps.to_numpy(float)
    e = t.energy_fj.to_numpy(float)
    p = t.price_fj_per_ps.to_numpy(float)
    eta = t.intensity.to_numpy(float)
    fig, ax = plt.subplots(figsize=(7.0, 4.8), layout="constrained")
    good = np.isfinite(p) & (p > 0)
    ax.plot(d[good], p[good], "-o", ms=3.5, color=_COLORS[0], label="price -dE/dD (dual)")
    if len(d) >= 2:
        dd, de = np.diff(d), np.diff(e)
        with np.errstate(divide="ignore", invalid="ignore"):
            fd = -de / dd
        mid = np.sqrt(d[1:] * d[:-1])
        keep = np.isfinite(fd) & (fd > 0) & (dd > 0)
        ax.plot(mid[keep], fd[keep], "x", ms=5, color=_COLORS[1],
                label="-ΔE/ΔD between points")
    ax.set_yscale("log")
    _plain_log(ax.yaxis)
    ax.set_xlabel("delay (ps)")
    ax.set_ylabel("marginal energy price -dE/dD (fJ/ps)", color=_COLORS[0])
    ax.grid(True, which="both", alpha=0.25)
    ax2 = ax.twinx()
    ok = np.isfinite(eta) & (eta > 0)
    ax2.plot(d[ok], eta[ok], "--", lw=1.5, color=_COLORS[2], label="hardware intensity η")
    ax2.set_yscale("log")
    _plain_log(ax2.yaxis)
    ax2.set_ylabel("hardware intensity η = -(D/E) dE/dD", color=_COLORS[2])
    for level, label in ((1.0, "η = 1 (least E·D)"), (2.0, "η = 2 (least E·D²)")):
        ax2.axhline(level, color="0.5", lw=0.8, ls=":")
        ax2.annotate(label, (1.0, level), xycoords=("axes fraction", "data"), xytext=(-4, 3),
                     textcoords="offset points", ha="right", fontsize=8, color="0.35")
    lines = ax.get_legend_handles_labels()
    lines2 = ax2.get_legend_handles_labels()
    ax.legend(lines[0] + lines2[0], lines[1] + lines2[1], fontsize=8, loc="upper right")
    ax.set_title(title or f"{_name(frontier)}: price of delay", fontsize=11)
    _caption(fig)
    fig.get_layout_engine().set(rect=(0, 0.03, 1, 0.97))
    return fig


def size_profile(
    sizings: Sequence[Sizing | None],
    labels: Sequence[str],
    path: str | Path = "size_profile",
    gates: Sequence[str] | None = None,
    case: str | None = None,
    title: str | None = None,
) -> list[Path]:
    """`size_profile_figure` saved as PNG and SVG."""
    return _save(size_profile_figure(sizings, labels, gates, case, title), path)


def size_profile_figure(
    sizings: Sequence[Sizing | None],
    labels: Sequence[str],
    gates: Sequence[str] | None = None,
    case: str | None = None,
    title: str | None = None,
) -> Figure:
    """Gate sizes along the critical path (log scale) for a few sizings.

    Parameters
    ----------
    sizings, labels : the sizings (None entries and failed ones are skipped) and their legend.
    gates : gate names from input to output; default the critical path of the first sizing, so
        that every curve is drawn over the same gates.
    case : case name for the title.
    title : default ``"<case>: sizes along the critical path"``.
    """
    if len(sizings) != len(labels):
        raise EdoptError(f"size_profile: {len(sizings)} sizings but {len(labels)} labels; give "
                         "one label per sizing")
    pairs = [(s, lab) for s, lab in zip(sizings, labels)
             if _usable(s) and np.all(np.isfinite(s.sizes.to_numpy(float)))]
    if gates is None:
        gates = pairs[0][0].critical_path if pairs else []
    gates = list(gates)
    idx = np.arange(1, len(gates) + 1)
    fig, ax = plt.subplots(figsize=(7.0, 4.8), layout="constrained")
    for k, (s, lab) in enumerate(pairs):
        x = s.sizes.reindex(gates).to_numpy(float)
        ok = np.isfinite(x) & (x > 0)
        ax.plot(idx[ok], x[ok], "-o", ms=4, color=_COLORS[k % len(_COLORS)], label=lab)
    ax.set_yscale("log")
    _plain_log(ax.yaxis)
    ax.set_xlabel("stage along the critical path (input → output)")
    ax.set_ylabel("gate size (unit-inverter drive strengths)")
    if gates:
        ax.set_xticks(idx)
        if len(gates) <= 16:
            ax.set_xticklabels([f"{i}\n{g}" for i, g in zip(idx, gates)], fontsize=8)
    ax.grid(True, which="both", alpha=0.25)
    if pairs:
        ax.legend(fontsize=8, loc="best")
    default = "sizes along the critical path"
    ax.set_title(title or (f"{case}: {default}" if case else default), fontsize=11)
    _caption(fig)
    fig.get_layout_engine().set(rect=(0, 0.03, 1, 0.97))
    return fig
