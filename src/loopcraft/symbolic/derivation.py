r"""Symbolic derivation of a stage's transfer function, done once per topology.

The ideal transfer function of a stage is brought to

.. math::

    H(s) = K \; s^{n} \; \frac{\prod_i f_i(s)^{m_i}}{\prod_j g_j(s)^{m_j}},
    \qquad f_i(0) = g_j(0) = 1,

by factoring numerator and denominator over the component symbols
(``sympy.factor_list``). Each factor keeps its coefficients as expressions in
the component symbols; first- and second-order factors also carry closed-form
corners (ω = c0/c1; ω0 = sqrt(c0/c2), Q = sqrt(c0·c2)/c1). Higher-order factors
that do not factor over the symbols are solved numerically at evaluation time.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cache
from typing import TYPE_CHECKING

import sympy as sp

from ..errors import TopologyError
from .symbols import S, component_symbol

if TYPE_CHECKING:
    from ..model.stage import Stage

__all__ = ["SymbolicFactor", "Derivation", "derive", "formula_text"]


def formula_text(expr: sp.Expr) -> str:
    """Plain-text formula with ``·`` for products and ``^`` for powers, e.g. ``1/(C1·R2)``."""
    text: str = sp.sstr(expr)
    return text.replace("**", "^").replace("*", "·")


def _root_text(expr: sp.Expr) -> str:
    """sqrt(expr) as text, squares taken out: sqrt(R1^2·C1) -> ``R1·sqrt(C1)``."""
    outside, inside = [], []
    for base, exp in (term.as_base_exp() for term in sp.Mul.make_args(expr)):
        if exp.is_Integer:
            q, r = divmod(int(exp), 2)
            outside.append(base**q)
            inside.append(base**r)
        else:
            inside.append(base**exp)
    out, inn = sp.Mul(*outside), sp.Mul(*inside)
    root = "" if inn == 1 else f"sqrt({formula_text(inn)})"
    if out == 1:
        return root or "1"
    return formula_text(out) + (f"·{root}" if root else "")


def _sqrt_ratio_text(expr: sp.Expr) -> str:
    """sqrt(n/d) written as ``sqrt(n)/sqrt(d)`` with whole products under each root."""
    n, d = sp.fraction(expr)
    top = _root_text(n)
    if d == 1:
        return top
    bottom = _root_text(d)
    return f"{top}/({bottom})" if "·" in bottom and not bottom.startswith("sqrt(") else f"{top}/{bottom}"


@dataclass(frozen=True)
class SymbolicFactor:
    """One factor f(s) = c0 + c1·s + … + cd·s^d of the numerator or denominator.

    Parameters
    ----------
    role : {"zero", "pole"}
    coefficients : tuple of sympy.Expr
        Ascending coefficients c0 … cd in the component symbols (s in rad/s).
    multiplicity : int
        How many times the factor repeats.
    """

    role: str
    coefficients: tuple[sp.Expr, ...]
    multiplicity: int = 1

    @property
    def degree(self) -> int:
        """Degree d of the factor in s."""
        return len(self.coefficients) - 1

    @property
    def corner_expr(self) -> sp.Expr | None:
        """ω = c0/c1 (order 1) or ω0 = sqrt(c0/c2) (order 2), rad/s; None above order 2."""
        c = self.coefficients
        if self.degree == 1:
            return sp.factor(c[0] / c[1])
        if self.degree == 2:
            return sp.powsimp(sp.sqrt(sp.factor(c[0] / c[2])), force=True)
        return None

    @property
    def q_expr(self) -> sp.Expr | None:
        """Q = sqrt(c0·c2)/c1 of a second-order factor; None otherwise."""
        c = self.coefficients
        if self.degree != 2:
            return None
        return sp.powsimp(sp.sqrt(sp.factor(c[0] * c[2])) / sp.factor(c[1]), force=True)

    @property
    def corner_text(self) -> str | None:
        """ω or ω0 as text, square roots kept whole: ``1/sqrt(C1·C2·R1·R2)``."""
        c = self.coefficients
        if self.degree == 1:
            return formula_text(sp.factor(c[0] / c[1]))
        if self.degree == 2:
            return _sqrt_ratio_text(sp.factor(c[0] / c[2]))
        return None

    @property
    def q_text(self) -> str | None:
        """Q as text, e.g. ``sqrt(C1·C2·R1·R2)/(C2·(R1 + R2))``."""
        c = self.coefficients
        if self.degree != 2:
            return None
        return f"{_sqrt_ratio_text(sp.factor(c[0] * c[2]))}/({formula_text(sp.factor(c[1]))})"

    def normalized_expr(self) -> sp.Expr:
        """f(s)/f(0) as an expression in s and the component symbols."""
        c0 = self.coefficients[0]
        return sp.Add(*(sp.factor(ck / c0) * S**k for k, ck in enumerate(self.coefficients)))


@dataclass(frozen=True)
class Derivation:
    """The symbolic result for one topology.

    Parameters
    ----------
    names : tuple of str
        Component designators, in the order the compiled evaluator takes values.
    transfer : sympy.Expr
        H(s), cancelled.
    numerator, denominator : sympy.Expr
        Polynomials in s with coefficients in the component symbols.
    gain_expr : sympy.Expr
        K of the normalized factored form (units (rad/s)^-n).
    origin_order : int
        n: zeros (> 0) or poles (< 0) at the origin.
    factors : tuple of SymbolicFactor
        Numerator factors first, then denominator factors.
    """

    names: tuple[str, ...]
    transfer: sp.Expr
    numerator: sp.Expr
    denominator: sp.Expr
    gain_expr: sp.Expr
    origin_order: int
    factors: tuple[SymbolicFactor, ...]

    @property
    def symbols(self) -> tuple[sp.Symbol, ...]:
        """The component symbols in ``names`` order."""
        return tuple(component_symbol(n) for n in self.names)


def _split(poly_expr: sp.Expr, role: str) -> tuple[sp.Expr, int, list[SymbolicFactor]]:
    """Factor a polynomial in s: return (s-free constant, power of s, factors)."""
    const, parts = sp.factor_list(sp.expand(poly_expr))
    const = sp.Integer(1) * const
    origin = 0
    factors: list[SymbolicFactor] = []
    for f, m in parts:
        if not f.has(S):
            const *= f**m
            continue
        p = sp.Poly(f, S)
        coeffs = tuple(reversed(p.all_coeffs()))
        if p.degree() == 1 and coeffs[0] == 0:
            # f = c1*s: a root at the origin (c1 is s-free).
            origin += int(m)
            const *= coeffs[1] ** m
            continue
        const *= coeffs[0] ** m
        factors.append(SymbolicFactor(role, coeffs, int(m)))
    return const, origin, factors


@cache
def _derive(transfer: sp.Expr, names: tuple[str, ...]) -> Derivation:
    num, den = sp.fraction(sp.cancel(sp.together(transfer)))
    if num == 0:
        raise TopologyError("the transfer function is identically zero; the output does not depend on the input")
    if not den.has(S) and den == 0:
        raise TopologyError("the transfer function is undefined (zero denominator)")
    kn, on, fn = _split(num, "zero")
    kd, od, fd = _split(den, "pole")
    gain = sp.factor(kn / kd)
    return Derivation(names, transfer, sp.expand(num), sp.expand(den), gain, on - od, tuple(fn + fd))


def derive(stage: Stage) -> Derivation:
    """Derive (once per topology, cached on the frozen stage) the factored symbolic transfer of a stage.

    Parameters
    ----------
    stage : InvertingStage, NonInvertingStage or CircuitStage

    Returns
    -------
    Derivation

    Raises
    ------
    TopologyError
        An undefined transfer function, or a stage so deeply nested that
        the symbolic algebra reaches Python's recursion limit (the parsers'
        part and nesting limits keep real stages far from it).
    """
    try:
        return _derive_stage(stage)  # hashing the stage for the cache recurses over its tree too
    except RecursionError:
        raise TopologyError(
            "the stage is nested too deeply to derive: the symbolic algebra reached Python's recursion "
            "limit; flatten the networks or use fewer parts"
        ) from None


@cache
def _derive_stage(stage: Stage) -> Derivation:
    return _derive(stage.transfer_expr(), tuple(stage.component_names))
