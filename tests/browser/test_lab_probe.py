"""The browser harness end to end on the probe notebook.

Opens the probe (one bqplot line on a log x scale, one FloatLogSlider) in
JupyterLab in headless Chromium, runs it, presses a real key on the slider
and checks that the kernel round trip redraws the line. No timing asserts:
figures go to benchmarks/browser_latency.py.
"""

from __future__ import annotations

import math
from pathlib import Path

import pytest

from .lab import (
    PROBE_FIGURE_CLASS,
    PROBE_SLIDER_CLASS,
    LabServer,
    measure_slider_latency,
    open_and_run,
    screenshot,
    wait_for_svg,
    write_probe_notebook,
)

LINE = "svg g.curve path.line"


@pytest.mark.browser
def test_probe_slider_key_redraws_line(
    lab_server: LabServer, lab_page, artifacts_dir: Path
) -> None:
    nb_path = write_probe_notebook(lab_server.root_dir, "probe.ipynb")
    page = lab_page

    open_and_run(page, lab_server, nb_path.relative_to(lab_server.root_dir))
    figure = wait_for_svg(page, PROBE_FIGURE_CLASS)
    path = figure.locator(LINE).first
    d_before = path.get_attribute("d")
    assert d_before  # the line was drawn

    # A trusted key press on the focused slider handle (not a synthetic event).
    handle = page.locator(f".{PROBE_SLIDER_CLASS} .noUi-handle").first
    readout_before = page.locator(f".{PROBE_SLIDER_CLASS} .widget-readout").first.inner_text()
    handle.focus()
    page.keyboard.press("ArrowRight")
    page.wait_for_function(
        "([sel, before]) => document.querySelector(sel).getAttribute('d') !== before",
        arg=[f".{PROBE_FIGURE_CLASS} {LINE}", d_before],
        timeout=15_000,
    )
    d_after = path.get_attribute("d")
    assert d_after and d_after != d_before
    assert "NaN" not in d_after
    # One step moves the exponent by step=0.05: value 10**(3 + 0.05) Hz, shown with 4 digits.
    # From memory: a log slider's value is base**exponent and it steps the exponent.
    readout_after = page.locator(f".{PROBE_SLIDER_CLASS} .widget-readout").first.inner_text()
    assert readout_before != readout_after
    assert math.isclose(float(readout_after), 10**3.05, rel_tol=5e-4)

    # The in-page timer returns one finite latency per move (no timing assertion).
    latencies = measure_slider_latency(
        page, figure_class=PROBE_FIGURE_CLASS, slider_class=PROBE_SLIDER_CLASS, moves=4
    )
    assert len(latencies) == 4
    assert all(math.isfinite(x) and x > 0 for x in latencies)

    output_sel = f".jp-OutputArea-output:has(.{PROBE_FIGURE_CLASS})"
    shot = screenshot(page, artifacts_dir / "probe.png", selector=output_sel)
    assert shot.stat().st_size > 1000
