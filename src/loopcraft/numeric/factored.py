"""The factored transfer function as a designer writes it, for display.

:class:`FactoredForm` pairs the symbolic factors of a topology (each corner
as a formula in the component symbols, where one exists) with their values
at the current component values, and renders as LaTeX / HTML in a notebook
and as plain text in a terminal.

A zero and a pole that coincide at the current values cancel (see
:func:`loopcraft.numeric.factors.cancel_roots`): their rows are marked ``cancelled``
and left out of the rendered form, which says instead "pole-zero
cancellation at … Hz at these values". A pair on the jω axis shows Q = ∞.

Every row carries its corner label (ωz1, ω0p2 …), fixed once per topology by
the symbolic factor it comes from (:func:`loopcraft.numeric.evaluator.corner_labels`),
never by its rank in frequency: the label of 1/(C1·R2) stays the same however
the values move, and cancelled rows keep theirs. Rows are listed in label order
(zeros, then poles; ω rows, then ω0 rows; by number), so they do not move either.
"""

from __future__ import annotations

import html
import math
import re
from collections import Counter
from dataclasses import dataclass

import sympy as sp

from ..model.values import format_value
from ..symbolic.derivation import Derivation
from .evaluator import TransferResult, corner_labels
from .factors import JW_AXIS_REL_TOL, Factor

__all__ = ["FactoredForm", "CornerRow", "label_sort_key", "q_label"]

_LABEL_RE = re.compile(r"(ω0|ω|Q)([zp])([0-9]+)")


def label_sort_key(label: str) -> tuple[int, int, int, str]:
    """Display order of corner labels: zeros before poles, ω before ω0, then by number."""
    m = _LABEL_RE.fullmatch(label)
    if m is None:
        return (2, 2, 0, label)
    return (0 if m[2] == "z" else 1, 0 if m[1] == "ω" else 1, int(m[3]), label)


def q_label(label: str) -> str | None:
    """The Q label of an ω0 label (``"ω0p1"`` → ``"Qp1"``); None for a first-order ``"ωz1"``."""
    return "Q" + label[2:] if label.startswith("ω0") else None


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
    cancelled : bool
        True when a factor of the other role cancels this one at these values
        (the row is not part of the reduced transfer function).
    label : str
        The corner label, ``"ωz1"`` (order 1) or ``"ω0p1"`` (order 2), fixed
        per topology (see :func:`loopcraft.numeric.evaluator.corner_labels`).
    """

    role: str
    order: int
    omega_rad_s: float
    q: float | None
    rhp: bool
    formula: str | None
    q_formula: str | None
    cancelled: bool = False
    label: str = ""

    @property
    def q_label(self) -> str | None:
        """``"Qp1"`` for the row ``"ω0p1"``; None for a first-order row."""
        return q_label(self.label)

    @property
    def f_hz(self) -> float:
        """Corner frequency in Hz."""
        return self.omega_rad_s / (2 * math.pi)

    @property
    def q_infinite(self) -> bool:
        """True for a second-order factor on the jω axis (zero damping, Q = ∞)."""
        return self.q is not None and math.isinf(self.q)

    @property
    def q_text(self) -> str:
        """Q for display: 4 significant digits, or ``∞`` on the jω axis ("" for order 1)."""
        if self.q is None:
            return ""
        return "∞" if self.q_infinite else f"{self.q:.4g}"

    @property
    def numeric_only(self) -> bool:
        """True when the factor has no closed-form formula at these values."""
        return self.formula is None

    def to_dict(self) -> dict:
        """JSON-ready form: label, role, order, f_hz, q, formula (the CLI's layout).

        ``q`` is null for a first-order factor and for a pair on the jω axis;
        ``q_infinite`` is true for the latter (Q = ∞, zero damping).
        """
        return {
            "label": self.label,
            "role": self.role,
            "order": self.order,
            "f_hz": self.f_hz,
            "q": None if self.q_infinite else self.q,
            "q_infinite": self.q_infinite,
            "formula": self.formula if self.formula is not None else "numeric at current values",
            "q_formula": self.q_formula,
            "rhp": self.rhp,
        }


def _row(f: Factor, cancelled: bool, label: str) -> CornerRow:
    return CornerRow(f.role, f.order, f.omega_rad_s, f.q, f.rhp, f.formula, f.q_formula, cancelled, label)


def _rank_labels(fs: tuple[Factor, ...]) -> list[str]:
    """Labels for factors that came without any (a result built from roots, no topology behind it).

    The only rule left without a derivation: each role and kind numbered by
    increasing frequency (ties in input order).
    """
    out = [""] * len(fs)
    for role, tag in (("zero", "z"), ("pole", "p")):
        for order, kind in ((1, "ω"), (2, "ω0")):
            mine = sorted((i for i, f in enumerate(fs) if f.role == role and f.order == order),
                          key=lambda i: fs[i].omega_rad_s)
            for n, i in enumerate(mine, start=1):
                out[i] = f"{kind}{tag}{n}"
    return out


def _pair_text(pole: complex) -> str:
    """Where a cancellation sits: '60.06 Hz' or 'f0 = 1 kHz, Q = 3' (pole in rad/s)."""
    w = abs(pole)
    f = format_value(w / (2 * math.pi), "Hz", digits=4)
    if pole.imag == 0:
        where = f
    else:
        on_axis = abs(pole.real) <= JW_AXIS_REL_TOL * w
        where = f"f0 = {f}, Q = " + ("∞" if on_axis else f"{w / (2 * abs(pole.real)):.4g}") + " (a complex pair)"
    if pole.real > JW_AXIS_REL_TOL * w:
        where += "; the cancelled pole is in the right half plane: an unstable mode the response does not show"
    elif abs(pole.real) <= JW_AXIS_REL_TOL * w:
        where += "; the cancelled pole is on the jω axis: an undamped mode the response does not show"
    return where


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
        """Every factor with its label, in label order (:func:`label_sort_key`); cancelled ones marked.

        The full form's rows: a row keeps its label when values make it cancel;
        :attr:`reduced_corners` leaves the cancelled rows out.
        """
        fs = self.result.factored.factors
        labels = self.result.labels
        if len(labels) != len(fs):
            labels = tuple(_rank_labels(fs))
        kept = Counter(id(f) for f in self.result.reduced.factors)  # the reduced form keeps the same objects
        rows = []
        for f, label in zip(fs, labels, strict=True):
            keep = kept[id(f)] > 0
            kept[id(f)] -= keep
            rows.append(_row(f, not keep, label))
        return tuple(sorted(rows, key=lambda r: label_sort_key(r.label)))

    def corner(self, label: str) -> CornerRow | None:
        """The row labelled ``label`` (``"ωz1"``, ``"ω0p1"``), or None when the form has none."""
        return next((c for c in self.corners if c.label == label), None)

    @property
    def reduced_corners(self) -> tuple[CornerRow, ...]:
        """The rows of the reduced transfer function (cancelled pairs left out)."""
        return tuple(c for c in self.corners if not c.cancelled)

    @property
    def cancellation_notes(self) -> tuple[str, ...]:
        """One line per cancelled real root or complex pair: "pole-zero cancellation at … at these values"."""
        return tuple(
            f"pole-zero cancellation at {_pair_text(p)} at these values"
            for p in self.result.cancelled
            if p.imag >= 0
        )

    def to_dict(self) -> dict:
        """``{"gain", "gain_formula", "origin_order", "factors": [...], "cancellations": [...]}`` (JSON-ready).

        ``factors`` holds the reduced transfer function (cancelled pairs left
        out); ``cancellations`` the lines of :attr:`cancellation_notes`.
        """
        return {
            "gain": self.gain,
            "gain_formula": self.gain_formula,
            "origin_order": self.origin_order,
            "factors": [c.to_dict() for c in self.reduced_corners],
            "cancellations": list(self.cancellation_notes),
        }

    # -- rendering ---------------------------------------------------------
    def symbolic_latex(self) -> str:
        """LaTeX of the normalized factored form in the component symbols, factors in label order."""
        d = self.derivation
        num: list[str] = []
        den: list[str] = []
        blocks = corner_labels(d)
        for i in sorted(range(len(d.factors)), key=lambda i: label_sort_key(blocks[i].real[0])):
            f = d.factors[i]
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
        """(tag, label, formula, value) of the rows shown: the reduced form, each row with its own label."""
        rows = []
        for c in self.corners:
            if c.cancelled:
                continue
            name = c.label
            tag = name.lstrip("ω0")
            formula = c.formula if c.formula else "numeric at current values"
            value = f"{c.omega_rad_s:.4g} rad/s ({format_value(c.f_hz, 'Hz')})"
            if c.order == 2:
                value += f", Q = {c.q_text}" + (f" (Q = {c.q_formula})" if c.q_formula else "")
            if c.q_infinite:
                value += ", on the jω axis"
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
        lines += [f"  {note}" for note in self.cancellation_notes]
        return "\n".join(lines)

    def _repr_latex_(self) -> str:
        notes = self.cancellation_notes
        if not notes:
            return "$$" + self.symbolic_latex() + "$$"
        text = r" \\ ".join(r"\text{" + _latex_text(n) + "}" for n in notes)
        return r"$$\begin{gathered}" + self.symbolic_latex() + r" \\ " + text + r"\end{gathered}$$"

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
            f"<tbody>{rows}</tbody></table>"
            + "".join(f'<p class="lc-cancellation">{html.escape(n)}</p>' for n in self.cancellation_notes)
            + "</div>"
        )


_LATEX_SPECIAL = {"\\": r"\textbackslash{}", "{": r"\{", "}": r"\}", "$": r"\$", "%": r"\%", "#": r"\#",
                  "&": r"\&", "_": r"\_", "^": r"\^{}", "~": r"\~{}"}


def _latex_text(text: str) -> str:
    r"""``text`` safe inside ``\text{…}`` (TeX specials escaped, ω and ∞ as math)."""
    out = "".join(_LATEX_SPECIAL.get(ch, ch) for ch in text)
    return out.replace("ω", r"$\omega$").replace("∞", r"$\infty$")
