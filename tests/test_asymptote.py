"""Tests of the straight-line Bode module against published closed forms and scipy.signal."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import signal

from loopcraft.errors import AnalysisError
from loopcraft.numeric.asymptote import (
    AsymptoteError,
    asymptote_error,
    asymptote_mag_db,
    asymptote_phase_deg,
    exact_mag_db,
    exact_phase_deg,
)
from loopcraft.numeric.factors import Factor, FactoredNumeric

TWO_PI = 2.0 * math.pi


def _zpk(fn: FactoredNumeric) -> tuple[np.ndarray, np.ndarray, float]:
    """scipy zpk of a factored form, derived from the factor definitions only.

    (1 + s/w) = (1/w)(s + w); (1 - s/w) = (-1/w)(s - w);
    (1 ± s/(Q w0) + s^2/w0^2) = (1/w0^2)(s^2 ± (w0/Q) s + w0^2).
    """
    zeros: list[complex] = [0j] * max(fn.origin_order, 0)
    poles: list[complex] = [0j] * max(-fn.origin_order, 0)
    k = fn.gain
    for f in fn.factors:
        sign = -1.0 if f.rhp else 1.0
        if f.order == 1:
            roots = [complex(-sign * f.omega_rad_s)]
            lead = sign / f.omega_rad_s
        else:
            roots = list(np.roots([1.0, sign * f.omega_rad_s / f.q, f.omega_rad_s**2]))
            lead = 1.0 / f.omega_rad_s**2
        if f.role == "zero":
            zeros += roots
            k *= lead
        else:
            poles += roots
            k /= lead
    return np.array(zeros), np.array(poles), k


def _real_pole(f_hz: float) -> Factor:
    return Factor("pole", 1, TWO_PI * f_hz)


# --------------------------------------------------------------------------- first order


def test_real_pole_at_corner_is_3db_below_asymptote_with_minus_45_deg():
    fn = FactoredNumeric(1.0, 0, (_real_pole(1e3),))
    f = np.array([1e3])
    err = exact_mag_db(fn, f) - asymptote_mag_db(fn, f)
    # Common practice: "3 dB down at the corner"; exactly -10·log10(2) = -3.0103 dB.
    assert err[0] == pytest.approx(-10.0 * math.log10(2.0), abs=1e-12)
    assert err[0] == pytest.approx(-3.01, abs=5e-3)
    # Exact phase of 1/(1 + j) is -45° (from the definition); the decade rule gives -45° too
    # (Ogata, "Modern Control Engineering", 5th ed., 2010).
    assert exact_phase_deg(fn, f)[0] == pytest.approx(-45.0, abs=1e-12)
    assert asymptote_phase_deg(fn, f)[0] == pytest.approx(-45.0, abs=1e-12)


def test_real_pole_asymptote_lines():
    fc = 250.0
    fn = FactoredNumeric(1.0, 0, (_real_pole(fc),))
    f = fc * np.array([1e-3, 0.05, 0.1, 1.0, 10.0, 100.0, 1e3])
    # Common practice: 0 dB below the corner, -20 dB/decade above it.
    expected = np.where(f < fc, 0.0, -20.0 * np.log10(f / fc))
    assert np.allclose(asymptote_mag_db(fn, f), expected, atol=1e-12)
    # Decade rule (Ogata 2010; Erickson & Maksimovic, "Fundamentals of Power Electronics",
    # 2nd ed., 2001, ch. 8): 0° to fc/10, -45° per decade to 10 fc, then -90°.
    expected_ph = np.array([0.0, 0.0, 0.0, -45.0, -90.0, -90.0, -90.0])
    assert np.allclose(asymptote_phase_deg(fn, f), expected_ph, atol=1e-9)


@pytest.mark.parametrize("role", ["pole", "zero"])
def test_decade_rule_max_error_is_atan_0p1_at_tenth_and_ten_times_corner(role):
    fc = 1e3
    fn = FactoredNumeric(1.0, 0, (Factor(role, 1, TWO_PI * fc),))
    f = fc * np.logspace(-3, 3, 6001)  # contains fc/10 and 10 fc exactly (to rounding)
    res = asymptote_error(fn, f)
    assert isinstance(res, AsymptoteError)
    # Common practice: the decade rule is worst at fc/10 and 10 fc, by atan(0.1) = 5.71°.
    assert res.max_phase_error_deg == pytest.approx(math.degrees(math.atan(0.1)), abs=1e-9)
    assert res.max_phase_error_deg == pytest.approx(5.71, abs=5e-3)
    assert min(abs(res.f_phase_hz / (fc / 10) - 1), abs(res.f_phase_hz / (fc * 10) - 1)) < 1e-9
    # Magnitude: worst at the corner, 10·log10(2) dB (common practice).
    assert res.max_mag_error_db == pytest.approx(10.0 * math.log10(2.0), abs=1e-9)
    assert res.f_mag_hz == pytest.approx(fc, rel=1e-9)


def test_integrator_slope_and_unity_gain_frequency():
    k = TWO_PI * 1e3  # K/s with K in rad/s crosses 0 dB at ω = K, i.e. 1 kHz
    fn = FactoredNumeric(k, -1)
    f = np.logspace(0, 6, 7)
    mag = asymptote_mag_db(fn, f)
    # Common practice: an integrator falls at -20 dB/decade and crosses 0 dB at ω = K.
    assert np.allclose(np.diff(mag), -20.0, atol=1e-10)
    assert asymptote_mag_db(fn, np.array([1e3]))[0] == pytest.approx(0.0, abs=1e-10)
    # An integrator's asymptote is exact (from the definition |K/(jω)| = K/ω).
    assert np.allclose(exact_mag_db(fn, f), 20 * np.log10(k / (TWO_PI * f)), atol=1e-10)
    assert np.allclose(mag, exact_mag_db(fn, f), atol=1e-10)
    assert np.allclose(exact_phase_deg(fn, f), -90.0)
    assert np.allclose(asymptote_phase_deg(fn, f), -90.0)


def test_double_integrator_and_differentiator_slopes():
    f = np.logspace(-1, 3, 5)
    # Common practice: s^n has a slope of 20·n dB/decade and phase n·90°.
    for n in (-2, 1, 2):
        fn = FactoredNumeric(3.0, n)
        assert np.allclose(np.diff(asymptote_mag_db(fn, f)), 20.0 * n, atol=1e-10)
        assert np.allclose(exact_phase_deg(fn, f), 90.0 * n)


def test_rhp_zero_phase_goes_down_and_magnitude_rises():
    fz = 5e3
    lhp = FactoredNumeric(1.0, 0, (Factor("zero", 1, TWO_PI * fz),))
    rhp = FactoredNumeric(1.0, 0, (Factor("zero", 1, TWO_PI * fz, rhp=True),))
    f = fz * np.logspace(-3, 3, 601)
    # From the definition: |1 - jω/ωz| = |1 + jω/ωz|, ∠(1 - jω/ωz) = -atan(ω/ωz).
    assert np.allclose(asymptote_mag_db(rhp, f), asymptote_mag_db(lhp, f))
    assert np.allclose(exact_mag_db(rhp, f), 10 * np.log10(1 + (f / fz) ** 2), atol=1e-10)
    assert np.allclose(exact_phase_deg(rhp, f), -np.degrees(np.arctan(f / fz)), atol=1e-10)
    # Decade rule mirrored: 0° → -90°, -45° at the corner (common practice).
    ph = asymptote_phase_deg(rhp, np.array([fz / 100, fz / 10, fz, 10 * fz, 100 * fz]))
    assert np.allclose(ph, [0.0, 0.0, -45.0, -90.0, -90.0], atol=1e-9)
    assert np.allclose(asymptote_phase_deg(rhp, f), -asymptote_phase_deg(lhp, f))


def test_rhp_pole_phase_goes_up():
    fp = 2e3
    fn = FactoredNumeric(1.0, 0, (Factor("pole", 1, TWO_PI * fp, rhp=True),))
    f = np.array([fp / 10, fp, 10 * fp])
    # From the definition: ∠ 1/(1 - jω/ωp) = +atan(ω/ωp); mirrored decade rule 0° → +90°.
    assert np.allclose(exact_phase_deg(fn, f), np.degrees(np.arctan(f / fp)), atol=1e-10)
    assert np.allclose(asymptote_phase_deg(fn, f), [0.0, 45.0, 90.0], atol=1e-9)
    assert np.allclose(asymptote_mag_db(fn, f), [0.0, 0.0, -20.0], atol=1e-10)


# --------------------------------------------------------------------------- second order


@pytest.mark.parametrize("q", [0.5, 1 / math.sqrt(2), 1.0, 2.0, 5.0, 10.0, 100.0])
def test_second_order_peak_at_f0_is_20log10_q(q):
    f0 = 10e3
    f = np.array([f0])
    pole = FactoredNumeric(1.0, 0, (Factor("pole", 2, TWO_PI * f0, q=q),))
    zero = FactoredNumeric(1.0, 0, (Factor("zero", 2, TWO_PI * f0, q=q),))
    # Erickson & Maksimovic 2001, §8.1.6: at f0 the exact magnitude of a pole pair is
    # 20·log10(Q) above the asymptote (a zero pair: below).
    assert (exact_mag_db(pole, f) - asymptote_mag_db(pole, f))[0] == pytest.approx(
        20 * math.log10(q), abs=1e-9
    )
    assert (exact_mag_db(zero, f) - asymptote_mag_db(zero, f))[0] == pytest.approx(
        -20 * math.log10(q), abs=1e-9
    )
    # Exact phase at f0 is -90° (pole pair) from the definition (1/(j/Q)); the rule gives -90°.
    assert exact_phase_deg(pole, f)[0] == pytest.approx(-90.0, abs=1e-9)
    assert asymptote_phase_deg(pole, f)[0] == pytest.approx(-90.0, abs=1e-9)


@pytest.mark.parametrize("q", [0.6, 1.0, 3.0, 20.0])
def test_second_order_phase_rule_breakpoints(q):
    f0 = 1e3
    fn = FactoredNumeric(1.0, 0, (Factor("pole", 2, TWO_PI * f0, q=q),))
    lo, hi = f0 * 10 ** (-1 / (2 * q)), f0 * 10 ** (1 / (2 * q))
    # Erickson & Maksimovic 2001, §8.1.6: 0° up to f0·10^(-1/2Q), -180° from f0·10^(1/2Q),
    # linear in log f between.
    f = np.array([lo / 2, lo, math.sqrt(lo * f0), f0, hi, 2 * hi])
    assert np.allclose(asymptote_phase_deg(fn, f), [0, 0, -45, -90, -180, -180], atol=1e-9)
    # Magnitude: 0 dB below f0, -40 dB/decade above (common practice).
    fm = np.array([f0 / 10, f0, 10 * f0, 100 * f0])
    assert np.allclose(asymptote_mag_db(fn, fm), [0, 0, -40, -80], atol=1e-9)


def test_q_half_equals_two_coincident_real_poles():
    # From memory: (1 + s/w0)^2 = 1 + s/(0.5·w0) + s^2/w0^2, i.e. Q = 0.5.
    w0 = TWO_PI * 300.0
    pair = FactoredNumeric(1.0, 0, (Factor("pole", 2, w0, q=0.5),))
    two = FactoredNumeric(1.0, 0, (Factor("pole", 1, w0), Factor("pole", 1, w0)))
    f = np.logspace(0, 5, 501)
    assert np.allclose(asymptote_mag_db(pair, f), asymptote_mag_db(two, f), atol=1e-9)
    assert np.allclose(asymptote_phase_deg(pair, f), asymptote_phase_deg(two, f), atol=1e-9)
    assert np.allclose(exact_mag_db(pair, f), exact_mag_db(two, f), atol=1e-9)
    assert np.allclose(exact_phase_deg(pair, f), exact_phase_deg(two, f), atol=1e-9)


def test_low_q_pair_is_drawn_as_its_two_real_roots():
    w0, q = TWO_PI * 1e3, 0.1
    pair = FactoredNumeric(1.0, 0, (Factor("pole", 2, w0, q=q),))
    # The real roots of s^2 + (w0/Q) s + w0^2 (numpy, independent of the module).
    r = np.sort(np.abs(np.roots([1.0, w0 / q, w0**2]).real))
    two = FactoredNumeric(1.0, 0, (Factor("pole", 1, r[0]), Factor("pole", 1, r[1])))
    f = np.logspace(0, 6, 601)
    assert np.allclose(asymptote_mag_db(pair, f), asymptote_mag_db(two, f), atol=1e-9)
    assert np.allclose(asymptote_phase_deg(pair, f), asymptote_phase_deg(two, f), atol=1e-9)
    # Erickson & Maksimovic 2001, §8.1.7 (low-Q approximation): corners near Q·f0 and f0/Q,
    # and the two-corner drawing stays within ~3 dB of the exact curve; a single -40 dB/dec
    # corner at f0 would be 20·log10(1/Q) = 20 dB off at f0.
    assert r[0] == pytest.approx(q * w0, rel=0.02)
    assert r[1] == pytest.approx(w0 / q, rel=0.02)
    assert asymptote_error(pair, f).max_mag_error_db < 3.1


# --------------------------------------------------------------------------- exact phase


def _mixed_fn(gain: float, n: int) -> FactoredNumeric:
    w = TWO_PI
    return FactoredNumeric(
        gain,
        n,
        (
            Factor("zero", 1, w * 30.0),
            Factor("zero", 1, w * 4e3, rhp=True),
            Factor("pole", 1, w * 200.0),
            Factor("pole", 2, w * 1e3, q=8.0),
            Factor("pole", 2, w * 20e3, q=0.2),
            Factor("zero", 2, w * 50e3, q=3.0, rhp=True),
            Factor("pole", 1, w * 1e5, rhp=True),
        ),
    )


@pytest.mark.parametrize("gain,n", [(2.5e3, -1), (-7.0, 0), (-1e-3, 2), (1e6, -3)])
def test_exact_phase_matches_scipy_freqs_zpk_modulo_360(gain, n):
    fn = _mixed_fn(gain, n)
    f = np.logspace(-1, 7, 500)
    z, p, k = _zpk(fn)
    _, h = signal.freqs_zpk(z, p, k, worN=TWO_PI * f)
    ref = np.degrees(np.unwrap(np.angle(h)))
    ours = exact_phase_deg(fn, f)
    # scipy.signal.freqs_zpk is the reference; continuous phases may differ by k·360°.
    d = ours - ref
    turns = np.round(d / 360.0)
    assert np.allclose(turns, turns[0])
    assert np.allclose(d - 360.0 * turns, 0.0, atol=1e-7)
    # Magnitude too (scipy reference).
    assert np.allclose(exact_mag_db(fn, f), 20 * np.log10(np.abs(h)), atol=1e-8)


def test_negative_gain_convention_keeps_asymptote_on_exact_at_low_frequency():
    f = np.array([1e-3])
    # An inverting integrator -K/s: -K/(jω) = +jK/ω, i.e. +90° (from the definition).
    inv_int = FactoredNumeric(-1e3, -1, (_real_pole(1e3),))
    assert exact_phase_deg(inv_int, f)[0] == pytest.approx(90.0, abs=1e-3)
    assert asymptote_phase_deg(inv_int, f)[0] == pytest.approx(90.0, abs=1e-12)
    # An inverting differentiator -K·s = -jKω: -90°.
    inv_diff = FactoredNumeric(-1e-3, 1)
    assert exact_phase_deg(inv_diff, f)[0] == pytest.approx(-90.0)
    # An inverting amplifier: ±180° with +180° chosen; same value in both functions.
    inv = FactoredNumeric(-10.0, 0, (_real_pole(1e6),))
    ff = np.logspace(-2, 9, 200)
    assert exact_phase_deg(inv, f)[0] == pytest.approx(180.0, abs=1e-6)
    d = exact_phase_deg(inv, ff) - asymptote_phase_deg(inv, ff)
    assert abs(d[0]) < 1e-3  # agree at low frequency
    # ... and differ by no more than the decade-rule error (common practice: atan(0.1)).
    assert np.max(np.abs(d)) <= math.degrees(math.atan(0.1)) + 1e-9
    # Consistent with np.angle modulo 360 (numpy reference).
    h = -10.0 / (1 + 1j * ff / 1e6)
    assert np.allclose(np.mod(exact_phase_deg(inv, ff) - np.degrees(np.angle(h)) + 1, 360) - 1, 0)


def test_asymptotes_converge_to_exact_far_from_corners():
    fn = _mixed_fn(1e3, -1)
    f_low = np.array([1e-3, 1e-2])
    f_high = np.array([1e9, 1e10])
    # Common practice: the straight lines are the limits of the exact curves as ω→0 and ω→∞.
    for f in (f_low, f_high):
        assert np.allclose(exact_mag_db(fn, f), asymptote_mag_db(fn, f), atol=0.02)
        assert np.allclose(exact_phase_deg(fn, f), asymptote_phase_deg(fn, f), atol=0.5)


def test_shapes_are_preserved():
    fn = _mixed_fn(1.0, 0)
    f = np.logspace(0, 5, 12).reshape(3, 4)
    for func in (asymptote_mag_db, asymptote_phase_deg, exact_mag_db, exact_phase_deg):
        out = func(fn, f)
        assert out.shape == (3, 4)
        # Same values as the flattened call (shape handling only, no numbers of our own).
        assert np.array_equal(out.ravel(), func(fn, f.ravel()))


@pytest.mark.parametrize("bad", [np.array([1.0, -1.0]), np.array([0.0]), np.array([np.nan])])
def test_bad_frequencies_raise(bad):
    fn = FactoredNumeric(1.0, -1)
    with pytest.raises(AnalysisError, match="f_hz"):
        asymptote_mag_db(fn, bad)
    with pytest.raises(AnalysisError, match="f_hz"):
        exact_phase_deg(fn, bad)


def test_zero_gain_and_empty_grid_raise():
    with pytest.raises(AnalysisError, match="gain"):
        asymptote_mag_db(FactoredNumeric(0.0, 0), np.array([1.0]))
    with pytest.raises(AnalysisError, match="at least one"):
        asymptote_error(FactoredNumeric(1.0, 0), np.array([]))
    with pytest.raises(AnalysisError, match="FactoredNumeric"):
        asymptote_phase_deg("1/s", np.array([1.0]))  # type: ignore[arg-type]
