"""The explorer's one view state: what the user has chosen, as frozen data.

The explorer holds one :class:`ViewState` (component values, the s-plane's
unit, zoom mode and axis ranges, the overlay choice). Every input — a slider,
the unit or zoom toggle, a pan in the browser, the overlay choice — makes a
new state; the views compute their frames as pure functions of that state and
the analysis (they never read their own widgets back), the frames are drawn,
and only then is the new state committed. A failed update leaves the old
state, and the old screen, in force.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field, replace

__all__ = ["PlaneState", "ViewState", "UNITS", "ZOOMS"]

#: The s-plane units: "Hz" draws s/2π, "rad/s" draws s.
UNITS = ("Hz", "rad/s")
#: The s-plane zoom modes: "auto" fits the roots, "manual" keeps the ranges the user panned to.
ZOOMS = ("auto", "manual")

_TWO_PI = 2.0 * math.pi


@dataclass(frozen=True)
class PlaneState:
    """What the s-plane shows besides the roots.

    Attributes
    ----------
    unit : {"Hz", "rad/s"}
        The unit σ and ω are drawn in.
    zoom : {"auto", "manual"}
        "auto" fits the roots (keeping the ranges while they fit snugly);
        "manual" keeps ``x_range`` and ``y_range``.
    x0_hz, x0_rad_s : float
        The signed-log reference of the design in Hz and in rad/s (each a
        power of ten, fixed per design so the axes do not jump).
    x_range, y_range : (float, float) or None
        The axis ranges on screen, signed-log units; None: fit afresh.
    """

    unit: str = "Hz"
    zoom: str = "auto"
    x0_hz: float = 1.0
    x0_rad_s: float = 1.0
    x_range: tuple[float, float] | None = None
    y_range: tuple[float, float] | None = None

    @property
    def x0(self) -> float:
        """The signed-log reference in :attr:`unit` (Hz or rad/s)."""
        return self.x0_hz if self.unit == "Hz" else self.x0_rad_s

    @property
    def rad_s_per_unit(self) -> float:
        """Divide a root in rad/s by this to get it in :attr:`unit` (2π for Hz, 1 for rad/s)."""
        return _TWO_PI if self.unit == "Hz" else 1.0

    def with_unit(self, unit: str) -> PlaneState:
        """The same plane in another unit; the ranges are fitted afresh (the coordinates change)."""
        if unit not in UNITS:
            raise ValueError(f"unit {unit!r} is not one of {UNITS}")
        return replace(self, unit=unit, x_range=None, y_range=None)

    def with_zoom(self, zoom: str) -> PlaneState:
        """Another zoom mode; back to "auto" the ranges are fitted afresh, "manual" keeps them."""
        if zoom not in ZOOMS:
            raise ValueError(f"zoom {zoom!r} is not one of {ZOOMS}")
        if zoom == "auto":
            return replace(self, zoom=zoom, x_range=None, y_range=None)
        return replace(self, zoom=zoom)

    def with_ranges(self, x_range: tuple[float, float] | None,
                    y_range: tuple[float, float] | None) -> PlaneState:
        """The same plane showing other axis ranges (signed-log units)."""
        if x_range == self.x_range and y_range == self.y_range:
            return self
        return replace(self, x_range=x_range, y_range=y_range)


@dataclass(frozen=True)
class ViewState:
    """Everything the explorer's views are computed from, besides the design and its analysis.

    Attributes
    ----------
    values : mapping of str to float
        The component values on screen, SI base units (Ω, F, H). Never mutated.
    plane : PlaneState
        The s-plane's unit, zoom and ranges.
    spread : str
        The tolerance overlay choice ("off", "design", or a stock key).
    """

    values: Mapping[str, float] = field(default_factory=dict)
    plane: PlaneState = field(default_factory=PlaneState)
    spread: str = "off"
