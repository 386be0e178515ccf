"""Component values: parsing engineering notation and formatting it back.

Accepted forms (all exact; anything else is rejected, never truncated):

* plain numbers in SI base units: ``470``, ``1e-9``, ``0.0047``;
* a number with an SI prefix and an optional unit: ``10k``, ``4.7 kΩ``,
  ``10n``, ``2.2u``, ``2.2µ``, ``100pF``, ``1M`` (mega), ``1m`` (milli),
  ``1meg`` (mega, as in many netlists), ``3.3 mH``, ``10 kohm``;
* the IEC 60062 letter-for-decimal codes: ``4k7`` (4.7 k), ``2n2``,
  ``R47`` (0.47), ``4R7`` (4.7), ``1M5`` (1.5 M).

Values must be finite, positive and within 1e-18 .. 1e15 of the base unit
(ohm, farad, henry). Text is at most 64 characters long; a number of any size
(``10**400`` included) is refused with a :class:`ComponentValueError`, never
an ``OverflowError``.
"""

from __future__ import annotations

import math
import re
from numbers import Real

from .._scalars import MAX_NUMBER_TEXT, real_float, shown
from ..errors import ComponentValueError

__all__ = ["parse_value", "format_value", "unit_for", "MIN_VALUE", "MAX_VALUE"]

#: Smallest and largest accepted values, in SI base units.
MIN_VALUE = 1e-18
MAX_VALUE = 1e15

_PREFIX = {
    "a": -18,
    "f": -15,
    "p": -12,
    "n": -9,
    "u": -6,
    "µ": -6,
    "μ": -6,
    "m": -3,
    "k": 3,
    "K": 3,
    "M": 6,
    "meg": 6,
    "Meg": 6,
    "MEG": 6,
    "G": 9,
    "T": 12,
}
_UNITS = {
    "resistor": ("Ω", "ω", "ohm", "ohms", "Ohm", "Ohms"),
    "capacitor": ("F",),
    "inductor": ("H",),
}
_UNIT_OF = {"resistor": "Ω", "capacitor": "F", "inductor": "H"}
_KIND_OF_UNIT = {u: k for k, us in _UNITS.items() for u in us}

_NUMBER = re.compile(r"(?P<num>(?:\d+\.?\d*|\.\d+)(?:[eE][+-]?\d+)?)")
# IEC 60062 code: digits, a multiplier letter standing for the decimal point, digits.
_CODE = re.compile(r"(?P<int>\d*)(?P<mark>[RrKkMGTpnuµμmf])(?P<frac>\d+)")
_PREFIX_ALT = "meg|Meg|MEG|[afpnuµμmkKMGT]"
_UNIT_ALT = "ohms|ohm|Ohms|Ohm|Ω|ω|F|H"
_SUFFIX = re.compile(rf"\s*(?P<prefix>{_PREFIX_ALT})?\s*(?P<unit>{_UNIT_ALT})?\s*")
_CODE_SUFFIX = re.compile(rf"\s*(?P<unit>{_UNIT_ALT})?\s*")


def unit_for(kind: str | None) -> str:
    """Return the display unit for an element kind (``"Ω"``, ``"F"``, ``"H"``, or ``""``)."""
    return _UNIT_OF.get(kind or "", "")


def _fail(name: str, text: str, pos: int, why: str) -> ComponentValueError:
    caret = " " * pos + "^"
    return ComponentValueError(f"{name}: cannot read {text!r} as a value: {why}\n  {text}\n  {caret}")


def _check_unit(name: str, text: str, unit: str | None, kind: str | None, pos: int) -> None:
    if unit is None or kind is None:
        return
    if _KIND_OF_UNIT.get(unit) != kind:
        raise _fail(name, text, pos, f"unit {unit!r} does not fit a {kind} (expected {unit_for(kind)!r})")


def _check_range(name: str, x: float, text: object) -> float:
    if math.isnan(x) or (math.isinf(x) and isinstance(text, float | str)):
        raise ComponentValueError(f"{name}: value must be finite (got {shown(text)})")
    if x <= 0:
        raise ComponentValueError(f"{name}: value must be > 0 (got {shown(text)})")
    if not (MIN_VALUE <= x <= MAX_VALUE):
        raise ComponentValueError(
            f"{name}: value {shown(text)} is outside the accepted range {MIN_VALUE:g} .. {MAX_VALUE:g} "
            "of the base unit"
        )
    return x


def _parse_text(text: str, name: str, kind: str | None) -> float:
    s = text.strip()
    lead = len(text) - len(text.lstrip())
    if not s:
        raise ComponentValueError(f"{name}: value is empty (expected e.g. '10k', '4k7', '2.2n')")
    if s[0] in "+-":
        raise _fail(name, text, lead, "a component value has no sign; it must be > 0")
    # IEC 60062 letter-for-decimal code such as 4k7, R47, 1M5.
    m = _CODE.match(s)
    if m and (m.group("int") or m.group("mark") in "Rr"):
        rest = _CODE_SUFFIX.fullmatch(s, m.end())
        if rest is not None:
            mark = m.group("mark")
            if mark in "Rr":
                exp = 0
                if kind not in (None, "resistor"):
                    raise _fail(
                        name, text, lead + m.start("mark"), f"'R' as a decimal mark is for resistors, not a {kind}"
                    )
            else:
                exp = _PREFIX[mark]
            unit = rest.group("unit")
            _check_unit(name, text, unit, kind, lead + rest.start("unit") if unit else 0)
            digits = f"{m.group('int') or '0'}.{m.group('frac')}e{exp}"
            return float(digits)
    m = _NUMBER.match(s)
    if m is None:
        raise _fail(name, text, lead, "expected a number such as 10, 4.7, 1e-9 or a code such as 4k7")
    rest = _SUFFIX.fullmatch(s, m.end())
    if rest is None:
        # Point at the first character that is neither part of the number nor a known suffix.
        partial = _SUFFIX.match(s, m.end())
        pos = partial.end() if partial else m.end()
        raise _fail(
            name,
            text,
            lead + pos,
            "unexpected character (expected an SI prefix a f p n u µ m k M G T and an optional unit Ω/F/H)",
        )
    num = m.group("num")
    prefix = rest.group("prefix")
    unit = rest.group("unit")
    if prefix is not None and ("e" in num or "E" in num):
        raise _fail(name, text, lead + rest.start("prefix"), "use an exponent or an SI prefix, not both")
    if prefix == "m" and unit is None and kind is None:
        pass  # milli, as documented (mega is 'M' or 'meg')
    _check_unit(name, text, unit, kind, lead + (rest.start("unit") if unit else 0))
    exp = _PREFIX[prefix] if prefix else 0
    return float(f"{num}e{exp}") if exp else float(num)


def parse_value(value: str | float | int, *, name: str = "value", kind: str | None = None) -> float:
    """Parse a component value into SI base units.

    Parameters
    ----------
    value : str or float
        Engineering text (``"4k7"``, ``"2.2 nF"``) or a number already in SI
        base units (ohms, farads, henries).
    name : str
        The element or field name, used in error messages.
    kind : {"resistor", "capacitor", "inductor"} or None
        When given, a unit in the text must fit it (``"10nF"`` for a resistor is an error).

    Returns
    -------
    float
        The value in ohms, farads or henries.

    Raises
    ------
    ComponentValueError
        Malformed text (with a caret under the bad character), a non-positive,
        non-finite or out-of-range value; the message names ``name``.

    Examples
    --------
    >>> parse_value("4k7")
    4700.0
    >>> parse_value("2.2 nF", kind="capacitor")
    2.2e-09
    """
    if isinstance(value, bool):
        raise ComponentValueError(f"{name}: expected a number or text, got a boolean {value!r}")
    if isinstance(value, Real):
        return _check_range(name, real_float(value), value)
    if not isinstance(value, str):
        raise ComponentValueError(
            f"{name}: expected a number or text such as '10k', got {type(value).__name__} {shown(value)}"
        )
    if len(value) > MAX_NUMBER_TEXT:
        raise ComponentValueError(
            f"{name}: text {shown(value)} is too long for a value (at most {MAX_NUMBER_TEXT} characters)"
        )
    return _check_range(name, _parse_text(value, name, kind), value)


_ENG = [
    (-18, "a"),
    (-15, "f"),
    (-12, "p"),
    (-9, "n"),
    (-6, "µ"),
    (-3, "m"),
    (0, ""),
    (3, "k"),
    (6, "M"),
    (9, "G"),
    (12, "T"),
]


def format_value(x: float, unit: str = "", *, digits: int = 3) -> str:
    """Format a value in engineering notation, e.g. ``4.7 kΩ`` or ``3.3 nF``.

    Parameters
    ----------
    x : float
        Value in SI base units.
    unit : str
        Unit symbol appended after the prefix (``"Ω"``, ``"F"``, ``"H"``, ``"Hz"``).
    digits : int
        Significant digits (trailing zeros are dropped).

    Examples
    --------
    >>> format_value(4700, "Ω")
    '4.7 kΩ'
    >>> format_value(3.3e-9, "F")
    '3.3 nF'
    """
    if not math.isfinite(x):
        return f"{x} {unit}".strip()
    if x == 0:
        return f"0 {unit}".strip()
    sign = "-" if x < 0 else ""
    a = abs(x)
    # Round first so 999.96 becomes 1 k rather than 1000.
    a = float(f"{a:.{digits}g}")
    exp3 = int(math.floor(math.log10(a) / 3.0)) * 3
    exp3 = max(-18, min(12, exp3))
    prefix = dict(_ENG)[exp3]
    mant = a / 10.0**exp3
    text = f"{mant:.{digits}g}"
    if "e" in text:
        text = f"{mant:.{max(digits - 1, 0)}f}".rstrip("0").rstrip(".")
    return f"{sign}{text} {prefix}{unit}".rstrip()
