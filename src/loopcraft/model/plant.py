"""Plant (power-stage) models: the control-to-output transfer functions a loop closes around.

Five kinds, all built as :class:`~loopcraft.numeric.factors.FactoredNumeric` (corners
in rad/s inside the factored form; frequencies in Hz in the design file):

``"general"``
    Gain, origin order and first/second-order roots given directly.
``"polynomial"``
    Numerator and denominator coefficients in descending powers of s (rad/s).
``"buck_vm"``
    Voltage-mode buck in CCM, control voltage to output voltage, from the
    averaged switch model with inductor DCR and capacitor ESR.
``"peak_current"``
    Peak-current-mode buck, simplified (inductor as a controlled current
    source) with the optional sampling double pole at fs/2.
``"boost_vm"``
    Voltage-mode boost in CCM, control voltage to output voltage, from the
    averaged switch model with capacitor ESR (RHP zero included).

Design-file values are numbers (SI base units) or engineering strings such
as ``"22u"``, ``"10 mΩ"``, ``"400 kHz"``, ``"48 V"``.

Accepted ranges, checked when a plant is built or read (far wider than any
real converter, narrow enough that every corner, Q and gain derived from them
is a finite float; a value outside is an error naming the key and the range):

* resistances ``load_ohm``, ``ri_ohm`` (V/A): 1 µΩ … 1 TΩ; ``esr_ohm``,
  ``dcr_ohm``: 0, or 1 µΩ … 1 TΩ;
* capacitance ``c_f``: 1 fF … 1 kF; inductance ``l_h``: 1 pH … 1 kH;
* voltages ``vin_v``, ``vout_v``: 1 mV … 1 MV; ramp ``ramp_v``: 1 mV … 1 kV;
* switching frequency ``f_sw_hz``: 1 mHz … 1 THz; root frequencies
  (``zeros_hz`` … ``f0_hz``, and the roots of a ``polynomial`` plant):
  1 nHz … 1 PHz;
* ``q`` of a root pair: 0.001 … 1e6; duty cycle ``duty``: 0.001 … 0.999
  (also when it follows from ``vout_v``); ``mc``: 1 … 1000;
* ``gain`` of a general plant, and K of a polynomial one: magnitude 1e-30 …
  1e30 (either sign); ``origin_order``: -4 … 4;
* at most 16 roots in all (a pair counts 2, the origin order counts) for a
  general plant; at most 17 coefficients (degree 16) per polynomial.

These are small-signal models only; power-converter designs involve hazardous
voltages and stored energy, so verify the loop gain on the bench and follow
local codes and licensed practice.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from functools import partial
from typing import Any, ClassVar

import numpy as np

from .._numbers import Span, read_number, real_float, shown
from ..errors import AnalysisError, ComponentValueError, DesignFileError
from ..numeric.factors import Factor, FactoredNumeric, factored_from_tf
from .values import format_value

__all__ = [
    "Plant",
    "ResonantPair",
    "GeneralPlant",
    "PolynomialPlant",
    "BuckVoltageMode",
    "PeakCurrentBuck",
    "BoostVoltageMode",
    "PLANT_KINDS",
    "plant_from_dict",
]

_TWO_PI = 2.0 * math.pi


# --------------------------------------------------------------------------- errors and checks
class _FieldError(ComponentValueError):
    """A field value out of range; ``field`` is its path relative to the plant."""

    def __init__(self, message: str, field: str) -> None:
        self.field = field
        super().__init__(message)


#: Accepted ranges of the physical fields (see the module docstring).
RESISTANCE = Span(1e-6, 1e12, "Ω")
PARASITIC = Span(1e-6, 1e12, "Ω", zero=True)
SENSE_GAIN = Span(1e-6, 1e12, "V/A")
CAPACITANCE = Span(1e-15, 1e3, "F")
INDUCTANCE = Span(1e-12, 1e3, "H")
VOLTAGE = Span(1e-3, 1e6, "V")
RAMP = Span(1e-3, 1e3, "V")
FREQUENCY = Span(1e-3, 1e12, "Hz")
ROOT_FREQUENCY = Span(1e-9, 1e15, "Hz")
Q_RANGE = Span(1e-3, 1e6, "")
DUTY = Span(1e-3, 0.999, "")
MC_RANGE = Span(1.0, 1e3, "")
GAIN = Span(1e-30, 1e30, "", signed=True)
#: Largest |origin_order| of a general plant.
MAX_ORIGIN_ORDER = 4
#: Most roots of a general plant (a pair counts 2, the origin order counts).
MAX_ORDER = 16
#: Most coefficients of one polynomial of a polynomial plant.
MAX_COEFFICIENTS = 17


def _in(span: Span, name: str, x: Any, what: str = "") -> None:
    """Raise _FieldError unless ``x`` lies in ``span``; ``what`` describes the field."""
    if not span.contains(x):
        raise _FieldError(f"{name}{what} must lie in {span.text} (got {shown(x)})", name)


def _hz(f_hz: float) -> str:
    return format_value(f_hz, "Hz")


def _db(x: float) -> str:
    return f"{20.0 * math.log10(abs(x)):.4g} dB"


# --------------------------------------------------------------------------- base class
class Plant(ABC):
    """Common interface of every plant model.

    Subclasses are frozen dataclasses; ``kind`` is the design-file tag.
    """

    kind: ClassVar[str]

    @abstractmethod
    def factored(self) -> FactoredNumeric:
        """Transfer function in normalized factored form (corners in rad/s)."""

    @abstractmethod
    def describe(self) -> str:
        """Return the formulas used and their numbers, as plain text."""

    @abstractmethod
    def to_dict(self) -> dict[str, Any]:
        """Design-file mapping that :func:`plant_from_dict` reads back to an equal object."""

    def response(self, f_hz: np.ndarray) -> np.ndarray:
        """Complex frequency response at ``f_hz`` (Hz), evaluated at s = j·2π·f.

        Parameters
        ----------
        f_hz : array_like of float
            Frequencies, Hz.

        Returns
        -------
        numpy.ndarray of complex
            The plant's transfer function (V/V for the converter kinds).
        """
        return self.factored().response(np.asarray(f_hz, dtype=float))


def _factor_lines(fn: FactoredNumeric) -> list[str]:
    """One line per factor: kind of root, frequency in Hz, Q."""
    lines = [f"  K = {fn.gain:.6g}" + (f" ({_db(fn.gain)})" if fn.origin_order == 0 else "")]
    if fn.origin_order > 0:
        lines.append(f"  {fn.origin_order} zero(s) at the origin")
    elif fn.origin_order < 0:
        lines.append(f"  {-fn.origin_order} pole(s) at the origin")
    for f in fn.factors:
        side = "RHP" if f.rhp else "LHP"
        if f.order == 1:
            lines.append(f"  {side} real {f.role} at {format_value(f.f_hz, 'Hz')}")
        else:
            lines.append(
                f"  {side} {f.role} pair at f0 = {format_value(f.f_hz, 'Hz')}, Q = {f.q:.4g}"
            )
    return lines


_FACTORED_FORM = (
    "  H(s) = K * s^n * prod(1 +/- s/wz) * prod(1 +/- s/(Q w0) + s^2/w0^2)"
    " / [same over the poles], w = 2 pi f, '-' for RHP roots"
)


# --------------------------------------------------------------------------- general
@dataclass(frozen=True)
class ResonantPair:
    """A complex (or real, for Q <= 0.5) pair of roots given as f0 and Q.

    Parameters
    ----------
    f0_hz : float
        Natural frequency, Hz (> 0).
    q : float
        Quality factor (> 0).
    rhp : bool
        True for a right-half-plane pair, ``(1 − s/(Q·ω0) + s²/ω0²)``.
    """

    f0_hz: float
    q: float
    rhp: bool = False


@dataclass(frozen=True)
class GeneralPlant(Plant):
    """A plant given directly by its gain and roots.

    ``H(s) = K · s^n · Π(1 + s/ωz) Π(1 − s/ωzr) Π(pairs) / (Π(1 + s/ωp) Π(1 − s/ωpr) Π(pairs))``
    with ``ω = 2π·f``.

    Parameters
    ----------
    gain : float
        K of the normalized factored form (finite, non-zero, may be negative);
        units (rad/s)^(-n).
    origin_order : int
        n: > 0 for zeros at the origin, < 0 for poles at the origin.
    zeros_hz, poles_hz : tuple of float
        Left-half-plane real roots, Hz (root at s = −2π·f).
    rhp_zeros_hz, rhp_poles_hz : tuple of float
        Right-half-plane real roots, Hz (root at s = +2π·f).
    zero_pairs, pole_pairs : tuple of ResonantPair
        Second-order factors given by f0 (Hz) and Q.
    """

    kind: ClassVar[str] = "general"

    gain: float
    origin_order: int = 0
    zeros_hz: tuple[float, ...] = ()
    poles_hz: tuple[float, ...] = ()
    rhp_zeros_hz: tuple[float, ...] = ()
    rhp_poles_hz: tuple[float, ...] = ()
    zero_pairs: tuple[ResonantPair, ...] = ()
    pole_pairs: tuple[ResonantPair, ...] = ()

    def __post_init__(self) -> None:
        for name in (
            "zeros_hz",
            "poles_hz",
            "rhp_zeros_hz",
            "rhp_poles_hz",
            "zero_pairs",
            "pole_pairs",
        ):
            if isinstance(getattr(self, name), list):
                object.__setattr__(self, name, tuple(getattr(self, name)))
            if not isinstance(getattr(self, name), tuple):
                raise _FieldError(f"{name} must be a tuple (got {shown(getattr(self, name))})", name)
        _in(GAIN, "gain", self.gain, " (non-zero, either sign)")
        n = self.origin_order
        if isinstance(n, bool) or not isinstance(n, int) or abs(n) > MAX_ORIGIN_ORDER:
            raise _FieldError(
                f"origin_order must be an integer in -{MAX_ORIGIN_ORDER} … {MAX_ORIGIN_ORDER} (got {shown(n)})",
                "origin_order",
            )
        order = abs(n) + sum(len(getattr(self, k)) for k in ("zeros_hz", "poles_hz", "rhp_zeros_hz", "rhp_poles_hz"))
        order += 2 * (len(self.zero_pairs) + len(self.pole_pairs))
        if order > MAX_ORDER:
            raise _FieldError(
                f"the plant has {order} roots (pairs count 2, the origin order counts); the limit is {MAX_ORDER}",
                "poles_hz" if self.poles_hz else "",
            )
        for name in ("zeros_hz", "poles_hz", "rhp_zeros_hz", "rhp_poles_hz"):
            for i, f in enumerate(getattr(self, name)):
                try:
                    _in(ROOT_FREQUENCY, name, f)
                except _FieldError as exc:
                    raise _FieldError(str(exc), f"{name}[{i}]") from None
        for name in ("zero_pairs", "pole_pairs"):
            for i, pair in enumerate(getattr(self, name)):
                if not isinstance(pair, ResonantPair):
                    raise _FieldError(
                        f"{name}[{i}] must be a ResonantPair (got {shown(pair)})", f"{name}[{i}]"
                    )
                try:
                    _in(ROOT_FREQUENCY, "f0_hz", pair.f0_hz)
                    _in(Q_RANGE, "q", pair.q)
                except _FieldError as exc:
                    raise _FieldError(f"{name}[{i}].{exc}", f"{name}[{i}].{exc.field}") from None
                if not isinstance(pair.rhp, bool):
                    raise _FieldError(
                        f"{name}[{i}].rhp must be true or false (got {shown(pair.rhp)})",
                        f"{name}[{i}].rhp",
                    )

    def factored(self) -> FactoredNumeric:
        """Transfer function in normalized factored form (corners in rad/s)."""
        fs: list[Factor] = []
        for role, lhp, rhp, pairs in (
            ("zero", self.zeros_hz, self.rhp_zeros_hz, self.zero_pairs),
            ("pole", self.poles_hz, self.rhp_poles_hz, self.pole_pairs),
        ):
            fs += [Factor(role, 1, _TWO_PI * f) for f in lhp]
            fs += [Factor(role, 1, _TWO_PI * f, rhp=True) for f in rhp]
            fs += [Factor(role, 2, _TWO_PI * p.f0_hz, q=real_float(p.q), rhp=p.rhp) for p in pairs]
        return FactoredNumeric(real_float(self.gain), self.origin_order, tuple(fs))

    def describe(self) -> str:
        """Return the factored form and its numbers, as plain text."""
        return "\n".join(
            [
                "General plant, given as gain and roots:",
                _FACTORED_FORM,
                *_factor_lines(self.factored()),
            ]
        )

    def to_dict(self) -> dict[str, Any]:
        """Design-file mapping (frequencies in Hz)."""
        out: dict[str, Any] = {"kind": self.kind, "gain": self.gain}
        if self.origin_order:
            out["origin_order"] = self.origin_order
        for name in ("zeros_hz", "poles_hz", "rhp_zeros_hz", "rhp_poles_hz"):
            if getattr(self, name):
                out[name] = list(getattr(self, name))
        for name in ("zero_pairs", "pole_pairs"):
            pairs = getattr(self, name)
            if pairs:
                out[name] = [
                    {"f0_hz": p.f0_hz, "q": p.q, **({"rhp": True} if p.rhp else {})} for p in pairs
                ]
        return out


# --------------------------------------------------------------------------- polynomial
@dataclass(frozen=True)
class PolynomialPlant(Plant):
    """A plant given as a ratio of polynomials in s (rad/s).

    ``H(s) = (b0·s^m + … + bm) / (a0·s^k + … + ak)``, coefficients in
    descending powers of s. Leading zero coefficients are ignored; trailing
    zero coefficients are roots at the origin.

    Parameters
    ----------
    num : tuple of float
        Numerator coefficients, descending powers of s (s in rad/s).
    den : tuple of float
        Denominator coefficients, descending powers of s (s in rad/s).
    """

    kind: ClassVar[str] = "polynomial"

    num: tuple[float, ...]
    den: tuple[float, ...]

    def __post_init__(self) -> None:
        for name in ("num", "den"):
            if isinstance(getattr(self, name), list):
                object.__setattr__(self, name, tuple(getattr(self, name)))
            coeffs = getattr(self, name)
            if not isinstance(coeffs, tuple) or not coeffs:
                raise _FieldError(
                    f"{name} must be a non-empty tuple of coefficients (got {shown(coeffs)})", name
                )
            if len(coeffs) > MAX_COEFFICIENTS:
                raise _FieldError(
                    f"{name} has {len(coeffs)} coefficients; the limit is {MAX_COEFFICIENTS} (degree "
                    f"{MAX_COEFFICIENTS - 1})",
                    name,
                )
            for i, c in enumerate(coeffs):
                if isinstance(c, bool) or not isinstance(c, int | float) or not math.isfinite(real_float(c)):
                    raise _FieldError(
                        f"{name}[{i}] must be a finite number (got {shown(c)})", f"{name}[{i}]"
                    )
            if all(c == 0 for c in coeffs):
                raise _FieldError(f"{name} must have a non-zero coefficient (got {shown(coeffs)})", name)
        self._check_roots()

    def _check_roots(self) -> None:
        """Factor now, so a plant whose K or roots leave the accepted ranges is refused on load."""
        try:
            with np.errstate(all="ignore"):  # extreme coefficients overflow inside numpy; the result is checked
                fn = factored_from_tf([real_float(c) for c in self.num], [real_float(c) for c in self.den])
        except (AnalysisError, ArithmeticError, ValueError, np.linalg.LinAlgError) as err:
            raise _FieldError(f"num/den cannot be factored: {err}", "den") from None
        if not GAIN.contains(fn.gain):
            raise _FieldError(
                f"K = (lowest non-zero num coefficient)/(lowest non-zero den coefficient) = {fn.gain:.4g} "
                f"must lie in {GAIN.text}",
                "num",
            )
        for f in fn.factors:
            if not ROOT_FREQUENCY.contains(f.f_hz):
                key = "num" if f.role == "zero" else "den"
                raise _FieldError(
                    f"{key} has a {f.role}{' pair' if f.order == 2 else ''} at {f.f_hz:.4g} Hz, outside "
                    f"{ROOT_FREQUENCY.text}",
                    key,
                )

    def factored(self) -> FactoredNumeric:
        """Factored form from the polynomial roots (scaled ``numpy.roots``).

        Raises
        ------
        AnalysisError
            Roots spread over so many decades that a non-zero root cannot be
            told from one at the origin.
        """
        try:
            return factored_from_tf([real_float(c) for c in self.num], [real_float(c) for c in self.den])
        except AnalysisError as err:
            raise AnalysisError(f"{err}; factor the plant and use kind 'general'") from err

    def describe(self) -> str:
        """Return the polynomials and the factored form derived from them, as plain text."""
        return "\n".join(
            [
                "Polynomial plant, s in rad/s, descending powers:",
                f"  num = {list(self.num)!r}",
                f"  den = {list(self.den)!r}",
                "  factored with K = (lowest non-zero num coefficient)"
                "/(lowest non-zero den coefficient):",
                _FACTORED_FORM,
                *_factor_lines(self.factored()),
            ]
        )

    def to_dict(self) -> dict[str, Any]:
        """Design-file mapping."""
        return {"kind": self.kind, "num": list(self.num), "den": list(self.den)}


# --------------------------------------------------------------------------- voltage-mode buck
@dataclass(frozen=True)
class BuckVoltageMode(Plant):
    """Voltage-mode buck in CCM: control voltage to output voltage.

    From the averaged switch model (Erickson & Maksimovic, *Fundamentals of
    Power Electronics*, 2nd ed., 2001, ch. 7-8): the switch node carries
    ``d·Vin``, so ``v̂/d̂ = Vin · Zo/(Zo + sL + R_L)`` with
    ``Zo = R || (R_C + 1/(sC))``; the PWM modulator adds ``d̂ = v̂c/Vramp``.
    Multiplying out, with ``R_L`` = DCR and ``R_C`` = ESR,

    ``Gvc(s) = G0 · (1 + s/ωz) / (1 + s/(Q·ω0) + s²/ω0²)``

    * ``G0 = (Vin/Vramp) · R/(R + R_L)``
    * ``ωz = 1/(R_C·C)`` (absent when ESR = 0)
    * ``ω0 = sqrt((R + R_L) / (L·C·(R + R_C)))``
    * ``1/(Q·ω0) = (L + C·(R·R_C + R·R_L + R_C·R_L)) / (R + R_L)``

    which reduce to ``ω0 = 1/sqrt(LC)``, ``Q = R·sqrt(C/L)`` for lossless parts.

    Parameters
    ----------
    vin_v : float
        Input voltage, V (> 0).
    l_h : float
        Inductance, H (> 0).
    c_f : float
        Output capacitance, F (> 0).
    load_ohm : float
        Load resistance R, Ω (> 0).
    ramp_v : float
        PWM ramp peak-to-peak amplitude, V (> 0); modulator gain 1/Vramp.
    esr_ohm : float
        Capacitor ESR, Ω (>= 0).
    dcr_ohm : float
        Inductor DC resistance, Ω (>= 0).
    """

    kind: ClassVar[str] = "buck_vm"

    vin_v: float
    l_h: float
    c_f: float
    load_ohm: float
    ramp_v: float
    esr_ohm: float = 0.0
    dcr_ohm: float = 0.0

    def __post_init__(self) -> None:
        _in(VOLTAGE, "vin_v", self.vin_v)
        _in(INDUCTANCE, "l_h", self.l_h)
        _in(CAPACITANCE, "c_f", self.c_f)
        _in(RESISTANCE, "load_ohm", self.load_ohm)
        _in(RAMP, "ramp_v", self.ramp_v)
        _in(PARASITIC, "esr_ohm", self.esr_ohm)
        _in(PARASITIC, "dcr_ohm", self.dcr_ohm)

    @property
    def dc_gain(self) -> float:
        """G0 = (Vin/Vramp)·R/(R + DCR), V/V."""
        r = self.load_ohm
        return self.vin_v / self.ramp_v * r / (r + self.dcr_ohm)

    @property
    def omega0_rad_s(self) -> float:
        """Natural frequency ω0 of the output filter, rad/s."""
        r, rl, rc = self.load_ohm, self.dcr_ohm, self.esr_ohm
        return math.sqrt((r + rl) / (self.l_h * self.c_f * (r + rc)))

    @property
    def q(self) -> float:
        """Quality factor Q of the output filter pole pair."""
        r, rl, rc, c = self.load_ohm, self.dcr_ohm, self.esr_ohm, self.c_f
        a1 = (self.l_h + c * (r * rc + r * rl + rc * rl)) / (r + rl)
        return 1.0 / (self.omega0_rad_s * a1)

    def factored(self) -> FactoredNumeric:
        """Gvc(s) in normalized factored form (corners in rad/s)."""
        fs = []
        if self.esr_ohm > 0:
            fs.append(Factor("zero", 1, 1.0 / (self.esr_ohm * self.c_f)))
        fs.append(Factor("pole", 2, self.omega0_rad_s, q=self.q))
        return FactoredNumeric(self.dc_gain, 0, tuple(fs))

    def describe(self) -> str:
        """Return the formulas used and their numbers, as plain text."""
        lines = [
            "Voltage-mode buck, CCM, control voltage to output voltage (averaged switch model):",
            "  Gvc(s) = (Vin/Vramp) * Zo/(Zo + s*L + DCR),  Zo = R || (ESR + 1/(s*C))",
            "         = G0 * (1 + s/wz) / (1 + s/(Q*w0) + s^2/w0^2)",
            f"  Vin = {format_value(self.vin_v, 'V')}, Vramp = {format_value(self.ramp_v, 'V')}, "
            f"L = {format_value(self.l_h, 'H')}, C = {format_value(self.c_f, 'F')}, "
            f"R = {format_value(self.load_ohm, 'Ω')}, ESR = {format_value(self.esr_ohm, 'Ω')}, "
            f"DCR = {format_value(self.dcr_ohm, 'Ω')}",
            f"  G0 = (Vin/Vramp) * R/(R + DCR) = {self.dc_gain:.6g} V/V ({_db(self.dc_gain)})",
            "  f0 = sqrt((R + DCR)/(L*C*(R + ESR))) / (2 pi) = "
            f"{format_value(self.omega0_rad_s / _TWO_PI, 'Hz')}",
            f"  Q = (R + DCR) / (w0 * (L + C*(R*ESR + R*DCR + ESR*DCR))) = {self.q:.4g}",
        ]
        if self.esr_ohm > 0:
            lines.append(
                f"  fz = 1/(2 pi ESR C) = {_hz(1.0 / (_TWO_PI * self.esr_ohm * self.c_f))}"
            )
        else:
            lines.append("  no ESR zero (ESR = 0)")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """Design-file mapping (SI base units)."""
        return {
            "kind": self.kind,
            "vin_v": self.vin_v,
            "l_h": self.l_h,
            "c_f": self.c_f,
            "esr_ohm": self.esr_ohm,
            "load_ohm": self.load_ohm,
            "ramp_v": self.ramp_v,
            "dcr_ohm": self.dcr_ohm,
        }


# --------------------------------------------------------------------------- peak current mode buck
@dataclass(frozen=True)
class PeakCurrentBuck(Plant):
    """Peak-current-mode buck, simplified control-to-output model.

    The current loop makes the inductor a current source ``v̂c/Ri`` feeding
    ``Zo = R || (R_C + 1/(sC))``:

    ``Gvc(s) = (R/Ri) · (1 + s·R_C·C) / (1 + s·(R + R_C)·C) · Fh(s)``

    * DC gain ``R/Ri``;
    * dominant pole ``1/(2π·(R + R_C)·C)``, i.e. the usual ``1/(2π·R·C)`` when
      ESR << R. This is an approximation: the full model (Ridley, "A new,
      continuous-time model for current-mode control", IEEE Trans. Power
      Electronics, 1991) moves the pole up by ``Ts·(mc·D' − 0.5)/(L·C)`` and
      lowers the DC gain by ``1/(1 + R·Ts·(mc·D' − 0.5)/L)``; both are left out;
    * ESR zero ``1/(2π·R_C·C)``;
    * ``Fh(s) = 1/(1 + s/(Qp·ωn) + s²/ωn²)`` only when ``f_sw_hz`` is given:
      the sampling double pole at half the switching frequency,
      ``ωn = π·fs``, ``Qp = 1/(π·(mc·D' − 0.5))`` (Ridley 1991), with
      ``D' = 1 − D`` and ``mc = 1 + Se/Sn`` (external ramp slope over the
      on-time sensed-current slope).

    Parameters
    ----------
    load_ohm : float
        Load resistance R, Ω (> 0).
    c_f : float
        Output capacitance, F (> 0).
    ri_ohm : float
        Current-sense gain Ri, V/A (= Ω, > 0).
    esr_ohm : float
        Capacitor ESR, Ω (>= 0).
    f_sw_hz : float or None
        Switching frequency, Hz; None leaves out the fs/2 double pole.
    duty : float or None
        Duty cycle D in (0, 1); required with ``f_sw_hz``.
    mc : float
        Slope-compensation factor ``1 + Se/Sn`` (>= 1; 1 = no external ramp).
        Needs ``mc·(1 − D) > 0.5`` (no subharmonic oscillation).
    """

    kind: ClassVar[str] = "peak_current"

    load_ohm: float
    c_f: float
    ri_ohm: float
    esr_ohm: float = 0.0
    f_sw_hz: float | None = None
    duty: float | None = None
    mc: float = 1.0

    def __post_init__(self) -> None:
        _in(RESISTANCE, "load_ohm", self.load_ohm)
        _in(CAPACITANCE, "c_f", self.c_f)
        _in(SENSE_GAIN, "ri_ohm", self.ri_ohm)
        _in(PARASITIC, "esr_ohm", self.esr_ohm)
        _in(MC_RANGE, "mc", self.mc, " = 1 + Se/Sn")
        if self.f_sw_hz is None:
            if self.duty is not None:
                raise _FieldError(
                    "duty is used only with f_sw_hz (the fs/2 double pole); "
                    f"got duty={self.duty!r} "
                    "without f_sw_hz",
                    "duty",
                )
            if self.mc != 1.0:
                raise _FieldError(
                    "mc is used only with f_sw_hz (the fs/2 double pole); "
                    f"got mc={self.mc!r} without f_sw_hz",
                    "mc",
                )
            return
        _in(FREQUENCY, "f_sw_hz", self.f_sw_hz)
        if self.duty is None:
            raise _FieldError(
                "f_sw_hz needs duty (the duty cycle D) for the fs/2 double pole", "duty"
            )
        _in(DUTY, "duty", self.duty, " (duty cycle)")
        if self.mc * (1.0 - self.duty) <= 0.5:
            raise _FieldError(
                f"mc·(1 − D) = {self.mc!r}·(1 − {self.duty!r}) = {self.mc * (1.0 - self.duty):.4g} "
                "is not above 0.5: the current loop oscillates at fs/2 (subharmonic); "
                "raise mc (more slope "
                "compensation)",
                "mc",
            )

    @property
    def dominant_pole_hz(self) -> float:
        """Dominant pole 1/(2π·(R + ESR)·C), Hz."""
        return 1.0 / (_TWO_PI * (self.load_ohm + self.esr_ohm) * self.c_f)

    @property
    def sampling_q(self) -> float | None:
        """Qp = 1/(π·(mc·D' − 0.5)) of the fs/2 double pole, or None without ``f_sw_hz``."""
        if self.f_sw_hz is None or self.duty is None:
            return None
        return 1.0 / (math.pi * (self.mc * (1.0 - self.duty) - 0.5))

    def factored(self) -> FactoredNumeric:
        """Gvc(s) in normalized factored form (corners in rad/s)."""
        fs = [Factor("pole", 1, _TWO_PI * self.dominant_pole_hz)]
        if self.esr_ohm > 0:
            fs.append(Factor("zero", 1, 1.0 / (self.esr_ohm * self.c_f)))
        qp = self.sampling_q
        if qp is not None:
            assert self.f_sw_hz is not None
            fs.append(Factor("pole", 2, math.pi * self.f_sw_hz, q=qp))
        return FactoredNumeric(self.load_ohm / self.ri_ohm, 0, tuple(fs))

    def describe(self) -> str:
        """Return the formulas used and their numbers, as plain text."""
        lines = [
            "Peak-current-mode buck, simplified control-to-output model "
            "(inductor as current source):",
            "  Gvc(s) = (R/Ri) * (1 + s*ESR*C) / (1 + s*(R + ESR)*C) * Fh(s)",
            f"  R = {format_value(self.load_ohm, 'Ω')}, C = {format_value(self.c_f, 'F')}, "
            f"ESR = {format_value(self.esr_ohm, 'Ω')}, Ri = {self.ri_ohm:.4g} V/A",
            f"  DC gain R/Ri = {self.load_ohm / self.ri_ohm:.6g} V/V "
            f"({_db(self.load_ohm / self.ri_ohm)})",
            f"  dominant pole 1/(2 pi (R + ESR) C) = {format_value(self.dominant_pole_hz, 'Hz')} "
            "(approximation: the current-loop correction Ts*(mc*D' - 0.5)/(L*C) is left out)",
        ]
        if self.esr_ohm > 0:
            lines.append(
                f"  ESR zero 1/(2 pi ESR C) = {_hz(1.0 / (_TWO_PI * self.esr_ohm * self.c_f))}"
            )
        qp = self.sampling_q
        if qp is None:
            lines.append(
                "  Fh(s) = 1 (no f_sw_hz given: the fs/2 sampling double pole is left out)"
            )
        else:
            assert self.f_sw_hz is not None and self.duty is not None
            lines += [
                "  Fh(s) = 1/(1 + s/(Qp*wn) + s^2/wn^2), wn = pi*fs, Qp = 1/(pi*(mc*D' - 0.5))",
                f"  fs = {format_value(self.f_sw_hz, 'Hz')}, D = {self.duty:.4g}, "
                f"mc = {self.mc:.4g}: "
                f"double pole at {format_value(self.f_sw_hz / 2.0, 'Hz')}, Qp = {qp:.4g}",
            ]
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """Design-file mapping (SI base units)."""
        out: dict[str, Any] = {
            "kind": self.kind,
            "load_ohm": self.load_ohm,
            "c_f": self.c_f,
            "esr_ohm": self.esr_ohm,
            "ri_ohm": self.ri_ohm,
        }
        if self.f_sw_hz is not None:
            out["f_sw_hz"] = self.f_sw_hz
            out["duty"] = self.duty
            out["mc"] = self.mc
        return out


# --------------------------------------------------------------------------- voltage-mode boost
@dataclass(frozen=True)
class BoostVoltageMode(Plant):
    """Voltage-mode boost in CCM: control voltage to output voltage.

    From the averaged switch model (Erickson & Maksimovic, *Fundamentals of
    Power Electronics*, 2nd ed., 2001, ch. 7-8), ideal switches, lossless
    conversion ratio ``V = Vin/D'`` (``D' = 1 − D``), inductor current
    ``I = V/(D'·R)``. Linearizing ``sL·î = −D'·v̂ + V·d̂`` and
    ``D'·î − I·d̂ = v̂/Zo`` with ``Zo = R || (R_C + 1/(sC))`` gives

    ``Gvc(s) = G0 · (1 + s/ωesr)(1 − s/ωz) / (1 + s/(Q·ω0) + s²/ω0²)``

    * ``G0 = V/(D'·Vramp) = Vin/(D'²·Vramp)``
    * ``ωz = D'²·R/L`` (right-half-plane zero; unaffected by ESR)
    * ``ωesr = 1/(R_C·C)`` (absent when ESR = 0)
    * ``ω0 = D'·sqrt(R/(L·C·(R + R_C)))``
    * ``1/(Q·ω0) = L/(D'²·R) + R_C·C``

    which for ESR = 0 are the textbook ``ω0 = D'/sqrt(LC)``,
    ``Q = D'·R·sqrt(C/L)`` (Erickson & Maksimovic 2001, table 8.2).

    Parameters
    ----------
    vin_v : float
        Input voltage, V (> 0).
    duty : float
        Duty cycle D in (0, 1).
    l_h : float
        Inductance, H (> 0).
    c_f : float
        Output capacitance, F (> 0).
    load_ohm : float
        Load resistance R, Ω (> 0).
    ramp_v : float
        PWM ramp peak-to-peak amplitude, V (> 0); modulator gain 1/Vramp.
    esr_ohm : float
        Capacitor ESR, Ω (>= 0).
    """

    kind: ClassVar[str] = "boost_vm"

    vin_v: float
    duty: float
    l_h: float
    c_f: float
    load_ohm: float
    ramp_v: float
    esr_ohm: float = 0.0

    def __post_init__(self) -> None:
        _in(VOLTAGE, "vin_v", self.vin_v)
        _in(DUTY, "duty", self.duty, " (duty cycle)")
        _in(INDUCTANCE, "l_h", self.l_h)
        _in(CAPACITANCE, "c_f", self.c_f)
        _in(RESISTANCE, "load_ohm", self.load_ohm)
        _in(RAMP, "ramp_v", self.ramp_v)
        _in(PARASITIC, "esr_ohm", self.esr_ohm)

    @property
    def d_prime(self) -> float:
        """D' = 1 − D."""
        return 1.0 - self.duty

    @property
    def vout_v(self) -> float:
        """Output voltage Vin/D' of the lossless converter, V."""
        return self.vin_v / self.d_prime

    @property
    def dc_gain(self) -> float:
        """G0 = Vin/(D'²·Vramp), V/V."""
        return self.vin_v / (self.d_prime**2 * self.ramp_v)

    @property
    def rhp_zero_hz(self) -> float:
        """Right-half-plane zero D'²·R/(2π·L), Hz."""
        return self.d_prime**2 * self.load_ohm / (_TWO_PI * self.l_h)

    @property
    def omega0_rad_s(self) -> float:
        """Natural frequency ω0 of the pole pair, rad/s."""
        r = self.load_ohm
        return self.d_prime * math.sqrt(r / (self.l_h * self.c_f * (r + self.esr_ohm)))

    @property
    def q(self) -> float:
        """Quality factor Q of the pole pair."""
        a1 = self.l_h / (self.d_prime**2 * self.load_ohm) + self.esr_ohm * self.c_f
        return 1.0 / (self.omega0_rad_s * a1)

    def factored(self) -> FactoredNumeric:
        """Gvc(s) in normalized factored form (corners in rad/s)."""
        fs = [Factor("zero", 1, _TWO_PI * self.rhp_zero_hz, rhp=True)]
        if self.esr_ohm > 0:
            fs.append(Factor("zero", 1, 1.0 / (self.esr_ohm * self.c_f)))
        fs.append(Factor("pole", 2, self.omega0_rad_s, q=self.q))
        return FactoredNumeric(self.dc_gain, 0, tuple(fs))

    def describe(self) -> str:
        """Return the formulas used and their numbers, as plain text."""
        lines = [
            "Voltage-mode boost, CCM, control voltage to output voltage (averaged switch model):",
            "  Gvc(s) = G0 * (1 + s/wesr) * (1 - s/wz) / (1 + s/(Q*w0) + s^2/w0^2)",
            f"  Vin = {format_value(self.vin_v, 'V')}, D = {self.duty:.4g} (Vout = Vin/D' = "
            f"{format_value(self.vout_v, 'V')}), Vramp = {format_value(self.ramp_v, 'V')}, "
            f"L = {format_value(self.l_h, 'H')}, C = {format_value(self.c_f, 'F')}, "
            f"R = {format_value(self.load_ohm, 'Ω')}, ESR = {format_value(self.esr_ohm, 'Ω')}",
            f"  G0 = Vin/(D'^2 * Vramp) = {self.dc_gain:.6g} V/V ({_db(self.dc_gain)})",
            f"  RHP zero fz = D'^2 * R / (2 pi L) = {format_value(self.rhp_zero_hz, 'Hz')}",
            "  f0 = D' * sqrt(R/(L*C*(R + ESR))) / (2 pi) = "
            f"{format_value(self.omega0_rad_s / _TWO_PI, 'Hz')}",
            f"  Q = 1/(w0 * (L/(D'^2 * R) + ESR*C)) = {self.q:.4g}",
        ]
        if self.esr_ohm > 0:
            lines.append(
                f"  fesr = 1/(2 pi ESR C) = {_hz(1.0 / (_TWO_PI * self.esr_ohm * self.c_f))}"
            )
        else:
            lines.append("  no ESR zero (ESR = 0)")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """Design-file mapping (SI base units; the operating point as ``duty``)."""
        return {
            "kind": self.kind,
            "vin_v": self.vin_v,
            "duty": self.duty,
            "l_h": self.l_h,
            "c_f": self.c_f,
            "esr_ohm": self.esr_ohm,
            "load_ohm": self.load_ohm,
            "ramp_v": self.ramp_v,
        }


# --------------------------------------------------------------------------- design-file reading
_PLANT_CLASSES: dict[str, type[Plant]] = {
    cls.kind: cls
    for cls in (GeneralPlant, PolynomialPlant, BuckVoltageMode, PeakCurrentBuck, BoostVoltageMode)
}

#: The design-file ``kind`` values, in documentation order.
PLANT_KINDS: tuple[str, ...] = tuple(_PLANT_CLASSES)

# Unit text a string value may carry, per unit family: (regex of the unit, parse_value kind).
_UNITS: dict[str, tuple[str, str | None]] = {
    "ohm": (r"(ohms|ohm|Ohms|Ohm|Ω|ω)", "resistor"),
    "F": (r"F", "capacitor"),
    "H": (r"H", "inductor"),
    "V": (r"V", None),
    "Hz": (r"Hz", None),
    "V/A": (r"(V/A|ohms|ohm|Ω)", None),
    "": (r"", None),
}


def _unit_of_key(key: str) -> str:
    for suffix, unit in (("_ohm", "ohm"), ("_f", "F"), ("_h", "H"), ("_v", "V"), ("_hz", "Hz")):
        if key.endswith(suffix):
            return unit
    return ""


def _read_number(value: Any, where: str, name: str, unit: str, *, signed: bool = False) -> float:
    """Read a number or engineering text; ``unit`` is a key of ``_UNITS`` (ranges are checked by the class)."""
    unit_re, kind = _UNITS.get(unit, ("", None))
    return read_number(value, where, name, unit=unit_re or None, kind=kind, signed=signed)


def _read_list(
    d: Mapping[str, Any], key: str, where: str, item: Callable[[Any, str], Any]
) -> tuple[Any, ...]:
    value = d[key]
    if isinstance(value, str) or not isinstance(value, Sequence):
        raise DesignFileError(f"{key} must be a list (got {type(value).__name__} {shown(value)})", where)
    limit = MAX_COEFFICIENTS if key in ("num", "den") else MAX_ORDER
    if len(value) > limit:
        raise DesignFileError(f"{key} has {len(value)} entries; the limit is {limit}", where)
    return tuple(item(v, f"{where}[{i}]") for i, v in enumerate(value))


def _check_keys(d: Mapping[str, Any], allowed: Sequence[str], key_path: str, what: str) -> None:
    for k in d:
        if k not in allowed:
            raise DesignFileError(
                f"unknown key {shown(k)} for {what} (expected one of {', '.join(allowed)})",
                f"{key_path}.{k}",
            )


def _construct(
    cls: type[Plant], kwargs: dict[str, Any], key_path: str, source: Mapping[str, str]
) -> Plant:
    try:
        return cls(**kwargs)
    except _FieldError as exc:
        head, sep, rest = exc.field.partition("[")
        head = source.get(head, head)
        raise DesignFileError(str(exc), f"{key_path}.{head}{sep}{rest}" if head else key_path) from exc


def _read_pair(value: Any, where: str) -> ResonantPair:
    if not isinstance(value, Mapping):
        raise DesignFileError(
            "a root pair must be a mapping with keys f0_hz and q "
            f"(got {type(value).__name__} {shown(value)})",
            where,
        )
    _check_keys(value, ("f0_hz", "q", "rhp"), where, "a root pair")
    for k in ("f0_hz", "q"):
        if k not in value:
            raise DesignFileError(f"missing key {k!r} (a root pair needs f0_hz and q)", where)
    rhp = value.get("rhp", False)
    if not isinstance(rhp, bool):
        raise DesignFileError(f"rhp must be true or false (got {shown(rhp)})", f"{where}.rhp")
    return ResonantPair(
        _read_number(value["f0_hz"], f"{where}.f0_hz", "f0_hz", "Hz"),
        _read_number(value["q"], f"{where}.q", "q", ""),
        rhp,
    )


_GENERAL_KEYS = (
    "kind",
    "gain",
    "origin_order",
    "zeros_hz",
    "poles_hz",
    "rhp_zeros_hz",
    "rhp_poles_hz",
    "zero_pairs",
    "pole_pairs",
)


def _general_from_dict(d: Mapping[str, Any], key_path: str) -> Plant:
    _check_keys(d, _GENERAL_KEYS, key_path, "kind 'general'")
    if "gain" not in d:
        raise DesignFileError("missing key 'gain' (K of the normalized factored form)", key_path)
    kwargs: dict[str, Any] = {
        "gain": _read_number(d["gain"], f"{key_path}.gain", "gain", "", signed=True)
    }
    if "origin_order" in d:
        n = d["origin_order"]
        if isinstance(n, bool) or not isinstance(n, int):
            raise DesignFileError(
                f"origin_order must be an integer (>0 zeros, <0 poles at the origin), got {shown(n)}",
                f"{key_path}.origin_order",
            )
        kwargs["origin_order"] = n
    for key in ("zeros_hz", "poles_hz", "rhp_zeros_hz", "rhp_poles_hz"):
        if key in d:
            kwargs[key] = _read_list(d, key, f"{key_path}.{key}", partial(_read_number, name=key, unit="Hz"))
    for key in ("zero_pairs", "pole_pairs"):
        if key in d:
            kwargs[key] = _read_list(d, key, f"{key_path}.{key}", _read_pair)
    return _construct(GeneralPlant, kwargs, key_path, {})


def _polynomial_from_dict(d: Mapping[str, Any], key_path: str) -> Plant:
    _check_keys(d, ("kind", "num", "den"), key_path, "kind 'polynomial'")
    kwargs: dict[str, Any] = {}
    for key in ("num", "den"):
        if key not in d:
            raise DesignFileError(
                f"missing key {key!r} (coefficients in descending powers of s, s in rad/s)",
                key_path,
            )
        kwargs[key] = _read_list(d, key, f"{key_path}.{key}", partial(_read_number, name=key, unit="", signed=True))
    return _construct(PolynomialPlant, kwargs, key_path, {})


# kind -> (required keys, optional keys)
_CIRCUIT_KEYS: dict[str, tuple[tuple[str, ...], tuple[str, ...]]] = {
    "buck_vm": (("vin_v", "l_h", "c_f", "load_ohm", "ramp_v"), ("esr_ohm", "dcr_ohm")),
    "peak_current": (("load_ohm", "c_f", "ri_ohm"), ("esr_ohm", "f_sw_hz", "duty", "mc")),
    "boost_vm": (("vin_v", "l_h", "c_f", "load_ohm", "ramp_v"), ("vout_v", "duty", "esr_ohm")),
}


def _circuit_from_dict(kind: str, d: Mapping[str, Any], key_path: str) -> Plant:
    required, optional = _CIRCUIT_KEYS[kind]
    _check_keys(d, ("kind", *required, *optional), key_path, f"kind {kind!r}")
    for key in required:
        if key not in d:
            raise DesignFileError(f"missing key {key!r} for kind {kind!r}", key_path)
    units = {"ri_ohm": "V/A", "duty": "", "mc": ""}
    kwargs: dict[str, Any] = {
        key: _read_number(d[key], f"{key_path}.{key}", key, units.get(key, _unit_of_key(key)))
        for key in (*required, *optional)
        if key in d
    }
    source: dict[str, str] = {}
    if kind == "boost_vm":
        has_vout, has_duty = "vout_v" in kwargs, "duty" in kwargs
        if has_vout == has_duty:
            raise DesignFileError(
                "kind 'boost_vm' needs exactly one of 'vout_v' (V) or 'duty' (D) "
                "for the operating point"
                + (f" (got vout_v={shown(d['vout_v'])} and duty={shown(d['duty'])})" if has_vout else ""),
                f"{key_path}.vout_v" if has_vout else key_path,
            )
        if has_vout:
            vout = kwargs.pop("vout_v")
            _construct(
                BoostVoltageMode, {**kwargs, "duty": 0.5}, key_path, {}
            )  # checks vin_v etc. first
            if not (VOLTAGE.contains(vout) and vout > kwargs["vin_v"]):
                raise DesignFileError(
                    f"vout_v must be above vin_v = {kwargs['vin_v']!r} V for a boost converter and lie in "
                    f"{VOLTAGE.text} (got {shown(d['vout_v'])})",
                    f"{key_path}.vout_v",
                )
            kwargs["duty"] = 1.0 - kwargs["vin_v"] / vout
            if not DUTY.contains(kwargs["duty"]):
                raise DesignFileError(
                    f"vout_v {shown(d['vout_v'])} with vin_v {kwargs['vin_v']!r} V needs a duty cycle "
                    f"D = 1 − vin/vout = {kwargs['duty']:.6g}, outside {DUTY.text}",
                    f"{key_path}.vout_v",
                )
            source["duty"] = "vout_v"
    return _construct(_PLANT_CLASSES[kind], kwargs, key_path, source)


def plant_from_dict(d: Mapping[str, Any], key_path: str = "plant") -> Plant:
    """Build a plant from a design-file mapping, dispatching on ``d["kind"]``.

    Parameters
    ----------
    d : Mapping
        ``kind`` is one of :data:`PLANT_KINDS`; the other keys are those of the
        matching class (frequencies in Hz; other values in SI base units).
        Values are numbers or engineering strings (``"22u"``, ``"400 kHz"``).

        * ``general``: ``gain`` (required, may be negative), ``origin_order``
          (int, default 0), ``zeros_hz``, ``poles_hz``, ``rhp_zeros_hz``,
          ``rhp_poles_hz`` (lists), ``zero_pairs``, ``pole_pairs`` (lists of
          ``{"f0_hz": f, "q": q}``, optionally ``"rhp": true``).
        * ``polynomial``: ``num``, ``den`` (descending powers of s, rad/s).
        * ``buck_vm``: ``vin_v``, ``l_h``, ``c_f``, ``load_ohm``, ``ramp_v``;
          optional ``esr_ohm``, ``dcr_ohm`` (default 0).
        * ``peak_current``: ``load_ohm``, ``c_f``, ``ri_ohm``; optional
          ``esr_ohm`` (default 0), ``f_sw_hz`` with ``duty`` and ``mc``
          (default 1).
        * ``boost_vm``: ``vin_v``, ``l_h``, ``c_f``, ``load_ohm``, ``ramp_v``,
          exactly one of ``vout_v`` or ``duty``; optional ``esr_ohm``.
    key_path : str
        Where ``d`` sits in the design file, for error messages.

    Returns
    -------
    Plant

    Raises
    ------
    DesignFileError
        An unknown kind (the message lists the kinds), unknown or missing
        keys, malformed or out-of-range values; ``key_path`` names the key.
    """
    if not isinstance(d, Mapping):
        raise DesignFileError(
            f"expected a mapping describing the plant, got {type(d).__name__} {shown(d)}", key_path
        )
    if "kind" not in d:
        raise DesignFileError(
            f"missing key 'kind' (expected one of {', '.join(PLANT_KINDS)})", key_path
        )
    kind = d["kind"]
    if not isinstance(kind, str) or kind not in _PLANT_CLASSES:
        raise DesignFileError(
            f"unknown plant kind {shown(kind)} (expected one of {', '.join(PLANT_KINDS)})",
            f"{key_path}.kind",
        )
    if kind == "general":
        return _general_from_dict(d, key_path)
    if kind == "polynomial":
        return _polynomial_from_dict(d, key_path)
    return _circuit_from_dict(kind, d, key_path)
