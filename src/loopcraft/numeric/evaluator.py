"""The compiled numeric fast path: values in, poles, zeros and responses out.

A :class:`Evaluator` is built once per topology from its :class:`Derivation`:
every coefficient of every symbolic factor is compiled (``sympy.lambdify``
with common-subexpression elimination, plain ``math`` on floats) into a
single function. One update then costs one call of that function, closed-form
roots of the first- and second-order factors, and a vectorized product over
the factors for the response; no sympy runs on the update path.

Conditioning: each factor is normalized to f(0) = 1, so its coefficients are
1/ω, 1/(Qω0), 1/ω0² — numbers near the corners themselves, however widely the
component values spread. First-order roots are -c0/c1 exactly; quadratic roots
use the cancellation-free formula; factors of degree three and above are
solved on a frequency-scaled polynomial and polished by Newton steps on it.

Corner labels: every numeric factor carries a label (``ωz1``, ``ω0p2`` …; see
:func:`corner_labels`) fixed once per topology by the symbolic factor it comes
from, never by its rank in frequency at the current values, so a label names
the same formula whatever the values; :attr:`TransferResult.labels` holds them.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from functools import cache, cached_property

import numpy as np
import sympy as sp

from ..errors import AnalysisError, ComponentValueError
from ..model.values import MAX_VALUE, MIN_VALUE, parse_value
from ..symbolic.derivation import Derivation, SymbolicFactor, formula_text
from ..symbolic.symbols import element_kind
from .factors import (
    JW_AXIS_REL_TOL,
    Cancellation,
    Factor,
    FactoredNumeric,
    cancel_roots,
    drop_cancelled,
    factors_from_roots,
    polynomial_roots,
)

__all__ = ["Evaluator", "LabelBlock", "TransferResult", "compile_derivation", "corner_labels"]


@dataclass(frozen=True)
class TransferResult:
    """Numeric transfer function at one set of component values.

    Parameters
    ----------
    factored : FactoredNumeric
        Normalized factored form (gain K, origin order, factors in rad/s), every
        factor of the derivation, cancelling pairs included.
    zeros, poles : ndarray of complex
        All roots in rad/s, roots at the origin included, cancelling pairs
        included (every root of the numerator and denominator).
    values : dict
        The component values used, in SI base units.
    labels : tuple of str
        The corner label of each factor of ``factored`` (same order): ``"ωz1"``
        for a real root, ``"ω0p1"`` for a complex pair (its Q is ``"Qp1"``),
        fixed per topology by :func:`corner_labels`. Empty for a result built
        by hand from roots (no topology behind it).

    Notes
    -----
    A zero and a pole that coincide at these values (exactly, or within
    :data:`loopcraft.numeric.factors.CANCEL_REL_TOL` of their magnitude) cancel:
    :attr:`reduced_zeros`, :attr:`reduced_poles` and :attr:`reduced` are the
    transfer function without them, :attr:`cancelled` lists where they were.
    ``zeros``, ``poles`` and ``factored`` keep every root so that a cancelled
    right-half-plane pole (an unstable mode H(s) does not show) stays visible;
    see :attr:`hidden_modes`.
    """

    factored: FactoredNumeric
    zeros: np.ndarray
    poles: np.ndarray
    values: Mapping[str, float] = field(repr=False)
    labels: tuple[str, ...] = ()

    @property
    def gain(self) -> float:
        """K of the normalized factored form."""
        return self.factored.gain

    @property
    def origin_order(self) -> int:
        """Zeros (> 0) or poles (< 0) at the origin."""
        return self.factored.origin_order

    def evaluate(self, s: np.ndarray) -> np.ndarray:
        """H at complex frequencies ``s`` in rad/s."""
        return self.factored.evaluate(s)

    def response(self, f_hz: np.ndarray) -> np.ndarray:
        """Complex frequency response H(j·2π·f) at ``f_hz`` (Hz)."""
        return self.factored.response(f_hz)

    @cached_property
    def cancellation(self) -> Cancellation:
        """The coinciding zero/pole pairs at these values (see :func:`loopcraft.numeric.factors.cancel_roots`)."""
        return cancel_roots(self.zeros, self.poles)

    @cached_property
    def reduced_zeros(self) -> np.ndarray:
        """Zeros of the reduced transfer function, rad/s (cancelled ones taken out).

        A complex pair within :data:`~loopcraft.numeric.factors.JW_AXIS_REL_TOL` of the
        jω axis is put on it (real part 0), as its factor has Q = ∞.
        """
        return _on_axis(self.cancellation.zeros)

    @cached_property
    def reduced_poles(self) -> np.ndarray:
        """Poles of the reduced transfer function, rad/s (cancelled ones taken out; jω axis as for zeros)."""
        return _on_axis(self.cancellation.poles)

    @property
    def cancelled(self) -> np.ndarray:
        """Where a zero and a pole cancel: the cancelled poles, rad/s (complex; conjugates listed)."""
        return self.cancellation.cancelled

    @property
    def hidden_modes(self) -> np.ndarray:
        """Cancelled poles in the right half plane or on the jω axis, rad/s.

        The reduced H(s) does not show them, but the stage still has them: a
        signal inside the circuit grows (or does not decay) even though the
        input-output response looks stable.
        """
        c = self.cancelled
        return c[c.real >= -JW_AXIS_REL_TOL * np.abs(c)]

    @cached_property
    def reduced(self) -> FactoredNumeric:
        """The normalized factored form without the cancelled factors (same response)."""
        return drop_cancelled(self.factored, self.cancellation)

    @cached_property
    def zpk_gain(self) -> float:
        """Leading gain k of H(s) = k·Π(s - z)/Π(s - p) (scipy's zpk convention)."""
        nz = self.zeros[self.zeros != 0]
        npl = self.poles[self.poles != 0]
        return float(np.real(self.gain * np.prod(-npl) / np.prod(-nz)))

    def tf(self) -> tuple[np.ndarray, np.ndarray]:
        """(num, den) coefficients in descending powers of s (rad/s), monic denominator."""
        return (self.zpk_gain * np.real(np.poly(self.zeros)), np.real(np.poly(self.poles)))

    def dc_gain(self) -> float:
        """H(0) when finite and nonzero; 0 or inf with a zero or pole at the origin."""
        n = self.origin_order
        return self.gain if n == 0 else (0.0 if n > 0 else math.inf)

    def hf_gain(self) -> float:
        """Lim |H(s)| as s → ∞ (0 or inf when the orders differ)."""
        excess = len(self.zeros) - len(self.poles)
        if excess:
            return 0.0 if excess < 0 else math.inf
        return abs(self.zpk_gain)


def _on_axis(roots: np.ndarray) -> np.ndarray:
    """Roots with the real part of near-imaginary complex roots set to 0 (a copy)."""
    r = np.array(roots, dtype=complex)
    flat = (r.imag != 0) & (np.abs(r.real) <= JW_AXIS_REL_TOL * np.abs(r))
    r.real[flat] = 0.0
    return r


def _quadratic_roots(a1: float, a2: float) -> tuple[complex, complex]:
    """Roots of 1 + a1·s + a2·s² without cancellation."""
    disc = a1 * a1 - 4.0 * a2
    if disc >= 0:
        q = -0.5 * (a1 + math.copysign(math.sqrt(disc), a1))
        if q == 0.0:
            r = math.sqrt(-1.0 / a2) if a2 < 0 else 0.0
            return complex(r), complex(-r)
        return complex(q / a2), complex(1.0 / q)
    re = -a1 / (2.0 * a2)
    im = math.sqrt(-disc) / (2.0 * abs(a2))
    return complex(re, im), complex(re, -im)


def _poly_roots(a: list[float]) -> np.ndarray:
    """Roots of 1 + a1·s + … + ad·s^d (ascending normalized coefficients), d >= 3."""
    return polynomial_roots(a[::-1])


@dataclass(frozen=True)
class LabelBlock:
    """The corner labels one symbolic factor owns (fixed once per topology).

    Parameters
    ----------
    real : tuple of str
        ω labels (``"ωz1"`` …) for the roots that come out real: degree ×
        multiplicity of them, copy by copy.
    pairs : tuple of str
        ω0 labels (``"ω0p1"`` …) for the complex pairs: (degree // 2) ×
        multiplicity of them, copy by copy. The Q of ``"ω0p1"`` is ``"Qp1"``.
    """

    real: tuple[str, ...]
    pairs: tuple[str, ...]


def _natural_key(text: str) -> tuple[tuple[int, int, str], ...]:
    """Sort key that orders embedded numbers by value (``C2`` before ``C10``)."""
    return tuple((0, int(t), "") if t.isdigit() else (1, 0, t) for t in re.findall(r"\d+|\D+", text))


def _factor_key(f: SymbolicFactor) -> tuple:
    """Order of a symbolic factor for numbering: degree, the parts it depends on, its formula text."""
    # The coefficients are sympy expressions built by the derivation from validated designators;
    # no text is parsed here.
    symbols = (x for c in f.coefficients if isinstance(c, sp.Basic) for x in c.free_symbols)
    parts = sorted((str(x) for x in symbols), key=_natural_key)
    text = f"{f.corner_text} {f.q_text or ''}" if f.degree <= 2 else formula_text(f.normalized_expr())
    return (f.degree, tuple(_natural_key(p) for p in dict.fromkeys(parts)), _natural_key(text))


@cache
def corner_labels(derivation: Derivation) -> tuple[LabelBlock, ...]:
    """The labels of each symbolic factor of ``derivation`` (same order), from the topology alone (cached).

    Parameters
    ----------
    derivation : Derivation
        The symbolic derivation of the topology.

    Returns
    -------
    tuple of LabelBlock

    Notes
    -----
    The rule, applied once per topology and never to values:

    * each role (zeros ``z``, poles ``p``) is numbered on its own, in two
      sequences: ``ω`` for real roots and ``ω0`` (with ``Q``) for complex pairs;
    * a symbolic factor of degree d and multiplicity m owns d·m numbers of the
      ``ω`` sequence (as many real roots as it can have) and (d // 2)·m of the
      ``ω0`` sequence (as many pairs), so a factor whose roots turn from real
      to complex never shifts another factor's labels;
    * factors take their numbers in the order: degree; then the designators
      the factor depends on, sorted, compared as lists (numbers inside names by
      value: ``C2`` before ``C10``); then the formula text; then the derivation's
      order. First-order corners are thus ``ωz1``, ``ωz2`` … with no gap, the
      factor of the lowest-numbered parts first (Type III: ``ωz1 = 1/(C1·R2)``,
      ``ωz2 = 1/(C3·(R1 + R3))``, ``ωp1 = (C1 + C2)/(C1·C2·R2)``, ``ωp2 = 1/(C3·R3)``);
    * numeric-only roots (a second-order factor with real roots, a factor of
      degree 3 or more) have no formula to tell them apart: within their
      factor's block, real roots are numbered by increasing frequency at the
      current values (ties: as computed), and pairs likewise by ω0. Two roots of
      one such factor can therefore swap labels when they cross; roots of
      different factors never do.

    A second-order factor with complex roots uses one ω0 label (its two ω numbers
    stay reserved for when its roots are real); cancelled factors keep their
    labels.
    """
    order = sorted(range(len(derivation.factors)),
                   key=lambda i: (*_factor_key(derivation.factors[i]), i))
    nxt = {("zero", "real"): 1, ("zero", "pair"): 1, ("pole", "real"): 1, ("pole", "pair"): 1}
    blocks: dict[int, LabelBlock] = {}
    for i in order:
        f = derivation.factors[i]
        tag = "z" if f.role == "zero" else "p"
        n_real, n_pair = f.degree * f.multiplicity, (f.degree // 2) * f.multiplicity
        r0, p0 = nxt[(f.role, "real")], nxt[(f.role, "pair")]
        nxt[(f.role, "real")] += n_real
        nxt[(f.role, "pair")] += n_pair
        blocks[i] = LabelBlock(tuple(f"ω{tag}{r0 + k}" for k in range(n_real)),
                               tuple(f"ω0{tag}{p0 + k}" for k in range(n_pair)))
    return tuple(blocks[i] for i in range(len(derivation.factors)))


def _block_labels(fs: list[Factor], block: LabelBlock, degree: int, copy: int) -> tuple[list[Factor], list[str]]:
    """Numeric factors of one copy of a symbolic factor sorted by (ω, order), with their labels."""
    fs = sorted(fs, key=lambda f: (f.omega_rad_s, f.order))
    real = iter(block.real[copy * degree:(copy + 1) * degree])
    pairs = iter(block.pairs[copy * (degree // 2):(copy + 1) * (degree // 2)])
    return fs, [next(real) if f.order == 1 else next(pairs) for f in fs]


class Evaluator:
    """Compiled evaluator of one topology.

    Call it with component values (a mapping of designator to value, numbers
    in SI base units or engineering text) to get a :class:`TransferResult`.

    Parameters
    ----------
    derivation : Derivation
        The cached symbolic derivation of the topology.
    """

    def __init__(self, derivation: Derivation) -> None:
        self.derivation = derivation
        self.names = derivation.names
        exprs: list[sp.Expr] = [derivation.gain_expr]
        self._layout: list[tuple[str, int, int, int]] = []  # role, degree, multiplicity, offset
        for f in derivation.factors:
            self._layout.append((f.role, f.degree, f.multiplicity, len(exprs)))
            exprs.extend(f.coefficients)
        self._fn = sp.lambdify(derivation.symbols, exprs, modules="math", cse=True)
        self._formulas = [_formulas(f) for f in derivation.factors]
        self._gain_formula = formula_text(derivation.gain_expr)
        self._kinds = {n: element_kind(n) for n in self.names}
        #: The corner labels of each symbolic factor, fixed for the topology (:func:`corner_labels`).
        self.label_blocks = corner_labels(derivation)

    def values_tuple(self, values: Mapping[str, float | str]) -> tuple[float, ...]:
        """Order and parse values for the compiled function (SI base units).

        Raises
        ------
        ComponentValueError
            A missing value, an unknown name, or a value that does not parse.
        """
        extra = [k for k in values if k not in self._kinds]
        if extra:
            raise ComponentValueError(
                f"no element named {extra[0]!r} in this stage (elements: {', '.join(self.names)})"
            )
        out = []
        for n in self.names:
            if n not in values:
                raise ComponentValueError(f"{n}: no value given")
            v = values[n]
            # Fast path for plain floats inside the documented range; anything else (text, ints,
            # out-of-range or non-finite numbers) goes through the validating parser.
            out.append(v if type(v) is float and MIN_VALUE <= v <= MAX_VALUE
                       else parse_value(v, name=n, kind=self._kinds[n]))
        return tuple(out)

    def coefficients(self, vals: tuple[float, ...]) -> list[float]:
        """Raw compiled outputs: [K, c0, c1, … of each factor]."""
        return self._fn(*vals)

    def __call__(self, values: Mapping[str, float | str]) -> TransferResult:
        """Evaluate at component values; see :meth:`evaluate_tuple`."""
        vals = self.values_tuple(values)
        return self.evaluate_tuple(vals)

    def evaluate_tuple(self, vals: tuple[float, ...]) -> TransferResult:
        """Evaluate at values already ordered as :attr:`names` (floats, SI base units)."""
        c = self._fn(*vals)
        gain = float(c[0])
        factors: list[Factor] = []
        labels: list[str] = []
        zeros: list[complex] = []
        poles: list[complex] = []
        origin = self.derivation.origin_order
        for (role, degree, mult, off), (wf, qf), block in zip(self._layout, self._formulas, self.label_blocks,
                                                              strict=True):
            c0 = c[off]
            if c0 == 0 or not math.isfinite(c0):
                raise AnalysisError(f"a {role} factor has a zero constant term at these values; the stage degenerates")
            a = [c[off + k] / c0 for k in range(1, degree + 1)]
            numeric = False
            if degree == 1:
                r = -1.0 / a[0]
                fs = [Factor(role, 1, abs(r), rhp=r > 0, formula=wf)]
                roots = [complex(r)]
            elif degree == 2 and a[1] > 0 and a[0] * a[0] < 4.0 * a[1]:
                # Complex pair (Q > 0.5): one second-order factor with its ω0 and Q formulas.
                w0 = 1.0 / math.sqrt(a[1])
                if 0.5 * w0 * abs(a[0]) <= JW_AXIS_REL_TOL:  # damping ζ = a1·ω0/2 ≈ 0: on the jω axis
                    fs = [Factor(role, 2, w0, q=math.inf, formula=wf, q_formula=qf)]
                else:
                    q = 1.0 / (w0 * abs(a[0]))
                    fs = [Factor(role, 2, w0, q=q, rhp=a[0] < 0, formula=wf, q_formula=qf)]
                roots = list(_quadratic_roots(a[0], a[1]))
            else:
                # Real roots of a quadratic (Q <= 0.5, or roots of opposite sign), or a factor
                # of degree >= 3: first/second-order factors found numerically.
                roots = list(_quadratic_roots(a[0], a[1])) if degree == 2 else list(_poly_roots([1.0, *a]))
                split = factors_from_roots(roots, [], 1.0) if role == "zero" else factors_from_roots([], roots, 1.0)
                note = f"real root of 1 + s/(Q·ω0) + s²/ω0² with ω0 = {wf}, Q = {qf}" if degree == 2 and wf else None
                fs = [replace(f, formula=note) for f in split.factors]
                numeric = True
            for k in range(mult):
                if numeric:
                    fk, lk = _block_labels(fs, block, degree, k)
                else:  # one closed-form factor: an ω label (order 1) or an ω0 label (a complex pair)
                    fk, lk = fs, [block.real[k] if degree == 1 else block.pairs[k]]
                factors.extend(fk)
                labels.extend(lk)
                (zeros if role == "zero" else poles).extend(roots)
        nz, npl = max(origin, 0), max(-origin, 0)
        fn = FactoredNumeric(gain, origin, tuple(factors), gain_formula=self._gain_formula)
        return TransferResult(
            fn,
            np.array([0j] * nz + zeros, dtype=complex),
            np.array([0j] * npl + poles, dtype=complex),
            dict(zip(self.names, vals, strict=True)),
            tuple(labels),
        )


def _formulas(f) -> tuple[str | None, str | None]:
    return f.corner_text, f.q_text


_CACHE: dict[Derivation, Evaluator] = {}


def compile_derivation(derivation: Derivation) -> Evaluator:
    """Return the (cached) compiled evaluator of a derivation."""
    ev = _CACHE.get(derivation)
    if ev is None:
        ev = _CACHE[derivation] = Evaluator(derivation)
    return ev
