"""The check of a design against its ``spec`` section: one verdict per item, stability first.

The section itself — its keys, their meaning at nominal values and per Monte Carlo
sample — is defined in :mod:`loopcraft.model.spec_section` (re-exported here).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from ..errors import LoopcraftError
from ..model.spec_section import (
    DEFAULT_SAMPLES,
    MAX_SAMPLES,
    Spec,
    canonical_label,
    parse_spec,
    sample_pass,
    validate_spec,
)
from ..model.values import format_value

__all__ = [
    "Spec",
    "SpecItem",
    "SpecReport",
    "parse_spec",
    "validate_spec",
    "canonical_label",
    "nominal_corners",
    "sample_pass",
    "check",
    "DEFAULT_SAMPLES",
    "MAX_SAMPLES",
]


# --------------------------------------------------------------------------- report


@dataclass(frozen=True)
class SpecItem:
    """One checked spec item.

    Parameters
    ----------
    name : str
        The spec key (``"phase_margin_min_deg"``, ``"corners.ωz1"``, ``"yield_min"``).
    required : str
        The requirement in words (``"≥ 45°"``, ``"20 kHz … 40 kHz"``).
    actual : float or None
        The value found (degrees, dB, Hz, Q or a yield fraction); None when it
        could not be evaluated.
    passed : bool
    message : str
        The value in words, or why the item could not be evaluated.
    """

    name: str
    required: str
    actual: float | None
    passed: bool
    message: str

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form (non-finite numbers become None)."""
        a = self.actual
        return {"name": self.name, "required": self.required,
                "actual": a if a is not None and math.isfinite(a) else None,
                "passed": self.passed, "message": self.message}


@dataclass(frozen=True)
class SpecReport:
    """The result of :func:`check`.

    Parameters
    ----------
    items : tuple of SpecItem
    has_spec : bool
        False when the design has no ``spec`` section (the report then has no
        items and passes).
    notes : tuple of str
        What was not checked and why (e.g. the yield with ``spread=False``).
    """

    items: tuple[SpecItem, ...]
    has_spec: bool = True
    notes: tuple[str, ...] = ()

    @property
    def passed(self) -> bool:
        """True when every checked item passed (vacuously true with no items)."""
        return all(i.passed for i in self.items)

    @property
    def failures(self) -> tuple[SpecItem, ...]:
        """The items that failed."""
        return tuple(i for i in self.items if not i.passed)

    def to_dict(self) -> dict[str, Any]:
        """JSON-ready form: ``{"passed", "has_spec", "items": [...], "failures": [names], "notes"}``."""
        return {"passed": self.passed, "has_spec": self.has_spec,
                "items": [i.to_dict() for i in self.items],
                "failures": [i.name for i in self.failures], "notes": list(self.notes)}

    def __str__(self) -> str:
        if not self.has_spec:
            return "Spec check: PASS (the design has no spec section; nothing to check)"
        head = (f"Spec check: {'PASS' if self.passed else 'FAIL'} "
                f"({len(self.items)} items, {len(self.failures)} failed)")
        rows = [("item", "required", "actual", "result")]
        rows += [(i.name, i.required, _actual_text(i), "pass" if i.passed else "FAIL") for i in self.items]
        widths = [max(len(r[c]) for r in rows) for c in range(4)]
        lines = [head]
        for r in rows:
            lines.append("  " + "  ".join(r[c].ljust(widths[c]) for c in range(4)).rstrip())
        for i in self.items:
            lines.append(f"  - {i.name}: {i.message}")
        lines += [f"  note: {n}" for n in self.notes]
        return "\n".join(lines)


def _actual_text(item: SpecItem) -> str:
    a = item.actual
    if a is None:
        return "—"
    if item.name == "yield_min":
        return f"{100 * a:.2f} %"
    if item.name in ("crossover_hz",) or (item.name.startswith("corners.ω")):
        return format_value(a, "Hz", digits=4)
    if item.name == "phase_margin_min_deg":
        return f"{a:.2f}°"
    if item.name in ("gain_margin_min_db", "dc_gain_db"):
        return f"{a:.2f} dB"
    return f"{a:.4g}"


def _hz_range(r: tuple[float, float]) -> str:
    return f"{format_value(r[0], 'Hz', digits=4)} … {format_value(r[1], 'Hz', digits=4)}"


# --------------------------------------------------------------------------- nominal check


def nominal_corners(design) -> dict[str, float]:
    """Corner label → value at nominal values: Hz for ω labels, Q for Q labels.

    The labels are the rows' own (:attr:`loopcraft.numeric.factored.CornerRow.label`),
    fixed per topology, so a spec key names the same formula whatever the values.
    """
    out: dict[str, float] = {}
    for c in design.factored().corners:
        out[c.label] = c.f_hz
        if c.q_label is not None:
            out[c.q_label] = float(c.q)
    return out


def _stage_dc_gain_db(analysis) -> float:
    fn = analysis.actual.factored if analysis.actual is not None else analysis.factored
    if fn.origin_order < 0:
        return math.inf
    if fn.origin_order > 0:
        return -math.inf
    return 20.0 * math.log10(abs(fn.gain))


def check(design, *, spread: bool = True, seed: int = 1) -> SpecReport:
    """Check a design against its ``spec`` section.

    Parameters
    ----------
    design : Design
        The design (its ``spec``, ``tolerances``, op-amp and plant sections are used).
    spread : bool
        Estimate the Monte Carlo yield when the spec has ``yield_min``; with
        False the yield is not checked and the report notes so.
    seed : int
        Seed of the Monte Carlo draw (numpy ``default_rng``), so the yield is reproducible.

    Returns
    -------
    SpecReport
        Items evaluated at nominal values on the design's default analysis grid
        (:class:`loopcraft.analysis.Analyzer`), definitions as in the module
        docstring; a design without a spec section gives an empty, passing report.

    Raises
    ------
    DesignFileError
        The design's ``spec`` section is malformed (key path given).
    """
    if design.spec is None:
        return SpecReport((), has_spec=False)
    sp = parse_spec(design.spec, "spec")
    items: list[SpecItem] = []
    notes: list[str] = []
    try:
        analysis = design.analyze()
        analysis_error = None
    except LoopcraftError as err:
        analysis, analysis_error = None, f"the nominal analysis failed: {err}"

    def unavailable(name: str, required: str, why: str) -> None:
        items.append(SpecItem(name, required, None, False, why))

    margins = None
    stability = None
    band = ""
    loop_why = analysis_error
    if analysis is not None:
        f = analysis.f_hz
        band = f"{format_value(float(f[0]), 'Hz')} … {format_value(float(f[-1]), 'Hz')}"
        if analysis.loop is None:
            loop_why = "the design has no plant, so there is no loop gain (add a 'plant' section)"
        else:
            margins = analysis.loop.margins
            stability = analysis.loop.stability

    stable = True
    if margins is not None and stability is not None:
        # Stability is an implicit item of every spec of a design with a loop: no margin
        # passes when the closed loop is not stable (pole count cross-checked by Nyquist).
        stable = stability.stable
        msg = stability.headline()
        if stability.notes:
            msg += " — " + "; ".join(stability.notes)
        items.append(SpecItem("stable", "closed loop stable (implicit)", float(stability.closed_loop_rhp_poles),
                              stable, msg))
    not_stable = "" if stable or stability is None else (
        f"the closed loop is not stable ({stability.verdict}), so no margin applies")

    if sp.phase_margin_min_deg is not None:
        req = f"≥ {sp.phase_margin_min_deg:g}°"
        if margins is None:
            unavailable("phase_margin_min_deg", req, f"cannot evaluate the phase margin: {loop_why}")
        elif not margins.crossovers:
            unavailable("phase_margin_min_deg", req, f"the loop gain never crosses 0 dB in the analysed band {band}")
        else:
            worst = min(margins.crossovers, key=lambda c: c.phase_margin_deg)
            ok = stable and worst.phase_margin_deg >= sp.phase_margin_min_deg
            more = f" (worst of {len(margins.crossovers)} crossovers)" if len(margins.crossovers) > 1 else ""
            text = (f"phase margin {worst.phase_margin_deg:.3f}° at "
                    f"{format_value(worst.f_hz, 'Hz', digits=4)}{more}")
            items.append(SpecItem("phase_margin_min_deg", req, worst.phase_margin_deg, ok,
                                  f"{not_stable}; {text}" if not stable else text))
    if sp.gain_margin_min_db is not None:
        req = f"≥ {sp.gain_margin_min_db:g} dB"
        if margins is None:
            unavailable("gain_margin_min_db", req, f"cannot evaluate the gain margin: {loop_why}")
        elif not stable:
            items.append(SpecItem("gain_margin_min_db", req, None, False, not_stable))
        else:
            # The governing gain margin: the smaller of the gain-increase and the gain-reduction
            # margin (a conditionally stable loop has both), from the exact stable gain range.
            gr = stability.gain_range
            cands = [(gr.increase_margin_db, gr.increase_at_hz, "increase"),
                     (gr.reduction_margin_db, gr.reduction_at_hz, "reduction")] if gr is not None else []
            cands = [c for c in cands if c[0] is not None]
            if not cands:
                why = (f"the loop phase never reaches -180° in the analysed band {band}"
                       if not margins.gain_margins else
                       f"no phase crossover in the analysed band {band} limits the gain")
                items.append(SpecItem("gain_margin_min_db", req, math.inf, True,
                                      f"{why}: no rise or fall of the loop gain makes the closed loop unstable, "
                                      "the gain margin is unbounded"))
            else:
                g_db, g_f, kind = min(cands, key=lambda c: c[0])
                where = ("at DC" if g_f == 0.0 else "at high frequency" if g_f is not None and math.isinf(g_f)
                         else f"at {format_value(g_f, 'Hz', digits=4)}" if g_f is not None and math.isfinite(g_f)
                         else "")
                both = ""
                if len(cands) == 2:
                    both = (f" (conditionally stable: gain may rise {gr.increase_margin_db:.3f} dB "
                            f"and fall {gr.reduction_margin_db:.3f} dB)")
                items.append(SpecItem("gain_margin_min_db", req, g_db, g_db >= sp.gain_margin_min_db,
                                      f"gain-{kind} margin {g_db:.3f} dB {where}{both}".replace("  ", " ")))
    if sp.crossover_hz is not None:
        req = _hz_range(sp.crossover_hz)
        if margins is None:
            unavailable("crossover_hz", req, f"cannot evaluate the crossover: {loop_why}")
        elif not margins.crossovers:
            unavailable("crossover_hz", req, f"the loop gain never crosses 0 dB in the analysed band {band}")
        else:
            fc = margins.crossovers[-1].f_hz
            lo, hi = sp.crossover_hz
            more = ""
            if len(margins.crossovers) > 1:
                more = " (the highest of " + ", ".join(format_value(c.f_hz, "Hz", digits=4)
                                                      for c in margins.crossovers) + ")"
            items.append(SpecItem("crossover_hz", req, fc, lo <= fc <= hi,
                                  f"crossover {format_value(fc, 'Hz', digits=6)}{more}"))
    if sp.corners:
        try:
            corners = nominal_corners(design)
            corner_why = None
        except LoopcraftError as err:
            corners, corner_why = {}, f"the factored form could not be evaluated: {err}"
        for label, (lo, hi) in sp.corners.items():
            name = f"corners.{label}"
            is_q = label.startswith("Q")
            req = f"{lo:g} … {hi:g}" if is_q else _hz_range((lo, hi))
            if corner_why is not None:
                unavailable(name, req, corner_why)
            elif label not in corners:
                have = ", ".join(corners) or "none"
                unavailable(name, req, f"the design has no corner {label} (its corners: {have})")
            else:
                v = corners[label]
                text = f"Q = {v:.5g}" if is_q else f"{label} = {format_value(v, 'Hz', digits=6)}"
                items.append(SpecItem(name, req, v, lo <= v <= hi, text))
    if sp.dc_gain_db is not None:
        lo, hi = sp.dc_gain_db
        req = f"{lo:g} dB … {hi:g} dB"
        if analysis is None:
            unavailable("dc_gain_db", req, f"cannot evaluate the DC gain: {analysis_error}")
        else:
            g = _stage_dc_gain_db(analysis)
            what = "with the real op-amp" if analysis.actual is not None else "ideal op-amp"
            if math.isinf(g):
                why = ("a pole at the origin makes it infinite" if g > 0 else "a zero at the origin makes it zero")
                items.append(SpecItem("dc_gain_db", req, g, False, f"DC gain of the stage ({what}): {why}"))
            else:
                items.append(SpecItem("dc_gain_db", req, g, lo <= g <= hi,
                                      f"DC gain of the stage ({what}) {g:.3f} dB"))
    if sp.yield_min is not None:
        req = f"≥ {100 * sp.yield_min:g} % of {sp.samples} samples"
        if not spread:
            notes.append("yield_min was not checked (spread=False)")
        elif design.tolerances is None:
            unavailable("yield_min", req, "the design has no 'tolerances' section, so there is nothing to spread")
        else:
            from ..analysis.tolerance import monte_carlo

            try:
                mc = monte_carlo(design, sp.samples, seed=seed, spec=sp)
            except LoopcraftError as err:
                unavailable("yield_min", req, f"the Monte Carlo run failed: {err}")
            else:
                y = float(mc.yield_fraction)
                se = math.sqrt(max(y * (1 - y), 0.0) / sp.samples)
                worst = sorted((mc.item_yield or {}).items(), key=lambda kv: kv[1])[:3]
                detail = ", ".join(f"{k} {100 * v:.1f} %" for k, v in worst)
                items.append(SpecItem("yield_min", req, y, y >= sp.yield_min,
                                      f"yield {100 * y:.2f} % ± {100 * se:.2f} % (1 standard error, seed {seed}); "
                                      f"lowest per item: {detail}"))
    return SpecReport(tuple(items), True, tuple(notes))
