"""Change-only, batched assignment of widget traits: at most one message per widget per redraw.

:class:`TraitWriter` remembers what it last gave each widget and, for one
widget at a time, assigns only the traits whose value differs, all inside
one ``hold_sync()`` (so the front end gets a single update message, or none
when nothing changed). Scalars, text and lists are compared here, which
skips the widget entirely when nothing changed; arrays are handed on unless
they are the very object last assigned (the frequency grid), since array
traits compare old and new themselves and send nothing when equal.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from ipywidgets import Widget

__all__ = ["TraitWriter"]


def _same(a: Any, b: Any) -> bool:
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        # Array traits compare old and new themselves (and stay silent when equal);
        # comparing here as well would only double the cost for data that moves.
        return a is b
    return type(a) is type(b) and a == b


class TraitWriter:
    """Assigns widget traits, skipping values equal to the last ones it assigned."""

    def __init__(self) -> None:
        self._last: dict[tuple[int, str], Any] = {}

    def set(self, widget: Widget, **traits: Any) -> bool:
        """Assign the changed ``traits`` of ``widget`` in one ``hold_sync()``.

        Returns
        -------
        bool
            True when something was assigned (one message), False when nothing changed.
        """
        key = id(widget)
        changed = {k: v for k, v in traits.items() if (key, k) not in self._last or not _same(self._last[(key, k)], v)}
        if not changed:
            return False
        with widget.hold_sync():
            for k, v in changed.items():
                setattr(widget, k, v)
                self._last[(key, k)] = v
        return True

    def forget(self, widget: Widget | None = None) -> None:
        """Forget what was assigned (to one widget, or to all), so the next ``set`` assigns everything."""
        if widget is None:
            self._last.clear()
        else:
            key = id(widget)
            for k in [k for k in self._last if k[0] == key]:
                del self._last[k]
