"""Tests of the loop-margin module against closed forms, mpmath and scipy.signal."""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from scipy import signal

from loopcraft.analysis.margins import (
    Crossover,
    GainMargin,
    LoopMargins,
    loop_margins,
    loop_margins_factored,
    slope_db_per_decade,
)
from loopcraft.errors import AnalysisError
from loopcraft.numeric.factors import Factor, FactoredNumeric, factors_from_roots

TWO_PI = 2.0 * math.pi


def _positive_real_roots(coeffs_high_first: list[float]) -> list[float]:
    """Positive real roots of a real polynomial, by mpmath at 50 digits (independent solver).

    The variable is first scaled by sigma = |c0/cn|^(1/n) so the roots are of order one.
    """
    n = len(coeffs_high_first) - 1
    with mpmath.workdps(50):
        c = [mpmath.mpf(x) for x in coeffs_high_first]
        sigma = abs(c[-1] / c[0]) ** (mpmath.mpf(1) / n)
        scaled = [ci * sigma ** (n - i) for i, ci in enumerate(c)]
        roots = mpmath.polyroots(scaled, maxsteps=500, extraprec=100)
        out = [
            float(mpmath.re(r) * sigma)
            for r in roots
            if abs(mpmath.im(r)) < mpmath.mpf(10) ** -30 and mpmath.re(r) > 0
        ]
    return sorted(out)


def _brute_force_count(values: np.ndarray) -> int:
    """Sign changes of a densely sampled function (no bracketing or refinement)."""
    s = np.sign(values)
    return int(np.count_nonzero(s[:-1] * s[1:] < 0))


# --------------------------------------------------------------------------- K/(s(1+s/p))


@pytest.mark.parametrize("k,p", [(100.0, 10.0), (TWO_PI * 1e3, TWO_PI * 5e3), (50.0, 2.0)])
def test_integrator_and_pole(k, p):
    def loop(s):
        return k / (s * (1 + s / p))

    # From memory (|L| = 1 squared): wc^2 (1 + wc^2/p^2) = K^2, a quadratic in wc^2:
    # wc^2 = (p^2/2)(sqrt(1 + 4K^2/p^2) - 1); PM = 90° - atan(wc/p) (Ogata, "Modern Control
    # Engineering", 5th ed., 2010, frequency-response chapter; derived again by hand).
    wc = math.sqrt(p * p / 2 * (math.sqrt(1 + 4 * k * k / (p * p)) - 1))
    pm = 90.0 - math.degrees(math.atan(wc / p))
    # Slope: d(20log10|L|)/d(log10 w) = -20 - 20 x^2/(1 + x^2), x = w/p (derived by hand).
    x = wc / p
    slope = -20.0 - 20.0 * x * x / (1 + x * x)
    fn = FactoredNumeric(k, -1, (Factor("pole", 1, p),))
    for res in (
        loop_margins(loop, wc / TWO_PI / 1e3, wc / TWO_PI * 1e3),
        loop_margins_factored(fn),
    ):
        assert len(res.crossovers) == 1
        c = res.crossovers[0]
        assert c.f_hz == pytest.approx(wc / TWO_PI, rel=1e-11)
        assert c.phase_margin_deg == pytest.approx(pm, abs=1e-9)
        assert c.slope_db_per_decade == pytest.approx(slope, abs=1e-6)
        assert abs(abs(loop(1j * TWO_PI * c.f_hz)) - 1) < 1e-9
        # The phase never reaches -180°: no phase crossover, infinite GM (common practice).
        assert res.gain_margins == ()
        assert res.gain_margin_db is None
        assert res.phase_margin_deg == pytest.approx(pm, abs=1e-9)


# --------------------------------------------------------------------------- K(1+s/z)/(s^2(1+s/p))


@pytest.mark.parametrize("k,z,p", [(1e4, 30.0, 1e3), (TWO_PI**2 * 1e6, TWO_PI * 300, TWO_PI * 1e4)])
def test_double_integrator_with_lead(k, z, p):
    def loop(s):
        return k * (1 + s / z) / (s**2 * (1 + s / p))

    # |L| = 1: K^2 (1 + w^2/z^2) = w^4 (1 + w^2/p^2); with u = w^2 (derived by hand):
    # u^3/p^2 + u^2 - (K^2/z^2) u - K^2 = 0, solved by mpmath; one positive root.
    roots = _positive_real_roots([1 / p**2, 1.0, -(k**2) / z**2, -(k**2)])
    assert len(roots) == 1
    wc = math.sqrt(roots[0])
    # PM = 180° + (-180° + atan(w/z) - atan(w/p)), from the definition of the phase (the lead
    # of a double integrator, as in Franklin, Powell & Emami-Naeini, "Feedback Control of
    # Dynamic Systems"; derived by hand).
    pm = math.degrees(math.atan(wc / z) - math.atan(wc / p))
    fn = FactoredNumeric(k, -2, (Factor("zero", 1, z), Factor("pole", 1, p)))
    for res in (loop_margins(loop, 1e-3, 1e7), loop_margins_factored(fn)):
        assert len(res.crossovers) == 1
        c = res.crossovers[0]
        assert c.f_hz == pytest.approx(wc / TWO_PI, rel=1e-10)
        assert c.phase_margin_deg == pytest.approx(pm, abs=1e-8)
        assert abs(abs(loop(1j * TWO_PI * c.f_hz)) - 1) < 1e-9
        assert res.gain_margins == ()


def test_double_integrator_with_zero_only_biquadratic():
    k, z = 4e4, 50.0

    def loop(s):
        return k * (1 + s / z) / s**2

    # From memory: w^4 - (K^2/z^2) w^2 - K^2 = 0, so w^2 = (K^2/z^2 + sqrt(K^4/z^4 + 4K^2))/2;
    # PM = atan(wc/z).
    a = k * k / (z * z)
    wc = math.sqrt((a + math.sqrt(a * a + 4 * k * k)) / 2)
    res = loop_margins(loop, 1e-2, 1e5)
    assert len(res.crossovers) == 1
    assert res.crossovers[0].f_hz == pytest.approx(wc / TWO_PI, rel=1e-11)
    assert res.phase_margin_deg == pytest.approx(math.degrees(math.atan(wc / z)), abs=1e-9)
    # Slope at crossover between -40 and -20 dB/dec; exact: -40 + 20 x^2/(1 + x^2), x = wc/z.
    x = wc / z
    assert res.crossovers[0].slope_db_per_decade == pytest.approx(
        -40 + 20 * x * x / (1 + x * x), abs=1e-6
    )


# --------------------------------------------------------------------------- three crossings


W_I = TWO_PI * 100.0  # integrator unity-gain frequency, rad/s
W_0 = TWO_PI * 1e3  # resonance, rad/s
Q_R = 20.0  # |L(jw0)| = W_I·Q/W_0 = 2 > 1: the peak rises back through 0 dB


def _resonant_loop(s):
    return (W_I / s) / (1 + s / (Q_R * W_0) + (s / W_0) ** 2)


def test_resonant_loop_reports_all_three_crossings():
    # |L| = 1 with u = w^2 (derived by hand from |jw (1 - x^2 + jx/Q)| = w_i, x = w/w0):
    # u^3/w0^4 + u^2 (1/(Q^2 w0^2) - 2/w0^2) + u - w_i^2 = 0, solved by mpmath.
    roots = _positive_real_roots([1 / W_0**4, 1 / (Q_R**2 * W_0**2) - 2 / W_0**2, 1.0, -(W_I**2)])
    assert len(roots) == 3
    w_cross = [math.sqrt(r) for r in roots]

    # Brute force, independent of the module's bracketing: 2·10^6 log-spaced samples.
    f_dense = np.logspace(0, 5, 2_000_001)
    assert _brute_force_count(np.abs(_resonant_loop(1j * TWO_PI * f_dense)) - 1.0) == 3

    fn = FactoredNumeric(W_I, -1, (Factor("pole", 2, W_0, q=Q_R),))
    for res in (loop_margins(_resonant_loop, 1.0, 1e5), loop_margins_factored(fn)):
        assert len(res.crossovers) == 3
        freqs = [c.f_hz for c in res.crossovers]
        assert freqs == sorted(freqs)
        for c, w in zip(res.crossovers, w_cross, strict=True):
            # Each crossing checked point by point with the test's own loop function.
            assert abs(abs(_resonant_loop(1j * TWO_PI * c.f_hz)) - 1.0) < 1e-9
            assert c.f_hz == pytest.approx(w / TWO_PI, rel=1e-10)
            # ∠L = -90° - atan2(x/Q, 1 - x^2) (from the definition); PM = 180° + ∠L wrapped.
            x = w / W_0
            ang = -90.0 - math.degrees(math.atan2(x / Q_R, 1 - x * x))
            pm = (180.0 + ang + 180.0) % 360.0 - 180.0
            assert c.phase_margin_deg == pytest.approx(pm, abs=1e-7)
        # Phase -90° → -270° passes -180° once, at w0 exactly; GM = -20·log10(W_I·Q/W_0).
        assert len(res.gain_margins) == 1
        assert res.gain_margins[0].f_hz == pytest.approx(W_0 / TWO_PI, rel=1e-10)
        assert res.gain_margin_db == pytest.approx(-20 * math.log10(W_I * Q_R / W_0), abs=1e-8)
        # The worst PM is the minimum over the three.
        assert res.phase_margin_deg == min(c.phase_margin_deg for c in res.crossovers)


def test_conditionally_stable_loop_has_two_phase_crossovers():
    k, z, p = 10.0, 1.0, 100.0

    def loop(s):
        return k * (1 + s / z) ** 2 / (s**3 * (1 + s / p) ** 2)

    # ∠L = -270° + 2atan(w/z) - 2atan(w/p) = -180° ⇔ atan(w/z) - atan(w/p) = 45°
    # ⇔ w^2 - (p - z) w + z p = 0 (tangent of a difference; derived by hand).
    disc = math.sqrt((p - z) ** 2 - 4 * z * p)
    w180 = [((p - z) - disc) / 2, ((p - z) + disc) / 2]
    gm = [-20 * math.log10(abs(loop(1j * w))) for w in w180]
    f_dense = np.logspace(-3, 4, 1_000_001)
    w_dense = TWO_PI * f_dense
    phase_dense = -270 + 2 * np.degrees(np.arctan(w_dense / z) - np.arctan(w_dense / p))
    assert _brute_force_count(phase_dense + 180.0) == 2  # independent count
    assert _brute_force_count(np.abs(loop(1j * w_dense)) - 1.0) == 1

    fn = FactoredNumeric(
        k,
        -3,
        (Factor("zero", 1, z), Factor("zero", 1, z), Factor("pole", 1, p), Factor("pole", 1, p)),
    )
    for res in (loop_margins(loop, 1e-3, 1e4), loop_margins_factored(fn)):
        assert len(res.gain_margins) == 2
        for g, w, want in zip(res.gain_margins, w180, gm, strict=True):
            assert g.f_hz == pytest.approx(w / TWO_PI, rel=1e-10)
            assert g.gain_margin_db == pytest.approx(want, abs=1e-8)
        # Below the low phase crossover |L| > 1: a gain *reduction* margin (negative dB);
        # the worst (minimum) GM is that one (common practice for conditional stability).
        assert gm[0] < 0 < gm[1]
        assert res.gain_margin_db == pytest.approx(min(gm), abs=1e-8)
        assert len(res.crossovers) == 1
        c = res.crossovers[0]
        w = TWO_PI * c.f_hz
        assert abs(abs(loop(1j * w)) - 1) < 1e-9
        pm = 180 - 270 + 2 * math.degrees(math.atan(w / z) - math.atan(w / p))
        assert c.phase_margin_deg == pytest.approx(pm, abs=1e-8)


# --------------------------------------------------------------------------- gain margin


@pytest.mark.parametrize("k,p1,p2", [(10.0, 1.0, 100.0), (3.0, 2.0, 5.0), (2e3, 500.0, 8e3)])
def test_gain_margin_of_integrator_and_two_poles(k, p1, p2):
    def loop(s):
        return k / (s * (1 + s / p1) * (1 + s / p2))

    # From memory (also Routh–Hurwitz on s(1+s/p1)(1+s/p2) + K): the phase crosses -180° at
    # w = sqrt(p1 p2), where |L| = K/(p1 + p2); GM = 20·log10((p1 + p2)/K).
    w180 = math.sqrt(p1 * p2)
    gm = 20 * math.log10((p1 + p2) / k)
    fn = FactoredNumeric(k, -1, (Factor("pole", 1, p1), Factor("pole", 1, p2)))
    for res in (loop_margins(loop, 1e-4, 1e6), loop_margins_factored(fn)):
        assert len(res.gain_margins) == 1
        assert res.gain_margins[0].f_hz == pytest.approx(w180 / TWO_PI, rel=1e-10)
        assert res.gain_margin_db == pytest.approx(gm, abs=1e-9)


def test_phase_crossover_on_a_grid_point_is_reported_once():
    # p1 = p2 = 2π·10 rad/s: ∠L = -90° - 2·45° = -180° at exactly 10 Hz, a grid point of the
    # 0.1 Hz … 1 kHz grid; GM = 20·log10(2p/K) (closed form above).
    p = TWO_PI * 10.0
    k = p / 4

    def loop(s):
        return k / (s * (1 + s / p) ** 2)

    fn = FactoredNumeric(k, -1, (Factor("pole", 1, p), Factor("pole", 1, p)))
    for res in (loop_margins(loop, 0.1, 1e3), loop_margins_factored(fn, 0.1, 1e3)):
        assert len(res.gain_margins) == 1
        assert res.gain_margins[0].f_hz == pytest.approx(10.0, rel=1e-12)
        assert res.gain_margin_db == pytest.approx(20 * math.log10(2 * p / k), abs=1e-9)


# --------------------------------------------------------------------------- scipy cross-check


def test_matches_scipy_freqresp_for_a_compensated_lc_plant():
    # Invented scenario: a 48 V → 12 V buck (voltage mode) with LC double pole at 2 kHz, Q = 3,
    # ESR zero at 25 kHz, a Type III compensator (zeros at 1.5 and 1.8 kHz) and three
    # high-frequency poles at 30, 40 and 50 kHz.
    w = TWO_PI
    zeros = [-w * 25e3, -w * 1.5e3, -w * 1.8e3]
    w0, q = w * 2e3, 3.0
    lc = np.roots([1.0, w0 / q, w0**2])
    poles = [0.0, *lc, -w * 30e3, -w * 40e3, -w * 50e3]

    def loop_unit(s):
        return np.prod([s - z for z in zeros], axis=0) / np.prod([s - p for p in poles], axis=0)

    # Leading gain set so that |L(j·2π·10 kHz)| = 1 (the test's own product form).
    k_zpk = 1.0 / abs(loop_unit(1j * w * 10e3))
    sys = signal.ZerosPolesGain(zeros, poles, k_zpk)
    f_ref = np.logspace(1, 6, 400_001)
    _, h = signal.freqresp(sys, w=TWO_PI * f_ref)
    lm = np.log(np.abs(h))
    i = np.nonzero(lm[:-1] * lm[1:] < 0)[0]
    assert len(i) == 1
    # Reference crossover by linear interpolation on the scipy grid.
    t = lm[i] / (lm[i] - lm[i + 1])
    f_x = 10 ** (np.log10(f_ref[i]) + t * (np.log10(f_ref[i + 1]) - np.log10(f_ref[i])))
    ph_ref = np.degrees(np.angle(h[i]))
    pm_ref = (180 + ph_ref + 180) % 360 - 180

    def loop(s):
        return k_zpk * loop_unit(s)

    # Normalized gain: k·Π(-z)/Π(-p) over the non-origin roots (from the factor definition).
    k_norm = k_zpk * np.prod([-z for z in zeros]) / np.prod([-p for p in poles if p != 0])
    fn = factors_from_roots(zeros, poles, float(np.real(k_norm)))
    for res in (loop_margins(loop, 10.0, 1e6), loop_margins_factored(fn, 10.0, 1e6)):
        assert len(res.crossovers) == 1
        c = res.crossovers[0]
        assert c.f_hz == pytest.approx(10e3, rel=1e-10)  # by construction of k_zpk
        assert c.f_hz == pytest.approx(f_x[0], rel=1e-5)
        assert c.phase_margin_deg == pytest.approx(pm_ref[0], abs=0.01)
    # scipy.signal.bode gives the same gain margin at the phase crossovers.
    _, mag_db, phase_deg = signal.bode(sys, w=TWO_PI * f_ref)
    ph = np.unwrap(np.radians(phase_deg))
    m = (np.degrees(ph) + 180) / 360
    j = np.nonzero(np.floor(m[:-1]) != np.floor(m[1:]))[0]
    assert len(j) == 1
    for res in (loop_margins(loop, 10.0, 1e6), loop_margins_factored(fn)):
        assert len(res.gain_margins) == 1
        g = res.gain_margins[0]
        assert g.f_hz == pytest.approx(f_ref[j[0]], rel=1e-4)
        assert g.gain_margin_db == pytest.approx(-mag_db[j[0]], abs=0.01)


# --------------------------------------------------------------------------- details


def test_negative_phase_margin_is_wrapped():
    wc = TWO_PI * 1e3

    # L = -wc/s: 1 + L = 0 at s = +wc, an unstable closed loop (from memory); ∠L = +90° at the
    # crossover, so PM = 270° wraps to -90°.
    res = loop_margins(lambda s: -wc / s, 1.0, 1e6)
    assert res.crossovers[0].f_hz == pytest.approx(1e3, rel=1e-12)
    assert res.phase_margin_deg == pytest.approx(-90.0, abs=1e-9)
    # L = +wc/s: PM = 90° (common practice).
    assert loop_margins(lambda s: wc / s, 1.0, 1e6).phase_margin_deg == pytest.approx(90.0)
    fn = FactoredNumeric(-wc, -1)
    assert loop_margins_factored(fn).phase_margin_deg == pytest.approx(-90.0, abs=1e-9)


def test_slope_db_per_decade_of_integrators():
    # Common practice: 1/s^n falls at 20·n dB/decade.
    assert slope_db_per_decade(lambda s: 1e3 / s, 50.0) == pytest.approx(-20.0, abs=1e-9)
    assert slope_db_per_decade(lambda s: 1e6 / s**2, 50.0) == pytest.approx(-40.0, abs=1e-9)
    # One pole, at its corner: -10 dB/decade (slope -20 x^2/(1+x^2) at x = 1, derived by hand).
    p = TWO_PI * 100
    assert slope_db_per_decade(lambda s: 1 / (1 + s / p), 100.0) == pytest.approx(-10, abs=1e-7)


def test_to_dict_and_empty_margins():
    res = loop_margins(lambda s: 100.0 / (s * (1 + s / 10.0)), 0.01, 1e3)
    d = res.to_dict()
    assert set(d) == {"crossovers", "gain_margins"}
    assert d["gain_margins"] == []
    assert d["crossovers"] == [
        {"f_hz": res.crossovers[0].f_hz, "phase_margin_deg": res.crossovers[0].phase_margin_deg}
    ]
    assert all(type(v) is float for v in d["crossovers"][0].values())
    empty = LoopMargins((), ())
    assert empty.phase_margin_deg is None and empty.gain_margin_db is None
    assert isinstance(res.crossovers[0], Crossover)
    lm = LoopMargins((), (GainMargin(1.0, 6.0), GainMargin(2.0, -3.0)))
    assert lm.gain_margin_db == -3.0


def test_no_crossing_in_band():
    # A loop that stays above 0 dB in the band has no crossover (common practice).
    res = loop_margins(lambda s: 1e6 / s, 1.0, 10.0)
    assert res.crossovers == () and res.phase_margin_deg is None


def test_auto_band_finds_a_crossover_far_beyond_the_corners():
    # K/(s(1+s/p)) with K/p = 10^6: wc ≈ sqrt(K p) = 10^3 p, three decades above the corner.
    p, k = 1.0, 1e6
    wc = math.sqrt(p * p / 2 * (math.sqrt(1 + 4 * k * k / (p * p)) - 1))  # closed form above
    res = loop_margins_factored(FactoredNumeric(k, -1, (Factor("pole", 1, p),)))
    assert len(res.crossovers) == 1
    assert res.crossovers[0].f_hz == pytest.approx(wc / TWO_PI, rel=1e-11)
    # Partly given band: the missing bound is still chosen automatically.
    res2 = loop_margins_factored(FactoredNumeric(k, -1, (Factor("pole", 1, p),)), f_min_hz=1.0)
    assert res2.crossovers[0].f_hz == pytest.approx(wc / TWO_PI, rel=1e-11)


def test_high_q_factored_loop_finds_narrow_peak_crossings():
    # Q = 2000 resonance: the peak is 0.0002 decade wide; |L(w0)| = W_I·Q/W_0 = 200.
    q = 2000.0
    fn = FactoredNumeric(W_I, -1, (Factor("pole", 2, W_0, q=q),))
    res = loop_margins_factored(fn)
    # mpmath on the cubic of test_resonant_loop_reports_all_three_crossings.
    roots = _positive_real_roots([1 / W_0**4, 1 / (q**2 * W_0**2) - 2 / W_0**2, 1.0, -(W_I**2)])
    assert len(roots) == 3
    assert [c.f_hz for c in res.crossovers] == pytest.approx(
        [math.sqrt(r) / TWO_PI for r in roots], rel=1e-10
    )


@pytest.mark.parametrize(
    "args,match",
    [
        ((1.0, 1.0), "below"),
        ((10.0, 1.0), "below"),
        ((-1.0, 10.0), "f_min_hz"),
        ((1.0, math.inf), "f_max_hz"),
    ],
)
def test_bad_band_raises(args, match):
    with pytest.raises(AnalysisError, match=match):
        loop_margins(lambda s: 1 / s, *args)


def test_bad_loops_and_options_raise():
    with pytest.raises(AnalysisError, match="shape"):
        loop_margins(lambda s: 1.0, 1.0, 10.0)
    with pytest.raises(AnalysisError, match="finite"), np.errstate(all="ignore"):
        loop_margins(lambda s: 1 / (s - 2j * np.pi * 1.0), 1.0, 10.0)
    with pytest.raises(AnalysisError, match="points_per_decade"):
        loop_margins(lambda s: 1 / s, 1.0, 10.0, points_per_decade=1)
    with pytest.raises(AnalysisError, match="callable"):
        loop_margins("1/s", 1.0, 10.0)  # type: ignore[arg-type]
    with pytest.raises(AnalysisError, match="f_min_hz and f_max_hz"):
        loop_margins_factored(FactoredNumeric(2.0, 0))
    with pytest.raises(AnalysisError, match="gain"):
        loop_margins_factored(FactoredNumeric(0.0, -1))
    with pytest.raises(AnalysisError, match="f_hz"):
        slope_db_per_decade(lambda s: 1 / s, -1.0)


def test_pure_double_integrator_phase_plateau_raises():
    # K/s^2 has ∠L = -180° at every frequency (from the definition): no isolated phase
    # crossover exists, so the gain margin is undefined rather than one per grid point.
    with pytest.raises(AnalysisError, match="undefined"):
        loop_margins_factored(FactoredNumeric(1e4, -2))
    with pytest.raises(AnalysisError, match="undefined"):
        loop_margins(lambda s: -1e4 / s.imag**2 + 0j, 1.0, 1e3)  # 1/(jω)² = -1/ω²
