"""Op-amp stages: inverting, non-inverting and general circuits.

* ``inverting``: H(s) = -Zf/Zi (Zi from the source to the inverting node,
  Zf from the inverting node to the output, non-inverting input grounded).
* ``noninverting``: H(s) = 1 + Zf/Zg (Zg from the inverting node to ground).
* ``circuit``: any small linear circuit of R, C, L and ideal op-amps, solved
  by modified nodal analysis (:mod:`loopcraft.symbolic.circuit`).

All transfer functions are rational functions of s in rad/s.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

import sympy as sp

from .._numbers import shown
from ..errors import DesignFileError, LoopcraftError, TopologyError
from .network import Network, parse_network

if TYPE_CHECKING:
    from ..symbolic.circuit import Circuit

__all__ = ["InvertingStage", "NonInvertingStage", "CircuitStage", "Stage", "stage_from_dict", "STAGE_KINDS"]

STAGE_KINDS = ("inverting", "noninverting", "circuit")


def _disjoint(a: Network, b: Network, a_key: str, b_key: str) -> None:
    common = [n for n in a.names if n in set(b.names)]
    if common:
        raise TopologyError(
            f"{', '.join(common)} appear(s) in both {a_key} ({a.text!r}) and {b_key} ({b.text!r}); "
            "each designator names one part"
        )


@dataclass(frozen=True)
class InvertingStage:
    """Inverting stage: H(s) = -Zf(s)/Zi(s).

    Parameters
    ----------
    input : Network
        Zi, from the source to the inverting input.
    feedback : Network
        Zf, from the inverting input to the output.
    """

    input: Network
    feedback: Network
    kind: str = "inverting"

    def __post_init__(self) -> None:
        _disjoint(self.input, self.feedback, "input", "feedback")

    @property
    def component_names(self) -> tuple[str, ...]:
        """Designators in order of appearance (input first)."""
        return self.input.names + self.feedback.names

    @property
    def feed_networks(self) -> tuple[Network, Network]:
        """(Zg-like network to the inverting node, feedback network); here (Zi, Zf)."""
        return self.input, self.feedback

    def transfer_expr(self) -> sp.Expr:
        """Ideal H(s) = -Zf/Zi as a rational function of s (rad/s)."""
        return sp.cancel(-self.feedback.impedance_expr() / self.input.impedance_expr())

    def to_dict(self) -> dict[str, Any]:
        """The design-file ``stage`` section."""
        return {"kind": self.kind, "input": self.input.text, "feedback": self.feedback.text}


@dataclass(frozen=True)
class NonInvertingStage:
    """Non-inverting stage: H(s) = 1 + Zf(s)/Zg(s).

    Parameters
    ----------
    ground : Network
        Zg, from the inverting input to ground.
    feedback : Network
        Zf, from the inverting input to the output.
    """

    ground: Network
    feedback: Network
    kind: str = "noninverting"

    def __post_init__(self) -> None:
        _disjoint(self.ground, self.feedback, "ground", "feedback")

    @property
    def component_names(self) -> tuple[str, ...]:
        """Designators in order of appearance (ground network first)."""
        return self.ground.names + self.feedback.names

    @property
    def feed_networks(self) -> tuple[Network, Network]:
        """(Zg, Zf)."""
        return self.ground, self.feedback

    def transfer_expr(self) -> sp.Expr:
        """Ideal H(s) = 1 + Zf/Zg as a rational function of s (rad/s)."""
        return sp.cancel(1 + self.feedback.impedance_expr() / self.ground.impedance_expr())

    def to_dict(self) -> dict[str, Any]:
        """The design-file ``stage`` section."""
        return {"kind": self.kind, "ground": self.ground.text, "feedback": self.feedback.text}


@dataclass(frozen=True)
class CircuitStage:
    """A general circuit of R, C, L and ideal op-amps (modified nodal analysis).

    Parameters
    ----------
    circuit : Circuit
        Elements with node names (ground is ``gnd``), op-amps, input and output nodes.
    """

    circuit: Circuit
    kind: str = "circuit"

    @property
    def component_names(self) -> tuple[str, ...]:
        """Designators in element-list order."""
        return self.circuit.component_names

    @property
    def feed_networks(self) -> None:
        """A general circuit has no single (Zg, Zf) pair."""
        return None

    def transfer_expr(self) -> sp.Expr:
        """Ideal Vout/Vin as a rational function of s (rad/s)."""
        return self.circuit.transfer()

    def to_dict(self) -> dict[str, Any]:
        """The design-file ``stage`` section."""
        c = self.circuit
        return {
            "kind": self.kind,
            "elements": [list(e) for e in c.elements],
            "opamps": [{"plus": o.plus, "minus": o.minus, "out": o.out} for o in c.opamps],
            "input": c.input,
            "output": c.output,
        }


Stage = InvertingStage | NonInvertingStage | CircuitStage

_KEYS = {
    "inverting": ({"kind", "input", "feedback"}, ("input", "feedback")),
    "noninverting": ({"kind", "ground", "feedback"}, ("ground", "feedback")),
    "circuit": ({"kind", "elements", "opamps", "input", "output"}, ("elements", "input", "output")),
}


def _network(d: Mapping[str, Any], key: str, key_path: str) -> Network:
    text = d[key]
    if not isinstance(text, str):
        raise DesignFileError(
            f"expected a network expression such as 'R1 + C1' (got {shown(text)})", f"{key_path}.{key}"
        )
    try:
        return parse_network(text)
    except LoopcraftError as err:
        raise DesignFileError(str(err), f"{key_path}.{key}") from err


def _node(value: Any, path: str) -> str:
    if not isinstance(value, str) or not value:
        raise DesignFileError(f"a node name must be non-empty text (got {shown(value)})", path)
    return value


def stage_from_dict(d: Mapping[str, Any], key_path: str = "stage") -> Stage:
    """Build a stage from its design-file section.

    Parameters
    ----------
    d : mapping
        ``{"kind": "inverting", "input": ..., "feedback": ...}``,
        ``{"kind": "noninverting", "ground": ..., "feedback": ...}`` or
        ``{"kind": "circuit", "elements": [[name, a, b], ...],
        "opamps": [{"plus", "minus", "out"}], "input": node, "output": node}``.
    key_path : str
        Where the section sits in the file, for error messages.

    Raises
    ------
    DesignFileError
        Unknown or missing keys, bad expressions or an undefined stage; the
        message carries the key path.
    """
    if not isinstance(d, Mapping):
        raise DesignFileError(f"expected an object (got {type(d).__name__})", key_path)
    kind = d.get("kind")
    if not isinstance(kind, str) or kind not in _KEYS:
        raise DesignFileError(
            f"unknown stage kind {shown(kind)} (expected one of {', '.join(STAGE_KINDS)})", f"{key_path}.kind"
        )
    allowed, required = _KEYS[kind]
    for k in d:
        if k not in allowed:
            raise DesignFileError(
                f"unknown key {k!r} for a {kind} stage (allowed: {', '.join(sorted(allowed))})", f"{key_path}.{k}"
            )
    for k in required:
        if k not in d:
            raise DesignFileError(f"missing key {k!r} for a {kind} stage", f"{key_path}.{k}")
    try:
        if kind == "inverting":
            return InvertingStage(_network(d, "input", key_path), _network(d, "feedback", key_path))
        if kind == "noninverting":
            return NonInvertingStage(_network(d, "ground", key_path), _network(d, "feedback", key_path))
        from ..symbolic.circuit import Circuit, OpampPins

        elements = d["elements"]
        if not isinstance(elements, list) or not elements:
            raise DesignFileError("expected a non-empty list of [name, node_a, node_b]", f"{key_path}.elements")
        elems = []
        for i, e in enumerate(elements):
            p = f"{key_path}.elements[{i}]"
            if not isinstance(e, list | tuple) or len(e) != 3:
                raise DesignFileError(f"expected [name, node_a, node_b] (got {shown(e)})", p)
            elems.append((_node(e[0], p + "[0]"), _node(e[1], p + "[1]"), _node(e[2], p + "[2]")))
        opamps = d.get("opamps", [])
        if not isinstance(opamps, list):
            raise DesignFileError(f"expected a list of op-amps (got {shown(opamps)})", f"{key_path}.opamps")
        ops = []
        for i, o in enumerate(opamps):
            p = f"{key_path}.opamps[{i}]"
            if not isinstance(o, Mapping):
                raise DesignFileError(f"expected {{'plus', 'minus', 'out'}} (got {shown(o)})", p)
            extra = sorted(set(o) - {"plus", "minus", "out"}, key=str)
            if extra:
                raise DesignFileError(f"unknown key {shown(extra[0])} (allowed: minus, out, plus)", f"{p}.{extra[0]}")
            for k in ("plus", "minus", "out"):
                if k not in o:
                    raise DesignFileError(f"missing key {k!r}", f"{p}.{k}")
            ops.append(
                OpampPins(_node(o["plus"], p + ".plus"), _node(o["minus"], p + ".minus"), _node(o["out"], p + ".out"))
            )
        circuit = Circuit(
            tuple(elems), tuple(ops), _node(d["input"], f"{key_path}.input"), _node(d["output"], f"{key_path}.output")
        )
        stage = CircuitStage(circuit)
        try:
            stage.transfer_expr()  # reject undefined circuits now, not at first use
        except RecursionError:
            raise DesignFileError("the circuit is too large to solve (Python's recursion limit was reached)",
                                  key_path) from None
        return stage
    except DesignFileError:
        raise
    except LoopcraftError as err:
        raise DesignFileError(str(err), key_path) from err
