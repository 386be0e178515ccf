"""Tolerance spread: the ``tolerances`` section, Monte Carlo and worst-case corner search.

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
* the loop ``L = P·k_fb·(∓H_act)`` (sign convention of :mod:`loopcraft.loop`);
* phases: each sample's phase is the nominal analytic phase of the stage as
  built (:func:`loopcraft.asymptote.exact_phase_deg` of its factored form, the
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

Worst case (:func:`worst_case`): every corner of the tolerance box (each
parameter at ±t; for the normal distribution ±t = ±3σ) when at most 12
parameters are toleranced, else a sensitivity-guided vertex per quantity.
Vertices give the exact extremes of quantities that are monotonic in each
parameter over the box (e.g. every corner formula that is a product of
powers of the parts); a quantity with an interior extreme (Q or a margin near
its optimum) can exceed them.
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

from ._symbols import S, component_symbol
from .analysis import default_band_hz
from .asymptote import exact_mag_db, exact_phase_deg
from .derivation import derive
from .errors import AnalysisError, DesignFileError
from .evaluator import compile_derivation
from .factors import factored_from_tf
from .loop import loop_sign
from .spec import parse_spec, sample_pass

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
    if isinstance(value, bool) or not isinstance(value, Real | str):
        raise DesignFileError(f"expected percent text such as '1%' or a fraction such as 0.01 (got {value!r})", where)
    if isinstance(value, str):
        m = _PERCENT_RE.fullmatch(value.strip())
        if m is None:
            raise DesignFileError(f"cannot read {value!r} as a tolerance (expected percent text such as '1%', "
                                  "'0.1 %' or a fraction such as 0.01)", where)
        x = float(m["num"]) / 100.0
    else:
        x = float(value)
    if not (math.isfinite(x) and 0.0 <= x <= MAX_TOLERANCE):
        hint = ""
        if isinstance(value, Real) and 1.0 <= float(value) <= 50.0:
            hint = f"; a number is a fraction, so write {float(value) / 100:g} or '{value:g}%' for {value:g} %"
        raise DesignFileError(f"tolerance {value!r} is outside 0 … 50 %{hint}", where)
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
    if isinstance(tol, ToleranceSet):
        return tol
    if not isinstance(tol, Mapping):
        raise DesignFileError(f"expected an object of designator or pattern: tolerance (got {type(tol).__name__} "
                              f"{tol!r})", key_path)
    names = tuple(names)
    dist = "uniform"
    gbw = 0.0
    rules: list[tuple[str, float, bool]] = []  # (key, fraction, exact)
    for key, value in tol.items():
        where = f"{key_path}.{key}"
        if key == "distribution":
            if value not in DISTRIBUTIONS:
                raise DesignFileError(f"unknown distribution {value!r} (expected one of {', '.join(DISTRIBUTIONS)}; "
                                      "for 'normal' the tolerance is 3σ)", where)
            dist = value
            continue
        if key == "gbw":
            gbw = _fraction(value, where)
            continue
        if not isinstance(key, str) or _KEY_RE.fullmatch(key) is None:
            raise DesignFileError(f"unknown key {key!r} (expected a designator or a glob pattern over designators "
                                  "such as 'R*' or 'C[12]', or one of 'gbw', 'distribution')", where)
        frac = _fraction(value, where)
        exact = not (_GLOB & set(key))
        if exact:
            if key not in names:
                raise DesignFileError(f"no element {key!r} in the stage (elements: {', '.join(names)})", where)
        elif not any(fnmatch.fnmatchcase(n, key) for n in names):
            raise DesignFileError(f"pattern {key!r} matches no element (elements: {', '.join(names)})", where)
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
        Q rows plain. A label follows the factor that carries it at nominal values.
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
        Pass fraction of each spec item.
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

    def __repr__(self) -> str:
        y = "" if self.yield_fraction is None else f", yield={self.yield_fraction:.4f}"
        return (f"Spread(samples={self.samples}, seed={self.seed}, distribution={self.distribution!r}, "
                f"frequencies={self.f_hz.size}, quantities={list(self.quantities)}{y})")

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
    corners, dc_gain_db, crossover_hz, phase_margin_deg, gain_margin_db, n_crossovers
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

    def __repr__(self) -> str:
        return f"Batch(samples={self.stage.shape[0]}, frequencies={self.f_hz.size}, corners={list(self.corners)})"


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
        Smallest and largest value found (NaN when undefined at every vertex tried).
    min_values, max_values : mapping of str to float
        The toleranced parameters at that vertex (parts in SI base units, ``"gbw_hz"`` in Hz).
    min_signs, max_signs : mapping of str to int
        The vertex as signs: -1 (low end), +1 (high end), 0 (nominal), per parameter.
    n_undefined : int
        Vertices where the quantity is undefined (e.g. no crossover).
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

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (non-finite numbers become None)."""
        return {"quantity": self.quantity, "unit": self.unit, "nominal": _json(self.nominal),
                "min": _json(self.min), "max": _json(self.max),
                "min_values": dict(self.min_values), "max_values": dict(self.max_values),
                "min_signs": dict(self.min_signs), "max_signs": dict(self.max_signs),
                "n_undefined": self.n_undefined}


@dataclass(frozen=True, eq=False, repr=False)
class WorstCase:
    """The result of :func:`worst_case`.

    Attributes
    ----------
    f_hz : ndarray
        Frequency grid, Hz.
    method : {"corners", "sensitivity"}
        All 2^n corners, or one sensitivity-guided vertex pair per quantity.
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
        Per-frequency extremes of the stage magnitude over all corners (method "corners" only).
    loop_mag_db_min, loop_mag_db_max : ndarray or None
        The same for the loop (method "corners" with a plant).
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

    def __repr__(self) -> str:
        rows = ", ".join(f"{k}: {e.min:.6g} … {e.max:.6g}" for k, e in self.extremes.items())
        return f"WorstCase(method={self.method!r}, vertices={self.n_evaluated}, {rows})"

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary."""
        return {"method": self.method, "parameters": list(self.parameters), "tolerances": dict(self.tolerances),
                "n_evaluated": self.n_evaluated, "extremes": {k: e.to_dict() for k, e in self.extremes.items()}}


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
        self.loop_k = self.kfb * loop_sign(self.kind)
        if self.kind == "circuit" and self.opamp is not None:
            self.circuit = _circuit_grid(design.stage.circuit, self.names)
        self.nominal_values = np.array([design.values[n] for n in self.names], dtype=float)
        self.gbw0 = self.opamp.gbw_hz if self.opamp is not None else None
        self.ideal_nominal = compile_derivation(der)(design.values).factored
        if f_hz is None:
            extra = (self.opamp.gbw_hz,) if self.opamp is not None else ()
            fns = [self.ideal_nominal] + ([self.plant_fn] if self.plant_fn is not None else [])
            lo, hi = default_band_hz(*fns, extra_hz=extra)
            f_hz = np.logspace(math.log10(lo), math.log10(hi), _DEFAULT_POINTS)
        f = self.f_hz = _check_grid(f_hz)
        self.u = np.log10(f)
        # The stage as built at nominal values, in factored form: its analytic continuous phase
        # is the reference branch of every sample's phase.
        gain, factors = self.factor_arrays(self.nominal_values[:, None])
        num, den = self.stage_polys(self.nominal_values[:, None], None, *self.ideal_polys(gain, factors))
        if self.opamp is None:
            self.stage_nominal = self.ideal_nominal
        else:
            self.stage_nominal = factored_from_tf(_trim(num)[::-1, 0], _trim(den)[::-1, 0])
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
        self._local = threading.local()
        self._structure = self._corner_structure()

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
        """Per factor the plan, and the labels: [(ω label, Q label or None, factor index, entry index)]."""
        _gain, factors = self.factor_arrays(self.nominal_values[:, None])
        plans: list[Any] = []
        entries = []  # (role, ω nominal, is_pair, factor index, entry index)
        for i, (role, mult, a) in enumerate(factors):
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
            for _ in range(mult):
                for e, (w, q) in enumerate(vals):
                    entries.append((role, float(w[0]), q is not None, i, e))
        labelled = []
        for role, tag in (("zero", "z"), ("pole", "p")):
            mine = sorted((e for e in entries if e[0] == role), key=lambda e: e[1])
            for n, (_r, _w, is_pair, i, e) in enumerate(mine, start=1):
                labelled.append((f"ω0{tag}{n}" if is_pair else f"ω{tag}{n}", f"Q{tag}{n}" if is_pair else None, i, e))
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
    with np.errstate(divide="ignore"):
        dc = 20.0 * np.log10(np.abs(num[0])) - 20.0 * np.log10(np.abs(den[0]))
    dc = np.where(den[0] == 0, np.inf, np.where(num[0] == 0, -np.inf, dc))
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
    fc = pm = gm = count = None
    if cross:
        fc, pm, gm, count = engine.margins(num, den, n, [r[0] for r in results], [r[1] for r in results])
    return _Run(corners, dc, lnm, turns, fc, pm, gm, count, num, den, (inum, iden))


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


def _nominal(engine: _Engine) -> dict[str, float]:
    r = _run(engine, engine.nominal_values[:, None], None, 1)
    out = {k: float(v[0]) for k, v in r.corners.items()}
    out["dc_gain_db"] = float(r.dc_gain_db[0])
    if r.fc is not None:
        out.update(crossover_hz=float(r.fc[0]), phase_margin_deg=float(r.pm[0]), gain_margin_db=float(r.gm[0]))
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
    return Batch(engine.f_hz, ideal, stage, mag_db, phase_deg, loop, loop_db, loop_ph, r.corners, r.dc_gain_db,
                 r.fc, r.pm, r.gm, r.count)


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
    nominal = _nominal(engine)
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
    if sp_ is not None and sp_.item_names:
        masks = sample_pass(sp_, {"phase_margin_deg": r.pm, "gain_margin_db": r.gm, "crossover_hz": r.fc,
                                  "corners": r.corners, "dc_gain_db": r.dc_gain_db}, samples)
        passed = np.logical_and.reduce(list(masks.values()))
        y = float(passed.mean())
        item_y = {k: float(v.mean()) for k, v in masks.items()}
    return Spread(engine.f_hz, samples, seed, ts.distribution, tol_out, values, engine.opamp is not None,
                  stage_mag, stage_ph, loop_mag, loop_ph, r.corners, r.dc_gain_db, r.fc, r.pm, r.gm, r.count,
                  nominal, y, passed, item_y)


def _quantities(r: _Run) -> dict[str, np.ndarray]:
    out = dict(r.corners)
    out["dc_gain_db"] = r.dc_gain_db
    if r.fc is not None:
        out.update(crossover_hz=r.fc, phase_margin_deg=r.pm, gain_margin_db=r.gm)
    return out


def worst_case(design, *, f_hz: Any = None, tolerances: Any = None, method: str = "auto",
               workers: int | None = None) -> WorstCase:
    """Worst-case corner search over the tolerance box.

    Parameters
    ----------
    design : Design
    f_hz : array_like, optional
        Frequency grid in Hz (the design's default analysis grid when omitted).
    tolerances : mapping, optional
        A ``tolerances`` section overriding the design's.
    method : {"auto", "corners", "sensitivity"}
        ``"corners"`` evaluates all 2^n vertices (n toleranced parameters, at most 20);
        ``"sensitivity"`` sets each parameter to the end that moves a quantity up (or down)
        by the sign of ∂quantity/∂ln x at nominal — from :func:`loopcraft.sensitivity.sensitivity`
        for corners, by central differences on the batched evaluator for the loop quantities, the
        DC gain and the GBW; ``"auto"`` uses corners when n <= 12.
    workers : int, optional
        Threads (default: up to 4, the CPU count).

    Returns
    -------
    WorstCase

    Raises
    ------
    AnalysisError
        No tolerances, nothing toleranced, an unknown method, or too many parameters for "corners".
    """
    if method not in ("auto", "corners", "sensitivity"):
        raise AnalysisError(f"method must be 'auto', 'corners' or 'sensitivity' (got {method!r})")
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
    nominal = _nominal(engine)
    col = {nm: j for j, nm in enumerate(names)}
    t_vec = np.array([tol[p] for p in params])

    def build(signs: np.ndarray):
        """Part values (parts, M) and GBW (M,) or None for sign rows (M, n)."""
        vals = np.repeat(engine.nominal_values[:, None], signs.shape[0], axis=1)
        gbw = None
        for k, p in enumerate(params):
            factor = 1.0 + t_vec[k] * signs[:, k]
            if p == "gbw":
                gbw = engine.gbw0 * factor
            else:
                vals[col[p]] *= factor
        return vals, gbw

    def vertex_values(sign_row: np.ndarray) -> dict[str, float]:
        out = {}
        for k, p in enumerate(params):
            x0 = engine.gbw0 if p == "gbw" else engine.nominal_values[col[p]]
            out["gbw_hz" if p == "gbw" else p] = float(x0 * (1.0 + t_vec[k] * sign_row[k]))
        return out

    def signs_dict(row: np.ndarray) -> dict[str, int]:
        return {p: int(row[k]) for k, p in enumerate(params)}

    extremes: dict[str, Extreme] = {}
    env = {}
    if method == "corners":
        signs = 1.0 - 2.0 * ((np.arange(2**n)[:, None] >> np.arange(n)[None, :]) & 1)
        vals, gbw = build(signs)
        r = _run(engine, vals, gbw, nw)
        env["stage_mag_db_min"], env["stage_mag_db_max"] = _DBK * r.lnm.min(axis=1), _DBK * r.lnm.max(axis=1)
        if engine.plant_fn is not None:
            env["loop_mag_db_min"] = env["stage_mag_db_min"] + engine.loop_db_offset
            env["loop_mag_db_max"] = env["stage_mag_db_max"] + engine.loop_db_offset
        for q, v in _quantities(r).items():
            extremes[q] = _extreme(q, v, signs, nominal.get(q, math.nan), vertex_values, signs_dict)
        n_eval = signs.shape[0]
    else:
        sgn = _sensitivity_signs(design, engine, params, build, nominal, nw)
        qs = list(sgn)
        rows = np.vstack([np.vstack([sgn[q], -sgn[q]]) for q in qs])
        vals, gbw = build(rows)
        r = _run(engine, vals, gbw, nw)
        allq = _quantities(r)
        for k, q in enumerate(qs):
            v = allq[q][2 * k:2 * k + 2]
            extremes[q] = _extreme(q, v, rows[2 * k:2 * k + 2], nominal.get(q, math.nan), vertex_values, signs_dict)
        n_eval = rows.shape[0]
    return WorstCase(engine.f_hz, method, tuple(params), tol, n_eval, extremes, **env)


def _extreme(q, v, signs, nominal, vertex_values, signs_dict) -> Extreme:
    v = np.asarray(v, dtype=float)
    undefined = int(np.isnan(v).sum())
    if undefined == v.size:
        empty: dict = {}
        return Extreme(q, _unit(q), nominal, math.nan, math.nan, empty, empty, empty, empty, undefined)
    i_lo = int(np.nanargmin(v))
    i_hi = int(np.nanargmax(v))
    return Extreme(q, _unit(q), nominal, float(v[i_lo]), float(v[i_hi]), vertex_values(signs[i_lo]),
                   vertex_values(signs[i_hi]), signs_dict(signs[i_lo]), signs_dict(signs[i_hi]), undefined)


def _sensitivity_signs(design, engine: _Engine, params: list[str], build, nominal: dict[str, float],
                       workers: int) -> dict[str, np.ndarray]:
    """Per quantity, the sign vector over ``params`` that raises it: the sign of ∂q/∂ln x at nominal.

    Corners take the signs of :func:`loopcraft.sensitivity.sensitivity` where its row has the same
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
