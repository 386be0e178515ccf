"""Benchmark: Monte Carlo spread of the Type III voltage loop (op-amp + plant).

10,000 samples × 500 frequencies of ``examples/bus48_loop.json`` with
R 1 %, C 5 % and op-amp GBW 30 % (uniform): every sample's corners, the
stage-with-op-amp and loop envelopes (min/max/1/50/99 %), every crossover
with its phase margin and every phase crossover with its gain margin.

Target: median of several runs <= 0.3 s on this machine. For scale, the same
process times 100 scalar ``Analyzer.update`` calls (the one-sample fast path
the explorer uses, fresh values each call) and scales them to 10,000.

Run: ``.venv/bin/python benchmarks/bench_spread.py [--runs N] [--workers W]``.
"""

from __future__ import annotations

import argparse
import os
import statistics
import time
from pathlib import Path

import numpy as np

import loopcraft as lc
from loopcraft.analysis import Analyzer
from loopcraft.analysis.tolerance import monte_carlo

EXAMPLE = Path(lc.__file__).resolve().parent / "examples" / "bus48_loop.json"
TOLERANCES = {"R*": "1%", "C*": "5%", "gbw": "30%", "distribution": "uniform"}
SAMPLES = 10_000
TARGET_S = 0.3


def bench_spread(design: lc.Design, runs: int, workers: int | None) -> list[float]:
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        sp = monte_carlo(design, SAMPLES, seed=1, workers=workers)
        times.append(time.perf_counter() - t0)
        assert sp.f_hz.size == 500 and sp.phase_margin_deg.size == SAMPLES
    return times


def bench_scalar(design: lc.Design, n: int = 100) -> float:
    """Seconds for n scalar updates (fresh random values within ±5 %)."""
    an = Analyzer(design)
    rng = np.random.default_rng(7)
    inputs = [{k: v * float(rng.uniform(0.95, 1.05)) for k, v in design.values.items()} for _ in range(n)]
    an.update(inputs[0])
    t0 = time.perf_counter()
    for vals in inputs:
        an.update(vals)
    return time.perf_counter() - t0


def main() -> dict[str, float]:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--runs", type=int, default=9)
    ap.add_argument("--workers", type=int, default=None, help="threads (default: the library's choice)")
    args = ap.parse_args()
    design = lc.load(EXAMPLE).with_sections(tolerances=TOLERANCES)
    monte_carlo(design, 200, seed=1)  # warm up: compile the topology once, as any session would

    times = bench_spread(design, args.runs, args.workers)
    med = statistics.median(times)
    scalar_100 = bench_scalar(design)
    scalar_10k = scalar_100 * SAMPLES / 100
    print(f"machine: {os.cpu_count()} CPUs, load average {os.getloadavg()[0]:.2f}")
    print(f"monte_carlo: {SAMPLES} samples x 500 frequencies, {args.runs} runs, workers={args.workers or 'default'}")
    print(f"  runs (s):       {', '.join(f'{t:.3f}' for t in times)}")
    print(f"  median:         {med:.3f} s   (target <= {TARGET_S} s: {'met' if med <= TARGET_S else 'NOT met'})")
    print(f"  per sample:     {1e6 * med / SAMPLES:.1f} us")
    print(f"scalar Analyzer.update: 100 calls {scalar_100:.3f} s -> {scalar_10k:.2f} s per 10,000 "
          f"({1e3 * scalar_100 / 100:.2f} ms each)")
    print(f"  speed-up of the vectorized spread over scalar updates: {scalar_10k / med:.0f}x")
    return {"median_s": med, "per_sample_us": 1e6 * med / SAMPLES, "scalar_10k_s": scalar_10k}


if __name__ == "__main__":
    main()
