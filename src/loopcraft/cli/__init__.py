"""The ``loopcraft`` command.

``main`` dispatches every verb (``main.py``: analyze and response; ``tools.py``:
report, check, snap, spread and the other design tools).
"""

from .main import main

__all__ = ["main"]
