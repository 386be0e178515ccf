r"""Closed-loop stability of a loop gain: the verdict an engineer signs off on.

The loop gain ``L(s) = K·s^n·N(s)/D(s)`` (normalized factored form, corners in
rad/s, the summing junction's minus sign excluded, so the closed loop is
``L/(1 + L)``) is a rational function. Its closed loop is stable exactly when
every root of the characteristic polynomial

.. math::  Q(s) = D(s) + K\,N(s)

(``D`` and ``N`` the denominator and numerator polynomials, origin roots
included, after cancelling common factors) lies in the open left half-plane.
Two independent methods count the right-half-plane roots:

1. **Pole count.** The roots of Q, on the frequency-scaled, Newton-polished
   path of :func:`loopcraft.numeric.factors.polynomial_roots`. A root with
   ``Re > +1e-9·|root|`` is counted in the right half-plane, one with
   ``|Re| <= 1e-9·|root|`` on the jω axis (marginal, not stable).
2. **Nyquist criterion** ``Z = N + P`` (P the open-loop right-half-plane
   poles, N the clockwise encirclements of -1; Nyquist 1932, as in Franklin,
   Powell & Emami-Naeini, "Feedback Control of Dynamic Systems", 2015, §6.3).
   It is evaluated as the argument principle on ``Q(jω) = D(jω)·(1 + L(jω))``:
   the phase of ``D`` is summed analytically factor by factor (continuous) and
   the phase of ``1 + L`` comes from the frequency response, tracked on an
   adaptive logarithmic grid that is refined wherever neighbouring points
   differ by more than 15°. Over ω from -∞ to +∞ a polynomial of degree m
   with ``m_L`` left-half-plane and ``m_R`` right-half-plane roots turns by
   ``180°·(m_L - m_R)`` (Cauchy's argument principle), so
   ``Z = (m - Δ/180°)/2`` with ``Δ = 2·(∠Q(j∞) - ∠Q(j0))``, and
   ``N = Z - P``. The grid runs three decades beyond every corner and far
   enough that ``|L|`` is below 1e-3 (or above 1e3) at its ends, where the
   remaining turn of ``Q`` is known in closed form.

When the two methods disagree, the verdict is ``"uncertain"`` and
``stable`` is False: neither is trusted silently.

Cancellations. A zero and a pole of L that coincide to a relative 1e-9
(:data:`CANCEL_REL_TOL`) are cancelled before counting; a cancelled pair in
the closed right half-plane (or on the axis) is a hidden mode that no loop
gain can move, and makes the verdict ``"unstable"`` (or ``"marginal"``).

Loop sign. ``low_frequency_sign`` is the sign of K (the sign of L at low
frequency after the origin term); with no open-loop right-half-plane poles,
a negative sign means the loop is positive feedback at low frequency.

Gain range. The closed loop of ``k·L`` changes stability only where a root
crosses the jω axis, which happens only at a gain ``k = 1/|L(jω)|`` where L is
real and negative: at every phase crossover, at ω = 0 and at ω = ∞. Testing
the pole count between those candidates gives the exact range of gain
multipliers ``k_low < 1 < k_high`` over which the loop stays stable: the
gain-increase margin ``20·log10(k_high)`` and the gain-reduction margin
``-20·log10(k_low)`` (both positive), the two margins of a conditionally
stable loop.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import cached_property

import numpy as np

from ..errors import AnalysisError
from ..numeric.asymptote import _exact_phase_deg_u
from ..numeric.factors import (
    CANCEL_REL_TOL,
    Factor,
    FactoredNumeric,
    cancel_roots,
    drop_cancelled,
    polynomial_roots,
)

__all__ = [
    "CANCEL_REL_TOL",
    "AXIS_REL_TOL",
    "Stability",
    "GainRange",
    "closed_loop_stability",
    "gain_range",
]

#: A closed-loop root with ``|Re| <= AXIS_REL_TOL·|root|`` counts as on the jω axis (marginal).
AXIS_REL_TOL = 1e-9
_REFINE_DEG = 15.0
_MAX_PASSES = 60
_MAX_POINTS = 200_000
_SNAP_TOL_DEG = 30.0


@dataclass(frozen=True)
class GainRange:
    """The range of loop-gain multipliers over which the closed loop stays stable.

    Parameters
    ----------
    increase_margin_db : float or None
        ``20·log10(k_high)`` dB: how much the loop gain may rise before the closed
        loop goes unstable; None when no rise makes it unstable (unlimited).
    reduction_margin_db : float or None
        ``-20·log10(k_low)`` dB: how much the loop gain may fall before the closed
        loop goes unstable (a conditionally stable loop); None when unlimited.
    increase_at_hz, reduction_at_hz : float or None
        The phase-crossover frequency (Hz) where the limiting root crosses the jω
        axis (0.0 for ω = 0, ``inf`` for ω → ∞); None when unlimited.
    """

    increase_margin_db: float | None
    reduction_margin_db: float | None
    increase_at_hz: float | None = None
    reduction_at_hz: float | None = None

    def to_dict(self) -> dict:
        """Plain data; None (JSON null) means unlimited."""
        def f(x: float | None) -> float | None:
            return None if x is None or not math.isfinite(x) else float(x)

        return {
            "gain_increase_margin_db": f(self.increase_margin_db),
            "gain_increase_at_hz": f(self.increase_at_hz),
            "gain_reduction_margin_db": f(self.reduction_margin_db),
            "gain_reduction_at_hz": f(self.reduction_at_hz),
        }


@dataclass(frozen=True)
class Stability:
    """Closed-loop stability of a loop gain (see the module docstring).

    Parameters
    ----------
    verdict : {"stable", "unstable", "marginal", "uncertain"}
        ``"stable"`` only when the pole count and the Nyquist criterion agree on
        no closed-loop root in the closed right half-plane and no hidden mode.
    closed_loop_rhp_poles : int
        Closed-loop poles with positive real part (pole count), hidden modes included.
    closed_loop_axis_poles : int
        Closed-loop poles on the jω axis (within :data:`AXIS_REL_TOL`).
    open_loop_rhp_poles : int
        P: poles of L with positive real part (after cancellation).
    closed_loop_poles_rad_s : ndarray of complex
        Roots of ``D + K·N`` in rad/s, by increasing magnitude.
    nyquist_rhp_poles : int or None
        Z from the Nyquist criterion; None when it could not be evaluated.
    nyquist_encirclements : int or None
        N: clockwise encirclements of -1 by L(jω), ω from -∞ to ∞.
    hidden_modes_rad_s : ndarray of complex
        Cancelled pole-zero pairs of L that do not decay (Re >= -1e-9·|root|).
    cancelled_rad_s : ndarray of complex
        Every cancelled pair of L (one root per pair), rad/s.
    low_frequency_sign : int
        Sign of L at low frequency (of K in the normalized factored form).
    positive_feedback : bool
        True when the low-frequency sign is negative and L has no open-loop
        right-half-plane pole: the loop reinforces the error instead of opposing it.
    notes : tuple of str
        Plain-language remarks (disagreement, hidden modes, positive feedback).
    """

    verdict: str
    closed_loop_rhp_poles: int
    closed_loop_axis_poles: int
    open_loop_rhp_poles: int
    closed_loop_poles_rad_s: np.ndarray = field(repr=False)
    nyquist_rhp_poles: int | None
    nyquist_encirclements: int | None
    hidden_modes_rad_s: np.ndarray = field(repr=False)
    cancelled_rad_s: np.ndarray = field(repr=False)
    low_frequency_sign: int
    positive_feedback: bool
    notes: tuple[str, ...] = ()
    _loop: FactoredNumeric | None = field(default=None, repr=False, compare=False)
    _candidates: tuple = field(default=(), repr=False, compare=False)

    @cached_property
    def gain_range(self) -> GainRange | None:
        """The gain-increase and gain-reduction margins; None unless the verdict is ``"stable"``.

        Computed on first use (a few more root computations), so a per-frame caller
        that only needs the verdict does not pay for it.
        """
        if self.verdict != "stable" or self._loop is None:
            return None
        return gain_range(self._loop, self._candidates)

    @property
    def stable(self) -> bool:
        """True only for the verdict ``"stable"``."""
        return self.verdict == "stable"

    @property
    def methods_agree(self) -> bool:
        """Whether the pole count and the Nyquist criterion give the same Z."""
        return self.nyquist_rhp_poles is not None and self.nyquist_rhp_poles == self.closed_loop_rhp_poles - len(
            [r for r in self.hidden_modes_rad_s if r.real > 0]
        )

    def headline(self) -> str:
        """One line, verdict first: ``"UNSTABLE: 2 closed-loop poles in the right half-plane"``."""
        if self.verdict == "stable":
            return "STABLE: every closed-loop pole in the left half-plane"
        if self.verdict == "unstable":
            n = self.closed_loop_rhp_poles
            text = f"UNSTABLE: {n} closed-loop pole{'s' if n != 1 else ''} in the right half-plane"
            if self.positive_feedback:
                text += " (positive feedback)"
            return text
        if self.verdict == "marginal":
            return "MARGINAL (not stable): closed-loop poles on the jω axis"
        return "STABILITY UNCERTAIN (treat as not stable): " + (self.notes[0] if self.notes else "methods disagree")

    def gain_range_text(self) -> str:
        """The stable gain range in words ("" unless stable): computes :attr:`gain_range`."""
        g = self.gain_range
        if g is None:
            return ""
        up = "without limit" if g.increase_margin_db is None else f"by {g.increase_margin_db:.1f} dB"
        text = f"the loop gain may rise {up} before the closed loop goes unstable"
        if g.reduction_margin_db is not None:
            text += f", and fall by {g.reduction_margin_db:.1f} dB (conditionally stable)"
        return text

    def to_dict(self) -> dict:
        """Plain data for JSON: poles as ``[[re, im], ...]`` in rad/s."""
        out = {
            "stable": self.stable,
            "verdict": self.verdict,
            "closed_loop_rhp_poles": int(self.closed_loop_rhp_poles),
            "closed_loop_axis_poles": int(self.closed_loop_axis_poles),
            "open_loop_rhp_poles": int(self.open_loop_rhp_poles),
            "closed_loop_poles_rad_s": [[float(r.real), float(r.imag)] for r in self.closed_loop_poles_rad_s],
            "nyquist": {
                "rhp_poles": self.nyquist_rhp_poles,
                "encirclements_cw": self.nyquist_encirclements,
                "agrees": self.methods_agree,
            },
            "hidden_modes_rad_s": [[float(r.real), float(r.imag)] for r in self.hidden_modes_rad_s],
            "low_frequency_sign": int(self.low_frequency_sign),
            "positive_feedback": bool(self.positive_feedback),
            "notes": list(self.notes),
        }
        if self.gain_range is not None:
            out.update(self.gain_range.to_dict())
        return out


# --------------------------------------------------------------------------- polynomials


def _roots_of(fn: FactoredNumeric) -> tuple[np.ndarray, np.ndarray]:
    """Non-origin zeros and poles of fn (rad/s)."""
    z = [f.roots() for f in fn.factors if f.role == "zero"]
    p = [f.roots() for f in fn.factors if f.role == "pole"]
    cat = lambda parts: np.concatenate(parts) if parts else np.zeros(0, dtype=complex)  # noqa: E731
    return cat(z), cat(p)


def _pad_add(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    out = np.zeros(max(len(a), len(b)))
    out[: len(a)] += a
    out[: len(b)] += b
    return out


@dataclass(frozen=True)
class _Parts:
    """The reduced loop as ascending polynomials: L = K·s^n·N/D."""

    gain: float
    origin_order: int
    n_asc: np.ndarray  # includes s^max(n,0)
    d_asc: np.ndarray  # includes s^max(-n,0)
    zeros: np.ndarray
    poles: np.ndarray
    cancelled: np.ndarray
    reduced: FactoredNumeric


def _parts(loop: FactoredNumeric) -> _Parts:
    if not isinstance(loop, FactoredNumeric):
        raise AnalysisError(f"loop must be a FactoredNumeric (got {type(loop).__name__!r})")
    if not (math.isfinite(loop.gain) and loop.gain != 0.0):
        raise AnalysisError(f"loop gain K must be finite and non-zero (got {loop.gain!r})")
    z, p = _roots_of(loop)
    cancellation = cancel_roots(z, p, rel_tol=CANCEL_REL_TOL)  # the package's one cancellation policy
    reduced = drop_cancelled(loop, cancellation)
    num, den = reduced.tf()  # descending powers, built factor by factor (no roots back to coefficients)
    if not (np.all(np.isfinite(num)) and np.all(np.isfinite(den))):
        raise AnalysisError("the loop's polynomials overflow: its corners span too many decades")
    z, p = _roots_of(reduced)
    return _Parts(loop.gain, loop.origin_order, num[::-1] / loop.gain, den[::-1], z, p, cancellation.cancelled,
                  reduced)


def _count(roots: np.ndarray) -> tuple[int, int]:
    """(right-half-plane, on-axis) counts with the relative axis tolerance."""
    mag = np.abs(roots)
    axis = np.abs(roots.real) <= AXIS_REL_TOL * mag
    rhp = (roots.real > 0) & ~axis
    return int(rhp.sum()), int(axis.sum())


def _char_roots(parts: _Parts, k: float = 1.0) -> tuple[np.ndarray, str | None]:
    """Roots of D + k·K·N (rad/s) and a note when the closed loop is degenerate."""
    q = _pad_add(parts.d_asc, k * parts.gain * parts.n_asc)
    lead_d = parts.d_asc[-1] if len(parts.d_asc) >= len(q) else 0.0
    lead_n = k * parts.gain * parts.n_asc[-1] if len(parts.n_asc) >= len(q) else 0.0
    note = None
    if abs(q[-1]) <= 1e-12 * max(abs(lead_d), abs(lead_n)):
        note = "L → -1 at high frequency: the closed loop is improper (a pole at infinity)"
        q = q.copy()
        q[-1] = 0.0
    # strip exact origin roots and leading zeros
    n0 = 0
    while len(q) > 1 and q[0] == 0.0:
        q = q[1:]
        n0 += 1
    while len(q) > 1 and q[-1] == 0.0:
        q = q[:-1]
    roots = polynomial_roots(q[::-1]) if len(q) > 1 else np.zeros(0, dtype=complex)
    roots = np.concatenate([np.zeros(n0, dtype=complex), roots])
    return roots[np.argsort(np.abs(roots), kind="stable")], note


# --------------------------------------------------------------------------- Nyquist


def _corner_span(parts: _Parts, extra: np.ndarray) -> tuple[float, float]:
    mags = [abs(r) for r in np.concatenate([parts.zeros, parts.poles, extra]) if abs(r) > 0 and math.isfinite(abs(r))]
    if not mags:
        return 1.0, 1.0
    return min(mags), max(mags)


def _nyquist(parts: _Parts, cl_roots: np.ndarray) -> tuple[int | None, str | None]:
    """Z from the argument principle on Q(jω) = D(jω)(1 + L(jω)); None with a reason on failure."""
    red = parts.reduced
    deg_d = len(parts.d_asc) - 1
    deg_n = len(parts.n_asc) - 1
    m = max(deg_d, deg_n)
    if deg_d == deg_n:
        lead = parts.d_asc[-1] + parts.gain * parts.n_asc[-1]
        if abs(lead) <= 1e-12 * max(abs(parts.d_asc[-1]), abs(parts.gain * parts.n_asc[-1])):
            return None, "L → -1 at high frequency"
    if m == 0:
        return 0, None
    lo, hi = _corner_span(parts, cl_roots)
    lw_lo = math.log10(lo) - 3.0
    lw_hi = math.log10(hi) + 3.0
    n = parts.origin_order
    lk = math.log10(abs(parts.gain))
    rel = deg_d - deg_n  # relative degree (origin terms included)
    if n < 0:  # |L| ≈ |K|·ω^n at low frequency: push down until |L| > 1e3
        lw_lo = min(lw_lo, (lk - 3.0) / (-n) - 1.0)
    if rel != 0:
        # at high frequency |L| ≈ |K|·|lead_n/lead_d|·ω^(-rel): push up until 1e-3 (or 1e3)
        ln = math.log10(abs(parts.n_asc[-1])) + lk - math.log10(abs(parts.d_asc[-1]))
        target = 3.0 if rel > 0 else -3.0
        lw_hi = max(lw_hi, (ln + target) / rel + 1.0)
    if not (math.isfinite(lw_lo) and math.isfinite(lw_hi)) or lw_hi - lw_lo > 80:
        return None, "the loop's corners span too many decades for the frequency-response check"

    d_fn = FactoredNumeric(
        1.0, max(-parts.origin_order, 0),
        tuple(Factor("zero", f.order, f.omega_rad_s, f.q, f.rhp) for f in red.factors if f.role == "pole"),
    )

    def g_wrapped(u: np.ndarray) -> np.ndarray:
        w = 10.0**u
        with np.errstate(all="ignore"):
            one_plus_l = 1.0 + red.evaluate(1j * w)
        ok = np.isfinite(one_plus_l) & (one_plus_l != 0)
        return _exact_phase_deg_u(d_fn, u) + np.degrees(np.angle(one_plus_l)), ok

    pts = [np.linspace(lw_lo, lw_hi, int((lw_hi - lw_lo) * 10) + 2)]
    for r in cl_roots:  # extra resolution where a closed-loop pole sits near the axis
        if r.imag > 0 and abs(r) > 0:
            w0, a = abs(r.imag), max(abs(r.real), 1e-300)
            off = np.array([-8.0, -4.0, -2.0, -1.0, -0.5, 0.0, 0.5, 1.0, 2.0, 4.0, 8.0]) * a
            pts.append(np.log10(np.clip(w0 + off, w0 * 1e-3, None)))
    u = np.unique(np.concatenate(pts))
    u = u[(u >= lw_lo) & (u <= lw_hi)]
    g, ok = g_wrapped(u)
    if not np.all(ok):
        return None, "1 + L vanishes or overflows on the frequency grid"
    for _ in range(_MAX_PASSES):
        d = (np.diff(g) + 180.0) % 360.0 - 180.0
        bad = np.nonzero(np.abs(d) > _REFINE_DEG)[0]
        bad = bad[(u[bad + 1] - u[bad]) > 1e-12 * max(1.0, abs(u[bad]).max(initial=1.0))]
        if bad.size == 0:
            break
        if u.size + bad.size > _MAX_POINTS:
            return None, "the frequency-response check did not converge (too many grid points)"
        mid = 0.5 * (u[bad] + u[bad + 1])
        gm, okm = g_wrapped(mid)
        if not np.all(okm):
            return None, "1 + L vanishes or overflows on the frequency grid"
        u = np.concatenate([u, mid])
        g = np.concatenate([g, gm])
        order = np.argsort(u, kind="stable")
        u, g = u[order], g[order]
    d = (np.diff(g) + 180.0) % 360.0 - 180.0
    if np.any(np.abs(d) > 90.0):
        return None, "the phase of 1 + L turns too fast to follow near a closed-loop pole on the jω axis"
    cont = g[0] + np.concatenate([[0.0], np.cumsum(d)])
    g0 = 180.0 * round(cont[0] / 180.0)
    ginf_base = 90.0 * m
    ginf = ginf_base + 180.0 * round((cont[-1] - ginf_base) / 180.0)
    if abs(cont[0] - g0) > _SNAP_TOL_DEG or abs(cont[-1] - ginf) > _SNAP_TOL_DEG:
        return None, "the frequency-response check could not reach the asymptotes of the loop"
    delta = 2.0 * (ginf - g0)
    z2 = m - delta / 180.0
    z = int(round(z2 / 2.0))
    if abs(z2 - 2 * z) > 1e-6 or z < 0 or z > m:
        return None, "the frequency-response check gave a non-integer count"
    return z, None


# --------------------------------------------------------------------------- public API


def closed_loop_stability(loop: FactoredNumeric, phase_crossover_gains_db: Sequence[float] = ()) -> Stability:
    """Closed-loop stability of ``L/(1 + L)`` by pole count, cross-checked by Nyquist.

    Parameters
    ----------
    loop : FactoredNumeric
        The loop gain L (corners in rad/s), without the summing junction's
        minus sign.
    phase_crossover_gains_db : sequence of float, optional
        ``20·log10|L|`` in dB at every phase crossover (``∠L = -180° mod
        360°``), e.g. from :class:`loopcraft.analysis.margins.LoopMargins`; they are the
        candidate gains for the gain range. Without them only ω = 0 and ω = ∞
        are candidates.

    Returns
    -------
    Stability

    Raises
    ------
    AnalysisError
        For a loop gain that is zero or not finite.
    """
    parts = _parts(loop)
    notes: list[str] = []
    roots, degenerate = _char_roots(parts)
    if degenerate:
        notes.append(degenerate)
    rhp, axis = _count(roots)
    p_rhp, _ = _count(parts.poles) if parts.poles.size else (0, 0)
    hidden = np.array([r for r in parts.cancelled if r.real >= -AXIS_REL_TOL * abs(r)], dtype=complex)
    hidden_rhp = int(sum(1 for r in hidden if r.real > AXIS_REL_TOL * abs(r)))
    if hidden.size:
        notes.append(
            f"{hidden.size} cancelled pole-zero pair(s) of the loop lie on or right of the jω axis "
            "(a hidden mode no loop gain can move)"
        )
    z_nyq, why = _nyquist(parts, roots) if degenerate is None else (None, degenerate)
    n_enc = None if z_nyq is None else z_nyq - p_rhp
    sign = 1 if parts.gain > 0 else -1
    positive = sign < 0 and p_rhp == 0
    if positive:
        notes.append("the loop gain is negative at low frequency: positive feedback (check the loop polarity)")
    elif sign < 0:
        notes.append("the loop gain is negative at low frequency, as it must be to stabilise open-loop "
                     "right-half-plane poles; the verdict rests on the pole count")

    if degenerate is not None:
        verdict = "uncertain"
    elif rhp + hidden_rhp > 0:
        verdict = "unstable"
        if z_nyq is not None and z_nyq != rhp:
            notes.append(f"the Nyquist criterion counts {z_nyq} right-half-plane pole(s), the pole count {rhp}")
        elif z_nyq is None and why:
            notes.append(f"Nyquist cross-check not available: {why}")
    elif axis > 0 or hidden.size > 0:
        verdict = "marginal"
    elif z_nyq is None:
        verdict = "uncertain"
        notes.insert(0, f"the pole count finds no right-half-plane pole but the Nyquist cross-check failed: {why}")
    elif z_nyq != 0:
        verdict = "uncertain"
        notes.insert(0, f"the pole count finds no right-half-plane pole but the Nyquist criterion counts {z_nyq}")
    else:
        verdict = "stable"

    if verdict == "stable" and p_rhp > 0:
        notes.append("with open-loop right-half-plane poles the loop is stable only above some gain: "
                     "read the gain-reduction margin, not only the phase margin")
    return Stability(
        verdict=verdict,
        closed_loop_rhp_poles=rhp + hidden_rhp,
        closed_loop_axis_poles=axis,
        open_loop_rhp_poles=p_rhp,
        closed_loop_poles_rad_s=roots,
        nyquist_rhp_poles=z_nyq,
        nyquist_encirclements=n_enc,
        hidden_modes_rad_s=hidden,
        cancelled_rad_s=parts.cancelled,
        low_frequency_sign=sign,
        positive_feedback=positive,
        notes=tuple(notes),
        _loop=loop,
        _candidates=tuple(phase_crossover_gains_db),
    )


def _stable_at(parts: _Parts, k: float) -> bool:
    roots, degenerate = _char_roots(parts, k)
    if degenerate:
        return False
    rhp, axis = _count(roots)
    return rhp == 0 and axis == 0


def gain_range(
    loop: FactoredNumeric, phase_crossover_gains_db: Sequence[float] = (), *, _parts_cache: _Parts | None = None
) -> GainRange:
    """Gain-increase and gain-reduction margins of a stable loop, from the pole count.

    Parameters
    ----------
    loop : FactoredNumeric
        The loop gain L (rad/s).
    phase_crossover_gains_db : sequence of float
        ``20·log10|L|`` (dB) at every phase crossover; each gives a candidate
        gain multiplier ``k = 1/|L|`` at which a closed-loop root may cross the
        jω axis.

    Returns
    -------
    GainRange
        The margins in dB (None where unlimited).
    """
    parts = _parts_cache or _parts(loop)
    cands: list[tuple[float, float]] = []  # (k, f_hz)
    for item in phase_crossover_gains_db:
        g_db, f_hz = item if isinstance(item, tuple) else (item, math.nan)
        if math.isfinite(g_db):
            cands.append((10.0 ** (-g_db / 20.0), f_hz))
    if parts.origin_order == 0 and parts.gain < 0:
        cands.append((1.0 / abs(parts.gain), 0.0))
    deg_d, deg_n = len(parts.d_asc) - 1, len(parts.n_asc) - 1
    if deg_d == deg_n:
        l_inf = parts.gain * parts.n_asc[-1] / parts.d_asc[-1]
        if l_inf < 0:
            cands.append((1.0 / abs(l_inf), math.inf))
    cands = sorted(c for c in cands if c[0] > 0 and math.isfinite(c[0]) and abs(math.log(c[0])) > 1e-12)
    up = [c for c in cands if c[0] > 1.0]
    down = [c for c in cands if c[0] < 1.0][::-1]
    inc = inc_f = None
    for i, (k, f) in enumerate(up):
        nxt = up[i + 1][0] if i + 1 < len(up) else k * 4.0
        if not _stable_at(parts, math.sqrt(k * nxt)):
            inc, inc_f = 20.0 * math.log10(k), f
            break
    red = red_f = None
    for i, (k, f) in enumerate(down):
        nxt = down[i + 1][0] if i + 1 < len(down) else k / 4.0
        if not _stable_at(parts, math.sqrt(k * nxt)):
            red, red_f = -20.0 * math.log10(k), f
            break
    return GainRange(inc, red, inc_f, red_f)
