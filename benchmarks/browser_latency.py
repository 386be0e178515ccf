"""Browser latency: keyboard slider step to redrawn bqplot line, in JupyterLab.

Library use (a later benchmark adds the explorer notebook in the same run)::

    from browser_latency import lab_session, measure_notebook
    with lab_session(root) as (server, page):
        probe = measure_notebook("probe.ipynb", root, "lc-probe-fig", "lc-probe-slider",
                                 server=server, page=page)

Script use: ``.venv/bin/python benchmarks/browser_latency.py [--moves N]`` measures
the bare probe (one line on a log x scale, one FloatLogSlider) and prints its
median and p95 in ms. Each move is timed inside the page, from keydown to the
first change of the line's ``d`` attribute (see ``tests/browser/lab.py``).
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
import time
from collections.abc import Iterator
from contextlib import ExitStack, contextmanager
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

_TESTS_DIR = Path(__file__).resolve().parents[1] / "tests"
if str(_TESTS_DIR) not in sys.path:
    sys.path.insert(0, str(_TESTS_DIR))

from browser.lab import (  # noqa: E402  (needs the sys.path entry above)
    PROBE_FIGURE_CLASS,
    PROBE_SLIDER_CLASS,
    LabHarnessError,
    LabServer,
    browser_page,
    jupyter_lab,
    measure_slider_latency,
    open_and_run,
    wait_for_svg,
    write_probe_notebook,
)

if TYPE_CHECKING:
    from playwright.sync_api import Page

__all__ = ["DEFAULT_WARMUP", "lab_session", "summarize_ms", "measure_notebook", "main"]

#: Moves done and discarded before timing (first steps pay for JIT and caches).
DEFAULT_WARMUP = 3


def summarize_ms(latencies_ms: list[float]) -> dict[str, float | int]:
    """Summarize per-move latencies.

    Parameters
    ----------
    latencies_ms : list of float
        Latency of each move in ms.

    Returns
    -------
    dict
        ``median_ms`` (ms), ``p95_ms`` (ms, linear interpolation between
        order statistics) and ``n`` (number of moves).
    """
    if not latencies_ms:
        raise LabHarnessError(f"latencies_ms={latencies_ms!r}; expected at least one value")
    arr = np.asarray(latencies_ms, dtype=float)
    return {
        "median_ms": float(np.median(arr)),
        "p95_ms": float(np.percentile(arr, 95)),
        "n": int(arr.size),
    }


@contextmanager
def lab_session(root_dir: Path) -> Iterator[tuple[LabServer, Page]]:
    """Start one JupyterLab server and one Chromium page to measure several notebooks.

    Parameters
    ----------
    root_dir : Path
        Server root; notebooks are given relative to it.

    Yields
    ------
    tuple of (LabServer, playwright.sync_api.Page)
    """
    with jupyter_lab(Path(root_dir)) as server, browser_page() as page:
        yield server, page


def measure_notebook(
    rel_nb_path: str | Path,
    root_dir: Path,
    figure_class: str,
    slider_class: str,
    moves: int = 25,
    *,
    warmup: int = DEFAULT_WARMUP,
    server: LabServer | None = None,
    page: Page | None = None,
) -> dict[str, float | int]:
    """Open and run one notebook, then time keyboard slider steps.

    Parameters
    ----------
    rel_nb_path : str or Path
        Notebook path relative to ``root_dir``.
    root_dir : Path
        Directory holding the notebook (the server root).
    figure_class : str
        CSS class of the bqplot figure whose first line is watched.
    slider_class : str
        CSS class of the slider that is stepped with the arrow keys.
    moves : int, optional
        Number of timed moves (alternating right/left).
    warmup : int, optional
        Untimed moves done first and discarded.
    server : LabServer, optional
        Running server rooted at ``root_dir``; one is started when omitted.
    page : playwright.sync_api.Page, optional
        Page to use; a fresh browser is started when omitted.

    Returns
    -------
    dict
        ``median_ms`` and ``p95_ms`` in milliseconds, ``n`` timed moves.

    Raises
    ------
    LabHarnessError
        If ``server`` serves another root, or the harness fails.
    """
    root_dir = Path(root_dir).resolve()
    with ExitStack() as stack:
        if server is None:
            server = stack.enter_context(jupyter_lab(root_dir))
        elif server.root_dir != root_dir:
            raise LabHarnessError(
                f"server.root_dir={str(server.root_dir)!r} but root_dir={str(root_dir)!r}; "
                "expected the server to serve root_dir"
            )
        if page is None:
            page = stack.enter_context(browser_page())
        try:
            open_and_run(page, server, rel_nb_path)
            wait_for_svg(page, figure_class)
            if warmup > 0:
                measure_slider_latency(
                    page, figure_class=figure_class, slider_class=slider_class, moves=warmup
                )
            latencies = measure_slider_latency(
                page, figure_class=figure_class, slider_class=slider_class, moves=moves
            )
        finally:
            # Free the kernel so the next notebook in the same run starts clean.
            server.delete_sessions()
    return summarize_ms(latencies)


def main(argv: list[str] | None = None) -> int:
    """Measure the bare probe and print median and p95 in ms."""
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--moves", type=int, default=25, help="timed moves (default 25)")
    parser.add_argument("--warmup", type=int, default=DEFAULT_WARMUP, help="discarded moves")
    args = parser.parse_args(argv)

    with tempfile.TemporaryDirectory(prefix="loopcraft-bench-") as tmp:
        root = Path(tmp)
        nb = write_probe_notebook(root, "probe.ipynb")
        t0 = time.perf_counter()
        with lab_session(root) as (server, page):
            t_server = time.perf_counter() - t0
            probe = measure_notebook(
                nb.relative_to(root),
                root,
                PROBE_FIGURE_CLASS,
                PROBE_SLIDER_CLASS,
                args.moves,
                warmup=args.warmup,
                server=server,
                page=page,
            )
    load_1m, load_5m, _ = os.getloadavg()
    print(
        f"server start: {t_server:.1f} s; load average {load_1m:.2f} (1 min), "
        f"{load_5m:.2f} (5 min) on {os.cpu_count()} CPUs"
    )
    print(
        f"probe (1 line, 1 log slider): median {probe['median_ms']:.1f} ms, "
        f"p95 {probe['p95_ms']:.1f} ms, n={probe['n']}"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
