r"""The loop a stage closes around a plant: loop gain, margins, closed loop, step.

Sign convention: the loop gain excludes the summing junction's minus sign.
For an inverting stage (and a ``circuit`` stage, which loopcraft treats as an
error amplifier sensing at its input)

.. math::  L(s) = P(s) \cdot k_{fb} \cdot (-H(s)),

and for a non-inverting stage L(s) = P(s)·k_fb·H(s), where P is the plant and
k_fb the divider or sensor gain (V/V). Phase margin = 180° + ∠L at |L| = 1;
gain margin = -20·log10|L| where ∠L = -180° (mod 360°). Every crossing is
reported, not only the first.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.signal as sig

from .factors import FactoredNumeric
from .margins import LoopMargins, loop_margins_factored

#: Search-grid density for loop crossings (analytic phase; resonances get extra points).
MARGIN_GRID_PER_DECADE = 40

__all__ = ["PlantLoop", "plant_loop", "loop_sign"]


def loop_sign(stage_kind: str) -> float:
    """-1 for inverting and circuit stages, +1 for non-inverting ones (see module docstring)."""
    return 1.0 if stage_kind == "noninverting" else -1.0


@dataclass(frozen=True)
class PlantLoop:
    """L(s) = plant · feedback gain · (∓ stage), with its margins.

    Parameters
    ----------
    loop : FactoredNumeric
        L(s) in normalized factored form (rad/s).
    margins : LoopMargins
        Every crossover with its phase margin; every phase crossover with its gain margin.
    """

    loop: FactoredNumeric
    margins: LoopMargins

    def response(self, f_hz: np.ndarray) -> np.ndarray:
        """L(j·2π·f) at ``f_hz`` (Hz)."""
        return self.loop.response(f_hz)

    def closed_loop(self, f_hz: np.ndarray) -> np.ndarray:
        """L/(1 + L) at ``f_hz`` (Hz): the reference-to-sensed-output response."""
        lv = self.loop.response(f_hz)
        return lv / (1.0 + lv)

    def closed_loop_tf(self) -> tuple[np.ndarray, np.ndarray]:
        """(num, den) of L/(1 + L), descending powers of s (rad/s)."""
        num, den = self.loop.tf()
        n = max(len(num), len(den))
        return num, np.pad(den, (n - len(den), 0)) + np.pad(num, (n - len(num), 0))

    def step(self, t_s: np.ndarray | None = None, n: int = 1000) -> tuple[np.ndarray, np.ndarray]:
        """Unit step response of L/(1 + L) (scipy.signal.step).

        Parameters
        ----------
        t_s : array of float, optional
            Times in seconds; by default 20 periods of the lowest crossover.
        n : int
            Number of time points when ``t_s`` is not given.

        Returns
        -------
        (t_s, y) : arrays
        """
        num, den = self.closed_loop_tf()
        scale = max(abs(den[0]), 1e-300)
        if t_s is None:
            fc = self.margins.crossovers[0].f_hz if self.margins.crossovers else 1.0
            t_s = np.linspace(0.0, 20.0 / fc, n)
        t, y = sig.step((num / scale, den / scale), T=t_s)
        return t, y


def plant_loop(
    stage_kind: str,
    stage: FactoredNumeric,
    plant: FactoredNumeric,
    feedback_gain: float = 1.0,
    *,
    f_min_hz: float | None = None,
    f_max_hz: float | None = None,
) -> PlantLoop:
    """Form the loop gain and find every crossover and gain margin.

    Parameters
    ----------
    stage_kind : {"inverting", "noninverting", "circuit"}
        Fixes the sign of the stage in the loop (see module docstring).
    stage : FactoredNumeric
        The stage's transfer function (ideal, or with the real op-amp).
    plant : FactoredNumeric
        The plant P(s).
    feedback_gain : float
        Divider or sensor gain, V/V.
    f_min_hz, f_max_hz : float, optional
        Band searched for crossings, Hz; chosen from the corners when omitted.
    """
    loop = (plant * stage).scaled(feedback_gain * loop_sign(stage_kind))
    return PlantLoop(loop, loop_margins_factored(loop, f_min_hz, f_max_hz, points_per_decade=MARGIN_GRID_PER_DECADE))
