r"""The pole-zero map: the s-plane on signed-log axes, poles as ×, zeros as ○.

Roots of a stage spread over many decades (an integrator's pole at the
origin, zeros near 5 kHz, poles near 200 kHz), which a linear s-plane squeezes
into one dot. Both axes therefore use the signed-log mapping

.. math::

    m(x) = \begin{cases} x/x_0, & |x| \le x_0 \\
                         \operatorname{sign}(x)\,(1 + \log_{10}(|x|/x_0)), & |x| > x_0 \end{cases}

applied separately to the real part σ and the imaginary part ω of each root
(both in Hz, i.e. s/2π, or in rad/s, as chosen). It is continuous and odd,
keeps the origin at the origin and puts one decade per unit beyond ``x0``;
``x0`` is fixed per design, a decade below the smallest non-zero |σ| or |ω|,
so the axes do not jump while sliders move. Tick labels give the real
values; the axis labels say the scale is signed-log.

The view holds no choice of its own: the unit, the zoom mode, ``x0`` and the
axis ranges come in a :class:`~loopcraft.widgets._state.PlaneState` (the
explorer's one state, see :func:`plane_for`), and :meth:`PoleZeroView.frame`
is a pure function of the analysis and that state. The unit and zoom toggles
are inputs the explorer observes; the view never reads them back.

Coincident roots are drawn once with their multiplicity written beside the
marker. A zero and a pole that cancel at the current values (see
:func:`loopcraft.numeric.factors.cancel_roots`) are not drawn as × and ○ but as one
hollow diamond in their own colour, with a legend entry and a hover note; the
× and ○ are the reduced transfer function. Hovering a marker shows the root, its ω0 and Q, and the components
that set it: those whose normalized sensitivity ``|∂ln ω/∂ln x|`` exceeds
0.05 (see :mod:`loopcraft.analysis.sensitivity`).
"""

from __future__ import annotations

import html
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from functools import lru_cache

import bqplot as bq
import ipywidgets as widgets
import numpy as np

from ..analysis.analyzer import Analysis
from ..analysis.sensitivity import CornerSensitivity, Sensitivity
from ..model.values import format_value
from ..numeric.factors import CANCEL_REL_TOL, JW_AXIS_REL_TOL
from ._state import PlaneState
from ._sync import TraitWriter
from ._theme import AXIS_TICK_STYLE, COLORS, CSS_CLASS, PZ_MARGIN

__all__ = [
    "signed_log",
    "inverse_signed_log",
    "group_roots",
    "reference_scale",
    "plane_for",
    "PzFrame",
    "PoleZeroView",
    "MOVER_THRESHOLD",
]

#: |sensitivity| above which a component is listed as setting a root.
MOVER_THRESHOLD = 0.05
_TWO_PI = 2.0 * math.pi
_MINUS = "\u2212"


def signed_log(x: np.ndarray, x0: float) -> np.ndarray:
    """Map values to signed-log coordinates: linear within ±x0, one unit per decade beyond.

    Parameters
    ----------
    x : array_like of float
        Values (Hz or rad/s, the same unit as ``x0``).
    x0 : float
        The linear-region half width, > 0.

    Returns
    -------
    ndarray
        ``x/x0`` where ``|x| <= x0``, else ``sign(x)·(1 + log10(|x|/x0))``.
    """
    x = np.asarray(x, dtype=float)
    a = np.abs(x) / x0
    with np.errstate(divide="ignore"):
        big = np.sign(x) * (1.0 + np.log10(np.where(a > 1.0, a, 1.0)))
    return np.where(a <= 1.0, x / x0, big)


def inverse_signed_log(m: np.ndarray, x0: float) -> np.ndarray:
    """Invert :func:`signed_log` (same units as ``x0``)."""
    m = np.asarray(m, dtype=float)
    a = np.abs(m)
    return np.where(a <= 1.0, m * x0, np.sign(m) * x0 * 10.0 ** (a - 1.0))


def group_roots(roots: np.ndarray, rel_tol: float = 1e-6) -> list[tuple[complex, int]]:
    """Merge coincident roots: ``[(root, multiplicity), ...]``.

    Parameters
    ----------
    roots : array of complex
        Roots (any unit).
    rel_tol : float
        Roots closer than ``rel_tol`` times the larger magnitude (or both at
        the origin) count as one.
    """
    out: list[list] = []
    for r in np.asarray(roots, dtype=complex):
        for g in out:
            if abs(r - g[0]) <= rel_tol * max(abs(r), abs(g[0])) or (r == 0 and g[0] == 0):
                g[1] += 1
                break
        else:
            out.append([complex(r), 1])
    return [(g[0], g[1]) for g in out]


def reference_scale(roots_rad_s: np.ndarray, unit: str) -> float:
    """``x0`` for a set of roots: a decade below the smallest non-zero |σ| or |ω| (a power of ten).

    Parameters
    ----------
    roots_rad_s : array of complex
        Roots in rad/s.
    unit : {"Hz", "rad/s"}
        The unit the map is drawn in.
    """
    r = np.asarray(roots_rad_s, dtype=complex) / (_TWO_PI if unit == "Hz" else 1.0)
    parts = np.abs(np.concatenate([r.real, r.imag]))
    parts = parts[parts > 0]
    if not parts.size:
        return 1.0
    return 10.0 ** (math.floor(math.log10(parts.min())) - 1)


def plane_for(a: Analysis, unit: str = "Hz", zoom: str = "auto") -> PlaneState:
    """The s-plane state of a newly shown design: ``x0`` from its drawn roots, ranges to fit.

    Parameters
    ----------
    a : Analysis
        The design's analysis at the values it is shown with (roots in rad/s).
    unit : {"Hz", "rad/s"}
        The unit to draw in.
    zoom : {"auto", "manual"}
        The zoom mode.
    """
    roots = _drawn_roots(a)
    return PlaneState(unit=unit, zoom=zoom, x0_hz=reference_scale(roots, "Hz"),
                      x0_rad_s=reference_scale(roots, "rad/s"))


def _tick_label(k: int, x0: float) -> str:
    if k == 0:
        return "0"
    v = x0 * 10.0 ** (abs(k) - 1)
    text = format_value(v, "", digits=3).replace(" ", "")
    return (_MINUS if k < 0 else "") + text


@lru_cache(maxsize=64)
def _ticks(lo: float, hi: float, x0: float) -> tuple[np.ndarray, dict[str, str]]:
    """Integer ticks in ``[lo, hi]`` (signed-log units) and their labels in the unit of ``x0``.

    Cached (a pure function of its arguments): the same range gives the very same
    objects, so the trait writer skips them. The results are never mutated.
    """
    ks = list(range(math.ceil(lo), math.floor(hi) + 1))
    every = 1 if len(ks) <= 9 else 2
    ks = [k for k in ks if k % every == 0]
    return np.array(ks, dtype=float), {str(k): _tick_label(k, x0) for k in ks}


def _fit(values: np.ndarray, pad: float, minimum: float, symmetric: bool) -> tuple[float, float]:
    lo = min(float(values.min()), 0.0) if values.size else 0.0
    hi = max(float(values.max()), 0.0) if values.size else 0.0
    if symmetric:
        y = max(abs(lo), abs(hi), minimum) + pad
        y = math.ceil(y * 2) / 2
        return -y, y
    lo = math.floor((lo - pad) * 2) / 2
    hi = math.ceil((max(hi, minimum) + pad) * 2) / 2
    return lo, hi


def _keep(cur: tuple[float | None, float | None], new: tuple[float, float], data: np.ndarray) -> tuple[float, float]:
    c_lo, c_hi = cur
    if c_lo is None or c_hi is None or not data.size:
        return new
    fits = c_lo <= min(float(data.min()), 0.0) - 0.3 and c_hi >= max(float(data.max()), 0.0) + 0.3
    snug = (c_hi - c_lo) <= (new[1] - new[0]) + 2.0
    return (c_lo, c_hi) if fits and snug else new


@dataclass(frozen=True)
class PzFrame:
    """What the map shows for one analysis.

    Attributes
    ----------
    unit : {"Hz", "rad/s"}
    x0 : float
        Signed-log reference, in ``unit``.
    pole_x, pole_y, zero_x, zero_y : ndarray
        Marker positions in signed-log coordinates.
    pole_groups, zero_groups : tuple of (complex, int)
        Each drawn marker's root (rad/s) and multiplicity.
    x_range, y_range : (lo, hi)
        Axis ranges (signed-log units).
    cancel_x, cancel_y : ndarray
        Positions of the cancelled zero/pole pairs (signed-log coordinates).
    cancel_groups : tuple of (complex, int)
        Each cancelled pair's pole (rad/s) and multiplicity.
    zoom : {"auto", "manual"}
        The zoom mode (manual lets the browser pan and zoom the figure).
    """

    unit: str
    x0: float
    pole_x: np.ndarray
    pole_y: np.ndarray
    zero_x: np.ndarray
    zero_y: np.ndarray
    pole_groups: tuple[tuple[complex, int], ...]
    zero_groups: tuple[tuple[complex, int], ...]
    x_range: tuple[float, float]
    y_range: tuple[float, float]
    cancel_x: np.ndarray = field(default_factory=lambda: np.zeros(0))
    cancel_y: np.ndarray = field(default_factory=lambda: np.zeros(0))
    cancel_groups: tuple[tuple[complex, int], ...] = ()
    zoom: str = "auto"


def _match_rows(root: complex, role: str, rows: Sequence[CornerSensitivity]) -> list[CornerSensitivity]:
    """The sensitivity rows (ω or ω0, and Q) of the factor a root belongs to."""
    mag = abs(root)
    cands = [r for r in rows if r.role == role and r.quantity == "omega" and r.value > 0]
    if mag == 0 or not cands:
        return []
    best = min(cands, key=lambda r: abs(math.log(r.value / mag)))
    out = [best]
    if best.label.startswith("ω0"):
        q_label = "Q" + best.label[2:]
        out += [r for r in rows if r.label == q_label]
    return out


def _describe_cancelled(root: complex, mult: int) -> str:
    """Hover text of a cancelled zero/pole pair (``root`` is the pole, rad/s)."""
    times = "" if mult == 1 else f"{mult} × "
    w = abs(root)
    if abs(root.imag) <= 1e-12 * w:
        where = (f"s = {_signed_num(root.real)} rad/s &nbsp;·&nbsp; |s|/2π = "
                 f"{html.escape(format_value(w / _TWO_PI, 'Hz', digits=4))}")
    else:
        where = (f"s = {_signed_num(root.real)} ± j{abs(root.imag):.4g} rad/s<br>"
                 f"ω0/2π = {html.escape(format_value(w / _TWO_PI, 'Hz', digits=4))}")
    hidden = ""
    if root.real > JW_AXIS_REL_TOL * w:
        hidden = (f'<br><b style="color:{COLORS["error"]}">the cancelled pole is in the right half plane: '
                  "an unstable mode the response does not show</b>")
    elif abs(root.real) <= JW_AXIS_REL_TOL * w:
        hidden = (f'<br><b style="color:{COLORS["error"]}">the cancelled pole is on the jω axis: '
                  "an undamped mode the response does not show</b>")
    return (f'<div style="font-size:12px; line-height:1.45; color:{COLORS["text"]}">'
            f"<b>{times}pole-zero cancellation</b> at these values<br>{where}<br>"
            f'<span style="color:{COLORS["muted"]}">a zero and a pole coincide (within {CANCEL_REL_TOL:g} '
            f"of |s|); H(s) is drawn without them</span>{hidden}</div>")


def _describe(root: complex, mult: int, role: str, rows: Sequence[CornerSensitivity]) -> str:
    if role == "cancelled":
        return _describe_cancelled(root, mult)
    what = {"pole": "pole", "zero": "zero"}[role]
    times = {1: "", 2: "double ", 3: "triple "}.get(mult, f"{mult}-fold ")
    if root == 0:
        head = f"<b>{times}{what} at the origin</b>"
        detail = "s = 0"
    elif abs(root.imag) <= 1e-12 * abs(root):
        f = abs(root.real) / _TWO_PI
        side = "right" if root.real > 0 else "left"
        head = f"<b>{times}real {what}</b> ({side} half plane)"
        detail = (f"s = {_signed_num(root.real)} rad/s &nbsp;·&nbsp; |s|/2π = "
                  f"{html.escape(format_value(f, 'Hz'))}")
    else:
        w0 = abs(root)
        on_axis = abs(root.real) <= JW_AXIS_REL_TOL * w0
        q_text = "∞ (on the jω axis)" if on_axis else f"{w0 / (2.0 * abs(root.real)):.3g}"
        head = f"<b>{times}complex {what} pair</b>"
        detail = (f"s = {_signed_num(root.real)} ± j{abs(root.imag):.4g} rad/s<br>"
                  f"ω0/2π = {html.escape(format_value(w0 / _TWO_PI, 'Hz'))}, Q = {q_text}")
    matched = _match_rows(root, role, rows)
    if root == 0:
        movers = "set by the topology (no component moves it)"
    elif not matched:
        movers = "sensitivities unavailable"
    else:
        items: dict[str, float] = {}
        for r in matched:
            for name in r.movers(MOVER_THRESHOLD):
                s = r.by_component[name]
                if name not in items or abs(s) > abs(items[name]):
                    items[name] = s
        movers = ("set by " + ", ".join(f"<b>{html.escape(n)}</b> (S = {_signed_num(s, 2)})"
                                        for n, s in sorted(items.items(), key=lambda kv: -abs(kv[1])))
                  if items else f"no component has |S| > {MOVER_THRESHOLD}")
    return (f'<div style="font-size:12px; line-height:1.45; color:{COLORS["text"]}">{head}<br>{detail}<br>'
            f'<span style="color:{COLORS["muted"]}">{movers}</span></div>')


def _drawn_roots(a: Analysis) -> np.ndarray:
    """Every root the map draws, rad/s: the reduced poles and zeros and the cancelled pairs."""
    tr = a.transfer
    return np.concatenate([tr.reduced_poles, tr.reduced_zeros, tr.cancelled])


def _signed_num(x: float, digits: int = 4) -> str:
    return f"{x:.{digits}g}".replace("-", _MINUS) if digits != 2 else f"{x:.2f}".replace("-", _MINUS)


class PoleZeroView:
    """The s-plane figure with unit and zoom choices and a hover readout.

    Attributes
    ----------
    fig : bqplot.Figure
        CSS class ``lc-pzmap``.
    poles, zeros : bqplot.Scatter
        Crosses and hollow circles; ``names`` carry the multiplicity ("2") or "".
    cancelled : bqplot.Scatter
        Hollow diamonds where a zero and a pole cancel at the current values.
    units : ipywidgets.ToggleButtons
        "Hz" (s/2π) or "rad/s". An input: the explorer observes it and puts the
        choice into its state; the view does not read it.
    zoom : ipywidgets.ToggleButtons
        "auto" (fit the roots) or "manual" (drag to pan, wheel to zoom on the figure);
        an input like ``units``.
    readout : ipywidgets.HTML
        The description of the last hovered root.
    box : ipywidgets.VBox
    x0, unit : float, str
        The signed-log reference and unit of the frame drawn last (what is on screen).
    """

    def __init__(self) -> None:
        self.x_scale = bq.LinearScale(min=-6.0, max=1.0)
        self.y_scale = bq.LinearScale(min=-2.0, max=2.0)
        sc = {"x": self.x_scale, "y": self.y_scale}
        big = 1e3
        self.axes_cross = bq.Lines(x=np.array([[-big, big], [0.0, 0.0]]), y=np.array([[0.0, 0.0], [-big, big]]),
                                   scales=sc, colors=[COLORS["reference"], COLORS["reference"]],
                                   stroke_width=1.2, enable_hover=False)
        self.tooltip = widgets.HTML(layout=widgets.Layout(max_width="320px", padding="4px 6px"))
        self.poles = bq.Scatter(x=np.zeros(0), y=np.zeros(0), scales=sc, marker="crosshair",
                                stroke=COLORS["pole"], stroke_width=2.6, default_size=120,
                                colors=[COLORS["pole"]], names=np.array([], dtype=str),
                                display_names=True, names_unique=False, tooltip=self.tooltip,
                                label_display_horizontal_offset=9.0, label_display_vertical_offset=-7.0)
        self.zeros = bq.Scatter(x=np.zeros(0), y=np.zeros(0), scales=sc, marker="circle", fill=False,
                                stroke=COLORS["zero"], stroke_width=2.4, default_size=110,
                                colors=[COLORS["zero"]], names=np.array([], dtype=str),
                                display_names=True, names_unique=False, tooltip=self.tooltip,
                                label_display_horizontal_offset=9.0, label_display_vertical_offset=-7.0)
        self.cancelled = bq.Scatter(x=np.zeros(0), y=np.zeros(0), scales=sc, marker="diamond", fill=False,
                                    stroke=COLORS["cancelled"], stroke_width=2.2, default_size=170,
                                    colors=[COLORS["cancelled"]], names=np.array([], dtype=str),
                                    display_names=True, names_unique=False, tooltip=self.tooltip,
                                    label_display_horizontal_offset=9.0, label_display_vertical_offset=-7.0)
        grid = {"grid_color": COLORS["grid"], "tick_style": dict(AXIS_TICK_STYLE), "color": COLORS["muted"]}
        self.x_axis = bq.Axis(scale=self.x_scale, label="σ (Hz), signed-log scale", label_offset="36px", **grid)
        self.y_axis = bq.Axis(scale=self.y_scale, side="left", label="jω (Hz), signed-log scale",
                              label_offset="52px", **grid)
        self.fig = bq.Figure(marks=[self.axes_cross, self.cancelled, self.zeros, self.poles],
                             axes=[self.x_axis, self.y_axis],
                             fig_margin=dict(PZ_MARGIN), animation_duration=0, padding_x=0.0, padding_y=0.0,
                             background_style={"fill": COLORS["plot_bg"]},
                             layout=widgets.Layout(width="100%", height="330px", min_width="320px"))
        self.fig.add_class(CSS_CLASS["pzmap"])
        self.units = widgets.ToggleButtons(options=["Hz", "rad/s"], value="Hz",
                                           style={"button_width": "58px"}, tooltips=["s/2π", "s"],
                                           layout=widgets.Layout(width="auto"))
        self.zoom = widgets.ToggleButtons(options=["auto", "manual"], value="auto",
                                          style={"button_width": "76px"},
                                          tooltips=["fit every root", "drag to pan, wheel to zoom"],
                                          layout=widgets.Layout(width="auto"))
        self.readout = widgets.HTML(value=self._hint())
        self.note = widgets.HTML()
        title = widgets.HTML(f'<span style="font-weight:600; color:{COLORS["text"]}">s-plane: '
                             f'<span style="color:{COLORS["pole"]}">× poles</span>, '
                             f'<span style="color:{COLORS["zero"]}">○ zeros</span>, '
                             f'<span style="color:{COLORS["cancelled"]}">◇ pole-zero cancellation</span></span>')
        small = f'<span style="color:{COLORS["muted"]}; font-size:12px">{{}}</span>'
        controls = widgets.HBox([widgets.HTML(small.format("units")), self.units,
                                 widgets.HTML(small.format("&nbsp; zoom")), self.zoom],
                                layout=widgets.Layout(align_items="center"))
        head = widgets.VBox([title, controls])
        self.box = widgets.VBox([head, self.fig, self.note, self.readout], layout=widgets.Layout(width="100%"))
        self._writer = TraitWriter()
        self.x0 = 1.0
        self.unit = "Hz"
        self.pole_mult: tuple[int, ...] = ()
        self.zero_mult: tuple[int, ...] = ()
        self.cancel_mult: tuple[int, ...] = ()
        self._groups: dict[str, tuple[tuple[complex, int], ...]] = {"pole": (), "zero": (), "cancelled": ()}
        self._last: tuple[Analysis, Sensitivity | None] | None = None
        self._axes_drawn: tuple | None = None  # (unit, zoom, x0, ranges) of the axes last assigned
        self._pan = bq.interacts.PanZoom(scales={"x": [self.x_scale], "y": [self.y_scale]})
        self.poles.on_hover(lambda _m, content: self._hovered("pole", content))
        self.zeros.on_hover(lambda _m, content: self._hovered("zero", content))
        self.cancelled.on_hover(lambda _m, content: self._hovered("cancelled", content))

    @staticmethod
    def _hint() -> str:
        return (f'<span style="color:{COLORS["muted"]}; font-size:12px">'
                "Hover a marker: value and the parts that set it.</span>")

    # -- compute ----------------------------------------------------------------------
    def frame(self, a: Analysis, sens: Sensitivity | None, plane: PlaneState) -> PzFrame:
        """Marker positions, multiplicities and axis ranges: a pure function of ``a`` and ``plane``.

        No widget is read or touched. With ``plane.zoom == "auto"`` the ranges
        fit the roots, keeping ``plane``'s ranges while the roots fit them
        snugly; with "manual" ``plane``'s ranges are kept. Ranges that are None
        are fitted afresh in either mode.

        Parameters
        ----------
        a : Analysis
            Roots in rad/s.
        sens : Sensitivity or None
            Not used for the positions (the hover texts use it at draw time).
        plane : PlaneState
            Unit (Hz or rad/s), signed-log reference ``x0`` in that unit, zoom mode, ranges.
        """
        div = plane.rad_s_per_unit
        x0 = plane.x0
        data = {}
        tr = a.transfer
        for role, roots in (("pole", tr.reduced_poles), ("zero", tr.reduced_zeros), ("cancelled", tr.cancelled)):
            groups = tuple(group_roots(roots))
            r = np.array([g[0] for g in groups], dtype=complex)
            data[role] = (signed_log(r.real / div, x0), signed_log(r.imag / div, x0), groups)
        xs = np.concatenate([data["pole"][0], data["zero"][0], data["cancelled"][0]])
        ys = np.concatenate([data["pole"][1], data["zero"][1], data["cancelled"][1]])
        if plane.x_range is None or plane.y_range is None:
            x_range = _fit(xs, 0.8, 0.6, symmetric=False)
            y_range = _fit(ys, 0.8, 0.7, symmetric=True)
        elif plane.zoom == "auto":
            x_range = _keep(plane.x_range, _fit(xs, 0.8, 0.6, symmetric=False), xs)
            y_range = _keep(plane.y_range, _fit(ys, 0.8, 0.7, symmetric=True), ys)
        else:
            x_range, y_range = plane.x_range, plane.y_range
        p, z, c = data["pole"], data["zero"], data["cancelled"]
        return PzFrame(plane.unit, x0, p[0], p[1], z[0], z[1], p[2], z[2], x_range, y_range, c[0], c[1], c[2],
                       plane.zoom)

    # -- draw -----------------------------------------------------------------------------
    def draw(self, fr: PzFrame, source: tuple[Analysis, Sensitivity | None]) -> None:
        """Assign a frame to the marks, axes and ticks (one message per changed widget, none if unchanged).

        ``source`` is the analysis and sensitivities the frame came from; they are
        kept for the hover descriptions.
        """
        w = self._writer
        axes = (fr.unit, fr.zoom, fr.x0, fr.x_range, fr.y_range)
        if axes != self._axes_drawn:  # most slider moves keep the axes: skip them outright
            w.set(self.x_axis, label=f"σ ({fr.unit}), signed-log scale")
            w.set(self.y_axis, label=f"jω ({fr.unit}), signed-log scale")
            self._set_range(self.x_scale, self.x_axis, fr.x_range, fr.x0)
            self._set_range(self.y_scale, self.y_axis, fr.y_range, fr.x0)
            w.set(self.fig, interaction=self._pan if fr.zoom == "manual" else None)
            self._axes_drawn = axes
        for mark, x, y, groups in ((self.poles, fr.pole_x, fr.pole_y, fr.pole_groups),
                                   (self.zeros, fr.zero_x, fr.zero_y, fr.zero_groups),
                                   (self.cancelled, fr.cancel_x, fr.cancel_y, fr.cancel_groups)):
            names = np.array([str(m) if m > 1 else "" for _r, m in groups], dtype=str)
            w.set(mark, x=x, y=y, names=names)
        self.pole_mult = tuple(m for _r, m in fr.pole_groups)
        self.zero_mult = tuple(m for _r, m in fr.zero_groups)
        self.cancel_mult = tuple(m for _r, m in fr.cancel_groups)
        self._groups = {"pole": fr.pole_groups, "zero": fr.zero_groups, "cancelled": fr.cancel_groups}
        self._last = source
        self.unit = fr.unit
        self.x0 = fr.x0
        note = (f'<span style="color:{COLORS["muted"]}; font-size:11.5px">Axes: ±(1 + log10(|x|/x0)) beyond '
                f"x0 = {html.escape(format_value(fr.x0, fr.unit))}, linear inside.</span>")
        w.set(self.note, value=note)

    def _set_range(self, scale: bq.LinearScale, axis: bq.Axis, rng: tuple[float, float], x0: float) -> None:
        """The scale's range and the axis's ticks, both from the frame (the ticks never lag the range)."""
        lo, hi = float(rng[0]), float(rng[1])
        self._writer.set(scale, min=lo, max=hi)
        values, labels = _ticks(lo, hi, float(x0))
        self._writer.set(axis, tick_values=values, tick_labels=labels)

    def forget_scales(self) -> None:
        """The browser moved the scales (pan or wheel zoom): the next draw assigns them again."""
        self._writer.forget(self.x_scale)
        self._writer.forget(self.y_scale)
        self._axes_drawn = None

    # -- events ----------------------------------------------------------------------------
    def _hovered(self, role: str, content: dict) -> None:
        point = content.get("point") or content.get("data") or {}
        idx = point.get("index")
        if isinstance(idx, int) and 0 <= idx < len(self._groups[role]):
            self.show_info(role, idx)

    def describe(self, role: str, index: int) -> str:
        """HTML description of one drawn marker: root, ω0 and Q, and the parts that set it.

        Parameters
        ----------
        role : {"pole", "zero", "cancelled"}
        index : int
            Index of the marker in the ``poles``, ``zeros`` or ``cancelled`` mark.
        """
        root, mult = self._groups[role][index]
        sens = self._last[1] if self._last is not None else None
        return _describe(root, mult, role, sens.rows if sens is not None else ())

    def show_info(self, role: str, index: int) -> None:
        """Show the description of one drawn marker (as on hover) in the tooltip and readout."""
        text = self.describe(role, index)
        self.tooltip.value = text
        self.readout.value = text

    # -- read back ---------------------------------------------------------------------------
    def state(self) -> dict:
        """Poles, zeros and cancelled pairs (rad/s, complex, repeated by multiplicity) as drawn now.

        ``poles_rad_s`` and ``zeros_rad_s`` are the reduced transfer function;
        ``cancelled_rad_s`` the diamonds (where a zero and a pole cancel).
        """
        mul = _TWO_PI if self.unit == "Hz" else 1.0
        out = {}
        for key, mark, mult in (("poles_rad_s", self.poles, self.pole_mult),
                                ("zeros_rad_s", self.zeros, self.zero_mult),
                                ("cancelled_rad_s", self.cancelled, self.cancel_mult)):
            re = inverse_signed_log(np.asarray(mark.x, dtype=float), self.x0) * mul
            im = inverse_signed_log(np.asarray(mark.y, dtype=float), self.x0) * mul
            roots = [complex(r, i) for r, i, m in zip(re, im, mult, strict=True) for _ in range(m)]
            out[key] = np.array(roots, dtype=complex)
        out["pz_x_range"] = (float(self.x_scale.min), float(self.x_scale.max))
        out["pz_y_range"] = (float(self.y_scale.min), float(self.y_scale.max))
        out["pz_unit"] = self.unit
        return out
