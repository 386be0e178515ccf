r"""Numeric op-amp models: ideal, single-pole and two-pole open-loop gain.

The open-loop gain of a non-ideal amplifier is

.. math::

    A(s) = \frac{A_0}{(1 + s/\omega_a)(1 + s/\omega_2)}, \qquad
    \omega_a = \frac{2\pi \cdot \mathrm{GBW}}{A_0}

with s in rad/s. Conventions:

* ``gbw_hz`` is the single-pole gain-bandwidth product ``A0 · fa`` (Hz), where
  ``fa`` is the dominant-pole frequency. It fixes the dominant pole for both
  the single-pole and the two-pole model. In the two-pole model the true
  unity-gain frequency ``fu`` (``|A(j·2π·fu)| = 1``) lies below ``gbw_hz``;
  :attr:`OpAmp.unity_gain_hz` returns it exactly.
* A two-pole amplifier may be given by its second pole or by the phase margin
  of the bare amplifier at its exact unity-gain frequency,
  ``PM = 180° + arg A(j·2π·fu)``. The second pole is then found by solving
  ``|A(j·2π·fu)| = 1`` and ``atan(fu/fa) + atan(fu/f2) = 180° − PM`` together
  numerically (see :func:`second_pole_for_phase_margin`); the usual
  approximation ``fu ≈ GBW`` is not used.

Accepted ranges (checked when an :class:`OpAmp` is built or read; far wider
than any real amplifier, narrow enough that every derived quantity stays a
finite float):

* ``a0``: above 1 and at most 1e12 V/V (``a0_db``: above 0 and at most 240 dB);
* ``gbw_hz``: 1 mHz … 1 THz; ``second_pole_hz``: 1 mHz … 1 PHz (a phase
  margin near the single-pole limit puts it far above the GBW);
* ``output_swing_v``: 1 mV … 100 kV peak;
* ``slew_rate_v_per_us``: 1e-6 … 1e6 V/µs.

These are small-signal models; power-converter designs involve hazardous
voltages and stored energy, so verify the loop gain on the bench and follow
local codes and licensed practice.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from numbers import Real
from typing import Any

import numpy as np

from .._numbers import Span, read_number, real_float, shown
from ..errors import AnalysisError, ComponentValueError, DesignFileError
from ..numeric.factors import Factor, FactoredNumeric
from .values import format_value

__all__ = ["OpAmp", "OPAMP_MODELS", "second_pole_for_phase_margin"]

#: The accepted values of :attr:`OpAmp.model`.
OPAMP_MODELS: tuple[str, ...] = ("ideal", "single_pole", "two_pole")

_TWO_PI = 2.0 * math.pi

_KEYS: tuple[str, ...] = (
    "model",
    "a0_db",
    "a0",
    "gbw_hz",
    "second_pole_hz",
    "phase_margin_deg",
    "output_swing_v",
    "slew_rate_v_per_us",
)

# Units that may follow a number in a design file, per key (regular expressions).
_UNIT_SUFFIX: dict[str, str] = {
    "gbw_hz": r"Hz",
    "second_pole_hz": r"Hz",
    "output_swing_v": r"V",
    "slew_rate_v_per_us": r"V\s*/\s*[uµμ]s",
    "a0_db": r"dB",
    "phase_margin_deg": r"deg|°",
}

#: Accepted ranges of the fields (see the module docstring).
A0_RANGE = Span(1.0, 1e12, "V/V")  # and above 1
A0_DB_RANGE = Span(0.0, 240.0, "dB")  # and above 0
FREQUENCY_RANGE = Span(1e-3, 1e12, "Hz")
SECOND_POLE_RANGE = Span(1e-3, 1e15, "Hz")
SWING_RANGE = Span(1e-3, 1e5, "V")
SLEW_RANGE = Span(1e-6, 1e6, "V/µs")


class _FieldError(ComponentValueError):
    """A field value out of range; ``field`` names the dataclass field."""

    def __init__(self, message: str, field: str) -> None:
        self.field = field
        super().__init__(message)


def _finite_positive(x: float) -> bool:
    return math.isfinite(x) and x > 0


def _in(span: Span, name: str, x: Any) -> None:
    if not span.contains(x):
        raise _FieldError(f"{name} must lie in {span.text} (got {shown(x)})", name)


@dataclass(frozen=True)
class OpAmp:
    """Open-loop model of an operational amplifier.

    Parameters
    ----------
    model : {"ideal", "single_pole", "two_pole"}
        Which gain model to use.
    a0 : float
        Open-loop DC gain, V/V (> 1, finite for the non-ideal models; ``inf``
        for ``"ideal"``).
    gbw_hz : float
        Gain-bandwidth product ``A0 · fa``, Hz (the single-pole definition;
        ``inf`` for ``"ideal"``).
    second_pole_hz : float or None
        Second (non-dominant) pole, Hz; required for ``"two_pole"``, at or
        above the dominant pole ``gbw_hz / a0``; None otherwise.
    output_swing_v : float or None
        Peak output swing, V (symmetric about the output's quiescent level).
    slew_rate_v_per_us : float or None
        Slew rate, V/µs.

    Raises
    ------
    ComponentValueError
        A parameter that does not fit the model (the message names it).
    """

    model: str = "ideal"
    a0: float = math.inf
    gbw_hz: float = math.inf
    second_pole_hz: float | None = None
    output_swing_v: float | None = None
    slew_rate_v_per_us: float | None = None

    def __post_init__(self) -> None:
        if self.model not in OPAMP_MODELS:
            raise _FieldError(
                f"op-amp model {shown(self.model)} is not known "
                f"(expected one of {', '.join(OPAMP_MODELS)})",
                "model",
            )
        if self.model == "ideal":
            if not (isinstance(self.a0, float) and self.a0 == math.inf):
                raise _FieldError(f"an ideal op-amp has a0 = inf (got {shown(self.a0)})", "a0")
            if not (isinstance(self.gbw_hz, float) and self.gbw_hz == math.inf):
                raise _FieldError(
                    f"an ideal op-amp has gbw_hz = inf (got {shown(self.gbw_hz)})", "gbw_hz"
                )
            if self.second_pole_hz is not None:
                raise _FieldError(
                    "an ideal op-amp has no second pole "
                    f"(got second_pole_hz={shown(self.second_pole_hz)})",
                    "second_pole_hz",
                )
        else:
            if not (A0_RANGE.contains(self.a0) and self.a0 > 1.0):
                raise _FieldError(
                    f"a0 must be a gain above 1 and at most {A0_RANGE.hi:g} V/V (got {shown(self.a0)})", "a0"
                )
            _in(FREQUENCY_RANGE, "gbw_hz", self.gbw_hz)
            if self.model == "single_pole":
                if self.second_pole_hz is not None:
                    raise _FieldError(
                        "a single-pole op-amp has no second pole "
                        f"(got second_pole_hz={shown(self.second_pole_hz)}); use model 'two_pole'",
                        "second_pole_hz",
                    )
            else:
                f2 = self.second_pole_hz
                if f2 is None or not SECOND_POLE_RANGE.contains(f2):
                    raise _FieldError(
                        f"a two-pole op-amp needs a second_pole_hz in {SECOND_POLE_RANGE.text} (got {shown(f2)})",
                        "second_pole_hz",
                    )
                fa = self.gbw_hz / self.a0
                if f2 < fa:
                    raise _FieldError(
                        f"second_pole_hz {f2!r} lies below the dominant pole gbw_hz/a0 = {fa!r} Hz "
                        "(expected second_pole_hz >= gbw_hz/a0)",
                        "second_pole_hz",
                    )
        if self.output_swing_v is not None:
            _in(SWING_RANGE, "output_swing_v", self.output_swing_v)
        if self.slew_rate_v_per_us is not None:
            _in(SLEW_RANGE, "slew_rate_v_per_us", self.slew_rate_v_per_us)

    # ------------------------------------------------------------------ file I/O
    @classmethod
    def from_dict(cls, d: Mapping[str, Any], key_path: str = "opamp") -> OpAmp:
        """Build an op-amp from a design-file mapping.

        Parameters
        ----------
        d : Mapping
            Keys: ``model`` (required: ``"ideal"``, ``"single_pole"`` or
            ``"two_pole"``); ``a0_db`` (dB) or ``a0`` (V/V), not both;
            ``gbw_hz`` (Hz); for ``"two_pole"`` either ``second_pole_hz`` (Hz)
            or ``phase_margin_deg`` (degrees, phase margin of the bare
            amplifier at its exact unity-gain frequency), not both; optional
            ``output_swing_v`` (peak, V) and ``slew_rate_v_per_us`` (V/µs).
            Values are numbers or engineering strings such as ``"10M"``,
            ``"10 MHz"``, ``"100 dB"``, ``"12 V"``, ``"5 V/us"``.
        key_path : str
            Where ``d`` sits in the design file, for error messages.

        Returns
        -------
        OpAmp

        Raises
        ------
        DesignFileError
            Unknown or inapplicable keys, missing keys, malformed or
            out-of-range values; ``key_path`` names the offending key.
        """
        if not isinstance(d, Mapping):
            raise DesignFileError(
                f"expected a mapping of op-amp parameters, got {type(d).__name__} {shown(d)}", key_path
            )
        for k in d:
            if k not in _KEYS:
                raise DesignFileError(
                    f"unknown key {shown(k)} (expected one of {', '.join(_KEYS)})", f"{key_path}.{k}"
                )
        if "model" not in d:
            raise DesignFileError(
                f"missing key 'model' (expected one of {', '.join(OPAMP_MODELS)})", key_path
            )
        model = d["model"]
        if not isinstance(model, str) or model not in OPAMP_MODELS:
            raise DesignFileError(
                f"op-amp model {shown(model)} is not known (expected one of {', '.join(OPAMP_MODELS)})",
                f"{key_path}.model",
            )

        def num(key: str) -> float:
            return read_number(d[key], f"{key_path}.{key}", key, unit=_UNIT_SUFFIX.get(key))

        source: dict[str, str] = {}  # dataclass field -> design-file key
        kwargs: dict[str, Any] = {"model": model}
        for key in ("output_swing_v", "slew_rate_v_per_us"):
            if key in d:
                kwargs[key] = num(key)
                source[key] = key

        if model == "ideal":
            for key in ("a0_db", "a0", "gbw_hz", "second_pole_hz", "phase_margin_deg"):
                if key in d:
                    raise DesignFileError(
                        f"key {key!r} does not apply to model 'ideal' (got {shown(d[key])}); "
                        "use model 'single_pole' or 'two_pole' for a finite gain",
                        f"{key_path}.{key}",
                    )
            return _build(kwargs, source, key_path)

        if "a0" in d and "a0_db" in d:
            raise DesignFileError(
                f"give a0 (V/V) or a0_db (dB), not both (got a0={shown(d['a0'])}, a0_db={shown(d['a0_db'])})",
                f"{key_path}.a0_db",
            )
        if "a0" in d:
            kwargs["a0"] = num("a0")
            source["a0"] = "a0"
        elif "a0_db" in d:
            a0_db = num("a0_db")
            if not (A0_DB_RANGE.contains(a0_db) and a0_db > 0):
                raise DesignFileError(
                    f"a0_db must be above 0 and at most {A0_DB_RANGE.hi:g} dB (got {shown(d['a0_db'])})",
                    f"{key_path}.a0_db",
                )
            kwargs["a0"] = 10.0 ** (a0_db / 20.0)
            source["a0"] = "a0_db"
        else:
            raise DesignFileError(f"model {shown(model)} needs 'a0' (V/V) or 'a0_db' (dB)", key_path)
        if "gbw_hz" not in d:
            raise DesignFileError(
                f"model {shown(model)} needs 'gbw_hz' (gain-bandwidth product A0·fa, Hz)", key_path
            )
        kwargs["gbw_hz"] = num("gbw_hz")
        source["gbw_hz"] = "gbw_hz"

        if model == "single_pole":
            for key in ("second_pole_hz", "phase_margin_deg"):
                if key in d:
                    raise DesignFileError(
                        f"key {key!r} does not apply to model 'single_pole' (got {shown(d[key])}); "
                        "use model 'two_pole'",
                        f"{key_path}.{key}",
                    )
            return _build(kwargs, source, key_path)

        # two_pole
        has_f2, has_pm = "second_pole_hz" in d, "phase_margin_deg" in d
        if has_f2 and has_pm:
            raise DesignFileError(
                "give second_pole_hz or phase_margin_deg, not both "
                f"(got second_pole_hz={shown(d['second_pole_hz'])}, "
                f"phase_margin_deg={shown(d['phase_margin_deg'])})",
                f"{key_path}.phase_margin_deg",
            )
        if has_f2:
            kwargs["second_pole_hz"] = num("second_pole_hz")
            source["second_pole_hz"] = "second_pole_hz"
        elif has_pm:
            pm = num("phase_margin_deg")
            # Check a0 and gbw first so their errors name their own keys.
            _build({**kwargs, "model": "single_pole"}, source, key_path)
            try:
                kwargs["second_pole_hz"] = second_pole_for_phase_margin(
                    kwargs["a0"], kwargs["gbw_hz"], pm
                )
            except AnalysisError as exc:
                raise DesignFileError(str(exc), f"{key_path}.phase_margin_deg") from exc
            f2 = kwargs["second_pole_hz"]
            if not SECOND_POLE_RANGE.contains(f2):
                raise DesignFileError(
                    f"phase_margin_deg {shown(d['phase_margin_deg'])} puts the second pole at {f2:.4g} Hz, outside "
                    f"{SECOND_POLE_RANGE.text}"
                    + ("; use model 'single_pole' for a margin this close to 90°" if f2 > 1.0 else ""),
                    f"{key_path}.phase_margin_deg",
                )
            source["second_pole_hz"] = "phase_margin_deg"
        else:
            raise DesignFileError(
                "model 'two_pole' needs 'second_pole_hz' (Hz) or 'phase_margin_deg' (degrees)",
                key_path,
            )
        return _build(kwargs, source, key_path)

    def to_dict(self) -> dict[str, Any]:
        """Return a design-file mapping that :meth:`from_dict` reads back to an equal object.

        Returns
        -------
        dict
            ``model``, and for the non-ideal models ``a0`` (V/V) and ``gbw_hz``
            (Hz), ``second_pole_hz`` (Hz) for ``"two_pole"``, and the optional
            ``output_swing_v`` (V) and ``slew_rate_v_per_us`` (V/µs) when set.
        """
        out: dict[str, Any] = {"model": self.model}
        if not self.is_ideal:
            out["a0"] = self.a0
            out["gbw_hz"] = self.gbw_hz
        if self.second_pole_hz is not None:
            out["second_pole_hz"] = self.second_pole_hz
        if self.output_swing_v is not None:
            out["output_swing_v"] = self.output_swing_v
        if self.slew_rate_v_per_us is not None:
            out["slew_rate_v_per_us"] = self.slew_rate_v_per_us
        return out

    # ------------------------------------------------------------------ small signal
    @property
    def is_ideal(self) -> bool:
        """True for the ideal amplifier (infinite gain and bandwidth)."""
        return self.model == "ideal"

    @property
    def dominant_pole_hz(self) -> float:
        """Dominant pole ``fa = gbw_hz / a0``, Hz (AnalysisError for the ideal model)."""
        self._require_finite("dominant_pole_hz")
        return self.gbw_hz / self.a0

    @property
    def unity_gain_hz(self) -> float:
        """Exact unity-gain frequency ``fu`` where ``|A(j·2π·fu)| = 1``, Hz.

        Single pole: ``fu = fa·sqrt(A0² − 1)``. Two poles: the positive root
        ``u = (fu)²`` of ``(1 + u/fa²)(1 + u/f2²) = A0²``, taken in a form free
        of cancellation. AnalysisError for the ideal model.
        """
        self._require_finite("unity_gain_hz")
        fa = self.gbw_hz / self.a0
        if self.second_pole_hz is None:
            return fa * math.sqrt((self.a0 - 1.0) * (self.a0 + 1.0))
        f2 = self.second_pole_hz
        # u²/(fa² f2²) + u (1/fa² + 1/f2²) − (A0² − 1) = 0, solved as
        # u = 2c / (b + sqrt(b² + 4 a c)) with a, b, c > 0 (no cancellation).
        a = 1.0 / (fa * fa * f2 * f2)
        b = 1.0 / (fa * fa) + 1.0 / (f2 * f2)
        c = (self.a0 - 1.0) * (self.a0 + 1.0)
        u = 2.0 * c / (b + math.sqrt(b * b + 4.0 * a * c))
        return math.sqrt(u)

    @property
    def phase_margin_deg(self) -> float:
        """Phase margin of the bare amplifier, ``180° + arg A(j·2π·fu)``, degrees."""
        fu = self.unity_gain_hz
        lag = math.atan(fu / self.dominant_pole_hz)
        if self.second_pole_hz is not None:
            lag += math.atan(fu / self.second_pole_hz)
        return 180.0 - math.degrees(lag)

    def factored(self) -> FactoredNumeric:
        """Open-loop gain A(s) in normalized factored form (corners in rad/s).

        Returns
        -------
        FactoredNumeric
            Gain ``A0`` and one (single-pole) or two (two-pole) real LHP poles.

        Raises
        ------
        AnalysisError
            For the ideal model, whose gain is infinite.
        """
        self._require_finite("factored()")
        poles = [Factor("pole", 1, _TWO_PI * self.dominant_pole_hz)]
        if self.second_pole_hz is not None:
            poles.append(Factor("pole", 1, _TWO_PI * self.second_pole_hz))
        return FactoredNumeric(float(self.a0), 0, tuple(poles))

    def gain(self, s: np.ndarray) -> np.ndarray:
        """Open-loop gain A(s) at complex frequencies ``s`` (rad/s).

        Parameters
        ----------
        s : array_like of complex
            Complex frequencies, rad/s.

        Returns
        -------
        numpy.ndarray of complex
            A(s), V/V; an array of ``inf`` (complex dtype) for the ideal model.
        """
        s = np.asarray(s, dtype=complex)
        if self.is_ideal:
            return np.full(s.shape, np.inf, dtype=complex)
        return self.factored().evaluate(s)

    # ------------------------------------------------------------------ large signal
    def large_signal_warnings(self, output_amplitude_v: float, f_hz: float) -> tuple[str, ...]:
        """Large-signal limits a sinusoidal output would hit.

        Parameters
        ----------
        output_amplitude_v : float
            Peak amplitude of the output sine, V (>= 0).
        f_hz : float
            Frequency of the sine, Hz (>= 0).

        Returns
        -------
        tuple of str
            One message per limit exceeded: the output swing, and the slew
            rate (a sine of peak ``Vpk`` at ``f`` needs ``2π·f·Vpk``; the
            message gives the full-power bandwidth ``SR/(2π·Vpk)``). Empty when
            no limit is known or none is exceeded.

        Raises
        ------
        AnalysisError
            A negative or non-finite amplitude or frequency.
        """
        if not (math.isfinite(output_amplitude_v) and output_amplitude_v >= 0):
            raise AnalysisError(
                "output_amplitude_v must be a finite peak amplitude >= 0 V "
                f"(got {output_amplitude_v!r})"
            )
        if not (math.isfinite(f_hz) and f_hz >= 0):
            raise AnalysisError(f"f_hz must be finite and >= 0 Hz (got {f_hz!r})")
        out: list[str] = []
        vpk = output_amplitude_v
        if self.output_swing_v is not None and vpk > self.output_swing_v:
            out.append(
                f"output swing exceeded: {format_value(vpk, 'V')} peak requested, "
                f"the amplifier swings {format_value(self.output_swing_v, 'V')} peak"
            )
        if self.slew_rate_v_per_us is not None and vpk > 0:
            sr_v_per_s = self.slew_rate_v_per_us * 1e6
            need_v_per_s = _TWO_PI * f_hz * vpk
            if need_v_per_s > sr_v_per_s:
                fpbw_hz = sr_v_per_s / (_TWO_PI * vpk)
                out.append(
                    f"slew-rate limited: a {format_value(vpk, 'V')} peak sine at "
                    f"{format_value(f_hz, 'Hz')} "
                    f"needs 2π·f·Vpk = {need_v_per_s / 1e6:.4g} V/µs, above the slew rate "
                    f"{self.slew_rate_v_per_us:.4g} V/µs; full-power bandwidth at this amplitude "
                    "is "
                    f"SR/(2π·Vpk) = {format_value(fpbw_hz, 'Hz')}"
                )
        return tuple(out)

    def _require_finite(self, what: str) -> None:
        if self.is_ideal:
            raise AnalysisError(
                f"{what} is undefined for the ideal op-amp (infinite gain); "
                "use model 'single_pole' or 'two_pole'"
            )


def second_pole_for_phase_margin(a0: float, gbw_hz: float, phase_margin_deg: float) -> float:
    """Second pole that gives a two-pole amplifier a given phase margin.

    Solves, for the second pole ``f2`` and the unity-gain frequency ``fu``,

    ``(1 + (fu/fa)²)(1 + (fu/f2)²) = A0²`` and
    ``atan(fu/fa) + atan(fu/f2) = 180° − PM``, with ``fa = gbw_hz/a0``.

    With ``α = atan(fa/fu)`` and ``β = atan(f2/fu) = PM − α`` the magnitude
    condition reads ``sin α · sin β = 1/A0``; its left side rises strictly
    with α on the dominant-pole branch ``max(0, PM − 90°) < α ≤ PM/2``
    (``f2 ≥ fa``), so α is found by bisection to full double precision and
    ``f2 = fa · tan β / tan α``.

    Parameters
    ----------
    a0 : float
        Open-loop DC gain, V/V (finite, > 1).
    gbw_hz : float
        Gain-bandwidth product ``A0·fa``, Hz.
    phase_margin_deg : float
        Phase margin of the bare amplifier at its unity-gain frequency, degrees.

    Returns
    -------
    float
        The second pole ``f2``, Hz (``>= gbw_hz/a0``).

    Raises
    ------
    AnalysisError
        Non-finite or out-of-range inputs, or a phase margin no two-pole
        amplifier with this A0 can have: at or above the single-pole value
        ``90° + asin(1/A0)``, or below ``2·asin(A0^(-1/2))`` (both poles at fa).
    """
    for name, x in (("a0", a0), ("gbw_hz", gbw_hz), ("phase_margin_deg", phase_margin_deg)):
        if isinstance(x, bool) or not isinstance(x, Real):
            raise AnalysisError(f"{name} must be a number (got {shown(x)})")
    a0, gbw_hz, phase_margin_deg = real_float(a0), real_float(gbw_hz), real_float(phase_margin_deg)
    if not (math.isfinite(a0) and a0 > 1.0):
        raise AnalysisError(f"a0 must be a finite gain > 1 V/V (got {a0!r})")
    if not _finite_positive(gbw_hz):
        raise AnalysisError(f"gbw_hz must be finite and > 0 Hz (got {gbw_hz!r})")
    if not math.isfinite(phase_margin_deg):
        raise AnalysisError(f"phase_margin_deg must be finite (got {phase_margin_deg!r})")
    pm = math.radians(phase_margin_deg)
    pm_max_deg = 90.0 + math.degrees(math.asin(1.0 / a0))
    pm_min_deg = 2.0 * math.degrees(math.asin(1.0 / math.sqrt(a0)))
    if not (pm_min_deg <= phase_margin_deg < pm_max_deg):
        raise AnalysisError(
            f"phase_margin_deg {phase_margin_deg!r} cannot be reached by a two-pole amplifier with "
            f"a0 = {a0:.6g} V/V (expected {pm_min_deg:.6g}° <= PM < {pm_max_deg:.6g}°: the upper "
            "limit is the single-pole amplifier, the lower one has both poles at gbw_hz/a0)"
        )
    target = 1.0 / a0

    def excess(alpha: float) -> float:
        # Rises with alpha on the branch; > 0 means alpha is too large.
        return math.sin(alpha) * math.sin(pm - alpha) - target

    lo = max(0.0, pm - 0.5 * math.pi)
    hi = 0.5 * pm
    if excess(hi) <= 0.0:  # at the lower PM limit (both poles at fa), up to rounding
        alpha = hi
    else:
        for _ in range(4000):
            mid = 0.5 * (lo + hi)
            if mid <= lo or mid >= hi:
                break
            if excess(mid) > 0.0:
                hi = mid
            else:
                lo = mid
        alpha = 0.5 * (lo + hi)
    beta = pm - alpha
    if not (0.0 < alpha and beta < 0.5 * math.pi):
        raise AnalysisError(
            f"phase_margin_deg {phase_margin_deg!r} with a0 = {a0!r} leads to no finite second pole"
        )
    fa = gbw_hz / a0
    return fa * math.tan(beta) / math.tan(alpha)


def _build(kwargs: dict[str, Any], source: dict[str, str], key_path: str) -> OpAmp:
    try:
        return OpAmp(**kwargs)
    except _FieldError as exc:
        key = source.get(exc.field, "")
        raise DesignFileError(str(exc), f"{key_path}.{key}" if key else key_path) from exc
