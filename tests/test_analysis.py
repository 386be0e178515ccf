"""The per-update Analysis that every view reads."""

from pathlib import Path

import numpy as np
import pytest
import scipy.signal as sig

from loopcraft import load
from loopcraft.analysis import Analyzer
from loopcraft.numeric.asymptote import exact_phase_deg
from loopcraft.topologies import topology, topology_names

EX = Path(__file__).resolve().parents[1] / "src" / "loopcraft" / "examples"


@pytest.mark.parametrize("name", topology_names())
def test_exact_curves_match_scipy_for_every_topology(name):
    # scipy.signal.freqs_zpk as the reference for the exact curve of every library stage.
    d = topology(name).design()
    a = d.analyze()
    tr = a.transfer
    _, h = sig.freqs_zpk(tr.zeros, tr.poles, tr.zpk_gain, worN=2 * np.pi * a.f_hz)
    np.testing.assert_allclose(a.exact_mag_db, 20 * np.log10(np.abs(h)), atol=1e-8)
    # Continuous phase equals the wrapped one up to multiples of 360°.
    diff = (a.exact_phase_deg - np.degrees(np.angle(h))) % 360
    assert np.all(np.minimum(diff, 360 - diff) < 1e-7)


def test_loop_curves_equal_the_loop_function():
    a = load(EX / "bus48_loop.json").analyze()
    h = a.loop.response(a.f_hz)
    np.testing.assert_allclose(a.loop_mag_db, 20 * np.log10(np.abs(h)), atol=1e-9)
    np.testing.assert_allclose(a.loop_phase_deg, exact_phase_deg(a.loop.loop, a.f_hz), atol=1e-9)
    act = a.actual.response(a.f_hz)
    np.testing.assert_allclose(a.actual_mag_db, 20 * np.log10(np.abs(act)), atol=1e-9)


def test_view_state_keys_and_grid_stays_fixed():
    d = load(EX / "bus48_loop.json")
    an = Analyzer(d)
    f0 = an.f_hz.copy()
    v = an.update({**d.values, "R2": d.values["R2"] * 3}).view_state()
    assert set(v) >= {
        "f_hz",
        "exact_mag_db",
        "exact_phase_deg",
        "asymptote_mag_db",
        "asymptote_phase_deg",
        "poles_rad_s",
        "zeros_rad_s",
        "actual_mag_db",
        "actual_phase_deg",
        "loop_mag_db",
        "loop_phase_deg",
        "loop_margins",
        "amplifier_loop",
    }
    np.testing.assert_array_equal(v["f_hz"], f0)
    assert len(f0) == 500
    # The band covers every corner and the loop crossover.
    corners = [c.f_hz for c in d.factored().corners] + [x["f_hz"] for x in v["loop_margins"]["crossovers"]]
    assert f0[0] < min(corners) and f0[-1] > max(corners)
