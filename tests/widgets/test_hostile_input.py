"""Headless explorer tests of bad input: non-finite slider values, overflowing op-amp entries,
views that fail mid-redraw, and uploads the loader cannot read.

The rule under test: every error is shown beside the field that caused it, never raised out of
an observer, and the screen keeps the last good state (the marks match the model of the design
the explorer reports). The marks are compared with a fresh model analysis, and the LC network's
zeros with the closed form of a series LC branch.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pytest

import loopcraft as lc
from loopcraft.widgets import Explorer

from .conftest import EXAMPLES
from .test_explorer import _assert_marks_match_model


def _same_screen(before: dict, after: dict) -> None:
    for key in ("f_hz", "exact_mag_db", "exact_phase_deg", "poles_rad_s", "zeros_rad_s"):
        np.testing.assert_array_equal(after[key], before[key], err_msg=key)


# --------------------------------------------------------------------------- sliders


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf, "nan"])
def test_non_finite_slider_value_is_refused(bad):
    ex = Explorer("type3")
    before = ex.view_state()
    ex.sliders["R2"].value = bad
    assert ex.sliders["R2"].value == 22e3  # the last good value stays
    msg = ex._panel.controls["R2"].error.message
    assert "R2" in msg and "finite" in msg and "22 kΩ" in msg
    _same_screen(before, ex.view_state())
    # Nothing is poisoned: the next move redraws normally.
    ex.sliders["R1"].value = 12e3
    assert ex.status.message == ""
    assert all(math.isfinite(v) for v in ex.design.values.values())
    _assert_marks_match_model(ex)


def test_set_values_refuses_non_finite_and_moves_the_rest():
    ex = Explorer("type3")
    ex.set_values({"R2": math.nan, "R1": 12e3, "C1": -1.0})
    assert ex.sliders["R2"].value == 22e3 and ex.sliders["R1"].value == 12e3
    assert ex.design.values["C1"] == pytest.approx(6.8e-9)
    assert "nan" in ex._panel.controls["R2"].error.message
    assert "-1.0" in ex._panel.controls["C1"].error.message
    _assert_marks_match_model(ex)


# --------------------------------------------------------------------------- op-amp panel


@pytest.mark.parametrize("text", ["1e400", "1e308", "400"])
def test_overflowing_a0_is_shown_beside_its_field(text):
    ex = Explorer("type3")
    p = ex.opamp_panel
    p.model.value = "single_pole"
    good = ex.design.opamp
    assert good is not None and good.a0 == pytest.approx(1e5)  # 100 dB = 10^(100/20) V/V
    before = ex.view_state()
    p.fields["a0_db"].text.value = text  # must not raise out of the observer
    msg = p.fields["a0_db"].error.message
    assert msg, "no message beside the a0_db field"
    assert "Traceback" not in msg
    assert ex.design.opamp.a0 == good.a0 and p.current.a0 == good.a0  # the last good model stays in force
    _same_screen(before, ex.view_state())
    np.testing.assert_array_equal(ex.view_state()["actual_mag_db"], before["actual_mag_db"])
    p.fields["a0_db"].text.value = "80"
    assert p.fields["a0_db"].error.message == ""
    assert ex.design.opamp.a0 == pytest.approx(1e4)
    _assert_marks_match_model(ex)


def test_a_redraw_failure_after_new_sections_rolls_back(monkeypatch):
    ex = Explorer("type3")
    before, design = ex.view_state(), ex.design
    original = ex.pzmap.frame

    def failing(a, sens, plane):
        if a.actual is not None:
            raise ZeroDivisionError("float division by zero")
        return original(a, sens, plane)

    monkeypatch.setattr(ex.pzmap, "frame", failing)
    p = ex.opamp_panel
    p.model.value = "single_pole"
    assert "ZeroDivisionError" in p.error.message
    assert p.current is None and ex.design == design
    _same_screen(before, ex.view_state())
    assert "actual_mag_db" not in ex.view_state()
    monkeypatch.setattr(ex.pzmap, "frame", original)
    ex.sliders["R2"].value = 30e3
    _assert_marks_match_model(ex)


# --------------------------------------------------------------------------- own network


def test_lc_network_draws_consistently():
    ex = Explorer("type3")
    ex.picker.value = "__own__"
    form = ex.network_form
    form._set_quietly(form.first, "R1")
    form._set_quietly(form.feedback, "C1 + L1")
    form.submit()
    assert form.error.message == ""
    assert ex.design.stage.to_dict()["feedback"] == "C1 + L1"
    _assert_marks_match_model(ex)
    # H = -(1/(sC1) + sL1)/R1 = -(1 + s²L1C1)/(sR1C1): zeros at ±j/sqrt(L1·C1), a pole at the origin
    # (from memory: series LC resonance). Defaults L1 = 1 mH, C1 = 10 nF.
    w0 = 1 / math.sqrt(1e-3 * 10e-9)
    zeros = np.asarray(ex.view_state()["zeros_rad_s"])
    np.testing.assert_allclose(sorted(zeros.imag), [-w0, w0], rtol=1e-9)
    np.testing.assert_allclose(zeros.real, 0.0, atol=1e-6 * w0)
    ex.sliders["L1"].value = 4e-3
    _assert_marks_match_model(ex)


@pytest.mark.parametrize("where", ["frame", "draw"])
def test_network_that_fails_mid_redraw_leaves_the_last_good_state(monkeypatch, where):
    ex = Explorer("type3")
    before, design, names = ex.view_state(), ex.design, set(ex.sliders)
    ex.picker.value = "__own__"
    original = getattr(ex.pzmap, where)

    def failing(*args):
        if "L1" in ex._base.stage.component_names:  # only while the LC network is being installed
            raise ZeroDivisionError("float division by zero")
        return original(*args)

    monkeypatch.setattr(ex.pzmap, where, failing)
    form = ex.network_form
    form._set_quietly(form.first, "R1")
    form._set_quietly(form.feedback, "C1 + L1")
    assert form.submit() is None
    assert "ZeroDivisionError" in form.error.message
    assert ex.design == design and set(ex.sliders) == names
    assert ex.picker.value == "type3"
    assert "type III" in ex.title.value.lower() or ex.title.value  # header of the old design
    _same_screen(before, ex.view_state())
    _assert_marks_match_model(ex)
    ex.sliders["R2"].value = 30e3  # the old controls are live again
    _assert_marks_match_model(ex)


def test_deeply_nested_network_is_an_error_beside_the_field():
    ex = Explorer("type3")
    form = ex.network_form
    form._set_quietly(form.first, "(" * 5000 + "R1" + ")" * 5000)
    form._set_quietly(form.feedback, "R2")
    assert form.submit() is None
    assert form.first.error.message != ""


# --------------------------------------------------------------------------- uploads


def _doc(**changes) -> dict:
    d = json.loads((EXAMPLES / "bus48_type3.json").read_text(encoding="utf-8"))
    d.update(changes)
    return d


@pytest.mark.parametrize(("data", "words"), [
    (b"[" * 100_000, "x.json"),                                             # recursion limit in the JSON reader
    (json.dumps(_doc(opamp={"model": "single_pole", "a0": 10**400, "gbw_hz": 1e6})).encode(), "a0"),
    (json.dumps(_doc(opamp={"model": "single_pole", "a0": 1e400, "gbw_hz": 1e6})).encode(), "a0"),  # inf
    (json.dumps(_doc(title="x \ud800")).encode(), "title"),                   # ASCII JSON with the escape
    ("\ufeff{".encode(), "x.json"),
    (b"\xff\xfe\x00", "not UTF-8"),
])
def test_bad_upload_is_shown_beside_the_loader(data, words):
    ex = Explorer("type3")
    before, design = ex.view_state(), ex.design
    assert ex.file_loader.load_bytes(data, "x.json") is None
    msg = ex.file_loader.error.message
    assert words in msg, msg
    assert ex.design == design
    _same_screen(before, ex.view_state())
    ex.file_loader.load_bytes((EXAMPLES / "bus48_loop.json").read_bytes(), "bus48_loop.json")
    assert ex.file_loader.error.message == "" and ex.design == lc.load(EXAMPLES / "bus48_loop.json")
    _assert_marks_match_model(ex)


def test_upload_that_cannot_be_drawn_keeps_the_old_design(monkeypatch):
    ex = Explorer("type3")
    before, design = ex.view_state(), ex.design
    original = ex.bode.frame

    def failing(a, amp=None):
        if a.loop is not None:
            raise OverflowError(34, "Numerical result out of range")
        return original(a, amp)

    monkeypatch.setattr(ex.bode, "frame", failing)
    assert ex.file_loader.load_bytes((EXAMPLES / "bus48_loop.json").read_bytes(), "bus48_loop.json") is None
    assert "Numerical result out of range" in ex.file_loader.error.message
    assert ex.design == design and ex.picker.value == "type3"
    assert ex.opamp_panel.current is None and ex.plant_panel.current is None
    _same_screen(before, ex.view_state())
