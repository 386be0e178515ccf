"""Plain numbers from untrusted input: the float conversion that never overflows, and short echoes.

The lowest helper of the package (it imports only the error hierarchy), so that
:mod:`loopcraft.model.values` and :mod:`loopcraft._numbers` can both use it
without importing each other.
"""

from __future__ import annotations

import math
from numbers import Real
from typing import Any

__all__ = ["MAX_NUMBER_TEXT", "real_float", "shown"]

#: Longest text read as one number (characters); a value is never longer than a few dozen.
MAX_NUMBER_TEXT = 64

# A plain decimal number: optional sign, digits with an optional point, optional exponent.


def real_float(value: float | Real) -> float:
    """The float nearest a real number; ``±inf`` (never OverflowError) beyond the float range.

    Parameters
    ----------
    value : int, float, Fraction, numpy scalar …
        Any :class:`numbers.Real` (booleans are the caller's business). ``float`` is named
        beside ``Real`` for the type checker, which does not know that int and float are
        registered as ``Real``.
    """
    try:
        return float(value)
    except OverflowError:
        return -math.inf if value < 0 else math.inf


def shown(value: Any, limit: int = 40) -> str:
    """A short ``repr`` of ``value`` for an error message.

    A big integer is described by its size (its ``repr`` may not even exist:
    Python refuses to print integers of more than 4300 digits), a long text or
    container is cut with ``…`` and its length given.
    """
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 128:
        digits = int(value.bit_length() * math.log10(2)) + 1
        return f"<{'a negative' if value < 0 else 'an'} integer of about {digits} digits>"
    try:
        text = repr(value)
    except (ValueError, RecursionError):
        return f"a {type(value).__name__}"
    if len(text) <= limit:
        return text
    size = f" ({len(value)} characters)" if isinstance(value, str) else ""
    return f"{text[:limit]}…{size}"
