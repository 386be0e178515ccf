"""Synthesis that returns designs: compensators around a plant, and active filters.

The closed-form synthesis lives in :mod:`loopcraft.synthesis.compensators` (k-factor and
direct placement of Type I/II/III error amplifiers) and :mod:`loopcraft.synthesis.filters`
(Butterworth, Bessel and Chebyshev cascades of op-amp sections). The functions
here read what those need from a plant, call them, and wrap the result in a
:class:`~loopcraft.design.Design` that can be analysed, snapped, recorded and
saved like any design file.

* :func:`compensator_design` and :func:`placed_compensator` return a
  :class:`SynthesisResult`: the design plus what it actually achieves
  (analysed with the op-amp, when one is given): every crossover of the loop,
  the worst phase margin among them (the one that governs) and the
  closed-loop verdict of :mod:`loopcraft.analysis.stability`. A design whose closed
  loop is not stable is refused with a :class:`~loopcraft.errors.SynthesisError`
  naming the reason, unless the caller passes ``allow_unstable=True``; the
  result then says UNSTABLE (or MARGINAL, or UNCERTAIN) first in its text,
  its repr and its ``to_dict``. A target crossover above or near a
  right-half-plane zero of the plant is warned about in ``.warnings``.
* :func:`filter_design` and :func:`section_design` return a ``circuit``
  :class:`~loopcraft.design.Design` directly; the achieved section targets are
  in its notes.

Errors from the synthesis (a boost beyond the type's limit, a capacitor ratio
or resistor range that cannot be met …) pass through unchanged as
:class:`~loopcraft.errors.SynthesisError`, their messages naming the limit.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from ..analysis.margins import Crossover
from ..analysis.stability import Stability
from ..design import FORMAT_VERSION, Design
from ..errors import AnalysisError, SynthesisError
from ..model.values import format_value
from ..numeric.asymptote import exact_mag_db, exact_phase_deg
from .compensators import CompensatorDesign, k_factor, place

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

_ROMAN = {1: "I", 2: "II", 3: "III"}

#: A crossover is kept at or below this fraction of the plant's lowest right-half-plane
#: zero; a target above it is warned about. The fraction is common practice, no source.
#: The zero itself (the boost's ``fz = (1 - D)²·R/(2π·L)``) and why it limits the
#: crossover (it adds gain and phase lag that no compensator can cancel) are in Erickson &
#: Maksimovic, "Fundamentals of Power Electronics", 2nd ed., 2001, ch. 7-9.
RHP_ZERO_CROSSOVER_FRACTION = 1.0 / 3.0

#: A worst phase margin this far below the target (degrees) is warned about.
PHASE_MARGIN_SHORTFALL_DEG = 0.5


@dataclass(frozen=True, eq=False, repr=False)
class SynthesisResult:
    """A synthesized compensator design and what it achieves.

    The achieved figures judge the worst crossover: a loop that crosses 0 dB
    more than once is only as good as its smallest phase margin, and whether
    the closed loop is stable at all comes from its poles
    (:mod:`loopcraft.analysis.stability`), never from a margin.

    Parameters
    ----------
    design : Design
        The design: the Type I/II/III stage, its exact (unrounded) values in SI
        base units, the plant, the op-amp (when given) and the feedback gain.
    target_crossover_hz : float
        The crossover asked for, Hz.
    target_phase_margin_deg : float or None
        The phase margin asked for, degrees (None for direct placement).
    achieved_crossover_hz : float or None
        The governing crossover of the analysed design, Hz: the one with the
        smallest phase margin among every crossover; None when the loop never
        crosses 0 dB in the analysed band.
    achieved_phase_margin_deg : float or None
        The worst (smallest) phase margin over every crossover, degrees, on the
        loop's continuous phase (never wrapped).
    k : float or None
        The k factor (Type II/III by the k-factor method; None otherwise).
    boost_deg : float
        Phase boost of the stage's zeros and poles at the target crossover, degrees.
    plant_gain_db : float
        ``20·log10|P(j·2π·fc)·k_fb|`` at the target crossover, dB.
    plant_phase_deg : float
        Continuous phase of ``P·k_fb`` at the target crossover, degrees.
    compensator : CompensatorDesign
        The raw synthesis result.
    crossovers : tuple of Crossover
        Every crossover of the analysed loop (Hz, degrees), by increasing frequency.
    verdict : {"stable", "unstable", "marginal", "uncertain"}
        The closed-loop verdict; ``"uncertain"`` also when it could not be evaluated.
    closed_loop_rhp_poles : int or None
        Closed-loop poles in the right half-plane; None when not evaluated.
    headline : str
        One line, verdict first (``"UNSTABLE: 2 closed-loop poles in the right half-plane"``).
    warnings : tuple of str
        Plain-language warnings: a target crossover above or near a
        right-half-plane zero of the plant, a worst phase margin short of the target.
    stability : Stability or None
        The full closed-loop analysis; None when it could not be evaluated.
    """

    design: Design
    target_crossover_hz: float
    target_phase_margin_deg: float | None
    achieved_crossover_hz: float | None
    achieved_phase_margin_deg: float | None
    k: float | None
    boost_deg: float
    plant_gain_db: float
    plant_phase_deg: float
    compensator: CompensatorDesign
    crossovers: tuple[Crossover, ...] = ()
    verdict: str = "uncertain"
    closed_loop_rhp_poles: int | None = None
    headline: str = "STABILITY UNCERTAIN (treat as not stable): not evaluated"
    warnings: tuple[str, ...] = ()
    stability: Stability | None = None

    @property
    def stable(self) -> bool:
        """True only when the closed-loop verdict is ``"stable"``."""
        return self.verdict == "stable"

    @property
    def governing_crossover(self) -> Crossover | None:
        """The crossover with the smallest phase margin (the one that governs), or None."""
        if not self.crossovers:
            return None
        return min(self.crossovers, key=lambda c: c.phase_margin_deg)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary, verdict first, with the design file under ``"design"``.

        Frequencies in Hz, margins in degrees; ``"crossovers"`` lists every
        crossover, ``"governing_crossover_hz"`` the one whose phase margin is
        ``"achieved_phase_margin_deg"``; ``"stability"`` is
        :meth:`loopcraft.analysis.stability.Stability.to_dict` (null when not evaluated).
        """
        gov = self.governing_crossover
        return {
            "headline": self.headline,
            "verdict": self.verdict,
            "stable": self.stable,
            "closed_loop_rhp_poles": self.closed_loop_rhp_poles,
            "warnings": list(self.warnings),
            "target_crossover_hz": self.target_crossover_hz,
            "target_phase_margin_deg": self.target_phase_margin_deg,
            "achieved_crossover_hz": self.achieved_crossover_hz,
            "achieved_phase_margin_deg": self.achieved_phase_margin_deg,
            "governing_crossover_hz": None if gov is None else float(gov.f_hz),
            "crossovers": [
                {"f_hz": float(c.f_hz), "phase_margin_deg": float(c.phase_margin_deg), "governs": c is gov}
                for c in self.crossovers
            ],
            "k": self.k,
            "boost_deg": self.boost_deg,
            "plant_gain_db": self.plant_gain_db,
            "plant_phase_deg": self.plant_phase_deg,
            "stability": None if self.stability is None else self.stability.to_dict(),
            "design": self.design.to_dict(),
        }

    def __repr__(self) -> str:
        c = self.compensator
        pm = "" if self.target_phase_margin_deg is None else f", {self.target_phase_margin_deg:g}°"
        gov = self.governing_crossover
        worst = ("no crossover" if gov is None else
                 f"worst PM {gov.phase_margin_deg:.2f}° at {format_value(gov.f_hz, 'Hz', digits=4)}")
        return (f"<SynthesisResult {self.headline}; Type {_ROMAN[c.type]} for "
                f"{format_value(self.target_crossover_hz, 'Hz', digits=4)}{pm}; {worst}"
                f"{'; ' + str(len(self.warnings)) + ' warning(s)' if self.warnings else ''}>")

    def __str__(self) -> str:
        c = self.compensator
        lines = [self.headline, f"Type {_ROMAN[c.type]} compensator: {self.design.title}"]
        target = f"target crossover {format_value(self.target_crossover_hz, 'Hz', digits=4)}"
        if self.target_phase_margin_deg is not None:
            target += f", phase margin {self.target_phase_margin_deg:.2f}°"
        lines.append(target)
        lines.append(f"plant·feedback at fc: {self.plant_gain_db:.2f} dB, {self.plant_phase_deg:.2f}°")
        if self.k is not None:
            lines.append(f"k = {self.k:.5g}, boost {self.boost_deg:.2f}°")
        else:
            lines.append(f"boost {self.boost_deg:.2f}°")
        gov = self.governing_crossover
        if gov is None:
            lines.append("achieved: the loop gain does not cross 0 dB in the analysed band")
        else:
            if len(self.crossovers) > 1:
                items = ", ".join(
                    f"{format_value(x.f_hz, 'Hz', digits=4)} (PM {x.phase_margin_deg:.2f}°"
                    f"{', governs' if x is gov else ''})" for x in self.crossovers
                )
                lines.append(f"the loop crosses 0 dB {len(self.crossovers)} times: {items}")
            lines.append(f"achieved (worst crossover) {format_value(gov.f_hz, 'Hz', digits=4)}, "
                         f"phase margin {gov.phase_margin_deg:.2f}°")
        lines += [f"warning: {w}" for w in self.warnings]
        return "\n".join(lines)


# --------------------------------------------------------------------------- helpers


def _positive(name: str, value: object, unit: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise SynthesisError(f"{name} must be a number in {unit} (got {value!r})")
    x = float(value)
    if not (math.isfinite(x) and x > 0):
        raise SynthesisError(f"{name} must be finite and > 0 {unit} (got {value!r})")
    return x


def _flag(name: str, value: object) -> bool:
    if not isinstance(value, bool):
        raise SynthesisError(f"{name} must be True or False (got {value!r})")
    return value


def _resolve(plant_design_or_plant: Any, opamp: Any, feedback_gain: float | None) -> tuple[Any, Any, float]:
    """(plant, opamp, feedback gain) from a Plant or a Design that has one."""
    from ..model.opamp import OpAmp
    from ..model.plant import Plant

    if isinstance(plant_design_or_plant, Design):
        d = plant_design_or_plant
        if d.plant is None:
            raise SynthesisError(
                f"the design {d.title or '(untitled)'!r} has no plant; expected a design with a 'plant' "
                "section or a loopcraft.plant.Plant"
            )
        plant = d.plant
        if opamp is None:
            opamp = d.opamp
        fb = d.feedback_gain if feedback_gain is None else feedback_gain
    elif isinstance(plant_design_or_plant, Plant):
        plant = plant_design_or_plant
        fb = 1.0 if feedback_gain is None else feedback_gain
    else:
        raise SynthesisError(
            f"plant_design_or_plant must be a loopcraft.plant.Plant or a Design with a plant "
            f"(got {type(plant_design_or_plant).__name__} {plant_design_or_plant!r})"
        )
    fb = _positive("feedback_gain", fb, "V/V")
    if opamp is not None and not isinstance(opamp, OpAmp):
        if isinstance(opamp, Mapping):
            opamp = OpAmp.from_dict(opamp, "opamp")
        else:
            raise SynthesisError(f"opamp must be an OpAmp, a design-file opamp mapping or None (got {opamp!r})")
    return plant, opamp, fb


def plant_at(plant: Any, f_hz: float, feedback_gain: float = 1.0) -> tuple[float, float]:
    """Gain and phase of ``plant · feedback_gain`` at one frequency.

    Parameters
    ----------
    plant : Plant
        A :mod:`loopcraft.plant` model.
    f_hz : float
        Frequency, Hz.
    feedback_gain : float
        Divider or sensor gain, V/V.

    Returns
    -------
    (gain_db, phase_deg) : tuple of float
        ``20·log10|P·k_fb|`` in dB and the continuous (unwrapped) phase in
        degrees, summed factor by factor as :func:`loopcraft.numeric.asymptote.exact_phase_deg` does.
    """
    fn = plant.factored().scaled(feedback_gain)
    f = np.array([f_hz], dtype=float)
    return float(exact_mag_db(fn, f)[0]), float(exact_phase_deg(fn, f)[0])


def _title(type_: int, fc_hz: float, pm_deg: float | None, plant: Any) -> str:
    kind = getattr(plant, "kind", "plant")
    text = f"Type {_ROMAN[type_]} compensator for a {kind} plant, crossover {format_value(fc_hz, 'Hz', digits=4)}"
    if pm_deg is not None:
        text += f", phase margin {pm_deg:g}°"
    return text


def _compensator_result(cd: CompensatorDesign, plant: Any, opamp: Any, fb: float, title: str,
                        pm_deg: float | None, gain_db: float, phase_deg: float,
                        allow_unstable: bool) -> SynthesisResult:
    doc: dict[str, Any] = {
        "loopcraft": FORMAT_VERSION,
        "title": title or _title(cd.type, cd.fc_hz, pm_deg, plant),
        "stage": dict(cd.stage),
        "values": {k: float(v) for k, v in cd.values.items()},
        "plant": plant.to_dict(),
    }
    if opamp is not None:
        doc["opamp"] = opamp.to_dict()
    if fb != 1.0:
        doc["feedback_gain"] = fb
    how = f"k-factor, k = {cd.k:.5g}" if cd.k is not None else "direct placement"
    doc["notes"] = (
        f"Synthesized ({how}) for crossover {format_value(cd.fc_hz, 'Hz', digits=4)}"
        + (f" and phase margin {pm_deg:g}°" if pm_deg is not None else "")
        + f"; plant·feedback at fc {gain_db:.2f} dB, {phase_deg:.2f}°; stage boost {cd.boost_deg:.2f}°. "
        "Values are exact; snap them to a standard series before building."
    )
    design = Design.from_dict(doc)
    loop = design.analyze().loop
    crossovers = tuple(loop.margins.crossovers)
    gov = min(crossovers, key=lambda x: x.phase_margin_deg) if crossovers else None
    st: Stability | None
    try:
        st = loop.stability
        verdict, n_rhp, headline = st.verdict, int(st.closed_loop_rhp_poles), st.headline()
    except AnalysisError as exc:  # could not be evaluated: never reported as stable
        st, verdict, n_rhp = None, "uncertain", None
        headline = f"STABILITY UNCERTAIN (treat as not stable): the closed loop could not be evaluated ({exc})"
    warnings = list(rhp_zero_warnings(plant, cd.fc_hz))
    if pm_deg is not None and gov is not None and gov.phase_margin_deg < pm_deg - PHASE_MARGIN_SHORTFALL_DEG:
        warnings.append(
            f"the worst phase margin {gov.phase_margin_deg:.2f}° (at {format_value(gov.f_hz, 'Hz', digits=4)}) "
            f"falls short of the target {pm_deg:g}°"
        )
    result = SynthesisResult(
        design, cd.fc_hz, pm_deg,
        None if gov is None else gov.f_hz, None if gov is None else gov.phase_margin_deg,
        cd.k, cd.boost_deg, gain_db, phase_deg, cd,
        crossovers=crossovers, verdict=verdict, closed_loop_rhp_poles=n_rhp, headline=headline,
        warnings=tuple(warnings), stability=st,
    )
    if verdict != "stable" and not allow_unstable:
        raise SynthesisError(_refusal(result))
    return result


def _refusal(result: SynthesisResult) -> str:
    """The reason a not-stable synthesis result is refused, verdict first."""
    n = result.closed_loop_rhp_poles
    if result.verdict == "unstable" and n:
        why = f"the closed loop has {n} right-half-plane pole{'s' if n != 1 else ''}: {result.headline}"
    elif result.verdict == "marginal":
        why = f"the closed loop is not stable: {result.headline}"
    else:
        why = f"the closed loop's stability could not be established: {result.headline}"
    if result.crossovers:
        why += "; crossovers " + ", ".join(
            f"{format_value(c.f_hz, 'Hz', digits=4)} (PM {c.phase_margin_deg:.2f}°)" for c in result.crossovers
        )
    for w in result.warnings:
        why += f"; {w}"
    return why + ". Lower the target crossover or change the type; pass allow_unstable=True to get the result marked"


def rhp_zero_warnings(plant: Any, fc_hz: float) -> tuple[str, ...]:
    """A warning when a crossover is placed above or near a right-half-plane zero of the plant.

    A right-half-plane zero adds gain and phase lag together, which no
    compensator can cancel (Erickson & Maksimovic, "Fundamentals of Power
    Electronics", 2nd ed., 2001, ch. 7-9, for the boost's zero at
    ``(1 - D)²·R/(2π·L)``). The crossover is kept at or below
    :data:`RHP_ZERO_CROSSOVER_FRACTION` of the lowest such zero (common
    practice, no source).

    Parameters
    ----------
    plant : Plant
        A :mod:`loopcraft.plant` model.
    fc_hz : float
        Crossover frequency, Hz.

    Returns
    -------
    tuple of str
        Empty, or one warning naming the zero (Hz) and the recommended ceiling (Hz).
    """
    zs = [f.f_hz for f in plant.factored().factors if f.role == "zero" and f.rhp]
    if not zs:
        return ()
    fz = min(zs)
    limit = RHP_ZERO_CROSSOVER_FRACTION * fz
    if fc_hz <= limit:
        return ()
    where = "above" if fc_hz >= fz else "near"
    return (
        f"target crossover {format_value(fc_hz, 'Hz', digits=4)} is {where} the plant's right-half-plane zero "
        f"at {format_value(fz, 'Hz', digits=4)}, which adds phase lag no compensator can cancel; keep the "
        f"crossover at or below 1/{1.0 / RHP_ZERO_CROSSOVER_FRACTION:g} of it "
        f"({format_value(limit, 'Hz', digits=4)}, common practice)",
    )


# --------------------------------------------------------------------------- compensators


def compensator_design(
    plant_design_or_plant: Any,
    fc_hz: float,
    phase_margin_deg: float,
    *,
    type: int = 3,
    r1_ohm: float = 10e3,
    opamp: Any = None,
    feedback_gain: float | None = None,
    title: str = "",
    allow_unstable: bool = False,
) -> SynthesisResult:
    """Synthesize a Type I, II or III error amplifier for a plant by the k-factor method.

    The plant's gain and phase at ``fc_hz`` (times the feedback gain) go to
    :func:`loopcraft.synthesis.compensators.k_factor` (Venable 1983), which puts the
    crossover at ``fc_hz`` with the wanted phase margin for an ideal op-amp.
    The design is then analysed (with the real op-amp when one is given):
    every crossover is reported, the worst phase margin among them governs,
    and the closed loop's poles decide whether it is stable. A closed loop
    that is not stable is refused (see ``allow_unstable``).

    Parameters
    ----------
    plant_design_or_plant : Plant or Design
        A :mod:`loopcraft.plant` model, or a design with a ``plant`` section
        (its op-amp and feedback gain are used unless given here).
    fc_hz : float
        Target crossover frequency, Hz.
    phase_margin_deg : float
        Target phase margin, degrees, in (0, 180).
    type : {1, 2, 3}
        Compensator type.
    r1_ohm : float
        Input resistor R1, Ω (usually the upper resistor of the sensing divider).
    opamp : OpAmp or mapping or None
        Op-amp model for the design (design-file ``opamp`` mapping accepted);
        None keeps the design's op-amp, or the ideal one.
    feedback_gain : float or None
        Divider or sensor gain between the plant output and the stage, V/V;
        None takes the design's (or 1 for a bare plant).
    title : str
        Design title; a descriptive one is made up when empty.
    allow_unstable : bool
        False (default): a design whose closed loop is not stable (unstable,
        marginal, or not established) raises :class:`SynthesisError`. True:
        it is returned, its text, repr and ``to_dict`` saying so first.

    Returns
    -------
    SynthesisResult
        ``.design`` is the :class:`~loopcraft.design.Design`; every crossover
        (Hz), the worst phase margin (degrees) and its crossover, the
        closed-loop verdict, warnings (a crossover above or near a
        right-half-plane zero of the plant), k and boost ride along.

    Raises
    ------
    SynthesisError
        A missing plant, a bad argument, a target that the type cannot
        meet (passed through from :func:`~loopcraft.synthesis.compensators.k_factor`,
        naming the boost limit), or a closed loop that is not stable (naming
        its right-half-plane poles and every crossover) unless ``allow_unstable``.
    """
    plant, amp, fb = _resolve(plant_design_or_plant, opamp, feedback_gain)
    fc = _positive("fc_hz", fc_hz, "Hz")
    gain_db, phase_deg = plant_at(plant, fc, fb)
    cd = k_factor(fc, gain_db, phase_deg, phase_margin_deg, type=type, r1_ohm=r1_ohm)
    return _compensator_result(cd, plant, amp, fb, title, float(phase_margin_deg), gain_db, phase_deg,
                               _flag("allow_unstable", allow_unstable))


def placed_compensator(
    plant_design_or_plant: Any,
    fc_hz: float,
    *,
    zeros_hz: Sequence[float],
    poles_hz: Sequence[float],
    type: int | None = None,
    r1_ohm: float = 10e3,
    opamp: Any = None,
    feedback_gain: float | None = None,
    title: str = "",
    allow_unstable: bool = False,
) -> SynthesisResult:
    """Build a compensator with chosen zeros and poles that crosses over at ``fc_hz``.

    The stage gain at ``fc_hz`` is set to ``1/|P(j·2π·fc)·k_fb|`` so that the
    ideal loop gain is 0 dB there; the corners are placed as given by
    :func:`loopcraft.synthesis.compensators.place`.

    Parameters
    ----------
    plant_design_or_plant : Plant or Design
        As for :func:`compensator_design`.
    fc_hz : float
        Target crossover frequency, Hz.
    zeros_hz, poles_hz : sequence of float
        Non-origin zeros and poles, Hz, paired by position: none for Type I,
        one each for Type II (``1/(2π R2 C1)``, ``(C1+C2)/(2π R2 C1 C2)``),
        two each for Type III (the second pair ``1/(2π (R1+R3) C3)``, ``1/(2π R3 C3)``).
    type : {1, 2, 3} or None
        Compensator type; None infers it from the number of zeros (0, 1, 2).
    r1_ohm, opamp, feedback_gain, title, allow_unstable
        As for :func:`compensator_design`.

    Returns
    -------
    SynthesisResult
        With ``k = None`` and ``target_phase_margin_deg = None``.

    Raises
    ------
    SynthesisError
        A missing plant, a bad argument, corners no component values can
        give (passed through from :func:`~loopcraft.synthesis.compensators.place`), or
        a closed loop that is not stable unless ``allow_unstable``.
    """
    plant, amp, fb = _resolve(plant_design_or_plant, opamp, feedback_gain)
    fc = _positive("fc_hz", fc_hz, "Hz")
    if isinstance(zeros_hz, str | bytes) or not isinstance(zeros_hz, Sequence):
        raise SynthesisError(f"zeros_hz must be a sequence of frequencies in Hz (got {zeros_hz!r})")
    if type is None:
        type = {0: 1, 1: 2, 2: 3}.get(len(zeros_hz))
        if type is None:
            raise SynthesisError(f"zeros_hz must hold 0, 1 or 2 frequencies (got {len(zeros_hz)}: {zeros_hz!r})")
    gain_db, phase_deg = plant_at(plant, fc, fb)
    cd = place(type, fc_hz=fc, gain_at_fc=10.0 ** (-gain_db / 20.0), zeros_hz=zeros_hz, poles_hz=poles_hz,
               r1_ohm=r1_ohm)
    return _compensator_result(cd, plant, amp, fb, title, None, gain_db, phase_deg,
                               _flag("allow_unstable", allow_unstable))


# --------------------------------------------------------------------------- filters


def _filter_doc(stage: dict, values: Mapping[str, float], title: str, notes: str, opamp: Any) -> Design:
    from ..model.opamp import OpAmp

    doc: dict[str, Any] = {
        "loopcraft": FORMAT_VERSION,
        "title": title,
        "stage": stage,
        "values": {k: float(v) for k, v in values.items()},
        "notes": notes,
    }
    if opamp is not None:
        if isinstance(opamp, OpAmp):
            doc["opamp"] = opamp.to_dict()
        elif isinstance(opamp, Mapping):
            doc["opamp"] = dict(opamp)
        else:
            raise SynthesisError(f"opamp must be an OpAmp, a design-file opamp mapping or None (got {opamp!r})")
    return Design.from_dict(doc)


def _section_line(i: int, st: Any) -> str:
    q = "first order" if st.q is None else f"Q = {st.q:.4g}"
    return (f"section {i}: {st.topology}, f0 = {format_value(st.f0_hz, 'Hz', digits=5)}, {q}, "
            f"|gain| = {st.gain:.4g}")


def filter_design(
    response: str,
    order: int,
    f_hz: float,
    *,
    kind: str = "lowpass",
    topology: str = "sallen_key",
    ripple_db: float | None = None,
    gain: float = 1.0,
    capacitor_series: str | None = None,
    r_range_ohm: tuple[float, float] = (1e3, 1e6),
    max_c_ratio: float | None = None,
    opamp: Any = None,
    title: str = "",
) -> Design:
    """Synthesize a whole active filter and return it as one ``circuit`` design.

    Calls :func:`loopcraft.synthesis.filters.synthesize_filter` and merges the cascade
    with :func:`loopcraft.synthesis.filters.cascade_stage` (designators renumbered
    R1…Rn, C1…Cn in cascade order).

    Parameters
    ----------
    response : {"butterworth", "bessel", "chebyshev"}
        Response family (Bessel normalized to -3 dB at ``f_hz``).
    order : int
        Filter order, 1 to 10.
    f_hz : float
        Cutoff frequency, Hz (-3 dB for Butterworth and Bessel, ripple-band
        edge for Chebyshev).
    kind : {"lowpass", "highpass"}
    topology : {"sallen_key", "mfb"}
    ripple_db : float or None
        Pass-band ripple, dB (Chebyshev only).
    gain : float
        Pass-band gain magnitude, V/V (1 for Sallen-Key).
    capacitor_series : str or None
        E-series to round the capacitors to (resistors are then solved exactly).
    r_range_ohm : tuple of float
        Allowed resistor range (min, max), Ω.
    max_c_ratio : float or None
        Largest capacitor ratio within a section (None: the module default).
    opamp : OpAmp or mapping or None
        Op-amp model recorded in the design (one per section).
    title : str
        Design title; made up from the target when empty.

    Returns
    -------
    Design
        A ``circuit`` design; its notes list each section's achieved f0 (Hz), Q and gain.

    Raises
    ------
    SynthesisError
        Passed through from the filter synthesis, naming the section and the limit.
    """
    from .filters import DEFAULT_MAX_C_RATIO, cascade_stage, synthesize_filter

    stages = synthesize_filter(
        response, order, f_hz, kind=kind, topology=topology, ripple_db=ripple_db, gain=gain,
        capacitor_series=capacitor_series, r_range_ohm=r_range_ohm,
        max_c_ratio=DEFAULT_MAX_C_RATIO if max_c_ratio is None else max_c_ratio,
    )
    stage, values = cascade_stage(stages)
    ripple = f", {ripple_db:g} dB ripple" if ripple_db is not None else ""
    what = (f"{response.capitalize()} {kind}, order {order}, {format_value(f_hz, 'Hz', digits=4)}{ripple}, "
            f"{topology} sections")
    notes = "; ".join([f"Synthesized {what}"] + [_section_line(i + 1, st) for i, st in enumerate(stages)])
    return _filter_doc(stage, values, title or what, notes + ".", opamp)


def section_design(
    topology: str,
    f0_hz: float,
    q: float | None,
    gain: float = 1.0,
    *,
    c_value_f: float | None = None,
    capacitor_series: str | None = None,
    r_range_ohm: tuple[float, float] = (1e3, 1e6),
    max_c_ratio: float | None = None,
    opamp: Any = None,
    title: str = "",
) -> Design:
    """Synthesize one filter section and return it as a ``circuit`` design.

    Parameters
    ----------
    topology : str
        One of :data:`loopcraft.synthesis.filters.TOPOLOGIES` (``"sallen_key_lowpass"``,
        ``"mfb_bandpass"`` …).
    f0_hz : float
        Natural, centre or corner frequency, Hz.
    q : float or None
        Quality factor (None for the first-order RC sections).
    gain : float
        Gain magnitude, V/V (see :func:`loopcraft.synthesis.filters.synthesize_section`).
    c_value_f : float or None
        Base capacitor, F (None: centre the resistors in ``r_range_ohm``).
    capacitor_series, r_range_ohm, max_c_ratio, opamp, title
        As for :func:`filter_design`.

    Returns
    -------
    Design

    Raises
    ------
    SynthesisError
        Passed through from :func:`loopcraft.synthesis.filters.synthesize_section`, naming the limit.
    """
    from .filters import DEFAULT_MAX_C_RATIO, synthesize_section

    st = synthesize_section(
        topology, f0_hz, q, gain, c_value_f=c_value_f, capacitor_series=capacitor_series,
        r_range_ohm=r_range_ohm, max_c_ratio=DEFAULT_MAX_C_RATIO if max_c_ratio is None else max_c_ratio,
    )
    qtext = "" if q is None else f", Q = {q:g}"
    what = f"{topology} section, f0 = {format_value(f0_hz, 'Hz', digits=4)}{qtext}"
    return _filter_doc(st.stage, st.values, title or what, f"Synthesized {what}; {_section_line(1, st)}.", opamp)
