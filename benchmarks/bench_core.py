"""Benchmark: one stage update (new values -> poles, zeros, 500-point response).

Type III compensator. Three ways, measured in the same run with fresh random
values for every update (a slider never repeats, and sympy's cache must not
flatter the symbolic path):

* loopcraft: the compiled evaluator (``Design.compile()``);
* sympy path: ``subs`` of fresh values into the derived H(s), ``lambdify``,
  evaluate, roots of numerator and denominator;
* numpy floor: coefficient functions compiled once, ``np.roots``, ``np.polyval``.

Targets: median <= 0.5 ms, >= 100x faster than the sympy path, within 2.5x of the floor.
"""

from __future__ import annotations

import statistics
import time

import numpy as np
import sympy as sp

import loopcraft as lc
from loopcraft.symbolic.symbols import S

DESIGN = {
    "loopcraft": 1,
    "stage": {"kind": "inverting", "input": "R1 || (R3 + C3)", "feedback": "(R2 + C1) || C2"},
    "values": {"R1": "10k", "R2": "22k", "R3": "470", "C1": "6.8n", "C2": "150p", "C3": "3.3n"},
}


def fresh_values(d: lc.Design, rng: np.random.Generator) -> dict[str, float]:
    return {k: v * float(rng.uniform(0.5, 2.0)) for k, v in d.values.items()}


def timed(fn, inputs) -> list[float]:
    out = []
    for x in inputs:
        t0 = time.perf_counter()
        fn(x)
        out.append(time.perf_counter() - t0)
    return out


def main(n_fast: int = 3000, n_sympy: int = 30) -> dict[str, float]:
    d = lc.Design.from_dict(DESIGN)
    rng = np.random.default_rng(1)
    f_hz = np.logspace(1, 7, 500)
    s = 2j * np.pi * f_hz
    ev = d.compile()
    der = d.derivation
    syms = der.symbols

    def ours(vals):
        r = ev(vals)
        return r.zeros, r.poles, r.response(f_hz)

    h_expr = der.transfer
    num_expr, den_expr = der.numerator, der.denominator

    def sympy_path(vals):
        sub = {sym: vals[sym.name] for sym in syms}
        h = sp.lambdify(S, h_expr.subs(sub), "numpy")
        resp = h(s)
        zeros = np.roots([float(c) for c in sp.Poly(num_expr.subs(sub), S).all_coeffs()])
        poles = np.roots([float(c) for c in sp.Poly(den_expr.subs(sub), S).all_coeffs()])
        return zeros, poles, resp

    num_c = sp.Poly(num_expr, S).all_coeffs()
    den_c = sp.Poly(den_expr, S).all_coeffs()
    num_fn = sp.lambdify(syms, num_c, "math")
    den_fn = sp.lambdify(syms, den_c, "math")

    def floor(vals):
        args = [vals[sym.name] for sym in syms]
        b = np.array(num_fn(*args))
        a = np.array(den_fn(*args))
        return np.roots(b), np.roots(a), np.polyval(b, s) / np.polyval(a, s)

    # Same answers first (the benchmark compares equal work).
    v0 = fresh_values(d, rng)
    for fn in (sympy_path, floor):
        np.testing.assert_allclose(ours(v0)[2], fn(v0)[2], rtol=1e-8)

    warm = [fresh_values(d, rng) for _ in range(50)]
    timed(ours, warm)
    timed(floor, warm)
    t_ours = statistics.median(timed(ours, [fresh_values(d, rng) for _ in range(n_fast)]))
    t_floor = statistics.median(timed(floor, [fresh_values(d, rng) for _ in range(n_fast)]))
    t_sympy = statistics.median(timed(sympy_path, [fresh_values(d, rng) for _ in range(n_sympy)]))
    res = {
        "median_ms": t_ours * 1e3,
        "sympy_median_ms": t_sympy * 1e3,
        "floor_median_ms": t_floor * 1e3,
        "speedup_vs_sympy": t_sympy / t_ours,
        "ratio_to_floor": t_ours / t_floor,
    }
    print("Type III stage update: values -> poles, zeros, 500-point response")
    print(f"  loopcraft compiled path : median {res['median_ms']:.4f} ms   (target <= 0.5 ms)")
    print(
        f"  sympy subs+lambdify path: median {res['sympy_median_ms']:.2f} ms   "
        f"-> loopcraft is {res['speedup_vs_sympy']:.0f}x faster (target >= 100x)"
    )
    print(
        f"  bare numpy floor        : median {res['floor_median_ms']:.4f} ms   "
        f"-> loopcraft / floor = {res['ratio_to_floor']:.2f} (target <= 2.5)"
    )
    ok = res["median_ms"] <= 0.5 and res["speedup_vs_sympy"] >= 100 and res["ratio_to_floor"] <= 2.5
    print("  targets:", "met" if ok else "NOT met")
    return res


if __name__ == "__main__":
    main()
