"""The frequency-band policy (loopcraft.analysis.band) against hand-worked cases.

Every band below is worked by hand from the documented rule; where a crossing is involved, the
crossing frequency comes from a closed form outside the project and is checked both to lie inside
the band and to be found there by the margin search.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import loopcraft as lc
from loopcraft.analysis.analyzer import default_band_hz
from loopcraft.analysis.band import (
    corners_hz,
    crossing_search_band_hz,
    departure_search_band_hz,
    display_band_hz,
    union_band_hz,
    unity_gain_hz,
)
from loopcraft.analysis.margins import _auto_band_hz, loop_margins_factored
from loopcraft.analysis.tolerance import evaluate_batch, monte_carlo
from loopcraft.errors import AnalysisError
from loopcraft.numeric.factors import Factor, FactoredNumeric

TWO_PI = 2.0 * math.pi


def pole(f_hz: float) -> Factor:
    return Factor("pole", 1, TWO_PI * f_hz)


def pair(f_hz: float, q: float) -> Factor:
    return Factor("pole", 2, TWO_PI * f_hz, q)


# --------------------------------------------------------------------------- display band


def test_single_pole_at_1khz_shows_two_decades_each_side():
    # A corner at ω = 2π·1000 rad/s is f = ω/2π = 1 kHz (common practice, no source); two decades
    # either side: 10 Hz … 100 kHz.
    fn = FactoredNumeric(1.0, 0, (pole(1e3),))
    assert corners_hz(fn) == pytest.approx([1e3], rel=1e-15)
    assert display_band_hz(fn) == pytest.approx((10.0, 1e5), rel=1e-15)
    # The analyzer's public name is the same policy.
    assert default_band_hz(fn) == display_band_hz(fn)


def test_display_band_rounds_out_to_whole_decades():
    # Corners at 3 Hz and 45 kHz: decades 1 Hz and 100 kHz, two beyond: 10 mHz … 10 MHz (hand-worked).
    fn = FactoredNumeric(1.0, 0, (pole(3.0), pole(45e3)))
    assert display_band_hz(fn) == pytest.approx((1e-2, 1e7), rel=1e-15)
    # An op-amp gain-bandwidth of 10 MHz widens the top: decade 10 MHz, two beyond: 1 GHz.
    assert display_band_hz(fn, extra_hz=(10e6,)) == pytest.approx((1e-2, 1e9), rel=1e-15)
    # Unusable frequencies of interest (infinite GBW of an ideal op-amp, NaN, 0) are ignored.
    assert display_band_hz(fn, extra_hz=(math.inf, math.nan, 0.0)) == display_band_hz(fn)


def test_display_band_does_not_jump_a_decade_on_rounding_noise():
    # 1 kHz computed with a relative error of a few ulp must still count as on the 1 kHz decade.
    for eps in (-4e-16, 0.0, 4e-16):
        fn = FactoredNumeric(1.0, 0, (Factor("pole", 1, TWO_PI * 1e3 * (1 + eps)),))
        assert display_band_hz(fn) == pytest.approx((10.0, 1e5), rel=1e-15)


def test_resonance_with_q_50_is_inside_the_display_band():
    # The peak of 1/(1 + s/(Qω0) + s²/ω0²) sits at ω0·sqrt(1 - 1/(2Q²)) (from memory, standard
    # second-order response); with Q = 50 at 2 kHz: band 10 Hz … 1 MHz holds it and its -3 dB edges
    # ω0·(1 ± 1/(2Q)).
    fn = FactoredNumeric(1.0, 0, (pair(2e3, 50.0),))
    lo, hi = display_band_hz(fn)
    assert (lo, hi) == pytest.approx((10.0, 1e6), rel=1e-15)
    peak = 2e3 * math.sqrt(1 - 1 / (2 * 50.0**2))
    assert lo < 2e3 * (1 - 1 / 100) < peak < 2e3 * (1 + 1 / 100) < hi


def test_display_band_without_corners_anchors_on_unity_gain():
    # K/s is 1 at ω = K (from memory); K = 2π·1591.5 rad/s: 1.5915 kHz, decades 1 kHz and 10 kHz,
    # two beyond: 10 Hz … 1 MHz.
    k = TWO_PI * 1591.5
    fn = FactoredNumeric(k, -1, ())
    assert unity_gain_hz(fn) == pytest.approx(1591.5, rel=1e-14)
    assert display_band_hz(fn) == pytest.approx((10.0, 1e6), rel=1e-15)
    # K·s² is 1 at ω = K^(-1/2): K = 1/(2π·50)² puts it at 50 Hz: 100 mHz … 10 kHz.
    fn2 = FactoredNumeric(1.0 / (TWO_PI * 50.0) ** 2, 2, ())
    assert unity_gain_hz(fn2) == pytest.approx(50.0, rel=1e-14)
    assert display_band_hz(fn2) == pytest.approx((0.1, 1e4), rel=1e-15)
    # A constant has no scale: 1 kHz by convention, 10 Hz … 100 kHz.
    assert unity_gain_hz(FactoredNumeric(3.0, 0, ())) is None
    assert display_band_hz(FactoredNumeric(3.0, 0, ())) == pytest.approx((10.0, 1e5), rel=1e-15)


def test_display_band_clamps_and_caps():
    # Corners at 1 mHz and 100 GHz: two decades beyond would be 10 µHz … 10 THz; clamped to 1 mHz … 1 THz.
    fn = FactoredNumeric(1.0, 0, (pole(1e-3), pole(1e11)))
    assert display_band_hz(fn) == pytest.approx((1e-3, 1e12), rel=1e-15)
    # Corners at 10 mHz and 1 MHz: 100 µHz … 100 MHz is 12 decades. Capped at 9, the top comes in
    # to one decade above 1 MHz (10 MHz) and the bottom rises to 9 decades below it (10 mHz).
    fn = FactoredNumeric(1.0, 0, (pole(1e-2), pole(1e6)))
    assert display_band_hz(fn, max_decades=9) == pytest.approx((1e-2, 1e7), rel=1e-15)
    # Within the cap nothing moves: 1 Hz and 1 kHz corners give 10 mHz … 100 kHz (7 decades).
    fn = FactoredNumeric(1.0, 0, (pole(1.0), pole(1e3)))
    assert display_band_hz(fn, max_decades=9) == display_band_hz(fn) == pytest.approx((1e-2, 1e5), rel=1e-15)


def test_frequencies_above_only_widen_upward():
    # A crossover at 1 Hz below a 1 kHz corner: as a two-sided anchor it pulls the bottom to 10 mHz;
    # as an upward-only one it leaves 10 Hz … 100 kHz.
    fn = FactoredNumeric(1.0, 0, (pole(1e3),))
    assert display_band_hz(fn, extra_hz=(1.0,)) == pytest.approx((1e-2, 1e5), rel=1e-15)
    assert display_band_hz(fn, above_hz=(1.0,)) == pytest.approx((10.0, 1e5), rel=1e-15)
    assert display_band_hz(fn, above_hz=(1e7,)) == pytest.approx((10.0, 1e9), rel=1e-15)


# --------------------------------------------------------------------------- crossing search band


def test_integrator_loop_search_band_contains_its_crossover():
    # L = K/s crosses 0 dB at ωc = K with PM 90° (from memory); fc = 3.3 kHz is searched over
    # fc/100 … 100·fc, and the search finds it there.
    fc = 3.3e3
    fn = FactoredNumeric(TWO_PI * fc, -1, ())
    lo, hi = crossing_search_band_hz(fn)
    assert (lo, hi) == pytest.approx((fc / 100, fc * 100), rel=1e-12)
    assert _auto_band_hz(fn) == (lo, hi)  # the margin search's own name is the same policy
    m = loop_margins_factored(fn)
    assert [c.f_hz for c in m.crossovers] == pytest.approx([fc], rel=1e-10)
    assert m.crossovers[0].phase_margin_deg == pytest.approx(90.0, abs=1e-9)


def test_search_band_reaches_beyond_a_crossover_far_above_the_corners():
    # L = K/(1 + s/p), K = 1e4, fp = 10 Hz: |L| = 1 at ω = p·sqrt(K² - 1), PM = 180° - atan(ωc/p)
    # (from memory; Ogata, "Modern Control Engineering", 5th ed., 2010, frequency response).
    # The asymptote crosses at K·fp = 100 kHz, four decades above the only corner; the band runs
    # from two decades below the corner (100 mHz) to two above the crossing (10 MHz).
    k, fp = 1e4, 10.0
    fn = FactoredNumeric(k, 0, (pole(fp),))
    lo, hi = crossing_search_band_hz(fn)
    assert (lo, hi) == pytest.approx((0.1, 1e7), rel=1e-12)
    fc = fp * math.sqrt(k**2 - 1)
    m = loop_margins_factored(fn)
    assert [c.f_hz for c in m.crossovers] == pytest.approx([fc], rel=1e-10)
    assert m.crossovers[0].phase_margin_deg == pytest.approx(180.0 - math.degrees(math.atan(fc / fp)), abs=1e-9)
    # A display band around the corner alone (100 mHz … 1 kHz) would miss it.
    assert not display_band_hz(fn)[0] <= fc <= display_band_hz(fn)[1]


def test_q_50_resonance_crossings_are_inside_the_search_band():
    # L = K/(1 + s/(Qω0) + s²/ω0²), K = 0.1, Q = 50: the asymptote stays at -20 dB or below and never
    # crosses 0 dB, but the peak (about K·Q = +14 dB) does, twice. |L| = 1 where y = (ω/ω0)² solves
    # y² - (2 - 1/Q²)·y + (1 - K²) = 0 (from memory, standard second-order magnitude).
    k, q, f0 = 0.1, 50.0, 2e3
    fn = FactoredNumeric(k, 0, (pair(f0, q),))
    lo, hi = crossing_search_band_hz(fn)
    assert (lo, hi) == pytest.approx((20.0, 2e5), rel=1e-12)
    ys = np.roots([1.0, -(2.0 - 1.0 / q**2), 1.0 - k**2])
    expected = sorted(f0 * math.sqrt(y.real) for y in ys)
    assert all(lo < f < hi for f in expected)
    found = [c.f_hz for c in loop_margins_factored(fn).crossovers]
    assert found == pytest.approx(expected, rel=1e-9)


def test_low_q_pair_search_band_uses_its_split_corners():
    # A pair with Q = 0.05 at 1 kHz has two real roots, numpy.roots of s² + (ω0/Q)s + ω0²; the
    # band reaches two decades beyond both (not beyond ω0 alone).
    q, f0 = 0.05, 1e3
    w0 = TWO_PI * f0
    roots = sorted(abs(r) / TWO_PI for r in np.roots([1.0, w0 / q, w0**2]))
    fn = FactoredNumeric(1e-3, 0, (Factor("pole", 2, w0, q),))  # -60 dB: no crossing of its own
    lo, hi = crossing_search_band_hz(fn)
    assert (lo, hi) == pytest.approx((roots[0] / 100, roots[1] * 100), rel=1e-9)
    assert lo < f0 / 100 / 10 and hi > f0 * 100 * 10  # wider than the ω0 anchor by over a decade


def test_constant_loop_has_no_search_band():
    with pytest.raises(AnalysisError, match="no frequency scale"):
        crossing_search_band_hz(FactoredNumeric(2.0, 0, ()))


# --------------------------------------------------------------------------- departure band and union


def test_departure_band_reaches_five_decades_down_three_up():
    # Corner 1 kHz, op-amp dominant pole 10 Hz and gain-bandwidth 1 MHz: 10 Hz/1e5 = 100 µHz …
    # 1 MHz·1e3 = 1 GHz (hand-worked from the rule); clamped at 1 µHz … 10 THz.
    fn = FactoredNumeric(1.0, 0, (pole(1e3),))
    assert departure_search_band_hz(fn, extra_hz=(1e6, 10.0)) == pytest.approx((1e-4, 1e9), rel=1e-12)
    assert departure_search_band_hz(fn, extra_hz=(1e-3, 1e11)) == pytest.approx((1e-6, 1e13), rel=1e-12)
    assert departure_search_band_hz() == pytest.approx((1e-5, 1e3), rel=1e-12)  # 1 Hz when nothing is given


def test_union_band():
    assert union_band_hz((1.0, 10.0), (0.5, 3.0), (2.0, 40.0)) == (0.5, 40.0)


# --------------------------------------------------------------------------- users of the policy


def _far_crossover_design(r2: str = "10k") -> lc.Design:
    # Inverting stage of gain -R2/R1 (no corners) and a plant 1e4/(1 + s/(2π·10 Hz)): the loop
    # L = 1e4·(R2/R1)/(1 + s/p) crosses 0 dB near 100 kHz, four decades above every corner.
    return lc.Design.from_dict({
        "loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "R2"},
        "values": {"R1": "10k", "R2": r2}, "plant": {"kind": "general", "gain": 1e4, "poles_hz": [10.0]},
    })


def test_monte_carlo_grid_holds_a_crossover_far_above_the_corners():
    # Closed form as in test_search_band_reaches_beyond_a_crossover_far_above_the_corners (Ogata 2010):
    # ωc = p·sqrt(K² - 1) with K = 1e4·R2/R1, PM = 180° - atan(ωc/p). The default grid is anchored on
    # the nominal crossover, so every sample's crossing lies on it.
    d = _far_crossover_design()
    r2 = np.array([5e3, 10e3, 20e3])
    b = evaluate_batch(d, {"R2": r2})
    fc = 10.0 * np.sqrt((1e4 * r2 / 10e3) ** 2 - 1)
    np.testing.assert_allclose(b.crossover_hz, fc, rtol=1e-9)
    np.testing.assert_allclose(b.phase_margin_deg, 180.0 - np.degrees(np.arctan(fc / 10.0)), atol=1e-6)
    assert np.all(b.n_crossovers == 1)


def test_record_figure_band_shows_every_crossover_and_matches_the_spread_grid():
    from loopcraft.report.figures import figure_band_hz

    d = _far_crossover_design()
    lo, hi = figure_band_hz(d)
    fc = 10.0 * math.sqrt(1e4**2 - 1)  # Ogata 2010, as above
    # Corner 10 Hz and crossover ≈ 100 kHz: 100 mHz … 10 MHz (hand-worked).
    assert (lo, hi) == pytest.approx((0.1, 1e7), rel=1e-12)
    assert lo < fc < hi
    # The Monte Carlo default grid covers the figure exactly (its envelope is drawn end to end).
    sp = monte_carlo(d.with_sections(tolerances={"R*": "1%"}), 20, seed=3)
    assert (sp.f_hz[0], sp.f_hz[-1]) == pytest.approx((lo, hi), rel=1e-12)
