"""The s-plane map and the formula panel at a pole-zero cancellation and a lossless pair.

Reference: the balanced twin-T notch at f0 = 1/(2π·R·C) (Franco, "Design with Operational
Amplifiers and Analog Integrated Circuits", 2002; section from memory), where a real zero
and a real pole coincide at -1/(R·C) and the notch zeros sit on the jω axis.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from loopcraft.widgets import Explorer
from loopcraft.widgets._pzmap import _describe_cancelled, inverse_signed_log
from loopcraft.widgets._theme import COLORS
from test_factors import twin_t

F0_HZ = 1 / (2 * math.pi * 26.5e3 * 100e-9)  # 60.06 Hz


@pytest.fixture(scope="module")
def ex() -> Explorer:
    return Explorer(twin_t())


def test_pzmap_draws_the_cancelled_pair_apart(ex):
    pz = ex.pzmap
    assert pz.unit == "Hz"
    # One diamond at σ = -f0 on the real axis, in its own colour.
    assert len(pz.cancelled.x) == 1
    sigma = inverse_signed_log(np.asarray(pz.cancelled.x, dtype=float), pz.x0)[0]
    assert sigma == pytest.approx(-F0_HZ, rel=1e-9)
    assert float(pz.cancelled.y[0]) == 0.0
    assert pz.cancelled.marker == "diamond"
    assert pz.cancelled.colors == [COLORS["cancelled"]]
    assert COLORS["cancelled"] not in (COLORS["pole"], COLORS["zero"])
    # The × and ○ are the reduced function: two zeros on the jω axis at ±f0, two real poles.
    assert list(np.asarray(pz.zeros.x, dtype=float)) == [0.0, 0.0]
    w = np.sort(np.abs(inverse_signed_log(np.asarray(pz.zeros.y, dtype=float), pz.x0)))
    np.testing.assert_allclose(w, [F0_HZ, F0_HZ], rtol=1e-9)
    assert len(pz.poles.x) == 2
    state = ex.view_state()
    np.testing.assert_allclose(state["cancelled_rad_s"], [-2 * math.pi * F0_HZ], rtol=1e-9)
    assert len(state["zeros_rad_s"]) == 2 and len(state["poles_rad_s"]) == 2


def test_pzmap_legend_and_hover_name_the_cancellation(ex):
    pz = ex.pzmap
    title = pz.box.children[0].children[0].value
    assert "pole-zero cancellation" in title and COLORS["cancelled"] in title
    pz.cancelled._handle_custom_msgs(None, {"event": "hover", "point": {"index": 0}})
    text = pz.readout.value
    assert "pole-zero cancellation" in text and "60.06 Hz" in text
    assert "right half plane" not in text  # the cancelled pole is at -1/(R·C)
    zero_text = pz.describe("zero", 0)
    assert "Q = ∞" in zero_text and "e+1" not in zero_text


def test_cancelled_rhp_pole_hover_warns_of_the_hidden_mode():
    # A cancelled right-half-plane pole is an unstable mode the response hides
    # (internal instability; common practice, no source).
    text = _describe_cancelled(complex(2e3, 0.0), 1)
    assert "right half plane" in text and "unstable mode" in text
    assert "jω axis" in _describe_cancelled(complex(0.0, 5e3), 1)


def test_formula_panel_shows_infinite_q_and_the_cancellation(ex):
    table = ex.formula.table.value
    assert "Q = ∞" in table and "on the jω axis" in table
    assert "pole-zero cancellation at 60.06 Hz at these values" in table
    assert "e+1" not in table
    # The cancelled rows (ωz1, ωp2) are not in the table; the rest keep their labels (the notch
    # pair is the first pair of the cubic numerator: ω0z1, numbered apart from the real roots).
    assert ">ω0z1<" in table and ">ωz1<" not in table and ">ωp2<" not in table


def test_moving_off_balance_removes_the_diamond(ex):
    ex.sliders["R3"].value = 13.3e3
    try:
        assert len(ex.pzmap.cancelled.x) == 0
        assert len(ex.view_state()["zeros_rad_s"]) == 3
        assert "cancellation" not in ex.formula.table.value
    finally:
        ex.sliders["R3"].value = 13.25e3
    assert len(ex.pzmap.cancelled.x) == 1
