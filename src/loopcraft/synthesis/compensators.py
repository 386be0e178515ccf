r"""Closed-form synthesis of Type I, II and III error amplifiers.

All three are inverting op-amp stages, ``H(s) = -Zf(s)/Zi(s)``, written in
the design-file network grammar (``+`` series, ``||`` parallel, ``||`` binds
tighter than ``+``):

======  =====================  =====================
Type    input ``Zi``           feedback ``Zf``
======  =====================  =====================
I       ``R1``                 ``C1``
II      ``R1``                 ``(R2 + C1) || C2``
III     ``R1 || (R3 + C3)``    ``(R2 + C1) || C2``
======  =====================  =====================

Expanding the impedances gives (s in rad/s)

.. math::

    -H_I(s) = \frac{1}{s R_1 C_1}, \qquad
    -H_{II}(s) = \frac{1 + s/\omega_{z1}}
                      {s R_1 (C_1 + C_2)\,(1 + s/\omega_{p1})},

    -H_{III}(s) = \frac{(1 + s/\omega_{z1})(1 + s/\omega_{z2})}
                       {s R_1 (C_1 + C_2)\,(1 + s/\omega_{p1})(1 + s/\omega_{p2})},

with the corners (rad/s)

.. math::

    \omega_{z1} = \frac{1}{R_2 C_1}, \quad
    \omega_{p1} = \frac{C_1 + C_2}{R_2 C_1 C_2}, \quad
    \omega_{z2} = \frac{1}{(R_1 + R_3) C_3}, \quad
    \omega_{p2} = \frac{1}{R_3 C_3}.

Sign convention
---------------
The loop gain is ``L(s) = P(s) · (-H(s))`` where ``P`` is the plant from the
error-amplifier output to the sensed voltage at the amplifier input. The
inverting stage itself supplies the negative-feedback sign, so ``L``
excludes the summing junction's minus sign and the phase margin is
``PM = 180° + ∠L`` at the frequency where ``|L| = 1``. With this convention
``-H`` contributes -90° from the integrator plus the boost of its zeros and
poles, and a lagging plant has a negative phase.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from numbers import Integral, Real

from ..errors import SynthesisError

__all__ = [
    "CompensatorDesign",
    "k_factor",
    "place",
    "TYPE1_BOOST_TOL_DEG",
    "TYPE2_MAX_BOOST_DEG",
    "TYPE3_MAX_BOOST_DEG",
    "TYPE3_THEORETICAL_MAX_BOOST_DEG",
]

#: Largest required boost (deg) a Type I stage accepts. Type I adds no phase;
#: this only absorbs rounding in a plant phase that was computed elsewhere,
#: and is no larger than the 0.01° to which phase margins are reported.
TYPE1_BOOST_TOL_DEG = 1e-6

#: A Type II stage gives strictly less than 90° of boost (k → ∞ as boost → 90°).
TYPE2_MAX_BOOST_DEG = 90.0

#: A double zero / double pole pair can never reach 180° of boost.
TYPE3_THEORETICAL_MAX_BOOST_DEG = 180.0

#: Practical Type III limit (deg). At 170° the k factor is already
#: ``tan²(87.5°) ≈ 525``: the double pole sits 22.9·fc above crossover and the
#: double zero 22.9× below it, and ``R3 = R1/(k-1)`` is below ``R1/500``
#: (about 19 Ω with R1 = 10 kΩ, comparable to op-amp output and trace
#: resistance). The op-amp then needs a gain-bandwidth far above the double
#: pole, and each further degree costs a rapidly growing corner spread
#: (k ≈ 2100 at 175°). Beyond this the target (crossover or phase margin) is
#: the thing to change, not the compensator.
TYPE3_MAX_BOOST_DEG = 170.0

_STAGES: dict[int, dict[str, str]] = {
    1: {"kind": "inverting", "input": "R1", "feedback": "C1"},
    2: {"kind": "inverting", "input": "R1", "feedback": "(R2 + C1) || C2"},
    3: {"kind": "inverting", "input": "R1 || (R3 + C3)", "feedback": "(R2 + C1) || C2"},
}

_N_CORNERS = {1: 0, 2: 1, 3: 2}


@dataclass(frozen=True)
class CompensatorDesign:
    """A synthesized error amplifier: topology, component values and corners.

    Parameters
    ----------
    type : int
        1, 2 or 3 (Type I, II or III).
    stage : dict
        Design-file stage dict, e.g. ``{"kind": "inverting", "input": "R1",
        "feedback": "(R2 + C1) || C2"}``.
    values : dict of str to float
        Component values in SI base units (Ω, F), keyed by designator.
    fc_hz : float
        Target crossover frequency, Hz.
    boost_deg : float
        Phase boost, deg, that the stage's zeros and poles deliver at
        ``fc_hz`` on top of the integrator's -90° (0 for Type I).
    k : float or None
        The k factor (None for Type I and for direct placement).
    zeros_hz : tuple of float
        Non-origin zeros of the stage as built, Hz, in the order
        ``1/(2π R2 C1)``, ``1/(2π (R1+R3) C3)``.
    poles_hz : tuple of float
        Non-origin poles of the stage as built, Hz, in the order
        ``(C1+C2)/(2π R2 C1 C2)``, ``1/(2π R3 C3)``.
    gain_at_fc : float
        ``|H(j·2π·fc_hz)|`` of the built stage, V/V.
    """

    type: int
    stage: dict
    values: dict[str, float]
    fc_hz: float
    boost_deg: float
    k: float | None
    zeros_hz: tuple[float, ...]
    poles_hz: tuple[float, ...]
    gain_at_fc: float


# --------------------------------------------------------------------------- checks


def _finite(name: str, value: object, unit: str) -> float:
    """Return ``value`` as float, or raise if it is not a finite real number."""
    if isinstance(value, bool) or not isinstance(value, Real):
        raise SynthesisError(f"{name} must be a real number in {unit} (got {value!r})")
    x = float(value)
    if not math.isfinite(x):
        raise SynthesisError(f"{name} must be finite, in {unit} (got {value!r})")
    return x


def _positive(name: str, value: object, unit: str) -> float:
    """Return ``value`` as float, or raise if it is not finite and > 0."""
    x = _finite(name, value, unit)
    if not x > 0.0:
        raise SynthesisError(f"{name} must be > 0 {unit} (got {value!r})")
    return x


def _check_type(type_: object) -> int:
    if isinstance(type_, bool) or not isinstance(type_, Integral) or int(type_) not in _STAGES:
        raise SynthesisError(f"type must be 1, 2 or 3 (got {type_!r})")
    return int(type_)


def _corner_list(name: str, corners: object, count: int, type_: int) -> list[float]:
    if isinstance(corners, (str, bytes, Mapping)) or not isinstance(corners, Iterable):
        raise SynthesisError(f"{name} must be a sequence of frequencies in Hz (got {corners!r})")
    corners = list(corners)
    if len(corners) != count:
        raise SynthesisError(
            f"{name} of a Type {'I' * type_} stage must hold {count} "
            f"frequenc{'y' if count == 1 else 'ies'} (got {len(corners)}: {corners!r})"
        )
    return [_positive(f"{name}[{i}]", f, "Hz") for i, f in enumerate(corners)]


def _suggest(boost_deg: float) -> str:
    """Return advice naming the lowest type that can deliver ``boost_deg``."""
    if boost_deg <= TYPE1_BOOST_TOL_DEG:
        return "use type=1 (Type I): the plant and integrator already give the phase margin"
    if boost_deg < TYPE2_MAX_BOOST_DEG:
        return "use type=2 (Type II)"
    if boost_deg < TYPE3_MAX_BOOST_DEG:
        return "use type=3 (Type III)"
    return "no single Type III stage can deliver it; lower the crossover or the phase margin"


# --------------------------------------------------------------------------- evaluation


def _stage_response(type_: int, values: dict[str, float], f_hz: float) -> complex:
    """``H(j·2π·f_hz)`` of the built stage, from its element impedances."""
    s = 2j * math.pi * f_hz

    def par(a: complex, b: complex) -> complex:
        return a * b / (a + b)

    r1 = values["R1"]
    if type_ == 1:
        zi, zf = complex(r1), 1.0 / (s * values["C1"])
    else:
        zf = par(values["R2"] + 1.0 / (s * values["C1"]), 1.0 / (s * values["C2"]))
        if type_ == 2:
            zi = complex(r1)
        else:
            zi = par(complex(r1), values["R3"] + 1.0 / (s * values["C3"]))
    return -zf / zi


def _corners_hz(type_: int, v: dict[str, float]) -> tuple[tuple[float, ...], tuple[float, ...]]:
    """Non-origin (zeros, poles) in Hz from the corner formulas of the topology."""
    two_pi = 2.0 * math.pi
    if type_ == 1:
        return (), ()
    zeros = [1.0 / (two_pi * v["R2"] * v["C1"])]
    poles = [(v["C1"] + v["C2"]) / (two_pi * v["R2"] * v["C1"] * v["C2"])]
    if type_ == 3:
        zeros.append(1.0 / (two_pi * (v["R1"] + v["R3"]) * v["C3"]))
        poles.append(1.0 / (two_pi * v["R3"] * v["C3"]))
    return tuple(zeros), tuple(poles)


def _boost_deg(fc_hz: float, zeros_hz: Sequence[float], poles_hz: Sequence[float]) -> float:
    """Phase (deg) that real LHP zeros and poles add at ``fc_hz``."""
    lead = sum(math.atan(fc_hz / f) for f in zeros_hz)
    lag = sum(math.atan(fc_hz / f) for f in poles_hz)
    return math.degrees(lead - lag)


# --------------------------------------------------------------------------- synthesis


def _solve(
    type_: int,
    fc_hz: float,
    gain: float,
    zeros_hz: Sequence[float],
    poles_hz: Sequence[float],
    r1_ohm: float,
) -> dict[str, float]:
    """Closed-form component values; the equations are in :func:`place`."""
    wc = 2.0 * math.pi * fc_hz
    if type_ == 1:
        values = {"R1": r1_ohm, "C1": 1.0 / (wc * r1_ohm * gain)}
    else:
        # |(1 + jωc/ωz)/(1 + jωc/ωp)| over every zero/pole pair (ratios in Hz = ratios in rad/s).
        a = 1.0
        for fz, fp in zip(zeros_hz, poles_hz, strict=True):
            a *= math.hypot(1.0, fc_hz / fz) / math.hypot(1.0, fc_hz / fp)
        fz1, fp1 = zeros_hz[0], poles_hz[0]
        c2 = a * fz1 / (wc * r1_ohm * gain * fp1)
        c1 = c2 * (fp1 / fz1 - 1.0)
        r2 = 1.0 / (2.0 * math.pi * fz1 * c1)
        values = {"R1": r1_ohm, "R2": r2, "C1": c1, "C2": c2}
        if type_ == 3:
            wz2, wp2 = 2.0 * math.pi * zeros_hz[1], 2.0 * math.pi * poles_hz[1]
            c3 = (1.0 / wz2 - 1.0 / wp2) / r1_ohm
            r3 = 1.0 / (wp2 * c3)
            values.update({"R3": r3, "C3": c3})
    return dict(sorted(values.items()))


def _build(
    type_: int,
    fc_hz: float,
    gain: float,
    zeros_hz: Sequence[float],
    poles_hz: Sequence[float],
    r1_ohm: float,
    k: float | None,
) -> CompensatorDesign:
    target = f"(fc_hz={fc_hz!r}, gain_at_fc={gain!r}, r1_ohm={r1_ohm!r})"
    try:
        values = _solve(type_, fc_hz, gain, zeros_hz, poles_hz, r1_ohm)
        z_built, p_built = _corners_hz(type_, values)
        gain_built = abs(_stage_response(type_, values, fc_hz))
    except (ZeroDivisionError, OverflowError) as exc:
        raise SynthesisError(
            f"the target {target} needs component values outside the floating-point range"
        ) from exc
    for name, x in [
        *values.items(),
        ("gain_at_fc", gain_built),
        *((f"zeros_hz[{i}]", f) for i, f in enumerate(z_built)),
        *((f"poles_hz[{i}]", f) for i, f in enumerate(p_built)),
    ]:
        if not (math.isfinite(x) and x > 0.0):
            raise SynthesisError(
                f"built {name} = {x!r} is not a finite positive value; the target {target} "
                "is outside the floating-point range"
            )
    return CompensatorDesign(
        type=type_,
        stage=dict(_STAGES[type_]),
        values=values,
        fc_hz=fc_hz,
        boost_deg=_boost_deg(fc_hz, z_built, p_built),
        k=k,
        zeros_hz=z_built,
        poles_hz=p_built,
        gain_at_fc=gain_built,
    )


def place(
    type: int,
    *,
    fc_hz: float,
    gain_at_fc: float,
    zeros_hz: Sequence[float],
    poles_hz: Sequence[float],
    r1_ohm: float = 10e3,
) -> CompensatorDesign:
    """Build a Type I, II or III stage with chosen zeros, poles and gain at fc.

    Parameters
    ----------
    type : int
        1, 2 or 3.
    fc_hz : float
        Frequency at which the gain is set, Hz, > 0.
    gain_at_fc : float
        Wanted ``|H(j·2π·fc_hz)|``, V/V, > 0.
    zeros_hz : sequence of float
        Non-origin zeros, Hz: none for Type I; ``[fz1]`` for Type II;
        ``[fz1, fz2]`` for Type III. ``fz1 = 1/(2π R2 C1)`` (feedback
        network), ``fz2 = 1/(2π (R1+R3) C3)`` (input network).
    poles_hz : sequence of float
        Non-origin poles, Hz, paired with ``zeros_hz`` by position:
        ``fp1 = (C1+C2)/(2π R2 C1 C2)`` (feedback network),
        ``fp2 = 1/(2π R3 C3)`` (input network).
    r1_ohm : float
        Input resistor R1, Ω, > 0 (usually set by the sensing divider).

    Returns
    -------
    CompensatorDesign
        With ``k = None``; ``boost_deg`` is the boost the chosen corners give
        at ``fc_hz``.

    Raises
    ------
    SynthesisError
        For a non-positive or non-finite input, a wrong number of corners,
        or corners that need a negative or zero component: each network can
        only put its pole above its zero (``fp1 > fz1`` since
        ``fp1/fz1 = 1 + C1/C2``; ``fp2 > fz2`` since
        ``fp2/fz2 = 1 + R1/R3``).

    Notes
    -----
    Closed form, with ``ωc = 2π·fc``, ``ω = 2π·f`` for each corner and
    ``G = gain_at_fc``:

    * Type I: ``|H(jωc)| = 1/(ωc R1 C1)``, so ``C1 = 1/(ωc R1 G)``.
    * Type II and III, feedback network: with
      ``A = Π |1 + jωc/ωz| / |1 + jωc/ωp|`` over the zero/pole pairs, the
      gain condition ``|H(jωc)| = A / (ωc R1 (C1+C2)) = G`` and the ratio
      ``ωp1/ωz1 = (C1+C2)/C2`` give

      ``C2 = A·ωz1 / (ωc R1 G ωp1)``,
      ``C1 = C2·(ωp1/ωz1 - 1)``,
      ``R2 = 1/(ωz1 C1)``.
    * Type III, input network: ``(R1+R3) C3 = 1/ωz2`` and ``R3 C3 = 1/ωp2``
      subtract to ``R1 C3 = 1/ωz2 - 1/ωp2``, so

      ``C3 = (1/ωz2 - 1/ωp2)/R1``, ``R3 = 1/(ωp2 C3)``.

    The returned corners and gain are recomputed from the built values.
    """
    type_ = _check_type(type)
    fc = _positive("fc_hz", fc_hz, "Hz")
    gain = _positive("gain_at_fc", gain_at_fc, "V/V")
    r1 = _positive("r1_ohm", r1_ohm, "ohm")
    n = _N_CORNERS[type_]
    zeros = _corner_list("zeros_hz", zeros_hz, n, type_)
    poles = _corner_list("poles_hz", poles_hz, n, type_)
    limits = [
        (
            "feedback network (R2 + C1) || C2: pole (C1+C2)/(2π R2 C1 C2)",
            "zero 1/(2π R2 C1)",
            "C1/C2",
        ),
        ("input network R1 || (R3 + C3): pole 1/(2π R3 C3)", "zero 1/(2π (R1+R3) C3)", "R1/R3"),
    ]
    for i in range(n):
        if not poles[i] > zeros[i]:
            where, zero, ratio = limits[i]
            hint = ""
            if n == 2 and poles[1 - i] > zeros[i] and poles[i] > zeros[1 - i]:
                hint = "; swapping the order of poles_hz would pair them feasibly"
            raise SynthesisError(
                f"{where} must be above its {zero}, since their ratio is 1 + {ratio} "
                f"(got poles_hz[{i}]={poles[i]!r} Hz <= zeros_hz[{i}]={zeros[i]!r} Hz; "
                f"it would need {ratio} <= 0){hint}"
            )
    return _build(type_, fc, gain, zeros, poles, r1, None)


def k_factor(
    fc_hz: float,
    plant_gain_db: float,
    plant_phase_deg: float,
    phase_margin_deg: float,
    *,
    type: int,
    r1_ohm: float = 10e3,
) -> CompensatorDesign:
    """Synthesize a Type I, II or III stage by the k-factor method.

    The k-factor method (Venable, "The K Factor: A New Mathematical Tool for
    Stability Analysis and Synthesis", Proc. Powercon 10, 1983) puts the
    zeros and poles geometrically symmetric about the crossover so that the
    phase boost peaks at ``fc``.

    Parameters
    ----------
    fc_hz : float
        Target crossover frequency, Hz, > 0.
    plant_gain_db : float
        Plant magnitude at ``fc_hz``, dB (20·log10 of V/V).
    plant_phase_deg : float
        Plant phase at ``fc_hz``, deg, unwrapped (negative for a lagging
        plant, e.g. about -170° above an LC double pole). Used as given.
    phase_margin_deg : float
        Wanted phase margin, deg, in (0, 180).
    type : int
        1, 2 or 3.
    r1_ohm : float
        Input resistor R1, Ω, > 0.

    Returns
    -------
    CompensatorDesign
        With ``|H(j·2π·fc)| = 1/|P(fc)|`` so that ``|L| = 1`` at ``fc``.

    Raises
    ------
    SynthesisError
        For a non-positive or non-finite input; when the required boost is
        outside what the type can give: Type I needs boost <=
        :data:`TYPE1_BOOST_TOL_DEG`, Type II boost in (0, 90°), Type III
        boost in (0, :data:`TYPE3_MAX_BOOST_DEG`) (theoretical 180°). A
        boost <= 0 asks for a lower type.

    Notes
    -----
    With the loop ``L = P·(-H)`` (see the module docstring),
    ``∠L(fc) = plant_phase - 90° + boost`` and ``PM = 180° + ∠L(fc)``, so the
    required boost is ``boost = PM - plant_phase - 90°``.

    * Type I: no boost; a required boost below 0 is allowed and gives a
      phase margin of ``90° + plant_phase``, larger than requested.
    * Type II: ``k = tan(boost/2 + 45°)``; zero at ``fc/k``, pole at
      ``fc·k``. Then ``boost = atan(k) - atan(1/k) = 2·atan(k) - 90°``.
    * Type III: ``k = tan²(boost/4 + 45°)``; double zero at ``fc/√k``,
      double pole at ``fc·√k``; ``boost = 4·atan(√k) - 180°``.

    The component values follow from ``G = 10^(-plant_gain_db/20)`` and
    these corners by the equations in :func:`place`; with ``ωc = 2π·fc``
    they reduce to Venable's:
    Type I ``C1 = 1/(ωc R1 G)``; Type II ``C2 = 1/(ωc R1 G k)``,
    ``C1 = C2 (k² - 1)``, ``R2 = k/(ωc C1)``; Type III ``C2 = 1/(ωc R1 G)``,
    ``C1 = C2 (k - 1)``, ``R2 = √k/(ωc C1)``, ``R3 = R1/(k - 1)``,
    ``C3 = 1/(ωc √k R3)``.
    """
    type_ = _check_type(type)
    fc = _positive("fc_hz", fc_hz, "Hz")
    gain_db = _finite("plant_gain_db", plant_gain_db, "dB")
    phase = _finite("plant_phase_deg", plant_phase_deg, "deg")
    pm = _finite("phase_margin_deg", phase_margin_deg, "deg")
    if not 0.0 < pm < 180.0:
        raise SynthesisError(f"phase_margin_deg must be in (0, 180) deg (got {phase_margin_deg!r})")
    r1 = _positive("r1_ohm", r1_ohm, "ohm")
    try:
        gain = 10.0 ** (-gain_db / 20.0)
    except OverflowError:
        gain = math.inf
    if not (math.isfinite(gain) and gain > 0.0):
        raise SynthesisError(
            f"plant_gain_db = {plant_gain_db!r} dB needs an amplifier gain outside the "
            "floating-point range (expected roughly within ±6000 dB)"
        )
    boost = pm - phase - 90.0
    what = f"required boost {boost!r} deg (= PM {pm!r} - plant phase {phase!r} - 90)"

    if type_ == 1:
        if boost > TYPE1_BOOST_TOL_DEG:
            raise SynthesisError(
                f"Type I adds no phase: {what} exceeds the Type I tolerance of "
                f"{TYPE1_BOOST_TOL_DEG!r} deg; {_suggest(boost)}"
            )
        return _build(1, fc, gain, (), (), r1, None)

    if boost <= 0.0:
        raise SynthesisError(f"Type {'I' * type_} needs a boost > 0 deg: {what}; {_suggest(boost)}")
    if type_ == 2:
        if boost >= TYPE2_MAX_BOOST_DEG:
            raise SynthesisError(
                f"Type II boost limit: {what} must be below {TYPE2_MAX_BOOST_DEG!r} deg; "
                f"{_suggest(boost)}"
            )
        k = math.tan(math.radians(boost / 2.0 + 45.0))
        return _build(2, fc, gain, (fc / k,), (fc * k,), r1, k)

    if boost >= TYPE3_THEORETICAL_MAX_BOOST_DEG:
        raise SynthesisError(
            f"Type III boost limit: {what} is at or above the theoretical limit of "
            f"{TYPE3_THEORETICAL_MAX_BOOST_DEG!r} deg of a double zero/double pole pair; "
            "lower the crossover or the phase margin"
        )
    if boost >= TYPE3_MAX_BOOST_DEG:
        raise SynthesisError(
            f"Type III boost limit: {what} must be below the practical limit of "
            f"{TYPE3_MAX_BOOST_DEG!r} deg (k = tan²(boost/4 + 45°) would exceed "
            f"{math.tan(math.radians(TYPE3_MAX_BOOST_DEG / 4 + 45)) ** 2:.0f}); "
            "lower the crossover or the phase margin"
        )
    k = math.tan(math.radians(boost / 4.0 + 45.0)) ** 2
    sk = math.sqrt(k)
    return _build(3, fc, gain, (fc / sk, fc / sk), (fc * sk, fc * sk), r1, k)
