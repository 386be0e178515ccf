"""Tests for loopcraft.model.opamp: open-loop gain models and their design-file form."""

from __future__ import annotations

import math
import re

import numpy as np
import pytest

from loopcraft.errors import AnalysisError, ComponentValueError, DesignFileError
from loopcraft.model.opamp import OpAmp, second_pole_for_phase_margin

# Invented parts: a general-purpose 100 dB / 10 MHz amplifier and a slower
# 90 dB / 1 MHz one, as an error amplifier for a 48 V bus converter might use.
A0 = 1e5
GBW_HZ = 10e6


def _single() -> OpAmp:
    return OpAmp("single_pole", a0=A0, gbw_hz=GBW_HZ)


def _phase_deg(op: OpAmp, f_hz: float) -> float:
    return math.degrees(float(np.angle(op.gain(np.array([2j * math.pi * f_hz]))[0])))


def _mag(op: OpAmp, f_hz: float) -> float:
    return float(abs(op.gain(np.array([2j * math.pi * f_hz]))[0]))


def _unity_gain_by_bisection(op: OpAmp) -> float:
    """|A(j2πf)| = 1 found by plain bisection on log f (no scipy, no project formulas)."""
    lo, hi = math.log(1e-3), math.log(1e12)
    for _ in range(200):
        mid = 0.5 * (lo + hi)
        if _mag(op, math.exp(mid)) > 1.0:
            lo = mid
        else:
            hi = mid
    return math.exp(0.5 * (lo + hi))


# --------------------------------------------------------------------------- single pole
def test_single_pole_magnitude_at_gbw() -> None:
    # Single-pole model a(jf) = a0/(1 + j f/fb), GBW = a0·fb, so |a(j·GBW)| = a0/sqrt(1 + a0²)
    # = 1/sqrt(1 + 1/a0²) exactly. Franco, "Design with Operational Amplifiers and Analog
    # Integrated Circuits", 2002 (open-loop response of the dominant-pole amplifier).
    op = _single()
    assert _mag(op, GBW_HZ) == pytest.approx(1.0 / math.sqrt(1.0 + 1.0 / A0**2), rel=1e-13)


def test_single_pole_phase_at_dominant_pole_and_far_above() -> None:
    # -45° at fb, tending to -90° well above it (Franco 2002; common practice).
    op = _single()
    fb = GBW_HZ / A0
    assert _phase_deg(op, fb) == pytest.approx(-45.0, abs=1e-10)
    far = _phase_deg(op, 100 * GBW_HZ)
    assert -90.0 < far < -89.999
    # Between fb and GBW the magnitude falls at -20 dB/decade (Franco 2002).
    slope = 20 * math.log10(_mag(op, 1e5) / _mag(op, 1e4))
    assert slope == pytest.approx(-20.0, abs=1e-3)


def test_single_pole_dc_gain_and_factored_form() -> None:
    op = _single()
    fn = op.factored()
    # A(0) = A0 and one LHP pole at ωa = 2π·GBW/A0 (definition of the single-pole model).
    assert fn.gain == A0
    assert fn.origin_order == 0
    (pole,) = fn.poles
    assert pole.order == 1 and not pole.rhp
    assert pole.omega_rad_s == pytest.approx(2 * math.pi * GBW_HZ / A0, rel=1e-15)
    assert _mag(op, 1e-6) == pytest.approx(A0, rel=1e-12)


def test_single_pole_unity_gain_and_phase_margin() -> None:
    # fu from |A| = 1 by bisection; PM = 180° − atan(fu/fb) (from memory: definition of PM).
    op = _single()
    fu = _unity_gain_by_bisection(op)
    assert op.unity_gain_hz == pytest.approx(fu, rel=1e-12)
    assert op.phase_margin_deg == pytest.approx(180.0 + _phase_deg(op, fu), abs=1e-9)


# --------------------------------------------------------------------------- two poles
@pytest.mark.parametrize("a0", [1e3, 1e5, 3e6])
@pytest.mark.parametrize("pm_deg", [20.0, 45.0, 60.0, 76.0, 89.0, 90.0])
def test_two_pole_from_phase_margin_round_trips(a0: float, pm_deg: float) -> None:
    # PM is 180° + arg A(j2πfu) at the exact fu with |A(j2πfu)| = 1 (definition; common
    # practice, no source). fu is found here by bisection on the model's own |A|, so the check
    # is independent of the solver in opamp.py.
    op = OpAmp.from_dict(
        {"model": "two_pole", "a0": a0, "gbw_hz": GBW_HZ, "phase_margin_deg": pm_deg}
    )
    fu = _unity_gain_by_bisection(op)
    assert _mag(op, fu) == pytest.approx(1.0, rel=1e-12)
    assert 180.0 + _phase_deg(op, fu) == pytest.approx(pm_deg, abs=1e-8)
    assert op.unity_gain_hz == pytest.approx(fu, rel=1e-10)
    assert op.phase_margin_deg == pytest.approx(pm_deg, abs=1e-9)
    assert op.second_pole_hz is not None and op.second_pole_hz >= GBW_HZ / a0


def test_two_pole_exact_solution_differs_from_the_gbw_approximation() -> None:
    # The usual shortcut puts fu at GBW, giving f2 = GBW/tan(90° − PM) (Franco 2002). The exact
    # solution has fu below GBW, hence a lower f2; checked here through the defining
    # equations, by bisection.
    f2 = second_pole_for_phase_margin(A0, GBW_HZ, 60.0)
    approx_f2 = GBW_HZ / math.tan(math.radians(30.0))
    assert f2 < approx_f2
    op = OpAmp("two_pole", a0=A0, gbw_hz=GBW_HZ, second_pole_hz=f2)
    fu = _unity_gain_by_bisection(op)
    assert fu < GBW_HZ
    assert 180.0 + _phase_deg(op, fu) == pytest.approx(60.0, abs=1e-8)


def test_two_pole_phase_tends_to_minus_180() -> None:
    # Two LHP poles: far above both, the phase tends to -180° and the magnitude falls at
    # -40 dB/decade (common practice, no source).
    op = OpAmp("two_pole", a0=A0, gbw_hz=GBW_HZ, second_pole_hz=20e6)
    assert -180.0 < _phase_deg(op, 1e12) < -179.99
    slope = 20 * math.log10(_mag(op, 1e11) / _mag(op, 1e10))
    assert slope == pytest.approx(-40.0, abs=1e-3)
    # At the second pole the second factor alone contributes -45°: total = -45° - atan(f2/fa).
    fa = GBW_HZ / A0
    assert _phase_deg(op, 20e6) == pytest.approx(
        -45.0 - math.degrees(math.atan(20e6 / fa)), abs=1e-9
    )


def test_unreachable_phase_margin_is_an_error_with_key_path() -> None:
    # The single-pole amplifier has PM = 90° + asin(1/A0) (from 180° − atan(sqrt(A0² − 1)));
    # no second pole can raise it.
    pm_single = 90.0 + math.degrees(math.asin(1.0 / A0))
    with pytest.raises(DesignFileError) as exc:
        OpAmp.from_dict(
            {"model": "two_pole", "a0": A0, "gbw_hz": GBW_HZ, "phase_margin_deg": pm_single + 0.01}
        )
    assert exc.value.key_path == "opamp.phase_margin_deg"
    with pytest.raises(DesignFileError) as exc:
        OpAmp.from_dict({"model": "two_pole", "a0": 100, "gbw_hz": GBW_HZ, "phase_margin_deg": 1.0})
    assert exc.value.key_path == "opamp.phase_margin_deg"
    with pytest.raises(AnalysisError):
        second_pole_for_phase_margin(A0, GBW_HZ, math.nan)


# --------------------------------------------------------------------------- design file
def test_from_dict_engineering_strings_and_db() -> None:
    # A0 in dB: 20·log10(A0) (definition). 100 dB -> 1e5 V/V.
    op = OpAmp.from_dict(
        {
            "model": "single_pole",
            "a0_db": "100 dB",
            "gbw_hz": "10M",
            "output_swing_v": "12 V",
            "slew_rate_v_per_us": "5 V/us",
        }
    )
    assert op.a0 == pytest.approx(1e5, rel=1e-14)
    assert op.gbw_hz == 10e6
    assert op.output_swing_v == 12.0
    assert op.slew_rate_v_per_us == 5.0
    assert OpAmp.from_dict({"model": "single_pole", "a0": "100k", "gbw_hz": "10 MHz"}).a0 == 1e5


@pytest.mark.parametrize(
    "op",
    [
        OpAmp(),
        OpAmp(output_swing_v=10.0, slew_rate_v_per_us=0.5),
        OpAmp("single_pole", a0=2e5, gbw_hz=1e6),
        OpAmp("two_pole", a0=3.16e4, gbw_hz=3e6, second_pole_hz=4.4e6, output_swing_v=4.8),
    ],
)
def test_to_dict_round_trips(op: OpAmp) -> None:
    assert OpAmp.from_dict(op.to_dict()) == op


@pytest.mark.parametrize(
    ("d", "key_path"),
    [
        ({"model": "single_pole", "a0": 1e5, "gbw_hz": 1e6, "gain": 3}, "opamp.gain"),
        ({"a0": 1e5}, "opamp"),
        ({"model": "folded"}, "opamp.model"),
        ({"model": "ideal", "a0": 1e5}, "opamp.a0"),
        ({"model": "single_pole", "gbw_hz": 1e6}, "opamp"),
        ({"model": "single_pole", "a0": 1e5}, "opamp"),
        ({"model": "single_pole", "a0": 1e5, "a0_db": 100, "gbw_hz": 1e6}, "opamp.a0_db"),
        ({"model": "single_pole", "a0": 1e5, "gbw_hz": "10Q"}, "opamp.gbw_hz"),
        ({"model": "single_pole", "a0": 1e5, "gbw_hz": -1e6}, "opamp.gbw_hz"),
        ({"model": "single_pole", "a0": 0.5, "gbw_hz": 1e6}, "opamp.a0"),
        ({"model": "single_pole", "a0_db": -3, "gbw_hz": 1e6}, "opamp.a0_db"),
        (
            {"model": "single_pole", "a0": 1e5, "gbw_hz": 1e6, "second_pole_hz": 2e6},
            "opamp.second_pole_hz",
        ),
        ({"model": "two_pole", "a0": 1e5, "gbw_hz": 1e6}, "opamp"),
        (
            {"model": "two_pole", "a0": 1e5, "gbw_hz": 1e6, "second_pole_hz": 1.0},
            "opamp.second_pole_hz",
        ),
        (
            {
                "model": "two_pole",
                "a0": 1e5,
                "gbw_hz": 1e6,
                "second_pole_hz": 2e6,
                "phase_margin_deg": 60,
            },
            "opamp.phase_margin_deg",
        ),
        ({"model": "ideal", "slew_rate_v_per_us": 0}, "opamp.slew_rate_v_per_us"),
        ({"model": "ideal", "output_swing_v": True}, "opamp.output_swing_v"),
        ({"model": "ideal", "output_swing_v": "inf"}, "opamp.output_swing_v"),
    ],
)
def test_from_dict_errors_carry_key_path(d: dict, key_path: str) -> None:
    with pytest.raises(DesignFileError) as exc:
        OpAmp.from_dict(d)
    assert exc.value.key_path == key_path
    assert key_path in str(exc.value)


def test_from_dict_custom_key_path_and_bad_type() -> None:
    with pytest.raises(DesignFileError) as exc:
        OpAmp.from_dict(
            {"model": "single_pole", "a0": 1e5, "gbw_hz": [1]}, key_path="stages[0].opamp"
        )
    assert exc.value.key_path == "stages[0].opamp.gbw_hz"
    with pytest.raises(DesignFileError) as exc:
        OpAmp.from_dict("ideal")  # type: ignore[arg-type]
    assert exc.value.key_path == "opamp"


def test_direct_construction_validates() -> None:
    with pytest.raises(ComponentValueError):
        OpAmp("single_pole", a0=math.inf, gbw_hz=1e6)
    with pytest.raises(ComponentValueError):
        OpAmp("two_pole", a0=1e5, gbw_hz=1e6)
    with pytest.raises(ComponentValueError):
        OpAmp("ideal", a0=1e5)


# --------------------------------------------------------------------------- ideal
def test_ideal_gain_is_infinite_and_factored_refuses() -> None:
    op = OpAmp()
    assert op.is_ideal
    g = op.gain(np.array([1j, 10j, 1e6j]))
    assert g.shape == (3,) and np.all(np.isinf(g.real))
    with pytest.raises(AnalysisError):
        op.factored()
    with pytest.raises(AnalysisError):
        _ = op.unity_gain_hz


# --------------------------------------------------------------------------- large signal
def test_slew_rate_and_full_power_bandwidth() -> None:
    # A sine Vpk·sin(2πft) needs a slew rate of 2π·f·Vpk; full-power bandwidth
    # FPBW = SR/(2π·Vpk) (Franco 2002, slew-rate limiting).
    sr_v_per_us = 0.5
    vpk = 10.0
    op = OpAmp("single_pole", a0=1e5, gbw_hz=1e6, slew_rate_v_per_us=sr_v_per_us)
    fpbw_hz = sr_v_per_us * 1e6 / (2 * math.pi * vpk)
    assert op.large_signal_warnings(vpk, 0.99 * fpbw_hz) == ()
    (msg,) = op.large_signal_warnings(vpk, 1.01 * fpbw_hz)
    assert "full-power bandwidth" in msg
    assert "7.96 kHz" in msg  # 0.5e6 / (2π·10) = 7957.7 Hz, written out by hand


def test_output_swing_warning() -> None:
    op = OpAmp(output_swing_v=12.0)
    assert op.large_signal_warnings(11.9, 1e3) == ()
    (msg,) = op.large_signal_warnings(12.5, 1e3)
    assert "swing" in msg
    assert OpAmp().large_signal_warnings(1e3, 1e9) == ()
    with pytest.raises(AnalysisError):
        op.large_signal_warnings(-1.0, 1e3)
    with pytest.raises(AnalysisError):
        op.large_signal_warnings(1.0, math.nan)


def test_module_docstring_carries_the_safety_note() -> None:
    import loopcraft.model.opamp as mod

    assert mod.__doc__ is not None
    assert "hazardous voltages and stored energy" in " ".join(mod.__doc__.split())


# --------------------------------------------------------------------------- accepted ranges
@pytest.mark.parametrize(
    "section, path, words",
    [
        ({"model": "single_pole", "a0_db": 1e308, "gbw_hz": 1e6}, "opamp.a0_db", "at most 240 dB"),
        ({"model": "single_pole", "a0": 10**400, "gbw_hz": 1e6}, "opamp.a0", "beyond the float range"),
        ({"model": "single_pole", "a0": 1e13, "gbw_hz": 1e6}, "opamp.a0", "at most 1e+12 V/V"),
        ({"model": "single_pole", "a0": 1e5, "gbw_hz": 5e-324}, "opamp.gbw_hz", "1 mHz … 1 THz"),
        ({"model": "two_pole", "a0": 1e5, "gbw_hz": 1e308, "second_pole_hz": 1e308}, "opamp.gbw_hz", "1 THz"),
        ({"model": "two_pole", "a0": 1e5, "gbw_hz": 5e-324, "phase_margin_deg": 60}, "opamp.gbw_hz", "1 mHz"),
        ({"model": "ideal", "output_swing_v": 10**400}, "opamp.output_swing_v", "beyond the float range"),
        ({"model": "ideal", "slew_rate_v_per_us": 1e9}, "opamp.slew_rate_v_per_us", "1e+06 V/µs"),
        ({"model": "two_pole", "a0": 1e12, "gbw_hz": 1e12, "phase_margin_deg": 90}, "opamp.phase_margin_deg",
         "outside 1 mHz"),
    ],
)
def test_values_outside_the_documented_ranges_are_refused_with_key_path(section, path, words):
    with pytest.raises(DesignFileError, match=re.escape(words)) as err:
        OpAmp.from_dict(section)
    assert err.value.key_path == path


def test_the_extreme_corners_of_the_ranges_give_finite_figures():
    # The bare amplifier's unity-gain frequency and phase margin from the exact formulas stay finite
    # at the ends of the accepted ranges (IEEE 754 doubles; from memory).
    for a0 in (1.0 + 1e-9, 1e12):
        for gbw in (1e-3, 1e12):
            for f2 in (max(gbw / a0, 1e-3), 1e15):
                op = OpAmp("two_pole", a0=a0, gbw_hz=gbw, second_pole_hz=f2)
                assert math.isfinite(op.unity_gain_hz) and op.unity_gain_hz > 0
                assert math.isfinite(op.phase_margin_deg)
                assert np.all(np.isfinite(op.gain(2j * math.pi * np.array([1e-3, 1e12]))))
