"""Benchmark: one update of the whole loop (stage + real op-amp + plant, 500 points, margins).

Type III voltage loop of the invented 48 V bus converter
(src/loopcraft/examples/bus48_loop.json). Reported as the median time and as
a ratio against the core stage update (values -> poles, zeros, 500-point
response) measured in the same run. Target: median <= 1 ms.
"""

from __future__ import annotations

import os
import statistics
import time
from pathlib import Path

import numpy as np

import loopcraft as lc
from loopcraft.analysis import Analyzer

EXAMPLE = Path(__file__).resolve().parents[1] / "src" / "loopcraft" / "examples" / "bus48_loop.json"


def main(n: int = 2000) -> dict[str, float]:
    d = lc.load(EXAMPLE)
    an = Analyzer(d)
    ev = d.compile()
    f = an.f_hz
    rng = np.random.default_rng(7)

    def fresh():
        return {k: v * float(rng.uniform(0.8, 1.25)) for k, v in d.values.items()}

    for _ in range(50):
        an.update(fresh())
    loop_t, core_t = [], []
    for _ in range(n):
        v = fresh()
        t0 = time.perf_counter()
        a = an.update(v)
        _ = a.loop.margins
        loop_t.append(time.perf_counter() - t0)
        v = fresh()
        t0 = time.perf_counter()
        r = ev(v)
        r.response(f)
        core_t.append(time.perf_counter() - t0)
    res = {
        "loop_median_ms": statistics.median(loop_t) * 1e3,
        "loop_p95_ms": float(np.percentile(loop_t, 95)) * 1e3,
        "core_median_ms": statistics.median(core_t) * 1e3,
    }
    res["ratio_to_core"] = res["loop_median_ms"] / res["core_median_ms"]
    print("Whole-loop update: stage + two-pole op-amp + buck plant, 500 points, all margins")
    print(f"  load average (1 min): {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs")
    print(f"  loop update : median {res['loop_median_ms']:.3f} ms, p95 {res['loop_p95_ms']:.3f} ms", end="")
    print("  (target median <= 1 ms)")
    print(f"  core update : median {res['core_median_ms']:.4f} ms")
    print(f"  ratio loop / core = {res['ratio_to_core']:.1f}")
    print("  target:", "met" if res["loop_median_ms"] <= 1.0 else "NOT met")
    return res


if __name__ == "__main__":
    main()
