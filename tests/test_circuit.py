"""Tests of the symbolic modified-nodal-analysis solver (loopcraft.symbolic.circuit)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.signal
import sympy as sp

from loopcraft.errors import ComponentValueError, TopologyError
from loopcraft.symbolic.circuit import Circuit, OpampPins
from loopcraft.symbolic.symbols import S, component_symbol

s = S
R1, R2, R3, R4, R5 = (component_symbol(f"R{i}") for i in range(1, 6))
C1, C2, C3 = (component_symbol(f"C{i}") for i in range(1, 4))
L1 = component_symbol("L1")
A = sp.Symbol("A", positive=True)


def same(a: sp.Expr, b: sp.Expr) -> bool:
    return sp.cancel(sp.together(a - b)) == 0


def second_order(expr: sp.Expr) -> tuple[sp.Expr, sp.Expr, sp.Expr, sp.Expr]:
    """Split N/D with a quadratic D = d0 + d1 s + d2 s^2 into (N, d0, d1, d2)."""
    num, den = sp.fraction(sp.cancel(expr))
    d = sp.Poly(den, s).all_coeffs()[::-1]
    assert len(d) == 3, den
    return num, d[0], d[1], d[2]


# --- circuits ---------------------------------------------------------------


def inverting() -> Circuit:
    return Circuit((("R1", "in", "m"), ("R2", "m", "out")), (OpampPins("gnd", "m", "out"),),
                   "in", "out")


def noninverting() -> Circuit:
    return Circuit((("R1", "m", "gnd"), ("R2", "m", "out")), (OpampPins("in", "m", "out"),),
                   "in", "out")


def sallen_key_lowpass() -> Circuit:
    # R1 in->a, R2 a->p, C1 a->out (feedback), C2 p->gnd, unity-gain follower.
    return Circuit(
        (("R1", "in", "a"), ("R2", "a", "p"), ("C1", "a", "out"), ("C2", "p", "gnd")),
        (OpampPins("p", "out", "out"),), "in", "out")


def sallen_key_highpass() -> Circuit:
    # C1 in->a, C2 a->p, R1 a->out (feedback), R2 p->gnd, unity-gain follower.
    return Circuit(
        (("C1", "in", "a"), ("C2", "a", "p"), ("R1", "a", "out"), ("R2", "p", "gnd")),
        (OpampPins("p", "out", "out"),), "in", "out")


def mfb_lowpass_elements(tag: str = "", inp: str = "in", out: str = "out"):
    # R1 in->a, R2 a->out (feedback), R3 a->m, C1 a->gnd, C2 m->out (feedback).
    a, m = f"a{tag}", f"m{tag}"
    elements = ((f"R1{tag}", inp, a), (f"R2{tag}", a, out), (f"R3{tag}", a, m),
                (f"C1{tag}", a, "gnd"), (f"C2{tag}", m, out))
    return elements, OpampPins("gnd", m, out)


def mfb_lowpass() -> Circuit:
    elements, pins = mfb_lowpass_elements()
    return Circuit(elements, (pins,), "in", "out")


def mfb_bandpass() -> Circuit:
    # R1 in->a, R3 a->gnd, C1 a->m, C2 a->out (feedback), R2 m->out (feedback).
    return Circuit(
        (("R1", "in", "a"), ("R3", "a", "gnd"), ("C1", "a", "m"), ("C2", "a", "out"),
         ("R2", "m", "out")),
        (OpampPins("gnd", "m", "out"),), "in", "out")


def tow_thomas() -> Circuit:
    # Three op-amps in one loop: damped integrator, integrator, inverter.
    return Circuit(
        (("R1", "in", "m1"), ("Rq", "m1", "o1"), ("C1", "m1", "o1"), ("R2", "o1", "m2"),
         ("C2", "m2", "o2"), ("R3", "o2", "m3"), ("R4", "m3", "o3"), ("R5", "o3", "m1")),
        (OpampPins("gnd", "m1", "o1"), OpampPins("gnd", "m2", "o2"), OpampPins("gnd", "m3", "o3")),
        "in", "o2")


def type3() -> Circuit:
    # Type III error amplifier: R1 || (R3 + C3) input network, C1 + R2 in
    # parallel with C2 as feedback, and Rb (divider bottom) at the inverting node.
    return Circuit(
        (("R1", "in", "m"), ("R3", "in", "x"), ("C3", "x", "m"), ("R2", "m", "y"),
         ("C1", "y", "out"), ("C2", "m", "out"), ("Rb", "m", "gnd")),
        (OpampPins("gnd", "m", "out"),), "in", "out")


def mfb_cascade() -> Circuit:
    e1, p1 = mfb_lowpass_elements("a", "in", "o1")
    e2, p2 = mfb_lowpass_elements("b", "o1", "out")
    return Circuit(e1 + e2, (p1, p2), "in", "out")


def lc_ladder_buffered() -> Circuit:
    # Doubly loaded LC ladder, follower, then a non-inverting gain stage.
    return Circuit(
        (("Rs", "in", "n1"), ("C1", "n1", "gnd"), ("L1", "n1", "n2"), ("C2", "n2", "gnd"),
         ("Rl", "n2", "gnd"), ("Rg", "m", "gnd"), ("Rf", "m", "out"), ("Cf", "m", "out")),
        (OpampPins("n2", "o1", "o1"), OpampPins("o1", "m", "out")),
        "in", "out")


def inductive_feedback() -> Circuit:
    return Circuit(
        (("R1", "in", "m"), ("R2", "m", "x"), ("L1", "x", "out"), ("C1", "m", "out"),
         ("L2", "in", "m")),
        (OpampPins("gnd", "m", "out"),), "in", "out")


# --- textbook formulas --------------------------------------------------------


def test_inverting_amplifier() -> None:
    # Sedra & Smith, "Microelectronic Circuits" (2015), inverting configuration: -R2/R1.
    assert same(inverting().transfer(), -R2 / R1)


def test_noninverting_amplifier() -> None:
    # Sedra & Smith (2015), non-inverting configuration: 1 + R2/R1.
    assert same(noninverting().transfer(), 1 + R2 / R1)


def test_voltage_follower_without_elements() -> None:
    # Sedra & Smith (2015), unity-gain buffer: 1.
    c = Circuit((), (OpampPins("in", "out", "out"),), "in", "out")
    assert c.transfer() == 1


def test_difference_amplifier_matched_ratios() -> None:
    # Sedra & Smith (2015), difference amplifier: with R3/R4 = R1/R2 the
    # differential gain is R2/R1 and the common-mode gain is zero.
    # Labels: R1 (source side) -> m, R2 m -> out, R3 (source side) -> p, R4 p -> gnd.
    matched = {R3: R1, R4: R2}
    plus_driven = Circuit(
        (("R1", "gnd", "m"), ("R2", "m", "out"), ("R3", "in", "p"), ("R4", "p", "gnd")),
        (OpampPins("p", "m", "out"),), "in", "out").transfer()
    minus_driven = Circuit(
        (("R1", "in", "m"), ("R2", "m", "out"), ("R3", "gnd", "p"), ("R4", "p", "gnd")),
        (OpampPins("p", "m", "out"),), "in", "out").transfer()
    common = Circuit(
        (("R1", "in", "m"), ("R2", "m", "out"), ("R3", "in", "p"), ("R4", "p", "gnd")),
        (OpampPins("p", "m", "out"),), "in", "out").transfer()
    assert same(plus_driven.subs(matched), R2 / R1)
    assert same(minus_driven, -R2 / R1)
    assert same(common, plus_driven + minus_driven)
    assert same(common.subs(matched), 0)


def test_integrator() -> None:
    # Sedra & Smith (2015), Miller integrator: -1/(s R C).
    c = Circuit((("R1", "in", "m"), ("C1", "m", "out")), (OpampPins("gnd", "m", "out"),),
                "in", "out")
    assert same(c.transfer(), -1 / (s * R1 * C1))


def test_differentiator() -> None:
    # Sedra & Smith (2015), op-amp differentiator: -s R C.
    c = Circuit((("C1", "in", "m"), ("R1", "m", "out")), (OpampPins("gnd", "m", "out"),),
                "in", "out")
    assert same(c.transfer(), -s * R1 * C1)


def test_series_rlc_lowpass() -> None:
    # Series R-L with shunt C: 1/(s^2 L C + s R C + 1) (from memory, standard RLC result).
    c = Circuit((("R1", "in", "x"), ("L1", "x", "out"), ("C1", "out", "gnd")), (), "in", "out")
    assert same(c.transfer(), 1 / (s**2 * L1 * C1 + s * R1 * C1 + 1))


def test_sallen_key_lowpass() -> None:
    # Karki, "Analysis of the Sallen-Key Architecture", Texas Instruments
    # application report (2002), unity gain: f0 = 1/(2 pi sqrt(R1 R2 C1 C2)),
    # Q = sqrt(R1 R2 C1 C2)/(C2 (R1 + R2)); C1 feedback cap, C2 cap to ground.
    num, d0, d1, d2 = second_order(sallen_key_lowpass().transfer())
    assert same(num / d0, 1)
    assert same(d0 / d2, 1 / (R1 * R2 * C1 * C2))  # omega0^2
    assert same(d0 * d2 / d1**2, (R1 * R2 * C1 * C2) / (C2 * (R1 + R2)) ** 2)  # Q^2
    vals = {R1: 10e3, R2: 22e3, C1: 10e-9, C2: 4.7e-9}
    f0 = float(sp.sqrt(d0 / d2).subs(vals)) / (2 * math.pi)
    assert f0 == pytest.approx(1 / (2 * math.pi * math.sqrt(10e3 * 22e3 * 10e-9 * 4.7e-9)),
                               rel=1e-12)


def test_sallen_key_highpass() -> None:
    # Karki (2002), unity-gain high-pass (from memory, labels mapped): omega0 =
    # 1/sqrt(R1 R2 C1 C2), Q = sqrt(R1 R2 C1 C2)/(R1 (C1 + C2)), R1 the feedback
    # resistor, R2 the resistor to ground; gain 1 at high frequency.
    num, d0, d1, d2 = second_order(sallen_key_highpass().transfer())
    assert same(num / d2, s**2)
    assert same(d0 / d2, 1 / (R1 * R2 * C1 * C2))
    assert same(d0 * d2 / d1**2, (R1 * R2 * C1 * C2) / (R1 * (C1 + C2)) ** 2)


def mfb_lowpass_formula(r1, r2, r3, c1, c2):
    # Franco, "Design with Operational Amplifiers and Analog Integrated Circuits",
    # 3rd ed. (2002), multiple-feedback low-pass: H0 = -R2/R1,
    # omega0 = 1/sqrt(R2 R3 C1 C2), Q = sqrt(C1 R2 R3 / C2)/(R2 + R3 + R2 R3/R1).
    h0 = -r2 / r1
    w0 = 1 / sp.sqrt(r2 * r3 * c1 * c2)
    q = sp.sqrt(c1 * r2 * r3 / c2) / (r2 + r3 + r2 * r3 / r1)
    return h0 / (1 + s / (q * w0) + s**2 / w0**2)


def test_mfb_lowpass() -> None:
    # Franco (2002), labels: R1 input, R2 feedback resistor, R3 to the inverting
    # input, C1 from the middle node to ground, C2 feedback capacitor.
    h = mfb_lowpass().transfer()
    assert same(h, mfb_lowpass_formula(R1, R2, R3, C1, C2))
    num, d0, d1, d2 = second_order(h)
    assert same(num / d0, -R2 / R1)


def test_mfb_bandpass() -> None:
    # Multiple-feedback band-pass (from memory; cf. Franco 2002, ch. 3), labels:
    # R1 input, R3 middle node to ground, C1 middle node to the inverting input,
    # C2 middle node to the output, R2 feedback resistor. With Rp = R1 || R3:
    # omega0 = 1/sqrt(Rp R2 C1 C2), Q = sqrt(R2/Rp) sqrt(C1 C2)/(C1 + C2),
    # centre gain -(R2/R1)/(1 + C2/C1).
    h = mfb_bandpass().transfer()
    num, d0, d1, d2 = second_order(h)
    rp = R1 * R3 / (R1 + R3)
    n1 = sp.Poly(num, s).coeff_monomial(s)
    assert same(num, n1 * s)
    assert same(d0 / d2, 1 / (rp * R2 * C1 * C2))
    assert same(d0 * d2 / d1**2, (R2 / rp) * C1 * C2 / (C1 + C2) ** 2)
    assert same(n1 / d1, -(R2 / R1) / (1 + C2 / C1))


def test_t_network_feedback() -> None:
    # Sedra & Smith (2015), inverting amplifier with a T-network feedback:
    # -(R2/R1)(1 + R4/R2 + R4/R3); R2 m->x, R3 x->gnd, R4 x->out.
    c = Circuit(
        (("R1", "in", "m"), ("R2", "m", "x"), ("R3", "x", "gnd"), ("R4", "x", "out")),
        (OpampPins("gnd", "m", "out"),), "in", "out")
    assert same(c.transfer(), -(R2 / R1) * (1 + R4 / R2 + R4 / R3))


def test_cascade_of_inverting_stages_is_the_product() -> None:
    # Sedra & Smith (2015): ideal op-amp outputs are voltage sources, so
    # cascaded gains multiply: (-R2/R1)(-R4/R3).
    c = Circuit(
        (("R1", "in", "m1"), ("R2", "m1", "o1"), ("R3", "o1", "m2"), ("R4", "m2", "out")),
        (OpampPins("gnd", "m1", "o1"), OpampPins("gnd", "m2", "out")), "in", "out")
    assert same(c.transfer(), (R2 / R1) * (R4 / R3))


def test_cascade_of_mfb_lowpass_sections() -> None:
    # Franco (2002) section formula, twice; cascaded ideal stages multiply.
    h = mfb_cascade().transfer()
    syms = {n: component_symbol(n) for n in mfb_cascade().component_names}
    first = mfb_lowpass_formula(*(syms[f"{n}a"] for n in ("R1", "R2", "R3", "C1", "C2")))
    second = mfb_lowpass_formula(*(syms[f"{n}b"] for n in ("R1", "R2", "R3", "C1", "C2")))
    assert same(h, first * second)


def test_finite_gain_cascade_is_the_product() -> None:
    # Common practice, no source: a VCVS output is still a stiff voltage, so
    # finite-gain stages multiply too (checked against each stage solved alone).
    e1, p1 = mfb_lowpass_elements("a", "in", "o1")
    e2, p2 = mfb_lowpass_elements("b", "o1", "out")
    wn, wd = Circuit(e1 + e2, (p1, p2), "in", "out").numerator_denominator(A)
    n1, d1 = Circuit(e1, (p1,), "in", "o1").numerator_denominator(A)
    n2, d2 = Circuit(e2, (p2,), "o1", "out").numerator_denominator(A)
    assert sp.expand(wn * d1 * d2 - n1 * n2 * wd) == 0


def test_tow_thomas_biquad() -> None:
    # Tow-Thomas biquad, low-pass output (second integrator), from memory of the
    # standard analysis: damped integrator (Rq || C1), integrator (R2, C2),
    # inverter R4/R3, loop closed by R5.  omega0^2 = R4/(R3 R5 R2 C1 C2),
    # omega0/Q = 1/(Rq C1), DC gain R3 R5/(R1 R4).
    rq = component_symbol("Rq")
    num, d0, d1, d2 = second_order(tow_thomas().transfer())
    assert same(d0 / d2, R4 / (R3 * R5 * R2 * C1 * C2))
    assert same(d1 / d2, 1 / (rq * C1))
    assert same(num / d0, R3 * R5 / (R1 * R4))


# --- finite gain ---------------------------------------------------------------


def test_finite_gain_inverting() -> None:
    # Franco (2002) / Sedra & Smith (2015): -(R2/R1)/(1 + (1 + R2/R1)/A).
    h = inverting().transfer(opamp_gain=A)
    assert same(h, -(R2 / R1) / (1 + (1 + R2 / R1) / A))
    assert same(sp.limit(h, A, sp.oo), -R2 / R1)
    vals = {R1: 1e3, R2: 10e3}
    errors = [abs(float(h.subs(vals).subs(A, a)) + 10.0) for a in (1e2, 1e4, 1e6)]
    assert errors[0] > errors[1] > errors[2]
    assert errors[2] < 2e-4


def test_finite_gain_noninverting_and_follower() -> None:
    # Sedra & Smith (2015): (1 + R2/R1)/(1 + (1 + R2/R1)/A); follower A/(1 + A).
    assert same(noninverting().transfer(A), (1 + R2 / R1) / (1 + (1 + R2 / R1) / A))
    follower = Circuit((), (OpampPins("in", "out", "out"),), "in", "out")
    assert same(follower.transfer(A), A / (1 + A))


def test_single_pole_opamp_closed_loop_pole() -> None:
    # Sedra & Smith (2015), frequency response of the non-inverting amplifier with
    # A(s) = A0 wb/(s + wb): closed-loop pole at wb (1 + A0/(1 + R2/R1)).
    a0, wb = sp.symbols("A0 w_b", positive=True)
    gain = a0 * wb / (s + wb)
    h = noninverting().transfer(opamp_gain=gain)
    assert same(h, (1 + R2 / R1) / (1 + (1 + R2 / R1) / gain))
    _, den = sp.fraction(sp.cancel(h))
    (pole,) = sp.solve(den, s)
    assert same(pole, -wb * (1 + a0 / (1 + R2 / R1)))


def test_float_gain_is_exact() -> None:
    # Common practice, no source: 1e5 as a float equals the integer 100000.
    assert inverting().transfer(1e5) == inverting().transfer(100000)
    assert same(inverting().transfer(100000), -(R2 / R1) / (1 + (1 + R2 / R1) / 100000))


# --- numerator / denominator form ------------------------------------------------


def test_numerator_denominator_form() -> None:
    # Common practice, no source: coprime expanded polynomials whose ratio is H.
    for circuit in (mfb_lowpass(), type3(), lc_ladder_buffered(), tow_thomas()):
        for gain in (None, A):
            num, den = circuit.numerator_denominator(gain)
            syms = sorted((num * den).free_symbols, key=str)
            assert num.is_polynomial(*syms) and den.is_polynomial(*syms)
            assert sp.expand(num) == num and sp.expand(den) == den
            assert sp.gcd(num, den).free_symbols == set()
            lead = sp.Poly(den, s).LC()
            assert float(lead.subs({x: 1 for x in lead.free_symbols})) > 0
            assert same(num / den, circuit.transfer(gain))


def test_equal_circuits_share_the_cache() -> None:
    # Common practice, no source: frozen dataclasses compare and hash by value.
    assert mfb_cascade() == mfb_cascade()
    assert hash(mfb_cascade()) == hash(mfb_cascade())
    assert mfb_cascade().numerator_denominator() is mfb_cascade().numerator_denominator()


def test_lists_are_accepted_and_stored_as_tuples() -> None:
    # Common practice, no source: design files give lists; the value is hashable.
    c = Circuit([["R1", "in", "m"], ["R2", "m", "out"]], [("gnd", "m", "out")], "in", "out")
    assert c == inverting()
    assert c.component_names == ("R1", "R2")
    assert c.nodes == ("in", "m", "out")


# --- independent numeric nodal solve -----------------------------------------------


def numeric_mna(circuit: Circuit, values: dict[str, float], omega_rad_s: np.ndarray,
                gain: float | None = None) -> np.ndarray:
    """Full MNA (node voltages + source and op-amp output currents), numpy solve.

    Standard stamps (common practice; e.g. Ho, Ruehli & Brennan, "The modified
    nodal approach to network analysis", IEEE Trans. Circuits Syst., 1975):
    the source and each op-amp output get a branch current; an ideal op-amp
    row is V+ - V- = 0, a finite-gain one Vo - A (V+ - V-) = 0.
    """
    nodes = [n for n in circuit.nodes]
    idx = {n: i for i, n in enumerate(nodes)}
    nn = len(nodes)
    size = nn + 1 + len(circuit.opamps)
    out = np.empty(len(omega_rad_s), dtype=complex)
    for w_i, w in enumerate(omega_rad_s):
        sv = 1j * w
        m = np.zeros((size, size), dtype=complex)
        b = np.zeros(size, dtype=complex)
        for name, a, bb in circuit.elements:
            v = values[name]
            y = {"R": 1 / v, "C": sv * v, "L": 1 / (sv * v)}[name[0]]
            for p, q in ((a, bb), (bb, a)):
                if p in idx:
                    m[idx[p], idx[p]] += y
                    if q in idx:
                        m[idx[p], idx[q]] -= y
        src = nn
        m[idx[circuit.input], src] += 1
        m[src, idx[circuit.input]] = 1
        b[src] = 1.0
        for k, o in enumerate(circuit.opamps):
            col = nn + 1 + k
            m[idx[o.out], col] += 1
            if gain is not None:
                m[col, idx[o.out]] += 1
            for node, sign in ((o.plus, 1.0), (o.minus, -1.0)):
                if node in idx:
                    m[col, idx[node]] += -sign * gain if gain is not None else sign
        x = np.linalg.solve(m, b)
        out[w_i] = x[idx[circuit.output]]
    return out


VALUES = {
    "R1": 10e3, "R2": 22e3, "R3": 4.7e3, "R4": 15e3, "R5": 33e3, "Rq": 47e3, "Rb": 2.2e3,
    "C1": 10e-9, "C2": 2.2e-9, "C3": 4.7e-9, "L1": 10e-3, "L2": 47e-3,
    "Rs": 600.0, "Rl": 600.0, "Rg": 1e3, "Rf": 3.3e3, "Cf": 1e-9,
    "R1a": 10e3, "R2a": 10e3, "R3a": 6.8e3, "C1a": 22e-9, "C2a": 1e-9,
    "R1b": 4.7e3, "R2b": 12e3, "R3b": 8.2e3, "C1b": 47e-9, "C2b": 2.2e-9,
}


@pytest.mark.parametrize("factory", [tow_thomas, type3, mfb_cascade, lc_ladder_buffered,
                                     inductive_feedback, sallen_key_lowpass, mfb_bandpass])
@pytest.mark.parametrize("gain", [None, 2e4])
def test_matches_numeric_nodal_solve(factory, gain) -> None:
    # Independent check: scipy.signal.freqs on the symbolic N/D at numbers
    # against numpy.linalg.solve of the full MNA matrix at s = j*omega.
    circuit = factory()
    vals = {component_symbol(n): VALUES[n] for n in circuit.component_names}
    a_sym = sp.Symbol("A_num")
    num, den = circuit.numerator_denominator(None if gain is None else a_sym)
    subs = dict(vals)
    if gain is not None:
        subs[a_sym] = gain
    b = [float(c) for c in sp.Poly(num.subs(subs), s).all_coeffs()]
    a = [float(c) for c in sp.Poly(den.subs(subs), s).all_coeffs()]
    omega = np.logspace(2, 6.5, 19)
    _, h_sym = scipy.signal.freqs(b, a, worN=omega)
    h_num = numeric_mna(circuit, VALUES, omega, gain)
    np.testing.assert_allclose(h_sym, h_num, rtol=1e-8, atol=1e-12 * np.max(np.abs(h_num)))


# --- errors ------------------------------------------------------------------------


def test_floating_node() -> None:
    with pytest.raises(TopologyError, match=r"node 'x' is floating"):
        Circuit((("R1", "in", "m"), ("R2", "m", "out"), ("R3", "x", "y")),
                (OpampPins("gnd", "m", "out"),), "in", "out")
    with pytest.raises(TopologyError, match=r"node 'p' is floating"):  # op-amp pin only
        Circuit((("R1", "in", "m"), ("R2", "m", "out")), (OpampPins("p", "m", "out"),),
                "in", "out")


def test_element_on_one_node() -> None:
    with pytest.raises(TopologyError, match=r"element 'R2' has both ends on node 'm'"):
        Circuit((("R1", "in", "m"), ("R2", "m", "m")), (OpampPins("gnd", "m", "out"),),
                "in", "out")


def test_output_node_missing() -> None:
    with pytest.raises(TopologyError, match=r"output node 'vout' does not exist"):
        Circuit((("R1", "in", "m"), ("R2", "m", "out")), (OpampPins("gnd", "m", "out"),),
                "in", "vout")


def test_input_is_ground_or_unconnected() -> None:
    with pytest.raises(TopologyError, match=r"input node is 'gnd'"):
        Circuit((("R1", "in", "m"), ("R2", "m", "out")), (OpampPins("gnd", "m", "out"),),
                "gnd", "out")
    with pytest.raises(TopologyError, match=r"input node 'vin' is not connected"):
        Circuit((("R1", "in", "m"), ("R2", "m", "out")), (OpampPins("gnd", "m", "out"),),
                "vin", "out")


def test_output_is_input_or_ground() -> None:
    with pytest.raises(TopologyError, match=r"output node 'in' is the input node; H = 1"):
        Circuit((("R1", "in", "gnd"),), (), "in", "in")
    with pytest.raises(TopologyError, match=r"output node is 'gnd'"):
        Circuit((("R1", "in", "gnd"),), (), "in", "gnd")


def test_opamp_without_feedback() -> None:
    with pytest.raises(TopologyError, match=r"op-amp 1 \(out='out'\) has no feedback path"):
        Circuit((("R1", "in", "p"), ("R2", "out", "gnd")), (OpampPins("p", "gnd", "out"),),
                "in", "out")
    # feedback that only reaches another op-amp's output does not count
    with pytest.raises(TopologyError, match=r"op-amp 2 \(out='o2'\) has no feedback path"):
        Circuit((("R1", "in", "m1"), ("R2", "m1", "o1"), ("R3", "o2", "o1")),
                (OpampPins("gnd", "m1", "o1"), OpampPins("gnd", "m1", "o2")), "in", "o1")


def test_feedback_through_another_opamp_is_accepted() -> None:
    # Op-amp 1 closes its loop only through the inverting stage around op-amp 2,
    # into its non-inverting input.  Hand derivation (common practice, no source):
    # V(m1) = V(gnd) = 0, so KCL at m1 gives Vin/R1 + Vo2/R2 = 0, H = -R2/R1.
    c = Circuit(
        (("R1", "in", "m1"), ("R2", "m1", "o2"), ("R3", "o1", "m2"), ("R4", "m2", "o2")),
        (OpampPins("m1", "gnd", "o1"), OpampPins("gnd", "m2", "o2")), "in", "o2")
    assert same(c.transfer(), -R2 / R1)


def test_singular_opamp_equations() -> None:
    # Both inputs hang on node x through current-free resistors: V+ = V- holds
    # for any output voltage, so the output is not determined.
    with pytest.raises(TopologyError, match=r"op-amp 1 \(out='out'\) equations are singular "
                       r".*nodes \['a', 'x', 'b', 'out'\] are not determined"):
        Circuit(
            (("R1", "a", "x"), ("R2", "b", "x"), ("R3", "in", "x"), ("R4", "x", "out"),
             ("R5", "x", "gnd")),
            (OpampPins("a", "b", "out"),), "in", "out").transfer()


def test_two_opamps_with_conflicting_constraints() -> None:
    # Two ideal op-amps watching the same pair of nodes: the second constraint
    # repeats the first and leaves an output voltage undetermined.
    c = Circuit(
        (("R1", "in", "m"), ("R2", "m", "o1"), ("R3", "m", "o2")),
        (OpampPins("gnd", "m", "o1"), OpampPins("gnd", "m", "o2")), "in", "o1")
    with pytest.raises(TopologyError, match=r"op-amp 1 \(out='o1'\) equations are singular"
                       r".*nodes \['o1', 'o2'\] are not determined"):
        c.transfer()
    # with finite gain the equations have a unique solution
    assert c.transfer(A) != 0


def test_opamp_output_on_ground_or_input() -> None:
    with pytest.raises(TopologyError, match=r"output tied to 'gnd'"):
        OpampPins("gnd", "m", "gnd")
    with pytest.raises(TopologyError, match=r"op-amp 1 \(out='in'\) drives the input node"):
        Circuit((("R1", "in", "m"), ("R2", "m", "out")), (OpampPins("gnd", "m", "in"),),
                "in", "out")


def test_opamp_pin_faults() -> None:
    with pytest.raises(TopologyError, match=r"both inputs on node 'm'"):
        OpampPins("m", "m", "out")
    with pytest.raises(TopologyError, match=r"shares its output node"):
        Circuit((("R1", "in", "m"), ("R2", "m", "out")),
                (OpampPins("gnd", "m", "out"), OpampPins("in", "m", "out")), "in", "out")


def test_output_not_reached() -> None:
    # The input only loads R1; the op-amp stage never sees it.
    with pytest.raises(TopologyError, match=r"output node 'out' is not reached from the input"):
        Circuit((("R1", "in", "gnd"), ("R2", "m", "out"), ("R3", "m", "gnd")),
                (OpampPins("gnd", "m", "out"),), "in", "out")


def test_transfer_identically_zero() -> None:
    # The inverting node is a virtual ground: V(m) = 0 for every input.
    c = Circuit((("R1", "in", "m"), ("R2", "m", "out")), (OpampPins("gnd", "m", "out"),),
                "in", "m")
    with pytest.raises(TopologyError, match=r"identically zero.*virtual ground"):
        c.transfer()


def test_bad_names() -> None:
    with pytest.raises(ComponentValueError, match=r"'Q1' is not a reference designator"):
        Circuit((("Q1", "in", "out"),), (), "in", "out")
    with pytest.raises(ComponentValueError, match=r"designator 'R1' is used twice"):
        Circuit((("R1", "in", "out"), ("R1", "out", "gnd")), (), "in", "out")
    with pytest.raises(TopologyError, match=r"node name 'n-1' is not valid"):
        Circuit((("R1", "in", "n-1"),), (), "in", "n-1")
    with pytest.raises(TopologyError, match=r"node name '' is not valid"):
        Circuit((("R1", "in", ""),), (), "in", "out")
    with pytest.raises(TopologyError, match=r"'GND' looks like ground"):
        Circuit((("R1", "in", "out"), ("R2", "out", "GND")), (), "in", "out")
    with pytest.raises(TopologyError, match=r"expected \(designator, node_a, node_b\)"):
        Circuit((("R1", "in"),), (), "in", "out")


def test_bad_opamp_gain() -> None:
    with pytest.raises(ComponentValueError, match=r"opamp_gain = '1e5'"):
        inverting().transfer("1e5")  # type: ignore[arg-type]
    with pytest.raises(ComponentValueError, match=r"is zero"):
        inverting().transfer(0)
    with pytest.raises(ComponentValueError, match=r"not finite"):
        inverting().transfer(sp.oo)
    with pytest.raises(ComponentValueError, match=r"rational function"):
        inverting().transfer(A * sp.exp(-s))
