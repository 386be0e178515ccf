"""Synthesis: from targets to parts.

``compensators`` (Type I/II/III by the k factor or direct placement),
``filters`` (normalized filter tables and second-order sections), ``results``
(synthesis results as :class:`~loopcraft.design.Design` objects). The public
entry points are importable from here: ``from loopcraft.synthesis import compensator_design``.
"""

from .results import (
    PHASE_MARGIN_SHORTFALL_DEG,
    RHP_ZERO_CROSSOVER_FRACTION,
    SynthesisResult,
    compensator_design,
    filter_design,
    placed_compensator,
    plant_at,
    rhp_zero_warnings,
    section_design,
)

__all__ = [
    "RHP_ZERO_CROSSOVER_FRACTION",
    "PHASE_MARGIN_SHORTFALL_DEG",
    "SynthesisResult",
    "rhp_zero_warnings",
    "compensator_design",
    "placed_compensator",
    "filter_design",
    "section_design",
    "plant_at",
]
