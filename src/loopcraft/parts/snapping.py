"""Snapping a design's component values to a standard E-series.

:func:`snap_design` moves every resistor and capacitor of a design to the
nearest value of an IEC 60063 series (nearest in the logarithmic sense, see
:func:`loopcraft.parts.eseries.nearest`), or optionally to the best two-part
series/parallel combination (:func:`loopcraft.parts.eseries.best_combination`),
and reports what the move did: each component's relative change, and how
each corner (ω or ω0 in Hz, Q), the gain, every loop crossover with its phase
margin, every phase crossover with its gain margin and the amplifier loop's
phase margin moved.

Inductors are left alone unless asked (they seldom come in E-series steps).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from ..model.values import format_value, unit_for
from ..symbolic.symbols import element_kind
from .eseries import Combination, best_combination, nearest, series_values

if TYPE_CHECKING:  # the facade imports this module; no import back at run time
    from ..design import Design

__all__ = ["SnapResult", "ValueChange", "Move", "snap_design", "engineering_text", "design_quantities"]

_PREFIXES = {-18: "a", -15: "f", -12: "p", -9: "n", -6: "u", -3: "m", 0: "", 3: "k", 6: "M",
             9: "G", 12: "T"}


def engineering_text(x: float) -> str:
    """Engineering text for a value in SI base units, as a design file writes it.

    Parameters
    ----------
    x : float
        A positive finite value in SI base units (Ω, F or H).

    Returns
    -------
    str
        Mantissa (up to 12 significant digits, trailing zeros dropped) and an
        ASCII SI prefix, no unit and no space: ``12000.0 -> "12k"``,
        ``2.7e-9 -> "2.7n"``, ``1e-6 -> "1u"``, ``300.0 -> "300"``;
        :func:`loopcraft.model.values.parse_value` reads it back.
    """
    if not (math.isfinite(x) and x > 0):
        return repr(float(x))
    exp3 = int(math.floor(math.log10(x) / 3.0)) * 3
    exp3 = max(-18, min(12, exp3))
    text = f"{x / 10.0**exp3:.12g}"
    if "e" in text:  # only outside the prefix range
        return repr(float(x))
    return text + _PREFIXES[exp3]


@dataclass(frozen=True)
class ValueChange:
    """What snapping did to one component.

    Parameters
    ----------
    name : str
        Designator, e.g. ``"R2"``.
    kind : {"resistor", "capacitor", "inductor"}
    before : float
        Value before snapping, SI base units (Ω, F, H).
    after : float
        Value after snapping, SI base units (the value the snapped design holds).
    text : str
        The value as written to the snapped design file (``"12k"``).
    combination : Combination or None
        The two-part (or single) realisation when combinations were asked for;
        its ``arrangement`` is in value terms (``"series"``: values add).
    snapped : bool
        False for a part left alone (an inductor, unless asked).
    """

    name: str
    kind: str
    before: float
    after: float
    text: str
    combination: Combination | None = None
    snapped: bool = True

    @property
    def relative_change(self) -> float:
        """``after / before - 1`` (dimensionless)."""
        return self.after / self.before - 1.0

    @property
    def wiring(self) -> str:
        """How to build the value from standard parts, in words (e.g. ``"10 kΩ + 51 Ω in series"``)."""
        unit = unit_for(self.kind)
        c = self.combination
        if c is None or c.arrangement == "single":
            return format_value(self.after, unit)
        parts = " + ".join(format_value(p, unit) for p in c.parts)
        # best_combination's "series" means the values add: capacitors do that in parallel.
        adds = c.arrangement == "series"
        physical = ("in series" if adds else "in parallel") if self.kind != "capacitor" else (
            "in parallel" if adds else "in series")
        return f"{parts} {physical}"

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (values in SI base units)."""
        out: dict[str, Any] = {
            "name": self.name,
            "kind": self.kind,
            "before": self.before,
            "after": self.after,
            "text": self.text,
            "relative_change": self.relative_change,
            "snapped": self.snapped,
        }
        if self.combination is not None:
            out["combination"] = {
                "parts": list(self.combination.parts),
                "arrangement": self.combination.arrangement,
                "wiring": self.wiring,
            }
        return out


@dataclass(frozen=True)
class Move:
    """How one design quantity moved.

    Parameters
    ----------
    key : str
        Stable identifier (``"corner:zero:1:1/(C1·R2):0:f_hz"``, ``"loop:crossover:0:f_hz"`` …).
    label : str
        Human label, e.g. ``"ωz1 = 1/(C1·R2)"`` or ``"loop phase margin 1"``.
    unit : str
        ``"Hz"``, ``"deg"``, ``"dB"``, ``"V/V"``, ``""`` (Q) or the unit of K.
    before, after : float or None
        The quantity before and after snapping (None when it does not exist on that side,
        e.g. a crossover that appears or disappears).
    """

    key: str
    label: str
    unit: str
    before: float | None
    after: float | None

    @property
    def delta(self) -> float | None:
        """``after - before`` in :attr:`unit` (None if either side is missing)."""
        if self.before is None or self.after is None:
            return None
        return self.after - self.before

    @property
    def relative(self) -> float | None:
        """``after / before - 1`` (None if either is missing or ``before`` is 0 or infinite)."""
        if self.before is None or self.after is None or self.before == 0 or not math.isfinite(self.before):
            return None
        return self.after / self.before - 1.0

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form."""
        return {"key": self.key, "label": self.label, "unit": self.unit, "before": self.before,
                "after": self.after, "delta": self.delta, "relative": self.relative}


def _gain_unit(origin_order: int) -> str:
    n = -origin_order  # K has units (rad/s)^(-n_origin) when H ~ K·s^n
    if n == 0:
        return "V/V"
    if n == 1:
        return "rad/s"
    if n == -1:
        return "s/rad"
    return f"(rad/s)^{n}"


def design_quantities(design: Design) -> list[tuple[str, str, str, float]]:
    """The quantities a snap reports, for one design.

    Parameters
    ----------
    design : Design

    Returns
    -------
    list of (key, label, unit, value)
        Corners (frequency in Hz; Q of second-order factors), the gain (DC
        gain in V/V when finite, else the factored-form constant K), and when
        present every loop crossover (Hz) with its phase margin (degrees),
        every phase crossover (Hz) with its gain margin (dB), and the
        amplifier loop's crossover (Hz) and phase margin (degrees).

    Notes
    -----
    Corners are keyed by their symbolic formula (so a corner keeps its identity
    when snapping swaps the frequency order of two corners) and by role and
    order when only numeric.
    """
    ff = design.factored()
    out: list[tuple[str, str, str, float]] = []
    seen: dict[tuple[str, int, str], int] = {}
    for c in ff.corners:
        # The corner's own label (fixed once per topology, see numeric.evaluator.corner_labels).
        ident = (c.role, c.order, c.formula or "numeric")
        occ = seen.get(ident, 0)
        seen[ident] = occ + 1
        base = f"corner:{c.role}:{c.order}:{ident[2]}:{occ}"
        label = f"{c.label} = {c.formula}" if c.formula else f"{c.label} (numeric)"
        out.append((base + ":f_hz", label, "Hz", c.f_hz))
        if c.order == 2 and c.q is not None:
            qlabel = (c.q_label or "Q") + (f" = {c.q_formula}" if c.q_formula else "")
            out.append((base + ":q", qlabel, "", c.q))
    tr = ff.result
    if ff.origin_order == 0:
        out.append(("gain:dc", "DC gain", "V/V", float(tr.dc_gain())))
    else:
        out.append(("gain:k", f"gain K = {ff.gain_formula}" if ff.gain_formula else "gain K",
                    _gain_unit(ff.origin_order), float(ff.gain)))
    needs_analysis = design.plant is not None or (design.opamp is not None and not design.opamp.is_ideal)
    if needs_analysis:
        a = design.analyze()
        if a.loop is not None:
            m = a.loop.margins
            st = a.loop.stability
            # The verdict moves too: snapping can push a loop unstable, and the report must say so.
            out.append(("loop:closed_loop_rhp_poles", f"closed-loop RHP poles ({st.verdict.upper()})", "",
                        float(st.closed_loop_rhp_poles)))
            for i, c in enumerate(m.crossovers):
                out.append((f"loop:crossover:{i}:f_hz", f"loop crossover {i + 1}", "Hz", float(c.f_hz)))
                out.append((f"loop:crossover:{i}:pm", f"loop phase margin {i + 1}", "deg",
                            float(c.phase_margin_deg)))
            for i, g in enumerate(m.gain_margins):
                out.append((f"loop:phase_crossover:{i}:f_hz", f"loop phase crossover {i + 1}", "Hz",
                            float(g.f_hz)))
                out.append((f"loop:phase_crossover:{i}:gm", f"loop gain margin {i + 1}", "dB",
                            float(g.gain_margin_db)))
        amp = a.actual.amplifier_loop if a.actual is not None else None
        if amp is not None and amp.crossover_hz is not None:
            out.append(("amplifier:crossover", "amplifier-loop crossover", "Hz", float(amp.crossover_hz)))
            if amp.phase_margin_deg is not None:
                out.append(("amplifier:pm", "amplifier-loop phase margin", "deg", float(amp.phase_margin_deg)))
    return out


def _moves(before: Design, after: Design) -> tuple[Move, ...]:
    qb = design_quantities(before)
    qa = {k: (label, unit, v) for k, label, unit, v in design_quantities(after)}
    moves: list[Move] = []
    done: set[str] = set()
    for key, label, unit, v in qb:
        a = qa.get(key)
        moves.append(Move(key, label, unit, v, a[2] if a is not None else None))
        done.add(key)
    for key, (label, unit, v) in qa.items():
        if key not in done:
            moves.append(Move(key, label, unit, None, v))
    return tuple(moves)


def _fmt_quantity(x: float | None, unit: str) -> str:
    if x is None:
        return "—"
    if unit == "Hz":
        return format_value(x, "Hz", digits=4)
    if unit == "deg":
        return f"{x:.2f}°"
    if unit == "dB":
        return f"{x:.2f} dB"
    if math.isinf(x):
        return "∞" if x > 0 else "-∞"
    return f"{x:.5g}" + (f" {unit}" if unit else "")


def _fmt_change(m: Move) -> str:
    if m.before is None:
        return "appears"
    if m.after is None:
        return "disappears"
    if m.before == m.after:
        return "0.00" if m.unit in ("deg", "dB") else _percent(0.0)
    if not (math.isfinite(m.before) and math.isfinite(m.after)):
        return f"{_fmt_quantity(m.before, m.unit)} → {_fmt_quantity(m.after, m.unit)}"
    if m.unit in ("deg", "dB"):
        text = f"{m.delta:+.2f}"
        text = "0.00" if text in ("+0.00", "-0.00") else text
        return text + ("°" if m.unit == "deg" else " dB")
    rel = m.relative
    return _percent(rel) if rel is not None else f"{m.delta:+.4g}"


def _percent(rel: float) -> str:
    text = f"{100 * rel:+.2f} %"
    return "0.00 %" if text in ("+0.00 %", "-0.00 %") else text


@dataclass(frozen=True, eq=False)
class SnapResult:
    """A design snapped to standard values, and what moved.

    Parameters
    ----------
    design : Design
        The snapped design (values written as engineering text, e.g. ``"12k"``).
    original : Design
        The design before snapping.
    series : str
        The E-series used (``"E24"``).
    combinations : bool
        True when two-part combinations were allowed.
    changes : tuple of ValueChange
        One per component, in the stage's designator order.
    moves : tuple of Move
        Corners, gain, loop and amplifier-loop quantities before and after.
    """

    design: Design
    original: Design
    series: str
    combinations: bool
    changes: tuple[ValueChange, ...]
    moves: tuple[Move, ...]

    def move(self, key: str) -> Move:
        """The move with the given key.

        Raises
        ------
        KeyError
            No such quantity.
        """
        for m in self.moves:
            if m.key == key:
                return m
        raise KeyError(key)

    @property
    def worst_relative_change(self) -> float:
        """Largest ``|after/before - 1|`` over the snapped components (dimensionless)."""
        return max((abs(c.relative_change) for c in self.changes if c.snapped), default=0.0)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready summary: series, changes, moves and the snapped design file."""
        return {
            "series": self.series,
            "combinations": self.combinations,
            "changes": [c.to_dict() for c in self.changes],
            "moves": [m.to_dict() for m in self.moves],
            "design": self.design.to_dict(),
        }

    def __str__(self) -> str:
        mode = " with two-part combinations" if self.combinations else ""
        n_changed = sum(1 for c in self.changes if c.snapped and c.after != c.before)
        lines = [f"Snapped to {self.series}{mode}: {n_changed} of {len(self.changes)} values changed", ""]
        head: tuple[str, ...] = ("part", "before", "after", "change")
        rows = [head + (("build as",) if self.combinations else ())]
        for c in self.changes:
            unit = unit_for(c.kind)
            row: tuple[str, ...] = (
                c.name,
                format_value(c.before, unit, digits=4),
                format_value(c.after, unit, digits=4) if c.snapped else "(kept)",
                _percent(c.relative_change),
            )
            if self.combinations:
                row += (c.wiring if c.snapped else "",)
            rows.append(row)
        lines += _table(rows)
        lines.append("")
        rows = [("quantity", "before", "after", "change")]
        for m in self.moves:
            rows.append((m.label, _fmt_quantity(m.before, m.unit), _fmt_quantity(m.after, m.unit), _fmt_change(m)))
        lines += _table(rows)
        return "\n".join(lines)


def _table(rows: list[tuple[str, ...]]) -> list[str]:
    widths = [max(len(r[i]) for r in rows) for i in range(len(rows[0]))]
    out = []
    for j, r in enumerate(rows):
        out.append("  ".join(cell.ljust(w) for cell, w in zip(r, widths, strict=True)).rstrip())
        if j == 0:
            out.append("  ".join("-" * w for w in widths))
    return out


def _canonical_series(series: str) -> str:
    series_values(series)  # raises ComponentValueError naming the allowed series
    return series.strip().upper()


def snap_design(design: Design, series: str = "E24", *, combinations: bool = False,
                inductors: bool = False) -> SnapResult:
    """Move every resistor and capacitor of a design to standard values.

    Parameters
    ----------
    design : Design
        The design to snap (not changed; designs are immutable).
    series : str
        IEC 60063 series name, ``"E3"`` … ``"E192"`` (case ignored).
    combinations : bool
        When True, each value becomes the best single part or two-part
        series/parallel combination of the series
        (:func:`loopcraft.parts.eseries.best_combination`); the design then holds the
        combination's total value, and :attr:`ValueChange.wiring` says how to build it.
    inductors : bool
        Snap inductors too (left alone by default).

    Returns
    -------
    SnapResult
        The snapped design, the per-component changes and the moves of the
        corners, gain and margins.

    Raises
    ------
    ComponentValueError
        An unknown series name.
    """
    canon = _canonical_series(series)
    changes: list[ValueChange] = []
    new_values: dict[str, str] = {}
    for name in design.stage.component_names:
        kind = element_kind(name)
        before = float(design.values[name])
        if kind == "inductor" and not inductors:
            given = design.given.get(name, before)
            changes.append(ValueChange(name, kind, before, before, str(given), None, snapped=False))
            continue
        comb: Combination | None = None
        if combinations:
            comb = best_combination(before, canon)
            target = comb.value
        else:
            target = nearest(before, canon)
        if math.isclose(target, before, rel_tol=1e-12):
            text = design.given.get(name, engineering_text(target))
            if not isinstance(text, str):
                text = engineering_text(target)
        else:
            text = engineering_text(target)
        new_values[name] = text
        changes.append(ValueChange(name, kind, before, float("nan"), text, comb))
    snapped = design.with_values(new_values)
    final = tuple(
        c if not c.snapped else ValueChange(c.name, c.kind, c.before, float(snapped.values[c.name]), c.text,
                                            c.combination, True)
        for c in changes
    )
    return SnapResult(snapped, design, canon, bool(combinations), final, _moves(design, snapped))

