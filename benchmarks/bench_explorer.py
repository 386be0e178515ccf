"""Python-side cost of one explorer slider move: values in, every view's data set on the marks.

Design: the Type III voltage loop of the invented 48 V bus converter
(``src/loopcraft/examples/bus48_loop.json``: two-pole op-amp, voltage-mode buck
plant), so every curve and annotation is live. One move sets
``explorer.sliders[name].value`` (what a browser slider event does after
decoding) and returns when all marks hold the new data.

Two runs:

* ``no kernel``: widgets on ipywidgets' dummy comm; mark states are still
  serialized by ``get_state`` (binary array buffers), nothing is sent;
* ``kernel-like``: each widget message is also packed the way a kernel
  packs it (``jupyter_client.session.Session.serialize``: JSON and HMAC,
  buffers attached), the cost a live kernel pays before ZMQ.

Printed: median and p95 of the whole move (ms), and the share spent in
``Analyzer.update`` (the compiled analysis), the widget-side computation
(sensitivity, the views' frames, which include the model's lazily computed
loop results they read) and the mark updates (assignment and
serialization). Target: median <= 2 ms.

Inside a running event loop (as in a kernel) the explorer defers the op-amp
loop's crossover search until the slider rests (``SETTLE_S``); that refresh
is timed on its own. The third run has no event loop and pays it every move.

Usage: ``.venv/bin/python benchmarks/bench_explorer.py [--moves N]``
"""

from __future__ import annotations

import argparse
import asyncio
import statistics
import sys
import time
from collections import defaultdict
from collections.abc import Callable
from pathlib import Path
from typing import Any

import numpy as np

EXAMPLE = Path(__file__).resolve().parents[1] / "src" / "loopcraft" / "examples" / "bus48_loop.json"

__all__ = ["main", "measure"]


class _Timers:
    def __init__(self) -> None:
        self.acc: dict[str, float] = defaultdict(float)

    def wrap(self, owner: Any, attr: str, key: str) -> None:
        fn: Callable = getattr(owner, attr)

        def timed(*args, **kwargs):
            t0 = time.perf_counter()
            try:
                return fn(*args, **kwargs)
            finally:
                self.acc[key] += time.perf_counter() - t0

        setattr(owner, attr, timed)

    def take(self) -> dict[str, float]:
        out = dict(self.acc)
        self.acc.clear()
        return out


class _KernelLikeComm:
    """Stands in for a kernel comm: packs each message as ipykernel's session would."""

    def __init__(self, comm_id: str) -> None:
        from jupyter_client.session import Session

        self.comm_id = comm_id
        self.kernel = self  # ipywidgets sends only through a comm whose ``kernel`` is not None
        self.session = Session(key=b"bench-key")
        self.sent = 0

    def send(self, data=None, metadata=None, buffers=None) -> None:
        msg = self.session.msg("comm_msg", content={"comm_id": self.comm_id, "data": data},
                               metadata=metadata or {})
        frames = self.session.serialize(msg)
        frames.extend(memoryview(b) for b in (buffers or []))  # ZMQ sends buffers zero-copy
        self.sent += 1

    def on_msg(self, callback) -> None:
        pass

    def on_close(self, callback) -> None:
        pass

    def close(self, *args, **kwargs) -> None:
        pass


def measure(moves: int = 400, *, kernel_like: bool = False, event_loop: bool = True,
            name: str = "R2") -> dict[str, Any]:
    """See :func:`_measure`; with ``event_loop`` the moves run inside a running asyncio loop.

    In a kernel the slider events arrive inside the kernel's event loop, where
    the explorer defers the op-amp loop annotation until the slider rests;
    ``event_loop=False`` measures the plain-Python path that computes it on
    every move.
    """
    if not event_loop:
        return _measure(moves, kernel_like=kernel_like, name=name)

    async def run() -> dict[str, Any]:
        return _measure(moves, kernel_like=kernel_like, name=name)

    return asyncio.run(run())


def _measure(moves: int, *, kernel_like: bool, name: str) -> dict[str, Any]:
    """Time ``moves`` slider moves on the bus-converter explorer.

    Parameters
    ----------
    moves : int
        Timed moves (after 30 untimed ones).
    kernel_like : bool
        Pack every widget message as a kernel would (see module docstring).
    name : str
        The component moved.

    Returns
    -------
    dict
        ``total_ms`` (list of per-move times, ms) and ``parts`` (per-move dict of seconds by stage).
    """
    import loopcraft.widgets.explorer as explorer_mod
    from loopcraft.widgets import Explorer

    ex = Explorer(EXAMPLE)
    if kernel_like:
        from ipywidgets.widgets.widget import _instances

        for w in list(_instances.values()):
            w.comm = _KernelLikeComm(w.model_id)
    timers = _Timers()
    timers.wrap(ex._analyzer, "update", "analyzer_update")
    timers.wrap(explorer_mod, "sensitivity", "sensitivity")
    for view, attr in ((ex.bode, "frame"), (ex.pzmap, "frame"), (ex.formula, "frame")):
        timers.wrap(view, attr, "view_frames")
    for view, attr in ((ex.bode, "draw"), (ex.pzmap, "draw"), (ex.formula, "draw")):
        timers.wrap(view, attr, "mark_updates")
    timers.wrap(ex._panel.controls[name], "show_value", "entry_readout")
    slider = ex.sliders[name]
    base = slider.value
    values = base * np.exp(np.linspace(-0.35, 0.35, 23))
    totals: list[float] = []
    parts: list[dict[str, float]] = []
    for i in range(30 + moves):
        v = float(values[i % len(values)])
        if v == slider.value:
            v *= 1.001
        timers.take()
        t0 = time.perf_counter()
        slider.value = v
        dt = time.perf_counter() - t0
        p = timers.take()
        if i >= 30:
            totals.append(dt * 1e3)
            parts.append(p)
    settle = []
    for i in range(50):
        # A fresh analysis, as after the last move of a drag, then the deferred refresh.
        v = dict(ex._panel.values())
        v[name] = float(values[i % len(values)]) * 1.0001
        ex._analysis = ex._analyzer.update(v)
        ex._amp_stale = True
        t0 = time.perf_counter()
        ex.settle()
        settle.append((time.perf_counter() - t0) * 1e3)
    return {"total_ms": totals, "parts": parts, "settle_ms": settle}


def _pool(runs: list[dict[str, Any]]) -> dict[str, Any]:
    out: dict[str, Any] = {"total_ms": [], "parts": [], "settle_ms": [],
                           "run_medians_ms": [float(np.median(r["total_ms"])) for r in runs]}
    for r in runs:
        for k in ("total_ms", "parts", "settle_ms"):
            out[k] += r[k]
    return out


def _report(label: str, res: dict[str, Any]) -> None:
    tot = np.asarray(res["total_ms"])
    med, p95 = float(np.median(tot)), float(np.percentile(tot, 95))
    runs = ", ".join(f"{m:.2f}" for m in res.get("run_medians_ms", []))
    keys = ("analyzer_update", "sensitivity", "view_frames", "mark_updates", "entry_readout")
    sums = {k: sum(p.get(k, 0.0) for p in res["parts"]) * 1e3 for k in keys}
    total_sum = float(tot.sum())
    other = total_sum - sum(sums.values())
    print(f"{label}: median {med:.2f} ms, p95 {p95:.2f} ms over {tot.size} moves "
          f"(medians of the interleaved runs: {runs} ms)")
    for k in keys:
        per = statistics.median(p.get(k, 0.0) for p in res["parts"]) * 1e3
        print(f"    {k:16s} {100 * sums[k] / total_sum:5.1f} %   (median {per:.3f} ms)")
    print(f"    {'observer, rest':16s} {100 * other / total_sum:5.1f} %")
    widget_side = total_sum - sums["analyzer_update"]
    print(f"    deferred op-amp-loop refresh after the slider rests: median {np.median(res['settle_ms']):.2f} ms")
    print(f"    -> Analyzer.update {100 * sums['analyzer_update'] / total_sum:.0f} % / "
          f"widget side {100 * widget_side / total_sum:.0f} % "
          f"(widget-side median {med - statistics.median(p['analyzer_update'] for p in res['parts']) * 1e3:.2f} ms)")


def main(argv: list[str] | None = None) -> int:
    """Run both measurements and print the figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--moves", type=int, default=300, help="timed moves per run")
    parser.add_argument("--repeats", type=int, default=3, help="interleaved runs per configuration")
    args = parser.parse_args(argv)
    import os

    print(f"design: {EXAMPLE.name} (Type III, two-pole op-amp, buck plant); target median <= 2 ms")
    configs = {
        "in an event loop, dummy comm         ": {},
        "in an event loop, kernel-like packing": {"kernel_like": True},
        "no event loop (op-amp loop every move)": {"event_loop": False},
    }
    runs: dict[str, list] = {k: [] for k in configs}
    for _ in range(args.repeats):  # interleaved, so a change of machine load hits all alike
        for label, kw in configs.items():
            runs[label].append(measure(args.moves, **kw))
    load_1m, load_5m, _ = os.getloadavg()
    print(f"load average {load_1m:.2f} (1 min), {load_5m:.2f} (5 min) on {os.cpu_count()} CPUs")
    for label in configs:
        _report(label, _pool(runs[label]))
    return 0


if __name__ == "__main__":
    sys.exit(main())
