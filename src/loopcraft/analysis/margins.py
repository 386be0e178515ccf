"""Gain crossovers, phase margins and gain margins of a loop gain.

Sign convention
---------------
The loop gain ``L(s)`` excludes the minus sign of the summing junction: the
closed loop is ``L/(1 + L)`` and the stability boundary is ``L = -1``. Hence

* at every gain crossover (``|L| = 1``) the phase margin is
  ``PM = 180° + ∠L``. For a loop in factored form
  (:func:`loop_margins_factored`) ∠L is the *continuous* phase, summed
  analytically factor by factor from the loop's low-frequency branch: ``-90°·p``
  for p poles at the origin when L is positive at low frequency (negative
  feedback), 180° lower when it is negative (positive feedback). It is never
  wrapped: a loop whose phase has fallen to -387° at its crossover has a phase
  margin of -207°, not +153°. For a loop given only as a callable
  (:func:`loop_margins`) the phase is unwrapped along the grid from the
  principal value at ``f_min_hz`` and the margin wrapped into (-180°, 180°];
  that form knows no branch and is not a stability verdict.
  A phase margin alone never proves stability: :mod:`loopcraft.analysis.stability`
  counts the closed-loop poles;
* at every phase crossover (``∠L = -180° mod 360°``) the gain margin is
  ``GM = -20·log10|L|`` dB (positive when ``|L| < 1`` there).

Method
------
The loop is sampled on a dense logarithmic grid; every sign change of
``log|L|`` and every passage of the unwrapped phase through an odd multiple of
180° brackets one crossing, which :func:`scipy.optimize.brentq` refines in
log-frequency. A pair of crossings closer together than one grid step (a
very narrow resonant peak) can be missed by :func:`loop_margins`;
:func:`loop_margins_factored` adds grid points around every second-order
factor in proportion to its Q, and uses the analytic (continuous) phase.

Frequencies are in Hz at the interface; the loop itself is evaluated at
complex ``s`` in rad/s (``s = j·2π·f``).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass
from numbers import Real

import numpy as np
from scipy.optimize import brentq

from ..errors import AnalysisError
from ..numeric.asymptote import (
    _LOG10_2PI,
    _check_fn,
    _exact_mag_db_u,
    _exact_phase_deg_u,
    exact_mag_db,
    exact_phase_deg,
)
from ..numeric.factors import FactoredNumeric
from .band import crossing_search_band_hz

__all__ = [
    "Crossover",
    "GainMargin",
    "LoopMargins",
    "loop_margins",
    "loop_margins_factored",
    "loop_branch_offset_deg",
    "slope_db_per_decade",
]

_MAX_GRID_POINTS = 2_000_000
_SLOPE_STEP_DECADES = 1e-4
_XTOL_DECADES = 1e-13

LoopFunction = Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True)
class Crossover:
    """One gain crossover, ``|L(j·2π·f)| = 1``.

    Parameters
    ----------
    f_hz : float
        Crossover frequency, Hz.
    phase_margin_deg : float
        ``180° + ∠L`` at the crossover, degrees: on the loop's continuous
        branch for a factored loop (not wrapped; see the module docstring),
        wrapped into (-180°, 180°] for a loop given as a callable.
    slope_db_per_decade : float
        Slope of ``20·log10|L|`` against ``log10 f`` at the crossover, dB/decade.
    """

    f_hz: float
    phase_margin_deg: float
    slope_db_per_decade: float


@dataclass(frozen=True)
class GainMargin:
    """One phase crossover, ``∠L = -180° (mod 360°)``.

    Parameters
    ----------
    f_hz : float
        Phase-crossover frequency, Hz.
    gain_margin_db : float
        ``-20·log10|L|`` at the phase crossover, dB (negative when ``|L| > 1``).
    """

    f_hz: float
    gain_margin_db: float


@dataclass(frozen=True)
class LoopMargins:
    """All crossovers and phase crossovers of a loop in a band.

    Parameters
    ----------
    crossovers : tuple of Crossover
        Every gain crossover in the band, by increasing frequency.
    gain_margins : tuple of GainMargin
        Every phase crossover in the band, by increasing frequency.
    """

    crossovers: tuple[Crossover, ...]
    gain_margins: tuple[GainMargin, ...]

    @property
    def phase_margin_deg(self) -> float | None:
        """The worst (minimum) phase margin over all crossovers, degrees; None if none."""
        if not self.crossovers:
            return None
        return min(c.phase_margin_deg for c in self.crossovers)

    @property
    def gain_margin_db(self) -> float | None:
        """The worst (minimum) gain margin over all phase crossovers, dB; None if none.

        In a conditionally stable loop this is the (negative) margin of a
        phase crossover below the gain crossover, where ``|L| > 1``.
        """
        if not self.gain_margins:
            return None
        return min(g.gain_margin_db for g in self.gain_margins)

    def to_dict(self) -> dict:
        """Plain-data form (frequencies in Hz, margins in degrees and dB).

        Returns
        -------
        dict
            ``{"crossovers": [{"f_hz", "phase_margin_deg"}, ...],
            "gain_margins": [{"f_hz", "gain_margin_db"}, ...]}``.
        """
        return {
            "crossovers": [
                {"f_hz": float(c.f_hz), "phase_margin_deg": float(c.phase_margin_deg)}
                for c in self.crossovers
            ],
            "gain_margins": [
                {"f_hz": float(g.f_hz), "gain_margin_db": float(g.gain_margin_db)}
                for g in self.gain_margins
            ],
        }


# --------------------------------------------------------------------------- helpers


def _wrap_pm(pm_deg: float) -> float:
    """Wrap a phase margin into (-180°, 180°]."""
    x = math.fmod(pm_deg, 360.0)
    if x <= -180.0:
        x += 360.0
    elif x > 180.0:
        x -= 360.0
    return x


def _wrap180(x: np.ndarray | float) -> np.ndarray:
    """Wrap degrees into [-180°, 180°)."""
    return (np.asarray(x) + 180.0) % 360.0 - 180.0


def _eval_loop(loop: LoopFunction, f_hz: np.ndarray) -> np.ndarray:
    """Evaluate ``loop`` at s = j·2π·f and check the result."""
    s = 2j * np.pi * f_hz
    try:
        value = np.asarray(loop(s), dtype=complex)
    except (TypeError, ValueError) as exc:
        raise AnalysisError(
            "loop(s) must return a complex array for a complex array s in rad/s "
            f"(failed with {exc!r})"
        ) from exc
    if value.shape != s.shape:
        raise AnalysisError(
            f"loop(s) must return an array of the shape of s {s.shape!r} "
            f"(got shape {value.shape!r})"
        )
    bad = ~np.isfinite(value) | (value == 0)
    if np.any(bad):
        i = int(np.argmax(bad))
        raise AnalysisError(
            f"loop(s) must be finite and non-zero in the band "
            f"(got {complex(value.flat[i])!r} at f_hz={float(f_hz.flat[i])!r})"
        )
    return value


def _check_band(f_min_hz: float, f_max_hz: float) -> None:
    for name, v in (("f_min_hz", f_min_hz), ("f_max_hz", f_max_hz)):
        if not isinstance(v, Real) or isinstance(v, bool) or not (math.isfinite(v) and v > 0):
            raise AnalysisError(f"{name} must be a finite frequency > 0 Hz (got {v!r})")
    if not f_min_hz < f_max_hz:
        raise AnalysisError(
            f"f_min_hz must be below f_max_hz (got f_min_hz={f_min_hz!r}, f_max_hz={f_max_hz!r})"
        )


def _log_grid(f_min_hz: float, f_max_hz: float, points_per_decade: int) -> np.ndarray:
    """log10 of a logarithmic grid (Hz) covering the band, ends included."""
    if (
        not isinstance(points_per_decade, (int, np.integer))
        or isinstance(points_per_decade, bool)
        or points_per_decade < 2
    ):
        raise AnalysisError(
            f"points_per_decade must be an integer >= 2 (got {points_per_decade!r})"
        )
    u0, u1 = math.log10(f_min_hz), math.log10(f_max_hz)
    n = int(math.ceil((u1 - u0) * points_per_decade)) + 1
    n = max(n, 2)
    if n > _MAX_GRID_POINTS:
        raise AnalysisError(
            f"band {f_min_hz!r}..{f_max_hz!r} Hz at {points_per_decade!r} points/decade "
            f"needs {n!r} points; expected at most {_MAX_GRID_POINTS!r} "
            "(narrow the band or lower the density)"
        )
    return np.linspace(u0, u1, n)


def _refine(func: Callable[[float], float], ua: float, ub: float, ga: float, gb: float) -> float:
    """Root of ``func`` in [ua, ub] (log10 Hz); the ends take their grid values."""

    def h(u: float) -> float:
        if u == ua:
            return ga
        if u == ub:
            return gb
        return func(u)

    return float(brentq(h, ua, ub, xtol=_XTOL_DECADES))


def _reject_plateau(u: np.ndarray, on_level: np.ndarray, what: str) -> None:
    """Raise when two neighbouring grid points lie exactly on a crossing level."""
    both = np.nonzero(on_level[:-1] & on_level[1:])[0]
    if both.size:
        i = int(both[0])
        raise AnalysisError(
            f"{what} holds exactly from f_hz={10.0 ** u[i]!r} to f_hz={10.0 ** u[i + 1]!r}: "
            "every frequency there is a crossing, so the margin is undefined; "
            "expected isolated crossings"
        )


def _mag_roots(u: np.ndarray, g: np.ndarray, func: Callable[[float], float]) -> list[float]:
    """All roots (log10 Hz) of a function sampled as ``g`` on ``u``."""
    _reject_plateau(u, g == 0.0, "|L| = 1")
    roots: list[float] = [float(x) for x in u[g == 0.0]]
    idx = np.nonzero(g[:-1] * g[1:] < 0.0)[0]
    for i in idx:
        roots.append(_refine(func, float(u[i]), float(u[i + 1]), float(g[i]), float(g[i + 1])))
    return roots


def _phase_roots(
    u: np.ndarray, phase_deg: np.ndarray, func: Callable[[float, float], float]
) -> list[float]:
    """Passages (log10 Hz) of a continuous phase through -180° + k·360°.

    ``func(u, ref_deg)`` returns the phase at ``u`` on the branch nearest ``ref_deg``.
    """
    m = (phase_deg + 180.0) / 360.0  # crossings at integer m
    on_level = m == np.round(m)
    _reject_plateau(u, on_level, "∠L = -180° (mod 360°)")
    hits: set[int] = set(np.nonzero(on_level)[0].tolist())
    roots: list[float] = [float(u[i]) for i in sorted(hits)]
    lo = np.minimum(m[:-1], m[1:])
    hi = np.maximum(m[:-1], m[1:])
    idx = np.nonzero(np.floor(hi) >= np.ceil(lo))[0]
    for i in idx:
        a, b = float(m[i]), float(m[i + 1])
        for k in range(math.ceil(min(a, b)), math.floor(max(a, b)) + 1):
            level = -180.0 + 360.0 * k
            da = float(phase_deg[i]) - level
            db = float(phase_deg[i + 1]) - level
            if da == 0.0 or db == 0.0:
                roots.append(float(u[i] if da == 0.0 else u[i + 1]))  # on a grid point
            elif da * db < 0.0:
                ref = float(phase_deg[i])
                roots.append(
                    _refine(
                        lambda x, lv=level, r=ref: func(x, r) - lv,
                        float(u[i]),
                        float(u[i + 1]),
                        da,
                        db,
                    )
                )
    return roots


def _margins(
    u: np.ndarray,
    log_mag: Callable[[np.ndarray], np.ndarray],
    phase_grid: np.ndarray,
    phase_at: Callable[[float, float], float],
    slope_at: Callable[[float], float],
    *,
    wrap: bool = True,
) -> LoopMargins:
    """Crossovers and phase crossovers from a grid (log10 Hz) and the refiners."""
    g = log_mag(u)

    def mag_scalar(x: float) -> float:
        return float(log_mag(np.array([x]))[0])

    crossovers = []
    for r in sorted(set(_mag_roots(u, g, mag_scalar))):
        ref = float(np.interp(r, u, phase_grid))
        pm = 180.0 + phase_at(r, ref)
        if wrap:
            pm = _wrap_pm(pm)
        f = 10.0**r
        crossovers.append(Crossover(f_hz=f, phase_margin_deg=pm, slope_db_per_decade=slope_at(f)))

    gain_margins = []
    for r in sorted(set(_phase_roots(u, phase_grid, phase_at))):
        gm_db = -20.0 / math.log(10.0) * mag_scalar(r)
        gain_margins.append(GainMargin(f_hz=10.0**r, gain_margin_db=gm_db))
    return LoopMargins(tuple(crossovers), tuple(gain_margins))


# --------------------------------------------------------------------------- public API


def slope_db_per_decade(loop: LoopFunction, f_hz: float) -> float:
    """Slope of ``20·log10|L|`` against ``log10 f`` at one frequency.

    A central difference over ±1e-4 decade with one Richardson step
    (truncation error of order ``h⁴``).

    Parameters
    ----------
    loop : callable
        ``loop(s)`` returns L at a complex array ``s`` in rad/s.
    f_hz : float
        Frequency in Hz, finite and > 0.

    Returns
    -------
    float
        Slope in dB/decade (-20 for an integrator).

    Raises
    ------
    AnalysisError
        For a bad frequency or a loop value that is zero or not finite.
    """
    if isinstance(f_hz, bool) or not isinstance(f_hz, Real):
        raise AnalysisError(f"f_hz must be a frequency in Hz (got {f_hz!r})")
    if not (math.isfinite(f_hz) and f_hz > 0):
        raise AnalysisError(f"f_hz must be a finite frequency > 0 Hz (got {f_hz!r})")
    return _slope_of_db(lambda f: 20.0 * np.log10(np.abs(_eval_loop(loop, f))), float(f_hz))


def _slope_of_db(db_of_f_hz: Callable[[np.ndarray], np.ndarray], f_hz: float) -> float:
    """Richardson-extrapolated central difference of a dB curve, dB/decade."""
    h = _SLOPE_STEP_DECADES
    steps = np.array([-h, h, -h / 2.0, h / 2.0])
    db = db_of_f_hz(f_hz * 10.0**steps)
    d_h = (db[1] - db[0]) / (2.0 * h)
    d_h2 = (db[3] - db[2]) / h
    return float((4.0 * d_h2 - d_h) / 3.0)


def loop_margins(
    loop: LoopFunction,
    f_min_hz: float,
    f_max_hz: float,
    *,
    points_per_decade: int = 200,
) -> LoopMargins:
    """Every gain crossover and phase crossover of a loop in a band.

    Parameters
    ----------
    loop : callable
        ``loop(s)`` returns the loop gain L (without the summing junction's
        minus sign) at a complex array ``s`` in rad/s, same shape.
    f_min_hz, f_max_hz : float
        The band searched, Hz, ``0 < f_min_hz < f_max_hz``.
    points_per_decade : int, optional
        Density of the logarithmic search grid (points per decade of Hz).

    Returns
    -------
    LoopMargins
        Crossovers and phase crossovers sorted by frequency. The phase is
        unwrapped along the grid; crossings are refined with
        :func:`scipy.optimize.brentq` in log-frequency.

    Raises
    ------
    AnalysisError
        For a bad band or density, a loop that is zero, not finite or of the
        wrong shape on the grid, or a loop whose magnitude is exactly 1 or
        whose phase is exactly -180° over an interval (e.g. a pure double
        integrator), where the margins are undefined.
    """
    if not callable(loop):
        raise AnalysisError(f"loop must be callable as loop(s) with s in rad/s (got {loop!r})")
    _check_band(f_min_hz, f_max_hz)
    u = _log_grid(float(f_min_hz), float(f_max_hz), points_per_decade)
    values = _eval_loop(loop, 10.0**u)
    phase_grid = np.degrees(np.unwrap(np.angle(values)))

    def log_mag(x: np.ndarray) -> np.ndarray:
        return np.log(np.abs(_eval_loop(loop, 10.0**x)))

    def phase_at(x: float, ref_deg: float) -> float:
        a = float(np.degrees(np.angle(_eval_loop(loop, np.array([10.0**x]))[0])))
        return ref_deg + float(_wrap180(a - ref_deg))

    def slope_at(f: float) -> float:
        return slope_db_per_decade(loop, f)

    return _margins(u, log_mag, phase_grid, phase_at, slope_at)


def _auto_band_hz(fn: FactoredNumeric) -> tuple[float, float]:
    """Two decades beyond the extreme corners and asymptotic 0 dB crossings (Hz).

    See :func:`loopcraft.analysis.band.crossing_search_band_hz`.
    """
    return crossing_search_band_hz(fn)


def _resonance_points(fn: FactoredNumeric, u0: float, u1: float) -> np.ndarray:
    """Extra grid points (log10 Hz) around each second-order factor, spaced by its Q."""
    extra = []
    offsets = np.linspace(-10.0, 10.0, 201)
    for f in fn.factors:
        if f.order == 2 and f.q is not None and f.q > 0.5:
            # ≈ the -3 dB bandwidth ω0/Q, in decades (a pair on the jω axis, Q = ∞, gets a
            # narrow fixed width so its sharp phase step is still bracketed)
            width = 1.0 / (f.q * math.log(10.0)) if math.isfinite(f.q) else 1e-9
            extra.append(math.log10(f.f_hz) + offsets * width)
    if not extra:
        return np.empty(0)
    pts = np.concatenate(extra)
    return pts[(pts > u0) & (pts < u1)]


def loop_branch_offset_deg(fn: FactoredNumeric) -> float:
    """Shift (0° or -360°) from :func:`~loopcraft.numeric.asymptote.exact_phase_deg` to the loop's branch.

    The Bode convention puts a negative constant at +180° when there is no zero
    at the origin (an inverting integrator reads +90°). For a loop gain the
    phase margin is measured from -180°, so a loop that is negative at low
    frequency (positive feedback there) is drawn from ``-180° + 90°·n``
    instead: 360° lower.
    """
    return -360.0 if fn.gain < 0 and fn.origin_order <= 0 else 0.0


def _scalar_evaluators(fn: FactoredNumeric) -> tuple[Callable[[float], float], Callable[[float], float]]:
    """Scalar |L| in dB and continuous phase in degrees at log10(f/Hz), in plain floats.

    The same formulas as :func:`loopcraft.numeric.asymptote.exact_mag_db` and
    :func:`~loopcraft.numeric.asymptote.exact_phase_deg`, without numpy's per-call cost.
    """
    k_db = 20.0 * math.log10(abs(fn.gain))
    n = fn.origin_order
    offset = float(exact_phase_deg(FactoredNumeric(fn.gain, n, ()), np.array([1.0]))[0]) - 90.0 * n
    terms = [(1.0 if f.role == "zero" else -1.0, (1.0 if f.role == "zero" else -1.0) * (-1.0 if f.rhp else 1.0),
              f.order, f.omega_rad_s, f.q) for f in fn.factors]

    def mag(u: float) -> float:
        w = 10.0 ** (u + _LOG10_2PI)
        out = k_db + 20.0 * n * (u + _LOG10_2PI)
        for sm, _sp, order, wc, q in terms:
            x = w / wc
            out += sm * 20.0 * math.log10(max(math.hypot(1.0, x) if order == 1 else math.hypot(1.0 - x * x, x / q),
                                              1e-150))
        return out

    def phase(u: float) -> float:
        w = 10.0 ** (u + _LOG10_2PI)
        out = offset + 90.0 * n
        for _sm, sp, order, wc, q in terms:
            x = w / wc
            out += sp * math.degrees(math.atan(x) if order == 1 else math.atan2(x / q, 1.0 - x * x))
        return out

    return mag, phase


def loop_margins_factored(
    fn: FactoredNumeric,
    f_min_hz: float | None = None,
    f_max_hz: float | None = None,
    *,
    points_per_decade: int = 200,
) -> LoopMargins:
    """Every gain crossover and phase crossover of a loop in factored form.

    Parameters
    ----------
    fn : FactoredNumeric
        The loop gain L (corners in rad/s), without the summing junction's
        minus sign.
    f_min_hz, f_max_hz : float or None, optional
        The band searched, Hz. A bound left as None is taken two decades
        beyond the extreme corner or the extreme 0 dB crossing of the
        straight-line magnitude, whichever is further out.
    points_per_decade : int, optional
        Density of the logarithmic search grid; points are added around each
        second-order factor in proportion to its Q.

    Returns
    -------
    LoopMargins
        Crossovers and phase crossovers sorted by frequency. Magnitude and
        phase are evaluated analytically factor by factor (the phase is
        continuous, see :func:`loopcraft.numeric.asymptote.exact_phase_deg`).

    Raises
    ------
    AnalysisError
        For a zero or non-finite gain, a bad band, a loop with no corners
        and no origin term when the band is not given, or a phase that is
        exactly -180° over an interval (a pure double integrator K/s²).
    """
    _check_fn(fn)
    if f_min_hz is None or f_max_hz is None:
        auto_lo, auto_hi = _auto_band_hz(fn)
        f_min_hz = auto_lo if f_min_hz is None else f_min_hz
        f_max_hz = auto_hi if f_max_hz is None else f_max_hz
    _check_band(f_min_hz, f_max_hz)
    u = _log_grid(float(f_min_hz), float(f_max_hz), points_per_decade)
    u = np.unique(np.concatenate([u, _resonance_points(fn, u[0], u[-1])]))

    ln10_over_20 = math.log(10.0) / 20.0
    mag1, phase1 = _scalar_evaluators(fn)

    def log_mag(x: np.ndarray) -> np.ndarray:
        if x.shape == (1,):  # the refiners ask one point at a time: plain floats are faster
            return np.array([mag1(float(x[0])) * ln10_over_20])
        return _exact_mag_db_u(fn, x + _LOG10_2PI) * ln10_over_20

    shift = loop_branch_offset_deg(fn)

    def phase_at(x: float, ref_deg: float) -> float:
        return phase1(x) + shift

    def slope_at(f: float) -> float:
        return _slope_of_db(lambda x: exact_mag_db(fn, x), f)

    return _margins(u, log_mag, _exact_phase_deg_u(fn, u + _LOG10_2PI) + shift, phase_at, slope_at, wrap=False)
