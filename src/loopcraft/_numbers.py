"""Reading numbers from user data without letting a conversion error escape (private).

Every number that comes from a design file, a dict or a widget passes through
here before a model sees it:

* :func:`real_float` turns any real number into a float and never raises: an
  integer beyond the float range (``10**400``) becomes ``±inf`` instead of an
  ``OverflowError``, so the caller's range check refuses it;
* :func:`shown` is a short ``repr`` for messages (``repr`` of an integer with
  more than 4300 digits raises ``ValueError``; a long text is cut);
* :func:`read_number` reads a design-file value (a number, or text with an SI
  prefix and an optional unit) into a finite float, raising
  :class:`~loopcraft.errors.DesignFileError` with the key path;
* :class:`Span` is a documented physical range (``1 µΩ … 1 TΩ``) and its check;
* :func:`json_safe` maps the non-finite floats of a document to ``None`` so
  that ``json.dumps(..., allow_nan=False)`` writes valid JSON.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from numbers import Real
from typing import Any

import numpy as np

from ._scalars import MAX_NUMBER_TEXT, real_float, shown
from .errors import ComponentValueError, DesignFileError

__all__ = ["real_float", "shown", "read_number", "Span", "json_safe", "MAX_NUMBER_TEXT"]

_PLAIN = re.compile(r"[+-]?(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?")


def read_number(
    value: Any,
    where: str,
    name: str,
    *,
    unit: str | None = None,
    kind: str | None = None,
    signed: bool = False,
) -> float:
    """Read a design-file number: a number, or text such as ``"10k"``, ``"400 kHz"``, ``"-3.3m"``.

    Parameters
    ----------
    value : object
        What the file holds.
    where : str
        Its key path (``"plant.c_f"``), for the error.
    name : str
        The field name, for the error.
    unit : str or None
        A regular expression of a unit that text may end with (``"Hz"``,
        ``"V/[uµμ]s"``); it is stripped before the number is read.
    kind : {"resistor", "capacitor", "inductor"} or None
        For Ω, F and H: the text keeps its unit and
        :func:`loopcraft.model.values.parse_value` checks it fits.
    signed : bool
        Whether text may start with ``-`` before an SI-prefixed number
        (plain numbers may always carry a sign).

    Returns
    -------
    float
        A finite float; range checks are the caller's.

    Raises
    ------
    DesignFileError
        Not a number or text, text that does not read as a number, text longer
        than :data:`MAX_NUMBER_TEXT`, or a value that is not finite (including
        integers beyond the float range, about 1.8e308); the message names
        ``name`` and the key path is ``where``.
    """
    from .model.values import parse_value

    if isinstance(value, bool) or not isinstance(value, Real | str):
        raise DesignFileError(
            f"{name} must be a number or engineering text such as '10k' (got {type(value).__name__} {shown(value)})",
            where,
        )
    if isinstance(value, Real):
        x = real_float(value)
    else:
        if len(value) > MAX_NUMBER_TEXT:
            raise DesignFileError(
                f"{name}: text {shown(value)} is too long for a number (at most {MAX_NUMBER_TEXT} characters)", where
            )
        text = value.strip()
        bare = re.sub(rf"\s*(?:{unit})\s*$", "", text) if unit else text
        if _PLAIN.fullmatch(bare):
            x = float(bare)  # cannot raise: the pattern is a valid float literal
        else:
            sign = 1.0
            if signed and bare.startswith(("+", "-")):
                sign = -1.0 if bare[0] == "-" else 1.0
                text, bare = text[1:].lstrip(), bare[1:].lstrip()
            try:
                # parse_value knows Ω/F/H itself; other units were stripped above.
                x = sign * parse_value(text if kind else bare, name=name, kind=kind)
            except ComponentValueError as exc:
                raise DesignFileError(str(exc), where) from exc
    if not math.isfinite(x):
        if math.isinf(x) and isinstance(value, Real) and not isinstance(value, float | np.floating):
            raise DesignFileError(f"{name} {shown(value)} is beyond the float range (about ±1.8e308)", where)
        raise DesignFileError(f"{name} must be a finite number (got {shown(value)})", where)
    return x


def _engineering(x: float, unit: str) -> str:
    from .model.values import format_value

    if unit in ("", "dB", "°") or "/" in unit or not 1e-18 <= x < 1e13:
        return f"{x:g}" + (f" {unit}" if unit else "")
    return format_value(x, unit)


@dataclass(frozen=True)
class Span:
    """A closed physical range ``lo … hi`` (in ``unit``), optionally also 0, optionally either sign.

    Parameters
    ----------
    lo, hi : float
        Smallest and largest magnitude accepted (``0 <= lo <= hi``; 0 itself only with ``zero``).
    unit : str
        Unit for the message (``"Ω"``, ``"Hz"``, ``"V/V"`` …).
    zero : bool
        Whether exactly 0 is also accepted (an ESR that is left out).
    signed : bool
        Whether negative values are accepted (the magnitude must then lie in the range).
    """

    lo: float
    hi: float
    unit: str
    zero: bool = False
    signed: bool = False

    @property
    def text(self) -> str:
        """The range in words, e.g. ``"1 µΩ … 1 TΩ (or 0)"``."""
        body = f"{_engineering(self.lo, self.unit)} … {_engineering(self.hi, self.unit)}"
        if self.signed:
            body = f"±({body})"
        return body + (" (or 0)" if self.zero else "")

    def contains(self, x: Any) -> bool:
        """Whether ``x`` (any object) is a real number in the range."""
        if isinstance(x, bool) or not isinstance(x, Real):
            return False
        v = real_float(x)
        if v == 0:
            return self.zero
        if v < 0 and not self.signed:
            return False
        return self.lo <= abs(v) <= self.hi

    def check(self, name: str, x: Any) -> float:
        """``x`` as a float when it lies in the range.

        Raises
        ------
        ComponentValueError
            Otherwise; the message names ``name``, shows ``x`` and the range.
        """
        if not self.contains(x):
            raise ComponentValueError(f"{name} must lie in {self.text} (got {shown(x)})")
        return real_float(x)


def json_safe(doc: Any) -> Any:
    """A copy of a JSON-ready document with every non-finite float replaced by ``None``.

    numpy scalars become Python numbers and arrays lists, so that
    ``json.dumps(json_safe(doc), allow_nan=False)`` always writes valid JSON
    (bare ``NaN`` or ``Infinity`` is not JSON). The meaning of ``null`` is the
    document's to state (in the command line: "not a finite number here").
    """
    if isinstance(doc, bool | str | None.__class__):
        return doc
    if isinstance(doc, np.bool_):
        return bool(doc)
    if isinstance(doc, float | np.floating):
        x = float(doc)
        return x if math.isfinite(x) else None
    if isinstance(doc, int | np.integer):
        return int(doc)
    if isinstance(doc, Mapping):
        return {k: json_safe(v) for k, v in doc.items()}
    if isinstance(doc, list | tuple | np.ndarray):
        return [json_safe(v) for v in doc]
    return doc
