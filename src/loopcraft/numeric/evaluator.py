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
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
import sympy as sp

from ..errors import AnalysisError, ComponentValueError
from ..model.values import MAX_VALUE, MIN_VALUE, parse_value
from ..symbolic.derivation import Derivation, formula_text
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

__all__ = ["Evaluator", "TransferResult", "compile_derivation"]


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
        zeros: list[complex] = []
        poles: list[complex] = []
        origin = self.derivation.origin_order
        for (role, degree, mult, off), (wf, qf) in zip(self._layout, self._formulas, strict=True):
            c0 = c[off]
            if c0 == 0 or not math.isfinite(c0):
                raise AnalysisError(f"a {role} factor has a zero constant term at these values; the stage degenerates")
            a = [c[off + k] / c0 for k in range(1, degree + 1)]
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
            for _ in range(mult):
                factors.extend(fs)
                (zeros if role == "zero" else poles).extend(roots)
        nz, npl = max(origin, 0), max(-origin, 0)
        fn = FactoredNumeric(gain, origin, tuple(factors), gain_formula=self._gain_formula)
        return TransferResult(
            fn,
            np.array([0j] * nz + zeros, dtype=complex),
            np.array([0j] * npl + poles, dtype=complex),
            dict(zip(self.names, vals, strict=True)),
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
