"""The explorer's tolerance overlay: envelope bands and root clouds."""

import math

import numpy as np
import pytest

import loopcraft as lc
from loopcraft.widgets._pzmap import inverse_signed_log
from loopcraft.widgets._spread import SPREAD_SAMPLES


def lossy(tol=None):
    d = {
        "loopcraft": 1,
        "stage": {"kind": "inverting", "input": "R1", "feedback": "R2 || C1"},
        "values": {"R1": "10k", "R2": "100k", "C1": "1n"},
    }
    if tol:
        d["tolerances"] = tol
    return lc.Design.from_dict(d)


def test_band_brackets_the_closed_form_gain_bounds():
    # DC gain R2/R1 with both resistors uniform within ±5 %: the extremes are
    # 10·(1 ± 0.05)/(1 ∓ 0.05) (ratio of independent bounded factors; from memory).
    ex = lc.Explorer(lossy({"R*": "5%", "C*": "10%"}))
    ex.spread.choice.value = "design"
    st = ex.view_state()["spread"]
    assert st["curve"] == "exact"
    hi_bound = 20 * math.log10(10 * 1.05 / 0.95)
    lo_bound = 20 * math.log10(10 * 0.95 / 1.05)
    assert lo_bound - 1e-9 <= st["mag_lo_db"][0] < 20.0 < st["mag_hi_db"][0] <= hi_bound + 1e-9
    # With 400 samples the extremes come well into the outer half of the range.
    assert st["mag_hi_db"][0] > 20 + 0.5 * (hi_bound - 20)
    # The band contains the exact curve everywhere.
    exact = ex.view_state()["exact_mag_db"]
    assert np.all(st["mag_lo_db"] <= exact + 1e-9) and np.all(exact <= st["mag_hi_db"] + 1e-9)


def test_pole_cloud_spans_the_tolerance_box():
    # Pole at 1/(2π R2 C1) with R2 ±5 %, C1 ±10 %: every sample lies in
    # [1/(2π·1.05·1.1·R2C1), 1/(2π·0.95·0.9·R2C1)] (closed form, from memory).
    ex = lc.Explorer(lossy({"R*": "5%", "C*": "10%"}))
    ex.spread.choice.value = "design"
    x, y = ex.view_state()["spread"]["pole_cloud"]
    assert x.size > 50 and np.allclose(y, 0.0)
    f = -inverse_signed_log(x, ex.pzmap.x0)  # Hz (the map's default unit)
    f0 = 1 / (2 * math.pi * 100e3 * 1e-9)
    assert np.all(f >= f0 / (1.05 * 1.1) * (1 - 1e-9)) and np.all(f <= f0 / (0.95 * 0.9) * (1 + 1e-9))


def test_band_follows_slider_and_uses_the_model():
    ex = lc.Explorer(lossy({"R*": "1%", "C*": "5%"}))
    ex.spread.choice.value = "design"
    ex.sliders["R2"].value = 220e3
    st = ex.view_state()["spread"]
    ref = ex.design.spread(SPREAD_SAMPLES, seed=1, f_hz=ex.f_hz)  # the model's own Monte Carlo
    np.testing.assert_allclose(st["mag_hi_db"], ref.stage_mag_db.max, atol=1e-9)
    np.testing.assert_allclose(st["mag_lo_db"], ref.stage_mag_db.min, atol=1e-9)


def test_missing_tolerances_is_an_error_and_keeps_the_curves():
    ex = lc.Explorer(lossy())
    before = ex.view_state()["exact_mag_db"].copy()
    ex.spread.choice.value = "design"
    assert "no 'tolerances' section" in ex.spread.note.value.replace("&#x27;", "'")
    assert ex.view_state()["spread"] is None
    np.testing.assert_array_equal(ex.view_state()["exact_mag_db"], before)
    ex.spread.choice.value = "r1c5"
    assert ex.view_state()["spread"] is not None
    ex.spread.choice.value = "off"
    assert ex.view_state()["spread"] is None


@pytest.mark.parametrize("name", ["type3", "sallen_key_lowpass"])
def test_stock_spread_on_library_stages(name):
    ex = lc.Explorer(name)
    ex.spread.choice.value = "r5c10"
    st = ex.view_state()["spread"]
    assert np.all(st["mag_lo_db"] <= st["mag_hi_db"])
    assert st["pole_cloud"][0].size > 0
