"""Transfer functions of inverting / non-inverting stages against outside references."""

import math

import mpmath
import numpy as np
import pytest
import scipy.signal as sig
import sympy as sp

from loopcraft import Design
from loopcraft.errors import ComponentValueError
from loopcraft.symbolic.symbols import S, component_symbol


def inv(zi, zf, **values):
    return Design.from_dict(
        {"loopcraft": 1, "stage": {"kind": "inverting", "input": zi, "feedback": zf}, "values": values}
    )


def test_inverting_gain():
    # H = -Rf/Ri: Sedra & Smith, "Microelectronic Circuits", 7th ed., 2015, section 2.2.
    tr = inv("R1", "R2", R1="10k", R2="47k").transfer()
    assert tr.gain == pytest.approx(-4.7, rel=1e-15)
    assert len(tr.zeros) == 0 and len(tr.poles) == 0


def test_noninverting_gain():
    # H = 1 + Rf/Rg: Sedra & Smith 2015, section 2.3.
    d = Design.from_dict(
        {
            "loopcraft": 1,
            "stage": {"kind": "noninverting", "ground": "R1", "feedback": "R2"},
            "values": {"R1": "1k", "R2": "9k"},
        }
    )
    assert d.transfer().gain == pytest.approx(10.0, rel=1e-15)


def test_integrator_unity_gain_frequency():
    # Inverting integrator |H| = 1 at f = 1/(2 pi R C): Franco, "Design with Operational
    # Amplifiers and Analog Integrated Circuits", 3rd ed., 2002, section 1.7.
    d = inv("R1", "C1", R1="10k", C1="15n")
    tr = d.transfer()
    f_u = 1 / (2 * math.pi * 10e3 * 15e-9)
    assert abs(tr.response([f_u])[0]) == pytest.approx(1.0, rel=1e-12)
    assert tr.origin_order == -1
    assert np.angle(tr.response([f_u])[0], deg=True) == pytest.approx(90.0)  # -1/(jw RC) = +j/(wRC)


def test_lossy_integrator():
    # H = -(R2/R1) / (1 + s R2 C1): Franco 2002, section 3.2 (first-order low-pass).
    d = inv("R1", "R2 || C1", R1="10k", R2="100k", C1="1n")
    ff = d.factored()
    assert ff.gain == pytest.approx(-10.0)
    (pole,) = ff.corners
    assert pole.role == "pole"
    assert pole.omega_rad_s == pytest.approx(1 / (100e3 * 1e-9), rel=1e-14)
    assert pole.formula == "1/(C1·R2)"


def test_practical_differentiator():
    # Zi = R1 + C1, Zf = R2 || C2: H = -s R2 C1 / ((1 + s R1 C1)(1 + s R2 C2)); Franco 2002, section 1.7.
    d = inv("R1 + C1", "R2 || C2", R1="1k", C1="100n", R2="100k", C2="100p")
    ff = d.factored()
    assert ff.origin_order == 1
    assert ff.gain == pytest.approx(-100e3 * 100e-9, rel=1e-14)
    ws = sorted(c.omega_rad_s for c in ff.corners)
    assert ws == pytest.approx(sorted([1 / (1e3 * 100e-9), 1 / (100e3 * 100e-12)]), rel=1e-14)


def test_type2_corner_formulas():
    # Type II: zero 1/(R2 C1), pole (C1 + C2)/(R2 C1 C2), integrator 1/(R1 (C1 + C2)):
    # Erickson & Maksimovic, "Fundamentals of Power Electronics", 2nd ed., 2001, section 9.5.
    r1, r2, c1, c2 = 10e3, 22e3, 6.8e-9, 150e-12
    ff = inv("R1", "(R2 + C1) || C2", R1=r1, R2=r2, C1=c1, C2=c2).factored()
    z = [c for c in ff.corners if c.role == "zero"]
    p = [c for c in ff.corners if c.role == "pole"]
    assert z[0].omega_rad_s == pytest.approx(1 / (r2 * c1), rel=1e-14)
    assert p[0].omega_rad_s == pytest.approx((c1 + c2) / (r2 * c1 * c2), rel=1e-14)
    assert ff.origin_order == -1
    assert ff.gain == pytest.approx(-1 / (r1 * (c1 + c2)), rel=1e-14)
    # The formula over the symbols is found, not only the number.
    sym = {n: component_symbol(n) for n in ("R2", "C1", "C2")}
    expected = (sym["C1"] + sym["C2"]) / (sym["R2"] * sym["C1"] * sym["C2"])
    assert p[0].formula == sp.sstr(sp.factor(expected)).replace("**", "^").replace("*", "·")


def test_type3_corner_formulas(type3_dict):
    # Type III: zeros 1/(R2 C1) and 1/((R1 + R3) C3); poles (C1+C2)/(R2 C1 C2) and 1/(R3 C3):
    # Venable, "The K Factor", Proc. Powercon 10, 1983; also Erickson & Maksimovic 2001, section 9.5.
    d = Design.from_dict(type3_dict)
    v = d.values
    ff = d.factored()
    zeros = sorted(c.omega_rad_s for c in ff.corners if c.role == "zero")
    poles = sorted(c.omega_rad_s for c in ff.corners if c.role == "pole")
    ez = sorted([1 / (v["R2"] * v["C1"]), 1 / ((v["R1"] + v["R3"]) * v["C3"])])
    ep = sorted([(v["C1"] + v["C2"]) / (v["R2"] * v["C1"] * v["C2"]), 1 / (v["R3"] * v["C3"])])
    assert zeros == pytest.approx(ez, rel=1e-14)
    assert poles == pytest.approx(ep, rel=1e-14)
    formulas = {c.formula for c in ff.corners}
    assert {"1/(C1·R2)", "1/(C3·(R1 + R3))", "1/(C3·R3)", "(C1 + C2)/(C1·C2·R2)"} == formulas


def test_against_scipy_freqs_and_tf2zpk(type3_dict):
    # scipy.signal as a reference library: the same H from polynomial coefficients.
    d = Design.from_dict(type3_dict)
    v = {component_symbol(k): x for k, x in d.values.items()}
    num = sp.Poly(d.derivation.numerator.subs(v), S).all_coeffs()
    den = sp.Poly(d.derivation.denominator.subs(v), S).all_coeffs()
    b = np.array([float(c) for c in num])
    a = np.array([float(c) for c in den])
    f = np.logspace(0, 7, 300)
    _, h_ref = sig.freqs(b, a, worN=2 * np.pi * f)
    tr = d.transfer()
    np.testing.assert_allclose(tr.response(f), h_ref, rtol=1e-10)
    z, p, k = sig.tf2zpk(b, a)
    np.testing.assert_allclose(np.sort_complex(tr.zeros), np.sort_complex(z), rtol=1e-9)
    np.testing.assert_allclose(np.sort_complex(tr.poles), np.sort_complex(p), rtol=1e-9, atol=1e-9)
    assert tr.zpk_gain == pytest.approx(k, rel=1e-10)


def _mp_roots(expr, values, dps=50):
    """Roots of a polynomial in s at the given values, with mpmath at ``dps`` digits."""
    mpmath.mp.dps = dps
    sub = {component_symbol(k): sp.Float(repr(x), dps) for k, x in values.items()}
    coeffs = [mpmath.mpf(str(sp.N(c.subs(sub), dps))) for c in sp.Poly(sp.expand(expr), S).all_coeffs()]
    while coeffs and coeffs[-1] == 0:  # roots at the origin
        coeffs.pop()
    n_origin = sp.Poly(sp.expand(expr), S).degree() - (len(coeffs) - 1)
    roots = mpmath.polyroots(coeffs, maxsteps=500, extraprec=400) if len(coeffs) > 1 else []
    return [complex(r) for r in roots] + [0j] * n_origin


def _match(got, ref, rel):
    got = list(got)
    for r in ref:
        i = int(np.argmin([abs(g - r) for g in got]))
        scale = abs(r) if r != 0 else 1.0
        assert abs(got[i] - r) <= rel * scale, (got[i], r)
        got.pop(i)
    assert not got


def test_widely_spread_values_match_mpmath():
    # 1 pF with 10 MΩ and 1 µF with 10 Ω in one network; the feedback ladder gives a
    # cubic that does not factor over the symbols. Reference: mpmath.polyroots at 50 digits.
    values = {"R1": 10.0, "C1": 1e-6, "R2": 10e6, "C2": 1e-12, "R3": 1e3, "C3": 10e-9, "L1": 1e-3}
    d = inv("R1 + C1", "R2 || (C2 + (R3 || (C3 + L1)))", **values)
    degrees = [f.degree for f in d.derivation.factors]
    assert max(degrees) >= 3, degrees  # exercises the numeric (scaled, polished) root path
    tr = d.transfer()
    _match(tr.zeros, _mp_roots(d.derivation.numerator, values), 1e-9)
    _match(tr.poles, _mp_roots(d.derivation.denominator, values), 1e-9)
    numeric = [c for c in d.factored().corners if c.numeric_only]
    assert numeric, "a factor with no closed form must say so"


def test_spread_first_order_roots_match_mpmath():
    # Corners at 1e5 rad/s (10 MΩ·1 pF) and 1e5 rad/s (10 Ω·1 µF) plus a 1e9-spread pair.
    values = {"R1": 10e6, "C1": 1e-12, "R2": 10.0, "C2": 1e-6, "R3": 1e3, "C3": 1e-15}
    d = inv("R1 || C1 || (R3 + C3)", "R2 + C2", **values)
    tr = d.transfer()
    _match(tr.zeros, _mp_roots(d.derivation.numerator, values), 1e-9)
    _match(tr.poles, _mp_roots(d.derivation.denominator, values), 1e-9)


def test_compile_is_cached_and_takes_dicts(type3_dict):
    d = Design.from_dict(type3_dict)
    ev = d.compile()
    assert d.with_values(R2="33k").compile() is ev  # same topology, same evaluator
    r = ev({**d.values, "R2": "33k"})
    z_r2c1 = 1 / (33e3 * 6.8e-9)
    assert np.min(np.abs(r.zeros + z_r2c1)) < 1e-9 * z_r2c1
    with pytest.raises(ComponentValueError, match="R9"):
        ev({**d.values, "R9": 1.0})
    with pytest.raises(ComponentValueError, match="R2: no value"):
        ev({k: v for k, v in d.values.items() if k != "R2"})


def test_dc_and_hf_gain():
    # Lossy integrator: DC gain -R2/R1, HF gain 0 (Franco 2002).
    tr = inv("R1", "R2 || C1", R1="10k", R2="100k", C1="1n").transfer()
    assert tr.dc_gain() == pytest.approx(-10.0)
    assert tr.hf_gain() == 0.0


def _twin_t():
    from test_factors import twin_t

    return twin_t()


def test_transfer_result_keeps_every_root_and_exposes_the_reduced_set():
    # Balanced twin-T (R = 26.5 kΩ, C = 100 nF): notch at 1/(2π·R·C) = 60.06 Hz (Franco,
    # "Design with Operational Amplifiers and Analog Integrated Circuits", 2002; section from
    # memory). zeros/poles stay every root of the numerator/denominator (mpmath reference);
    # reduced_* drop the coinciding real pair at -1/(R·C).
    d = _twin_t()
    tr = d.transfer()
    _match(tr.zeros, _mp_roots(d.derivation.numerator, d.values), 1e-9)
    _match(tr.poles, _mp_roots(d.derivation.denominator, d.values), 1e-9)
    w0 = 1 / (26.5e3 * 100e-9)
    np.testing.assert_allclose(tr.cancelled, [-w0], rtol=1e-9)
    assert len(tr.reduced_zeros) == 2 and len(tr.reduced_poles) == 2
    assert np.all(tr.reduced_zeros.real == 0.0)  # on the jω axis, not -1e-14 of rounding
    # The reduced form gives the same H as the full one (scipy.signal.freqs on the unreduced tf).
    v = {component_symbol(k): x for k, x in d.values.items()}
    b = np.array([float(c) for c in sp.Poly(d.derivation.numerator.subs(v), S).all_coeffs()])
    a = np.array([float(c) for c in sp.Poly(d.derivation.denominator.subs(v), S).all_coeffs()])
    f = np.logspace(0, 4, 200)
    _, h_ref = sig.freqs(b, a, worN=2 * np.pi * f)
    np.testing.assert_allclose(tr.reduced.response(f), h_ref, rtol=1e-9, atol=1e-12)
    assert tr.hf_gain() == pytest.approx(1.0) and tr.dc_gain() == pytest.approx(1.0)  # follower, notch


def test_symbolic_lossless_pair_has_infinite_q():
    # Series L1-C1 as the feedback: H = -(sL + 1/(sC))/R = -(1 + s²LC)/(sRC) (from memory), a
    # zero pair at ±j/sqrt(L·C) with zero damping: the degree-2 factor has a1 = 0 exactly,
    # so Q = ∞ (not a 1e15 stand-in).
    d = inv("R1", "L1 + C1", R1="10k", L1="10m", C1="100n")
    tr = d.transfer()
    (pair,) = [f for f in tr.factored.factors if f.order == 2]
    assert pair.q == math.inf and not pair.rhp
    assert pair.omega_rad_s == pytest.approx(1 / math.sqrt(10e-3 * 100e-9), rel=1e-12)
    assert "Q = ∞" in str(d.factored())
