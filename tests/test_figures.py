"""Tests of the figures: files are written, and failed or NaN points are left out, not zeroed.

Sources named beside each check:
- "PNG spec": a PNG file starts with the 8-byte signature 89 50 4E 47 0D 0A 1A 0A (from memory).
- "SVG spec": an SVG document is XML whose root element is ``svg``.
- "frontier table": the rows of `Frontier.table` the figure is drawn from.
"""

from __future__ import annotations

import dataclasses
import xml.etree.ElementTree as ET
from pathlib import Path

import matplotlib.pyplot as plt
import numpy as np
import pytest

from edopt.errors import EdoptError
from edopt.formats.case import load_case
from edopt.frontier import balanced, frontier
from edopt.report import figures
from edopt.sizing import Sizer

MIXED = Path(__file__).resolve().parent.parent / "cases" / "mixed_chain.toml"
PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"   # PNG spec (from memory)


@pytest.fixture(scope="module")
def sweep():
    case = load_case(MIXED)
    sizer = Sizer(case.circuit, case.tech)
    fr = frontier(sizer, points=7, span=1.8)
    chosen = sizer.cheapest("1.2x")
    pts = [("E·D", balanced(sizer, exponent=1.0))]
    return fr, chosen, pts


@pytest.fixture()
def broken(sweep):
    """The frontier with row 3 failed and row 4 carrying a NaN energy but an 'optimal' status."""
    fr = sweep[0]
    table = fr.table.copy()
    table.loc[3, ["relative_delay", "delay_ps", "energy_fj", "price_fj_per_ps", "intensity"]] = (
        np.nan)
    table.loc[3, "status"] = "failed"
    table.loc[4, ["energy_fj", "price_fj_per_ps", "intensity"]] = np.nan
    points = list(fr.points)
    points[3] = None
    return dataclasses.replace(fr, table=table, points=points)


def _check_files(paths: list[Path], stem: Path) -> None:
    assert [p.suffix for p in paths] == [".png", ".svg"]
    assert all(p.with_suffix("") == stem for p in paths)
    png, svg = paths
    assert png.read_bytes()[:8] == PNG_SIGNATURE                              # PNG spec
    assert png.stat().st_size > 5000
    assert ET.parse(svg).getroot().tag.endswith("svg")                        # SVG spec


def test_all_three_figures_written(sweep, tmp_path):
    fr, chosen, pts = sweep
    _check_files(figures.pareto(fr, chosen, tmp_path / "pareto", balanced=pts),
                 tmp_path / "pareto")
    _check_files(figures.price(fr, tmp_path / "price.png"), tmp_path / "price")
    _check_files(figures.size_profile([fr.fastest, chosen], ["fastest", "1.2x"],
                                      tmp_path / "sub" / "profile", case="mixed_chain"),
                 tmp_path / "sub" / "profile")


def test_pareto_draws_the_table_and_marks(sweep):
    fr, chosen, pts = sweep
    fig = figures.pareto_figure(fr, chosen, balanced=pts)
    ax = fig.axes[0]
    line = ax.lines[0]
    order = np.argsort(fr.table.delay_ps.to_numpy())
    # frontier table: every solved row, in delay order
    np.testing.assert_allclose(line.get_xdata(), fr.table.delay_ps.to_numpy()[order])
    np.testing.assert_allclose(line.get_ydata(), fr.table.energy_fj.to_numpy()[order])
    marks = {(float(ln.get_xdata()[0]), float(ln.get_ydata()[0])) for ln in ax.lines[1:]}
    assert (fr.fastest.delay_ps, fr.fastest.energy_fj) in marks
    assert (chosen.delay_ps, chosen.energy_fj) in marks
    assert (pts[0][1].delay_ps, pts[0][1].energy_fj) in marks
    texts = [t.get_text() for t in ax.texts]
    assert "minimum delay" in texts and any(t.startswith("chosen") for t in texts)
    assert "mixed_chain" in ax.get_title()
    assert ax.get_xlabel() == "delay (ps)" and "(fJ)" in ax.get_ylabel()
    assert any("First-order" in t.get_text() for t in fig.texts)
    plt.close(fig)


def test_pareto_skips_failed_and_nan_points(broken):
    fig = figures.pareto_figure(broken)
    x, y = (np.asarray(v, float) for v in (fig.axes[0].lines[0].get_xdata(),
                                            fig.axes[0].lines[0].get_ydata()))
    good = broken.table.drop(index=[3, 4])                                    # frontier table
    assert len(x) == len(good) == len(broken.table) - 2
    assert np.all(np.isfinite(x)) and np.all(np.isfinite(y)) and np.all(y > 0)
    np.testing.assert_allclose(np.sort(x), np.sort(good.delay_ps.to_numpy()))
    plt.close(fig)


def test_price_skips_failed_and_nan_points(broken):
    fig = figures.price_figure(broken)
    ax, ax2 = fig.axes[0], fig.axes[-1]
    dual = ax.lines[0]
    p = broken.table.price_fj_per_ps.to_numpy(float)
    # frontier table: rows with a finite positive dual price (not the minimum-delay row, not 3, 4)
    assert len(dual.get_ydata()) == int(np.sum(np.isfinite(p) & (p > 0)))
    assert len(dual.get_ydata()) == len(broken.table) - 3
    for line in ax.lines + ax2.lines:
        y = np.asarray(line.get_ydata(), float)
        assert np.all(np.isfinite(y)) and np.all(y > 0)
    assert ax.get_yscale() == "log" and "fJ/ps" in ax.get_ylabel()
    assert "intensity" in ax2.get_ylabel() and "mixed_chain" in ax.get_title()
    plt.close(fig)


def test_price_finite_differences_follow_the_dual(sweep):
    fr = sweep[0]
    fig = figures.price_figure(fr)
    dual, fd = fig.axes[0].lines[:2]
    # between neighbouring points -dE/dD lies between the dual prices at the two ends
    # (E*(D) is convex and falling), checked on the frontier table itself
    xd, yd = np.asarray(dual.get_xdata()), np.asarray(dual.get_ydata())
    for xm, ym in zip(fd.get_xdata(), fd.get_ydata()):
        k = np.searchsorted(xd, xm)
        if 0 < k < len(xd):
            assert yd[k] * (1 - 1e-3) <= ym <= yd[k - 1] * (1 + 1e-3)
    plt.close(fig)


def test_size_profile_skips_missing_sizings(sweep):
    fr, chosen, _ = sweep
    fig = figures.size_profile_figure([fr.fastest, None, chosen], ["fast", "missing", "chosen"],
                                      case="mixed_chain")
    ax = fig.axes[0]
    assert [ln.get_label() for ln in ax.lines] == ["fast", "chosen"]
    gates = fr.fastest.critical_path
    np.testing.assert_allclose(ax.lines[0].get_ydata(), fr.fastest.sizes[gates].to_numpy())
    labels = [t.get_text() for t in ax.get_xticklabels()]
    assert all(g in lab for g, lab in zip(gates, labels))
    assert ax.get_yscale() == "log" and "mixed_chain" in ax.get_title()
    plt.close(fig)


def test_size_profile_needs_one_label_per_sizing(sweep):
    with pytest.raises(EdoptError, match="label"):
        figures.size_profile_figure([sweep[0].fastest], ["a", "b"])
