"""Browser latency of the stage explorer against the bare bqplot probe, in one JupyterLab run.

One JupyterLab server and one headless Chromium page measure, in turn:

1. the bare probe (one line on a log x scale, one FloatLogSlider);
2. ``loopcraft.Explorer("type3")``: keyboard steps on the R2 slider, timed to
   the first change of the Bode magnitude path (``.lc-bode-mag``);
3. the same explorer timed to the phase figure (``.lc-bode-phase``), whose
   marks are assigned after the magnitude figure's, so the whole Bode redraw
   is covered;
4. the bus-converter loop (``bus48_loop.json``: op-amp, plant, margins),
   R2 slider, magnitude figure.

Each move is timed inside the page from keydown to the first change of the
watched path's ``d`` (see ``tests/browser/lab.py``). Targets: explorer median
<= 50 ms, p95 <= 100 ms, median within 1.5x the probe's in the same run.

Usage: ``.venv/bin/python benchmarks/bench_explorer_browser.py [--moves N]``
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from pathlib import Path

_HERE = Path(__file__).resolve().parent
_TESTS_DIR = _HERE.parent / "tests"
for p in (str(_HERE), str(_TESTS_DIR)):
    if p not in sys.path:
        sys.path.insert(0, p)

from browser_latency import lab_session, measure_notebook  # noqa: E402

from browser.lab import PROBE_FIGURE_CLASS, PROBE_SLIDER_CLASS, write_probe_notebook  # noqa: E402
from browser.test_explorer_browser import (  # noqa: E402
    MAG_CLASS,
    PHASE_CLASS,
    delete_workspace,
    slider_class,
    write_explorer_notebook,
)

__all__ = ["main"]

EXAMPLE = _HERE.parent / "src" / "loopcraft" / "examples" / "bus48_loop.json"

MEDIAN_TARGET_MS = 50.0
P95_TARGET_MS = 100.0
RATIO_TARGET = 1.5


def _line(label: str, r: dict) -> str:
    return f"{label}: median {r['median_ms']:.1f} ms, p95 {r['p95_ms']:.1f} ms, n={r['n']}"


def main(argv: list[str] | None = None) -> int:
    """Measure the probe and the explorer in one browser run and print the figures."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--moves", type=int, default=25, help="timed moves per notebook (>= 20)")
    args = parser.parse_args(argv)
    if args.moves < 20:
        parser.error("--moves must be at least 20")

    with tempfile.TemporaryDirectory(prefix="loopcraft-bench-") as tmp:
        root = Path(tmp)
        probe_nb = write_probe_notebook(root, "probe.ipynb")
        type3_nb = write_explorer_notebook(root, "explorer.ipynb")
        loop_nb = write_explorer_notebook(root, "explorer_loop.ipynb", repr(str(EXAMPLE)))
        t0 = time.perf_counter()
        with lab_session(root) as (server, page):
            t_server = time.perf_counter() - t0
            runs = [
                ("probe (1 line, 1 log slider)", probe_nb, PROBE_FIGURE_CLASS, PROBE_SLIDER_CLASS),
                ("explorer type3, R2 -> magnitude", type3_nb, MAG_CLASS, slider_class("R2")),
                ("explorer type3, R2 -> phase", type3_nb, PHASE_CLASS, slider_class("R2")),
                ("explorer bus48 loop, R2 -> magnitude", loop_nb, MAG_CLASS, slider_class("R2")),
            ]
            results = {}
            for label, nb, fig, slider in runs:
                delete_workspace(server)  # no restored tab of the previous notebook
                results[label] = measure_notebook(nb.relative_to(root), root, fig, slider, args.moves,
                                                  server=server, page=page)
    load_1m, load_5m, _ = os.getloadavg()
    print(f"server start: {t_server:.1f} s; load average {load_1m:.2f} (1 min), {load_5m:.2f} (5 min) "
          f"on {os.cpu_count()} CPUs")
    probe = results[runs[0][0]]
    for label, *_ in runs:
        r = results[label]
        ratio = r["median_ms"] / probe["median_ms"]
        extra = "" if r is probe else f"; {ratio:.2f}x the probe's median"
        print(_line(label, r) + extra)
    main_run = results[runs[1][0]]
    ratio = main_run["median_ms"] / probe["median_ms"]
    ok = (main_run["median_ms"] <= MEDIAN_TARGET_MS and main_run["p95_ms"] <= P95_TARGET_MS
          and ratio <= RATIO_TARGET)
    print(f"targets (explorer type3 -> magnitude): median <= {MEDIAN_TARGET_MS:.0f} ms, "
          f"p95 <= {P95_TARGET_MS:.0f} ms, <= {RATIO_TARGET}x probe: {'met' if ok else 'NOT met'}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
