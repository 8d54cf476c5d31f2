"""Figures of the supply and threshold exploration (matplotlib, PNG and SVG)."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from .figures import _caption, _plain_log, _save, plt


def _ok(table: pd.DataFrame) -> pd.DataFrame:
    return table[np.isfinite(table.energy_fj.to_numpy(float))
                 & np.isfinite(table.delay_ps.to_numpy(float))]


def envelope(table: pd.DataFrame, path: str | Path, title: str = "") -> list[Path]:
    """Per-(supply, flavour) frontiers faded behind their lower envelope (energy vs delay)."""
    ok = _ok(table)
    fig, ax = plt.subplots(figsize=(7.5, 5.0))
    flavours = list(dict.fromkeys(ok.flavour))
    cmap = plt.get_cmap("viridis")
    vmin, vmax = float(ok.supply_v.min()), float(ok.supply_v.max())
    styles = ["-", "--", ":", "-."]
    for (v, fl), group in ok.groupby(["supply_v", "flavour"], sort=True):
        g = group.sort_values("delay_ps")
        shade = cmap((v - vmin) / (vmax - vmin) if vmax > vmin else 0.5)
        ax.plot(g.delay_ps, g.energy_fj, styles[flavours.index(fl) % 4], color=shade,
                alpha=0.35, lw=1)
    env = ok[ok.envelope].sort_values("delay_ps")
    ax.plot(env.delay_ps, env.energy_fj, "o-", color="black", lw=2.2, label="envelope")
    for _, r in env.iterrows():
        ax.annotate(f"{r.supply_v:.2f} V {r.flavour or ''}", (r.delay_ps, r.energy_fj),
                    textcoords="offset points", xytext=(5, 4), fontsize=7)
    ax.set_yscale("log")
    _plain_log(ax.yaxis)
    ax.set_xlabel("delay (ps)")
    ax.set_ylabel("energy per operation (fJ)")
    ax.set_title(title or "energy-delay frontier with supply and threshold scaling")
    sm = plt.cm.ScalarMappable(cmap=cmap, norm=plt.Normalize(vmin, vmax))
    fig.colorbar(sm, ax=ax, label="supply (V)")
    handles = [plt.Line2D([], [], color="0.4", ls=styles[k % 4], label=f"{fl} threshold")
               for k, fl in enumerate(flavours)]
    ax.legend(handles=[*handles, ax.lines[-1]], fontsize=8)
    ax.grid(alpha=0.3)
    _caption(fig)
    fig.tight_layout(rect=(0, 0.03, 1, 1))
    return _save(fig, path)


def energy_split(table: pd.DataFrame, path: str | Path, title: str = "") -> list[Path]:
    """Dynamic and leakage energy along the envelope, stacked, versus delay."""
    env = _ok(table)
    env = env[env.envelope].sort_values("delay_ps")
    fig, ax = plt.subplots(figsize=(7.0, 4.5))
    ax.stackplot(env.delay_ps, env.dynamic_fj, env.leakage_fj,
                 labels=["dynamic", "leakage"], alpha=0.8)
    ax.set_xlabel("delay (ps)")
    ax.set_ylabel("energy per operation (fJ)")
    ax.set_title(title or "energy split along the envelope")
    ax.legend(loc="upper right", fontsize=8)
    ax.grid(alpha=0.3)
    _caption(fig)
    fig.tight_layout(rect=(0, 0.03, 1, 1))
    return _save(fig, path)


def energy_vs_supply(table: pd.DataFrame, path: str | Path, title: str = "") -> list[Path]:
    """Total (and split) energy per operation versus supply, one line per flavour."""
    ok = _ok(table)
    fig, ax = plt.subplots(figsize=(7.0, 4.5))
    for fl, g in ok.groupby("flavour", sort=False):
        g = g.sort_values("supply_v")
        line, = ax.plot(g.supply_v, g.energy_fj, "o-", label=f"{fl}: total")
        ax.plot(g.supply_v, g.dynamic_fj, "--", color=line.get_color(), alpha=0.6,
                label=f"{fl}: dynamic")
        ax.plot(g.supply_v, g.leakage_fj, ":", color=line.get_color(), alpha=0.6,
                label=f"{fl}: leakage")
        k = int(np.argmin(g.energy_fj.to_numpy()))
        ax.plot(g.supply_v.iloc[k], g.energy_fj.iloc[k], "*", ms=14, color=line.get_color())
    ax.set_yscale("log")
    _plain_log(ax.yaxis)
    ax.set_xlabel("supply (V)")
    ax.set_ylabel("energy per operation (fJ)")
    ax.set_title(title or "energy per operation versus supply")
    ax.legend(fontsize=7, ncol=2)
    ax.grid(alpha=0.3)
    _caption(fig)
    fig.tight_layout(rect=(0, 0.03, 1, 1))
    return _save(fig, path)
