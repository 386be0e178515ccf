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


def _cloud_rad_s(ex) -> np.ndarray:
    """The pole cloud read back from the marks with the unit and x0 the map is drawn with, rad/s."""
    x, y = ex.view_state()["spread"]["pole_cloud"]
    scale = 2 * math.pi if ex.pzmap.unit == "Hz" else 1.0
    x0 = ex.pzmap.x0
    return (inverse_signed_log(x, x0) + 1j * inverse_signed_log(y, x0)) * scale


def test_units_toggle_keeps_the_cloud_in_the_tolerance_box():
    # Pole at ω = 1/(R2·C1) with R2 ±5 %, C1 ±10 %: every sample lies in
    # [ω/(1.05·1.1), ω/(0.95·0.9)] rad/s whatever unit the map is drawn in (closed form, from memory).
    # C1 = 2.2 nF puts the pole at 4545 rad/s = 723 Hz, so the Hz and rad/s maps have different x0.
    ex = lc.Explorer(lc.Design.from_dict({
        "loopcraft": 1,
        "stage": {"kind": "inverting", "input": "R1", "feedback": "R2 || C1"},
        "values": {"R1": "10k", "R2": "100k", "C1": "2.2n"},
        "tolerances": {"R*": "5%", "C*": "10%"},
    }))
    ex.spread.choice.value = "design"
    w0 = 1 / (100e3 * 2.2e-9)
    for unit in ("Hz", "rad/s", "Hz", "rad/s"):
        ex.pzmap.units.value = unit
        assert ex.pzmap.unit == unit
        w = -_cloud_rad_s(ex).real
        assert w.size > 50
        assert np.all(w >= w0 / (1.05 * 1.1) * (1 - 1e-9)), unit
        assert np.all(w <= w0 / (0.95 * 0.9) * (1 + 1e-9)), unit


def _cloud_offsets(ex, marks, cloud) -> list[float]:
    """Per drawn non-origin marker: distance (signed-log units) from it to the median of its cloud points."""
    m = np.column_stack([np.asarray(marks.x, dtype=float), np.asarray(marks.y, dtype=float)])
    m = m[np.hypot(m[:, 0], m[:, 1]) > 0]  # origin roots have no cloud
    c = np.column_stack(cloud)
    nearest = np.argmin(np.linalg.norm(c[:, None, :] - m[None, :, :], axis=2), axis=1)
    out = []
    for i in range(len(m)):
        own = c[nearest == i]
        if own.size:
            out.append(float(np.linalg.norm(np.median(own, axis=0) - m[i])))
    return out


def test_cloud_centres_stay_on_the_roots_when_the_unit_changes(loop_path):
    # The bus converter loop (op-amp and plant). Small independent symmetric tolerances move
    # log ω of each corner by a sum of near-symmetric terms, so the median of each root's cloud
    # sits on the nominal root to within a few hundredths of a decade (first-order
    # propagation; from memory). A unit change must move the clouds with the roots: the map's
    # reference x0 changes by a decade here, which used to leave them 1 - log10(2π) ≈ 0.2
    # decade off.
    ex = lc.Explorer(loop_path)
    ex.spread.choice.value = "r5c10"
    x0 = {}
    for unit in ("Hz", "rad/s", "Hz"):
        ex.pzmap.units.value = unit
        x0[unit] = ex.pzmap.x0
        st = ex.view_state()["spread"]
        for marks, cloud in ((ex.pzmap.poles, st["pole_cloud"]), (ex.pzmap.zeros, st["zero_cloud"])):
            offsets = _cloud_offsets(ex, marks, cloud)
            assert offsets and max(offsets) < 0.06, (unit, offsets)
    assert x0["Hz"] != x0["rad/s"]  # the case that exposed the stale clouds
