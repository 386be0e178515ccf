"""Shared symbol conventions for the symbolic layer (private).

Every component is a positive real sympy symbol named by its reference
designator; the Laplace variable is the plain symbol ``s`` (rad/s).
"""

from __future__ import annotations

import re
from functools import cache

import sympy as sp

from ..errors import ComponentValueError

__all__ = ["S", "component_symbol", "element_kind", "NAME_RE"]

#: Laplace variable (complex frequency, rad/s).
S = sp.Symbol("s")

#: A reference designator: R, C or L, then letters, digits or underscores.
NAME_RE = re.compile(r"[RCL][A-Za-z0-9_]*")

_KINDS = {"R": "resistor", "C": "capacitor", "L": "inductor"}


def element_kind(name: str) -> str:
    """Return ``"resistor"``, ``"capacitor"`` or ``"inductor"`` for a designator.

    Parameters
    ----------
    name : str
        Reference designator such as ``"R1"`` or ``"C_comp"``.

    Raises
    ------
    ComponentValueError
        If ``name`` is not a valid R/C/L designator.
    """
    if not isinstance(name, str) or NAME_RE.fullmatch(name) is None:
        raise ComponentValueError(
            f"element name {name!r} is not a reference designator "
            "(R, C or L followed by letters, digits or underscores)"
        )
    return _KINDS[name[0]]


@cache
def component_symbol(name: str) -> sp.Symbol:
    """Return the positive sympy symbol of a component (cached per name)."""
    element_kind(name)
    return sp.Symbol(name, positive=True)
