"""Tests of loopcraft.parts.eseries against IEC 60063 and hand / brute-force checks.

Reference for the tables: IEC 60063:2015, "Preferred number series for resistors
and capacitors" (International Electrotechnical Commission, 2015), cited below as
IEC 60063.  The list of historical E24 values and the single E192 exception are
from memory of that standard; the E48-E192 rule (rounding of 10^(i/n) to three
significant figures) is the construction the standard describes.
"""

from __future__ import annotations

import itertools
import math

import mpmath
import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from loopcraft.errors import ComponentValueError, LoopcraftError
from loopcraft.parts.eseries import (
    SERIES_NAMES,
    Combination,
    best_combination,
    is_standard,
    nearest,
    neighbours,
    series_of,
    series_values,
    snap,
)

SIZES = {"E3": 3, "E6": 6, "E12": 12, "E24": 24, "E48": 48, "E96": 96, "E192": 192}

# Assigned tolerances, IEC 60063 (E3 carries "above 20 %"; 40 % used here).
TOLERANCE = {
    "E3": 0.40,
    "E6": 0.20,
    "E12": 0.10,
    "E24": 0.05,
    "E48": 0.02,
    "E96": 0.01,
    "E192": 0.005,
}


def ideal(i: int, n: int) -> mpmath.mpf:
    """10^(i/n) to 30 digits (mpmath), independent of float pow."""
    with mpmath.workdps(30):
        return mpmath.power(10, mpmath.mpf(i) / n)


def std_values(series: str, exponents: range) -> list[float]:
    """Standard values built by parsing decimal text (an independent float path)."""
    return [float(f"{m:.2f}e{k}") for k in exponents for m in series_values(series)]


# --- the tables ------------------------------------------------------------------------


def test_series_names() -> None:
    # IEC 60063: the seven series E3 ... E192.
    assert SERIES_NAMES == ("E3", "E6", "E12", "E24", "E48", "E96", "E192")


@pytest.mark.parametrize("name", SERIES_NAMES)
def test_table_shape(name: str) -> None:
    # IEC 60063: series En has n values per decade, in [1, 10), increasing.
    values = series_values(name)
    assert isinstance(values, tuple)
    assert len(values) == SIZES[name]
    assert all(1.0 <= v < 10.0 for v in values)
    assert all(a < b for a, b in itertools.pairwise(values))
    assert values[0] == 1.0


@pytest.mark.parametrize("name", SERIES_NAMES)
def test_table_close_to_geometric_progression(name: str) -> None:
    # IEC 60063: En approximates 10^(i/n); each value lies inside the series'
    # tolerance band around its ideal value and, more strictly, nearer to its own
    # ideal than to either neighbour's (less than half a step in log).
    n = SIZES[name]
    half_step = math.log(10) / (2 * n)
    for i, v in enumerate(series_values(name)):
        x = float(ideal(i, n))
        assert abs(v / x - 1) < TOLERANCE[name], (name, i, v, x)
        assert abs(math.log(v / x)) < half_step, (name, i, v, x)


def test_e24_exact_values() -> None:
    # IEC 60063, E24 table (from memory; the familiar 5 % resistor values).
    assert series_values("E24") == (
        1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
        3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1,
    )  # fmt: skip
    assert series_values("E12") == (
        1.0, 1.2, 1.5, 1.8, 2.2, 2.7, 3.3, 3.9, 4.7, 5.6, 6.8, 8.2,
    )  # fmt: skip
    assert series_values("E6") == (1.0, 1.5, 2.2, 3.3, 4.7, 6.8)
    assert series_values("E3") == (1.0, 2.2, 4.7)


def test_e24_historical_values_differ_from_rounding() -> None:
    # IEC 60063 keeps historical values for E24 that are not 10^(i/24) rounded to
    # two figures: 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7 and 8.2 (from memory).
    expected = {2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 8.2}
    differing = set()
    for i, v in enumerate(series_values("E24")):
        rounded = int(mpmath.nint(ideal(i, 24) * 10)) / 10
        if rounded != v:
            differing.add(v)
    assert differing == expected


@pytest.mark.parametrize("name", ["E48", "E96", "E192"])
def test_e48_to_e192_are_rounded_progression(name: str) -> None:
    # IEC 60063: E48, E96 and E192 are 10^(i/n) rounded to three significant
    # figures, except E192 which lists 9.20 (not 9.19) at i = 185.
    n = SIZES[name]
    exceptions = {("E192", 185): 920}
    for i, v in enumerate(series_values(name)):
        rounded = int(mpmath.nint(ideal(i, n) * 100))
        code = round(v * 100)
        assert abs(v * 100 - code) < 1e-9  # three significant figures
        assert code == exceptions.get((name, i), rounded), (name, i, v, rounded)


def test_e192_exception_is_real() -> None:
    # IEC 60063: 10^(185/192) = 9.1948... would round to 9.19, the table has 9.20.
    x = ideal(185, 192)
    assert 9.194 < x < 9.195
    assert 9.20 in series_values("E192")
    assert 9.19 not in series_values("E192")


def test_subsets() -> None:
    # IEC 60063: each series is every second value of the next finer one within
    # the two families E3 < E6 < E12 < E24 and E48 < E96 < E192.
    def sub(a: str, b: str) -> None:
        va, vb = series_values(a), series_values(b)
        assert set(va) <= set(vb)
        assert va == vb[::2]

    sub("E3", "E6")
    sub("E6", "E12")
    sub("E12", "E24")
    sub("E48", "E96")
    sub("E96", "E192")
    # ... but E24 is not part of E48 (common knowledge, e.g. 5.1 vs 5.11).
    assert not set(series_values("E24")) <= set(series_values("E48"))


def test_series_name_validation() -> None:
    assert series_values("e24") == series_values("E24")
    with pytest.raises(ComponentValueError) as exc:
        series_values("E25")
    msg = str(exc.value)
    assert "'E25'" in msg
    for name in SERIES_NAMES:
        assert name in msg
    with pytest.raises(ComponentValueError):
        nearest(1e3, "R10")
    with pytest.raises(ComponentValueError):
        series_values(24)  # type: ignore[arg-type]


# --- nearest / snap --------------------------------------------------------------------


def test_nearest_decade_boundary() -> None:
    # Hand: 9.6k lies between 9.1k and 10k of E24; ln(10/9.6) = 0.0408 is less than
    # ln(9.6/9.1) = 0.0535, so 10k (next decade) is nearest.
    assert math.log(10 / 9.6) < math.log(9.6 / 9.1)
    assert nearest(9.6e3, "E24") == 10e3
    # The decision point is the geometric mean sqrt(9.1k * 10k) = 9539.4 Ω.
    assert nearest(9.53e3, "E24") == 9.1e3
    assert nearest(9.55e3, "E24") == 10e3
    # Just under a decade in E192: 9.94 is nearer to 10.0 than to 9.88 (hand:
    # ln(10/9.94) = 0.0060 < ln(9.94/9.88) = 0.0061).
    assert nearest(9.94, "E192") == 10.0


def test_nearest_logarithmic_not_linear() -> None:
    # Hand: 7k in E3 lies between 4.7k and 10k.  Linearly 4.7k is nearer
    # (2.3k vs 3.0k); in ratio 10k is nearer (10/7 = 1.429 < 7/4.7 = 1.489).
    assert abs(7e3 - 4.7e3) < abs(10e3 - 7e3)
    assert 10 / 7 < 7 / 4.7
    assert nearest(7e3, "E3") == 10e3
    # Same in E24: 9.545k, linear midpoint of 9.1k..10k is 9.55k, geometric 9.539k.
    assert nearest(9.545e3, "E24") == 10e3


def test_nearest_tiny_and_huge() -> None:
    # 1 pF and 10 MΩ are standard in every series (mantissa 1.0).
    for name in SERIES_NAMES:
        assert nearest(1e-12, name) == 1e-12
        assert nearest(10e6, name) == 10e6
    # Hand: 1.05 pF in E24, geometric mean of 1.0 and 1.1 is 1.0488 -> 1.1 pF.
    assert nearest(1.05e-12, "E24") == 1.1e-12
    # Hand: 4.4 GΩ in E6: sqrt(3.3 * 4.7) = 3.938 -> 4.7 GΩ.
    assert nearest(4.4e9, "E6") == 4.7e9
    assert nearest(3.3e-15, "E12") == 3.3e-15


def test_nearest_exact_floats() -> None:
    # The results are the correctly rounded decimal values, e.g. exactly 4.7e3.
    assert nearest(4.69e3, "E12") == 4.7e3
    assert nearest(0.1 * 3, "E24") == 0.3
    assert nearest(2.21e-6, "E96") == 2.21e-6


@given(
    mantissa=st.floats(min_value=1.0, max_value=10.0, exclude_max=True),
    exponent=st.integers(min_value=-15, max_value=9),
    name=st.sampled_from(SERIES_NAMES),
)
@settings(max_examples=300, deadline=None)
def test_nearest_matches_brute_force(mantissa: float, exponent: int, name: str) -> None:
    # Brute force (common practice, no source): scan three decades for min |ln(x/v)|.
    value = mantissa * 10.0**exponent
    candidates = std_values(name, range(exponent - 1, exponent + 2))
    errors = [abs(math.log(c / value)) for c in candidates]
    best = min(errors)
    got = nearest(value, name)
    assert got in candidates
    assert abs(math.log(got / value)) <= best + 1e-12


def test_snap_names_the_value() -> None:
    assert snap(4.6e3, "E12", name="R3") == 4.7e3
    with pytest.raises(ComponentValueError, match="R3=-1.0"):
        snap(-1.0, "E12", name="R3")
    with pytest.raises(ComponentValueError, match="C2=nan"):
        snap(float("nan"), "E12", name="C2")
    with pytest.raises(ComponentValueError, match="R1='4k7'"):
        snap("4k7", "E12", name="R1")  # type: ignore[arg-type]


@pytest.mark.parametrize("bad", [0.0, -4.7e3, float("inf"), float("-inf"), float("nan"), True])
def test_bad_values(bad: float) -> None:
    for func in (nearest, neighbours, is_standard):
        with pytest.raises(ComponentValueError) as exc:
            func(bad, "E24")
        assert repr(bad) in str(exc.value)
        assert isinstance(exc.value, LoopcraftError)
    with pytest.raises(ComponentValueError):
        series_of(bad)
    with pytest.raises(ComponentValueError):
        best_combination(bad, "E24")


def test_numpy_scalars_accepted() -> None:
    assert nearest(np.float64(4.6e3), "E12") == 4.7e3
    assert nearest(np.int64(4600), "E12") == 4.7e3


# --- neighbours ------------------------------------------------------------------------


def test_neighbours_hand_cases() -> None:
    # E24 (IEC 60063): 5k lies between 4.7k and 5.1k; 9.5k between 9.1k and 10k.
    assert neighbours(5e3, "E24") == (4.7e3, 5.1e3)
    assert neighbours(9.5e3, "E24") == (9.1e3, 10e3)
    # At a standard value: that value and the next one.
    assert neighbours(4.7e3, "E24") == (4.7e3, 5.1e3)
    assert neighbours(4.7e3 * (1 - 1e-12), "E24") == (4.7e3, 5.1e3)
    assert neighbours(10e3, "E3") == (10e3, 22e3)
    assert neighbours(9.99e-9, "E6") == (6.8e-9, 10e-9)
    assert neighbours(9.9e3, "E192") == (9.88e3, 10e3)


@given(
    mantissa=st.floats(min_value=1.0, max_value=10.0, exclude_max=True),
    exponent=st.integers(min_value=-14, max_value=8),
    name=st.sampled_from(SERIES_NAMES),
)
@settings(max_examples=300, deadline=None)
def test_neighbours_bracket(mantissa: float, exponent: int, name: str) -> None:
    # Brute force: lo <= v < hi (up to the 1e-9 "at" tolerance) with no standard
    # value strictly between.
    value = mantissa * 10.0**exponent
    lo, hi = neighbours(value, name)
    candidates = std_values(name, range(exponent - 1, exponent + 3))
    assert lo in candidates and hi in candidates
    assert lo <= value * (1 + 1e-9) and value * (1 + 1e-9) < hi
    assert not any(lo < c < hi for c in candidates)


# --- is_standard / series_of -----------------------------------------------------------


def test_is_standard() -> None:
    # IEC 60063 tables: 4.7k in E3, 5.1k in E24 but not E12, 9.20 in E192 only.
    assert is_standard(4.7e3, "E3")
    assert is_standard(5.1e3, "E24")
    assert not is_standard(5.1e3, "E12")
    assert is_standard(9.2e3, "E192")
    assert not is_standard(9.2e3, "E96")
    assert not is_standard(9.19e3, "E192")
    assert is_standard(4.7e3 * (1 + 1e-12), "E12")
    assert not is_standard(4.71e3, "E12")
    assert is_standard(4.71e3, "E12", rel_tol=0.0) is False
    with pytest.raises(ComponentValueError, match="rel_tol"):
        is_standard(4.7e3, "E12", rel_tol=-1.0)
    with pytest.raises(ComponentValueError, match="rel_tol"):
        is_standard(4.7e3, "E12", rel_tol=0.5)


def test_series_of() -> None:
    # IEC 60063 tables, coarsest first.
    assert series_of(4.7e3) == "E3"
    assert series_of(68e-9) == "E6"
    assert series_of(8.2e3) == "E12"
    assert series_of(5.1e3) == "E24"
    assert series_of(1.05e3) == "E48"
    assert series_of(1.02e3) == "E96"
    assert series_of(9.2e3) == "E192"
    assert series_of(2.0) == "E24"  # 2.0 is E24 and also E96's 2.00
    assert series_of(4.8e3) is None
    assert series_of(9.19e3) is None


@pytest.mark.parametrize("name", SERIES_NAMES)
def test_series_of_every_table_value(name: str) -> None:
    # Every value of En belongs to En or a coarser series listed before it.
    for v in series_values(name):
        found = series_of(v * 1e3)
        assert found is not None
        assert SERIES_NAMES.index(found) <= SERIES_NAMES.index(name)
        assert is_standard(v * 1e3, found)


# --- best_combination ------------------------------------------------------------------


def test_best_combination_single_when_standard() -> None:
    # 15k is an E6 value (IEC 60063), so no pair can beat it.
    c = best_combination(15e3, "E6")
    assert c == Combination(parts=(15e3,), arrangement="single", value=15e3, error_rel=0.0)


def test_best_combination_14k_e12_by_hand() -> None:
    # Hand (E12 values from IEC 60063):
    #   single: 15k, +7.14 %
    #   series: 12k + 2.2k = 14.2k (+1.43 %), 12k + 1.8k = 13.8k (-1.43 %),
    #           10k + 3.9k = 13.9k (-0.714 %), 8.2k + 5.6k = 13.8k, 6.8k + 6.8k = 13.6k
    #   parallel: 15k || 220k = 15*220/235 = 14.0426k (+0.304 %),
    #             22k || 39k = 14.066k (+0.47 %), 15k || 180k = 13.846k (-1.1 %)
    c = best_combination(14e3, "E12")
    assert c.arrangement == "parallel"
    assert c.parts == (220e3, 15e3)
    assert c.value == pytest.approx(15e3 * 220e3 / 235e3, rel=1e-12)
    assert c.error_rel == pytest.approx(3300 / 235 / 14 - 1, rel=1e-9)
    s = best_combination(14e3, "E12", allow=("series",))
    assert s.arrangement == "series"
    assert s.parts == (10e3, 3.9e3)
    assert s.value == pytest.approx(13.9e3, rel=1e-12)
    assert s.error_rel == pytest.approx(-0.1 / 14, rel=1e-9)
    single = best_combination(14e3, "E12", allow=("single",))
    assert single.parts == (15e3,)
    assert single.error_rel == pytest.approx(1 / 14, rel=1e-9)


def test_best_combination_other_hand_cases() -> None:
    # Hand: 7k in E3; 4.7k + 2.2k = 6.9k (-1.43 %) beats 10k || 22k = 6.875k (-1.79 %).
    c = best_combination(7e3, "E3")
    assert (c.arrangement, c.parts) == ("series", (4.7e3, 2.2e3))
    # Hand: 3.6k in E12 is 1.8k + 1.8k exactly.
    c = best_combination(3.6e3, "E12")
    assert (c.arrangement, c.parts, c.error_rel) == ("series", (1.8e3, 1.8e3), 0.0)
    # Hand: 5k in E24 is exact as 2k + 3k (also 10k || 10k); series preferred on a tie.
    c = best_combination(5e3, "E24")
    assert c.error_rel == 0.0 and c.arrangement == "series" and c.parts == (3e3, 2e3)
    p = best_combination(5e3, "E24", allow=("parallel",))
    assert p.parts == (10e3, 10e3) and p.value == pytest.approx(5e3, rel=1e-15)
    # Capacitor-size value, 3.5 nF in E6 (hand): single 3.3n (-5.7 %); series
    # 2.2n + 1.5n = 3.7n (+5.7 %), 3.3n + 150p = 3.45n (-1.4 %), 3.3n + 220p = 3.52n
    # (+0.57 %); parallel 6.8n || 6.8n = 3.4n (-2.9 %), 4.7n || 15n = 3.579n (+2.2 %).
    c = best_combination(3.5e-9, "E6")
    assert c.arrangement == "series" and c.parts == (3.3e-9, 220e-12)
    assert c.error_rel == pytest.approx(0.02 / 3.5, rel=1e-9)
    p = best_combination(3.5e-9, "E6", allow=("parallel",))
    assert p.parts == (15e-9, 4.7e-9)
    assert p.value == pytest.approx(15 * 4.7 / 19.7 * 1e-9, rel=1e-12)


def test_best_combination_trim_part() -> None:
    # Hand: 10.05k in E24; single 10k is -0.50 %, 10k + 51 Ω = 10.051k is +0.01 %.
    c = best_combination(10.05e3, "E24")
    assert (c.arrangement, c.parts) == ("series", (10e3, 51.0))
    assert c.error_rel == pytest.approx(1 / 10050, rel=1e-9)


def test_range_limits() -> None:
    # Documented range [1e-300, 1e300]; the ends still work.
    assert nearest(1e-300, "E12") == 1e-300
    assert nearest(1e300, "E12") == 1e300
    assert best_combination(1e-300, "E3", allow=("series",)).parts == (4.7e-301, 4.7e-301)
    assert best_combination(1e300, "E3", allow=("parallel",)).parts == (2.2e300, 2.2e300)
    for bad in (1e-301, 1e301):
        with pytest.raises(ComponentValueError, match="range"):
            nearest(bad, "E12")


def test_best_combination_validation() -> None:
    with pytest.raises(ComponentValueError, match="allow"):
        best_combination(14e3, "E12", allow=())
    with pytest.raises(ComponentValueError, match="allow"):
        best_combination(14e3, "E12", allow="series")  # type: ignore[arg-type]
    with pytest.raises(ComponentValueError, match="allow"):
        best_combination(14e3, "E12", allow=("serial",))
    with pytest.raises(ComponentValueError, match="target=0.0"):
        best_combination(0.0, "E12")
    with pytest.raises(ComponentValueError, match="E13"):
        best_combination(14e3, "E13")


def _brute_force(target: float, name: str, allow: tuple[str, ...]) -> float:
    """Smallest |ln(value/target)| over all single parts and all pairs in 5 decades.

    Common practice, no source: exhaustive search with numpy.  Parts range over
    [target/1000, 100 target]; as documented by best_combination, series parts
    are below the target and parallel parts above it (either way the pair would
    be worse than a single part; with ``allow=("parallel",)`` the restriction
    rules out degenerate pairs such as 1k || 470k for a 1k target).
    """
    e = math.floor(math.log10(target))
    v = np.array(std_values(name, range(e - 3, e + 3)))
    best = math.inf
    if "single" in allow:
        best = float(np.min(np.abs(np.log(v / target))))
    a, b = np.meshgrid(v, v)
    if "series" in allow:
        s = a + b
        mask = (a < target) & (b < target)
        best = min(best, float(np.min(np.abs(np.log(s[mask] / target)))))
    if "parallel" in allow:
        p = a * b / (a + b)
        mask = (a > target) & (b > target)
        best = min(best, float(np.min(np.abs(np.log(p[mask] / target)))))
    return best


ALLOWS = [
    ("single", "series", "parallel"),
    ("series",),
    ("parallel",),
    ("series", "parallel"),
]


@given(
    mantissa=st.floats(min_value=1.0, max_value=10.0, exclude_max=True),
    exponent=st.integers(min_value=-12, max_value=7),
    name=st.sampled_from(SERIES_NAMES),
    allow=st.sampled_from(ALLOWS),
)
@settings(max_examples=120, deadline=None)
def test_best_combination_properties(
    mantissa: float, exponent: int, name: str, allow: tuple[str, ...]
) -> None:
    target = mantissa * 10.0**exponent
    c = best_combination(target, name, allow=allow)
    err = abs(math.log(c.value / target))
    # Consistency of the result (definitions of series / parallel values).
    assert c.arrangement in allow
    assert all(is_standard(p, name) for p in c.parts)
    assert c.parts == tuple(sorted(c.parts, reverse=True))
    if c.arrangement == "single":
        assert c.value == c.parts[0]
    elif c.arrangement == "series":
        assert c.value == pytest.approx(sum(c.parts), rel=1e-12)
        assert all(p < target for p in c.parts)
    else:
        assert c.value == pytest.approx(1 / sum(1 / p for p in c.parts), rel=1e-12)
        assert all(p > target for p in c.parts)
    assert c.error_rel == pytest.approx(c.value / target - 1, rel=1e-9, abs=1e-15)
    # Never worse than the single nearest value when singles are allowed.
    if "single" in allow:
        assert err <= abs(math.log(nearest(target, name) / target)) + 1e-12
    # At least as good as an exhaustive search over five decades of parts ...
    brute = _brute_force(target, name, allow)
    assert err <= brute + 1e-12
    # ... and equal to it when the parts found lie inside the searched window.
    if all(target / 1000 <= p <= 100 * target for p in c.parts):
        assert err == pytest.approx(brute, abs=1e-12)


def test_combination_is_frozen_and_checked() -> None:
    c = best_combination(14e3, "E12")
    with pytest.raises(AttributeError):
        c.value = 1.0  # type: ignore[misc]
    with pytest.raises(ComponentValueError):
        Combination(parts=(1.0,), arrangement="series", value=1.0, error_rel=0.0)
    with pytest.raises(ComponentValueError):
        Combination(parts=(1.0, 2.0), arrangement="bridge", value=1.0, error_rel=0.0)
