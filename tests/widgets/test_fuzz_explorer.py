"""A seeded fuzz campaign over explorer interactions.

Random slider values (extreme, non-finite, negative, text), op-amp and plant entries, topology
switches and typed networks, in a seeded random order. The rule under test: nothing but the
package's own handling happens — no exception escapes an interaction, the curves on screen are
finite (or ±inf for an exact null, never NaN), and whenever a loop is shown its verdict is one of
the four the stability module gives, consistent with an independent count of the closed-loop
poles (numpy.roots of den + num of the loop gain, the outside reference).
"""

from __future__ import annotations

import math

import numpy as np
import pytest

import loopcraft as lc
from loopcraft.widgets import Explorer

N_INTERACTIONS = 600

_VALUES = [math.nan, math.inf, -math.inf, -1.0, 0.0, 1e-300, 1e300, 5e-324, 1.7e308, "10k", "4k7", "banana",
           "1e400", "", "2.2µ", 10**400]
_NUMBER_TEXT = ["1e400", "1e308", "5e-324", "-3", "0", "nan", "inf", "10M", "1k", "2.5", "abc", "1e-30", "", "99"]
_NETWORKS = ["R1", "R1 || C1", "(R1 + C1) || C2", "C1 + L1", "R1 + (((C1", "R1 || R1", "R2 +", "((((R1))))",
             "R1 || (R2 + C1) || (R3 + C2)", "L1 || C1", "€", "R1 + " * 40 + "R2"]


def _finite_or_inf(name: str, arr) -> None:
    a = np.asarray(arr)
    if a.dtype.kind in "fc":
        assert not np.any(np.isnan(a)), f"{name} holds NaN"


def _check_screen(ex: Explorer) -> None:
    vs = ex.view_state()
    for k, v in vs.items():
        if isinstance(v, np.ndarray):
            _finite_or_inf(k, v)
    a = ex.design.analyze() if ex.design.plant is not None else None
    if a is not None and a.loop is not None:
        st = a.loop.stability
        assert st.verdict in ("stable", "unstable", "marginal", "uncertain")
        num, den = a.loop.loop.tf()
        q = np.polyadd(den, num)
        q = q[np.argmax(q != 0):]
        if np.all(np.isfinite(q)) and q.size > 1:
            roots = np.roots(q / np.max(np.abs(q)))
            ambiguous = roots.size and np.min(np.abs(roots.real) / np.maximum(np.abs(roots), 1e-300)) < 1e-6
            if st.stable and not ambiguous:
                # never stable when the independent count finds a right-half-plane root
                assert np.all(roots.real < 0), (ex.design.to_dict(), roots)


@pytest.mark.parametrize("seed", [1, 2])
def test_explorer_fuzz(seed):
    rng = np.random.default_rng(seed)
    ex = Explorer(lc.load(lc.__path__[0] + "/examples/bus48_loop.json"))
    topologies = list(lc.topology_names())
    for _ in range(N_INTERACTIONS // 2):  # per seed: 300, so 600 in all
        action = rng.integers(0, 6)
        if action <= 1 and ex.sliders:
            name = str(rng.choice(list(ex.sliders)))
            if rng.random() < 0.5:
                v = _VALUES[int(rng.integers(0, len(_VALUES)))]
            else:
                v = float(ex.sliders[name].value) * 10 ** rng.uniform(-3, 3)
            try:
                ex.sliders[name].value = v
            except lc.LoopcraftError:
                pass
            except Exception as exc:  # traitlets refuses a wrong type at the trait itself
                assert type(exc).__name__ == "TraitError", repr(exc)
        elif action == 2:
            p = ex.opamp_panel
            p.model.value = str(rng.choice(["ideal", "single_pole", "two_pole"]))
            key = str(rng.choice(list(p.fields)))
            p.fields[key].text.value = str(rng.choice(_NUMBER_TEXT))
        elif action == 3:
            p = ex.plant_panel
            kind = str(rng.choice([o[1] for o in p.kind.options]))
            p.kind.value = kind
            keys = [k for k in p.fields if k[0] == kind]
            if keys:
                k = keys[int(rng.integers(0, len(keys)))]
                p.fields[k].text.value = str(rng.choice(_NUMBER_TEXT))
            p.feedback.text.value = str(rng.choice(["0.1", "0.2083", "1e400", "-1", "x", "1"]))
        elif action == 4:
            ex.picker.value = str(rng.choice(topologies))
        else:
            ex.picker.value = "__own__"
            form = ex.network_form
            form._set_quietly(form.first, str(rng.choice(_NETWORKS)))
            form._set_quietly(form.feedback, str(rng.choice(_NETWORKS)))
            form.submit()
        _check_screen(ex)
