import json
import math

import mpmath
import numpy as np
import pytest

import loopcraft as lc
from loopcraft.analysis.tolerance import monte_carlo
from loopcraft.checks.spec import canonical_label, check, parse_spec, validate_spec
from loopcraft.errors import DesignFileError

G, FP, R1, C1 = 5.0, 10e3, 10e3, 10e-9


def integrator_loop(spec=None, tol=None, opamp=None):
    """Inverting integrator H = -1/(s R1 C1) around a one-pole plant G/(1 + s/p): L = K/(s(1 + s/p))."""
    d = {"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "C1"},
         "values": {"R1": R1, "C1": C1}, "plant": {"kind": "general", "gain": G, "poles_hz": [FP]}}
    for k, v in (("spec", spec), ("tolerances", tol), ("opamp", opamp)):
        if v is not None:
            d[k] = v
    return lc.Design.from_dict(d)


def closed_form(r1=R1):
    # |L(jωc)| = 1 for L = K/(s(1 + s/p)): ωc² = (p²/2)(sqrt(1 + 4K²/p²) - 1), PM = 90° - atan(ωc/p)
    # (Ogata, "Modern Control Engineering", 5th ed., 2010, frequency-response analysis).
    p = 2 * math.pi * FP
    k = G / (r1 * C1)
    wc = math.sqrt(p * p / 2 * (math.sqrt(1 + 4 * k * k / (p * p)) - 1))
    return wc / (2 * math.pi), 90 - math.degrees(math.atan(wc / p))


def item(report, name):
    (it,) = [i for i in report.items if i.name == name]
    return it


def test_phase_margin_passes_just_below_and_fails_just_above_the_true_value():
    fc, pm = closed_form()
    below = check(integrator_loop({"phase_margin_min_deg": pm - 0.01}))
    above = check(integrator_loop({"phase_margin_min_deg": pm + 0.01}))
    assert below.passed and not above.passed
    assert item(below, "phase_margin_min_deg").actual == pytest.approx(pm, abs=1e-8)
    assert [i.name for i in above.failures] == ["phase_margin_min_deg"]
    # Crossover: a narrow window around the closed form passes, one just above fails.
    ok = check(integrator_loop({"crossover_hz": [fc * 0.9999, fc * 1.0001]}))
    bad = check(integrator_loop({"crossover_hz": [fc * 1.0001, 2 * fc]}))
    assert ok.passed and not bad.passed
    assert item(ok, "crossover_hz").actual == pytest.approx(fc, rel=1e-10)
    # The phase only approaches -180°: no phase crossover, the gain margin is unbounded, and the
    # item says so rather than passing silently.
    gm = item(check(integrator_loop({"gain_margin_min_db": 6})), "gain_margin_min_db")
    assert gm.passed and math.isinf(gm.actual) and "never reaches -180°" in gm.message


def test_type3_margins_match_the_loop_analysis():
    d = lc.load(lc.__file__.replace("__init__.py", "examples/bus48_loop.json"))
    m = d.analyze().loop.margins
    pm, gm = m.phase_margin_deg, m.gain_margin_db
    r = check(d.with_sections(spec={"phase_margin_min_deg": pm - 0.1, "gain_margin_min_db": gm + 0.1}))
    assert item(r, "phase_margin_min_deg").passed
    assert not item(r, "gain_margin_min_db").passed
    assert item(r, "gain_margin_min_db").actual == gm


def rc_stage(spec=None, tol=None):
    d = {"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "R2 || C1"},
         "values": {"R1": "10k", "R2": "10k", "C1": "10n"}}
    if spec is not None:
        d["spec"] = spec
    if tol is not None:
        d["tolerances"] = tol
    return lc.Design.from_dict(d)


F0 = 1 / (2 * math.pi * 10e3 * 10e-9)  # 1/(2π R2 C1), Hz


def test_corner_ranges_real_pole_and_resonant_pair():
    assert check(rc_stage({"corners": {"ωp1": [0.999 * F0, 1.001 * F0]}})).passed
    r = check(rc_stage({"corners": {"wp1": [1.001 * F0, 2 * F0]}}))  # ASCII spelling
    assert not r.passed and r.failures[0].name == "corners.ωp1"
    assert r.failures[0].actual == pytest.approx(F0, rel=1e-12)
    # Unity-gain Sallen-Key: ω0 = 1/sqrt(R1 R2 C1 C2), Q = sqrt(R1 R2 C1 C2)/(C2 (R1 + R2))
    # (Schaumann & Van Valkenburg, "Design of Analog Filters", 2001, ch. 4; from memory).
    r1, r2, c1, c2 = 10e3, 22e3, 22e-9, 4.7e-9
    q = math.sqrt(r1 * r2 * c1 * c2) / (c2 * (r1 + r2))
    f0 = 1 / (2 * math.pi * math.sqrt(r1 * r2 * c1 * c2))
    sk = {"loopcraft": 1,
          "stage": {"kind": "circuit",
                    "elements": [["R1", "in", "a"], ["R2", "a", "b"], ["C1", "a", "out"], ["C2", "b", "gnd"]],
                    "opamps": [{"plus": "b", "minus": "out", "out": "out"}], "input": "in", "output": "out"},
          "values": {"R1": r1, "R2": r2, "C1": c1, "C2": c2}}
    good = check(lc.Design.from_dict({**sk, "spec": {"corners": {"Qp1": [q - 1e-6, q + 1e-6],
                                                                  "w0p1": [f0 * 0.999, f0 * 1.001]}}}))
    assert good.passed and item(good, "corners.Qp1").actual == pytest.approx(q, rel=1e-12)
    bad = check(lc.Design.from_dict({**sk, "spec": {"corners": {"Qp1": [q + 1e-6, 10]}}}))
    assert not bad.passed
    # A label the design does not have fails, naming the labels it has.
    miss = check(rc_stage({"corners": {"ωz1": [1, 2]}}))
    assert not miss.passed and "no corner ωz1" in miss.failures[0].message and "ωp1" in miss.failures[0].message


def _product_cdf(c, t):
    """P(X·Y <= c) for X, Y independent uniform on [1 - t, 1 + t], by mpmath quadrature."""
    a, b = 1 - t, 1 + t

    def inner(x):
        return min(max((c / x - a) / (2 * t), 0.0), 1.0) / (2 * t)

    pts = sorted({a, b, *(p for p in (c / b, c / a) if a < p < b)})
    return float(mpmath.quad(inner, pts))


def test_corner_yield_matches_the_exact_distribution():
    # ωp1 = f0/(X·Y) with R2 = R0·X, C1 = C0·Y uniform ±t: the yield of lo <= f <= hi is
    # P(f0/hi <= XY <= f0/lo), integrated exactly (the product distribution, derived here).
    t, n = 0.05, 4000
    lo, hi = 0.97 * F0, 1.04 * F0
    exact = _product_cdf(F0 / lo, t) - _product_cdf(F0 / hi, t)
    se = math.sqrt(exact * (1 - exact) / n)
    spec = {"corners": {"ωp1": [lo, hi]}}
    sp = monte_carlo(rc_stage(tol={"R2": "5%", "C1": "5%"}), n, seed=21, spec=spec)
    assert abs(sp.yield_fraction - exact) < 4 * se
    for y_min, ok in ((exact - 0.05, True), (exact + 0.05, False)):
        r = check(rc_stage({**spec, "yield_min": y_min, "samples": n}, {"R2": "5%", "C1": "5%"}), seed=21)
        it = item(r, "yield_min")
        assert it.passed is ok
        assert it.actual == pytest.approx(sp.yield_fraction)


def test_phase_margin_yield_matches_the_closed_form():
    # PM rises with R1 (smaller K, lower ωc). With R1 uniform ±t the yield of PM >= PMmin is
    # P(R1 >= R1*), where K* = ωc*·sqrt(1 + (ωc*/p)²) for ωc* = p·tan(90° - PMmin) (Ogata 2010).
    t, n = 0.2, 4000
    _, pm0 = closed_form()
    pm_min = pm0 - 1.0
    p = 2 * math.pi * FP
    wc = p * math.tan(math.radians(90 - pm_min))
    r_star = G / (wc * math.sqrt(1 + (wc / p) ** 2) * C1)
    exact = (R1 * (1 + t) - r_star) / (2 * t * R1)
    assert 0.2 < exact < 0.9
    d = integrator_loop({"phase_margin_min_deg": pm_min, "yield_min": 0.5, "samples": n}, {"R1": t})
    sp = monte_carlo(d, n, seed=2)
    assert abs(sp.yield_fraction - exact) < 4 * math.sqrt(exact * (1 - exact) / n)
    assert item(check(d, seed=2), "yield_min").actual == pytest.approx(sp.yield_fraction)


def test_dc_gain_ideal_integrator_fails_and_real_opamp_gives_a0():
    r = check(integrator_loop({"dc_gain_db": [90, 110]}))
    it = item(r, "dc_gain_db")
    assert not it.passed and "pole at the origin" in it.message
    # With finite A0 the inverting integrator's DC gain is H·A0/(A0 + 1 - H) → -A0 as H → ∞
    # (Franco, "Design with Operational Amplifiers and Analog Integrated Circuits", 3rd ed., 2002, ch. 6).
    op = {"model": "single_pole", "a0_db": 100, "gbw_hz": "1M"}
    it = item(check(integrator_loop({"dc_gain_db": [99.9, 100.1]}, opamp=op)), "dc_gain_db")
    assert it.passed and it.actual == pytest.approx(100.0, abs=1e-9)


def test_no_spec_section_passes_and_says_so():
    r = check(rc_stage())
    assert r.passed and r.items == () and not r.has_spec
    assert "no spec section" in str(r)
    assert r.to_dict() == {"passed": True, "has_spec": False, "items": [], "failures": [], "notes": []}


def test_items_that_cannot_be_evaluated_fail_with_the_reason():
    r = check(rc_stage({"phase_margin_min_deg": 45, "gain_margin_min_db": 6, "crossover_hz": [1, 2]}))
    assert not r.passed and len(r.failures) == 3
    assert all("no plant" in i.message for i in r.failures) and all(i.actual is None for i in r.failures)
    y = item(check(rc_stage({"corners": {"ωp1": [1, 1e9]}, "yield_min": 0.9})), "yield_min")
    assert not y.passed and "no 'tolerances' section" in y.message
    r = check(rc_stage({"corners": {"ωp1": [1, 1e9]}, "yield_min": 0.9}, {"R*": "1%"}), spread=False)
    assert r.passed and [i.name for i in r.items] == ["corners.ωp1"]
    assert "yield_min was not checked (spread=False)" in str(r)


def test_report_text_and_json():
    fc, pm = closed_form()
    r = check(integrator_loop({"phase_margin_min_deg": 45, "crossover_hz": ["1k", "100 kHz"],
                               "gain_margin_min_db": 10}))
    text = str(r)
    # Three items asked for, plus the implicit closed-loop stability item listed first.
    assert text.startswith("Spec check: PASS (4 items, 0 failed)")
    assert "phase_margin_min_deg" in text and "required" in text
    d = json.loads(json.dumps(r.to_dict(), allow_nan=False))
    assert d["items"][0]["name"] == "stable" and d["items"][0]["passed"]
    assert d["passed"] and d["items"][1]["actual"] == pytest.approx(pm, abs=1e-8)
    assert d["items"][2]["actual"] is None  # unbounded gain margin
    assert item(r, "crossover_hz").required == "1 kHz … 100 kHz"


def test_canonical_labels():
    assert canonical_label("wz1") == "ωz1" and canonical_label("w0p12") == "ω0p12"
    assert canonical_label("Qp1") == "Qp1" and canonical_label("ωp0") is None and canonical_label("xp1") is None


@pytest.mark.parametrize("spec, key_path, text", [
    ({"phase_margin": 45}, "spec.phase_margin", "'phase_margin'"),
    ({"phase_margin_min_deg": "45"}, "spec.phase_margin_min_deg", "'45'"),
    ({"gain_margin_min_db": True}, "spec.gain_margin_min_db", "True"),
    ({"gain_margin_min_db": float("nan")}, "spec.gain_margin_min_db", "nan"),
    ({"crossover_hz": [50e3, 10e3]}, "spec.crossover_hz", "50000.0"),
    ({"crossover_hz": [10e3]}, "spec.crossover_hz", "[10000.0]"),
    ({"crossover_hz": [-1, 10e3]}, "spec.crossover_hz[0]", "-1"),
    ({"crossover_hz": ["ten", 10e3]}, "spec.crossover_hz[0]", "'ten'"),
    ({"corners": {"xz1": [1, 2]}}, "spec.corners.xz1", "'xz1'"),
    ({"corners": {"ωz1": [2, 1]}}, "spec.corners.ωz1", "2"),
    ({"corners": {"wz1": [1, 2], "ωz1": [1, 2]}}, "spec.corners.ωz1", "given twice"),
    ({"corners": {"Qp1": [0, 1]}}, "spec.corners.Qp1[0]", "0"),
    ({"corners": [1, 2]}, "spec.corners", "[1, 2]"),
    ({"dc_gain_db": [20, "x"]}, "spec.dc_gain_db[1]", "'x'"),
    ({"corners": {"ωp1": [1, 2]}, "yield_min": 0}, "spec.yield_min", "0"),
    ({"corners": {"ωp1": [1, 2]}, "yield_min": 1.5}, "spec.yield_min", "1.5"),
    ({"yield_min": 0.9}, "spec.yield_min", "at least one other"),
    ({"corners": {"ωp1": [1, 2]}, "yield_min": 0.9, "samples": 0}, "spec.samples", "0"),
    ({"corners": {"ωp1": [1, 2]}, "yield_min": 0.9, "samples": 2.5}, "spec.samples", "2.5"),
    ({"corners": {"ωp1": [1, 2]}, "samples": 100}, "spec.samples", "yield_min"),
    (["phase_margin_min_deg", 45], "spec", "list"),
])
def test_validation_errors_carry_key_paths(spec, key_path, text):
    with pytest.raises(DesignFileError) as err:
        rc_stage(spec)
    assert err.value.key_path == key_path
    assert text in str(err.value)
    with pytest.raises(DesignFileError):
        validate_spec(spec, "spec")


def test_parse_spec_defaults():
    s = parse_spec({"corners": {"wp1": [1, 2]}, "yield_min": 0.99})
    assert s.samples == 2000 and dict(s.corners) == {"ωp1": (1.0, 2.0)}
    assert s.item_names == ("corners.ωp1",) and not s.is_empty
    assert parse_spec({}).is_empty


# --------------------------------------------------------------------------- stability in the yield


def test_sample_pass_fails_unstable_samples_whatever_their_margins():
    import numpy as np

    from loopcraft.checks.spec import sample_pass
    from loopcraft.errors import AnalysisError

    sp = parse_spec({"phase_margin_min_deg": 45, "gain_margin_min_db": 6})
    q = {"phase_margin_deg": np.array([60.0, 60.0, 30.0, 60.0]), "gain_margin_db": np.full(4, 20.0),
         "crossover_hz": np.full(4, 1e3), "corners": {}, "dc_gain_db": np.zeros(4),
         "stable": np.array([True, False, True, False])}
    masks = sample_pass(sp, q, 4)
    assert list(masks) == ["stable", "phase_margin_min_deg", "gain_margin_min_db"]
    assert masks["stable"].tolist() == [True, False, True, False]
    # A margin of an unstable loop is not a margin: those samples fail the margin items too.
    assert masks["phase_margin_min_deg"].tolist() == [True, False, False, False]
    assert masks["gain_margin_min_db"].tolist() == [True, False, True, False]
    passed = np.logical_and.reduce(list(masks.values()))
    assert passed.tolist() == [True, False, False, False]
    # Without a plant there is no loop to be stable: no implicit item.
    plain = sample_pass(sp, {**q, "stable": None}, 4)
    assert "stable" not in plain and plain["phase_margin_min_deg"].tolist() == [True, True, False, True]
    with pytest.raises(AnalysisError, match=r"quantities\['stable'\] must be a bool array of shape \(4,\)"):
        sample_pass(sp, {**q, "stable": np.ones(3, dtype=bool)}, 4)


def test_yield_counts_unstable_samples_as_failures():
    # L = K/(s(1 + s/p)²) with K = G/(R1 C1): the closed loop is stable iff K < 2p (Routh–Hurwitz on
    # s³/p² + 2s²/p + s + K: Ogata, "Modern Control Engineering", 5th ed., 2010, ch. 5). Nominal
    # K = 1.95p, R1 ±5 %: stable iff R1 > R1·1.95/2, i.e. a uniform fraction (1 + 0.05 - 0.975)/0.1.
    p = 2 * math.pi * 1e3
    c1 = 1.0 / (1.95 * p * R1)
    d = lc.Design.from_dict({
        "loopcraft": 1, "stage": {"kind": "inverting", "input": "R1", "feedback": "C1"},
        "values": {"R1": R1, "C1": c1}, "plant": {"kind": "general", "gain": 1.0, "poles_hz": [1e3, 1e3]},
        "tolerances": {"R1": "5%"},
        "spec": {"phase_margin_min_deg": -60, "yield_min": 0.5, "samples": 4000},
    })
    exact = (1.05 - 0.975) / 0.1
    n = 4000
    sp = monte_carlo(d, n, seed=5)
    # Every sample's phase margin is above -60°, so only instability fails samples.
    assert (sp.phase_margin_deg >= -60).all()
    assert abs(sp.yield_fraction - exact) < 4 * math.sqrt(exact * (1 - exact) / n)
    assert sp.yield_fraction == sp.item_yield["stable"] == sp.item_yield["phase_margin_min_deg"]
    assert item(check(d, seed=5), "yield_min").actual == pytest.approx(sp.yield_fraction)


# --------------------------------------------------------------------------- corner keys name formulas


def type3(spec=None, tol=None, **values):
    base = {"R1": 10e3, "R2": 22e3, "R3": 470.0, "C1": 6.8e-9, "C2": 150e-12, "C3": 3.3e-9}
    d = {"loopcraft": 1, "stage": {"kind": "inverting", "input": "R1 || (R3 + C3)", "feedback": "(R2 + C1) || C2"},
         "values": {**base, **values}}
    if spec is not None:
        d["spec"] = spec
    if tol is not None:
        d["tolerances"] = tol
    return lc.Design.from_dict(d)


def test_a_corner_key_names_the_same_formula_at_any_values():
    # Venable, "The K Factor", 1983 (formulas from memory): the zero 1/(R2·C1) is ωz1 and the pole
    # 1/(R3·C3) is ωp2 whatever their rank: at R2 = 5k the zero 1/(R2·C1) lies above 1/((R1 + R3)·C3)
    # and (C1 + C2)/(R2·C1·C2) above 1/(R3·C3); at R2 = 220k both orders are reversed.
    orders = set()
    for r2 in (5e3, 220e3):
        v = {"R1": 10e3, "R2": r2, "R3": 470.0, "C1": 6.8e-9, "C2": 150e-12, "C3": 3.3e-9}
        fz = 1 / (2 * math.pi * v["R2"] * v["C1"])
        fp = 1 / (2 * math.pi * v["R3"] * v["C3"])
        spec = {"corners": {"wz1": [fz * (1 - 1e-9), fz * (1 + 1e-9)],  # the ASCII spelling
                            "ωp2": [fp * (1 - 1e-9), fp * (1 + 1e-9)]}}
        r = check(type3(spec, R2=r2))
        assert r.passed, str(r)
        assert item(r, "corners.ωz1").actual == pytest.approx(fz, rel=1e-12)
        assert item(r, "corners.ωp2").actual == pytest.approx(fp, rel=1e-12)
        # The same key with the other zero's value fails: ωz1 is not "the lowest zero".
        fz2 = 1 / (2 * math.pi * (v["R1"] + v["R3"]) * v["C3"])
        bad = check(type3({"corners": {"ωz1": [fz2 * (1 - 1e-9), fz2 * (1 + 1e-9)]}}, R2=r2))
        assert not bad.passed
        fp1 = (v["C1"] + v["C2"]) / (2 * math.pi * v["R2"] * v["C1"] * v["C2"])
        orders.add((fz > fz2, fp1 > fp))
    assert orders == {(True, True), (False, False)}  # both pairs do swap between the two value sets


def test_monte_carlo_corner_item_follows_its_formula_across_a_crossing():
    # Zeros coincident at nominal (R2·C1 = (R1 + R3)·C3, the k-factor placement; Venable 1983):
    # R2 and C1 at 1 %, the other zero's parts at 20 %, uniform. The box of 1/(2π·R2·C1) is
    # [f/(1.01²), f/(0.99²)] (monotone in each part; from memory), so every sample meets it,
    # although in about half of them the other zero is the lower one.
    c3 = 22e3 * 6.8e-9 / (10e3 + 470.0)
    f = 1 / (2 * math.pi * 22e3 * 6.8e-9)
    spec = {"corners": {"ωz1": [f / 1.01**2 * (1 - 1e-12), f / 0.99**2 * (1 + 1e-12)]}, "yield_min": 1.0,
            "samples": 400}
    tol = {"R2": "1%", "C1": "1%", "C2": "1%", "R1": "20%", "R3": "20%", "C3": "20%"}
    d = type3(spec, tol, C3=c3)
    r = check(d)
    assert item(r, "yield_min").actual == 1.0, str(r)
    mc = monte_carlo(d, 400, seed=1)
    v = mc.values
    np.testing.assert_allclose(mc.corners["ωz1"], 1 / (2 * np.pi * v["R2"] * v["C1"]), rtol=1e-12)
    np.testing.assert_allclose(mc.corners["ωz2"], 1 / (2 * np.pi * (v["R1"] + v["R3"]) * v["C3"]), rtol=1e-12)
    swapped = np.mean(mc.corners["ωz1"] > mc.corners["ωz2"])
    assert 0.2 < swapped < 0.8  # not vacuous: the zeros cross in many samples
