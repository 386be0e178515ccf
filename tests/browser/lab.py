"""Real-browser harness: a private JupyterLab server driven by headless Chromium.

The harness starts ``python -m jupyter lab`` from the project venv with every
per-user directory (runtime, config, data, settings, workspaces) moved into a
temporary directory, opens notebooks in Debian's Chromium through the
Playwright sync API, runs them and measures how long a keyboard step on a
slider takes to change a bqplot line.

Latency is timed inside the page (a ``MutationObserver`` on the line's ``d``
attribute, ``performance.now()`` from key dispatch to mutation), so no
Python/Playwright round trip is counted.

The probe notebook (one log-x line, one log slider) is built here, in one
place, for both the probe test and ``benchmarks/browser_latency.py``.
"""

from __future__ import annotations

import json
import math
import os
import re
import shutil
import signal
import socket
import subprocess
import sys
import tempfile
import time
import urllib.error
import urllib.parse
import urllib.request
import uuid
import warnings
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

from loopcraft.errors import LoopcraftError

if TYPE_CHECKING:  # playwright is imported lazily so collection works without it
    from playwright.sync_api import Locator, Page

__all__ = [
    "CHROMIUM_PATH",
    "CHROMIUM_ARGS",
    "PROBE_FIGURE_CLASS",
    "PROBE_SLIDER_CLASS",
    "LabHarnessError",
    "LabServer",
    "jupyter_lab",
    "browser_page",
    "open_and_run",
    "wait_for_svg",
    "measure_slider_latency",
    "chromium_available",
    "screenshot",
    "write_probe_notebook",
]

#: Debian's Chromium; Playwright's own browser download does not work on these machines.
CHROMIUM_PATH = Path("/usr/bin/chromium")

#: Launch flags (``--headless`` is added by Playwright for ``headless=True``).
#: Without the background-networking flags Chromium keeps calling hosts that
#: this network refuses.
CHROMIUM_ARGS: tuple[str, ...] = (
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
)

#: CSS class of the probe notebook's bqplot figure.
PROBE_FIGURE_CLASS = "lc-probe-fig"
#: CSS class of the probe notebook's FloatLogSlider.
PROBE_SLIDER_CLASS = "lc-probe-slider"

_STATUS_POLL_S = 0.25
_SERVER_START_TIMEOUT_S = 60.0
_SERVER_STOP_TIMEOUT_S = 10.0


class LabHarnessError(LoopcraftError, RuntimeError):
    """The browser harness could not start, drive or measure JupyterLab."""


# --------------------------------------------------------------------------- server


@dataclass(frozen=True)
class LabServer:
    """A running private JupyterLab server.

    Parameters
    ----------
    url : str
        Base URL without trailing slash, e.g. ``"http://127.0.0.1:8899"``.
    token : str
        Authentication token (sent as ``?token=`` or ``Authorization: token``).
    root_dir : Path
        Directory served as the notebook root.
    """

    url: str
    token: str
    root_dir: Path

    def notebook_url(self, rel_path: str | Path) -> str:
        """Return the JupyterLab URL that opens a notebook.

        Parameters
        ----------
        rel_path : str or Path
            Notebook path relative to ``root_dir`` (POSIX separators).

        Returns
        -------
        str
            ``<url>/lab/tree/<rel_path>?token=<token>``.
        """
        quoted = urllib.parse.quote(Path(rel_path).as_posix())
        return f"{self.url}/lab/tree/{quoted}?token={urllib.parse.quote(self.token)}"

    def _request(self, method: str, api_path: str, timeout_s: float = 10.0) -> bytes:
        req = urllib.request.Request(
            f"{self.url}{api_path}",
            method=method,
            headers={"Authorization": f"token {self.token}"},
        )
        with urllib.request.urlopen(req, timeout=timeout_s) as resp:
            return resp.read()

    def delete_sessions(self) -> None:
        """Delete every session (and so shut down its kernel) on the server.

        JupyterLab reuses the kernel of an already-open notebook across
        browser contexts, so tests call this between notebooks.

        Raises
        ------
        LabHarnessError
            If the sessions API does not answer.
        """
        try:
            sessions = json.loads(self._request("GET", "/api/sessions"))
            for session in sessions:
                self._request("DELETE", f"/api/sessions/{session['id']}")
        except (urllib.error.URLError, OSError, KeyError, json.JSONDecodeError) as exc:
            raise LabHarnessError(
                f"could not delete sessions on server {self.url!r}: {exc!r}; "
                "expected GET/DELETE /api/sessions to answer"
            ) from exc


def _free_port() -> int:
    with socket.socket(socket.AF_INET, socket.SOCK_STREAM) as sock:
        sock.bind(("127.0.0.1", 0))
        return int(sock.getsockname()[1])


def _venv_python() -> Path:
    """Return the project venv interpreter, else the running one if it is a venv."""
    repo = Path(__file__).resolve().parents[2]
    venv_py = repo / ".venv" / "bin" / "python"
    if venv_py.exists():
        return venv_py
    # Running from some other environment: use it only if it is itself a venv.
    if sys.prefix != sys.base_prefix:
        return Path(sys.executable)
    raise LabHarnessError(
        f"project venv interpreter {str(venv_py)!r} not found and {sys.executable!r} "
        "is not a virtual environment; expected `make venv` to have been run"
    )


def _write_lab_settings(settings_dir: Path) -> None:
    """Disable the news/update pop-up and notebook windowing in a private settings dir."""
    files = {
        "@jupyterlab/apputils-extension/notification.jupyterlab-settings": {
            "fetchNews": "false",
            "checkForUpdates": False,
        },
        # Attach every cell to the DOM so prompts of off-screen cells can be read.
        "@jupyterlab/notebook-extension/tracker.jupyterlab-settings": {
            "windowingMode": "none",
        },
    }
    for rel, content in files.items():
        target = settings_dir / rel
        target.parent.mkdir(parents=True, exist_ok=True)
        target.write_text(json.dumps(content, indent=2), encoding="utf-8")


def _log_tail(log_path: Path, n_chars: int = 3000) -> str:
    try:
        return log_path.read_text(encoding="utf-8", errors="replace")[-n_chars:]
    except OSError:
        return "<no log>"


def _stop_process_group(proc: subprocess.Popen[bytes], url: str, token: str) -> None:
    # Ask the server to shut its kernels down (kernels live in their own sessions).
    try:
        req = urllib.request.Request(
            f"{url}/api/shutdown", method="POST", headers={"Authorization": f"token {token}"}
        )
        urllib.request.urlopen(req, timeout=5).read()
    except (urllib.error.URLError, OSError):
        pass  # already gone or not answering: the signals below still apply
    try:
        proc.wait(timeout=_SERVER_STOP_TIMEOUT_S / 2)
    except subprocess.TimeoutExpired:
        pass
    for sig in (signal.SIGTERM, signal.SIGKILL):
        if proc.poll() is not None:
            break
        try:
            os.killpg(proc.pid, sig)
        except ProcessLookupError:
            break
        try:
            proc.wait(timeout=_SERVER_STOP_TIMEOUT_S)
        except subprocess.TimeoutExpired:
            continue
    # Stragglers left in the server's process group (the group id is the server pid).
    try:
        os.killpg(proc.pid, signal.SIGKILL)
    except (ProcessLookupError, PermissionError):
        pass


@contextmanager
def jupyter_lab(root_dir: Path, *, port: int | None = None) -> Iterator[LabServer]:
    """Run a private JupyterLab server for the duration of a ``with`` block.

    Parameters
    ----------
    root_dir : Path
        Directory to serve as the notebook root.
    port : int, optional
        TCP port on 127.0.0.1; a free one is chosen when omitted.

    Yields
    ------
    LabServer
        The running server; it answers ``/api/status`` with 200.

    Raises
    ------
    LabHarnessError
        If the server exits early or does not answer within 60 s.
    """
    root_dir = Path(root_dir).resolve()
    if not root_dir.is_dir():
        raise LabHarnessError(f"root_dir {str(root_dir)!r} is not a directory; expected one")
    port = _free_port() if port is None else port
    token = uuid.uuid4().hex
    url = f"http://127.0.0.1:{port}"
    private = Path(tempfile.mkdtemp(prefix="loopcraft-lab-"))
    env = dict(os.environ)
    for var, sub in (
        ("JUPYTER_RUNTIME_DIR", "runtime"),
        ("JUPYTER_CONFIG_DIR", "config"),
        ("JUPYTER_DATA_DIR", "data"),
        ("JUPYTERLAB_SETTINGS_DIR", "settings"),
        ("JUPYTERLAB_WORKSPACES_DIR", "workspaces"),
        ("IPYTHONDIR", "ipython"),
    ):
        (private / sub).mkdir()
        env[var] = str(private / sub)
    env.pop("JUPYTER_TOKEN", None)
    _write_lab_settings(private / "settings")

    cmd = [
        str(_venv_python()),
        "-m",
        "jupyter",
        "lab",
        f"--IdentityProvider.token={token}",
        "--ServerApp.ip=127.0.0.1",
        f"--ServerApp.port={port}",
        "--ServerApp.port_retries=0",
        f"--ServerApp.root_dir={root_dir}",
        "--no-browser",
        "--LabApp.check_for_updates_class=jupyterlab.NeverCheckForUpdate",
    ]
    if os.geteuid() == 0:
        cmd.append("--allow-root")

    log_path = private / "lab.log"
    log = log_path.open("wb")
    proc = subprocess.Popen(
        cmd,
        cwd=root_dir,
        env=env,
        stdin=subprocess.DEVNULL,
        stdout=log,
        stderr=subprocess.STDOUT,
        start_new_session=True,
    )
    try:
        deadline = time.monotonic() + _SERVER_START_TIMEOUT_S
        status_url = f"{url}/api/status?token={token}"
        while True:
            if proc.poll() is not None:
                raise LabHarnessError(
                    f"jupyter lab exited early with code {proc.returncode!r}; "
                    f"expected it to serve {url!r}. Log tail:\n{_log_tail(log_path)}"
                )
            try:
                with urllib.request.urlopen(status_url, timeout=2) as resp:
                    if resp.status == 200:
                        break
            except (urllib.error.URLError, OSError):
                pass
            if time.monotonic() > deadline:
                raise LabHarnessError(
                    f"jupyter lab at {url!r} did not answer /api/status within "
                    f"{_SERVER_START_TIMEOUT_S!r} s; expected 200. Log tail:\n{_log_tail(log_path)}"
                )
            time.sleep(_STATUS_POLL_S)
        yield LabServer(url=url, token=token, root_dir=root_dir)
    finally:
        _stop_process_group(proc, url, token)
        log.close()
        shutil.rmtree(private, ignore_errors=True)


# --------------------------------------------------------------------------- browser


def chromium_available() -> bool:
    """Tell whether Debian's Chromium is installed at :data:`CHROMIUM_PATH`.

    Returns
    -------
    bool
        True when the file exists and is executable.
    """
    return CHROMIUM_PATH.is_file() and os.access(CHROMIUM_PATH, os.X_OK)


@contextmanager
def browser_page(*, width: int = 1400, height: int = 1000) -> Iterator[Page]:
    """Open one page in headless Chromium with a fresh profile.

    Parameters
    ----------
    width : int, optional
        Viewport width in CSS pixels.
    height : int, optional
        Viewport height in CSS pixels.

    Yields
    ------
    playwright.sync_api.Page
        A blank page; the browser closes when the block ends.

    Raises
    ------
    LabHarnessError
        If Chromium is not installed at :data:`CHROMIUM_PATH`.
    """
    if not chromium_available():
        raise LabHarnessError(
            f"chromium not found at {str(CHROMIUM_PATH)!r}; expected an executable "
            "(.ci/install-browser.sh installs it)"
        )
    from playwright.sync_api import sync_playwright

    with sync_playwright() as pw:
        browser = pw.chromium.launch(
            executable_path=str(CHROMIUM_PATH), headless=True, args=list(CHROMIUM_ARGS)
        )
        try:
            context = browser.new_context(viewport={"width": width, "height": height})
            try:
                yield context.new_page()
            finally:
                context.close()
        finally:
            browser.close()


# JS: state of the notebook's code-cell prompts, e.g. {"total": 2, "busy": 0, "done": 2}.
_PROMPTS_JS = r"""
() => {
  const prompts = [...document.querySelectorAll(
      '.jp-NotebookPanel:not(.lm-mod-hidden) .jp-CodeCell .jp-InputArea-prompt')];
  const texts = prompts.map(p => p.textContent.trim());
  return {
    total: texts.length,
    busy: texts.filter(t => t.includes('*')).length,
    done: texts.filter(t => /\[\d+\]/.test(t)).length,
  };
}
"""

_KERNEL_IDLE_JS = r"""
() => [...document.querySelectorAll('.jp-StatusBar-Widget, .jp-StatusBar-TextItem')]
        .some(e => /\|\s*Idle\b/.test(e.textContent))
"""


def _wait_kernel_idle(page: Page, timeout_s: float) -> None:
    page.wait_for_function(_KERNEL_IDLE_JS, timeout=timeout_s * 1000)


def _click_run_all(page: Page) -> None:
    page.get_by_role("menuitem", name="Run", exact=True).click()
    page.get_by_role("menuitem", name=re.compile(r"^Run All Cells")).click()


def open_and_run(
    page: Page, server: LabServer, rel_path: str | Path, *, timeout_s: float = 120
) -> None:
    """Open a notebook in JupyterLab, run all cells and wait for them to finish.

    Parameters
    ----------
    page : playwright.sync_api.Page
        Page from :func:`browser_page`.
    server : LabServer
        Server from :func:`jupyter_lab`.
    rel_path : str or Path
        Notebook path relative to ``server.root_dir``.
    timeout_s : float, optional
        Overall budget in seconds for opening, kernel start and execution.

    Raises
    ------
    LabHarnessError
        If Run All is ignored twice, a cell stops the run (error) or the
        budget runs out.
    """
    from playwright.sync_api import TimeoutError as PlaywrightTimeoutError

    deadline = time.monotonic() + timeout_s

    def left_ms() -> float:
        return max(1.0, (deadline - time.monotonic()) * 1000)

    page.goto(server.notebook_url(rel_path), wait_until="domcontentloaded", timeout=left_ms())
    page.wait_for_selector(".jp-NotebookPanel .jp-CodeCell", timeout=left_ms())
    # "Run All" clicked before the kernel exists is silently ignored: wait for Idle first.
    _wait_kernel_idle(page, left_ms() / 1000)

    state: dict[str, int] = {}
    for attempt in range(2):
        _click_run_all(page)
        try:
            # The run has started once the first prompt shows [*] or [n].
            page.wait_for_function(
                f"() => ({_PROMPTS_JS})().busy + ({_PROMPTS_JS})().done > 0",
                timeout=min(10_000.0, left_ms()),
            )
            break
        except PlaywrightTimeoutError as exc:
            if attempt == 1:
                raise LabHarnessError(
                    f"Run All on {str(rel_path)!r} did not start any cell; "
                    "expected a [*] or [n] prompt within 10 s"
                ) from exc

    stalled_since: float | None = None
    while True:
        state = page.evaluate(_PROMPTS_JS)
        if state["total"] > 0 and state["done"] == state["total"]:
            return
        if state["busy"] == 0 and page.evaluate(_KERNEL_IDLE_JS):
            # Nothing running, kernel idle, yet unnumbered cells: an error stopped the run.
            stalled_since = stalled_since or time.monotonic()
            if time.monotonic() - stalled_since > 3.0:
                errors = page.locator(".jp-OutputArea-output[data-mime-type*='stderr']")
                text = "\n".join(errors.all_inner_texts())[-3000:]
                raise LabHarnessError(
                    f"notebook {str(rel_path)!r} stopped after {state['done']!r} of "
                    f"{state['total']!r} code cells; expected all to run. Stderr:\n{text}"
                )
        else:
            stalled_since = None
        if time.monotonic() > deadline:
            raise LabHarnessError(
                f"notebook {str(rel_path)!r} did not finish within {timeout_s!r} s; "
                f"prompt state {state!r}, expected done == total"
            )
        time.sleep(0.2)


def wait_for_svg(page: Page, css_class: str, timeout_s: float = 60) -> Locator:
    """Wait for a bqplot figure with a CSS class to draw a line.

    Parameters
    ----------
    page : playwright.sync_api.Page
        Page showing the notebook.
    css_class : str
        Class given to the figure from Python with ``fig.add_class(...)``.
    timeout_s : float, optional
        Time budget in seconds.

    Returns
    -------
    playwright.sync_api.Locator
        The figure element (``.<css_class>``); its first line is
        ``locator.locator("svg g.curve path.line").first``.
    """
    page.wait_for_function(
        """cls => {
            const p = document.querySelector('.' + cls + ' svg g.curve path.line');
            const d = p && p.getAttribute('d');
            return !!d && d.length > 10 && !d.includes('NaN');
        }""",
        arg=css_class,
        timeout=timeout_s * 1000,
    )
    return page.locator(f".{css_class}").first


# JS: time, inside the page, from keydown dispatch to the first change of `d`.
_LATENCY_JS = r"""
async ({figureClass, sliderClass, moves, timeoutMs, settleMs}) => {
  const sleep = ms => new Promise(r => setTimeout(r, ms));
  const slider = document.querySelector('.' + sliderClass);
  if (!slider) throw new Error('no element with class ' + sliderClass);
  const handle = slider.querySelector('.noUi-handle') || slider.querySelector('[tabindex]');
  if (!handle) throw new Error('slider .' + sliderClass + ' has no focusable handle');
  handle.scrollIntoView({block: 'center'});
  handle.focus();
  const latencies = [];
  const changes = [];
  for (let i = 0; i < moves; i++) {
    const path = document.querySelector('.' + figureClass + ' svg g.curve path.line');
    if (!path) throw new Error('figure .' + figureClass + ' has no svg g.curve path.line');
    const key = i % 2 === 0 ? 'ArrowRight' : 'ArrowLeft';
    let before = path.getAttribute('d');
    let count = 0;
    let t1 = null;
    let observer;
    let timer;
    const changed = new Promise((resolve, reject) => {
      observer = new MutationObserver(() => {
        const d = path.getAttribute('d');
        if (d !== before) {
          count += 1;
          before = d;
          if (t1 === null) { t1 = performance.now(); resolve(); }
        }
      });
      observer.observe(path, {attributes: true, attributeFilter: ['d']});
      timer = setTimeout(
        () => reject(new Error('no change of d within ' + timeoutMs + ' ms after ' + key)),
        timeoutMs);
    });
    const ev = new KeyboardEvent('keydown', {key, code: key, bubbles: true, cancelable: true});
    const t0 = performance.now();
    handle.dispatchEvent(ev);
    try { await changed; } finally { clearTimeout(timer); }
    latencies.push(t1 - t0);
    await sleep(settleMs);  // let the echo settle; count any further d changes
    observer.disconnect();
    changes.push(count);
  }
  return {latencies, changes};
}
"""


def measure_slider_latency(
    page: Page, *, figure_class: str, slider_class: str, moves: int = 25
) -> list[float]:
    """Time keyboard slider steps until the figure's line redraws.

    Focuses the slider handle, then alternately dispatches ``ArrowRight`` and
    ``ArrowLeft`` keydown events; each move is timed in the page from the
    dispatch to the first change of the ``d`` attribute of the figure's first
    ``svg g.curve path.line`` (kernel round trip plus redraw), followed by a
    150 ms settle pause that is not timed.

    Parameters
    ----------
    page : playwright.sync_api.Page
        Page showing the executed notebook.
    figure_class : str
        CSS class of the bqplot figure (``fig.add_class``).
    slider_class : str
        CSS class of the ipywidgets slider (``widget.add_class``).
    moves : int, optional
        Number of key presses, at least 1.

    Returns
    -------
    list of float
        Latency of each move in milliseconds, in order.

    Raises
    ------
    LabHarnessError
        If ``moves`` < 1, the elements are missing or a move does not
        change the line within 10 s.
    """
    from playwright.sync_api import Error as PlaywrightError

    if moves < 1:
        raise LabHarnessError(f"moves={moves!r}; expected an integer >= 1")
    try:
        result = page.evaluate(
            _LATENCY_JS,
            {
                "figureClass": figure_class,
                "sliderClass": slider_class,
                "moves": moves,
                "timeoutMs": 10_000,
                "settleMs": 150,
            },
        )
    except PlaywrightError as exc:  # a rejected promise in the page
        raise LabHarnessError(
            f"latency measurement on figure {figure_class!r} / slider {slider_class!r} "
            f"failed: {exc}"
        ) from exc
    latencies = [float(x) for x in result["latencies"]]
    extra = [c for c in result["changes"] if c != 1]
    if extra:
        warnings.warn(
            f"{len(extra)} of {moves} moves changed `d` more than once "
            f"(counts {result['changes']!r}); latency is to the first change",
            stacklevel=2,
        )
    if not all(math.isfinite(x) and x >= 0 for x in latencies):
        raise LabHarnessError(f"latencies {latencies!r}; expected finite values >= 0 ms")
    return latencies


def screenshot(page: Page, path: Path, *, selector: str | None = None) -> Path:
    """Save a PNG of the page or of one element.

    Parameters
    ----------
    page : playwright.sync_api.Page
        Page to capture.
    path : Path
        Output PNG file; parent directories are created.
    selector : str, optional
        CSS selector of the element to capture (scrolled into view first);
        the whole viewport when omitted.

    Returns
    -------
    Path
        ``path``.
    """
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    if selector is None:
        page.screenshot(path=str(path))
    else:
        element = page.locator(selector).first
        element.scroll_into_view_if_needed()
        element.screenshot(path=str(path))
    return path


# --------------------------------------------------------------------------- probe notebook

_PROBE_SETUP = f'''\
import numpy as np
import bqplot as bq
import ipywidgets as widgets

# Probe: magnitude of a first-order RC low-pass, |H| = 1/sqrt(1 + (f/f_c)^2).
f_hz = np.logspace(1, 6, 200)


def gain_db(fc_hz):
    """Gain in dB at f_hz for corner frequency fc_hz (Hz)."""
    return -10.0 * np.log10(1.0 + (f_hz / fc_hz) ** 2)


x_scale = bq.LogScale()
y_scale = bq.LinearScale(min=-60.0, max=5.0)
line = bq.Lines(x=f_hz, y=gain_db(1e3), scales={{"x": x_scale, "y": y_scale}})
fig = bq.Figure(
    marks=[line],
    axes=[
        bq.Axis(
            scale=x_scale, label="f (Hz)", tick_format="~s",
            tick_values=np.logspace(1, 6, 6),
        ),
        bq.Axis(scale=y_scale, orientation="vertical", label="gain (dB)"),
    ],
    title="latency probe",
    animation_duration=0,
    layout=widgets.Layout(width="700px", height="420px"),
)
fig.add_class("{PROBE_FIGURE_CLASS}")
slider = widgets.FloatLogSlider(
    value=1e3, base=10, min=1, max=6, step=0.05,
    description="f_c (Hz)", continuous_update=True, readout_format=".4g",
)
slider.add_class("{PROBE_SLIDER_CLASS}")


def on_fc(change):
    line.y = gain_db(change["new"])


slider.observe(on_fc, names="value")
'''

_PROBE_SHOW = "widgets.VBox([slider, fig])\n"


def write_probe_notebook(directory: Path, name: str = "probe.ipynb") -> Path:
    """Write the latency probe notebook (one log-x line, one log slider).

    The figure has CSS class :data:`PROBE_FIGURE_CLASS`; the
    ``FloatLogSlider`` (corner frequency in Hz, 0.05 decade per key step)
    has :data:`PROBE_SLIDER_CLASS` and its observer recomputes the line's y.

    Parameters
    ----------
    directory : Path
        Existing directory to write into (normally the server root).
    name : str, optional
        File name of the notebook.

    Returns
    -------
    Path
        Path of the written notebook.
    """
    import nbformat

    nb = nbformat.v4.new_notebook()
    nb.metadata["kernelspec"] = {
        "name": "python3",
        "display_name": "Python 3 (ipykernel)",
        "language": "python",
    }
    nb.metadata["language_info"] = {"name": "python"}
    nb.cells = [
        nbformat.v4.new_markdown_cell("# Browser latency probe"),
        nbformat.v4.new_code_cell(_PROBE_SETUP),
        nbformat.v4.new_code_cell(_PROBE_SHOW),
    ]
    path = Path(directory) / name
    nbformat.write(nb, str(path))
    return path
