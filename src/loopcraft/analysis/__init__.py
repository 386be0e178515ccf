"""The analysis layer: everything computed from a design at one set of values.

``analyzer`` (the per-update :class:`Analyzer` every view reads), ``margins``
(crossovers and margins), ``stability`` (the closed-loop verdict), ``amplifier``
(the stage with its real op-amp), ``loop`` (the loop around a plant),
``sensitivity`` and ``tolerance`` (Monte Carlo and worst-case spread).

The analyzer's names are available here too: ``from loopcraft.analysis import Analyzer``.
"""

from .analyzer import (
    Analysis,
    Analyzer,
    analysis_sections,
    default_band_hz,
    loop_summary_lines,
    response_columns,
)

__all__ = ["Analysis", "Analyzer", "default_band_hz", "analysis_sections", "loop_summary_lines", "response_columns"]
