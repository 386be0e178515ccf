"""The tolerance overlay: envelope bands on the Bode figures and root clouds on the s-plane.

The spread is a seeded Monte Carlo run (:func:`loopcraft.analysis.tolerance.monte_carlo`)
over the design's own ``tolerances`` section or a stock choice. It is not on
the slider path: the explorer refreshes it when the overlay is switched on,
when the design changes, and once a slider has come to rest.

Two steps, so the clouds can never sit in other coordinates than the roots:
:meth:`SpreadOverlay.run` does the Monte Carlo run (bands, and the sample
roots in rad/s), and :func:`spread_frame` maps a run onto the s-plane with the
same :class:`~loopcraft.widgets._state.PlaneState` (unit, ``x0``) the pole-zero
map is drawn with — a pure function the explorer calls in its one update,
also when only the unit changes.
"""

from __future__ import annotations

import html
from dataclasses import dataclass
from typing import Any

import bqplot as bq
import ipywidgets as widgets
import numpy as np

from ..analysis.tolerance import monte_carlo
from ..design import Design
from ..errors import LoopcraftError
from ._pzmap import PoleZeroView, signed_log
from ._state import PlaneState
from ._sync import TraitWriter
from ._theme import COLORS

__all__ = ["SpreadOverlay", "SpreadRun", "SpreadFrame", "spread_frame", "SPREAD_CHOICES", "SPREAD_SAMPLES",
           "CLOUD_SAMPLES"]

#: Overlay choices: label, key. "design" uses the design file's own tolerances section.
SPREAD_CHOICES = (("off", "off"), ("design tolerances", "design"), ("R 1 %, C 5 %", "r1c5"), ("R 5 %, C 10 %", "r5c10"))
_STOCK = {"r1c5": {"R*": "1%", "C*": "5%", "L*": "10%"}, "r5c10": {"R*": "5%", "C*": "10%", "L*": "20%"}}

#: Monte Carlo samples behind the bands, and how many of them draw the root clouds.
SPREAD_SAMPLES = 400
CLOUD_SAMPLES = 120


@dataclass(frozen=True)
class SpreadRun:
    """One Monte Carlo run of the overlay (Hz, dB, degrees; roots in rad/s, origin roots left out).

    Attributes
    ----------
    curve : {"loop", "actual", "exact"}
        The curve the bands surround.
    f_hz : ndarray
        The frequency grid, Hz.
    mag_lo_db, mag_hi_db : ndarray
        The magnitude envelope, dB.
    phase_lo_deg, phase_hi_deg : ndarray
        The phase envelope, degrees.
    pole_roots_rad_s, zero_roots_rad_s : ndarray of complex
        Every non-zero pole and zero of the first :data:`CLOUD_SAMPLES` samples, rad/s.
    note_html : str
        The line shown beside the choice.
    """

    curve: str
    f_hz: np.ndarray
    mag_lo_db: np.ndarray
    mag_hi_db: np.ndarray
    phase_lo_deg: np.ndarray
    phase_hi_deg: np.ndarray
    pole_roots_rad_s: np.ndarray
    zero_roots_rad_s: np.ndarray
    note_html: str


@dataclass(frozen=True)
class SpreadFrame:
    """Everything the overlay draws (Hz, dB, degrees; s-plane in the map's signed-log units)."""

    curve: str
    f_hz: np.ndarray
    mag_lo_db: np.ndarray
    mag_hi_db: np.ndarray
    phase_lo_deg: np.ndarray
    phase_hi_deg: np.ndarray
    pole_x: np.ndarray
    pole_y: np.ndarray
    zero_x: np.ndarray
    zero_y: np.ndarray
    note_html: str


def _tolerances(design: Design, key: str) -> dict[str, Any] | None:
    if key == "design":
        return dict(design.tolerances) if design.tolerances else None
    stock = dict(_STOCK[key])
    names = design.stage.component_names
    return {k: v for k, v in stock.items() if any(n[0] == k[0] for n in names)}


def _cloud_roots(design: Design, spread) -> tuple[np.ndarray, np.ndarray]:
    """Every non-zero pole and zero (rad/s) of the first :data:`CLOUD_SAMPLES` samples of a spread."""
    ev = design.compile()
    n = min(CLOUD_SAMPLES, spread.samples)
    cols = [
        np.asarray(spread.values[name], dtype=float)
        if name in spread.values
        else np.full(spread.samples, design.values[name])
        for name in ev.names
    ]
    poles, zeros = [], []
    for i in range(n):
        tr = ev.evaluate_tuple(tuple(float(c[i]) for c in cols))
        poles.append(tr.poles)
        zeros.append(tr.zeros)

    def joined(roots: list[np.ndarray]) -> np.ndarray:
        r = np.concatenate(roots) if roots else np.zeros(0, dtype=complex)
        return r[r != 0]  # origin roots do not move

    return joined(poles), joined(zeros)


def spread_frame(run: SpreadRun, plane: PlaneState) -> SpreadFrame:
    """Map a Monte Carlo run onto the s-plane as ``plane`` draws it (pure; no widget read).

    Parameters
    ----------
    run : SpreadRun
        Bands (Hz, dB, degrees) and sample roots (rad/s).
    plane : PlaneState
        The unit (Hz or rad/s) and signed-log reference ``x0`` the pole-zero map is drawn with.
    """
    div, x0 = plane.rad_s_per_unit, plane.x0

    def mapped(r: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        return signed_log(r.real / div, x0), signed_log(r.imag / div, x0)

    px, py = mapped(run.pole_roots_rad_s)
    zx, zy = mapped(run.zero_roots_rad_s)
    return SpreadFrame(run.curve, run.f_hz, run.mag_lo_db, run.mag_hi_db, run.phase_lo_deg, run.phase_hi_deg,
                       px, py, zx, zy, run.note_html)


class SpreadOverlay:
    """Bands and clouds added to an explorer's Bode figures and s-plane map.

    Parameters
    ----------
    bode_mag_fig, bode_phase_fig : bqplot.Figure
        The explorer's Bode figures; the bands use their scales.
    mag_scales, phase_scales : dict
        ``{"x": LogScale, "y": LinearScale}`` of each Bode figure.
    pzmap : PoleZeroView
        The s-plane view; the clouds are drawn on its figure and scales (their
        positions come from :func:`spread_frame`, never from the view's widgets).
    """

    def __init__(
        self,
        bode_mag_fig: bq.Figure,
        bode_phase_fig: bq.Figure,
        mag_scales: dict,
        phase_scales: dict,
        pzmap: PoleZeroView,
    ) -> None:
        self.choice = widgets.Dropdown(
            options=SPREAD_CHOICES,
            value="off",
            description="spread",
            style={"description_width": "48px"},
            layout=widgets.Layout(width="210px"),
        )
        self.note = widgets.HTML()
        empty = np.zeros((2, 2))
        # Thin edges keep a narrow band (1 % parts) visible at full-figure scale.
        band = {
            "fill": "between",
            "fill_opacities": [0.22],
            "stroke_width": 1.0,
            "opacities": [0.55, 0.55],
            "visible": False,
            "enable_hover": False,
        }
        self.band_mag = bq.Lines(
            x=np.array([1.0, 10.0]),
            y=empty,
            scales=mag_scales,
            colors=[COLORS["loop"]] * 2,
            fill_colors=[COLORS["loop"]],
            **band,
        )
        self.band_phase = bq.Lines(
            x=np.array([1.0, 10.0]),
            y=empty,
            scales=phase_scales,
            colors=[COLORS["loop"]] * 2,
            fill_colors=[COLORS["loop"]],
            **band,
        )
        sc = {"x": pzmap.x_scale, "y": pzmap.y_scale}
        cloud = {
            "marker": "circle",
            "default_size": 9,
            "opacities": [0.35],
            "visible": False,
            "enable_hover": False,
            "stroke_width": 0.0,
        }
        self.cloud_poles = bq.Scatter(x=np.zeros(0), y=np.zeros(0), scales=sc, colors=[COLORS["pole"]], **cloud)
        self.cloud_zeros = bq.Scatter(x=np.zeros(0), y=np.zeros(0), scales=sc, colors=[COLORS["zero"]], **cloud)
        # Drawn after the curves (the first curve path of each figure stays the exact curve).
        bode_mag_fig.marks = [*bode_mag_fig.marks, self.band_mag]
        bode_phase_fig.marks = [*bode_phase_fig.marks, self.band_phase]
        pzmap.fig.marks = [pzmap.fig.marks[0], self.cloud_zeros, self.cloud_poles, *pzmap.fig.marks[1:]]
        self.box = widgets.HBox([self.choice, self.note], layout=widgets.Layout(align_items="center"))
        self._writer = TraitWriter()
        self.shown: SpreadFrame | None = None
        self._note_html = ""

    @property
    def active(self) -> bool:
        """True when an overlay choice other than "off" is selected (the explorer keeps its own copy)."""
        return self.choice.value != "off"

    def run(self, design: Design, f_hz: np.ndarray, choice: str) -> SpreadRun | None:
        """Run the Monte Carlo spread of ``design`` on the explorer's grid (None when ``choice`` is "off").

        Parameters
        ----------
        design : Design
            The design at the values on screen.
        f_hz : ndarray
            The explorer's frequency grid, Hz.
        choice : str
            The overlay choice (a key of :data:`SPREAD_CHOICES`), from the explorer's state.

        Raises
        ------
        LoopcraftError
            The tolerances do not fit the design (shown beside the choice by the caller).
        """
        if choice == "off":
            return None
        tol = _tolerances(design, choice)
        if not tol:
            raise LoopcraftError("this design has no 'tolerances' section; pick a stock spread instead")
        spread = monte_carlo(design, SPREAD_SAMPLES, seed=1, f_hz=f_hz, tolerances=tol)
        if spread.loop_mag_db is not None:
            curve, mag, ph = "loop", spread.loop_mag_db, spread.loop_phase_deg
        else:
            curve, mag, ph = (
                ("actual" if spread.stage_is_actual else "exact"),
                spread.stage_mag_db,
                spread.stage_phase_deg,
            )
        poles, zeros = _cloud_roots(design, spread)
        parts = ", ".join(
            f"{k} ±{100 * float(v):g} %" if not isinstance(v, str) else f"{k} ±{v.rstrip('%')} %"
            for k, v in tol.items()
        )
        note = (
            f'<span style="color:{COLORS["muted"]}; font-size:12px">band: {html.escape(curve)} curve, '
            f"min…max of {SPREAD_SAMPLES} seeded samples ({html.escape(parts)})</span>"
        )
        return SpreadRun(
            curve, np.asarray(spread.f_hz, dtype=float), mag.min, mag.max, ph.min, ph.max, poles, zeros, note
        )

    def draw(self, fr: SpreadFrame | None, note_html: str = "") -> None:
        """Show a frame, or hide the overlay (None) with ``note_html`` (an error, or "") beside the choice.

        The frame already shown (the same object, the same note) costs nothing: every slider
        move passes the overlay's frame along, and it changes only when the overlay does.
        """
        if fr is self.shown and note_html == self._note_html:
            return
        self._note_html = note_html
        w = self._writer
        if fr is None:
            for mark in (self.band_mag, self.band_phase, self.cloud_poles, self.cloud_zeros):
                w.set(mark, visible=False)
            w.set(self.note, value=note_html)
            self.shown = None
            return
        color = COLORS["loop"] if fr.curve == "loop" else COLORS["actual"] if fr.curve == "actual" else COLORS["ideal"]
        w.set(
            self.band_mag,
            x=fr.f_hz,
            y=np.vstack([fr.mag_lo_db, fr.mag_hi_db]),
            colors=[color] * 2,
            fill_colors=[color],
            visible=True,
        )
        w.set(
            self.band_phase,
            x=fr.f_hz,
            y=np.vstack([fr.phase_lo_deg, fr.phase_hi_deg]),
            colors=[color] * 2,
            fill_colors=[color],
            visible=True,
        )
        w.set(self.cloud_poles, x=fr.pole_x, y=fr.pole_y, visible=bool(fr.pole_x.size))
        w.set(self.cloud_zeros, x=fr.zero_x, y=fr.zero_y, visible=bool(fr.zero_x.size))
        w.set(self.note, value=fr.note_html)
        self.shown = fr

    def state(self) -> dict[str, Any] | None:
        """The overlay data on the marks (None when hidden), for :meth:`Explorer.view_state`."""
        if not self.band_mag.visible:
            return None
        mag = np.asarray(self.band_mag.y, dtype=float)
        ph = np.asarray(self.band_phase.y, dtype=float)
        return {
            "curve": self.shown.curve if self.shown else None,
            "f_hz": np.asarray(self.band_mag.x, dtype=float),
            "mag_lo_db": mag[0],
            "mag_hi_db": mag[1],
            "phase_lo_deg": ph[0],
            "phase_hi_deg": ph[1],
            "pole_cloud": (np.asarray(self.cloud_poles.x, dtype=float), np.asarray(self.cloud_poles.y, dtype=float)),
            "zero_cloud": (np.asarray(self.cloud_zeros.x, dtype=float), np.asarray(self.cloud_zeros.y, dtype=float)),
        }
