"""The frequency grid and the axis ranges and ticks of the Bode figures.

* :func:`view_band_hz` / :func:`view_grid_hz`: the fixed log grid (Hz) of a design;
* :func:`decade_ticks`: decade ticks with SI labels ("10", "1k", "1M") for a
  log axis, keyed as the browser prints numbers (bqplot crowds log-axis
  labels unless they are given);
* :func:`keep_or_fit`: a linear axis range rounded to tidy steps that stays
  put while the data fits it comfortably (so the axes do not jump while a
  slider moves), and :func:`linear_ticks` for it.
"""

from __future__ import annotations

import math

import numpy as np

from ..analysis.band import display_band_hz
from ..model.values import format_value
from ..numeric.factors import FactoredNumeric

__all__ = [
    "GRID_POINTS",
    "MAX_BAND_DECADES",
    "view_band_hz",
    "view_grid_hz",
    "decade_ticks",
    "nice_range",
    "keep_or_fit",
    "linear_ticks",
    "clamp_log",
]

_MINUS = "\u2212"


def _signed(x: float) -> str:
    return f"{x:g}".replace("-", _MINUS)


#: Points of the frequency grid.
GRID_POINTS = 500
#: Widest frequency band the explorer shows, decades.
MAX_BAND_DECADES = 9


def view_band_hz(stage: FactoredNumeric, plant: FactoredNumeric | None = None,
                 extra_hz: tuple[float, ...] = ()) -> tuple[float, float]:
    """The frequency band the explorer draws, Hz: the package's one display-band policy.

    :func:`loopcraft.analysis.band.display_band_hz` anchored on the corners of
    the ideal stage and the plant, with ``extra_hz`` (op-amp GBW, crossovers)
    widening it upward only, capped at :data:`MAX_BAND_DECADES` decades (the
    top is then pulled in to one decade above the highest frequency of
    interest, then the bottom raised). An op-amp's dominant pole is
    deliberately not an anchor: it sits decades below anything the stage does.

    Parameters
    ----------
    stage : FactoredNumeric
        The ideal stage (corners in rad/s).
    plant : FactoredNumeric, optional
        The plant (corners in rad/s).
    extra_hz : tuple of float
        Further frequencies to include, Hz.

    Returns
    -------
    (f_lo_hz, f_hi_hz)
    """
    return display_band_hz(stage, plant, above_hz=extra_hz, max_decades=MAX_BAND_DECADES)


def view_grid_hz(stage: FactoredNumeric, plant: FactoredNumeric | None = None,
                 extra_hz: tuple[float, ...] = ()) -> np.ndarray:
    """:data:`GRID_POINTS` log-spaced frequencies (Hz) over :func:`view_band_hz`."""
    lo, hi = view_band_hz(stage, plant, extra_hz)
    return np.logspace(math.log10(lo), math.log10(hi), GRID_POINTS)


def decade_ticks(f_lo_hz: float, f_hi_hz: float) -> tuple[np.ndarray, dict[str, str]]:
    """Decade tick values and their labels ("10", "1k", "1M" …) for a log frequency axis.

    Parameters
    ----------
    f_lo_hz, f_hi_hz : float
        The axis range, Hz.

    Returns
    -------
    (values, labels)
        Tick values in Hz and a ``{value: label}`` map whose keys are the
        values as the browser prints them (``String(1000)`` is ``"1000"``).
    """
    k_lo = math.ceil(math.log10(f_lo_hz) - 1e-9)
    k_hi = math.floor(math.log10(f_hi_hz) + 1e-9)
    values, labels = [], {}
    every = 1 if k_hi - k_lo <= 10 else 2
    for k in range(k_lo, k_hi + 1, every):
        v = float(f"1e{k}")
        values.append(v)
        key = str(10**k) if k >= 0 else f"{v:.{-k}f}"
        labels[key] = format_value(v, "", digits=3).replace(" ", "")
    return np.array(values), labels


def nice_range(lo: float, hi: float, step: float, pad: float) -> tuple[float, float]:
    """``[lo - pad, hi + pad]`` rounded out to multiples of ``step`` (same units as the data)."""
    a = math.floor((lo - pad) / step) * step
    b = math.ceil((hi + pad) / step) * step
    if b - a < 2 * step:
        b = a + 2 * step
    return a, b


def _axis_step(span: float, steps: tuple[float, ...], max_ticks: int) -> float:
    for s in steps:
        if span / s <= max_ticks:
            return s
    return steps[-1]


def keep_or_fit(current: tuple[float | None, float | None], data_lo: float, data_hi: float,
                 steps: tuple[float, ...], pad: float, max_ticks: int) -> tuple[float, float, float]:
    """Keep the current axis range while the data fits it comfortably, else fit anew."""
    step = _axis_step(data_hi - data_lo + 2 * pad, steps, max_ticks)
    lo, hi = nice_range(data_lo, data_hi, step, pad)
    c_lo, c_hi = current
    if c_lo is not None and c_hi is not None:
        c_step = _axis_step(c_hi - c_lo, steps, max_ticks)
        fits = c_lo <= data_lo - pad / 3 and c_hi >= data_hi + pad / 3
        snug = (c_hi - c_lo) <= (hi - lo) + 2 * c_step
        if fits and snug:
            return c_lo, c_hi, c_step
    return lo, hi, step


def linear_ticks(lo: float, hi: float, step: float, unit: str) -> tuple[np.ndarray, dict[str, str]]:
    n = int(round((hi - lo) / step))
    values = lo + step * np.arange(n + 1)
    labels = {str(int(v)) if float(v).is_integer() else repr(float(v)): _signed(float(v)) + unit
              for v in values}
    return values, labels


def clamp_log(f_hz: float, f_lo: float, f_hi: float, at_most: float) -> float:
    """``f_hz``, or the frequency at fraction ``at_most`` of the log axis if it lies beyond."""
    lo, hi = math.log10(f_lo), math.log10(f_hi)
    return min(f_hz, 10.0 ** (lo + at_most * (hi - lo)))
