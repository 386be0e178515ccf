"""loopcraft: op-amp stage and control-loop design over impedance networks.

The public API::

    import loopcraft as lc
    d = lc.load("design.json")           # or lc.Design.from_dict({...})
    d.factored()                         # H(s) = K·s^n·Π(1 + s/ωz)… with formulas
    d.transfer().poles                   # rad/s
    d.with_values(R2="33k").transfer().response([1e3, 1e4])
"""

from __future__ import annotations

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
from .evaluator import Evaluator, TransferResult
from .factored import FactoredForm
from .factors import Factor, FactoredNumeric
from .network import Network, parse_network
from .stability import Stability, closed_loop_stability
from .stage import CircuitStage, InvertingStage, NonInvertingStage, stage_from_dict
from .topologies import TOPOLOGIES, topology, topology_names
from .values import format_value, parse_value

__version__ = "0.1.0"


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
