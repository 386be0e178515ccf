"""The stage explorer: one widget to pick a stage, drag its parts and watch every view follow.

Data flow is one way. Each component slider (SI base units) feeds a single
observer, :meth:`Explorer._on_slider`, which

1. evaluates the design on the compiled fast path
   (:meth:`loopcraft.analysis.Analyzer.update`: no derivation, no sympy),
   plus the cheap compiled sensitivities for the drag highlight;
2. computes every view's data (Bode curves, annotations, pole-zero markers,
   corner table) without touching a widget;
3. assigns it, each mark inside its own ``hold_sync()``, so each mark gets one
   update message;
4. rewrites the moved part's entry and readout under a guard (no echo).

The explorer holds one :class:`~loopcraft.widgets._state.ViewState`: the
values on screen, the s-plane's unit, zoom mode and axis ranges, and the
overlay choice. The views compute their frames as pure functions of that
state and the analysis — the pole-zero map and the tolerance clouds from the
same :class:`~loopcraft.widgets._state.PlaneState`, so they share one unit and
one signed-log reference — and never read their own widgets back. Every input
(a slider, the unit or zoom toggle, a pan in the browser, the overlay choice,
the overlay's refresh) goes through the one update, :meth:`Explorer._redraw`,
which commits the new state only once its frames are drawn.

If step 1 or 2 fails the error is shown and nothing on screen changes; if
step 3 fails the last good frames are drawn again. A new design or new
sections are installed all or nothing: when the first redraw fails, the
previous design and its controls are put back and the error is raised to the
field that asked for the change, which shows it. The frequency grid is fixed
per design (re-derived on topology, design, op-amp or plant change only), so
the axes do not jump while sliders move.
"""

from __future__ import annotations

import asyncio
import html
import math
import os
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path
from typing import Any

import ipywidgets as widgets
import numpy as np

from ..analysis.amplifier import AmplifierLoop
from ..analysis.analyzer import Analysis, Analyzer
from ..analysis.sensitivity import Sensitivity, sensitivity
from ..design import Design, load
from ..errors import AnalysisError, ComponentValueError, LoopcraftError, TopologyError
from ..model.opamp import OpAmp
from ..model.plant import Plant
from ..topologies import TOPOLOGIES, topology
from ._axes import view_grid_hz
from ._bode import BodeView
from ._controls import ComponentPanel, SnapLogSlider, failure_text
from ._fields import ErrorNote
from ._formula import FormulaView
from ._panels import OpAmpPanel, PlantPanel
from ._pzmap import PoleZeroView, plane_for
from ._sources import FileLoader, NetworkForm
from ._spread import SpreadFrame, SpreadOverlay, SpreadRun, spread_frame
from ._state import PlaneState, ViewState
from ._theme import COLORS, CSS_CLASS, FONT_STACK

__all__ = ["Explorer", "OWN_NETWORK", "LOADED_DESIGN", "SETTLE_S"]

#: Seconds a slider must rest before the op-amp loop annotation is refreshed (in a kernel).
SETTLE_S = 0.25

#: Picker entries besides the library keys.
OWN_NETWORK = "__own__"
LOADED_DESIGN = "__loaded__"


def _analyzer(design: Design) -> Analyzer:
    """The Analyzer of a design on the explorer's own fixed grid (see :func:`loopcraft.widgets._axes.view_band_hz`)."""
    probe = Analyzer(design, f_hz=np.array([1.0, 10.0])).update(design.values)
    extra: list[float] = []
    if design.opamp is not None and not design.opamp.is_ideal:
        extra.append(design.opamp.gbw_hz)
        amp = probe.actual.amplifier_loop if probe.actual is not None else None
        if amp is not None and amp.crossover_hz is not None:
            extra.append(amp.crossover_hz)
    if probe.loop is not None:
        extra += [c.f_hz for c in probe.loop.margins.crossovers]
    plant = design.plant.factored() if design.plant is not None else None
    return Analyzer(design, f_hz=view_grid_hz(probe.factored, plant, tuple(extra)))


def _resolve(source: Design | str | os.PathLike[str]) -> tuple[Design, str]:
    """A design and its picker key from a Design, a topology key or a design-file path."""
    if isinstance(source, Design):
        return source, LOADED_DESIGN
    if isinstance(source, str) and source in TOPOLOGIES:
        return topology(source).design(), source
    if isinstance(source, str | os.PathLike):
        p = Path(source)
        if p.suffix.lower() == ".json" or p.exists():
            return load(p), LOADED_DESIGN
        raise TopologyError(
            f"{str(source)!r} is neither a library topology (known: {', '.join(TOPOLOGIES)}) "
            "nor an existing design file"
        )
    raise TopologyError(
        f"Explorer needs a Design, a topology key or a design-file path (got {type(source).__name__} {source!r})"
    )


class Explorer(widgets.VBox):
    """Interactive explorer of an op-amp stage: sliders, Bode, pole-zero map, formulas, loop margins.

    Parameters
    ----------
    source : Design, str or path-like
        A :class:`~loopcraft.design.Design`, a library topology key
        (``"type3"``; see :data:`loopcraft.TOPOLOGIES`) or the path of a
        design file.

    Attributes
    ----------
    sliders : mapping of str to ipywidgets.FloatLogSlider
        One slider per component; ``.value`` is in SI base units (Ω, F, H).
        Setting it from Python updates every view.
    picker : ipywidgets.Dropdown
        The topology picker (library keys, "my own network", "loaded design").
    bode : BodeView
        ``bode.mag_fig`` (class ``lc-bode-mag``), ``bode.phase_fig`` (``lc-bode-phase``).
    pzmap : PoleZeroView
        ``pzmap.fig`` (class ``lc-pzmap``).
    formula : FormulaView
    opamp_panel : OpAmpPanel
    plant_panel : PlantPanel
    network_form : NetworkForm
    file_loader : FileLoader
    status : ErrorNote
        Errors of the last update (e.g. a stage that degenerates at these values).

    Raises
    ------
    TopologyError
        ``source`` is neither a Design, a library key nor a design file.
    DesignFileError
        The design file does not load.

    Examples
    --------
    >>> import loopcraft
    >>> ex = loopcraft.Explorer("type3")          # doctest: +SKIP
    >>> ex.sliders["R2"].value = 33e3             # doctest: +SKIP
    >>> ex.view_state()["poles_rad_s"]            # doctest: +SKIP
    """

    def __init__(self, source: Design | str | os.PathLike[str] = "type3", **kwargs: Any) -> None:
        design, key = _resolve(source)
        super().__init__(**kwargs)
        self.add_class(CSS_CLASS["root"])
        self.layout.padding = "10px 12px"
        self.layout.border = f"1px solid {COLORS['grid']}"
        self.layout.width = "100%"
        self._loaded: Design | None = design if key == LOADED_DESIGN else None
        self._series = "off"
        self._batch_depth = 0
        self._pending: str | None | bool = False
        self._dragged: str | None = None
        self._quiet = False
        self._analysis: Analysis | None = None
        self._amp_shown: AmplifierLoop | None = None
        self._amp_stale = False
        self._settle_handle: asyncio.TimerHandle | None = None
        self._installed = False  # True once a design is on screen (a failed switch can return to it)
        self._last_frames: tuple | None = None  # (analyzer, frames) of the last good draw
        self._state = ViewState()  # the one view state; committed by _redraw after a good draw
        self._drawing = False  # True while frames are assigned (scale changes then are our own)
        self._spread_run: SpreadRun | None = None  # the overlay's last Monte Carlo run
        self._spread_note = ""  # why there is no run (an error), or ""
        self._cloud_memo: tuple[SpreadRun, str, float, SpreadFrame] | None = None

        self.title = widgets.HTML()
        options = [(t.title, k) for k, t in TOPOLOGIES.items()]
        options += [("my own network …", OWN_NETWORK), ("loaded design", LOADED_DESIGN)]
        self.picker = widgets.Dropdown(options=options, value=key, description="stage",
                                       style={"description_width": "40px"}, layout=widgets.Layout(width="330px"))
        self.picker.add_class(CSS_CLASS["picker"])
        self.description = widgets.HTML()
        self.network_form = NetworkForm(self._use_own_network)
        self.file_loader = FileLoader(self._use_loaded)
        self.source_box = widgets.VBox(layout=widgets.Layout(display="none", margin="4px 0 6px 0",
                                                             padding="6px 10px",
                                                             border=f"1px solid {COLORS['grid']}"))
        self.bode = BodeView()
        self.pzmap = PoleZeroView()
        self.formula = FormulaView()
        self.spread = SpreadOverlay(self.bode.mag_fig, self.bode.phase_fig,
                                    {"x": self.bode.x_scale, "y": self.bode.mag_scale},
                                    {"x": self.bode.x_scale, "y": self.bode.phase_scale}, self.pzmap)
        self._spread_stale = False
        self.opamp_panel = OpAmpPanel(design.opamp, self._use_opamp)
        self.plant_panel = PlantPanel(design.plant, design.feedback_gain, self._use_plant)
        self.sections = widgets.Accordion(children=[self.opamp_panel.box, self.plant_panel.box],
                                          titles=("Op-amp", "Plant & feedback"), selected_index=None)
        self.status = ErrorNote()
        self.status.widget.add_class(CSS_CLASS["status"])
        self.components_box = widgets.VBox(layout=widgets.Layout(width="100%"))

        header = widgets.HBox([self.title, self.picker],
                              layout=widgets.Layout(justify_content="space-between", align_items="center",
                                                    width="100%"))
        # Two columns: the controls and the s-plane (narrow) beside the Bode figures and formulas.
        gap = widgets.Layout(height="12px")
        left = widgets.VBox([self.components_box, self.sections, widgets.Box(layout=gap), self.pzmap.box],
                            layout=widgets.Layout(flex="0 0 390px", width="390px", margin="0 16px 0 0"))
        right = widgets.VBox([self.bode.box, self.spread.box, widgets.Box(layout=gap), self.formula.box],
                             layout=widgets.Layout(flex="1 1 auto", min_width="0"))
        style = widgets.HTML(
            f"<style>.{CSS_CLASS['root']} {{ font-family: {FONT_STACK}; }}"
            f".{CSS_CLASS['root']} code {{ font-size: 12px; background: {COLORS['panel_bg']}; padding: 0 3px; "
            "border-radius: 2px; }</style>")
        self.children = [style, header, self.description, self.source_box, self.status.widget,
                         widgets.HBox([left, right], layout=widgets.Layout(width="100%"))]
        self.picker.observe(self._on_pick, names="value")
        self.spread.choice.observe(self._on_spread_choice, names="value")
        self.pzmap.units.observe(self._on_units, names="value")
        self.pzmap.zoom.observe(self._on_zoom, names="value")
        for scale in (self.pzmap.x_scale, self.pzmap.y_scale):
            scale.observe(self._on_pan, names=["min", "max"])
        self._set_design(design, key)

    # ------------------------------------------------------------------ public state
    @property
    def sliders(self) -> Mapping[str, SnapLogSlider]:
        """Read-only map of component name to slider (values in Ω, F, H)."""
        return self._panel.sliders

    @property
    def design(self) -> Design:
        """The current design: topology, sections and the slider values.

        Values left where they were keep their text as written (``"4k7"``);
        moved ones are numbers in SI base units.
        """
        base = self._base
        moved = {n: v for n, v in self._panel.values().items() if v != base.values[n]}
        return base.with_values(moved) if moved else base

    @property
    def analysis(self) -> Analysis:
        """The analysis on screen (the last good one).

        Raises
        ------
        AnalysisError
            Nothing could be analysed yet (the status line says why).
        """
        if self._analysis is None:
            raise AnalysisError(f"nothing analysed yet: {self.status.message or 'no update has run'}")
        return self._analysis

    @property
    def state(self) -> ViewState:
        """The view state on screen: values (SI), the s-plane's unit, zoom and ranges, the overlay choice."""
        return self._state

    @property
    def f_hz(self) -> np.ndarray:
        """The fixed frequency grid of the current design, Hz."""
        return self._analyzer.f_hz

    def view_state(self) -> dict[str, Any]:
        """The data shown now, read back from the marks and widgets (plain Python / numpy).

        Returns
        -------
        dict
            ``f_hz`` (Hz), ``exact_mag_db`` (dB), ``exact_phase_deg`` (°),
            ``asymptote_mag_db``, ``asymptote_phase_deg``, ``poles_rad_s`` and
            ``zeros_rad_s`` (complex, rad/s, repeated by multiplicity); with an
            op-amp ``actual_mag_db``, ``actual_phase_deg`` and
            ``amplifier_crossover_hz``; with a plant ``loop_mag_db``,
            ``loop_phase_deg`` and ``loop_margins`` (``{"crossovers": [{"f_hz",
            "phase_margin_deg"}], "gain_margins": [{"f_hz", "gain_margin_db"}]}``);
            also ``values`` (SI base units), ``highlighted`` (corner labels) and
            axis ranges.
        """
        out = self.bode.state()
        out.update(self.pzmap.state())
        out["values"] = self._panel.values()
        out["highlighted"] = tuple(sorted(self.formula.highlighted))
        out["dragged"] = self._dragged
        out["spread"] = self.spread.state()
        return out

    def select(self, key: str) -> None:
        """Switch to a library topology (as the picker does)."""
        self.picker.value = topology(key).key

    # ------------------------------------------------------------------ design changes
    def _set_design(self, design: Design, key: str) -> None:
        """Install a design: controls, analyzer (grid), symbolic panels; then draw once. All or nothing.

        Raises
        ------
        LoopcraftError
            The design cannot be analysed or drawn. The previous design, its controls and its
            curves are then back on screen as they were (the first design of an explorer has
            none: the error simply propagates).
        """
        try:
            analyzer = _analyzer(design)
            first = analyzer.update(design.values)
            design.derivation  # noqa: B018 - derive (cached) now, so a failure comes before any change
            panel = ComponentPanel(design.values, self._on_snap, series=self._series)
        except LoopcraftError:
            raise
        except Exception as err:  # a numeric failure the model did not foresee
            raise AnalysisError(f"cannot analyse this design: {failure_text(err)}") from err
        previous = ((self._base, self._key, self._analyzer, self._first, self._panel, self._state),
                    (self._spread_run, self._spread_note)) if self._installed else None
        for c in panel.controls.values():
            c.slider.observe(self._on_slider, names="value")
        old = self._state.plane
        # A new design: a new signed-log reference, the ranges fitted afresh; unit and zoom stay.
        state = replace(self._state, values=dict(design.values), plane=plane_for(first, old.unit, old.zoom))
        try:
            self._install(design, key, analyzer, first, panel, state)
            self._run_spread()
            failure = self._redraw(None)
        except Exception as err:  # the views could not take the new design
            failure = failure_text(err)
        if failure is None:
            if previous is not None:
                previous[0][4].close()
            self._installed = True
            return
        if previous is not None:  # put the last good design back, as it was
            self._install(*previous[0])
            self._spread_run, self._spread_note = previous[1]
            self._redraw(None)
        panel.close()
        raise AnalysisError(failure)

    def _install(self, design: Design, key: str, analyzer: Analyzer, first: Analysis, panel: ComponentPanel,
                 state: ViewState) -> None:
        """Put a design's pieces and its view state in place (no drawing); the replaced panel stays open."""
        self._base = design
        self._analyzer = analyzer
        self._first = first
        self._panel = panel
        self._state = state
        self._slider_names = {id(c.slider): n for n, c in panel.controls.items()}
        self.components_box.children = [panel.box]
        self.formula.set_design(design.derivation, first.transfer)
        self.bode.set_grid(analyzer.f_hz)
        self._dragged = None
        self._key = key
        self._show_header(design, key)
        self._set_picker(key)

    def _show_header(self, design: Design, key: str) -> None:
        t = TOPOLOGIES.get(key)
        name = t.title if t is not None else (design.title or "Loaded design")
        self.title.value = (f'<div style="font-size:17px; font-weight:650; color:{COLORS["text"]}">'
                            f'{html.escape(name)}</div>')
        kind = {"inverting": "H = −Zf/Zi", "noninverting": "H = 1 + Zf/Zg", "circuit": "circuit by nodal analysis"}
        st = design.stage.to_dict()
        nets = ""
        if st["kind"] == "inverting":
            nets = f"Zi = <code>{html.escape(st['input'])}</code>, Zf = <code>{html.escape(st['feedback'])}</code>"
        elif st["kind"] == "noninverting":
            nets = f"Zg = <code>{html.escape(st['ground'])}</code>, Zf = <code>{html.escape(st['feedback'])}</code>"
        text = t.description if t is not None else (design.notes or "")
        scen = f" <i>Demo values: {html.escape(t.scenario)}.</i>" if t is not None else ""
        self.description.value = (
            f'<div style="font-size:12.5px; color:{COLORS["muted"]}; margin:0 0 6px 0">'
            f"{html.escape(st['kind'])} stage, {kind.get(st['kind'], '')}{'; ' + nets if nets else ''}. "
            f"{html.escape(text)}{scen}</div>")

    def _set_picker(self, key: str) -> None:
        self._quiet = True
        try:
            self.picker.value = key
        finally:
            self._quiet = False
        self._show_source(key)

    def _show_source(self, key: str) -> None:
        if key == OWN_NETWORK:
            self.source_box.children = [self.network_form.box]
            self.source_box.layout.display = None
        elif key == LOADED_DESIGN:
            self.source_box.children = [self.file_loader.box]
            self.source_box.layout.display = None
        else:
            self.source_box.layout.display = "none"

    def _on_pick(self, change) -> None:
        if self._quiet:
            return
        key = change["new"]
        if key == OWN_NETWORK:
            self.network_form.set_stage(self._base.stage.to_dict())
            self._show_source(key)
            return
        if key == LOADED_DESIGN:
            self._show_source(key)
            if self._loaded is not None:
                try:
                    self._set_design(self._loaded, LOADED_DESIGN)
                except LoopcraftError as err:
                    self.status.show(f"cannot show the loaded design with the current settings: {err}")
                    self._set_picker(self._key)
            return
        try:
            self._set_design(self._with_current_sections(topology(key).design()), key)
        except LoopcraftError as err:
            self.status.show(f"cannot show {key!r} with the current op-amp and plant: {err}")
            self._set_picker(self._key)

    def _with_current_sections(self, design: Design) -> Design:
        return design.with_sections(opamp=self.opamp_panel.current, plant=self.plant_panel.current,
                                    feedback_gain=self.plant_panel.feedback_gain)

    def _use_own_network(self, design: Design) -> None:
        self._set_design(self._with_current_sections(design), OWN_NETWORK)

    def _use_loaded(self, design: Design) -> None:
        self._set_design(design, LOADED_DESIGN)  # raises before changing anything if it cannot analyse
        self._loaded = design
        self.opamp_panel.set_opamp(design.opamp)
        self.plant_panel.set_plant(design.plant, design.feedback_gain)

    def _use_opamp(self, opamp: OpAmp | None) -> None:
        self._rebuild(self._base.with_sections(opamp=opamp))

    def _use_plant(self, plant: Plant | None, feedback_gain: float) -> None:
        self._rebuild(self._base.with_sections(plant=plant, feedback_gain=feedback_gain))

    def _rebuild(self, base: Design) -> None:
        """New sections: rebuild the Analyzer (and its grid) at the current values, then redraw.

        Raises
        ------
        LoopcraftError
            The sections cannot be analysed or drawn; the previous ones stay in force and on
            screen (the panel that asked shows the error beside its field).
        """
        moved = {n: v for n, v in self._panel.values().items() if v != base.values[n]}
        current = base.with_values(moved) if moved else base
        try:
            analyzer = _analyzer(current)
        except Exception as err:  # a LoopcraftError, or a numeric failure the model did not foresee
            raise AnalysisError(f"cannot analyse with these settings: {failure_text(err)}") from err
        old_base, old_analyzer = self._base, self._analyzer
        self._base = base
        self._analyzer = analyzer
        self.bode.set_grid(analyzer.f_hz)
        self._amp_shown = None  # new sections: annotate the op-amp loop afresh
        failure = self._redraw(self._dragged, moved=False)
        if failure is not None:  # put the last good sections back, as they were
            self._base, self._analyzer = old_base, old_analyzer
            self.bode.set_grid(old_analyzer.f_hz)
            self._amp_shown = None
            self._redraw(self._dragged, moved=False)
            raise AnalysisError(f"cannot use these settings: {failure}")
        self._refresh_spread()

    # ------------------------------------------------------------------ the one observer
    def _on_slider(self, change) -> None:
        if change["old"] == change["new"]:
            return  # the browser's grid rounding, undone by the slider's validator
        name = self._slider_names[id(change["owner"])]
        if self._batch_depth:
            self._pending = name
            return
        self._dragged = name
        ctl = self._panel.controls[name]
        failure = self._redraw(name)
        ctl.show_value()
        if failure is not None:
            ctl.error.show(failure)

    @contextmanager
    def _batched(self) -> Iterator[None]:
        """Move several sliders, redraw once at the end."""
        self._batch_depth += 1
        try:
            yield
        finally:
            self._batch_depth -= 1
            if not self._batch_depth and self._pending is not False:
                self._pending = False
                self._redraw(self._dragged)
                for c in self._panel.controls.values():
                    c.show_value()

    def set_values(self, values: Mapping[str, float]) -> None:
        """Set several component values (SI base units) and redraw once.

        A value that is not finite and > 0 is refused: its part keeps its value and the error
        is shown beside it; the other parts move.

        Raises
        ------
        ComponentValueError
            A designator the stage does not have (nothing moves then).
        """
        controls = self._panel.controls
        unknown = [n for n in values if n not in controls]
        if unknown:
            raise ComponentValueError(f"no element named {unknown[0]!r} in this stage "
                                      f"(elements: {', '.join(controls)})")
        refused: dict[str, str] = {}
        with self._batched():
            for name, v in values.items():
                if not controls[name].set_value(v):
                    refused[name] = controls[name].error.message
        for name, message in refused.items():  # the redraw at the end of the batch clears the notes
            controls[name].error.show(message)

    def _on_snap(self, series: str) -> None:
        self._series = series
        with self._batched():
            for c in self._panel.controls.values():
                c.set_series(series)

    def _amplifier_loop(self, a: Analysis, dragged: str | None) -> AmplifierLoop | None:
        """The op-amp loop to annotate: fresh, or while a slider moves in a kernel, the last one.

        The op-amp's own loop (its crossover and margins) is found by root
        searches that cost more than the rest of a move together, so during a
        drag in a running event loop it is refreshed once the slider has rested
        for :data:`SETTLE_S` seconds (:meth:`settle`). Without an event loop
        (scripts, tests) it is computed at once.
        """
        if a.actual is None:
            self._amp_shown = None
            return None
        if dragged is None or self._amp_shown is None:
            return self._fresh_amp(a)
        try:
            loop = asyncio.get_running_loop()
        except RuntimeError:  # no event loop: plain Python, compute now
            return self._fresh_amp(a)
        if self._settle_handle is not None:
            self._settle_handle.cancel()
        self._settle_handle = loop.call_later(SETTLE_S, self.settle)
        self._amp_stale = True
        return self._amp_shown

    def _fresh_amp(self, a: Analysis) -> AmplifierLoop | None:
        self._amp_shown = a.actual.amplifier_loop if a.actual is not None else None
        self._amp_stale = False
        return self._amp_shown

    def settle(self) -> None:
        """Bring the slow views (op-amp loop crossover, tolerance overlay) up to date with the screen."""
        self._settle_handle = None
        if self._spread_stale:
            self._refresh_spread()
        a = self._analysis
        if a is None or not self._amp_stale:
            return
        try:
            frame = self.bode.frame(a, self._fresh_amp(a))
        except Exception as err:  # the annotation stays as it was; say why
            self.status.show(f"cannot annotate the op-amp loop: {failure_text(err)}")
            return
        with self.bode.mag_fig.hold_sync():
            self.bode.draw(frame)
        last = self._last_frames
        if last is not None and last[0] is self._analyzer and last[1][2][0] is a:
            self._last_frames = (last[0], (frame, *last[1][1:]))  # a later redraw reuses what is shown

    # ------------------------------------------------------------------ the tolerance overlay
    def _run_spread(self) -> None:
        """The overlay's Monte Carlo run at the current design and values, for the state's choice (or none)."""
        choice = self._state.spread
        run, note = None, ""
        if choice != "off":
            try:
                run = self.spread.run(self.design, self.f_hz, choice)
            except Exception as err:  # a LoopcraftError, or a numeric failure inside the Monte Carlo run
                note = (f'<span style="color:{COLORS["error"]}; font-size:12px">'
                        f"{html.escape(failure_text(err))}</span>")
        self._spread_run, self._spread_note = run, note

    def _cloud_frame(self, plane: PlaneState) -> SpreadFrame | None:
        """The overlay's frame on ``plane`` (remembered per run, unit and x0: a slider move maps nothing)."""
        run = self._spread_run
        if run is None:
            return None
        memo = self._cloud_memo
        if memo is not None and memo[0] is run and memo[1] == plane.unit and memo[2] == plane.x0:
            return memo[3]
        fr = spread_frame(run, plane)
        self._cloud_memo = (run, plane.unit, plane.x0, fr)
        return fr

    def _refresh_spread(self) -> None:
        """Recompute the tolerance overlay at the current values, then the one update draws it (not per move)."""
        self._spread_stale = False
        self._run_spread()
        self._redraw(self._dragged, moved=False, reuse=True)

    def _on_spread_choice(self, change) -> None:
        self._state = replace(self._state, spread=change["new"])
        self._refresh_spread()

    def _spread_after_move(self) -> None:
        """A slider moved: refresh the overlay now (no event loop) or once the slider rests."""
        if self._state.spread == "off":
            return
        try:
            loop = asyncio.get_running_loop()
        except RuntimeError:
            self._refresh_spread()
            return
        self._spread_stale = True
        if self._settle_handle is not None:
            self._settle_handle.cancel()
        self._settle_handle = loop.call_later(SETTLE_S, self.settle)

    def _sensitivity(self, values: Mapping[str, float]) -> Sensitivity | None:
        try:
            # The derivation is cached per stage, so the design itself is the cheap handle.
            return sensitivity(self._base, values)
        except Exception as err:  # optional: the views work without it (e.g. a zero of infinite Q)
            self.status.show(f"sensitivities unavailable at these values: {failure_text(err)}")
            return None

    def _redraw(self, dragged: str | None, *, plane: PlaneState | None = None, moved: bool | None = None,
                reuse: bool = False) -> str | None:
        """The one update: frames computed from the state, all mark data assigned, the state committed.

        Parameters
        ----------
        dragged : str or None
            The part whose corners are highlighted (the last one moved).
        plane : PlaneState, optional
            A new s-plane state (unit, zoom, ranges) to show; default the current one.
        moved : bool, optional
            A slider has just moved (default: ``dragged`` is not None): the op-amp loop
            annotation and the overlay may then wait until the slider rests.
        reuse : bool
            Only the plane or the overlay changed: reuse the analysis, Bode and formula
            frames on screen instead of analysing again (when there are any).

        Returns
        -------
        str or None
            The error message when the update failed (it is shown; the screen
            and the state keep the last good ones), else None.
        """
        state = self._state
        plane = state.plane if plane is None else plane
        if moved is None:
            moved = dragged is not None
        last = self._last_frames
        try:
            if reuse and last is not None and last[0] is self._analyzer:
                bode, _pz, (a, sens), table, hl, _cloud = last[1]
                values = state.values
            else:
                values = self._panel.values()
                a = self._analyzer.update(values)
                bode = self.bode.frame(a, self._amplifier_loop(a, dragged if moved else None))
                sens = self._sensitivity(values)
                table, hl = self.formula.frame(a.transfer, sens, dragged)
            pz = self.pzmap.frame(a, sens, plane)
            cloud = self._cloud_frame(plane)
        except Exception as err:  # a LoopcraftError, or a numeric failure the model did not foresee
            msg = f"cannot analyse at these values: {failure_text(err)}"
            self.status.show(msg)
            return msg
        frames = (bode, pz, (a, sens), table, hl, cloud)
        try:
            self._draw(frames)
        except Exception as err:  # a mark refused its data: put the last good frames back
            msg = f"cannot draw at these values: {failure_text(err)}"
            if last is not None and last[0] is self._analyzer:
                try:
                    self._draw(last[1])
                except Exception:  # the caller rolls back and redraws from scratch
                    pass
            self.status.show(msg)
            return msg
        self._last_frames = (self._analyzer, frames)
        self._analysis = a
        self._state = ViewState(values, plane.with_ranges(pz.x_range, pz.y_range), state.spread)
        if sens is not None:
            self.status.clear()
        if moved:
            self._spread_after_move()
        return None

    def _draw(self, frames: tuple) -> None:
        """Assign computed frames to the marks, one ``hold_sync()`` per figure."""
        bode, pz, source, table, hl, cloud = frames
        self._drawing = True
        try:
            with self.bode.mag_fig.hold_sync(), self.bode.phase_fig.hold_sync(), self.pzmap.fig.hold_sync():
                self.bode.draw(bode)
                self.pzmap.draw(pz, source)
                self.spread.draw(cloud, self._spread_note)
                self.formula.draw(table, hl)
        finally:
            self._drawing = False

    # ------------------------------------------------------------------ s-plane inputs
    def _on_units(self, change) -> None:
        """The unit toggle: the map and the clouds are drawn again in the new unit, in one update."""
        if self._quiet:
            return
        failure = self._redraw(self._dragged, plane=self._state.plane.with_unit(change["new"]),
                               moved=False, reuse=True)
        if failure is not None:
            self._set_quietly(self.pzmap.units, change["old"])

    def _on_zoom(self, change) -> None:
        """The zoom toggle: "auto" fits the roots again, "manual" keeps the ranges and lets the browser pan."""
        if self._quiet:
            return
        failure = self._redraw(self._dragged, plane=self._state.plane.with_zoom(change["new"]),
                               moved=False, reuse=True)
        if failure is not None:
            self._set_quietly(self.pzmap.zoom, change["old"])

    def _on_pan(self, change) -> None:
        """The browser panned or zoomed the s-plane (manual zoom): its new range enters the state.

        The range is the event's payload (the scale as the browser left it). The ticks
        follow in the one update; changes the explorer makes itself are ignored.
        """
        plane = self._state.plane
        if self._drawing or plane.zoom != "manual" or plane.x_range is None or plane.y_range is None:
            return
        scale = change["owner"]
        lo, hi = scale.min, scale.max
        if lo is None or hi is None or not (math.isfinite(lo) and math.isfinite(hi) and lo < hi):
            return
        rng = (float(lo), float(hi))
        if scale is self.pzmap.x_scale:
            new = plane.with_ranges(rng, plane.y_range)
        else:
            new = plane.with_ranges(plane.x_range, rng)
        if new is plane:
            return
        self.pzmap.forget_scales()  # the browser moved them: what the writer last set is stale
        self._redraw(self._dragged, plane=new, moved=False, reuse=True)

    def _set_quietly(self, toggle: widgets.ToggleButtons, value: str) -> None:
        self._quiet = True
        try:
            toggle.value = value
        finally:
            self._quiet = False
