"""The notebook widgets of loopcraft (ipywidgets 8 and bqplot only; no custom front end).

Only this package imports ipywidgets and bqplot; the model and analysis
layers stay importable without a notebook stack.
"""

from __future__ import annotations

from .explorer import Explorer

__all__ = ["Explorer"]
