"""Tests for loopcraft.plant: power-stage models against textbook formulas and scipy.signal."""

from __future__ import annotations

import math
import re

import mpmath
import numpy as np
import pytest
from scipy import signal

from loopcraft.errors import ComponentValueError, DesignFileError
from loopcraft.plant import (
    PLANT_KINDS,
    BoostVoltageMode,
    BuckVoltageMode,
    GeneralPlant,
    PeakCurrentBuck,
    PolynomialPlant,
    ResonantPair,
    plant_from_dict,
)

TWO_PI = 2 * math.pi
F_HZ = np.logspace(0, 7, 701)  # 1 Hz .. 10 MHz
S = 2j * np.pi * F_HZ


def _rel_err(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.max(np.abs(a - b) / np.abs(b)))


# Invented scenario: a 48 V to 12 V bus converter at 400 kHz, 10 A (R = 1.2 Ω).
BUCK = {
    "kind": "buck_vm",
    "vin_v": "48 V",
    "l_h": "6.8u",
    "c_f": "220 µF",
    "esr_ohm": "4 mΩ",
    "dcr_ohm": "6m",
    "load_ohm": 1.2,
    "ramp_v": 1.5,
}


# --------------------------------------------------------------------------- voltage-mode buck
@pytest.mark.parametrize(
    ("esr", "dcr"), [(0.0, 0.0), (4e-3, 0.0), (0.0, 6e-3), (4e-3, 6e-3), (0.05, 0.2)]
)
def test_buck_matches_averaged_circuit(esr: float, dcr: float) -> None:
    # Averaged switch model of the CCM buck: the switch node carries d·Vin, so
    # v/vc = (Vin/Vramp)·Zo/(Zo + sL + R_L), Zo = R || (R_C + 1/(sC)).
    # Erickson & Maksimovic, "Fundamentals of Power Electronics", 2nd ed., 2001, ch. 7-8.
    vin, vramp, l_h, c_f, r = 48.0, 1.5, 6.8e-6, 220e-6, 1.2
    plant = BuckVoltageMode(vin, l_h, c_f, r, vramp, esr_ohm=esr, dcr_ohm=dcr)
    zc = esr + 1.0 / (S * c_f)
    zo = r * zc / (r + zc)
    direct = vin / vramp * zo / (zo + S * l_h + dcr)
    assert _rel_err(plant.response(F_HZ), direct) < 1e-9


def test_buck_lossless_matches_textbook_table() -> None:
    # Erickson & Maksimovic 2001, table 8.2 (buck): Gd0 = V/D = Vin, ω0 = 1/sqrt(LC),
    # Q = R·sqrt(C/L); the modulator adds 1/Vramp.
    vin, vramp, l_h, c_f, r = 48.0, 1.5, 6.8e-6, 220e-6, 1.2
    fn = BuckVoltageMode(vin, l_h, c_f, r, vramp).factored()
    (pair,) = fn.factors
    assert fn.gain == pytest.approx(vin / vramp, rel=1e-15)
    assert pair.role == "pole" and pair.order == 2 and not pair.rhp
    assert pair.omega_rad_s == pytest.approx(1.0 / math.sqrt(l_h * c_f), rel=1e-14)
    assert pair.q == pytest.approx(r * math.sqrt(c_f / l_h), rel=1e-14)


def test_buck_dc_gain_and_esr_zero() -> None:
    # DC: the inductor DCR and load form a divider, R/(R + R_L); ESR zero at 1/(2π·R_C·C)
    # (Erickson & Maksimovic 2001, ch. 8).
    plant = plant_from_dict(BUCK)
    fn = plant.factored()
    assert fn.gain == pytest.approx(48.0 / 1.5 * 1.2 / (1.2 + 6e-3), rel=1e-14)
    (zero,) = fn.zeros
    assert zero.f_hz == pytest.approx(1.0 / (TWO_PI * 4e-3 * 220e-6), rel=1e-14)
    assert abs(plant.response(np.array([1e-3]))[0]) == pytest.approx(fn.gain, rel=1e-9)


def test_buck_from_dict_strings_and_round_trip() -> None:
    plant = plant_from_dict(BUCK)
    assert isinstance(plant, BuckVoltageMode)
    assert plant.l_h == 6.8e-6 and plant.c_f == 220e-6 and plant.esr_ohm == 4e-3
    assert plant.dcr_ohm == 6e-3 and plant.vin_v == 48.0
    assert plant_from_dict(plant.to_dict()) == plant
    text = plant.describe()
    assert "Zo = R || (ESR + 1/(s*C))" in text
    assert "R/(R + DCR)" in text and "1/(2 pi ESR C)" in text
    assert f"{48.0 / 1.5 * 1.2 / 1.206:.6g} V/V" in text  # G0 worked out by hand


# --------------------------------------------------------------------------- peak current mode
PCM = {
    "kind": "peak_current",
    "load_ohm": 1.2,
    "c_f": "220u",
    "esr_ohm": "4m",
    "ri_ohm": 0.05,
    "f_sw_hz": "400k Hz",
    "duty": 0.25,
    "mc": 1.4,
}


def test_peak_current_matches_simplified_circuit_and_ridley_pole() -> None:
    # Inductor as a current source vc/Ri into Zo = R || (R_C + 1/(sC)), times the sampling
    # double pole 1/(1 + s/(Qp ωn) + s²/ωn²), ωn = π·fs, Qp = 1/(π(mc·D' − 0.5)).
    # Ridley, "A new, continuous-time model for current-mode control", IEEE Trans. Power
    # Electronics, 1991.
    r, c_f, esr, ri, fs, d, mc = 1.2, 220e-6, 4e-3, 0.05, 400e3, 0.25, 1.4
    plant = plant_from_dict(PCM)
    zc = esr + 1.0 / (S * c_f)
    zo = r * zc / (r + zc)
    wn = math.pi * fs
    qp = 1.0 / (math.pi * (mc * (1 - d) - 0.5))
    fh = 1.0 / (1.0 + S / (qp * wn) + (S / wn) ** 2)
    assert _rel_err(plant.response(F_HZ), zo / ri * fh) < 1e-9


def test_ridley_double_pole_q_formula() -> None:
    # Qp = 1/(π·(mc·D' − 0.5)) at fs/2 (Ridley 1991). A second-order pole has |H(jω0)| = Q
    # (common practice, no source): compare the plant with and without the sampling term at fs/2.
    for d, mc in [(0.25, 1.0), (0.25, 1.4), (0.5, 1.5), (0.6, 2.0), (0.8, 4.0)]:
        with_fs = PeakCurrentBuck(1.2, 220e-6, 0.05, esr_ohm=4e-3, f_sw_hz=400e3, duty=d, mc=mc)
        without = PeakCurrentBuck(1.2, 220e-6, 0.05, esr_ohm=4e-3)
        qp = 1.0 / (math.pi * (mc * (1 - d) - 0.5))
        pair = [f for f in with_fs.factored().poles if f.order == 2][0]
        assert pair.omega_rad_s == pytest.approx(math.pi * 400e3, rel=1e-15)
        assert pair.q == pytest.approx(qp, rel=1e-14)
        f_half = np.array([200e3])
        ratio = abs(with_fs.response(f_half)[0] / without.response(f_half)[0])
        assert ratio == pytest.approx(qp, rel=1e-12)


def test_peak_current_dc_gain_and_pole_approximation() -> None:
    # DC gain R/Ri; dominant pole near 1/(2π·R·C) (the simplified model; Ridley 1991).
    plant = PeakCurrentBuck(1.2, 220e-6, 0.05, esr_ohm=4e-3)
    fn = plant.factored()
    assert fn.gain == pytest.approx(1.2 / 0.05, rel=1e-15)
    (pole,) = fn.poles
    f_rc = 1.0 / (TWO_PI * 1.2 * 220e-6)
    assert pole.f_hz == pytest.approx(f_rc, rel=4e-3 / 1.2 * 1.01)  # within ESR/R of 1/(2πRC)
    assert "approximation" in plant.describe()


def test_peak_current_subharmonic_limit_is_an_error() -> None:
    # mc·D' must exceed 0.5 or the current loop oscillates at fs/2 (Ridley 1991).
    with pytest.raises(DesignFileError) as exc:
        plant_from_dict({**PCM, "duty": 0.6, "mc": 1.0})
    assert exc.value.key_path == "plant.mc"
    with pytest.raises(DesignFileError) as exc:
        plant_from_dict({**PCM, "mc": 0.9})
    assert exc.value.key_path == "plant.mc"


def test_peak_current_round_trips() -> None:
    for d in (PCM, {k: v for k, v in PCM.items() if k not in ("f_sw_hz", "duty", "mc")}):
        plant = plant_from_dict(d)
        assert plant_from_dict(plant.to_dict()) == plant
    with pytest.raises(DesignFileError) as exc:
        plant_from_dict({k: v for k, v in PCM.items() if k != "duty"})
    assert exc.value.key_path == "plant.duty"
    with pytest.raises(DesignFileError) as exc:
        plant_from_dict({k: v for k, v in PCM.items() if k != "f_sw_hz"})
    assert exc.value.key_path == "plant.duty"


# --------------------------------------------------------------------------- voltage-mode boost
# Invented scenario: a 12 V to 48 V boost for a bus converter's auxiliary rail, 2 A.
BOOST = {
    "kind": "boost_vm",
    "vin_v": 12,
    "vout_v": "48 V",
    "l_h": "22u",
    "c_f": "47u",
    "esr_ohm": 0,
    "load_ohm": 24,
    "ramp_v": 2,
}


def _boost_direct(
    vin: float, d: float, l_h: float, c_f: float, r: float, vramp: float, esr: float
) -> np.ndarray:
    """Solve the linearized averaged boost circuit at each s (numpy.linalg.solve).

    Unknowns (î, v̂) for d̂ = 1/Vramp per volt of control:
      sL·î + D'·v̂ = V·d̂              (inductor loop, v̂in = 0)
      D'·î − v̂/Zo = I·d̂              (output node, Zo = R || (R_C + 1/(sC)))
    with V = Vin/D', I = V/(D'·R). Erickson & Maksimovic 2001, ch. 7 (averaged switch model).
    """
    dp = 1.0 - d
    v = vin / dp
    i_l = v / (dp * r)
    out = np.empty(S.shape, dtype=complex)
    for k, s in enumerate(S):
        zc = esr + 1.0 / (s * c_f)
        zo = r * zc / (r + zc)
        a = np.array([[s * l_h, dp], [dp, -1.0 / zo]], dtype=complex)
        b = np.array([v, i_l], dtype=complex) / vramp
        out[k] = np.linalg.solve(a, b)[1]
    return out


@pytest.mark.parametrize("esr", [0.0, 0.01, 0.3])
def test_boost_matches_averaged_circuit(esr: float) -> None:
    plant = plant_from_dict({**BOOST, "esr_ohm": esr})
    direct = _boost_direct(12.0, 0.75, 22e-6, 47e-6, 24.0, 2.0, esr)
    assert _rel_err(plant.response(F_HZ), direct) < 1e-9


def test_boost_matches_textbook_table() -> None:
    # Erickson & Maksimovic 2001, table 8.2 (boost): Gd0 = V/D', ω0 = D'/sqrt(LC),
    # Q = D'·R·sqrt(C/L), RHP zero ωz = D'²·R/L; the modulator adds 1/Vramp. D' = Vin/V (ch. 2).
    vin, v, l_h, c_f, r, vramp = 12.0, 48.0, 22e-6, 47e-6, 24.0, 2.0
    dp = vin / v
    plant = plant_from_dict(BOOST)
    assert isinstance(plant, BoostVoltageMode)
    assert plant.duty == pytest.approx(1 - dp, rel=1e-15)
    fn = plant.factored()
    assert fn.gain == pytest.approx(v / dp / vramp, rel=1e-14)
    assert fn.gain == pytest.approx(vin / dp**2 / vramp, rel=1e-14)
    (zero,) = fn.zeros
    (pair,) = fn.poles
    assert zero.rhp and zero.order == 1
    assert zero.omega_rad_s == pytest.approx(dp**2 * r / l_h, rel=1e-14)
    assert pair.omega_rad_s == pytest.approx(dp / math.sqrt(l_h * c_f), rel=1e-14)
    assert pair.q == pytest.approx(dp * r * math.sqrt(c_f / l_h), rel=1e-14)


def test_boost_rhp_zero_phase_goes_down() -> None:
    # A RHP zero raises the magnitude by +20 dB/decade like a LHP zero but turns the phase
    # DOWN by 90° (Erickson & Maksimovic 2001, ch. 8). With ESR = 0, above the zero: slope
    # -40 + 20 = -20 dB/decade and phase -180° - 90° = -270°.
    plant = plant_from_dict(BOOST)
    fz = 0.25**2 * 24.0 / (TWO_PI * 22e-6)  # D'²R/(2πL) = 10.85 kHz
    f = np.logspace(math.log10(fz) - 1, math.log10(fz) + 4, 2001)
    h = plant.response(f)
    phase = np.degrees(np.unwrap(np.angle(h)))
    assert np.all(np.diff(phase[f > fz / 2]) < 0)  # strictly falling through and past the zero
    assert phase[-1] == pytest.approx(-270.0, abs=0.1)
    mag_db = 20 * np.log10(np.abs(h))
    slope = (mag_db[-1] - mag_db[-401]) / (math.log10(f[-1]) - math.log10(f[-401]))
    assert slope == pytest.approx(-20.0, abs=0.05)
    # The phase the zero alone adds at fz is -45°: compare with the same plant's pole pair alone.
    pair_only = GeneralPlant(1.0, pole_pairs=(ResonantPair(plant.omega0_rad_s / TWO_PI, plant.q),))
    extra = np.angle(
        plant.response(np.array([fz]))[0] / pair_only.response(np.array([fz]))[0], deg=True
    )
    assert extra == pytest.approx(-45.0, abs=1e-9)


def test_boost_duty_and_round_trip() -> None:
    plant = plant_from_dict({**{k: v for k, v in BOOST.items() if k != "vout_v"}, "duty": 0.75})
    assert plant == plant_from_dict(BOOST)
    assert plant_from_dict(plant.to_dict()) == plant
    assert isinstance(plant, BoostVoltageMode) and plant.vout_v == pytest.approx(48.0, rel=1e-15)


# --------------------------------------------------------------------------- polynomial
POLYS = [
    # (num, den) in descending powers of s, rad/s.
    ([1.0], [1.0 / (TWO_PI * 1e3), 1.0]),
    # Buck-like: (1 + s·ESR·C)·G0 over LC filter, 48 V / 1.5 V ramp, 6.8 µH, 220 µF, 1.2 Ω.
    ([32.0 * 4e-3 * 220e-6, 32.0], [6.8e-6 * 220e-6, 6.8e-6 / 1.2 + 4e-3 * 220e-6, 1.0]),
    # Integrator with a zero and two poles, leading zeros in num, origin pole.
    ([0.0, 0.0, 1e-4, 1.0], [1e-12, 1e-5, 1.0, 0.0]),
    # RHP zero, zero at the origin, complex pair and a real pole.
    ([-1e-5, 1.0, 0.0], list(np.polymul([1e-10, 2e-6, 1.0], [1e-6, 1.0]))),
    # Roots from 10 Hz to 1 MHz (coefficients over ~30 decades), negative gain.
    (
        list(-3.0 * np.poly([-TWO_PI * 50.0, -TWO_PI * 2e5])),
        list(
            np.poly(
                [
                    -TWO_PI * 10.0,
                    -TWO_PI * 1e3,
                    complex(-3e4, 6e5),
                    complex(-3e4, -6e5),
                    -TWO_PI * 1e6,
                ]
            ).real
        ),
    ),
    # Double pole at the origin, RHP pair.
    ([1.0, 2e3], [1.0, -1e3, 1e8, 0.0, 0.0]),
]


@pytest.mark.parametrize(("num", "den"), POLYS)
def test_polynomial_matches_scipy(num: list[float], den: list[float]) -> None:
    # Frequency response against scipy.signal.freqs; roots against scipy.signal.tf2zpk.
    plant = plant_from_dict({"kind": "polynomial", "num": num, "den": den})
    w = TWO_PI * F_HZ
    _, h = signal.freqs(num, den, worN=w)
    assert _rel_err(plant.response(F_HZ), h) < 1e-9
    z, p, _ = signal.tf2zpk(np.trim_zeros(np.asarray(num, float), "f"), np.asarray(den, float))
    fn = plant.factored()
    for ours, ref in ((fn.zero_roots(), z), (fn.pole_roots(), p)):
        assert len(ours) == len(ref)
        for r in ref:
            dist = np.min(np.abs(ours - r))
            assert dist <= 1e-8 * max(abs(r), 1.0)


@pytest.mark.parametrize(
    "den",
    [
        [1.0, 1e6, 1.0],  # roots near -1e6 and -1e-6 rad/s
        [1e-30, 3e-20, 2e-8, 1.0, 1e4],
        list(np.poly([-TWO_PI * 0.1, -TWO_PI * 1e3, -TWO_PI * 5e8])),
    ],
)
def test_polynomial_wide_root_spread_matches_mpmath(den: list[float]) -> None:
    # Reference roots and response in 50-digit arithmetic with mpmath.polyroots / polyval.
    plant = PolynomialPlant((1.0,), tuple(float(c) for c in den))
    f = np.logspace(-3, 9, 61)
    with mpmath.workdps(50):
        coeffs = [mpmath.mpf(c) for c in den]
        ref = [complex(r) for r in mpmath.polyroots(coeffs, maxsteps=500, extraprec=400)]
        h_ref = np.array([complex(1 / mpmath.polyval(coeffs, 2j * mpmath.pi * fk)) for fk in f])
    ours = plant.factored().pole_roots()
    for rc in ref:
        assert np.min(np.abs(ours - rc)) <= 1e-12 * abs(rc)
    assert _rel_err(plant.response(f), h_ref) < 1e-12


def test_polynomial_roots_too_spread_is_an_error() -> None:
    # Roots 1e-20 and 1e20 rad/s cannot both be resolved in double precision next to the
    # origin (common practice, no source): refuse rather than misplace a root. The plant is
    # factored when it is built, so the refusal comes at construction and on load.
    with pytest.raises(ComponentValueError, match="cannot be factored"):
        PolynomialPlant((1.0,), (1.0, 1e20, 1.0))
    with pytest.raises(DesignFileError) as err:
        plant_from_dict({"kind": "polynomial", "num": [1], "den": [1, 1e20, 1]})
    assert err.value.key_path == "plant.den"


def test_polynomial_gain_is_normalized() -> None:
    # K is the ratio of the lowest-order non-zero coefficients (the value at s -> 0 after the
    # origin roots are taken out; common practice, no source).
    plant = PolynomialPlant((3.0, 6.0, 0.0), (2.0, 5.0, 4.0, 0.0, 0.0))
    fn = plant.factored()
    assert fn.gain == pytest.approx(6.0 / 4.0, rel=1e-15)
    assert fn.origin_order == 1 - 2
    assert plant_from_dict(plant.to_dict()) == plant
    assert plant_from_dict(
        {"kind": "polynomial", "num": ["-2.5", "1k"], "den": [1, "10k"]}
    ).num == (-2.5, 1000.0)


# --------------------------------------------------------------------------- general
def _pair_poly(f0_hz: float, q: float, rhp: bool) -> np.ndarray:
    w0 = TWO_PI * f0_hz
    return np.array([1.0, (-1.0 if rhp else 1.0) * w0 / q, w0 * w0])


GENERAL = {
    "kind": "general",
    "gain": "-2.5",
    "origin_order": -1,
    "zeros_hz": ["1k", 35.0],
    "poles_hz": [12e3],
    "rhp_zeros_hz": ["80 kHz"],
    "rhp_poles_hz": [3.0],
    "zero_pairs": [{"f0_hz": "5k", "q": 0.3}],
    "pole_pairs": [{"f0_hz": 20e3, "q": 4.0}, {"f0_hz": "200k", "q": 0.9, "rhp": True}],
}


def test_general_matches_scipy_freqs_zpk() -> None:
    # Independent zpk form: (1 + s/ω) = (s + ω)/ω, (1 − s/ω) = −(s − ω)/ω,
    # (1 ± s/(Qω0) + s²/ω0²) = (s² ± s ω0/Q + ω0²)/ω0²; roots via numpy.roots.
    # Checked against scipy.signal.freqs_zpk.
    plant = plant_from_dict(GENERAL)
    k = -2.5
    zeros: list[complex] = []
    poles: list[complex] = [0j]  # origin_order = -1
    for f in (1e3, 35.0):
        zeros.append(-TWO_PI * f)
        k /= TWO_PI * f
    for f in (12e3,):
        poles.append(-TWO_PI * f)
        k *= TWO_PI * f
    for f in (80e3,):
        zeros.append(TWO_PI * f)
        k /= -TWO_PI * f
    for f in (3.0,):
        poles.append(TWO_PI * f)
        k *= -TWO_PI * f
    for f0, q, rhp in ((5e3, 0.3, False),):
        zeros += list(np.roots(_pair_poly(f0, q, rhp)))
        k /= (TWO_PI * f0) ** 2
    for f0, q, rhp in ((20e3, 4.0, False), (200e3, 0.9, True)):
        poles += list(np.roots(_pair_poly(f0, q, rhp)))
        k *= (TWO_PI * f0) ** 2
    _, h = signal.freqs_zpk(zeros, poles, k, worN=TWO_PI * F_HZ)
    assert _rel_err(plant.response(F_HZ), h) < 1e-9


def test_general_round_trip_and_describe() -> None:
    plant = plant_from_dict(GENERAL)
    assert isinstance(plant, GeneralPlant)
    assert plant_from_dict(plant.to_dict()) == plant
    text = plant.describe()
    assert "RHP pole pair" in text and "pole(s) at the origin" in text
    simple = GeneralPlant(10.0, poles_hz=[100.0])  # a list is accepted and stored as a tuple
    assert simple.poles_hz == (100.0,)
    # One LHP pole: -3.01 dB and -45° at the corner (common practice, no source).
    h = simple.response(np.array([100.0]))[0]
    assert 20 * math.log10(abs(h) / 10.0) == pytest.approx(-10 * math.log10(2), abs=1e-12)
    assert math.degrees(np.angle(h)) == pytest.approx(-45.0, abs=1e-12)


# --------------------------------------------------------------------------- validation
@pytest.mark.parametrize(
    ("d", "key_path"),
    [
        ({"kind": "flyback"}, "plant.kind"),
        ({"gain": 1}, "plant"),
        ({**BUCK, "l_h": -1e-6}, "plant.l_h"),
        ({**BUCK, "l_h": "-1u"}, "plant.l_h"),
        ({**BUCK, "c_f": "10 nH"}, "plant.c_f"),
        ({**BUCK, "esr_ohm": -0.01}, "plant.esr_ohm"),
        ({**BUCK, "inductance": 1e-6}, "plant.inductance"),
        ({k: v for k, v in BUCK.items() if k != "ramp_v"}, "plant"),
        ({**BOOST, "vout_v": 10}, "plant.vout_v"),
        ({**BOOST, "duty": 0.5}, "plant.vout_v"),
        ({**{k: v for k, v in BOOST.items() if k != "vout_v"}, "duty": 1.2}, "plant.duty"),
        ({**{k: v for k, v in BOOST.items() if k != "vout_v"}, "duty": 0}, "plant.duty"),
        ({k: v for k, v in BOOST.items() if k != "vout_v"}, "plant"),
        ({**PCM, "duty": 1.0}, "plant.duty"),
        ({**PCM, "ri_ohm": 0}, "plant.ri_ohm"),
        ({**GENERAL, "poles_hz": [1e3, -5.0]}, "plant.poles_hz[1]"),
        ({**GENERAL, "zeros_hz": [1e3, "x1"]}, "plant.zeros_hz[1]"),
        ({**GENERAL, "zeros_hz": 1e3}, "plant.zeros_hz"),
        ({**GENERAL, "pole_pairs": [{"f0_hz": 1e3}]}, "plant.pole_pairs[0]"),
        ({**GENERAL, "pole_pairs": [{"f0_hz": 1e3, "q": -1}]}, "plant.pole_pairs[0].q"),
        (
            {**GENERAL, "pole_pairs": [{"f0_hz": 1e3, "q": 1, "damping": 1}]},
            "plant.pole_pairs[0].damping",
        ),
        ({**GENERAL, "zero_pairs": [{"f0_hz": 0, "q": 1}]}, "plant.zero_pairs[0].f0_hz"),
        ({**GENERAL, "origin_order": 1.5}, "plant.origin_order"),
        ({**GENERAL, "gain": 0}, "plant.gain"),
        ({k: v for k, v in GENERAL.items() if k != "gain"}, "plant"),
        ({"kind": "polynomial", "num": [1.0], "den": [0.0, 0.0]}, "plant.den"),
        ({"kind": "polynomial", "num": [1.0, "abc"], "den": [1.0]}, "plant.num[1]"),
        ({"kind": "polynomial", "num": [1.0]}, "plant"),
        ({"kind": "polynomial", "num": [1.0], "den": [1.0], "gain": 2}, "plant.gain"),
    ],
)
def test_validation_errors_carry_key_path(d: dict, key_path: str) -> None:
    with pytest.raises(DesignFileError) as exc:
        plant_from_dict(d)
    assert exc.value.key_path == key_path
    assert key_path in str(exc.value)


def test_unknown_kind_lists_the_kinds() -> None:
    with pytest.raises(DesignFileError) as exc:
        plant_from_dict({"kind": "flyback"})
    for kind in PLANT_KINDS:
        assert kind in str(exc.value)
    assert "'flyback'" in str(exc.value)


def test_custom_key_path_and_direct_construction() -> None:
    with pytest.raises(DesignFileError) as exc:
        plant_from_dict({**BUCK, "c_f": 0}, key_path="loops[1].plant")
    assert exc.value.key_path == "loops[1].plant.c_f"
    with pytest.raises(ComponentValueError):
        BuckVoltageMode(48.0, -1e-6, 1e-4, 1.0, 1.0)
    with pytest.raises(ComponentValueError):
        BoostVoltageMode(12.0, 1.0, 1e-6, 1e-4, 1.0, 1.0)


def test_module_docstring_carries_the_safety_note() -> None:
    import loopcraft.plant as mod

    assert mod.__doc__ is not None
    assert "hazardous voltages and stored energy" in " ".join(mod.__doc__.split())


# --------------------------------------------------------------------------- accepted ranges
@pytest.mark.parametrize(
    "plant, path, words",
    [
        ({**BUCK, "l_h": 5e-324}, "plant.l_h", "1 pH … 1 kH"),
        ({**BUCK, "c_f": 1e308}, "plant.c_f", "1 fF … 1 kF"),
        ({**BUCK, "load_ohm": 1e308, "esr_ohm": 1e308}, "plant.load_ohm", "1 µΩ … 1 TΩ"),
        ({**BUCK, "esr_ohm": 5e-324}, "plant.esr_ohm", "(or 0)"),
        ({**BUCK, "vin_v": 10**400}, "plant.vin_v", "beyond the float range"),
        ({"kind": "boost_vm", "vin_v": 12, "duty": 0.5, "l_h": 1e-5, "c_f": 1e308, "load_ohm": 10, "ramp_v": 1},
         "plant.c_f", "1 kF"),
        ({"kind": "boost_vm", "vin_v": 1e-3, "vout_v": 1e6, "l_h": 1e-5, "c_f": 1e-4, "load_ohm": 10, "ramp_v": 1},
         "plant.vout_v", "duty cycle D = 1 − vin/vout"),
        ({"kind": "peak_current", "load_ohm": 5e-324, "c_f": 1e308, "ri_ohm": 1e-300}, "plant.load_ohm", "1 µΩ"),
        ({"kind": "general", "gain": 1, "poles_hz": [5e-324]}, "plant.poles_hz[0]", "1 nHz"),
        ({"kind": "general", "gain": 1e308, "poles_hz": [1e308]}, "plant.gain", "1e+30"),
        ({"kind": "general", "gain": 1, "origin_order": -1000}, "plant.origin_order", "-4 … 4"),
        ({"kind": "general", "gain": 1, "poles_hz": [1.0] * 17}, "plant.poles_hz", "limit is 16"),
        ({"kind": "polynomial", "num": [1e294], "den": [1, 1e294]}, "plant.den", "outside 1 nHz"),
        ({"kind": "polynomial", "num": [1], "den": [1.0] * 40}, "plant.den", "limit is 17"),
    ],
)
def test_values_outside_the_documented_ranges_are_refused_with_key_path_and_range(plant, path, words):
    with pytest.raises(DesignFileError, match=re.escape(words)) as err:
        plant_from_dict(plant)
    assert err.value.key_path == path


def test_every_corner_of_the_ranges_gives_a_finite_model():
    # All 2^7 combinations of range ends for the buck and the boost: every corner frequency, Q and
    # gain must be a finite, positive double (IEEE 754; from memory), so no curve can be NaN.
    from itertools import product

    from loopcraft import plant as pm

    spans = {"vin_v": pm.VOLTAGE, "l_h": pm.INDUCTANCE, "c_f": pm.CAPACITANCE, "load_ohm": pm.RESISTANCE,
             "ramp_v": pm.RAMP, "esr_ohm": pm.PARASITIC}
    for cls, last in ((BuckVoltageMode, ("dcr_ohm", pm.PARASITIC)), (BoostVoltageMode, ("duty", pm.DUTY))):
        fields = {**spans, last[0]: last[1]}
        for ends in product(*[(s.lo if s.lo > 0 else 0.0, s.hi) for s in fields.values()]):
            fn = cls(**dict(zip(fields, ends, strict=True))).factored()
            assert math.isfinite(fn.gain) and fn.gain > 0
            for f in fn.factors:
                assert math.isfinite(f.omega_rad_s) and f.omega_rad_s > 0
                assert f.q is None or (math.isfinite(f.q) and f.q > 0)
            assert np.all(np.isfinite(fn.response(np.array([1e-3, 1.0, 1e6, 1e12]))))
