"""The factored transfer function as a designer writes it, for display.

:class:`FactoredForm` pairs the symbolic factors of a topology (each corner
as a formula in the component symbols, where one exists) with their values
at the current component values, and renders as LaTeX / HTML in a notebook
and as plain text in a terminal.
"""

from __future__ import annotations

import html
import math
from dataclasses import dataclass

import sympy as sp

from .derivation import Derivation
from .evaluator import TransferResult
from .factors import Factor
from .values import format_value

__all__ = ["FactoredForm", "CornerRow"]


@dataclass(frozen=True)
class CornerRow:
    """One factor of the factored form with its formula and value.

    Parameters
    ----------
    role : {"zero", "pole"}
    order : {1, 2}
    omega_rad_s : float
        Corner ω or natural frequency ω0, rad/s.
    q : float or None
        Q of a second-order factor.
    rhp : bool
        Right-half-plane root(s).
    formula : str or None
        ω (or ω0) in the component symbols; None when only numeric.
    q_formula : str or None
        Q in the component symbols.
    """

    role: str
    order: int
    omega_rad_s: float
    q: float | None
    rhp: bool
    formula: str | None
    q_formula: str | None

    @property
    def f_hz(self) -> float:
        """Corner frequency in Hz."""
        return self.omega_rad_s / (2 * math.pi)

    @property
    def numeric_only(self) -> bool:
        """True when the factor has no closed-form formula at these values."""
        return self.formula is None

    def to_dict(self) -> dict:
        """JSON-ready form: role, order, f_hz, q, formula (the CLI's layout)."""
        return {
            "role": self.role,
            "order": self.order,
            "f_hz": self.f_hz,
            "q": self.q,
            "formula": self.formula if self.formula is not None else "numeric at current values",
            "q_formula": self.q_formula,
            "rhp": self.rhp,
        }


def _row(f: Factor) -> CornerRow:
    return CornerRow(f.role, f.order, f.omega_rad_s, f.q, f.rhp, f.formula, f.q_formula)


@dataclass(frozen=True)
class FactoredForm:
    """H(s) = K·s^n·Π(1 + s/ωz)·Π(1 + s/(Q·ω0) + s²/ω0²) / (same for poles).

    Parameters
    ----------
    derivation : Derivation
        The symbolic derivation (formulas).
    result : TransferResult
        The numeric result at the current values.
    """

    derivation: Derivation
    result: TransferResult

    @property
    def gain(self) -> float:
        """K (units (rad/s)^-n)."""
        return self.result.gain

    @property
    def gain_formula(self) -> str:
        """K as a formula in the component symbols."""
        return self.result.factored.gain_formula or ""

    @property
    def origin_order(self) -> int:
        """n: zeros (> 0) or poles (< 0) at the origin."""
        return self.result.origin_order

    @property
    def corners(self) -> tuple[CornerRow, ...]:
        """Every factor, zeros then poles, each sorted by frequency."""
        fs = self.result.factored.factors
        zs = sorted((f for f in fs if f.role == "zero"), key=lambda f: f.omega_rad_s)
        ps = sorted((f for f in fs if f.role == "pole"), key=lambda f: f.omega_rad_s)
        return tuple(_row(f) for f in zs + ps)

    def to_dict(self) -> dict:
        """``{"gain", "gain_formula", "origin_order", "factors": [...]}`` (JSON-ready)."""
        return {
            "gain": self.gain,
            "gain_formula": self.gain_formula,
            "origin_order": self.origin_order,
            "factors": [c.to_dict() for c in self.corners],
        }

    # -- rendering ---------------------------------------------------------
    def symbolic_latex(self) -> str:
        """LaTeX of the normalized factored form in the component symbols."""
        d = self.derivation
        num: list[str] = []
        den: list[str] = []
        for f in d.factors:
            t = sp.latex(f.normalized_expr(), order="rev-lex") if f.degree > 0 else "1"
            t = rf"\left({t}\right)" + (f"^{{{f.multiplicity}}}" if f.multiplicity > 1 else "")
            (num if f.role == "zero" else den).append(t)
        n = d.origin_order
        if n > 0:
            num.insert(0, "s" if n == 1 else f"s^{{{n}}}")
        elif n < 0:
            den.insert(0, "s" if n == -1 else f"s^{{{-n}}}")
        k = sp.latex(d.gain_expr)
        top = " ".join(num) or "1"
        if not den:
            return rf"H(s) = {k} \cdot {top}"
        return rf"H(s) = {k} \cdot \frac{{{top}}}{{{' '.join(den)}}}"

    def _corner_lines(self) -> list[tuple[str, str, str, str]]:
        rows = []
        counts = {"zero": 0, "pole": 0}
        for c in self.corners:
            counts[c.role] += 1
            tag = ("z" if c.role == "zero" else "p") + str(counts[c.role])
            name = f"ω{tag}" if c.order == 1 else f"ω0{tag}"
            formula = c.formula if c.formula else "numeric at current values"
            value = f"{c.omega_rad_s:.4g} rad/s ({format_value(c.f_hz, 'Hz')})"
            if c.order == 2:
                value += f", Q = {c.q:.4g}" + (f" (Q = {c.q_formula})" if c.q_formula else "")
            if c.rhp:
                value += ", right half plane"
            rows.append((tag, name, formula, value))
        return rows

    def __str__(self) -> str:
        n = self.origin_order
        origin = {0: "", 1: "·s", -1: "/s"}.get(n, f"·s^{n}")
        lines = [f"H(s) = K{origin} · Π zeros / Π poles,  K = {self.gain_formula} = {self.gain:.6g}"]
        for _tag, name, formula, value in self._corner_lines():
            lines.append(f"  {name:6s} = {formula}  →  {value}")
        return "\n".join(lines)

    def _repr_latex_(self) -> str:
        return "$$" + self.symbolic_latex() + "$$"

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{html.escape(name)}</td><td><code>{html.escape(formula)}</code></td>"
            f"<td>{html.escape(value)}</td></tr>"
            for _t, name, formula, value in self._corner_lines()
        )
        return (
            '<div class="lc-factored">'
            f"<div>\\[{self.symbolic_latex()}\\]</div>"
            f"<p>K = <code>{html.escape(self.gain_formula)}</code> = {self.gain:.6g}</p>"
            "<table><thead><tr><th>corner</th><th>formula (rad/s)</th><th>value</th></tr></thead>"
            f"<tbody>{rows}</tbody></table></div>"
        )
