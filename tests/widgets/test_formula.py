"""The formula panel: rows keep their labels while a part moves; sensitivity rows match by label.

Corner formulas of the Type III: Venable, "The K Factor: A New Mathematical Tool for Stability
Analysis and Synthesis", 1983 (written from memory): zeros 1/(R2·C1), 1/((R1 + R3)·C3), poles
(C1 + C2)/(R2·C1·C2), 1/(R3·C3). Sensitivities of products of powers are their exponents
(Schaumann & Van Valkenburg, "Design of Analog Filters", 2001, ch. 3).
"""

from __future__ import annotations

import re

import numpy as np

import loopcraft as lc
from loopcraft.analysis.sensitivity import sensitivity
from loopcraft.widgets._formula import FormulaView, corner_lines, highlighted_labels

FORMULAS = {"ωz1": "1/(C1·R2)", "ωz2": "1/(C3·(R1 + R3))", "ωp1": "(C1 + C2)/(C1·C2·R2)", "ωp2": "1/(C3·R3)"}


def type3(**values: float) -> lc.Design:
    base = {"R1": 10e3, "R2": 22e3, "R3": 470.0, "C1": 6.8e-9, "C2": 150e-12, "C3": 3.3e-9}
    return lc.Design.from_dict({"loopcraft": 1,
                                "stage": {"kind": "inverting", "input": "R1 || (R3 + C3)",
                                          "feedback": "(R2 + C1) || C2"},
                                "values": {**base, **values}})


def k_factor_type3() -> lc.Design:
    """Both zeros at one frequency and both poles at another (the k-factor placement, Venable 1983)."""
    r1, r2, r3, c3 = 10e3, 22e3, 470.0, 3.3e-9
    c1 = (r1 + r3) * c3 / r2  # R2·C1 = (R1 + R3)·C3
    x = r3 * c3 / r2  # C1·C2/(C1 + C2) = R3·C3/R2
    c2 = c1 * x / (c1 - x)
    return type3(R1=r1, R2=r2, R3=r3, C1=c1, C2=c2, C3=c3)


def _table_rows(table_html: str) -> list[tuple[str, str]]:
    """(label, formula) of each corner row of the table, in order."""
    return re.findall(r"<b style=\"color:[^\"]*\">([^<]+)</b></td><td[^>]*><code>([^<]+)</code>", table_html)


def test_dragging_r2_5k_to_500k_keeps_every_label_and_row():
    d0 = type3()
    view = FormulaView()
    view.set_design(d0.derivation, d0.transfer())
    seen = set()
    for r2 in np.geomspace(5e3, 500e3, 25):
        d = d0.with_values(R2=float(r2))
        result = d.transfer()
        table, _hl = view.frame(result, sensitivity(d), "R2")
        rows = [(lb, f.replace("&#x27;", "'")) for lb, f in _table_rows(table)]
        assert rows == [(lb, FORMULAS[lb]) for lb in ("ωz1", "ωz2", "ωp1", "ωp2")], r2
        w = {ln.label: ln.corner.omega_rad_s for ln in corner_lines(lc.FactoredForm(d.derivation, result))}
        v = d.values
        np.testing.assert_allclose(w["ωz1"], 1 / (v["R2"] * v["C1"]), rtol=1e-12)
        seen.add(w["ωz1"] > w["ωz2"])
    assert seen == {True, False}  # the zero 1/(C1·R2) crossed the other one during the drag


def test_equal_frequencies_still_highlight_the_right_rows():
    d = k_factor_type3()
    form = lc.FactoredForm(d.derivation, d.transfer())
    lines = corner_lines(form)
    w = {ln.label: ln.corner.omega_rad_s for ln in lines}
    np.testing.assert_allclose(w["ωz1"], w["ωz2"], rtol=1e-12)
    np.testing.assert_allclose(w["ωp1"], w["ωp2"], rtol=1e-12)
    sens = sensitivity(d)
    v = d.values
    c2_share = v["C2"] / (v["C1"] + v["C2"])  # |S| of ωp1 to C1 (and C1's share to C2)
    # |S| > 0.05 moves a row (the panel's threshold): by hand from the formulas above.
    expected = {
        "R1": {"ωz2"},  # S = -R1/(R1 + R3) = -0.955
        "R3": {"ωp2"},  # S(ωz2) = -R3/(R1 + R3) = -0.045, S(ωp2) = -1
        "C3": {"ωz2", "ωp2"},
        "R2": {"ωz1", "ωp1"},
        "C1": {"ωz1"} | ({"ωp1"} if c2_share > 0.05 else set()),
        "C2": {"ωp1"},
    }
    for part, want in expected.items():
        assert highlighted_labels(lines, sens, part) == want, part
    view = FormulaView()
    view.set_design(d.derivation, d.transfer())
    table, hl = view.frame(d.transfer(), sens, "R1")
    assert hl == {"ωz2"} and "R1</span> moves K, ωz2</div>" in table  # K = -1/(R1·(C1 + C2))
