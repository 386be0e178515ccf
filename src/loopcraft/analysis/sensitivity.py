r"""Which part moves which corner: normalized sensitivities of poles, zeros, ω0 and Q.

For a corner y (ω of a real root, ω0 or Q of a second-order factor) and a
component x the normalized sensitivity is

.. math::

    S^{y}_{x} = \frac{\partial \ln y}{\partial \ln x} = \frac{x}{y}\frac{\partial y}{\partial x},

so S = -1 means "1 % more x moves y 1 % down". Where the corner has a formula
(first- and second-order factors over the symbols) the sensitivity is derived
symbolically once per topology and compiled; for factors solved numerically
it is a central difference in ln x on the compiled evaluator.

A second-order factor with no damping term at the current values (an ideal
LC pair, a pole or zero pair on the jω axis) has an unbounded Q: it gets its
ω0 row and no Q row. Every sensitivity returned is a finite number; where one
is undefined at the given values (a corner that degenerates to 0 or infinity)
:func:`sensitivity` raises :class:`~loopcraft.errors.AnalysisError` instead.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, replace
from functools import cache

import numpy as np
import sympy as sp

from ..errors import AnalysisError
from ..numeric.evaluator import Evaluator, _poly_roots, compile_derivation
from ..symbolic.derivation import Derivation, formula_text

__all__ = ["CornerSensitivity", "Sensitivity", "sensitivity"]


@dataclass(frozen=True)
class CornerSensitivity:
    """Sensitivities of one corner quantity to every component.

    Parameters
    ----------
    label : str
        ``"ωz1"``, ``"ω0p1"``, ``"Qp1"`` … (numbered as in the factored form:
        zeros then poles, each by increasing frequency).
    role : {"zero", "pole"}
    quantity : {"omega", "q"}
        ω or ω0 (rad/s), or Q.
    value : float
        The corner at the current values (rad/s for ω, plain number for Q).
    by_component : mapping of str to float
        ∂ln(value)/∂ln(component) for each component.
    formulas : mapping of str to str or None
        The sensitivity as a formula in the component symbols, when symbolic.
    """

    label: str
    role: str
    quantity: str
    value: float
    by_component: Mapping[str, float]
    formulas: Mapping[str, str] | None = None

    @property
    def f_hz(self) -> float | None:
        """The corner in Hz (None for a Q row)."""
        return self.value / (2 * math.pi) if self.quantity == "omega" else None

    def movers(self, threshold: float = 0.05) -> tuple[str, ...]:
        """Components whose |sensitivity| exceeds ``threshold``, largest first."""
        items = sorted(self.by_component.items(), key=lambda kv: -abs(kv[1]))
        return tuple(k for k, v in items if abs(v) > threshold)


@dataclass(frozen=True)
class Sensitivity:
    """All corner sensitivities of a design at its current values."""

    rows: tuple[CornerSensitivity, ...]

    def moved_by(self, component: str, threshold: float = 0.05) -> tuple[str, ...]:
        """Labels of the corners that ``component`` moves (|S| > ``threshold``)."""
        return tuple(r.label for r in self.rows if abs(r.by_component.get(component, 0.0)) > threshold)

    def to_dict(self) -> list[dict]:
        """JSON-ready rows."""
        return [
            {
                "label": r.label,
                "role": r.role,
                "quantity": r.quantity,
                "value": r.value,
                "sensitivity": dict(r.by_component),
                "formulas": dict(r.formulas) if r.formulas else None,
            }
            for r in self.rows
        ]


@cache
def _symbolic(derivation: Derivation):
    """Per factor: compiled sensitivity functions of ω (and Q), or None when numeric."""
    syms = derivation.symbols
    out = []
    for f in derivation.factors:
        if f.degree not in (1, 2):
            out.append(None)
            continue
        quantities = [("omega", f.corner_expr)]
        if f.degree == 2 and f.coefficients[1] != 0:  # no Q row for a pair that is lossless by topology
            quantities.append(("q", f.q_expr))
        entry = []
        for qname, y in quantities:
            ln_y = sp.expand_log(sp.log(y), force=True)
            exprs = [sp.simplify(x * sp.diff(ln_y, x)) for x in syms]
            fn = sp.lambdify(syms, exprs, modules="math")
            entry.append((qname, fn, tuple(formula_text(e) for e in exprs)))
        out.append(entry)
    return out


def _corner_values(ev: Evaluator, vals: tuple[float, ...]) -> list[list[tuple[str, float]]]:
    """Per layout factor: [(quantity, value), ...] from the compiled coefficients."""
    c = ev.coefficients(vals)
    out = []
    for role, degree, _mult, off in ev._layout:
        coeffs = c[off : off + degree + 1]
        if c[off] == 0 or not all(math.isfinite(x) for x in coeffs) or coeffs[-1] == 0:
            raise AnalysisError(f"a {role} factor degenerates at these values; its sensitivities are undefined")
        a = [x / c[off] for x in coeffs]
        if degree == 1:
            out.append([("omega", abs(1.0 / a[1]))])
        elif degree == 2 and a[2] > 0:
            w0 = 1.0 / math.sqrt(a[2])
            # A pair with no damping term (Q infinite) has no Q row.
            out.append([("omega", w0)] + ([("q", 1.0 / (w0 * abs(a[1])))] if a[1] != 0 else []))
        else:
            roots = _poly_roots(a) if degree > 2 else np.roots(a[::-1])
            out.append([("omega", float(abs(r))) for r in sorted(roots, key=abs)])
    return out


def sensitivity(design, values: Mapping[str, float] | None = None, *, rel_step: float = 1e-6) -> Sensitivity:
    """Normalized sensitivities of every corner to every component.

    Parameters
    ----------
    design : Design
        The design (its topology's derivation is reused from the cache).
    values : mapping, optional
        Component values in SI base units; the design's own when omitted.
    rel_step : float
        Relative step in ln x for the numeric (central-difference) rows.

    Returns
    -------
    Sensitivity
    """
    der = design.derivation
    ev = compile_derivation(der)
    vals = ev.values_tuple(values if values is not None else design.values)
    names = ev.names
    sym = _symbolic(der)
    base = _corner_values(ev, vals)
    numeric_cache: dict[int, list[list[tuple[str, float]]]] = {}

    def perturbed(j: int, sign: float) -> list[list[tuple[str, float]]]:
        key = j if sign > 0 else -j - 1
        if key not in numeric_cache:
            v = list(vals)
            v[j] *= math.exp(sign * rel_step)
            numeric_cache[key] = _corner_values(ev, tuple(v))
        return numeric_cache[key]

    rows: list[tuple[float, CornerSensitivity]] = []
    pairs: set[int] = set()  # factors reported as ω0 (and Q) of a second-order factor
    for i, ((role, deg, _mult, _off), entry) in enumerate(zip(ev._layout, sym, strict=True)):
        # Closed form: first order, or a second-order factor with complex roots (ω0, and Q when damped);
        # a second-order factor with real roots of opposite sign is two numeric roots instead.
        closed = entry is not None and (deg == 1 or [q for q, _ in base[i]] in (["omega"], ["omega", "q"]))
        if closed and deg == 2:
            pairs.add(i)
        if closed:
            fns = {qname: (fn, texts) for qname, fn, texts in entry}
            for qname, value in base[i]:
                fn, texts = fns[qname]
                try:
                    s = [float(x) for x in fn(*vals)]
                except (ArithmeticError, ValueError, TypeError):
                    s = [math.nan]
                if not all(math.isfinite(x) for x in s):
                    raise AnalysisError(
                        f"the sensitivity of a {role}'s {'Q' if qname == 'q' else 'corner'} is undefined at "
                        "these values (it degenerates to 0 or infinity)"
                    )
                rows.append(
                    (
                        i,
                        CornerSensitivity(
                            "",
                            role,
                            qname,
                            value,
                            dict(zip(names, s, strict=True)),
                            dict(zip(names, texts, strict=True)),
                        ),
                    )
                )
        else:
            for k, (qname, value) in enumerate(base[i]):
                by = {}
                for j, n in enumerate(names):
                    try:
                        up = perturbed(j, 1.0)[i][k][1]
                        dn = perturbed(j, -1.0)[i][k][1]
                        by[n] = (math.log(up) - math.log(dn)) / (2 * rel_step)
                    except (IndexError, ArithmeticError, ValueError):
                        by[n] = math.nan
                    if not math.isfinite(by[n]):
                        raise AnalysisError(
                            f"the sensitivity of a {role} to {n} is undefined at these values "
                            "(a root degenerates or changes kind under a small step)"
                        )
                rows.append((i, CornerSensitivity("", role, qname, value, by, None)))
    return Sensitivity(_label(rows, pairs))


def _label(rows: list[tuple[int, CornerSensitivity]], pairs: set[int] | None = None) -> tuple[CornerSensitivity, ...]:
    """Number the corners as the factored form does: zeros then poles, by frequency.

    ``pairs`` holds the factors reported as a second-order factor (ω0 and Q); a lossless one
    has only its ω0 row, still labelled ``ω0…``.
    """
    pairs = pairs or set()
    groups: dict[tuple[int, int], list[CornerSensitivity]] = {}
    for n, (i, r) in enumerate(rows):
        # A Q row joins the ω0 row of its factor; numeric factors give one group per root.
        pair = _has_q(rows, i) or i in pairs
        key = (i, -1) if r.quantity == "q" or (i, -1) not in groups and pair else (i, n)
        groups.setdefault(key, []).append(r)
    out = []
    for role, tag in (("zero", "z"), ("pole", "p")):
        mine = sorted((kg for kg in groups.items() if kg[1][0].role == role), key=lambda kg: kg[1][0].value)
        for n, (key, g) in enumerate(mine, start=1):
            if len(g) == 2:
                out += [replace(g[0], label=f"ω0{tag}{n}"), replace(g[1], label=f"Q{tag}{n}")]
            else:
                out.append(replace(g[0], label=f"ω0{tag}{n}" if key[1] == -1 else f"ω{tag}{n}"))
    return tuple(out)


def _has_q(rows: list[tuple[int, CornerSensitivity]], i: int) -> bool:
    return any(j == i and r.quantity == "q" for j, r in rows)
