"""The section circuits behind filter synthesis: capacitor plans, closed-form solutions, netlists.

One entry per section topology in :data:`SECTION_TOPOLOGIES` (Sallen-Key low- and high-pass,
multiple-feedback low-, band- and high-pass, buffered RC): how to pick the capacitors, the
closed-form resistor solution for a target ω0 (rad/s), Q and gain, the closed-form check
(ω0, Q, gain) of a built section, and its element list for a ``circuit`` stage. The formulas and
their references are given beside each solver; :mod:`loopcraft.synthesis.filters` chooses parts
and cascades sections with them.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

from ..errors import SynthesisError

__all__ = ["SECTION_TOPOLOGIES"]

#: Relative tolerance used for equality tests on exact design quantities.
_REL_TOL = 1e-9


def _fmt(x: float) -> str:
    return f"{x:.6g}"


# --- topologies ----------------------------------------------------------------------------


@dataclass(frozen=True)
class _CapPlan:
    """Capacitors of a section relative to a base value.

    ``ratios[name]`` is the wanted capacitor divided by the base capacitor;
    ``minimum[name]``, when present, is the smallest ratio for which real
    resistors exist (rounding to a series then rounds up, never down).
    """

    base: str
    ratios: dict[str, float]
    minimum: dict[str, float]


@dataclass(frozen=True)
class _Topology:
    order: int
    plan: Callable[[float | None, float, float], _CapPlan]
    solve: Callable[[float, float | None, float, dict[str, float]], dict[str, float]]
    closed_form: Callable[[Mapping[str, float]], tuple[float, float | None, float]]
    elements: Callable[[Mapping[str, float]], list[list[str]]]
    opamp: dict[str, str]
    unity_gain_only: bool


def _check_ratio(topology: str, ratio: float, max_c_ratio: float, why: str) -> None:
    spread = max(ratio, 1.0 / ratio)
    if spread > max_c_ratio * (1.0 + _REL_TOL):
        raise SynthesisError(
            f"{topology}: {why} needs a capacitor ratio of {_fmt(spread)}, above the allowed "
            f"capacitor ratio max_c_ratio={max_c_ratio!r}; expected a target needing at most "
            f"{max_c_ratio!r} (raise max_c_ratio, lower Q or change topology)"
        )


def _quadratic_roots(s_sum: float, prod: float, what: str) -> tuple[float, float]:
    """Roots of x² - s_sum·x + prod = 0 (both real and positive), larger first."""
    disc = s_sum * s_sum - 4.0 * prod
    if disc < 0.0:
        if disc >= -_REL_TOL * s_sum * s_sum:
            disc = 0.0
        else:
            raise SynthesisError(
                f"{what}: no real resistor values exist (discriminant {disc!r} < 0); "
                "the capacitor ratio is below the minimum for this Q"
            )
    r = math.sqrt(disc)
    return (s_sum + r) / 2.0, (s_sum - r) / 2.0


# sallen_key_lowpass ------------------------------------------------------------------------


def _sk_lp_plan(q: float | None, gain: float, max_c_ratio: float) -> _CapPlan:
    assert q is not None
    need = 4.0 * q * q
    _check_ratio("sallen_key_lowpass", max(need, 1.0), max_c_ratio, f"Q={q!r} (C1/C2 >= 4Q²)")
    return _CapPlan(base="C2", ratios={"C1": max(need, 1.0), "C2": 1.0}, minimum={"C1": need})


def _sk_lp_solve(w0: float, q: float | None, gain: float, c: dict[str, float]) -> dict[str, float]:
    assert q is not None
    c1, c2 = c["C1"], c["C2"]
    r1, r2 = _quadratic_roots(1.0 / (w0 * q * c2), 1.0 / (w0 * w0 * c1 * c2), "sallen_key_lowpass")
    return {"R1": r1, "R2": r2}


def _sk_lp_closed(v: Mapping[str, float]) -> tuple[float, float | None, float]:
    rc = v["R1"] * v["R2"] * v["C1"] * v["C2"]
    return 1.0 / math.sqrt(rc), math.sqrt(rc) / (v["C2"] * (v["R1"] + v["R2"])), 1.0


def _sk_lp_elements(v: Mapping[str, float]) -> list[list[str]]:
    return [["R1", "in", "n1"], ["R2", "n1", "n2"], ["C1", "n1", "out"], ["C2", "n2", "gnd"]]


# sallen_key_highpass -----------------------------------------------------------------------


def _equal_caps(*names: str) -> Callable[[float | None, float, float], _CapPlan]:
    def plan(q: float | None, gain: float, max_c_ratio: float) -> _CapPlan:
        return _CapPlan(base=names[0], ratios=dict.fromkeys(names, 1.0), minimum={})

    return plan


def _sk_hp_solve(w0: float, q: float | None, gain: float, c: dict[str, float]) -> dict[str, float]:
    assert q is not None
    c1, c2 = c["C1"], c["C2"]
    r1 = 1.0 / (w0 * q * (c1 + c2))
    return {"R1": r1, "R2": 1.0 / (w0 * w0 * c1 * c2 * r1)}


def _sk_hp_closed(v: Mapping[str, float]) -> tuple[float, float | None, float]:
    rc = v["R1"] * v["R2"] * v["C1"] * v["C2"]
    return 1.0 / math.sqrt(rc), math.sqrt(rc) / (v["R1"] * (v["C1"] + v["C2"])), 1.0


def _sk_hp_elements(v: Mapping[str, float]) -> list[list[str]]:
    return [["C1", "in", "n1"], ["C2", "n1", "n2"], ["R1", "n1", "out"], ["R2", "n2", "gnd"]]


# mfb_lowpass -------------------------------------------------------------------------------


def _mfb_lp_plan(q: float | None, gain: float, max_c_ratio: float) -> _CapPlan:
    assert q is not None
    need = 4.0 * q * q * (1.0 + gain)
    _check_ratio(
        "mfb_lowpass",
        max(need, 1.0),
        max_c_ratio,
        f"Q={q!r} with gain={gain!r} (C1/C2 >= 4Q²(1+H0))",
    )
    return _CapPlan(base="C2", ratios={"C1": max(need, 1.0), "C2": 1.0}, minimum={"C1": need})


def _spread(values: Sequence[float]) -> float:
    return max(values) / min(values)


def _mfb_lp_solve(w0: float, q: float | None, gain: float, c: dict[str, float]) -> dict[str, float]:
    assert q is not None
    c1, c2 = c["C1"], c["C2"]
    prod = 1.0 / (w0 * w0 * c1 * c2)  # R2·R3
    roots = _quadratic_roots(1.0 / (w0 * q * c2), prod * (1.0 + gain), "mfb_lowpass")
    designs = [{"R1": r2 / gain, "R2": r2, "R3": prod / r2} for r2 in roots]
    return min(designs, key=lambda d: _spread(list(d.values())))


def _mfb_lp_closed(v: Mapping[str, float]) -> tuple[float, float | None, float]:
    r1, r2, r3 = v["R1"], v["R2"], v["R3"]
    rc = r2 * r3 * v["C1"] * v["C2"]
    return 1.0 / math.sqrt(rc), math.sqrt(rc) / (v["C2"] * (r2 + r3 + r2 * r3 / r1)), r2 / r1


def _mfb_lp_elements(v: Mapping[str, float]) -> list[list[str]]:
    return [
        ["R1", "in", "n1"],
        ["R2", "n1", "out"],
        ["R3", "n1", "n2"],
        ["C1", "n1", "gnd"],
        ["C2", "n2", "out"],
    ]


# mfb_bandpass ------------------------------------------------------------------------------


def _mfb_bp_plan(q: float | None, gain: float, max_c_ratio: float) -> _CapPlan:
    assert q is not None
    limit = 2.0 * q * q
    if gain > limit * (1.0 + _REL_TOL):
        raise SynthesisError(
            f"mfb_bandpass: gain={gain!r} exceeds the centre-gain limit 2Q² = {_fmt(limit)} "
            f"for Q={q!r} (R3 would be negative); expected gain <= 2Q²"
        )
    return _equal_caps("C1", "C2")(q, gain, max_c_ratio)


def _mfb_bp_solve(w0: float, q: float | None, gain: float, c: dict[str, float]) -> dict[str, float]:
    assert q is not None
    c1, c2 = c["C1"], c["C2"]
    r2 = q * (c1 + c2) / (w0 * c1 * c2)
    r1 = c1 * r2 / (gain * (c1 + c2))
    g1 = 1.0 / r1
    g3 = w0 * w0 * c1 * c2 * r2 - g1
    if g3 < -_REL_TOL * g1:
        limit = q * q * (c1 + c2) / c2
        raise SynthesisError(
            f"mfb_bandpass: gain={gain!r} exceeds the centre-gain limit Q²(C1+C2)/C2 = "
            f"{_fmt(limit)} (R3 would be negative); expected a lower gain"
        )
    if g3 <= _REL_TOL * g1:  # gain exactly at the limit: R3 open
        return {"R1": r1, "R2": r2}
    return {"R1": r1, "R2": r2, "R3": 1.0 / g3}


def _mfb_bp_closed(v: Mapping[str, float]) -> tuple[float, float | None, float]:
    c1, c2, r1, r2 = v["C1"], v["C2"], v["R1"], v["R2"]
    g = 1.0 / r1 + (1.0 / v["R3"] if "R3" in v else 0.0)
    w0 = math.sqrt(g / (c1 * c2 * r2))
    return w0, w0 * c1 * c2 * r2 / (c1 + c2), r2 * c1 / (r1 * (c1 + c2))


def _mfb_bp_elements(v: Mapping[str, float]) -> list[list[str]]:
    els = [["R1", "in", "n1"]]
    if "R3" in v:
        els.append(["R3", "n1", "gnd"])
    return els + [["C1", "n1", "n2"], ["C2", "n1", "out"], ["R2", "n2", "out"]]


# mfb_highpass ------------------------------------------------------------------------------


def _mfb_hp_plan(q: float | None, gain: float, max_c_ratio: float) -> _CapPlan:
    _check_ratio("mfb_highpass", gain, max_c_ratio, f"gain={gain!r} (C1/C3 = H0)")
    return _CapPlan(base="C2", ratios={"C1": gain, "C2": 1.0, "C3": 1.0}, minimum={})


def _mfb_hp_solve(w0: float, q: float | None, gain: float, c: dict[str, float]) -> dict[str, float]:
    assert q is not None
    c1, c2, c3 = c["C1"], c["C2"], c["C3"]
    r2 = q * (c1 + c2 + c3) / (w0 * c2 * c3)
    return {"R1": 1.0 / (w0 * w0 * r2 * c2 * c3), "R2": r2}


def _mfb_hp_closed(v: Mapping[str, float]) -> tuple[float, float | None, float]:
    c1, c2, c3, r1, r2 = v["C1"], v["C2"], v["C3"], v["R1"], v["R2"]
    w0 = 1.0 / math.sqrt(r1 * r2 * c2 * c3)
    return w0, w0 * c2 * c3 * r2 / (c1 + c2 + c3), c1 / c3


def _mfb_hp_elements(v: Mapping[str, float]) -> list[list[str]]:
    return [
        ["C1", "in", "n1"],
        ["C3", "n1", "out"],
        ["C2", "n1", "n2"],
        ["R1", "n1", "gnd"],
        ["R2", "n2", "out"],
    ]


# first order -------------------------------------------------------------------------------


def _rc_solve(w0: float, q: float | None, gain: float, c: dict[str, float]) -> dict[str, float]:
    return {"R1": 1.0 / (w0 * c["C1"])}


def _rc_closed(v: Mapping[str, float]) -> tuple[float, float | None, float]:
    return 1.0 / (v["R1"] * v["C1"]), None, 1.0


def _rc_lp_elements(v: Mapping[str, float]) -> list[list[str]]:
    return [["R1", "in", "n1"], ["C1", "n1", "gnd"]]


def _rc_hp_elements(v: Mapping[str, float]) -> list[list[str]]:
    return [["C1", "in", "n1"], ["R1", "n1", "gnd"]]


_FOLLOWER = {"plus": "n2", "minus": "out", "out": "out"}
_BUFFER = {"plus": "n1", "minus": "out", "out": "out"}
_INVERTING = {"plus": "gnd", "minus": "n2", "out": "out"}

_TOPOLOGY: dict[str, _Topology] = {
    "sallen_key_lowpass": _Topology(
        2, _sk_lp_plan, _sk_lp_solve, _sk_lp_closed, _sk_lp_elements, _FOLLOWER, True
    ),
    "sallen_key_highpass": _Topology(
        2, _equal_caps("C1", "C2"), _sk_hp_solve, _sk_hp_closed, _sk_hp_elements, _FOLLOWER, True
    ),
    "mfb_lowpass": _Topology(
        2, _mfb_lp_plan, _mfb_lp_solve, _mfb_lp_closed, _mfb_lp_elements, _INVERTING, False
    ),
    "mfb_bandpass": _Topology(
        2, _mfb_bp_plan, _mfb_bp_solve, _mfb_bp_closed, _mfb_bp_elements, _INVERTING, False
    ),
    "mfb_highpass": _Topology(
        2, _mfb_hp_plan, _mfb_hp_solve, _mfb_hp_closed, _mfb_hp_elements, _INVERTING, False
    ),
    "rc_lowpass": _Topology(
        1, _equal_caps("C1"), _rc_solve, _rc_closed, _rc_lp_elements, _BUFFER, True
    ),
    "rc_highpass": _Topology(
        1, _equal_caps("C1"), _rc_solve, _rc_closed, _rc_hp_elements, _BUFFER, True
    ),
}

#: The section topologies by name (the public name of the table is SECTION_TOPOLOGIES).
SECTION_TOPOLOGIES = _TOPOLOGY
