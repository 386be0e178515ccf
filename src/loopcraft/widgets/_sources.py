"""Where a design comes from besides the library: a network you type, or a design file.

* :class:`NetworkForm` reads Zi and Zf (or Zg and Zf for a non-inverting
  stage) in loopcraft's expression grammar (:func:`loopcraft.model.network.parse_network`),
  gives every element a default value for its kind (:data:`DEFAULT_VALUES`)
  and builds the design with :meth:`loopcraft.design.Design.from_dict`. A
  :class:`~loopcraft.errors.ParseError` is shown beside its field with the
  caret under the offending character.
* :class:`FileLoader` reads a design file by path (:func:`loopcraft.design.load`)
  or from an upload (JSON parsed with :func:`json.loads`, never evaluated,
  then :meth:`~loopcraft.design.Design.from_dict`).

Errors leave the explorer's current design in place and are shown beside the
field: package errors with their own text, anything else that escapes parsing,
loading or the explorer's redraw (a recursion limit on deeply nested JSON, an
overflow) named by its kind (:func:`~loopcraft.widgets._controls.failure_text`).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import ipywidgets as widgets

from ..design import Design, load, loads
from ..errors import DesignFileError, LoopcraftError, ParseError
from ..model.network import parse_network
from ..symbolic.symbols import element_kind
from ._controls import failure_text
from ._fields import ErrorNote, TextField
from ._theme import COLORS

__all__ = ["DEFAULT_VALUES", "NetworkForm", "FileLoader", "design_from_json_bytes", "network_design_dict"]

#: Starting value of each element of a typed network, by kind (SI text).
DEFAULT_VALUES = {"resistor": "10k", "capacitor": "10n", "inductor": "1m"}


def network_design_dict(kind: str, first: str, feedback: str, names: tuple[str, ...]) -> dict[str, Any]:
    """The design-file dict of a typed network with default values.

    Parameters
    ----------
    kind : {"inverting", "noninverting"}
    first : str
        Zi (inverting) or Zg (non-inverting) expression.
    feedback : str
        Zf expression.
    names : tuple of str
        The element designators of both networks.
    """
    key = "input" if kind == "inverting" else "ground"
    return {
        "loopcraft": 1,
        "title": "My own network",
        "stage": {"kind": kind, key: first, "feedback": feedback},
        "values": {n: DEFAULT_VALUES[element_kind(n)] for n in names},
    }


def design_from_json_bytes(data: bytes, name: str) -> Design:
    """Parse an uploaded design file (UTF-8 JSON) and validate it.

    Raises
    ------
    DesignFileError
        Not UTF-8, not JSON (line and column given), or not a valid design.
    """
    try:
        text = bytes(data).decode("utf-8")
    except UnicodeDecodeError as err:
        raise DesignFileError(f"{name!r} is not UTF-8 text") from err
    return loads(text, name)


def _about(name: str, err: Exception) -> str:
    """The message for a file that did not load: the package's own text, else the file's name and the error."""
    text = failure_text(err)
    return text if isinstance(err, LoopcraftError) else f"{name!r}: {text}"


class NetworkForm:
    """Type your own Zi and Zf and build a stage from them.

    Parameters
    ----------
    on_design : callable
        Called with the new :class:`~loopcraft.design.Design` after a successful build.

    Attributes
    ----------
    kind : ipywidgets.ToggleButtons
        "inverting" (H = −Zf/Zi) or "noninverting" (H = 1 + Zf/Zg).
    first, feedback : TextField
        The two network expressions.
    build : ipywidgets.Button
    error : ErrorNote
        Errors of the whole stage (e.g. a designator used in both networks).
    box : ipywidgets.VBox
    """

    def __init__(self, on_design: Callable[[Design], None]) -> None:
        self._on_design = on_design
        self.kind = widgets.ToggleButtons(options=["inverting", "noninverting"], value="inverting",
                                          style={"button_width": "100px"})
        self.first = TextField("input", "Zi (input)", "R1", placeholder="e.g. R1 || (R3 + C3)", width="260px")
        self.feedback = TextField("feedback", "Zf (feedback)", "R2 || C1", placeholder="e.g. (R2 + C1) || C2",
                                  width="260px")
        self.build = widgets.Button(description="build stage", button_style="primary",
                                    layout=widgets.Layout(width="120px"))
        self.error = ErrorNote()
        self._quiet = False
        help_text = widgets.HTML(
            f'<span style="color:{COLORS["muted"]}; font-size:12px">Grammar: <code>+</code> series, '
            "<code>||</code> parallel (binds tighter), parentheses; elements R…, C…, L…. New parts start at "
            f"R {DEFAULT_VALUES['resistor']}, C {DEFAULT_VALUES['capacitor']}, L {DEFAULT_VALUES['inductor']}.</span>")
        self.box = widgets.VBox([help_text, self.kind, self.first.box, self.feedback.box, self.build,
                                 self.error.widget])
        self.kind.observe(self._on_kind, names="value")
        self.build.on_click(lambda _b: self.submit())
        for f in (self.first, self.feedback):
            f.text.observe(lambda _ch: self.submit(), names="value")

    def _on_kind(self, change) -> None:
        label = "Zi (input)" if change["new"] == "inverting" else "Zg (to ground)"
        self.first.label.value = f'<span style="color:{COLORS["muted"]}">{label}</span>'
        self.first.key = "input" if change["new"] == "inverting" else "ground"

    def set_stage(self, stage_dict: dict[str, Any]) -> None:
        """Prefill the fields from a stage section (inverting or non-inverting)."""
        kind = stage_dict.get("kind")
        if kind not in ("inverting", "noninverting"):
            return
        self.kind.value = kind
        self._set_quietly(self.first, stage_dict["input" if kind == "inverting" else "ground"])
        self._set_quietly(self.feedback, stage_dict["feedback"])

    def _set_quietly(self, field: TextField, text: str) -> None:
        self._quiet = True
        try:
            field.text.value = text
        finally:
            self._quiet = False

    def submit(self) -> Design | None:
        """Parse both networks and build the stage.

        Returns
        -------
        Design or None
            The new design, or None when an error is shown beside a field.
        """
        if self._quiet:
            return None
        ok = True
        names: list[str] = []
        for f in (self.first, self.feedback):
            f.error.clear()
            try:
                names += parse_network(f.value).names
            except ParseError as err:
                f.error.show(str(err))
                ok = False
            except Exception as err:  # e.g. the recursion limit on thousands of nested parentheses
                f.error.show(failure_text(err))
                ok = False
        self.error.clear()
        if not ok:
            return None
        try:
            design = Design.from_dict(network_design_dict(self.kind.value, self.first.value, self.feedback.value,
                                                          tuple(dict.fromkeys(names))))
            design.compile()  # derive now, so an undefined stage is reported here
            self._on_design(design)  # the explorer raises, keeping its last good state, if it cannot draw it
        except Exception as err:  # shown beside the form, never raised out of an observer
            self.error.show(failure_text(err))
            return None
        return design


class FileLoader:
    """Load a design file by path or by upload.

    Parameters
    ----------
    on_design : callable
        Called with the loaded :class:`~loopcraft.design.Design`.

    Attributes
    ----------
    path : TextField
    load : ipywidgets.Button
    upload : ipywidgets.FileUpload
    error : ErrorNote
    box : ipywidgets.VBox
    """

    def __init__(self, on_design: Callable[[Design], None]) -> None:
        self._on_design = on_design
        self.path = TextField("path", "design file", "", placeholder="path/to/design.json", width="300px")
        self.load = widgets.Button(description="load", button_style="primary", layout=widgets.Layout(width="80px"))
        self.upload = widgets.FileUpload(accept=".json", multiple=False, description="upload",
                                         layout=widgets.Layout(width="110px"))
        self.error = ErrorNote()
        self.box = widgets.VBox([
            widgets.HBox([self.path.row, self.load, self.upload], layout=widgets.Layout(align_items="center")),
            self.path.error.widget, self.error.widget,
        ])
        self.load.on_click(lambda _b: self.load_path())
        self.upload.observe(self._on_upload, names="value")

    def load_path(self, path: str | None = None) -> Design | None:
        """Load the file at ``path`` (default: the text in the path field).

        Returns
        -------
        Design or None
            The design, or None when an error is shown beside the field.
        """
        p = self.path.value if path is None else path
        self.path.error.clear()
        self.error.clear()
        if not p:
            self.path.error.show("type the path of a design file (JSON), e.g. examples/bus48_loop.json")
            return None
        try:
            design = load(p)
            self._on_design(design)
        except Exception as err:  # a DesignFileError, or anything else loading or drawing let escape
            self.path.error.show(_about(p, err))
            return None
        return design

    def _on_upload(self, change) -> None:
        files = change["new"]
        if not files:
            return
        f = files[0]
        self.load_bytes(f["content"], f.get("name", "upload"))

    def load_bytes(self, content: bytes, name: str) -> Design | None:
        """Load an uploaded file's bytes; errors go beside the upload."""
        self.error.clear()
        try:
            design = design_from_json_bytes(content, name)
            self._on_design(design)
        except Exception as err:  # a DesignFileError, or anything else loading or drawing let escape
            self.error.show(_about(name, err))
            return None
        return design
