r"""The stage with a real op-amp: actual response, noise gain and the amplifier's own loop.

For an inverting or non-inverting stage with open-loop gain A(s):

.. math::

    \text{noise gain } G_n = 1 + Z_f/Z_i, \qquad
    T(s) = A(s)/G_n(s) = A\,\frac{Z_i}{Z_i + Z_f}, \qquad
    H_{act} = \frac{H_{ideal}}{1 + 1/T} = \frac{H_{ideal}}{1 + G_n/A}

(Franco, "Design with Operational Amplifiers and Analog Integrated
Circuits", 3rd ed., 2002, ch. 6). For an inverting stage Gn = 1 - H_ideal,
for a non-inverting one Gn = H_ideal. For a ``circuit`` stage the op-amps are
controlled sources A(s) in the nodal equations; with one op-amp the loop gain
is its return ratio T = A·Δ1/Δ0, from the circuit determinant Δ = Δ0 + A·Δ1.

The amplifier loop is judged like any loop: crossover of |T| = 1, phase
margin 180° + ∠T, and the rate of closure — the difference between the slopes
of |A| and of the noise gain |Gn| where they meet (20 dB/decade is the
comfortable case, 40 dB/decade rings).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import cache, cached_property

import numpy as np
import sympy as sp
from scipy.optimize import brentq

from ..errors import AnalysisError
from ..model.opamp import OpAmp
from ..numeric.evaluator import TransferResult
from ..numeric.factors import FactoredNumeric, factored_from_tf
from ..symbolic.symbols import S
from .band import crossing_search_band_hz, departure_search_band_hz, union_band_hz
from .margins import LoopMargins, loop_margins_factored, slope_db_per_decade

__all__ = ["AmplifierLoop", "ActualStage", "actual_stage", "DEPART_DB"]

#: Search-grid density for loop crossings (analytic phase; resonances get extra points).
MARGIN_GRID_PER_DECADE = 40

#: The actual response "departs" from the ideal where they differ by more than this, dB.
DEPART_DB = 1.0


@dataclass(frozen=True)
class AmplifierLoop:
    """The op-amp's own feedback loop in the stage.

    Parameters
    ----------
    loop : FactoredNumeric
        T(s), the amplifier loop gain (s in rad/s).
    margins : LoopMargins
        Every crossover of |T| = 1 with its phase margin, and the gain margins.
    crossover_hz : float or None
        The highest crossover of |T| (Hz) — where the amplifier runs out of gain.
    phase_margin_deg : float or None
        Phase margin at that crossover, degrees.
    rate_of_closure_db_per_decade : float or None
        |slope of |A| − slope of |Gn|| at the crossover, dB/decade.
    departs_hz : float or None
        The frequency (Hz) above which |H_actual/H_ideal| differs from 1 by more
        than 1 dB (searching upward from where they agree best).
    departs_below_hz : float or None
        The frequency (Hz) below which they differ by more than 1 dB (finite A0
        caps an integrator's DC gain); None when they agree down to the band's end.
    warnings : tuple of str
        Ringing / oscillation flags in words (the stage's own instability first).
    stage_rhp_poles : int
        Poles of the stage as built (with this op-amp) in the right half-plane:
        0 for a stage that settles; any other count means it oscillates or latches,
        whatever the margins say.
    """

    loop: FactoredNumeric
    margins: LoopMargins
    crossover_hz: float | None
    phase_margin_deg: float | None
    rate_of_closure_db_per_decade: float | None
    departs_hz: float | None
    departs_below_hz: float | None
    warnings: tuple[str, ...]
    stage_rhp_poles: int = 0

    @property
    def stable(self) -> bool:
        """True when the stage as built has no pole in the right half-plane."""
        return self.stage_rhp_poles == 0

    def to_dict(self) -> dict:
        """JSON-ready summary (the CLI's ``amplifier_loop`` section)."""
        return {
            "crossover_hz": self.crossover_hz,
            "phase_margin_deg": self.phase_margin_deg,
            "rate_of_closure_db_per_decade": self.rate_of_closure_db_per_decade,
            "departs_hz": self.departs_hz,
            "departs_below_hz": self.departs_below_hz,
            "warnings": list(self.warnings),
            "stage_stable": self.stable,
            "stage_rhp_poles": int(self.stage_rhp_poles),
        }


@dataclass(frozen=True)
class ActualStage:
    """The stage with its real op-amp.

    Parameters
    ----------
    factored : FactoredNumeric
        H_actual(s) in normalized factored form (rad/s).
    ideal : FactoredNumeric
        H_ideal(s), for comparison.
    opamp : OpAmp
        The amplifier model.
    noise_gain_tf, loop_gain_tf : (num, den) or None
        Polynomials (descending powers of s, rad/s) of Gn and of T, factored on first use.

    Notes
    -----
    :attr:`amplifier_loop` (crossings, margins, departure frequency) is
    computed on first use, so a slider move that only redraws curves does not
    pay for it.
    """

    factored: FactoredNumeric
    ideal: FactoredNumeric
    opamp: OpAmp
    noise_gain_tf: tuple[np.ndarray, np.ndarray] | None = None
    loop_gain_tf: tuple[np.ndarray, np.ndarray] | None = None

    def response(self, f_hz: np.ndarray) -> np.ndarray:
        """H_actual(j·2π·f) at ``f_hz`` (Hz)."""
        return self.factored.response(f_hz)

    @cached_property
    def noise_gain(self) -> FactoredNumeric | None:
        """Gn(s) = 1 + Zf/Zi (None for circuit stages)."""
        return factored_from_tf(*self.noise_gain_tf) if self.noise_gain_tf is not None else None

    @cached_property
    def loop_gain(self) -> FactoredNumeric | None:
        """T(s), the op-amp's own loop gain: A/Gn, or the return ratio of a one-op-amp circuit."""
        if self.noise_gain is not None:
            return self.opamp.factored() * self.noise_gain.inverse()
        return factored_from_tf(*self.loop_gain_tf) if self.loop_gain_tf is not None else None

    @cached_property
    def amplifier_loop(self) -> AmplifierLoop | None:
        """The op-amp's own loop (None when the circuit has several op-amps)."""
        if self.loop_gain is None:
            return None
        return _amplifier_loop(self.loop_gain, self.factored, self.ideal, self.opamp, self.noise_gain)


def _pad_sub(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """A - b for polynomials in descending powers (aligned at the constant term)."""
    n = max(len(a), len(b))
    out = np.zeros(n)
    out[n - len(a):] += a
    out[n - len(b):] -= b
    return out


def _pad_add(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """A + b for polynomials in descending powers."""
    n = max(len(a), len(b))
    out = np.zeros(n)
    out[n - len(a):] += a
    out[n - len(b):] += b
    return out


@cache
def _circuit_polys(circuit):
    """Compiled coefficient arrays of Δ(s, A) numerator/denominator for a circuit stage."""
    a_sym = sp.Symbol("A_opamp")
    h = circuit.transfer(opamp_gain=a_sym)
    num, den = sp.fraction(sp.cancel(sp.together(h)))
    syms = tuple(sorted(h.free_symbols - {S, a_sym}, key=lambda x: x.name))

    def grid(expr):
        p = sp.Poly(sp.expand(expr), S, a_sym)
        ds, da = p.degree(S), p.degree(a_sym)
        cells = [[p.coeff_monomial(S**i * a_sym**k) for i in range(ds, -1, -1)] for k in range(da + 1)]
        return cells

    ng, dg = grid(num), grid(den)
    flat = [c for row in ng + dg for c in row]
    fn = sp.lambdify(syms, flat, modules="math")
    shape = ([len(r) for r in ng], [len(r) for r in dg])
    return tuple(x.name for x in syms), fn, shape


def _circuit_actual(stage, values, a_num, a_den, n_opamps):
    names, fn, (nshape, dshape) = _circuit_polys(stage.circuit)
    flat = fn(*(values[n] for n in names))
    rows, k = [], 0
    for length in nshape + dshape:
        rows.append(np.array(flat[k : k + length], dtype=float))
        k += length
    nrows, drows = rows[: len(nshape)], rows[len(nshape) :]
    m = max(len(nrows), len(drows)) - 1

    def combine(polys):
        out = np.zeros(1)
        for k, p in enumerate(polys):
            term = p
            for _ in range(k):
                term = np.convolve(term, a_num)
            for _ in range(m - k):
                term = np.convolve(term, a_den)
            out = _pad_add(out, term)
        return np.trim_zeros(out, "f")

    num, den = combine(nrows), combine(drows)
    loop = None
    if n_opamps == 1 and len(drows) == 2:
        # Δ = Δ0 + A·Δ1  →  T = A·Δ1/Δ0 (the op-amp's return ratio).
        loop = (np.convolve(a_num, drows[1]), np.convolve(a_den, drows[0]))
    return (num, den), loop


def actual_stage(stage, result: TransferResult, opamp: OpAmp) -> ActualStage:
    """The stage's response with a real op-amp, and the amplifier's own loop.

    Parameters
    ----------
    stage : InvertingStage, NonInvertingStage or CircuitStage
    result : TransferResult
        The ideal transfer function at the current values.
    opamp : OpAmp
        A finite model (``single_pole`` or ``two_pole``).

    Raises
    ------
    AnalysisError
        The op-amp is ideal.
    """
    if opamp.is_ideal:
        raise AnalysisError("the op-amp is ideal; there is no actual response to compute")
    a_num, a_den = opamp.factored().tf()
    ideal = result.factored
    nh, dh = ideal.tf()
    if stage.kind in ("inverting", "noninverting"):
        ngn = _pad_sub(dh, nh) if stage.kind == "inverting" else nh
        act = (np.convolve(nh, a_num), _pad_add(np.convolve(dh, a_num), np.convolve(ngn, a_den)))
        return ActualStage(factored_from_tf(*act), ideal, opamp, noise_gain_tf=(ngn, dh))
    act, loop_tf = _circuit_actual(stage, result.values, a_num, a_den, len(stage.circuit.opamps))
    return ActualStage(factored_from_tf(*act), ideal, opamp, loop_gain_tf=loop_tf)


def _band(*fns: FactoredNumeric, extra_hz: tuple[float, ...] = ()) -> tuple[float, float]:
    """Where the actual response is compared with the ideal one, Hz.

    :func:`loopcraft.analysis.band.departure_search_band_hz`: far below the corners too,
    as a finite A0 shows up decades below them (integrators).
    """
    return departure_search_band_hz(*fns, extra_hz=extra_hz)


def _loop_search_band(loop: FactoredNumeric, f_lo_hz: float, f_hi_hz: float) -> tuple[float, float]:
    """The band ``f_lo_hz … f_hi_hz`` (Hz) widened to the loop's own crossing search band.

    See :func:`loopcraft.analysis.band.crossing_search_band_hz`; a loop with no frequency
    scale of its own keeps the given band.
    """
    try:
        return union_band_hz((f_lo_hz, f_hi_hz), crossing_search_band_hz(loop))
    except AnalysisError:
        return f_lo_hz, f_hi_hz


def _departs_hz(
    actual: FactoredNumeric, ideal: FactoredNumeric, f_lo: float, f_hi: float
) -> tuple[float | None, float | None]:
    """(above, below): where |H_actual/H_ideal| leaves 1 ± 1 dB going up and down from best agreement."""
    f = np.logspace(math.log10(f_lo), math.log10(f_hi), int(40 * math.log10(f_hi / f_lo)) + 2)
    dev = np.abs(20 * np.log10(np.abs(actual.response(f) / ideal.response(f))))
    i0 = int(np.argmin(dev))

    def g(x: float) -> float:
        r = actual.response(np.array([x]))[0] / ideal.response(np.array([x]))[0]
        return abs(20 * math.log10(abs(r))) - DEPART_DB

    def edge(indices) -> float | None:
        prev = i0
        for i in indices:
            if dev[i] > DEPART_DB:
                a, b = sorted((f[prev], f[i]))
                return float(brentq(g, a, b, xtol=1e-12 * b)) if dev[prev] <= DEPART_DB else float(f[i])
            prev = i
        return None

    return edge(range(i0 + 1, len(f))), edge(range(i0 - 1, -1, -1))


def _amplifier_loop(
    loop: FactoredNumeric, actual: FactoredNumeric, ideal: FactoredNumeric, opamp: OpAmp, ng: FactoredNumeric | None
) -> AmplifierLoop:
    f_lo, f_hi = _band(loop, ideal, extra_hz=(opamp.gbw_hz, opamp.dominant_pole_hz))
    s_lo, s_hi = _loop_search_band(loop, f_lo, f_hi)
    margins = loop_margins_factored(loop, s_lo, s_hi, points_per_decade=MARGIN_GRID_PER_DECADE)
    warnings: list[str] = []
    fc = pm = roc = None
    # Judge stability at the crossings where |T| falls through 1 (a rising crossing, as
    # below an integrator's finite-A0 corner, is not where the loop runs out of gain).
    falling = [c for c in margins.crossovers if c.slope_db_per_decade < 0]
    if falling:
        last = falling[-1]
        fc, pm = last.f_hz, last.phase_margin_deg
        s_a = slope_db_per_decade(opamp.factored().evaluate, fc)
        s_n = slope_db_per_decade(ng.evaluate, fc) if ng is not None else s_a - last.slope_db_per_decade
        roc = abs(s_a - s_n)
        worst = min(c.phase_margin_deg for c in falling)
        if worst <= 0:
            warnings.append(f"the stage will oscillate: amplifier-loop phase margin {worst:.1f}° at {fc:.4g} Hz")
        elif worst < 45:
            warnings.append(
                f"the stage will ring: amplifier-loop phase margin {worst:.1f}° at {fc:.4g} Hz "
                f"(rate of closure {roc:.0f} dB/decade)"
            )
    else:
        warnings.append("the amplifier loop gain never falls through unity in the analysed band")
    # The verdict from the poles of the stage as built (the amplifier loop's closed loop),
    # not from the margins: a margin read on the wrong branch must not hide an oscillator.
    poles = actual.pole_roots()
    n_rhp = int(np.sum(poles.real > 1e-9 * np.abs(poles)))
    if n_rhp:
        warnings.insert(0, f"UNSTABLE: the stage as built has {n_rhp} pole{'s' if n_rhp != 1 else ''} in the right "
                           "half-plane with this op-amp (it will oscillate or latch)")
    above, below = _departs_hz(actual, ideal, f_lo, f_hi)
    return AmplifierLoop(loop, margins, fc, pm, roc, above, below, tuple(warnings), n_rhp)
