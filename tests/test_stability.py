"""Closed-loop stability: pole count, Nyquist cross-check, loop sign, gain range.

Outside references: the Routh-Hurwitz criterion (Ogata, "Modern Control Engineering",
5th ed., 2010, ch. 5: K/(s(s+1)(s+2)) is stable for 0 < K < 6; K/(s+1)³ for K < 8),
the Nyquist criterion worked by hand (Franklin, Powell & Emami-Naeini, "Feedback Control
of Dynamic Systems", 7th ed., 2015, §6.3), and numpy.roots of the closed-loop characteristic
polynomial as an independent root finder.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

import loopcraft as lc
from loopcraft.analysis.margins import loop_margins_factored
from loopcraft.analysis.stability import closed_loop_stability, gain_range
from loopcraft.cli import main
from loopcraft.numeric.factors import Factor, FactoredNumeric, factored_from_tf

W = 2.0 * math.pi


def routh_rhp_count(desc: list[float]) -> int:
    """Sign changes in the first column of the Routh array (no zero pivots in these tests)."""
    c = [float(x) for x in desc]
    n = len(c)
    rows = [c[0::2], c[1::2]]
    width = len(rows[0])
    rows = [r + [0.0] * (width - len(r)) for r in rows]
    for _ in range(n - 2):
        a, b = rows[-2], rows[-1]
        assert b[0] != 0.0, "zero pivot: not used in these tests"
        new = [(b[0] * a[j + 1] - a[0] * b[j + 1]) / b[0] for j in range(width - 1)] + [0.0]
        rows.append(new)
    first = [r[0] for r in rows[:n]]
    return sum(1 for x, y in zip(first, first[1:], strict=False) if x * y < 0)


def loop_of(k: float, origin: int = 0, poles_rad_s=(), zeros_rad_s=(), rhp_poles=(), rhp_zeros=(), pairs=()):
    fs = [Factor("pole", 1, p) for p in poles_rad_s] + [Factor("zero", 1, z) for z in zeros_rad_s]
    fs += [Factor("pole", 1, p, rhp=True) for p in rhp_poles] + [Factor("zero", 1, z, rhp=True) for z in rhp_zeros]
    fs += [Factor(role, 2, w0, q=q, rhp=rhp) for role, w0, q, rhp in pairs]
    return FactoredNumeric(k, origin, tuple(fs))


def stability_of(fn: FactoredNumeric):
    m = loop_margins_factored(fn)
    return closed_loop_stability(fn, [(-g.gain_margin_db, g.f_hz) for g in m.gain_margins])


# --------------------------------------------------------------------------- Routh-Hurwitz


@pytest.mark.parametrize("k", [0.5, 3.0, 5.9, 6.1, 10.0, 100.0])
def test_third_order_type1_matches_routh(k):
    # L = K/(s(s+1)(s+2)); in normalized form K/2 · 1/(s (1+s)(1+s/2)).
    # Q = s³ + 3s² + 2s + K: stable for 0 < K < 6 (Ogata 2010, ch. 5, Routh example).
    st = stability_of(loop_of(k / 2.0, -1, (1.0, 2.0)))
    expected = routh_rhp_count([1.0, 3.0, 2.0, k])
    assert st.closed_loop_rhp_poles == expected
    assert st.nyquist_rhp_poles == expected
    assert st.stable == (k < 6.0)
    if st.stable:
        # the gain may rise by the factor 6/K exactly (the Routh limit)
        assert st.gain_range.increase_margin_db == pytest.approx(20 * math.log10(6.0 / k), abs=1e-6)
        assert st.gain_range.reduction_margin_db is None


@pytest.mark.parametrize("k", [1.0, 7.9, 8.1, 30.0])
def test_triple_pole_matches_routh(k):
    # L = K/(s+1)³: Q = s³ + 3s² + 3s + 1 + K, stable for K < 8 (Ogata 2010, ch. 5).
    st = stability_of(loop_of(k, 0, (1.0, 1.0, 1.0)))
    assert st.closed_loop_rhp_poles == routh_rhp_count([1.0, 3.0, 3.0, 1.0 + k])
    assert st.stable == (k < 8.0)
    assert st.methods_agree


@pytest.mark.parametrize("coeffs", [
    [1.0, 2.0, 3.0, 4.0, 5.0],          # Ogata 2010, ch. 5: two sign changes, two RHP roots
    [1.0, 6.0, 11.0, 6.0, 200.0],
    [1.0, 10.0, 35.0, 50.0, 24.0],      # (s+1)(s+2)(s+3)(s+4): stable
    [2.0, 1.0, 5.0, 3.0, 4.0, 1.0],
])
def test_textbook_polynomials_as_loops(coeffs):
    # Put Q = D + N with D = s⁴ + a s³ (… its leading part) and N the remainder as a loop gain.
    c = np.array(coeffs, dtype=float)
    n = len(c) - 1
    d_desc = np.zeros(n + 1)
    d_desc[:2] = c[:2]  # D = c0 s^n + c1 s^(n-1) = s^(n-1)(c0 s + c1)
    n_desc = c - d_desc  # N: degree n-2 remainder
    num = n_desc[2:]
    # L = N/D in factored form
    fn = factored_from_tf(num, d_desc[: 2])
    fn = FactoredNumeric(fn.gain, fn.origin_order - (n - 1), fn.factors)
    st = closed_loop_stability(fn)
    assert st.closed_loop_rhp_poles == routh_rhp_count(list(c))
    assert st.nyquist_rhp_poles == routh_rhp_count(list(c))


# --------------------------------------------------------------------------- Nyquist by hand


def test_nyquist_open_loop_unstable_pole_needs_an_encirclement():
    # L = K/(s - 1): P = 1. K = 2: one counter-clockwise encirclement of -1 (N = -1), Z = 0;
    # K = 0.5: no encirclement, Z = 1 (Franklin, Powell & Emami-Naeini 2015, §6.3, worked by hand).
    st = stability_of(loop_of(-2.0, 0, rhp_poles=(1.0,)))   # K/(s-1) = -K/(1 - s)
    assert st.open_loop_rhp_poles == 1 and st.nyquist_encirclements == -1 and st.stable
    assert not st.positive_feedback  # the negative sign is what stabilises an open-loop RHP pole
    st = stability_of(loop_of(-0.5, 0, rhp_poles=(1.0,)))
    assert st.nyquist_encirclements == 0 and st.closed_loop_rhp_poles == 1 and not st.stable
    # gain range of the stable case: k·2 > 1 needed, so the gain may fall by 20·log10(2)
    st = stability_of(loop_of(-2.0, 0, rhp_poles=(1.0,)))
    assert st.gain_range.reduction_margin_db == pytest.approx(20 * math.log10(2.0), abs=1e-6)


def test_nyquist_two_encirclements():
    # L = 10/(s+1)³ encircles -1 twice clockwise (|L| = 10/8 > 1 where the phase is -180°): Z = 2.
    st = stability_of(loop_of(10.0, 0, (1.0, 1.0, 1.0)))
    assert st.nyquist_encirclements == 2 and st.closed_loop_rhp_poles == 2


def test_conditionally_stable_loop_reports_both_gain_margins():
    # L = K (1 + s)² / (s³ (1 + s/30)²): stable only between two gains (conditionally stable).
    # The reported range is checked against a brute-force sweep of numpy roots of D + kN.
    fn = loop_of(3.0, -3, (30.0, 30.0), (1.0, 1.0))
    st = stability_of(fn)
    assert st.stable
    g = st.gain_range
    assert g.increase_margin_db is not None and g.reduction_margin_db is not None
    num, den = fn.tf()

    def stable_at(k):
        q = np.polyadd(den, k * num)
        return bool(np.all(np.roots(q).real < 0))

    ks = np.logspace(-3, 3, 3001)
    ok = np.array([stable_at(k) for k in ks])
    i1 = np.argmin(np.abs(ks - 1.0))
    assert ok[i1]
    lo = i1
    while lo > 0 and ok[lo - 1]:
        lo -= 1
    hi = i1
    while hi < ks.size - 1 and ok[hi + 1]:
        hi += 1
    step = 6.0 / 3000 * 20  # dB per grid step
    assert -20 * math.log10(ks[lo]) == pytest.approx(g.reduction_margin_db, abs=step)
    assert 20 * math.log10(ks[hi]) == pytest.approx(g.increase_margin_db, abs=step)


# --------------------------------------------------------------------------- cancellations, sign


def test_cancelled_rhp_pair_is_a_hidden_unstable_mode():
    # A right-half-plane pole of the plant cancelled by a right-half-plane zero of the stage:
    # the loop looks benign but the mode is there whatever the gain.
    fn = loop_of(10.0, -1, (1e3,), rhp_poles=(50.0,), rhp_zeros=(50.0,))
    st = stability_of(fn)
    assert not st.stable and st.verdict == "unstable" and st.hidden_modes_rad_s.size == 1


def test_cancelled_lhp_pair_is_harmless():
    fn = loop_of(10.0, -1, (1e3, 50.0), (50.0,))
    st = stability_of(fn)
    assert st.stable and st.cancelled_rad_s.size == 1


def test_positive_feedback_is_named():
    st = stability_of(loop_of(-5.0, 0, (1e3, 1e4)))
    assert st.positive_feedback and not st.stable and "positive feedback" in st.headline()
    st = stability_of(loop_of(-0.5, 0, (1e3,)))  # positive feedback with gain below one is stable
    assert st.positive_feedback and st.stable


def test_axis_poles_are_marginal():
    # K/s² with no lead: closed-loop poles at ±j√K on the axis.
    st = closed_loop_stability(loop_of(4.0, -2))
    assert st.verdict == "marginal" and not st.stable


def test_gain_range_without_candidates_is_unlimited():
    g = gain_range(loop_of(1e3, -1, (1e5,)))
    assert g.increase_margin_db is None and g.reduction_margin_db is None


# --------------------------------------------------------------------------- property test


def _random_loop(rng: np.random.Generator) -> FactoredNumeric:
    fs = []
    for _ in range(rng.integers(0, 4)):
        fs.append(Factor("pole", 1, 10 ** rng.uniform(1, 4), rhp=bool(rng.random() < 0.15)))
    for _ in range(rng.integers(0, 3)):
        fs.append(Factor("zero", 1, 10 ** rng.uniform(1, 4), rhp=bool(rng.random() < 0.2)))
    for _ in range(rng.integers(0, 2)):
        fs.append(Factor(str(rng.choice(["pole", "zero"])), 2, 10 ** rng.uniform(1, 4),
                         q=10 ** rng.uniform(-0.5, 1.2), rhp=bool(rng.random() < 0.1)))
    origin = int(rng.integers(-2, 2))
    k = float(10 ** rng.uniform(-1, 4)) * (1 if rng.random() < 0.85 else -1)
    # put the gain near crossover in the band of the corners
    return FactoredNumeric(k * 10 ** (-origin * 2.5) if origin < 0 else k, origin, tuple(fs))


def test_random_loops_against_numpy_roots():
    rng = np.random.default_rng(20261202)
    checked = uncertain = 0
    for _ in range(2500):
        fn = _random_loop(rng)
        num, den = fn.tf()
        q = np.polyadd(den, num)
        q = q[np.argmax(q != 0):]
        ref = np.roots(q / np.max(np.abs(q)))
        if ref.size and np.min(np.abs(ref.real) / np.maximum(np.abs(ref), 1e-300)) < 1e-5:
            continue  # too close to the axis for numpy.roots to be a reference
        if np.any(~np.isfinite(ref)):
            continue
        st = closed_loop_stability(fn)
        ref_rhp = int(np.sum(ref.real > 0))
        checked += 1
        if st.verdict == "uncertain":
            uncertain += 1
            assert not st.stable
            continue
        # never stable when the independent reference says unstable: the dangerous direction
        assert st.stable == (ref_rhp == 0), (fn, ref)
        assert st.closed_loop_rhp_poles == ref_rhp, (fn, ref)
        assert st.nyquist_rhp_poles == ref_rhp, (fn, ref)
    assert checked > 2000 and uncertain <= checked // 100


# --------------------------------------------------------------------------- the reported cases

BASE = {"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "C1"},
        "values": {"R1": "10k", "C1": "10n"}}


def _design(**kw) -> lc.Design:
    return lc.Design.from_dict({**BASE, **kw})


def test_wrapped_phase_no_longer_hides_instability():
    d = _design(plant={"kind": "general", "gain": 424.7433, "poles_hz": [1e3] * 4},
                spec={"phase_margin_min_deg": 30})
    lp = d.loop()
    assert lp.stability.closed_loop_rhp_poles == 2 and not lp.stability.stable
    # continuous phase at the crossover is about -387°: the margin is -207°, not +153°
    assert lp.margins.phase_margin_deg == pytest.approx(-207.4, abs=0.2)
    rep = d.check()
    assert not rep.passed and {i.name for i in rep.failures} >= {"stable", "phase_margin_min_deg"}


def test_six_poles_and_an_integrator():
    d = _design(plant={"kind": "general", "gain": 3, "poles_hz": [1e3] * 6})
    assert not d.loop().stability.stable


def test_open_loop_rhp_pole_is_counted():
    d = _design(plant={"kind": "general", "gain": 2e-4, "origin_order": 1, "rhp_poles_hz": [1e3],
                       "poles_hz": [2e3, 2e3]}, spec={"phase_margin_min_deg": 30})
    st = d.loop().stability
    assert st.open_loop_rhp_poles == 1 and st.closed_loop_rhp_poles == 1 and not st.stable
    real = [r for r in st.closed_loop_poles_rad_s if r.real > 0]
    assert real[0].real / W == pytest.approx(1.6e3, rel=0.05)
    assert not d.check().passed


def _sallen_key_loop(**extra) -> lc.Design:
    from loopcraft.topologies import topology

    d = topology("sallen_key_lowpass").to_dict()
    d["values"]["C2"] = "2n2"
    d["opamp"] = {"model": "two_pole", "a0_db": 100, "gbw_hz": "10M", "second_pole_hz": "30M"}
    d["plant"] = {"kind": "buck_vm", "vin_v": 48, "l_h": "10u", "c_f": "100u", "esr_ohm": "5m",
                  "load_ohm": 1.2, "ramp_v": 2}
    d["feedback_gain"] = 0.2083
    d["spec"] = {"phase_margin_min_deg": 45}
    d.update(extra)
    return lc.Design.from_dict(d)


def test_positive_feedback_design_fails():
    d = _sallen_key_loop()
    st = d.loop().stability
    assert st.positive_feedback and not st.stable
    assert st.low_frequency_sign == -1
    assert not d.check().passed


def test_stage_sign_key_round_trips_and_flips_the_loop():
    d = _sallen_key_loop(stage_sign=1)
    assert d.loop_stage_sign == 1 and d.to_dict()["stage_sign"] == 1
    assert d.loop().loop.gain > 0
    assert lc.Design.from_dict(d.to_dict()) == d
    with pytest.raises(lc.DesignFileError, match="stage_sign"):
        _sallen_key_loop(stage_sign=2)
    with pytest.raises(lc.DesignFileError, match="stage_sign"):
        _sallen_key_loop(stage_sign=True)


def test_stable_example_passes_and_json_carries_the_verdict(capsys, tmp_path: Path):
    ex = Path(lc.__file__).parent / "examples" / "bus48_loop.json"
    assert main(["analyze", str(ex), "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    loop = doc["loop"]
    assert loop["stable"] is True and loop["closed_loop_rhp_poles"] == 0 and loop["open_loop_rhp_poles"] == 0
    assert all(len(p) == 2 for p in loop["closed_loop_poles_rad_s"])
    assert loop["nyquist"]["agrees"] is True
    # the unstable case says so first in the text output
    f = tmp_path / "bad.json"
    f.write_text(json.dumps({**BASE, "plant": {"kind": "general", "gain": 424.7433, "poles_hz": [1e3] * 4}}))
    assert main(["analyze", str(f)]) == 0
    out = capsys.readouterr().out
    assert "loop: UNSTABLE" in out and "not a margin" in out
    assert main(["analyze", str(f), "--json"]) == 0
    loop = json.loads(capsys.readouterr().out)["loop"]
    assert loop["stable"] is False and loop["closed_loop_rhp_poles"] == 2
    assert loop["governing_phase_margin_deg"] is None


def test_record_of_an_unstable_loop_says_so_first():
    d = _design(plant={"kind": "general", "gain": 424.7433, "poles_hz": [1e3] * 4},
                title="Invented demo: an integrator around four real poles")
    rec = d.record(notes="deliberately unstable, for the test")
    page, md = rec.to_html(), rec.to_markdown()
    for text in (page, md):
        assert "UNSTABLE" in text and "not a margin" in text
        assert text.index("UNSTABLE") < text.index("not a margin")
    assert "phase margin -207" not in page  # never labelled a margin


def test_explorer_shows_the_verdict_first():
    pytest.importorskip("ipywidgets")
    ex = lc.Explorer(_design(plant={"kind": "general", "gain": 424.7433, "poles_hz": [1e3] * 4}))
    vs = ex.view_state()
    assert vs["loop_verdict"] == "unstable"
    html_text = ex.bode.margins.value
    assert html_text.index("UNSTABLE") < html_text.index("Loop gain") and "not a margin" in html_text
    assert "phase margin" not in html_text.split("Op-amp loop")[0]
