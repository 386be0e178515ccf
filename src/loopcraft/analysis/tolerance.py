"""Tolerance spread: the ``tolerances`` section, Monte Carlo, closed-loop stability and worst case.

The design-file section::

    "tolerances": {"R*": "1%", "C*": "5%", "R2": "0.1%", "gbw": "30%",
                   "distribution": "uniform"}

* Keys other than ``gbw`` and ``distribution`` are designators or glob
  patterns over designators (:func:`fnmatch.fnmatchcase`: ``*``, ``?``,
  ``[RC]``; case-sensitive). **Precedence**: an exact designator beats every
  pattern; among patterns the longer pattern text wins (``"R1*"`` beats
  ``"R*"``); two equally long patterns that match the same part with
  different tolerances are an error. A part no key matches is exact (0).
* A tolerance is percent text (``"1%"``, ``"0.1 %"``, ``"±5%"``) or a fraction
  (``0.01``), within 0 … 50 %.
* ``gbw`` spreads the op-amp's gain-bandwidth product (its dominant pole; A0
  and the second pole stay fixed). It needs a real (non-ideal) op-amp.
* ``distribution``: ``"uniform"`` (x = x0·(1 + t·U), U uniform on [-1, 1]) or
  ``"normal"`` (x = x0·(1 + (t/3)·Z), Z standard normal: the tolerance is 3σ,
  untruncated). The default is uniform.

Monte Carlo (:func:`monte_carlo`) draws every part from one seeded
``numpy.random.default_rng(seed)`` stream (a samples × (parts + 1) matrix, the
parts in the derivation's order, then the GBW column; parts with zero
tolerance consume their column too, so changing one tolerance does not
reshuffle the others) and evaluates all samples at once:

* the factor coefficients of the derivation (compiled once per topology with
  ``sympy.lambdify`` for numpy) give each sample's corners — first- and
  second-order factors in closed form, higher-order ones from batched
  companion-matrix eigenvalues (frequency-scaled, Newton-polished);
* the stage as built — ``H_act = H/(1 + Gn/A)`` with ``Gn = 1 - H`` (inverting),
  ``Gn = H`` (non-inverting), or the circuit's own polynomials in A — is
  formed as one numerator and one denominator polynomial per sample and
  evaluated on the grid by Horner's rule in ω² (real arithmetic; s = jω). For
  a product of d factors with real roots the relative rounding error of this
  evaluation stays within about ``2d·2^(d/2)·eps`` (Horner's error bound
  ``γ_2d·Σ|c_k||s|^k / |p(s)|``: Higham, "Accuracy and Stability of Numerical
  Algorithms", 2nd ed., 2002, ch. 5), and grows like Q for a resonant pair;
* the loop ``L = P·k_fb·(∓H_act)`` (sign convention of :mod:`loopcraft.analysis.loop`);
* phases: each sample's phase is the nominal analytic phase of the stage as
  built (:func:`loopcraft.numeric.asymptote.exact_phase_deg` of its factored form, the
  branch every other view shows) plus the sample's deviation from it wrapped
  into ±180°. This needs no unwrapping along frequency, so a sharp resonance
  costs no accuracy. A sample that strays more than 144° from the nominal
  phase somewhere is unwrapped along frequency instead (and is then subject to
  the grid limit below).

Crossings per sample: *every* sign change of ``20·log10|L|`` and every passage
of the continuous loop phase through -180° + k·360° between neighbouring grid
points is taken, its position first interpolated linearly in log f and then
refined by a vectorized regula falsi (Illinois) on the exact loop value, to
about 1e-13 decade. The crossover reported is the highest gain crossover
(the loop's bandwidth), the phase margin the minimum over all gain
crossovers, the gain margin the minimum over all phase crossovers (+inf when
the phase never reaches -180° in the band). **Grid-resolution limit**: two
crossings closer together than one grid step (a narrow resonant peak just
touching 0 dB, or the phase of one just touching -180°) are not seen, and a
bracket across which the loop phase moves by 180° or more (a resonant pair
with Q above about ``0.68/Δ``, Δ the grid step in decades: Q ≈ 40 on the
default 500 points over eight decades) may be refined to the wrong point; use
a denser ``f_hz`` there.

Closed-loop stability per sample (with a plant): the loop is L = N/D with
N = k_fb·(∓1)·N_P·N_H and D = D_P·D_H (the stage as built, sign convention of
:mod:`loopcraft.analysis.loop`); the closed loop is stable iff every root of D + N —
after cancelling a common factor s^k of N and D — has a negative real part,
roots on the imaginary axis (the origin included) counting as not stable.
Each sample's roots are refined from the nominal design's by Bairstow's method
(quadratic factors, so a complex pair may split into two real roots) and
Newton's, on the frequency-scaled polynomial, in real arithmetic; an
inclusion disc around each root (radius d·|p/p'| plus the evaluation's
rounding bound) must be disjoint from the others, which proves that every
root has been found once. Samples where that fails take the batched
companion-matrix eigenvalues instead (Newton-polished). A root counts as not
stable when its disc reaches Re >= -1e-9·|root| (the safe side of the axis).
The roots are those of the computed coefficients of D + N: a loop whose
closed-loop poles sit within about 1e-9·|pole| of the axis, or whose
coefficients lose many digits to cancellation in D + N, is reported unstable
rather than stable. An unstable sample fails every spec (the implicit item
``"stable"`` of :func:`loopcraft.checks.spec.sample_pass`).

Worst case (:func:`worst_case`), in two stages:

1. **Vertices and nominal.** Every corner of the tolerance box (each parameter
   at ±t; for the normal distribution ±t = ±3σ) when at most 12 parameters
   are toleranced, else a sensitivity-guided vertex pair per quantity; the
   nominal point is always a candidate, so a reported minimum is never above
   the nominal value nor a maximum below it. Vertices give the exact extremes
   of quantities that are monotonic in each parameter over the box (e.g. every
   corner formula that is a product of powers of the parts).
2. **Interior search** (``search=True``, the default). 128 seeded uniform
   points in the box are evaluated; then, per quantity and direction (min and
   max), a bounded compass (pattern) search in the normalized box
   x = x0·(1 + t·z), z in [-1, 1]^n, starts from the best vertex, the best
   random point, and the nominal point when no vertex beats it. Each round
   polls z ± h·e_k, the last move repeated and a step along the box-projected
   descent direction estimated from the polls; h doubles after a move and
   halves after a failed round, down to 1e-3 (at most 60 rounds). All polls
   of a round are one batched evaluation; corners and DC gain are searched
   without the frequency grid. Every point evaluated is a candidate.

Each :class:`Extreme` says where its value lies: ``"corner"`` (every
parameter at an end), ``"face"`` (some at an end) or ``"interior"`` (none;
the nominal point is interior), with the normalized position and the
values. With a plant, a point whose closed loop is not stable counts as
phase and gain margin -inf, so the minimum margin of a box that holds an
unstable point is -inf, flagged ``min_stable=False``.

**Limits.** The search is local: an interior extreme in a separate basin,
not reached from any of the starts, can still be missed, and so can a
narrow one between random points. A move must gain at least 0.1 % of the
quantity's spread over the box per unit of normalized step (so that the
search does not creep along flat ridges): a reported extreme can fall short
of a nearly flat local extreme by about that much (a few tenths of a percent
of the spread). Quantities with jumps (the highest crossover when another
crossing appears, a margin when the worst crossing switches) are searched
like any other, without guarantees. The magnitude envelopes of
:class:`WorstCase` come from the vertices only. The frequency-grid limit of
the Monte Carlo applies to every evaluated point.
"""

from __future__ import annotations

import fnmatch
import math
import os
import re
import threading
from collections.abc import Callable, Mapping
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from functools import lru_cache
from numbers import Integral, Real
from typing import Any

import numpy as np
import sympy as sp

from ..errors import AnalysisError, DesignFileError
from ..model.spec_section import parse_spec, sample_pass
from ..numeric.asymptote import exact_mag_db, exact_phase_deg
from ..numeric.evaluator import compile_derivation
from ..numeric.factored import label_sort_key
from ..numeric.factors import factored_from_tf
from ..symbolic.derivation import derive
from ..symbolic.symbols import S, component_symbol
from .band import crossing_search_band_hz, display_band_hz
from .loop import MARGIN_GRID_PER_DECADE, loop_sign
from .margins import loop_margins_factored

__all__ = [
    "DISTRIBUTIONS",
    "MAX_EXHAUSTIVE",
    "ToleranceSet",
    "Envelope",
    "Spread",
    "Batch",
    "Extreme",
    "WorstCase",
    "parse_tolerances",
    "validate_tolerances",
    "tolerances_for",
    "evaluate_batch",
    "monte_carlo",
    "worst_case",
]

#: Accepted values of the ``distribution`` key.
DISTRIBUTIONS = ("uniform", "normal")

#: Up to this many toleranced parameters, :func:`worst_case` evaluates all 2^n corners.
MAX_EXHAUSTIVE = 12

#: Largest tolerance accepted, as a fraction.
MAX_TOLERANCE = 0.5

#: Upper limit of samples × frequencies held in memory (two float64 arrays of this size).
MAX_CELLS = 50_000_000

_TWO_PI = 2.0 * math.pi
_RESERVED = ("gbw", "distribution")
_GLOB = frozenset("*?[]!")
_KEY_RE = re.compile(r"[RCL*?\[][A-Za-z0-9_*?\[\]!\-]*")
_PERCENT_RE = re.compile(r"(?:±|\+/-|\+-)?\s*(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)\s*%")
_CHUNK = 128
_DEFAULT_POINTS = 500  # as loopcraft.analysis.Analyzer
_DBK = 10.0 / math.log(10.0)  # dB per unit of ln|H|²
_WRAP_GUARD = 0.4  # turns: a sample this far from the nominal phase is unwrapped along frequency


# =========================================================================== the section


@dataclass(frozen=True)
class ToleranceSet:
    """A parsed ``tolerances`` section.

    Parameters
    ----------
    by_component : mapping of str to float
        Tolerance of every part (fraction; 0 for parts no key matches).
    gbw : float
        Tolerance of the op-amp's gain-bandwidth product (fraction; 0 if not given).
    distribution : {"uniform", "normal"}
        The sampling distribution (for ``"normal"`` the tolerance is 3σ).
    sources : mapping of str to str or None
        For each part, the key that set its tolerance (None when no key matched).
    """

    by_component: Mapping[str, float]
    gbw: float = 0.0
    distribution: str = "uniform"
    sources: Mapping[str, str | None] = field(default_factory=dict)


def _fraction(value: Any, where: str) -> float:
    """A tolerance as a fraction in 0 … 0.5 from "1%" text or a number."""
    from .._numbers import MAX_NUMBER_TEXT, real_float, shown

    if isinstance(value, bool) or not isinstance(value, Real | str):
        raise DesignFileError(f"expected percent text such as '1%' or a fraction such as 0.01 (got {shown(value)})",
                              where)
    if isinstance(value, str):
        m = _PERCENT_RE.fullmatch(value.strip()) if len(value) <= MAX_NUMBER_TEXT else None
        if m is None:
            raise DesignFileError(f"cannot read {shown(value)} as a tolerance (expected percent text such as '1%', "
                                  "'0.1 %' or a fraction such as 0.01)", where)
        x = float(m["num"]) / 100.0
    else:
        x = real_float(value)
    if not (math.isfinite(x) and 0.0 <= x <= MAX_TOLERANCE):
        hint = ""
        if isinstance(value, Real) and 1.0 <= x <= 50.0:
            hint = f"; a number is a fraction, so write {x / 100:g} or '{x:g}%' for {x:g} %"
        raise DesignFileError(f"tolerance {shown(value)} is outside 0 … 50 %{hint}", where)
    return x


def parse_tolerances(tol: Any, names: tuple[str, ...] | list[str], key_path: str = "tolerances") -> ToleranceSet:
    """Parse and validate a ``tolerances`` section.

    Parameters
    ----------
    tol : mapping
        The section (see the module docstring).
    names : sequence of str
        The stage's designators.
    key_path : str
        Where the section sits, for error messages.

    Returns
    -------
    ToleranceSet

    Raises
    ------
    DesignFileError
        A non-mapping section, an unknown key, a designator or pattern that
        matches no element, unreadable text, a tolerance outside 0 … 50 %, an
        unknown distribution, or two equally specific patterns that disagree;
        the key path names the key (``"tolerances.C*"``).
    """
    from .._numbers import shown

    if isinstance(tol, ToleranceSet):
        return tol
    if not isinstance(tol, Mapping):
        raise DesignFileError(f"expected an object of designator or pattern: tolerance (got {type(tol).__name__} "
                              f"{shown(tol)})", key_path)
    names = tuple(names)
    dist = "uniform"
    gbw = 0.0
    rules: list[tuple[str, float, bool]] = []  # (key, fraction, exact)
    for key, value in tol.items():
        where = f"{key_path}.{key}"
        if key == "distribution":
            if value not in DISTRIBUTIONS:
                raise DesignFileError(f"unknown distribution {shown(value)} (expected one of "
                                      f"{', '.join(DISTRIBUTIONS)}; for 'normal' the tolerance is 3σ)", where)
            dist = value
            continue
        if key == "gbw":
            gbw = _fraction(value, where)
            continue
        if not isinstance(key, str) or _KEY_RE.fullmatch(key) is None:
            raise DesignFileError(f"unknown key {shown(key)} (expected a designator or a glob pattern over designators "
                                  "such as 'R*' or 'C[12]', or one of 'gbw', 'distribution')", where)
        frac = _fraction(value, where)
        exact = not (_GLOB & set(key))
        if exact:
            if key not in names:
                raise DesignFileError(f"no element {shown(key)} in the stage (elements: {', '.join(names)})", where)
        elif not any(fnmatch.fnmatchcase(n, key) for n in names):
            raise DesignFileError(f"pattern {shown(key)} matches no element (elements: {', '.join(names)})", where)
        rules.append((key, frac, exact))
    by: dict[str, float] = {}
    src: dict[str, str | None] = {}
    for n in names:
        hits = [(exact, len(k), k, f) for k, f, exact in rules if (k == n if exact else fnmatch.fnmatchcase(n, k))]
        if not hits:
            by[n], src[n] = 0.0, None
            continue
        hits.sort(key=lambda h: (h[0], h[1]), reverse=True)
        best = hits[0]
        for other in hits[1:]:
            if (other[0], other[1]) != (best[0], best[1]):
                break
            if other[3] != best[3]:
                raise DesignFileError(
                    f"patterns {best[2]!r} and {other[2]!r} are equally specific for {n} and give different "
                    f"tolerances ({100 * best[3]:g} % and {100 * other[3]:g} %); make one longer or list {n} by name",
                    f"{key_path}.{other[2]}")
        by[n], src[n] = best[3], best[2]
    return ToleranceSet(by, gbw, dist, src)


def validate_tolerances(tol: Any, names: tuple[str, ...] | list[str], key_path: str = "tolerances") -> None:
    """Validate a ``tolerances`` section; see :func:`parse_tolerances` for the errors raised."""
    parse_tolerances(tol, names, key_path)


def tolerances_for(design) -> dict[str, float]:
    """Tolerance of every part of a design as a fraction (0 for parts no key matches, or with no section).

    Parameters
    ----------
    design : Design

    Returns
    -------
    dict of str to float
        Designator → tolerance (0.01 for 1 %), in the stage's order.
    """
    names = design.stage.component_names
    if design.tolerances is None:
        return {n: 0.0 for n in names}
    return dict(parse_tolerances(design.tolerances, names, "tolerances").by_component)


# =========================================================================== results


@dataclass(frozen=True, eq=False)
class Envelope:
    """Per-frequency statistics of a curve over the samples.

    Parameters
    ----------
    min, max : ndarray
        Smallest and largest value at each frequency.
    p1, p50, p99 : ndarray
        1st, 50th and 99th percentiles (linear interpolation, as ``numpy.percentile``).
    """

    min: np.ndarray
    max: np.ndarray
    p1: np.ndarray
    p50: np.ndarray
    p99: np.ndarray

    def shifted(self, offset: np.ndarray) -> Envelope:
        """The envelope of the curve plus a per-frequency constant (order statistics commute with it)."""
        return Envelope(self.min + offset, self.max + offset, self.p1 + offset, self.p50 + offset, self.p99 + offset)

    def to_dict(self) -> dict[str, list[float]]:
        """JSON-ready lists."""
        return {k: getattr(self, k).tolist() for k in ("min", "max", "p1", "p50", "p99")}


_UNITS = {"crossover_hz": "Hz", "phase_margin_deg": "deg", "gain_margin_db": "dB", "dc_gain_db": "dB"}


def _unit(name: str) -> str:
    if name.startswith("ω"):
        return "Hz"
    if name.startswith("Q"):
        return ""
    return _UNITS.get(name, "")


def _json(x: float) -> float | None:
    return float(x) if x is not None and math.isfinite(x) else None


def _summary(x: np.ndarray, nominal: float | None) -> dict[str, Any]:
    x = np.asarray(x, dtype=float)
    fin = x[np.isfinite(x)]
    out: dict[str, Any] = {"nominal": _json(nominal) if nominal is not None else None, "n": int(x.size),
                           "n_undefined": int(np.isnan(x).sum()), "n_infinite": int(np.isinf(x).sum())}
    if fin.size:
        p1, p50, p99 = np.percentile(fin, [1, 50, 99])
        out.update(min=float(fin.min()), max=float(fin.max()), mean=float(fin.mean()),
                   std=float(fin.std(ddof=1)) if fin.size > 1 else 0.0, p1=float(p1), p50=float(p50), p99=float(p99))
    else:
        out.update(min=None, max=None, mean=None, std=None, p1=None, p50=None, p99=None)
    return out


@dataclass(frozen=True, eq=False, repr=False)
class Spread:
    """The result of :func:`monte_carlo`.

    Attributes
    ----------
    f_hz : ndarray
        Frequency grid, Hz.
    samples, seed : int
    distribution : str
    tolerances : mapping of str to float
        Fraction per toleranced parameter (parts, and ``"gbw"`` when spread).
    values : mapping of str to ndarray
        The drawn values per sample: parts in SI base units, ``"gbw_hz"`` in Hz (when spread).
    stage_is_actual : bool
        True when the stage curves include the real op-amp.
    stage_mag_db, stage_phase_deg : Envelope
        The stage as built (dB; continuous phase in degrees).
    loop_mag_db, loop_phase_deg : Envelope or None
        The loop gain (None without a plant).
    corners : mapping of str to ndarray
        Per-sample corners by factored-form label: ω rows (``"ωz1"``, ``"ω0p1"``) in **Hz**,
        Q rows plain. The labels are the factored form's, fixed per topology by each corner's
        formula, so a label follows its formula in every sample.
    dc_gain_db : ndarray
        ``20·log10|H(0)|`` of the stage as built (±inf with an origin pole/zero and no real op-amp).
    crossover_hz, phase_margin_deg, gain_margin_db : ndarray or None
        Highest gain crossover (Hz, NaN if none), worst phase margin (degrees, NaN if no
        crossover), worst gain margin (dB, +inf if the phase never reaches -180°); None without a plant.
    n_crossovers : ndarray or None
        Number of gain crossovers found per sample.
    nominal : mapping of str to float
        Every quantity at nominal values (same definitions, same grid).
    yield_fraction : float or None
        Fraction of samples meeting every spec item (None without a spec).
    spec_passed : ndarray of bool or None
        Per-sample pass mask against the spec.
    item_yield : mapping of str to float or None
        Pass fraction of each spec item (with a plant, the implicit item ``"stable"`` too).
    n_rhp : ndarray of int or None
        Per sample, the closed-loop roots (of D + N for L = N/D, a common s^k cancelled) that are
        not strictly stable: Re >= -1e-9·|root|, origin and axis roots included (None without a plant).
    stable : ndarray of bool or None
        ``n_rhp == 0``: the closed loop of that sample is stable. An unstable sample fails any spec,
        whatever its margins.
    nominal_stable : bool or None
        The same at nominal values.
    """

    f_hz: np.ndarray
    samples: int
    seed: int
    distribution: str
    tolerances: Mapping[str, float]
    values: Mapping[str, np.ndarray]
    stage_is_actual: bool
    stage_mag_db: Envelope
    stage_phase_deg: Envelope
    loop_mag_db: Envelope | None
    loop_phase_deg: Envelope | None
    corners: Mapping[str, np.ndarray]
    dc_gain_db: np.ndarray
    crossover_hz: np.ndarray | None
    phase_margin_deg: np.ndarray | None
    gain_margin_db: np.ndarray | None
    n_crossovers: np.ndarray | None
    nominal: Mapping[str, float]
    yield_fraction: float | None = None
    spec_passed: np.ndarray | None = None
    item_yield: Mapping[str, float] | None = None
    n_rhp: np.ndarray | None = None
    stable: np.ndarray | None = None
    nominal_stable: bool | None = None

    def __repr__(self) -> str:
        y = "" if self.yield_fraction is None else f", yield={self.yield_fraction:.4f}"
        u = "" if self.stable is None else f", unstable={self.unstable_fraction:.4f}"
        return (f"Spread(samples={self.samples}, seed={self.seed}, distribution={self.distribution!r}, "
                f"frequencies={self.f_hz.size}, quantities={list(self.quantities)}{u}{y})")

    @property
    def unstable_fraction(self) -> float | None:
        """Fraction of samples whose closed loop is not stable (None without a plant)."""
        return None if self.stable is None else float(1.0 - self.stable.mean())

    @property
    def quantities(self) -> dict[str, np.ndarray]:
        """Every per-sample scalar quantity by name (corners, dc gain, loop quantities)."""
        out = dict(self.corners)
        out["dc_gain_db"] = self.dc_gain_db
        for k in ("crossover_hz", "phase_margin_deg", "gain_margin_db"):
            v = getattr(self, k)
            if v is not None:
                out[k] = v
        return out

    def summary(self, name: str) -> dict[str, Any]:
        """min/max/mean/std/p1/p50/p99 (finite samples) and counts of undefined/infinite ones."""
        q = self.quantities
        if name not in q:
            raise AnalysisError(f"no quantity {name!r} in this spread (quantities: {', '.join(q)})")
        return {"unit": _unit(name), **_summary(q[name], self.nominal.get(name))}

    def to_dict(self, *, envelopes: bool = False) -> dict[str, Any]:
        """JSON-ready summary (non-finite numbers become None; envelopes as lists when asked)."""
        out: dict[str, Any] = {
            "samples": self.samples, "seed": self.seed, "distribution": self.distribution,
            "tolerances": dict(self.tolerances), "stage_is_actual": self.stage_is_actual,
            "quantities": {k: self.summary(k) for k in self.quantities},
            "yield": _json(self.yield_fraction) if self.yield_fraction is not None else None,
            "item_yield": dict(self.item_yield) if self.item_yield is not None else None,
            "unstable_fraction": self.unstable_fraction,
            "n_unstable": None if self.stable is None else int((~self.stable).sum()),
            "nominal_stable": self.nominal_stable,
        }
        if envelopes:
            out["f_hz"] = self.f_hz.tolist()
            out["envelopes"] = {k: getattr(self, k).to_dict() for k in
                                ("stage_mag_db", "stage_phase_deg", "loop_mag_db", "loop_phase_deg")
                                if getattr(self, k) is not None}
        return out


@dataclass(frozen=True, eq=False, repr=False)
class Batch:
    """Responses and quantities of explicitly given samples (:func:`evaluate_batch`).

    Attributes
    ----------
    f_hz : ndarray
        Frequencies, Hz.
    ideal : ndarray of complex, shape (samples, frequencies)
        The ideal stage H(j·2π·f).
    stage : ndarray of complex, shape (samples, frequencies)
        The stage as built (with the real op-amp when the design has one).
    stage_mag_db, stage_phase_deg : ndarray, shape (samples, frequencies)
        Its magnitude (dB) and continuous phase (degrees, nominal branch at f_hz[0]).
    loop : ndarray of complex or None
        L(j·2π·f) (None without a plant).
    loop_mag_db, loop_phase_deg : ndarray or None
    corners, dc_gain_db, crossover_hz, phase_margin_deg, gain_margin_db, n_crossovers, n_rhp, stable
        As in :class:`Spread`.
    """

    f_hz: np.ndarray
    ideal: np.ndarray
    stage: np.ndarray
    stage_mag_db: np.ndarray
    stage_phase_deg: np.ndarray
    loop: np.ndarray | None
    loop_mag_db: np.ndarray | None
    loop_phase_deg: np.ndarray | None
    corners: Mapping[str, np.ndarray]
    dc_gain_db: np.ndarray
    crossover_hz: np.ndarray | None
    phase_margin_deg: np.ndarray | None
    gain_margin_db: np.ndarray | None
    n_crossovers: np.ndarray | None
    n_rhp: np.ndarray | None = None
    stable: np.ndarray | None = None

    @property
    def unstable_fraction(self) -> float | None:
        """Fraction of samples whose closed loop is not stable (None without a plant)."""
        return None if self.stable is None else float(1.0 - self.stable.mean())

    def __repr__(self) -> str:
        u = "" if self.stable is None else f", unstable={self.unstable_fraction:.4f}"
        return (f"Batch(samples={self.stage.shape[0]}, frequencies={self.f_hz.size}, "
                f"corners={list(self.corners)}{u})")


@dataclass(frozen=True)
class Extreme:
    """The extreme values of one quantity over the tolerance box.

    Parameters
    ----------
    quantity : str
        ``"ωp1"``, ``"phase_margin_deg"`` …
    unit : str
        ``"Hz"``, ``"deg"``, ``"dB"`` or ``""``.
    nominal : float
        Value at nominal values.
    min, max : float
        Smallest and largest value found, the nominal value included, so ``min <= nominal <= max``
        whenever the nominal is defined (NaN when undefined at every point tried). A phase or
        gain margin is -inf at a point whose closed loop is not stable.
    min_values, max_values : mapping of str to float
        The toleranced parameters at that point (parts in SI base units, ``"gbw_hz"`` in Hz).
    min_signs, max_signs : mapping of str to int
        Per parameter -1 (at its low end), +1 (at its high end) or 0 (inside its range).
    n_undefined : int
        Vertices where the quantity is undefined (e.g. no crossover).
    min_location, max_location : {"corner", "face", "interior"}
        Where the point lies: a vertex of the box (every parameter at an end), on a face (some
        at an end), or inside (none at an end; the nominal point is inside).
    min_position, max_position : mapping of str to float
        The point in normalized units: x = x0·(1 + t·position), position in [-1, 1].
    min_stable, max_stable : bool or None
        Whether the closed loop is stable at that point (None without a plant).
    """

    quantity: str
    unit: str
    nominal: float
    min: float
    max: float
    min_values: Mapping[str, float]
    max_values: Mapping[str, float]
    min_signs: Mapping[str, int]
    max_signs: Mapping[str, int]
    n_undefined: int = 0
    min_location: str = "corner"
    max_location: str = "corner"
    min_position: Mapping[str, float] = field(default_factory=dict)
    max_position: Mapping[str, float] = field(default_factory=dict)
    min_stable: bool | None = None
    max_stable: bool | None = None

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (non-finite numbers become None; ``min_stable`` False tells an unstable -inf)."""
        return {"quantity": self.quantity, "unit": self.unit, "nominal": _json(self.nominal),
                "min": _json(self.min), "max": _json(self.max),
                "min_location": self.min_location, "max_location": self.max_location,
                "min_values": dict(self.min_values), "max_values": dict(self.max_values),
                "min_position": dict(self.min_position), "max_position": dict(self.max_position),
                "min_signs": dict(self.min_signs), "max_signs": dict(self.max_signs),
                "min_stable": self.min_stable, "max_stable": self.max_stable,
                "n_undefined": self.n_undefined}


@dataclass(frozen=True, eq=False, repr=False)
class WorstCase:
    """The result of :func:`worst_case`.

    Attributes
    ----------
    f_hz : ndarray
        Frequency grid, Hz.
    method : {"corners", "sensitivity"}
        The vertices tried: all 2^n corners, or one sensitivity-guided vertex pair per quantity.
    parameters : tuple of str
        The toleranced parameters (designators, and ``"gbw"``).
    tolerances : mapping of str to float
        Their tolerances (fractions; the vertices sit at ±t).
    n_evaluated : int
        Vertices evaluated.
    extremes : mapping of str to Extreme
        Per quantity (corners by label, ``dc_gain_db``, and with a plant
        ``crossover_hz``, ``phase_margin_deg``, ``gain_margin_db``).
    stage_mag_db_min, stage_mag_db_max : ndarray or None
        Per-frequency extremes of the stage magnitude over all corners (method "corners" only;
        not searched inside the box).
    loop_mag_db_min, loop_mag_db_max : ndarray or None
        The same for the loop (method "corners" with a plant).
    search : bool
        Whether the inside of the box was searched.
    n_searched : int
        Points evaluated by the search (random starts and polls), besides the vertices.
    nominal_stable : bool or None
        Whether the closed loop is stable at nominal values (None without a plant).
    n_unstable : int or None
        Vertices whose closed loop is not stable (None without a plant).
    unstable_found : bool or None
        Whether any point evaluated (nominal, vertex or search) had an unstable closed loop.
    """

    f_hz: np.ndarray
    method: str
    parameters: tuple[str, ...]
    tolerances: Mapping[str, float]
    n_evaluated: int
    extremes: Mapping[str, Extreme]
    stage_mag_db_min: np.ndarray | None = None
    stage_mag_db_max: np.ndarray | None = None
    loop_mag_db_min: np.ndarray | None = None
    loop_mag_db_max: np.ndarray | None = None
    search: bool = False
    n_searched: int = 0
    nominal_stable: bool | None = None
    n_unstable: int | None = None
    unstable_found: bool | None = None

    @property
    def unstable_fraction(self) -> float | None:
        """Fraction of the vertices whose closed loop is not stable (None without a plant)."""
        return None if self.n_unstable is None else self.n_unstable / self.n_evaluated

    def __repr__(self) -> str:
        rows = ", ".join(f"{k}: {e.min:.6g} ({e.min_location}) … {e.max:.6g} ({e.max_location})"
                         for k, e in self.extremes.items())
        st = "" if self.n_unstable is None else (f", unstable vertices={self.n_unstable}, "
                                                 f"unstable found={self.unstable_found}")
        return (f"WorstCase(method={self.method!r}, vertices={self.n_evaluated}, searched={self.n_searched}"
                f"{st}, {rows})")

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary."""
        return {"method": self.method, "parameters": list(self.parameters), "tolerances": dict(self.tolerances),
                "n_evaluated": self.n_evaluated, "search": self.search, "n_searched": self.n_searched,
                "nominal_stable": self.nominal_stable, "n_unstable": self.n_unstable,
                "unstable_fraction": self.unstable_fraction, "unstable_found": self.unstable_found,
                "extremes": {k: e.to_dict() for k, e in self.extremes.items()}}


# =========================================================================== compiled pieces


@dataclass(frozen=True)
class _Compiled:
    fn: Callable[..., list[Any]]
    layout: tuple[tuple[str, int, int, int], ...]  # role, degree, multiplicity, offset


@lru_cache(maxsize=64)
def _derive_stage(stage):
    return derive(stage)


def _derivation(design):
    """The design's derivation, cached per (immutable, hashable) stage."""
    try:
        return _derive_stage(design.stage)
    except TypeError:  # an unhashable stage: derive directly
        return design.derivation


@lru_cache(maxsize=64)
def _compiled(derivation) -> _Compiled:
    """Gain and factor coefficients as one numpy function of the part values (once per topology)."""
    exprs: list[sp.Expr] = [derivation.gain_expr]
    layout = []
    for f in derivation.factors:
        layout.append((f.role, f.degree, f.multiplicity, len(exprs)))
        exprs.extend(f.coefficients)
    fn = sp.lambdify(derivation.symbols, exprs, modules="numpy", cse=True)
    return _Compiled(fn, tuple(layout))


@lru_cache(maxsize=16)
def _circuit_grid(circuit, names: tuple[str, ...]):
    """Coefficients of num/den of a circuit stage as polynomials in s and the op-amp gain A."""
    a_sym = sp.Dummy("A")
    num, den = circuit.numerator_denominator(opamp_gain=a_sym)
    shapes = []
    flat: list[sp.Expr] = []
    for expr in (num, den):
        p = sp.Poly(sp.expand(expr), S, a_sym)
        ds, da = p.degree(S), p.degree(a_sym)
        shapes.append((da + 1, ds + 1))
        flat += [p.coeff_monomial(S**i * a_sym**k) for k in range(da + 1) for i in range(ds + 1)]
    syms = tuple(component_symbol(n) for n in names)
    fn = sp.lambdify(syms, flat, modules="numpy", cse=True)
    return fn, tuple(shapes)


# =========================================================================== batched algebra


def _rows(outputs: list[Any], n: int) -> np.ndarray:
    arr = np.empty((len(outputs), n))
    for i, v in enumerate(outputs):
        arr[i] = v
    return arr


def _pmul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Product of ascending coefficient arrays of shape (p, N) and (q, N)."""
    out = np.zeros((a.shape[0] + b.shape[0] - 1, max(a.shape[1], b.shape[1])))
    for i in range(a.shape[0]):
        out[i:i + b.shape[0]] += a[i] * b
    return out


def _padd(a: np.ndarray, b: np.ndarray, sign: float = 1.0) -> np.ndarray:
    n = max(a.shape[0], b.shape[0])
    out = np.zeros((n, max(a.shape[1], b.shape[1])))
    out[:a.shape[0]] += a
    out[:b.shape[0]] += sign * b
    return out


def _trim(c: np.ndarray) -> np.ndarray:
    """Drop leading (highest-power) coefficient rows that are zero in every sample."""
    k = c.shape[0]
    while k > 1 and not np.any(c[k - 1]):
        k -= 1
    return c[:k]


def _horner_c(c: np.ndarray, s: np.ndarray) -> np.ndarray:
    """p(s) for ascending coefficients c (p, K) at complex points s (K,)."""
    acc = c[-1].astype(complex)
    for k in range(c.shape[0] - 2, -1, -1):
        acc = acc * s + c[k]
    return acc


def _horner_into(c: np.ndarray, x: np.ndarray, out: np.ndarray) -> np.ndarray:
    """Σ c_k x^k on the grid into ``out``: c (m, nc), x (F, nc); a read-only broadcast when m == 1."""
    if c.shape[0] == 1:
        return np.broadcast_to(c[0], out.shape)
    np.multiply(x, c[-1], out=out)
    out += c[-2]
    for k in range(c.shape[0] - 3, -1, -1):
        out *= x
        out += c[k]
    return out


def _response(c_num: np.ndarray, c_den: np.ndarray, s: np.ndarray) -> np.ndarray:
    """num/den at complex s (F,) for ascending coefficients (p, N): shape (N, F)."""
    def ev(c):
        acc = np.broadcast_to(c[-1][:, None], (c.shape[1], s.size)).astype(complex)
        for k in range(c.shape[0] - 2, -1, -1):
            acc = acc * s[None, :] + c[k][:, None]
        return acc

    return ev(c_num) / ev(c_den)


def _batched_roots(a: np.ndarray) -> np.ndarray:
    """Roots (N, d) of 1 + a1·s + … + ad·s^d for ascending a of shape (d + 1, N), d >= 3.

    The variable is scaled, s = σ·x with σ = |a_d|^(-1/d), before the companion
    eigenvalues; two Newton steps on the scaled polynomial (kept where they
    reduce |p|) polish the roots.
    """
    d = a.shape[0] - 1
    sigma = np.abs(a[d]) ** (-1.0 / d)
    b = a * sigma[None, :] ** np.arange(d + 1)[:, None]  # b[d] = ±1
    mon = b / b[d]
    n = a.shape[1]
    comp = np.zeros((n, d, d))
    comp[:, 0, :] = -mon[d - 1::-1].T
    comp[:, np.arange(1, d), np.arange(d - 1)] = 1.0
    x = np.linalg.eigvals(comp)
    bc = b.T[:, :, None]  # (N, d+1, 1)

    def poly(xv):
        acc = np.broadcast_to(bc[:, d], xv.shape).astype(complex)
        dacc = np.zeros_like(acc)
        for k in range(d - 1, -1, -1):
            dacc = dacc * xv + acc
            acc = acc * xv + bc[:, k]
        return acc, dacc

    px, dpx = poly(x)
    for _ in range(2):
        ok = dpx != 0
        x_new = x - np.where(ok, px / np.where(ok, dpx, 1.0), 0.0)
        p_new, dp_new = poly(x_new)
        better = np.abs(p_new) < np.abs(px)
        x = np.where(better, x_new, x)
        px = np.where(better, p_new, px)
        dpx = np.where(better, dp_new, dpx)
    return x * sigma[:, None]


#: A closed-loop root with Re >= -STABILITY_REL·|root| counts as not stable (the safe side of the axis).
STABILITY_REL = 1e-9
_FACTOR_ITER = 6
_TIGHT = 1e-6
_STAB_CHUNK = 8192


def _poly_at(b: np.ndarray, x: np.ndarray):
    """p(x), p'(x) and rounding bounds for ascending b (d+1, M) at x (M, d).

    The bounds are Horner's running error bound ``γ·Σ|b_k||x|^k`` (Higham 2002, ch. 5) with a
    generous γ for complex arithmetic, and the same for the derivative.
    """
    d = b.shape[0] - 1
    bt = np.ascontiguousarray(b.T)  # (M, d+1)
    ab = np.abs(bt)
    ax = np.abs(x)
    acc = np.empty(x.shape, dtype=complex)
    acc[...] = bt[:, d, None]
    dacc = np.zeros_like(acc)
    mu = np.empty(x.shape)
    mu[...] = ab[:, d, None]
    dmu = np.zeros_like(mu)
    for k in range(d - 1, -1, -1):
        dacc *= x
        dacc += acc
        acc *= x
        acc += bt[:, k, None]
        dmu *= ax
        dmu += mu
        mu *= ax
        mu += ab[:, k, None]
    gamma = 8.0 * (d + 1) * np.finfo(float).eps
    mu *= gamma
    dmu *= gamma
    return acc, dacc, mu, dmu


def _inclusion_radii(b: np.ndarray, x: np.ndarray) -> np.ndarray:
    """Per approximate root x_i a radius r_i such that a root of b lies within r_i of x_i.

    p'/p(x) = Σ 1/(x - r_k), so some root lies within d·|p(x)/p'(x)| of x (a classical
    inclusion, e.g. Henrici, "Applied and Computational Complex Analysis", vol. 1, 1974; from
    memory); rounding errors of the evaluation are added to |p| and taken off |p'|. Infinite
    where |p'| cannot be bounded away from zero.
    """
    d = b.shape[0] - 1
    p, dp, e, de = _poly_at(b, x)
    lo = np.abs(dp) - de
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        r = np.where(lo > 0, d * (np.abs(p) + e) / np.where(lo > 0, lo, 1.0), np.inf)
    return np.where(np.isfinite(r), r, np.inf)


def _factor_start(roots: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Nominal roots (rad/s) as quadratic factors s² + U·s + V and real roots r.

    Complex pairs become quadratics; so do neighbouring real roots less than a factor 2 apart
    (a pair that may turn complex in a sample). Returns (U, V, r).
    """
    cplx = roots[roots.imag > 0]
    real = np.sort(roots[roots.imag == 0].real)
    us, vs = list(-2.0 * cplx.real), list(np.abs(cplx) ** 2)
    rest = []
    k = 0
    while k < real.size:
        if k + 1 < real.size and abs(real[k + 1] - real[k]) < 0.5 * max(abs(real[k]), abs(real[k + 1])):
            us.append(-(real[k] + real[k + 1]))
            vs.append(real[k] * real[k + 1])
            k += 2
        else:
            rest.append(real[k])
            k += 1
    return np.array(us), np.array(vs), np.array(rest)


def _bairstow(a: list[np.ndarray], u: np.ndarray, v: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Bairstow iterations for quadratic factors x² + u·x + v of Σ a[k]·x^k (a[k] of shape (M, 1))."""
    d = len(a) - 1
    for _ in range(_FACTOR_ITER):
        bn1 = bn2 = cn1 = cn2 = 0.0  # B[i+1], B[i+2], C[i+1], C[i+2]
        b1 = c1 = 0.0
        for i in range(d - 2, -1, -1):
            bi = a[i + 2] - u * bn1 - v * bn2
            ci = bn2 - u * cn1 - v * cn2
            if i == 1:
                b1, c1 = bi, ci
            bn2, bn1, cn2, cn1 = bn1, bi, cn1, ci
        b0, c0 = bn1, cn1
        cc = a[1] - u * b0 - v * b1
        dd = a[0] - v * b0
        g = b1 - u * c0 - v * c1
        h = b0 - v * c0
        det = v * g * g + h * (h - u * g)
        du = (g * dd - h * cc) / det
        dv = ((g * u - h) * dd - g * v * cc) / det
        u = u - du
        v = v - dv
    return u, v


def _refine_factors(b: np.ndarray, u: np.ndarray, v: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Roots (M, d) of ascending real b (d+1, M), refined from starting factors in real arithmetic.

    Quadratics x² + u·x + v (u, v of shape (M, Fq)) by Bairstow's method, real roots r (M, Fr)
    by Newton's. Each factor is refined against the whole polynomial (no deflation), so two may settle on the
    same factor: the inclusion discs of the result tell (see :func:`_certified`). A quadratic
    whose roots exceed 1 in magnitude is refined on the reversed polynomial (reciprocal roots),
    where the synthetic division does not grow. Bairstow's iteration as in e.g. Press et al.,
    "Numerical Recipes", 3rd ed., 2007, §9.5 (from memory).
    """
    d = b.shape[0] - 1
    a = [b[k][:, None] for k in range(d + 1)]
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        if u.shape[1]:
            big = np.abs(v[0]) > 1.0  # the same split for every sample: the start is shared
            uu, vv = u.copy(), v.copy()
            if (~big).any():
                uu[:, ~big], vv[:, ~big] = _bairstow(a, u[:, ~big], v[:, ~big])
            if big.any():
                ur, vr = _bairstow(a[::-1], u[:, big] / v[:, big], 1.0 / v[:, big])
                uu[:, big], vv[:, big] = ur / vr, 1.0 / vr
            u, v = uu, vv
        for _ in range(_FACTOR_ITER if r.shape[1] else 0):
            p = np.broadcast_to(a[d], r.shape).copy()
            dp = np.zeros_like(p)
            for k in range(d - 1, -1, -1):
                dp = dp * r + p
                p = p * r + a[k]
            r = r - p / dp
        disc = u * u - 4.0 * v
        sq = np.sqrt(np.abs(disc))
        q = -0.5 * (u + np.copysign(sq, u))
        re1 = np.where(disc >= 0, q, -0.5 * u)
        re2 = np.where(disc >= 0, v / q, -0.5 * u)
        im = np.where(disc >= 0, 0.0, 0.5 * sq)
    return np.concatenate([re1 + 1j * im, re2 - 1j * im, r.astype(complex)], axis=1)


def _certified(x: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Samples whose d inclusion discs are finite and pairwise disjoint (so each holds exactly one root)."""
    d = x.shape[1]
    ok = np.isfinite(r).all(axis=1) & np.isfinite(x).all(axis=1)
    xr = np.ascontiguousarray(x.real.T)
    xi = np.ascontiguousarray(x.imag.T)
    rt = np.ascontiguousarray(r.T)
    with np.errstate(invalid="ignore", over="ignore"):
        for i in range(d - 1):
            dist2 = np.square(xr[i + 1:] - xr[i])
            dist2 += np.square(xi[i + 1:] - xi[i])
            ok &= (dist2 > np.square(rt[i + 1:] + rt[i])).all(axis=0)
    return ok


def _not_stable(x: np.ndarray, r: np.ndarray) -> np.ndarray:
    """Per sample, roots whose inclusion disc reaches Re >= -STABILITY_REL·|root| (counted as not stable)."""
    with np.errstate(invalid="ignore"):
        bad = (x.real + r >= -STABILITY_REL * (np.abs(x) + r)) | ~np.isfinite(r) | ~np.isfinite(x)
    return bad.sum(axis=1)


def _rhp_scalar(c: np.ndarray) -> int:
    """Not-stable root count of one ascending polynomial (numpy.roots; exact origin roots counted)."""
    if not np.all(np.isfinite(c)):
        return max(c.size - 1, 1)
    nz = np.flatnonzero(c)
    if nz.size == 0:
        return 1  # 1 + L vanishes identically: no closed loop to speak of
    k0 = int(nz[0])
    core = c[k0:int(nz[-1]) + 1]
    r = np.roots(core[::-1]) if core.size > 1 else np.zeros(0, dtype=complex)
    return k0 + int(np.sum(r.real >= -STABILITY_REL * np.abs(r)))


def _closed_loop_count(c: np.ndarray, start: np.ndarray | None = None) -> np.ndarray:
    """Closed-loop roots not strictly in the left half plane, per sample, for ascending c (m+1, N).

    Exact zeros in the lowest rows (in every sample) are roots at the origin and count. The rest
    is normalized and frequency-scaled (s = σ·x, σ = |a_d|^(-1/d)); its roots are refined from
    ``start`` (roots in rad/s, e.g. the nominal design's) by :func:`_refine_factors` when given.
    Samples whose inclusion discs are not finite, pairwise disjoint and within 1e-6·|root| —
    and every sample without a start — take the batched companion eigenvalues
    (:func:`_batched_roots`, Newton-polished). A root counts as not stable when its inclusion
    disc reaches ``Re >= -STABILITY_REL·|root|``. Samples with a zero constant or leading
    coefficient, or non-finite ones, go through numpy.roots one by one.
    """
    n = c.shape[1]
    k0 = 0
    while k0 < c.shape[0] - 1 and not np.any(c[k0]):
        k0 += 1
    c = _trim(c[k0:])
    count = np.full(n, k0, dtype=np.int64)
    d = c.shape[0] - 1
    good = np.isfinite(c).all(axis=0) & (c[0] != 0) & (c[d] != 0)
    if d == 0:
        count[~good] += 1
        return count
    for i in np.flatnonzero(~good):
        count[i] += _rhp_scalar(c[:, i])
    if start is not None:
        start = _factor_start(start) if start.size == d and np.all(np.isfinite(start)) else None
    for lo in range(0, n, _STAB_CHUNK):
        idx = lo + np.flatnonzero(good[lo:lo + _STAB_CHUNK])
        if idx.size == 0:
            continue
        a = c[:, idx] / c[0, idx]
        sigma = np.abs(a[d]) ** (-1.0 / d)
        b = a * sigma[None, :] ** np.arange(d + 1)[:, None]
        if start is not None:
            su, sv, sr = start
            x = _refine_factors(b, su[None, :] / sigma[:, None], sv[None, :] / sigma[:, None] ** 2,
                                sr[None, :] / sigma[:, None])
            r = _inclusion_radii(b, x)
            # Certified, and every root pinned to 1e-6 relative (so its side of the axis is clear).
            with np.errstate(invalid="ignore"):
                tight = (r <= _TIGHT * np.abs(x)).all(axis=1)
            redo = np.flatnonzero(~(_certified(x, r) & tight))
        else:
            x = np.empty((idx.size, d), dtype=complex)
            r = np.empty((idx.size, d))
            redo = np.arange(idx.size)
        if redo.size:
            xe = _batched_roots(a[:, redo]) / sigma[redo, None]
            x[redo] = xe
            r[redo] = _inclusion_radii(b[:, redo], xe)
        count[idx] += _not_stable(x, r)
    return count


def _illinois(fun: Callable[[np.ndarray, np.ndarray], np.ndarray], ua: np.ndarray, ub: np.ndarray,
              fa: np.ndarray, fb: np.ndarray, tol: float = 1e-13, max_iter: int = 80) -> np.ndarray:
    """Vectorized regula falsi (Illinois variant) for roots bracketed by [ua, ub] with fa·fb <= 0.

    ``fun(idx, u)`` evaluates the functions of the brackets ``idx`` at ``u``.
    """
    ua, ub, fa, fb = (np.array(v, dtype=float) for v in (ua, ub, fa, fb))
    result = np.where(fa == 0, ua, ub)
    active = (fa != 0) & (fb != 0)
    for _ in range(max_iter):
        idx = np.nonzero(active)[0]
        if idx.size == 0:
            break
        a, b, fa_i, fb_i = ua[idx], ub[idx], fa[idx], fb[idx]
        c = b - fb_i * (b - a) / (fb_i - fa_i)
        fc = fun(idx, c)
        same = fc * fb_i > 0
        ua[idx] = np.where(same, a, b)
        fa[idx] = np.where(same, 0.5 * fa_i, fb_i)
        ub[idx] = c
        fb[idx] = fc
        result[idx] = c
        done = (np.abs(c - b) <= tol) | (fc == 0) | ~np.isfinite(fc)
        active[idx[done]] = False
    return result


# =========================================================================== the engine


class _Engine:
    """Per-design constant state for batched evaluation on one frequency grid.

    Internal layout: arrays are (frequencies, samples-in-chunk); stage magnitude is kept as
    ln|H|² and phase in turns, converted to dB and degrees only where reported.
    """

    def __init__(self, design, f_hz: np.ndarray | None) -> None:
        self.design = design
        der = _derivation(design)
        self.names = der.names
        self.origin = der.origin_order
        self.comp = _compiled(der)
        self.kind = design.stage.kind
        op = design.opamp
        self.opamp = op if op is not None and not op.is_ideal else None
        self.plant_fn = design.plant.factored() if design.plant is not None else None
        self.kfb = float(design.feedback_gain)
        self.loop_k = self.kfb * loop_sign(self.kind, getattr(design, "stage_sign", None))
        if self.kind == "circuit" and self.opamp is not None:
            self.circuit = _circuit_grid(design.stage.circuit, self.names)
        self.nominal_values = np.array([design.values[n] for n in self.names], dtype=float)
        self.gbw0 = self.opamp.gbw_hz if self.opamp is not None else None
        self.ideal_nominal = compile_derivation(der)(design.values).factored
        # The stage as built at nominal values, in factored form: its analytic continuous phase
        # is the reference branch of every sample's phase.
        gain, factors = self.factor_arrays(self.nominal_values[:, None])
        num, den = self.stage_polys(self.nominal_values[:, None], None, *self.ideal_polys(gain, factors))
        if self.opamp is None:
            self.stage_nominal = self.ideal_nominal
        else:
            self.stage_nominal = factored_from_tf(_trim(num)[::-1, 0], _trim(den)[::-1, 0])
        if f_hz is None:
            lo, hi = self._default_band_hz()
            f_hz = np.logspace(math.log10(lo), math.log10(hi), _DEFAULT_POINTS)
        f = self.f_hz = _check_grid(f_hz)
        self.u = np.log10(f)
        self.stage_ph_nom_deg = exact_phase_deg(self.stage_nominal, f)
        self.stage_db_nom = exact_mag_db(self.stage_nominal, f)
        nf = f.size
        c = _CHUNK
        w = _TWO_PI * f
        self._full = {
            "x": np.ascontiguousarray(np.broadcast_to(-(w * w)[:, None], (nf, c))),
            "w": np.ascontiguousarray(np.broadcast_to(w[:, None], (nf, c))),
            "phn": np.ascontiguousarray(np.broadcast_to((self.stage_ph_nom_deg / 360.0)[:, None], (nf, c))),
        }
        if self.plant_fn is not None:
            loop_nom = (self.plant_fn * self.stage_nominal).scaled(self.loop_k)
            self.loop_nominal = loop_nom
            #: Loop = stage + these per-frequency offsets (dB, degrees): plant, k_fb and the sign.
            self.loop_db_offset = exact_mag_db(loop_nom, f) - self.stage_db_nom
            self.loop_ph_offset = exact_phase_deg(loop_nom, f) - self.stage_ph_nom_deg
            thr = -self.loop_db_offset / _DBK  # threshold on ln|H|²
            self._thr = thr
            self._full["thr"] = np.ascontiguousarray(np.broadcast_to(thr[:, None], (nf, c)))
            cp = self.stage_ph_nom_deg / 360.0 + self.loop_ph_offset / 360.0 + 0.5
            self._full["cp"] = np.ascontiguousarray(np.broadcast_to(cp[:, None], (nf, c)))
            pn, pd = self.plant_fn.tf()
            self.plant_num = np.ascontiguousarray(pn[::-1])  # ascending, rad/s
            self.plant_den = np.ascontiguousarray(pd[::-1])
            #: Closed-loop roots at nominal values (rad/s): where every sample's root search starts.
            self.cl_start = self._closed_loop_roots(num, den)
        self._local = threading.local()
        self._structure = self._corner_structure()

    def _default_band_hz(self) -> tuple[float, float]:
        """The default grid's band, Hz: the display band of the nominal design.

        :func:`loopcraft.analysis.band.display_band_hz` over the ideal stage and the plant,
        anchored also on the op-amp's gain-bandwidth and on every gain and phase crossover
        of the nominal loop, so that the crossings each sample is searched for on the grid
        lie two decades or more inside it (the band the record's Bode figure shows).
        """
        extra = [self.opamp.gbw_hz] if self.opamp is not None else []
        if self.plant_fn is not None:
            loop = (self.plant_fn * self.stage_nominal).scaled(self.loop_k)
            try:
                m = loop_margins_factored(loop, points_per_decade=MARGIN_GRID_PER_DECADE)
                extra += [c.f_hz for c in m.crossovers] + [g.f_hz for g in m.gain_margins]
            except AnalysisError:
                # No margins of the nominal loop (no frequency scale, or a phase of -180° over
                # an interval): anchor on the band they would be searched in, when it exists.
                try:
                    extra += list(crossing_search_band_hz(loop))
                except AnalysisError:
                    pass
        return display_band_hz(self.ideal_nominal, self.plant_fn, extra_hz=tuple(extra))

    def _workspace(self) -> dict[str, np.ndarray]:
        ws = getattr(self._local, "ws", None)
        if ws is None:
            nf, c = self.u.size, _CHUNK
            ws = {k: np.empty((nf, c)) for k in ("nr", "ni", "dr", "di", "p", "q", "t", "v")}
            ws["a"] = np.empty((nf, c), dtype=bool)
            ws["e"] = np.empty((nf - 1, c), dtype=bool)
            self._local.ws = ws
        return ws

    # ---- coefficients and polynomials -------------------------------------------------
    def factor_arrays(self, vals: np.ndarray) -> tuple[np.ndarray, list[tuple[str, int, np.ndarray]]]:
        """Gain K (N,) and, per layout factor, (role, multiplicity, normalized coefficients (d+1, N))."""
        n = vals.shape[1]
        raw = _rows(self.comp.fn(*vals), n)
        factors = []
        for role, deg, mult, off in self.comp.layout:
            c0 = raw[off]
            bad = ~np.isfinite(c0) | (c0 == 0)
            if bad.any():
                i = int(np.argmax(bad))
                raise AnalysisError(
                    f"a {role} factor has a zero constant term at sample {i} "
                    f"({', '.join(f'{k}={vals[j, i]!r}' for j, k in enumerate(self.names))}); the stage degenerates")
            factors.append((role, mult, raw[off:off + deg + 1] / c0))
        return raw[0], factors

    def ideal_polys(self, gain: np.ndarray, factors) -> tuple[np.ndarray, np.ndarray]:
        """Ideal H = num/den per sample (ascending coefficients, s in rad/s)."""
        n = gain.shape[0]
        num = gain[None, :].copy()
        den = np.ones((1, n))
        for role, mult, a in factors:
            for _ in range(mult):
                if role == "zero":
                    num = _pmul(num, a)
                else:
                    den = _pmul(den, a)
        if self.origin > 0:
            num = np.concatenate([np.zeros((self.origin, n)), num])
        elif self.origin < 0:
            den = np.concatenate([np.zeros((-self.origin, n)), den])
        return num, den

    def opamp_polys(self, n: int, gbw: np.ndarray | None) -> tuple[float, np.ndarray]:
        """A0 and Da (ascending, (deg+1, N)) of A = A0/Da."""
        op = self.opamp
        gbw_hz = np.full(n, op.gbw_hz) if gbw is None else np.asarray(gbw, dtype=float)
        wa = _TWO_PI * gbw_hz / op.a0
        da = np.vstack([np.ones(n), 1.0 / wa])
        if op.second_pole_hz is not None:
            da = _pmul(da, np.vstack([np.ones(n), np.full(n, 1.0 / (_TWO_PI * op.second_pole_hz))]))
        return float(op.a0), da

    def stage_polys(self, vals: np.ndarray, gbw: np.ndarray | None, num: np.ndarray, den: np.ndarray):
        """Numerator and denominator of the stage as built (ascending, (p, N))."""
        if self.opamp is None:
            return num, den
        n = vals.shape[1]
        a0, da = self.opamp_polys(n, gbw)
        if self.kind == "inverting":  # Gn = 1 - H: H·A0/(A0·D + Da·(D - N))
            return a0 * num, _trim(_padd(a0 * den, _pmul(da, _padd(den, num, -1.0))))
        if self.kind == "noninverting":  # Gn = H: H·A0/(A0·D + Da·N)
            return a0 * num, _trim(_padd(a0 * den, _pmul(da, num)))
        fn, shapes = self.circuit  # Σ N_k A^k / Σ D_k A^k, times Da^m
        flat = _rows(fn(*vals), n)
        polys = []
        k = 0
        m = max(shapes[0][0], shapes[1][0]) - 1
        da_pow = [np.ones((1, n))]
        for _ in range(m):
            da_pow.append(_pmul(da_pow[-1], da))
        for rows_a, cols_s in shapes:
            total = np.zeros((1, n))
            for ka in range(rows_a):
                coeffs = flat[k:k + cols_s]
                k += cols_s
                total = _padd(total, (a0 ** ka) * _pmul(coeffs, da_pow[m - ka]))
            polys.append(_trim(total))
        return polys[0], polys[1]

    # ---- closed-loop stability ---------------------------------------------------------------
    def closed_loop_char(self, num: np.ndarray, den: np.ndarray) -> np.ndarray:
        """Ascending coefficients (m+1, N) of D + N, the loop L = N/D (rad/s), a common s^k cancelled."""
        n_l = self.loop_k * _pmul(self.plant_num[:, None], num)
        d_l = _pmul(self.plant_den[:, None], den)
        k = 0
        while k < min(n_l.shape[0], d_l.shape[0]) - 1 and not np.any(n_l[k]) and not np.any(d_l[k]):
            k += 1
        return _padd(d_l[k:], n_l[k:])

    def _closed_loop_roots(self, num: np.ndarray, den: np.ndarray) -> np.ndarray | None:
        """Closed-loop roots (rad/s) of one sample, origin roots dropped: the samples' refinement starts there."""
        c = self.closed_loop_char(num, den)[:, 0]
        nz = np.flatnonzero(c)
        if nz.size < 2 or not np.all(np.isfinite(c)):
            return None
        core = c[int(nz[0]):int(nz[-1]) + 1]
        r = _batched_roots((core / core[0])[:, None])[0]
        if r.size > 1:
            gap = np.abs(r[:, None] - r[None, :]) + np.diag(np.full(r.size, np.inf))
            if np.min(gap) <= 1e-6 * np.max(np.abs(r)):
                return None  # (near-)repeated roots: no distinct starting points
        return r

    def closed_loop_rhp(self, num: np.ndarray, den: np.ndarray) -> np.ndarray:
        """Per sample, closed-loop roots with Re >= -1e-9·|root| (see :func:`_closed_loop_count`)."""
        return _closed_loop_count(self.closed_loop_char(num, den), self.cl_start)

    # ---- corners ------------------------------------------------------------------------
    def _factor_corners(self, a: np.ndarray, deg: int, plan) -> list[tuple[np.ndarray, np.ndarray | None]]:
        """Per-sample (ω rad/s, Q or None) of one factor, in the factor's nominal order."""
        if deg == 1:
            return [(np.abs(1.0 / a[1]), None)]
        if deg == 2:
            a1, a2 = a[1], a[2]
            with np.errstate(invalid="ignore", divide="ignore"):
                if plan == "pair":
                    w0 = 1.0 / np.sqrt(a2)
                    q = np.where(a1 != 0, 1.0 / (w0 * np.abs(a1)), 1e15)
                    return [(w0, q)]
                disc = a1 * a1 - 4.0 * a2
                sq = np.sqrt(np.maximum(disc, 0.0))
                qv = -0.5 * (a1 + np.copysign(sq, a1))
                r1 = np.abs(qv / a2)
                r2 = np.abs(1.0 / qv)
                cplx = 1.0 / np.sqrt(np.abs(a2))
            lo = np.where(disc >= 0, np.minimum(r1, r2), cplx)
            hi = np.where(disc >= 0, np.maximum(r1, r2), cplx)
            return [(lo, None), (hi, None)]
        roots = _batched_roots(a)
        order = np.argsort(np.abs(roots), axis=1, kind="stable")
        roots = np.take_along_axis(roots, order, axis=1)
        out = []
        k = 0
        for o in plan:
            if o == 1:
                out.append((np.abs(roots[:, k]), None))
                k += 1
            else:
                r1, r2 = roots[:, k], roots[:, k + 1]
                w0 = np.sqrt(np.abs(r1 * r2))
                ssum = np.abs((r1 + r2).real)
                out.append((w0, np.where(ssum > 0, w0 / np.where(ssum > 0, ssum, 1.0), 1e15)))
                k += 2
        return out

    def _corner_structure(self):
        """Per factor the plan, and the labels: [(ω label, Q label or None, factor index, entry index)].

        Labels are the factored form's (:func:`loopcraft.numeric.evaluator.corner_labels`, fixed per
        topology); the plan (pair or real roots, and how a numeric factor splits) is the nominal one,
        numeric roots taking their factor's labels in frequency order at nominal values.
        """
        _gain, factors = self.factor_arrays(self.nominal_values[:, None])
        blocks = compile_derivation(_derivation(self.design)).label_blocks
        plans: list[Any] = []
        labelled = []
        for i, (_role, mult, a) in enumerate(factors):
            deg = a.shape[0] - 1
            if deg == 1:
                plan: Any = None
            elif deg == 2:
                a1, a2 = float(a[1, 0]), float(a[2, 0])
                plan = "pair" if a2 > 0 and a1 * a1 < 4.0 * a2 else "real"
            else:
                r = _batched_roots(a)[0]
                r = r[np.argsort(np.abs(r), kind="stable")]
                plan, k = [], 0
                while k < len(r):
                    if abs(r[k].imag) <= 1e-9 * abs(r[k]) or k + 1 == len(r):
                        plan.append(1)
                        k += 1
                    else:
                        plan.append(2)
                        k += 2
            plans.append(plan)
            vals = self._factor_corners(a, deg, plan)
            # As the evaluator: within one copy, real roots and pairs take the block's labels by (ω, order).
            rank = sorted(range(len(vals)), key=lambda e: (float(vals[e][0][0]), 1 if vals[e][1] is not None else 0))
            for k in range(mult):
                real = iter(blocks[i].real[k * deg:(k + 1) * deg])
                pairs = iter(blocks[i].pairs[k * (deg // 2):(k + 1) * (deg // 2)])
                for e in rank:
                    if vals[e][1] is None:
                        labelled.append((next(real), None, i, e))
                    else:
                        wl = next(pairs)
                        labelled.append((wl, "Q" + wl[2:], i, e))
        labelled.sort(key=lambda t: label_sort_key(t[0]))
        return plans, labelled

    def corners(self, factors) -> dict[str, np.ndarray]:
        """Per-sample corners by label: ω rows in Hz, Q rows plain."""
        plans, labelled = self._structure
        per_factor = [self._factor_corners(a, a.shape[0] - 1, plans[i]) for i, (_r, _m, a) in enumerate(factors)]
        out: dict[str, np.ndarray] = {}
        for wl, ql, i, e in labelled:
            w, q = per_factor[i][e]
            out[wl] = w / _TWO_PI
            if ql is not None:
                out[ql] = q
        return out

    # ---- grid evaluation --------------------------------------------------------------------
    def _parts(self, c: np.ndarray, x: np.ndarray, w: np.ndarray, o_re: np.ndarray, o_im: np.ndarray):
        """Real and imaginary parts of Σ c_k (jω)^k: Horner in x = -ω² over even and odd coefficients."""
        re = _horner_into(c[0::2], x, o_re)
        odd = c[1::2]
        if odd.shape[0] == 0:
            return re, None
        im = _horner_into(odd, x, o_im)
        if im is o_im:
            im *= w
        else:
            np.multiply(im, w, out=o_im)
            im = o_im
        return re, im

    def grid_chunk(self, num: np.ndarray, den: np.ndarray, lnm_out: np.ndarray, turns_out: np.ndarray,
                   lo: int, hi: int, cross: bool):
        """ln|H|² and phase (turns) of samples lo:hi into the outputs' columns; crossing brackets."""
        nc = hi - lo
        ws = self._workspace()
        if nc != _CHUNK:
            ws = {k: v[:, :nc] for k, v in ws.items()}
            full = {k: v[:, :nc] for k, v in self._full.items()}
        else:
            full = self._full
        x, w, phn = full["x"], full["w"], full["phn"]
        nr, ni = self._parts(num[:, lo:hi], x, w, ws["nr"], ws["ni"])
        dr, di = self._parts(den[:, lo:hi], x, w, ws["dr"], ws["di"])
        p, q, t, v = ws["p"], ws["q"], ws["t"], ws["v"]
        # num·conj(den) = P + jQ carries the phase; |H|² = |num|²/|den|².
        np.multiply(nr, dr, out=p)
        if ni is not None and di is not None:
            np.multiply(ni, di, out=t)
            p += t
        if ni is not None:
            np.multiply(ni, dr, out=q)
        else:
            q.fill(0.0)
        if di is not None:
            np.multiply(nr, di, out=t)
            q -= t
        np.arctan2(q, p, out=p)
        np.multiply(nr, nr, out=q)
        if ni is not None:
            np.multiply(ni, ni, out=t)
            q += t
        np.multiply(dr, dr, out=t)
        if di is not None:
            np.multiply(di, di, out=v)
            t += v
        q /= t
        lnm = lnm_out[:, lo:hi]
        with np.errstate(divide="ignore"):
            np.log(q, out=lnm)
        # Phase in turns, as the nominal analytic phase plus the deviation wrapped into a half turn.
        p *= 1.0 / _TWO_PI
        p -= phn
        np.rint(p, out=t)
        p -= t
        turns = turns_out[:, lo:hi]
        np.add(p, phn, out=turns)
        if p.max() > _WRAP_GUARD or p.min() < -_WRAP_GUARD:
            self._repair(p, turns, phn)
        if not cross:
            return None
        a, e = ws["a"], ws["e"]
        thr = self._thr
        np.greater_equal(lnm, full["thr"], out=a)
        np.not_equal(a[1:], a[:-1], out=e)
        gi, gj = np.divmod(np.flatnonzero(e), nc)
        g = (gj + lo, gi, (lnm[gi, gj] - thr[gi]) * _DBK, (lnm[gi + 1, gj] - thr[gi + 1]) * _DBK)
        np.add(p, full["cp"], out=t)  # (loop phase + 180°)/360°
        np.floor(t, out=v)
        np.not_equal(v[1:], v[:-1], out=e)
        pi_, pj = np.divmod(np.flatnonzero(e), nc)
        k = np.maximum(v[pi_, pj], v[pi_ + 1, pj])
        return g, (pj + lo, pi_, 360.0 * (t[pi_, pj] - k), 360.0 * (t[pi_ + 1, pj] - k))

    def _repair(self, p: np.ndarray, turns: np.ndarray, phn: np.ndarray) -> None:
        """Samples that stray more than the guard from the nominal phase: unwrap along frequency instead."""
        cols = np.flatnonzero((np.abs(p) > _WRAP_GUARD).any(axis=0))
        tv = np.unwrap(turns[:, cols], axis=0, period=1.0)
        tv += np.rint(phn[0, cols] - tv[0])
        turns[:, cols] = tv
        p[:, cols] = tv - phn[:, cols]

    def loop_at(self, num: np.ndarray, den: np.ndarray, cols: np.ndarray, u: np.ndarray) -> np.ndarray:
        """L at 10^u Hz for the samples ``cols`` (exact evaluation)."""
        s = 1j * _TWO_PI * 10.0 ** u
        return self.loop_k * self.plant_fn.evaluate(s) * _horner_c(num[:, cols], s) / _horner_c(den[:, cols], s)

    def margins(self, num, den, n: int, gains, phases):
        """Per-sample highest crossover (Hz), worst PM (deg), worst GM (dB), number of crossovers."""
        u = self.u
        fc = np.full(n, np.nan)
        pm = np.full(n, np.nan)
        gm = np.full(n, np.inf)
        cols = np.concatenate([g[0] for g in gains])
        count = np.bincount(cols, minlength=n)
        if cols.size:
            ii = np.concatenate([g[1] for g in gains])
            ga = np.concatenate([g[2] for g in gains])
            gb = np.concatenate([g[3] for g in gains])

            def f_mag(idx, uu):
                return 20.0 * np.log10(np.abs(self.loop_at(num, den, cols[idx], uu)))

            ur = _illinois(f_mag, u[ii], u[ii + 1], ga, gb)
            pm_c = np.degrees(np.angle(-self.loop_at(num, den, cols, ur)))
            hi_u = np.full(n, -np.inf)
            np.maximum.at(hi_u, cols, ur)
            low_pm = np.full(n, np.inf)
            np.minimum.at(low_pm, cols, pm_c)
            has = count > 0
            fc[has] = 10.0 ** hi_u[has]
            pm[has] = low_pm[has]
        pcols = np.concatenate([p[0] for p in phases])
        if pcols.size:
            ii = np.concatenate([p[1] for p in phases])
            ha = np.concatenate([p[2] for p in phases])
            hb = np.concatenate([p[3] for p in phases])

            def f_ph(idx, uu):
                return np.degrees(np.angle(-self.loop_at(num, den, pcols[idx], uu)))

            ur = _illinois(f_ph, u[ii], u[ii + 1], ha, hb)
            gm_c = -20.0 * np.log10(np.abs(self.loop_at(num, den, pcols, ur)))
            np.minimum.at(gm, pcols, gm_c)
        return fc, pm, gm, count


def _check_grid(f_hz: Any) -> np.ndarray:
    f = np.asarray(f_hz, dtype=float)
    if f.ndim != 1 or f.size < 2:
        raise AnalysisError(f"f_hz must be a 1-D array of at least 2 frequencies in Hz (got shape {f.shape!r})")
    if not np.all(np.isfinite(f)) or np.any(f <= 0) or np.any(np.diff(f) <= 0):
        raise AnalysisError("f_hz must hold finite frequencies > 0 Hz in strictly increasing order "
                            f"(got {f[:5].tolist()!r}{' …' if f.size > 5 else ''})")
    return f


def _workers(workers: int | None) -> int:
    if workers is None:
        return max(1, min(4, os.cpu_count() or 1))
    if isinstance(workers, bool) or not isinstance(workers, Integral) or workers < 1:
        raise AnalysisError(f"workers must be an integer >= 1 (got {workers!r})")
    return int(workers)


@dataclass
class _Run:
    corners: dict[str, np.ndarray]
    dc_gain_db: np.ndarray
    lnm: np.ndarray  # ln|H|² of the stage as built, (F, N)
    turns: np.ndarray  # its continuous phase in turns, (F, N)
    fc: np.ndarray | None
    pm: np.ndarray | None
    gm: np.ndarray | None
    count: np.ndarray | None
    num: np.ndarray
    den: np.ndarray
    ideal: tuple[np.ndarray, np.ndarray]
    rhp: np.ndarray | None = None  # closed-loop roots with Re >= -1e-9·|root|, per sample (None: no plant)


def _run(engine: _Engine, vals: np.ndarray, gbw: np.ndarray | None, workers: int, *, check: bool = True) -> _Run:
    """Evaluate every sample (columns of vals) on the engine's grid.

    With ``check=False`` the caller must check the curves for non-finite values itself.
    """
    n = vals.shape[1]
    nf = engine.u.size
    if n * nf > MAX_CELLS:
        raise AnalysisError(f"{n} samples × {nf} frequencies = {n * nf} points exceeds the limit {MAX_CELLS}; "
                            "use fewer samples or frequencies")
    gain, factors = engine.factor_arrays(vals)
    corners = engine.corners(factors)
    inum, iden = engine.ideal_polys(gain, factors)
    num, den = engine.stage_polys(vals, gbw, inum, iden)
    dc = _dc_gain_db(num, den)
    lnm = np.empty((nf, n))
    turns = np.empty((nf, n))
    cross = engine.plant_fn is not None
    bounds = [(lo, min(lo + _CHUNK, n)) for lo in range(0, n, _CHUNK)]

    def job(b):
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            return engine.grid_chunk(num, den, lnm, turns, b[0], b[1], cross)

    if workers > 1 and len(bounds) > 1:
        with ThreadPoolExecutor(max_workers=min(workers, len(bounds))) as ex:
            results = list(ex.map(job, bounds))
    else:
        results = [job(b) for b in bounds]
    if check:
        _check_finite(engine, lnm, turns)
    fc = pm = gm = count = rhp = None
    if cross:
        fc, pm, gm, count = engine.margins(num, den, n, [r[0] for r in results], [r[1] for r in results])
        rhp = engine.closed_loop_rhp(num, den)
    return _Run(corners, dc, lnm, turns, fc, pm, gm, count, num, den, (inum, iden), rhp)


def _dc_gain_db(num: np.ndarray, den: np.ndarray) -> np.ndarray:
    """20·log10|H(0)| per sample (±inf for an origin pole or zero)."""
    with np.errstate(divide="ignore"):
        dc = 20.0 * np.log10(np.abs(num[0])) - 20.0 * np.log10(np.abs(den[0]))
    return np.where(den[0] == 0, np.inf, np.where(num[0] == 0, -np.inf, dc))


def _stage_quantities(engine: _Engine, vals: np.ndarray, gbw: np.ndarray | None) -> dict[str, np.ndarray]:
    """Corners and DC gain only (no frequency grid): what the search of those quantities needs."""
    gain, factors = engine.factor_arrays(vals)
    out = engine.corners(factors)
    num, den = engine.stage_polys(vals, gbw, *engine.ideal_polys(gain, factors))
    out["dc_gain_db"] = _dc_gain_db(num, den)
    return out


def _check_finite(engine: _Engine, lnm: np.ndarray, turns: np.ndarray) -> None:
    if not (np.isfinite(lnm).all() and np.isfinite(turns).all()):
        bad = ~(np.isfinite(lnm) & np.isfinite(turns))
        fi, si = np.unravel_index(int(np.argmax(bad)), bad.shape)
        raise AnalysisError(f"the stage response is not finite at f = {engine.f_hz[fi]!r} Hz in sample {si} "
                            "(a response zero or pole on the grid, or magnitudes beyond the float range)")


def _envelope(a: np.ndarray, scale: float, workers: int) -> Envelope:
    """Per-row (frequency) order statistics of a (F, N) array times ``scale`` > 0; sorts ``a`` in place."""
    nf, n = a.shape
    if workers > 1 and nf >= 2 * workers:
        edges = np.linspace(0, nf, workers + 1).astype(int)
        with ThreadPoolExecutor(max_workers=workers) as ex:
            list(ex.map(lambda k: a[edges[k]:edges[k + 1]].sort(axis=1), range(workers)))
    else:
        a.sort(axis=1)

    def pct(q: float) -> np.ndarray:
        pos = q / 100.0 * (n - 1)
        i = int(math.floor(pos))
        frac = pos - i
        j = min(i + 1, n - 1)
        return scale * (a[:, i] + frac * (a[:, j] - a[:, i]))

    return Envelope(scale * a[:, 0], scale * a[:, -1], pct(1.0), pct(50.0), pct(99.0))


def _nominal(engine: _Engine, *, with_stability: bool = False):
    """Every quantity at nominal values; with ``with_stability`` also whether the closed loop is stable."""
    r = _run(engine, engine.nominal_values[:, None], None, 1)
    out = {k: float(v[0]) for k, v in r.corners.items()}
    out["dc_gain_db"] = float(r.dc_gain_db[0])
    if r.fc is not None:
        out.update(crossover_hz=float(r.fc[0]), phase_margin_deg=float(r.pm[0]), gain_margin_db=float(r.gm[0]))
    if with_stability:
        return out, (None if r.rhp is None else bool(r.rhp[0] == 0))
    return out


def _tolerance_set(design, tolerances: Any) -> ToleranceSet:
    raw = tolerances if tolerances is not None else design.tolerances
    if raw is None:
        raise AnalysisError("the design has no 'tolerances' section (and none was passed), so there is nothing "
                            "to spread; add e.g. {\"R*\": \"1%\", \"C*\": \"5%\"}")
    ts = parse_tolerances(raw, design.stage.component_names, "tolerances")
    if ts.gbw > 0 and (design.opamp is None or design.opamp.is_ideal):
        raise AnalysisError(f"tolerances.gbw = {100 * ts.gbw:g} % needs a real op-amp, but the design has "
                            f"{'no op-amp section' if design.opamp is None else 'an ideal op-amp'}")
    return ts


def _check_int(name: str, v: Any, lo: int, hi: int) -> int:
    if isinstance(v, bool) or not isinstance(v, Integral) or not lo <= v <= hi:
        raise AnalysisError(f"{name} must be an integer in {lo} … {hi} (got {v!r})")
    return int(v)


# =========================================================================== public API


def evaluate_batch(design, values: Mapping[str, Any], f_hz: Any = None, *, gbw_hz: Any = None,
                   workers: int | None = None) -> Batch:
    """Evaluate explicitly given samples (the vectorized path behind :func:`monte_carlo`).

    Parameters
    ----------
    design : Design
        Topology, op-amp, plant and feedback gain; parts missing from ``values`` keep their nominal value.
    values : mapping of str to array_like
        Part values per sample, SI base units (ohms, farads, henries); all of one length N (scalars broadcast).
    f_hz : array_like, optional
        Frequency grid in Hz (the design's default analysis grid when omitted).
    gbw_hz : array_like, optional
        Op-amp gain-bandwidth product per sample, Hz (the op-amp's own when omitted).
    workers : int, optional
        Threads for the grid evaluation (default: up to 4, the CPU count).

    Returns
    -------
    Batch
        Complex responses of shape (N, frequencies) and per-sample quantities.

    Raises
    ------
    AnalysisError
        An unknown part, values that are not positive and finite, a GBW with no real op-amp, or
        a stage that degenerates at some sample.
    """
    names = design.stage.component_names
    for k in values:
        if k not in names:
            raise AnalysisError(f"no element named {k!r} in this stage (elements: {', '.join(names)})")
    engine = _Engine(design, f_hz)
    arrays = [np.atleast_1d(np.asarray(values.get(nm, design.values[nm]), dtype=float)) for nm in engine.names]
    if gbw_hz is not None:
        if engine.opamp is None:
            raise AnalysisError("gbw_hz was given but the design has no real op-amp")
        arrays.append(np.atleast_1d(np.asarray(gbw_hz, dtype=float)))
    try:
        stacked = np.broadcast_arrays(*arrays)
    except ValueError as err:
        raise AnalysisError(f"sample arrays of different lengths ({[a.shape for a in arrays]!r})") from err
    mat = np.array(stacked, dtype=float)
    if mat.ndim != 2 or not np.all(np.isfinite(mat)) or np.any(mat <= 0):
        raise AnalysisError("sample values must be 1-D, finite and > 0 (SI base units; GBW in Hz)")
    gbw = mat[-1] if gbw_hz is not None else None
    vals = mat[:len(engine.names)]
    r = _run(engine, vals, gbw, _workers(workers))
    s = 1j * _TWO_PI * engine.f_hz
    stage = _response(r.num, r.den, s)
    ideal = _response(*r.ideal, s)
    mag_db = _DBK * r.lnm.T
    phase_deg = 360.0 * r.turns.T
    loop = loop_db = loop_ph = None
    if engine.plant_fn is not None:
        loop = engine.loop_k * engine.plant_fn.evaluate(s)[None, :] * stage
        loop_db = mag_db + engine.loop_db_offset[None, :]
        loop_ph = phase_deg + engine.loop_ph_offset[None, :]
    stable = None if r.rhp is None else r.rhp == 0
    return Batch(engine.f_hz, ideal, stage, mag_db, phase_deg, loop, loop_db, loop_ph, r.corners, r.dc_gain_db,
                 r.fc, r.pm, r.gm, r.count, r.rhp, stable)


def monte_carlo(design, samples: int = 10000, *, seed: int = 1, f_hz: Any = None, spec: Any = None,
                tolerances: Any = None, workers: int | None = None) -> Spread:
    """Monte Carlo spread of a design over its tolerances.

    Parameters
    ----------
    design : Design
    samples : int
        Number of samples (1 … 1 000 000, and samples × frequencies <= 5e7).
    seed : int
        Seed of ``numpy.random.default_rng``; the same seed gives identical arrays.
    f_hz : array_like, optional
        Frequency grid in Hz (the design's default analysis grid when omitted).
    spec : mapping or Spec, optional
        A ``spec`` section to compute the yield against; the design's own ``spec`` when
        omitted (no yield when it has none; pass ``{}`` for no yield at all).
    tolerances : mapping, optional
        A ``tolerances`` section overriding the design's.
    workers : int, optional
        Threads (default: up to 4, the CPU count); results do not depend on it.

    Returns
    -------
    Spread

    Raises
    ------
    AnalysisError
        No tolerances, a GBW tolerance with no real op-amp, bad arguments, a normal draw that makes a
        part non-positive (only possible beyond 6σ at 50 %), or a stage that degenerates at some sample.
    DesignFileError
        A malformed tolerances or spec section (key path given).
    """
    samples = _check_int("samples", samples, 1, 1_000_000)
    seed = _check_int("seed", seed, 0, 2**63 - 1)
    nw = _workers(workers)
    ts = _tolerance_set(design, tolerances)
    engine = _Engine(design, f_hz)
    names = engine.names
    t = np.array([ts.by_component[nm] for nm in names] + [ts.gbw])
    rng = np.random.default_rng(seed)
    if ts.distribution == "uniform":
        z = rng.uniform(-1.0, 1.0, size=(samples, len(names) + 1))
        scale = t
    else:
        z = rng.standard_normal(size=(samples, len(names) + 1))
        scale = t / 3.0
    mult = 1.0 + z.T * scale[:, None]
    if np.any(mult <= 0):
        j, i = np.unravel_index(int(np.argmax(mult <= 0)), mult.shape)
        who = names[j] if j < len(names) else "gbw"
        raise AnalysisError(f"sample {i} draws {who} at or below zero (normal draw {z[i, j]:.3g}σ); "
                            "lower its tolerance or use the uniform distribution")
    vals = engine.nominal_values[:, None] * mult[:-1]
    gbw = engine.gbw0 * mult[-1] if ts.gbw > 0 else None
    r = _run(engine, vals, gbw, nw, check=False)
    nominal, nominal_stable = _nominal(engine, with_stability=True)
    stage_mag = _envelope(r.lnm, _DBK, nw)
    stage_ph = _envelope(r.turns, 360.0, nw)
    # Sorted rows: NaN and ±inf sit at the ends, so the ends tell whether every value is finite.
    ends = np.concatenate([stage_mag.min, stage_mag.max, stage_ph.min, stage_ph.max])
    if not np.isfinite(ends).all():
        raise AnalysisError("the stage response is not finite at some frequency of some sample (a response "
                            "zero or pole on the grid, or magnitudes beyond the float range)")
    loop_mag = loop_ph = None
    if engine.plant_fn is not None:
        loop_mag = stage_mag.shifted(engine.loop_db_offset)
        loop_ph = stage_ph.shifted(engine.loop_ph_offset)
    values = {nm: vals[j] for j, nm in enumerate(names)}
    tol_out = {nm: ts.by_component[nm] for nm in names if ts.by_component[nm] > 0}
    if gbw is not None:
        values["gbw_hz"] = gbw
        tol_out["gbw"] = ts.gbw
    sp_ = parse_spec(spec, "spec") if spec is not None else (
        parse_spec(design.spec, "spec") if design.spec is not None else None)
    y = passed = item_y = None
    stable = None if r.rhp is None else r.rhp == 0
    if sp_ is not None and sp_.item_names:
        masks = sample_pass(sp_, {"phase_margin_deg": r.pm, "gain_margin_db": r.gm, "crossover_hz": r.fc,
                                  "corners": r.corners, "dc_gain_db": r.dc_gain_db, "stable": stable}, samples)
        passed = np.logical_and.reduce(list(masks.values()))
        y = float(passed.mean())
        item_y = {k: float(v.mean()) for k, v in masks.items()}
    return Spread(engine.f_hz, samples, seed, ts.distribution, tol_out, values, engine.opamp is not None,
                  stage_mag, stage_ph, loop_mag, loop_ph, r.corners, r.dc_gain_db, r.fc, r.pm, r.gm, r.count,
                  nominal, y, passed, item_y, r.rhp, stable, nominal_stable)


def _quantities(r: _Run) -> dict[str, np.ndarray]:
    out = dict(r.corners)
    out["dc_gain_db"] = r.dc_gain_db
    if r.fc is not None:
        out.update(crossover_hz=r.fc, phase_margin_deg=r.pm, gain_margin_db=r.gm)
    return out


def worst_case(design, *, f_hz: Any = None, tolerances: Any = None, method: str = "auto", search: bool = True,
               seed: int = 1, workers: int | None = None) -> WorstCase:
    """Worst case over the tolerance box: its vertices, then a local search of the interior.

    Parameters
    ----------
    design : Design
    f_hz : array_like, optional
        Frequency grid in Hz (the design's default analysis grid when omitted).
    tolerances : mapping, optional
        A ``tolerances`` section overriding the design's.
    method : {"auto", "corners", "sensitivity"}
        The vertices tried first: ``"corners"`` evaluates all 2^n vertices (n toleranced
        parameters, at most 20); ``"sensitivity"`` sets each parameter to the end that moves a
        quantity up (or down) by the sign of ∂quantity/∂ln x at nominal — from
        :func:`loopcraft.analysis.sensitivity.sensitivity` for corners, by central differences on the
        batched evaluator for the loop quantities, the DC gain and the GBW; ``"auto"`` uses
        corners when n <= 12.
    search : bool
        Also search the inside of the box (see the module docstring); False reports the best
        vertex or the nominal only.
    seed : int
        Seed of the random points the search starts from (``numpy.random.default_rng``).
    workers : int, optional
        Threads (default: up to 4, the CPU count).

    Returns
    -------
    WorstCase
        Per quantity the smallest and largest value found (the nominal value included), where
        (``location``: corner, face or interior) and whether the closed loop is stable there.
        With a plant, a point whose closed loop is not stable has phase and gain margin -inf.

    Raises
    ------
    AnalysisError
        No tolerances, nothing toleranced, an unknown method, too many parameters for
        "corners", a bad seed, or a stage that degenerates at a vertex.
    """
    if method not in ("auto", "corners", "sensitivity"):
        raise AnalysisError(f"method must be 'auto', 'corners' or 'sensitivity' (got {method!r})")
    if not isinstance(search, bool):
        raise AnalysisError(f"search must be True or False (got {search!r})")
    seed = _check_int("seed", seed, 0, 2**63 - 1)
    nw = _workers(workers)
    ts = _tolerance_set(design, tolerances)
    engine = _Engine(design, f_hz)
    names = engine.names
    params = [nm for nm in names if ts.by_component[nm] > 0] + (["gbw"] if ts.gbw > 0 else [])
    if not params:
        raise AnalysisError("every tolerance is zero; there is no spread to search")
    tol = {p: (ts.gbw if p == "gbw" else ts.by_component[p]) for p in params}
    n = len(params)
    if method == "auto":
        method = "corners" if n <= MAX_EXHAUSTIVE else "sensitivity"
    if method == "corners" and n > 20:
        raise AnalysisError(f"{n} toleranced parameters give 2^{n} corners; use method='sensitivity'")
    nominal, nominal_stable = _nominal(engine, with_stability=True)
    col = {nm: j for j, nm in enumerate(names)}
    t_vec = np.array([tol[p] for p in params])
    x0 = np.array([engine.gbw0 if p == "gbw" else engine.nominal_values[col[p]] for p in params])

    def build(z: np.ndarray):
        """Part values (parts, M) and GBW (M,) or None for normalized points z (M, n) in [-1, 1]."""
        vals = np.repeat(engine.nominal_values[:, None], z.shape[0], axis=1)
        gbw = None
        for k, p in enumerate(params):
            factor = 1.0 + t_vec[k] * z[:, k]
            if p == "gbw":
                gbw = engine.gbw0 * factor
            else:
                vals[col[p]] *= factor
        return vals, gbw

    env = {}
    if method == "corners":
        verts = 1.0 - 2.0 * ((np.arange(2**n)[:, None] >> np.arange(n)[None, :]) & 1)
    else:
        sgn = _sensitivity_signs(design, engine, params, build, nominal, nw)
        verts = np.vstack([np.vstack([sgn[q], -sgn[q]]) for q in sgn])
    vals, gbw = build(verts)
    r = _run(engine, vals, gbw, nw)
    if method == "corners":
        env["stage_mag_db_min"], env["stage_mag_db_max"] = _DBK * r.lnm.min(axis=1), _DBK * r.lnm.max(axis=1)
        if engine.plant_fn is not None:
            env["loop_mag_db_min"] = env["stage_mag_db_min"] + engine.loop_db_offset
            env["loop_mag_db_max"] = env["stage_mag_db_max"] + engine.loop_db_offset
    v_eff, v_stable = _effective(r)
    qnames = list(v_eff)
    nom_eff = {q: nominal.get(q, math.nan) for q in qnames}
    if nominal_stable is False:
        for q in _MARGINS:
            if q in nom_eff:
                nom_eff[q] = -math.inf
    best = _Best(qnames, n, nom_eff, nominal_stable)
    best.update(v_eff, verts, v_stable)
    unstable_vertices = None if v_stable is None else int((~v_stable).sum())
    any_unstable = (nominal_stable is False) or bool(unstable_vertices)
    n_searched = 0
    if search:
        def evaluate(z: np.ndarray, full: bool = True):
            vz, gz = build(z)
            if not full:
                return _stage_quantities(engine, vz, gz), None
            return _effective(_run(engine, vz, gz, nw, check=False))

        rnd = np.random.default_rng(seed).uniform(-1.0, 1.0, size=(_SEARCH_RANDOM, n))
        e_rnd, s_rnd = evaluate(rnd)
        best.update(e_rnd, rnd, s_rnd)
        n_searched = rnd.shape[0]
        any_unstable |= s_rnd is not None and not s_rnd.all()
        # Starts per quantity and direction: the best vertex, the best random point, and the
        # nominal when no vertex beats it (an extreme near nominal).
        starts = []  # (quantity index, +1 min / -1 max, z)
        for qi, q in enumerate(qnames):
            for sg in (1.0, -1.0):
                nom_obj = sg * nom_eff[q]
                for vv, zz in ((v_eff[q], verts), (e_rnd[q], rnd)):
                    obj = np.where(np.isnan(vv), np.inf, sg * vv)
                    i = int(np.argmin(obj))
                    if np.isfinite(obj[i]):
                        starts.append((qi, sg, zz[i], obj[i]))
                    if zz is verts and math.isfinite(nom_obj) and not obj[i] < nom_obj:
                        starts.append((qi, sg, np.zeros(n), nom_obj))
        loop_q = frozenset(q for q in qnames if q in ("crossover_hz",) + _MARGINS)
        scale = np.zeros(len(qnames))
        for k, q in enumerate(qnames):
            both = np.concatenate([v_eff[q], e_rnd[q], [nom_eff[q]]])
            both = both[np.isfinite(both)]
            scale[k] = np.ptp(both) if both.size else 0.0
        n_eval, unstable_seen = _pattern_search(starts, qnames, n, evaluate, best, loop_q, scale)
        n_searched += n_eval
        any_unstable |= unstable_seen

    def at(z: np.ndarray):
        z = np.clip(z, -1.0, 1.0)
        vals_ = {("gbw_hz" if p == "gbw" else p): float(x0[k] * (1.0 + t_vec[k] * z[k])) for k, p in enumerate(params)}
        signs = {p: (int(np.sign(z[k])) if abs(z[k]) == 1.0 else 0) for k, p in enumerate(params)}
        pos = {p: float(z[k]) for k, p in enumerate(params)}
        ends = np.abs(z) == 1.0
        loc = "corner" if ends.all() else ("interior" if not ends.any() else "face")
        return vals_, signs, pos, loc

    extremes: dict[str, Extreme] = {}
    for qi, q in enumerate(qnames):
        lo, hi = best.value[qi]
        lo_v, lo_s, lo_p, lo_l = at(best.z[qi, 0])
        hi_v, hi_s, hi_p, hi_l = at(best.z[qi, 1])
        undefined = int(np.isnan(v_eff[q]).sum())
        extremes[q] = Extreme(q, _unit(q), nominal.get(q, math.nan), float(lo), float(hi), lo_v, hi_v, lo_s, hi_s,
                              undefined,
                              lo_l, hi_l, lo_p, hi_p, best.stable[qi][0], best.stable[qi][1])
    return WorstCase(engine.f_hz, method, tuple(params), tol, int(verts.shape[0]), extremes, **env,
                     search=search, n_searched=n_searched, nominal_stable=nominal_stable,
                     n_unstable=unstable_vertices, unstable_found=None if v_stable is None else any_unstable)


#: Quantities that an unstable closed loop fails outright (they become -inf there).
_MARGINS = ("phase_margin_deg", "gain_margin_db")
#: Seeded uniform points in the box that the interior search also starts from.
_SEARCH_RANDOM = 128
#: Pattern search: first step, smallest step, most iterations (normalized box units).
_SEARCH_STEP0 = 0.25
_SEARCH_STEP_MIN = 1e-3
_SEARCH_MAX_ITER = 60
#: A move must gain this fraction of the quantity's spread per unit step (normalized units).
_SEARCH_SLOPE = 1e-3


def _effective(r: _Run) -> tuple[dict[str, np.ndarray], np.ndarray | None]:
    """Every quantity per point, the margins -inf where the closed loop is not stable; the stable mask."""
    out = _quantities(r)
    if r.rhp is None:
        return out, None
    stable = r.rhp == 0
    for q in _MARGINS:
        out[q] = np.where(stable, out[q], -np.inf)
    return out, stable


class _Best:
    """The smallest and largest value of every quantity seen so far, where, and whether stable there.

    A later point replaces the record only when it is better by more than 1e-12 relative, so ties
    keep the first point seen: the nominal, then the vertices.
    """

    def __init__(self, qnames: list[str], n: int, nominal: dict[str, float], nominal_stable: bool | None) -> None:
        self.qnames = qnames
        self.value = np.array([[nominal[q], nominal[q]] for q in qnames], dtype=float).reshape(len(qnames), 2)
        self.z = np.zeros((len(qnames), 2, n))
        self.stable: list[list[bool | None]] = [[nominal_stable, nominal_stable] for _ in qnames]

    @staticmethod
    def _better(new: float, old: float, sign: float) -> bool:
        if math.isnan(new):
            return False
        if math.isnan(old):
            return True
        return sign * (old - new) > 1e-12 * abs(old) if math.isfinite(old) else sign * (old - new) > 0

    def update(self, values: dict[str, np.ndarray], z: np.ndarray, stable: np.ndarray | None) -> None:
        for qi, q in enumerate(self.qnames):
            v = values.get(q)
            if v is None or np.isnan(v).all():
                continue
            for j, (sign, arg) in enumerate(((1.0, np.nanargmin), (-1.0, np.nanargmax))):
                i = int(arg(v))
                if self._better(float(v[i]), float(self.value[qi, j]), sign):
                    self.value[qi, j] = v[i]
                    self.z[qi, j] = z[i]
                    self.stable[qi][j] = None if stable is None else bool(stable[i])


def _pattern_search(starts, qnames: list[str], n: int, evaluate, best: _Best, loop_q: frozenset[str],
                    scale: np.ndarray) -> tuple[int, bool]:
    """Batched bounded compass search over the normalized box [-1, 1]^n.

    Each round every search polls z ± h·e_k, its last move repeated, and a step of h along the
    (box-projected) descent direction its previous polls estimate. ``starts`` holds (quantity
    index, +1 for min / -1 for max, z, objective at z); ``scale`` the spread of each quantity
    over the points seen. A search moves to its best poll when that improves its objective
    (its quantity, signed for min or max) by more than ``_SEARCH_SLOPE·scale·h`` (a sufficient
    decrease, so it does not creep along a nearly flat ridge), doubling h (up to 1), and halves
    h otherwise; it stops below the smallest step or at -inf (an unstable margin), and when it
    lands on the point of another search of the same quantity and direction. The polls of all
    searches go through the evaluator as one batch per round (the full loop evaluation for the quantities in ``loop_q``,
    corners and DC gain only for the others); every evaluated point also updates ``best``.
    Returns the number of points evaluated and whether any was unstable. Compass search as in
    Kolda, Lewis & Torczon, "Optimization by direct search: new perspectives on some classical
    and modern methods", SIAM Review 45, 2003.
    """
    if not starts:
        return 0, False
    qi = np.array([s[0] for s in starts])
    sg = np.array([s[1] for s in starts])
    z = np.array([s[2] for s in starts], dtype=float)
    f = np.array([s[3] for s in starts], dtype=float)
    m = z.shape[0]
    h = np.where(np.isfinite(f), _SEARCH_STEP0, 0.0)
    last = np.zeros((m, n))
    down = np.zeros((m, n))  # estimated descent direction, max-norm 1
    dirs = np.vstack([np.eye(n), -np.eye(n)])
    is_loop = np.array([qnames[k] in loop_q for k in qi])
    count = 0
    unstable = False
    for _ in range(_SEARCH_MAX_ITER):
        seen: set[tuple] = set()
        for s in np.flatnonzero(h >= _SEARCH_STEP_MIN):
            key = (int(qi[s]), float(sg[s]), z[s].tobytes())
            if key in seen:
                h[s] = 0.0  # the same point as another search: one is enough
            seen.add(key)
        act_all = np.flatnonzero(h >= _SEARCH_STEP_MIN)
        if act_all.size == 0:
            break
        for full in (True, False):
            act = act_all[is_loop[act_all] == full]
            if act.size == 0:
                continue
            polls = z[act][:, None, :] + h[act][:, None, None] * dirs[None, :, :]
            extra = np.stack([z[act] + last[act], z[act] + h[act][:, None] * down[act]], axis=1)
            pts = np.concatenate([polls, extra], axis=1)
            k_pts = pts.shape[1]
            pts = np.clip(pts, -1.0, 1.0).reshape(-1, n)
            values, stable = evaluate(pts, full)
            count += pts.shape[0]
            unstable |= stable is not None and not stable.all()
            best.update(values, pts, stable)
            for j, s in enumerate(act):
                v = sg[s] * values[qnames[qi[s]]][j * k_pts:(j + 1) * k_pts]
                v = np.where(np.isnan(v), np.inf, v)
                g = v[n:2 * n] - v[:n]  # descent estimate from the polls
                g = np.where(np.isfinite(g), g, 0.0)
                i = int(np.argmin(v))
                need = max(_SEARCH_SLOPE * scale[qi[s]] * h[s], 1e-12 * abs(f[s]))
                if v[i] < f[s] - need:
                    new_z = pts[j * k_pts + i]
                    last[s] = new_z - z[s]
                    z[s] = new_z
                    f[s] = v[i]
                    h[s] = min(2.0 * h[s], 1.0) if np.isfinite(f[s]) else 0.0
                else:
                    h[s] *= 0.5
                    last[s] = 0.0
                g[((z[s] >= 1.0) & (g > 0)) | ((z[s] <= -1.0) & (g < 0))] = 0.0  # projected on the box
                gmax = np.max(np.abs(g))
                down[s] = g / gmax if gmax > 0 else 0.0
    return count, unstable


def _sensitivity_signs(design, engine: _Engine, params: list[str], build, nominal: dict[str, float],
                       workers: int) -> dict[str, np.ndarray]:
    """Per quantity, the sign vector over ``params`` that raises it: the sign of ∂q/∂ln x at nominal.

    Corners take the signs of :func:`loopcraft.analysis.sensitivity.sensitivity` where its row has the same
    label and value; every other quantity (and the GBW column) a central difference of ±1e-4 in
    ln x on the batched evaluator, where a change below 1e-9 of the quantity counts as zero.
    """
    from .sensitivity import sensitivity

    n = len(params)
    h = 1e-4
    vals, gbw = build(np.zeros((2 * n, n)))
    col = {nm: j for j, nm in enumerate(engine.names)}
    for k, p in enumerate(params):
        for row, sgn in ((2 * k, 1.0), (2 * k + 1, -1.0)):
            if p == "gbw":
                gbw[row] = engine.gbw0 * math.exp(sgn * h)
            else:
                vals[col[p], row] *= math.exp(sgn * h)
    r = _run(engine, vals, gbw, workers)
    out: dict[str, np.ndarray] = {}
    for q, v in _quantities(r).items():
        nom = nominal.get(q, math.nan)
        floor = 1.0 if _unit(q) in ("dB", "deg") else 1e-300
        scale = max(abs(nom), floor) if math.isfinite(nom) else 1.0
        with np.errstate(invalid="ignore"):
            d = v[0::2] - v[1::2]
            out[q] = np.where(np.abs(d) > 1e-9 * scale, np.sign(d), 0.0)
        out[q] = np.nan_to_num(out[q])
    for row in sensitivity(design).rows:
        q = row.label
        value = row.value / _TWO_PI if row.quantity == "omega" else row.value
        if q not in out or not math.isclose(value, nominal.get(q, math.nan), rel_tol=1e-9):
            continue  # numbered differently there (a numeric factor): keep the differences
        for k, p in enumerate(params):
            if p != "gbw":
                sv = row.by_component.get(p, 0.0)
                out[q][k] = 0.0 if abs(sv) < 1e-12 else math.copysign(1.0, sv)
    return out
