"""The op-amp and plant editors (shown in the explorer's accordion).

Each editor holds text fields named after the design-file keys of its
section, builds the section dict from them and validates it through the
model's own reader (:meth:`loopcraft.model.opamp.OpAmp.from_dict`,
:func:`loopcraft.plant.plant_from_dict`). A :class:`~loopcraft.errors.DesignFileError`
is shown beside the field its key path names (``"plant.poles_hz[1]"`` → the
``poles_hz`` field); any other error, from the reader or from the explorer
redrawing with the new model, is shown beside the field just edited. The last
good model stays in force and on screen.

Demo defaults come from an invented 48 V to 12 V bus converter.
"""

from __future__ import annotations

import html
import math
from collections.abc import Callable, Mapping
from typing import Any

import ipywidgets as widgets

from ..errors import DesignFileError
from ..model.opamp import OpAmp
from ..model.plant import Plant, plant_from_dict
from ._controls import compact_text, failure_text
from ._fields import ErrorNote, TextField
from ._theme import COLORS

__all__ = ["OpAmpPanel", "PlantPanel", "field_of_key_path", "parse_feedback_gain"]

_OPAMP_FIELDS: tuple[tuple[str, str, str], ...] = (
    ("a0_db", "A0 (dB)", "100"),
    ("gbw_hz", "GBW (Hz)", "10M"),
    ("second_pole_hz", "2nd pole (Hz)", "30M"),
)

#: Plant kinds offered, each with its fields: (key, label with unit, default text, optional).
PLANT_FIELDS: Mapping[str, tuple[tuple[str, str, str, bool], ...]] = {
    "general": (
        ("gain", "gain K", "10", False),
        ("poles_hz", "poles (Hz, list)", "1k", True),
        ("zeros_hz", "zeros (Hz, list)", "", True),
    ),
    "buck_vm": (
        ("vin_v", "Vin (V)", "48", False),
        ("l_h", "L (H)", "10u", False),
        ("c_f", "C (F)", "100u", False),
        ("esr_ohm", "ESR (Ω)", "5m", True),
        ("load_ohm", "load (Ω)", "1.2", False),
        ("ramp_v", "ramp (V p-p)", "2", False),
    ),
    "peak_current": (
        ("load_ohm", "load (Ω)", "1.2", False),
        ("c_f", "C (F)", "100u", False),
        ("ri_ohm", "Ri (V/A)", "0.1", False),
        ("esr_ohm", "ESR (Ω)", "5m", True),
        ("f_sw_hz", "fsw (Hz)", "400k", True),
        ("duty", "duty D", "0.25", True),
        ("mc", "mc = 1 + Se/Sn", "1.5", True),
    ),
    "boost_vm": (
        ("vin_v", "Vin (V)", "12", False),
        ("duty", "duty D", "0.5", False),
        ("l_h", "L (H)", "22u", False),
        ("c_f", "C (F)", "220u", False),
        ("esr_ohm", "ESR (Ω)", "10m", True),
        ("load_ohm", "load (Ω)", "10", False),
        ("ramp_v", "ramp (V p-p)", "1", False),
    ),
}

_LIST_KEYS = ("poles_hz", "zeros_hz")


def field_of_key_path(key_path: str, section: str) -> str:
    """The field a key path points at: ``"plant.poles_hz[1]"`` → ``"poles_hz"`` ('' for the section)."""
    rest = key_path[len(section) + 1:] if key_path.startswith(section + ".") else ""
    return rest.split(".")[0].split("[")[0]


def parse_feedback_gain(text: str) -> float:
    """Read the feedback (divider or sensor) gain, V/V: a plain number > 0.

    Raises
    ------
    DesignFileError
        Text that is not a finite number > 0 (key path ``feedback_gain``).
    """
    try:
        x = float(text)
    except ValueError:
        raise DesignFileError(f"must be a number > 0, V/V (got {text!r})", "feedback_gain") from None
    if not math.isfinite(x) or x <= 0:
        raise DesignFileError(f"must be a number > 0, V/V (got {text!r})", "feedback_gain")
    return x


def _number_text(key: str, v: Any) -> str:
    if isinstance(v, bool) or not isinstance(v, int | float):
        return str(v)
    engineering = key.endswith(("_f", "_h", "_ohm", "_hz"))
    return compact_text(float(v)) if engineering and v > 0 else f"{v:.6g}"


def _section_title(text: str) -> widgets.HTML:
    return widgets.HTML(f'<span style="color:{COLORS["muted"]}; font-size:12px">{html.escape(text)}</span>')


class OpAmpPanel:
    """Op-amp model and parameters.

    Parameters
    ----------
    opamp : OpAmp or None
        The initial model (None: ideal).
    on_change : callable
        Called with the new :class:`~loopcraft.model.opamp.OpAmp` (None for ideal)
        each time the fields form a valid model.

    Attributes
    ----------
    model : ipywidgets.Dropdown
        "ideal", "single_pole" or "two_pole".
    fields : dict of str to TextField
        Keyed by design-file key (``a0_db``, ``gbw_hz``, ``second_pole_hz``).
    error : ErrorNote
        Errors that name no single field.
    current : OpAmp or None
        The last valid model.
    box : ipywidgets.VBox
    """

    def __init__(self, opamp: OpAmp | None, on_change: Callable[[OpAmp | None], None]) -> None:
        self._on_change = on_change
        self.model = widgets.Dropdown(options=[("ideal", "ideal"), ("single pole", "single_pole"),
                                               ("two pole", "two_pole")],
                                      value="ideal", description="model",
                                      style={"description_width": "48px"}, layout=widgets.Layout(width="210px"))
        self.fields = {k: TextField(k, label, default) for k, label, default in _OPAMP_FIELDS}
        self.error = ErrorNote()
        self.current: OpAmp | None = None
        self._quiet = False
        self.box = widgets.VBox([
            _section_title("Open-loop gain A(s) = A0 / ((1 + s/ωa)(1 + s/ω2)), ωa = 2π·GBW/A0."),
            self.model, *[f.box for f in self.fields.values()], self.error.widget,
        ])
        self.set_opamp(opamp)
        self.model.observe(self._on_model, names="value")
        for key, f in self.fields.items():
            f.text.observe(lambda _ch, key=key: self.apply(key), names="value")

    def set_opamp(self, opamp: OpAmp | None) -> None:
        """Show a model (from a design file) without calling back."""
        self._quiet = True
        try:
            self.current = opamp if opamp is not None and not opamp.is_ideal else None
            if self.current is None:
                self.model.value = "ideal"
            else:
                d = opamp.to_dict()
                self.model.value = d["model"]
                self.fields["a0_db"].text.value = f"{20.0 * math.log10(d['a0']):.4g}"
                self.fields["gbw_hz"].text.value = compact_text(d["gbw_hz"])
                if "second_pole_hz" in d:
                    self.fields["second_pole_hz"].text.value = compact_text(d["second_pole_hz"])
            self._show_fields()
            for f in self.fields.values():
                f.error.clear()
            self.error.clear()
        finally:
            self._quiet = False

    def _show_fields(self) -> None:
        m = self.model.value
        self.fields["a0_db"].show(m != "ideal")
        self.fields["gbw_hz"].show(m != "ideal")
        self.fields["second_pole_hz"].show(m == "two_pole")

    def _on_model(self, _change) -> None:
        self._show_fields()
        self.apply()

    def section(self) -> dict[str, str]:
        """The design-file ``opamp`` section the fields describe (text values)."""
        m = self.model.value
        d = {"model": m}
        if m != "ideal":
            d["a0_db"] = self.fields["a0_db"].value
            d["gbw_hz"] = self.fields["gbw_hz"].value
        if m == "two_pole":
            d["second_pole_hz"] = self.fields["second_pole_hz"].value
        return d

    def apply(self, source: str | None = None) -> bool:
        """Validate the fields; on success report the model and store it.

        Parameters
        ----------
        source : str or None
            The key of the field just edited (where an error without a key path is shown).

        Returns
        -------
        bool
            False when an error is shown (the previous model stays in force).
        """
        if self._quiet:
            return False
        for f in self.fields.values():
            f.error.clear()
        self.error.clear()
        try:
            opamp = OpAmp.from_dict(self.section(), "opamp")
            model = None if opamp.is_ideal else opamp
            self._on_change(model)  # the explorer raises, keeping its last good state, if it cannot use it
        except DesignFileError as err:
            key = field_of_key_path(err.key_path, "opamp") or (source or "")
            (self.fields[key].error if key in self.fields else self.error).show(str(err))
            return False
        except Exception as err:  # an overflow or a failed redraw: shown, never raised out of an observer
            field = self.fields.get(source or "")
            (field.error if field is not None else self.error).show(failure_text(err))
            return False
        self.current = model
        return True


class PlantPanel:
    """Plant kind, its parameters and the feedback gain.

    Parameters
    ----------
    plant : Plant or None
        The initial plant (None: no plant).
    feedback_gain : float
        Divider or sensor gain, V/V.
    on_change : callable
        Called with ``(plant or None, feedback_gain)`` each time the fields form a valid plant.

    Attributes
    ----------
    kind : ipywidgets.Dropdown
        "none" or one of the kinds of :data:`PLANT_FIELDS` (plus the kind of a
        loaded plant that has no fields here, kept as loaded).
    fields : dict of (kind, key) to TextField
    feedback : TextField
        ``feedback_gain`` (V/V).
    error : ErrorNote
    current : Plant or None
    box : ipywidgets.VBox
    """

    def __init__(self, plant: Plant | None, feedback_gain: float,
                 on_change: Callable[[Plant | None, float], None]) -> None:
        self._on_change = on_change
        self.kind = widgets.Dropdown(options=[("none", "none"), ("general (gain, poles, zeros)", "general"),
                                              ("buck, voltage mode", "buck_vm"),
                                              ("buck, peak current mode", "peak_current"),
                                              ("boost, voltage mode", "boost_vm")],
                                     value="none", description="plant",
                                     style={"description_width": "48px"}, layout=widgets.Layout(width="290px"))
        self.fields = {(kind, key): TextField(key, label, default,
                                              placeholder="optional" if optional else "")
                       for kind, spec in PLANT_FIELDS.items() for key, label, default, optional in spec}
        self.feedback = TextField("feedback_gain", "k_fb (V/V)", "1")
        self.error = ErrorNote()
        self.current: Plant | None = None
        self.feedback_gain = 1.0
        self._extras: dict[str, dict[str, Any]] = {}
        self._quiet = False
        self.box = widgets.VBox([
            _section_title("Loop gain L = plant · k_fb · (−stage) for an inverting stage; lists are comma separated."),
            self.kind, *[f.box for f in self.fields.values()], self.feedback.box, self.error.widget,
        ])
        self.set_plant(plant, feedback_gain)
        self.kind.observe(self._on_kind, names="value")
        for f in (*self.fields.values(), self.feedback):
            f.text.observe(lambda _ch, f=f: self.apply(f), names="value")

    def set_plant(self, plant: Plant | None, feedback_gain: float) -> None:
        """Show a plant (from a design file) without calling back."""
        self._quiet = True
        try:
            self.current = plant
            self.feedback_gain = float(feedback_gain)
            self.feedback.text.value = f"{feedback_gain:.6g}"
            if plant is None:
                self.kind.value = "none"
            else:
                d = plant.to_dict()
                kind = d["kind"]
                if kind not in [v for _l, v in self.kind.options]:
                    self.kind.options = [*self.kind.options, (f"{kind} (as loaded)", kind)]
                self.kind.value = kind
                keys = {key for key, *_ in PLANT_FIELDS.get(kind, ())}
                self._extras[kind] = {k: v for k, v in d.items() if k not in keys and k != "kind"}
                for key in keys:
                    f = self.fields[(kind, key)]
                    v = d.get(key)
                    if v is None:
                        f.text.value = ""
                    elif key in _LIST_KEYS:
                        f.text.value = ", ".join(_number_text(key, x) for x in v)
                    else:
                        f.text.value = _number_text(key, v)
            self._show_fields()
            for f in (*self.fields.values(), self.feedback):
                f.error.clear()
            self.error.clear()
        finally:
            self._quiet = False

    def _show_fields(self) -> None:
        k = self.kind.value
        for (kind, _key), f in self.fields.items():
            f.show(kind == k)
        self.feedback.show(k != "none")

    def _on_kind(self, _change) -> None:
        self._show_fields()
        self.apply()

    def section(self) -> dict[str, Any] | None:
        """The design-file ``plant`` section the fields describe (None for no plant)."""
        kind = self.kind.value
        if kind == "none":
            return None
        d: dict[str, Any] = {"kind": kind, **self._extras.get(kind, {})}
        for key, _label, _default, optional in PLANT_FIELDS.get(kind, ()):
            text = self.fields[(kind, key)].value
            if key in _LIST_KEYS:
                d[key] = [t.strip() for t in text.split(",")] if text else []
            elif text or not optional:
                d[key] = text
        return d

    def apply(self, source: TextField | None = None) -> bool:
        """Validate the fields; on success report the plant and feedback gain and store them.

        Parameters
        ----------
        source : TextField or None
            The field just edited (where an error without a key path is shown).

        Returns
        -------
        bool
            False when an error is shown (the previous plant stays in force).
        """
        if self._quiet:
            return False
        for f in (*self.fields.values(), self.feedback):
            f.error.clear()
        self.error.clear()
        kind = self.kind.value
        note = source.error if source is not None else self.error
        try:
            section = self.section()
            plant = plant_from_dict(section, "plant") if section is not None else None
        except DesignFileError as err:
            key = field_of_key_path(err.key_path, "plant")
            target = self.fields.get((kind, key))
            (target.error if target is not None else self.error).show(str(err))
            return False
        except Exception as err:  # e.g. an overflow the reader did not catch
            note.show(failure_text(err))
            return False
        try:
            fb = parse_feedback_gain(self.feedback.value) if plant is not None else self.feedback_gain
        except DesignFileError as err:
            self.feedback.error.show(str(err))
            return False
        try:
            self._on_change(plant, fb)  # the explorer raises, keeping its last good state, if it cannot use it
        except Exception as err:  # shown beside the field, never raised out of an observer
            note.show(failure_text(err))
            return False
        self.current, self.feedback_gain = plant, fb
        return True
