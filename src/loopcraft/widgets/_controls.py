"""One control row per component: log slider, engineering-notation entry, E-series snap, readout.

The slider is the single source of truth for a component's value (SI base
units: ohms, farads, henries). Typing in the entry parses the text with
:func:`~loopcraft.model.values.parse_value` and moves the slider; the explorer's one
observer on the slider then redraws everything and calls
:meth:`ComponentControl.show_value`, which rewrites the entry under a guard so
the entry and the slider never bounce updates back and forth.

Slider ranges span about two decades either side of the value, rounded out to
whole decades and clipped to what is plausible for the part's kind
(:data:`PLAUSIBLE_DECADES`). With an E-series chosen the slider's validator
snaps every value to the nearest standard value (IEC 60063, via
:func:`loopcraft.parts.eseries.nearest`) and its key step becomes one series step.
"""

from __future__ import annotations

import html
import math
import re
from collections.abc import Callable, Mapping
from contextlib import contextmanager
from types import MappingProxyType

import ipywidgets as widgets
from traitlets import Unicode, validate

from ..errors import ComponentValueError, LoopcraftError
from ..model.values import format_value, parse_value, unit_for
from ..parts.eseries import nearest, neighbours, series_of
from ..symbolic.symbols import element_kind
from ._fields import ErrorNote
from ._theme import COLORS, CSS_CLASS

__all__ = [
    "SNAP_CHOICES",
    "PLAUSIBLE_DECADES",
    "SPAN_DECADES",
    "SnapLogSlider",
    "ComponentControl",
    "ComponentPanel",
    "slider_exponents",
    "compact_text",
    "component_order",
    "failure_text",
]

#: Choices of the snap dropdown ("off" or an E-series name).
SNAP_CHOICES: tuple[str, ...] = ("off", "E6", "E12", "E24", "E48", "E96")

#: Plausible value range per element kind, as (min, max) decade exponents of the base unit:
#: 1 Ω .. 100 MΩ, 0.1 pF .. 10 mF, 1 nH .. 10 H.
PLAUSIBLE_DECADES: Mapping[str, tuple[int, int]] = MappingProxyType({
    "resistor": (0, 8),
    "capacitor": (-13, -2),
    "inductor": (-9, 1),
})

#: Decades of slider travel either side of the value (before rounding out and clipping).
SPAN_DECADES = 2

#: Key step of the slider exponent without snapping, decades.
FREE_STEP_DECADES = 0.02

_SERIES_STEPS = {"E6": 6, "E12": 12, "E24": 24, "E48": 48, "E96": 96}


def slider_exponents(value: float, kind: str) -> tuple[float, float]:
    """Slider range (decade exponents of the base unit) for a value.

    Parameters
    ----------
    value : float
        The component value in SI base units (Ω, F or H), > 0.
    kind : {"resistor", "capacitor", "inductor"}

    Returns
    -------
    (lo, hi) : tuple of float
        Whole-decade exponents about :data:`SPAN_DECADES` either side of the
        value, clipped to :data:`PLAUSIBLE_DECADES` but always containing the value.
    """
    e = math.log10(value)
    lo = math.floor(e + 1e-9) - SPAN_DECADES
    hi = math.ceil(e - 1e-9) + SPAN_DECADES
    p_lo, p_hi = PLAUSIBLE_DECADES[kind]
    lo, hi = max(lo, p_lo), min(hi, p_hi)
    # A value outside the plausible range (from a design file) still gets a slider around it.
    lo = min(lo, math.floor(e + 1e-9))
    hi = max(hi, math.ceil(e - 1e-9))
    if hi - lo < 1:
        hi = lo + 1
    return float(lo), float(hi)


def compact_text(value: float) -> str:
    """Engineering text without unit or space, e.g. ``"4.7k"``, ``"3.3n"``, ``"470"``.

    Parameters
    ----------
    value : float
        A value in SI base units.

    Returns
    -------
    str
        Text that :func:`~loopcraft.model.values.parse_value` reads back to ``value``
        within four significant digits.
    """
    return format_value(value, "", digits=4).replace(" ", "")


def failure_text(err: BaseException) -> str:
    """The message to show beside a field for an error caught at a widget boundary.

    A :class:`~loopcraft.errors.LoopcraftError` already says what, where and what was
    expected, so its own text is used. Any other error (an overflow, a recursion limit, a
    division by zero the model did not foresee) is named by its kind and text, so the user
    sees it beside the field instead of a traceback in the kernel log.

    Parameters
    ----------
    err : BaseException

    Returns
    -------
    str
    """
    if isinstance(err, LoopcraftError):
        return str(err)
    args = getattr(err, "args", ())
    # OverflowError(34, 'Numerical result out of range') and the like: the text, not the tuple.
    detail = args[1] if len(args) == 2 and isinstance(args[0], int) and isinstance(args[1], str) else str(err)
    return f"cannot use this input ({type(err).__name__}: {detail or 'no detail'})"


def component_order(names: tuple[str, ...]) -> tuple[str, ...]:
    """Designators sorted for display: resistors, capacitors, inductors, each by number."""
    kinds = {"resistor": 0, "capacitor": 1, "inductor": 2}

    def key(n: str) -> tuple[int, int, str]:
        m = re.match(r"[A-Za-z]+(\d*)", n)
        num = int(m.group(1)) if m and m.group(1) else 0
        return kinds[element_kind(n)], num, n

    return tuple(sorted(names, key=key))


class SnapLogSlider(widgets.FloatLogSlider):
    """A ``FloatLogSlider`` (base 10) whose validator can snap to an E-series.

    The front end is the standard ``FloatLogSliderView``; only the kernel-side
    validator differs, so no custom front-end code is needed. ``series`` is
    kernel-side state ("off" or an E-series name) and is not synchronised.

    Notes
    -----
    The browser's slider rounds every value it is given to its step grid
    (``10**(min + k·step)``) and sends the rounded value back, also for a
    value set from Python. A value from the browser that lies within half a
    step (in log10) of the current value is therefore that rounding, not a
    move: the validator keeps the exact current value, so ``33e3`` stays
    33 kΩ rather than the nearest grid point. A real move (a key press or a
    drag) always lands at least half a step away.

    A value that is not finite (NaN, ±inf) is refused: the current value is
    kept and :attr:`on_reject`, when set, is called with the reason (NaN
    would pass the clamp, since every comparison with NaN is false, and then
    poison every later update).
    """

    series = Unicode("off", help="E-series to snap to, or 'off' (kernel side only)")

    def __init__(self, **kwargs) -> None:
        self._before_browser: float | None = None
        #: Called with a message when a value is refused (set by the component row to show it).
        self.on_reject: Callable[[str], None] | None = None
        super().__init__(**kwargs)

    def set_state(self, sync_data) -> None:
        """Apply state sent by the browser, remembering the value it replaces.

        ``Widget.set_state`` assigns inside ``hold_trait_notifications()``, so
        the validator runs after the new value is already in place; the value
        kept here lets it compare with what the kernel had.
        """
        self._before_browser = float(self.value)
        try:
            super().set_state(sync_data)
        finally:
            self._before_browser = None

    @validate("value")
    def _validate_value(self, proposal):
        """Refuse non-finite values, clamp to the slider range, drop the browser's grid rounding, snap.

        Returns the coerced value and sets no other trait of the slider; a refused value is
        reported through :attr:`on_reject`.
        """
        value = float(proposal["value"])
        if not math.isfinite(value):
            if self.on_reject is not None:
                self.on_reject(f"{value!r} is not a value; expected a finite number (SI base units)")
            return float(self.value)
        lo, hi = self.base**self.min, self.base**self.max
        value = min(max(value, lo), hi)
        before = self._before_browser
        if (before is not None and self.step and before > 0 and value > 0
                and abs(math.log10(value / before)) < 0.5 * self.step * (1.0 - 1e-6)):
            return before
        if self.series != "off" and value > 0:
            snapped = nearest(value, self.series)
            if not lo <= snapped <= hi:
                below, above = neighbours(value, self.series)
                snapped = below if lo <= below <= hi else above if lo <= above <= hi else value
            value = snapped
        return value


class ComponentControl:
    """The row of one component: name, entry, slider and readout, with an error note.

    Parameters
    ----------
    name : str
        Reference designator, e.g. ``"R2"``.
    value : float
        Initial value in SI base units (Ω, F or H).

    Attributes
    ----------
    slider : SnapLogSlider
        ``slider.value`` is the component value in SI base units.
    entry : ipywidgets.Text
        Engineering-notation entry (``"4k7"``, ``"3.3n"``); submits on Enter.
    readout : ipywidgets.HTML
        The value formatted with its unit, and the coarsest E-series holding it.
    error : ErrorNote
    box : ipywidgets.VBox
    """

    def __init__(self, name: str, value: float) -> None:
        self.name = name
        self.kind = element_kind(name)
        self.unit = unit_for(self.kind)
        lo, hi = slider_exponents(value, self.kind)
        self.slider = SnapLogSlider(
            value=value, base=10.0, min=lo, max=hi, step=FREE_STEP_DECADES,
            readout=False, continuous_update=True,
            layout=widgets.Layout(width="auto", flex="1 1 150px", min_width="110px"),
        )
        self.slider.add_class(CSS_CLASS["slider"])
        self.slider.add_class(f"{CSS_CLASS['slider']}-{name}")
        self.entry = widgets.Text(
            value=compact_text(value), continuous_update=False,
            layout=widgets.Layout(width="68px"),
            tooltip=f"{name}: type a value such as 4k7, 3.3n, 2.2u (Enter to apply)",
        )
        self.entry.add_class(CSS_CLASS["entry"])
        self.entry.add_class(f"{CSS_CLASS['entry']}-{name}")
        self.readout = widgets.HTML(layout=widgets.Layout(width="96px"))
        self.error = ErrorNote()
        label = widgets.HTML(
            f'<b style="color:{COLORS["text"]}; font-size:13px">{html.escape(name)}</b>',
            layout=widgets.Layout(width="34px"),
        )
        self._row = widgets.HBox([label, self.entry, self.slider, self.readout],
                                 layout=widgets.Layout(align_items="center", width="100%"))
        self._label = label
        self.box = widgets.VBox([self._row, self.error.widget], layout=widgets.Layout(width="100%"))
        self._guard = False
        self._readout_html = ""
        self.entry.observe(self._on_entry, names="value")
        self.slider.on_reject = lambda reason: self.error.show(f"{name}: {reason}; the value stays "
                                                                f"{format_value(self.slider.value, self.unit)}")
        self.show_value()

    def close(self) -> None:
        """Close every widget of the row (when the explorer switches design)."""
        for w in (self.box, self._row, self._label, self.entry, self.slider, self.readout, self.error.widget):
            w.close()

    # -- display ---------------------------------------------------------
    @contextmanager
    def _guarded(self):
        self._guard = True
        try:
            yield
        finally:
            self._guard = False

    def show_value(self) -> None:
        """Rewrite the entry and readout from the slider (guarded: the entry does not re-submit)."""
        v = self.slider.value
        text = compact_text(v)
        if self.entry.value != text:
            with self._guarded():
                self.entry.value = text
        self.error.clear()
        series = series_of(v)
        tag = (f' <span style="color:{COLORS["muted"]}; font-size:11px">{series}</span>'
               if series is not None else "")
        text = html.escape(format_value(v, self.unit))
        readout = f'<span style="font-variant-numeric:tabular-nums">{text}</span>{tag}'
        if readout != self._readout_html:
            self._readout_html = readout
            self.readout.value = readout

    # -- input -----------------------------------------------------------
    def _on_entry(self, change) -> None:
        if self._guard:
            return
        self.submit(change["new"])

    def submit(self, text: str) -> bool:
        """Apply typed text: parse, snap, re-range the slider if needed, move it.

        Parameters
        ----------
        text : str
            Engineering text or a plain number in SI base units.

        Returns
        -------
        bool
            True when the value was accepted; False when an error is shown
            beside the field (the value is then unchanged).
        """
        try:
            v = parse_value(text, name=self.name, kind=self.kind)
            if self.slider.series != "off":
                v = nearest(v, self.slider.series)
            self._check_plausible(v, text)
        except ComponentValueError as err:
            self.error.show(str(err))
            return False
        self.set_value(v)
        return True

    def _check_plausible(self, v: float, text: str) -> None:
        p_lo, p_hi = PLAUSIBLE_DECADES[self.kind]
        lo, hi = 10.0**p_lo, 10.0**p_hi
        if not lo <= v <= hi:
            raise ComponentValueError(
                f"{self.name}: {text!r} is {format_value(v, self.unit)}, outside the explorer's "
                f"range for a {self.kind} ({format_value(lo, self.unit)} .. {format_value(hi, self.unit)})"
            )

    def set_value(self, v: float) -> bool:
        """Move the slider to ``v`` (SI base units), re-centring its range if ``v`` is outside it.

        Returns
        -------
        bool
            False when ``v`` is not a finite value > 0: the error is shown beside the field and
            nothing moves.
        """
        given = v
        try:
            v = float(v)
        except (TypeError, ValueError, OverflowError):
            v = math.nan
        if not (math.isfinite(v) and v > 0):
            self.error.show(f"{self.name}: {given!r} is not a {self.kind} value; expected a finite value > 0 "
                            f"({self.unit}); the value stays {format_value(self.slider.value, self.unit)}")
            return False
        s = self.slider
        e = math.log10(v)
        if not s.min <= e <= s.max:
            lo, hi = slider_exponents(v, self.kind)
            with s.hold_sync():
                s.min, s.max = min(lo, s.min), max(hi, s.max)  # widen first: no clamping
                s.value = v
                s.min, s.max = lo, hi
        elif s.value == v:
            self.show_value()  # nothing moves; normalise the text and clear any error
        else:
            s.value = v
        return True

    def set_series(self, series: str) -> None:
        """Snap to ``series`` ("off" or an E-series) from now on; re-validates the current value."""
        s = self.slider
        with s.hold_sync():
            s.series = series
            s.step = 1.0 / _SERIES_STEPS[series] if series != "off" else FREE_STEP_DECADES
            s.value = float(s.value)  # assignment re-runs the validator, which snaps


class ComponentPanel:
    """All component rows and the E-series snap choice.

    Parameters
    ----------
    values : mapping of str to float
        Component values in SI base units (Ω, F, H).
    on_snap : callable
        Called with the chosen series ("off", "E6", ...) when the snap choice changes.
    series : str
        Initial snap choice.

    Attributes
    ----------
    controls : dict of str to ComponentControl
    snap : ipywidgets.Dropdown
    box : ipywidgets.VBox
    """

    def __init__(self, values: Mapping[str, float], on_snap: Callable[[str], None],
                 series: str = "off") -> None:
        self.controls = {n: ComponentControl(n, float(values[n])) for n in component_order(tuple(values))}
        self.snap = widgets.Dropdown(
            options=SNAP_CHOICES, value=series, description="snap to",
            style={"description_width": "56px"}, layout=widgets.Layout(width="150px"),
        )
        self._on_snap = on_snap
        self.snap.observe(lambda ch: self._on_snap(ch["new"]), names="value")
        head = widgets.HBox([
            widgets.HTML(f'<span style="font-weight:600; color:{COLORS["text"]}">Components</span>',
                         layout=widgets.Layout(flex="1 1 auto")),
            self.snap,
        ], layout=widgets.Layout(align_items="center", justify_content="space-between", width="100%"))
        hint = widgets.HTML(
            f'<div style="color:{COLORS["muted"]}; font-size:11.5px; line-height:1.4; margin:2px 0 6px 0">'
            "Drag, or focus a slider and use ← →; or type a value (4k7, 3.3n, 2.2u) and press Enter.</div>")
        self.box = widgets.VBox([head] + [c.box for c in self.controls.values()] + [hint],
                                layout=widgets.Layout(width="100%"))
        self._own = (self.box, head, hint, *head.children)
        if series != "off":
            for c in self.controls.values():
                c.set_series(series)

    def close(self) -> None:
        """Close every widget of the panel."""
        for c in self.controls.values():
            c.close()
        for w in self._own:
            w.close()

    @property
    def sliders(self) -> Mapping[str, SnapLogSlider]:
        """Read-only map of designator to slider."""
        return MappingProxyType({n: c.slider for n, c in self.controls.items()})

    def values(self) -> dict[str, float]:
        """The slider values, SI base units."""
        return {n: float(c.slider.value) for n, c in self.controls.items()}
