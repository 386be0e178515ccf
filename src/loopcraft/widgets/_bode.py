"""The Bode figures: magnitude (dB) and phase (degrees) over a fixed log-frequency grid (Hz).

Marks (each updated with one message per slider move):

* magnitude: the solid curves (ideal stage exact; stage with the real op-amp;
  loop gain around the plant) as the rows of one ``Lines`` mark, the dashed
  straight-line asymptote, corner markers on the asymptote (○ zero, × pole),
  gain-margin segments, dotted guides at the crossovers (loop and op-amp
  loop) and their text labels;
* phase: the same solid curves, the dashed asymptote, the phase-margin
  segments with their -180° reference and labels.

:meth:`BodeView.frame` computes everything from an
:class:`~loopcraft.analysis.Analysis` without touching a mark;
:meth:`BodeView.draw` then assigns it, each mark inside its own
``hold_sync()``. Loop-gain conventions (phase margin ``180° + ∠L`` at
``|L| = 1``, gain margin ``-20·log10|L|`` where ``∠L = -180°``) are those of
:mod:`loopcraft.analysis.loop`.
"""

from __future__ import annotations

import functools
import html
import math
from dataclasses import dataclass

import bqplot as bq
import ipywidgets as widgets
import numpy as np

from ..analysis.amplifier import AmplifierLoop
from ..analysis.analyzer import Analysis
from ..analysis.margins import loop_branch_offset_deg
from ..model.values import format_value
from ..numeric.asymptote import asymptote_mag_db, exact_phase_deg
from ..numeric.factors import FactoredNumeric
from ._axes import clamp_log, decade_ticks, keep_or_fit, linear_ticks
from ._sync import TraitWriter
from ._theme import AXIS_TICK_STYLE, COLORS, CSS_CLASS, FIGURE_MARGIN

__all__ = ["BodeFrame", "BodeView"]

#: At most this many crossovers / phase crossovers are annotated.
MAX_ANNOTATED = 3

#: The magnitude axis shows at most this span below the highest curve point, dB;
#: curves falling further (a loop gain far above crossover) leave the plot at the bottom.
MAX_SPAN_DB = 160.0
#: Magnitude axis limits, dB.
MIN_DB, MAX_DB = -160.0, 200.0

_CURVE_COLOR = {"exact": COLORS["ideal"], "actual": COLORS["actual"], "loop": COLORS["loop"]}


@dataclass(frozen=True)
class BodeFrame:
    """What the Bode figures show for one analysis (plain numpy data).

    Attributes
    ----------
    curve_names : tuple of str
        Names of the solid-curve rows: ``"exact"``, then ``"actual"`` and
        ``"loop"`` when present.
    mag_rows_db, phase_rows_deg : ndarray, shape (len(curve_names), n)
    asym_mag_db, asym_phase_deg : ndarray, shape (n,)
    zero_corner_hz, zero_corner_db, pole_corner_hz, pole_corner_db : ndarray
        Corner markers on the magnitude asymptote (Hz, dB).
    mag_seg_x_hz, mag_seg_y_db : ndarray, shape (m, 2)
        Gain-margin segments, from the loop gain at the phase crossover up to
        0 dB (``mag_seg_kinds`` is ``"gm"`` for each).
    guide_hz : tuple of float
        Dotted vertical guides (Hz) across the magnitude plot: loop crossovers
        (``guide_kinds`` ``"fc"``) and the op-amp loop's crossover (``"opamp"``).
    phase_seg_x_hz, phase_seg_y_deg : ndarray, shape (k, 2)
        Phase annotation segments (``"ref"``: the -180° reference of the loop,
        ``"pm"``: from the reference to the loop phase at a crossover).
    mag_labels, phase_labels : tuple of (x_hz, y, text, color)
        Text annotations at data coordinates (Hz; dB or degrees).
    mag_range_db, phase_range_deg : (lo, hi, tick step)
    margins_html, legend_html : str
    verdict : str or None
        The closed-loop verdict shown (``"stable"``, ``"unstable"``, ``"marginal"``,
        ``"uncertain"``); None without a plant.
    """

    curve_names: tuple[str, ...]
    mag_rows_db: np.ndarray
    phase_rows_deg: np.ndarray
    asym_mag_db: np.ndarray
    asym_phase_deg: np.ndarray
    zero_corner_hz: np.ndarray
    zero_corner_db: np.ndarray
    pole_corner_hz: np.ndarray
    pole_corner_db: np.ndarray
    mag_seg_x_hz: np.ndarray
    mag_seg_y_db: np.ndarray
    mag_seg_kinds: tuple[str, ...]
    guide_hz: tuple[float, ...]
    guide_kinds: tuple[str, ...]
    phase_seg_x_hz: np.ndarray
    phase_seg_y_deg: np.ndarray
    phase_seg_kinds: tuple[str, ...]
    mag_labels: tuple[tuple[float, float, str, str], ...]
    phase_labels: tuple[tuple[float, float, str, str], ...]
    mag_range_db: tuple[float, float, float]
    phase_range_deg: tuple[float, float, float]
    margins_html: str
    legend_html: str
    verdict: str | None = None


def _corner_points(fn: FactoredNumeric, f_lo: float,
                   f_hi: float) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Corner frequencies (Hz) of zeros and poles, where the asymptote bends."""
    out: dict[str, list[float]] = {"zero": [], "pole": []}
    for f in fn.factors:
        if f.order == 2 and f.q is not None and f.q <= 0.5:
            out[f.role] += [abs(r) / (2 * math.pi) for r in f.roots()]
        else:
            out[f.role].append(f.f_hz)
    res = []
    for role in ("zero", "pole"):
        fz = np.array([x for x in out[role] if f_lo <= x <= f_hi], dtype=float)
        res += [fz, asymptote_mag_db(fn, fz) if fz.size else np.zeros(0)]
    return res[0], res[1], res[2], res[3]


def _close(labels: list, f_hz: float, decades: float = 1.2) -> bool:
    """True when another top label sits within ``decades`` of ``f_hz`` (so rows alternate)."""
    return any(lb[0] != f_hz and abs(math.log10(lb[0] / f_hz)) < decades for lb in labels)


def _swatch(color: str, style: str) -> str:
    return (f'<span style="display:inline-block; width:26px; height:0; border-top:2.5px {style} {color}; '
            f'vertical-align:middle; margin-right:5px"></span>')


def _symbol(char: str, color: str) -> str:
    return f'<span style="color:{color}; font-weight:700; margin-right:4px">{char}</span>'


@functools.cache
def _legend(curves: tuple[str, ...], has_margins: bool, has_amp: bool, verdict: str | None = None) -> str:
    badge = ""
    if verdict is not None:
        # The closed-loop verdict heads the figure: STABLE in green, anything else in red.
        word = {"stable": "STABLE", "unstable": "UNSTABLE", "marginal": "MARGINAL",
                "uncertain": "STABILITY UNCERTAIN"}.get(verdict, verdict.upper())
        color = COLORS["ok"] if verdict == "stable" else COLORS["error"]
        badge = (f'<span class="lc-verdict" style="white-space:nowrap; margin-right:14px; color:{color}; '
                 f'font-weight:700">● closed loop {html.escape(word)}</span>')
    items = [(_swatch(COLORS["ideal"], "solid"), "stage, ideal op-amp"),
             (_swatch(COLORS["asymptote"], "dashed"), "asymptotes")]
    if "actual" in curves:
        items.append((_swatch(COLORS["actual"], "solid"), "stage, real op-amp"))
    if "loop" in curves:
        items.append((_swatch(COLORS["loop"], "solid"), "loop gain"))
    items.append((_symbol("○", COLORS["zero"]) + _symbol("×", COLORS["pole"]), "corners"))
    if has_margins:
        items.append((_swatch(COLORS["margin"], "dotted"), "crossover fc, PM"))
        items.append((_symbol("┃", COLORS["gain_margin"]), "GM"))
    if has_amp:
        items.append((_swatch(COLORS["opamp_loop"], "dotted"), "op-amp loop crossover"))
    cells = badge + "".join(f'<span style="white-space:nowrap; margin-right:14px">{sym}{html.escape(text)}</span>'
                            for sym, text in items)
    return (f'<div class="{CSS_CLASS["legend"]}" style="box-sizing:border-box; width:100%; font-size:12px; '
            f'color:{COLORS["text"]}; line-height:1.8; padding:0 0 0 {FIGURE_MARGIN["left"]}px">{cells}</div>')


def _verdict_html(st) -> str:
    """The closed-loop verdict, first and in colour: STABLE in green, anything else in red."""
    head = st.headline()
    word, _, rest = head.partition(":")
    color = COLORS["ok"] if st.stable else COLORS["error"]
    out = (f'<span style="color:{color}; font-weight:700">{html.escape(word)}</span>'
           f'<span style="color:{color}">:{html.escape(rest)}</span>')
    notes = [n for n in st.notes if st.stable is False or "negative at low frequency" not in n]
    if notes:
        out += "<br>" + "<br>".join(f'<span style="color:{COLORS["muted"]}">{html.escape(n)}</span>' for n in notes)
    return out


def _margins_html(a: Analysis, amp: AmplifierLoop | None) -> str:
    lines = []
    if a.loop is not None:
        m = a.loop.margins
        st = a.loop.stability
        lines.append(_verdict_html(st))
        if st.stable:
            parts = [f"crossover {html.escape(format_value(c.f_hz, 'Hz'))}, phase margin "
                     f"<b>{c.phase_margin_deg:.1f}°</b>" for c in m.crossovers] or ["never crosses 0 dB"]
            parts += [f"{'gain margin' if g.gain_margin_db >= 0 else 'gain-reduction margin'} "
                      f"<b>{abs(g.gain_margin_db):.1f} dB</b> at {html.escape(format_value(g.f_hz, 'Hz'))}"
                      for g in m.gain_margins]
        else:
            # No margin is shown as a pass on a loop that is not stable: the numbers are
            # labelled for what they are (180° + ∠L, |L|), not as margins.
            parts = [f"crossover {html.escape(format_value(c.f_hz, 'Hz'))}: 180° + ∠L = "
                     f"{c.phase_margin_deg:.1f}° (not a margin)" for c in m.crossovers] or ["never crosses 0 dB"]
            parts += [f"∠L = −180° at {html.escape(format_value(g.f_hz, 'Hz'))}: |L| = {-g.gain_margin_db:.1f} dB"
                      for g in m.gain_margins]
        lines.append(f'<span style="color:{COLORS["loop"]}; font-weight:600">Loop gain:</span> ' + " · ".join(parts))
    else:
        lines.append(f'<span style="color:{COLORS["muted"]}">No plant: open <i>Plant &amp; feedback</i> '
                     "to see the loop gain and its margins.</span>")
    if a.actual is not None and amp is not None:
        parts = []
        if amp.crossover_hz is not None:
            parts.append(f"crossover {html.escape(format_value(amp.crossover_hz, 'Hz'))}")
        if amp.phase_margin_deg is not None:
            parts.append(f"phase margin <b>{amp.phase_margin_deg:.1f}°</b>")
        if amp.rate_of_closure_db_per_decade is not None:
            parts.append(f"rate of closure {amp.rate_of_closure_db_per_decade:.0f} dB/decade")
        if amp.departs_hz is not None:
            parts.append(f"real response departs by &gt; 1 dB above {html.escape(format_value(amp.departs_hz, 'Hz'))}")
        lines.append(f'<span style="color:{COLORS["actual"]}; font-weight:600">Op-amp loop:</span> '
                     + " · ".join(parts))
        lines += [f'<span style="color:{COLORS["error"]}">⚠ {html.escape(w)}</span>' for w in amp.warnings]
    return (f'<div class="{CSS_CLASS["margins"]}" style="box-sizing:border-box; width:100%; font-size:12.5px; '
            f'color:{COLORS["text"]}; line-height:1.6; padding-left:{FIGURE_MARGIN["left"]}px">'
            + "<br>".join(lines) + "</div>")


class BodeView:
    """Magnitude and phase figures with legend and margin readout.

    Attributes
    ----------
    mag_fig, phase_fig : bqplot.Figure
        CSS classes ``lc-bode-mag`` and ``lc-bode-phase``.
    curves_mag, curves_phase : bqplot.Lines
        Solid curves, one row per entry of :attr:`curve_names`.
    asym_mag, asym_phase : bqplot.Lines
        Dashed straight-line asymptotes.
    box : ipywidgets.VBox
    """

    def __init__(self) -> None:
        self.x_scale = bq.LogScale(min=10.0, max=1e6)
        self.mag_scale = bq.LinearScale(min=-40.0, max=40.0)
        self.phase_scale = bq.LinearScale(min=-180.0, max=0.0)
        xs_m = {"x": self.x_scale, "y": self.mag_scale}
        xs_p = {"x": self.x_scale, "y": self.phase_scale}
        f0 = np.array([10.0, 1e6])
        z0 = np.zeros(2)
        # Curves first: the first `g.curve path.line` of each figure is the ideal exact curve.
        self.curves_mag = bq.Lines(x=f0, y=z0[None, :], scales=xs_m, colors=[COLORS["ideal"]],
                                   stroke_width=2.4, enable_hover=False)
        self.asym_mag = bq.Lines(x=f0, y=z0, scales=xs_m, colors=[COLORS["asymptote"]],
                                 line_style="dashed", stroke_width=1.6, enable_hover=False)
        self.ref_mag = bq.Lines(x=f0, y=z0, scales=xs_m, colors=[COLORS["reference"]],
                                stroke_width=1.0, enable_hover=False)
        self.zero_corners = bq.Scatter(x=np.zeros(0), y=np.zeros(0), scales=xs_m, marker="circle",
                                       fill=False, stroke=COLORS["zero"], stroke_width=2.0,
                                       default_size=70, colors=[COLORS["zero"]], enable_hover=False)
        self.pole_corners = bq.Scatter(x=np.zeros(0), y=np.zeros(0), scales=xs_m, marker="crosshair",
                                       stroke=COLORS["pole"], stroke_width=2.2, default_size=70,
                                       colors=[COLORS["pole"]], enable_hover=False)
        self.mag_segments = bq.Lines(x=f0[None, :], y=z0[None, :], scales=xs_m, colors=[COLORS["gain_margin"]],
                                     stroke_width=2.0, visible=False, enable_hover=False)
        self.guides = bq.Lines(x=f0[None, :], y=z0[None, :], scales=xs_m, colors=[COLORS["opamp_loop"]],
                               line_style="dotted", stroke_width=1.6, visible=False, enable_hover=False)
        self.mag_labels = bq.Label(x=np.zeros(0), y=np.zeros(0), text=np.array([], dtype=str),
                                   scales=xs_m, colors=[COLORS["margin"]], default_size=11.5,
                                   x_offset=6, y_offset=-6, visible=False, enable_hover=False)
        self.curves_phase = bq.Lines(x=f0, y=z0[None, :], scales=xs_p, colors=[COLORS["ideal"]],
                                     stroke_width=2.4, enable_hover=False)
        self.asym_phase = bq.Lines(x=f0, y=z0, scales=xs_p, colors=[COLORS["asymptote"]],
                                   line_style="dashed", stroke_width=1.6, enable_hover=False)
        self.phase_segments = bq.Lines(x=f0[None, :], y=z0[None, :], scales=xs_p, colors=[COLORS["margin"]],
                                       stroke_width=2.0, visible=False, enable_hover=False)
        self.phase_labels = bq.Label(x=np.zeros(0), y=np.zeros(0), text=np.array([], dtype=str),
                                     scales=xs_p, colors=[COLORS["margin"]], default_size=11.5,
                                     x_offset=6, y_offset=4, visible=False, enable_hover=False)
        grid = {"grid_color": COLORS["grid"], "tick_style": dict(AXIS_TICK_STYLE), "color": COLORS["muted"]}
        self.x_axis_mag = bq.Axis(scale=self.x_scale, label="", **grid)
        self.x_axis_phase = bq.Axis(scale=self.x_scale, label="frequency (Hz)", label_offset="34px", **grid)
        self.mag_axis = bq.Axis(scale=self.mag_scale, side="left", label="magnitude (dB)",
                                label_offset="44px", **grid)
        self.phase_axis = bq.Axis(scale=self.phase_scale, side="left", label="phase (°)",
                                  label_offset="44px", **grid)
        common = {"fig_margin": dict(FIGURE_MARGIN), "animation_duration": 0,
                  "background_style": {"fill": COLORS["plot_bg"]}, "padding_y": 0.0}
        self.mag_fig = bq.Figure(
            marks=[self.curves_mag, self.asym_mag, self.ref_mag, self.mag_segments, self.guides,
                   self.zero_corners,
                   self.pole_corners, self.mag_labels],
            axes=[self.x_axis_mag, self.mag_axis],
            layout=widgets.Layout(width="100%", height="300px", min_width="420px"), **common)
        self.phase_fig = bq.Figure(
            marks=[self.curves_phase, self.asym_phase, self.phase_segments, self.phase_labels],
            axes=[self.x_axis_phase, self.phase_axis],
            layout=widgets.Layout(width="100%", height="250px", min_width="420px"), **common)
        self.mag_fig.add_class(CSS_CLASS["bode_mag"])
        self.phase_fig.add_class(CSS_CLASS["bode_phase"])
        self.legend = widgets.HTML()
        self.margins = widgets.HTML()
        self.box = widgets.VBox([self.legend, self.mag_fig, self.phase_fig, self.margins],
                                layout=widgets.Layout(width="100%"))
        self._writer = TraitWriter()
        self.curve_names: tuple[str, ...] = ("exact",)
        self.verdict: str | None = None
        self.mag_seg_kinds: tuple[str, ...] = ()
        self.guide_kinds: tuple[str, ...] = ()
        self.phase_seg_kinds: tuple[str, ...] = ()
        self.f_hz = f0
        self._fresh = True

    # -- grid -------------------------------------------------------------
    def set_grid(self, f_hz: np.ndarray) -> None:
        """Fix the frequency grid (Hz) for the current design; the next draw refits the y axes."""
        self.f_hz = np.asarray(f_hz, dtype=float)
        lo, hi = float(self.f_hz[0]), float(self.f_hz[-1])
        values, labels = decade_ticks(lo, hi)
        w = self._writer
        w.set(self.x_scale, min=lo, max=hi)
        for ax in (self.x_axis_mag, self.x_axis_phase):
            w.set(ax, tick_values=values, tick_labels=labels)
        w.set(self.ref_mag, x=np.array([lo, hi]), y=np.zeros(2))
        for mark in (self.curves_mag, self.asym_mag, self.curves_phase, self.asym_phase):
            w.set(mark, x=self.f_hz)
        self._fresh = True

    # -- compute ------------------------------------------------------------
    def frame(self, a: Analysis, amp: AmplifierLoop | None = None) -> BodeFrame:
        """Compute everything the figures show for ``a`` (no mark is touched).

        Parameters
        ----------
        a : Analysis
            The analysis to show.
        amp : AmplifierLoop or None
            The op-amp's own loop to annotate (its crossover), normally
            ``a.actual.amplifier_loop``; the explorer may pass the one of a
            moment ago while a slider is moving (see :class:`Explorer`).
        """
        f = a.f_hz
        f_lo, f_hi = float(f[0]), float(f[-1])
        names = ["exact"]
        mags = [a.exact_mag_db]
        phases = [a.exact_phase_deg]
        if a.actual_mag_db is not None:
            names.append("actual")
            mags.append(a.actual_mag_db)
            phases.append(a.actual_phase_deg)
        if a.loop_mag_db is not None:
            names.append("loop")
            mags.append(a.loop_mag_db)
            phases.append(a.loop_phase_deg)
        mag_rows = np.vstack(mags)
        phase_rows = np.vstack(phases)
        zf, zdb, pf, pdb = _corner_points(a.factored, f_lo, f_hi)

        finite = mag_rows[np.isfinite(mag_rows)]
        m_lo, m_hi = (float(finite.min()), float(finite.max())) if finite.size else (-40.0, 40.0)
        m_hi = min(m_hi, MAX_DB)
        m_lo = max(m_lo, m_hi - MAX_SPAN_DB, MIN_DB)
        cur = (None, None) if self._fresh else (self.mag_scale.min, self.mag_scale.max)
        mag_range = keep_or_fit(cur, min(m_lo, 0.0), max(m_hi, 0.0), (10.0, 20.0, 40.0), 6.0, 9)

        seg_x: list[list[float]] = []
        seg_y: list[list[float]] = []
        seg_kinds: list[str] = []
        mag_labels: list[tuple[float, float | None, str, str]] = []
        ph_x: list[list[float]] = []
        ph_y: list[list[float]] = []
        ph_kinds: list[str] = []
        ph_labels: list[tuple[float, float, str, str]] = []
        guides: list[tuple[float, str]] = []
        if a.loop is not None:
            m = a.loop.margins
            crossings = [c for c in m.crossovers if f_lo <= c.f_hz <= f_hi][:MAX_ANNOTATED]
            stable = a.loop.stability.stable
            if crossings:
                phase_c = (exact_phase_deg(a.loop.loop, np.array([c.f_hz for c in crossings]))
                           + loop_branch_offset_deg(a.loop.loop))
                refs_done: set[float] = set()
                for c, ph in zip(crossings, phase_c, strict=True):
                    ref = float(ph) - c.phase_margin_deg
                    key = round(ref, 6)
                    if key not in refs_done:
                        refs_done.add(key)
                        ph_x.append([f_lo, f_hi])
                        ph_y.append([ref, ref])
                        ph_kinds.append("ref")
                    ph_x.append([c.f_hz, c.f_hz])
                    ph_y.append([ref, float(ph)])
                    ph_kinds.append("pm")
                    label = f"PM {c.phase_margin_deg:.1f}°" if stable else "UNSTABLE"
                    ph_labels.append((c.f_hz, 0.5 * (ref + float(ph)), label,
                                      COLORS["margin"] if stable else COLORS["error"]))
                    guides.append((c.f_hz, "fc"))
                    mag_labels.append((c.f_hz, None, f"fc {format_value(c.f_hz, 'Hz')}", COLORS["margin"]))
            for g in [g for g in m.gain_margins if f_lo <= g.f_hz <= f_hi][:MAX_ANNOTATED]:
                seg_x.append([g.f_hz, g.f_hz])
                seg_y.append([-g.gain_margin_db, 0.0])
                seg_kinds.append("gm")
                text = f"GM {g.gain_margin_db:.1f} dB" if stable else f"|L| {-g.gain_margin_db:.1f} dB"
                mag_labels.append((g.f_hz, 0.0, text, COLORS["gain_margin"]))
        if a.actual is None:
            amp = None
        if amp is not None and amp.crossover_hz is not None and f_lo <= amp.crossover_hz <= f_hi:
            guides.append((float(amp.crossover_hz), "opamp"))
            text = f"op-amp fc {format_value(amp.crossover_hz, 'Hz')}"
            mag_labels.append((amp.crossover_hz, None, text, COLORS["opamp_loop"]))
        # Labels without a level sit along the top of the plot, below each other if close.
        lo, hi, _ = mag_range
        placed: list[tuple[float, float, str, str]] = []
        top = [lb for lb in mag_labels if lb[1] is None]
        for i, (fx, _y, text, color) in enumerate(sorted(top, key=lambda lb: lb[0])):
            row = i % 2 if len(top) > 1 and _close(top, fx) else 0
            placed.append((fx, hi - (0.06 + 0.08 * row) * (hi - lo), text, color))
        mag_labels = [lb for lb in mag_labels if lb[1] is not None] + placed
        # Keep text inside the plot: a label starting near the right edge starts further left.
        mag_labels = [(clamp_log(x, f_lo, f_hi, 0.76), y, t, c) for x, y, t, c in mag_labels]

        ph_labels = [(clamp_log(x, f_lo, f_hi, 0.86), y, t, c) for x, y, t, c in ph_labels]
        # The phase axis covers each curve where its magnitude is on screen.
        shown = np.isfinite(phase_rows) & (mag_rows >= mag_range[0]) & (mag_rows <= mag_range[1])
        ph_all = np.concatenate([phase_rows[shown], np.ravel(ph_y) if ph_y else np.zeros(0)])
        p_lo, p_hi = (float(ph_all.min()), float(ph_all.max())) if ph_all.size else (-180.0, 0.0)
        cur_p = (None, None) if self._fresh else (self.phase_scale.min, self.phase_scale.max)
        phase_range = keep_or_fit(cur_p, p_lo, p_hi, (15.0, 30.0, 45.0, 90.0, 180.0), 8.0, 8)

        return BodeFrame(
            tuple(names), mag_rows, phase_rows, a.asymptote_mag_db, a.asymptote_phase_deg,
            zf, zdb, pf, pdb,
            np.array(seg_x, dtype=float).reshape(-1, 2), np.array(seg_y, dtype=float).reshape(-1, 2),
            tuple(seg_kinds), tuple(g[0] for g in guides), tuple(g[1] for g in guides),
            np.array(ph_x, dtype=float).reshape(-1, 2), np.array(ph_y, dtype=float).reshape(-1, 2),
            tuple(ph_kinds), tuple(mag_labels), tuple(ph_labels), mag_range, phase_range,
            _margins_html(a, amp),
            _legend(tuple(names), a.loop is not None, amp is not None,
                    a.loop.stability.verdict if a.loop is not None else None),
            a.loop.stability.verdict if a.loop is not None else None,
        )

    # -- draw -----------------------------------------------------------------
    def draw(self, fr: BodeFrame) -> None:
        """Assign a frame to the marks: one message per mark that changes, none for the others."""
        w = self._writer
        self._set_range(self.mag_scale, self.mag_axis, fr.mag_range_db, "")
        self._set_range(self.phase_scale, self.phase_axis, fr.phase_range_deg, "°")
        colors = [_CURVE_COLOR[n] for n in fr.curve_names]
        # The curves first, in both figures: the browser redraws in message order.
        w.set(self.curves_mag, y=fr.mag_rows_db, colors=colors)
        w.set(self.curves_phase, y=fr.phase_rows_deg, colors=colors)
        w.set(self.asym_mag, y=fr.asym_mag_db)
        w.set(self.asym_phase, y=fr.asym_phase_deg)
        w.set(self.zero_corners, x=fr.zero_corner_hz, y=fr.zero_corner_db)
        w.set(self.pole_corners, x=fr.pole_corner_hz, y=fr.pole_corner_db)
        self._set_segments(self.mag_segments, fr.mag_seg_x_hz, fr.mag_seg_y_db,
                           [COLORS["gain_margin"]] * len(fr.mag_seg_kinds))
        lo, hi, _ = fr.mag_range_db
        self._set_segments(self.guides, np.array([[f, f] for f in fr.guide_hz]).reshape(-1, 2),
                           np.array([[lo, hi]] * len(fr.guide_hz)).reshape(-1, 2),
                           [COLORS["margin"] if k == "fc" else COLORS["opamp_loop"] for k in fr.guide_kinds])
        self._set_labels(self.mag_labels, fr.mag_labels)
        self._set_segments(self.phase_segments, fr.phase_seg_x_hz, fr.phase_seg_y_deg,
                           [COLORS["reference"] if k == "ref" else COLORS["margin"] for k in fr.phase_seg_kinds])
        self._set_labels(self.phase_labels, fr.phase_labels)
        w.set(self.legend, value=fr.legend_html)
        w.set(self.margins, value=fr.margins_html)
        self.curve_names = fr.curve_names
        self.verdict = fr.verdict
        self.mag_seg_kinds = fr.mag_seg_kinds
        self.guide_kinds = fr.guide_kinds
        self.phase_seg_kinds = fr.phase_seg_kinds
        self._fresh = False

    def _set_range(self, scale: bq.LinearScale, axis: bq.Axis, rng: tuple[float, float, float], unit: str) -> None:
        lo, hi, step = rng
        if self._writer.set(scale, min=float(lo), max=float(hi)):
            values, labels = linear_ticks(lo, hi, step, unit)
            self._writer.set(axis, tick_values=values, tick_labels=labels)

    def _set_segments(self, mark: bq.Lines, x: np.ndarray, y: np.ndarray, colors: list[str]) -> None:
        if x.shape[0]:
            self._writer.set(mark, x=x, y=y, colors=colors, visible=True)
        else:
            self._writer.set(mark, visible=False)

    def _set_labels(self, mark: bq.Label, labels: tuple[tuple[float, float, str, str], ...]) -> None:
        if labels:
            self._writer.set(mark, x=np.array([lb[0] for lb in labels], dtype=float),
                             y=np.array([lb[1] for lb in labels], dtype=float),
                             text=np.array([lb[2] for lb in labels], dtype=str),
                             colors=[lb[3] for lb in labels], visible=True)
        else:
            self._writer.set(mark, visible=False)

    # -- read back ---------------------------------------------------------------
    def state(self) -> dict:
        """The data on the marks now (Hz, dB, degrees), keyed as :meth:`Explorer.view_state`."""
        out: dict = {"f_hz": np.asarray(self.curves_mag.x, dtype=float)}
        mag = np.atleast_2d(np.asarray(self.curves_mag.y, dtype=float))
        ph = np.atleast_2d(np.asarray(self.curves_phase.y, dtype=float))
        for i, name in enumerate(self.curve_names):
            out[f"{name}_mag_db"] = mag[i]
            out[f"{name}_phase_deg"] = ph[i]
        out["asymptote_mag_db"] = np.asarray(self.asym_mag.y, dtype=float)
        out["asymptote_phase_deg"] = np.asarray(self.asym_phase.y, dtype=float)
        out["zero_corners_hz"] = np.asarray(self.zero_corners.x, dtype=float)
        out["pole_corners_hz"] = np.asarray(self.pole_corners.x, dtype=float)
        out["mag_range_db"] = (float(self.mag_scale.min), float(self.mag_scale.max))
        out["phase_range_deg"] = (float(self.phase_scale.min), float(self.phase_scale.max))
        if "loop" in self.curve_names:
            crossovers, gms = [], []
            if self.phase_segments.visible:
                px = np.atleast_2d(np.asarray(self.phase_segments.x, dtype=float))
                py = np.atleast_2d(np.asarray(self.phase_segments.y, dtype=float))
                for k, xs, ys in zip(self.phase_seg_kinds, px, py, strict=True):
                    if k == "pm":
                        crossovers.append({"f_hz": float(xs[0]), "phase_margin_deg": float(ys[1] - ys[0])})
            if self.mag_segments.visible:
                mx = np.atleast_2d(np.asarray(self.mag_segments.x, dtype=float))
                my = np.atleast_2d(np.asarray(self.mag_segments.y, dtype=float))
                for k, xs, ys in zip(self.mag_seg_kinds, mx, my, strict=True):
                    if k == "gm":
                        gms.append({"f_hz": float(xs[0]), "gain_margin_db": float(-ys[0])})
            out["loop_margins"] = {"crossovers": crossovers, "gain_margins": gms}
            out["loop_verdict"] = self.verdict
        if self.guides.visible and "opamp" in self.guide_kinds:
            gx = np.atleast_2d(np.asarray(self.guides.x, dtype=float))
            out["amplifier_crossover_hz"] = float(gx[self.guide_kinds.index("opamp")][0])
        return out
