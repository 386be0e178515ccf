import json
import math
from dataclasses import replace

import mpmath
import numpy as np
import pytest
import scipy.signal as sig

import loopcraft as lc
from conftest import EXAMPLES
from loopcraft.analysis.tolerance import (
    evaluate_batch,
    monte_carlo,
    parse_tolerances,
    tolerances_for,
    validate_tolerances,
    worst_case,
)
from loopcraft.errors import AnalysisError, DesignFileError


def rc_design(tol, r1="10k", r2="10k", c1="10n"):
    """Inverting lossy integrator: H = -(R2/R1)/(1 + s·R2·C1), one pole at 1/(2π·R2·C1)."""
    return lc.Design.from_dict({
        "loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "R2 || C1"},
        "values": {"R1": r1, "R2": r2, "C1": c1}, "tolerances": tol,
    })


def loop_design(tol=None):
    d = lc.load(EXAMPLES / "bus48_loop.json")
    return d.with_sections(tolerances=tol or {"R*": "1%", "C*": "5%", "gbw": "30%"})


# --------------------------------------------------------------------------- reproducibility


def test_same_seed_same_arrays_different_seed_different():
    d = loop_design()
    a = monte_carlo(d, 500, seed=11)
    b = monte_carlo(d, 500, seed=11)
    c = monte_carlo(d, 500, seed=12)
    for k in a.values:
        assert np.array_equal(a.values[k], b.values[k])
        assert not np.array_equal(a.values[k], c.values[k])
    for k in a.corners:
        assert np.array_equal(a.corners[k], b.corners[k])
    assert np.array_equal(a.phase_margin_deg, b.phase_margin_deg)
    assert np.array_equal(a.stage_mag_db.p50, b.stage_mag_db.p50)
    assert not np.array_equal(a.phase_margin_deg, c.phase_margin_deg)
    # The result does not depend on the thread count.
    d1 = monte_carlo(d, 500, seed=11, workers=1)
    assert np.array_equal(a.crossover_hz, d1.crossover_hz)
    assert np.array_equal(a.loop_phase_deg.max, d1.loop_phase_deg.max)


# --------------------------------------------------------------------------- single RC corner


def _inv_moment(k: int, t: float) -> float:
    """E[(1 + t·U)^-k] for U uniform on [-1, 1] (elementary integral, derived here)."""
    if k == 1:
        return math.atanh(t) / t
    return ((1 - t) ** (1 - k) - (1 + t) ** (1 - k)) / (2 * t * (k - 1))


def test_rc_corner_uniform_bounds_mean_and_std():
    # f = f0 / (X·Y), X = 1 + t·U1, Y = 1 + t·U2 independent uniforms, so E[f^k] = f0^k·E[X^-k]^2.
    # The closed-form moments are checked against mpmath quadrature of the exact double integral.
    t, n = 0.05, 10_000
    d = rc_design({"R2": "5%", "C1": "5%"})
    sp = monte_carlo(d, n, seed=3)
    f0 = 1 / (2 * math.pi * 10e3 * 10e-9)
    f = sp.corners["ωp1"]
    assert sp.nominal["ωp1"] == pytest.approx(f0, rel=1e-12)
    mom = [f0**k * _inv_moment(k, t) ** 2 for k in range(1, 5)]
    mpmath.mp.dps = 30
    quad2 = mpmath.quad(lambda x, y: 1 / ((1 + t * x) * (1 + t * y)) ** 2, [-1, 1], [-1, 1]) / 4
    assert float(quad2) * f0**2 == pytest.approx(mom[1], rel=1e-12)
    mean = mom[0]
    var = mom[1] - mean**2
    mu4 = mom[3] - 4 * mean * mom[2] + 6 * mean**2 * mom[1] - 3 * mean**4
    se_mean = math.sqrt(var / n)
    # Large-sample standard error of the sample standard deviation: sqrt((μ4 - σ^4)/(4σ²n))
    # (Cramér, "Mathematical Methods of Statistics", 1946, §27.7; from memory).
    se_std = math.sqrt((mu4 - var**2) / (4 * var * n))
    assert abs(f.mean() - mean) < 4 * se_mean
    assert abs(f.std(ddof=1) - math.sqrt(var)) < 4 * se_std
    # Bounds: the extreme corners of the R, C box. Within the box always; near its ends because the
    # chance that no sample lands within δ of the corner is exp(-n(1-t)²δ²/(8t²)) (the corner triangle),
    # below e^-20 for δ = 0.13·t/(1 - t).
    lo, hi = f0 / (1 + t) ** 2, f0 / (1 - t) ** 2
    delta = 0.13 * t / (1 - t)
    assert lo * (1 - 1e-12) <= f.min() <= lo * (1 + delta)
    assert hi * (1 - delta) <= f.max() <= hi * (1 + 1e-12)


def test_rc_corner_normal_matches_lognormal_prediction():
    # normal, tolerance = 3σ: σ = 1 % each. ln f = ln f0 - ln R - ln C, so by the delta method
    # std(ln f) ≈ sqrt(σR² + σC²) (common practice, no source); the O(σ²) bias is ~1e-4 relative.
    n, sigma = 10_000, 0.01
    d = rc_design({"R2": "3%", "C1": "3%", "distribution": "normal"})
    sp = monte_carlo(d, n, seed=5)
    ln_f = np.log(sp.corners["ωp1"])
    pred = math.sqrt(2) * sigma
    se = pred / math.sqrt(2 * n)  # standard error of a sample std of near-normal data
    assert abs(ln_f.std(ddof=1) - pred) < 4 * se
    # The draws themselves: relative deviation has std σ.
    dev = sp.values["R2"] / 10e3 - 1
    assert abs(dev.std(ddof=1) - sigma) < 4 * sigma / math.sqrt(2 * n)
    assert sp.distribution == "normal"


# --------------------------------------------------------------------------- vectorized vs scalar


def _type3_zpk(v):
    # H = -Zf/Zi with Zf = (R2 + 1/sC1) || 1/sC2, Zi = R1 || (R3 + 1/sC3) (impedance algebra,
    # common practice): zeros 1/(R2 C1), 1/((R1 + R3) C3); poles 0, (C1 + C2)/(R2 C1 C2), 1/(R3 C3);
    # leading gain -(R1 + R3)/(R1 R3 C2).
    r1, r2, r3, c1, c2, c3 = (v[k] for k in ("R1", "R2", "R3", "C1", "C2", "C3"))
    z = [-1 / (r2 * c1), -1 / ((r1 + r3) * c3)]
    p = [0.0, -(c1 + c2) / (r2 * c1 * c2), -1 / (r3 * c3)]
    return z, p, -(r1 + r3) / (r1 * r3 * c2)


def test_vectorized_matches_scalar_path_and_scipy():
    d = loop_design()
    sp = monte_carlo(d, 300, seed=9)
    idx = [0, 17, 211]
    parts = {k: v[idx] for k, v in sp.values.items() if k != "gbw_hz"}
    gbw = sp.values["gbw_hz"][idx]
    b = evaluate_batch(d, parts, sp.f_hz, gbw_hz=gbw)
    f = sp.f_hz
    w = 2 * np.pi * f
    op = d.opamp
    for n, i in enumerate(idx):
        v = {k: float(x[i]) for k, x in sp.values.items() if k != "gbw_hz"}
        # scipy.signal.freqs_zpk of the ideal stage.
        _, h = sig.freqs_zpk(*_type3_zpk(v), worN=w)
        np.testing.assert_allclose(b.ideal[n], h, rtol=1e-9)
        # With the op-amp: H_act = H·A/(A + 1 - H) for an inverting stage, Gn = 1 - H
        # (Franco, "Design with Operational Amplifiers and Analog Integrated Circuits", 3rd ed., 2002, ch. 6).
        wa = 2 * np.pi * gbw[n] / op.a0
        w2 = 2 * np.pi * op.second_pole_hz
        _, a = sig.freqs_zpk([], [-wa, -w2], op.a0 * wa * w2, worN=w)
        h_act = h * a / (a + 1 - h)
        np.testing.assert_allclose(b.stage[n], h_act, rtol=1e-9)
        # Loop: L = P·k_fb·(-H_act) (loopcraft.analysis.loop sign convention).
        np.testing.assert_allclose(b.loop[n], -d.plant.response(f) * d.feedback_gain * h_act, rtol=1e-9)
        # The scalar fast path, sample by sample.
        dd = d.with_values(v).with_sections(opamp=replace(op, gbw_hz=float(gbw[n])))
        an = dd.analyze(f)
        np.testing.assert_allclose(b.stage_mag_db[n], an.actual_mag_db, atol=1e-9)
        np.testing.assert_allclose(b.stage_phase_deg[n], an.actual_phase_deg, atol=1e-9)
        np.testing.assert_allclose(b.loop_mag_db[n], an.loop_mag_db, atol=1e-9)
        np.testing.assert_allclose(b.loop_phase_deg[n], an.loop_phase_deg, atol=1e-9)
        m = an.loop.margins
        assert b.crossover_hz[n] == pytest.approx(m.crossovers[-1].f_hz, rel=1e-9)
        assert b.phase_margin_deg[n] == pytest.approx(m.phase_margin_deg, abs=1e-8)
        assert b.gain_margin_db[n] == pytest.approx(m.gain_margin_db, abs=1e-8)
        assert b.n_crossovers[n] == len(m.crossovers)
        mine = sorted(b.corners[k][n] for k in b.corners if k.startswith("ω"))
        theirs = sorted(c.f_hz for c in dd.factored().corners)
        np.testing.assert_allclose(mine, theirs, rtol=1e-9)
        # The same samples inside the Monte Carlo run.
        assert sp.phase_margin_deg[i] == pytest.approx(m.phase_margin_deg, abs=1e-8)


def test_second_order_and_numeric_factors_match_scalar_path():
    # Unity-gain Sallen-Key (ω0, Q in closed form) and a cubic factor (batched companion eigenvalues).
    sk = lc.Design.from_dict({
        "loopcraft": 1,
        "stage": {"kind": "circuit",
                  "elements": [["R1", "in", "a"], ["R2", "a", "b"], ["C1", "a", "out"], ["C2", "b", "gnd"]],
                  "opamps": [{"plus": "b", "minus": "out", "out": "out"}], "input": "in", "output": "out"},
        "values": {"R1": "10k", "R2": "22k", "C1": "22n", "C2": "4.7n"},
    })
    cubic = lc.Design.from_dict({
        "loopcraft": 1,
        "stage": {"kind": "inverting", "input": "R1 + C1", "feedback": "R2 || (C2 + (R3 || (C3 + L1)))"},
        "values": {"R1": 10.0, "C1": 1e-6, "R2": 10e6, "C2": 1e-12, "R3": 1e3, "C3": 10e-9, "L1": 1e-3},
    })
    op = lc.load(EXAMPLES / "bus48_loop.json").opamp
    for d in (sk, sk.with_sections(opamp=op), cubic):
        sp = monte_carlo(d, 20, seed=4, tolerances={"R*": "5%", "C*": "10%"})
        for i in (0, 7):
            v = {k: float(x[i]) for k, x in sp.values.items()}
            b = evaluate_batch(d, v, sp.f_hz)
            an = d.with_values(v).analyze(sp.f_hz)
            mag = an.actual_mag_db if an.actual is not None else an.exact_mag_db
            ph = an.actual_phase_deg if an.actual is not None else an.exact_phase_deg
            np.testing.assert_allclose(b.stage_mag_db[0], mag, atol=1e-9)
            np.testing.assert_allclose(b.stage_phase_deg[0], ph, atol=1e-9)
            rows = d.with_values(v).factored().corners
            np.testing.assert_allclose(sorted(b.corners[k][0] for k in b.corners if k.startswith("ω")),
                                       sorted(c.f_hz for c in rows), rtol=1e-9)
            qs = sorted(c.q for c in rows if c.order == 2)
            np.testing.assert_allclose(sorted(b.corners[k][0] for k in b.corners if k.startswith("Q")), qs, rtol=1e-9)
    # Sallen-Key: ω0 = 1/sqrt(R1 R2 C1 C2), Q = sqrt(R1 R2 C1 C2)/(C2 (R1 + R2))
    # (Schaumann & Van Valkenburg, "Design of Analog Filters", 2001, ch. 4; from memory).
    sp = monte_carlo(sk, 200, seed=8, tolerances={"R*": "5%", "C*": "10%"})
    v = sp.values
    rc = v["R1"] * v["R2"] * v["C1"] * v["C2"]
    np.testing.assert_allclose(sp.corners["ω0p1"], 1 / (2 * np.pi * np.sqrt(rc)), rtol=1e-12)
    np.testing.assert_allclose(sp.corners["Qp1"], np.sqrt(rc) / (v["C2"] * (v["R1"] + v["R2"])), rtol=1e-12)


def test_integrator_with_pole_plant_margins_closed_form():
    # L = K/(s(1 + s/p)), K = G/(R1 C1): ωc² = (p²/2)(sqrt(1 + 4K²/p²) - 1), PM = 90° - atan(ωc/p)
    # (Ogata, "Modern Control Engineering", 5th ed., 2010, frequency-response analysis); the phase only
    # approaches -180°, so there is no phase crossover (gain margin unbounded: +inf here).
    g, fp = 5.0, 10e3
    d = lc.Design.from_dict({
        "loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "C1"},
        "values": {"R1": "10k", "C1": "10n"}, "plant": {"kind": "general", "gain": g, "poles_hz": [fp]},
    })
    r1 = np.array([6e3, 10e3, 15e3, 22e3])
    b = evaluate_batch(d, {"R1": r1})
    p = 2 * np.pi * fp
    k = g / (r1 * 10e-9)
    wc = np.sqrt(p**2 / 2 * (np.sqrt(1 + 4 * k**2 / p**2) - 1))
    np.testing.assert_allclose(b.crossover_hz, wc / (2 * np.pi), rtol=1e-10)
    np.testing.assert_allclose(b.phase_margin_deg, 90 - np.degrees(np.arctan(wc / p)), atol=1e-9)
    assert np.all(np.isinf(b.gain_margin_db)) and np.all(b.n_crossovers == 1)


# --------------------------------------------------------------------------- envelopes and summaries


def test_envelopes_are_numpy_percentiles_of_the_samples():
    d = loop_design()
    sp = monte_carlo(d, 400, seed=2)
    parts = {k: v for k, v in sp.values.items() if k != "gbw_hz"}
    b = evaluate_batch(d, parts, sp.f_hz, gbw_hz=sp.values["gbw_hz"])
    for env, arr in ((sp.stage_mag_db, b.stage_mag_db), (sp.stage_phase_deg, b.stage_phase_deg),
                     (sp.loop_mag_db, b.loop_mag_db), (sp.loop_phase_deg, b.loop_phase_deg)):
        p1, p50, p99 = np.percentile(arr, [1, 50, 99], axis=0)
        np.testing.assert_allclose(env.p1, p1, atol=1e-9)
        np.testing.assert_allclose(env.p50, p50, atol=1e-9)
        np.testing.assert_allclose(env.p99, p99, atol=1e-9)
        np.testing.assert_allclose(env.min, arr.min(axis=0), atol=1e-9)
        np.testing.assert_allclose(env.max, arr.max(axis=0), atol=1e-9)
    # The nominal curves lie inside the envelopes.
    an = d.analyze(sp.f_hz)
    assert np.all(sp.stage_mag_db.min <= an.actual_mag_db + 1e-9)
    assert np.all(an.actual_mag_db <= sp.stage_mag_db.max + 1e-9)
    assert np.all(sp.loop_phase_deg.min <= an.loop_phase_deg + 1e-9)
    assert np.all(an.loop_phase_deg <= sp.loop_phase_deg.max + 1e-9)
    # Labels and nominal values as in the factored form.
    counts = {"zero": 0, "pole": 0}
    for c in d.factored().corners:
        counts[c.role] += 1
        label = f"ω{'z' if c.role == 'zero' else 'p'}{counts[c.role]}"
        assert sp.nominal[label] == pytest.approx(c.f_hz, rel=1e-12)
    assert sp.nominal["phase_margin_deg"] == pytest.approx(an.loop.margins.phase_margin_deg, abs=1e-8)


def test_to_dict_is_json_ready():
    d = loop_design()
    sp = monte_carlo(d, 200, seed=1, spec={"phase_margin_min_deg": 58.5})
    out = sp.to_dict(envelopes=True)
    text = json.dumps(out, allow_nan=False)
    back = json.loads(text)
    q = back["quantities"]["phase_margin_deg"]
    assert q["min"] <= q["p1"] <= q["p50"] <= q["p99"] <= q["max"]
    assert q["mean"] == pytest.approx(float(np.mean(sp.phase_margin_deg)))
    assert back["yield"] == pytest.approx(float(np.mean(sp.phase_margin_deg >= 58.5)))
    assert back["tolerances"] == {"R1": 0.01, "R3": 0.01, "C3": 0.05, "R2": 0.01, "C1": 0.05, "C2": 0.05,
                                  "gbw": 0.3}
    assert len(back["envelopes"]["loop_mag_db"]["p50"]) == sp.f_hz.size


# --------------------------------------------------------------------------- worst case


def test_worst_case_rc_corners_are_the_analytic_box_corners():
    t = 0.05
    d = rc_design({"R*": "5%", "C1": "5%"})
    wc = worst_case(d)
    f0 = 1 / (2 * math.pi * 10e3 * 10e-9)
    e = wc.extremes["ωp1"]
    assert wc.method == "corners" and wc.n_evaluated == 8
    assert e.max == pytest.approx(f0 / (1 - t) ** 2, rel=1e-12)
    assert e.min == pytest.approx(f0 / (1 + t) ** 2, rel=1e-12)
    assert e.max_signs["R2"] == -1 and e.max_signs["C1"] == -1
    assert e.max_values["R2"] == pytest.approx(10e3 * (1 - t))
    # DC gain R2/R1: largest with R2 high and R1 low.
    g = wc.extremes["dc_gain_db"]
    assert g.max == pytest.approx(20 * math.log10((1 + t) / (1 - t)), abs=1e-12)
    assert g.max_signs == {"R1": -1, "R2": 1, "C1": g.max_signs["C1"]}


def test_worst_case_brackets_every_monte_carlo_sample():
    # Vertices bound quantities that are monotonic in each part over the box: every corner here is a
    # product of powers or a sum-ratio of parts, and |H| = (R2/R1)/sqrt(1 + (ωR2C1)²) of the RC stage
    # is monotonic in R1, R2 and C1 (derivative of R2/sqrt(1 + ω²R2²C1²) is (1 + x²)^-1.5 > 0).
    for d in (loop_design(), rc_design({"R*": "2%", "C1": "10%"})):
        wc = worst_case(d)
        sp = monte_carlo(d, 4000, seed=6)
        for k, v in sp.corners.items():
            e = wc.extremes[k]
            assert e.min * (1 - 1e-12) <= v.min() and v.max() <= e.max * (1 + 1e-12), k
        assert wc.extremes["dc_gain_db"].min - 1e-9 <= sp.dc_gain_db.min()
        assert sp.dc_gain_db.max() <= wc.extremes["dc_gain_db"].max + 1e-9
    # The RC stage (the last design): the magnitude envelope lies within the corner extremes.
    assert np.all(wc.stage_mag_db_min <= sp.stage_mag_db.min + 1e-9)
    assert np.all(sp.stage_mag_db.max <= wc.stage_mag_db_max + 1e-9)
    assert "WorstCase(method='corners', vertices=8" in repr(wc)


def test_corner_labels_follow_their_formulas_in_spread_and_worst_case():
    # bus48_loop's poles (C1 + C2)/(R2·C1·C2) = 182 kHz and 1/(R3·C3) = 177 kHz cross within C ±5 %;
    # each label keeps its formula (Venable, "The K Factor", 1983; from memory) in every sample,
    # and the worst case of ωp2 = 1/(2π·R3·C3) sits at the box vertex R3, C3 both low (or both high).
    d = loop_design({"R*": "1%", "C*": "5%"})
    sp = monte_carlo(d, 2000, seed=3)
    v = sp.values
    p1 = (v["C1"] + v["C2"]) / (2 * np.pi * v["R2"] * v["C1"] * v["C2"])
    p2 = 1 / (2 * np.pi * v["R3"] * v["C3"])
    np.testing.assert_allclose(sp.corners["ωp1"], p1, rtol=1e-12)
    np.testing.assert_allclose(sp.corners["ωp2"], p2, rtol=1e-12)
    assert 0.05 < np.mean(p1 < p2) < 0.95  # not vacuous: the two poles swap in many samples
    e = worst_case(d).extremes["ωp2"]
    r3, c3 = d.values["R3"], d.values["C3"]
    assert e.max == pytest.approx(1 / (2 * math.pi * r3 * 0.99 * c3 * 0.95), rel=1e-12)
    assert e.min == pytest.approx(1 / (2 * math.pi * r3 * 1.01 * c3 * 1.05), rel=1e-12)


def test_worst_case_sensitivity_vertex_for_many_parts():
    # 14 toleranced parts (> 12): one sensitivity-guided vertex pair per quantity.
    # ωp1 = 1/((R8 + R9 + R10)(C1 + C2 + C3 + C4)), K = (R8 + R9 + R10)/(R1 + … + R7).
    t = 0.02
    values = {**{f"R{i}": "1k" for i in range(1, 11)}, **{f"C{i}": "1n" for i in range(1, 5)}}
    d = lc.Design.from_dict({
        "loopcraft": 1,
        "stage": {"kind": "inverting", "input": "R1 + R2 + R3 + R4 + R5 + R6 + R7",
                  "feedback": "(R8 + R9 + R10) || (C1 || C2 || C3 || C4)"},
        "values": values, "tolerances": {"R*": "2%", "C*": "2%"},
    })
    wc = worst_case(d)
    assert wc.method == "sensitivity" and len(wc.parameters) == 14
    f0 = 1 / (2 * math.pi * 3e3 * 4e-9)
    e = wc.extremes["ωp1"]
    assert e.max == pytest.approx(f0 / (1 - t) ** 2, rel=1e-12)
    assert e.min == pytest.approx(f0 / (1 + t) ** 2, rel=1e-12)
    assert {k: v for k, v in e.max_signs.items() if v} == {k: -1 for k in ("R8", "R9", "R10", "C1", "C2", "C3", "C4")}
    g = wc.extremes["dc_gain_db"]
    assert g.max == pytest.approx(20 * math.log10(3 / 7 * (1 + t) / (1 - t)), abs=1e-10)
    full = worst_case(d, method="corners")
    assert full.n_evaluated == 2**14
    assert full.extremes["ωp1"].max == pytest.approx(e.max, rel=1e-12)
    assert full.extremes["dc_gain_db"].min == pytest.approx(g.min, abs=1e-10)


# --------------------------------------------------------------------------- the section


def test_pattern_precedence():
    names = ("R1", "R10", "R2", "C1", "C2")
    ts = parse_tolerances({"R*": "1%", "R1*": "2%", "R2": "0.1%", "C*": 0.05, "C2": "±10%"}, names)
    assert ts.by_component == {"R1": 0.02, "R10": 0.02, "R2": 0.001, "C1": 0.05, "C2": 0.1}
    assert ts.sources["R10"] == "R1*" and ts.sources["R2"] == "R2"
    # Exact beats any pattern, even a longer one; a part no key matches is exact.
    ts = parse_tolerances({"R2": "3%", "[R]2*": "1%"}, names)
    assert ts.by_component["R2"] == 0.03 and ts.by_component["C1"] == 0.0 and ts.sources["C1"] is None
    # Equally long patterns that agree are fine.
    assert parse_tolerances({"R1?": "1%", "R?0": "1%"}, names).by_component["R10"] == 0.01
    d = rc_design({"R*": "1%"})
    assert tolerances_for(d) == {"R1": 0.01, "R2": 0.01, "C1": 0.0}


BASE = {"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1 + R10", "feedback": "(R2 + C1) || C2"},
        "values": {"R1": "10k", "R10": "1k", "R2": "22k", "C1": "6.8n", "C2": "150p"}}


@pytest.mark.parametrize("tol, key_path, text", [
    ({"C*": "5 percent"}, "tolerances.C*", "'5 percent'"),
    ({"C*": 0.6}, "tolerances.C*", "0.6"),
    ({"C*": -0.01}, "tolerances.C*", "-0.01"),
    ({"R1": 1}, "tolerances.R1", "0.01"),
    ({"R1": True}, "tolerances.R1", "True"),
    ({"R1": [1]}, "tolerances.R1", "[1]"),
    ({"X1": "1%"}, "tolerances.X1", "'X1'"),
    ({"L*": "1%"}, "tolerances.L*", "'L*'"),
    ({"R9": "1%"}, "tolerances.R9", "'R9'"),
    ({"distribution": "triangular"}, "tolerances.distribution", "'triangular'"),
    ({"gbw": "60%"}, "tolerances.gbw", "'60%'"),
    ({"R1?": "1%", "R?0": "2%"}, "tolerances.R?0", "'R1?'"),
    (["R*", "1%"], "tolerances", "list"),
])
def test_validation_errors_carry_key_paths(tol, key_path, text):
    with pytest.raises(DesignFileError) as err:
        lc.Design.from_dict({**BASE, "tolerances": tol})
    assert err.value.key_path == key_path
    assert text in str(err.value)
    with pytest.raises(DesignFileError):
        validate_tolerances(tol, ("R1", "R10", "R2", "C1", "C2"), "tolerances")


def test_spread_errors():
    d = lc.Design.from_dict(BASE)
    with pytest.raises(AnalysisError, match="no 'tolerances' section"):
        monte_carlo(d, 10)
    with pytest.raises(AnalysisError, match="needs a real op-amp"):
        monte_carlo(d, 10, tolerances={"gbw": "10%"})
    with pytest.raises(AnalysisError, match="samples"):
        monte_carlo(d, 0, tolerances={"R*": "1%"})
    with pytest.raises(AnalysisError, match="seed"):
        monte_carlo(d, 10, seed=-1, tolerances={"R*": "1%"})
    with pytest.raises(AnalysisError, match="every tolerance is zero"):
        worst_case(d, tolerances={"R*": 0})
    with pytest.raises(AnalysisError, match="f_hz"):
        monte_carlo(d, 10, tolerances={"R*": "1%"}, f_hz=[1e3, 1e2])
    with pytest.raises(AnalysisError, match="no element named 'R7'"):
        evaluate_batch(d, {"R7": [1.0]})


def test_phase_far_from_nominal_is_still_continuous():
    # A Q = 5 unity-gain Sallen-Key moved 3x off nominal strays ~160° from the nominal phase between
    # the two resonances; the phase must still be the continuous -atan2(x/Q, 1 - x²), x = f/f0,
    # of a second-order low-pass (Schaumann & Van Valkenburg 2001, ch. 4; from memory).
    sk = lc.Design.from_dict({
        "loopcraft": 1,
        "stage": {"kind": "circuit",
                  "elements": [["R1", "in", "a"], ["R2", "a", "b"], ["C1", "a", "out"], ["C2", "b", "gnd"]],
                  "opamps": [{"plus": "b", "minus": "out", "out": "out"}], "input": "in", "output": "out"},
        "values": {"R1": "10k", "R2": "10k", "C1": "100n", "C2": "1n"},
    })
    f = np.logspace(1, 6, 300)
    r = np.array([10e3, 30e3, 3e3])
    b = evaluate_batch(sk, {"R1": r, "R2": r}, f)
    assert np.abs(b.stage_phase_deg[1] - b.stage_phase_deg[0]).max() > 150
    for i, ri in enumerate(r):
        f0 = 1 / (2 * np.pi * ri * np.sqrt(100e-9 * 1e-9))
        x = f / f0
        np.testing.assert_allclose(b.stage_phase_deg[i], -np.degrees(np.arctan2(x / 5, 1 - x * x)), atol=1e-9)


# --------------------------------------------------------------------------- worst case: interior search


def _dip_phase_deg(f):
    """Phase of L = (1 + s/ω3k)/(s·τ·(1 + s/ω1k)(1 + s/ω30k)) plus 180° at f (Hz): the phase margin
    if the loop crossed there (sum of first-order factor angles; common practice, no source)."""
    return 90 + np.degrees(np.arctan(f / 3e3) - np.arctan(f / 1e3) - np.arctan(f / 30e3))


def dip_design(tau_scale=1.0, tol=None):
    """Integrator stage (R1 in, C1 feedback) around (1 + s/ω3k)/((1 + s/ω1k)(1 + s/ω30k)), with R1·C1
    chosen so that |L| = 1 at the phase dip (times ``tau_scale``)."""
    from scipy.optimize import minimize_scalar

    res = minimize_scalar(lambda lf: _dip_phase_deg(10**lf), bounds=(2.5, 4.0), method="bounded",
                          options={"xatol": 1e-12})
    f_dip = 10**res.x
    s = 1j * f_dip
    tau = abs((1 + s / 3e3) / ((1 + s / 1e3) * (1 + s / 30e3))) / (2 * math.pi * f_dip)
    d = lc.Design.from_dict({
        "loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "C1"},
        "values": {"R1": 10e3, "C1": tau * tau_scale / 10e3},
        "plant": {"kind": "general", "gain": 1.0, "zeros_hz": [3e3], "poles_hz": [1e3, 30e3]},
        "tolerances": tol or {"R*": "1%", "C*": "5%"},
    })
    return d, f_dip, float(_dip_phase_deg(f_dip)), tau


def test_worst_case_phase_margin_minimum_at_the_dip_inside_the_box():
    # The crossover depends on τ = R1·C1 only, so the phase margin over the box is least on the curve
    # R1·C1 = τ_dip (where |L| = 1 at the phase dip) whenever that curve crosses the box. Every vertex
    # moves τ away from it: a vertex-only search reports a larger minimum.
    d, f_dip, pm_dip, tau = dip_design()
    wc = worst_case(d)
    e = wc.extremes["phase_margin_deg"]
    assert e.nominal == pytest.approx(pm_dip, abs=1e-7)
    assert e.min <= e.nominal and e.min == pytest.approx(pm_dip, abs=1e-7)
    assert e.min_location == "interior" and e.min_stable is True
    # Nominal 3 % above τ_dip: the dip curve crosses the inside of the box, away from nominal.
    d, f_dip, pm_dip, tau = dip_design(1.03)
    wc = worst_case(d)
    e = wc.extremes["phase_margin_deg"]
    assert e.nominal - pm_dip > 1e-3
    assert e.min == pytest.approx(pm_dip, abs=1e-6)
    assert e.min_location in ("face", "interior")
    assert e.min_values["R1"] * e.min_values["C1"] == pytest.approx(tau, rel=1e-3)
    assert {k: abs(v) <= 1 for k, v in e.min_position.items()} == {"R1": True, "C1": True}
    vertex_min = min(_dip_phase_deg(wc.extremes["crossover_hz"].min), _dip_phase_deg(wc.extremes["crossover_hz"].max))
    assert e.min < vertex_min - 1e-3
    # Location and position in the JSON form and the repr.
    out = json.loads(json.dumps(wc.to_dict(), allow_nan=False))
    pm = out["extremes"]["phase_margin_deg"]
    assert pm["min_location"] == e.min_location and pm["min_position"] == dict(e.min_position)
    assert pm["min_stable"] is True and out["nominal_stable"] is True and out["unstable_found"] is False
    assert f"{e.min:.6g} ({e.min_location})" in repr(wc)
    assert "min_location=" in repr(e)


def _box_brute_force(d, params, tol, n_random=20_000, seed=0, chunk=4000):
    """Every quantity at all 2^n vertices and n_random seeded uniform points of the tolerance box
    (brute force over the box, common practice, no source). Margins are -inf where the closed loop
    is not stable. Returns {quantity: values} and the points (normalized)."""
    n = len(params)
    verts = 1.0 - 2.0 * ((np.arange(2**n)[:, None] >> np.arange(n)[None, :]) & 1)
    z = np.vstack([verts, np.random.default_rng(seed).uniform(-1, 1, (n_random, n))])
    out = {}
    for lo in range(0, z.shape[0], chunk):
        zz = z[lo:lo + chunk]
        vals = {p: d.values[p] * (1 + tol[p] * zz[:, k]) for k, p in enumerate(params) if p != "gbw"}
        gbw = None
        if "gbw" in params:
            gbw = d.opamp.gbw_hz * (1 + tol["gbw"] * zz[:, params.index("gbw")])
        b = evaluate_batch(d, vals, gbw_hz=gbw)
        q = dict(b.corners)
        q["dc_gain_db"] = b.dc_gain_db
        if b.crossover_hz is not None:
            q["crossover_hz"] = b.crossover_hz
            q["phase_margin_deg"] = np.where(b.stable, b.phase_margin_deg, -np.inf)
            q["gain_margin_db"] = np.where(b.stable, b.gain_margin_db, -np.inf)
        for k, v in q.items():
            out.setdefault(k, []).append(v)
    return {k: np.concatenate(v) for k, v in out.items()}, z


SALLEN_KEY = {
    "loopcraft": 1,
    "stage": {"kind": "circuit",
              "elements": [["R1", "in", "a"], ["R2", "a", "b"], ["C1", "a", "out"], ["C2", "b", "gnd"]],
              "opamps": [{"plus": "b", "minus": "out", "out": "out"}], "input": "in", "output": "out"},
    "values": {"R1": "10k", "R2": "10k", "C1": "22n", "C2": "4.7n"},
}


@pytest.mark.parametrize("case", ["dip", "sallen_key", "type3_loop"])
def test_worst_case_is_at_least_as_extreme_as_brute_force(case):
    if case == "dip":
        d = dip_design(1.03)[0]
    elif case == "sallen_key":
        # Q = sqrt(R1 R2 C1 C2)/(C2 (R1 + R2)) peaks where R1 = R2 (Schaumann & Van Valkenburg,
        # "Design of Analog Filters", 2001, ch. 4; from memory): with R2 = 1.1·R1 nominal and ±10 %
        # that ridge runs inside the box, through no vertex.
        d = lc.Design.from_dict({**SALLEN_KEY, "values": {**SALLEN_KEY["values"], "R2": "11k"},
                                 "tolerances": {"R*": "10%", "C*": "10%"}})
    else:
        d = lc.load(EXAMPLES / "bus48_guarded.json").with_sections(tolerances={"R*": "1%", "C*": "5%"})
    wc = worst_case(d)
    params = list(wc.parameters)
    assert len(params) <= 6
    bf, _z = _box_brute_force(d, params, wc.tolerances)
    assert set(bf) == set(wc.extremes)
    for q, v in bf.items():
        e = wc.extremes[q]
        fin = v[np.isfinite(v)]
        spread = float(np.ptp(fin)) if fin.size else 0.0
        slack = 2e-3 * spread + 1e-9 * max(abs(e.nominal), 1.0) if math.isfinite(e.nominal) else 0.0
        assert e.min <= np.nanmin(v) + slack, (q, e.min, np.nanmin(v))
        assert e.max >= np.nanmax(v) - slack, (q, e.max, np.nanmax(v))
        if math.isfinite(e.nominal):
            assert e.min <= e.nominal <= e.max, q
        # Every reported extreme is a point of the box whose value it is.
        for pos in (e.min_position, e.max_position):
            assert all(-1.0 <= x <= 1.0 for x in pos.values())
    if case == "sallen_key":
        e = wc.extremes["Qp1"]
        assert e.max_location == "face"  # C1 high, C2 low, R1 = R2 inside their ranges
        assert e.max_signs["C1"] == 1 and e.max_signs["C2"] == -1
        assert e.max_values["R1"] == pytest.approx(e.max_values["R2"], rel=2e-3)
        r, c1, c2 = 10e3, 22e-9 * 1.1, 4.7e-9 * 0.9
        assert e.max == pytest.approx(math.sqrt(r * r * c1 * c2) / (c2 * 2 * r), rel=1e-6)


# --------------------------------------------------------------------------- closed-loop stability


def _routh_rhp(den_desc):
    """Sign changes in the first column of the Routh array of a polynomial (descending powers), in exact
    rational arithmetic on the float coefficients: the number of right-half-plane roots (Ogata, "Modern
    Control Engineering", 5th ed., 2010, ch. 5). None when a first-column entry is zero."""
    from fractions import Fraction

    c = [Fraction(float(x)) for x in den_desc]
    n = len(c) - 1
    w = n // 2 + 1
    r0 = c[0::2] + [Fraction(0)] * (w - len(c[0::2]))
    r1 = c[1::2] + [Fraction(0)] * (w - len(c[1::2]))
    first = [r0[0], r1[0]]
    for _ in range(n - 1):
        if r1[0] == 0:
            return None
        r2 = [(r1[0] * r0[i + 1] - r0[0] * r1[i + 1]) / r1[0] for i in range(w - 1)] + [Fraction(0)]
        r0, r1 = r1, r2
        first.append(r1[0])
    if any(x == 0 for x in first):
        return None
    return sum((a > 0) != (b > 0) for a, b in zip(first[:-1], first[1:], strict=True))


def edge_design(tol=None, k_over_p=1.9):
    """L = K/(s(1 + s/p)²), K = G/(R1 C1): the closed loop s³/p² + 2s²/p + s + K is stable iff K < 2p
    (Routh–Hurwitz: Ogata, "Modern Control Engineering", 5th ed., 2010, ch. 5)."""
    fp, g, r1 = 1e3, 1.0, 10e3
    p = 2 * math.pi * fp
    d = lc.Design.from_dict({
        "loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "C1"},
        "values": {"R1": r1, "C1": g / (k_over_p * p * r1)},
        "plant": {"kind": "general", "gain": g, "poles_hz": [fp, fp]},
        "tolerances": tol or {"R*": "5%", "C*": "5%"},
    })
    return d, p, g


def test_stable_nominal_with_unstable_samples_is_reported():
    d, p, g = edge_design()
    sp = monte_carlo(d, 4000, seed=2, spec={"phase_margin_min_deg": -90})
    k = g / (sp.values["R1"] * sp.values["C1"])
    expected = k < 2 * p
    assert sp.nominal_stable is True
    assert 0.05 < sp.unstable_fraction < 0.3
    assert np.array_equal(sp.stable, expected)
    assert np.array_equal(sp.n_rhp[~expected], np.full((~expected).sum(), 2))  # the complex pair crosses
    # The margins alone would pass every sample here; the yield is the stable fraction.
    assert (sp.phase_margin_deg >= -90).all()
    assert sp.item_yield["stable"] == pytest.approx(expected.mean())
    assert sp.yield_fraction == pytest.approx(expected.mean())
    assert list(sp.item_yield)[0] == "stable"
    out = json.loads(json.dumps(sp.to_dict(), allow_nan=False))
    assert out["unstable_fraction"] == pytest.approx(1 - expected.mean())
    assert out["n_unstable"] == int((~expected).sum()) and out["nominal_stable"] is True
    assert "unstable=" in repr(sp)
    # Batch: the same mask for explicitly given samples.
    b = evaluate_batch(d, {"R1": sp.values["R1"][:50], "C1": sp.values["C1"][:50]})
    assert np.array_equal(b.stable, expected[:50])
    assert b.unstable_fraction == pytest.approx(1 - expected[:50].mean())


def test_worst_case_margins_fail_at_unstable_points():
    d, p, g = edge_design()
    wc = worst_case(d)
    # Vertices: K = G/(R1 C1) at (1 ± t)(1 ± t); unstable where K >= 2p (Ogata 2010, ch. 5).
    t = 0.05
    k0 = 1.9 * p
    n_bad = sum(k0 / ((1 + a * t) * (1 + b * t)) >= 2 * p for a in (-1, 1) for b in (-1, 1))
    assert n_bad == 1 and wc.n_unstable == n_bad and wc.unstable_fraction == pytest.approx(n_bad / 4)
    assert wc.nominal_stable is True and wc.unstable_found is True
    for q in ("phase_margin_deg", "gain_margin_db"):
        e = wc.extremes[q]
        assert e.min == -math.inf and e.min_stable is False
        assert e.max_stable is True and e.max >= e.nominal
    out = json.loads(json.dumps(wc.to_dict(), allow_nan=False))
    assert out["extremes"]["phase_margin_deg"]["min"] is None
    assert out["extremes"]["phase_margin_deg"]["min_stable"] is False
    # Well inside the stable region nothing is unstable.
    d, p, g = edge_design(k_over_p=1.0)
    wc = worst_case(d)
    assert wc.n_unstable == 0 and wc.unstable_found is False
    assert wc.extremes["phase_margin_deg"].min > 0


@pytest.mark.parametrize("case", ["edge", "type3_high_gain"])
def test_closed_loop_root_count_matches_numpy_roots_and_routh(case):
    if case == "edge":
        d, _p, _g = edge_design({"R*": "5%", "C*": "5%"})
    else:
        # The Type III loop with 3x the divider gain: a 7th-order closed loop, stable at nominal,
        # unstable in about a third of the samples.
        d = lc.load(EXAMPLES / "bus48_loop.json").with_sections(
            feedback_gain=3.0, tolerances={"R*": "10%", "C*": "20%", "gbw": "30%"})
    sp = monte_carlo(d, 400, seed=3)
    assert 0 < sp.unstable_fraction < 1
    idx = np.arange(0, 400, 9)
    counts = {0: 0, 1: 0}
    for i in idx:
        v = {k: float(x[i]) for k, x in sp.values.items() if k != "gbw_hz"}
        dd = d.with_values(v)
        if "gbw_hz" in sp.values:
            dd = dd.with_sections(opamp=replace(d.opamp, gbw_hz=float(sp.values["gbw_hz"][i])))
        # The scalar path: L/(1 + L) of loopcraft.analysis.loop, denominator D + N in descending powers.
        _num, den = dd.analyze().loop.closed_loop_tf()
        r = np.roots(den)
        by_roots = int(np.sum(r.real >= -1e-9 * np.abs(r)))
        by_routh = _routh_rhp(den)
        assert by_routh is not None
        assert sp.n_rhp[i] == by_roots == by_routh, (i, sp.n_rhp[i], by_roots, by_routh)
        counts[int(by_roots > 0)] += 1
    assert counts[0] and counts[1]  # both kinds among the checked samples


def test_origin_factor_common_to_plant_and_stage_cancels():
    # Plant with a zero at the origin times an integrator: L = K/((1 + s/p1)(1 + s/p2)) after the
    # common s cancels, so 1 + L has roots in the left half plane for every K > 0 (Routh, Ogata 2010,
    # ch. 5: all coefficients of a second-order polynomial positive); without the cancellation a
    # root would sit at the origin.
    d = lc.Design.from_dict({
        "loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "C1"},
        "values": {"R1": "10k", "C1": "10n"},
        "plant": {"kind": "general", "gain": 1e-4, "origin_order": 1, "poles_hz": [1e3, 5e3]},
        "tolerances": {"R*": "5%", "C*": "5%"},
    })
    sp = monte_carlo(d, 200, seed=1)
    assert sp.nominal_stable is True and sp.stable.all()


def test_unstable_plant_fails_whatever_its_phase_margin():
    # L = K/(s(1 - s/p)): 1 + L ∝ -s²/p + s + K has coefficients of both signs, so a root lies in the
    # right half plane for every K > 0 (Ogata 2010, ch. 5), although 180° + ∠L = 90° + atan(ω/p) > 90°.
    d = lc.Design.from_dict({
        "loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "C1"},
        "values": {"R1": "10k", "C1": "10n"},
        "plant": {"kind": "general", "gain": 1.0, "rhp_poles_hz": [1e3]},
        "tolerances": {"R*": "5%", "C*": "5%"},
    })
    sp = monte_carlo(d, 300, seed=1, spec={"phase_margin_min_deg": 45})
    assert sp.nominal["phase_margin_deg"] > 90 and (sp.phase_margin_deg > 90).all()
    assert sp.nominal_stable is False and not sp.stable.any()
    assert np.array_equal(sp.n_rhp, np.ones(300, dtype=int))
    assert sp.item_yield == {"stable": 0.0, "phase_margin_min_deg": 0.0} and sp.yield_fraction == 0.0
