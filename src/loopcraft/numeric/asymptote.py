"""Straight-line (asymptotic) Bode magnitude and phase of a factored transfer function.

The input is a :class:`~loopcraft.numeric.factors.FactoredNumeric` (gain K, origin
order n, first- and second-order factors, all corners in rad/s). Frequencies
passed in and reported are in Hz; the factors are compared at ω = 2π·f.

Magnitude rules
---------------
* The constant and origin term contribute ``|K|·ω^n`` exactly
  (``20·log10|K| + 20·n·log10(ω)`` dB, ω in rad/s).
* A factor of order ``m`` with corner ``ωc`` contributes 1 below ``ωc`` and
  ``(ω/ωc)^m`` above it: ``±20·m`` dB/decade, ``+`` for zeros, ``-`` for poles.
  Right-half-plane zeros and poles bend the magnitude exactly like their
  left-half-plane mirror images.
* Low-Q second-order factors (``Q <= 0.5``, two real roots) are drawn as
  their two real roots, each a first-order corner at
  ``ω0·(ζ ∓ sqrt(ζ² - 1))``, ``ζ = 1/(2Q)``: the low-Q approximation of
  Erickson & Maksimovic, "Fundamentals of Power Electronics", 2nd ed., 2001,
  §8.1.7 uses corners near ``Q·ω0`` and ``ω0/Q``; the exact real roots are used
  here. At ``Q = 0.5`` both roots equal ω0, so the drawing is continuous in Q.

Phase rules
-----------
* Real LHP zero: 0° below ``ωc/10``, +90° above ``10·ωc``, linear in
  log-frequency between (45° at the corner): the decade rule of common
  practice (Ogata, "Modern Control Engineering", 5th ed., 2010; Erickson &
  Maksimovic 2001, ch. 8). A real RHP zero goes 0° → -90°; an LHP pole
  0° → -90°; an RHP pole 0° → +90°.
* Second-order factor with ``Q > 0.5``: 0° below ``f0·10^(-1/(2Q))``,
  ±180° above ``f0·10^(1/(2Q))``, linear in log-frequency between (±90° at
  f0); Erickson & Maksimovic 2001, §8.1.6. The sign follows the first-order
  rule (LHP zero +, RHP zero -, LHP pole -, RHP pole +). At ``Q = 0.5`` this
  is the same ramp as two coincident real roots with the decade rule.
* Second-order factor with ``Q <= 0.5``: the decade rule of each of its two
  real roots.
* Origin order n contributes ``n·90°``.
* A negative K contributes +180° when ``n <= 0`` and -180° when ``n > 0``, so
  that the low-frequency phase ``n·90° ± 180°`` is the one nearest 0° (an
  inverting integrator reads +90°, an inverting differentiator -90°).
  :func:`exact_phase_deg` uses the same constant, so the asymptote and the
  exact phase agree at low frequency.

All phases are continuous (not wrapped to ±180°).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from ..errors import AnalysisError
from .factors import Factor, FactoredNumeric

__all__ = [
    "AsymptoteError",
    "asymptote_mag_db",
    "asymptote_phase_deg",
    "asymptote_error",
    "exact_mag_db",
    "exact_phase_deg",
]

_LOG10_2PI = math.log10(2.0 * math.pi)


@dataclass(frozen=True)
class AsymptoteError:
    """Worst deviation of the exact response from the straight-line drawing.

    Parameters
    ----------
    max_mag_error_db : float
        Largest ``|exact - asymptote|`` of the magnitude over the grid, dB.
    f_mag_hz : float
        Frequency of that largest magnitude deviation, Hz.
    max_phase_error_deg : float
        Largest ``|exact - asymptote|`` of the phase over the grid, degrees.
    f_phase_hz : float
        Frequency of that largest phase deviation, Hz.
    """

    max_mag_error_db: float
    f_mag_hz: float
    max_phase_error_deg: float
    f_phase_hz: float


# --------------------------------------------------------------------------- helpers


def _check_fn(fn: FactoredNumeric) -> None:
    if not isinstance(fn, FactoredNumeric):
        raise AnalysisError(f"fn must be a FactoredNumeric (got {type(fn).__name__!r})")
    if not (math.isfinite(fn.gain) and fn.gain != 0.0):
        raise AnalysisError(
            f"gain K must be finite and non-zero to draw a Bode plot (got {fn.gain!r})"
        )


def _log10_omega(f_hz: np.ndarray) -> np.ndarray:
    """Validate ``f_hz`` (Hz) and return log10 of ω = 2π·f (rad/s)."""
    f = np.asarray(f_hz, dtype=float)
    bad = ~(np.isfinite(f) & (f > 0))
    if np.any(bad):
        idx = np.unravel_index(int(np.argmax(bad)), f.shape) if f.ndim else ()
        raise AnalysisError(
            f"f_hz must hold finite frequencies > 0 Hz (got {f[idx]!r} at index {idx!r})"
        )
    return np.log10(f) + _LOG10_2PI


def _sign(factor: Factor) -> float:
    """+1 for a LHP zero or RHP pole (phase lead), -1 for a RHP zero or LHP pole."""
    lead = (factor.role == "zero") != factor.rhp
    return 1.0 if lead else -1.0


def _split_low_q(factor: Factor) -> tuple[float, float]:
    """Return the two real root magnitudes (rad/s) of a second-order factor with Q <= 0.5."""
    assert factor.q is not None
    zeta = 1.0 / (2.0 * factor.q)
    d = math.sqrt(max(zeta * zeta - 1.0, 0.0))
    big = factor.omega_rad_s * (zeta + d)
    small = factor.omega_rad_s**2 / big  # no cancellation
    return small, big


def _magnitude_breaks(fn: FactoredNumeric) -> list[tuple[float, float]]:
    """Magnitude breakpoints as ``(log10 ω_corner [ω in rad/s], slope change dB/decade)``."""
    breaks: list[tuple[float, float]] = []
    for f in fn.factors:
        direction = 1.0 if f.role == "zero" else -1.0
        if f.order == 2 and f.q is not None and f.q <= 0.5:
            for w in _split_low_q(f):
                breaks.append((math.log10(w), 20.0 * direction))
        else:
            breaks.append((math.log10(f.omega_rad_s), 20.0 * f.order * direction))
    return breaks


def _phase_ramps(fn: FactoredNumeric) -> list[tuple[float, float, float]]:
    """Phase ramps as ``(log10 ω_centre [rad/s], half-width in decades, total step deg)``."""
    ramps: list[tuple[float, float, float]] = []
    for f in fn.factors:
        sign = _sign(f)
        if f.order == 1:
            ramps.append((math.log10(f.omega_rad_s), 1.0, 90.0 * sign))
        else:
            assert f.q is not None
            if f.q <= 0.5:
                for w in _split_low_q(f):
                    ramps.append((math.log10(w), 1.0, 90.0 * sign))
            else:
                ramps.append((math.log10(f.omega_rad_s), 1.0 / (2.0 * f.q), 180.0 * sign))
    return ramps


def _gain_phase_offset_deg(fn: FactoredNumeric) -> float:
    """Phase of the constant and origin term, degrees (see the module docstring)."""
    offset = 90.0 * fn.origin_order
    if fn.gain < 0:
        offset += -180.0 if fn.origin_order > 0 else 180.0
    return offset


# --------------------------------------------------------------------------- public API


def asymptote_mag_db(fn: FactoredNumeric, f_hz: np.ndarray) -> np.ndarray:
    """Straight-line magnitude of ``fn`` in dB.

    Parameters
    ----------
    fn : FactoredNumeric
        The transfer function (corners in rad/s).
    f_hz : array_like of float
        Frequencies in Hz, finite and > 0; any shape.

    Returns
    -------
    numpy.ndarray
        Asymptotic magnitude in dB, same shape as ``f_hz``.

    Raises
    ------
    AnalysisError
        For a zero or non-finite gain or a frequency that is not finite and > 0.
    """
    _check_fn(fn)
    return _asymptote_mag_db_u(fn, _log10_omega(f_hz))


def _asymptote_mag_db_u(fn: FactoredNumeric, u: np.ndarray) -> np.ndarray:
    """As :func:`asymptote_mag_db`, at ``u = log10(ω)`` (ω = 2π·f in rad/s) already validated."""
    out = 20.0 * math.log10(abs(fn.gain)) + 20.0 * fn.origin_order * u
    for u_c, d_slope in _magnitude_breaks(fn):
        out = out + d_slope * np.maximum(u - u_c, 0.0)
    return np.asarray(out, dtype=float)


def asymptote_phase_deg(fn: FactoredNumeric, f_hz: np.ndarray) -> np.ndarray:
    """Straight-line phase of ``fn`` in degrees (continuous, not wrapped).

    Parameters
    ----------
    fn : FactoredNumeric
        The transfer function (corners in rad/s).
    f_hz : array_like of float
        Frequencies in Hz, finite and > 0; any shape.

    Returns
    -------
    numpy.ndarray
        Asymptotic phase in degrees, same shape as ``f_hz``.

    Raises
    ------
    AnalysisError
        For a zero or non-finite gain or a frequency that is not finite and > 0.
    """
    _check_fn(fn)
    return _asymptote_phase_deg_u(fn, _log10_omega(f_hz))


def _asymptote_phase_deg_u(fn: FactoredNumeric, u: np.ndarray) -> np.ndarray:
    """As :func:`asymptote_phase_deg`, at ``u = log10(ω)`` (ω = 2π·f in rad/s) already validated."""
    out = np.full(u.shape, _gain_phase_offset_deg(fn))
    for u_c, half_width, step in _phase_ramps(fn):
        if half_width > 0.0:
            frac = np.clip(0.5 + (u - u_c) / (2.0 * half_width), 0.0, 1.0)
        else:  # a pair on the jω axis (Q = ∞): the phase steps at ω0, half-way on it
            frac = np.where(u > u_c, 1.0, np.where(u < u_c, 0.0, 0.5))
        out = out + step * frac
    return out


def exact_mag_db(fn: FactoredNumeric, f_hz: np.ndarray) -> np.ndarray:
    """Exact magnitude of ``fn`` at s = j·2π·f in dB, summed factor by factor.

    Summing the factors' dB values avoids the overflow and underflow of the
    product form for loops with many factors.

    Parameters
    ----------
    fn : FactoredNumeric
        The transfer function (corners in rad/s).
    f_hz : array_like of float
        Frequencies in Hz, finite and > 0; any shape.

    Returns
    -------
    numpy.ndarray
        ``20·log10|H(j·2π·f)|`` in dB, same shape as ``f_hz``.

    Raises
    ------
    AnalysisError
        For a zero or non-finite gain or a frequency that is not finite and > 0.
    """
    _check_fn(fn)
    return _exact_mag_db_u(fn, _log10_omega(f_hz))


def _exact_mag_db_u(fn: FactoredNumeric, u: np.ndarray) -> np.ndarray:
    """As :func:`exact_mag_db`, at ``u = log10(ω)`` (ω = 2π·f in rad/s) already validated."""
    omega = 10.0**u
    out = 20.0 * math.log10(abs(fn.gain)) + 20.0 * fn.origin_order * u
    # Multiply squared factor magnitudes and take one logarithm per group of factors:
    # fewer transcendental calls, while a group of four stays far from overflow.
    acc = None
    for i, f in enumerate(fn.factors):
        x = omega / f.omega_rad_s
        if f.order == 1:
            sq = 1.0 + x * x
        else:
            assert f.q is not None
            y = 1.0 - x * x
            z = x / f.q
            sq = y * y + z * z
            if not math.isfinite(f.q):  # a pair on the jω axis: |H| is 0 (or ∞) exactly at ω0
                sq = np.maximum(sq, 1e-300)
        if f.role == "pole":
            sq = 1.0 / sq
        acc = sq if acc is None else acc * sq
        if i % 4 == 3:
            out = out + 10.0 * np.log10(acc)
            acc = None
    if acc is not None:
        out = out + 10.0 * np.log10(acc)
    return np.asarray(out, dtype=float)


def exact_phase_deg(fn: FactoredNumeric, f_hz: np.ndarray) -> np.ndarray:
    """Exact, continuous phase of ``fn`` at s = j·2π·f in degrees.

    The phase is the analytic sum of the factor phases (each first-order
    factor within ±90°, each second-order factor within ±180°), plus
    ``n·90°`` for the origin order and ±180° for a negative K (sign chosen as
    in the module docstring). It is not wrapped to (-180°, 180°]; it differs
    from ``np.angle`` of the response by a multiple of 360°.

    Parameters
    ----------
    fn : FactoredNumeric
        The transfer function (corners in rad/s).
    f_hz : array_like of float
        Frequencies in Hz, finite and > 0; any shape.

    Returns
    -------
    numpy.ndarray
        Phase in degrees, same shape as ``f_hz``.

    Raises
    ------
    AnalysisError
        For a zero or non-finite gain or a frequency that is not finite and > 0.
    """
    _check_fn(fn)
    return _exact_phase_deg_u(fn, _log10_omega(f_hz))


def _exact_phase_deg_u(fn: FactoredNumeric, u: np.ndarray) -> np.ndarray:
    """As :func:`exact_phase_deg`, at ``u = log10(ω)`` (ω = 2π·f in rad/s) already validated."""
    omega = 10.0**u
    out = np.full(u.shape, _gain_phase_offset_deg(fn))
    for f in fn.factors:
        x = omega / f.omega_rad_s
        if f.order == 1:
            ph = np.degrees(np.arctan(x))
        else:
            assert f.q is not None
            ph = np.degrees(np.arctan2(x / f.q, 1.0 - x * x))
        out = out + _sign(f) * ph
    return out


def asymptote_error(fn: FactoredNumeric, f_hz: np.ndarray) -> AsymptoteError:
    """Worst deviation of the exact response from the straight lines over a grid.

    Parameters
    ----------
    fn : FactoredNumeric
        The transfer function (corners in rad/s).
    f_hz : array_like of float
        Frequencies in Hz, finite and > 0, at least one.

    Returns
    -------
    AsymptoteError
        The largest magnitude (dB) and phase (degrees) deviations and the
        frequencies (Hz) where they occur (the first such grid point on ties).

    Raises
    ------
    AnalysisError
        For an empty grid, a zero or non-finite gain, or a frequency that is
        not finite and > 0.
    """
    f = np.asarray(f_hz, dtype=float).ravel()
    if f.size == 0:
        raise AnalysisError("f_hz must hold at least one frequency (got an empty array)")
    mag_err = np.abs(exact_mag_db(fn, f) - asymptote_mag_db(fn, f))
    ph_err = np.abs(exact_phase_deg(fn, f) - asymptote_phase_deg(fn, f))
    i_mag = int(np.argmax(mag_err))
    i_ph = int(np.argmax(ph_err))
    return AsymptoteError(
        max_mag_error_db=float(mag_err[i_mag]),
        f_mag_hz=float(f[i_mag]),
        max_phase_error_deg=float(ph_err[i_ph]),
        f_phase_hz=float(f[i_ph]),
    )
