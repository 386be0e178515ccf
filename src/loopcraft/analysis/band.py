"""Which frequency band (Hz) to show and which to search: the one policy.

Three purposes, each with its own function; every other module asks here.

* :func:`display_band_hz`: what a view, a table or a figure **shows**. Whole
  decades, :data:`DISPLAY_MARGIN_DECADES` beyond the extreme corners of the
  given transfer functions and the extreme frequencies of interest (op-amp
  gain-bandwidth, crossovers), clamped to :data:`DISPLAY_FLOOR_HZ` …
  :data:`DISPLAY_CEILING_HZ`, and optionally capped in width.
* :func:`crossing_search_band_hz`: where the 0 dB and -180° **crossings** of a
  loop gain are searched. Not rounded and not clamped to the display limits:
  :data:`SEARCH_MARGIN_DECADES` beyond every corner (the split corners of a
  low-Q pair included) and every 0 dB crossing of the straight-line
  magnitude, so that no crossing is missed (beyond that band the magnitude is
  within about 0.0004 dB per first-order factor of its asymptote, which lies
  at least 40 dB away from 0 dB, and the phase within 0.6° per factor of its
  asymptote).
* :func:`departure_search_band_hz`: where an op-amp's finite gain makes the
  actual response **leave the ideal** one. Far below the corners
  (:data:`DEPARTURE_BELOW_DECADES`): a finite open-loop gain A0 caps an
  integrator's gain decades below every corner.

Users: the analysis grid (:func:`loopcraft.analysis.analyzer.default_band_hz`), the Monte
Carlo default grid (:mod:`loopcraft.analysis.tolerance`), the record's Bode figure
(:func:`loopcraft.report.figures.figure_band_hz`) and the explorer's view show a display
band; the margin search (:mod:`loopcraft.analysis.margins`) takes a crossing search band
when no band is given; the amplifier loop (:mod:`loopcraft.analysis.amplifier`) compares
over a departure band and searches its crossings over that band joined with the crossing
search band.

All frequencies are in Hz; the corners of a
:class:`~loopcraft.numeric.factors.FactoredNumeric` are read through
:attr:`~loopcraft.numeric.factors.Factor.f_hz`.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

from ..errors import AnalysisError
from ..numeric.asymptote import _LOG10_2PI, _magnitude_breaks
from ..numeric.factors import FactoredNumeric

__all__ = [
    "DISPLAY_MARGIN_DECADES",
    "DISPLAY_FLOOR_HZ",
    "DISPLAY_CEILING_HZ",
    "DISPLAY_FALLBACK_HZ",
    "SEARCH_MARGIN_DECADES",
    "DEPARTURE_BELOW_DECADES",
    "DEPARTURE_ABOVE_DECADES",
    "DEPARTURE_FLOOR_HZ",
    "DEPARTURE_CEILING_HZ",
    "corners_hz",
    "unity_gain_hz",
    "display_band_hz",
    "crossing_search_band_hz",
    "departure_search_band_hz",
    "union_band_hz",
]

#: Decades a display band reaches beyond its extreme anchors (after rounding them out to whole decades).
DISPLAY_MARGIN_DECADES = 2
#: Lowest frequency any display band starts at, Hz.
DISPLAY_FLOOR_HZ = 1e-3
#: Highest frequency any display band ends at, Hz.
DISPLAY_CEILING_HZ = 1e12
#: Anchor of a display band when nothing sets a frequency scale, Hz.
DISPLAY_FALLBACK_HZ = 1e3

# Rounding slack of display anchors to whole decades, decades (far above float rounding of a corner).
_SNAP_DECADES = 1e-9

#: Decades a crossing search band reaches beyond every corner and asymptotic 0 dB crossing.
SEARCH_MARGIN_DECADES = 2.0

#: Decades the departure band reaches below the lowest corner or frequency of interest.
DEPARTURE_BELOW_DECADES = 5.0
#: Decades the departure band reaches above the highest corner or frequency of interest.
DEPARTURE_ABOVE_DECADES = 3.0
#: Limits of the departure band, Hz.
DEPARTURE_FLOOR_HZ = 1e-6
DEPARTURE_CEILING_HZ = 1e13


def _usable(xs: Iterable[float]) -> list[float]:
    return [float(x) for x in xs if math.isfinite(x) and x > 0]


def corners_hz(*fns: FactoredNumeric | None) -> list[float]:
    """Every corner (order 1) and natural frequency (order 2) of the given functions, Hz.

    Parameters
    ----------
    *fns : FactoredNumeric or None
        Transfer functions in factored form (corners in rad/s); None is skipped.

    Returns
    -------
    list of float
        :attr:`~loopcraft.numeric.factors.Factor.f_hz` of every factor, Hz, in order.
    """
    return [f.f_hz for fn in fns if fn is not None for f in fn.factors]


def unity_gain_hz(fn: FactoredNumeric) -> float | None:
    """Where ``|K·(jω)^n|`` is 1, Hz (``ω = |K|^(-1/n)``); None when ``n = 0``.

    The only frequency scale of a function without corners (an integrator
    ``K/s``, a differentiator ``K·s``); its corners, if any, are ignored.

    Parameters
    ----------
    fn : FactoredNumeric
        Gain ``K`` (in units that make ``K·s^n`` dimensionless with s in rad/s)
        and origin order ``n``.
    """
    n = fn.origin_order
    if n == 0 or not math.isfinite(fn.gain) or fn.gain == 0:
        return None
    return abs(fn.gain) ** (-1.0 / n) / (2.0 * math.pi)


def display_band_hz(
    *fns: FactoredNumeric | None,
    extra_hz: Iterable[float] = (),
    above_hz: Iterable[float] = (),
    margin_decades: int = DISPLAY_MARGIN_DECADES,
    max_decades: int | None = None,
) -> tuple[float, float]:
    """The band a view, table or figure shows, Hz.

    From the decade at or below the lowest anchor, ``margin_decades`` down, to
    the decade at or above the highest, ``margin_decades`` up (a single pole
    at 1 kHz shows 10 Hz … 100 kHz), clamped to :data:`DISPLAY_FLOOR_HZ` …
    :data:`DISPLAY_CEILING_HZ`.

    Parameters
    ----------
    *fns : FactoredNumeric or None
        Functions whose corners (:func:`corners_hz`) anchor both ends; None is skipped.
    extra_hz : iterable of float
        Further frequencies of interest anchoring both ends (op-amp
        gain-bandwidth, crossovers), Hz; values that are not finite and > 0
        are ignored.
    above_hz : iterable of float
        Frequencies that may only widen the band upward, Hz (ignored like
        ``extra_hz`` when not finite and > 0).
    margin_decades : int, optional
        Whole decades beyond the extreme anchors (default
        :data:`DISPLAY_MARGIN_DECADES`).
    max_decades : int or None, optional
        Widest band allowed, decades. Wider, the top is pulled in to one decade
        above the decade of the highest anchor, then the bottom is raised.
        None: no cap.

    Returns
    -------
    (f_lo_hz, f_hi_hz) : tuple of float
        Powers of ten (unless clamped), Hz.

    Notes
    -----
    With no corner and no frequency of interest at all, the band is anchored
    on the 0 dB frequency of ``K·s^n`` (:func:`unity_gain_hz`) of the
    functions, or else on :data:`DISPLAY_FALLBACK_HZ`.
    """
    both = corners_hz(*fns) + _usable(extra_hz)
    up = _usable(above_hz)
    if not both:
        scales = [unity_gain_hz(fn) for fn in fns if fn is not None]
        both = _usable(x for x in scales if x is not None) or [DISPLAY_FALLBACK_HZ]
    # An anchor within _SNAP_DECADES of a power of ten counts as on it, so that a corner of
    # exactly 1 kHz computed as 999.9999999999999 Hz does not widen the band by a decade.
    k_lo = math.floor(math.log10(min(both)) + _SNAP_DECADES) - margin_decades
    k_top = math.ceil(math.log10(max(both + up)) - _SNAP_DECADES)
    k_hi = k_top + margin_decades
    if max_decades is not None:
        if k_hi - k_lo > max_decades:
            k_hi = max(k_top + 1, k_lo + max_decades)
        if k_hi - k_lo > max_decades:
            k_lo = k_hi - max_decades
    return max(10.0**k_lo, DISPLAY_FLOOR_HZ), min(10.0**k_hi, DISPLAY_CEILING_HZ)


def crossing_search_band_hz(fn: FactoredNumeric, margin_decades: float = SEARCH_MARGIN_DECADES) -> tuple[float, float]:
    """The band in which every crossing of a loop gain is searched, Hz.

    ``margin_decades`` beyond the extreme corner (each corner of a pair with
    Q ≤ 0.5 split into its two real ones) or the extreme 0 dB crossing of the
    straight-line magnitude, whichever is further out: an integrator ``K/s``
    with crossover ``fc = |K|/2π`` is searched over ``fc/100 … 100·fc``.

    Parameters
    ----------
    fn : FactoredNumeric
        The loop gain (corners in rad/s).
    margin_decades : float, optional
        Decades beyond the extreme corner or asymptotic crossing.

    Returns
    -------
    (f_lo_hz, f_hi_hz) : tuple of float
        Hz; not rounded, not clamped.

    Raises
    ------
    AnalysisError
        A function with no corners and no origin term (a constant) has no
        frequency scale.
    """
    breaks = sorted(_magnitude_breaks(fn))
    a0 = 20.0 * math.log10(abs(fn.gain))
    slope = 20.0 * fn.origin_order
    # Asymptote A(u) = a0 + slope·u + Σ d·max(0, u - u_b), u = log10(ω rad/s).
    candidates = [b for b, _ in breaks]
    edges = [-math.inf] + [b for b, _ in breaks] + [math.inf]
    intercept = a0
    for j in range(len(edges) - 1):
        lo, hi = edges[j], edges[j + 1]
        if slope != 0.0:
            root = -intercept / slope
            if lo <= root <= hi:
                candidates.append(root)
        if j < len(breaks):
            d = breaks[j][1]
            # After the break: A = intercept + slope·u + d·(u - b)
            intercept -= d * breaks[j][0]
            slope += d
    if not candidates:
        raise AnalysisError(
            f"a loop with no corners and origin order {fn.origin_order!r} has no frequency scale; "
            "give f_min_hz and f_max_hz"
        )
    u_lo = min(candidates) - _LOG10_2PI - margin_decades
    u_hi = max(candidates) - _LOG10_2PI + margin_decades
    return 10.0**u_lo, 10.0**u_hi


def departure_search_band_hz(*fns: FactoredNumeric, extra_hz: Iterable[float] = ()) -> tuple[float, float]:
    """The band in which an actual response is compared with the ideal one, Hz.

    :data:`DEPARTURE_BELOW_DECADES` below and :data:`DEPARTURE_ABOVE_DECADES`
    above the extreme corners of ``fns`` and frequencies ``extra_hz`` (not
    rounded), clamped to :data:`DEPARTURE_FLOOR_HZ` … :data:`DEPARTURE_CEILING_HZ`.

    Parameters
    ----------
    *fns : FactoredNumeric
        Functions whose corners anchor the band.
    extra_hz : iterable of float
        Further anchors (the op-amp's gain-bandwidth and dominant pole), Hz;
        values that are not finite and > 0 are ignored.

    Returns
    -------
    (f_lo_hz, f_hi_hz) : tuple of float
        Hz; anchored on 1 Hz when nothing is given.
    """
    fs = _usable(corners_hz(*fns)) + _usable(extra_hz) or [1.0]
    return (max(min(fs) / 10.0**DEPARTURE_BELOW_DECADES, DEPARTURE_FLOOR_HZ),
            min(max(fs) * 10.0**DEPARTURE_ABOVE_DECADES, DEPARTURE_CEILING_HZ))


def union_band_hz(*bands: tuple[float, float]) -> tuple[float, float]:
    """The smallest band (Hz) holding every given band ``(f_lo_hz, f_hi_hz)``."""
    return min(b[0] for b in bands), max(b[1] for b in bands)
