import math

import mpmath
import pytest
import sympy as sp

from loopcraft import Design, topology
from loopcraft.symbolic.symbols import S, component_symbol


def inv(zi, zf, **values):
    return Design.from_dict(
        {"loopcraft": 1, "stage": {"kind": "inverting", "input": zi, "feedback": zf}, "values": values}
    )


def test_type2_pole_and_zero_sensitivities():
    # ωz = 1/(R2 C1): S_R2 = S_C1 = -1. ωp = (C1 + C2)/(R2 C1 C2): S_R2 = -1,
    # S_C1 = -C2/(C1 + C2), S_C2 = -C1/(C1 + C2). Sensitivity of a product of powers is the
    # exponent: Schaumann & Van Valkenburg, "Design of Analog Filters", 2001, ch. 3 (derivation).
    c1, c2 = 6.8e-9, 150e-12
    sens = inv("R1", "(R2 + C1) || C2", R1="10k", R2="22k", C1=c1, C2=c2).sensitivity()
    rows = {r.label: r for r in sens.rows}
    z = rows["ωz1"].by_component
    assert z["R2"] == pytest.approx(-1) and z["C1"] == pytest.approx(-1) and z["R1"] == 0 and z["C2"] == 0
    p = rows["ωp1"].by_component
    assert p["R2"] == pytest.approx(-1)
    assert p["C1"] == pytest.approx(-c2 / (c1 + c2), rel=1e-12)
    assert p["C2"] == pytest.approx(-c1 / (c1 + c2), rel=1e-12)
    assert rows["ωp1"].formulas["C1"] == "-C2/(C1 + C2)"
    assert set(sens.moved_by("C2")) == {"ωp1"}


def test_sallen_key_q_and_w0_sensitivities():
    # Unity-gain Sallen-Key low-pass: ω0 = 1/sqrt(R1 R2 C1 C2) gives S = -1/2 for every part;
    # Q = sqrt(R1 R2 C1 C2)/(C2 (R1 + R2)) gives S^Q_C1 = 1/2, S^Q_C2 = -1/2,
    # S^Q_R1 = 1/2 - R1/(R1 + R2). Schaumann & Van Valkenburg 2001, ch. 4 (from memory).
    # The library's unit-gain Sallen-Key (C1 from the middle node to the output, C2 to ground).
    d = topology("sallen_key_lowpass").design().with_values(R1="10k", R2="22k", C1="22n", C2="4.7n")
    rows = {r.label: r for r in d.sensitivity().rows}
    w = rows["ω0p1"].by_component
    assert all(v == pytest.approx(-0.5, rel=1e-12) for v in w.values())
    q = rows["Qp1"].by_component
    assert q["C1"] == pytest.approx(0.5) and q["C2"] == pytest.approx(-0.5)
    assert q["R1"] == pytest.approx(0.5 - 10e3 / 32e3, rel=1e-12)
    assert q["R2"] == pytest.approx(0.5 - 22e3 / 32e3, rel=1e-12)


def test_numeric_factor_sensitivity_matches_mpmath():
    # A cubic with no closed form: compare the central difference with a 40-digit mpmath one.
    values = {"R1": 10.0, "C1": 1e-6, "R2": 10e6, "C2": 1e-12, "R3": 1e3, "C3": 10e-9, "L1": 1e-3}
    d = inv("R1 + C1", "R2 || (C2 + (R3 || (C3 + L1)))", **values)
    sens = d.sensitivity()
    numeric = [r for r in sens.rows if r.formulas is None]
    assert numeric
    mpmath.mp.dps = 40
    den = sp.Poly(sp.expand(d.derivation.denominator), S)

    def roots_at(vals):
        sub = {component_symbol(k): sp.Float(mpmath.nstr(mpmath.mpf(v), 40), 40) for k, v in vals.items()}
        cs = [mpmath.mpf(str(sp.N(c.subs(sub), 40))) for c in den.all_coeffs()]
        while cs[-1] == 0:
            cs.pop()
        return sorted(abs(r) for r in mpmath.polyroots(cs, maxsteps=400, extraprec=300))

    h = mpmath.mpf("1e-12")
    for r in numeric:
        if r.role != "pole":
            continue
        for name in ("R2", "L1"):
            up = dict(values, **{name: mpmath.mpf(values[name]) * mpmath.exp(h)})
            dn = dict(values, **{name: mpmath.mpf(values[name]) * mpmath.exp(-h)})
            ru, rd, r0 = roots_at(up), roots_at(dn), roots_at(values)
            k = min(range(len(r0)), key=lambda i: abs(r0[i] - r.value))
            ref = float((mpmath.log(ru[k]) - mpmath.log(rd[k])) / (2 * h))
            assert r.by_component[name] == pytest.approx(ref, abs=1e-7), (r.label, name)


def test_integrator_constant_row_absent():
    # A pure integrator has no corners, hence no sensitivity rows (common practice, no source).
    assert inv("R1", "C1", R1="10k", C1="10n").sensitivity().rows == ()


def test_ideal_lc_pair_has_omega0_sensitivities_and_no_q_row():
    # Feedback C1 + L1 over R1: H = -(1 + s²·L1·C1)/(s·C1·R1), a zero pair on the jω axis at
    # ω0 = 1/sqrt(L1·C1) with no damping term (Q infinite). S of ω0 to L1 and C1 is -1/2 each
    # (exponents of the product; Schaumann & Van Valkenburg, "Design of Analog Filters", 2001, ch. 3),
    # 0 to R1; Q has no finite value, so it has no row.
    sens = inv("R1", "C1 + L1", R1="1k", C1="1n", L1="1m").sensitivity()
    rows = {r.label: r for r in sens.rows}
    assert set(rows) == {"ω0z1"}
    s = rows["ω0z1"].by_component
    assert s["C1"] == pytest.approx(-0.5, abs=1e-12) and s["L1"] == pytest.approx(-0.5, abs=1e-12)
    assert s["R1"] == 0
    assert rows["ω0z1"].value == pytest.approx(1 / math.sqrt(1e-9 * 1e-3), rel=1e-12)


def test_every_sensitivity_is_finite_or_the_call_is_refused():
    # With a damped pair next to the lossless one every row is a finite number (IEEE 754; from memory).
    sens = inv("R1", "(C1 + L1) || R2", R1="1k", C1="1n", L1="1m", R2="10k").sensitivity()
    for r in sens.rows:
        assert math.isfinite(r.value) and all(math.isfinite(v) for v in r.by_component.values())


# --------------------------------------------------------------------------- rows carry the form's labels


def type3(**values):
    base = {"R1": 10e3, "R2": 22e3, "R3": 470.0, "C1": 6.8e-9, "C2": 150e-12, "C3": 3.3e-9}
    return inv("R1 || (R3 + C3)", "(R2 + C1) || C2", **{**base, **values})


def venable_type3_sensitivities(v):
    """Label → expected S per part, from the Type III corner formulas (Venable, "The K Factor", 1983,
    from memory) differentiated as products of powers (Schaumann & Van Valkenburg, "Design of Analog
    Filters", 2001, ch. 3): ωz1 = 1/(R2 C1), ωz2 = 1/((R1 + R3) C3), ωp1 = (C1 + C2)/(R2 C1 C2),
    ωp2 = 1/(R3 C3)."""
    r13 = v["R1"] + v["R3"]
    c12 = v["C1"] + v["C2"]
    zero = dict.fromkeys(v, 0.0)
    return {
        "ωz1": {**zero, "R2": -1.0, "C1": -1.0},
        "ωz2": {**zero, "C3": -1.0, "R1": -v["R1"] / r13, "R3": -v["R3"] / r13},
        "ωp1": {**zero, "R2": -1.0, "C1": -v["C2"] / c12, "C2": -v["C1"] / c12},
        "ωp2": {**zero, "R3": -1.0, "C3": -1.0},
    }


@pytest.mark.parametrize("values", [
    {"R2": 5e3},  # 1/(R2 C1) above 1/((R1 + R3) C3); (C1 + C2)/(R2 C1 C2) above 1/(R3 C3)
    {"R2": 500e3},  # both orders reversed
    {"C3": 22e3 * 6.8e-9 / 10.47e3},  # the two zeros at exactly the same frequency
])
def test_type3_rows_keep_their_formula_labels(values):
    d = type3(**values)
    sens = d.sensitivity()
    rows = {r.label: r for r in sens.rows}
    want = venable_type3_sensitivities(d.values)
    assert set(rows) == set(want) == {c.label for c in d.factored().corners}
    for label, s in want.items():
        for part, x in s.items():
            assert rows[label].by_component[part] == pytest.approx(x, rel=1e-12, abs=1e-15), (label, part)
    form = {c.label: c.omega_rad_s for c in d.factored().corners}
    assert all(rows[k].value == form[k] for k in form)
    assert set(sens.moved_by("R1")) == {"ωz2"}


def test_numeric_rows_of_a_real_quadratic_take_its_labels():
    # Input R1 + C2, feedback C1 || (R2 + L1): poles 1/(R1 C2) and the real roots of
    # 1 + s C1 R2 + s² L1 C1 (hand algebra, from memory). The quadratic's roots are numeric rows
    # ωp2 < ωp3; their sensitivities are checked against mpmath derivatives of the quadratic formula.
    v = {"R1": 1e3, "C2": 1e-9, "C1": 1e-9, "L1": 1e-3, "R2": 100e3}
    rows = {r.label: r for r in inv("R1 + C2", "C1 || (R2 + L1)", **v).sensitivity().rows}
    assert set(rows) == {"ωz1", "ωp1", "ωp2", "ωp3"}
    assert rows["ωp1"].by_component["R1"] == pytest.approx(-1) and rows["ωp1"].formulas is not None
    mpmath.mp.dps = 40

    def root(sign, x):
        a, b = x["L1"] * x["C1"], x["C1"] * x["R2"]
        return abs((-b + sign * mpmath.sqrt(b * b - 4 * a)) / (2 * a))

    for label, sign in (("ωp2", 1), ("ωp3", -1)):
        assert rows[label].formulas is None
        for part in ("C1", "L1", "R2"):
            def ln_root(t, part=part, sign=sign):
                x = {k: mpmath.mpf(val) for k, val in v.items()}
                x[part] *= mpmath.exp(t)
                return mpmath.log(root(sign, x))

            ref = float(mpmath.diff(ln_root, 0))
            assert rows[label].by_component[part] == pytest.approx(ref, abs=1e-6), (label, part)
