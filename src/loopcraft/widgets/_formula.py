r"""The formula panel: the factored transfer function and a table of its corners.

The symbolic form

.. math::

    H(s) = K \, s^{n} \, \frac{\prod (1 + s/\omega_z) \cdots}{\prod (1 + s/\omega_p) \cdots}

is typeset once per topology (an ``HTMLMath`` widget, MathJax delimiters as
in :meth:`loopcraft.numeric.factored.FactoredForm._repr_html_`); the table below it
gives each corner's formula and its value at the current component values
and is rebuilt only when its text changes. Each row shows the corner's own
label (ωz1, ωp1, ω0p1 with Qp1), fixed per topology by its formula
(:func:`loopcraft.numeric.evaluator.corner_labels`): dragging a part never
renumbers a row nor moves it in the table. The rows that the component being
dragged moves, by :meth:`loopcraft.analysis.sensitivity.Sensitivity.moved_by`,
are highlighted; sensitivity rows carry the same labels, so they are matched
by label, never by value.

A zero and a pole that cancel at the current values are left out of the
table (the other rows keep their labels) and named below it: "pole-zero
cancellation at … Hz at these values". A pair on the jω axis shows Q = ∞.
"""

from __future__ import annotations

import html
import re
from collections.abc import Sequence
from dataclasses import dataclass

import ipywidgets as widgets

from ..analysis.sensitivity import Sensitivity
from ..errors import AnalysisError
from ..model.values import format_value
from ..numeric.evaluator import TransferResult
from ..numeric.factored import CornerRow, FactoredForm
from ..symbolic.derivation import Derivation
from ._theme import COLORS, CSS_CLASS, FONT_STACK

__all__ = ["CornerLine", "corner_lines", "highlighted_labels", "FormulaView"]


@dataclass(frozen=True)
class CornerLine:
    """One row of the corner table.

    Attributes
    ----------
    label : str
        ``"ωz1"``, ``"ω0p1"`` … (Q rows are folded into their ω0 row).
    role : {"zero", "pole"}
    corner : CornerRow
    """

    label: str
    role: str
    corner: CornerRow


def corner_lines(form: FactoredForm) -> tuple[CornerLine, ...]:
    """The table rows: each corner with its own label, in the form's label order.

    Rows that cancel at these values are left out; the others keep their labels.
    """
    return tuple(CornerLine(c.label, c.role, c) for c in form.corners if not c.cancelled)


def highlighted_labels(lines: Sequence[CornerLine], sens: Sensitivity, component: str) -> frozenset[str]:
    """Labels of the table rows that ``component`` moves (|S| > 0.05 on ω, ω0 or Q).

    Sensitivity rows and table rows carry the same per-topology labels, so they
    are matched by label alone (two corners at the same frequency stay apart);
    a Q row moves the row of its ω0 label.
    """
    moved = set(sens.moved_by(component))
    moved |= {"ω0" + label[1:] for label in moved if label.startswith("Q")}
    return frozenset(ln.label for ln in lines if ln.label in moved)


def _uses(formula: str, component: str) -> bool:
    return re.search(rf"(?<![A-Za-z0-9_]){re.escape(component)}(?![A-Za-z0-9_])", formula) is not None


def _num(x: float) -> str:
    return f"{x:.4g}".replace("-", "\u2212")


class FormulaView:
    """``HTMLMath`` of the factored form over an ``HTML`` table of corners.

    Attributes
    ----------
    math : ipywidgets.HTMLMath
        The symbolic form (set per topology).
    table : ipywidgets.HTML
        Corner formulas and values (CSS class ``lc-formula``).
    box : ipywidgets.VBox
    """

    def __init__(self) -> None:
        self.math = widgets.HTMLMath(layout=widgets.Layout(width="100%", overflow="auto hidden"))
        self.table = widgets.HTML(layout=widgets.Layout(width="100%"))
        self.table.add_class(CSS_CLASS["formula"])
        title = widgets.HTML(f'<span style="font-weight:600; color:{COLORS["text"]}">Transfer function</span>')
        self.box = widgets.VBox([title, self.math, self.table], layout=widgets.Layout(width="100%"))
        self.highlighted: frozenset[str] = frozenset()
        self._derivation: Derivation | None = None
        self._shown = ""

    def set_design(self, derivation: Derivation, result: TransferResult) -> None:
        """Typeset the symbolic form of a new topology (sympy runs here, never per move)."""
        self._derivation = derivation
        form = FactoredForm(derivation, result)
        latex = form.symbolic_latex()
        self.math.value = f'<div style="font-size:15px; padding:2px 0">\\[{latex}\\]</div>'

    def frame(self, result: TransferResult, sens: Sensitivity | None,
              dragged: str | None) -> tuple[str, frozenset[str]]:
        """The table HTML and the highlighted labels at ``result`` (no widget touched)."""
        if self._derivation is None:
            raise AnalysisError("the formula panel has no design yet (call set_design first)")
        form = FactoredForm(self._derivation, result)
        lines = corner_lines(form)
        hl = highlighted_labels(lines, sens, dragged) if (sens is not None and dragged) else frozenset()
        k_hl = bool(dragged) and _uses(form.gain_formula, dragged or "")
        return self._table_html(form, lines, hl, dragged, k_hl), hl

    def draw(self, table_html: str, highlighted: frozenset[str]) -> None:
        """Show a table (only sent when its text changed)."""
        if self._shown != table_html:
            self.table.value = table_html
            self._shown = table_html
        self.highlighted = highlighted

    @staticmethod
    def _table_html(form: FactoredForm, lines: Sequence[CornerLine], hl: frozenset[str], dragged: str | None,
                    k_hl: bool) -> str:
        cell = "padding:2px 8px; border-bottom:1px solid #e8ecf1; text-align:left; vertical-align:top"
        hl_bg = f"background:{COLORS['highlight']}"
        n = form.origin_order
        origin = {0: "", 1: " · s (zero at the origin)", -1: " / s (pole at the origin)"}.get(
            n, f" · s^{n} ({abs(n)} {'zeros' if n > 0 else 'poles'} at the origin)")
        k_style = f"{cell}; {hl_bg}" if k_hl else cell
        rows = [
            f'<tr><td style="{k_style}"><b>K</b></td>'
            f'<td style="{k_style}"><code>{html.escape(form.gain_formula)}</code></td>'
            f'<td style="{k_style}" colspan="2">{_num(form.gain)}{html.escape(origin)}</td></tr>'
        ]
        for ln in lines:
            c = ln.corner
            style = f"{cell}; {hl_bg}" if ln.label in hl else cell
            color = COLORS["zero"] if c.role == "zero" else COLORS["pole"]
            formula = c.formula if c.formula else "numeric at current values"
            value = (f"{html.escape(format_value(c.f_hz, 'Hz'))} &nbsp;"
                     f"<span style=\"color:{COLORS['muted']}\">({_num(c.omega_rad_s)} rad/s)</span>")
            extra = []
            if c.order == 2 and c.q is not None:
                q_text = f" = <code>{html.escape(c.q_formula)}</code>" if c.q_formula else ""
                extra.append(f"Q = {'∞' if c.q_infinite else _num(c.q)}{q_text}")
            if c.q_infinite:
                extra.append("on the jω axis")
            if c.rhp:
                extra.append("right half plane")
            extra_html = ("<br>" + "; ".join(extra)) if extra else ""
            rows.append(
                f'<tr><td style="{style}"><b style="color:{color}">{html.escape(ln.label)}</b></td>'
                f'<td style="{style}"><code>{html.escape(formula)}</code></td>'
                f'<td style="{style}">{value}{extra_html}</td></tr>'
            )
        if dragged:
            moved = ", ".join(ln.label for ln in lines if ln.label in hl) or "no corner"
            if k_hl:
                moved = "K" + (", " + moved if hl else "")
            caption = (f'<div style="font-size:12px; color:{COLORS["muted"]}; margin:4px 0">'
                       f'<span style="{hl_bg}; padding:0 4px">{html.escape(dragged)}</span> moves '
                       f"{html.escape(moved)}</div>")
        else:
            caption = (f'<div style="font-size:12px; color:{COLORS["muted"]}; margin:4px 0">'
                       "Move a component to highlight the corners it sets.</div>")
        head = (f'<tr><th style="{cell}">corner</th><th style="{cell}">formula (rad/s)</th>'
                f'<th style="{cell}">value</th></tr>')
        notes = "".join(
            f'<div class="lc-cancellation" style="font-size:12px; margin:4px 0; color:{COLORS["cancelled"]}">'
            f"{html.escape(n)}</div>"
            for n in form.cancellation_notes
        )
        return (f'<div style="font-family:{FONT_STACK}; font-size:12.5px; color:{COLORS["text"]}">{caption}'
                f'<table style="border-collapse:collapse; width:100%">{head}{"".join(rows)}</table>{notes}</div>')
