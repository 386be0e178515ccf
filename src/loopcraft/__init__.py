"""loopcraft: op-amp stage and control-loop design over impedance networks.

The public API::

    import loopcraft as lc
    d = lc.load("design.json")           # or lc.Design.from_dict({...})
    d.factored()                         # H(s) = K·s^n·Π(1 + s/ωz)… with formulas
    d.transfer().poles                   # rad/s
    d.with_values(R2="33k").transfer().response([1e3, 1e4])
"""

from __future__ import annotations

# ``from loopcraft.plant import …`` is public API from before the layered layout; the
# module lives in the model layer now and answers to its old name too.
import sys as _sys

from ._version import __version__
from .analysis.stability import Stability, closed_loop_stability
from .design import FORMAT_VERSION, Design, load, loads
from .errors import (
    AnalysisError,
    ComponentValueError,
    DesignFileError,
    FileWriteError,
    LoopcraftError,
    ParseError,
    SynthesisError,
    TopologyError,
)
from .model import plant as _plant
from .model.network import Network, parse_network
from .model.stage import CircuitStage, InvertingStage, NonInvertingStage, stage_from_dict
from .model.values import format_value, parse_value
from .numeric.evaluator import Evaluator, TransferResult
from .numeric.factored import FactoredForm
from .numeric.factors import Factor, FactoredNumeric
from .topologies import TOPOLOGIES, topology, topology_names

_sys.modules.setdefault(__name__ + ".plant", _plant)
plant = _plant


def __getattr__(name: str):
    # The widget layer imports ipywidgets/bqplot; load it only when asked for, so the
    # model and analysis layers stay importable without a notebook stack.
    if name == "Explorer":
        from .widgets import Explorer

        return Explorer
    raise AttributeError(f"module 'loopcraft' has no attribute {name!r}")


__all__ = [
    "FORMAT_VERSION",
    "AnalysisError",
    "CircuitStage",
    "ComponentValueError",
    "Design",
    "DesignFileError",
    "Evaluator",
    "FileWriteError",
    "Explorer",
    "Factor",
    "FactoredForm",
    "FactoredNumeric",
    "InvertingStage",
    "LoopcraftError",
    "Network",
    "NonInvertingStage",
    "ParseError",
    "Stability",
    "SynthesisError",
    "TOPOLOGIES",
    "closed_loop_stability",
    "TopologyError",
    "TransferResult",
    "format_value",
    "load",
    "loads",
    "parse_network",
    "parse_value",
    "stage_from_dict",
    "topology",
    "topology_names",
    "__version__",
]
