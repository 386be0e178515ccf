r"""The loop a stage closes around a plant: loop gain, margins, closed loop, step.

Sign convention: the loop gain excludes the summing junction's minus sign.
For an inverting stage (and a ``circuit`` stage, which loopcraft treats as an
error amplifier sensing at its input)

.. math::  L(s) = P(s) \cdot k_{fb} \cdot (-H(s)),

and for a non-inverting stage L(s) = P(s)·k_fb·H(s), where P is the plant and
k_fb the divider or sensor gain (V/V). A design file may state the sign
explicitly with its top-level ``stage_sign`` key (-1 or +1: L = stage_sign·P·k_fb·H),
for an error amplifier wired the other way round; absent, the rule above applies.

Phase margin = 180° + ∠L at |L| = 1 on the loop's continuous phase; gain
margin = -20·log10|L| where ∠L = -180° (mod 360°). Every crossing is reported,
not only the first. The verdict itself — stable or not — comes from the
closed-loop poles (:attr:`PlantLoop.stability`, :mod:`loopcraft.analysis.stability`),
never from the margins alone.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import scipy.signal as sig

from ..errors import DesignFileError
from ..numeric.factors import FactoredNumeric
from .margins import LoopMargins, loop_margins_factored
from .stability import Stability, closed_loop_stability

#: Search-grid density for loop crossings (analytic phase; resonances get extra points).
MARGIN_GRID_PER_DECADE = 40

__all__ = ["PlantLoop", "plant_loop", "loop_sign"]


def loop_sign(stage_kind: str, stage_sign: int | None = None) -> float:
    """The stage's sign in the loop, -1.0 or +1.0.

    ``stage_sign`` when given, else -1 for inverting and circuit stages and +1 for
    non-inverting ones (see module docstring).
    """
    if stage_sign is not None:
        if stage_sign not in (-1, 1) or isinstance(stage_sign, bool):
            raise DesignFileError(f"stage_sign must be -1 or +1 (got {stage_sign!r})", "stage_sign")
        return float(stage_sign)
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

    @cached_property
    def stability(self) -> Stability:
        """Closed-loop stability: pole count cross-checked by Nyquist, loop sign, gain range."""
        return closed_loop_stability(
            self.loop, [(-g.gain_margin_db, g.f_hz) for g in self.margins.gain_margins]
        )

    def to_dict(self) -> dict:
        """Margins and stability as plain data (the ``loop`` section of ``analyze --json``).

        ``stable``, ``verdict``, ``closed_loop_rhp_poles``, ``open_loop_rhp_poles``,
        ``closed_loop_poles_rad_s`` (``[[re, im], ...]``), every crossover and phase
        crossover, the governing (worst) phase margin and the gain-increase and
        gain-reduction margins (null when unlimited, or when the loop is not stable).
        """
        st = self.stability
        out = self.margins.to_dict()
        out.update(st.to_dict())
        out["governing_phase_margin_deg"] = self.margins.phase_margin_deg if st.stable else None
        out.setdefault("gain_increase_margin_db", None)
        out.setdefault("gain_reduction_margin_db", None)
        out["headline"] = st.headline()
        return out

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
    stage_sign: int | None = None,
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
    stage_sign : {-1, +1} or None
        The stage's sign in the loop when stated explicitly; None for the rule above.
    """
    loop = (plant * stage).scaled(feedback_gain * loop_sign(stage_kind, stage_sign))
    return PlantLoop(loop, loop_margins_factored(loop, f_min_hz, f_max_hz, points_per_decade=MARGIN_GRID_PER_DECADE))
