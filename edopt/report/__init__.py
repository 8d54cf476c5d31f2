"""Figures, tables and terminal reports of sizing results.

`edopt.report.figures` draws the energy-delay frontier, the marginal price of delay and the size
profile along the critical path (PNG and SVG); `edopt.report.tables` writes CSV and JSON and
formats the short plain-text report of the command line.
"""

from __future__ import annotations

__all__ = ["figures", "tables"]
