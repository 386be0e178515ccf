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
from dataclasses import dataclass
from functools import cache

import sympy as sp

from ..errors import AnalysisError
from ..numeric.evaluator import Evaluator, compile_derivation
from ..numeric.factored import label_sort_key
from ..symbolic.derivation import Derivation, formula_text

__all__ = ["CornerSensitivity", "Sensitivity", "sensitivity"]


@dataclass(frozen=True)
class CornerSensitivity:
    """Sensitivities of one corner quantity to every component.

    Parameters
    ----------
    label : str
        ``"ωz1"``, ``"ω0p1"``, ``"Qp1"`` …: the label of the factored form's
        row (fixed per topology, not by frequency), so rows match by label.
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


def _check_coefficients(ev: Evaluator, vals: tuple[float, ...]) -> None:
    """Refuse values where a factor degenerates (zero or non-finite constant or leading coefficient)."""
    c = ev.coefficients(vals)
    for role, degree, _mult, off in ev._layout:
        coeffs = c[off : off + degree + 1]
        if c[off] == 0 or not all(math.isfinite(x) for x in coeffs) or coeffs[-1] == 0:
            raise AnalysisError(f"a {role} factor degenerates at these values; its sensitivities are undefined")


def _by_label(ev: Evaluator, vals: tuple[float, ...]) -> dict[str, tuple[int, float, float | None]]:
    """Label → (order, ω or ω0 in rad/s, Q) of every factor at ``vals`` (the evaluator's own labels)."""
    tr = ev.evaluate_tuple(vals)
    return {lb: (f.order, f.omega_rad_s, f.q) for f, lb in zip(tr.factored.factors, tr.labels, strict=True)}


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
        One ω row per corner of the factored form, with the form's own label
        (``"ωz1"``, ``"ω0p1"``; fixed per topology, see
        :func:`loopcraft.numeric.evaluator.corner_labels`), and a Q row
        (``"Qp1"``) after each second-order factor with a finite Q; in the
        form's label order. A repeated factor gives one row per copy.
    """
    der = design.derivation
    ev = compile_derivation(der)
    vals = ev.values_tuple(values if values is not None else design.values)
    names = ev.names
    sym = _symbolic(der)
    _check_coefficients(ev, vals)
    tr = ev.evaluate_tuple(vals)
    owner = {lb: i for i, b in enumerate(ev.label_blocks) for lb in b.real + b.pairs}
    numeric_cache: dict[int, dict[str, tuple[int, float, float | None]]] = {}

    def perturbed(j: int, sign: float) -> dict[str, tuple[int, float, float | None]]:
        key = j if sign > 0 else -j - 1
        if key not in numeric_cache:
            v = list(vals)
            v[j] *= math.exp(sign * rel_step)
            numeric_cache[key] = _by_label(ev, tuple(v))
        return numeric_cache[key]

    rows: list[CornerSensitivity] = []
    order = sorted(zip(tr.factored.factors, tr.labels, strict=True), key=lambda fl: label_sort_key(fl[1]))
    for f, label in order:
        i = owner[label]
        role, deg = f.role, der.factors[i].degree
        entry = sym[i]
        wanted = [("omega", label, f.omega_rad_s)]
        if f.order == 2 and f.q is not None and math.isfinite(f.q):
            wanted.append(("q", "Q" + label[2:], f.q))
        # Closed form: a first-order factor, or a second-order factor whose roots form a pair
        # here (ω0, and Q when damped); real roots of a quadratic and roots of higher
        # factors are numeric.
        if entry is not None and (deg == 1 or f.order == 2):
            fns = {qname: (fn, texts) for qname, fn, texts in entry}
            for qname, lb, value in wanted:
                if qname not in fns:
                    continue  # a pair lossless by topology has no Q row
                fn, texts = fns[qname]
                try:
                    sv = [float(x) for x in fn(*vals)]
                except (ArithmeticError, ValueError, TypeError):
                    sv = [math.nan]
                if not all(math.isfinite(x) for x in sv):
                    raise AnalysisError(
                        f"the sensitivity of a {role}'s {'Q' if qname == 'q' else 'corner'} is undefined at "
                        "these values (it degenerates to 0 or infinity)"
                    )
                rows.append(CornerSensitivity(lb, role, qname, value, dict(zip(names, sv, strict=True)),
                                              dict(zip(names, texts, strict=True))))
            continue
        for qname, lb, value in wanted:
            by = {}
            for j, n in enumerate(names):
                up, dn = perturbed(j, 1.0).get(label), perturbed(j, -1.0).get(label)
                k = 1 if qname == "omega" else 2
                if up is None or dn is None or up[0] != f.order or dn[0] != f.order:
                    by[n] = math.nan
                else:
                    try:
                        by[n] = (math.log(up[k]) - math.log(dn[k])) / (2 * rel_step)
                    except (ArithmeticError, ValueError, TypeError):
                        by[n] = math.nan
                if not math.isfinite(by[n]):
                    raise AnalysisError(
                        f"the sensitivity of {lb} (a {role}) to {n} is undefined at these values "
                        "(a root degenerates or changes kind under a small step)"
                    )
            rows.append(CornerSensitivity(lb, role, qname, value, by, None))
    return Sensitivity(tuple(rows))
