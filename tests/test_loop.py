"""Loop gain with a plant: closed-form margins and the step response."""

import json
import math
from pathlib import Path

import numpy as np
import pytest
import scipy.signal as sig

from loopcraft import Design, load
from loopcraft.cli import main

EX = Path(__file__).resolve().parents[1] / "src" / "loopcraft" / "examples"


def integrator_loop(r=10e3, c=10e-9, g=2.5, fp_hz=2e3, **extra):
    return Design.from_dict(
        {
            "loopcraft": 1,
            "stage": {"kind": "inverting", "input": "R1", "feedback": "C1"},
            "values": {"R1": r, "C1": c},
            "plant": {"kind": "general", "gain": g, "poles_hz": [fp_hz]},
            **extra,
        }
    )


def test_integrator_with_one_pole_closed_form():
    # L = K/(s(1 + s/p)) with K = g/(R C): ωc² = (p²/2)(sqrt(1 + 4K²/p²) - 1), PM = 90° - atan(ωc/p),
    # no phase crossover. Ogata, "Modern Control Engineering", 5th ed., 2010, §7-6 (derivation).
    r, c, g, fp = 10e3, 10e-9, 2.5, 2e3
    k = g / (r * c)
    p = 2 * math.pi * fp
    wc = math.sqrt(p * p / 2 * (math.sqrt(1 + 4 * k * k / (p * p)) - 1))
    m = integrator_loop(r, c, g, fp).loop().margins
    (x,) = m.crossovers
    assert x.f_hz == pytest.approx(wc / (2 * math.pi), rel=1e-9)
    assert x.phase_margin_deg == pytest.approx(90 - math.degrees(math.atan(wc / p)), abs=1e-7)
    assert m.gain_margins == ()


def test_sign_convention_noninverting():
    # A non-inverting stage enters the loop with a + sign (loop gain excludes the summing
    # junction's minus sign): L = P·k_fb·H. Common practice, no source.
    d = Design.from_dict(
        {
            "loopcraft": 1,
            "stage": {"kind": "noninverting", "ground": "R1", "feedback": "R2"},
            "values": {"R1": "1k", "R2": "9k"},
            "plant": {"kind": "general", "gain": 1.0, "origin_order": -1},
            "feedback_gain": 0.5,
        }
    )
    lp = d.loop()
    assert lp.loop.gain == pytest.approx(5.0)
    (x,) = lp.margins.crossovers  # L = 5/s crosses at 5 rad/s with 90° of margin
    assert x.f_hz == pytest.approx(5 / (2 * math.pi), rel=1e-9)
    assert x.phase_margin_deg == pytest.approx(90.0, abs=1e-9)


def test_step_response_overshoot():
    # Closed loop of K/(s(1 + s/p)) is second order with ωn² = K p, 2ζωn = p; peak overshoot
    # exp(-πζ/sqrt(1 - ζ²)) (Ogata 2010, §5-3).
    r, c, g, fp = 10e3, 10e-9, 2.5, 2e3
    k = g / (r * c)
    p = 2 * math.pi * fp
    zeta = p / (2 * math.sqrt(k * p))
    lp = integrator_loop(r, c, g, fp).loop()
    t, y = lp.step(np.linspace(0, 40 / math.sqrt(k * p), 20001))
    assert y.max() - 1 == pytest.approx(math.exp(-math.pi * zeta / math.sqrt(1 - zeta**2)), rel=1e-3)
    assert y[-1] == pytest.approx(1.0, abs=1e-3)


def test_closed_loop_matches_scipy():
    lp = load(EX / "bus48_loop.json").loop()
    num, den = lp.closed_loop_tf()
    f = np.logspace(1, 6, 40)
    _, h = sig.freqs(num, den, worN=2 * np.pi * f)  # scipy.signal as a reference library
    np.testing.assert_allclose(lp.closed_loop(f), h, rtol=1e-8)


def test_bus_converter_loop_margins_against_brute_force():
    # Every crossing found, checked by dense sampling of |L| (independent of the refiners).
    lp = load(EX / "bus48_loop.json").loop()
    f = np.logspace(-1, 8, 400001)
    mag = np.abs(lp.response(f))
    n_cross = int(np.sum(np.diff(np.sign(mag - 1)) != 0))
    assert len(lp.margins.crossovers) == n_cross
    for x in lp.margins.crossovers:
        assert abs(lp.response(np.array([x.f_hz]))[0]) == pytest.approx(1.0, rel=1e-9)
        ph = np.degrees(np.angle(lp.response(np.array([x.f_hz]))[0]))
        assert (x.phase_margin_deg - (180 + ph)) % 360 == pytest.approx(0, abs=1e-6)


def test_cli_reports_margins(capsys):
    assert main(["analyze", str(EX / "bus48_loop.json"), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert set(doc["amplifier_loop"]) >= {"crossover_hz", "phase_margin_deg", "departs_hz"}
    assert doc["loop"]["crossovers"] and set(doc["loop"]["crossovers"][0]) == {"f_hz", "phase_margin_deg"}
    assert set(doc["loop"]["gain_margins"][0]) == {"f_hz", "gain_margin_db"}
    assert main(["response", str(EX / "bus48_loop.json"), "--hz", "1k", "30k", "--json"]) == 0
    pt = json.loads(capsys.readouterr().out)["points"][1]
    assert set(pt) >= {
        "asymptote_mag_db",
        "asymptote_phase_deg",
        "actual_mag_db",
        "actual_phase_deg",
        "loop_mag_db",
        "loop_phase_deg",
    }
    assert pt["loop_mag_db"] == pytest.approx(0.0, abs=0.05)  # 30 kHz is the designed crossover


def test_cli_text_prints_margins(capsys):
    assert main(["analyze", str(EX / "bus48_loop.json")]) == 0
    out = capsys.readouterr().out
    assert "phase margin" in out and "gain margin" in out
