"""Everything shown for one set of values, computed on the compiled fast path.

:class:`Analyzer` holds what does not change while values move (the compiled
evaluator, the op-amp and plant models, the frequency grid); each
:meth:`Analyzer.update` returns an immutable :class:`Analysis` with the ideal,
asymptotic, actual and loop curves, poles, zeros and margins. The widgets,
the command line and the reports all read this one result.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np

from ..numeric.asymptote import (
    _asymptote_mag_db_u,
    _asymptote_phase_deg_u,
    _exact_mag_db_u,
    _exact_phase_deg_u,
    _log10_omega,
    exact_phase_deg,
)
from ..numeric.evaluator import TransferResult
from ..numeric.factors import FactoredNumeric
from .amplifier import ActualStage, actual_stage
from .band import display_band_hz
from .loop import PlantLoop, plant_loop
from .margins import loop_branch_offset_deg

__all__ = ["Analysis", "Analyzer", "default_band_hz", "analysis_sections", "loop_summary_lines", "response_columns"]


def default_band_hz(*fns: FactoredNumeric, extra_hz: tuple[float, ...] = ()) -> tuple[float, float]:
    """A frequency band (Hz) two decades beyond the extreme corners of the given functions.

    The display band of :func:`loopcraft.analysis.band.display_band_hz`: ``extra_hz``
    (Hz) anchors both ends like a corner; whole decades, 1 mHz … 1 THz.
    """
    return display_band_hz(*fns, extra_hz=extra_hz)


@dataclass(frozen=True)
class Analysis:
    """The data every view shows, at one set of component values.

    Attributes
    ----------
    f_hz : ndarray
        Frequency grid, Hz.
    exact_mag_db, exact_phase_deg : ndarray
        Ideal stage response (dB, continuous phase in degrees).
    asymptote_mag_db, asymptote_phase_deg : ndarray
        Straight-line approximations of the same.
    zeros_rad_s, poles_rad_s : ndarray of complex
        Ideal stage roots of the reduced transfer function, rad/s (origin roots
        included; a zero and a pole that cancel at these values are taken out,
        see :attr:`TransferResult.cancelled`).
    transfer : TransferResult
        The ideal numeric transfer function.
    actual : ActualStage or None
        The stage with the real op-amp (None for an ideal op-amp).
    actual_mag_db, actual_phase_deg : ndarray or None
    loop : PlantLoop or None
        Loop gain around the plant (None without a plant).
    loop_mag_db, loop_phase_deg : ndarray or None
    """

    f_hz: np.ndarray
    exact_mag_db: np.ndarray
    exact_phase_deg: np.ndarray
    asymptote_mag_db: np.ndarray
    asymptote_phase_deg: np.ndarray
    zeros_rad_s: np.ndarray
    poles_rad_s: np.ndarray
    transfer: TransferResult
    actual: ActualStage | None = None
    actual_mag_db: np.ndarray | None = None
    actual_phase_deg: np.ndarray | None = None
    loop: PlantLoop | None = None
    loop_mag_db: np.ndarray | None = None
    loop_phase_deg: np.ndarray | None = None

    @property
    def factored(self) -> FactoredNumeric:
        """The ideal stage in normalized factored form."""
        return self.transfer.factored

    def view_state(self) -> dict:
        """Plain Python / numpy data (the explorer's ``view_state`` keys)."""
        out = {
            "f_hz": self.f_hz,
            "exact_mag_db": self.exact_mag_db,
            "exact_phase_deg": self.exact_phase_deg,
            "asymptote_mag_db": self.asymptote_mag_db,
            "asymptote_phase_deg": self.asymptote_phase_deg,
            "poles_rad_s": self.poles_rad_s,
            "zeros_rad_s": self.zeros_rad_s,
            "cancelled_rad_s": self.transfer.cancelled,
        }
        if self.actual is not None:
            out["actual_mag_db"] = self.actual_mag_db
            out["actual_phase_deg"] = self.actual_phase_deg
            amp = self.actual.amplifier_loop
            out["amplifier_loop"] = amp.to_dict() if amp is not None else None
        if self.loop is not None:
            out["loop_mag_db"] = self.loop_mag_db
            out["loop_phase_deg"] = self.loop_phase_deg
            out["loop_margins"] = self.loop.margins.to_dict()
            out["loop_stability"] = self.loop.stability.to_dict()
        return out


class Analyzer:
    """Per-design constant state for fast repeated analysis.

    Parameters
    ----------
    design : Design
        Supplies the topology, op-amp, plant and feedback gain.
    f_hz : array of float, optional
        Frequency grid (Hz); by default 500 log-spaced points over
        :func:`default_band_hz` of the design at its current values.
    """

    def __init__(self, design, f_hz: np.ndarray | None = None) -> None:
        self.design = design
        self.evaluator = design.compile()
        self.opamp = design.opamp if design.opamp is not None and not design.opamp.is_ideal else None
        self.plant_fn = design.plant.factored() if design.plant is not None else None
        self._plant_cache: tuple[np.ndarray, np.ndarray] | None = None
        self.f_hz = f_hz if f_hz is not None else np.array([1.0, 10.0])
        if f_hz is None:
            first = self.update()
            extra = [self.opamp.gbw_hz] if self.opamp is not None else []
            fns = [first.factored] + ([self.plant_fn] if self.plant_fn is not None else [])
            if first.loop is not None:
                fns.append(first.loop.loop)
                extra += [c.f_hz for c in first.loop.margins.crossovers]
            lo, hi = default_band_hz(*fns, extra_hz=tuple(extra))
            self.f_hz = np.logspace(math.log10(lo), math.log10(hi), 500)

    @property
    def f_hz(self) -> np.ndarray:
        """The frequency grid, Hz (fixed while values move)."""
        return self._f_hz

    @f_hz.setter
    def f_hz(self, f_hz: np.ndarray) -> None:
        self._f_hz = np.asarray(f_hz, dtype=float)
        self._u = _log10_omega(self._f_hz)  # validated once; every curve reuses it
        self._plant_cache = None

    def update(self, values: Mapping[str, float] | None = None) -> Analysis:
        """Analyse at ``values`` (SI base units; the design's own when omitted)."""
        ev = self.evaluator
        tr = ev.evaluate_tuple(ev.values_tuple(values if values is not None else self.design.values))
        fn = tr.factored
        u = self._u
        ideal_mag, ideal_phase = _exact_mag_db_u(fn, u), _exact_phase_deg_u(fn, u)
        kw = {}
        stage_fn, s_mag, s_phase = fn, ideal_mag, ideal_phase
        if self.opamp is not None:
            act = actual_stage(self.design.stage, tr, self.opamp)
            stage_fn = act.factored
            s_mag, s_phase = _exact_mag_db_u(stage_fn, u), _exact_phase_deg_u(stage_fn, u)
            kw.update(actual=act, actual_mag_db=s_mag, actual_phase_deg=s_phase)
        if self.plant_fn is not None:
            # The plant does not move with the sliders: its curves on the grid are cached, and
            # the loop curves are plant + stage in dB and degrees (L = P·k_fb·(∓H); the sign
            # and branch enter as one constant phase offset). Margins are searched over the
            # loop's own band (beyond its corners and 0 dB crossing), so a crossing that a
            # slider pushes off the display is still found.
            p_mag, p_phase = self._plant_curves()
            k_db = 20.0 * math.log10(abs(self.design.feedback_gain))
            lp = plant_loop(self.design.stage.kind, stage_fn, self.plant_fn, self.design.feedback_gain,
                            stage_sign=self.design.stage_sign)
            loop_phase = p_phase + s_phase + _branch_offset_deg(lp.loop, p_phase[0] + s_phase[0], self._f_hz[0])
            kw.update(loop=lp, loop_mag_db=p_mag + s_mag + k_db, loop_phase_deg=loop_phase)
        return Analysis(
            self._f_hz,
            ideal_mag,
            ideal_phase,
            _asymptote_mag_db_u(fn, u),
            _asymptote_phase_deg_u(fn, u),
            tr.reduced_zeros,
            tr.reduced_poles,
            tr,
            **kw,
        )

    def _plant_curves(self) -> tuple[np.ndarray, np.ndarray]:
        if self._plant_cache is None:
            self._plant_cache = (_exact_mag_db_u(self.plant_fn, self._u), _exact_phase_deg_u(self.plant_fn, self._u))
        return self._plant_cache


def _branch_offset_deg(loop: FactoredNumeric, summed_deg: float, f0_hz: float) -> float:
    """The constant (a multiple of 180°) that puts plant + stage phase on the loop's own branch.

    That is the branch its phase margins are measured on (:func:`loopcraft.analysis.margins.loop_branch_offset_deg`).
    """
    return float(exact_phase_deg(loop, np.array([f0_hz]))[0]) + loop_branch_offset_deg(loop) - summed_deg


def analysis_sections(design) -> dict:
    """The ``amplifier_loop`` and ``loop`` sections of ``loopcraft analyze --json`` (when present)."""
    a = Analyzer(design).update()
    out: dict = {}
    lines: list[str] = []
    if a.actual is not None and a.actual.amplifier_loop is not None:
        amp = a.actual.amplifier_loop
        out["amplifier_loop"] = amp.to_dict()
        if amp.crossover_hz is not None:
            lines.append(
                f"amplifier loop: crossover {amp.crossover_hz:.4g} Hz, phase margin "
                f"{amp.phase_margin_deg:.1f}°, rate of closure {amp.rate_of_closure_db_per_decade:.0f} dB/decade"
            )
        if amp.departs_hz is not None:
            lines.append(f"actual response departs from the ideal by > 1 dB above {amp.departs_hz:.4g} Hz")
        lines += [f"warning: {w}" for w in amp.warnings]
    if a.loop is not None:
        out["loop"] = a.loop.to_dict()
        lines += loop_summary_lines(a.loop)
    out["summary_lines"] = lines
    return out


def loop_summary_lines(lp: PlantLoop) -> list[str]:
    """The loop's verdict first, then every crossover and phase crossover, in words (for the CLI)."""
    m, st = lp.margins, lp.stability
    lines = [f"loop: {st.headline()}"]
    if st.stable:
        lines.append(f"  {st.gain_range_text()}")
    lines += [f"  note: {n}" for n in st.notes]
    qualifier = "" if st.stable else " (not a margin: the closed loop is not stable)"
    for c in m.crossovers:
        lines.append(f"loop crossover {c.f_hz:.4g} Hz: phase margin {c.phase_margin_deg:.1f}°{qualifier}")
    for g in m.gain_margins:
        if st.stable:
            kind = "gain-increase" if g.gain_margin_db >= 0 else "gain-reduction"
            lines.append(f"loop phase crossover {g.f_hz:.4g} Hz: gain margin {g.gain_margin_db:.1f} dB "
                         f"({kind}: |L| = {-g.gain_margin_db:.1f} dB there)")
        else:
            lines.append(f"loop phase crossover {g.f_hz:.4g} Hz: |L| = {-g.gain_margin_db:.1f} dB there{qualifier}")
    if st.stable and len(m.crossovers) > 1:
        worst = min(m.crossovers, key=lambda c: c.phase_margin_deg)
        lines.append(f"governing phase margin {worst.phase_margin_deg:.1f}° at {worst.f_hz:.4g} Hz "
                     f"(worst of {len(m.crossovers)} crossovers)")
    if not m.crossovers:
        lines.append("loop gain never crosses 0 dB in the analysed band")
    return lines


def response_columns(design, f_hz: np.ndarray) -> dict[str, np.ndarray]:
    """Columns of ``loopcraft response --json``: ideal, asymptote, actual and loop curves."""
    state = Analyzer(design, f_hz=np.asarray(f_hz, dtype=float)).update().view_state()
    rename = {"exact_mag_db": "mag_db", "exact_phase_deg": "phase_deg"}
    return {rename.get(k, k): v for k, v in state.items()
            if k == "f_hz" or k.endswith("_mag_db") or k.endswith("_phase_deg")}
