"""The library of ready stages, each with a description and demo values.

Demo values come from invented scenarios (a 48 V bus converter, a strain-gauge
front end, an audio crossover, a motor-speed servo …) and are for
demonstration only.
"""

from __future__ import annotations

from dataclasses import dataclass
from types import MappingProxyType
from typing import Any

from .design import Design
from .errors import TopologyError

__all__ = ["Topology", "TOPOLOGIES", "topology", "topology_names"]


@dataclass(frozen=True)
class Topology:
    """A ready stage of the library.

    Parameters
    ----------
    key : str
        Short identifier, e.g. ``"type3"``.
    title : str
        Human name, e.g. ``"Type III compensator"``.
    description : str
        What it does and which parts set which corner.
    scenario : str
        The invented scenario the demo values come from.
    stage : mapping
        The design-file ``stage`` section.
    values : mapping
        Demo values (engineering text).
    """

    key: str
    title: str
    description: str
    scenario: str
    stage: MappingProxyType
    values: MappingProxyType

    def to_dict(self) -> dict[str, Any]:
        """A design-file dict with the demo values."""
        return {
            "loopcraft": 1,
            "title": f"{self.title} ({self.scenario})",
            "stage": _thaw(self.stage),
            "values": dict(self.values),
            "notes": self.description,
        }

    def design(self) -> Design:
        """The stage as a :class:`~loopcraft.design.Design` with the demo values."""
        return Design.from_dict(self.to_dict())


def _thaw(x: Any) -> Any:
    if isinstance(x, MappingProxyType | dict):
        return {k: _thaw(v) for k, v in x.items()}
    if isinstance(x, tuple | list):
        return [_thaw(v) for v in x]
    return x


def _freeze(x: Any) -> Any:
    if isinstance(x, dict):
        return MappingProxyType({k: _freeze(v) for k, v in x.items()})
    if isinstance(x, list | tuple):
        return tuple(_freeze(v) for v in x)
    return x


def _inv(zi: str, zf: str) -> dict[str, Any]:
    return {"kind": "inverting", "input": zi, "feedback": zf}


_OPAMP_GND_PLUS = [{"plus": "gnd", "minus": "n", "out": "out"}]
_FOLLOWER = [{"plus": "b", "minus": "out", "out": "out"}]

_ENTRIES: list[tuple[str, str, str, str, dict[str, Any], dict[str, str]]] = [
    (
        "inverting",
        "Inverting amplifier",
        "Flat gain -R2/R1; the reference stage every other one departs from.",
        "strain-gauge bridge amplifier",
        _inv("R1", "R2"),
        {"R1": "4k7", "R2": "47k"},
    ),
    (
        "integrator",
        "Integrator",
        "H = -1/(s·R1·C1): -20 dB/decade everywhere, unity gain at 1/(2π·R1·C1).",
        "charge-amplifier reset loop",
        _inv("R1", "C1"),
        {"R1": "10k", "C1": "15n"},
    ),
    (
        "lossy_integrator",
        "Lossy integrator (first-order low-pass)",
        "DC gain -R2/R1, pole at 1/(R2·C1): an integrator whose DC gain is capped.",
        "photodiode current averaging",
        _inv("R1", "R2 || C1"),
        {"R1": "10k", "R2": "100k", "C1": "1n"},
    ),
    (
        "differentiator",
        "Differentiator",
        "H = -s·R1·C1: +20 dB/decade without limit; rings or oscillates with a real op-amp.",
        "vibration-sensor rate output",
        _inv("C1", "R1"),
        {"C1": "100n", "R1": "10k"},
    ),
    (
        "practical_differentiator",
        "Practical differentiator",
        "Differentiates below 1/(R1·C1) and 1/(R2·C2); R1 and C2 tame the high-frequency gain.",
        "vibration-sensor rate output",
        _inv("R1 + C1", "R2 || C2"),
        {"R1": "1k", "C1": "100n", "R2": "100k", "C2": "100p"},
    ),
    (
        "bandpass",
        "Band-pass (inverting)",
        "Zero at the origin, poles at 1/(R1·C1) and 1/(R2·C2); mid-band gain about -R2/R1.",
        "ultrasonic receiver front end",
        _inv("R1 + C1", "R2 || C2"),
        {"R1": "2k2", "C1": "1n5", "R2": "22k", "C2": "100p"},
    ),
    (
        "lead",
        "Lead stage",
        "Zero at 1/((R1+R3)·C1) below the pole at 1/(R3·C1): phase boost between them.",
        "motor-speed servo",
        _inv("R1 || (R3 + C1)", "R2"),
        {"R1": "10k", "R3": "1k", "C1": "47n", "R2": "10k"},
    ),
    (
        "lag",
        "Lag stage",
        "Pole at 1/((R2+R3)·C1) below the zero at 1/(R3·C1): more low-frequency gain.",
        "motor-speed servo",
        _inv("R1", "R2 || (R3 + C1)"),
        {"R1": "10k", "R2": "100k", "R3": "10k", "C1": "100n"},
    ),
    (
        "lead_lag",
        "Lead-lag stage",
        "A lag pair in the feedback network and a lead pair in the input network.",
        "motor-speed servo",
        _inv("R1 || (R3 + C3)", "R2 || (R4 + C1)"),
        {"R1": "10k", "R3": "1k", "C3": "22n", "R2": "100k", "R4": "10k", "C1": "220n"},
    ),
    (
        "pi",
        "PI stage",
        "Integrator with a zero at 1/(R2·C1): H = -(1 + s·R2·C1)/(s·R1·C1).",
        "heater temperature controller",
        _inv("R1", "R2 + C1"),
        {"R1": "10k", "R2": "47k", "C1": "1u"},
    ),
    (
        "pid",
        "PID-style stage",
        "PI in the feedback (zero 1/(R2·C1)), derivative zero 1/((R1+R3)·C3), filtered by the pole 1/(R3·C3).",
        "motor-speed servo",
        _inv("R1 || (R3 + C3)", "R2 + C1"),
        {"R1": "10k", "R3": "1k", "C3": "100n", "R2": "22k", "C1": "470n"},
    ),
    (
        "type1",
        "Type I compensator",
        "Pure integrator error amplifier: crossover set by 1/(R1·C1) and the plant gain.",
        "48 V bus converter, current-mode loop",
        _inv("R1", "C1"),
        {"R1": "10k", "C1": "4n7"},
    ),
    (
        "type2",
        "Type II compensator",
        "Integrator, zero at 1/(R2·C1), pole at (C1+C2)/(R2·C1·C2): up to 90° of boost.",
        "48 V bus converter, current-mode loop",
        _inv("R1", "(R2 + C1) || C2"),
        {"R1": "10k", "R2": "33k", "C1": "10n", "C2": "220p"},
    ),
    (
        "type3",
        "Type III compensator",
        "Integrator, zeros at 1/(R2·C1) and 1/((R1+R3)·C3), poles at (C1+C2)/(R2·C1·C2) and 1/(R3·C3).",
        "48 V bus converter, voltage-mode loop",
        _inv("R1 || (R3 + C3)", "(R2 + C1) || C2"),
        {"R1": "10k", "R2": "22k", "R3": "470", "C1": "6n8", "C2": "150p", "C3": "3n3"},
    ),
    (
        "noninverting_shaped",
        "Non-inverting stage with shaped feedback",
        "H = 1 + Zf/Zg: unity at DC (C1 blocks), 1 + R2/R1 mid-band, back toward unity above 1/(R2·C2).",
        "audio crossover input buffer",
        {"kind": "noninverting", "ground": "R1 + C1", "feedback": "R2 || C2"},
        {"R1": "2k2", "C1": "10u", "R2": "22k", "C2": "330p"},
    ),
    (
        "mfb_lowpass",
        "Multiple-feedback low-pass",
        "Inverting second-order low-pass: H0 = -R2/R1, ω0 = 1/sqrt(R2·R3·C1·C2).",
        "strain-gauge anti-alias filter",
        {
            "kind": "circuit",
            "elements": [
                ["R1", "in", "a"],
                ["R2", "a", "out"],
                ["R3", "a", "n"],
                ["C1", "n", "out"],
                ["C2", "a", "gnd"],
            ],
            "opamps": _OPAMP_GND_PLUS,
            "input": "in",
            "output": "out",
        },
        {"R1": "10k", "R2": "22k", "R3": "15k", "C1": "3n3", "C2": "47n"},
    ),
    (
        "mfb_bandpass",
        "Multiple-feedback band-pass",
        "Inverting second-order band-pass: centre at 1/sqrt(R1p·R2·C1·C2) with R1p = R1 || R3.",
        "ultrasonic receiver front end",
        {
            "kind": "circuit",
            "elements": [
                ["R1", "in", "a"],
                ["R3", "a", "gnd"],
                ["C1", "a", "n"],
                ["C2", "a", "out"],
                ["R2", "n", "out"],
            ],
            "opamps": _OPAMP_GND_PLUS,
            "input": "in",
            "output": "out",
        },
        {"R1": "15k", "R3": "1k", "C1": "1n", "C2": "1n", "R2": "68k"},
    ),
    (
        "sallen_key_lowpass",
        "Unity-gain Sallen-Key low-pass",
        "ω0 = 1/sqrt(R1·R2·C1·C2), Q = sqrt(R1·R2·C1·C2)/(C2·(R1+R2)); C1 is the feedback capacitor.",
        "audio crossover, 2.2 kHz",
        {
            "kind": "circuit",
            "elements": [["R1", "in", "a"], ["R2", "a", "b"], ["C1", "a", "out"], ["C2", "b", "gnd"]],
            "opamps": _FOLLOWER,
            "input": "in",
            "output": "out",
        },
        {"R1": "10k", "R2": "10k", "C1": "10n", "C2": "5n1"},
    ),
    (
        "sallen_key_highpass",
        "Unity-gain Sallen-Key high-pass",
        "ω0 = 1/sqrt(R1·R2·C1·C2), Q = sqrt(R1·R2·C1·C2)/(R1·(C1+C2)); R1 is the feedback resistor.",
        "audio crossover, 2.2 kHz",
        {
            "kind": "circuit",
            "elements": [["C1", "in", "a"], ["C2", "a", "b"], ["R1", "a", "out"], ["R2", "b", "gnd"]],
            "opamps": _FOLLOWER,
            "input": "in",
            "output": "out",
        },
        {"C1": "10n", "C2": "10n", "R1": "5k1", "R2": "10k"},
    ),
]

#: Every library topology by key (read-only).
TOPOLOGIES: MappingProxyType = MappingProxyType(
    {
        key: Topology(key, title, desc, scen, _freeze(stage), MappingProxyType(vals))
        for key, title, desc, scen, stage, vals in _ENTRIES
    }
)


def topology_names() -> tuple[str, ...]:
    """Keys of the library topologies, in library order."""
    return tuple(TOPOLOGIES)


def topology(name: str) -> Topology:
    """Look up a library topology by key.

    Raises
    ------
    TopologyError
        Unknown key; the message lists the known ones.
    """
    try:
        return TOPOLOGIES[name]
    except KeyError:
        raise TopologyError(f"no topology named {name!r} (known: {', '.join(TOPOLOGIES)})") from None
