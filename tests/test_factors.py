"""Pole-zero cancellation and zero-damping pairs in the numeric factored form.

Outside references are named beside each check: the twin-T notch frequency
(Franco 2002), scipy.signal for responses, and hand algebra marked "from memory".
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal as sig
import sympy as sp

from loopcraft import Design
from loopcraft.errors import AnalysisError
from loopcraft.numeric.evaluator import TransferResult
from loopcraft.numeric.factored import FactoredForm
from loopcraft.numeric.factors import (
    CANCEL_REL_TOL,
    JW_AXIS_REL_TOL,
    Factor,
    cancel_roots,
    drop_cancelled,
    factors_from_roots,
)
from loopcraft.symbolic.symbols import S, component_symbol

TWIN_T_VALUES = {"R1": "26.5k", "R2": "26.5k", "C1": "100n", "C2": "100n", "R3": "13.25k", "C3": "200n"}


def twin_t(**values: str) -> Design:
    """Balanced twin-T (R1 = R2 = R, C1 = C2 = C, R3 = R/2, C3 = 2C) driving a follower."""
    return Design.from_dict(
        {
            "loopcraft": 1,
            "title": "twin-T notch",
            "stage": {
                "kind": "circuit",
                "elements": [
                    ["R1", "in", "a"], ["R2", "a", "b"], ["C3", "a", "gnd"],
                    ["C1", "in", "c"], ["C2", "c", "b"], ["R3", "c", "gnd"],
                ],
                "opamps": [{"plus": "b", "minus": "out", "out": "out"}],
                "input": "in",
                "output": "out",
            },
            "values": {**TWIN_T_VALUES, **values},
        }
    )


def _unreduced_tf(d: Design) -> tuple[np.ndarray, np.ndarray]:
    """num, den of the derivation's polynomials at the design's values (descending powers of s)."""
    v = {component_symbol(k): x for k, x in d.values.items()}
    num = sp.Poly(d.derivation.numerator.subs(v), S).all_coeffs()
    den = sp.Poly(d.derivation.denominator.subs(v), S).all_coeffs()
    return np.array([float(c) for c in num]), np.array([float(c) for c in den])


# -- the twin-T notch -----------------------------------------------------------------------


def test_twin_t_notch_is_one_zero_pair_on_the_axis_after_cancellation():
    # Balanced twin-T: notch at f0 = 1/(2π·R·C) (Franco, "Design with Operational Amplifiers
    # and Analog Integrated Circuits", 2002, twin-T notch; section from memory).
    f0 = 1 / (2 * math.pi * 26.5e3 * 100e-9)
    assert f0 == pytest.approx(60.06, abs=0.005)
    tr = twin_t().transfer()
    # The full numerator and denominator are cubics; at these values one real zero and one
    # real pole coincide at ω0 (the balanced network's numerator is (1 + sRC)(1 + (sRC)²),
    # its denominator has the factor (1 + sRC); from memory).
    assert len(tr.zeros) == 3 and len(tr.poles) == 3
    (c,) = tr.cancelled
    assert c.imag == 0 and -c.real / (2 * math.pi) == pytest.approx(f0, rel=1e-9)
    z = tr.reduced_zeros
    assert len(z) == 2 and np.all(z.real == 0.0)
    np.testing.assert_allclose(np.sort(np.abs(z.imag)), [2 * math.pi * f0] * 2, rtol=1e-9)
    # Unloaded balanced twin-T: denominator (1 + sRC)(1 + 4sRC + (sRC)²), so the remaining
    # poles are (2 ± √3)/(RC) and the notch Q is 1/4 (from memory).
    rc = 26.5e3 * 100e-9
    np.testing.assert_allclose(np.sort(-tr.reduced_poles.real), [(2 - math.sqrt(3)) / rc, (2 + math.sqrt(3)) / rc],
                               rtol=1e-9)
    assert np.all(tr.reduced_poles.imag == 0)
    (pair,) = [f for f in tr.reduced.factors if f.role == "zero"]
    assert pair.order == 2 and pair.q == math.inf and pair.on_jw_axis and not pair.rhp
    assert pair.f_hz == pytest.approx(f0, rel=1e-9)
    assert tr.hidden_modes.size == 0  # the cancelled pole is in the left half plane


def test_twin_t_reduced_response_matches_scipy_freqs_of_the_full_tf():
    # Cancellation does not change H: scipy.signal.freqs of the unreduced polynomials.
    d = twin_t()
    tr = d.transfer()
    b, a = _unreduced_tf(d)
    f = np.logspace(0, 4, 401)
    _, h_ref = sig.freqs(b, a, worN=2 * np.pi * f)
    np.testing.assert_allclose(tr.reduced.response(f), h_ref, rtol=1e-9, atol=1e-12)
    np.testing.assert_allclose(tr.factored.response(f), h_ref, rtol=1e-9, atol=1e-12)
    # The same through scipy's zpk form of the reduced roots.
    _, h_zpk = sig.freqs_zpk(tr.reduced_zeros, tr.reduced_poles, tr.zpk_gain, worN=2 * np.pi * f)
    np.testing.assert_allclose(h_zpk, h_ref, rtol=1e-9, atol=1e-12)


def test_twin_t_factored_text_html_latex_say_cancellation_and_infinite_q():
    ff = twin_t().factored()
    text = str(ff)
    assert "Q = ∞" in text and "on the jω axis" in text
    assert "pole-zero cancellation at 60.06 Hz at these values" in text
    assert "e+1" not in text  # no 1e15 / 1e16 stand-in for Q
    assert "pole-zero cancellation at 60.06 Hz at these values" in ff._repr_html_()
    assert r"\text{pole-zero cancellation at 60.06 Hz at these values}" in ff._repr_latex_()
    # Rows keep their labels: the cancelled ωz1 and ωp2 are left out. The cubic numerator's
    # real root and pair are numbered in their own sequences (ωz…, ω0z…), the three real
    # poles of the cubic denominator by frequency within it (numeric roots; corner_labels).
    shown = [name for _t, name, _f, _v in ff._corner_lines()]
    assert shown == ["ω0z1", "ωp1", "ωp3"]
    assert [c.label for c in ff.corners if c.cancelled] == ["ωz1", "ωp2"]
    assert ff.to_dict()["cancellations"] == ["pole-zero cancellation at 60.06 Hz at these values"]
    rows = ff.to_dict()["factors"]
    assert len(rows) == 3
    (zrow,) = [r for r in rows if r["role"] == "zero"]
    assert zrow["q"] is None and zrow["q_infinite"] is True


def test_twin_t_off_balance_has_no_cancellation():
    # R3 one percent off R/2: the real zero and pole separate (by far more than 1e-9).
    tr = twin_t(R3="13.3k").transfer()
    assert tr.cancelled.size == 0
    assert len(tr.reduced_zeros) == 3 and len(tr.reduced_poles) == 3
    assert "cancellation" not in str(twin_t(R3="13.3k").factored())


# -- the tolerance ---------------------------------------------------------------------------


@pytest.mark.parametrize("rel", [0.5 * CANCEL_REL_TOL, 0.99 * CANCEL_REL_TOL])
def test_near_cancellation_inside_the_tolerance_is_cancelled(rel):
    p = -2 * math.pi * 1e3
    c = cancel_roots([p * (1 + rel)], [p, -10.0])
    assert len(c.pairs) == 1 and c.zeros.size == 0
    np.testing.assert_array_equal(c.poles, [-10.0])


@pytest.mark.parametrize("rel", [1.01 * CANCEL_REL_TOL, 2 * CANCEL_REL_TOL, 1e-6])
def test_near_cancellation_just_outside_the_tolerance_is_not_cancelled(rel):
    p = -2 * math.pi * 1e3
    c = cancel_roots([p * (1 + rel)], [p])
    assert c.pairs == () and c.zeros.size == 1 and c.poles.size == 1
    # Complex pairs the same way: distance rel·|p| between the upper roots.
    w = complex(-300.0, 4000.0)
    z = w + rel * abs(w)
    c = cancel_roots([z, z.conjugate()], [w, w.conjugate()])
    assert c.pairs == ()


def test_lead_lag_stage_cancels_only_within_the_tolerance():
    # H = -(Zf/Zi) with Zi = R1 + 1/(sC1), Zf = R2 + 1/(sC2) gives
    # H = -(C1/C2)·(1 + s·R2·C2)/(1 + s·R1·C1) (from memory): flat when R1·C1 = R2·C2.
    def stage(r2: float) -> TransferResult:
        return Design.from_dict(
            {"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1 + C1", "feedback": "R2 + C2"},
             "values": {"R1": 10e3, "C1": 10e-9, "R2": r2, "C2": 10e-9}}
        ).transfer()

    exact = stage(10e3)
    assert exact.cancelled.size == 1 and exact.reduced.factors == ()
    assert exact.reduced.gain == pytest.approx(-1.0, rel=1e-15)  # -C1/C2
    assert stage(10e3 * (1 + 0.5e-9)).cancelled.size == 1
    outside = stage(10e3 * (1 + 2e-9))
    assert outside.cancelled.size == 0 and len(outside.reduced.factors) == 2


# -- property test: an inserted pair is found -------------------------------------------------


def _random_roots(rng: np.random.Generator, n_real: int, n_pairs: int) -> list[complex]:
    mags = 10.0 ** rng.uniform(0, 6, n_real + n_pairs)
    out: list[complex] = [complex(-m if rng.random() < 0.8 else m) for m in mags[:n_real]]
    for m in mags[n_real:]:
        theta = rng.uniform(0.05, 0.5 * math.pi - 0.05) * (1 if rng.random() < 0.85 else -1)
        r = -m * math.cos(theta) + 1j * m * math.sin(abs(theta))
        if theta < 0:
            r = complex(-r.real, r.imag)  # right half plane
        out += [r, r.conjugate()]
    return out


def _min_rel_gap(a: list[complex], b: list[complex]) -> float:
    return min((abs(x - y) / max(abs(x), abs(y)) for x in a for y in b), default=math.inf)


def test_random_inserted_pairs_are_detected():
    # Property: a zero/pole pair inserted into random root sets (apart by more than 1e-6
    # relative) is the one cancellation found, and the responses with and without it agree
    # (scipy.signal.freqs_zpk as the reference). Seeded for reproducibility.
    rng = np.random.default_rng(20240611)
    checked = 0
    for _ in range(200):
        zeros = _random_roots(rng, int(rng.integers(0, 4)), int(rng.integers(0, 3)))
        poles = _random_roots(rng, int(rng.integers(1, 4)), int(rng.integers(0, 3)))
        if _min_rel_gap(zeros, poles) < 1e-6:
            continue
        m = 10.0 ** rng.uniform(0, 6)
        if rng.random() < 0.5:
            ins_z = [complex(-m)]
        else:
            theta = rng.uniform(0.05, 1.5)
            u = complex(-m * math.cos(theta), m * math.sin(theta))
            ins_z = [u, u.conjugate()]
        if _min_rel_gap(ins_z, zeros + poles) < 1e-6:
            continue
        eps = rng.uniform(-0.4, 0.4) * CANCEL_REL_TOL
        ins_p = [r * (1 + eps) for r in ins_z]
        z_all = list(zeros)
        p_all = list(poles)
        for r in ins_z:
            z_all.insert(int(rng.integers(0, len(z_all) + 1)), r)
        for r in ins_p:
            p_all.insert(int(rng.integers(0, len(p_all) + 1)), r)
        c = cancel_roots(z_all, p_all)
        assert len(c.pairs) == len(ins_z)
        np.testing.assert_allclose(np.sort_complex(c.cancelled), np.sort_complex(np.array(ins_p)), rtol=1e-15)
        np.testing.assert_array_equal(np.sort_complex(c.zeros), np.sort_complex(np.array(zeros, dtype=complex)))
        np.testing.assert_array_equal(np.sort_complex(c.poles), np.sort_complex(np.array(poles, dtype=complex)))
        # The reduced factored form: same response as the full roots (scipy.signal.freqs_zpk).
        fn = factors_from_roots(z_all, p_all, 1.0)
        red = drop_cancelled(fn, c)
        assert sum(f.order for f in red.factors) == len(zeros) + len(poles)
        w = np.logspace(-1, 7, 60)
        k = float(np.real(np.prod(-np.array(p_all)) / np.prod(-np.array(z_all)))) if z_all else float(
            np.real(np.prod(-np.array(p_all))))
        _, h_ref = sig.freqs_zpk(z_all, p_all, k, worN=w)
        np.testing.assert_allclose(red.evaluate(1j * w), h_ref, rtol=1e-6)
        checked += 1
    assert checked > 100


# -- zero damping ------------------------------------------------------------------------------


def test_roots_on_the_axis_have_infinite_q():
    # (1 + s²/ω0²) has roots ±jω0 and zero damping (from memory); Q = ω0/(2|σ|) → ∞.
    w0 = 2 * math.pi * 50.0
    fn = factors_from_roots([1j * w0, -1j * w0], [-w0 / 3], 1.0)
    (pair,) = fn.zeros
    assert pair.q == math.inf and pair.on_jw_axis and not pair.rhp
    np.testing.assert_array_equal(pair.roots(), [1j * w0, -1j * w0])
    assert abs(fn.evaluate(np.array([1j * w0]))[0]) < 1e-15  # a true null, not 1/Q deep
    # Rounding noise far below JW_AXIS_REL_TOL counts as on the axis; damping above it does not.
    noisy = factors_from_roots([complex(-1e-3 * JW_AXIS_REL_TOL * w0, w0), complex(-1e-3 * JW_AXIS_REL_TOL * w0, -w0)],
                               [], 1.0)
    assert noisy.zeros[0].q == math.inf
    damped = factors_from_roots([complex(-10 * JW_AXIS_REL_TOL * w0, w0), complex(-10 * JW_AXIS_REL_TOL * w0, -w0)],
                                [], 1.0)
    assert damped.zeros[0].q == pytest.approx(1 / (20 * JW_AXIS_REL_TOL), rel=1e-6)


def test_factor_rejects_bad_q_and_an_rhp_axis_pair():
    with pytest.raises(AnalysisError, match="Q > 0"):
        Factor("zero", 2, 100.0, q=float("nan"))
    with pytest.raises(AnalysisError, match="neither half plane"):
        Factor("zero", 2, 100.0, q=math.inf, rhp=True)


# -- hidden modes --------------------------------------------------------------------------------


def test_cancelled_rhp_pole_is_reported_as_a_hidden_mode():
    # A right-half-plane pole cancelled by a zero still grows inside the stage
    # (internal instability; common practice, no source).
    zeros = np.array([1e3 + 0j])
    poles = np.array([1e3 + 0j, -50.0 + 0j])
    fn = factors_from_roots(zeros, poles, 1.0)
    tr = TransferResult(fn, zeros, poles, {})
    np.testing.assert_array_equal(tr.cancelled, [1e3])
    np.testing.assert_array_equal(tr.hidden_modes, [1e3])
    assert tr.reduced.factors == (Factor("pole", 1, 50.0),)


def test_cancel_roots_keeps_conjugate_pairs_together():
    w = complex(-200.0, 3000.0)
    c = cancel_roots([w, w.conjugate(), -5.0], [w.conjugate() * (1 + 1e-12), w * (1 + 1e-12), -7.0])
    assert len(c.pairs) == 2
    np.testing.assert_array_equal(c.zeros, [-5.0])
    np.testing.assert_array_equal(c.poles, [-7.0])
    # A real root never cancels one root of a complex pair.
    assert cancel_roots([-100.0], [complex(-100.0, 1e-6), complex(-100.0, -1e-6)]).pairs == ()


def test_form_cancellation_note_for_a_type3_coincidence():
    # Type III zero 1/(R2·C1) and pole 1/(R3·C3) (Venable 1983 formulas) made equal:
    # R2·C1 = 22k·6.8n = R3·C3 = 1k·149.6n. The other rows keep their formulas.
    d = Design.from_dict(
        {"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1 || (R3 + C3)", "feedback": "(R2 + C1) || C2"},
         "values": {"R1": 10e3, "R2": 22e3, "R3": 1e3, "C1": 6.8e-9, "C2": 150e-12, "C3": 149.6e-9}}
    )
    ff = FactoredForm(d.derivation, d.transfer())
    f_c = 1 / (2 * math.pi * 22e3 * 6.8e-9)
    assert ff.result.cancelled.size == 1
    assert -ff.result.cancelled[0].real / (2 * math.pi) == pytest.approx(f_c, rel=1e-9)
    kept = {c.formula for c in ff.reduced_corners}
    assert kept == {"1/(C3·(R1 + R3))", "(C1 + C2)/(C1·C2·R2)"}
    assert any(n.startswith("pole-zero cancellation at 1.064 kHz") for n in ff.cancellation_notes)


# -- corner labels: fixed per topology by the formula, not by frequency rank -------------------------


def venable_type3(v: dict[str, float]) -> dict[str, tuple[str, float]]:
    """Label → (formula, ω rad/s) of the Type III amplifier.

    Corner formulas from Venable, "The K Factor: A New Mathematical Tool for Stability Analysis
    and Synthesis", 1983 (written from memory): zeros 1/(R2·C1) and 1/((R1 + R3)·C3), poles
    (C1 + C2)/(R2·C1·C2) and 1/(R3·C3). The numbers are the documented rule of corner_labels
    (designators of the lowest-numbered parts first).
    """
    return {
        "ωz1": ("1/(C1·R2)", 1 / (v["R2"] * v["C1"])),
        "ωz2": ("1/(C3·(R1 + R3))", 1 / ((v["R1"] + v["R3"]) * v["C3"])),
        "ωp1": ("(C1 + C2)/(C1·C2·R2)", (v["C1"] + v["C2"]) / (v["R2"] * v["C1"] * v["C2"])),
        "ωp2": ("1/(C3·R3)", 1 / (v["R3"] * v["C3"])),
    }


def test_type3_labels_follow_their_formulas_while_r2_sweeps_5k_to_500k():
    from loopcraft import topology

    base = topology("type3").design()
    ranks = set()
    for r2 in np.geomspace(5e3, 500e3, 41):
        d = base.with_values(R2=float(r2))
        ff = d.factored()
        want = venable_type3(d.values)
        got = {c.label: c for c in ff.corners}
        assert set(got) == set(want)
        for label, (formula, w) in want.items():
            assert got[label].formula == formula, (r2, label)
            assert got[label].omega_rad_s == pytest.approx(w, rel=1e-12)
        # The rows keep their place in the table and in the text.
        assert [c.label for c in ff.corners] == ["ωz1", "ωz2", "ωp1", "ωp2"]
        assert [line[1] for line in ff._corner_lines()] == ["ωz1", "ωz2", "ωp1", "ωp2"]
        ranks.add(tuple(sorted(got, key=lambda k: (k[1], got[k].omega_rad_s))))
    # Not vacuous: over the sweep 1/(C1·R2) crosses 1/(C3·(R1 + R3)), and (C1 + C2)/(C1·C2·R2)
    # crosses 1/(C3·R3), so ranking by frequency would have renumbered both.
    assert len({r[:2] for r in ranks}) == 2 and len({r[2:] for r in ranks}) == 2


def test_type3_labels_agree_with_the_closed_forms_at_two_value_sets():
    # The library demo values and the k-factor example (poles 177 kHz / 182 kHz in the other order).
    from conftest import EXAMPLES
    from loopcraft import load, topology

    for d in (topology("type3").design(), load(EXAMPLES / "bus48_loop.json")):
        rows = {c.label: c for c in d.factored().corners}
        for label, (formula, w) in venable_type3(d.values).items():
            assert rows[label].formula == formula and rows[label].omega_rad_s == pytest.approx(w, rel=1e-12)
        assert rows["ωz1"].to_dict()["label"] == "ωz1"


def test_cancelled_type3_corners_keep_their_labels():
    # R2·C1 = R3·C3: the zero 1/(R2·C1) cancels the pole 1/(R3·C3) (Venable 1983 formulas).
    d = Design.from_dict(
        {"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1 || (R3 + C3)", "feedback": "(R2 + C1) || C2"},
         "values": {"R1": 10e3, "R2": 22e3, "R3": 1e3, "C1": 6.8e-9, "C2": 150e-12, "C3": 149.6e-9}}
    )
    ff = d.factored()
    cancelled = {c.label: c.formula for c in ff.corners if c.cancelled}
    assert cancelled == {"ωz1": "1/(C1·R2)", "ωp2": "1/(C3·R3)"}
    assert [line[1] for line in ff._corner_lines()] == ["ωz2", "ωp1"]


def lc_pair_with_pole(r2: float) -> Design:
    """Input R1 + C2, feedback C1 || (R2 + L1): H = -s·C2·(R2 + s·L1)/((1 + s·R1·C2)(1 + s·C1·R2 + s²·L1·C1))."""
    return Design.from_dict(
        {"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1 + C2", "feedback": "C1 || (R2 + L1)"},
         "values": {"R1": 1e3, "C2": 1e-9, "C1": 1e-9, "L1": 1e-3, "R2": r2}}
    )


def test_a_pair_turning_real_never_renumbers_the_other_poles():
    # Hand algebra (from memory): poles 1/(R1·C2) and the roots of 1 + s·C1·R2 + s²·L1·C1,
    # ω0 = 1/sqrt(L1·C1) = 1e6 rad/s, Q = sqrt(L1·C1)/(C1·R2): 10 at R2 = 100 Ω, 0.01 at 100 kΩ.
    damped = {c.label: c for c in lc_pair_with_pole(100.0).factored().corners if c.role == "pole"}
    assert set(damped) == {"ωp1", "ω0p1"}
    assert damped["ωp1"].formula == "1/(C2·R1)" and damped["ωp1"].omega_rad_s == pytest.approx(1e6, rel=1e-12)
    assert damped["ω0p1"].q == pytest.approx(10.0, rel=1e-12) and damped["ω0p1"].q_label == "Qp1"
    real = {c.label: c for c in lc_pair_with_pole(100e3).factored().corners if c.role == "pole"}
    # 1/(R1·C2) = 1e6 rad/s now lies between the two real roots, yet keeps ωp1; the numeric roots of the
    # quadratic take its reserved numbers ωp2 < ωp3 (numpy.roots as the reference).
    assert set(real) == {"ωp1", "ωp2", "ωp3"}
    assert real["ωp1"].formula == "1/(C2·R1)"
    ref = sorted(abs(np.roots([1e-3 * 1e-9, 1e-9 * 100e3, 1.0])))
    assert real["ωp2"].omega_rad_s == pytest.approx(ref[0], rel=1e-9)
    assert real["ωp3"].omega_rad_s == pytest.approx(ref[1], rel=1e-9)
    assert real["ωp2"].omega_rad_s < real["ωp1"].omega_rad_s < real["ωp3"].omega_rad_s
