import math

import pytest
from hypothesis import given
from hypothesis import strategies as st

from loopcraft.errors import ComponentValueError
from loopcraft.model.values import format_value, parse_value

# SI prefixes: BIPM, "The International System of Units (SI)", 9th ed., 2019, table 7.
# Letter-for-decimal codes: IEC 60062:2016, "Marking codes for resistors and capacitors", clause 4.
CASES = [
    ("10k", 10e3),
    ("4.7 kΩ", 4.7e3),
    ("10n", 10e-9),
    ("2.2u", 2.2e-6),
    ("2.2µ", 2.2e-6),
    ("2.2μ", 2.2e-6),
    ("100p", 100e-12),
    ("1M", 1e6),
    ("1m", 1e-3),
    ("470", 470.0),
    ("1e-9", 1e-9),
    ("4k7", 4.7e3),
    ("2n2", 2.2e-9),
    ("R47", 0.47),
    ("1M5", 1.5e6),
    ("4R7", 4.7),
    ("100pF", 100e-12),
    ("3.3 mH", 3.3e-3),
    ("10 kohm", 10e3),
    ("1meg", 1e6),
    (" 22k ", 22e3),
    ("0.1u", 1e-7),
    ("680", 680.0),
    ("1G", 1e9),
    ("15f", 15e-15),
]


@pytest.mark.parametrize(("text", "expected"), CASES)
def test_parse_exact(text, expected):
    assert parse_value(text) == pytest.approx(expected, rel=1e-15)


def test_letter_code_is_never_truncated():
    # A lax quantity parser reads "4k7" as 4 (or 4000); IEC 60062 says 4.7 k.
    assert parse_value("4k7") == 4700.0
    assert parse_value("1M5") == 1.5e6


@pytest.mark.parametrize(
    "text", ["4k7k", "4.7k7", "1e-9n", "-1k", "abc", "10x", "k", "", "  ", "1..2", "4 k 7", "1,5k", "nan", "inf"]
)
def test_reject_malformed(text):
    with pytest.raises(ComponentValueError, match="R5"):
        parse_value(text, name="R5")


def test_caret_under_bad_character():
    with pytest.raises(ComponentValueError) as exc:
        parse_value("4.7q", name="C2")
    lines = str(exc.value).splitlines()
    assert lines[-2].strip() == "4.7q"
    assert lines[-1].index("^") - lines[-2].index("4") == 3


@pytest.mark.parametrize("value", [0, -10.0, math.inf, math.nan, 1e16, 1e-19, "0", "1e20"])
def test_reject_out_of_range(value):
    with pytest.raises(ComponentValueError, match="C7"):
        parse_value(value, name="C7")


def test_unit_must_fit_kind():
    assert parse_value("10nF", name="C1", kind="capacitor") == pytest.approx(1e-8)
    with pytest.raises(ComponentValueError, match="does not fit a resistor"):
        parse_value("10nF", name="R1", kind="resistor")
    with pytest.raises(ComponentValueError, match="decimal mark"):
        parse_value("R47", name="C1", kind="capacitor")


def test_bool_rejected():
    with pytest.raises(ComponentValueError):
        parse_value(True, name="R1")


@pytest.mark.parametrize(
    ("x", "unit", "text"),
    [
        (4700, "Ω", "4.7 kΩ"),
        (3.3e-9, "F", "3.3 nF"),
        (22e3, "Ω", "22 kΩ"),
        (470, "Ω", "470 Ω"),
        (1.5e6, "Ω", "1.5 MΩ"),
        (999.96, "Ω", "1 kΩ"),
        (1e-12, "F", "1 pF"),
        (150e-12, "F", "150 pF"),
        (2.2e-6, "H", "2.2 µH"),
        (1234.5, "Hz", "1.23 kHz"),
    ],
)
def test_format(x, unit, text):
    # Engineering notation (exponent a multiple of 3): common practice, no source.
    assert format_value(x, unit) == text


@given(st.floats(min_value=1e-17, max_value=1e14))
def test_format_then_parse_round_trip(x):
    # 3 significant digits survive a round trip through the text form.
    text = format_value(x, "")
    assert parse_value(text) == pytest.approx(x, rel=5e-3)


@given(st.integers(1, 999), st.integers(0, 99), st.sampled_from("pnumkMG"))
def test_letter_codes_match_decimal(whole, frac, prefix):
    # IEC 60062: the letter stands in for the decimal point: 4k7 == 4.7k.
    code = f"{whole}{prefix}{frac}"
    assert parse_value(code) == parse_value(f"{whole}.{frac}{prefix}")


# --------------------------------------------------------------------------- hostile numbers
@pytest.mark.parametrize("value", [10**400, -(10**400), 2**1024])
def test_integers_beyond_the_float_range_are_refused_not_overflowed(value):
    # The largest double is about 1.8e308 (IEEE 754; from memory), so float(10**400) raises
    # OverflowError; parse_value must answer with its own error and a short description.
    with pytest.raises(ComponentValueError, match="R1") as err:
        parse_value(value, name="R1")
    assert "digits" in str(err.value) and len(str(err.value)) < 200


def test_huge_fraction_is_refused():
    from fractions import Fraction

    with pytest.raises(ComponentValueError, match="outside the accepted range"):
        parse_value(Fraction(10**400, 3), name="C1")


def test_text_longer_than_the_limit_is_refused_briefly():
    from loopcraft._numbers import MAX_NUMBER_TEXT

    text = "1" * 5000
    with pytest.raises(ComponentValueError, match=f"at most {MAX_NUMBER_TEXT} characters") as err:
        parse_value(text, name="R1")
    assert len(str(err.value)) < 200
    assert parse_value(" " * 10 + "4k7" + " " * 10) == 4700.0  # padding within the limit is fine


@pytest.mark.parametrize("text", ["1e400", "inf", "nan", "1e-400"])
def test_text_that_is_not_a_finite_positive_number_is_refused(text):
    with pytest.raises(ComponentValueError):
        parse_value(text, name="R1")
