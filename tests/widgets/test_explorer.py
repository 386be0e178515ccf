"""Headless tests of the stage explorer: the marks hold the model's data, one message per mark.

Engineering references are named beside each check. The explorer's own
model is compared with ``Design.with_values(...).analyze(f_hz=<grid>)``; the
exact curve is also checked against ``scipy.signal.freqs_zpk`` and, for a
few stages, against the impedance formulas evaluated directly.
"""

from __future__ import annotations

import math
import subprocess
import sys

import numpy as np
import pytest
import scipy.signal as sig

import loopcraft as lc
from loopcraft.errors import AnalysisError, TopologyError
from loopcraft.widgets import Explorer

from .conftest import count_messages

KEYS = list(lc.TOPOLOGIES)


def _model(ex: Explorer):
    """The model's analysis at the explorer's values, on the explorer's grid."""
    return ex.design.analyze(f_hz=ex.f_hz)


def _sorted(roots) -> np.ndarray:
    r = np.asarray(roots, dtype=complex)
    return r[np.lexsort((r.imag, r.real))]


def _assert_marks_match_model(ex: Explorer) -> None:
    vs = ex.view_state()
    a = _model(ex)
    np.testing.assert_array_equal(vs["f_hz"], ex.f_hz)
    for key in ("exact_mag_db", "exact_phase_deg", "asymptote_mag_db", "asymptote_phase_deg"):
        np.testing.assert_allclose(vs[key], getattr(a, key), rtol=1e-9, atol=1e-9, err_msg=key)
    for key in ("poles_rad_s", "zeros_rad_s"):
        np.testing.assert_allclose(_sorted(vs[key]), _sorted(getattr(a, key)), rtol=1e-9, atol=1e-6,
                                   err_msg=key)
    if a.actual is not None:
        np.testing.assert_allclose(vs["actual_mag_db"], a.actual_mag_db, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(vs["actual_phase_deg"], a.actual_phase_deg, rtol=1e-9, atol=1e-9)
    else:
        assert "actual_mag_db" not in vs
    if a.loop is not None:
        np.testing.assert_allclose(vs["loop_mag_db"], a.loop_mag_db, rtol=1e-9, atol=1e-9)
        np.testing.assert_allclose(vs["loop_phase_deg"], a.loop_phase_deg, rtol=1e-9, atol=1e-9)
    else:
        assert "loop_mag_db" not in vs


def _assert_exact_matches_scipy(ex: Explorer) -> None:
    """The exact curve on the marks against scipy.signal.freqs_zpk (outside reference)."""
    vs = ex.view_state()
    tr = ex.design.transfer()
    w = 2 * np.pi * vs["f_hz"]
    _, h = sig.freqs_zpk(tr.zeros, tr.poles, tr.zpk_gain, worN=w)
    np.testing.assert_allclose(vs["exact_mag_db"], 20 * np.log10(np.abs(h)), rtol=0, atol=1e-6)
    # Phase: equal modulo 360° (the explorer shows the continuous phase).
    d = (vs["exact_phase_deg"] - np.degrees(np.angle(h)) + 180.0) % 360.0 - 180.0
    np.testing.assert_allclose(d, 0.0, atol=1e-6)


# --------------------------------------------------------------------------- every topology

@pytest.mark.parametrize("key", KEYS)
def test_every_topology_shows_the_model(key: str) -> None:
    ex = Explorer(key)
    assert set(ex.sliders) == set(lc.topology(key).design().stage.component_names)
    _assert_marks_match_model(ex)
    _assert_exact_matches_scipy(ex)


@pytest.mark.parametrize("key", KEYS)
def test_every_topology_follows_a_slider(key: str) -> None:
    ex = Explorer(key)
    name = sorted(ex.sliders)[0]
    before = ex.view_state()
    new = ex.sliders[name].value * 1.7
    ex.sliders[name].value = new
    assert ex.design.values[name] == new
    _assert_marks_match_model(ex)
    _assert_exact_matches_scipy(ex)
    # The grid stays put while sliders move (axes do not jump).
    np.testing.assert_array_equal(ex.view_state()["f_hz"], before["f_hz"])


def test_switching_topologies_rebuilds_everything() -> None:
    ex = Explorer("type3")
    for key in ("pi", "sallen_key_lowpass", "noninverting_shaped", "type3"):
        ex.picker.value = key
        assert set(ex.sliders) == set(lc.topology(key).design().stage.component_names)
        _assert_marks_match_model(ex)


# --------------------------------------------------------------------------- engineering checks

def test_type3_curve_matches_impedance_formulas() -> None:
    # Inverting stage H = -Zf/Zi with Z_R = R, Z_C = 1/(jωC), series impedances add and
    # parallel admittances add (from memory: elementary circuit theory).
    ex = Explorer("type3")
    ex.sliders["R2"].value = 33e3
    ex.sliders["C3"].value = 4.7e-9
    v = ex.design.values
    f = ex.f_hz
    s = 2j * np.pi * f

    def par(a, b):
        return a * b / (a + b)

    zi = par(v["R1"], v["R3"] + 1 / (s * v["C3"]))
    zf = par(v["R2"] + 1 / (s * v["C1"]), 1 / (s * v["C2"]))
    h = -zf / zi
    vs = ex.view_state()
    np.testing.assert_allclose(vs["exact_mag_db"], 20 * np.log10(np.abs(h)), atol=1e-6)


def test_sallen_key_lowpass_matches_handbook_form() -> None:
    # Unity-gain Sallen-Key low-pass, C1 the feedback capacitor:
    # H = 1 / (1 + s·C2·(R1 + R2) + s²·R1·R2·C1·C2)
    # (Sallen & Key, "A practical method of designing RC active filters", IRE Trans. CT, 1955).
    ex = Explorer("sallen_key_lowpass")
    ex.sliders["R2"].value = 22e3
    v = ex.design.values
    s = 2j * np.pi * ex.f_hz
    h = 1 / (1 + s * v["C2"] * (v["R1"] + v["R2"]) + s**2 * v["R1"] * v["R2"] * v["C1"] * v["C2"])
    np.testing.assert_allclose(ex.view_state()["exact_mag_db"], 20 * np.log10(np.abs(h)), atol=1e-6)
    # Its poles: ω0 = 1/sqrt(R1·R2·C1·C2) (same source).
    w0 = 1 / math.sqrt(v["R1"] * v["R2"] * v["C1"] * v["C2"])
    np.testing.assert_allclose(np.abs(ex.view_state()["poles_rad_s"]), w0, rtol=1e-9)


def test_corner_markers_sit_at_the_rc_corners() -> None:
    # Type III corners (from memory, standard Type III analysis): zeros 1/(R2·C1) and
    # 1/((R1+R3)·C3), poles 1/(R3·C3) and (C1+C2)/(R2·C1·C2), in rad/s.
    ex = Explorer("type3")
    v = ex.design.values
    two_pi = 2 * math.pi
    zeros = sorted([1 / (v["R2"] * v["C1"]) / two_pi, 1 / ((v["R1"] + v["R3"]) * v["C3"]) / two_pi])
    poles = sorted([1 / (v["R3"] * v["C3"]) / two_pi, (v["C1"] + v["C2"]) / (v["R2"] * v["C1"] * v["C2"]) / two_pi])
    vs = ex.view_state()
    np.testing.assert_allclose(sorted(vs["zero_corners_hz"]), zeros, rtol=1e-9)
    np.testing.assert_allclose(sorted(vs["pole_corners_hz"]), poles, rtol=1e-9)


def test_loop_margins_match_model_and_definition(loop_path) -> None:
    ex = Explorer(loop_path)
    vs = ex.view_state()
    assert {"actual_mag_db", "actual_phase_deg", "loop_mag_db", "loop_phase_deg", "loop_margins"} <= set(vs)
    a = _model(ex)
    m = a.loop.margins
    shown = vs["loop_margins"]
    assert len(shown["crossovers"]) == len(m.crossovers) >= 1
    for c_shown, c in zip(shown["crossovers"], m.crossovers, strict=True):
        assert math.isclose(c_shown["f_hz"], c.f_hz, rel_tol=1e-12)
        assert math.isclose(c_shown["phase_margin_deg"], c.phase_margin_deg, abs_tol=1e-9)
        # Definition (from memory): |L(j·2π·fc)| = 1 and PM = 180° + ∠L(fc) (mod 360°).
        lv = a.loop.loop.response(np.array([c.f_hz]))[0]
        assert math.isclose(abs(lv), 1.0, rel_tol=1e-6)
        pm = (180.0 + math.degrees(np.angle(lv)) + 180.0) % 360.0 - 180.0
        assert math.isclose(pm, c.phase_margin_deg, abs_tol=1e-4)
    for g_shown, g in zip(shown["gain_margins"], m.gain_margins, strict=True):
        assert math.isclose(g_shown["f_hz"], g.f_hz, rel_tol=1e-12)
        # GM = -20·log10|L| where ∠L = -180° (from memory).
        lv = a.loop.loop.response(np.array([g.f_hz]))[0]
        assert math.isclose(g_shown["gain_margin_db"], -20 * math.log10(abs(lv)), abs_tol=1e-6)
    amp = a.actual.amplifier_loop
    assert math.isclose(vs["amplifier_crossover_hz"], amp.crossover_hz, rel_tol=1e-12)
    _assert_marks_match_model(ex)


def test_loop_follows_a_slider_with_opamp_and_plant(loop_path) -> None:
    ex = Explorer(loop_path)
    ex.sliders["R2"].value = 15e3
    _assert_marks_match_model(ex)
    ex.sliders["C2"].value = 100e-12
    _assert_marks_match_model(ex)
    assert ex.design.opamp is not None and ex.design.plant is not None


# --------------------------------------------------------------------------- one message per mark

def _bode_marks(ex: Explorer):
    b = ex.bode
    return [b.curves_mag, b.asym_mag, b.zero_corners, b.pole_corners, b.curves_phase, b.asym_phase]


def test_one_slider_move_sends_one_update_per_mark() -> None:
    ex = Explorer("type3")
    b, pz = ex.bode, ex.pzmap
    all_marks = [*b.mag_fig.marks, *b.phase_fig.marks, *pz.fig.marks]
    y_changes = {id(m): 0 for m in all_marks}

    def bump(change):
        y_changes[id(change["owner"])] += 1

    for m in all_marks:
        m.observe(bump, names="y")
    with count_messages(all_marks) as counts:
        ex.sliders["R2"].value = 27e3
    for m in _bode_marks(ex):
        assert counts[id(m)] == 1, m
        assert y_changes[id(m)] == 1, m
    for m in (pz.poles, pz.zeros):  # real roots: x moves, y stays 0
        assert counts[id(m)] == 1, m
    for m in all_marks:
        assert counts[id(m)] <= 1, m  # static marks send nothing, none sends twice


def test_one_update_per_mark_with_opamp_and_plant(loop_path) -> None:
    ex = Explorer(loop_path)
    b = ex.bode
    all_marks = [*b.mag_fig.marks, *b.phase_fig.marks, *ex.pzmap.fig.marks]
    with count_messages(all_marks) as counts:
        ex.sliders["C1"].value = 3.3e-9
    for m in [*_bode_marks(ex), b.phase_segments, b.mag_labels, b.phase_labels]:
        assert counts[id(m)] == 1, m
    assert max(counts.values()) == 1


@pytest.mark.parametrize("source", ["type3", "sallen_key_lowpass", "loop"])
def test_slider_move_never_runs_sympy(source: str, loop_path) -> None:
    # The per-move path is the compiled one: nothing of sympy runs while a slider moves,
    # except the hashing of the cached derivation's expressions when a per-topology cache is
    # looked up (sympy caches those hashes).
    ex = Explorer(loop_path if source == "loop" else source)
    ex.sliders[sorted(ex.sliders)[0]].value *= 1.3  # warm every cache once
    seen: set[str] = set()

    def tracer(frame, event, arg):
        mod = frame.f_globals.get("__name__", "")
        if event == "call" and (mod == "sympy" or mod.startswith("sympy.")) and frame.f_code.co_name != "__hash__":
            seen.add(f"{mod}.{frame.f_code.co_name}")

    name = sorted(ex.sliders)[-1]
    sys.setprofile(tracer)
    try:
        ex.sliders[name].value *= 1.2
    finally:
        sys.setprofile(None)
    assert not seen, sorted(seen)
    _assert_marks_match_model(ex)


def test_entry_and_slider_do_not_bounce() -> None:
    ex = Explorer("type3")
    ctl = ex._panel.controls["R2"]
    submits = []
    orig = ctl.submit
    ctl.submit = lambda text: submits.append(text) or orig(text)
    with count_messages([ctl.entry, ctl.slider, ex.bode.curves_mag]) as counts:
        ex.sliders["R2"].value = 47e3
    assert submits == []  # the entry was rewritten under the guard, not re-submitted
    assert ctl.entry.value == "47k"
    assert counts[id(ctl.entry)] == 1 and counts[id(ex.bode.curves_mag)] == 1
    # Typing moves the slider once, and redraws once.
    with count_messages([ctl.slider, ex.bode.curves_mag]) as counts:
        ctl.entry.value = "4k7"
    assert ex.sliders["R2"].value == 4700.0
    assert counts[id(ex.bode.curves_mag)] == 1
    _assert_marks_match_model(ex)


def test_browser_rounding_of_a_python_value_is_ignored() -> None:
    # The browser rounds a value it is sent to its step grid and sends that back:
    # within half a step it is not a move, so 33 kΩ stays 33 kΩ.
    ex = Explorer("type3")
    s = ex.sliders["R2"]
    s.value = 33e3
    with count_messages([ex.bode.curves_mag]) as counts:
        s.set_state({"value": 10 ** (round(math.log10(33e3) / s.step) * s.step)})
    assert s.value == 33e3 and counts[id(ex.bode.curves_mag)] == 0
    s.set_state({"value": 33e3 * 10 ** s.step})  # a real key step
    assert math.isclose(s.value, 33e3 * 10 ** s.step)
    _assert_marks_match_model(ex)


# --------------------------------------------------------------------------- entries and errors

def test_entry_accepts_engineering_notation() -> None:
    ex = Explorer("type3")
    ex._panel.controls["C1"].entry.value = "3.3n"
    ex._panel.controls["R1"].entry.value = "4k7"
    assert ex.sliders["C1"].value == pytest.approx(3.3e-9, rel=1e-15)
    assert ex.sliders["R1"].value == 4700.0
    assert "4.7 kΩ" in ex._panel.controls["R1"].readout.value
    _assert_marks_match_model(ex)


def test_bad_entry_shows_error_and_keeps_state() -> None:
    ex = Explorer("type3")
    ctl = ex._panel.controls["R2"]
    before = ex.view_state()
    ctl.entry.value = "4x7"
    assert "^" in ctl.error.message and "<pre" in ctl.error.widget.value
    assert ex.sliders["R2"].value == 22e3
    after = ex.view_state()
    np.testing.assert_array_equal(after["exact_mag_db"], before["exact_mag_db"])
    ctl.entry.value = "22u"  # parses, but is no resistor value the explorer offers (1 Ω .. 100 MΩ)
    assert "outside" in ctl.error.message and ex.sliders["R2"].value == 22e3
    ctl.entry.value = "22k"
    assert ctl.error.message == ""


def test_entry_outside_slider_range_recentres_it() -> None:
    ex = Explorer("type3")
    s = ex.sliders["R2"]
    ex._panel.controls["R2"].entry.value = "47M"
    assert s.value == 47e6 and s.min <= math.log10(47e6) <= s.max
    _assert_marks_match_model(ex)


def test_analysis_failure_keeps_the_last_good_state(monkeypatch) -> None:
    ex = Explorer("type3")
    before = ex.view_state()

    def fail(values=None):
        raise AnalysisError("the stage degenerates at these values (test)")

    monkeypatch.setattr(ex._analyzer, "update", fail)
    ex.sliders["R2"].value = 50e3
    after = ex.view_state()
    np.testing.assert_array_equal(after["exact_mag_db"], before["exact_mag_db"])
    np.testing.assert_array_equal(after["poles_rad_s"], before["poles_rad_s"])
    assert "degenerates" in ex.status.message
    assert "degenerates" in ex._panel.controls["R2"].error.message


def test_snap_to_e24_snaps_every_value() -> None:
    # IEC 60063 E24 mantissas (from the standard's table).
    e24 = [1.0, 1.1, 1.2, 1.3, 1.5, 1.6, 1.8, 2.0, 2.2, 2.4, 2.7, 3.0, 3.3, 3.6, 3.9, 4.3, 4.7, 5.1,
           5.6, 6.2, 6.8, 7.5, 8.2, 9.1]
    def nearest_e24(x: float) -> float:  # nearest in log terms, over neighbouring decades
        k = math.floor(math.log10(x))
        cands = [m * 10.0 ** (k + d) for d in (-1, 0, 1) for m in e24]
        return min(cands, key=lambda c: abs(math.log(c / x)))

    ex = Explorer("type3")
    ex.sliders["R2"].value = 23.4e3
    with count_messages([ex.bode.curves_mag]) as counts:
        ex._panel.snap.value = "E24"
    assert counts[id(ex.bode.curves_mag)] == 1  # all values snapped, one redraw
    for v in ex.design.values.values():
        mant = v / 10 ** math.floor(math.log10(v) + 1e-12)
        assert any(math.isclose(mant, m, rel_tol=1e-9) for m in e24), v
    assert ex.sliders["R2"].value == pytest.approx(nearest_e24(23.4e3)) == pytest.approx(24e3)
    for x in (22.7e3, 25.5e3, 9.6e3, 470.0 * 1.04):
        ex.sliders["R2"].value = x
        assert ex.sliders["R2"].value == pytest.approx(nearest_e24(x)), x
    _assert_marks_match_model(ex)


# --------------------------------------------------------------------------- own network, files, panels

def test_own_network_bad_expression_keeps_design() -> None:
    ex = Explorer("type3")
    before = ex.design
    ex.picker.value = "__own__"
    form = ex.network_form
    form.first.text.value = "R1 || (R3 + "
    form.submit()
    assert "^" in form.first.error.message and "<pre" in form.first.error.widget.value
    assert ex.design == before


def test_own_network_builds_with_default_values() -> None:
    ex = Explorer("type3")
    ex.picker.value = "__own__"
    form = ex.network_form
    form._set_quietly(form.first, "R1 || L1")
    form._set_quietly(form.feedback, "C1")
    assert form.submit() is not None
    assert ex.design.values == {"R1": 10e3, "L1": 1e-3, "C1": 10e-9}
    _assert_marks_match_model(ex)
    # H = -(R1 + sL1)/(s²·R1·L1·C1): a double pole at the origin (from memory: -Zf/Zi by hand),
    # drawn once with its multiplicity.
    assert list(ex.pzmap.pole_mult) == [2]
    assert list(ex.pzmap.poles.names) == ["2"]
    assert "double pole at the origin" in ex.pzmap.describe("pole", 0)


def test_own_network_shared_designator_is_reported() -> None:
    ex = Explorer("type3")
    before = ex.design
    form = ex.network_form
    form._set_quietly(form.first, "R1")
    form._set_quietly(form.feedback, "R1 + C1")
    assert form.submit() is None
    assert "R1" in form.error.message and ex.design == before


def test_loading_a_file_and_bad_files(loop_path, tmp_path) -> None:
    ex = Explorer("type3")
    before = ex.design
    assert ex.file_loader.load_path(str(tmp_path / "missing.json")) is None
    assert "cannot read" in ex.file_loader.path.error.message and ex.design == before
    assert ex.file_loader.load_bytes(b'{"loopcraft": 1, "stage": ', "bad.json") is None
    assert "not valid JSON" in ex.file_loader.error.message and ex.design == before
    assert ex.file_loader.load_bytes(b'{"loopcraft": 1, "stage": {}, "stage": {}}', "dup.json") is None
    assert "twice" in ex.file_loader.error.message
    ex.file_loader.load_bytes(loop_path.read_bytes(), "bus48_loop.json")
    assert ex.picker.value == "__loaded__"
    assert ex.opamp_panel.model.value == "two_pole" and ex.plant_panel.kind.value == "buck_vm"
    assert ex.design == lc.load(loop_path)
    _assert_marks_match_model(ex)


def test_opamp_panel_errors_and_model() -> None:
    ex = Explorer("type3")
    before = ex.view_state()
    p = ex.opamp_panel
    p.fields["gbw_hz"].text.value = "ten"
    p.model.value = "two_pole"
    assert "gbw_hz" in p.fields["gbw_hz"].error.message
    assert ex.design.opamp is None
    np.testing.assert_array_equal(ex.view_state()["exact_mag_db"], before["exact_mag_db"])
    assert "actual_mag_db" not in ex.view_state()
    p.fields["gbw_hz"].text.value = "1M"
    assert p.fields["gbw_hz"].error.message == ""
    assert ex.design.opamp.gbw_hz == 1e6 and ex.design.opamp.second_pole_hz == 30e6
    _assert_marks_match_model(ex)
    # Single-pole A(s) = A0/(1 + s/ωa) with ωa = 2π·GBW/A0 (from memory: dominant-pole model);
    # an inverting stage with the real op-amp is H·(1/(1 + Gn/A)), Gn = 1 - H for -Zf/Zi.
    p.model.value = "single_pole"
    v = ex.design.values
    s = 2j * np.pi * ex.f_hz
    a0 = 10 ** (100 / 20)
    a = a0 / (1 + s / (2 * np.pi * 1e6 / a0))

    def par(x, y):
        return x * y / (x + y)

    h = -par(v["R2"] + 1 / (s * v["C1"]), 1 / (s * v["C2"])) / par(v["R1"], v["R3"] + 1 / (s * v["C3"]))
    h_real = h / (1 + (1 - h) / a)
    np.testing.assert_allclose(ex.view_state()["actual_mag_db"], 20 * np.log10(np.abs(h_real)), atol=1e-6)
    p.model.value = "ideal"
    assert ex.design.opamp is None and "actual_mag_db" not in ex.view_state()


def test_plant_panel_list_error_then_loop() -> None:
    ex = Explorer("type2")
    p = ex.plant_panel
    p.fields[("general", "poles_hz")].text.value = "1k, abc"
    p.kind.value = "general"
    msg = p.fields[("general", "poles_hz")].error.message
    assert "poles_hz[1]" in msg
    assert ex.design.plant is None and "loop_mag_db" not in ex.view_state()
    p.fields[("general", "poles_hz")].text.value = "1k"
    assert ex.design.plant.poles_hz == (1000.0,)
    p.feedback.text.value = "zero"
    assert "feedback_gain" in p.feedback.error.message and ex.design.feedback_gain == 1.0
    p.feedback.text.value = "0.5"
    assert ex.design.feedback_gain == 0.5 and ex.design.plant is not None
    vs = ex.view_state()
    # Loop gain L = P·k·(-H) for an inverting stage (loopcraft.analysis.loop convention); P = 10/(1 + s/ωp).
    s = 2j * np.pi * ex.f_hz
    plant = 10 / (1 + s / (2 * np.pi * 1e3))
    h = ex.design.transfer().response(ex.f_hz)
    np.testing.assert_allclose(vs["loop_mag_db"], 20 * np.log10(np.abs(-0.5 * plant * h)), atol=1e-6)
    _assert_marks_match_model(ex)
    p.kind.value = "none"
    assert ex.design.plant is None and "loop_mag_db" not in ex.view_state()


def test_buck_plant_panel_fields() -> None:
    ex = Explorer("type3")
    p = ex.plant_panel
    p.kind.value = "buck_vm"
    d = ex.design.plant
    # Defaults of the invented 48 V bus converter; ω0 = 1/sqrt(LC) for a lossless buck
    # (Erickson & Maksimovic, Fundamentals of Power Electronics, 2nd ed., 2001, ch. 8).
    assert d.vin_v == 48 and d.l_h == pytest.approx(10e-6) and d.c_f == pytest.approx(100e-6)
    p.fields[("buck_vm", "l_h")].text.value = "-3u"
    assert "l_h" in p.fields[("buck_vm", "l_h")].error.message
    assert ex.design.plant.l_h == pytest.approx(10e-6)
    _assert_marks_match_model(ex)


# --------------------------------------------------------------------------- pole-zero map

def test_signed_log_keeps_10hz_and_1mhz_apart() -> None:
    from loopcraft.widgets._pzmap import inverse_signed_log, signed_log

    x0 = 1.0
    m = signed_log(np.array([-1e6, -10.0, 0.0, 10.0, 1e6]), x0)
    # One unit per decade beyond x0 (the mapping's definition): 10 Hz -> 2, 1 MHz -> 7.
    np.testing.assert_allclose(m, [-7, -2, 0, 2, 7])
    np.testing.assert_allclose(inverse_signed_log(m, x0), [-1e6, -10.0, 0.0, 10.0, 1e6])
    assert signed_log(np.array([0.5]), x0)[0] == 0.5  # linear inside ±x0


def test_pz_map_spreads_roots_over_decades() -> None:
    # A lead-lag stage with corners near 10 Hz and near 1 MHz.
    ex = Explorer("lead_lag")
    ex.set_values({"R4": 10e3, "C1": 1.6e-6, "R3": 100.0, "C3": 1.6e-9})
    vs = ex.view_state()
    xs = np.concatenate([ex.pzmap.poles.x, ex.pzmap.zeros.x])
    lo, hi = vs["pz_x_range"]
    assert lo <= xs.min() and xs.max() <= hi  # auto zoom shows every root
    f_roots = np.abs(np.concatenate([vs["poles_rad_s"], vs["zeros_rad_s"]])) / (2 * np.pi)
    assert f_roots.min() < 20 and f_roots.max() > 5e5
    order = np.argsort(xs)
    assert np.all(np.diff(xs[order]) > 0.02)  # every marker at its own place
    assert "signed-log" in ex.pzmap.x_axis.label and "Hz" in ex.pzmap.x_axis.label
    _assert_marks_match_model(ex)


def test_pz_units_toggle_keeps_roots() -> None:
    ex = Explorer("sallen_key_lowpass")
    hz = ex.view_state()["poles_rad_s"]
    ex.pzmap.units.value = "rad/s"
    assert "rad/s" in ex.pzmap.x_axis.label
    np.testing.assert_allclose(_sorted(ex.view_state()["poles_rad_s"]), _sorted(hz), rtol=1e-9)
    ex.pzmap.zoom.value = "manual"
    assert ex.pzmap.fig.interaction is not None
    ex.pzmap.zoom.value = "auto"
    assert ex.pzmap.fig.interaction is None


# SI prefixes of the tick labels, read here on our own (from memory: SI prefixes, p … T).
_SI = {"p": 1e-12, "n": 1e-9, "µ": 1e-6, "u": 1e-6, "m": 1e-3, "k": 1e3, "M": 1e6, "G": 1e9, "T": 1e12}


def _label_value(text: str) -> float:
    """A tick label ("−100k", "10m", "0") as a number."""
    t = text.replace("\u2212", "-")
    if t and t[-1] in _SI:
        return float(t[:-1]) * _SI[t[-1]]
    return float(t)


def _assert_ticks_label_the_axes(ex: Explorer) -> None:
    """Every s-plane tick reads the real σ or ω at its place, in the map's unit.

    The signed-log axis has sign(k)·x0·10^(|k|-1) at coordinate k (|k| >= 1) and 0 at 0 (the
    mapping's definition, see loopcraft.widgets._pzmap), with x0 the power of ten a decade below
    the smallest non-zero |σ| or |ω| of the design's roots in that unit, computed here from the
    model's roots at the values shown (x0 is fixed when a design is installed).
    """
    pz = ex.pzmap
    unit = pz.units.value
    tr = ex.design.transfer()
    roots = np.concatenate([tr.poles, tr.zeros]) / (2 * np.pi if unit == "Hz" else 1.0)
    parts = np.abs(np.concatenate([roots.real, roots.imag]))
    parts = parts[parts > 0]
    x0 = 10.0 ** (math.floor(math.log10(parts.min())) - 1) if parts.size else 1.0
    for axis, scale in ((pz.x_axis, pz.x_scale), (pz.y_axis, pz.y_scale)):
        assert f"({unit})" in axis.label
        ticks = np.asarray(axis.tick_values, dtype=float)
        assert ticks.size >= 2, axis.label
        assert scale.min <= ticks.min() and ticks.max() <= scale.max, (axis.label, ticks, scale.min, scale.max)
        assert np.all(np.diff(ticks) <= 2.0)
        for k in ticks:
            label = axis.tick_labels[str(int(k))]  # keyed as the browser prints the number
            want = 0.0 if k == 0 else math.copysign(x0 * 10.0 ** (abs(k) - 1), k)
            assert _label_value(label) == pytest.approx(want, rel=1e-9), (axis.label, k, label, want)


def test_topology_switch_relabels_the_s_plane_ticks(loop_path) -> None:
    # After each switch the ticks are the new axis range's values in Hz (or rad/s), never
    # signed-log coordinates left as they were.
    ex = Explorer(loop_path)
    _assert_ticks_label_the_axes(ex)
    for unit in ("Hz", "rad/s"):
        ex.pzmap.units.value = unit
        _assert_ticks_label_the_axes(ex)
        for key in ("mfb_lowpass", "lead_lag", "sallen_key_highpass", "noninverting_shaped", "type3"):
            ex.picker.value = key
            assert ex.picker.value == key and ex.status.message == ""
            _assert_ticks_label_the_axes(ex)
            _assert_marks_match_model(ex)


def test_manual_pan_moves_the_ticks_with_the_range() -> None:
    ex = Explorer("type3")
    pz = ex.pzmap
    pz.zoom.value = "manual"
    assert pz.fig.interaction is not None
    lo, hi = pz.x_scale.min, pz.x_scale.max
    y_lo, y_hi = pz.y_scale.min, pz.y_scale.max
    # A pan arrives as the front end's state message on the scales.
    pz.x_scale.set_state({"min": lo - 2.6, "max": hi - 2.6})
    pz.y_scale.set_state({"min": y_lo + 1.3, "max": y_hi + 1.3})
    assert ex.state.plane.x_range == (lo - 2.6, hi - 2.6)
    assert ex.state.plane.y_range == (y_lo + 1.3, y_hi + 1.3)
    _assert_ticks_label_the_axes(ex)
    r2 = ex.sliders["R2"].value
    ex.sliders["R2"].value = r2 * 1.5
    assert (pz.x_scale.min, pz.x_scale.max) == (lo - 2.6, hi - 2.6)  # manual zoom keeps the panned range
    ex.sliders["R2"].value = r2
    pz.zoom.value = "auto"
    assert pz.fig.interaction is None
    xs = np.concatenate([pz.poles.x, pz.zeros.x])
    assert pz.x_scale.min <= xs.min() and xs.max() <= pz.x_scale.max  # fitted to the roots again
    _assert_ticks_label_the_axes(ex)
    _assert_marks_match_model(ex)


def test_pz_frame_is_a_function_of_the_state_not_of_the_widgets() -> None:
    ex = Explorer("type3")
    pz = ex.pzmap
    a, plane = ex.analysis, ex.state.plane
    before = pz.frame(a, None, plane)
    pz.x_scale.min = -40.0  # widgets changed behind the view's back (auto zoom: not an input)
    pz.y_scale.max = 9.0
    after = pz.frame(a, None, plane)
    assert (after.x_range, after.y_range, after.unit, after.x0) == (before.x_range, before.y_range, "Hz", before.x0)
    np.testing.assert_array_equal(after.pole_x, before.pole_x)
    rad = pz.frame(a, None, plane.with_unit("rad/s"))
    assert rad.unit == "rad/s" and rad.x0 == plane.x0_rad_s and pz.units.value == "Hz"


def test_hover_names_the_parts_that_set_a_root() -> None:
    # The type III pole 1/(R3·C3): S = -1 for R3 and for C3, 0 for the others
    # (from memory: ∂ln(1/(R·C))/∂ln R = -1).
    ex = Explorer("type3")
    v = ex.design.values
    target = -1 / (v["R3"] * v["C3"])
    roots = [r for r, _m in ex.pzmap._groups["pole"]]
    idx = int(np.argmin([abs(r - target) for r in roots]))
    ex.pzmap.poles._handle_custom_msgs(None, {"event": "hover", "point": {"index": idx}})
    text = ex.pzmap.readout.value
    assert "<b>R3</b>" in text and "<b>C3</b>" in text and "<b>R1</b>" not in text
    assert ex.pzmap.tooltip.value == text


def test_dragged_part_highlights_the_corners_it_moves() -> None:
    # ωz2 = 1/(C3·(R1 + R3)) has S(R3) = -R3/(R1 + R3), ωp = 1/(R3·C3) has S(R3) = -1
    # (differentiating by hand). With R3 = 470 Ω, R1 = 10 kΩ: |S| = 0.045 < 0.05, not moved;
    # with R3 = 1 kΩ: 0.091, moved.
    ex = Explorer("type3")
    ex.sliders["R3"].value = 471.0
    hl = ex.view_state()["highlighted"]
    labels = {ln.label: ln.corner for ln in _lines(ex)}
    assert {labels[h].formula for h in hl} == {"1/(C3·R3)"}
    ex.sliders["R3"].value = 1000.0
    hl = ex.view_state()["highlighted"]
    assert {_lines_by_label(ex)[h].formula for h in hl} == {"1/(C3·R3)", "1/(C3·(R1 + R3))"}
    assert "background" in ex.formula.table.value


def _lines(ex):
    from loopcraft.numeric.factored import FactoredForm
    from loopcraft.widgets._formula import corner_lines

    return corner_lines(FactoredForm(ex.design.derivation, ex.design.transfer()))


def _lines_by_label(ex):
    return {ln.label: ln.corner for ln in _lines(ex)}


# --------------------------------------------------------------------------- construction

def test_explorer_accepts_design_path_and_key(loop_path) -> None:
    d = lc.load(loop_path)
    assert Explorer(d).design == d
    assert Explorer(str(loop_path)).design == d
    assert Explorer(loop_path).picker.value == "__loaded__"
    assert lc.Explorer("pi").picker.value == "pi"
    with pytest.raises(TopologyError, match="neither a library topology"):
        Explorer("type9")
    with pytest.raises(TopologyError, match="needs a Design"):
        Explorer(42)


def test_view_state_has_the_documented_keys(loop_path) -> None:
    vs = Explorer("type3").view_state()
    for key in ("f_hz", "exact_mag_db", "exact_phase_deg", "asymptote_mag_db", "asymptote_phase_deg",
                "poles_rad_s", "zeros_rad_s"):
        assert isinstance(vs[key], np.ndarray), key
    assert np.iscomplexobj(vs["poles_rad_s"])
    vs = Explorer(loop_path).view_state()
    for key in ("actual_mag_db", "actual_phase_deg", "loop_mag_db", "loop_phase_deg", "loop_margins",
                "amplifier_crossover_hz"):
        assert key in vs


def test_axes_are_legible() -> None:
    ex = Explorer("type3")
    b = ex.bode
    assert "Hz" in b.x_axis_phase.label and "dB" in b.mag_axis.label and "°" in b.phase_axis.label
    # Explicit decade ticks with SI labels on the log axis.
    assert b.x_axis_phase.tick_labels["1000"] == "1k" and b.x_axis_phase.tick_labels["1000000"] == "1M"
    assert all(k.isdigit() or k.startswith("0.") for k in b.x_axis_phase.tick_labels)
    assert "lc-bode-mag" in b.mag_fig._dom_classes and "lc-bode-phase" in b.phase_fig._dom_classes
    assert "lc-pzmap" in ex.pzmap.fig._dom_classes
    assert all("lc-slider" in s._dom_classes for s in ex.sliders.values())


def test_model_layers_do_not_import_widgets() -> None:
    code = ("import sys, loopcraft as lc\n"
            "d = lc.topology('type3').design(); d.analyze(); d.sensitivity()\n"
            "bad = [m for m in ('ipywidgets', 'bqplot') if m in sys.modules]\n"
            "assert not bad, bad\n")
    subprocess.run([sys.executable, "-c", code], check=True)
