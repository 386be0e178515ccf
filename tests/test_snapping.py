"""Tests of loopcraft.parts.snapping against the IEC 60063 tables and closed-form corners.

Every expected standard value below was read off the IEC 60063:2015 tables by
hand (neighbours and their geometric mean noted beside each check); every
corner, loop gain and margin is recomputed here with numpy/scipy from the
component values, not taken from the package.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy.optimize import brentq

from loopcraft.design import Design, load
from loopcraft.errors import ComponentValueError
from loopcraft.model.values import parse_value
from loopcraft.parts.snapping import SnapResult, engineering_text, snap_design

EXAMPLES = Path(__file__).resolve().parents[1] / "src" / "loopcraft" / "examples"
TWO_PI = 2.0 * math.pi


def type2(**values) -> Design:
    v = {"R1": "10k", "R2": 12.34e3, "C1": 2.55e-9, "C2": 95e-12}
    v.update(values)
    return Design.from_dict({
        "loopcraft": 1,
        "title": "Type II test stage",
        "stage": {"kind": "inverting", "input": "R1", "feedback": "(R2 + C1) || C2"},
        "values": v,
    })


# --------------------------------------------------------------------------- IEC 60063 values


@pytest.mark.parametrize(
    ("series", "expected"),
    [
        # E24: 12.34k between 12k and 13k, geometric mean 12.49k -> 12k;
        # 2.55n between 2.4n and 2.7n, mean 2.546n -> 2.7n; 95p between 91p and 100p, mean 95.39p -> 91p.
        ("E24", {"R1": 10e3, "R2": 12e3, "C1": 2.7e-9, "C2": 91e-12}),
        # E12: 12.34k between 12k and 15k -> 12k; 2.55n between 2.2n and 2.7n (mean 2.437n) -> 2.7n;
        # 95p between 82p and 100p (mean 90.55p) -> 100p.
        ("E12", {"R1": 10e3, "R2": 12e3, "C1": 2.7e-9, "C2": 100e-12}),
        # E96: 12.34k between 12.1k and 12.4k (mean 12.249k) -> 12.4k; 2.55n is itself in E96;
        # 95p between 93.1p and 95.3p (mean 94.19p) -> 95.3p.
        ("E96", {"R1": 10e3, "R2": 12.4e3, "C1": 2.55e-9, "C2": 95.3e-12}),
        # E6: 12.34k between 10k and 15k (mean 12.25k) -> 15k; 2.55n between 2.2n and 3.3n (mean 2.694n)
        # -> 2.2n; 95p between 68p and 100p -> 100p.
        ("E6", {"R1": 10e3, "R2": 15e3, "C1": 2.2e-9, "C2": 100e-12}),
    ],
)
def test_snapped_values_are_the_hand_checked_iec_60063_values(series, expected):
    res = snap_design(type2(), series)  # IEC 60063:2015 tables, read by hand
    for name, value in expected.items():
        assert res.design.values[name] == pytest.approx(value, rel=1e-12), name
    by_name = {c.name: c for c in res.changes}
    assert by_name["R2"].before == 12.34e3
    assert by_name["R2"].relative_change == pytest.approx(expected["R2"] / 12.34e3 - 1, rel=1e-9)


def test_values_are_written_as_engineering_text():
    res = snap_design(type2(), "E24")
    doc = res.design.to_dict()
    # Common practice, no source: SI prefixes without a space, as in the examples.
    assert doc["values"] == {"R1": "10k", "R2": "12k", "C1": "2.7n", "C2": "91p"}
    assert engineering_text(300.0) == "300"
    assert engineering_text(1e-6) == "1u"
    assert engineering_text(4.7e6) == "4.7M"
    for x in (12e3, 2.7e-9, 91e-12, 10.051e3, 1.5e-3):
        assert parse_value(engineering_text(x), name="x") == pytest.approx(x, rel=1e-12)


def test_snapped_file_round_trips():
    res = snap_design(type2(), "E24")
    again = Design.from_dict(json.loads(res.design.to_json()))
    assert again == res.design
    assert json.loads(json.dumps(res.to_dict()))["series"] == "E24"


def test_bad_series_is_refused_with_the_name():
    with pytest.raises(ComponentValueError, match="E25"):
        snap_design(type2(), "E25")


# --------------------------------------------------------------------------- corner moves


def test_type2_corner_moves_equal_the_closed_form_change():
    d = type2()
    res = snap_design(d, "E24")
    b, a = d.values, res.design.values

    # Type II corners (Erickson & Maksimovic, Fundamentals of Power Electronics, 2001, ch. 9;
    # Venable 1983): zero 1/(2π R2 C1), pole (C1 + C2)/(2π R2 C1 C2), K = -1/(R1 (C1 + C2)).
    def fz(v):
        return 1.0 / (TWO_PI * v["R2"] * v["C1"])

    def fp(v):
        return (v["C1"] + v["C2"]) / (TWO_PI * v["R2"] * v["C1"] * v["C2"])

    def k(v):
        return -1.0 / (v["R1"] * (v["C1"] + v["C2"]))

    moves = {m.label.split(" =")[0]: m for m in res.moves}
    zero = moves["ωz1"]
    pole = moves["ωp1"]
    gain = moves["gain K"]
    assert zero.unit == pole.unit == "Hz"
    assert zero.before == pytest.approx(fz(b), rel=1e-10)
    assert zero.after == pytest.approx(fz(a), rel=1e-10)
    assert zero.delta == pytest.approx(fz(a) - fz(b), rel=1e-8)
    assert zero.relative == pytest.approx(fz(a) / fz(b) - 1, rel=1e-8)
    assert pole.before == pytest.approx(fp(b), rel=1e-10)
    assert pole.after == pytest.approx(fp(a), rel=1e-10)
    assert gain.before == pytest.approx(k(b), rel=1e-10)
    assert gain.after == pytest.approx(k(a), rel=1e-10)
    assert "1/(C1·R2)" in zero.label


def test_second_order_corner_moves_carry_q():
    # Unity-gain Sallen-Key low-pass: ω0 = 1/sqrt(R1 R2 C1 C2), Q = sqrt(R1 R2 C1 C2)/(C2 (R1 + R2))
    # (Sallen & Key, "A Practical Method of Designing RC Active Filters", 1955).
    d = Design.from_dict({
        "loopcraft": 1,
        "stage": {"kind": "circuit",
                  "elements": [["R1", "in", "n1"], ["R2", "n1", "n2"], ["C1", "n1", "out"], ["C2", "n2", "gnd"]],
                  "opamps": [{"plus": "n2", "minus": "out", "out": "out"}],
                  "input": "in", "output": "out"},
        "values": {"R1": 10.3e3, "R2": 10.3e3, "C1": 22.5e-9, "C2": 11.8e-9},
    })
    res = snap_design(d, "E12")
    qs = [m for m in res.moves if m.label.startswith("Qp1")]
    w0 = [m for m in res.moves if m.label.startswith("ω0p1")]
    assert len(qs) == 1 and len(w0) == 1

    def f0(v):
        return 1.0 / (TWO_PI * math.sqrt(v["R1"] * v["R2"] * v["C1"] * v["C2"]))

    def q(v):
        return math.sqrt(v["R1"] * v["R2"] * v["C1"] * v["C2"]) / (v["C2"] * (v["R1"] + v["R2"]))

    # E12 by hand: 10.3k -> 10k; 22.5n -> 22n; 11.8n between 10n and 12n -> 12n.
    assert dict(res.design.values) == pytest.approx({"R1": 10e3, "R2": 10e3, "C1": 22e-9, "C2": 12e-9})
    assert w0[0].before == pytest.approx(f0(d.values), rel=1e-9)
    assert w0[0].after == pytest.approx(f0(res.design.values), rel=1e-9)
    assert qs[0].before == pytest.approx(q(d.values), rel=1e-9)
    assert qs[0].after == pytest.approx(q(res.design.values), rel=1e-9)
    assert res.move("gain:dc").before == pytest.approx(1.0)


# --------------------------------------------------------------------------- combinations, inductors


def test_combinations_are_reported_per_part():
    d = type2(R2=10.05e3, C1=5.7e-9)
    res = snap_design(d, "E24", combinations=True)
    ch = {c.name: c for c in res.changes}
    # By hand: 10.05k = 10k + 51 Ω (both E24) to 0.01 %; 5.7n is no E24 value (5.6n, 6.2n) but two
    # E24 capacitors in parallel make it exactly (4.7n + 1n or 3n + 2.7n; the closer pair is preferred).
    assert ch["R2"].combination.parts == (10e3, 51.0)
    assert ch["R2"].after == pytest.approx(10051.0, rel=1e-12)
    assert "in series" in ch["R2"].wiring
    e24 = (1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0,
           3.3, 3.6, 3.9, 4.3, 4.7, 5.1, 5.6, 6.2, 6.8, 7.5, 8.2, 9.1)  # IEC 60063:2015 E24 table
    parts = ch["C1"].combination.parts
    assert len(parts) == 2 and sum(parts) == pytest.approx(5.7e-9, rel=1e-12)
    assert all(any(math.isclose(p * 1e9, m) for m in e24) for p in parts)
    assert parts == pytest.approx((3e-9, 2.7e-9))
    assert ch["C1"].after == pytest.approx(5.7e-9, rel=1e-12)
    assert "in parallel" in ch["C1"].wiring
    assert "build as" in str(res)


def test_inductors_are_left_alone_unless_asked():
    d = Design.from_dict({
        "loopcraft": 1,
        "stage": {"kind": "inverting", "input": "R1", "feedback": "R2 + L1"},
        "values": {"R1": "10.3k", "R2": "1k", "L1": "1.23m"},
    })
    kept = snap_design(d, "E12")
    assert kept.design.values["L1"] == pytest.approx(1.23e-3)
    assert not {c.name: c for c in kept.changes}["L1"].snapped
    # E12 by hand: 1.23m between 1.2m and 1.5m -> 1.2m.
    asked = snap_design(d, "E12", inductors=True)
    assert asked.design.values["L1"] == pytest.approx(1.2e-3)
    # The zero sits at R2/L1 (series R-L, from memory).
    zero = next(m for m in asked.moves if m.label.startswith("ωz1"))
    assert zero.after == pytest.approx(1e3 / 1.2e-3 / TWO_PI, rel=1e-9)


# --------------------------------------------------------------------------- loop margins


def _buck(f_hz, p):
    """Voltage-mode buck Gvc with ESR (Erickson & Maksimovic 2001, ch. 8), DCR = 0."""
    s = 1j * TWO_PI * np.asarray(f_hz, dtype=float)
    r, ind, c, rc = p["load_ohm"], p["l_h"], p["c_f"], p["esr_ohm"]
    zo = 1.0 / (1.0 / r + 1.0 / (rc + 1.0 / (s * c)))
    return p["vin_v"] / p["ramp_v"] * zo / (zo + s * ind)


def _type3(f_hz, v):
    s = 1j * TWO_PI * np.asarray(f_hz, dtype=float)

    def par(a, b):
        return a * b / (a + b)

    zi = par(v["R1"], v["R3"] + 1.0 / (s * v["C3"]))
    zf = par(v["R2"] + 1.0 / (s * v["C1"]), 1.0 / (s * v["C2"]))
    return zi, zf


def _opamp(f_hz, a0, gbw_hz, f2_hz):
    """Two-pole open-loop gain A0/((1 + s/ωa)(1 + s/ω2)), ωa = 2π·GBW/A0 (from memory)."""
    s = 1j * TWO_PI * np.asarray(f_hz, dtype=float)
    return a0 / ((1 + s / (TWO_PI * gbw_hz / a0)) * (1 + s / (TWO_PI * f2_hz)))


def _independent_loop(design: Design):
    """Crossover (Hz) and PM (deg) of L = P·k_fb·(Zf/Zi)/(1 + (1 + Zf/Zi)/A), computed here."""
    p = design.plant.to_dict()
    o = design.opamp.to_dict()
    v = design.values

    def loop(f):
        zi, zf = _type3(f, v)
        a = _opamp(f, o["a0"], o["gbw_hz"], o["second_pole_hz"])
        # Inverting amplifier with finite open-loop gain: -Zf/Zi / (1 + (1 + Zf/Zi)/A)
        # (Franco, Design with Operational Amplifiers, 4th ed., 2015, ch. 6).
        h = -(zf / zi) / (1 + (1 + zf / zi) / a)
        return _buck(f, p) * design.feedback_gain * (-h)

    def g(logf):
        return math.log(abs(complex(loop(10.0**logf))))

    fc = 10.0 ** brentq(g, math.log10(3e3), math.log10(150e3), xtol=1e-13)
    pm = 180.0 + math.degrees(np.angle(complex(loop(fc))))
    pm = (pm + 180.0) % 360.0 - 180.0
    return fc, pm


def _independent_amp_pm(design: Design):
    """Highest crossover of T = A·Zi/(Zi + Zf) and its phase margin, computed here."""
    o = design.opamp.to_dict()
    v = design.values

    def t(f):
        zi, zf = _type3(f, v)
        return _opamp(f, o["a0"], o["gbw_hz"], o["second_pole_hz"]) * zi / (zi + zf)

    f = np.logspace(2, 9, 4000)
    mag = np.abs(t(f))
    idx = np.nonzero(np.diff(np.sign(np.log(mag))))[0][-1]
    fc = 10.0 ** brentq(lambda u: math.log(abs(complex(t(10.0**u)))), math.log10(f[idx]), math.log10(f[idx + 1]),
                        xtol=1e-13)
    pm = 180.0 + math.degrees(np.angle(complex(t(fc))))
    return fc, (pm + 180.0) % 360.0 - 180.0


def test_snapped_margins_equal_a_fresh_and_an_independent_analysis():
    d = load(EXAMPLES / "bus48_loop.json").with_values(R2=12.34e3, C1=2.55e-9, R3=333.0, C3=3.1e-9)
    res = snap_design(d, "E24")
    fresh = res.design.analyze()
    m = fresh.loop.margins
    assert res.move("loop:crossover:0:f_hz").after == m.crossovers[0].f_hz
    assert res.move("loop:crossover:0:pm").after == m.crossovers[0].phase_margin_deg
    assert res.move("loop:phase_crossover:0:gm").after == m.gain_margins[0].gain_margin_db
    assert res.move("amplifier:pm").after == fresh.actual.amplifier_loop.phase_margin_deg

    for design, side in ((d, "before"), (res.design, "after")):
        fc, pm = _independent_loop(design)
        assert getattr(res.move("loop:crossover:0:f_hz"), side) == pytest.approx(fc, rel=1e-6)
        assert getattr(res.move("loop:crossover:0:pm"), side) == pytest.approx(pm, abs=1e-4)
        fa, pma = _independent_amp_pm(design)
        assert getattr(res.move("amplifier:crossover"), side) == pytest.approx(fa, rel=1e-5)
        assert getattr(res.move("amplifier:pm"), side) == pytest.approx(pma, abs=1e-3)
    pm_move = res.move("loop:crossover:0:pm")
    assert pm_move.delta == pytest.approx(pm_move.after - pm_move.before)


def test_table_text_lists_parts_and_moves():
    d = load(EXAMPLES / "bus48_loop.json").with_values(R2=12.34e3)
    res = snap_design(d, "E24")
    assert isinstance(res, SnapResult)
    text = str(res)
    for piece in ("Snapped to E24", "R2", "12.34 kΩ", "12 kΩ", "loop phase margin 1", "amplifier-loop phase margin",
                  "ωz1 = 1/(C1·R2)"):
        assert piece in text
