"""Standard component values: the E-series of IEC 60063.

IEC 60063:2015 ("Preferred number series for resistors and capacitors")
defines seven series, E3 to E192.  Series ``En`` has ``n`` values per decade,
spaced roughly evenly on a logarithmic scale, i.e. close to
``10 ** (i / n)`` for ``i = 0 .. n-1``:

* E3, E6, E12 and E24 have two significant figures and keep the historical
  values (2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2) that differ from the
  rounded ``10 ** (i / n)``;
* E48, E96 and E192 have three significant figures and are the rounded
  ``10 ** (i / n)``, with one exception: E192 lists 9.20 where rounding
  ``10 ** (185 / 192) = 9.1948...`` gives 9.19.

The tables here hold the decade mantissas in ``[1, 10)``.  Every function
that takes a component value works in SI base units (ohm, farad, henry) and
in any decade.  "Nearest" is always meant in the logarithmic sense: the
standard value ``x`` that minimises ``|ln(x / value)|``, which is the
relative-error sense that matters for component tolerances.

Values must be finite and lie in ``[1e-300, 1e300]`` (far outside any real
part, but it keeps every standard value that the functions return a normal
float).
"""

from __future__ import annotations

import math
import numbers
from bisect import bisect_right
from dataclasses import dataclass

from ..errors import ComponentValueError, SynthesisError

__all__ = [
    "SERIES_NAMES",
    "Combination",
    "series_values",
    "nearest",
    "neighbours",
    "is_standard",
    "series_of",
    "best_combination",
    "snap",
]

#: The series names, coarsest first.
SERIES_NAMES: tuple[str, ...] = ("E3", "E6", "E12", "E24", "E48", "E96", "E192")

#: Arrangements that :func:`best_combination` understands.
ARRANGEMENTS: tuple[str, ...] = ("single", "series", "parallel")

# --- the tables (IEC 60063:2015) --------------------------------------------------------

_E3 = (1.0, 2.2, 4.7)

_E6 = (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)

_E12 = (1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2)

_E24 = (
    1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
    3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
)  # fmt: skip

_E48 = (
    1.00, 1.05, 1.10, 1.15, 1.21, 1.27, 1.33, 1.40, 1.47, 1.54, 1.62, 1.69,
    1.78, 1.87, 1.96, 2.05, 2.15, 2.26, 2.37, 2.49, 2.61, 2.74, 2.87, 3.01,
    3.16, 3.32, 3.48, 3.65, 3.83, 4.02, 4.22, 4.42, 4.64, 4.87, 5.11, 5.36,
    5.62, 5.90, 6.19, 6.49, 6.81, 7.15, 7.50, 7.87, 8.25, 8.66, 9.09, 9.53,
)  # fmt: skip

_E96 = (
    1.00, 1.02, 1.05, 1.07, 1.10, 1.13, 1.15, 1.18, 1.21, 1.24, 1.27, 1.30,
    1.33, 1.37, 1.40, 1.43, 1.47, 1.50, 1.54, 1.58, 1.62, 1.65, 1.69, 1.74,
    1.78, 1.82, 1.87, 1.91, 1.96, 2.00, 2.05, 2.10, 2.15, 2.21, 2.26, 2.32,
    2.37, 2.43, 2.49, 2.55, 2.61, 2.67, 2.74, 2.80, 2.87, 2.94, 3.01, 3.09,
    3.16, 3.24, 3.32, 3.40, 3.48, 3.57, 3.65, 3.74, 3.83, 3.92, 4.02, 4.12,
    4.22, 4.32, 4.42, 4.53, 4.64, 4.75, 4.87, 4.99, 5.11, 5.23, 5.36, 5.49,
    5.62, 5.76, 5.90, 6.04, 6.19, 6.34, 6.49, 6.65, 6.81, 6.98, 7.15, 7.32,
    7.50, 7.68, 7.87, 8.06, 8.25, 8.45, 8.66, 8.87, 9.09, 9.31, 9.53, 9.76,
)  # fmt: skip

_E192 = (
    1.00, 1.01, 1.02, 1.04, 1.05, 1.06, 1.07, 1.09, 1.10, 1.11, 1.13, 1.14,
    1.15, 1.17, 1.18, 1.20, 1.21, 1.23, 1.24, 1.26, 1.27, 1.29, 1.30, 1.32,
    1.33, 1.35, 1.37, 1.38, 1.40, 1.42, 1.43, 1.45, 1.47, 1.49, 1.50, 1.52,
    1.54, 1.56, 1.58, 1.60, 1.62, 1.64, 1.65, 1.67, 1.69, 1.72, 1.74, 1.76,
    1.78, 1.80, 1.82, 1.84, 1.87, 1.89, 1.91, 1.93, 1.96, 1.98, 2.00, 2.03,
    2.05, 2.08, 2.10, 2.13, 2.15, 2.18, 2.21, 2.23, 2.26, 2.29, 2.32, 2.34,
    2.37, 2.40, 2.43, 2.46, 2.49, 2.52, 2.55, 2.58, 2.61, 2.64, 2.67, 2.71,
    2.74, 2.77, 2.80, 2.84, 2.87, 2.91, 2.94, 2.98, 3.01, 3.05, 3.09, 3.12,
    3.16, 3.20, 3.24, 3.28, 3.32, 3.36, 3.40, 3.44, 3.48, 3.52, 3.57, 3.61,
    3.65, 3.70, 3.74, 3.79, 3.83, 3.88, 3.92, 3.97, 4.02, 4.07, 4.12, 4.17,
    4.22, 4.27, 4.32, 4.37, 4.42, 4.48, 4.53, 4.59, 4.64, 4.70, 4.75, 4.81,
    4.87, 4.93, 4.99, 5.05, 5.11, 5.17, 5.23, 5.30, 5.36, 5.42, 5.49, 5.56,
    5.62, 5.69, 5.76, 5.83, 5.90, 5.97, 6.04, 6.12, 6.19, 6.26, 6.34, 6.42,
    6.49, 6.57, 6.65, 6.73, 6.81, 6.90, 6.98, 7.06, 7.15, 7.23, 7.32, 7.41,
    7.50, 7.59, 7.68, 7.77, 7.87, 7.96, 8.06, 8.16, 8.25, 8.35, 8.45, 8.56,
    8.66, 8.76, 8.87, 8.98, 9.09, 9.20, 9.31, 9.42, 9.53, 9.65, 9.76, 9.88,
)  # fmt: skip

_TABLES: dict[str, tuple[float, ...]] = {
    "E3": _E3,
    "E6": _E6,
    "E12": _E12,
    "E24": _E24,
    "E48": _E48,
    "E96": _E96,
    "E192": _E192,
}

# Mantissas as exact integers in hundredths (1.0 -> 100, 9.53 -> 953); every table has at
# most three significant figures, so building a value as ``code * 10**(e - 2)`` with exact
# integer arithmetic gives the correctly rounded float (4.7k is exactly ``4700.0``).
_CODES: dict[str, tuple[int, ...]] = {
    name: tuple(round(m * 100) for m in table) for name, table in _TABLES.items()
}

#: Smallest and largest value accepted (SI base units).
_MIN_VALUE = 1e-300
_MAX_VALUE = 1e300

#: Range of the intermediate values (complements) searched by best_combination; wider than
#: the accepted range so that targets at its ends still find pairs, and still far from the
#: float limits so that every standard value built there is a normal float.
_INNER_MIN = 1e-306
_INNER_MAX = 1e306

#: Relative distance under which :func:`neighbours` treats a value as *at* a standard value.
_AT_REL_TOL = 1e-9

#: Log-error margin under which two candidates count as equally good (earlier one kept).
_TIE_LOG = 1e-12


# --- helpers ----------------------------------------------------------------------------


def _check_series(series: object) -> str:
    """Return the canonical series name, or raise :class:`ComponentValueError`."""
    if isinstance(series, str):
        key = series.strip().upper()
        if key in _TABLES:
            return key
    raise ComponentValueError(
        f"series={series!r} is not an E-series; expected one of {', '.join(SERIES_NAMES)}"
    )


def _check_value(value: object, name: str) -> float:
    """Return ``value`` as a float, or raise if it is not a usable component value."""
    if isinstance(value, bool) or not isinstance(value, numbers.Real):
        raise ComponentValueError(
            f"{name}={value!r} is not a number; expected a positive finite value in SI base "
            "units (parse text such as '4k7' with loopcraft.model.values.parse_value first)"
        )
    x = float(value)
    if not math.isfinite(x) or x <= 0.0:
        raise ComponentValueError(f"{name}={value!r}; expected a positive finite value")
    if not _MIN_VALUE <= x <= _MAX_VALUE:
        raise ComponentValueError(
            f"{name}={value!r} is outside the supported range; expected a value in "
            f"[{_MIN_VALUE:g}, {_MAX_VALUE:g}]"
        )
    return x


def _make(code: int, exponent: int) -> float:
    """Return ``code / 100 * 10**exponent`` correctly rounded to a float."""
    k = exponent - 2
    if k >= 0:
        return float(code * 10**k)
    return code / 10**-k


def _decade_values(codes: tuple[int, ...], exponent: int) -> list[float]:
    """Return the standard values of one decade, ``[10**exponent, 10**(exponent+1))``."""
    return [_make(c, exponent) for c in codes]


def _bracket(x: float, series: str, rel_tol: float) -> tuple[float, float]:
    """Return ``(lo, hi)``: standard values with ``lo <= x * (1 + rel_tol) < hi``.

    ``x`` must be a positive finite float in the supported range.
    """
    codes = _CODES[series]
    table = _TABLES[series]
    exponent = math.floor(math.log10(x))
    mantissa = x / 10.0**exponent if exponent >= 0 else x * 10.0**-exponent
    # log10 and the scaling can be off by an ulp near a decade boundary; renormalise.
    if mantissa * (1.0 + rel_tol) >= 10.0:
        exponent += 1
        mantissa /= 10.0
    elif mantissa < 1.0:
        exponent -= 1
        mantissa *= 10.0
    i = bisect_right(table, mantissa * (1.0 + rel_tol))
    if i == 0:  # only reachable if the mantissa fell below 1.0 after rounding
        lo = _make(codes[-1], exponent - 1)
    else:
        lo = _make(codes[i - 1], exponent)
    hi = _make(codes[0], exponent + 1) if i == len(codes) else _make(codes[i], exponent)
    # The mantissa carries rounding error of a few ulps; fix the bracket on the real values.
    threshold = x * (1.0 + rel_tol)
    if lo > threshold:
        hi = lo
        lo = _bracket_below(lo, series)
    elif hi <= threshold:
        lo = hi
        hi = _bracket_above(hi, series)
    return lo, hi


def _bracket_below(v: float, series: str) -> float:
    """Return the standard value just below the standard value ``v``."""
    lo, _ = _bracket(v * (1.0 - 1e-6), series, 0.0)
    return lo


def _bracket_above(v: float, series: str) -> float:
    """Return the standard value just above the standard value ``v``."""
    _, hi = _bracket(v * (1.0 + 1e-6), series, 0.0)
    return hi


def _log_error(x: float, target: float) -> float:
    """Return ``|ln(x / target)|``."""
    return abs(math.log(x / target))


def _nearest(x: float, series: str) -> float:
    """Nearest standard value of an already validated ``x`` in canonical ``series``."""
    lo, hi = _bracket(x, series, 0.0)
    # Ties (x exactly at the geometric mean) go to the lower value.
    return lo if _log_error(lo, x) <= _log_error(hi, x) else hi


# --- public API -------------------------------------------------------------------------


def series_values(name: str) -> tuple[float, ...]:
    """Return the decade mantissas of an E-series, as listed in IEC 60063:2015.

    Parameters
    ----------
    name : str
        Series name, one of :data:`SERIES_NAMES` (case is ignored: ``"e24"`` works).

    Returns
    -------
    tuple of float
        The ``n`` mantissas in ``[1, 10)``, increasing (dimensionless).

    Raises
    ------
    ComponentValueError
        If ``name`` is not an E-series name.

    Examples
    --------
    >>> series_values("E6")
    (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)
    """
    return _TABLES[_check_series(name)]


def nearest(value: float, series: str) -> float:
    """Return the standard value nearest to ``value`` in the logarithmic sense.

    The result minimises ``|ln(x / value)|`` over all values ``x`` of the series in
    all decades; so 7 kΩ snaps to 10 kΩ in E3 (ratio 1.43) rather than to 4.7 kΩ
    (ratio 1.49), although 4.7 kΩ is closer in ohms.  An exact tie goes to the
    lower value.

    Parameters
    ----------
    value : float
        Component value in SI base units (Ω, F or H), positive and finite.
    series : str
        Series name, one of :data:`SERIES_NAMES`.

    Returns
    -------
    float
        The nearest standard value, in the same unit as ``value``.

    Raises
    ------
    ComponentValueError
        For an unknown series or a value that is not positive and finite.
    """
    return snap(value, series, name="value")


def snap(value: float, series: str, *, name: str = "value") -> float:
    """Snap a value to its nearest standard value; like :func:`nearest`, with a name.

    Parameters
    ----------
    value : float
        Component value in SI base units (Ω, F or H), positive and finite.
    series : str
        Series name, one of :data:`SERIES_NAMES`.
    name : str, optional
        What the value is (for instance a designator such as ``"R3"``); used in
        error messages.

    Returns
    -------
    float
        The nearest standard value (logarithmic sense), same unit as ``value``.

    Raises
    ------
    ComponentValueError
        For an unknown series, or a value that is not a positive finite number
        (the message names ``name``).
    """
    canon = _check_series(series)
    x = _check_value(value, name)
    return _nearest(x, canon)


def neighbours(value: float, series: str) -> tuple[float, float]:
    """Return the standard values just below (or at) and just above ``value``.

    Parameters
    ----------
    value : float
        Component value in SI base units (Ω, F or H), positive and finite.
    series : str
        Series name, one of :data:`SERIES_NAMES`.

    Returns
    -------
    tuple of float
        ``(lo, hi)`` with ``lo <= value < hi``, both standard values, same unit as
        ``value``, and no standard value strictly between them.  A value within a
        relative ``1e-9`` of a standard value counts as *at* it (so
        ``4.7e3 * (1 - 1e-12)`` gives ``(4700.0, 5100.0)`` in E24).

    Raises
    ------
    ComponentValueError
        For an unknown series or a value that is not positive and finite.
    """
    canon = _check_series(series)
    x = _check_value(value, "value")
    return _bracket(x, canon, _AT_REL_TOL)


def is_standard(value: float, series: str, rel_tol: float = 1e-9) -> bool:
    """Tell whether ``value`` is a value of the series (in any decade).

    Parameters
    ----------
    value : float
        Component value in SI base units (Ω, F or H), positive and finite.
    series : str
        Series name, one of :data:`SERIES_NAMES`.
    rel_tol : float, optional
        Relative tolerance (dimensionless, ``0 <= rel_tol < 0.001``) of the match,
        as in :func:`math.isclose`.

    Returns
    -------
    bool
        True if the nearest standard value is within ``rel_tol`` of ``value``.

    Raises
    ------
    ComponentValueError
        For an unknown series, a value that is not positive and finite, or a
        tolerance out of range.
    """
    canon = _check_series(series)
    x = _check_value(value, "value")
    if (
        isinstance(rel_tol, bool)
        or not isinstance(rel_tol, numbers.Real)
        or not 0.0 <= float(rel_tol) < 1e-3
    ):
        raise ComponentValueError(
            f"rel_tol={rel_tol!r}; expected a relative tolerance in [0, 0.001)"
        )
    return math.isclose(_nearest(x, canon), x, rel_tol=float(rel_tol), abs_tol=0.0)


def series_of(value: float) -> str | None:
    """Return the coarsest E-series that contains ``value``.

    Parameters
    ----------
    value : float
        Component value in SI base units (Ω, F or H), positive and finite.

    Returns
    -------
    str or None
        The first name in :data:`SERIES_NAMES` order (E3, E6, ..., E192) whose
        table holds the value's mantissa (relative tolerance ``1e-9``), or None if
        no series does.  For example 4.7 kΩ -> ``"E3"``, 5.1 kΩ -> ``"E24"``,
        1.05 kΩ -> ``"E48"``, 9.2 kΩ -> ``"E192"``, 4.8 kΩ -> None.  Note that the
        series are not all nested: E48 does not contain E24 (5.1 is in E24 only,
        5.11 in E48).

    Raises
    ------
    ComponentValueError
        For a value that is not positive and finite.
    """
    x = _check_value(value, "value")
    for name in SERIES_NAMES:
        if math.isclose(_nearest(x, name), x, rel_tol=_AT_REL_TOL, abs_tol=0.0):
            return name
    return None


@dataclass(frozen=True)
class Combination:
    """A standard-value realisation of a target value.

    Parameters
    ----------
    parts : tuple of float
        The standard values used, SI base units (Ω, F or H), largest first; one
        part for ``"single"``, two otherwise.
    arrangement : str
        ``"single"``, ``"series"`` (values add, e.g. resistors in series) or
        ``"parallel"`` (reciprocals add, e.g. resistors in parallel).
    value : float
        The value of the arrangement, same unit as ``parts``.
    error_rel : float
        Signed relative error ``value / target - 1`` (dimensionless).
    """

    parts: tuple[float, ...]
    arrangement: str
    value: float
    error_rel: float

    def __post_init__(self) -> None:
        expected = 1 if self.arrangement == "single" else 2
        if self.arrangement not in ARRANGEMENTS:
            raise ComponentValueError(
                f"arrangement={self.arrangement!r}; expected one of {', '.join(ARRANGEMENTS)}"
            )
        if len(self.parts) != expected:
            raise ComponentValueError(
                f"parts={self.parts!r}; a {self.arrangement!r} combination has {expected} part(s)"
            )


def _check_allow(allow: object) -> tuple[str, ...]:
    """Validate the ``allow`` argument of :func:`best_combination`."""
    if isinstance(allow, str) or not isinstance(allow, (tuple, list, set, frozenset)):
        raise ComponentValueError(f"allow={allow!r}; expected a tuple drawn from {ARRANGEMENTS!r}")
    items = tuple(allow)
    bad = [a for a in items if a not in ARRANGEMENTS]
    if bad or not items:
        raise ComponentValueError(
            f"allow={allow!r}; expected a non-empty tuple drawn from {ARRANGEMENTS!r}"
        )
    return items


def best_combination(
    target: float,
    series: str,
    *,
    allow: tuple[str, ...] = ("single", "series", "parallel"),
) -> Combination:
    """Return the best single part or two-part combination of standard values.

    "Best" means the smallest logarithmic error ``|ln(value / target)|``.  In a
    two-part series arrangement both parts are smaller than the target, and in a
    parallel arrangement both are larger (a series pair with a part at or above
    the target is always worse than the single nearest value, and likewise for
    parallel).  On equal error (within ``1e-12`` in ``ln``) a single part is
    preferred over a series pair, a series pair over a parallel one, and within
    one arrangement the pair whose parts are closer in value.

    The search is exhaustive over the pairs that can win but does not scan all
    pairs: for a series pair the larger part lies in ``[target/10, target)``
    (there is always a pair of equal parts within the largest step ratio of the
    series, 2.2, of the target), and for each such part only the two standard
    values that bracket the exact complement ``target - a`` can be optimal, since
    the error is unimodal in the second part.  The parallel case is the same in
    conductance.  The cost is ``O(n log n)`` for a series of ``n`` values per
    decade.

    The ratio between the two parts is not limited: for a target just off a
    standard value the best pair may be that value plus a much smaller trim part
    (10.05 kΩ in E24 -> 10 kΩ + 51 Ω), or in parallel with a much larger one.
    Whether such a gain matters against the parts' tolerance is the caller's
    call; compare ``error_rel`` with that of ``allow=("single",)``.

    Parameters
    ----------
    target : float
        Wanted value in SI base units (Ω, F or H), positive and finite.  For
        capacitors, note that ``"series"`` here means values add (capacitors in
        parallel).
    series : str
        Series name, one of :data:`SERIES_NAMES`.
    allow : tuple of str, optional
        Arrangements to consider, drawn from ``"single"``, ``"series"`` and
        ``"parallel"``.

    Returns
    -------
    Combination
        The best arrangement, its parts (largest first), its value and its signed
        relative error.

    Raises
    ------
    ComponentValueError
        For an unknown series, a bad target or a bad ``allow``.
    """
    canon = _check_series(series)
    t = _check_value(target, "target")
    arrangements = _check_allow(allow)

    best: tuple[float, tuple[float, ...], str, float] | None = None

    def consider(parts: tuple[float, ...], arrangement: str, value: float) -> None:
        # Candidates arrive single first, then series, then parallel: a later
        # arrangement only wins on a strictly smaller error; within one arrangement a
        # tie goes to the pair whose parts are closer to each other.
        nonlocal best
        err = _log_error(value, t)
        if best is None or err < best[0] - _TIE_LOG:
            best = (err, parts, arrangement, value)
        elif (
            err <= best[0] + _TIE_LOG
            and arrangement == best[2]
            and parts[0] / parts[-1] < best[1][0] / best[1][-1]
        ):
            best = (err, parts, arrangement, value)

    if "single" in arrangements:
        v = _nearest(t, canon)
        consider((v,), "single", v)

    codes = _CODES[canon]
    e = math.floor(math.log10(t))

    if "series" in arrangements:
        for exponent in (e - 2, e - 1, e):
            for a in _decade_values(codes, exponent):
                if not t / 10.0 <= a < t:
                    continue
                rest = t - a
                if rest < _INNER_MIN:
                    continue
                for b in _bracket(rest, canon, 0.0):
                    if b < t:
                        consider((max(a, b), min(a, b)), "series", a + b)

    if "parallel" in arrangements:
        for exponent in (e, e + 1, e + 2):
            for a in _decade_values(codes, exponent):
                if not t < a <= 10.0 * t:
                    continue
                rest = t / (1.0 - t / a)  # a t / (a - t) without under/overflow
                if not math.isfinite(rest) or rest > _INNER_MAX:
                    continue
                for b in _bracket(rest, canon, 0.0):
                    if b > t:
                        consider((max(a, b), min(a, b)), "parallel", a / (1.0 + a / b))

    if best is None:  # not reachable: every arrangement always has a candidate
        raise SynthesisError(
            f"no combination of {canon} values found for target={target!r} with "
            f"allow={arrangements!r}"
        )
    _, parts, arrangement, value = best
    return Combination(parts=parts, arrangement=arrangement, value=value, error_rel=value / t - 1)
