"""The stage with a real op-amp, against closed-form feedback results."""

import math

import numpy as np
import pytest

from loopcraft import Design
from loopcraft.errors import AnalysisError
from loopcraft.model.opamp import OpAmp
from loopcraft.topologies import topology


def design(stage, values, opamp=None):
    d = {"loopcraft": 1, "stage": stage, "values": values}
    if opamp:
        d["opamp"] = opamp
    return Design.from_dict(d)


SINGLE = {"model": "single_pole", "a0_db": 100, "gbw_hz": "10M"}


def test_inverting_bandwidth_is_gbw_over_noise_gain():
    # Single-pole op-amp, inverting gain -10: closed-loop -3 dB at about GBW/(1 + R2/R1) = GBW/11.
    # Franco, "Design with Operational Amplifiers and Analog Integrated Circuits", 3rd ed., 2002, §6.2.
    d = design({"kind": "inverting", "input": "R1", "feedback": "R2"}, {"R1": "1k", "R2": "10k"}, SINGLE)
    act = d.actual()
    (pole,) = act.factored.poles
    a0 = 1e5
    fa = 10e6 / a0
    # Exact: one pole at fa·(1 + A0/Gn) with Gn = 11 (same source, exact single-pole algebra).
    exact = fa * (1 + a0 / 11)
    assert pole.f_hz == pytest.approx(exact, rel=1e-9)
    assert pole.f_hz == pytest.approx(10e6 / 11, rel=2e-4)  # the approximation, within 0.02 %
    # DC gain: -10 / (1 + 11/A0).
    assert act.factored.gain == pytest.approx(-10 / (1 + 11 / a0), rel=1e-12)
    h = act.response(np.array([exact]))[0]
    assert 20 * math.log10(abs(h) / abs(act.factored.gain)) == pytest.approx(-10 * math.log10(2), abs=1e-9)


def test_noninverting_bandwidth():
    # Non-inverting gain 1 + R2/R1 = 11 has the same noise gain: f_-3dB = fa (1 + A0/11) (Franco 2002, §6.2).
    d = design({"kind": "noninverting", "ground": "R1", "feedback": "R2"}, {"R1": "1k", "R2": "10k"}, SINGLE)
    (pole,) = d.actual().factored.poles
    assert pole.f_hz == pytest.approx(100 * (1 + 1e5 / 11), rel=1e-9)


def test_circuit_stage_matches_inverting_formula():
    # The same inverting amplifier as a circuit with A(s) in the nodal equations
    # gives the textbook H = (-Zf/Zi)/(1 + (1 + Zf/Zi)/A) (Franco 2002, §6.2).
    circ = {
        "kind": "circuit",
        "elements": [["R1", "in", "n"], ["R2", "n", "out"]],
        "opamps": [{"plus": "gnd", "minus": "n", "out": "out"}],
        "input": "in",
        "output": "out",
    }
    dc = design(circ, {"R1": "1k", "R2": "10k"}, SINGLE)
    di = design({"kind": "inverting", "input": "R1", "feedback": "R2"}, {"R1": "1k", "R2": "10k"}, SINGLE)
    f = np.logspace(1, 8, 50)
    np.testing.assert_allclose(dc.actual().response(f), di.actual().response(f), rtol=1e-9)
    a_c, a_i = dc.amplifier_loop(), di.amplifier_loop()
    assert a_c.crossover_hz == pytest.approx(a_i.crossover_hz, rel=1e-9)
    assert a_c.phase_margin_deg == pytest.approx(a_i.phase_margin_deg, abs=1e-6)


def test_amplifier_loop_single_pole_resistive():
    # T = A0 β / (1 + s/ωa) with β = 1/11: crossover where |T| = 1, PM = 180 - atan(fc/fa)
    # (single-pole feedback loop; Franco 2002, §6.4).
    d = design({"kind": "inverting", "input": "R1", "feedback": "R2"}, {"R1": "1k", "R2": "10k"}, SINGLE)
    amp = d.amplifier_loop()
    a0b = 1e5 / 11
    fa = 100.0
    fc = fa * math.sqrt(a0b**2 - 1)
    assert amp.crossover_hz == pytest.approx(fc, rel=1e-9)
    assert amp.phase_margin_deg == pytest.approx(180 - math.degrees(math.atan(fc / fa)), abs=1e-7)
    assert amp.rate_of_closure_db_per_decade == pytest.approx(20.0, abs=0.05)  # common practice, no source
    assert amp.warnings == ()


def test_differentiator_is_flagged():
    # A pure differentiator with a single-pole op-amp closes at 40 dB/decade and rings
    # (Franco 2002, §6.5 — "the differentiator is inherently unstable").
    d = topology("differentiator").design().with_sections(opamp=OpAmp.from_dict(SINGLE))
    amp = d.amplifier_loop()
    assert amp.rate_of_closure_db_per_decade == pytest.approx(40.0, abs=0.5)
    assert amp.phase_margin_deg < 10
    assert any("ring" in w or "oscillate" in w for w in amp.warnings)
    # The practical differentiator (series R, parallel C) fixes it (same source).
    p = topology("practical_differentiator").design().with_sections(opamp=OpAmp.from_dict(SINGLE))
    assert p.amplifier_loop().phase_margin_deg > 45
    assert not p.amplifier_loop().warnings


def test_departure_frequency():
    # Gain -10 with GBW 10 MHz: |H_act/H_ideal| = 1/sqrt(1 + (f/f_p)^2) reaches -1 dB at
    # f = f_p·sqrt(10^0.1 - 1) (single-pole algebra, from memory).
    d = design({"kind": "inverting", "input": "R1", "feedback": "R2"}, {"R1": "1k", "R2": "10k"}, SINGLE)
    amp = d.amplifier_loop()
    fp = 100 * (1 + 1e5 / 11)
    # The finite-A0 gain error is 20 log10(1 + 11/A0) = 0.00096 dB, negligible here.
    assert amp.departs_hz == pytest.approx(fp * math.sqrt(10**0.1 - 1), rel=1e-3)


def test_integrator_departs_below_at_finite_a0():
    # A finite A0 caps the integrator's DC gain at A0: the ideal and actual curves part below
    # about f_u/A0 (Franco 2002, §6.5).
    d = topology("integrator").design().with_sections(opamp=OpAmp.from_dict(SINGLE))
    amp = d.amplifier_loop()
    f_u = 1 / (2 * math.pi * 10e3 * 15e-9)
    assert amp.departs_below_hz is not None
    assert f_u / 1e5 / 10 < amp.departs_below_hz < f_u / 1e5 * 10
    assert amp.warnings == ()


def test_ideal_opamp_has_no_actual():
    d = design({"kind": "inverting", "input": "R1", "feedback": "R2"}, {"R1": "1k", "R2": "10k"}, {"model": "ideal"})
    with pytest.raises(AnalysisError, match="no real op-amp"):
        d.actual()


def test_large_signal_warnings_from_input_amplitude():
    # Gain -10 with a 1 V peak input at 100 kHz needs 2π·f·Vpk = 6.28 V/µs at the output;
    # full-power bandwidth SR/(2π·Vpk) (Franco 2002, §6.7).
    op = {"model": "single_pole", "a0_db": 100, "gbw_hz": "10M", "slew_rate_v_per_us": 5, "output_swing_v": 12}
    d = design({"kind": "inverting", "input": "R1", "feedback": "R2"}, {"R1": "1k", "R2": "10k"}, op)
    warns = d.large_signal_warnings(1.0, 100e3)
    assert len(warns) == 1 and "slew-rate limited" in warns[0]
    assert d.large_signal_warnings(1.0, 50e3) == ()  # 3.1 V/µs needed: within 5 V/µs
    swing = d.large_signal_warnings(1.5, 1e3)  # 15 V peak asked of a 12 V swing
    assert len(swing) == 1 and "output swing exceeded" in swing[0]


def test_oscillating_differentiator_is_called_unstable():
    # An ideal differentiator (input C1 = 100 nF, feedback R1 = 10 kΩ) on a two-pole op-amp whose
    # second pole (300 kHz) lies below where |A| meets the rising noise gain: the amplifier loop
    # closes at 60 dB/decade and oscillates. Independent check: the closed loop of A = A0/((1 +
    # s/ωa)(1 + s/ω2)) with noise gain 1 + sR1C1 has the characteristic polynomial
    # (1 + s/ωa)(1 + s/ω2)(1 + s·R1·C1) + A0 (from memory: H_actual = H/(1 + Gn/A)), whose roots
    # numpy.roots finds.
    import loopcraft as lc

    d = lc.topology("differentiator").to_dict()
    d["opamp"] = {"model": "two_pole", "a0_db": 100, "gbw_hz": "10M", "second_pole_hz": "300k"}
    des = lc.Design.from_dict(d)
    amp = des.amplifier_loop()
    a0, wa, w2, rc = 1e5, 2 * np.pi * 10e6 / 1e5, 2 * np.pi * 300e3, 10e3 * 100e-9
    q = np.polymul(np.polymul([1 / wa, 1.0], [1 / w2, 1.0]), [rc, 1.0])
    q[-1] += a0
    ref_rhp = int(np.sum(np.roots(q).real > 0))
    assert ref_rhp == 2
    assert amp.stage_rhp_poles == ref_rhp and not amp.stable
    assert amp.warnings[0].startswith("UNSTABLE") and amp.to_dict()["stage_stable"] is False
    # with the second pole well above the intersection the same stage settles
    d["opamp"]["second_pole_hz"] = "100M"
    assert lc.Design.from_dict(d).amplifier_loop().stable
