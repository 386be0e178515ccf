"""Small form pieces shared by the explorer's panels: a text field with its error note.

An error is shown beside the field it belongs to, in a ``<pre>`` block so the
caret line of a :class:`~loopcraft.errors.ParseError` (or of a value that
:func:`~loopcraft.model.values.parse_value` rejects) stays under the offending
character. Clearing the note hides it; the field keeps whatever the user typed.
"""

from __future__ import annotations

import html

import ipywidgets as widgets

from ._theme import COLORS

__all__ = ["ErrorNote", "TextField", "error_html"]


def error_html(message: str) -> str:
    """The HTML of an error message: escaped, monospaced, caret lines kept.

    Parameters
    ----------
    message : str
        The error text (may hold several lines).

    Returns
    -------
    str
        A ``<pre>`` element.
    """
    return (
        f'<pre class="lc-error" style="margin:2px 0 4px 0; padding:3px 6px; white-space:pre-wrap; '
        f"font-size:11.5px; line-height:1.3; color:{COLORS['error']}; background:#fdf0f0; "
        f'border-left:3px solid {COLORS["error"]}; border-radius:2px;">{html.escape(message)}</pre>'
    )


class ErrorNote:
    """An HTML area that shows one error message, or nothing.

    Attributes
    ----------
    widget : ipywidgets.HTML
        The area to place beside (or under) a field.
    """

    def __init__(self) -> None:
        self.widget = widgets.HTML(value="", layout=widgets.Layout(margin="0", width="auto"))
        self.widget.add_class("lc-error-note")
        self._message = ""

    @property
    def message(self) -> str:
        """The message shown now ('' when there is none)."""
        return self._message

    def show(self, message: str) -> None:
        """Show ``message`` (replacing any earlier one)."""
        self._message = message
        self.widget.value = error_html(message)

    def clear(self) -> None:
        """Hide the message."""
        if self._message:
            self._message = ""
            self.widget.value = ""


class TextField:
    """A labelled ``Text`` box (submits on Enter or leaving the box) with an error note.

    Parameters
    ----------
    key : str
        The design-file key the field edits (e.g. ``"gbw_hz"``).
    label : str
        Text shown before the box, with its unit (e.g. ``"GBW (Hz)"``).
    value : str
        Initial text.
    placeholder : str
        Hint shown in an empty box.
    width : str
        CSS width of the box.

    Attributes
    ----------
    text : ipywidgets.Text
    error : ErrorNote
    box : ipywidgets.VBox
        The row (label and box) above its error note.
    """

    def __init__(self, key: str, label: str, value: str = "", *, placeholder: str = "",
                 width: str = "150px") -> None:
        self.key = key
        self.text = widgets.Text(
            value=value, placeholder=placeholder, continuous_update=False,
            layout=widgets.Layout(width=width),
        )
        self.label = widgets.HTML(
            value=f'<span style="color:{COLORS["muted"]}">{html.escape(label)}</span>',
            layout=widgets.Layout(width="128px"),
        )
        self.error = ErrorNote()
        self.row = widgets.HBox([self.label, self.text], layout=widgets.Layout(align_items="center"))
        self.box = widgets.VBox([self.row, self.error.widget], layout=widgets.Layout(margin="0 0 2px 0"))

    @property
    def value(self) -> str:
        """The text in the box, stripped."""
        return self.text.value.strip()

    def show(self, visible: bool) -> None:
        """Show or hide the whole field."""
        self.box.layout.display = None if visible else "none"
