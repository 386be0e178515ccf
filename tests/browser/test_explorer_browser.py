"""The stage explorer in a real browser: JupyterLab in headless Chromium.

Opens a notebook (written here with nbformat) that shows
``loopcraft.Explorer("type3")``, runs it, waits for the bqplot SVG, presses a
real arrow key on the R2 slider and checks that the kernel round trip
redraws the Bode magnitude path, moves the entry text and highlights the
corners R2 sets. Hovering a pole shows the parts that set it. Screenshots go
to ``tests/_artifacts/``; ``make screenshot`` (LOOPCRAFT_UPDATE_DOCS=1) also copies
``explorer.png`` to ``docs/`` for the README, so ``make test`` never modifies tracked files. No
timing asserts: figures go to ``benchmarks/bench_explorer_browser.py``.
"""

from __future__ import annotations

import os
import shutil
import urllib.error
import urllib.request
from pathlib import Path

import pytest

from .lab import LabServer, open_and_run, screenshot, wait_for_svg

LINE = "svg g.curve path.line"
DOCS_DIR = Path(__file__).resolve().parents[2] / "docs"

#: CSS classes the explorer gives its parts (see loopcraft.widgets._theme.CSS_CLASS).
MAG_CLASS = "lc-bode-mag"
PHASE_CLASS = "lc-bode-phase"
PZ_CLASS = "lc-pzmap"

#: Viewport for the screenshots, CSS px.
SHOT_VIEWPORT = {"width": 1440, "height": 1900}


def slider_class(name: str) -> str:
    """CSS class of one component's slider."""
    return f"lc-slider-{name}"


def write_explorer_notebook(directory: Path, name: str = "explorer.ipynb", source: str = '"type3"',
                            extra: str = "") -> Path:
    """Write a notebook that shows ``loopcraft.Explorer(<source>)``.

    Parameters
    ----------
    directory : Path
        Existing directory (normally the server root).
    name : str
        File name.
    source : str
        Python expression for the explorer's argument.
    extra : str
        Code run after construction (``ex`` is the explorer), before it is shown.

    Returns
    -------
    Path
        The notebook written.
    """
    import nbformat

    nb = nbformat.v4.new_notebook()
    nb.metadata["kernelspec"] = {"name": "python3", "display_name": "Python 3 (ipykernel)",
                                 "language": "python"}
    nb.metadata["language_info"] = {"name": "python"}
    code = f"import loopcraft\n\nex = loopcraft.Explorer({source})\n{extra}"
    nb.cells = [nbformat.v4.new_markdown_cell("# Stage explorer"), nbformat.v4.new_code_cell(code),
                nbformat.v4.new_code_cell("ex")]
    path = Path(directory) / name
    nbformat.write(nb, str(path))
    return path


def delete_workspace(server: LabServer) -> None:
    """Delete JupyterLab's saved default workspace, so no earlier notebook tab is restored.

    A restored tab of a notebook whose session was deleted starts a second
    kernel while the new notebook runs, which can swallow "Run All".
    """
    req = urllib.request.Request(f"{server.url}/lab/api/workspaces/default", method="DELETE",
                                 headers={"Authorization": f"token {server.token}"})
    try:
        urllib.request.urlopen(req, timeout=10).read()
    except urllib.error.HTTPError as err:
        if err.code != 404:  # 404: nothing saved yet
            raise


@pytest.fixture
def clean_workspace(lab_server: LabServer):
    """No restored tabs before the test, none left behind after it."""
    delete_workspace(lab_server)
    yield
    delete_workspace(lab_server)


def _accept_dialogs(page) -> list[str]:
    """Accept any JupyterLab dialog that covers the page (e.g. a kernel choice after a session ends).

    Returns the list the dialogs' texts are appended to, for the failure message.
    """
    seen: list[str] = []
    dialog = page.locator(".jp-Dialog")

    def accept() -> None:
        seen.append(dialog.first.inner_text())
        dialog.locator(".jp-mod-accept").first.click()

    page.add_locator_handler(dialog, accept)
    return seen


def _changed(page, selector: str, before: str, timeout_ms: int = 15_000) -> None:
    page.wait_for_function(
        "([sel, before]) => { const e = document.querySelector(sel);"
        " return e && e.getAttribute('d') !== before; }",
        arg=[selector, before], timeout=timeout_ms)


@pytest.mark.browser
def test_explorer_slider_key_redraws_bode(lab_server: LabServer, clean_workspace, lab_page,
                                          artifacts_dir: Path) -> None:
    nb = write_explorer_notebook(lab_server.root_dir)
    page = lab_page
    page.set_viewport_size(SHOT_VIEWPORT)  # tall enough for the whole explorer in one screenshot
    _accept_dialogs(page)
    open_and_run(page, lab_server, nb.relative_to(lab_server.root_dir))
    mag = wait_for_svg(page, MAG_CLASS)
    wait_for_svg(page, PHASE_CLASS)
    page.wait_for_selector(f".{PZ_CLASS} svg path.dot", timeout=30_000)
    page.wait_for_selector(".lc-formula table", timeout=30_000)
    path = mag.locator(LINE).first
    d_before = path.get_attribute("d")
    assert d_before and "NaN" not in d_before
    entry = page.locator(".lc-entry-R2 input").first
    assert entry.input_value() == "22k"  # the slider kept the exact design value

    handle = page.locator(f".{slider_class('R2')} .noUi-handle").first
    handle.focus()
    page.keyboard.press("ArrowRight")
    _changed(page, f".{MAG_CLASS} {LINE}", d_before)
    d_after = path.get_attribute("d")
    assert d_after and d_after != d_before and "NaN" not in d_after
    # The kernel answered: the entry shows the new value (one key step, 0.02 decade, up from
    # the grid point nearest 22k) and the formula table highlights what R2 moves.
    page.wait_for_function("() => document.querySelector('.lc-entry-R2 input').value !== '22k'",
                           timeout=15_000)
    new_text = entry.input_value()
    assert new_text.endswith("k") and 22.0 < float(new_text[:-1]) < 24.0
    page.wait_for_function("() => document.querySelector('.lc-formula').innerText.includes('R2 moves')",
                           timeout=15_000)

    # Hover a pole: the readout names the parts that set it.
    page.locator(f".{PZ_CLASS} svg path.dot").last.hover()
    page.wait_for_function("() => [...document.querySelectorAll('.lc-explorer')]"
                           ".some(e => e.innerText.includes('set by') || e.innerText.includes('topology'))",
                           timeout=15_000)

    page.mouse.move(5, 5)
    shot = screenshot(page, artifacts_dir / "explorer.png", selector=".jp-OutputArea-output:has(.lc-explorer)")
    assert shot.stat().st_size > 20_000
    if os.environ.get("LOOPCRAFT_UPDATE_DOCS") == "1":  # `make screenshot` refreshes the README image
        DOCS_DIR.mkdir(exist_ok=True)
        shutil.copyfile(shot, DOCS_DIR / "explorer.png")


@pytest.mark.browser
def test_explorer_with_opamp_and_plant(lab_server: LabServer, clean_workspace, lab_page,
                                       artifacts_dir: Path) -> None:
    example = Path(__file__).resolve().parents[2] / "src" / "loopcraft" / "examples" / "bus48_loop.json"
    nb = write_explorer_notebook(lab_server.root_dir, "explorer_loop.ipynb", repr(str(example)),
                                 extra="ex.sections.selected_index = 1\nex.spread.choice.value = 'r5c10'\n")
    page = lab_page
    page.set_viewport_size(SHOT_VIEWPORT)
    _accept_dialogs(page)
    open_and_run(page, lab_server, nb.relative_to(lab_server.root_dir))
    mag = wait_for_svg(page, MAG_CLASS)
    phase = wait_for_svg(page, PHASE_CLASS)
    # Three solid curves (ideal, real op-amp, loop gain) in each figure, margins annotated.
    assert mag.locator(LINE).count() >= 4 and phase.locator(LINE).count() >= 4
    page.wait_for_function("() => document.querySelector('.lc-margins').innerText.includes('phase margin')",
                           timeout=15_000)
    text = page.locator(".lc-margins").first.inner_text()
    assert "Loop gain" in text and "gain margin" in text and "Op-amp loop" in text
    d_phase = phase.locator(LINE).first.get_attribute("d")
    margins_before = page.locator(".lc-margins").first.inner_text()
    page.locator(f".{slider_class('R2')} .noUi-handle").first.focus()
    page.keyboard.press("ArrowRight")
    _changed(page, f".{PHASE_CLASS} {LINE}", d_phase)
    # R2 is in the noise gain, so the op-amp loop moves too (the frequency where the real
    # response departs from the ideal by 1 dB drops from 192 kHz to 188 kHz); the explorer
    # refreshes that annotation once the slider rests (SETTLE_S = 0.25 s).
    page.wait_for_function(
        "before => { const t = document.querySelector('.lc-margins').innerText;"
        " return t.split('Op-amp loop')[1] !== before.split('Op-amp loop')[1]; }",
        arg=margins_before, timeout=15_000)
    screenshot(page, artifacts_dir / "explorer_loop.png", selector=".jp-OutputArea-output:has(.lc-explorer)")


def test_unstable_loop_says_so_first(lab_server: LabServer, clean_workspace, lab_page, artifacts_dir: Path) -> None:
    # An integrator around four real poles: unstable (two closed-loop right-half-plane poles,
    # counted by tests/test_stability.py against the Routh-Hurwitz criterion and numpy.roots).
    design = ('loopcraft.Design.from_dict({"loopcraft": 1, "title": "Invented demo: unstable loop", '
              '"stage": {"kind": "inverting", "input": "R1", "feedback": "C1"}, '
              '"values": {"R1": "10k", "C1": "10n"}, '
              '"plant": {"kind": "general", "gain": 424.7433, "poles_hz": [1000, 1000, 1000, 1000]}})')
    nb = write_explorer_notebook(lab_server.root_dir, "explorer_unstable.ipynb", design)
    page = lab_page
    page.set_viewport_size(SHOT_VIEWPORT)
    _accept_dialogs(page)
    open_and_run(page, lab_server, nb.relative_to(lab_server.root_dir))
    wait_for_svg(page, MAG_CLASS)
    wait_for_svg(page, PHASE_CLASS)
    page.wait_for_function("() => document.querySelector('.lc-margins').innerText.includes('UNSTABLE')",
                           timeout=15_000)
    text = page.locator(".lc-margins").first.inner_text()
    assert text.strip().startswith("UNSTABLE") and "not a margin" in text
    assert "phase margin" not in text
    # the verdict word is drawn in the error colour, not the text colour
    color = page.evaluate("() => getComputedStyle(document.querySelector('.lc-margins span')).color")
    assert color == "rgb(161, 40, 40)"
    # and it heads the figure, above the curves
    assert "closed loop UNSTABLE" in page.locator(".lc-legend").first.inner_text()
    screenshot(page, artifacts_dir / "explorer_unstable.png", selector=".jp-OutputArea-output:has(.lc-explorer)")
